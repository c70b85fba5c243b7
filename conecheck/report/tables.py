"""Per-statistic ECSV tables: one file per sample × cut × statistic."""

from __future__ import annotations

import os
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
from astropy.table import Table

from ..atomic import atomic_path
from ..compare.comparison import Comparison
from ..errors import InputError
from ..units import written_unit
from .access import comparison, iter_stats

#: Per-bin columns copied from the statistic record (missing ones are filled with NaN).
BIN_COLUMNS = ("box", "cone_mean", "sigma_box", "sigma_cone", "sigma_total", "z",
               "fractional_offset", "detectable_offset", "offset", "sigma_offset")
META_KEYS = ("verdict", "chi2", "dof", "p_value", "hartlap_factor", "n_regions", "n_cones",
             "max_abs_z", "sigma_offset_method", "bin_label", "value_label")
#: Columns in the statistic's own unit (the others are dimensionless).
VALUE_UNIT_COLUMNS = ("box", "cone_mean", "sigma_box", "sigma_cone", "sigma_total",
                      "detectable_offset", "offset", "sigma_offset")


def _safe(name: str) -> str:
    """File-name-safe version of a sample, cut or statistic name."""
    return re.sub(r"[^A-Za-z0-9._+-]+", "_", str(name)).strip("_") or "unnamed"


def table_name(sample: str, cut: str, stat: str) -> str:
    """``{sample}__{cut}__{stat}.ecsv`` with unsafe characters replaced by ``_``."""
    return f"{_safe(sample)}__{_safe(cut)}__{_safe(stat)}.ecsv"


def statistic_table(d: Mapping[str, Any] | Comparison, sample: str = "", cut: str = "",
                    stat: str = "") -> Table:
    """Astropy table of one statistic: bins, box, cone_000…, errors, z, offsets."""
    c = comparison(d)
    p = c.bins.size
    t = Table()
    t["bin"] = c.bins
    cols: dict[str, np.ndarray] = {}
    for key in BIN_COLUMNS:
        v = getattr(c, key)
        cols[key] = v if v.size == p else np.full(p, np.nan)
    cones = c.cones
    if cones.size and (cones.ndim != 2 or cones.shape[1] != p):
        raise InputError(f"{sample}/{cut}/{stat}: 'cones' must be N lists of {p} values")
    for key in ("box", "cone_mean"):
        t[key] = cols[key]
    width = max(3, len(str(max(cones.shape[0] - 1, 0)))) if cones.size else 3
    for i in range(cones.shape[0] if cones.size else 0):
        t[f"cone_{i:0{width}d}"] = cones[i]
    for key in BIN_COLUMNS[2:]:
        t[key] = cols[key]
    # units from the labels, e.g. "r_p [Mpc/h]" (h-scaled units as conecheck.units writes)
    t["bin"].unit = written_unit(c.bin_label)
    value_unit = written_unit(c.value_label)
    for name in t.colnames:
        if name in VALUE_UNIT_COLUMNS or name.startswith("cone_"):
            t[name].unit = value_unit
    t.meta.update({"sample": sample, "cut": cut, "statistic": stat})
    for key in META_KEYS:
        v = getattr(c, key)
        if v is not None:
            t.meta[key] = v
    return t


def write_statistic_tables(results: dict[str, Any], outdir: str | os.PathLike[str]
                           ) -> list[Path]:
    """Write one ECSV table per sample × cut × statistic into ``outdir`` (atomically).

    Columns: bin, box, cone_mean, cone_000 … cone_NNN, sigma_box, sigma_cone, sigma_total,
    z, fractional_offset, detectable_offset, offset, sigma_offset; metadata: sample, cut,
    statistic, verdict, chi2, dof, p_value and the other scalars of the record. Values
    that are null in the results are written as NaN.

    Returns
    -------
    list of Path
        The files written.
    """
    out = Path(outdir)
    out.mkdir(parents=True, exist_ok=True)
    written = []
    for sname, cname, stat, c in iter_stats(results):
        path = out / table_name(sname, cname, stat)
        t = statistic_table(c, sname, cname, stat)
        with atomic_path(path) as tmp:
            t.write(tmp, format="ascii.ecsv", overwrite=True)
        written.append(path)
    return written
