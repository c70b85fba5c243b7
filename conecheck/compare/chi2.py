"""The bias χ² of an offset vector with a Hartlap-corrected inverse covariance.

The inverse of a covariance estimated from n noisy samples is biased high; multiplying it by
h = (n − p − 2)/(n − 1) removes that bias for p-dimensional Gaussian vectors (Hartlap, Simon &
Schneider 2007, A&A 464, 399, their eq. 17). Jackknife covariances are not independent
realisations; using the same factor with n = number of regions is common practice.

The tail probability does not come from the χ² law: with a covariance estimated from n − 1
degrees of freedom the statistic T² = Δᵀ Ĉ⁻¹ Δ follows Hotelling's law,
(m − p + 1) T² / (p m) ~ F(p, m − p + 1) with m = n − 1 (Hotelling 1931, Ann. Math. Stat. 2,
360; the same heavier tail Sellentin & Heavens 2016, MNRAS 456, L132, derive for the
likelihood). The χ² law would put 2–3 % of null draws beyond its nominal 0.1 % point at
16 regions and 8 bins. Where a pseudo-inverse is needed, p is its rank, in the Hartlap
factor and in the law alike.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from ..errors import InputError

log = logging.getLogger(__name__)

#: Condition number of the correlation matrix above which a pseudo-inverse is used.
MAX_CONDITION = 1e10


def min_regions_needed(p: int) -> int:
    """Smallest number of jackknife regions for which a p-bin χ² is defined: p + 3."""
    return int(p) + 3


def hartlap_factor(n: int, p: int, where: str = "bias chi2") -> float:
    """Hartlap et al. (2007) de-biasing factor (n − p − 2)/(n − 1) of an inverse covariance.

    Parameters
    ----------
    n : int
        Number of samples (jackknife regions) the covariance came from.
    p : int
        Length of the data vector.
    where : str
        What the χ² is of, for the error message.

    Raises
    ------
    InputError
        When n ≤ p + 2 (the factor is ≤ 0: the covariance cannot be inverted usefully).
    """
    n, p = int(n), int(p)
    if n <= p + 2:
        raise InputError(
            f"{where}: {p} bins need at least {min_regions_needed(p)} jackknife regions for a "
            f"Hartlap-corrected χ² (n > p + 2), but only {n} were used; raise the number of "
            f"jackknife regions (box and cone) to ≥ {min_regions_needed(p)} or use fewer bins")
    return (n - p - 2) / (n - 1)


@dataclass
class Chi2Result:
    """Outcome of :func:`bias_chi2`."""

    chi2: float
    dof: int
    p_value: float
    hartlap: float
    used: NDArray[np.int64]
    condition: float
    pseudo_inverse: bool
    notes: list[str] = field(default_factory=list)


def bias_chi2(offset: ArrayLike, covariance: ArrayLike, n_regions: int,
              use: ArrayLike | None = None, where: str = "bias chi2") -> Chi2Result:
    """χ² = Δᵀ h C⁻¹ Δ over the bins in ``use``, with the Hartlap factor h; Hotelling p-value.

    Parameters
    ----------
    offset : array_like, shape (p,)
        Offset vector Δ (any units, those of the covariance's square root).
    covariance : array_like, shape (p, p)
        Covariance of Δ.
    n_regions : int
        Number of jackknife regions n the covariance came from.
    use : array_like of bool or int, optional
        Bins to include (default all).
    where : str
        Name for messages.

    Notes
    -----
    The covariance is inverted through its correlation matrix (scaling by the diagonal),
    so that bins of very different amplitude (wp over decades of r_p) do not spoil the
    conditioning. When the correlation matrix is still ill-conditioned
    (condition number > :data:`MAX_CONDITION`), a pseudo-inverse is used, the degrees of
    freedom become its rank, and a note says so.
    """
    d = np.asarray(offset, dtype=np.float64)
    c = np.asarray(covariance, dtype=np.float64)
    idx = np.arange(d.size) if use is None else np.flatnonzero(np.asarray(use)) \
        if np.asarray(use).dtype == bool else np.asarray(use, dtype=np.int64)
    d, c = d[idx], c[np.ix_(idx, idx)]
    p = d.size
    if p == 0:
        return Chi2Result(np.nan, 0, np.nan, np.nan, idx, np.nan, False,
                          ["no usable bins for the bias χ²"])
    hartlap_factor(n_regions, p, where)  # refuse too few regions before anything else
    inv = inverse_covariance(c, n_regions, where)
    t2 = float(d @ inv.raw @ d)
    return Chi2Result(inv.hartlap * t2, inv.rank, hotelling_p_value(t2, inv.rank, n_regions - 1),
                      inv.hartlap, idx, inv.condition, inv.pseudo_inverse, inv.notes)


@dataclass
class InverseCovariance:
    """The inverse of a jackknife covariance, as every χ²-like quantity here uses it.

    Attributes
    ----------
    raw : ndarray
        C⁻¹ (or its pseudo-inverse), without the Hartlap factor.
    hartlap : float
        (n − r − 2)/(n − 1) for rank r.
    rank, condition, pseudo_inverse, notes
        The rank used, the condition number of the correlation matrix, whether a
        pseudo-inverse was needed, and what was said about it.
    """

    raw: NDArray[np.float64]
    hartlap: float
    rank: int
    condition: float
    pseudo_inverse: bool
    notes: list[str] = field(default_factory=list)

    @property
    def debiased(self) -> NDArray[np.float64]:
        """h C⁻¹, the Hartlap-corrected inverse."""
        return self.hartlap * self.raw


def inverse_covariance(covariance: ArrayLike, n_regions: int | None,
                       where: str = "covariance") -> InverseCovariance:
    """Invert a jackknife covariance through its correlation matrix.

    Scaling by the diagonal keeps bins of very different amplitude (wp over decades of r_p)
    from spoiling the conditioning. Where the correlation matrix is still ill-conditioned
    (condition number > :data:`MAX_CONDITION`; e.g. a normalised distribution P(N), whose
    bins sum to one), the pseudo-inverse is used and its rank replaces the number of bins
    in the Hartlap factor; a note says so. ``n_regions = None``: a covariance known
    exactly, Hartlap factor 1.

    Raises
    ------
    InputError
        Too few regions for the rank (n ≤ r + 2), or a zero variance.
    """
    c = np.atleast_2d(np.asarray(covariance, dtype=np.float64))
    p = c.shape[0]
    s = np.sqrt(np.diag(c))
    if np.any(~(s > 0)):
        raise InputError(f"{where}: zero or undefined variance in bin "
                         f"{int(np.flatnonzero(~(s > 0))[0])}")
    r = c / np.outer(s, s)
    notes: list[str] = []
    try:
        cond = float(np.linalg.cond(r))
    except np.linalg.LinAlgError:
        cond = np.inf
    pinv = not np.isfinite(cond) or cond > MAX_CONDITION
    if pinv:
        rinv = np.linalg.pinv(r, rcond=1.0 / MAX_CONDITION, hermitian=True)
        rank = int(np.linalg.matrix_rank(r, tol=np.linalg.norm(r, 2) / MAX_CONDITION,
                                          hermitian=True))
        msg = (f"{where}: covariance ill-conditioned (condition number {cond:.3g}); used a "
               f"pseudo-inverse of rank {rank} of {p}")
        if p - rank <= 1:
            # One exact linear relation, as for a distribution whose bins sum to one
            # (P(N) over every count): the χ² in the remaining combinations is the right one.
            msg += (": the bins obey one linear relation (a distribution summing to one "
                    "does); the χ² uses the other combinations, nothing to change")
            log.info(msg)
        else:
            msg += (f": {p - rank} combinations of bins carry no independent information "
                    f"at this number of jackknife regions; use more regions (jackknife."
                    f"sky_regions, jackknife.box_n_side) or fewer bins")
            log.warning(msg)
        notes.append(msg)
    else:
        rinv = np.linalg.inv(r)
        rank = p
    h = 1.0 if n_regions is None else hartlap_factor(n_regions, rank, where)
    return InverseCovariance(rinv / np.outer(s, s), h, rank, cond, pinv, notes)


def hotelling_p_value(t2: float, p: int, m: int) -> float:
    """P(T² > t2) for Hotelling's T² of p dimensions with a covariance of m degrees of freedom.

    (m − p + 1) T² / (p m) follows F(p, m − p + 1) (Hotelling 1931, Ann. Math. Stat. 2, 360).
    """
    if p <= 0 or m - p + 1 <= 0 or not np.isfinite(t2):
        return float("nan")
    return float(stats.f.sf((m - p + 1) * t2 / (p * m), p, m - p + 1))
