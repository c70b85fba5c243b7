"""The error of the cone–box offset itself, and significance under the right law.

Why the cone-to-cone scatter
----------------------------
Every cone is cut from the same box with its own observer, rotation and random draws
(streams of the run seed and the cone's index), so *given the box* the N cones are
independent, identically distributed draws. Their mean c̄ therefore scatters about its
conditional expectation μ(box) with covariance S/N, where S is the cone-to-cone sample
covariance (N − 1 degrees of freedom). The offset Δ = c̄ − b then has

    Var(Δ) = S/N + Var(μ(box) − b),

and the second term is the part of the box's own fluctuation that the average over observers
does not share. Two parts of it are measured and added: the box estimator's own sampling
noise (the VPF's random spheres: P₀(1 − P₀)/n_spheres), and the box's line of sight — the box
is measured along one axis, the cones along every direction, so the spread of the box value
over its three axes, τ² (two degrees of freedom), is added. In a full-sky null run, where
every cone sees the whole box, this term dominates; in a survey footprint the scatter does.
conecheck uses σ_Δ² = diag(S)/N + sampling variance + τ², with the Welch–Satterthwaite degrees
of freedom of its two estimated parts (Satterthwaite 1946, Biometrics Bulletin 2, 110; the
known sampling variance is left out of that count so that it cannot make a scatter that came
out small by chance look certain), and measures how well that is calibrated on null set-ups
over independent boxes (README, "Verdict rules"; benchmarks/RESULTS.md).

With σ_Δ estimated from N − 1 degrees of freedom (fewer with τ²), t = Δ/σ_Δ follows
Student's t law (for Gaussian cone-to-cone scatter), not a Gaussian: with four cones
|t| > 3 happens 5.8 % of the time instead of 0.27 %. The significance quoted and thresholded
is therefore the Gaussian-equivalent one, g = Φ⁻¹(F_t(t; N − 1)), which has the same two-sided
tail probability (Student 1908, Biometrika 6, 1).

When the cones are stated independent (one box each), the box is one more independent
realisation and σ_Δ² = diag(C_box) + diag(S)/N. With one cone there is no scatter; σ_Δ then
falls back to the conservative diag(C_box) + diag(C_cone)/N_eff and the verdict can only warn.
The same fallback serves a bin in which every cone gives exactly the same value (all cones
empty in the tail of a count distribution, say): a scatter of zero from discrete values says
nothing about how well the mean is known, and the t law does not hold there. For statistics
that are fractions of trials (count distributions, the VPF) the bound there also carries the
binomial noise of N cones' trials at the box's probabilities, f(1 − f)/(n N), which a cone's
own jackknife cannot show when the bin is empty everywhere.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

SIGMA_OFFSET_SCATTER = ("cones cut from one box: diag(S_cones)/N_cones + the box's "
                        "line-of-sight spread τ² (+ its estimator's sampling variance), "
                        "Student t with Welch–Satterthwaite dof")
SIGMA_OFFSET_INDEPENDENT = ("independent cones: diag(C_box) + diag(S_cones)/N_cones, "
                            "Student t with N−1 dof")
SIGMA_OFFSET_SHARED = "one cone, no scatter: diag(C_box) + diag(C_cone)/N_eff (an upper bound)"

#: Largest number of cones :func:`cones_needed` searches.
MAX_CONES_ADVICE = 10_000


def gaussian_equivalent(t: ArrayLike, dof: ArrayLike) -> NDArray[np.float64]:
    """Gaussian-equivalent significance of Student-t values: same two-sided tail probability.

    Parameters
    ----------
    t : array_like
        Student-t statistics (±inf allowed).
    dof : float or array_like
        Degrees of freedom (> 0), per value or common; ``inf`` leaves ``t`` unchanged.

    Returns
    -------
    ndarray
        g with P(|Z| > |g|) = P(|T_dof| > |t|) and the sign of t. Computed from the survival
        function so that very small tail probabilities keep their precision.
    """
    t = np.asarray(t, dtype=np.float64)
    dof = np.broadcast_to(np.asarray(dof, dtype=np.float64), t.shape)
    if np.any(dof <= 0):
        raise ValueError(f"degrees of freedom must be > 0, got {dof}")
    gauss = ~np.isfinite(dof)
    with np.errstate(invalid="ignore"):
        sf = stats.t.sf(np.abs(t), np.where(gauss, 1.0, dof))
        g = np.where(gauss, np.abs(t), -stats.norm.ppf(sf))
    return np.where(np.isnan(t), np.nan, np.sign(t) * np.where(np.isinf(t), np.inf, g))


def critical_t(n_sigma: float, dof: ArrayLike) -> Any:
    """|t| with ``dof`` degrees of freedom that is as rare as |Z| = ``n_sigma``.

    A float for a scalar ``dof``, else an array; ``inf`` gives ``n_sigma``.
    """
    d = np.asarray(dof, dtype=np.float64)
    out = np.where(np.isfinite(d),
                   stats.t.isf(stats.norm.sf(n_sigma), np.where(np.isfinite(d), d, 1.0)),
                   n_sigma)
    return float(out) if out.ndim == 0 else out


def welch_dof(parts: list[tuple[ArrayLike, float]]) -> NDArray[np.float64]:
    """Welch–Satterthwaite degrees of freedom of a sum of independent variance estimates.

    ``parts`` holds (variance per bin, its degrees of freedom); a part with infinite
    degrees of freedom (known exactly) adds no uncertainty (Satterthwaite 1946, Biometrics
    Bulletin 2, 110).
    """
    total = sum(np.asarray(v, dtype=np.float64) for v, _ in parts)
    denom = sum(np.asarray(v, dtype=np.float64) ** 2 / d for v, d in parts if np.isfinite(d))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(np.asarray(denom) > 0, total ** 2 / np.asarray(denom), np.inf)


def cones_needed(offset: float, scatter_sd: float, n_sigma: float,
                 n_now: int, box_var: float = 0.0, los_var: float = 0.0) -> int | None:
    """Fewest cones for which ``offset`` would be ``n_sigma`` significant (None: never).

    Parameters
    ----------
    offset : float
        The offset Δ of one bin (units of the statistic).
    scatter_sd : float
        Cone-to-cone standard deviation of the statistic in that bin (√diag S).
    n_sigma : float
        Gaussian-equivalent significance wanted.
    n_now : int
        Cones in this run (the answer is at least ``n_now + 1``).
    box_var : float
        Part of σ_Δ² that more cones do not reduce and that is known (diag(C_box) for
        independent cones, sampling variances).
    los_var : float
        The box's line-of-sight variance (two degrees of freedom), which more cones do not
        reduce either.

    Notes
    -----
    Assumes the offset and the scatter stay as measured, and asks for the t threshold of the
    larger N, so it is an estimate, not a promise.
    """
    if not (np.isfinite(offset) and np.isfinite(scatter_sd)) or offset == 0:
        return None
    if scatter_sd <= 0:
        return max(n_now + 1, 2)
    for n in _candidate_counts(n_now):
        sig = math.sqrt(box_var + los_var + scatter_sd ** 2 / n)
        dof = float(welch_dof([(scatter_sd ** 2 / n, n - 1), (los_var, 2.0)]))
        if abs(offset) > critical_t(n_sigma, dof) * sig:
            return n
    return None


def _candidate_counts(n_now: int) -> list[int]:
    small = list(range(max(n_now + 1, 3), 64))
    large = np.unique(np.geomspace(64, MAX_CONES_ADVICE, 60).astype(int)).tolist()
    return small + large


@dataclass(frozen=True)
class OffsetError:
    """σ_Δ of each bin with the law its significance follows.

    Attributes
    ----------
    sigma : ndarray
        σ_Δ per bin (units of the statistic).
    dof : ndarray
        Degrees of freedom of σ_Δ per bin: N − 1 from the scatter alone, fewer where the box's
        line-of-sight variance (two degrees of freedom) weighs in (Welch–Satterthwaite),
        ``inf`` for the one-cone upper bound.
    method : str
        The formula used (one of the ``SIGMA_OFFSET_*`` texts).
    box_var : ndarray
        The known part of σ_Δ² that more cones would not reduce.
    los_var : ndarray
        The box's line-of-sight variance included in σ_Δ² (zeros when not measured).
    scatter_sd : ndarray or None
        Cone-to-cone standard deviation √diag S (None with one cone).
    fallback : ndarray of bool
        Bins whose cones all agree exactly: σ_Δ is the one-cone upper bound there and the
        significance is Gaussian.
    """

    sigma: NDArray[np.float64]
    dof: NDArray[np.float64]
    method: str
    box_var: NDArray[np.float64]
    los_var: NDArray[np.float64]
    scatter_sd: NDArray[np.float64] | None
    fallback: NDArray[np.bool_]

    def significance(self, offset: ArrayLike) -> tuple[NDArray[np.float64],
                                                         NDArray[np.float64]]:
        """(t, g): Δ/σ_Δ and its Gaussian equivalent; ±inf where σ_Δ = 0 and Δ ≠ 0."""
        d = np.asarray(offset, dtype=np.float64)
        s = self.sigma
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.where(s > 0, d / np.where(s > 0, s, 1.0),
                         np.where(d == 0, 0.0, np.sign(d) * np.inf))
        return t, gaussian_equivalent(t, self.dof)

    def smallest_significant(self, n_sigma: float) -> NDArray[np.float64]:
        """Smallest |Δ| per bin that would be ``n_sigma`` significant (Gaussian-equivalent)."""
        return critical_t(n_sigma, self.dof) * self.sigma


def offset_error(box_var: ArrayLike, cone_values: ArrayLike, cone_var: ArrayLike, *,
                 cones_independent: bool, effective_cones: float,
                 box_sampling_var: ArrayLike | None = None,
                 cone_floor_var: ArrayLike | None = None,
                 box_los_var: ArrayLike | None = None) -> OffsetError:
    """σ_Δ per bin from the box and cone measurements.

    Parameters
    ----------
    box_var : array_like, shape (p,)
        diag(C_box), the box's jackknife variance per bin.
    cone_values : array_like, shape (N, p)
        The statistic on each cone.
    cone_var : array_like, shape (p,)
        diag(C_cone), the mean single-cone jackknife variance (used with one cone only).
    cones_independent : bool
        True when each cone comes from an independent box.
    effective_cones : float
        N_eff of the one-cone upper bound.
    box_sampling_var : array_like, shape (p,), optional
        Variance of the box value from the box estimator's own random sampling (random
        sphere centres of the VPF), which no cone shares; added to σ_Δ² when the cones are
        cut from the box (it is already inside diag(C_box) otherwise).
    box_los_var : array_like, shape (p,), optional
        Variance of the box value over the box's three axes taken as line of sight (two
        degrees of freedom), a part of the box value the cones, which look along every
        direction, do not share; added to σ_Δ² when the cones are cut from the box.
    cone_floor_var : array_like, shape (p,), optional
        Variance one cone's value would have from its own trials at the box's probabilities
        (binomial); used, over N, in bins where every cone gives the same value, whose
        jackknife can be zero (no centre or sphere in the bin anywhere).
    """
    cv = np.atleast_2d(np.asarray(cone_values, dtype=np.float64))
    bvar = np.clip(np.asarray(box_var, dtype=np.float64), 0, None)
    n = cv.shape[0]
    bound = bvar + np.clip(np.asarray(cone_var, dtype=np.float64), 0, None) / float(
        min(effective_cones, n))
    if n < 2:
        return OffsetError(np.sqrt(bound), np.full(bvar.size, math.inf), SIGMA_OFFSET_SHARED,
                           bvar, np.zeros_like(bvar), None, np.ones(bvar.size, dtype=bool))
    scatter_var = cv.var(axis=0, ddof=1)
    same = np.all(cv == cv[0], axis=0)
    los = np.zeros_like(bvar)
    if cones_independent:
        fixed = bvar
    else:
        fixed = (np.zeros_like(bvar) if box_sampling_var is None
                 else np.clip(np.asarray(box_sampling_var, dtype=np.float64), 0, None))
        if box_los_var is not None:
            los = np.clip(np.asarray(box_los_var, dtype=np.float64), 0, None)
    var = fixed + los + scatter_var / n
    # Degrees of freedom from the estimated parts only: a known term (sampling variance)
    # must not lend its certainty to a cone-to-cone scatter that came out small by chance,
    # where Welch–Satterthwaite with the known term included is over-confident.
    dof = np.where(scatter_var + los > 0,
                   welch_dof([(scatter_var / n, float(n - 1)), (los, 2.0)]), float(n - 1))
    if cone_floor_var is not None:
        bound = bound + np.clip(np.asarray(cone_floor_var, dtype=np.float64), 0, None) / n
    var = np.where(same, bound, var)
    dof = np.where(same, math.inf, np.minimum(dof, float(n - 1)) if cones_independent else dof)
    method = SIGMA_OFFSET_INDEPENDENT if cones_independent else SIGMA_OFFSET_SCATTER
    return OffsetError(np.sqrt(var), dof, method, fixed, los, np.sqrt(scatter_var), same)


__all__ = ["welch_dof", "MAX_CONES_ADVICE", "SIGMA_OFFSET_INDEPENDENT", "SIGMA_OFFSET_SCATTER",
           "SIGMA_OFFSET_SHARED", "OffsetError", "cones_needed", "critical_t",
           "gaussian_equivalent", "offset_error"]
