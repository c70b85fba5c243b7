"""The numba pair-counting engine: (r_p, π) pair counts and per-centre neighbour counts.

Periodic boxes (one axis as the line of sight, minimum image) and light cones (observer at
the origin, line of sight at the pair midpoint), weighted, with every jackknife delete-one
count from a single pass.  See :mod:`.counts` for the counting conventions.  On the unit
sphere (:mod:`.angular`): every pair within a chord and each query's nearest point, the
fibre-collision graph and the nearest fibred neighbour of a cone's targets.
"""

from .angular import close_pairs_sphere, nearest_on_sphere
from .binning import RpPiBins, SMuBins, make_bins, make_smu_bins
from .counts import (
    PairCounts,
    count_rppi_box,
    count_rppi_box_shared,
    count_rppi_cone,
    count_smu_box,
    count_smu_cone,
    join_disjoint_auto,
    join_separations,
)
from .neighbours import nearest_distance, neighbours_box, neighbours_cone, query_workers

__all__ = ["PairCounts", "RpPiBins", "SMuBins", "close_pairs_sphere", "count_rppi_box",
           "count_rppi_box_shared", "count_rppi_cone", "count_smu_box", "count_smu_cone",
           "join_disjoint_auto", "join_separations", "make_bins", "make_smu_bins",
           "nearest_distance", "nearest_on_sphere", "neighbours_box", "neighbours_cone",
           "query_workers"]
