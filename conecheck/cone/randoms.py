"""Random catalogues: uniform on the sky inside the footprint, radial by volume or shuffle.

Randoms depend only on the footprint and a cut's radial limits, never on a cone, so
the pipeline builds them once per sample and cut and shares them between cones.

Two samplings (``randoms.sampling``):

* ``pseudo``: independent pseudo-random points (the footprint's own ``sample``);
* ``qmc``: a scrambled Sobol sequence (Owen scrambling, ``scipy.stats.qmc.Sobol``) in
  (cos θ, φ, volume fraction, acceptance): the first two map equal-area onto the sphere
  (restricted to the footprint's band of declination), the third to χ uniform in comoving
  volume, and a point is kept when the fourth lies below the completeness of its pixel
  (acceptance–rejection keeps the low discrepancy of the accepted points). Such randoms fill
  the volume far more evenly than independent points, so the random-pair counts of a
  Landy–Szalay estimate converge almost as 1/N rather than 1/√N (Kerscher 2022, A&A 666,
  A181): fewer randoms give the same precision. ``shuffle`` distances are drawn with the
  third coordinate through the data's empirical quantiles.

QMC's advantage needs many randoms in the smallest cell a statistic resolves around a
galaxy: where that cell holds only a few, the count of QMC points in it varies as a Poisson
count does, and the data–random counts converge as 1/√N again. ``randoms.multiple = "auto"``
(the default) therefore sizes the randoms from the statistics' smallest cell
(:func:`auto_multiple`).
"""

from __future__ import annotations

import logging
from typing import Literal

import healpy as hp
import numpy as np
from astropy.table import Table
from numpy.typing import ArrayLike, NDArray
from scipy.stats import qmc

from ..cosmology import Cosmology
from ..errors import InputError
from ..footprint.protocols import SkyFootprint
from .selection import FullSky
from .settings import RandomSettings

log = logging.getLogger(__name__)


def n_randoms(n_data: float, multiple: float) -> int:
    """Number of randoms for ``n_data`` (weighted) galaxies at ``multiple`` per galaxy."""
    return max(1, int(round(n_data * multiple)))


#: Randoms per galaxy of pseudo-random points with ``multiple = "auto"`` (a common choice for
#: Landy–Szalay estimates, and this project's default before QMC randoms).
PSEUDO_MULTIPLE = 20.0
#: The two multiples ``auto`` chooses between for QMC points: the smaller one where the
#: smallest cell is well filled, the pseudo-random one where it is not.
QMC_MULTIPLE_FILLED = 10.0
QMC_MULTIPLE_SPARSE = PSEUDO_MULTIPLE
#: Expected QMC randoms per galaxy in the smallest cell (at ``QMC_MULTIPLE_FILLED``) from
#: which 10 QMC points per galaxy give the data–random counts no more variance than 20
#: pseudo-random ones. Measured (``python benchmarks/bench_randoms.py --cells``, RESULTS.md,
#: 40 realisations per scheme on bench_run's standard cones): the variance of QMC points
#: relative to as many pseudo-random ones is 0.8-0.9 below 3 randoms per cell, 0.55 at
#: 3-10, 0.33 at 10-30, 0.18 at 30-100 and 0.03 above 300, so 10 QMC points match 20
#: pseudo-random ones (a ratio of 0.5) from about 10 per cell.
QMC_FILLED_CELL_COUNT = 10.0


def auto_multiple(sampling: Literal["pseudo", "qmc"], galaxy_density: float,
                  cell_volume: float | None) -> float:
    """Randoms per galaxy chosen by ``randoms.multiple = "auto"``.

    The aim is the random noise of :data:`PSEUDO_MULTIPLE` pseudo-random points per galaxy
    in every bin at the lowest data–random cost: QMC points reach it with
    :data:`QMC_MULTIPLE_FILLED` per galaxy when the smallest cell is well filled
    (:data:`QMC_FILLED_CELL_COUNT`), and need as many as pseudo-random ones when it is not.

    Parameters
    ----------
    sampling : {"pseudo", "qmc"}
        The randoms' sampling.
    galaxy_density : float
        Mean number density of the sample's galaxies [(h/Mpc)³] (the randoms follow it).
    cell_volume : float or None
        Volume around a galaxy of the smallest bin whose data–random count a statistic uses
        [(Mpc/h)³] (e.g. wp's innermost r_p annulus × 2 π_max); None when no statistic counts
        pairs with randoms.

    Returns
    -------
    float
        Randoms per galaxy.
    """
    if sampling != "qmc":
        return PSEUDO_MULTIPLE
    if cell_volume is None:
        return QMC_MULTIPLE_FILLED
    filled = QMC_MULTIPLE_FILLED * float(galaxy_density) * float(cell_volume)
    return QMC_MULTIPLE_FILLED if filled >= QMC_FILLED_CELL_COUNT else QMC_MULTIPLE_SPARSE


def largest_multiple(settings: RandomSettings) -> float:
    """The most randoms per galaxy ``settings`` can ask for (for estimates made before the
    galaxy densities are known)."""
    if settings.multiple == "auto":
        return max(PSEUDO_MULTIPLE, QMC_MULTIPLE_FILLED, QMC_MULTIPLE_SPARSE)
    return float(settings.multiple)


#: Variance of the data–random count in a cell from QMC randoms relative to as many
#: pseudo-random ones, g, against λ, the expected randoms per galaxy in the cell: the class
#: means measured by ``python benchmarks/bench_randoms.py --cells`` (RESULTS.md, "Randoms:
#: when QMC points help"; 40 realisations on bench_run's standard cones), placed at each
#: class's geometric centre (0.15 for the class 0-0.3, 550 for the open class above 300).
#: Between the points g is interpolated in log λ; beyond the last it is held, not
#: extrapolated. :data:`QMC_FILLED_CELL_COUNT` agrees with it (g(10) ≈ 0.43 ≤ 0.5).
QMC_NOISE_LAMBDA = (0.15, 0.55, 1.7, 5.5, 17.0, 55.0, 170.0, 550.0)
QMC_NOISE_RATIO = (0.92, 0.78, 0.78, 0.55, 0.33, 0.18, 0.08, 0.03)
#: Fractions 1/f of a catalogue :func:`prefix_cells` offers as stand-ins for all of it.
PREFIX_DIVISORS = (2, 4, 8)
#: Smallest stand-in prefix, a margin for the delete-one counts: 5,000 points leave each of
#: 25 jackknife regions about 200, and the cells they serve hold many per galaxy (with up
#: to 20 randoms per galaxy the rule asks g(λ) ≤ 1/2 or less, so λ ≳ 7). A prefix that
#: leaves a region empty is refused where it is used
#: (:func:`conecheck.stats._common.dr_prefix_size`).
MIN_PREFIX = 5_000


def qmc_noise_ratio(lam: ArrayLike) -> NDArray[np.float64]:
    """g(λ): the variance of QMC randoms' counts in a cell holding λ of them per galaxy,
    relative to as many pseudo-random points (:data:`QMC_NOISE_RATIO`)."""
    return np.interp(np.log(np.maximum(np.asarray(lam, dtype=np.float64), 1e-300)),
                     np.log(QMC_NOISE_LAMBDA), QMC_NOISE_RATIO)


def prefix_cells(sampling: Literal["pseudo", "qmc"], n: int, multiple: float,
                 random_density: float) -> tuple[tuple[int, float], ...]:
    """Leading parts of a random catalogue that may stand in for all of it in cross counts.

    A prefix of ``n // f`` points (``f`` in :data:`PREFIX_DIVISORS`) is itself a random
    catalogue of ``multiple / f`` points per galaxy: independent points for ``pseudo``, a
    shorter scrambled Sobol sequence for ``qmc`` (:func:`qmc_points` returns its points in
    sequence order). Its data–random count in a cell holding λ of its points per galaxy has
    g(λ) (:func:`qmc_noise_ratio`; 1 for ``pseudo``) times the variance of as many
    pseudo-random points, so it is at least as precise as :data:`PSEUDO_MULTIPLE`
    pseudo-random points per galaxy — the aim ``multiple = "auto"`` sets for every bin —
    where g(λ) ≤ (multiple / f) / PSEUDO_MULTIPLE. λ grows with the cell's volume, so that
    holds in every cell from some volume on.

    Parameters
    ----------
    sampling : {"pseudo", "qmc"}
        How the catalogue was drawn.
    n : int
        Points in the catalogue, in the order drawn.
    multiple : float
        Its points per galaxy.
    random_density : float
        Its mean number density [(h/Mpc)³].

    Returns
    -------
    tuple of (int, float)
        ``(size, smallest cell volume [(Mpc/h)³])`` of each usable prefix, largest first;
        prefixes below :data:`MIN_PREFIX` points, or that no cell makes precise enough, are
        left out.
    """
    out = []
    # λ from 0.1 to 10⁴ per galaxy in steps of 0.3 %: the smallest λ with g(λ) ≤ the target
    lam = np.geomspace(0.1, 1e4, 4001)
    g = np.ones_like(lam) if sampling == "pseudo" else qmc_noise_ratio(lam)
    for f in PREFIX_DIVISORS:
        size = int(n) // f
        if size < MIN_PREFIX:
            break
        target = multiple / f / PSEUDO_MULTIPLE
        if target >= 1.0:
            out.append((size, 0.0))
            continue
        ok = np.flatnonzero(g <= target)
        if ok.size == 0:
            break
        # λ is the prefix's own points per galaxy in the cell: n/f × density/n per volume
        out.append((size, float(lam[ok[0]] * f / random_density)))
    return tuple(out)


def randoms_multiple(settings: RandomSettings, galaxy_density: float,
                     cell_volume: float | None) -> float:
    """Randoms per galaxy of ``settings``: its number, or :func:`auto_multiple`'s choice.

    ``galaxy_density`` [(h/Mpc)³] and ``cell_volume`` [(Mpc/h)³] as in :func:`auto_multiple`.
    """
    if settings.multiple == "auto":
        return auto_multiple(settings.sampling, galaxy_density, cell_volume)
    return float(settings.multiple)


#: Sobol points drawn per batch of the ``qmc`` sampling (a power of 2 keeps its balance).
QMC_BATCH = 1 << 18


def _dec_band(footprint: SkyFootprint) -> tuple[float, float]:
    """sin(Dec) range [−1, 1] that holds every observed pixel of ``footprint`` (padded by a
    pixel), so QMC points are not wasted on declinations the survey never reaches."""
    occupied = getattr(footprint, "occupied", None)
    nside = int(getattr(footprint, "nside", 0) or 0)
    if occupied is None or nside <= 0 or len(occupied) == 0:
        return -1.0, 1.0
    _, dec = hp.pix2ang(nside, np.asarray(occupied), nest=bool(getattr(footprint, "nest",
                                                                         False)), lonlat=True)
    pad = np.degrees(hp.max_pixrad(nside))
    lo, hi = max(float(dec.min()) - pad, -90.0), min(float(dec.max()) + pad, 90.0)
    return float(np.sin(np.radians(lo))), float(np.sin(np.radians(hi)))


def qmc_points(footprint: SkyFootprint, n: int, rng: np.random.Generator
               ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """``n`` scrambled-Sobol points inside ``footprint``, thinned by completeness.

    Returns RA, Dec [deg] and the volume fraction u in [0, 1) of each (the third Sobol
    coordinate), in sequence order.
    """
    sampler = qmc.Sobol(d=4, scramble=True, seed=int(rng.integers(0, 2**63 - 1)))
    s_lo, s_hi = _dec_band(footprint)
    ra, dec, u = [], [], []
    got = 0
    while got < n:
        x = sampler.random(QMC_BATCH)
        sin_dec = s_lo + (s_hi - s_lo) * x[:, 0]
        d = np.degrees(np.arcsin(np.clip(sin_dec, -1.0, 1.0)))
        a = 360.0 * x[:, 1]
        keep = x[:, 3] < np.asarray(footprint.completeness(a, d), dtype=np.float64)
        ra.append(a[keep])
        dec.append(d[keep])
        u.append(x[keep, 2])
        got += int(keep.sum())
        if got == 0 and sampler.num_generated >= 64 * QMC_BATCH:
            raise InputError("randoms: the footprint accepts no QMC point (completeness 0 "
                             "everywhere?)")
    return (np.concatenate(ra)[:n], np.concatenate(dec)[:n], np.concatenate(u)[:n])


def make_randoms(footprint: SkyFootprint | None, chi_min: float, chi_max: float, n: int,
                 rng: np.random.Generator, radial: Literal["volume", "shuffle"] = "volume",
                 data_chi: ArrayLike | None = None,
                 cosmology: Cosmology | None = None,
                 sampling: Literal["pseudo", "qmc"] = "pseudo") -> Table:
    """Random points inside ``footprint`` between comoving distances χ_min and χ_max.

    Parameters
    ----------
    footprint : Footprint or None
        Provides ``sample(n, rng) -> (ra_deg, dec_deg)`` uniform on the sphere thinned by
        completeness; None means the full sky.
    chi_min, chi_max : float
        Radial limits [Mpc/h].
    n : int
        Number of randoms.
    rng : numpy Generator
        Seeded source of every draw.
    radial : {"volume", "shuffle"}
        ``volume``: χ = (χ_min³ + u (χ_max³ − χ_min³))^(1/3), uniform in comoving volume
        (curvature included); ``shuffle``: χ drawn with replacement from ``data_chi``.
    data_chi : array_like or None
        The data's observed distances [Mpc/h] (``shuffle`` only).
    cosmology : Cosmology or None
        When given, a ``z_obs`` column is added (z at χ).
    sampling : {"pseudo", "qmc"}
        Independent points, or a scrambled Sobol sequence (module notes).

    Returns
    -------
    astropy Table
        Columns ra, dec [deg], chi_obs [Mpc/h], weight (1), and z_obs when possible.
    """
    if not (0.0 <= chi_min < chi_max):
        raise InputError(f"randoms: radial limits chi_min = {chi_min}, chi_max = {chi_max} "
                         "Mpc/h; expected 0 <= chi_min < chi_max")
    if n < 1:
        raise InputError(f"randoms: n = {n}; expected at least one random")
    fp = FullSky() if footprint is None else footprint
    if radial not in ("volume", "shuffle"):
        raise InputError(f"randoms.radial = {radial!r}: expected 'volume' or 'shuffle'")
    if radial == "shuffle" and (data_chi is None or len(np.atleast_1d(data_chi)) == 0):
        raise InputError("randoms.radial = 'shuffle' needs the data's observed distances "
                         "(data_chi); none were given")
    if sampling == "qmc":
        ra, dec, u = qmc_points(fp, int(n), rng)
    elif sampling == "pseudo":
        ra, dec = fp.sample(int(n), rng)
        ra, dec = np.asarray(ra, dtype=np.float64), np.asarray(dec, dtype=np.float64)
        u = None
    else:
        raise InputError(f"randoms.sampling = {sampling!r}: expected 'pseudo' or 'qmc'")
    if radial == "volume":
        # uniform in comoving volume, curvature included (the same law as every volume)
        chi = (cosmology or Cosmology()).distance_at_volume_fraction(
            chi_min, chi_max, rng.random(len(ra)) if u is None else u)
    elif u is None:
        chi = rng.choice(np.asarray(data_chi, dtype=np.float64), size=len(ra), replace=True)
    else:
        # the data's empirical quantile function at the QMC coordinate
        chi = np.quantile(np.asarray(data_chi, dtype=np.float64), u, method="inverted_cdf")
    t = Table()
    t["ra"] = ra
    t["ra"].unit = "deg"
    t["dec"] = dec
    t["dec"].unit = "deg"
    t["chi_obs"] = chi
    t["chi_obs"].unit = "Mpc/h"
    if cosmology is not None:
        t["z_obs"] = cosmology.redshift_at(chi)
    t["weight"] = np.ones(len(ra))
    t.meta["RADIAL"] = radial
    t.meta["SAMPLING"] = sampling
    t.meta["CHIMIN"] = float(chi_min)
    t.meta["CHIMAX"] = float(chi_max)
    return t
