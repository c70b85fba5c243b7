"""One interface over every statistic, so the pipeline can loop over configured names.

Each entry of :data:`STATISTICS` has

* ``name`` and ``settings_type`` (the frozen settings dataclass of ``[statistics.<name>]``);
* ``measure_box(sample, settings, rng, *, jackknife=None) -> Measurement``;
* ``prepare_cone(randoms, geometry, settings, *, n_data=None, rng=None)`` → the work shared
  by every cone of one sample and cut (wp: the RR counts; VPF: the sphere centres and their
  inside-the-survey test, drawn with ``rng``; others: ``None``);
* ``measure_cone(sample, randoms, geometry, settings, rng, shared=None, *, jackknife=None)``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .annuli import annuli_box, annuli_cone
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .cic import cic_box, cic_cone
from .number_density import number_density_box, number_density_cone
from .settings import (
    AnnuliSettings,
    CicSettings,
    NumberDensitySettings,
    VpfSettings,
    WpSettings,
)
from .vpf import vpf_box, vpf_cone, vpf_cone_centres
from .wp import count_rr_cone, wp_box, wp_cone


@dataclass(frozen=True)
class Statistic:
    """Base of the registry entries (see the module notes)."""

    name: str
    settings_type: type

    def settings_or_default(self, settings: Any) -> Any:
        return self.settings_type() if settings is None else settings

    def prepare_cone(self, randoms: ConeSample, geometry: ConeGeometry, settings: Any = None,
                     *, n_data: int | None = None, rng: np.random.Generator | None = None
                     ) -> Any:
        """Work shared by all cones of one sample and cut (none by default)."""
        return None

    def measure_box(self, sample: BoxSample, settings: Any = None,
                    rng: np.random.Generator | None = None, *,
                    jackknife: bool | None = None) -> Measurement:
        raise NotImplementedError

    def measure_cone(self, sample: ConeSample, randoms: ConeSample | None,
                     geometry: ConeGeometry, settings: Any = None,
                     rng: np.random.Generator | None = None, shared: Any = None, *,
                     jackknife: bool | None = None) -> Measurement:
        raise NotImplementedError


class _NumberDensity(Statistic):
    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return number_density_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return number_density_cone(sample, geometry, settings, jackknife=jackknife)


class _Wp(Statistic):
    def prepare_cone(self, randoms, geometry, settings=None, *, n_data=None, rng=None):
        return count_rr_cone(randoms, geometry, self.settings_or_default(settings),
                             n_data=n_data)

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return wp_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return wp_cone(sample, randoms, geometry, settings, rr=shared, jackknife=jackknife)


class _Cic(Statistic):
    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return cic_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return cic_cone(sample, geometry, settings, jackknife=jackknife)


class _Vpf(Statistic):
    def prepare_cone(self, randoms, geometry, settings=None, *, n_data=None, rng=None):
        # sphere centres and their inside-the-survey test depend on the geometry only
        if rng is None:
            return None
        return vpf_cone_centres(geometry, self.settings_or_default(settings), rng)

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return vpf_box(sample, settings, rng, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return vpf_cone(sample, geometry, settings, rng, jackknife=jackknife, centres=shared)


class _Annuli(Statistic):
    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return annuli_box(sample, settings, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return annuli_cone(sample, geometry, settings, jackknife=jackknife)


#: Statistic name -> registry entry.
STATISTICS: dict[str, Statistic] = {
    "number_density": _NumberDensity("number_density", NumberDensitySettings),
    "wp": _Wp("wp", WpSettings),
    "cic": _Cic("cic", CicSettings),
    "vpf": _Vpf("vpf", VpfSettings),
    "annuli": _Annuli("annuli", AnnuliSettings),
}
