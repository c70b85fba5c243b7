"""Catalogue input/output and the in-memory galaxy-box catalogue.

Every catalogue goes through :mod:`astropy.table`, so FITS, HDF5, ECSV, Parquet and
numpy ``.npz`` files are all read and written the same way.  A *column mapping*
(from the config) renames the user's columns to conecheck's canonical names.

Canonical galaxy-box columns (docs/design.md §3 units):

========== ============ ===============================================
name        unit         meaning
========== ============ ===============================================
x, y, z     Mpc/h        comoving position in [0, L)
vx, vy, vz  km/s         peculiar velocity
abs_mag     mag          absolute magnitude M − 5 log10 h (optional)
is_central  —            True for centrals (optional)
halo_id     —            host-halo identifier (optional)
halo_mass   Msun/h       host-halo mass (optional)
========== ============ ===============================================
"""

from __future__ import annotations

import hashlib
import logging
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from astropy.io import fits
from astropy.table import Table
from numpy.typing import NDArray

from .atomic import atomic_path
from .errors import InputError
from .periodic import wrap_into_box
from .units import H_SCALED, to_pipeline_units

log = logging.getLogger(__name__)

#: File suffix -> astropy.table format name (``None``: handled here).
FORMATS: dict[str, str | None] = {
    ".fits": "fits", ".fit": "fits", ".fits.gz": "fits",
    ".hdf5": "hdf5", ".h5": "hdf5",
    ".ecsv": "ascii.ecsv",
    ".parquet": "parquet",
    ".npz": None,
}

POSITION_COLUMNS = ("x", "y", "z")
VELOCITY_COLUMNS = ("vx", "vy", "vz")
#: Fractional tolerance of the periodic wrap: positions within tol·L outside [0, L) are wrapped.
WRAP_TOLERANCE = 1e-3


def _suffix(path: Path) -> str:
    name = path.name.lower()
    for suf in sorted(FORMATS, key=len, reverse=True):
        if name.endswith(suf):
            return suf
    raise InputError(f"{path}: unknown catalogue format '{path.suffix}'; expected one of "
                     + ", ".join(sorted(FORMATS)))


def read_table(path: str | os.PathLike[str], hdf5_path: str | None = None) -> Table:
    """Read a catalogue file into an astropy Table (format from the file name).

    Parameters
    ----------
    path : path
        FITS, HDF5, ECSV, Parquet or .npz file.
    hdf5_path : str, optional
        HDF5 only: the table dataset, or a group whose datasets are the columns (one
        dataset per column, (N, k) datasets allowed; the group's attributes are the
        header). Default: the first table (compound) dataset, else the root group's
        datasets.

    Raises
    ------
    InputError
        When the file is missing, unreadable or not a table of the named format.
    """
    path = Path(path)
    suf = _suffix(path)
    if not path.exists():
        raise InputError(f"{path}: file not found")
    if not path.is_file():
        raise InputError(f"{path}: not a regular file")
    try:
        if FORMATS[suf] is None:
            with np.load(path, allow_pickle=False) as data:
                return Table({k: data[k] for k in data.files})
        repeated = _repeated_column_names(path, FORMATS[suf])
        if repeated:
            raise InputError(f"{path}: column name(s) {', '.join(map(repr, repeated))} appear "
                             "more than once in the file; give every column its own name so "
                             "the column mapping is unambiguous")
        if FORMATS[suf] == "hdf5":
            return _read_hdf5(path, hdf5_path)
        if hdf5_path is not None:
            raise InputError(f"{path}: an HDF5 path ({hdf5_path!r}) was given for a "
                             f"{FORMATS[suf]} file")
        return Table.read(path, format=FORMATS[suf])
    except InputError:
        raise
    except ImportError as exc:
        raise InputError(f"{path}: reading this format needs an extra package ({exc}); "
                         "install it with: pip install 'conecheck[io]'") from None
    except Exception as exc:  # noqa: BLE001 - any parser failure is a user-file problem
        raise InputError(f"{path}: cannot read as {FORMATS[suf] or 'npz'} table "
                         f"({type(exc).__name__}: {exc})") from None


def _repeated_column_names(path: Path, fmt: str) -> list[str]:
    """Column names the file's header holds twice.

    astropy renames a repeated ECSV name to ``name_1`` without a word, and FITS and Parquet
    readers fail with messages that do not name the column; the header is read first so
    the user learns which name is repeated.  HDF5 compound types and .npz keys cannot repeat.
    """
    names: list[str] = []
    if fmt == "fits":
        with fits.open(path, memmap=True) as hdul:
            table = next((h for h in hdul if isinstance(h, fits.BinTableHDU | fits.TableHDU)),
                         None)
            if table is not None:
                head = table.header
                names = [str(head.get(f"TTYPE{i}", "")).strip()
                         for i in range(1, int(head.get("TFIELDS", 0)) + 1)]
    elif fmt == "parquet":
        import pyarrow.parquet as pq  # optional dependency (the io extra): imported on use

        names = list(pq.read_schema(path).names)
    elif fmt == "ascii.ecsv":
        with open(path, encoding="utf-8", errors="replace") as fh:
            # the first line that is neither blank nor a comment holds the column names
            line = next((ln for ln in fh if ln.strip() and not ln.startswith("#")), "")
        names = line.replace(",", " ").split()
    seen: set[str] = set()
    return sorted({n for n in names if n and (n in seen or seen.add(n))})


def _read_hdf5(path: Path, hdf5_path: str | None) -> Table:
    """An HDF5 table dataset, or a group of one dataset per column (see :func:`read_table`)."""
    import h5py

    with h5py.File(path, "r") as f:
        if hdf5_path is None:
            found: list[str] = []
            f.visititems(lambda name, obj: found.append(name)
                         if isinstance(obj, h5py.Dataset) and obj.dtype.names else None)
            target = found[0] if found else "/"
        else:
            if hdf5_path not in f:
                raise InputError(f"{path}: no dataset or group {hdf5_path!r}; the file has "
                                 f"{', '.join(sorted(f.keys())) or 'nothing'} at its root")
            target = hdf5_path
        obj = f[target]
        if isinstance(obj, h5py.Dataset):
            if not obj.dtype.names:
                raise InputError(f"{path}: {target!r} is a plain array, not a table; give "
                                 f"the group that holds one dataset per column")
            return Table.read(path, format="hdf5", path=target)
        columns = {k: v for k, v in obj.items() if isinstance(v, h5py.Dataset)}
        if not columns:
            raise InputError(f"{path}: group {target!r} holds no datasets (no table and no "
                             f"column arrays); set the HDF5 path of the catalogue")
        lengths = {k: v.shape[0] if v.shape else 0 for k, v in columns.items()}
        n = max(lengths.values(), key=list(lengths.values()).count)  # the common length
        odd = sorted(k for k, m in lengths.items() if m != n)
        if odd:
            log.info("%s: datasets %s in %r are not %d rows long; left out", path, odd,
                     target, n)
        table = Table({k: np.asarray(v[()]) for k, v in columns.items() if lengths[k] == n})
        table.meta.update({str(k): (v.item() if hasattr(v, "item") else v)
                           for k, v in obj.attrs.items()})
        return table


def write_table(table: Table, path: str | os.PathLike[str]) -> None:
    """Write ``table`` atomically; the format follows the file name."""
    path = Path(path)
    suf = _suffix(path)
    with atomic_path(path) as tmp:
        if FORMATS[suf] is None:
            arrays = {name: np.asarray(table[name]) for name in table.colnames}
            with open(tmp, "wb") as fh:
                np.savez(fh, **arrays)
        elif FORMATS[suf] == "hdf5":
            table.write(tmp, format="hdf5", path="catalog", overwrite=True,
                        serialize_meta=True)
        else:
            table.write(tmp, format=FORMATS[suf], overwrite=True)


#: Largest |M| accepted as a galaxy absolute magnitude (galaxies span about −10 to −26;
#: larger values are placeholders for missing data).
MAX_ABS_MAGNITUDE = 40.0


#: Canonical names that stand for three columns, filled from one (N, 3) column.
VECTOR_COLUMNS = {"position": POSITION_COLUMNS, "velocity": VELOCITY_COLUMNS}


def _component(table: Table, user: str) -> tuple[str, int] | None:
    """``("pos", 1)`` for a mapping value ``"pos[1]"`` naming a component of a column."""
    if not (user.endswith("]") and "[" in user):
        return None
    name, _, index = user[:-1].rpartition("[")
    return (name, int(index)) if index.isdigit() and name in table.colnames else None


def apply_column_map(table: Table, column_map: Mapping[str, str], source: str) -> Table:
    """Rename user columns to canonical names.

    Parameters
    ----------
    column_map : mapping
        canonical name -> name in the user's file. ``position`` / ``velocity`` may name one
        (N, 3) column, split into x, y, z / vx, vy, vz; ``"col[i]"`` takes component i of
        an (N, k) column.
    source : str
        File name, for error messages.
    """
    out = Table(meta=dict(table.meta))
    problems = []
    users = list(column_map.values())
    for user in sorted({u for u in users if users.count(u) > 1}):
        keys = [k for k, u in column_map.items() if u == user]
        problems.append(f"{source}: column '{user}' is mapped to {len(keys)} quantities "
                        f"({', '.join(keys)}); map each to its own column")
    used = set()
    for canonical, user in column_map.items():
        part = _component(table, user)
        if user not in table.colnames and part is None:
            problems.append(f"{source}: column '{user}' (mapped to '{canonical}') not found; "
                            f"available columns: {', '.join(table.colnames)}")
            continue
        if canonical in VECTOR_COLUMNS:
            col = np.asarray(table[user])
            if col.ndim != 2 or col.shape[1] != 3:
                problems.append(f"{source}: column '{user}' (mapped to '{canonical}') has "
                                f"shape {col.shape}; expected (N, 3)")
                continue
            for k, name in enumerate(VECTOR_COLUMNS[canonical]):
                out[name] = col[:, k]
            used.add(user)
            continue
        if part is not None:
            name, k = part
            col = np.asarray(table[name])
            if col.ndim != 2 or k >= col.shape[1]:
                problems.append(f"{source}: '{user}' (mapped to '{canonical}'): column "
                                f"'{name}' has shape {col.shape}; no component {k}")
                continue
            out[canonical] = col[:, k]
            used.add(name)
            continue
        out[canonical] = table[user]
        used.add(user)
    for name in table.colnames:
        if name not in used and name not in out.colnames:
            out[name] = table[name]
    if problems:
        raise InputError("; ".join(problems), problems)
    return out


#: How a user maps columns, named in "missing column" errors unless the caller knows better.
COLUMN_MAP_HINT = ("map them to the file's columns with box.columns in a run configuration "
                   "(e.g. x = \"px\", or position = \"pos\" for an (N, 3) column)")


def require_columns(table: Table, names: Sequence[str], source: str,
                    hint: str = COLUMN_MAP_HINT) -> None:
    """Check that ``names`` exist, are numeric and finite.

    ``hint`` says how to map the file's columns (the config key or command-line option),
    appended to the message when columns are missing.
    """
    problems = []
    missing = [n for n in names if n not in table.colnames]
    if missing:
        problems.append(f"{source}: missing column(s) {', '.join(repr(n) for n in missing)}; "
                        f"the file has {', '.join(table.colnames) or 'no columns'}; {hint}")
    for name in names:
        if name in missing:
            continue
        col = np.asarray(table[name])
        if col.dtype.kind not in "fiu":  # booleans and text are not coordinates or magnitudes
            problems.append(f"{source}: column '{name}' has dtype {col.dtype}; expected numbers")
            continue
        if col.ndim != 1:
            problems.append(f"{source}: column '{name}' has shape {col.shape}; expected one "
                            f"value per row (map each component to its own column)")
            continue
        if col.dtype.kind == "f":
            bad = ~np.isfinite(col)
            if bad.any():
                problems.append(f"{source}: column '{name}' has {int(bad.sum())} NaN/inf "
                                f"values (first at row {int(np.argmax(bad))})")
    if problems:
        raise InputError("; ".join(problems), problems)


def wrap_positions(pos: NDArray[np.float64], box_size: float, source: str) -> NDArray[np.float64]:
    """Wrap positions into [0, L), refusing anything beyond a small tolerance.

    Also refuses coordinates that are clearly in the wrong units: all positions
    below 1e-2 L (e.g. Gpc/h or box units in a box given in Mpc/h).
    """
    pos = np.asarray(pos, dtype=np.float64)
    if pos.size == 0:
        raise InputError(f"{source}: catalogue is empty")
    tol = WRAP_TOLERANCE * box_size
    lo, hi = pos.min(), pos.max()
    if lo < -tol or hi >= box_size + tol:
        raise InputError(f"{source}: positions span [{lo:.4g}, {hi:.4g}] Mpc/h, outside the box "
                         f"[0, {box_size:g}) beyond the wrap tolerance {tol:.3g} Mpc/h; check "
                         "box_size and the position columns")
    if hi < 1e-2 * box_size and len(pos) > 10:
        raise InputError(f"{source}: all positions are below {hi:.4g} while box_size = "
                         f"{box_size:g} Mpc/h; the positions look like they are in other units "
                         "(Gpc/h or box units?)")
    # numpy.mod alone can round a tiny negative coordinate up to L itself, outside [0, L)
    return wrap_into_box(pos, box_size)


@dataclass
class MatterParticles:
    """Matter particles of the box, for lensing statistics.

    Attributes
    ----------
    position : ndarray, shape (N, 3)
        Real-space comoving positions in [0, box_size) [Mpc/h].
    particle_mass : float
        Mass of one particle [M_⊙/h].
    box_size : float
        Side of the periodic box [Mpc/h].
    meta : dict
        Provenance.
    """

    position: NDArray[np.float64]
    particle_mass: float
    box_size: float
    meta: dict[str, Any] = field(default_factory=dict)

    def __len__(self) -> int:
        return int(self.position.shape[0])


def read_matter_particles(path: str | os.PathLike[str], particle_mass: float, box_size: float,
                          column_map: Mapping[str, str] | None = None,
                          hdf5_path: str | None = None, hubble_h: float | None = None,
                          key: str = "box.particles") -> MatterParticles:
    """Read a particle file (x, y, z columns) for the galaxies' box of side ``box_size``.

    A BOXSIZE in the file's header must equal the galaxies' box size; positions must lie in
    the box. ``particle_mass`` [M_⊙/h]; ``key`` names the configuration key in errors.
    """
    source = f"{key} ({path})"
    table = read_table(path, hdf5_path)
    if column_map:
        table = apply_column_map(table, column_map, source)
    meta = {k.upper(): v for k, v in table.meta.items()}
    if "BOXSIZE" in meta:
        own = float(meta["BOXSIZE"])
        if abs(own - box_size) > 1e-6 * box_size:
            raise InputError(f"{source}: the particles' box is {own:g} Mpc/h (BOXSIZE in the "
                             f"header), the galaxies' {box_size:g} Mpc/h; lensing needs the "
                             "matter of the same box")
    require_columns(table, list(POSITION_COLUMNS), source,
                    hint="map them with box.particle_columns (e.g. x = \"px\")")
    pos = np.column_stack([to_pipeline_units(table[c], table[c].unit, "length", c, source,
                                             hubble_h) for c in POSITION_COLUMNS])
    if not (np.isfinite(particle_mass) and particle_mass > 0):
        raise InputError(f"box.particle_mass: expected a positive mass per particle in "
                         f"M_⊙/h, got {particle_mass!r}")
    return MatterParticles(wrap_positions(pos, box_size, source), float(particle_mass),
                           float(box_size), {"source": str(path)})


@dataclass
class GalaxyBox:
    """A periodic galaxy catalogue: what every box input turns into.

    Attributes
    ----------
    position : ndarray, shape (N, 3)
        Comoving positions in [0, box_size), Mpc/h.
    velocity : ndarray, shape (N, 3)
        Peculiar velocities, km/s.
    box_size : float
        Side of the periodic box, Mpc/h.
    redshift : float
        Snapshot redshift.
    abs_mag : ndarray or None
        Absolute magnitude M − 5 log10 h; needed for luminosity cuts and flux limits.
    is_central, halo_id, halo_mass : ndarray or None
        Central flag, host-halo id and host-halo mass [Msun/h], when known.
    meta : dict
        Provenance (how the box was made, parameters, seeds).
    matter : MatterParticles or None
        Matter particles of the same box, for lensing statistics.
    snapshot : ndarray of int or None
        For several snapshots stacked into one box (:mod:`conecheck.box.snapshots`): the
        snapshot each galaxy comes from (0, 1, … in increasing redshift); None for one.
    snapshot_redshifts : tuple of float
        Redshift of each snapshot.
    snapshot_chi_edges : tuple of float
        Comoving distances [Mpc/h] where snapshot k hands over to k + 1 (one fewer than
        the snapshots): a cone takes a galaxy at true distance χ from the snapshot whose
        range holds χ.
    draw_key : ndarray of uint64 or None
        Each galaxy's identity in the random draws, for boxes populated with draws keyed
        per galaxy (:class:`conecheck.box.populate.KeyedDraws`): every per-galaxy draw made
        on the box (dilution, redshift scatter) is then keyed by it too, so that two such
        boxes treat a galaxy they share alike. None for every other box.
    """

    position: NDArray[np.float64]
    velocity: NDArray[np.float64]
    box_size: float
    redshift: float
    abs_mag: NDArray[np.float64] | None = None
    is_central: NDArray[np.bool_] | None = None
    halo_id: NDArray[np.int64] | None = None
    halo_mass: NDArray[np.float64] | None = None
    meta: dict[str, Any] = field(default_factory=dict)
    matter: MatterParticles | None = None
    snapshot: NDArray[np.int16] | None = None
    snapshot_redshifts: tuple[float, ...] = ()
    snapshot_chi_edges: tuple[float, ...] = ()
    draw_key: NDArray[np.uint64] | None = None

    def __len__(self) -> int:
        return int(self.position.shape[0])

    @property
    def n_snapshots(self) -> int:
        """Number of snapshots stacked in this box (1 for a plain box)."""
        return 1 if self.snapshot is None else len(self.snapshot_redshifts)

    def snapshot_part(self, k: int) -> GalaxyBox:
        """Snapshot ``k`` as a plain box (itself for a plain box and k = 0)."""
        if self.snapshot is None:
            if k != 0:
                raise IndexError(f"snapshot {k}: this box holds one snapshot")
            return self
        part = self.subset(self.snapshot == k)
        part.redshift = float(self.snapshot_redshifts[k])
        part.snapshot, part.snapshot_redshifts, part.snapshot_chi_edges = None, (), ()
        return part

    def cache_token(self) -> dict[str, Any]:
        """What identifies the box in a cache key: every physical column, not ``meta``."""
        token = {"position": self.position, "velocity": self.velocity,
                 "box_size": float(self.box_size), "redshift": float(self.redshift),
                 "abs_mag": self.abs_mag, "is_central": self.is_central,
                 "halo_id": self.halo_id, "halo_mass": self.halo_mass}
        if self.matter is not None:  # absent: the key of a box without matter is unchanged
            token["matter"] = {"position": self.matter.position,
                               "particle_mass": self.matter.particle_mass}
        if self.snapshot is not None:  # likewise for a single snapshot
            token["snapshots"] = {"snapshot": self.snapshot,
                                  "redshifts": list(self.snapshot_redshifts),
                                  "chi_edges": list(self.snapshot_chi_edges)}
        if self.draw_key is not None:
            token["draw_key"] = self.draw_key
        return token

    def subset(self, mask: NDArray[np.bool_]) -> GalaxyBox:
        """A new box holding only the galaxies where ``mask`` is True (same matter)."""
        def pick(a: NDArray[Any] | None) -> NDArray[Any] | None:
            return None if a is None else a[mask]
        return GalaxyBox(self.position[mask], self.velocity[mask], self.box_size, self.redshift,
                         pick(self.abs_mag), pick(self.is_central), pick(self.halo_id),
                         pick(self.halo_mass), dict(self.meta), self.matter,
                         pick(self.snapshot), self.snapshot_redshifts, self.snapshot_chi_edges,
                         pick(self.draw_key))

    def to_table(self) -> Table:
        """Canonical-column astropy Table with box_size and redshift in the metadata."""
        t = Table()
        for i, c in enumerate(POSITION_COLUMNS):
            t[c] = self.position[:, i]
            t[c].unit = H_SCALED["Mpc/h"]
        for i, c in enumerate(VELOCITY_COLUMNS):
            t[c] = self.velocity[:, i]
            t[c].unit = "km/s"
        for name in ("abs_mag", "is_central", "halo_id", "halo_mass"):
            val = getattr(self, name)
            if val is not None:
                t[name] = val
                t[name].unit = {"abs_mag": "mag", "halo_mass": H_SCALED["Msun/h"]}.get(name)
        t.meta["BOXSIZE"] = float(self.box_size)
        t.meta["REDSHIFT"] = float(self.redshift)
        for k, v in self.meta.items():
            if isinstance(v, (int, float, str, bool)):
                t.meta[str(k)[:8].upper() if len(str(k)) > 8 else str(k).upper()] = v
        return t

    @classmethod
    def from_table(cls, table: Table, box_size: float | None = None,
                   redshift: float | None = None, source: str = "catalogue",
                   require_magnitudes: bool = False,
                   hubble_h: float | None = None) -> GalaxyBox:
        """Build a box from a canonical-column table, checking every input.

        ``box_size`` [Mpc/h] and ``redshift`` default to the table's BOXSIZE/REDSHIFT
        metadata when not given. Columns that carry a unit are converted to Mpc/h, km/s and
        Msun/h (:mod:`conecheck.units`; ``hubble_h`` converts plain Mpc and Msun).
        """
        meta = {k.upper(): v for k, v in table.meta.items()}
        if box_size is None:
            if "BOXSIZE" not in meta:
                raise InputError(f"{source}: box size not given and no BOXSIZE in the file header")
            box_size = float(meta["BOXSIZE"])
        if redshift is None:
            if "REDSHIFT" not in meta:
                raise InputError(f"{source}: snapshot redshift not given and no REDSHIFT in the "
                                 "file header")
            redshift = float(meta["REDSHIFT"])
        if not box_size > 0:
            raise InputError(f"{source}: box size {box_size!r} must be > 0 Mpc/h")
        needed = list(POSITION_COLUMNS + VELOCITY_COLUMNS)
        if require_magnitudes:
            needed.append("abs_mag")
        require_columns(table, needed, source)
        pos = np.column_stack([to_pipeline_units(table[c], table[c].unit, "length", c, source,
                                                 hubble_h) for c in POSITION_COLUMNS])
        vel = np.column_stack([to_pipeline_units(table[c], table[c].unit, "speed", c, source)
                               for c in VELOCITY_COLUMNS])
        pos = wrap_positions(pos, box_size, source)
        if np.abs(vel).max() > 2e4:
            raise InputError(f"{source}: peculiar velocities reach {np.abs(vel).max():.3g}; "
                             "expected km/s (|v| < 20000)")

        def opt(name: str, dtype: Any) -> NDArray[Any] | None:
            if name not in table.colnames:
                return None
            if name in ("abs_mag", "halo_mass"):
                require_columns(table, [name], source)
            if name == "halo_mass":
                return to_pipeline_units(table[name], table[name].unit, "mass", name, source,
                                         hubble_h)
            return np.asarray(table[name]).astype(dtype)

        abs_mag = opt("abs_mag", np.float64)
        if abs_mag is not None and len(abs_mag):
            odd = np.abs(abs_mag) > MAX_ABS_MAGNITUDE
            if odd.any():
                raise InputError(
                    f"{source}: column 'abs_mag' has {int(odd.sum())} values beyond "
                    f"±{MAX_ABS_MAGNITUDE:g} (range [{abs_mag.min():.3g}, {abs_mag.max():.3g}]), "
                    f"not galaxy absolute magnitudes; remove placeholder values such as 99 "
                    f"or map the right column")
        return cls(pos, vel, float(box_size), float(redshift), abs_mag,
                   opt("is_central", bool), opt("halo_id", np.int64), opt("halo_mass", np.float64),
                   {"source": source})


def read_galaxy_box(path: str | os.PathLike[str], column_map: Mapping[str, str] | None = None,
                    box_size: float | None = None, redshift: float | None = None,
                    require_magnitudes: bool = False,
                    hdf5_path: str | None = None, hubble_h: float | None = None) -> GalaxyBox:
    """Read a galaxy-box file, map its columns and check it (see :class:`GalaxyBox`).

    ``hdf5_path``: the dataset or group of an HDF5 file (see :func:`read_table`);
    ``hubble_h``: H0/(100 km/s/Mpc), to convert columns given in Mpc or Msun.
    """
    table = read_table(path, hdf5_path)
    if column_map:
        table = apply_column_map(table, column_map, str(path))
    return GalaxyBox.from_table(table, box_size, redshift, str(path), require_magnitudes,
                                hubble_h)


def write_galaxy_box(box: GalaxyBox, path: str | os.PathLike[str]) -> None:
    """Write a galaxy box atomically in the format given by the file name."""
    write_table(box.to_table(), path)


def file_sha256(path: str | os.PathLike[str], chunk: int = 1 << 20) -> str:
    """Hex SHA-256 of a file's content (for provenance and cache keys)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            h.update(block)
    return h.hexdigest()
