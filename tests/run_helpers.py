"""Tiny validation set-ups for the pipeline tests (the invented Kestrel survey, shrunk).

Every number is invented; the scale is chosen so one run takes a few seconds.
"""

from __future__ import annotations

import copy
from typing import Any

from conecheck.demo import demo_dict

#: Cone effects off and box RSD off: a geometry-only set-up with nothing the box lacks.
GEOMETRY_ONLY = {"survey.effects.rsd": False, "survey.effects.redshift_errors": False,
                 "survey.effects.fibres": False, "box.rsd": False}


def tiny_dict(one_sample: bool = True, **changes: Any) -> dict[str, Any]:
    """The quick demo configuration, optionally with one sample, plus dotted-key changes.

    A value of ``None`` deletes the key.
    """
    d = copy.deepcopy(demo_dict(quick=True))
    # The PDF and HTML pages take seconds per run; the demo and the report tests draw them,
    # the many small runs that check numbers here do not need them.
    d.setdefault("output", {}).update(pdf=False, html=False)
    # The demo validates all eight statistics; these runs check the pipeline's plumbing with
    # the first four, which keeps each run to a few seconds (tests that need another add it).
    d["statistics"]["measure"] = ["number_density", "wp", "cic", "vpf"]
    # The demo fills its target list with faint targets; these runs keep the box's own list
    # (as every calibration in benchmarks/RESULTS.md did), tests of the fill ask for it.
    d["survey"].setdefault("targets", {})["source"] = "box"
    shifts = d.setdefault("parameter_shifts", {})
    shifts.pop("combinations", None)  # the defaults, for these four
    shifts["enabled"] = True  # the quick demo leaves them out; the pipeline tests check them
    if one_sample:
        d["samples"] = [d["samples"][0]]
        d["samples"][0]["alt_cuts"] = []
    for key, value in changes.items():
        node = d
        parts = key.split(".")
        for p in parts[:-1]:
            node = node.setdefault(p, {})
        if value is None:
            node.pop(parts[-1], None)
        else:
            node[parts[-1]] = value
    return d


def verdicts(results: dict[str, Any]) -> dict[tuple[str, str, str], str]:
    """(sample, cut, statistic) → verdict."""
    return {(s, c, st): v["verdict"] for s, sd in results["samples"].items()
            for c, cd in sd["cuts"].items() for st, v in cd["statistics"].items()}
