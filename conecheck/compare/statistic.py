"""Box versus cones for one sample, redshift cut and statistic (docs/design.md §8).

:func:`compare_statistic` works from :class:`~conecheck.stats.base.Measurement` objects
only, so it never needs to know which statistic it holds. The quantities and the verdict
rules are those of :mod:`conecheck.compare.rules`.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..stats.base import LOS_VARIANCE, SAMPLING_TRIALS, SAMPLING_VARIANCE, Measurement
from .chi2 import bias_chi2
from .comparison import Comparison
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


@dataclass
class ErrorBudget:
    """Every number of a comparison before its verdict (see :mod:`.rules`).

    Arrays are per bin; ``cones`` is (N, p). ``dead`` bins have neither variance nor offset,
    ``hard`` bins an offset with zero variance.
    """

    box: NDArray[np.float64]
    bins: NDArray[np.float64]
    cones: NDArray[np.float64]
    cone_mean: NDArray[np.float64]
    cov_box: NDArray[np.float64]
    cov_cone: NDArray[np.float64]
    offset: NDArray[np.float64]
    fractional_offset: NDArray[np.float64]
    sigma_box: NDArray[np.float64]
    sigma_cone: NDArray[np.float64]
    sigma_total: NDArray[np.float64]
    scatter: NDArray[np.float64] | None
    z: NDArray[np.float64]
    dead: NDArray[np.bool_]
    hard: NDArray[np.bool_]
    offset_error: OffsetError
    offset_t: NDArray[np.float64]
    significance: NDArray[np.float64]
    detectable: NDArray[np.float64]
    detectable_fraction: NDArray[np.float64]
    uniform_fraction: float
    chi: Any
    n_regions_box: int
    n_regions_cone: int
    notes: list[str]

    @property
    def n_cones(self) -> int:
        return int(self.cones.shape[0])


@dataclass
class Decision:
    """The verdict of an :class:`ErrorBudget` under the rules, with the bins behind it."""

    verdict: str
    reasons: list[str]
    failing_bins: NDArray[np.int64]
    noisy_bins: NDArray[np.int64]
    real_small_bins: NDArray[np.int64]
    chi2_fail: bool
    cones_needed: int | None


def compare_statistic(box: Measurement, cones: Sequence[Measurement],
                      rules: VerdictRules | None = None, cones_independent: bool = False, *,
                      where: str = "") -> Comparison:
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
    Comparison
        Every quantity of the comparison and the verdict, typed (see
        :class:`~conecheck.compare.comparison.Comparison`); ``to_dict()`` gives the
        statistic's entry of results.json.

    Raises
    ------
    InputError
        Missing jackknife vectors, mismatched bins, non-finite values, or too few
        jackknife regions for the χ² (n ≤ p + 2; the message names the minimum p + 3).
    """
    rules = rules or VerdictRules()
    where = where or f"statistic {box.name}"
    budget = error_budget(box, cones, rules, cones_independent, where)
    decision = decide(budget, rules, box.bin_label)
    return _comparison(box, budget, decision, rules, cones_independent)


def error_budget(box: Measurement, cones: Sequence[Measurement], rules: VerdictRules,
                 cones_independent: bool, where: str) -> ErrorBudget:
    """Offset, total error, the offset's own error σ_Δ, detectable offsets and the bias χ²
    of one statistic (no verdict yet)."""
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
    detect = np.fmax(rules.z_fail * sig_tot, err.smallest_significant(rules.n_sigma_offset))
    with np.errstate(divide="ignore", invalid="ignore"):
        detect_frac = np.where(b != 0, detect / np.abs(np.where(b != 0, b, 1.0)), np.nan)
    fin_det = detect_frac[np.isfinite(detect_frac) & ~dead]
    uniform = float(fin_det.min()) if fin_det.size else np.nan

    n_regions = int(min([k_box, *k_cones]))
    chi = bias_chi2(delta, ctot, n_regions, use=~zero_var, where=where)
    notes.extend(chi.notes)
    return ErrorBudget(box=b, bins=bins, cones=cmat, cone_mean=cbar, cov_box=cbox,
                       cov_cone=ccone, offset=delta, fractional_offset=frac, sigma_box=sig_box,
                       sigma_cone=sig_cone, sigma_total=sig_tot, scatter=scatter, z=z,
                       dead=dead, hard=hard, offset_error=err, offset_t=t_off,
                       significance=signif, detectable=detect, detectable_fraction=detect_frac,
                       uniform_fraction=uniform, chi=chi, n_regions_box=int(k_box),
                       n_regions_cone=int(min(k_cones)), notes=notes)


def decide(budget: ErrorBudget, rules: VerdictRules, bin_label: str = "") -> Decision:
    """The verdict of an error budget under ``rules``, with its reasons in words."""
    z, hard, dead = budget.z, budget.hard, budget.dead
    finite_z = np.isfinite(z)
    outside = (np.abs(np.where(finite_z, z, 0.0)) > rules.z_fail) | hard
    significant = np.abs(budget.significance) > rules.n_sigma_offset
    fail_bins = np.flatnonzero(outside & significant & ~hard)
    noisy_bins = np.flatnonzero(outside & ~significant & ~hard)
    small_bins = np.flatnonzero(~outside & significant & ~dead)
    chi = budget.chi
    chi2_fail = bool(rules.check_chi2 and np.isfinite(chi.p_value) and chi.p_value < rules.p_fail)
    needed = _cones_needed(budget.offset, budget.offset_error, noisy_bins, rules,
                           budget.n_cones)
    verdict, reasons = _verdict(
        rules, bin_label, budget.bins, budget.fractional_offset, z, budget.significance,
        budget.offset_error, budget.n_cones, chi, chi2_fail, fail_bins, noisy_bins,
        small_bins, hard, needed)
    return Decision(verdict, reasons, fail_bins, noisy_bins, small_bins, chi2_fail, needed)


def _comparison(box: Measurement, bud: ErrorBudget, dec: Decision, rules: VerdictRules,
                cones_independent: bool) -> Comparison:
    err, chi, n_cones = bud.offset_error, bud.chi, bud.n_cones
    scatter = bud.scatter
    s_indep = None if scatter is None else np.diag(bud.cov_box) + np.diag(scatter) / n_cones
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = (None if scatter is None else
                 np.where(np.diag(bud.cov_cone) > 0,
                          np.diag(scatter) / np.diag(bud.cov_cone), np.nan))
    abs_z = np.abs(bud.z[np.isfinite(bud.z)])
    return Comparison(
        name=box.name, verdict=dec.verdict, reasons=dec.reasons, notes=list(bud.notes),
        bins=bud.bins,
        bin_edges=None if box.bin_edges is None else np.asarray(box.bin_edges, float),
        bin_label=box.bin_label, value_label=box.value_label, box=bud.box,
        cone_mean=bud.cone_mean, cones=bud.cones, offset=bud.offset,
        fractional_offset=bud.fractional_offset, sigma_box=bud.sigma_box,
        sigma_cone=bud.sigma_cone, sigma_total=bud.sigma_total,
        cone_scatter=None if scatter is None else np.sqrt(np.clip(np.diag(scatter), 0, None)),
        correlation_box=_correlation(bud.cov_box), correlation_cone=_correlation(bud.cov_cone),
        cone_scatter_ratio=ratio, z=bud.z,
        # Infinite (→ null in JSON) when a bin has an offset with zero error.
        max_abs_z=np.inf if bud.hard.any() else float(abs_z.max()) if abs_z.size else np.nan,
        chi2=chi.chi2, dof=int(chi.dof), chi2_per_dof=chi.chi2 / chi.dof if chi.dof else np.nan,
        p_value=chi.p_value, hartlap_factor=chi.hartlap,
        n_regions=int(min(bud.n_regions_box, bud.n_regions_cone)),
        n_regions_box=bud.n_regions_box, n_regions_cone=bud.n_regions_cone,
        chi2_bins=np.asarray(chi.used, dtype=np.int64), condition_number=chi.condition,
        pseudo_inverse=bool(chi.pseudo_inverse), sigma_offset=err.sigma,
        sigma_offset_method=err.method,
        sigma_offset_dof=jsonable(err.dof),
        sigma_offset_los=np.sqrt(err.los_var),
        sigma_offset_independent=None if s_indep is None
        else np.sqrt(np.clip(s_indep, 0, None)),
        n_eff_cones=float(n_cones) if n_cones >= 2 else float(min(rules.effective_cones,
                                                                    n_cones)),
        offset_t=bud.offset_t, significance=bud.significance, detectable_offset=bud.detectable,
        detectable_fractional_offset=bud.detectable_fraction,
        detectable_uniform_fraction=bud.uniform_fraction, failing_bins=dec.failing_bins,
        noisy_bins=dec.noisy_bins, real_small_bins=dec.real_small_bins,
        cones_needed=dec.cones_needed, n_cones=n_cones,
        cones_independent=bool(cones_independent))


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
