"""Differences between two measurements of the *same* cones, with their errors.

When two variants of a run build the same cones (same observers, rotations and random
streams) and differ in one survey effect, the difference of their cone means is what that
effect does to the statistic; the box cancels. It is estimated from the per-cone paired
differences d_i = a_i − b_i, i = 1…N, so the structure both variants share cancels cone
by cone.

Increment errors
----------------
Given the box, the N cones are independent draws (own observer, rotation and random
numbers), and so are their paired differences d_i. The increment d̄ = mean_i d_i therefore
has the error σ = √(var_i(d_i)/N), with N − 1 degrees of freedom: its significance d̄/σ
follows Student's t law and is quoted as the Gaussian equivalent (same two-sided tail
probability), as for the offset's own error σ_Δ. With one cone there is no scatter; the
error is then the jackknife of the difference (region k removed from both variants at once
when they share sky regions, else the two variances added, which over-states it) divided by
``verdict.effective_cones``, and the significance is Gaussian. An increment is consistent with
zero when no bin's significance exceeds n = ``verdict.n_sigma_offset``. The jackknife of the
difference is also reported beside the scatter: it measures how the effect varies across
the sky within one cone.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..compare import VerdictRules, gaussian_equivalent, jsonable
from ..errors import InputError
from ..jackknife import jackknife_covariance
from ..stats.base import Measurement

_MARK = "Increment errors\n----------------\n"
#: The error model above, as plain text (results.json and the report).
INCREMENT_ERROR_TEXT: str = " ".join(
    (__doc__ or "").split(_MARK, 1)[1].split())

METHOD_SCATTER = "scatter of the paired differences over cones / N, Student t with N−1 dof"
METHOD_SAME_REGIONS = "one cone: jackknife of the paired difference / N_eff"
METHOD_OTHER_REGIONS = ("one cone: (jackknife variance of each variant, added) / N_eff; the "
                        "variants use different sky regions")


def _matrix(ms: Sequence[Measurement], what: str, where: str) -> NDArray[np.float64]:
    try:
        v = np.array([np.asarray(m.value, dtype=np.float64).ravel() for m in ms])
    except ValueError:
        raise InputError(f"{where}: {what} cones have data vectors of different lengths") \
            from None
    if v.ndim != 2 or not np.all(np.isfinite(v)):
        raise InputError(f"{where}: {what} holds a non-finite value")
    return v


def _jackknife_var(m: Measurement) -> NDArray[np.float64]:
    if m.delete_one is None:
        return np.full(np.asarray(m.value).size, np.nan)
    return np.diag(np.atleast_2d(jackknife_covariance(m.delete_one)))


def paired_difference(upper: Sequence[Measurement], lower: Sequence[Measurement], *,
                      reference: ArrayLike, sigma_total: ArrayLike | None = None,
                      same_regions: bool, rules: VerdictRules | None = None,
                      cones_independent: bool = False, where: str = "") -> dict[str, Any]:
    """Mean paired difference of two variants of the same cones, with its error.

    Parameters
    ----------
    upper, lower : sequence of Measurement
        One statistic measured on the same N cones (cone i in both) by two variants.
    reference : array_like, shape (p,)
        Vector the difference is expressed as a fraction of (the box value for ladder
        increments, the reference variant's cone mean for corrections).
    sigma_total : array_like, optional
        Total error bar σ_tot of the comparison with the box; the difference is also
        given in its units.
    same_regions : bool
        True when both variants use the same jackknife sky regions.
    rules : VerdictRules, optional
        Supplies ``effective_cones`` (one cone only) and ``n_sigma_offset``.
    cones_independent : bool
        As in :func:`conecheck.compare.compare_statistic`.
    where : str
        Context for messages.

    Returns
    -------
    dict
        JSON-safe: ``increment`` (d̄), ``fractional_increment`` (d̄/|reference|),
        ``cones`` (N × p paired differences), ``sigma_increment``,
        ``sigma_increment_jackknife``, ``sigma_increment_scatter`` (None with one cone),
        ``sigma_increment_method``, ``sigma_increment_dof`` (N − 1; None with one cone),
        ``increment_t`` (d̄/σ), ``significance`` (its Gaussian equivalent),
        ``max_abs_significance``, ``consistent_with_zero`` (every bin within n),
        ``in_total_sigma`` (d̄/σ_tot) and ``max_abs_in_total_sigma`` when ``sigma_total``
        is given, ``n_cones``.
    """
    rules = rules or VerdictRules()
    upper, lower = list(upper), list(lower)
    if not upper or len(upper) != len(lower):
        raise InputError(f"{where}: a paired difference needs the same non-zero number of "
                         f"cones in both variants ({len(upper)} and {len(lower)})")
    a, b = _matrix(upper, "the upper variant", where), _matrix(lower, "the lower variant",
                                                              where)
    if a.shape != b.shape:
        raise InputError(f"{where}: the variants have {a.shape[1]} and {b.shape[1]} bins")
    n, p = a.shape
    ref = np.asarray(reference, dtype=np.float64).ravel()
    if ref.size != p:
        raise InputError(f"{where}: reference has {ref.size} bins, the cones {p}")
    d = a - b
    inc = d.mean(axis=0)

    shapes = {None if m.delete_one is None else m.delete_one.shape for m in upper + lower}
    paired_jk = same_regions and len(shapes) == 1 and None not in shapes
    if paired_jk:
        var_jk = np.mean([np.diag(np.atleast_2d(jackknife_covariance(
            np.asarray(u.delete_one) - np.asarray(lo.delete_one))))
            for u, lo in zip(upper, lower, strict=True)], axis=0)
        one_cone_method = METHOD_SAME_REGIONS
    else:
        var_jk = np.mean([_jackknife_var(u) + _jackknife_var(lo)
                          for u, lo in zip(upper, lower, strict=True)], axis=0)
        one_cone_method = METHOD_OTHER_REGIONS
    var_jk = np.clip(var_jk, 0, None) / float(n if cones_independent
                                               else min(rules.effective_cones, n))
    var_sc = d.var(axis=0, ddof=1) / n if n >= 2 else None
    if var_sc is None:
        var, dof, method, n_eff = var_jk, math.inf, one_cone_method, 1.0
    else:
        var, dof, method, n_eff = var_sc, float(n - 1), METHOD_SCATTER, float(n)
    sig = np.sqrt(var)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(sig > 0, inc / np.where(sig > 0, sig, 1.0),
                     np.where(inc == 0, 0.0, np.sign(inc) * np.inf))
        frac = np.where(ref != 0, inc / np.abs(np.where(ref != 0, ref, 1.0)), np.nan)
    signif = gaussian_equivalent(t, dof)
    finite = np.abs(signif[np.isfinite(signif)])
    max_sig = np.inf if np.isinf(signif).any() else (float(finite.max()) if finite.size
                                                     else np.nan)
    out: dict[str, Any] = {
        "increment": inc,
        "fractional_increment": frac,
        "cones": d,
        "sigma_increment": sig,
        "sigma_increment_jackknife": np.sqrt(var_jk),
        "sigma_increment_scatter": None if var_sc is None else np.sqrt(var_sc),
        "sigma_increment_method": method,
        "n_eff_cones": n_eff,
        "significance": signif,
        "max_abs_significance": max_sig,
        "consistent_with_zero": bool(np.all(np.abs(signif) <= rules.n_sigma_offset)),
        "increment_t": t,
        "sigma_increment_dof": dof if math.isfinite(dof) else None,
        "n_cones": n,
    }
    if sigma_total is not None:
        st = np.asarray(sigma_total, dtype=np.float64).ravel()
        if st.size == p:
            with np.errstate(divide="ignore", invalid="ignore"):
                zt = np.where(st > 0, inc / np.where(st > 0, st, 1.0), np.nan)
            out["in_total_sigma"] = zt
            fin = np.abs(zt[np.isfinite(zt)])
            out["max_abs_in_total_sigma"] = float(fin.max()) if fin.size else np.nan
    return jsonable(out)


__all__ = ["INCREMENT_ERROR_TEXT", "METHOD_OTHER_REGIONS", "METHOD_SAME_REGIONS", "METHOD_SCATTER",
           "paired_difference"]
