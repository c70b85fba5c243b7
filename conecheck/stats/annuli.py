"""Counts in annuli: the distribution P(N_a) of the weighted number of other galaxies with
r_inner ≤ r_p < r_outer and |π| < H around each galaxy.

A distribution (rather than only the mean) keeps the information on the environment
beyond the cylinder; the weighted mean count per centre is reported as
``extra["mean_count"]``.  Weighting, normalisation, cone edge treatment (using the outer
radius) and jackknife follow :mod:`._count_distribution`.
"""

from __future__ import annotations

from ._count_distribution import distribution_box, distribution_cone
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .settings import AnnuliSettings

NAME = "annuli"


def annuli_box(sample: BoxSample, settings: AnnuliSettings | None = None, *,
               jackknife: bool | None = None) -> Measurement:
    """P(N_a) of a periodic box sample."""
    s = settings or AnnuliSettings()
    return distribution_box(NAME, sample, s.r_inner, s.r_outer, s.half_length, s.edges,
                            jackknife)


def annuli_cone(sample: ConeSample, geometry: ConeGeometry | None = None,
                settings: AnnuliSettings | None = None, *, jackknife: bool | None = None
                ) -> Measurement:
    """P(N_a) of a cone sample."""
    s = settings or AnnuliSettings()
    return distribution_cone(NAME, sample, geometry, s.r_inner, s.r_outer, s.half_length,
                             s.edges, s.edge_treatment, s.min_inside_fraction, jackknife)
