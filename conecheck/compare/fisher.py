"""The cone–box offset in units of the fitted parameters (Fisher-matrix bias).

If a model m(θ) is fitted to data whose expectation is m(θ₀) + Δ, the best fit moves, to first
order, by

    δθ = F⁻¹ Dᵀ C⁻¹ Δ,   F = Dᵀ C⁻¹ D,   D_ij = ∂m_i/∂θ_j,

with C the data covariance (the linear-response bias formula of Fisher forecasts, e.g. Taylor,
Kitching, Bacon & Heavens 2007, MNRAS 374, 1377, eq. 4; Amara & Réfrégier 2008, MNRAS 391,
228). The forecast error of θ_j is σ_j = √(F⁻¹)_jj, so δθ_j/σ_j says how far the offset would
drag each parameter in units of its error. For any parameter combination |δθ/σ| ≤ √(Δᵀ C⁻¹ Δ):
the bias χ² bounds every shift, which is all that can be said without a model.

C is a jackknife estimate here; its inverse is de-biased by the Hartlap factor, as for the bias
χ², which scales F by h and leaves δθ unchanged.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from ..jackknife import jackknife_covariance
from ..stats.base import Measurement
from .chi2 import MAX_CONDITION, inverse_covariance
from .jsonsafe import jsonable
from .rules import FAIL, PASS, VerdictRules


@dataclass(frozen=True)
class ParameterShift:
    """First-order shift of fitted parameters caused by an offset of the data vector.

    Attributes
    ----------
    shift : ndarray, shape (k,)
        δθ, in the parameters' own units.
    sigma : ndarray, shape (k,)
        Forecast 1σ error of each parameter, √diag F⁻¹.
    shift_in_sigma : ndarray, shape (k,)
        δθ/σ.
    chi2_bound : float
        √(Δᵀ Ĉ⁻¹ Δ): the largest |δθ/σ| of any parameter combination.
    condition : float
        Condition number of the Fisher matrix in units of the forecast errors.
    conditional_shift_in_sigma : ndarray, shape (k,)
        Each parameter fitted alone, the others held at their values:
        (D_jᵀ Ĉ⁻¹ Δ)/√(D_jᵀ Ĉ⁻¹ D_j). Defined even when the joint fit is degenerate.
    degenerate : bool
        True when the data cannot constrain all k parameters together (more parameters
        than bins, or parameters they cannot tell apart): the joint fields are then NaN.
    """

    shift: NDArray[np.float64]
    sigma: NDArray[np.float64]
    shift_in_sigma: NDArray[np.float64]
    chi2_bound: float
    condition: float
    conditional_shift_in_sigma: NDArray[np.float64]
    degenerate: bool


def parameter_shift(derivatives: ArrayLike, covariance: ArrayLike, offset: ArrayLike,
                    n_regions: int | None = None, where: str = "parameter shift"
                    ) -> ParameterShift:
    """δθ = F⁻¹ Dᵀ Ĉ⁻¹ Δ with F = Dᵀ Ĉ⁻¹ D.

    Parameters
    ----------
    derivatives : array_like, shape (p, k)
        D, the derivative of each of the p data-vector entries with respect to each of the
        k parameters (units of the data per unit of the parameter).
    covariance : array_like, shape (p, p)
        The data covariance C (units of the data squared).
    offset : array_like, shape (p,)
        Δ, the bias of the data vector (units of the data).
    n_regions : int, optional
        Jackknife regions C was estimated from: the inverse gets the Hartlap factor.
    where : str
        Context for messages.

    Raises
    ------
    InputError
        Mismatched shapes, non-finite input, or a parameter the data do not depend on at all.
        A joint fit the data cannot constrain is not an error: the result is then marked
        ``degenerate`` and carries the one-parameter-at-a-time shifts only.
    """
    d = np.atleast_2d(np.asarray(derivatives, dtype=np.float64))
    c = np.atleast_2d(np.asarray(covariance, dtype=np.float64))
    delta = np.asarray(offset, dtype=np.float64).ravel()
    p, k = d.shape
    if c.shape != (p, p) or delta.size != p:
        raise InputError(f"{where}: derivatives {d.shape}, covariance {c.shape} and offset "
                         f"({delta.size},) do not match")
    if not (np.all(np.isfinite(d)) and np.all(np.isfinite(c)) and np.all(np.isfinite(delta))):
        raise InputError(f"{where}: derivatives, covariance and offset must be finite")
    cinv = inverse_covariance(c, n_regions, where).debiased
    fisher = d.T @ cinv @ d
    scale = np.sqrt(np.diag(fisher))
    if np.any(scale <= 0):
        j = int(np.flatnonzero(scale <= 0)[0])
        raise InputError(f"{where}: the data do not depend on parameter {j} (zero derivative)")
    projection = d.T @ cinv @ delta
    conditional = projection / scale
    bound = float(np.sqrt(max(delta @ cinv @ delta, 0.0)))
    unit = fisher / np.outer(scale, scale)
    cond = float(np.linalg.cond(unit))
    if k > p or not np.isfinite(cond) or cond > MAX_CONDITION:
        nan = np.full(k, np.nan)
        return ParameterShift(nan, nan, nan, bound, cond, conditional, True)
    finv = np.linalg.inv(unit) / np.outer(scale, scale)
    shift = finv @ projection
    sigma = np.sqrt(np.diag(finv))
    return ParameterShift(shift, sigma, shift / sigma, bound, cond, conditional, False)


def _joint(ms: Mapping[str, Measurement], names: tuple[str, ...]
           ) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
    """Concatenated values and joint delete-one vectors of several statistics of one sample."""
    value = np.concatenate([np.asarray(ms[n].value, dtype=np.float64).ravel() for n in names])
    pieces = [ms[n].delete_one for n in names]
    if any(p is None for p in pieces) or len({np.shape(p)[0] for p in pieces}) != 1:
        return value, None
    return value, np.hstack([np.asarray(p, dtype=np.float64) for p in pieces])


def shifts_for_cut(box: Mapping[str, Measurement], cones: Sequence[Mapping[str, Measurement]],
                   combinations: Sequence[tuple[str, ...]], rules: VerdictRules,
                   derivatives: Mapping[str, ArrayLike] | None = None,
                   parameters: Sequence[str] = (), where: str = "") -> dict[str, Any]:
    """The offset of each combination of statistics in units of the fitted parameters.

    Parameters
    ----------
    box : mapping statistic → Measurement
        The box measurements of one sample, with delete-one vectors over the same sub-volumes.
    cones : sequence of mapping statistic → Measurement
        Each cone's measurements of the same sample and cut (one sky-region set per cone).
    combinations : sequence of tuple of str
        Statistics fitted together.
    rules : VerdictRules
        ``max_parameter_shift`` (0: report only).
    derivatives : mapping statistic → array (p, k), optional
        ∂(statistic)/∂(parameter) on the box; None when the box has no HOD (then only the
        bound √χ² is reported).
    parameters : sequence of str
        Names of the k parameters.
    where : str
        Context for messages.

    Returns
    -------
    dict
        JSON-safe: ``parameters``, ``method``, ``combinations`` (name → ``statistics``,
        ``n_bins``, ``chi2_bound`` and, with derivatives, ``shift``, ``sigma``,
        ``shift_in_sigma``, ``max_abs_shift_in_sigma``; or ``note`` when it cannot be
        computed), ``max_abs_shift_in_sigma`` over combinations, ``verdict`` and ``reason``
        when the rule is on.
    """
    out_combos: dict[str, Any] = {}
    worst = np.nan
    for combo in combinations:
        name = "+".join(combo)
        label = f"{where}, {name}" if where else name
        b, bd = _joint(box, combo)
        cone_vals = [_joint(c, combo) for c in cones]
        rec: dict[str, Any] = {"statistics": list(combo)}
        out_combos[name] = rec
        if bd is None or any(cd is None for _, cd in cone_vals):
            rec["note"] = "jackknife delete-one vectors missing or of different region counts"
            continue
        delta = np.mean([v for v, _ in cone_vals], axis=0) - b
        cov = jackknife_covariance(bd) + np.mean([jackknife_covariance(cd)
                                                 for _, cd in cone_vals], axis=0)
        use = np.sqrt(np.clip(np.diag(cov), 0, None)) > 1e-10 * np.maximum(np.abs(b), 1e-300)
        n_regions = int(min([bd.shape[0], *[cd.shape[0] for _, cd in cone_vals]]))
        rec["n_bins"] = int(use.sum())
        dmat = None
        if derivatives is not None and parameters:
            dmat = np.vstack([np.atleast_2d(np.asarray(derivatives[s], dtype=np.float64))
                              for s in combo])[use]
        try:
            if dmat is None:
                cinv = inverse_covariance(cov[np.ix_(use, use)], n_regions, label).debiased
                rec["chi2_bound"] = float(np.sqrt(max(delta[use] @ cinv @ delta[use], 0.0)))
                continue
            res = parameter_shift(dmat, cov[np.ix_(use, use)], delta[use], n_regions,
                                  where=label)
        except InputError as exc:
            rec["note"] = str(exc)
            continue
        rec.update({"chi2_bound": res.chi2_bound, "shift": res.shift, "sigma": res.sigma,
                    "shift_in_sigma": res.shift_in_sigma,
                    "conditional_shift_in_sigma": res.conditional_shift_in_sigma,
                    "condition_number": res.condition})
        if res.degenerate:
            rec["note"] = (f"the {rec['n_bins']} bins cannot constrain all {len(parameters)} "
                           f"parameters together (Fisher condition number "
                           f"{res.condition:.3g}); shown: each parameter fitted alone, the "
                           f"others held fixed")
            used = res.conditional_shift_in_sigma
        else:
            used = res.shift_in_sigma
        rec["max_abs_shift_in_sigma"] = float(np.max(np.abs(used)))
        worst = np.fmax(worst, rec["max_abs_shift_in_sigma"])
    out: dict[str, Any] = {
        "parameters": list(parameters) if derivatives is not None else None,
        "method": (METHOD_HOD if derivatives is not None else METHOD_BOUND),
        "combinations": out_combos,
        "max_abs_shift_in_sigma": worst,
    }
    if rules.max_parameter_shift > 0 and derivatives is not None and np.isfinite(worst):
        bad = [(n, r) for n, r in out_combos.items()
               if r.get("max_abs_shift_in_sigma", 0.0) > rules.max_parameter_shift]
        out["verdict"] = FAIL if bad else PASS
        if bad:
            n, r = max(bad, key=lambda nr: nr[1]["max_abs_shift_in_sigma"])
            shifts = np.asarray(r["shift_in_sigma"], dtype=np.float64)
            if not np.all(np.isfinite(shifts)):
                shifts = np.asarray(r["conditional_shift_in_sigma"], dtype=np.float64)
            j = int(np.argmax(np.abs(shifts)))
            out["reason"] = (f"fitting {n} would move {parameters[j]} by {shifts[j]:+.2f} σ "
                             f"(limit {rules.max_parameter_shift:g} σ)")
        else:
            out["reason"] = (f"no parameter moves by more than {rules.max_parameter_shift:g} "
                             f"σ (largest {worst:.2f} σ)")
    return jsonable(out)


METHOD_HOD = ("δθ = F⁻¹ Dᵀ Ĉ⁻¹ Δ with F = Dᵀ Ĉ⁻¹ D: D from central differences of the box "
              "statistics in the sample's HOD parameters (common random numbers), Ĉ the "
              "joint C_box + C_cone of the combination with the Hartlap factor")
METHOD_BOUND = ("the box has no HOD: only √(Δᵀ Ĉ⁻¹ Δ), the largest shift of any parameter "
                "combination in units of its error, can be given")


__all__ = ["METHOD_BOUND", "METHOD_HOD", "ParameterShift", "parameter_shift", "shifts_for_cut"]
