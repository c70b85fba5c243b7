"""Benchmark of the footprint stage (run: python benchmarks/bench_footprint.py).

Times are reported with a reference measured in the same run, so the ratios carry
over between machines:

* ``Footprint.sample`` and ``Footprint.completeness`` for 10^7 points against
  ``healpy.ang2pix`` alone on 10^7 points (the floor of any pixel lookup);
* ``Footprint.disc_fraction`` for 10^5 discs against one ``healpy.query_disc`` per
  disc at the same precision (the naive route);
* ``jackknife_regions`` at N_side 512 against ``scipy.cluster.vq.kmeans2`` (plain,
  unweighted, unbalanced k-means) on the same pixel vectors;
* ``build_mask`` of the demo survey at N_side 512.

Targets: a few seconds per 10^7 points, under a minute for the jackknife regions.
"""

from __future__ import annotations

import argparse
import time

import healpy as hp
import numpy as np
from scipy.cluster.vq import kmeans2

from conecheck.footprint import build_mask, demo_regions_path, jackknife_regions
from conecheck.footprint.discs import _query_level


def timed(fn, *args, **kwargs):
    t0 = time.perf_counter()
    out = fn(*args, **kwargs)
    return time.perf_counter() - t0, out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=float, default=1e7, help="points for sample/lookup")
    parser.add_argument("--discs", type=float, default=1e5, help="discs for disc_fraction")
    parser.add_argument("--k", type=int, default=100, help="jackknife regions")
    parser.add_argument("--nside", type=int, default=512, help="N_side of the large mask")
    args = parser.parse_args()
    n, n_disc = int(args.points), int(args.discs)
    rng = np.random.default_rng(1)
    rows = []

    t_build, fp = timed(build_mask, demo_regions_path(), args.nside)
    fp128 = build_mask(demo_regions_path(), 128)
    rows.append((f"build_mask demo, N_side {args.nside}", t_build, None, None))

    ra = rng.uniform(0, 360, n)
    dec = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
    t_ref, _ = timed(hp.ang2pix, fp128.nside, ra, dec, lonlat=True)
    t_comp, _ = timed(fp128.completeness, ra, dec)
    rows.append((f"completeness, {n:.0e} points", t_comp, t_ref, "healpy.ang2pix"))
    t_samp, _ = timed(fp128.sample, n, rng)
    rows.append((f"sample, {n:.0e} points", t_samp, t_ref, "healpy.ang2pix"))
    del ra, dec

    cra, cdec = fp128.sample(n_disc, rng)
    radius = rng.uniform(0.1, 1.0, n_disc)
    t_disc, _ = timed(fp128.disc_fraction, cra, cdec, radius)
    # Naive route at the same precision: one query_disc per disc at the same sub-pixel
    # N_side, mean completeness of the parents (timed on a subset, scaled).
    m = min(n_disc, 20000)
    vec = hp.ang2vec(cra[:m], cdec[:m], lonlat=True)
    r_rad = np.radians(radius[:m])
    levels = _query_level(fp128.nside, r_rad, 10.0)
    nest_vals = fp128.reordered(True).values
    t0 = time.perf_counter()
    for i in range(m):
        sub = hp.query_disc(fp128.nside << int(levels[i]), vec[i], r_rad[i], nest=True)
        nest_vals[sub >> (2 * int(levels[i]))].mean()
    t_naive = (time.perf_counter() - t0) * n_disc / m
    rows.append((f"disc_fraction, {n_disc:.0e} discs", t_disc, t_naive,
                 "query_disc + mean for every disc"))

    x = fp.occupied_vectors()
    t_km, _ = timed(kmeans2, x, args.k, seed=1, minit="++")
    t_jk, reg = timed(jackknife_regions, fp, args.k, seed=1)
    rows.append((f"jackknife K={args.k}, N_side {args.nside} ({x.shape[0]} px)", t_jk, t_km,
                 "scipy kmeans2 (unbalanced)"))

    print(f"\n{'task':<44}{'time [s]':>10}{'ref [s]':>10}{'ratio':>8}  reference")
    for name, t, ref, ref_name in rows:
        ref_s = f"{ref:10.3f}{t / ref:8.2f}" if ref else f"{'':10}{'':8}"
        print(f"{name:<44}{t:10.3f}{ref_s}  {ref_name or ''}")
    print(f"\njackknife area spread (max/min): {reg.area_spread:.3f}; "
          f"demo area {fp.area_deg2:.1f} deg2 at N_side {fp.nside}")


if __name__ == "__main__":
    main()
