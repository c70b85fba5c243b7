"""Cost of the offset's error budget and of the parameter-shift derivatives (one command).

    python benchmarks/bench_error_budget.py [--quick]

On the demo configuration (the full one unless --quick), side by side in one process:

* the box task as it runs now (every statistic along the configured line of sight with the
  jackknife, plus the two other axes for the line-of-sight spread) against the reference
  work without the spread (the configured axis only);
* the HOD-derivative task of one sample (14 populations and measurements) against that
  box task;
* the comparison of every statistic (σ_Δ, significance, verdict) against the whole run.

Prints the ratios; record them in benchmarks/RESULTS.md with the date, commit and load.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

from conecheck.box.sensitivity import DEFAULT_STEPS
from conecheck.config import config_from_dict
from conecheck.demo import demo_dict
from conecheck.run.cache import content_digest
from conecheck.run.inputs import load_box_and_halos
from conecheck.run.sensitivity import hod_derivatives_task
from conecheck.run.specs import DerivativesSpec, box_spec
from conecheck.run.tasks import box_task, measure_box_sample, sample_mask
from conecheck.run.validate import validate


def best_of(f, n: int = 3) -> float:
    times = []
    for _ in range(n):
        t0 = time.perf_counter()
        f()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true")
    a = ap.parse_args()
    cfg = config_from_dict(demo_dict(quick=a.quick), "bench")
    box, halos, hod = load_box_and_halos(cfg)
    sample = cfg.samples[0]
    keep = sample_mask(box, sample)
    spec = box_spec(cfg, sample, content_digest(box))
    derivatives = DerivativesSpec(spec, content_digest(halos), hod,
                                  tuple(sorted(DEFAULT_STEPS.items())))
    box_task(spec, box)  # compile the kernels before timing
    t_ref = best_of(lambda: measure_box_sample(spec, box, keep, jackknife=True))
    t_box = best_of(lambda: box_task(spec, box))
    # (the halos are the run's, passed in: their loading is not part of this time)
    t_der = best_of(lambda: hod_derivatives_task(derivatives, halos), 1)
    with tempfile.TemporaryDirectory() as tmp:
        results, _ = validate(cfg, Path(tmp) / "run", progress=False)
    timings = results["provenance"]["timings"]
    total = timings["total before the PDF"]
    print(f"demo{' --quick' if a.quick else ''}, sample {sample.name}: {int(keep.sum())} box "
          f"galaxies; load average {os.getloadavg()[0]:.2f}")
    print(f"box task, one axis (reference)      {t_ref:7.2f} s")
    print(f"box task with the line-of-sight spread {t_box:7.2f} s   ratio {t_box / t_ref:.2f}")
    print(f"HOD derivatives, one sample          {t_der:7.2f} s   ratio to the box task "
          f"{t_der / t_box:.2f}")
    print(f"whole run (before the PDF)           {total:7.2f} s; comparison "
          f"{timings['compare']:.2f} s; box stage {timings['box']:.2f} s; HOD derivatives "
          f"{timings.get('HOD derivatives', 0.0):.2f} s")
    extra = (t_box - t_ref) * len(cfg.samples) + timings["compare"]
    print(f"error budget (spread + comparison) relative to the run without it: "
          f"{total / (total - extra):.3f}x")
    print(f"derivatives relative to the run without them: "
          f"{total / (total - timings.get('HOD derivatives', 0.0)):.2f}x")


if __name__ == "__main__":
    main()
