"""Several fibre-collision corrections compared on the same collided cones.

Each correction is applied to the same collided target lists (the cones are rebuilt with the
same fibre assignment, because the collision emulator draws from its own per-cone stream),
and compared two ways:

* against the *uncollided truth* of the same cones — the cones with fibre collisions off
  and every other effect and random draw unchanged, which the mock knows and the data do
  not: the paired difference c_i(correction) − c_i(truth) over cones, with the errors of
  :mod:`conecheck.attribution.paired`, also in units of the total error bar σ_tot of the
  comparison with the box;
* against the box, exactly as the main run compares the configured survey (same record,
  same verdict rules).

The correction *closest to the truth* for a statistic is the one with the smallest largest
offset from the truth in units of σ_tot (the scale that matters for a fit).
"""

from __future__ import annotations

import dataclasses
import logging
import math
from typing import Any

import numpy as np

from ..cone.corrections import CORRECTIONS
from ..config import RunConfig
from .paired import INCREMENT_ERROR_TEXT, paired_difference
from .variants import ConeVariants, Variant, ladder_pieces
from .verdicts import compare_variant, statistic

log = logging.getLogger(__name__)

#: Name of the uncollided reference in the ``corrections`` section.
TRUTH = "uncollided"


def correction_names(cfg: RunConfig) -> list[str]:
    """Corrections to compare: the configured list, or every registered one.

    The run's own correction comes first when it is in the list.
    """
    names = list(cfg.corrections.names) or sorted(CORRECTIONS)
    if cfg.correction.name in names:
        names.remove(cfg.correction.name)
        names.insert(0, cfg.correction.name)
    return names


def _fractions(cones: list[dict[str, Any]], key: str) -> list[float]:
    return [float(c.get("info", {}).get(key, 0.0)) for c in cones]


def run_corrections(variants: ConeVariants) -> dict[str, Any]:
    """The ``corrections`` section of results.json."""
    cfg = variants.cfg
    if not cfg.effects.fibres:
        return {"skipped": "survey.effects.fibres is off: no collisions to correct",
                "names": [], "variants": {}, "against_truth": {}}
    names = correction_names(cfg)
    pieces = ladder_pieces(cfg, cfg.corrections.cuts)
    truth = Variant(dataclasses.replace(cfg.effects, fibres=False), "none")
    truth_cones = variants.measure(truth, pieces, stage="corrections")
    truth_tree = compare_variant(cfg, variants.box, truth_cones, pieces,
                                 what="uncollided truth")
    log.info("corrections: comparing %s against the uncollided truth", ", ".join(names))
    section: dict[str, Any] = {
        "names": names, "configured": cfg.correction.name, "truth": TRUTH,
        "truth_label": "fibre collisions off, every other effect and draw unchanged",
        "cuts": cfg.corrections.cuts, "increment_error": INCREMENT_ERROR_TEXT,
        "variants": {TRUTH: {"overall": truth_tree["overall"],
                             "samples": truth_tree["samples"]}},
        "against_truth": {},
    }
    for name in names:
        cones = variants.measure(Variant(cfg.effects, name), pieces, stage="corrections")
        tree = compare_variant(cfg, variants.box, cones, pieces, what=f"correction {name}")
        section["variants"][name] = {
            "overall": tree["overall"], "samples": tree["samples"],
            "collided_fraction": _fractions(cones, "collided_fraction"),
            "recovered_fraction": _fractions(cones, "recovered_fraction")}
        for s, cut in pieces:
            for stat in cfg.statistics.measure:
                ref = statistic(truth_tree, s.name, cut.label, stat)
                d = paired_difference(
                    [c["measurements"][s.name][cut.label][stat] for c in cones],
                    [c["measurements"][s.name][cut.label][stat] for c in truth_cones],
                    reference=ref.cone_mean, sigma_total=ref.sigma_total,
                    same_regions=True, rules=cfg.verdict,
                    cones_independent=cfg.cones.independent,
                    where=f"correction {name}, sample {s.name}, cut {cut.label}, "
                          f"statistic {stat}")
                d["verdict_vs_box"] = statistic(tree, s.name, cut.label, stat).verdict
                entry = (section["against_truth"].setdefault(s.name, {})
                         .setdefault(cut.label, {}).setdefault(stat, {"corrections": {}}))
                entry["corrections"][name] = d
    for cuts in section["against_truth"].values():
        for stats in cuts.values():
            for entry in stats.values():
                entry["closest_to_truth"] = closest(entry["corrections"])
    return section


def closest(per_correction: dict[str, Any]) -> str | None:
    """The correction with the smallest max |offset from the truth| / σ_tot."""
    best, best_v = None, math.inf
    for name, d in per_correction.items():
        v = d.get("max_abs_in_total_sigma")
        v = math.inf if v is None or not np.isfinite(v) else float(v)
        if best is None or v < best_v:
            best, best_v = name, v
    return best


__all__ = ["TRUTH", "closest", "correction_names", "run_corrections"]
