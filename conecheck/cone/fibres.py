"""Fibre-collision emulator acting on a survey's target list.

Two targets closer than θ_fc on the sky cannot both get a fibre on one pass
(θ_fc = 55″ for plug-plate spectrographs; Blanton et al. 2003, AJ 125, 2276).

1. Collision graph: pairs of unit vectors closer than the chord 2 sin(θ_fc / 2)
   (:func:`conecheck.pairs.close_pairs_sphere`, a parallel strip search); connected groups
   from ``scipy.sparse.csgraph.connected_components``.
2. First pass: in every group, fibres go to a maximum independent set (the largest
   set of targets no two of which collide), with random tie-breaks:

   * isolated targets keep their fibre; isolated pairs give it to one member at random
     (vectorised over all pairs);
   * groups of 3 … ``exact_group_max`` targets are solved exactly by enumerating all
     2^k subsets, vectorised over every group of the same size (a chain of three gives
     its two ends, a triangle one member at random);
   * larger groups use a greedy rule, the parallel minimum-degree variant: each round,
     every remaining target whose (degree, random key) is smaller than that of all its
     remaining neighbours gets a fibre, and it and its neighbours leave the graph; rounds
     repeat until no target remains.  The result is a maximal independent set, close to
     maximum for the sparse graphs met here.  The loop runs over rounds (a handful),
     never over targets.

3. Second pass: a collided target gets a fibre with the probability that it lies in a
   tile overlap (an overlap HEALPix map, or one overlap fraction).  When
   ``second_pass_collisions`` is on, second-pass candidates closer than θ_fc to each
   other cannot all be recovered on the same pass: the same decollision is applied to
   the graph restricted to them.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ..errors import InputError
from ..healpix_pixels import ang2pix_lonlat
from ..pairs import close_pairs_sphere
from ..sphere import check_radec, radec_to_vec
from .settings import FibreSettings

log = logging.getLogger(__name__)

ARCSEC = np.pi / (180.0 * 3600.0)
#: Upper bound on (groups × subsets × group size) booleans held at once by the exact solver.
_EXACT_BATCH_CELLS = 1 << 22


def collision_pairs(xyz: NDArray[np.float64], angle_rad: float) -> NDArray[np.int64]:
    """Index pairs (M, 2), i < j, of unit vectors closer than ``angle_rad`` [rad].

    The search runs on numba's threads (:func:`conecheck.pairs.close_pairs_sphere`, the
    same pairs as a k-d tree's ``query_pairs`` at the chord 2 sin(θ / 2)); their order is
    not the tree's, which nothing downstream reads: groups, tie-breaks and picks follow the
    targets' order.
    """
    return close_pairs_sphere(xyz, 2.0 * np.sin(0.5 * angle_rad))


def collision_groups(n: int, pairs: NDArray[np.int64]) -> NDArray[np.int64]:
    """Connected-group label of each of ``n`` nodes for the undirected graph ``pairs``."""
    if len(pairs) == 0:
        return np.arange(n, dtype=np.int64)
    adj = coo_matrix((np.ones(len(pairs), dtype=np.int8), (pairs[:, 0], pairs[:, 1])),
                     shape=(n, n)).tocsr()
    _, labels = connected_components(adj, directed=False)
    return labels.astype(np.int64)


def _popcount(x: NDArray[np.int64]) -> NDArray[np.int64]:
    out = np.zeros_like(x)
    y = x.copy()
    while np.any(y):
        out += y & 1
        y >>= 1
    return out


def _exact_groups(members: NDArray[np.int64], local_pairs: NDArray[np.int64],
                  pair_group: NDArray[np.int64], rng: np.random.Generator) -> NDArray[np.int64]:
    """Maximum independent sets of G groups of k nodes each, by enumeration.

    ``members`` (G, k) node ids; ``local_pairs`` (E, 2) local indices of the edges and
    ``pair_group`` (E,) the group of each edge.  Returns the selected node ids.
    """
    n_groups, k = members.shape
    adj = np.zeros((n_groups, k), dtype=np.int64)
    np.bitwise_or.at(adj, (pair_group, local_pairs[:, 0]), np.int64(1) << local_pairs[:, 1])
    np.bitwise_or.at(adj, (pair_group, local_pairs[:, 1]), np.int64(1) << local_pairs[:, 0])
    subsets = np.arange(1 << k, dtype=np.int64)
    size = _popcount(subsets)
    bits = ((subsets[:, None] >> np.arange(k)) & 1).astype(bool)  # (S, k)
    batch = max(1, _EXACT_BATCH_CELLS // (len(subsets) * k))
    chosen = []
    for g0 in range(0, n_groups, batch):
        a = adj[g0:g0 + batch]  # (B, k)
        # subset s conflicts when one of its members has a neighbour inside s
        clash = ((a[:, None, :] & subsets[None, :, None]) != 0) & bits[None, :, :]
        valid = ~clash.any(axis=2)  # (B, S)
        # a random fraction < 1 breaks ties uniformly among the largest valid subsets
        score = np.where(valid, size[None, :] + rng.random(valid.shape), -1.0)
        best = subsets[np.argmax(score, axis=1)]
        pick = ((best[:, None] >> np.arange(k)) & 1).astype(bool)
        chosen.append(members[g0:g0 + batch][pick])
    return np.concatenate(chosen) if chosen else np.zeros(0, dtype=np.int64)


def _greedy_groups(nodes: NDArray[np.int64], pairs: NDArray[np.int64], n: int,
                   rng: np.random.Generator) -> NDArray[np.int64]:
    """Parallel minimum-degree greedy independent set of the graph on ``nodes``."""
    alive = np.zeros(n, dtype=bool)
    alive[nodes] = True
    key_rand = np.zeros(n)
    key_rand[nodes] = rng.random(len(nodes))
    edges = pairs[alive[pairs[:, 0]] & alive[pairs[:, 1]]]
    selected = []
    while alive.any():
        deg = np.bincount(edges.ravel(), minlength=n)
        key = deg + key_rand  # lexicographic (degree, random key); keys are distinct
        not_min = np.zeros(n, dtype=bool)
        i, j = edges[:, 0], edges[:, 1]
        i_larger = key[i] > key[j]
        not_min[i[i_larger]] = True
        not_min[j[~i_larger]] = True
        join = alive & ~not_min
        selected.append(np.flatnonzero(join))
        gone = join.copy()
        gone[i[join[j]]] = True
        gone[j[join[i]]] = True
        alive &= ~gone
        edges = edges[alive[edges[:, 0]] & alive[edges[:, 1]]]
    return np.concatenate(selected) if selected else np.zeros(0, dtype=np.int64)


def decollide(n: int, pairs: NDArray[np.int64], rng: np.random.Generator,
              exact_group_max: int = 10) -> tuple[NDArray[np.bool_], dict[str, Any]]:
    """Give fibres to a (near-)maximum independent set of the collision graph.

    Parameters
    ----------
    n : int
        Number of targets.
    pairs : ndarray (M, 2)
        Colliding target pairs.
    rng : numpy Generator
        Source of the tie-breaks.
    exact_group_max : int
        Largest group solved exactly.

    Returns
    -------
    fibred : ndarray of bool (n,)
        True for targets that get a fibre.
    groups : dict
        Group statistics: counts by size, largest size, number of greedy groups.
    """
    fibred = np.zeros(n, dtype=bool)
    if n == 0:
        return fibred, {"largest_group": 0, "groups_by_size": {}, "n_greedy_groups": 0}
    labels = collision_groups(n, pairs)
    sizes = np.bincount(labels)
    node_size = sizes[labels]
    fibred[node_size == 1] = True
    order = np.argsort(labels, kind="stable")
    start = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    local = np.empty(n, dtype=np.int64)
    local[order] = np.arange(n) - start[labels[order]]

    # isolated pairs: one member at random
    g2 = np.flatnonzero(sizes == 2)
    if g2.size:
        pick = rng.integers(0, 2, size=g2.size)
        fibred[order[start[g2] + pick]] = True

    edge_group = labels[pairs[:, 0]] if len(pairs) else np.zeros(0, dtype=np.int64)
    edge_size = sizes[edge_group] if len(pairs) else np.zeros(0, dtype=np.int64)
    for k in range(3, exact_group_max + 1):
        gk = np.flatnonzero(sizes == k)
        if gk.size == 0:
            continue
        members = order[start[gk][:, None] + np.arange(k)]
        gindex = np.full(len(sizes), -1, dtype=np.int64)
        gindex[gk] = np.arange(gk.size)
        em = edge_size == k
        lp = np.column_stack([local[pairs[em, 0]], local[pairs[em, 1]]])
        fibred[_exact_groups(members, lp, gindex[edge_group[em]], rng)] = True

    big = np.flatnonzero(sizes > exact_group_max)
    if big.size:
        nodes = np.flatnonzero(node_size > exact_group_max)
        fibred[_greedy_groups(nodes, pairs, n, rng)] = True
    by_size = np.bincount(sizes)
    groups = {"largest_group": int(sizes.max()),
              "groups_by_size": {str(s): int(c) for s, c in enumerate(by_size) if s >= 2 and c},
              "n_greedy_groups": int(big.size)}
    return fibred, groups


# ------------------------------------------------------------------ overlaps
@dataclass
class OverlapMap:
    """A HEALPix map of the probability that a collided target gets a second pass."""

    values: NDArray[np.float64]
    nest: bool
    source: str = ""

    @property
    def nside(self) -> int:
        """HEALPix N_side of the map."""
        return int(hp.npix2nside(len(self.values)))

    def probability(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.float64]:
        """Second-pass probability at RA, Dec [deg]."""
        ra, dec = check_radec(ra_deg, dec_deg, "fibre-pattern positions")
        return self.values[ang2pix_lonlat(self.nside, ra, dec, nest=self.nest)]


def load_overlap_map(path: str, nest: bool = False) -> OverlapMap:
    """Read ``fibres.overlap_map``: a HEALPix FITS map of values in [0, 1].

    The pixel ordering comes from the ORDERING header keyword, or ``nest`` when absent.
    UNSEEN and NaN pixels count as 0 (no overlap).
    """
    p = Path(path)
    if not p.is_file():
        raise InputError(f"fibres.overlap_map = '{path}': file not found")
    try:
        values, header = hp.read_map(p, nest=None, h=True, dtype=np.float64)
    except Exception as exc:  # noqa: BLE001 - any read failure is a user-file problem
        raise InputError(f"fibres.overlap_map = '{path}': not a HEALPix FITS map "
                         f"({type(exc).__name__}: {exc})") from None
    hdr = dict(header)
    ordering = str(hdr.get("ORDERING", "NESTED" if nest else "RING")).strip().upper()
    values = np.where(np.isfinite(values) & (values != hp.UNSEEN), values, 0.0)
    if values.min() < 0.0 or values.max() > 1.0:
        raise InputError(f"fibres.overlap_map = '{path}': values span [{values.min():.3g}, "
                         f"{values.max():.3g}]; expected probabilities in [0, 1]")
    return OverlapMap(values, ordering.startswith("NEST"), str(path))


# ------------------------------------------------------------------ emulator
@dataclass
class FibreResult:
    """Outcome of the emulator for each target and its summary statistics."""

    fibred: NDArray[np.bool_]          # fibre on either pass
    second_pass: NDArray[np.bool_]     # fibre on the second pass only
    stats: dict[str, Any] = field(default_factory=dict)

    @property
    def first_pass(self) -> NDArray[np.bool_]:
        """Targets with a fibre on the first pass."""
        return self.fibred & ~self.second_pass


def assign_fibres(ra_deg: ArrayLike, dec_deg: ArrayLike, settings: FibreSettings,
                  rng: np.random.Generator, overlap: OverlapMap | None = None) -> FibreResult:
    """Run the fibre-collision emulator on targets at RA, Dec [deg].

    Parameters
    ----------
    ra_deg, dec_deg : array_like
        Target positions in degrees.
    settings : FibreSettings
        Collision angle [arcsec], overlap model, exact-solver limit.
    rng : numpy Generator
        Tie-breaks and second-pass draws.
    overlap : OverlapMap or None
        Second-pass probability map; ``settings.overlap_fraction`` when None.

    Returns
    -------
    FibreResult
        ``stats`` holds n_targets, n_pairs, neighbour_fraction (targets with a neighbour
        closer than θ_fc), collided_fraction (no fibre on the first pass),
        recovered_fraction (of collided targets, recovered on the second pass),
        missed_fraction (targets without any fibre) and the group statistics.
    """
    ra = np.asarray(ra_deg, dtype=np.float64)
    dec = np.asarray(dec_deg, dtype=np.float64)
    n = len(ra)
    theta = settings.angle_arcsec * ARCSEC
    xyz = radec_to_vec(ra, dec)
    pairs = collision_pairs(xyz, theta)
    first, groups = decollide(n, pairs, rng, settings.exact_group_max)
    collided = ~first

    if overlap is not None:
        prob = overlap.probability(ra[collided], dec[collided])
    else:
        prob = np.full(int(collided.sum()), settings.overlap_fraction)
    candidate = np.zeros(n, dtype=bool)
    candidate[np.flatnonzero(collided)[rng.random(len(prob)) < prob]] = True
    second = candidate.copy()
    if settings.second_pass_collisions and candidate.sum() > 1 and len(pairs):
        sub_pairs = pairs[candidate[pairs[:, 0]] & candidate[pairs[:, 1]]]
        if len(sub_pairs):
            ids = np.flatnonzero(candidate)
            remap = np.full(n, -1, dtype=np.int64)
            remap[ids] = np.arange(ids.size)
            ok, _ = decollide(ids.size, remap[sub_pairs], rng, settings.exact_group_max)
            second[:] = False
            second[ids[ok]] = True

    n_coll = int(collided.sum())
    n_rec = int(second.sum())
    has_nb = np.zeros(n, dtype=bool)
    has_nb[pairs.ravel()] = True
    stats: dict[str, Any] = {
        "angle_arcsec": float(settings.angle_arcsec),
        "n_targets": n,
        "n_pairs": int(len(pairs)),
        "n_with_neighbour": int(has_nb.sum()),
        "neighbour_fraction": float(has_nb.mean()) if n else 0.0,
        "n_collided": n_coll,
        "collided_fraction": n_coll / n if n else 0.0,
        "n_second_pass_candidates": int(candidate.sum()),
        "n_recovered": n_rec,
        "recovered_fraction": n_rec / n_coll if n_coll else 0.0,
        "n_missed": n_coll - n_rec,
        "missed_fraction": (n_coll - n_rec) / n if n else 0.0,
        **groups,
    }
    return FibreResult(first | second, second, stats)


def no_fibres(n: int) -> FibreResult:
    """Result for a run with the emulator switched off: every target has a fibre."""
    return FibreResult(np.ones(n, dtype=bool), np.zeros(n, dtype=bool),
                       {"enabled": False, "n_targets": n, "collided_fraction": 0.0,
                        "recovered_fraction": 0.0, "missed_fraction": 0.0})
