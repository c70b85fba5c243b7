"""Cone geometry: observers, rotations, periodic replication and sky coordinates.

A box galaxy at position x (box coordinates, Mpc/h) seen from an observer at o
through the periodic replica with integer offset n has the sky-frame vector

    r = R (x + n L − o),

with R the cone's rotation (box frame → equatorial frame).  χ = |r|, and the unit
vector r̂ gives RA = atan2(r̂_y, r̂_x) ∈ [0°, 360°) and Dec = atan2(r̂_z, √(r̂_x² + r̂_y²)).

Replication never materialises all replicas at once: the box is sorted once into a
grid of cells (:class:`BoxCells`), and for each replica only the cells whose cube
reaches the shell [χ_min − margin, χ_max + margin] — and, when a footprint is given,
whose angular extent reaches a footprint pixel — are visited, in chunks of bounded
size (:func:`iter_shell_chunks`).
"""

from __future__ import annotations

import logging
import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation

from ..errors import InputError
from ..footprint.protocols import SkyFootprint
from .settings import ObserverSettings

log = logging.getLogger(__name__)

#: Galaxies handled at once when scanning replicas (bounds the working memory).
CHUNK_ROWS = 1 << 18


# --------------------------------------------------------------------- observers
def check_observer(observer: ArrayLike, box_size: float) -> NDArray[np.float64]:
    """Return ``observer`` as a float array, refusing one outside [0, L)³.

    Parameters
    ----------
    observer : array_like, shape (3,)
        Observer position in box coordinates [Mpc/h].
    box_size : float
        Box side L [Mpc/h].
    """
    o = np.asarray(observer, dtype=np.float64)
    if o.shape != (3,) or not np.all(np.isfinite(o)):
        raise InputError(f"observers.positions: observer {observer!r} is not a finite "
                         "[x, y, z] triple in Mpc/h")
    if np.any(o < 0.0) or np.any(o >= box_size):
        raise InputError(f"observers.positions: observer at {o.tolist()} Mpc/h lies outside "
                         f"the box [0, {box_size:g})³; give positions in box coordinates")
    return o


def observer_position(settings: ObserverSettings, box_size: float, n_cones: int,
                      cone_index: int, rng: np.random.Generator) -> NDArray[np.float64]:
    """Observer position of cone ``cone_index`` [Mpc/h, box coordinates].

    ``random`` draws uniformly in [0, L)³ from ``rng``; ``grid`` places cone i at the
    centre of cell i of an m³ grid, m = ceil(n_cones^(1/3)); ``given`` uses
    ``positions[i mod len(positions)]``.
    """
    if settings.placement == "random":
        return check_observer(rng.uniform(0.0, box_size, size=3), box_size)
    if settings.placement == "grid":
        m = max(1, math.ceil(round(n_cones ** (1.0 / 3.0), 9)))
        while m**3 < n_cones:
            m += 1
        i, rem = divmod(cone_index % m**3, m * m)
        j, k = divmod(rem, m)
        return check_observer((np.array([i, j, k]) + 0.5) * box_size / m, box_size)
    pos = settings.positions[cone_index % len(settings.positions)]
    return check_observer(pos, box_size)


def rotation_matrix(settings: ObserverSettings, cone_index: int,
                    rng: np.random.Generator) -> NDArray[np.float64]:
    """Rotation R (box frame → sky frame) of cone ``cone_index``, a (3, 3) matrix.

    ``random``: uniform over SO(3) (scipy ``Rotation.random`` with ``rng``);
    ``none``: identity; ``given``: intrinsic z-y'-z'' Euler angles in degrees.
    """
    if settings.rotation == "none":
        return np.eye(3)
    if settings.rotation == "given":
        angles = settings.euler_deg[cone_index % len(settings.euler_deg)]
        return Rotation.from_euler("ZYZ", angles, degrees=True).as_matrix()
    try:
        rot = Rotation.random(rng=rng)
    except TypeError:  # scipy < 1.15 names the argument random_state
        rot = Rotation.random(random_state=rng)
    return rot.as_matrix()


def as_rotation_matrix(rotation: Any) -> NDArray[np.float64]:
    """Accept a scipy Rotation, a (3, 3) matrix or None (identity)."""
    if rotation is None:
        return np.eye(3)
    if isinstance(rotation, Rotation):
        return rotation.as_matrix()
    mat = np.asarray(rotation, dtype=np.float64)
    if mat.shape != (3, 3) or not np.allclose(mat @ mat.T, np.eye(3), atol=1e-8) \
            or not np.isclose(np.linalg.det(mat), 1.0, atol=1e-8):
        raise InputError("rotation: expected a proper 3x3 rotation matrix")
    return mat


# -------------------------------------------------------------- sky coordinates
def sky_coordinates(r: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64],
                                                     NDArray[np.float64]]:
    """RA [deg, in [0, 360)], Dec [deg] and χ = |r| [Mpc/h] of sky-frame vectors r (N, 3)."""
    x, y, z = r[:, 0], r[:, 1], r[:, 2]
    rho = np.hypot(x, y)
    chi = np.hypot(rho, z)
    ra = np.degrees(np.arctan2(y, x))
    ra = np.where(ra < 0.0, ra + 360.0, ra)
    ra = np.where(ra >= 360.0, ra - 360.0, ra)
    dec = np.degrees(np.arctan2(z, rho))
    return ra, dec, chi


# ------------------------------------------------------------------ replication
def _cube_distance_range(lo: NDArray[np.float64], side: float
                         ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Nearest and farthest distance from the origin to cubes [lo, lo + side)³ (rows)."""
    hi = lo + side
    nearest = np.clip(0.0, lo, hi)
    far = np.maximum(np.abs(lo), np.abs(hi))
    return np.linalg.norm(nearest, axis=-1), np.linalg.norm(far, axis=-1)


def replica_offsets(observer: ArrayLike, box_size: float, r_in: float,
                    r_out: float) -> NDArray[np.int64]:
    """Integer triples n whose replica cube [nL, (n+1)L)³ reaches the shell around o.

    A replica is needed when its nearest point to the observer lies within ``r_out``
    and its farthest point beyond ``r_in`` (both Mpc/h, margins included).

    Returns
    -------
    ndarray, shape (n_replicas, 3), int64
        Sorted by distance of the replica's nearest point (the home box first).
    """
    o = np.asarray(observer, dtype=np.float64)
    k = int(math.ceil(r_out / box_size)) + 1
    rng1 = np.arange(-k, k + 1)
    n = np.stack(np.meshgrid(rng1, rng1, rng1, indexing="ij"), axis=-1).reshape(-1, 3)
    dmin, dmax = _cube_distance_range(n * box_size - o, box_size)
    keep = (dmin <= r_out) & (dmax >= max(r_in, 0.0))
    order = np.lexsort((n[keep][:, 2], n[keep][:, 1], n[keep][:, 0], dmin[keep]))
    return n[keep][order].astype(np.int64)


def check_replication(n_replicas: int, r_out: float, box_size: float,
                      settings: ObserverSettings) -> bool:
    """Apply the replication policy; return True when structures may repeat.

    Repetition is possible when the shell's diameter 2 (χ_max + margin) exceeds L:
    a full-sky cone then holds some box galaxies twice (a narrow footprint may not;
    the cone's info counts the actual repeats, and the run reports them once, from the
    counts, rather than each cone warning of the possibility).
    """
    if n_replicas > settings.max_replicas:
        raise InputError(
            f"observers.max_replicas = {settings.max_replicas}: this shell needs "
            f"{n_replicas} periodic replicas of the {box_size:g} Mpc/h box (outer radius "
            f"{r_out:.1f} Mpc/h); lower shell.z_max or raise observers.max_replicas")
    repeats = 2.0 * r_out > box_size
    if repeats:
        msg = (f"the shell's diameter 2 x {r_out:.1f} Mpc/h exceeds the box side "
               f"{box_size:g} Mpc/h: the cone may see the same structures more than once")
        if settings.replication == "refuse":
            raise InputError(f"observers.replication = 'refuse': {msg} ({n_replicas} "
                             "replicas); lower shell.z_max, use a larger box or set "
                             "replication = 'warn'")
    return repeats


# ------------------------------------------------------------------- box cells
@dataclass
class BoxCells:
    """A box's galaxies sorted into an m³ grid of cubic cells (built once per box).

    Attributes
    ----------
    order : ndarray (N,)
        Galaxy indices sorted by cell.
    start : ndarray (m³ + 1,)
        ``order[start[c]:start[c+1]]`` are the galaxies of cell c.
    lo : ndarray (m³, 3)
        Lower corner of each cell [Mpc/h].
    side : float
        Cell side [Mpc/h].
    """

    order: NDArray[np.int64]
    start: NDArray[np.int64]
    lo: NDArray[np.float64]
    side: float

    @classmethod
    def build(cls, position: NDArray[np.float64], box_size: float,
              per_side: int | None = None) -> BoxCells:
        """Sort ``position`` (N, 3) [Mpc/h, in [0, L)] into cells (≈ 64 galaxies each)."""
        n = len(position)
        if per_side is None:
            per_side = int(np.clip(round((n / 64.0) ** (1.0 / 3.0)), 1, 32))
        m = per_side
        side = box_size / m
        ijk = np.clip((position / side).astype(np.int64), 0, m - 1)
        cell = (ijk[:, 0] * m + ijk[:, 1]) * m + ijk[:, 2]
        order = np.argsort(cell, kind="stable")
        start = np.searchsorted(cell[order], np.arange(m**3 + 1))
        g = np.arange(m)
        lo = np.stack(np.meshgrid(g, g, g, indexing="ij"), axis=-1).reshape(-1, 3) * side
        return cls(order, start.astype(np.int64), lo.astype(np.float64), side)


# ----------------------------------------------------------------- sky coverage
@dataclass
class SkyCoverage:
    """Where the footprint has positive completeness, at a coarse HEALPix resolution.

    Used only to skip replicas and cells that cannot reach the footprint; the exact
    per-galaxy completeness is applied afterwards.
    """

    tree: cKDTree
    pixel_radius: float  # radians: largest centre-to-corner distance of a coarse pixel
    n_pixels: int

    def touches(self, directions: NDArray[np.float64],
                radius: NDArray[np.float64]) -> NDArray[np.bool_]:
        """Whether caps (unit ``directions``, angular ``radius`` [rad]) reach a footprint pixel."""
        if len(directions) == 0:
            return np.zeros(0, dtype=bool)
        reach = np.minimum(radius + self.pixel_radius + 1e-9, np.pi)
        # a cap reaches a pixel centre iff the chord to it is within 2 sin(reach / 2); the
        # bound lets the tree stop early, and far caps come back as inf
        bound = 2.0 * np.sin(0.5 * reach)
        chord, _ = self.tree.query(directions, k=1, distance_upper_bound=float(bound.max()))
        return chord <= bound


def _positive_pixels(footprint: SkyFootprint, nside: int, eval_rows: int) -> NDArray[np.int64]:
    """NESTED indices of pixels with completeness > 0 at the footprint's N_side."""
    occupied = getattr(footprint, "occupied", None)
    if occupied is not None and hasattr(footprint, "nest"):
        pix = np.asarray(occupied, dtype=np.int64)
        return pix if footprint.nest else np.asarray(hp.ring2nest(nside, pix), dtype=np.int64)
    # Duck-typed footprint: evaluate completeness at every pixel centre, in chunks.
    npix = hp.nside2npix(nside)
    found = []
    for s in range(0, npix, eval_rows):
        pix = np.arange(s, min(s + eval_rows, npix))
        ra, dec = hp.pix2ang(nside, pix, nest=True, lonlat=True)
        found.append(pix[np.asarray(footprint.completeness(ra, dec)) > 0])
    return np.concatenate(found)


def sky_coverage(footprint: SkyFootprint, nside_coarse: int = 64,
                 eval_rows: int = 1 << 21) -> SkyCoverage | None:
    """Coarse coverage of ``footprint`` (None when it covers most of the sky).

    Every pixel with positive completeness at the footprint's own N_side (its
    ``occupied`` pixels, or completeness evaluated at every pixel centre) is merged into
    its parent pixel at ``nside_coarse``, so no part of the footprint is missed.  A
    footprint whose N_side is not a power of 2 uses its own pixels.
    """
    nside = int(getattr(footprint, "nside", 0) or 0)
    if nside <= 0:
        return None
    if hp.isnsideok(nside, nest=True):
        nside_c = min(nside, nside_coarse)
        fine = _positive_pixels(footprint, nside, eval_rows)
        coarse = np.unique(fine // (nside // nside_c) ** 2)
    else:  # RING-only N_side: use the footprint's own occupied pixels, if it lists them
        occupied = getattr(footprint, "occupied", None)
        if occupied is None:
            return None  # cannot enumerate pixels; no pruning (slower, still exact)
        nside_c = nside
        coarse = np.asarray(occupied, dtype=np.int64)
        x, y, z = hp.pix2vec(nside, coarse, nest=False)
        if coarse.size == 0:
            raise InputError("footprint: the footprint has no pixel with completeness > 0; "
                             "check the mask file, its vetoes and its value range")
        if coarse.size > 0.6 * hp.nside2npix(nside):
            return None
        return SkyCoverage(cKDTree(np.column_stack([x, y, z])), float(hp.max_pixrad(nside)),
                           int(coarse.size))
    if coarse.size == 0:
        raise InputError("footprint: the footprint has no pixel with completeness > 0; check "
                         "the mask file, its vetoes and its value range")
    if coarse.size > 0.6 * hp.nside2npix(nside_c):
        return None
    x, y, z = hp.pix2vec(nside_c, coarse, nest=True)
    return SkyCoverage(cKDTree(np.column_stack([x, y, z])), float(hp.max_pixrad(nside_c)),
                       int(coarse.size))


def _cubes_reach(lo: NDArray[np.float64], side: float, r_in: float, r_out: float,
                 rot: NDArray[np.float64], coverage: SkyCoverage | None) -> NDArray[np.bool_]:
    """Which cubes [lo, lo + side)³ (observer at the origin, box frame) reach the survey."""
    dmin, dmax = _cube_distance_range(lo, side)
    keep = (dmin <= r_out) & (dmax >= max(r_in, 0.0))
    if coverage is None or not keep.any():
        return keep
    idx = np.flatnonzero(keep)
    centre = lo[idx] + 0.5 * side
    dist = np.linalg.norm(centre, axis=1)
    half_diag = 0.5 * math.sqrt(3.0) * side
    inside = dist <= half_diag  # the observer sits in (or at the edge of) this cube
    radius = np.where(inside, np.pi, np.arcsin(np.clip(half_diag / np.maximum(dist, 1e-300),
                                                       0.0, 1.0)))
    dirs = (centre / np.maximum(dist, 1e-300)[:, None]) @ rot.T
    reach = inside.copy()
    reach[~inside] = coverage.touches(dirs[~inside], radius[~inside])
    keep[idx] = reach
    return keep


@dataclass
class ShellChunk:
    """Galaxies of one replica chunk that lie in the padded shell.

    ``box_index`` rows of the box, ``replica`` index into the replica list, ``r`` their
    sky-frame vectors (N, 3) [Mpc/h].
    """

    box_index: NDArray[np.int64]
    replica: NDArray[np.int32]
    r: NDArray[np.float64]


def iter_shell_chunks(position: NDArray[np.float64], cells: BoxCells, box_size: float,
                      observer: NDArray[np.float64], rot: NDArray[np.float64],
                      replicas: NDArray[np.int64], r_in: float, r_out: float,
                      coverage: SkyCoverage | None = None,
                      chunk_rows: int = CHUNK_ROWS) -> Iterator[ShellChunk]:
    """Yield the galaxies of every replica that fall in r_in <= χ <= r_out [Mpc/h].

    Only cells reaching the shell (and the footprint's coarse coverage) are visited,
    at most ``chunk_rows`` galaxies at a time, so memory stays bounded whatever the
    number of replicas.
    """
    r_in2, r_out2 = max(r_in, 0.0) ** 2, r_out**2
    for k, n in enumerate(replicas):
        shift = n * box_size - observer
        cube_ok = _cubes_reach(shift[None, :], box_size, r_in, r_out, rot, coverage)
        if not cube_ok[0]:
            continue
        ok_cells = np.flatnonzero(_cubes_reach(cells.lo + shift, cells.side, r_in, r_out,
                                               rot, coverage))
        if ok_cells.size == 0:
            continue
        counts = cells.start[ok_cells + 1] - cells.start[ok_cells]
        ok_cells, counts = ok_cells[counts > 0], counts[counts > 0]
        # Pack whole cells into chunks of about chunk_rows galaxies.
        bounds = np.searchsorted(np.cumsum(counts),
                                 np.arange(chunk_rows, counts.sum() + chunk_rows, chunk_rows),
                                 side="left")
        first = 0
        for last in np.unique(np.minimum(bounds + 1, len(ok_cells))):
            if last <= first:
                continue
            sel = ok_cells[first:last]
            starts, cnt = cells.start[sel], counts[first:last]
            first = last
            # Indices of all galaxies in the selected cells without a Python loop.
            offs = np.repeat(starts - np.concatenate([[0], np.cumsum(cnt)[:-1]]), cnt)
            idx = cells.order[np.arange(cnt.sum()) + offs]
            d = position[idx] + shift
            d2 = np.einsum("ij,ij->i", d, d)
            m = (d2 >= r_in2) & (d2 <= r_out2)
            if not m.any():
                continue
            yield ShellChunk(idx[m], np.full(int(m.sum()), k, dtype=np.int32), d[m] @ rot.T)
