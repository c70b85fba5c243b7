"""A synthetic results dictionary (2 samples × 2 cuts × 5 statistics) and footprint files.

Everything is invented for the tests: a fictional patch of sky, made-up densities and
clustering shapes; statistics compared with :func:`conecheck.compare.compare_statistic` on
noisy synthetic measurements (see compare_helpers).
"""

from __future__ import annotations

from pathlib import Path

import healpy as hp
import numpy as np
from compare_helpers import correlated_cov
from scipy import stats

from conecheck.compare import VerdictRules, compare_statistic, rollup_verdicts
from conecheck.stats.base import Measurement

NSIDE = 32
K_BOX, K_CONE, N_CONES = 30, 25, 6


def write_footprint(run_dir: Path, k: int = 12) -> tuple[str, str, float]:
    """An invented footprint (an RA/Dec patch with a hole) and k region stripes."""
    npix = hp.nside2npix(NSIDE)
    ra, dec = hp.pix2ang(NSIDE, np.arange(npix), lonlat=True)
    inside = (((ra > 150) & (ra < 230) & (dec > -5) & (dec < 35))
              & ~((ra - 190) ** 2 + (dec - 15) ** 2 < 36))
    mask = np.where(inside, 0.9, 0.0)
    mask[inside & (dec > 25)] = 0.6
    hp.write_map(str(run_dir / "mask.fits"), mask, overwrite=True, dtype=np.float64)
    region = np.full(npix, -1, dtype=np.int64)
    order = np.argsort(ra[inside] + 1e-3 * dec[inside])
    lab = np.empty(order.size, dtype=np.int64)
    lab[order] = np.arange(order.size) * k // order.size
    region[inside] = lab
    np.savez(run_dir / "regions.npz", region_map=hp.reorder(region, r2n=True), nest=True)
    area = float(mask.sum() * hp.nside2pixarea(NSIDE, degrees=True))
    return "mask.fits", "regions.npz", area


def _measure(name, bins, mean, cov, k, rng, label, vlabel, edges=None) -> Measurement:
    x = mean + rng.normal(size=(k, mean.size)) @ np.linalg.cholesky(k * cov).T
    value = x.mean(axis=0)
    return Measurement(name=name, bins=bins, value=value, delete_one=(x.sum(0) - x) / (k - 1),
                       bin_edges=edges, bin_label=label, value_label=vlabel)


def _stat_shapes() -> dict[str, tuple]:
    rp = np.geomspace(0.2, 25.0, 9)
    n_counts = np.arange(0, 14, dtype=float)
    radii = np.linspace(2.0, 14.0, 7)
    return {
        "number_density": (np.array([0.0]), np.array([3.1e-4]), "", "n [(h/Mpc)³]"),
        "wp": (rp, 180.0 * rp ** -0.85, "r_p [Mpc/h]", "w_p(r_p) [Mpc/h]"),
        "cic": (n_counts, stats.nbinom.pmf(n_counts, 3, 0.45) + 1e-4,
                "N (weighted neighbour count)", "P(N)"),
        "vpf": (radii, np.exp(-0.0009 * 4.19 * radii ** 3), "R [Mpc/h]", "P_0(R)"),
        "annuli": (n_counts, stats.poisson.pmf(n_counts, 4.0) + 1e-4,
                   "N (weighted neighbour count)", "P(N)"),
    }


def make_results(run_dir: Path, seed: int = 3, config_lines: int = 12) -> dict:
    """A complete results dictionary with footprint files written into ``run_dir``."""
    rng = np.random.default_rng(seed)
    mask_path, regions_path, area = write_footprint(run_dir)
    rules = VerdictRules()
    shapes = _stat_shapes()
    samples = {}
    plant = {("bright", "z0.10-0.20", "wp"): 0.25, ("faint", "z0.05-0.12", "vpf"): 0.04}
    for sname, cutdefs in (("bright", (("z0.10-0.20", 0.10, 0.20, True),
                                       ("z0.12-0.20", 0.12, 0.20, False))),
                           ("faint", (("z0.05-0.12", 0.05, 0.12, True),
                                      ("z0.05-0.10", 0.05, 0.10, False)))):
        cuts = {}
        for cname, zmin, zmax, primary in cutdefs:
            statistics = {}
            for stat, (bins, mean, label, vlabel) in shapes.items():
                cov = correlated_cov(0.04 * mean + 1e-6, 0.5)
                box = _measure(stat, bins, mean, cov, K_BOX, rng, label, vlabel)
                shift = plant.get((sname, cname, stat), 0.0) * mean
                cones = [_measure(stat, bins, mean + shift, cov, K_CONE, rng, label, vlabel)
                         for _ in range(N_CONES)]
                statistics[stat] = compare_statistic(
                    box, cones, rules, where=f"{sname}/{cname}/{stat}").to_dict()
            edges = np.linspace(zmin, zmax, 11)
            expected = 2000 * np.diff(edges ** 3) / np.diff(edges ** 3).mean() / 10
            cuts[cname] = {"z_min": zmin, "z_max": zmax, "primary": primary,
                           "nz": {"edges": edges.tolist(),
                                  "cones": rng.poisson(expected, (N_CONES, 10)).tolist(),
                                  "expected": expected.tolist(),
                                  # two snapshots handing over mid-cut
                                  "snapshot_z_edges": [0.5 * (zmin + zmax)]},
                           "statistics": statistics}
        samples[sname] = {
            "mag_max": 17.7, "volume_limit_zmax": 0.2 if sname == "bright" else None,
            "fibres": {"collided_fraction": rng.uniform(0.05, 0.07, N_CONES).tolist(),
                       "recovered_fraction": rng.uniform(0.02, 0.03, N_CONES).tolist(),
                       "correction": "nearest-neighbour redshift",
                       "uncorrected_effect": {"wp": {"max_abs_z": 2.4, "chi2": 12.0,
                                                     "dof": 9, "verdict": "fail"}},
                       "budget": {"n_tiles": 212, "tile_source": "regular", "radius_deg": 1.2,
                                  "fibres_per_tile": 400, "n_passes": 1,
                                  "lost_fraction": rng.uniform(0.0, 0.02, N_CONES).tolist(),
                                  "off_tiles": [0] * N_CONES,
                                  "load_lower_edges": [0.0, 0.5, 0.75, 1.0, 1.25, 1.5, 2.0, 3.0],
                                  "load_count": [900, 400, 200, 90, 40, 10, 0, 0],
                                  "load_lost": [0, 0, 0, 6, 9, 4, 0, 0]}},
            "luminosity": {"physical_fluxes": True, "cut": "primary",
                           "membership_changed_fraction":
                               rng.uniform(0.04, 0.07, N_CONES).tolist(),
                           "count_change_fraction": rng.normal(0.01, 0.01, N_CONES).tolist(),
                           "z_edges": np.linspace(0.02, 0.2, 6).tolist(),
                           "rms_mag": [0.12, 0.07, 0.05, None, 0.03],
                           "n_in_bin": [300, 800, 1500, 0, 2600]},
            "cuts": cuts}
    config = "\n".join(["[survey]", 'name = "Kestrel Deep Field (invented)"',
                        "area_deg2 = 2400.0"]
                       + [f"option_{i} = {i * 0.5}  # comment for line {i}"
                          for i in range(config_lines)])
    results = {
        "conecheck_version": "0.1.0", "config_hash": "9f2c4e7a1b3d5f60", "overall": "pass",
        "samples": samples,
        "targets": {"box_per_deg2": [3.2, 4.1, 3.6], "lf_per_deg2": 8.9, "box_fraction": 0.42,
                    "collided_fraction_cones": 0.024, "collided_fraction_full_estimate": 0.057},
        "provenance": {"config_text": config, "config_path": "kestrel.toml",
                       "input_files": {"/data/kestrel/box_z0.15.fits": "ab" * 32},
                       "versions": {"numpy": np.__version__, "healpy": hp.__version__},
                       "seeds": {"cones": 11, "box": 7}, "date": "2030-04-01T12:00:00",
                       "n_cones": N_CONES, "replicas_per_cone": [8] * N_CONES,
                       "cones_independent": False,
                       "independence_note": "All cones are cut from one box and share its "
                                            "large-scale structure.",
                       "timings": {"box": 12.5, "cones": 340.0, "compare": 0.4},
                       "box": {"source": "synthetic", "box_size": 1000.0}},
        "footprint": {"mask_path": mask_path, "regions_path": regions_path,
                      "area_deg2": area, "n_regions": 12, "nside": NSIDE},
        "verdict_rules": rules.to_dict(),
    }
    rollup_verdicts(results)
    return results
