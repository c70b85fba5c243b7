"""Small inputs shared by the statistics tests: point sets, footprints, cones, randoms."""

from __future__ import annotations

import healpy as hp
import numpy as np

from conecheck.footprint.jackknife import jackknife_regions
from conecheck.footprint.maps import Footprint
from conecheck.stats import ConeGeometry, ConeSample


def poisson(rng: np.random.Generator, density: float, box_size: float) -> np.ndarray:
    """Poisson (unclustered) points [Mpc/h] of mean density [(h/Mpc)³] in a periodic box."""
    return rng.uniform(0.0, box_size, (rng.poisson(density * box_size**3), 3))


def clustered(rng: np.random.Generator, n_parents: int, mean_children: float, sigma: float,
              box_size: float) -> np.ndarray:
    """Neyman–Scott points: Gaussian clumps of rms ``sigma`` [Mpc/h], periodic wrap."""
    parents = rng.uniform(0.0, box_size, (n_parents, 3))
    n = rng.poisson(mean_children, n_parents)
    pos = np.repeat(parents, n, axis=0) + rng.normal(0.0, sigma, (n.sum(), 3))
    return np.mod(pos, box_size)


def full_sky(nside: int = 8) -> Footprint:
    return Footprint.from_map(np.ones(hp.nside2npix(nside)))


def patch(nside: int = 16, ra=(0.0, 90.0), dec=(-30.0, 30.0)) -> Footprint:
    """A RA/Dec rectangle of completeness 1."""
    ra_pix, dec_pix = hp.pix2ang(nside, np.arange(hp.nside2npix(nside)), lonlat=True)
    inside = (ra_pix >= ra[0]) & (ra_pix < ra[1]) & (dec_pix >= dec[0]) & (dec_pix < dec[1])
    return Footprint.from_map(inside.astype(float))


def geometry(fp: Footprint, chi_min: float, chi_max: float, k: int, seed: int = 1
             ) -> ConeGeometry:
    return ConeGeometry(fp, chi_min, chi_max, jackknife_regions(fp, k, seed=seed))


def cone_sample(xyz: np.ndarray, geo: ConeGeometry, weight: np.ndarray | None = None
                ) -> ConeSample:
    """Cone sample of the points inside the footprint and shell, labelled by region."""
    s = ConeSample.from_xyz(xyz)
    reg = np.asarray(geo.regions.region_of(s.ra, s.dec))
    keep = (reg >= 0) & (s.chi >= geo.chi_min) & (s.chi < geo.chi_max)
    w = None if weight is None else np.asarray(weight)[keep]
    return ConeSample(s.ra[keep], s.dec[keep], s.chi[keep], w, reg[keep], geo.regions.k)


def randoms(geo: ConeGeometry, n: int, rng: np.random.Generator) -> ConeSample:
    """Uniform-in-volume randoms inside the footprint and shell."""
    ra, dec = geo.footprint.sample(n, rng)
    chi = np.cbrt(rng.uniform(geo.chi_min**3, geo.chi_max**3, n))
    reg = np.asarray(geo.regions.region_of(ra, dec))
    return ConeSample(ra, dec, chi, None, reg, geo.regions.k)


def shell_from_box(pos: np.ndarray, box_size: float, chi_min: float, chi_max: float,
                   geo: ConeGeometry, weight: np.ndarray | None = None) -> ConeSample:
    """Observer at the box centre; the box points inside the shell become a cone."""
    xyz = pos - 0.5 * box_size
    return cone_sample(xyz, geo, weight)
