"""Counts in cylinders P(N_c) (docs/design.md §6): for each galaxy the weighted number of other
galaxies with r_p < R_cyl and |π| < H, histogrammed over centres.

See :mod:`._count_distribution` for the weighting, the normalisation, the cone edge
treatment and the jackknife approximation.
"""

from __future__ import annotations

from ._count_distribution import distribution_box, distribution_cone
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .settings import CicSettings

NAME = "cic"


def cic_box(sample: BoxSample, settings: CicSettings | None = None, *,
            jackknife: bool | None = None) -> Measurement:
    """P(N_c) of a periodic box sample (cylinders along the LOS axis)."""
    s = settings or CicSettings()
    return distribution_box(NAME, sample, 0.0, s.r_cyl, s.half_length, s.edges, jackknife)


def cic_cone(sample: ConeSample, geometry: ConeGeometry | None = None,
             settings: CicSettings | None = None, *, jackknife: bool | None = None
             ) -> Measurement:
    """P(N_c) of a cone sample (cylinders along the centre–neighbour midpoint LOS)."""
    s = settings or CicSettings()
    return distribution_cone(NAME, sample, geometry, 0.0, s.r_cyl, s.half_length, s.edges,
                             s.edge_treatment, s.min_inside_fraction, jackknife)
