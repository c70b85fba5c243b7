"""Helpers shared by the statistics: jackknife switches, region checks, histograms."""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError


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
