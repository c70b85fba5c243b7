"""Distribution of per-galaxy neighbour counts in cylinders or annuli (box and cone).

For each galaxy (the centre) N = Σ w_j over the *other* galaxies j with
r_in ≤ r_p < r_out and |π| < H (box: LOS axis, minimum image; cone: LOS at the
centre–neighbour midpoint, as for the pair counts).  Weights enter twice, consistently
with the pair counts: neighbours add their weight to N, and each centre enters the
histogram with its own weight, so P(N) = Σ_{centres in bin} w_c / (Σ_c w_c · ΔN).
Counts beyond the last bin edge are reported as ``overflow_fraction``.

Jackknife approximation: delete-one k removes only the *centres* in region k; their
galaxies still count as neighbours of centres outside k, so the counts are computed once.
Only centres within R of a region boundary are affected, a fraction ~ R × perimeter /
area of each region.  tests/test_stats_cic.py compares it with an exact recomputation
(region k's galaxies removed entirely): with 25 Mpc/h regions and R = 2 Mpc/h the
approximate errors come out 10–20 % smaller than the exact ones (the tested tolerance is
30 %) and the mean delete-one vectors agree within half an error; wider regions (the
usual case on a survey) shrink the difference.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..pairs import neighbours_box, neighbours_cone
from ._common import check_filled, want_jackknife, weighted_histograms
from .base import SAMPLING_TRIALS, BoxSample, ConeGeometry, ConeSample, Measurement


def distribution(name: str, counts: NDArray[np.float64], w: NDArray[np.float64],
                  region: NDArray[np.int64] | None, n_regions: int,
                  edges: NDArray[np.float64], extra: dict,
                  bin_label: str = "N (weighted neighbour count)",
                  value_label: str = "P(N)") -> Measurement:
    wsum = w.sum()
    if not wsum > 0:
        raise InputError(f"{name}: no centres with positive weight")
    width = np.diff(edges)
    hist, reg_hist = weighted_histograms(counts, w, edges, region, n_regions)
    delete_one = None
    if n_regions:
        w_k = np.bincount(region, weights=w, minlength=n_regions)
        delete_one = (hist[None] - reg_hist) / ((wsum - w_k)[:, None] * width[None])
    inside = (counts >= edges[0]) & (counts < edges[-1])
    extra = dict(extra)
    extra[SAMPLING_TRIALS] = {"n": [int(counts.size)] * width.size, "width": width.tolist()}
    extra.update({"n_centres": int(counts.size), "sum_w_centres": float(wsum),
                  "mean_count": float(np.sum(w * counts) / wsum),
                  "overflow_fraction": float(w[~inside].sum() / wsum)})
    return Measurement(name=name, bins=0.5 * (edges[:-1] + edges[1:]),
                       value=hist / (wsum * width), delete_one=delete_one,
                       bin_edges=edges.copy(), bin_label=bin_label,
                       value_label=value_label, extra=extra)


def distribution_box(name: str, sample: BoxSample, r_in: float, r_out: float,
                     half_length: float, edges: NDArray[np.float64],
                     jackknife: bool | None) -> Measurement:
    """Neighbour-count distribution around every galaxy of a periodic box."""
    jk = want_jackknife(jackknife, sample.n_regions, name)
    k = sample.n_regions if jk else 0
    if jk:
        check_filled(sample.region, k, "galaxies")
    counts = neighbours_box(sample.position, weights=sample.w, box_size=sample.box_size,
                            los_axis=sample.los_axis, edges=[r_in, r_out],
                            half_length=half_length)[:, 0]
    return distribution(name, counts, sample.w, sample.region if jk else None, k, edges,
                         {"geometry": "box"})


def kept_centres(name: str, sample: ConeSample, geometry: ConeGeometry | None, radius: float,
                 half_length: float, edge_treatment: str, min_inside_fraction: float
                 ) -> NDArray[np.bool_]:
    """Centres a cone estimator keeps: all, or (``drop``) those whose cylinder of
    ``radius`` and ``half_length`` [Mpc/h] lies at least ``min_inside_fraction`` inside the
    survey (:meth:`ConeGeometry.inside_fraction`)."""
    keep = np.ones(len(sample), dtype=bool)
    if edge_treatment == "drop":
        if geometry is None:
            raise InputError(f"{name}: edge_treatment = 'drop' needs the survey geometry")
        frac = geometry.inside_fraction(sample.ra, sample.dec, sample.chi, radius, half_length)
        keep = frac >= min_inside_fraction
        if not keep.any():
            raise InputError(f"{name}: no centre has its cylinder ≥ {min_inside_fraction:g} "
                             "inside the survey; lower min_inside_fraction")
    return keep


def distribution_cone(name: str, sample: ConeSample, geometry: ConeGeometry | None,
                      r_in: float, r_out: float, half_length: float,
                      edges: NDArray[np.float64], edge_treatment: str,
                      min_inside_fraction: float, jackknife: bool | None) -> Measurement:
    """Neighbour-count distribution around the galaxies of a cone.

    ``edge_treatment = "drop"`` keeps only centres whose cylinder (radius ``r_out``) lies
    at least ``min_inside_fraction`` inside the survey (:meth:`ConeGeometry.inside_fraction`);
    all galaxies still count as neighbours.
    """
    jk = want_jackknife(jackknife, sample.n_regions, name)
    k = sample.n_regions if jk else 0
    w = sample.w
    counts = neighbours_cone(sample.xyz, weights=w, edges=[r_in, r_out],
                             half_length=half_length)[:, 0]
    keep = kept_centres(name, sample, geometry, r_out, half_length, edge_treatment,
                        min_inside_fraction)
    region = None
    extra = {"geometry": "cone", "edge_treatment": edge_treatment,
             "kept_fraction": float(keep.mean()) if keep.size else 0.0}
    if jk:
        check_filled(sample.region, k, "galaxies")
        region = sample.region[keep]
        # a region whose galaxies all sit near the survey edge keeps no centre: deleting it
        # changes nothing, so its delete-one value is the full value (listed, not refused)
        empty = np.flatnonzero(np.bincount(region, minlength=k) == 0)
        if empty.size:
            extra["regions_without_kept_centres"] = empty.tolist()
    return distribution(name, counts[keep], w[keep], region, k, edges, extra)
