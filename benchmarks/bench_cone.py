"""Benchmark: one light cone of ~10^5 galaxies from a clustered box of ~10^6 galaxies.

Run with ``python benchmarks/bench_cone.py``.  Reports wall time of the cone build
(fibre emulation and correction included) as a ratio to a floor measured in the same
script — one vectorised pass computing χ and RA/Dec for every box galaxy from one
observer — and the peak memory of the build (tracemalloc) as a multiple of the box
catalogue's size.  No absolute time is asserted anywhere.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import healpy as hp
import numpy as np

from conecheck.catalog import GalaxyBox
from conecheck.cone import SurveyShell
from conecheck.cone.build import SurveyModel, build_cone, cone_rngs, prepare_box
from conecheck.cone.geometry import sky_coordinates
from conecheck.cone.settings import CorrectionSettings, FibreSettings, ObserverSettings
from conecheck.cosmology import Cosmology
from conecheck.footprint.maps import Footprint


def clustered_box(n_parents: int, children: float, box_size: float, seed: int) -> GalaxyBox:
    """Thomas process (Gaussian clusters of σ = 0.5 Mpc/h) with velocities and magnitudes."""
    rng = np.random.default_rng(seed)
    parents = rng.uniform(0.0, box_size, (n_parents, 3))
    n_child = rng.poisson(children, n_parents)
    pos = np.repeat(parents, n_child, axis=0)
    pos += rng.normal(0.0, 0.5, pos.shape)
    np.mod(pos, box_size, out=pos)
    vel = rng.normal(0.0, 300.0, pos.shape)
    mag = -18.0 - rng.exponential(1.2, len(pos))
    return GalaxyBox(pos, vel, box_size, 0.1, abs_mag=mag)


def cap(nside: int, ra0: float, dec0: float, radius_deg: float) -> Footprint:
    """A circular footprint of completeness 0.95."""
    vals = np.zeros(hp.nside2npix(nside))
    vals[hp.query_disc(nside, hp.ang2vec(ra0, dec0, lonlat=True), np.radians(radius_deg))] = 0.95
    return Footprint.from_map(vals)


def floor_pass(box: GalaxyBox, observer: np.ndarray, cosmo: Cosmology) -> float:
    """Reference: χ, RA/Dec and z(χ) of every box galaxy from one observer, vectorised."""
    t0 = time.perf_counter()
    ra, dec, chi = sky_coordinates(box.position - observer)
    cosmo.redshift_at(chi)
    return time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--parents", type=int, default=100_000)
    parser.add_argument("--children", type=float, default=10.0)
    parser.add_argument("--box", type=float, default=1000.0)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    box = clustered_box(args.parents, args.children, args.box, seed=1)
    box_bytes = box.position.nbytes + box.velocity.nbytes + box.abs_mag.nbytes
    cosmo = Cosmology()
    survey = SurveyModel(cosmology=cosmo, footprint=cap(128, 180.0, 30.0, 40.0),
                         shell=SurveyShell(z_min=0.02, z_max=0.25, m_lim=21.0),
                         fibres=FibreSettings(), correction=CorrectionSettings("nearest_redshift"),
                         observers=ObserverSettings())
    rng = np.random.default_rng(2)
    observer = rng.uniform(0, args.box, 3)

    t0 = time.perf_counter()
    cells = prepare_box(box)
    t_cells = time.perf_counter() - t0
    survey.coverage()  # once per survey, shared by every cone

    floor = min(floor_pass(box, observer, cosmo) for _ in range(args.repeat))
    runs = []
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        _, info = build_cone(box, survey, observer, None, cone_rngs(5, 0), cells=cells)
        runs.append((time.perf_counter() - t0, info))
    t_cone, info = min(runs, key=lambda r: r[0])

    tracemalloc.start()
    tracemalloc.reset_peak()
    build_cone(box, survey, observer, None, cone_rngs(5, 0), cells=cells)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()

    f = info["fibres"]
    print(f"box: {len(box):,} galaxies, L = {args.box:g} Mpc/h, catalogue "
          f"{box_bytes / 2**20:.1f} MiB")
    print(f"cone: {info['n_galaxies']:,} galaxies ({info['n_targets']:,} targets), "
          f"{info['n_replicas']} replicas ({info['n_replicas_used']} used), "
          f"footprint {survey.footprint.area_deg2:.0f} deg2")
    print(f"fibres: collided {f['collided_fraction']:.4f}, recovered {f['recovered_fraction']:.3f}"
          f", missed {f['missed_fraction']:.4f}, largest group {f['largest_group']}")
    print(f"cell sort (once per box): {t_cells:.3f} s")
    print(f"floor (chi, RA/Dec, z of the whole box once): {floor:.3f} s")
    print(f"cone build (best of {args.repeat}): {t_cone:.3f} s  -> ratio to floor "
          f"{t_cone / floor:.2f}")
    print("stage times [s]: " + ", ".join(f"{k} {v:.3f}" for k, v in info["timing_s"].items()))
    print(f"peak traced memory of the build: {peak / 2**20:.1f} MiB = "
          f"{peak / box_bytes:.2f} x box catalogue")


if __name__ == "__main__":
    main()
