"""Helpers shared by the statistics: jackknife switches, region checks, histograms."""

from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..pairs import PairCounts, join_separations
from .base import BoxSample, ConeSample

#: Smallest random subset of the split RR method (fewer subsets are used below it).
MIN_SPLIT_SUBSET = 20_000


def want_jackknife(jackknife: bool | None, n_regions: int, what: str) -> bool:
    """Resolve the ``jackknife`` switch: ``None`` means "when the sample has regions"."""
    if jackknife is None:
        return n_regions >= 2
    if jackknife and n_regions < 2:
        raise InputError(f"{what}: a jackknife needs at least 2 regions, the sample has "
                         f"{n_regions}")
    return bool(jackknife)


def check_filled(region: NDArray[np.int64], n_regions: int, what: str) -> NDArray[np.int64]:
    """Objects per region; refuse a layout with regions that hold none."""
    counts = np.bincount(region, minlength=n_regions)
    empty = np.flatnonzero(counts == 0)
    if empty.size:
        raise InputError(f"jackknife: {empty.size} of {n_regions} regions hold no {what} "
                         f"(regions {empty[:10].tolist()}); use fewer jackknife regions")
    return counts


def weighted_histograms(values: NDArray[np.float64], weights: NDArray[np.float64],
                        edges: NDArray[np.float64], region: NDArray[np.int64] | None,
                        n_regions: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Weighted histogram of ``values`` overall and per region.

    Returns ``(hist[n_bins], region_hist[n_regions, n_bins])``; values outside the edges
    fall in no bin.
    """
    n_b = edges.size - 1
    b = np.searchsorted(edges, values, side="right") - 1
    ok = (b >= 0) & (b < n_b)
    hist = np.bincount(b[ok], weights=weights[ok], minlength=n_b).astype(np.float64)
    if region is None or n_regions == 0:
        return hist, np.zeros((0, n_b))
    flat = region[ok] * n_b + b[ok]
    reg = np.bincount(flat, weights=weights[ok], minlength=n_regions * n_b)
    return hist, reg.reshape(n_regions, n_b).astype(np.float64)


def count_rr_split(randoms: ConeSample, rr_method: str, split_factor: float,
                   n_data: int | None, what: str,
                   count: Callable[[NDArray[np.float64], NDArray[np.float64],
                                    NDArray[np.int64] | None, NDArray[np.float64]], PairCounts],
                   edges: NDArray[np.float64], split_above: float = 0.0) -> PairCounts:
    """RR of a cut's randoms, from all random pairs or from disjoint random subsets.

    ``rr_method = "split"`` counts pairs only inside M disjoint subsets of ``split_factor``
    times the data size each, summed with their pair numbers (Keihänen et al. 2019, A&A 631,
    A73), in the bins whose lower edge is at least ``split_above`` [Mpc/h]; the smaller bins
    count every random pair. Landy–Szalay passes RR's relative noise on to ξ with a factor
    1 − ξ (against −2 for DR's), large at small separations where ξ ≫ 1, while RR's pairs
    lie mostly at large ones, so splitting only there keeps most of the saving
    (benchmarks/RESULTS.md). ``count(xyz, w, region, edges)`` is the statistic's auto pair
    count of one set in bins of the first separation ``edges`` [Mpc/h].
    """
    edges = np.asarray(edges, dtype=np.float64)
    if rr_method == "full":
        return count(randoms.xyz, randoms.weight, randoms.region, edges)
    if n_data is None or n_data < 1:
        raise InputError(f"{what}: rr_method = 'split' needs the data size (n_data) to size "
                         "the random subsets")
    m = max(1, int(round(len(randoms) / (split_factor * n_data))))
    # Tiny subsets leave the smallest bins with a handful of random pairs, and a delete-one
    # region can then empty a bin: keep every subset at least this large.
    m = max(1, min(m, len(randoms) // MIN_SPLIT_SUBSET))
    first = int(np.searchsorted(edges[:-1], split_above, side="left"))
    if m == 1 or first >= edges.size - 1:
        return count(randoms.xyz, randoms.weight, randoms.region, edges)
    xyz, w = randoms.xyz, randoms.w
    split: PairCounts | None = None
    for s in range(m):
        # strided subsets: disjoint, and each spread over the whole survey whatever the
        # order the randoms come in
        sel = slice(s, None, m)
        reg = None if randoms.region is None else randoms.region[sel]
        part = count(xyz[sel], w[sel], reg, edges[first:])
        split = part if split is None else split + part
    if first == 0:
        return split
    whole = count(randoms.xyz, randoms.weight, randoms.region, edges[:first + 1])
    return join_separations(whole, split)


def dr_prefix_size(randoms: ConeSample, cell_volumes: NDArray[np.float64]) -> int | None:
    """The smallest prefix of ``randoms`` (:attr:`~conecheck.stats.base.ConeSample.
    prefixes`) that may stand in for all of them in bins with cells of ``cell_volumes``
    [(Mpc/h)³], or None when none may (or one would leave a jackknife region empty)."""
    if len(cell_volumes) == 0:
        return None
    smallest = float(np.min(cell_volumes))
    usable = [size for size, volume in randoms.prefixes if volume <= smallest]
    if not usable:
        return None
    size = min(usable)
    if randoms.region is not None and randoms.n_regions:
        if np.bincount(randoms.region[:size], minlength=randoms.n_regions).min() == 0:
            return None
    return size


def count_dr_prefix(randoms: ConeSample, dr_method: str,
                    count: Callable[[NDArray[np.float64], NDArray[np.float64],
                                     NDArray[np.int64] | None, NDArray[np.float64]],
                                    PairCounts],
                    edges: NDArray[np.float64], split_above: float,
                    cell_volumes: NDArray[np.float64]) -> tuple[PairCounts, int]:
    """DR of a cone, from all randoms or, above ``split_above``, from a prefix of them.

    ``dr_method = "prefix"`` counts the bins whose lower edge is at least ``split_above``
    [Mpc/h] against the smallest prefix of the randoms that their cells (``cell_volumes``
    [(Mpc/h)³], one per bin) allow (:func:`dr_prefix_size`), on that prefix's own
    normalisation (:func:`~conecheck.pairs.join_separations`); the smaller bins count every
    random. A count's cost grows with its randoms, and most data–random pairs lie in the
    large bins. The smallest of the large bins' cells decides for all of them, so in the
    larger ones the prefix's noise lies far below its bound: there the split RR's own noise
    already takes much of what the randoms may add (a choice bin by bin, down to an eighth
    of the randoms in the largest bins, gave them up to 1.6 times the variance of 20
    pseudo-random points per galaxy: benchmarks/RESULTS.md, "Fourteenth pass").
    ``count(randoms_xyz, randoms_w, randoms_region, edges)`` is the statistic's cross count
    of the data against the given randoms in bins of the first separation.

    Returns the counts and the number of randoms the large bins used.
    """
    edges = np.asarray(edges, dtype=np.float64)
    n = len(randoms)
    first = int(np.searchsorted(edges[:-1], split_above, side="left"))
    size = (dr_prefix_size(randoms, np.asarray(cell_volumes)[first:])
            if dr_method == "prefix" and first < edges.size - 1 else None)
    xyz = randoms.xyz
    if size is None or size >= n:
        return count(xyz, randoms.weight, randoms.region, edges), n
    head = slice(0, size)
    reg = None if randoms.region is None else randoms.region[head]
    large = count(xyz[head], randoms.w[head], reg, edges[first:])
    if first == 0:
        return large, size
    small = count(xyz, randoms.weight, randoms.region, edges[:first + 1])
    return join_separations(small, large), size


def cone_regions(data: ConeSample, randoms: ConeSample, jackknife: bool | None,
                 what: str) -> int:
    """Check a cone's galaxies and randoms for a pair-count estimator; returns the number
    K of jackknife regions to use (0: no jackknife). Both need at least two objects and,
    with a jackknife, one shared region map with every region filled."""
    if len(data) < 2 or len(randoms) < 2:
        raise InputError(f"{what}: need at least two galaxies and two randoms, got "
                         f"{len(data)} and {len(randoms)}")
    jk = want_jackknife(jackknife, data.n_regions, what)
    k = data.n_regions if jk else 0
    if jk:
        if randoms.n_regions != k:
            raise InputError(f"{what}: data have {k} jackknife regions, randoms "
                             f"{randoms.n_regions}; they must share one region map")
        check_filled(data.region, k, "galaxies")
        check_filled(randoms.region, k, "randoms")
    return k


def landy_szalay(dd: PairCounts, dr: PairCounts, rr: PairCounts, what: str,
                 cols: slice = slice(None)
                 ) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
    """ξ = (DD − 2DR + RR)/RR of weight-normalised counts (Landy & Szalay 1993, ApJ 412,
    64) over the second-axis bins ``cols``, and its delete-one values (K, …) when the
    counts carry jackknife regions (else None)."""
    rrn = rr.normalised()[:, cols]
    xi = (dd.normalised()[:, cols] - 2.0 * dr.normalised()[:, cols] + rrn) / rrn
    if dd.n_regions == 0:
        return xi, None
    rrk = rr.normalised_delete_one()[:, :, cols]
    if np.any(rrk <= 0):
        raise InputError(f"{what}: removing one jackknife region leaves a bin without random "
                         "pairs; use fewer regions or more randoms")
    xik = (dd.normalised_delete_one()[:, :, cols] - 2.0 * dr.normalised_delete_one()[:, :, cols]
           + rrk) / rrk
    return xi, xik


def column_neighbourhoods(sample: BoxSample, reach: float
                          ) -> Iterator[tuple[int, NDArray[np.int64], NDArray[np.float64],
                                              NDArray[np.float64]]]:
    """The galaxies near each delete-one column of a box sample (``columns`` layout).

    Parameters
    ----------
    sample : BoxSample
        With regions from a ``columns`` layout (``sample.layout``).
    reach : float
        Distance across the LOS from a column's square [Mpc/h].

    Yields
    ------
    (k, index, dx, dy)
        For each column k in turn: the galaxies outside it whose periodic image nearest to
        it lies within ``reach`` of its square, across the LOS (ascending indices), and
        their coordinates relative to its corner [Mpc/h] in that image. The candidates come
        from one pass over the galaxies (:meth:`~conecheck.jackknife.BoxRegions.
        columns_within`); the test here is the exact one.
    """
    layout = sample.layout
    L, a, n_side = sample.box_size, float(layout.side), int(layout.n_side)
    perp = [ax for ax in range(3) if ax != sample.los_axis]
    xs, ys = sample.position[:, perp[0]], sample.position[:, perp[1]]
    start, index = layout.columns_within(xs, ys, reach)
    for k in range(layout.k):
        i, j = divmod(k, n_side)
        idx = index[start[k]:start[k + 1]]
        dx = np.mod(xs[idx] - i * a + reach, L) - reach
        dy = np.mod(ys[idx] - j * a + reach, L) - reach
        near = ((sample.region[idx] != k) & (dx > -reach) & (dx < a + reach) & (dy > -reach)
                & (dy < a + reach))
        yield k, idx[near], dx[near], dy[near]
