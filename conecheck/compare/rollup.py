"""Roll statistic verdicts up to redshift cuts, samples and the run (worst wins).

:func:`rollup` reads a results tree and returns the typed :class:`Rollup`;
:func:`rollup_verdicts` writes its cut, sample and overall verdicts into the tree, the form
results.json keeps.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..errors import InputError
from .rules import FAIL, PASS, WARN, check_verdict, worst_verdict

#: (sample, cut, statistic) of one comparison.
StatKey = tuple[str, str, str]


@dataclass(frozen=True)
class Rollup:
    """Every verdict of a run, from the statistics up.

    Attributes
    ----------
    overall : str
        The run's verdict: the worst of its samples (``warn`` when there are none).
    samples : dict
        Sample → the worst of its cuts (``warn`` when it has none).
    cuts : dict
        (sample, cut) → the worst of its statistics and its parameter-shift rule
        (``warn`` when it has none).
    statistics : dict
        (sample, cut, statistic) → the statistic's verdict, in results order.
    """

    overall: str
    samples: dict[str, str]
    cuts: dict[tuple[str, str], str]
    statistics: dict[StatKey, str]

    def count(self, verdict: str) -> int:
        """How many statistics got ``verdict``."""
        return sum(v == verdict for v in self.statistics.values())

    def with_verdict(self, verdict: str) -> list[StatKey]:
        """The statistics that got ``verdict``, in results order."""
        return [k for k, v in self.statistics.items() if v == verdict]

    @property
    def counts_text(self) -> str:
        """``"3 pass · 1 warn · 0 fail"``."""
        return " · ".join(f"{self.count(v)} {v}" for v in (PASS, WARN, FAIL))


def rollup(results: dict[str, Any]) -> Rollup:
    """The verdicts of a results tree rolled up (the tree is not changed).

    A cut takes the worst verdict of its statistics and of its parameter-shift rule when
    that is set, a sample the worst of its cuts, the run the worst of its samples; an empty
    level is ``warn``.
    """
    samples = results.get("samples")
    if not isinstance(samples, dict):
        raise InputError("results: 'samples' must be a mapping of sample name to results")
    stats: dict[StatKey, str] = {}
    cuts: dict[tuple[str, str], str] = {}
    by_sample: dict[str, str] = {}
    for sname, sample in samples.items():
        cut_verdicts = []
        for cname, cut in (sample.get("cuts") or {}).items():
            vs = []
            for st, s in (cut.get("statistics") or {}).items():
                v = check_verdict(s.get("verdict"), f"results: {sname}/{cname}/{st} verdict")
                stats[(sname, cname, st)] = v
                vs.append(v)
            shifts = cut.get("parameter_shifts") or {}
            if vs and shifts.get("verdict"):
                vs.append(check_verdict(shifts["verdict"],
                                        f"results: {sname}/{cname}/parameter_shifts verdict"))
            cuts[(sname, cname)] = worst_verdict(vs, empty=WARN)
            cut_verdicts.append(cuts[(sname, cname)])
        by_sample[sname] = worst_verdict(cut_verdicts, empty=WARN)
    return Rollup(overall=worst_verdict(list(by_sample.values()), empty=WARN),
                  samples=by_sample, cuts=cuts, statistics=stats)


def rollup_verdicts(results: dict[str, Any]) -> str:
    """Fill the ``verdict`` of every cut and sample and the run's ``overall``, in place.

    Returns the overall verdict (see :func:`rollup`).
    """
    r = rollup(results)
    for sname, sample in results["samples"].items():
        for cname, cut in (sample.get("cuts") or {}).items():
            cut["verdict"] = r.cuts[(sname, cname)]
        sample["verdict"] = r.samples[sname]
    results["overall"] = r.overall
    return r.overall


__all__ = ["Rollup", "StatKey", "rollup", "rollup_verdicts"]
