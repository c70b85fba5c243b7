"""Box versus cones for one sample, redshift cut and statistic (design.md §8).

:func:`compare_statistic` works from :class:`~conecheck.stats.base.Measurement` objects
only, so it never needs to know which statistic it holds. The quantities and the verdict
rules are those of :mod:`conecheck.compare.rules`.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..stats.base import Measurement
from .chi2 import bias_chi2
from .jsonsafe import jsonable
from .rules import FAIL, PASS, WARN, VerdictRules

log = logging.getLogger(__name__)

#: Relative size below which a standard deviation or an offset counts as zero.
_ZERO = 1e-10

SIGMA_OFFSET_INDEPENDENT = "independent cones: diag(C_box) + diag(S_cones)/N_cones"
SIGMA_OFFSET_SHARED = "shared structure: diag(C_box) + diag(C_cone)/N_eff"


def _values(m: Measurement, what: str, where: str, p: int | None) -> NDArray[np.float64]:
    v = np.asarray(m.value, dtype=np.float64).ravel()
    if p is not None and v.size != p:
        raise InputError(f"{where}: {what} has {v.size} bins, the box has {p}")
    bad = np.flatnonzero(~np.isfinite(v))
    if bad.size:
        raise InputError(f"{where}: {what} value in bin {bad[0]} is not finite ({v[bad[0]]!r})")
    return v


def _covariance(m: Measurement, what: str, where: str) -> tuple[NDArray[np.float64], int]:
    if m.delete_one is None:
        raise InputError(f"{where}: {what} has no jackknife delete-one vectors; the comparison "
                         f"needs a jackknife covariance for the box and every cone")
    try:
        cov = m.covariance
    except InputError as exc:
        raise InputError(f"{where}: {what}: {exc}") from None
    return np.atleast_2d(cov), m.n_regions


def _check_bins(box: Measurement, cone: Measurement, i: int, where: str) -> None:
    if cone.name != box.name:
        raise InputError(f"{where}: cone {i} holds statistic {cone.name!r}, the box {box.name!r}")
    bb, cb = np.asarray(box.bins, dtype=float), np.asarray(cone.bins, dtype=float)
    if bb.shape != cb.shape or not np.allclose(bb, cb, rtol=1e-6, atol=1e-12):
        raise InputError(f"{where}: cone {i} was measured in different bins from the box "
                         f"({cb.tolist()} against {bb.tolist()})")


def _bin_name(label: str) -> tuple[str, str]:
    m = re.match(r"\s*([^\[]*?)\s*(?:\[(.*)\])?\s*$", label or "")
    name, unit = (m.group(1), m.group(2) or "") if m else ("", "")
    return name.split(" (")[0].strip(), unit.strip()


def _describe(i: int, bins: NDArray[np.float64], label: str) -> str:
    name, unit = _bin_name(label)
    if bins.size == 1 and not name:
        return "the single bin"
    if not name:
        return f"bin {i}"
    return f"bin {i} ({name} = {bins[i]:.3g}{' ' + unit if unit else ''})"


def compare_statistic(box: Measurement, cones: Sequence[Measurement],
                      rules: VerdictRules | None = None, cones_independent: bool = False, *,
                      where: str = "") -> dict[str, Any]:
    """Compare one statistic measured on the box and on N cones; give it a verdict.

    Parameters
    ----------
    box : Measurement
        The box measurement b with jackknife delete-one vectors (K_box, p).
    cones : sequence of Measurement
        The same statistic on each cone, in the same bins, with delete-one vectors.
    rules : VerdictRules, optional
        Thresholds (defaults when omitted).
    cones_independent : bool
        True only when the cones are independent realisations (e.g. one box each). Then the
        offset's own error uses the cone-to-cone scatter over N; otherwise the conservative
        shared-structure form diag(C_box) + diag(C_cone)/N_eff (``rules.effective_cones``).
    where : str
        Context for messages, e.g. ``"sample bright, cut z0.10-0.20"``.

    Returns
    -------
    dict
        JSON-safe (lists of floats, NaN → None). Keys: ``verdict``, ``reasons``, ``notes``,
        ``name``, ``bins``, ``bin_edges``, ``bin_label``, ``value_label``, ``box``,
        ``cone_mean``, ``cones`` (N × p), ``offset`` (Δ = c̄ − b), ``fractional_offset``
        (Δ/b), ``sigma_box`` (√diag C_box), ``sigma_cone`` (√diag C_cone, the mean single-
        cone jackknife), ``sigma_total`` (√diag C_tot), ``cone_scatter`` (√diag S, None with
        one cone), ``cone_scatter_ratio`` (diag S / diag C_cone: 1 for independent full
        realisations, below 1 when cones share structure), ``z``, ``max_abs_z``,
        ``chi2``, ``dof``, ``chi2_per_dof``, ``p_value``, ``hartlap_factor``,
        ``n_regions`` (n of the Hartlap factor: min of box and cone regions),
        ``n_regions_box``, ``n_regions_cone``, ``chi2_bins`` (bins in the χ²),
        ``condition_number``, ``pseudo_inverse``, ``sigma_offset`` (σ_Δ used by the
        verdict), ``sigma_offset_method`` (formula used), ``sigma_offset_independent``
        (diag(C_box) + diag(S)/N, for reference; None with one cone), ``n_eff_cones``,
        ``significance`` (Δ/σ_Δ), ``detectable_offset`` (detection_threshold × σ_Δ),
        ``detectable_fractional_offset`` (its ratio to |b|), ``detection_threshold``,
        ``failing_bins``, ``noisy_bins``, ``n_cones``, ``cones_independent``.

    Raises
    ------
    InputError
        Missing jackknife vectors, mismatched bins, non-finite values, or too few
        jackknife regions for the χ² (n ≤ p + 2; the message names the minimum p + 3).
    """
    rules = rules or VerdictRules()
    where = where or f"statistic {box.name}"
    cones = list(cones)
    if not cones:
        raise InputError(f"{where}: no cone measurements to compare with the box")
    b = _values(box, "box", where, None)
    p = b.size
    bins = np.asarray(box.bins, dtype=np.float64).ravel()
    cbox, k_box = _covariance(box, "box", where)
    cvals, ccovs, k_cones = [], [], []
    for i, cone in enumerate(cones):
        _check_bins(box, cone, i, where)
        cvals.append(_values(cone, f"cone {i}", where, p))
        cov, k = _covariance(cone, f"cone {i}", where)
        ccovs.append(cov)
        k_cones.append(k)
    cmat = np.array(cvals)
    n_cones = len(cones)
    notes: list[str] = []
    reasons: list[str] = []

    cbar = cmat.mean(axis=0)
    ccone = np.mean(ccovs, axis=0)
    ctot = cbox + ccone
    delta = cbar - b
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(b != 0, delta / np.where(b != 0, b, 1.0), np.nan)
    sig_box = np.sqrt(np.clip(np.diag(cbox), 0, None))
    sig_cone = np.sqrt(np.clip(np.diag(ccone), 0, None))
    var_tot = np.clip(np.diag(ctot), 0, None)
    sig_tot = np.sqrt(var_tot)
    scatter = (np.atleast_2d(np.cov(cmat, rowvar=False, ddof=1)) if n_cones >= 2 else None)
    if scatter is None:
        notes.append("one cone only: the cone-to-cone scatter is undefined")

    # Bins with no error at all cannot enter the χ²; an offset there is flagged separately.
    scale = np.maximum(np.abs(b), np.abs(cbar))
    zero_var = sig_tot <= _ZERO * scale
    zero_off = np.abs(delta) <= _ZERO * scale
    dead = zero_var & zero_off
    hard = zero_var & ~zero_off
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(zero_var, np.where(hard, np.sign(delta) * np.inf, np.nan),
                     delta / np.where(zero_var, 1.0, sig_tot))
    if dead.any():
        notes.append(f"bins {np.flatnonzero(dead).tolist()} have zero variance in box and "
                     f"cones and no offset; dropped from the χ²")
    if hard.any():
        msg = (f"bins {np.flatnonzero(hard).tolist()} have zero variance in box and cones but "
               f"a non-zero offset; dropped from the χ² (z is infinite)")
        notes.append(msg)
        log.warning("%s: %s", where, msg)

    # The offset's own error (see the module notes of .rules for the two forms).
    s_indep = None if scatter is None else np.diag(cbox) + np.diag(scatter) / n_cones
    scatter_missing = False
    if cones_independent and s_indep is not None:
        var_off, method, n_eff = s_indep, SIGMA_OFFSET_INDEPENDENT, float(n_cones)
    else:
        n_eff = float(min(rules.effective_cones, n_cones))
        var_off, method = np.diag(cbox) + np.diag(ccone) / n_eff, SIGMA_OFFSET_SHARED
        if cones_independent:
            scatter_missing = True
            msg = ("cones stated independent but there is only one cone: σ_Δ falls back to "
                   "the shared-structure form with N_eff = 1")
            notes.append(msg)
            log.warning("%s: %s", where, msg)
    sig_off = np.sqrt(np.clip(var_off, 0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        signif = np.where(sig_off > 0, delta / np.where(sig_off > 0, sig_off, 1.0),
                          np.sign(delta) * np.inf * ~zero_off)
        ratio = (None if scatter is None else
                 np.where(np.diag(ccone) > 0, np.diag(scatter) / np.diag(ccone), np.nan))
    detect = rules.detection_threshold * sig_off
    with np.errstate(divide="ignore", invalid="ignore"):
        detect_frac = np.where(b != 0, detect / np.abs(np.where(b != 0, b, 1.0)), np.nan)

    n_regions = int(min([k_box, *k_cones]))
    chi = bias_chi2(delta, ctot, n_regions, use=~zero_var, where=where)
    notes.extend(chi.notes)

    # Verdict.
    finite_z = np.isfinite(z)
    outside = (np.abs(np.where(finite_z, z, 0.0)) > rules.z_fail) | hard
    significant = np.abs(delta) > rules.n_sigma_offset * sig_off
    fail_bins = np.flatnonzero(outside & significant & ~hard)
    noisy_bins = np.flatnonzero(outside & ~significant)
    label = box.bin_label
    if fail_bins.size:
        w = fail_bins[np.argmax(np.abs(z[fail_bins]))]
        reasons.append(f"{_bins_text(fail_bins, bins, label)} outside the total error bar "
                       f"(|z| > {rules.z_fail:g}) with a significant offset "
                       f"(> {rules.n_sigma_offset:g} σ_Δ); largest at "
                       f"{_describe(w, bins, label)}: {_pct(frac[w])}, {abs(z[w]):.2f} σ_tot, "
                       f"{abs(signif[w]):.1f} σ_Δ")
    chi2_fail = bool(rules.check_chi2 and np.isfinite(chi.p_value) and chi.p_value < rules.p_fail)
    if chi2_fail:
        reasons.append(f"bias χ² = {chi.chi2:.2f} for {chi.dof} bins, p = {chi.p_value:.2g} "
                       f"< {rules.p_fail:g}")
    warn_reasons = []
    if hard.any():
        warn_reasons.append(f"{_bins_text(np.flatnonzero(hard), bins, label)}: an offset with "
                            f"zero error in box and cones")
    soft = np.array([i for i in noisy_bins if not hard[i]], dtype=np.int64)
    if soft.size:
        w = soft[np.argmax(np.abs(z[soft]))]
        warn_reasons.append(f"{_bins_text(soft, bins, label)} outside the total error bar "
                            f"(|z| > {rules.z_fail:g}) but not significant "
                            f"(< {rules.n_sigma_offset:g} σ_Δ); largest at "
                            f"{_describe(w, bins, label)}: {_pct(frac[w])}, "
                            f"{abs(z[w]):.2f} σ_tot, {abs(signif[w]):.1f} σ_Δ. The run is too "
                            f"noisy to tell: more independent cones or a larger or second box "
                            f"would settle it")
    if n_cones < rules.min_cones:
        warn_reasons.append(f"Only {n_cones} cone(s), fewer than min_cones = {rules.min_cones}: "
                            f"cone-to-cone scatter "
                            f"{'undefined' if n_cones < 2 else 'poorly known'}")
    if scatter_missing:
        warn_reasons.append("cones stated independent, but one cone gives no scatter")
    if fail_bins.size or chi2_fail:
        verdict = FAIL
        reasons.extend(warn_reasons)
    elif warn_reasons:
        verdict = WARN
        reasons.extend(warn_reasons)
    else:
        verdict = PASS
        mz = np.nanmax(np.abs(z)) if finite_z.any() else np.nan
        reasons.append(f"every bin within {rules.z_fail:g} σ_tot (max |z| = {mz:.2f})"
                       + (f"; bias χ² p = {chi.p_value:.2g}" if np.isfinite(chi.p_value)
                          else ""))

    abs_z = np.abs(z[finite_z])
    out = {
        "name": box.name,
        "verdict": verdict,
        "reasons": reasons,
        "notes": notes,
        "bins": bins,
        "bin_edges": None if box.bin_edges is None else np.asarray(box.bin_edges, float),
        "bin_label": box.bin_label,
        "value_label": box.value_label,
        "box": b,
        "cone_mean": cbar,
        "cones": cmat,
        "offset": delta,
        "fractional_offset": frac,
        "sigma_box": sig_box,
        "sigma_cone": sig_cone,
        "sigma_total": sig_tot,
        "cone_scatter": None if scatter is None else np.sqrt(np.clip(np.diag(scatter), 0, None)),
        "cone_scatter_ratio": ratio,
        "z": z,
        # Infinite (→ null in JSON) when a bin has an offset with zero error.
        "max_abs_z": np.inf if hard.any() else float(abs_z.max()) if abs_z.size else np.nan,
        "chi2": chi.chi2,
        "dof": int(chi.dof),
        "chi2_per_dof": chi.chi2 / chi.dof if chi.dof else np.nan,
        "p_value": chi.p_value,
        "hartlap_factor": chi.hartlap,
        "n_regions": n_regions,
        "n_regions_box": int(k_box),
        "n_regions_cone": int(min(k_cones)),
        "chi2_bins": chi.used,
        "condition_number": chi.condition,
        "pseudo_inverse": chi.pseudo_inverse,
        "sigma_offset": sig_off,
        "sigma_offset_method": method,
        "sigma_offset_independent": None if s_indep is None
        else np.sqrt(np.clip(s_indep, 0, None)),
        "n_eff_cones": n_eff,
        "significance": signif,
        "detectable_offset": detect,
        "detectable_fractional_offset": detect_frac,
        "detection_threshold": rules.detection_threshold,
        "failing_bins": fail_bins,
        "noisy_bins": noisy_bins,
        "n_cones": n_cones,
        "cones_independent": bool(cones_independent),
    }
    return jsonable(out)


def _bins_text(idx: NDArray[np.int64], bins: NDArray[np.float64], label: str) -> str:
    """"bin 3" or "4 bins (0–2, 7)" with the bin variable's range when labelled."""
    idx = np.sort(np.asarray(idx, dtype=np.int64))
    if idx.size == 1:
        text = _describe(int(idx[0]), bins, label)
        return text[0].upper() + text[1:]
    runs, start = [], idx[0]
    for a, b in zip(idx[:-1], idx[1:], strict=True):
        if b != a + 1:
            runs.append((start, a))
            start = b
    runs.append((start, idx[-1]))
    text = ", ".join(f"{a}" if a == b else f"{a}–{b}" for a, b in runs)
    return f"{idx.size} bins ({text})"


def _pct(x: float) -> str:
    return "offset undefined (b = 0)" if not np.isfinite(x) else f"offset {100 * x:+.3g} %"
