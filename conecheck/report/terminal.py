"""A plain-text verdict table for the end of a run."""

from __future__ import annotations

from typing import Any

from . import access as ac


def summary_table(results: dict[str, Any]) -> str:
    """Columns sample, cut, statistic, verdict, max|z|, χ²/dof, p; then the overall verdict."""
    # an effect ladder names, for each failing statistic, the rung it fails from
    ladder = any(c.first_failing_rung is not None for *_, c in ac.iter_stats(results))
    head = ("sample", "cut", "statistic", "verdict", "max|z|", "chi2/dof", "p") + (
        ("fails from",) if ladder else ())
    rows = []
    for sname, cname, stat, c in ac.iter_stats(results):
        cut = ac.cuts(ac.samples(results)[sname])[cname]
        rows.append((sname, cname + ("*" if cut.get("primary") else ""), stat,
                     (c.verdict or "-").upper(),
                     ac.fmt_fixed(ac.max_abs_z(c)).replace("—", "-"),
                     ac.fmt_fixed(ac.chi2_per_dof(c)).replace("—", "-"),
                     ac.fmt_p(c.p_value).replace("—", "-"))
                    + ((c.first_failing_rung or "-",) if ladder else ()))
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(head)]
    right = {4, 5, 6}

    def line(cells) -> str:
        return "  ".join(c.rjust(w) if i in right else c.ljust(w)
                         for i, (c, w) in enumerate(zip(cells, widths, strict=True))).rstrip()

    out = [line(head), line(["-" * w for w in widths])]
    out += [line(r) for r in rows] or ["(no statistics)"]
    r = ac.verdicts(results)
    out.append("")
    out.append(f"overall: {str(results.get('overall', 'unknown')).upper()}  "
               f"({r.count('pass')} pass, {r.count('warn')} warn, "
               f"{r.count('fail')} fail; * primary cut)")
    return "\n".join(out)
