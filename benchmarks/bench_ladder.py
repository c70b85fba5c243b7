"""What an effect ladder costs, as ratios to a single validation run of the same workload.

    python benchmarks/bench_ladder.py [--quick] [--skip-separate]

Workload: the demo scenario at its --quick scale (invented Kestrel survey, synthetic box,
two samples, ladder on the primary cuts). Every run starts from an empty task cache after a
warm-up run (numba compilation), so the ratios compare computation, not caching.

Reported (ratios only, wall-clock):
* ladder run / single run, for the default six-rung ladder (early rungs on an equal-area
  cap of the footprint), for the same ladder with full-sky early rungs (``sky =
  "full_sky"``), for a ladder without the footprint step (every rung on the survey
  footprint) and for one with the footprint step first;
* the separate runs a user would otherwise make, one per rung, / single run;
* each rung's cone stage / the single run's cone stage (full-sky rungs hold 1/f_sky times
  more galaxies and randoms than survey-footprint or cap rungs);
* the footprint's sky fraction f_sky, which sets the cost of the full-sky rungs.
"""

from __future__ import annotations

import argparse
import dataclasses
import logging
import sys
import tempfile
import time
from pathlib import Path

from conecheck.attribution.ladder import plan_ladder
from conecheck.attribution.stages import extensions
from conecheck.cone.settings import CorrectionSettings
from conecheck.config import config_from_dict
from conecheck.demo import demo_dict
from conecheck.run.validate import validate


def _config(quick: bool, **sections):
    d = demo_dict(quick=True)
    if quick:
        d["samples"] = d["samples"][:1]
    d.update(sections)
    return config_from_dict(d, "bench")


def _timed(cfg, workdir: Path, name: str, with_extensions: bool = True):
    t0 = time.perf_counter()
    results, _ = validate(cfg, workdir / name, fresh=True, progress=False,
                          extensions=extensions(cfg) if with_extensions else ())
    return time.perf_counter() - t0, results


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="one sample only")
    ap.add_argument("--skip-separate", action="store_true",
                    help="do not time the separate one-run-per-rung alternative")
    args = ap.parse_args(argv)
    logging.getLogger("conecheck").setLevel(logging.WARNING)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        single_cfg = _config(args.quick)
        _timed(single_cfg, work, "warm-up", False)
        t_single, single = _timed(single_cfg, work, "single", False)
        cones_single = single["provenance"]["timings"]["cones"]
        t_ladder, ladder = _timed(_config(args.quick, ladder={}), work, "ladder")
        t_full, full = _timed(_config(args.quick, ladder={"sky": "full_sky"}), work,
                              "ladder-full")
        order = [s for s in ladder["ladder"]["order"] if s != "footprint"]
        t_fp, fp = _timed(_config(args.quick, ladder={"order": order}), work, "ladder-fp")
        f_sky = single["footprint"]["area_deg2"] / 41252.96
        print(f"workload: demo scenario at --quick scale, {len(single_cfg.samples)} "
              f"sample(s), {single_cfg.cones.n_cones} cones, statistics "
              f"{', '.join(single_cfg.statistics.measure)}; footprint f_sky = {f_sky:.3f}")
        print("\n| run | rungs | time / single run |\n|---|---|---|")
        print("| single run | 1 | 1.00 |")
        print(f"| ladder, default order | {len(ladder['ladder']['rungs'])} | "
              f"{t_ladder / t_single:.2f} |")
        print(f"| ladder, default order, full-sky early rungs | "
              f"{len(full['ladder']['rungs'])} | {t_full / t_single:.2f} |")
        print(f"| ladder without the footprint step | {len(fp['ladder']['rungs'])} | "
              f"{t_fp / t_single:.2f} |")
        first = ["footprint"] + order
        t_first, ff = _timed(_config(args.quick, ladder={"order": first}), work, "ladder-ff")
        print(f"| ladder with the footprint step first | {len(ff['ladder']['rungs'])} | "
              f"{t_first / t_single:.2f} |")
        if not args.skip_separate:
            cfg = _config(args.quick, ladder={})
            t_sep = 0.0
            for rung in plan_ladder(cfg)[0]:
                v = rung.variant
                one = dataclasses.replace(
                    single_cfg, effects=v.effects,
                    correction=CorrectionSettings(v.correction_applied))
                t_sep += _timed(one, work, f"separate-{rung.name}", False)[0]
            print(f"| one separate run per rung (default order) | "
                  f"{len(ladder['ladder']['rungs'])} | {t_sep / t_single:.2f} |")
        print("\n| rung | sky | cone stage / single run's cone stage |\n|---|---|---|")
        for r in ladder["ladder"]["rungs"]:
            print(f"| {r['label']} | {r['sky']} | {r['seconds'] / cones_single:.2f} |")
        print(f"\nsingle run: cone stage = {cones_single / t_single:.2f} of its time")
    return 0


if __name__ == "__main__":
    sys.exit(main())
