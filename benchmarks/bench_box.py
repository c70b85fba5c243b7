"""Benchmark of the box stage: a synthetic galaxy box at L = 500 Mpc/h.

Run:  python benchmarks/bench_box.py [--box-size 500] [--grid N] [--seed 1]

Reports wall times, peak resident memory and galaxy counts, and ratios against reference
operations timed in the same process, so the numbers travel between machines:

* halo-box construction against one forward + inverse real FFT of the same grid (the
  irreducible cost of any FFT-based field), and
* populate() against the floor of HOD population: one Bernoulli and one Poisson draw over the
  same halos with plain numpy (no magnitudes, profiles or velocities).
"""

from __future__ import annotations

import argparse
import resource
import sys
import time

import numpy as np
import scipy.fft

from conecheck.box import default_hod_model, make_synthetic_halos, populate
from conecheck.box.lognormal import default_grid
from conecheck.cosmology import Cosmology


def _peak_rss_mb() -> float:
    # ru_maxrss is in kB on Linux, bytes on macOS
    scale = 1.0 / 1024 if sys.platform != "darwin" else 1.0 / 1024**2
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * scale


def _best_of(fn, repeat: int) -> float:
    best = np.inf
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def _fft_pair_time(grid: int) -> float:
    noise = np.random.default_rng(0).standard_normal((grid,) * 3, dtype=np.float32)
    return _best_of(lambda: scipy.fft.irfftn(scipy.fft.rfftn(noise, workers=-1),
                                             s=noise.shape, workers=-1), 2)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--box-size", type=float, default=500.0)
    ap.add_argument("--grid", type=int, default=None)
    ap.add_argument("--redshift", type=float, default=0.2)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    grid = args.grid or default_grid(args.box_size)
    cosmo = Cosmology()
    model = default_hod_model()

    # reference 1: one rfftn + irfftn pair on the same grid
    t_fft = _fft_pair_time(grid)

    rng = np.random.default_rng(args.seed)
    t0 = time.perf_counter()
    halos = make_synthetic_halos(args.box_size, args.redshift, cosmo, 0.81, 0.965, 0.049, rng,
                                 grid, model.minimum_mass(1e-3))
    t_halos = time.perf_counter() - t0

    t0 = time.perf_counter()
    box = populate(halos, model, np.random.default_rng(args.seed + 1), cosmo)
    t_pop = time.perf_counter() - t0

    # reference 2: the floor of population -- plain Bernoulli + Poisson draws over the halos
    cen, sat = model.mean_occupations(halos.mass)
    floor_rng = np.random.default_rng(0)
    t_floor = _best_of(lambda: (floor_rng.random(len(halos)) < cen[0],
                                floor_rng.poisson(sat[0])), 3)

    volume = args.box_size**3
    print(f"synthetic box: L = {args.box_size:g} Mpc/h, grid {grid}^3, z = {args.redshift}")
    print(f"  halos          {len(halos):>10d}   in {t_halos:7.2f} s "
          f"= {t_halos / t_fft:6.1f} x one FFT pair ({t_fft:.3f} s)")
    print(f"  galaxies       {len(box):>10d}   in {t_pop:7.2f} s "
          f"= {t_pop / t_floor:6.1f} x plain Bernoulli+Poisson draws ({t_floor:.3f} s)")
    for m in model.mag_limits:
        n = int(np.sum(box.abs_mag < m))
        print(f"    abs_mag < {m:+.1f}: {n:>9d}  n = {n / volume:.3e} (h/Mpc)^3")
    print(f"  total          {t_halos + t_pop:7.2f} s, peak RSS {_peak_rss_mb():.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
