"""Jackknife sky regions: K pieces of a footprint with near-equal effective area.

Method (docs/design.md §7):

1. Weighted spherical k-means (Lloyd 1982, IEEE Trans. Inf. Theory 28, 129) on the
   unit vectors of the occupied pixels, weights completeness × Ω_pix, seeded with
   weighted k-means++ (Arthur & Vassilvitskii 2007) from ``numpy.random.default_rng(seed)``.
   Disconnected pieces are handled first: every piece but the largest gets as many
   whole regions of the mean area Ā as it holds, and its leftover (a *chunk*, under
   one Ā) joins the nearest region of the largest piece, which is made smaller by as
   much — so all regions have area Ā, at the price of a few regions made of two
   parts.
2. Rebalancing within each piece, in the spirit of capacity-constrained Voronoi
   tessellations (Balzer, Schlömer & Deussen 2009, ACM Trans. Graph. 28, 86; cited
   from memory): each pixel goes to the centre maximising x·c_j − b_j, a *power
   diagram* on the sphere.  The offsets b_j grow for regions that are too large
   and shrink for small ones until max/min area ≤ ``tolerance`` (or the pixel grid
   stops it).  Since x·c_j − b_j is linear in x, every region is the intersection of
   the footprint with a convex spherical polygon: regions stay compact and, where
   the footprint is connected, connected.  Offsets and centroid moves alternate on
   aggregated cells (fast), then the offsets are polished at full resolution.

The result is a per-pixel map (−1 outside the footprint), so data and randoms are
assigned by the same pure function of their pixel.  Deterministic for a given
footprint, K and seed.
"""

from __future__ import annotations

import logging
import os
from dataclasses import dataclass, field
from pathlib import Path

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from ..atomic import atomic_path
from ..cosmology import DEG2_PER_SR
from ..errors import InputError
from ..healpix_pixels import ang2pix_lonlat
from ..sphere import check_radec, vec_to_radec
from .maps import Footprint
from .summary import connected_pieces

log = logging.getLogger(__name__)

#: Pixels per region below which regions are too coarse (warning; common practice).
MIN_PIXELS_PER_REGION = 10
#: Nearest centres considered per pixel while rebalancing.
CANDIDATES = 8
#: Region shapes are found on cells aggregating pixels while at least this many cells
#: per region remain; the final balancing is at full resolution.
COARSE_PIXELS_PER_REGION = 150


@dataclass(frozen=True)
class SkyRegions:
    """K jackknife regions of a footprint as a HEALPix region map.

    Attributes
    ----------
    nside, nest : HEALPix resolution and ordering of ``region_map``.
    region_map : int32 array (12 N_side²,)
        Region index per pixel, −1 outside the footprint.
    areas_deg2 : array (K,)
        Effective area (Σ completeness × Ω_pix) of each region [deg²].
    centres_ra_deg, centres_dec_deg : arrays (K,)
        Region centres [deg].
    seed : int
    """

    nside: int
    nest: bool
    region_map: NDArray[np.int32]
    areas_deg2: NDArray[np.float64]
    centres_ra_deg: NDArray[np.float64]
    centres_dec_deg: NDArray[np.float64]
    seed: int = 0
    meta: dict = field(default_factory=dict, compare=False)

    @property
    def k(self) -> int:
        return int(self.areas_deg2.size)

    def cache_token(self) -> dict[str, object]:
        """What identifies the regions in a cache key (everything but ``meta``)."""
        return {"nside": self.nside, "nest": self.nest, "region_map": self.region_map,
                "areas_deg2": self.areas_deg2, "centres_ra_deg": self.centres_ra_deg,
                "centres_dec_deg": self.centres_dec_deg}

    @property
    def min_area_deg2(self) -> float:
        return float(self.areas_deg2.min())

    @property
    def max_area_deg2(self) -> float:
        return float(self.areas_deg2.max())

    @property
    def area_spread(self) -> float:
        """max / min region area (1 is perfect balance)."""
        return self.max_area_deg2 / self.min_area_deg2

    def region_of_pixels(self, pix: ArrayLike) -> NDArray[np.int32]:
        """Region index of HEALPix pixels (this map's N_side and ordering)."""
        return self.region_map[np.asarray(pix)]

    def region_of(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.int32]:
        """Region index (0 … K−1, −1 outside the footprint) of positions in degrees."""
        ra, dec = check_radec(ra_deg, dec_deg, "jackknife positions")
        return self.region_map[ang2pix_lonlat(self.nside, ra, dec, nest=self.nest)]

    def save(self, path: str | os.PathLike[str]) -> None:
        """Write to a compressed ``.npz`` file atomically."""
        with atomic_path(path) as tmp, open(tmp, "wb") as fh:
            np.savez_compressed(fh, nside=self.nside, nest=self.nest,
                                region_map=self.region_map, areas_deg2=self.areas_deg2,
                                centres_ra_deg=self.centres_ra_deg,
                                centres_dec_deg=self.centres_dec_deg, seed=self.seed)

    @classmethod
    def load(cls, path: str | os.PathLike[str]) -> SkyRegions:
        """Read a file written by :meth:`save`."""
        path = Path(path)
        try:
            with np.load(path, allow_pickle=False) as d:
                return cls(nside=int(d["nside"]), nest=bool(d["nest"]),
                           region_map=d["region_map"].astype(np.int32),
                           areas_deg2=d["areas_deg2"], centres_ra_deg=d["centres_ra_deg"],
                           centres_dec_deg=d["centres_dec_deg"], seed=int(d["seed"]))
        except FileNotFoundError:
            raise InputError(f"{path}: jackknife region file not found") from None
        except InputError:
            raise
        except (OSError, KeyError, ValueError) as exc:
            raise InputError(f"{path}: not a jackknife region file ({exc})") from None


def _assign_nearest(x: NDArray[np.float64], centres: NDArray[np.float64]) -> NDArray[np.int64]:
    return cKDTree(centres).query(x)[1]


def _weighted_centres(x, w, labels, k, old):
    sums = np.column_stack([np.bincount(labels, weights=w * x[:, j], minlength=k)
                            for j in range(3)])
    norm = np.linalg.norm(sums, axis=1)
    empty = norm == 0
    out = old.copy()
    out[~empty] = sums[~empty] / norm[~empty, None]
    return out, np.flatnonzero(empty)


def _kmeans_pp(x, w, k, rng):
    """Weighted k-means++ seeding (Arthur & Vassilvitskii 2007)."""
    idx = [int(rng.choice(x.shape[0], p=w / w.sum()))]
    d2 = np.sum((x - x[idx[0]]) ** 2, axis=1)
    for _ in range(1, k):
        p = w * d2
        tot = p.sum()
        # All remaining weight sits on existing centres (duplicates): take any new pixel.
        nxt = int(rng.choice(x.shape[0], p=p / tot)) if tot > 0 else int(np.argmax(d2))
        idx.append(nxt)
        d2 = np.minimum(d2, np.sum((x - x[nxt]) ** 2, axis=1))
    return x[idx].copy()


def _lloyd(x, w, centres, max_iter=50):
    k = centres.shape[0]
    labels = _assign_nearest(x, centres)
    for _ in range(max_iter):
        centres, empty = _weighted_centres(x, w, labels, k, centres)
        if empty.size:
            # Reseed empty clusters at the pixels farthest from their centres.
            far = np.argsort(-np.sum((x - centres[labels]) ** 2, axis=1))[:empty.size]
            centres[empty] = x[far]
        new = _assign_nearest(x, centres)
        changed = np.count_nonzero(new != labels)
        labels = new
        if changed <= max(1, x.shape[0] // 2000) and not empty.size:
            break
    return centres, labels


class _Offsets:
    """Per-region additive offsets b_j of the power diagram x·c_j − b_j.

    Regions larger than their target area raise their offset (shrink), smaller ones
    lower it.  The offset change that moves a compact region's area by a fraction ε
    is ≈ ε·A/π (A in sr); thin regions such as stripes respond far less, so each
    region's step adapts: it grows while its area error keeps its sign and halves
    when it flips.
    """

    def __init__(self, targets: NDArray[np.float64], b: NDArray[np.float64] | None = None):
        self.targets = targets
        self.b = np.zeros(targets.size) if b is None else b.copy()
        self.gain = np.full(targets.size, 0.5 * targets.mean() / np.pi)
        self.prev = np.zeros(targets.size)

    def update(self, areas: NDArray[np.float64]) -> None:
        err = areas / self.targets - 1.0
        same = np.sign(err) == np.sign(self.prev)
        self.gain = np.clip(np.where(same, self.gain * 1.25, self.gain * 0.5), 1e-9, 0.5)
        self.b += self.gain * err
        self.b -= self.b.mean()
        # Dot products differ by at most 2: larger offsets change nothing but drift.
        np.clip(self.b, -2.0, 2.0, out=self.b)
        self.prev = err


def _candidates(x, centres):
    """The nearest few centres of every point and the dot products with them."""
    q = min(centres.shape[0], CANDIDATES)
    _, cand = cKDTree(centres).query(x, k=q)
    cand = cand.reshape(x.shape[0], q)
    return cand, np.einsum("ij,ikj->ik", x, centres[cand])


def _assign(cand, dots, b, w, targets):
    """Labels, areas and max/min of area/target for offsets ``b``."""
    labels = cand[np.arange(cand.shape[0]), np.argmax(dots - b[cand], axis=1)]
    areas = np.bincount(labels, weights=w, minlength=b.size)
    ratio = areas / targets
    spread = ratio.max() / ratio.min() if ratio.min() > 0 else np.inf
    return labels, areas, spread


def _init_centres(x, w, k, rng):
    """Weighted k-means++ seeding followed by Lloyd iterations."""
    centres = _kmeans_pp(x, w, k, rng)
    return _lloyd(x, w, centres)[0]


def _shape_regions(x, w, centres, targets, outer=20, inner=20):
    """Capacity-constrained k-means: alternate offset balancing with moving each centre
    to its region's centroid.  Returns the centres and offsets of the best state seen.
    """
    k = centres.shape[0]
    if k == 1:
        return centres, np.zeros(1)
    offsets = _Offsets(targets)
    best = (np.inf, centres, offsets.b.copy())
    for _ in range(outer):
        cand, dots = _candidates(x, centres)
        for _ in range(inner):
            labels, areas, spread = _assign(cand, dots, offsets.b, w, targets)
            if spread < best[0]:
                best = (spread, centres, offsets.b.copy())
            offsets.update(areas)
        centres, _ = _weighted_centres(x, w, labels, k, centres)
    return best[1], best[2]


def _polish(x, w, centres, b, targets, tolerance, max_iter=300):
    """Offset balancing with fixed centres; the best labels seen."""
    if centres.shape[0] == 1:
        return np.zeros(x.shape[0], dtype=np.int64)
    cand, dots = _candidates(x, centres)
    offsets = _Offsets(targets, b)
    best = (np.inf, None)
    for _ in range(max_iter):
        labels, areas, spread = _assign(cand, dots, offsets.b, w, targets)
        if spread < best[0]:
            best = (spread, labels)
        if spread <= tolerance:
            break
        offsets.update(areas)
    return best[1]


def _plan(piece_area, piece_pixels, k):
    """Whole regions per piece plus a leftover *chunk* shared with the largest piece.

    Every piece but the largest gets floor(A_p / Ā) regions of the mean area Ā; the
    rest of it (a chunk) joins a region of the largest piece, which is made smaller
    by as much, so every region ends up with area Ā.  Leftovers under 5 % of Ā are
    spread over the piece's own regions and ones over 90 % become a region.

    Returns
    -------
    seats, chunk_area : arrays per piece
    """
    mean = piece_area.sum() / k
    main = int(np.argmax(piece_area))
    seats = np.floor(piece_area / mean).astype(np.int64)
    chunk = piece_area - seats * mean
    whole = chunk > 0.9 * mean
    seats[whole] += 1
    chunk[whole] = 0.0
    chunk[(chunk < 0.05 * mean) & (seats > 0)] = 0.0
    seats = np.minimum(seats, piece_pixels)
    seats[main], chunk[main] = 0, 0.0
    seats[main] = k - seats.sum()
    if seats[main] < 1 or seats[main] > piece_pixels[main]:
        return None
    return seats, chunk


def _allocate(piece_area, piece_pixels, k):
    """Fallback when pieces outnumber what :func:`_plan` can place: regions per piece by
    the D'Hondt rule; pieces left without one join a region of the nearest piece."""
    seats = np.zeros(piece_area.size, dtype=np.int64)
    for _ in range(k):
        score = np.where(seats < piece_pixels, piece_area / (seats + 1), -1.0)
        seats[int(np.argmax(score))] += 1
    return seats


def _coarse(x, w, group):
    """Aggregate points by group: summed weights, weighted-mean unit vectors."""
    uniq, inv = np.unique(group, return_inverse=True)
    ws = np.bincount(inv, weights=w)
    xs = np.column_stack([np.bincount(inv, weights=w * x[:, j]) for j in range(3)])
    xs /= np.linalg.norm(xs, axis=1, keepdims=True)
    return xs, ws


def _split(footprint, x, w, pieces, k, rng, tolerance):
    """Region label of every occupied pixel (see the module docstring)."""
    n_pieces = int(pieces.max()) + 1
    piece_area = np.bincount(pieces, weights=w, minlength=n_pieces)
    piece_pixels = np.bincount(pieces, minlength=n_pieces)
    piece_centre, _ = _weighted_centres(x, w, pieces, n_pieces, np.zeros((n_pieces, 3)))
    mean = w.sum() / k
    main = int(np.argmax(piece_area))
    plan = _plan(piece_area, piece_pixels, k)
    if plan is None:
        # More pieces than regions can cover: whole pieces join their nearest region.
        seats = _allocate(piece_area, piece_pixels, k)
        chunk = np.where(seats == 0, piece_area, 0.0)
    else:
        seats, chunk = plan
    # Shape the regions on coarser cells (parents in the NESTED hierarchy) when there
    # are many pixels per region, then polish at full resolution.
    occ_nest = footprint.occupied if footprint.nest else hp.ring2nest(footprint.nside,
                                                                       footprint.occupied)
    levels = 0
    while (x.shape[0] >> (2 * (levels + 1))) >= COARSE_PIXELS_PER_REGION * k \
            and footprint.nside >> (levels + 1) >= 1:
        levels += 1
    parent = occ_nest >> (2 * levels)

    def coarse(sel):
        return _coarse(x[sel], w[sel], parent[sel]) if levels else (x[sel], w[sel])

    labels = np.empty(x.shape[0], dtype=np.int64)
    order = [p for p in np.argsort(-piece_area, kind="stable") if seats[p] > 0]
    first = {}
    start = 0
    for p in order:
        first[p] = start
        start += seats[p]
    # Receivers of chunks: regions of the piece nearest to each chunk's piece.
    sel_main = {p: np.flatnonzero(pieces == p) for p in order}
    init = {p: _init_centres(*coarse(sel_main[p]), int(seats[p]), rng) for p in order}
    targets = {p: np.full(seats[p], mean if plan is not None and (p == main or chunk[p] > 0)
                          else piece_area[p] / seats[p]) for p in order}
    receiver = {}
    for q in np.argsort(-chunk, kind="stable"):
        if chunk[q] <= 0:
            continue
        home = main if plan is not None else max(
            order, key=lambda p: float(piece_centre[p] @ piece_centre[q]))
        cen = init[home]
        room = targets[home] - chunk[q]
        near = np.argsort(-(cen @ piece_centre[q]), kind="stable")
        j = next((int(i) for i in near if room[i] >= 0.2 * mean), int(near[0]))
        targets[home][j] = max(targets[home][j] - chunk[q], 0.05 * mean)
        receiver[q] = first[home] + j
    for p in order:
        sel = sel_main[p]
        tgt = targets[p]
        cen = init[p]
        has_chunk = seats[p] > 0 and chunk[p] > 0 and p in receiver
        if has_chunk:
            # The piece's leftover becomes one more (virtual) region, nearest the receiver.
            extra_c = _init_centres(*coarse(sel), int(seats[p]) + 1, rng)
            towards = piece_centre[main if plan is not None else p]
            v = int(np.argmax(extra_c @ towards))
            cen = np.vstack([np.delete(extra_c, v, axis=0), extra_c[v]])
            tgt = np.append(np.full(seats[p], mean), chunk[p])
        cen, b = _shape_regions(*coarse(sel), cen, tgt)
        lab = _polish(x[sel], w[sel], cen, b, tgt, tolerance)
        ids = np.arange(first[p], first[p] + seats[p])
        if has_chunk:
            ids = np.append(ids, receiver[p])
        labels[sel] = ids[lab]
    for q, r in receiver.items():
        if seats[q] == 0:
            labels[pieces == q] = r
    return labels


def _balance_advice(footprint: Footprint, k: int) -> str:
    """Why the regions are unbalanced: too many small pieces or a coarse N_side."""
    n_pieces, _ = connected_pieces(footprint)
    if n_pieces > 1:
        return (f"the footprint has {n_pieces} disconnected pieces; a finer N_side or a "
                "different K may balance them better")
    return "a finer N_side balances them better"


def jackknife_regions(footprint: Footprint, k: int, seed: int = 0, *,
                      tolerance: float = 1.05) -> SkyRegions:
    """Split a footprint into ``k`` regions of near-equal effective area.

    Parameters
    ----------
    footprint : Footprint
    k : int
        Number of regions (≥ 1, ≤ number of occupied pixels).
    seed : int
        Seed of the k-means++ initialisation; same inputs → same regions.
    tolerance : float
        Target max/min area ratio of the rebalancing (> 1).

    Raises
    ------
    InputError
        ``k`` < 1, or more regions than occupied pixels (the message names an N_side
        that would do).
    """
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise InputError(f"jackknife: number of regions K = {k!r} must be a positive integer")
    k = int(k)
    occ = footprint.occupied
    m = occ.size
    if m < MIN_PIXELS_PER_REGION * k:
        need = footprint.nside
        while m * (need / footprint.nside) ** 2 < MIN_PIXELS_PER_REGION * k and need < 2**29:
            need *= 2
        msg = (f"jackknife: K = {k} regions from {m} occupied pixels at N_side "
               f"{footprint.nside}; N_side >= {need} gives about {MIN_PIXELS_PER_REGION} "
               "pixels per region (resample with Footprint.ud_grade or rebuild the mask)")
        if k > m:
            raise InputError(msg)
        log.warning("%s", msg)
    x = footprint.occupied_vectors()
    w = footprint.values[occ] * footprint.pixel_area_sr
    rng = np.random.default_rng(seed)
    if k == 1:
        labels = np.zeros(m, dtype=np.int64)
        areas = np.array([w.sum()])
    else:
        _, pieces = connected_pieces(footprint)
        labels = _split(footprint, x, w, pieces, k, rng, tolerance)
        areas = np.bincount(labels, weights=w, minlength=k)
    centres, _ = _weighted_centres(x, w, labels, k, x[:k])
    region_map = np.full(footprint.npix, -1, dtype=np.int32)
    region_map[occ] = labels
    ra, dec = vec_to_radec(centres)
    regions = SkyRegions(nside=footprint.nside, nest=footprint.nest, region_map=region_map,
                         areas_deg2=areas * DEG2_PER_SR, centres_ra_deg=ra, centres_dec_deg=dec,
                         seed=int(seed))
    if regions.area_spread > 1.2:
        log.warning("jackknife: region areas differ by a factor %.2f (max/min) for K = %d at "
                    "N_side %d; %s", regions.area_spread, k, footprint.nside,
                    _balance_advice(footprint, k))
    return regions

