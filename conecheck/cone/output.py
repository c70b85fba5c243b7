"""Writing cones, randoms and the manifest of what was applied.

Files in a cones directory::

    cone_000.fits, cone_001.fits, ...      one per cone
    randoms_<label>.fits                   one per sample and cut
    manifest.json                          effects, settings, seeds, replicas, fibre stats

Cone columns (when present): ra, dec [deg], z_obs, chi_obs [Mpc/h], weight, zflag
(codes in :mod:`conecheck.cone.corrections`), abs_mag [M − 5 log10 h, as the analyst
infers it from app_mag and z_obs], region (jackknife label), then z_cos, z_obs_true,
chi_true [Mpc/h], app_mag, abs_mag_true (the box's), completeness, is_central, halo_id.
Tables are written atomically through :func:`conecheck.catalog.write_table`.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from astropy.table import Table

from ..atomic import write_text_atomic
from ..catalog import write_table
from ..footprint.protocols import JackknifeRegions
from .corrections import ZFLAG_MEANING

CONE_COLUMNS = ("ra", "dec", "z_obs", "chi_obs", "weight", "zflag", "abs_mag", "region",
                "z_cos", "z_obs_true", "chi_true", "app_mag", "abs_mag_true", "completeness",
                "is_central", "halo_id")
RANDOM_COLUMNS = ("ra", "dec", "z_obs", "chi_obs", "weight", "region")
UNITS = {"ra": "deg", "dec": "deg", "chi_obs": "Mpc/h", "chi_true": "Mpc/h", "abs_mag": "mag",
         "app_mag": "mag", "abs_mag_true": "mag"}


def _with_region(table: Table, regions: JackknifeRegions | None) -> Table:
    if regions is None:
        return table
    out = table.copy(copy_data=False)
    out["region"] = np.asarray(regions.region_of(np.asarray(table["ra"]),
                                                 np.asarray(table["dec"])), dtype=np.int32)
    return out


def _select(table: Table, columns: Sequence[str]) -> Table:
    out = Table(meta={k: v for k, v in table.meta.items()
                      if isinstance(v, (int, float, str, bool, np.integer, np.floating))})
    for name in columns:
        if name in table.colnames:
            out[name] = table[name]
            if name in UNITS:
                out[name].unit = UNITS[name]
    return out


def cone_header(info: Mapping[str, Any], manifest: Mapping[str, Any]) -> dict[str, Any]:
    """FITS header keywords of a cone: how it was made, readable without the manifest.

    Observer [Mpc/h], rotation (ZYZ Euler angles [deg]), periodic replicas, cosmology,
    run seed, configuration hash and conecheck version (8-character keywords).
    """
    head: dict[str, Any] = {}
    obs = info.get("observer_mpch")
    if obs is not None and len(obs) == 3:
        head.update({"OBS_X": float(obs[0]), "OBS_Y": float(obs[1]), "OBS_Z": float(obs[2])})
    euler = info.get("euler_zyz_deg")
    if euler is not None and len(euler) == 3:
        head.update({"EULER_Z1": float(euler[0]), "EULER_Y": float(euler[1]),
                     "EULER_Z2": float(euler[2])})
    for key, name in (("n_replicas", "NREPLIC"), ("cone_index", "CONE_IDX"),
                      ("n_repeated", "NREPEAT")):
        if info.get(key) is not None:
            head[name] = int(info[key])
    cosmo = manifest.get("cosmology") or {}
    for key, name in (("omega_m", "OMEGA_M"), ("omega_k", "OMEGA_K"), ("h", "HUBBLE_H")):
        if cosmo.get(key) is not None:
            head[name] = float(cosmo[key])
    for key, name in (("seed", "SEED"), ("config_hash", "CFGHASH"), ("version", "CONECHK")):
        if manifest.get(key) is not None:
            head[name] = str(manifest[key])[:68] if key != "seed" else int(manifest[key])
    return head


def write_cone(table: Table, path: str | os.PathLike[str], regions: JackknifeRegions | None = None,
               columns: Sequence[str] = CONE_COLUMNS,
               header: Mapping[str, Any] | None = None) -> None:
    """Write a cone (FITS by default, format from the name), adding ``region`` if given.

    ``regions`` is a jackknife layout with ``region_of(ra_deg, dec_deg)``; ``header`` adds
    keywords (see :func:`cone_header`).
    """
    out = _select(_with_region(table, regions), columns)
    out.meta.update(header or {})
    write_table(out, path)


def write_randoms(table: Table, path: str | os.PathLike[str],
                  regions: JackknifeRegions | None = None) -> None:
    """Write a random catalogue, adding ``region`` if ``regions`` is given."""
    write_table(_select(_with_region(table, regions), RANDOM_COLUMNS), path)


def to_jsonable(obj: Any) -> Any:
    """Convert numpy scalars/arrays, tuples and paths to JSON types; drop tables."""
    if isinstance(obj, Mapping):
        return {str(k): to_jsonable(v) for k, v in obj.items() if not isinstance(v, Table)}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return to_jsonable(obj.item())
    if isinstance(obj, float) and not math.isfinite(obj):
        return str(obj)
    if isinstance(obj, Path):
        return str(obj)
    return obj


def write_cones_directory(outdir: str | os.PathLike[str],
                          cones: Sequence[Table | tuple[Table, Mapping[str, Any]]],
                          randoms: Mapping[str, Table] | None = None,
                          manifest: Mapping[str, Any] | None = None,
                          regions: JackknifeRegions | None = None) -> Path:
    """Write every cone, every random catalogue and ``manifest.json`` into ``outdir``.

    Parameters
    ----------
    cones : sequence of Table or (Table, info)
        Cones in index order; each info dict goes to the manifest's ``cones`` list.
    randoms : mapping label → Table, optional
        One random catalogue per sample and cut (label used in the file name).
    manifest : mapping, optional
        What was applied (settings, effects, seeds, ...); JSON-friendly values.
    regions : jackknife layout, optional
        Adds a ``region`` column to every file.

    Returns
    -------
    Path of the manifest.
    """
    out = Path(outdir)
    out.mkdir(parents=True, exist_ok=True)
    files: list[dict[str, Any]] = []
    infos = []
    for i, item in enumerate(cones):
        table, info = (item if isinstance(item, tuple) else (item, {}))
        name = f"cone_{i:03d}.fits"
        write_cone(table, out / name, regions, header=cone_header(info, manifest or {}))
        files.append({"kind": "cone", "index": i, "file": name, "rows": len(table)})
        infos.append(dict(info))
    for label, table in (randoms or {}).items():
        safe = "".join(c if c.isalnum() or c in "-_" else "_" for c in str(label))
        name = f"randoms_{safe}.fits"
        write_randoms(table, out / name, regions)
        files.append({"kind": "randoms", "label": str(label), "file": name, "rows": len(table)})
    doc = {"files": files, "zflag_codes": {str(k): v for k, v in ZFLAG_MEANING.items()},
           "cones": infos, **dict(manifest or {})}
    path = out / "manifest.json"
    write_text_atomic(path, json.dumps(to_jsonable(doc), indent=2, sort_keys=False) + "\n")
    return path
