"""Apparent and absolute magnitudes: what the sky emits and what the analyst infers.

The flux a galaxy sends depends on where it truly is and how fast it moves, never on how
well its redshift is then measured. Its apparent magnitude is

    m = M + 5 log10(D_L(z_cos) (1 + z_pec)² / (Mpc/h)) + 25 + K(z_true) + E(z_cos),

with 1 + z_true = (1 + z_cos)(1 + z_pec) the redshift its light carries (z_pec from the
line-of-sight velocity) and D_L(z_cos)(1 + z_pec)² the luminosity distance of a moving
source (Davis et al. 2011, ApJ 741, 67, eq. 15: one factor 1 + z_pec for the energy of each
photon, one for their arrival rate). The analyst sees only m and the measured redshift
z_obs (which also carries the measurement error) and infers

    M_inferred = m − DM(z_obs) − K(z_obs) − E(z_obs),

so peculiar velocities scatter the inferred luminosity, by (5/ln 10) σ_v / (c z) to first
order at low z, while redshift-measurement errors change M_inferred but never who is a
target (the flux limit acts on m). Sample cuts use M_inferred, as on real data.

K(z) = Σ_i c_i z^i is a polynomial K-correction [mag] (``shell.kcorrection``; none by
default); E(z) = −Q (z − z_ref) is the luminosity evolution of Blanton et al. (2003, ApJ
592, 819, sec. 3: M*(z) = M*(z_ref) − Q (z − z_ref)), with box magnitudes meaning
magnitudes at z_ref (``shell.evolution_q``, ``shell.evolution_z_ref``). The volume limit
of a luminosity threshold uses the same K and E.

With ``effects.physical_fluxes`` off the cones keep the earlier, simpler model: m = M +
DM(z_obs) + K(z_obs) + E(z_obs) from the observed redshift, so M_inferred = M exactly.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import brentq

from ..cosmology import Cosmology
from ..errors import InputError
from .corrections import ZFLAG_SECOND_PASS
from .settings import LuminosityFunction, SurveyShell

#: Smallest redshift used in distance moduli (z_obs ≤ 0 cannot enter a survey shell).
Z_FLOOR = 1e-8


def colour_terms(shell: SurveyShell | None, z_k: ArrayLike, z_e: ArrayLike | None = None
                 ) -> NDArray[np.float64] | float:
    """K(z_k) + E(z_e) [mag] of ``shell`` (:meth:`SurveyShell.colour_terms`); 0 without one."""
    return 0.0 if shell is None else shell.colour_terms(z_k, z_e)


def observed_frame_magnitude(abs_mag: ArrayLike, z: ArrayLike, cosmology: Cosmology,
                             shell: SurveyShell | None = None) -> NDArray[np.float64]:
    """m = M + DM(z) + K(z) + E(z) [mag], all at one redshift ``z``; M in M − 5 log10 h.

    The analyst's relation between m and M at the measured redshift, used for volume
    limits and, with ``effects.physical_fluxes`` off, for the cones' fluxes. Redshifts at
    or below 0 are clipped to a tiny positive value (very bright).
    """
    z = np.maximum(np.asarray(z, dtype=np.float64), Z_FLOOR)
    return np.asarray(abs_mag, dtype=np.float64) + cosmology.distance_modulus(z) \
        + colour_terms(shell, z)


def apparent_magnitude(abs_mag: ArrayLike, z_cos: ArrayLike, z_true: ArrayLike,
                       cosmology: Cosmology, shell: SurveyShell | None = None
                       ) -> NDArray[np.float64]:
    """Physical apparent magnitude [mag] of galaxies of absolute magnitude M at z_cos.

    Parameters
    ----------
    abs_mag : array_like
        Absolute magnitude M − 5 log10 h (at ``shell.evolution_z_ref`` when E is set).
    z_cos : array_like
        Cosmological redshift (true distance).
    z_true : array_like
        Redshift of the light, (1 + z_cos)(1 + v_los/c) − 1, before measurement errors.
    cosmology : Cosmology
    shell : SurveyShell, optional
        Holds the K-correction and evolution terms.

    Returns
    -------
    ndarray
        m = M + DM(z_cos) + 10 log10((1 + z_true)/(1 + z_cos)) + K(z_true) + E(z_cos);
        at rest (z_true = z_cos) exactly :func:`observed_frame_magnitude` at z_cos.
    """
    z_cos = np.maximum(np.asarray(z_cos, dtype=np.float64), Z_FLOOR)
    z_true = np.asarray(z_true, dtype=np.float64)
    m = np.asarray(abs_mag, dtype=np.float64) + cosmology.distance_modulus(z_cos)
    # (1 + z_pec)² in D_L: 10 log10(1 + z_pec), exactly 0 for a galaxy at rest
    m = m + 10.0 * np.log10((1.0 + z_true) / (1.0 + z_cos))
    if shell is not None and shell.has_colour_terms:
        m = m + colour_terms(shell, np.maximum(z_true, Z_FLOOR), z_cos)
    return m


def inferred_abs_mag(app_mag: ArrayLike, z_obs: ArrayLike, cosmology: Cosmology,
                     shell: SurveyShell | None = None) -> NDArray[np.float64]:
    """M_inferred = m − DM(z_obs) − K(z_obs) − E(z_obs) [M − 5 log10 h], as on real data."""
    z = np.maximum(np.asarray(z_obs, dtype=np.float64), Z_FLOOR)
    return np.asarray(app_mag, dtype=np.float64) - cosmology.distance_modulus(z) \
        - colour_terms(shell, z)


def volume_limit_zmax(m_lim: float, mag_thr: float, cosmology: Cosmology,
                      shell: SurveyShell | None = None) -> float:
    """Redshift z_max where M_thr + DM(z_max) + K(z_max) + E(z_max) = m_lim.

    A sample of galaxies brighter than ``mag_thr`` (M − 5 log10 h) in a survey limited at
    apparent magnitude ``m_lim`` is complete (volume limited) for z_obs < z_max, the limit
    an analyst computes from observed redshifts. Without K and E this inverts
    :meth:`Cosmology.distance_modulus` directly; with them it solves the equation with
    Brent's method (m is increasing in z: :meth:`SurveyShell.flux_monotonic_problem`).
    """
    mu = float(m_lim) - float(mag_thr)
    if shell is None or not shell.has_colour_terms:
        return cosmology.redshift_at_distance_modulus(mu)
    z_hi = float(cosmology.z_max_table)

    def f(z: float) -> float:
        return float(observed_frame_magnitude(0.0, z, cosmology, shell)) - mu

    lo = 1e-6
    if f(lo) > 0 or f(z_hi) < 0:
        raise InputError(f"shell.m_lim = {m_lim}: no redshift in (0, {z_hi:g}] where a galaxy "
                         f"of M = {mag_thr} reaches the flux limit (with the K-correction and "
                         "evolution terms)")
    return float(brentq(f, lo, z_hi, xtol=1e-12, rtol=1e-12))


def luminosity_scatter(table: Any, mag_max: float | None, z_min: float, z_max: float,
                       n_z: int = 5) -> dict[str, Any] | None:
    """How the analyst's magnitudes move a luminosity-threshold cut on one cone.

    Counts, within z_min <= z_obs < z_max, the galaxies brighter than ``mag_max`` by the
    box's magnitude (``abs_mag_true``) and by the inferred one (``abs_mag``), those whose
    membership differs, and the sum of squares of M_inferred − M_true in ``n_z`` redshift
    bins, so that cones add up exactly. The sums cover the galaxies in either selection
    that have their own redshift (``zflag`` 0 or 1): the scatter from velocities and
    measurement errors; a redshift lent by a collision correction moves M by far more and
    would swamp it (its galaxies still count in the membership changes).

    Returns None when the cut has no magnitude threshold or the cone no magnitudes.
    """
    if mag_max is None or "abs_mag_true" not in table.colnames:
        return None
    z = np.asarray(table["z_obs"], dtype=np.float64)
    inside = (z >= z_min) & (z < z_max)
    m_inf = np.asarray(table["abs_mag"], dtype=np.float64)[inside]
    m_true = np.asarray(table["abs_mag_true"], dtype=np.float64)[inside]
    by_true, by_inferred = m_true < mag_max, m_inf < mag_max
    either = by_true | by_inferred
    if "zflag" in table.colnames:
        either &= np.asarray(table["zflag"])[inside] <= ZFLAG_SECOND_PASS
    edges = np.linspace(z_min, z_max, n_z + 1)
    zi = z[inside][either]
    dm = (m_inf - m_true)[either]
    count, _ = np.histogram(zi, bins=edges)
    sum_sq, _ = np.histogram(zi, bins=edges, weights=dm * dm)
    return {"n_true": int(by_true.sum()), "n_inferred": int(by_inferred.sum()),
            "n_changed": int((by_true != by_inferred).sum()), "z_edges": edges.tolist(),
            "count": count.tolist(), "sum_sq": sum_sq.tolist()}


def expected_targets_per_sr(lf: LuminosityFunction, shell: SurveyShell, cosmology: Cosmology,
                            n_z: int = 400) -> float:
    """Targets per steradian a luminosity function predicts in the shell [sr⁻¹].

    Σ over redshift slices of the comoving volume per steradian times the density of
    galaxies brighter than M_lim(z) = m_lim − DM(z) − K(z) − E(z) (the analyst's relation,
    :func:`observed_frame_magnitude`); midpoint rule on ``n_z`` slices.
    """
    if shell.m_lim is None:
        return math.inf
    edges = np.linspace(shell.z_min, shell.z_max, n_z + 1)
    mid = 0.5 * (edges[1:] + edges[:-1])
    dv = np.diff(cosmology.shell_volume_per_sr(edges[0], edges))
    m_lim_abs = shell.m_lim - observed_frame_magnitude(0.0, mid, cosmology, shell)
    density = np.array([lf.density_brighter(m) for m in m_lim_abs])
    return float(np.sum(dv * density))


def full_list_collided_fraction(collided: float, density_ratio: float) -> float:
    """Collided fraction of the full target list, scaled from the box's.

    For targets scattered at random on the sky with surface density Σ, a target is free
    with probability exp(−Σ π θ²), so the collided fraction scales as
    1 − (1 − f)^(Σ_full/Σ_box). That is exact only for a random sky: where the box's
    collisions come from its own tight pairs (satellites in groups), which the missing
    faint targets need not share, it overstates the rise (on the quick demo it predicts
    5.7 % where ``survey.targets.source = "fill"`` measures 2.9 %); a rough estimate that
    the fill replaces with a measurement.
    """
    if not (0.0 <= collided < 1.0) or not density_ratio > 0:
        return float(collided)
    return float(1.0 - (1.0 - collided) ** density_ratio)
