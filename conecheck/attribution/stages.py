"""The attribution stages as extensions of a run: :func:`extensions` and the switch
:func:`with_attribution` (see the package notes)."""


from __future__ import annotations

import dataclasses
import logging
from collections.abc import Callable
from typing import Any

from ..config import RunConfig
from ..errors import ConecheckError
from ..run.pipeline import RunInputs, stage_timer
from .corrections import run_corrections
from .ladder import annotate_main, plan_ladder, run_ladder
from .paired import INCREMENT_ERROR_TEXT, paired_difference
from .sweep import plan_sweep, run_sweep
from .variants import ConeVariants, Variant

Extension = Callable[[RunInputs, dict[str, Any], dict[str, Any]], None]
log = logging.getLogger(__name__)


def with_attribution(cfg: RunConfig) -> RunConfig:
    """``cfg`` with the ladder, the correction comparison and the cut sweep switched on."""
    return dataclasses.replace(
        cfg, ladder=dataclasses.replace(cfg.ladder, enabled=True),
        corrections=dataclasses.replace(cfg.corrections, enabled=True),
        cut_sweep=dataclasses.replace(cfg.cut_sweep, enabled=True))


class Attribution:
    """The three stages as run extensions sharing one store of cone variants."""

    def __init__(self) -> None:
        self._variants: ConeVariants | None = None

    def variants(self, inp: RunInputs, stages: dict[str, Any]) -> ConeVariants:
        """The store of cone variants of this run (created on first use)."""
        if self._variants is None or self._variants.inp is not inp:
            self._variants = ConeVariants(inp, stages)
        return self._variants

    def _run(self, key: str, what: str, func: Callable[[ConeVariants], dict[str, Any]],
             inp: RunInputs, stages: dict[str, Any], results: dict[str, Any]) -> bool:
        # A failure here must not cost the user the main run's results, which are written
        # after the extensions: record it in the section (the report and the summary say
        # so) and carry on.
        stop = stage_timer(inp.timings, f"{what} (all)")
        try:
            results[key] = func(self.variants(inp, stages))
            return True
        except ConecheckError as exc:
            log.error("%s not completed: %s", what, exc)
            results[key] = {"error": str(exc)}
            return False
        finally:
            stop()

    def ladder(self, inp: RunInputs, stages: dict[str, Any], results: dict[str, Any]) -> None:
        """Extension: the effect ladder (``results["ladder"]``)."""
        if self._run("ladder", "ladder", run_ladder, inp, stages, results):
            annotate_main(results, results["ladder"])

    def corrections(self, inp: RunInputs, stages: dict[str, Any],
                    results: dict[str, Any]) -> None:
        """Extension: the correction comparison (``results["corrections"]``)."""
        self._run("corrections", "corrections", run_corrections, inp, stages, results)

    def cut_sweep(self, inp: RunInputs, stages: dict[str, Any],
                  results: dict[str, Any]) -> None:
        """Extension: the redshift-cut sweep (``results["cuts"]``)."""
        self._run("cuts", "cut sweep", run_sweep, inp, stages, results)


def extensions(cfg: RunConfig) -> tuple[Extension, ...]:
    """The attribution extensions ``cfg`` switches on, in run order."""
    a = Attribution()
    out: list[Extension] = []
    if cfg.ladder.enabled:
        out.append(a.ladder)
    if cfg.corrections.enabled:
        out.append(a.corrections)
    if cfg.cut_sweep.enabled:
        out.append(a.cut_sweep)
    return tuple(out)


__all__ = ["INCREMENT_ERROR_TEXT", "Attribution", "ConeVariants", "Extension", "Variant",
           "extensions", "paired_difference", "plan_ladder", "plan_sweep",
           "with_attribution"]
