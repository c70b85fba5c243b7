"""Roll statistic verdicts up to redshift cuts, samples and the run (worst wins)."""

from __future__ import annotations

from typing import Any

from ..errors import InputError
from .rules import WARN, check_verdict, worst_verdict


def rollup_verdicts(results: dict[str, Any]) -> str:
    """Fill the ``verdict`` of every cut and sample and the run's ``overall``, in place.

    A cut takes the worst verdict of its statistics (``warn`` when it has none), a sample
    the worst of its cuts (``warn`` when it has none), the run the worst of its samples
    (``warn`` when there are none). Returns the overall verdict.
    """
    samples = results.get("samples")
    if not isinstance(samples, dict):
        raise InputError("results: 'samples' must be a mapping of sample name to results")
    sample_verdicts = []
    for sname, sample in samples.items():
        cut_verdicts = []
        for cname, cut in (sample.get("cuts") or {}).items():
            stats = cut.get("statistics") or {}
            vs = [check_verdict(s.get("verdict"), f"results: {sname}/{cname}/{st} verdict")
                  for st, s in stats.items()]
            shifts = cut.get("parameter_shifts") or {}
            if vs and shifts.get("verdict"):
                vs.append(check_verdict(shifts["verdict"],
                                        f"results: {sname}/{cname}/parameter_shifts verdict"))
            cut["verdict"] = worst_verdict(vs, empty=WARN)
            cut_verdicts.append(cut["verdict"])
        sample["verdict"] = worst_verdict(cut_verdicts, empty=WARN)
        sample_verdicts.append(sample["verdict"])
    results["overall"] = worst_verdict(sample_verdicts, empty=WARN)
    return results["overall"]
