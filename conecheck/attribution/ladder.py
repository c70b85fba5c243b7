"""The effect ladder: which survey effect causes the offset between box and cones.

The same cones are built again with the survey's effects switched on one at a time,
cumulatively: rung 0 is *geometry only* (every laddered effect off), each later rung adds
one step, and the last rung is the configured survey itself (so it reuses the main run's
cones). The default order is

    geometry only → + RSD → + redshift errors → + physical fluxes
    → + footprint edges and holes → + fibre collisions, uncorrected → + the configured
    correction

(``[ladder] order`` changes it). Effects not in the order stay as configured on every rung
(by default the flux limit, which defines the target list). A step is skipped, with a note,
when it would change nothing: an effect the survey switches off, zero redshift errors, no
flux limit, or the correction ``none``. When ``fibres`` is laddered without ``correction``,
the fibre step applies the configured correction.

Cost: rungs share randoms and RR per sky geometry, the last rung is the main run's cones,
and every measured piece is cached. Rungs before the footprint step see a round cap of the
footprint's effective area (``ladder.sky = "cap"``, default: cones as large as the survey's)
or the full sky (``"full_sky"``: 1/f_sky times larger cones that dominate the ladder's cost);
``benchmarks/bench_ladder.py`` measures it.

Every rung is compared with the same box measurements. Rung 0's *increment* is its offset
from the box; rung k's increment is the mean over cones of the paired differences
c_i(k) − c_i(k−1) (:func:`~conecheck.attribution.paired.paired_difference`), so the
increments add up exactly to the offset of the last rung (the bookkeeping identity,
checked and recorded). A statistic that fails on the full survey is attributed its
*first failing rung*: the rung from which it fails on every rung up to the full survey.
"""

from __future__ import annotations

import dataclasses
import logging
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..compare import Comparison, jsonable
from ..cone.settings import EffectSwitches, fibres_limit_targets
from ..config import RunConfig
from .paired import INCREMENT_ERROR_TEXT, paired_difference
from .variants import ConeVariants, Variant, ladder_pieces
from .verdicts import compare_variant, first_failing, statistic

log = logging.getLogger(__name__)

#: Rung name → (label, short label for tables).
STEP_LABELS = {
    "geometry": ("geometry only", "geometry"),
    "rsd": ("+ radial redshift-space distortions", "+RSD"),
    "redshift_errors": ("+ redshift errors", "+z errors"),
    "physical_fluxes": ("+ fluxes from true distances and velocities", "+fluxes"),
    "footprint": ("+ footprint edges and holes", "+footprint"),
    "flux_limit": ("+ flux limit", "+flux limit"),
    "fibres": ("+ fibre collisions", "+fibres"),
    "target_fill": ("+ faint targets the box lacks", "+faint targets"),
    "fibre_budget": ("+ fibre budget per tile", "+budget"),
    "correction": ("+ correction", "+correction"),
}
_EFFECT_FIELDS = ("rsd", "redshift_errors", "physical_fluxes", "footprint", "flux_limit",
                  "fibres", "target_fill", "fibre_budget")


@dataclass(frozen=True)
class Rung:
    """One rung of the ladder.

    Attributes
    ----------
    name : str
        ``geometry`` or the step added at this rung.
    label, short : str
        Descriptions for the report.
    variant : Variant
        Effects and correction of the cones on this rung.
    """

    name: str
    label: str
    short: str
    variant: Variant

    def describe(self, sky: str | None = None) -> dict[str, Any]:
        """Plain description for results.json (``sky``: how the variant's sky is named)."""
        return {"name": self.name, "label": self.label, "short": self.short,
                "effects": dataclasses.asdict(self.variant.effects),
                "correction": self.variant.correction_applied,
                "sky": sky or ("survey footprint" if self.variant.effects.footprint
                               else "full sky")}


def _changes_nothing(cfg: RunConfig, step: str) -> str | None:
    """Why ``step`` would leave the cones unchanged, or None."""
    if step in _EFFECT_FIELDS and not getattr(cfg.effects, step):
        return f"survey.effects.{step} is off in the configuration"
    e = cfg.redshift_errors
    zero_errors = (e.sigma_v_kms if e.model == "velocity" else e.sigma_z0) == 0
    if step == "redshift_errors" and zero_errors:
        return "the configured redshift errors are zero"
    if step == "physical_fluxes":
        thresholds = any(s.mag_max is not None for s in cfg.samples)
        if not thresholds and not (cfg.effects.flux_limit and cfg.shell.m_lim is not None):
            return "no flux limit or magnitude threshold uses the galaxies' fluxes"
        if not cfg.effects.rsd and (zero_errors or not cfg.effects.redshift_errors):
            return ("without RSD or redshift errors the measured redshift is the "
                    "cosmological one, so the fluxes do not change")
    if step == "target_fill":
        if cfg.targets.source != "fill":
            return "survey.targets.source is 'box': the target list is the box's"
        if not fibres_limit_targets(cfg.effects, cfg.tiles):
            return "neither fibre collisions nor a fibre budget act on the extra targets"
    if step == "fibre_budget" and not cfg.tiles.enabled:
        return "no tiles (survey.tiles.centres) are configured"
    if step == "flux_limit" and cfg.shell.m_lim is None:
        return "no flux limit (survey.shell.m_lim) is configured"
    if step == "correction":
        if not fibres_limit_targets(cfg.effects, cfg.tiles):
            return "fibre collisions and budget are off, so there is nothing to correct"
        if cfg.correction.name == "none":
            return "the configured correction is 'none' (the same cones as the fibre rung)"
    return None


def plan_ladder(cfg: RunConfig) -> tuple[list[Rung], list[dict[str, str]]]:
    """The rungs of ``cfg``'s ladder and the steps skipped (with the reason).

    The last rung always builds the configured survey.
    """
    skipped = []
    steps = []
    for step in cfg.ladder.order:
        why = _changes_nothing(cfg, step)
        if why:
            skipped.append({"step": step, "reason": why})
        else:
            steps.append(step)
    off = {f: False for f in _EFFECT_FIELDS if f in steps}
    effects: EffectSwitches = dataclasses.replace(cfg.effects, **off)
    correction = "none" if "correction" in steps else cfg.correction.name
    label, short = STEP_LABELS["geometry"]
    rungs = [Rung("geometry", label, short, Variant(effects, correction))]
    for step in steps:
        if step == "correction":
            correction = cfg.correction.name
            label = f"+ {correction} correction"
        else:
            effects = dataclasses.replace(effects, **{step: True})
            label = STEP_LABELS[step][0]
            if step == "fibres":
                label += (", uncorrected" if correction == "none"
                          else f", {correction} correction")
        rungs.append(Rung(step, label, STEP_LABELS[step][1], Variant(effects, correction)))
    return rungs, skipped


def _attribution(names: list[str], records: list[Comparison],
                 increments: list[dict[str, Any]]) -> dict[str, Any]:
    """Per statistic: the increments of every rung, the identity check, the verdicts."""
    last = records[-1]
    total = last.offset
    inc = np.array([np.asarray(i["increment"], dtype=np.float64) for i in increments])
    summed = inc.sum(axis=0)
    scale = np.maximum(np.abs(total), np.max(np.abs(inc), axis=0))
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(scale > 0, np.abs(summed - total) / np.where(scale > 0, scale, 1), 0.0)
    sig_tot = last.sigma_total
    with np.errstate(divide="ignore", invalid="ignore"):
        size = [float(np.nansum(np.where(sig_tot > 0, (i / np.where(sig_tot > 0, sig_tot, 1))
                                         ** 2, 0.0))) for i in inc]
    verdicts = [r.verdict for r in records]
    return jsonable({
        "bins": last.bins,
        "bin_label": last.bin_label,
        "value_label": last.value_label,
        "box": last.box,
        "rungs": names,
        "verdicts": dict(zip(names, verdicts, strict=True)),
        "max_abs_z": {n: r.max_abs_z for n, r in zip(names, records, strict=True)},
        "chi2_per_dof": {n: r.chi2_per_dof for n, r in zip(names, records, strict=True)},
        "total_offset": total.tolist(),
        "sigma_total": sig_tot.tolist(),
        "sum_of_increments": summed.tolist(),
        "identity_max_relative_error": float(np.max(rel)) if rel.size else 0.0,
        "first_failing_rung": first_failing(names, verdicts),
        "failing_rungs": [n for n, v in zip(names, verdicts, strict=True) if v == "fail"],
        "largest_increment_rung": names[int(np.argmax(size))] if size else None,
        "increment_size_in_total_sigma": dict(zip(names, [float(np.sqrt(s)) for s in size],
                                                  strict=True)),
        "increments": dict(zip(names, increments, strict=True)),
    })


def run_ladder(variants: ConeVariants) -> dict[str, Any]:
    """Build, measure and compare every rung; the ``ladder`` section of results.json."""
    cfg = variants.cfg
    rungs, skipped = plan_ladder(cfg)
    for s in skipped:
        log.info("ladder: step '%s' skipped: %s", s["step"], s["reason"])
    log.info("ladder: %d rungs: %s", len(rungs), " → ".join(r.short for r in rungs))
    pieces = ladder_pieces(cfg, cfg.ladder.cuts)
    cones, seconds = [], []
    for r in rungs:
        t0 = time.perf_counter()
        cones.append(variants.measure(r.variant, pieces, stage="ladder"))
        seconds.append(time.perf_counter() - t0)
    trees = [compare_variant(cfg, variants.box, c, pieces, what=f"ladder rung {r.name}")
             for r, c in zip(rungs, cones, strict=True)]
    names = [r.name for r in rungs]
    attribution: dict[str, Any] = {}
    for s, cut in pieces:
        for stat in cfg.statistics.measure:
            where = f"ladder, sample {s.name}, cut {cut.label}, statistic {stat}"
            records = [statistic(t, s.name, cut.label, stat) for t in trees]
            b = records[0].box
            incs = [_offset_as_increment(records[0], b)]
            for k in range(1, len(rungs)):
                incs.append(paired_difference(
                    [c["measurements"][s.name][cut.label][stat] for c in cones[k]],
                    [c["measurements"][s.name][cut.label][stat] for c in cones[k - 1]],
                    reference=b, sigma_total=records[-1].sigma_total,
                    same_regions=(rungs[k].variant.effects.footprint
                                  == rungs[k - 1].variant.effects.footprint),
                    rules=cfg.verdict, cones_independent=cfg.cones.independent,
                    where=f"{where}, rung {rungs[k].name}"))
            attribution.setdefault(s.name, {}).setdefault(cut.label, {})[stat] = \
                _attribution(names, records, incs)
    return {
        "order": list(cfg.ladder.order),
        "rungs": [dict(r.describe(variants.sky_name(r.variant.effects.footprint)),
                       overall=t["overall"], seconds=sec, samples=t["samples"])
                  for r, t, sec in zip(rungs, trees, seconds, strict=True)],
        "skipped": skipped,
        "cuts": cfg.ladder.cuts,
        "increment_error": INCREMENT_ERROR_TEXT,
        "first_failing_rule": ("first failing rung: the rung from which the statistic fails "
                               "on every rung up to the full survey"),
        "attribution": attribution,
    }


def _offset_as_increment(record: Comparison, box: np.ndarray) -> dict[str, Any]:
    """Rung 0's increment: its offset from the box, with the offset's own error σ_Δ."""
    off, sig, tot = record.offset, record.sigma_offset, record.sigma_total
    cones = record.cones - box[None, :]
    # the record's significance is already the Gaussian equivalent of Δ/σ_Δ (t law)
    signif = record.significance
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(box != 0, off / np.abs(np.where(box != 0, box, 1)), np.nan)
        zt = np.where(tot > 0, off / np.where(tot > 0, tot, 1), np.nan)
    fin = np.abs(signif[np.isfinite(signif)])
    fz = np.abs(zt[np.isfinite(zt)])
    return {"increment": off.tolist(), "fractional_increment": _nan_none(frac),
            "cones": cones.tolist(), "sigma_increment": _nan_none(sig),
            "sigma_increment_jackknife": None, "sigma_increment_scatter": None,
            "sigma_increment_method": "offset from the box, σ_Δ (" +
            str(record.sigma_offset_method or "") + ")",
            "significance": _nan_none(signif),
            "max_abs_significance": float(fin.max()) if fin.size else None,
            "consistent_with_zero": record.verdict != "fail"
            and not record.failing_bins.size,
            "in_total_sigma": _nan_none(zt),
            "max_abs_in_total_sigma": float(fz.max()) if fz.size else None,
            "n_cones": int(record.n_cones or len(cones))}


def _nan_none(a: np.ndarray) -> list[float | None]:
    return [float(x) if np.isfinite(x) else None for x in np.asarray(a, dtype=np.float64)]


def annotate_main(results: dict[str, Any], ladder: dict[str, Any]) -> None:
    """Name the first failing and the largest-increment rung in the main results."""
    for sname, cuts in ladder["attribution"].items():
        for label, stats in cuts.items():
            main = (results.get("samples", {}).get(sname, {}).get("cuts", {}).get(label, {})
                    .get("statistics", {}))
            for stat, a in stats.items():
                if stat in main:
                    main[stat]["first_failing_rung"] = a["first_failing_rung"]
                    main[stat]["largest_increment_rung"] = a["largest_increment_rung"]


__all__ = ["STEP_LABELS", "Rung", "annotate_main", "plan_ladder", "run_ladder"]
