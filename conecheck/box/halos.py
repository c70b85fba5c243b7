"""Halo catalogues: the in-memory form and a checked reader.

Canonical halo columns (map yours with ``column_map``, canonical -> your name):

=============  =========  =====================================================
name           unit       meaning
=============  =========  =====================================================
x, y, z        Mpc/h      comoving position in [0, L)
vx, vy, vz     km/s       peculiar velocity
mass           Msun/h     halo mass (200 × mean density, the HOD's convention)
concentration  —          NFW concentration (optional; else Duffy et al. 2008)
rvir           Mpc/h      comoving halo radius (optional; else from the mass)
secondary      any        secondary property for assembly bias (optional; any
                          other column can be named in the HOD file instead)
halo_id        —          identifier (optional; else the row number)
=============  =========  =====================================================
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..catalog import (
    POSITION_COLUMNS,
    VELOCITY_COLUMNS,
    MatterParticles,
    apply_column_map,
    read_table,
    require_columns,
    wrap_positions,
)
from ..errors import InputError
from ..units import to_pipeline_units


@dataclass
class HaloCatalog:
    """A periodic halo catalogue.

    Attributes
    ----------
    position : ndarray (N, 3)
        Comoving positions in [0, box_size), Mpc/h.
    velocity : ndarray (N, 3)
        Peculiar velocities, km/s.
    mass : ndarray (N,)
        Halo masses, Msun/h (Δ = 200m).
    box_size : float
        Periodic box side, Mpc/h.
    redshift : float
        Snapshot redshift.
    concentration, rvir : ndarray or None
        NFW concentration and comoving radius [Mpc/h], when known.
    halo_id : ndarray or None
        Identifiers; the row number is used when None.
    properties : dict
        Further per-halo columns by name (e.g. a secondary property for assembly bias).
    meta : dict
        Provenance.
    """

    position: NDArray[np.float64]
    velocity: NDArray[np.float64]
    mass: NDArray[np.float64]
    box_size: float
    redshift: float
    concentration: NDArray[np.float64] | None = None
    rvir: NDArray[np.float64] | None = None
    halo_id: NDArray[np.int64] | None = None
    properties: dict[str, NDArray[Any]] = field(default_factory=dict)
    meta: dict[str, Any] = field(default_factory=dict)
    #: Matter particles of the same realisation (synthetic halos only), handed on to the
    #: galaxy box for lensing statistics.
    matter: MatterParticles | None = None

    def __post_init__(self) -> None:
        n = len(self.mass)
        problems = []
        if self.position.shape != (n, 3) or self.velocity.shape != (n, 3):
            problems.append(f"halo catalogue: position {self.position.shape} and velocity "
                            f"{self.velocity.shape} must both be ({n}, 3)")
        for name in ("concentration", "rvir", "halo_id"):
            v = getattr(self, name)
            if v is not None and len(v) != n:
                problems.append(f"halo catalogue: column '{name}' has {len(v)} rows, not {n}")
        for name, v in self.properties.items():
            if len(v) != n:
                problems.append(f"halo catalogue: column '{name}' has {len(v)} rows, not {n}")
        if problems:
            raise InputError("; ".join(problems), problems)

    def __len__(self) -> int:
        return int(len(self.mass))

    def cache_token(self) -> dict[str, Any]:
        """What identifies the halos in a cache key: every column, not ``meta``."""
        return {"position": self.position, "velocity": self.velocity, "mass": self.mass,
                "box_size": float(self.box_size), "redshift": float(self.redshift),
                "concentration": self.concentration, "rvir": self.rvir,
                "halo_id": self.halo_id, "properties": dict(self.properties)}

    def column(self, name: str) -> NDArray[Any]:
        """A per-halo column by canonical or property name (InputError when absent)."""
        if name in ("concentration", "rvir", "halo_id", "mass"):
            val = getattr(self, name)
            if val is not None:
                return val
        if name in self.properties:
            return self.properties[name]
        available = ["mass"] + [n for n in ("concentration", "rvir", "halo_id")
                                if getattr(self, n) is not None] + list(self.properties)
        raise InputError(f"halo catalogue has no column '{name}' (available: "
                         f"{', '.join(available)})")


def read_halo_catalog(path: str | os.PathLike[str], column_map: Mapping[str, str] | None = None,
                      box_size: float | None = None,
                      redshift: float | None = None,
                      hdf5_path: str | None = None,
                      hubble_h: float | None = None) -> HaloCatalog:
    """Read and check a halo catalogue file (FITS, HDF5, ECSV, Parquet, npz).

    Parameters
    ----------
    path : path
        Catalogue file.
    column_map : mapping, optional
        Canonical name -> column name in the file (e.g. ``{"mass": "M200m"}``).
    box_size : float, optional
        Box side [Mpc/h]; defaults to the file's BOXSIZE header keyword.
    redshift : float, optional
        Snapshot redshift; defaults to the file's REDSHIFT header keyword.
    hdf5_path : str, optional
        HDF5 only: the table dataset or the group of column datasets.
    hubble_h : float, optional
        H0/(100 km/s/Mpc): converts columns given in Mpc or Msun (columns with a unit are
        converted, see :mod:`conecheck.units`).

    Raises
    ------
    InputError
        Missing or non-numeric columns, masses ≤ 0 or implausible, positions outside the
        box, radii ≤ 0, concentrations ≤ 1, missing box size or redshift.
    """
    source = str(path)
    table = read_table(path, hdf5_path)
    if column_map:
        table = apply_column_map(table, column_map, source)
    meta = {k.upper(): v for k, v in table.meta.items()}
    if box_size is None:
        if "BOXSIZE" not in meta:
            raise InputError(f"{source}: box size not given (--box-size) and no BOXSIZE in the "
                             "file header")
        box_size = float(meta["BOXSIZE"])
    if redshift is None:
        if "REDSHIFT" not in meta:
            raise InputError(f"{source}: snapshot redshift not given (--redshift) and no "
                             "REDSHIFT in the file header")
        redshift = float(meta["REDSHIFT"])
    if not (np.isfinite(box_size) and box_size > 0):
        raise InputError(f"{source}: box size {box_size!r} must be > 0 Mpc/h")
    if not (np.isfinite(redshift) and 0 <= redshift <= 10):
        raise InputError(f"{source}: redshift {redshift!r} outside 0 <= z <= 10")
    require_columns(table, list(POSITION_COLUMNS + VELOCITY_COLUMNS) + ["mass"], source,
                    hint="map them with box.columns in a run configuration or --column "
                         "NAME=COLUMN with conecheck mockbox (position / velocity may name "
                         "one (N, 3) column)")
    mass = to_pipeline_units(table["mass"], table["mass"].unit, "mass", "mass", source, hubble_h)
    if len(mass) == 0:
        raise InputError(f"{source}: halo catalogue is empty")
    if np.any(mass <= 0):
        bad = np.flatnonzero(mass <= 0)
        raise InputError(f"{source}: column 'mass' has {bad.size} non-positive values (first "
                         f"{mass[bad[0]]:.4g} at row {int(bad[0])}); expected masses in Msun/h")
    if mass.max() < 1e5:
        raise InputError(f"{source}: column 'mass' peaks at {mass.max():.4g}; expected Msun/h "
                         "(not log10 M or units of 1e10 Msun/h)")
    pos = wrap_positions(np.column_stack([
        to_pipeline_units(table[c], table[c].unit, "length", c, source, hubble_h)
        for c in POSITION_COLUMNS]), box_size, source)
    vel = np.column_stack([to_pipeline_units(table[c], table[c].unit, "speed", c, source)
                           for c in VELOCITY_COLUMNS])
    if np.abs(vel).max() > 2e4:
        raise InputError(f"{source}: halo velocities reach {np.abs(vel).max():.3g}; expected km/s")

    def optional(name: str, lower: float) -> NDArray[np.float64] | None:
        if name not in table.colnames:
            return None
        require_columns(table, [name], source)
        col = (to_pipeline_units(table[name], table[name].unit, "length", name, source,
                                 hubble_h) if name == "rvir"
               else np.asarray(table[name], dtype=np.float64))
        if np.any(col <= lower):
            raise InputError(f"{source}: column '{name}' has values <= {lower} (min "
                             f"{col.min():.4g})")
        return col

    conc = optional("concentration", 1.0)
    rvir = optional("rvir", 0.0)
    if rvir is not None and rvir.max() > 0.5 * box_size:
        raise InputError(f"{source}: column 'rvir' reaches {rvir.max():.4g}, more than half the "
                         f"box ({box_size:g} Mpc/h); expected comoving Mpc/h")
    hid = np.asarray(table["halo_id"]).astype(np.int64) if "halo_id" in table.colnames else None
    known = set(POSITION_COLUMNS + VELOCITY_COLUMNS) | {"mass", "concentration", "rvir",
                                                         "halo_id"}
    props = {n: np.asarray(table[n]) for n in table.colnames
             if n not in known and np.asarray(table[n]).ndim == 1}
    return HaloCatalog(pos, vel, mass, float(box_size), float(redshift), conc, rvir, hid, props,
                       {"HALOFILE": source})
