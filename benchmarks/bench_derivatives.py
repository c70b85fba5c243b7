"""Benchmark of the HOD derivatives: their scatter over seeds and the cost of one step.

Run:  python benchmarks/bench_derivatives.py [--seeds 16] [--no-timing]

Two measurements, each against a reference computed side by side in the same process:

* **Precision.** For every sample of the quick demo (its halos fixed) and every occupation
  parameter, the central differences of every statistic are computed with ``--seeds``
  different run seeds, once with the ± boxes drawn per galaxy (:class:`~conecheck.box.
  populate.KeyedDraws`, what the run does) and once drawn from one generator in order
  (``numpy.random.Generator``, what the run did before: the two boxes then share their
  centrals only). Printed: the standard deviation over seeds of the keyed derivatives over
  that of the stream ones, median and range over the statistic's bins. With n seeds the
  ratio of two standard deviations of equal truth falls within the F(n − 1, n − 1) band
  printed beside it 95 % of the time.
* **Time of one step.** On the standard workload of bench_run.py (a 10⁶-galaxy box), the ±
  boxes of three parameters of each sample measured together (:func:`conecheck.run.tasks.
  measure_box_pair`, the run's way) against each measured on its own
  (:func:`conecheck.run.tasks.measure_box_sample`), best of two, with the results checked
  equal.
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import stats

from conecheck.box import populate
from conecheck.box.populate import KeyedDraws
from conecheck.box.sensitivity import (
    DEFAULT_STEPS,
    OCCUPATION_PARAMETERS,
    sample_threshold,
    step_values,
    varied_model,
)
from conecheck.config import config_from_dict
from conecheck.demo import demo_dict
from conecheck.run.cache import content_digest
from conecheck.run.inputs import load_box_and_halos
from conecheck.run.specs import box_spec
from conecheck.run.tasks import measure_box_pair, measure_box_sample
from conecheck.streams import seeded_rng, stream_key

MEASURE = ["number_density", "wp", "cic", "vpf"]


def _derivative(spec, halos, hod, threshold, name, draws_of):
    """Central difference of every statistic in ``name``; draws_of() gives a fresh source."""
    lo, hi = step_values(hod, threshold, name, DEFAULT_STEPS[name])
    values = []
    for v in (lo, hi):
        box = populate(halos, varied_model(hod, threshold, name, v), draws_of(), spec.model())
        box.matter = halos.matter
        out = measure_box_sample(spec, box, np.ones(len(box), bool), jackknife=False)
        values.append({s: np.asarray(m.value, dtype=np.float64) for s, m in out.items()})
    return {s: (values[1][s] - values[0][s]) / (hi - lo) for s in values[0]}


def precision(n_seeds: int, work: Path) -> None:
    d = demo_dict(True)
    d["statistics"]["measure"] = MEASURE
    cfg = config_from_dict(d, "bench_derivatives", work)
    box, halos, hod = load_box_and_halos(cfg)
    lo95, hi95 = (np.sqrt(stats.f.ppf(q, n_seeds - 1, n_seeds - 1)) for q in (0.025, 0.975))
    print(f"precision: sd(keyed)/sd(stream) over {n_seeds} seeds; equal truth gives "
          f"{lo95:.2f}-{hi95:.2f} at 95 %")
    for sample in cfg.samples:
        base = box_spec(cfg, sample, content_digest(box))
        threshold = sample_threshold(hod, sample.mag_max)
        print(f"sample {sample.name} (halos {len(halos)})")
        for name in OCCUPATION_PARAMETERS:
            runs: dict[str, list] = {"stream": [], "keyed": []}
            for seed in range(n_seeds):
                spec = dataclasses.replace(base, seed=1000 + seed)
                runs["stream"].append(_derivative(
                    spec, halos, hod, threshold, name,
                    lambda s=spec, n=sample.name: seeded_rng(s.seed, "hod-derivative", n)))
                runs["keyed"].append(_derivative(
                    spec, halos, hod, threshold, name,
                    lambda s=spec, n=sample.name: KeyedDraws(
                        stream_key(s.seed, "hod-derivative", n))))
            for stat in MEASURE:
                sd = {k: np.array([r[stat] for r in v]).std(axis=0, ddof=1)
                      for k, v in runs.items()}
                ok = sd["stream"] > 0
                ratio = sd["keyed"][ok] / sd["stream"][ok]
                print(f"  {name:11s} {stat:15s} median {np.median(ratio):.2f}  "
                      f"range {ratio.min():.2f}-{ratio.max():.2f}  ({ok.sum()} bins)")


def timing(work: Path) -> None:
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    import bench_run  # the standard workload's configuration

    cfg = bench_run.make_config(bench_run.workload(False), work)
    box, halos, hod = load_box_and_halos(cfg)
    print("time of one step (standard workload), best of 2: together / each alone")
    for sample in cfg.samples:
        spec = box_spec(cfg, sample, content_digest(box))
        threshold = sample_threshold(hod, sample.mag_max)
        for name in ("log_mmin", "log_m1", "alpha"):
            lo, hi = step_values(hod, threshold, name, DEFAULT_STEPS[name])
            draws = KeyedDraws(stream_key(cfg.seed, "hod-derivative", sample.name))
            boxes = [populate(halos, varied_model(hod, threshold, name, v), draws,
                              spec.model()) for v in (lo, hi)]
            best = {"together": np.inf, "alone": np.inf}
            for _ in range(2):
                t0 = time.perf_counter()
                together = measure_box_pair(spec, *boxes)
                t1 = time.perf_counter()
                alone = [measure_box_sample(spec, b, np.ones(len(b), bool), jackknife=False)
                         for b in boxes]
                t2 = time.perf_counter()
                best = {"together": min(best["together"], t1 - t0),
                        "alone": min(best["alone"], t2 - t1)}
            same = all(np.array_equal(t[s].value, a[s].value)
                       for t, a in zip(together, alone, strict=True) for s in a)
            print(f"  {sample.name:9s} {name:9s} galaxies {len(boxes[0])}/{len(boxes[1])}  "
                  f"together {best['together']:.2f} s  alone {best['alone']:.2f} s  "
                  f"ratio {best['together'] / best['alone']:.2f}  identical {same}")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=16)
    ap.add_argument("--no-timing", action="store_true")
    ap.add_argument("--work", default=None, help="directory for the configurations' files")
    args = ap.parse_args()
    if args.seeds < 3:
        ap.error("--seeds: at least 3")
    work = Path(args.work or tempfile.mkdtemp(prefix="bench_derivatives_"))
    precision(args.seeds, work)
    if not args.no_timing:
        timing(work)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
