"""Counts in annuli: the distribution P(N_a) of the weighted number of other galaxies with
r_inner ≤ r_p < r_outer and |π| < H around each galaxy.

A distribution (rather than only the mean) keeps the information on the environment
beyond the cylinder; the weighted mean count per centre is reported as
``extra["mean_count"]``.  Weighting, normalisation, cone edge treatment (using the outer
radius) and jackknife follow :mod:`._count_distribution`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ._count_distribution import distribution_box, distribution_cone
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .settings import CountSettings, positive
from .statistic import Cost, Display, Statistic

NAME = "annuli"


@dataclass(frozen=True)
class AnnuliSettings(CountSettings):
    """Counts in annuli: distribution of neighbours with r_inner ≤ r_p < r_outer, |π| < H.

    Attributes
    ----------
    r_inner, r_outer : float
        Inner and outer radius of the annulus [Mpc/h] (r_inner ≤ r_p < r_outer).
    half_length : float
        Half-length H of the annular cylinder [Mpc/h] (|π| < H).
    max_count : int
        Unit count bins centred on 0 … max_count (ignored when ``count_edges`` is given).
    count_edges : tuple of float or None
        Explicit count bin edges.
    edge_treatment : {"none", "drop"}
        Cone only: drop centres whose annulus lies less than ``min_inside_fraction`` inside
        the survey (default, as for the cylinders), or keep every centre.
    min_inside_fraction : float
        Threshold of the ``drop`` treatment: the fraction of the cylinder on covered sky
        (coverage, not completeness) (0.99: essentially whole, as the VPF's spheres).
    """

    r_inner: float = 2.0
    r_outer: float = 5.0
    _key = "statistics.annuli"

    def __post_init__(self) -> None:
        key = self._key
        if not (np.isfinite(float(self.r_inner)) and float(self.r_inner) >= 0):
            raise InputError(f"{key}.r_inner: expected a number ≥ 0, got {self.r_inner!r}")
        if positive(self.r_outer, f"{key}.r_outer") <= float(self.r_inner):
            raise InputError(f"{key}: r_outer = {self.r_outer} must exceed "
                             f"r_inner = {self.r_inner} Mpc/h")
        self._check_common()


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


class CountsInAnnuli(Statistic):
    """P(N_a) of neighbours in an annulus around every galaxy."""

    name = NAME
    counts_in_cells = True
    settings_type = AnnuliSettings
    display = Display(title="counts in annuli P(N)", short="annuli P(N)", symbol="annuli",
                      order=40)

    def n_bins(self, settings=None):
        return len(self.settings_or_default(settings).edges) - 1

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return annuli_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return annuli_cone(sample, geometry, settings, jackknife=jackknife)

    def cost(self, settings, randoms_multiple):
        s = self.settings_or_default(settings)
        cyl = math.pi * s.r_outer ** 2 * 2.0 * s.half_length
        return Cost(cone_volume=cyl, box_volume=cyl)


STATISTIC = CountsInAnnuli()
