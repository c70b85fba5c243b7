"""Counts in cylinders P(N_c) (docs/design.md §6): for each galaxy the weighted number of other
galaxies with r_p < R_cyl and |π| < H, histogrammed over centres.

See :mod:`._count_distribution` for the weighting, the normalisation, the cone edge
treatment and the jackknife approximation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ._count_distribution import distribution_box, distribution_cone
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .settings import CountSettings, positive
from .statistic import Cost, Display, Statistic

NAME = "cic"


@dataclass(frozen=True)
class CicSettings(CountSettings):
    """Counts in cylinders P(N_c).

    Attributes
    ----------
    r_cyl : float
        Cylinder radius R [Mpc/h] (r_p < R).
    half_length : float
        Cylinder half-length H [Mpc/h] (|π| < H).
    max_count : int
        Unit count bins centred on 0 … max_count (ignored when ``count_edges`` is given).
    count_edges : tuple of float or None
        Explicit count bin edges.
    edge_treatment : {"none", "drop"}
        Cone only: drop centres whose cylinder lies less than ``min_inside_fraction`` inside
        the survey (default: a cylinder cut by an edge holds fewer neighbours than in the
        box, which biases P(N) low), or keep every centre.
    min_inside_fraction : float
        Threshold of the ``drop`` treatment: the fraction of the cylinder on covered sky
        (coverage, not completeness) (0.99: essentially whole, as the VPF's spheres).
    """

    r_cyl: float = 2.0
    _key = "statistics.cic"

    def __post_init__(self) -> None:
        positive(self.r_cyl, f"{self._key}.r_cyl")
        self._check_common()


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


class CountsInCylinders(Statistic):
    """P(N_c) around every galaxy."""

    name = NAME
    counts_in_cells = True
    settings_type = CicSettings
    display = Display(title="counts in cylinders P(N)", short="cylinders P(N)", symbol="P(N)",
                      order=20)

    def n_bins(self, settings=None):
        return len(self.settings_or_default(settings).edges) - 1

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return cic_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return cic_cone(sample, geometry, settings, jackknife=jackknife)

    def cost(self, settings, randoms_multiple):
        s = self.settings_or_default(settings)
        cyl = math.pi * s.r_cyl ** 2 * 2.0 * s.half_length
        return Cost(cone_volume=cyl, box_volume=cyl)


STATISTIC = CountsInCylinders()
