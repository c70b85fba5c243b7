"""The run's cones measured again under another survey model.

A *variant* is one set of effect switches plus one fibre-collision correction. Every
variant rebuilds the same cones — cone i keeps its observer, rotation and per-stage random
streams (:mod:`conecheck.cone.build`) — so two variants differ only by what their effects
do, including the noise those effects draw themselves. A variant shares whatever it can:

* randoms and their pair counts (RR) with every variant of the same sky geometry (the
  survey footprint; or, once the footprint effect is off, a round cap of the footprint's
  effective area (``ladder.sky = "cap"``, the default) or the full sky, each with its own
  jackknife regions);
* the main run's cones when the variant is the configured survey;
* every piece (cone × sample × cut) already measured in this run, in memory, and every
  piece in the run's task cache on disk (its keys include effects, correction, cut and
  randoms), so a re-run recomputes nothing.
"""

from __future__ import annotations

import dataclasses
import logging
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from ..cone.settings import CorrectionSettings, EffectSwitches, SampleCut
from ..config import RunConfig, SampleConfig
from ..footprint import Footprint
from ..run.inputs import cap_footprint, load_footprint, sky_regions
from ..run.pipeline import CutPiece, RunInputs, cone_stage, randoms_stage
from ..run.specs import count_dilution

log = logging.getLogger(__name__)

#: (sample, cut) measured on every cone.
Piece = tuple[SampleConfig, SampleCut]


@dataclass(frozen=True)
class Variant:
    """One way of building the run's cones.

    Attributes
    ----------
    effects : EffectSwitches
        Which survey effects the cones get.
    correction : str
        Fibre-collision correction (irrelevant, and normalised to ``none``, without fibres).
    """

    effects: EffectSwitches
    correction: str

    @property
    def correction_applied(self) -> str:
        """The correction that actually acts on the cones."""
        return self.correction if self.effects.fibres else "none"

    @property
    def key(self) -> tuple[Any, ...]:
        """Equal for variants that build identical cones."""
        return tuple(sorted(asdict(self.effects).items())) + (self.correction_applied,)


def main_variant(cfg: RunConfig) -> Variant:
    """The configured survey."""
    return Variant(cfg.effects, cfg.correction.name)


class ConeVariants:
    """Measure the run's cones under other variants, sharing all that can be shared.

    Parameters
    ----------
    inp : RunInputs
        The run's inputs (configuration, box, footprint, regions, executor, cache).
    stages : dict
        The main run's stage results: ``box``, ``randoms``, ``randoms_keys``, ``cones``.
    """

    def __init__(self, inp: RunInputs, stages: dict[str, Any]) -> None:
        self.inp = inp
        self.cfg = inp.cfg
        self.box = stages["box"]
        on = self.cfg.effects.footprint
        self._geometries: dict[bool, RunInputs] = {on: inp}
        self._randoms: dict[tuple[bool, str, str], tuple[Any, str]] = {}
        for sname, cuts in stages["randoms"].items():
            for label, payload in cuts.items():
                self._randoms[(on, sname, label)] = (payload,
                                                     stages["randoms_keys"][sname][label])
        self._cones: dict[tuple[Any, ...], list[dict[str, Any]]] = {}
        self._merge(main_variant(self.cfg), stages["cones"])

    # ----------------------------------------------------------------- geometry
    @property
    def uses_cap(self) -> bool:
        """True when footprint-less variants see an equal-area cap instead of the full sky."""
        return self.cfg.ladder.sky == "cap" and self.cfg.effects.footprint

    @property
    def sky_completeness(self) -> float:
        """Uniform completeness of the footprint-less variants' sky: the box's dilution for
        the statistics that count in cells (the covered sky's mean completeness under
        ``survey.completeness.treatment = "dilute"``), so that box and cones stay
        comparable on every rung; 1 otherwise."""
        return count_dilution(self.cfg, self._geometries[True].footprint)

    @property
    def footprint_less_as_map(self) -> bool:
        """True when footprint-less variants are built through a footprint map (a cap, or a
        full sky of uniform completeness below 1)."""
        return self.uses_cap or (self.cfg.effects.footprint and self.sky_completeness < 1.0)

    def sky_name(self, footprint: bool) -> str:
        """How the sky of a variant is described in results.json."""
        if footprint:
            return "survey footprint"
        return "equal-area cap" if self.uses_cap else "full sky"

    def geometry(self, footprint: bool) -> RunInputs:
        """Run inputs for the survey footprint (True), or else the cap or the full sky."""
        if footprint not in self._geometries:
            if self.uses_cap and not footprint:
                fp = cap_footprint(self._geometries[True].footprint, self.sky_completeness)
            else:
                cfg = dataclasses.replace(self.cfg, effects=dataclasses.replace(
                    self.cfg.effects, footprint=footprint))
                fp = load_footprint(cfg)
                if not footprint and self.footprint_less_as_map:
                    fp = Footprint.from_map(np.full(fp.values.size, self.sky_completeness),
                                            source=f"full sky at completeness "
                                                   f"{self.sky_completeness:.3f}")
            self._geometries[footprint] = dataclasses.replace(
                self.inp, footprint=fp, regions=sky_regions(self.cfg, fp))
            log.info("attribution: %s geometry (%.0f deg2) with %d jackknife regions",
                     self.sky_name(footprint), fp.area_deg2,
                     self._geometries[footprint].regions.k)
        return self._geometries[footprint]

    def build_effects(self, variant: Variant) -> EffectSwitches:
        """The switches the cone builder gets: a cap (or a uniformly incomplete full sky)
        is applied as a footprint."""
        if self.footprint_less_as_map and not variant.effects.footprint:
            return dataclasses.replace(variant.effects, footprint=True)
        return variant.effects

    def _randoms_for(self, geo: RunInputs, variant: Variant, pieces: Sequence[Piece]
                     ) -> tuple[dict[str, dict[str, Any]], dict[str, dict[str, str]]]:
        fp = variant.effects.footprint
        need = [(s, c) for s, c in pieces if (fp, s.name, c.label) not in self._randoms]
        if need:
            rnd, keys = randoms_stage(geo, self.box, _cut_pieces(need),
                                      effects=self.build_effects(variant))
            for sname, cuts in rnd.items():
                for label, payload in cuts.items():
                    self._randoms[(fp, sname, label)] = (payload, keys[sname][label])
        randoms: dict[str, dict[str, Any]] = {}
        rkeys: dict[str, dict[str, str]] = {}
        for s, c in pieces:
            payload, key = self._randoms[(fp, s.name, c.label)]
            randoms.setdefault(s.name, {})[c.label] = payload
            rkeys.setdefault(s.name, {})[c.label] = key
        return randoms, rkeys

    # ----------------------------------------------------------------- cones
    def _merge(self, variant: Variant, cones: list[dict[str, Any]]) -> None:
        store = self._cones.setdefault(variant.key, [
            {"measurements": {}, "nz": {}, "info": {}, "skipped": {}}
            for _ in range(len(cones))])
        for mine, new in zip(store, cones, strict=True):
            for sname, cuts in new["measurements"].items():
                mine["measurements"].setdefault(sname, {}).update(cuts)
                mine["nz"].setdefault(sname, {}).update(new["nz"][sname])
            for sname, cuts in new.get("skipped", {}).items():
                mine["skipped"].setdefault(sname, {}).update(cuts)
            mine["info"] = new["info"] or mine["info"]

    def _has(self, variant: Variant, s: SampleConfig, cut: SampleCut) -> bool:
        store = self._cones.get(variant.key)
        return store is not None and cut.label in store[0]["measurements"].get(s.name, {})

    def measure(self, variant: Variant, pieces: Sequence[Piece], stage: str,
                skip_unmeasurable: bool = False) -> list[dict[str, Any]]:
        """Every cone of ``variant`` measured on ``pieces``.

        ``skip_unmeasurable``: a cut a cone cannot measure is recorded under ``skipped``
        instead of failing the stage.

        Returns
        -------
        list of dict
            Per cone, as :func:`conecheck.run.pipeline.cone_stage`: ``measurements``
            (sample → cut → statistic → Measurement, None where skipped), ``nz``, ``info``
            and ``skipped`` (sample → cut → reason).
        """
        missing = [(s, c) for s, c in pieces if not self._has(variant, s, c)]
        if missing:
            geo = self.geometry(variant.effects.footprint)
            randoms, rkeys = self._randoms_for(geo, variant, missing)
            cones = cone_stage(geo, randoms, rkeys, _cut_pieces(missing),
                               effects=self.build_effects(variant),
                               correction=CorrectionSettings(variant.correction_applied),
                               stage=stage, skip_unmeasurable=skip_unmeasurable)
            self._merge(variant, cones)
        store = self._cones[variant.key]
        return [{"measurements": {s.name: {c.label: cone["measurements"][s.name][c.label]
                                           for s2, c in pieces if s2.name == s.name}
                                  for s, _ in pieces},
                 "nz": {s.name: {c.label: cone["nz"][s.name][c.label]
                                 for s2, c in pieces if s2.name == s.name} for s, _ in pieces},
                 "info": cone["info"],
                 "skipped": {s.name: {c.label: cone["skipped"][s.name][c.label]
                                      for s2, c in pieces if s2.name == s.name
                                      and c.label in cone["skipped"].get(s.name, {})}
                             for s, _ in pieces}} for cone in store]


def _cut_pieces(pieces: Sequence[Piece]) -> list[CutPiece]:
    """The pipeline's (sample name, cut) pieces, each once, in order."""
    out: list[CutPiece] = []
    for s, cut in pieces:
        if all(not (name == s.name and c.label == cut.label) for name, c in out):
            out.append((s.name, cut))
    return out


def ladder_pieces(cfg: RunConfig, which: str) -> list[Piece]:
    """The (sample, cut) pieces a section measures: primary cuts only, or every cut."""
    return [(s, c) for s in cfg.samples for c in (s.cuts if which == "all" else s.cuts[:1])]


__all__ = ["ConeVariants", "Piece", "Variant", "ladder_pieces", "main_variant"]
