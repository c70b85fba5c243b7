"""One variant of the cones compared with the box, in the layout of the main results.

The tree returned by :func:`compare_variant` has the shape of ``results["samples"]``
(sample → ``cuts`` → cut → ``statistics`` → the record of
:func:`conecheck.compare.compare_statistic`), wrapped as ``{"samples": …, "overall": …}``
so every reader of the main results (report helpers, table writers, roll-up) reads it too.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ..compare import Comparison, compare_statistic, rollup_verdicts
from ..config import RunConfig
from ..run.pipeline import box_for_cut
from .variants import Piece


def compare_variant(cfg: RunConfig, box: dict[str, Any], cones: list[dict[str, Any]],
                    pieces: Sequence[Piece], what: str = "") -> dict[str, Any]:
    """Every piece and statistic of one variant compared with the box, verdicts rolled up.

    Parameters
    ----------
    cfg : RunConfig
        Supplies the statistics, verdict rules and cone independence.
    box : dict
        The box stage's results (sample → ``measurements``).
    cones : list of dict
        The variant's cones (:meth:`ConeVariants.measure`).
    pieces : sequence of (SampleConfig, SampleCut)
        What to compare.
    what : str
        Variant name for messages.
    """
    samples: dict[str, Any] = {}
    for s, cut in pieces:
        stats = {}
        for name in cfg.statistics.measure:
            where = f"{what + ', ' if what else ''}sample {s.name}, cut {cut.label}, " \
                    f"statistic {name}"
            stats[name] = compare_statistic(
                box_for_cut(box[s.name], cut.label)["measurements"][name],
                [c["measurements"][s.name][cut.label][name] for c in cones],
                cfg.verdict, cfg.cones.independent, where=where).to_dict()
        entry = samples.setdefault(s.name, {"mag_max": s.mag_max, "cuts": {}})
        entry["cuts"][cut.label] = {
            "z_min": cut.z_min, "z_max": cut.z_max, "primary": cut.label == s.label,
            "n_galaxies_cones": [float(np.sum(c["nz"][s.name][cut.label])) for c in cones],
            "statistics": stats}
    tree: dict[str, Any] = {"samples": samples, "overall": "warn"}
    rollup_verdicts(tree)
    return tree


def statistic(tree: dict[str, Any], sample: str, cut: str, stat: str) -> Comparison:
    """The comparison of one statistic in a variant tree, typed."""
    return Comparison.from_dict(tree["samples"][sample]["cuts"][cut]["statistics"][stat])


def first_failing(names: Sequence[str], verdicts: Sequence[str]) -> str | None:
    """The rung from which a statistic fails on every later rung up to the last one.

    None when the last rung does not fail.
    """
    if not verdicts or verdicts[-1] != "fail":
        return None
    k = len(verdicts) - 1
    while k > 0 and verdicts[k - 1] == "fail":
        k -= 1
    return names[k]


__all__ = ["compare_variant", "first_failing", "statistic"]
