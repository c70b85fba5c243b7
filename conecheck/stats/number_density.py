"""Number density (docs/design.md §6): box Σw/L³; cone Σw/V_eff, V_eff = (Ω_eff/3)(χ_max³ − χ_min³).

Jackknife: delete-one densities from per-region Σw over the remaining volume — equal
sub-volumes in a box, (Ω_eff − Ω_k)/3 (χ_max³ − χ_min³) on a cone with Ω_k the region's
effective (completeness-weighted) area.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ._common import check_filled, want_jackknife
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .statistic import Display, Statistic

NAME = "number_density"
_LABEL = "n [(h/Mpc)^3]"


@dataclass(frozen=True)
class NumberDensitySettings:
    """Number density has no settings; kept for a uniform interface."""


def number_density_box(sample: BoxSample, settings: NumberDensitySettings | None = None, *,
                       jackknife: bool | None = None) -> Measurement:
    """Weighted number density Σw/L³ [(h/Mpc)³] of a periodic box sample."""
    w = sample.w
    value = w.sum() / sample.volume
    delete_one = None
    if want_jackknife(jackknife, sample.n_regions, "number density"):
        k = sample.n_regions
        check_filled(sample.region, k, "galaxies")
        per = np.bincount(sample.region, weights=w, minlength=k)
        delete_one = ((w.sum() - per) / (sample.volume * (k - 1) / k))[:, None]
    return Measurement(name=NAME, bins=np.array([0.0]), value=np.array([value]),
                       delete_one=delete_one, value_label=_LABEL,
                       extra={"sum_w": float(w.sum()), "n_objects": len(sample)})


def number_density_cone(sample: ConeSample, geometry: ConeGeometry,
                        settings: NumberDensitySettings | None = None, *,
                        jackknife: bool | None = None) -> Measurement:
    """Weighted number density Σw/V_eff [(h/Mpc)³] of a cone sample."""
    w = sample.w
    vol = geometry.volume
    if not vol > 0:
        raise InputError("number density: the footprint has zero effective area")
    delete_one = None
    if want_jackknife(jackknife, sample.n_regions, "number density"):
        k = sample.n_regions
        if geometry.regions is None or len(geometry.regions.areas_deg2) != k:
            raise InputError(f"number density: the sample has {k} jackknife regions but the "
                             "geometry's region map does not match")
        check_filled(sample.region, k, "galaxies")
        per = np.bincount(sample.region, weights=w, minlength=k)
        areas = np.asarray(geometry.regions.areas_deg2, dtype=np.float64)
        # region volumes as shares of V_eff, so rounding in the areas cannot bias n
        delete_one = ((w.sum() - per) / (vol * (1.0 - areas / areas.sum())))[:, None]
    return Measurement(name=NAME, bins=np.array([0.0]), value=np.array([w.sum() / vol]),
                       delete_one=delete_one, value_label=_LABEL,
                       extra={"sum_w": float(w.sum()), "n_objects": len(sample),
                              "volume": float(vol)})


class NumberDensity(Statistic):
    """Weighted number density of the sample."""

    name = NAME
    settings_type = NumberDensitySettings
    display = Display(title="number density n", short="number density", symbol="n", order=0)
    los_dependent = False

    def n_bins(self, settings=None):
        return 1

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return number_density_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return number_density_cone(sample, geometry, settings, jackknife=jackknife)


STATISTIC = NumberDensity()
