"""Spectrograph tiles and their fibre budget.

The collision emulator (:mod:`.fibres`) decides which targets *could* get a fibre given
their close neighbours. A tile also has a finite number of fibres: where targets crowd,
a tile runs out and targets are lost even with no neighbour within θ_fc. This module
applies that budget after the collisions:

1. every target the emulator gave a fibre needs one of the ``fibres_per_tile`` fibres of
   a tile whose disc (``radius_deg``) covers it;
2. passes are taken in order and, within a pass, tiles one after another in a seeded
   random order (the survey's own order is unknown to the emulator); a tile gives its
   fibres to the not yet assigned targets it covers, first-pass targets before second-pass
   ones (those stand for the overlap recoveries), and within each group by a random
   priority drawn once per target (seeded), as surveys fix a random sub-priority per target
   — so a target that lost on one tile meets the same odds against the same rivals on the
   next;
3. a target a full tile leaves keeps its chance on every later tile that covers it — in
   a tile overlap or on a later pass.

Collisions are settled by the emulator before the budget (its first-pass targets are
collision-free; its second-pass recoveries are by construction on another tile's pass),
so with more fibres than targets on every tile the budget assigns every target the
emulator fibred, and the result equals the collision-only emulator exactly. Targets on no
tile get no fibre (a tiling should cover its footprint; the loss is reported).

A *regular* tiling is a Fibonacci lattice on the sphere (González 2010, Math. Geosci. 42,
49) with N = ⌈4π / (1.5 R²)⌉ points: its covering radius, largest near the poles, measured
at 0.86–0.94 R for R = 0.5–3°, so no point of the sphere lies farther than R from a centre
(2.1 tiles cover an average point; a sparser lattice leaves gaps at the poles). Pass k
uses the lattice rotated about the polar axis by k golden angles and tilted by k × 0.4 R,
so later passes cover the seams of earlier ones.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import healpy as hp
import numpy as np
from astropy.table import Table
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation

from ..errors import InputError
from ..footprint.protocols import SkyFootprint
from ..sphere import radec_to_vec
from .settings import TileSettings

#: Golden angle [rad]: the azimuthal step of the Fibonacci lattice.
GOLDEN_ANGLE = math.pi * (3.0 - math.sqrt(5.0))
#: Solid angle per lattice point in units of R² [sr/rad²]: 1.5 keeps the Fibonacci lattice's
#: covering radius below R everywhere (1.8 and 2.0 leave specks uncovered at the poles).
LATTICE_AREA_PER_TILE = 1.5
#: Edges of the tile load (targets a tile covers / its fibres) binned in the diagnostics.
LOAD_EDGES = (0.0, 0.5, 0.75, 1.0, 1.25, 1.5, 2.0, 3.0, 1e9)


@dataclass
class Tiling:
    """Tile centres and their budget.

    Attributes
    ----------
    ra, dec : ndarray
        Tile centres [deg].
    pass_index : ndarray of int
        Pass of each tile (1, 2, …).
    radius_deg : float
        Tile radius [deg].
    fibres_per_tile : int
    source : str
        ``regular`` or the file the centres came from.
    """

    ra: NDArray[np.float64]
    dec: NDArray[np.float64]
    pass_index: NDArray[np.int64]
    radius_deg: float
    fibres_per_tile: int
    source: str = "regular"

    def __len__(self) -> int:
        return len(self.ra)


def fibonacci_lattice(n: int) -> NDArray[np.float64]:
    """``n`` unit vectors of the Fibonacci lattice (equal-area in z, golden-angle steps)."""
    i = np.arange(n, dtype=np.float64)
    z = 1.0 - 2.0 * (i + 0.5) / n
    rho = np.sqrt(np.maximum(1.0 - z * z, 0.0))
    phi = i * GOLDEN_ANGLE
    return np.column_stack([rho * np.cos(phi), rho * np.sin(phi), z])


def regular_centres(radius_deg: float, passes: int) -> tuple[NDArray[np.float64], ...]:
    """(ra, dec [deg], pass) of a regular tiling of the whole sphere, ``passes`` times."""
    r = math.radians(radius_deg)
    n = int(math.ceil(4.0 * math.pi / (LATTICE_AREA_PER_TILE * r * r)))
    base = fibonacci_lattice(n)
    ras, decs, ps = [], [], []
    for k in range(passes):
        rot = Rotation.from_euler("zy", [k * GOLDEN_ANGLE, k * 0.4 * r])
        v = rot.apply(base)
        ras.append(np.degrees(np.arctan2(v[:, 1], v[:, 0])) % 360.0)
        decs.append(np.degrees(np.arcsin(np.clip(v[:, 2], -1.0, 1.0))))
        ps.append(np.full(n, k + 1, dtype=np.int64))
    return np.concatenate(ras), np.concatenate(decs), np.concatenate(ps)


def read_centres(path: Path, key: str = "survey.tiles.centres"
                 ) -> tuple[NDArray[np.float64], ...]:
    """(ra, dec [deg], pass) from a table file with columns ra, dec and optional pass."""
    if not path.is_file():
        raise InputError(f"{key} = '{path}': file not found")
    try:
        t = Table.read(path)
    except Exception as exc:  # noqa: BLE001 - any read failure is a user-file problem
        raise InputError(f"{key} = '{path}': not a table astropy can read "
                         f"({type(exc).__name__}: {exc})") from None
    cols = {c.lower(): c for c in t.colnames}
    missing = [c for c in ("ra", "dec") if c not in cols]
    if missing:
        raise InputError(f"{key} = '{path}': missing column(s) {', '.join(missing)}; expected "
                         f"ra and dec in degrees (and optionally pass); found "
                         f"{', '.join(t.colnames)}")
    try:
        ra = np.asarray(t[cols["ra"]], dtype=np.float64)
        dec = np.asarray(t[cols["dec"]], dtype=np.float64)
        ps = (np.asarray(t[cols["pass"]], dtype=np.float64) if "pass" in cols
              else np.ones(len(ra)))
    except (TypeError, ValueError):
        raise InputError(f"{key} = '{path}': ra, dec and pass must be numbers") from None
    bad = ~(np.isfinite(ra) & np.isfinite(dec) & (np.abs(dec) <= 90.0))
    if len(ra) == 0 or bad.any():
        raise InputError(f"{key} = '{path}': " + ("no rows" if len(ra) == 0 else
                         f"row {int(np.flatnonzero(bad)[0])} has ra/dec not finite or "
                         "|dec| > 90 deg"))
    if not (np.all(ps == np.round(ps)) and ps.min() >= 1):
        raise InputError(f"{key} = '{path}': column pass must hold integers >= 1")
    return ra % 360.0, dec, ps.astype(np.int64)


def _covered_directions(footprint: SkyFootprint) -> tuple[cKDTree, float] | None:
    """A tree of the footprint's observed pixel centres and the pixel radius [rad]."""
    pix = np.asarray(footprint.occupied, dtype=np.int64)
    if pix.size == 0:
        return None
    x, y, z = hp.pix2vec(footprint.nside, pix, nest=footprint.nest)
    return cKDTree(np.column_stack([x, y, z])), float(hp.max_pixrad(footprint.nside))


def make_tiling(settings: TileSettings, footprint: SkyFootprint | None,
                base_dir: Path | None = None) -> Tiling:
    """The tiles of ``settings``, kept to those that touch ``footprint``.

    A regular tiling keeps the lattice points whose disc reaches an observed pixel. Tiles
    from a file must each reach the footprint: a tile entirely off it is an error naming
    ``survey.tiles.centres`` (usually a wrong file or a coordinate-frame mix-up).
    """
    key = "survey.tiles.centres"
    if settings.centres.strip() == "regular":
        ra, dec, ps = regular_centres(settings.radius_deg, settings.passes)
        source = "regular"
    else:
        p = Path(settings.centres).expanduser()
        if not p.is_absolute() and base_dir is not None:
            p = base_dir / p
        ra, dec, ps = read_centres(p, key)
        source = str(p)
    n_all = len(ra)
    if footprint is not None:
        found = _covered_directions(footprint)
        if found is None:
            raise InputError("footprint: no pixel with completeness > 0 for the tiles to "
                             "cover")
        tree, pixrad = found
        reach = math.radians(settings.radius_deg) + pixrad
        chord, _ = tree.query(radec_to_vec(ra, dec), k=1,
                              distance_upper_bound=2.0 * math.sin(0.5 * min(reach, math.pi)))
        touches = np.isfinite(chord)
        if source != "regular" and not touches.all():
            first = int(np.flatnonzero(~touches)[0])
            raise InputError(
                f"{key} = '{settings.centres}': {int((~touches).sum())} of {n_all} tiles lie "
                f"entirely off the footprint (first: row {first}, ra {ra[first]:.4f}, dec "
                f"{dec[first]:.4f} deg, radius {settings.radius_deg} deg); expected tile "
                "centres in the footprint's frame (equatorial degrees)")
        ra, dec, ps = ra[touches], dec[touches], ps[touches]
        if len(ra) == 0:
            raise InputError(f"{key}: no tile reaches the footprint")
    return Tiling(ra, dec, ps, float(settings.radius_deg), int(settings.fibres_per_tile),
                  source)


def tile_members(tiling: Tiling, xyz: NDArray[np.float64]
                 ) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """(tile, target) index pairs of every target inside every tile, sorted by tile."""
    if len(xyz) == 0 or len(tiling) == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    chord = 2.0 * math.sin(0.5 * math.radians(tiling.radius_deg))
    centres = radec_to_vec(tiling.ra, tiling.dec)
    hits = cKDTree(centres).query_ball_tree(cKDTree(xyz), chord)
    counts = np.fromiter((len(h) for h in hits), dtype=np.int64, count=len(hits))
    tile = np.repeat(np.arange(len(hits), dtype=np.int64), counts)
    target = (np.concatenate([np.asarray(h, dtype=np.int64) for h in hits if h])
              if counts.sum() else np.zeros(0, np.int64))
    return tile, target


def assign_budget(ra_deg: ArrayLike, dec_deg: ArrayLike, eligible: NDArray[np.bool_],
                  second_pass: NDArray[np.bool_], tiling: Tiling, rng: np.random.Generator
                  ) -> tuple[NDArray[np.bool_], dict[str, Any]]:
    """Give the eligible targets fibres tile by tile, at most ``fibres_per_tile`` per tile.

    Parameters
    ----------
    ra_deg, dec_deg : array_like
        Target positions [deg].
    eligible : ndarray of bool
        Targets the collision emulator fibred (all targets without collisions).
    second_pass : ndarray of bool
        Eligible targets the emulator recovered on its second pass; they come after the
        first-pass ones on every tile.
    tiling : Tiling
    rng : numpy Generator
        Tile order and priorities.

    Returns
    -------
    assigned : ndarray of bool
        Targets with a fibre from some tile.
    stats : dict
        n_tiles, n_eligible, n_assigned, n_off_tiles (eligible targets no tile covers),
        n_budget_lost (eligible targets without a fibre), budget_lost_fraction (of all
        targets), and the losses against the tile load (eligible targets on a target's most
        crowded tile over its fibres): load_lower_edges (the last bin open), load_count,
        load_lost.
    """
    xyz = radec_to_vec(np.asarray(ra_deg, dtype=np.float64),
                       np.asarray(dec_deg, dtype=np.float64))
    n = len(xyz)
    eligible = np.asarray(eligible, dtype=bool)
    assigned = np.zeros(n, dtype=bool)
    tile, target = tile_members(tiling, xyz)
    keep = eligible[target]
    tile, target = tile[keep], target[keep]
    n_tiles = len(tiling)
    load_per_tile = np.bincount(tile, minlength=n_tiles) / tiling.fibres_per_tile
    # first-pass targets before second-pass ones, random within each (keys in [0, 2))
    priority = rng.random(n) + np.asarray(second_pass, dtype=np.float64)
    order_in_pass = rng.permutation(n_tiles)
    # visiting order: pass by pass, tiles at random within a pass
    visit = order_in_pass[np.argsort(tiling.pass_index[order_in_pass], kind="stable")]
    starts = np.searchsorted(tile, np.arange(n_tiles + 1))
    cap = tiling.fibres_per_tile
    for t in visit:  # a loop over tiles (hundreds), never over targets
        members = target[starts[t]:starts[t + 1]]
        free = members[~assigned[members]]
        if free.size > cap:
            free = free[np.argpartition(priority[free], cap - 1)[:cap]]
        assigned[free] = True
    covered = np.zeros(n, dtype=bool)
    covered[target] = True
    load = np.zeros(n)
    np.maximum.at(load, target, load_per_tile[tile])
    edges = np.asarray(LOAD_EDGES)
    el = eligible & covered
    count, _ = np.histogram(load[el], bins=edges)
    lost, _ = np.histogram(load[el & ~assigned], bins=edges)
    n_lost = int((eligible & ~assigned).sum())
    stats = {"n_tiles": int(n_tiles), "tile_source": tiling.source,
             "radius_deg": tiling.radius_deg, "fibres_per_tile": int(cap),
             "n_passes": int(np.unique(tiling.pass_index).size),
             "n_eligible": int(eligible.sum()), "n_assigned": int(assigned.sum()),
             "n_off_tiles": int((eligible & ~covered).sum()),
             "n_budget_lost": n_lost, "budget_lost_fraction": n_lost / n if n else 0.0,
             "load_lower_edges": [float(e) for e in edges[:-1]],
             "load_count": count.tolist(), "load_lost": lost.tolist()}
    return assigned, stats
