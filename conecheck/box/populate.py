"""Populate a halo catalogue with galaxies from a nested luminosity-threshold HOD.

Occupations and assembly bias are those of :mod:`.hod`.  Magnitudes are assigned so that
*every* threshold sample reproduces its own HOD in expectation:

* Thresholds m_0 > m_1 > … > m_{K−1} (faintest first) have nested mean occupations
  N_0(M) ≥ N_1(M) ≥ … (after decoration, which preserves the order).
* Centrals: one uniform u per halo; a central exists when u < N_cen,0, and it is brighter
  than threshold j exactly when u < N_cen,j.  Hence P(central brighter than m_j) = N_cen,j
  (Bernoulli per threshold) with a single draw.
* Satellites: n ~ Poisson(N_sat,0) per halo; each satellite draws u ~ U(0, 1) and is brighter
  than m_j when u N_sat,0 < N_sat,j.  Binomial thinning of a Poisson count is Poisson, so the
  number brighter than m_j is Poisson(N_sat,j).
* Within a magnitude bin [m_{j+1}, m_j) the magnitude is uniform; in the open brightest bin
  it is m_{K−1} − E with E exponential of scale ``bright_tail_mag`` (a simple stand-in for
  the steep bright end of a luminosity function; selections never resolve the shape inside
  a bin, only which bin).

Selecting ``abs_mag < m_j`` therefore returns exactly the galaxies that passed threshold j.

Satellites follow a truncated NFW profile around the halo centre (see :mod:`.nfw`) and move
with the halo velocity plus an isotropic Gaussian of the halo's virial dispersion; centrals
sit at the halo centre with the halo velocity.  Positions are wrapped into the box.
Everything is vectorised (satellites expanded per halo with ``np.repeat``).

The draws come from one generator in a fixed order (:class:`StreamDraws`, the run's box), or
per galaxy (:class:`KeyedDraws`, the HOD derivatives' boxes): a galaxy is (halo, rank), rank
0 the central and 1, 2, … the satellites, and each of its numbers is a function of the key,
that identity and what is drawn. The satellite count is then the Poisson quantile of the
halo's own uniform and every other draw inverts a uniform, so two models differ only in the
galaxies one occupies and the other does not.
"""

from __future__ import annotations

import logging
from typing import Any

import numba
import numpy as np
from numba import prange
from numpy.typing import NDArray
from scipy import special, stats

from ..catalog import GalaxyBox
from ..cosmology import Cosmology
from ..errors import InputError
from ..periodic import wrap_into_box
from ..streams import keyed_uniforms
from .halos import HaloCatalog
from .hod import HODModel, decorate, split_by_secondary
from .nfw import (
    concentration_power_law,
    directions_from_uniforms,
    nfw_radii,
    virial_dispersion,
    virial_radius,
)

log = logging.getLogger(__name__)


def decorated_occupations(halos: HaloCatalog, model: HODModel, memo: dict | None = None
                          ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Expected (<N_cen>, <N_sat>) per threshold and halo, shape (K, N_halo), with assembly bias
    (``memo``: the undecorated means already computed for these halos, see
    :meth:`~conecheck.box.hod.HODModel.raw_occupations`).

    Raises InputError when assembly bias is switched on but the halos lack the secondary
    column named in the model.
    """
    cen, sat = model.mean_occupations(halos.mass, memo)
    ab = model.assembly_bias
    if ab.active:
        secondary = np.asarray(halos.column(ab.secondary), dtype=float)
        if not np.all(np.isfinite(secondary)):
            raise InputError(f"halo column '{ab.secondary}' (assembly-bias secondary property) "
                             "has NaN/inf values")
        # the split depends on the halos alone, not on the HOD parameters the derivatives
        # vary: sort each catalogue once (a lexsort of every halo, seconds at 10⁶ halos)
        cache = halos.__dict__.setdefault("_secondary_split_cache", {})
        key = (ab.secondary, float(ab.mass_bin_dex))
        if key not in cache:
            cache[key] = split_by_secondary(halos.mass, secondary, ab.mass_bin_dex)
        upper, p_upper = cache[key]
        cen = decorate(cen, upper, p_upper, ab.a_cen, bounded=True)
        sat = decorate(sat, upper, p_upper, ab.a_sat, bounded=False)
    return cen, sat


def density_brighter_than(model: HODModel, threshold_density: NDArray[np.float64],
                          mag_max: float | None) -> float:
    """Expected density of galaxies with abs_mag < ``mag_max`` under the magnitude law above.

    Parameters
    ----------
    model : HODModel
        Its thresholds m_0 > … > m_{K−1} and bright-tail width [mag].
    threshold_density : array (K,)
        Expected density of each threshold sample [(h/Mpc)³], faintest first.
    mag_max : float or None
        Sample threshold, M − 5 log10 h [mag]; None keeps every galaxy.

    Returns
    -------
    float
        Density [(h/Mpc)³]: n_0 fainter than m_0; linear in magnitude between thresholds
        (magnitudes are uniform inside a bin); n_{K−1} exp(−(m_{K−1} − m)/w) brighter than
        the brightest.
    """
    mags = model.mag_limits
    n = np.asarray(threshold_density, dtype=float)
    if mag_max is None or mag_max >= mags[0]:
        return float(n[0])
    if mag_max < mags[-1]:
        return float(n[-1] * np.exp(-(mags[-1] - mag_max) / model.bright_tail_mag))
    return float(np.interp(mag_max, mags[::-1], n[::-1]))


def halo_threshold_densities(halos: HaloCatalog, model: HODModel) -> NDArray[np.float64]:
    """Expected galaxy density of each threshold in ``halos`` [(h/Mpc)³], faintest first.

    Σ over halos of <N_cen> + <N_sat>, over L³; decoration keeps the mean at fixed mass.
    """
    cen, sat = model.mean_occupations(halos.mass)
    return (cen + sat).sum(axis=1) / float(halos.box_size) ** 3


#: What a galaxy draws, one sequence each (:meth:`KeyedDraws.uniform`'s ``field``).
CENTRAL, SATELLITE_COUNT, SATELLITE_LEVEL, MAGNITUDE, BRIGHT_TAIL, RADIUS, POLAR, AZIMUTH, \
    VELOCITY = range(9)

#: Bits of a galaxy's identity that hold its rank in the halo (0 the central, 1, 2, … its
#: satellites); the halo's index fills the bits above.
RANK_BITS = 24


class StreamDraws:
    """Every draw of :func:`populate` from one generator, in a fixed order.

    The numbers a galaxy gets depend on how many were drawn before it, so two models
    populate different galaxies everywhere after the first halo whose occupation differs.
    """

    def __init__(self, rng: np.random.Generator) -> None:
        self.rng = rng

    def uniform(self, field: int, ids: NDArray[np.uint64]) -> NDArray[np.float64]:
        return self.rng.random(len(ids))

    def exponential(self, field: int, ids: NDArray[np.uint64]) -> NDArray[np.float64]:
        return self.rng.standard_exponential(len(ids))

    def normal(self, field: int, ids: NDArray[np.uint64], k: int) -> NDArray[np.float64]:
        return self.rng.standard_normal((len(ids), k))

    def poisson(self, field: int, ids: NDArray[np.uint64],
                mean: NDArray[np.float64]) -> NDArray[np.int64]:
        return self.rng.poisson(mean)


class KeyedDraws:
    """Every draw of :func:`populate` a function of (key, galaxy identity, field) alone
    (:func:`~conecheck.streams.keyed_uniforms`), by inversion of the uniform.

    A galaxy (halo, rank) gets the same numbers whatever else the box holds, and a halo's
    satellite count is the Poisson quantile of one uniform, which never falls when the mean
    rises: two models share every galaxy both occupy, at the same place with the same
    velocity and magnitude draw, and differ only in the halos whose occupation the change
    of the model reaches (the coupling of common random numbers for the HOD derivatives).
    """

    def __init__(self, key: int) -> None:
        self.key = int(key)

    def uniform(self, field: int, ids: NDArray[np.uint64]) -> NDArray[np.float64]:
        return keyed_uniforms(self.key, ids, field)

    def exponential(self, field: int, ids: NDArray[np.uint64]) -> NDArray[np.float64]:
        return -np.log1p(-self.uniform(field, ids))

    def normal(self, field: int, ids: NDArray[np.uint64], k: int) -> NDArray[np.float64]:
        # component j of a galaxy's vector is its own sequence; ndtri of a uniform in
        # [0, 1) is a standard normal (−inf only for u = 0, probability 2⁻⁵³ per draw)
        return np.column_stack([special.ndtri(np.maximum(self.uniform(field * 8 + j, ids),
                                                         2.0**-54)) for j in range(k)])

    def poisson(self, field: int, ids: NDArray[np.uint64],
                mean: NDArray[np.float64]) -> NDArray[np.int64]:
        return poisson_quantile(self.uniform(field, ids), mean)


#: Means up to which :func:`poisson_quantile` sums the probabilities itself.
SUMMED_MEANS = 30.0


@numba.njit(parallel=True, cache=True)
def _summed_poisson_quantile(u: NDArray[np.float64], mean: NDArray[np.float64],
                             out: NDArray[np.int64]) -> int:
    """The quantiles of the means up to :data:`SUMMED_MEANS`; the others (and NaN) are
    marked −1 and counted, for scipy."""
    n_left = 0
    for i in prange(u.size):
        lam = mean[i]
        k = 0
        if not lam <= SUMMED_MEANS:
            out[i] = -1
            n_left += 1
            continue
        if lam <= 0.0:
            out[i] = 0
            continue
        p = np.exp(-lam)
        cdf = p
        # p > 0: rounding can keep the sum just below a u within 10⁻¹⁵ of 1
        while cdf < u[i] and p > 0.0:
            k += 1
            p *= lam / k
            cdf += p
        out[i] = k
    return n_left


def poisson_quantile(u: NDArray[np.float64], mean: NDArray[np.float64]) -> NDArray[np.int64]:
    """Smallest k with P(N ≤ k) ≥ u for N ~ Poisson(mean), elementwise (inverse-CDF
    sampling: uniform ``u`` give Poisson counts, and for a fixed u the count never falls as
    the mean rises). Means up to :data:`SUMMED_MEANS` sum the probabilities term by term
    (numba, in one pass over every mean), larger ones use scipy.stats.poisson.ppf."""
    u = np.ascontiguousarray(u, dtype=np.float64)
    mean = np.ascontiguousarray(mean, dtype=np.float64)
    out = np.empty(u.size, dtype=np.int64)
    if _summed_poisson_quantile(u, mean, out):
        large = out < 0
        out[large] = stats.poisson.ppf(u[large], mean[large]).astype(np.int64)
    return out


Draws = StreamDraws | KeyedDraws


def galaxy_ids(halo: NDArray[np.int64], rank: NDArray[np.int64]) -> NDArray[np.uint64]:
    """Identity of the galaxy of rank ``rank`` (0 the central, 1, … satellites) in halo
    index ``halo``: what :class:`KeyedDraws` draws for."""
    if rank.size and int(rank.max()) >= 1 << RANK_BITS:
        raise InputError(f"a halo holds {int(rank.max())} satellites, more than the "
                         f"{(1 << RANK_BITS) - 1} a galaxy identity can number")
    return (halo.astype(np.uint64) << np.uint64(RANK_BITS)) | rank.astype(np.uint64)


def _magnitudes(level: NDArray[np.int64], mags: NDArray[np.float64], tail: float,
                draws: Draws, ids: NDArray[np.uint64]) -> NDArray[np.float64]:
    """Magnitude for galaxies brighter than ``level`` thresholds (level ≥ 1)."""
    k = len(mags)
    hi = mags[level - 1]                               # the faintest threshold it passes
    lo = np.where(level < k, mags[np.minimum(level, k - 1)], hi)
    u = draws.uniform(MAGNITUDE, ids)
    inside = lo + (hi - lo) * u
    # tail · E is exactly Generator.exponential(tail) for the stream
    tail_draw = hi - tail * draws.exponential(BRIGHT_TAIL, ids)
    out = np.where(level < k, inside, tail_draw)
    # keep abs_mag < m_j strict even when u rounds (hi − lo)·u up to the bin edge
    return np.minimum(out, np.nextafter(hi, -np.inf))


def populate(halos: HaloCatalog, model: HODModel, rng: np.random.Generator | KeyedDraws,
             cosmology: Cosmology | None = None) -> GalaxyBox:
    """Paint galaxies into ``halos`` with the HOD ``model``.

    Parameters
    ----------
    halos : HaloCatalog
        Positions [Mpc/h], velocities [km/s], masses [Msun/h] (Δ = 200m).
    model : HODModel
        Nested luminosity thresholds (+ assembly bias).
    rng : numpy.random.Generator or KeyedDraws
        Source of every random draw: a generator draws in a fixed order
        (:class:`StreamDraws`); :class:`KeyedDraws` give each galaxy its own numbers, so
        that boxes of two models share the galaxies both occupy; such a box carries the
        galaxies' identities as ``draw_key``.
    cosmology : Cosmology, optional
        Only Ω_m is used, for halo radii when the catalogue has no ``rvir``; default
        ``Cosmology()``.

    Returns
    -------
    GalaxyBox
        Centrals first, then satellites; with abs_mag, is_central, halo_id, halo_mass.

    Raises
    ------
    InputError
        When the HOD puts no galaxy in any halo, or assembly bias needs a missing column.
    """
    return populate_models(halos, [model], rng, cosmology)[0]


def populate_models(halos: HaloCatalog, models: list[HODModel],
                    rng: np.random.Generator | KeyedDraws,
                    cosmology: Cosmology | None = None, *,
                    magnitudes: bool = True) -> list[GalaxyBox]:
    """:func:`populate` for several models at once, equal to populating with each in turn.

    With :class:`KeyedDraws` every galaxy's numbers depend on its identity alone, so the
    draws of the halos, the mean occupations the models share and the satellites' positions
    and velocities are computed once, for the union of the models' satellites, and each box
    takes its own; several models need keyed draws. Parameters as in :func:`populate`; one
    box per model, in order. ``magnitudes=False`` (keyed draws only) leaves ``abs_mag``
    None, for boxes whose every galaxy is measured (the one-threshold models of the HOD
    derivatives); the other columns are the same.
    """
    if (len(models) > 1 or not magnitudes) and not isinstance(rng, KeyedDraws):
        raise ValueError("populating several models at once, or without magnitudes, needs "
                         "keyed draws (KeyedDraws)")
    draws = rng if isinstance(rng, KeyedDraws) else StreamDraws(rng)
    n_halo = len(halos)
    halo_index = np.arange(n_halo, dtype=np.int64)
    halo_ids = galaxy_ids(halo_index, np.zeros(n_halo, dtype=np.int64))
    u = draws.uniform(CENTRAL, halo_ids)
    # the satellite counts' uniform, drawn once when it is a function of the halo alone
    u_count = (draws.uniform(SATELLITE_COUNT, halo_ids) if isinstance(draws, KeyedDraws)
               else None)
    occupied = []
    memo: dict = {}   # the models' shared mean occupations, computed once
    for model in models:
        cen_n, sat_n = decorated_occupations(halos, model, memo)
        level_c = np.sum(u[None, :] < cen_n, axis=0)
        n_sat = (draws.poisson(SATELLITE_COUNT, halo_ids, sat_n[0]) if u_count is None
                 else poisson_quantile(u_count, sat_n[0]))
        if not (level_c.any() or n_sat.any()):
            raise InputError(
                f"the HOD puts no galaxy in any of the {n_halo} halos (masses "
                f"{halos.mass.min():.3g} .. {halos.mass.max():.3g} Msun/h; faintest "
                f"threshold log_mmin = {model.thresholds[0].params.log_mmin}): check the "
                "HOD parameters against the halo masses")
        occupied.append((sat_n, level_c, n_sat))

    # every model's satellites: in each halo the ranks 1 … the largest count of any model
    n_union = occupied[0][2] if len(models) == 1 else np.max([o[2] for o in occupied], axis=0)
    host = np.repeat(halo_index, n_union)
    # rank of each satellite in its halo: 1, 2, …
    rank = (np.arange(host.size, dtype=np.int64)
            - np.repeat(np.cumsum(n_union) - n_union, n_union) + 1)
    sat_ids = galaxy_ids(host, rank)
    u_level = draws.uniform(SATELLITE_LEVEL, sat_ids)

    levels = []
    for model, (sat_n, level_c, n_sat) in zip(models, occupied, strict=True):
        keep = (slice(None) if len(models) == 1 else rank <= n_sat[host])
        h = host[keep]
        level_s = np.sum((u_level[keep] * sat_n[0, h])[None, :] < sat_n[:, h], axis=0)
        cen_idx = np.flatnonzero(level_c > 0)
        mag = None
        if magnitudes:
            mag = np.concatenate([
                _magnitudes(level_c[cen_idx], model.mag_limits, model.bright_tail_mag, draws,
                            halo_ids[cen_idx]),
                _magnitudes(level_s, model.mag_limits, model.bright_tail_mag, draws,
                            sat_ids[keep])])
        levels.append((keep, cen_idx, mag))

    pos_s, vel_s = _satellite_phase_space(halos, host, sat_ids, draws, cosmology)
    hid = halos.halo_id if halos.halo_id is not None else np.arange(n_halo, dtype=np.int64)
    boxes = []
    for model, (keep, cen_idx, mag) in zip(models, levels, strict=True):
        h = host[keep]
        owner = np.concatenate([cen_idx, h])
        meta: dict[str, Any] = dict(halos.meta)
        # short keys: they become FITS header keywords
        model_name = "erf_central_powerlaw_satellite"
        if model.assembly_bias.active:
            model_name += "+assembly_bias"
        meta.update({"HODMODEL": model_name,
                     "NCEN": int(cen_idx.size), "NSAT": int(h.size)})
        boxes.append(GalaxyBox(
            position=np.concatenate([halos.position[cen_idx], pos_s[keep]]),
            velocity=np.concatenate([halos.velocity[cen_idx], vel_s[keep]]),
            box_size=halos.box_size, redshift=halos.redshift,
            abs_mag=mag,
            is_central=np.concatenate([np.ones(cen_idx.size, bool), np.zeros(h.size, bool)]),
            halo_id=np.asarray(hid, dtype=np.int64)[owner],
            halo_mass=halos.mass[owner],
            meta=meta,
            draw_key=(np.concatenate([halo_ids[cen_idx], sat_ids[keep]])
                      if isinstance(draws, KeyedDraws) else None)))
    return boxes


def _satellite_phase_space(halos: HaloCatalog, host: NDArray[np.int64],
                           sat_ids: NDArray[np.uint64], draws: Draws,
                           cosmology: Cosmology | None
                           ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Positions [Mpc/h] and velocities [km/s] of satellites in halos ``host``: NFW radius
    within the halo radius, isotropic direction, virial velocity dispersion."""
    mass_s = halos.mass[host]
    rvir = (halos.rvir[host] if halos.rvir is not None
            else virial_radius(mass_s, (cosmology or Cosmology()).omega_m))
    conc = (halos.concentration[host] if halos.concentration is not None
            else concentration_power_law(mass_s, halos.redshift))
    radius = nfw_radii(conc, draws.uniform(RADIUS, sat_ids)) * rvir
    direction = directions_from_uniforms(draws.uniform(POLAR, sat_ids),
                                         draws.uniform(AZIMUTH, sat_ids))
    offset = radius[:, None] * direction
    pos_s = wrap_into_box(halos.position[host] + offset, halos.box_size)
    sigma = virial_dispersion(mass_s, rvir, halos.redshift)
    vel_s = halos.velocity[host] + sigma[:, None] * draws.normal(VELOCITY, sat_ids, 3)
    return pos_s, vel_s
