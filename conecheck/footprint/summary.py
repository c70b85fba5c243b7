"""Descriptive numbers of a footprint (what ``conecheck mask info`` prints)."""

from __future__ import annotations

from typing import Any

import healpy as hp
import numpy as np
from numpy.typing import NDArray
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ..sphere import vec_to_radec
from .maps import Footprint

#: Completeness histogram bin edges (the last bin holds exactly 1).
HIST_EDGES = np.round(np.linspace(0.0, 1.0, 11), 10)


def connected_pieces(fp: Footprint) -> tuple[int, NDArray[np.int64]]:
    """Number of connected pieces of the occupied pixels (8-neighbour adjacency).

    Returns
    -------
    n_pieces, label of each occupied pixel (order of ``fp.occupied``).
    """
    occ = fp.occupied
    pos = np.full(fp.npix, -1, dtype=np.int64)
    pos[occ] = np.arange(occ.size)
    nb = hp.get_all_neighbours(fp.nside, occ, nest=fp.nest)  # (8, m)
    rows = np.broadcast_to(np.arange(occ.size), nb.shape)
    cols = np.where(nb >= 0, pos[np.maximum(nb, 0)], -1)
    keep = cols >= 0
    graph = coo_matrix((np.ones(int(keep.sum()), dtype=np.int8), (rows[keep], cols[keep])),
                       shape=(occ.size, occ.size))
    n, labels = connected_components(graph, directed=False)
    return int(n), labels


def bounding_box(fp: Footprint) -> dict[str, float]:
    """RA/Dec extent of occupied pixel centres [deg].

    RA runs eastwards from ``ra_min`` to ``ra_max`` and wraps through 0 when
    ``ra_min > ra_max``: the range is the circle minus its largest empty RA gap.
    """
    ra, dec = vec_to_radec(fp.occupied_vectors())
    s = np.unique(np.round(ra, 9))
    if s.size == 1:
        ra_min = ra_max = float(s[0])
    else:
        gaps = np.diff(np.concatenate([s, [s[0] + 360.0]]))
        g = int(np.argmax(gaps))
        if gaps[g] < 2.0 * np.degrees(hp.max_pixrad(fp.nside)):  # every RA occupied
            ra_min, ra_max = 0.0, 360.0
        else:
            ra_min, ra_max = float(s[(g + 1) % s.size]), float(s[g])
    return {"ra_min": ra_min, "ra_max": ra_max, "dec_min": float(dec.min()),
            "dec_max": float(dec.max())}


def summarize(fp: Footprint) -> dict[str, Any]:
    """Dictionary of N_side, ordering, areas, histogram, pieces and bounding box."""
    occ_vals = fp.values[fp.occupied]
    counts, _ = np.histogram(occ_vals[occ_vals < 1.0], bins=HIST_EDGES)
    hist = [{"low": float(lo), "high": float(hi), "pixels": int(c),
             "area_deg2": float(occ_vals[(occ_vals >= lo) & (occ_vals < hi)].sum()
                                * fp.pixel_area_sr * (180 / np.pi) ** 2)}
            for lo, hi, c in zip(HIST_EDGES[:-1], HIST_EDGES[1:], counts, strict=True)]
    hist[0]["low_exclusive"] = True
    n_full = int(np.count_nonzero(occ_vals == 1.0))
    hist.append({"low": 1.0, "high": 1.0, "pixels": n_full,
                 "area_deg2": n_full * fp.pixel_area_sr * (180 / np.pi) ** 2})
    n_pieces, _ = connected_pieces(fp)
    return {
        "source": fp.source, "nside": fp.nside, "ordering": fp.ordering, "npix": fp.npix,
        "pixel_area_deg2": fp.pixel_area_sr * (180 / np.pi) ** 2,
        "occupied_pixels": int(fp.occupied.size),
        "area_deg2": fp.area_deg2, "area_sr": fp.area_sr, "sky_fraction": fp.sky_fraction,
        "mean_completeness": float(occ_vals.mean()), "histogram": hist,
        "connected_pieces": n_pieces, "bounding_box": bounding_box(fp),
    }


def format_summary(info: dict[str, Any]) -> str:
    """Human-readable text of :func:`summarize`."""
    bb = info["bounding_box"]
    wrap = "  (wraps through RA 0)" if bb["ra_min"] > bb["ra_max"] else ""
    lines = [
        f"mask             {info['source']}",
        f"N_side           {info['nside']}  ({info['ordering']}, {info['npix']} pixels of "
        f"{info['pixel_area_deg2']:.5g} deg2)",
        f"occupied pixels  {info['occupied_pixels']}",
        f"effective area   {info['area_deg2']:.2f} deg2 = {info['area_sr']:.6f} sr",
        f"sky fraction     {info['sky_fraction']:.6f}",
        f"mean completeness of occupied pixels  {info['mean_completeness']:.4f}",
        f"connected pieces {info['connected_pieces']}",
        f"bounding box     RA {bb['ra_min']:.2f} -> {bb['ra_max']:.2f} deg{wrap}, "
        f"Dec {bb['dec_min']:.2f} -> {bb['dec_max']:.2f} deg (pixel centres)",
        "completeness histogram (occupied pixels):",
        "  completeness      pixels    area [deg2]",
    ]
    for h in info["histogram"]:
        if h["low"] == h["high"]:
            rng = "  = 1.0     "
        else:
            left = "(" if h.get("low_exclusive") else "["
            rng = f"  {left}{h['low']:.1f}, {h['high']:.1f})"
        lines.append(f"{rng:<16}{h['pixels']:>10d}  {h['area_deg2']:>12.2f}")
    return "\n".join(lines)
