"""Box versus cones for one sample, redshift cut and statistic (docs/design.md §8).

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
from ..stats.base import LOS_VARIANCE, SAMPLING_TRIALS, SAMPLING_VARIANCE, Measurement
from .chi2 import bias_chi2
from .jsonsafe import jsonable
from .offset_error import OffsetError, cones_needed, offset_error
from .rules import FAIL, PASS, WARN, VerdictRules

log = logging.getLogger(__name__)

#: Relative size below which a standard deviation or an offset counts as zero.
_ZERO = 1e-10


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


def _correlation(cov: np.ndarray) -> np.ndarray:
    """Correlation matrix C_ij / √(C_ii C_jj); NaN in the rows of zero-variance bins."""
    sd = np.sqrt(np.clip(np.diag(cov), 0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(np.outer(sd, sd) > 0, cov / np.outer(sd, sd), np.nan)


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
        True only when the cones are independent realisations (one box each): σ_Δ then
        includes the box's own variance (see :mod:`conecheck.compare.offset_error`).
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
        one cone), ``cone_scatter_ratio`` (diag S / diag C_cone), ``z`` (Δ/σ_tot),
        ``max_abs_z``, ``chi2`` (Hartlap-corrected), ``dof``, ``chi2_per_dof``, ``p_value``
        (Hotelling's law), ``hartlap_factor``, ``n_regions``, ``n_regions_box``,
        ``n_regions_cone``, ``chi2_bins``, ``condition_number``, ``pseudo_inverse``,
        ``sigma_offset`` (σ_Δ), ``sigma_offset_method``, ``sigma_offset_dof`` (per bin: N − 1,
        fewer where the box's line-of-sight spread weighs in, None for the one-cone bound),
        ``sigma_offset_los`` (that spread's part of σ_Δ), ``sigma_offset_independent``
        (diag(C_box) + diag(S)/N, for reference), ``n_eff_cones``, ``offset_t`` (Δ/σ_Δ),
        ``significance`` (its Gaussian equivalent, what the rules threshold),
        ``detectable_offset`` (per bin, the smallest |Δ| that would fail: the larger of
        z_fail σ_tot and the significance threshold),
        ``detectable_fractional_offset`` (its ratio to |b|),
        ``detectable_uniform_fraction`` (the smallest fractional bias common to every bin
        that would fail), ``failing_bins``, ``noisy_bins`` (outside the error bar, not
        significant), ``real_small_bins`` (significant, inside the error bar),
        ``cones_needed`` (cones that would settle the noisy bins, None when none would),
        ``n_cones``, ``cones_independent``, ``correlation_box`` and ``correlation_cone``
        (p × p correlation matrices of C_box and C_cone; None where a bin has no variance).

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

    cbar = cmat.mean(axis=0)
    ccone = np.mean(ccovs, axis=0)
    ctot = cbox + ccone
    delta = cbar - b
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(b != 0, delta / np.where(b != 0, b, 1.0), np.nan)
    sig_box = np.sqrt(np.clip(np.diag(cbox), 0, None))
    sig_cone = np.sqrt(np.clip(np.diag(ccone), 0, None))
    sig_tot = np.sqrt(np.clip(np.diag(ctot), 0, None))
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

    err = offset_error(np.diag(cbox), cmat, np.diag(ccone),
                       cones_independent=cones_independent,
                       effective_cones=rules.effective_cones,
                       box_sampling_var=_extra_variance(box, SAMPLING_VARIANCE, p, where),
                       box_los_var=_extra_variance(box, LOS_VARIANCE, p, where),
                       cone_floor_var=_binomial_floor(b, cones, p))
    if cones_independent and n_cones < 2:
        msg = ("cones stated independent but there is only one cone: σ_Δ falls back to "
               "the one-cone upper bound")
        notes.append(msg)
        log.warning("%s: %s", where, msg)
    t_off, signif = err.significance(delta)
    if n_cones >= 2 and err.fallback.any():
        notes.append(f"bins {np.flatnonzero(err.fallback).tolist()}: every cone gives the same "
                     f"value, so their scatter says nothing; σ_Δ there is the one-cone upper "
                     f"bound √(C_box + C_cone/N_eff)")
    s_indep = None if scatter is None else np.diag(cbox) + np.diag(scatter) / n_cones
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = (None if scatter is None else
                 np.where(np.diag(ccone) > 0, np.diag(scatter) / np.diag(ccone), np.nan))
    detect = np.fmax(rules.z_fail * sig_tot, err.smallest_significant(rules.n_sigma_offset))
    with np.errstate(divide="ignore", invalid="ignore"):
        detect_frac = np.where(b != 0, detect / np.abs(np.where(b != 0, b, 1.0)), np.nan)
    fin_det = detect_frac[np.isfinite(detect_frac) & ~dead]
    uniform = float(fin_det.min()) if fin_det.size else np.nan

    n_regions = int(min([k_box, *k_cones]))
    chi = bias_chi2(delta, ctot, n_regions, use=~zero_var, where=where)
    notes.extend(chi.notes)

    finite_z = np.isfinite(z)
    outside = (np.abs(np.where(finite_z, z, 0.0)) > rules.z_fail) | hard
    significant = np.abs(signif) > rules.n_sigma_offset
    fail_bins = np.flatnonzero(outside & significant & ~hard)
    noisy_bins = np.flatnonzero(outside & ~significant & ~hard)
    small_bins = np.flatnonzero(~outside & significant & ~dead)
    chi2_fail = bool(rules.check_chi2 and np.isfinite(chi.p_value) and chi.p_value < rules.p_fail)
    needed = _cones_needed(delta, err, noisy_bins, rules, n_cones)
    verdict, reasons = _verdict(
        rules, box.bin_label, bins, frac, z, signif, err, n_cones, chi, chi2_fail,
        fail_bins, noisy_bins, small_bins, hard, needed)

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
        "correlation_box": _correlation(cbox),
        "correlation_cone": _correlation(ccone),
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
        "sigma_offset": err.sigma,
        "sigma_offset_method": err.method,
        "sigma_offset_dof": err.dof,
        "sigma_offset_los": np.sqrt(err.los_var),
        "sigma_offset_independent": None if s_indep is None
        else np.sqrt(np.clip(s_indep, 0, None)),
        "n_eff_cones": float(n_cones) if n_cones >= 2 else float(min(rules.effective_cones,
                                                                       n_cones)),
        "offset_t": t_off,
        "significance": signif,
        "detectable_offset": detect,
        "detectable_fractional_offset": detect_frac,
        "detectable_uniform_fraction": uniform,
        "failing_bins": fail_bins,
        "noisy_bins": noisy_bins,
        "real_small_bins": small_bins,
        "cones_needed": needed,
        "n_cones": n_cones,
        "cones_independent": bool(cones_independent),
    }
    return jsonable(out)


def _extra_variance(box: Measurement, key: str, p: int, where: str
                    ) -> NDArray[np.float64] | None:
    raw = (box.extra or {}).get(key)
    if raw is None:
        return None
    v = np.asarray(raw, dtype=np.float64).ravel()
    if v.size != p or not np.all(np.isfinite(v)) or np.any(v < 0):
        raise InputError(f"{where}: the box's {key} must be {p} finite, non-negative numbers")
    return v


def _binomial_floor(b: NDArray[np.float64], cones: Sequence[Measurement],
                    p: int) -> NDArray[np.float64] | None:
    """Variance of one cone's value if its trials were binomial at the box's probabilities."""
    trials = [(c.extra or {}).get(SAMPLING_TRIALS) for c in cones]
    if any(t is None for t in trials):
        return None
    n = np.mean([np.asarray(t["n"], dtype=np.float64) for t in trials], axis=0)
    width = np.asarray(trials[0]["width"], dtype=np.float64)
    if n.size != p or width.size != p or np.any(n <= 0) or np.any(width <= 0):
        return None
    f = np.clip(b * width, 0.0, 1.0)
    return f * (1.0 - f) / n / width ** 2


def _cones_needed(delta: NDArray[np.float64], err: OffsetError, noisy: NDArray[np.int64],
                  rules: VerdictRules, n_cones: int) -> int | None:
    """Cones that would make every noisy bin's offset significant (if it stays as measured)."""
    if noisy.size == 0 or err.scatter_sd is None:
        return None
    counts = [cones_needed(float(delta[i]), float(err.scatter_sd[i]), rules.n_sigma_offset,
                           n_cones, float(err.box_var[i]), float(err.los_var[i]))
              for i in noisy
              if not err.fallback[i]]
    known = [c for c in counts if c is not None]
    # the cheapest bin to settle decides: one significant bin outside the error bar fails
    return min(known) if known else None


def _verdict(rules: VerdictRules, label: str, bins: NDArray[np.float64],
             frac: NDArray[np.float64], z: NDArray[np.float64], signif: NDArray[np.float64],
             err: OffsetError, n_cones: int, chi: Any, chi2_fail: bool,
             fail_bins: NDArray[np.int64], noisy_bins: NDArray[np.int64],
             small_bins: NDArray[np.int64], hard: NDArray[np.bool_],
             needed: int | None) -> tuple[str, list[str]]:
    """The verdict and its reasons in words (see the rules in :mod:`.rules`)."""
    reasons: list[str] = []
    if fail_bins.size:
        w = fail_bins[np.argmax(np.abs(z[fail_bins]))]
        reasons.append(f"{_bins_text(fail_bins, bins, label)} outside the total error bar "
                       f"(|z| > {rules.z_fail:g}) with a real offset "
                       f"(> {rules.n_sigma_offset:g} σ_Δ); largest at "
                       f"{_describe(w, bins, label)}: {_pct(frac[w])}, {abs(z[w]):.2f} σ_tot, "
                       f"{abs(signif[w]):.1f} σ_Δ")
    if chi2_fail:
        reasons.append(f"bias χ² = {chi.chi2:.2f} for {chi.dof} bins, p = {chi.p_value:.2g} "
                       f"< {rules.p_fail:g} (Hotelling's law for the estimated covariance)")
    warn_reasons = []
    if hard.any():
        warn_reasons.append(f"{_bins_text(np.flatnonzero(hard), bins, label)}: an offset with "
                            f"zero error in box and cones")
    if noisy_bins.size:
        w = noisy_bins[np.argmax(np.abs(z[noisy_bins]))]
        if err.scatter_sd is None:
            advice = "run at least 3 cones so that the offset's own error can be measured"
        elif needed is not None:
            advice = (f"about {needed} cones in all (this run has {n_cones}) would tell it "
                      f"apart from noise if the offset stays as measured")
        else:
            advice = ("more cones would not settle it at this offset; it is consistent "
                      "with zero")
        warn_reasons.append(f"{_bins_text(noisy_bins, bins, label)} outside the total error "
                            f"bar (|z| > {rules.z_fail:g}) but not significant "
                            f"(< {rules.n_sigma_offset:g} σ_Δ); largest at "
                            f"{_describe(w, bins, label)}: {_pct(frac[w])}, "
                            f"{abs(z[w]):.2f} σ_tot, {abs(signif[w]):.1f} σ_Δ. "
                            f"The run cannot tell: {advice}")
    if n_cones < rules.min_cones:
        warn_reasons.append(f"Only {n_cones} cone(s), fewer than min_cones = {rules.min_cones}: "
                            f"the offset's own error rests on "
                            f"{'no' if n_cones < 2 else n_cones - 1} degree(s) of freedom")
    if fail_bins.size or chi2_fail:
        return FAIL, reasons + warn_reasons
    if warn_reasons:
        return WARN, warn_reasons
    finite = np.isfinite(z)
    mz = np.nanmax(np.abs(z)) if finite.any() else np.nan
    reasons.append(f"every bin within {rules.z_fail:g} σ_tot (max |z| = {mz:.2f})"
                   + (f"; bias χ² p = {chi.p_value:.2g}" if np.isfinite(chi.p_value) else ""))
    if small_bins.size:
        w = small_bins[np.argmax(np.abs(z[small_bins]))]
        reasons.append(f"{_bins_text(small_bins, bins, label)} show a real offset that is too "
                       f"small to matter for a fit: largest at {_describe(w, bins, label)}, "
                       f"{_pct(frac[w])}, {abs(z[w]):.2f} σ_tot, {abs(signif[w]):.1f} σ_Δ")
    return PASS, reasons


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
