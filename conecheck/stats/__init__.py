"""Statistics measured identically on periodic boxes and light cones (docs/design.md §6).

Each statistic is one module with one :class:`Statistic` subclass (settings, bins,
estimators, display); :data:`STATISTICS` maps the names to them, built-in and installed
alike (:mod:`.registry`). Every statistic returns a :class:`Measurement` (vector, bin
labels and, on request, the jackknife delete-one vectors).
"""

from .annuli import AnnuliSettings, annuli_box, annuli_cone
from .base import BoxSample, ConeGeometry, ConeSample, MatterSample, Measurement
from .cic import CicSettings, cic_box, cic_cone
from .number_density import NumberDensitySettings, number_density_box, number_density_cone
from .registry import (
    ENTRY_POINT_GROUP,
    LOAD_PROBLEMS,
    SETTINGS_TYPES,
    STATISTICS,
    make_settings,
    statistic,
)
from .statistic import Cost, Display, Statistic
from .vpf import VpfSettings, vpf_box, vpf_cone
from .wp import WpSettings, count_rr_cone, wp_box, wp_cone

__all__ = [
    "ENTRY_POINT_GROUP", "LOAD_PROBLEMS", "SETTINGS_TYPES", "STATISTICS", "AnnuliSettings",
    "BoxSample", "CicSettings", "ConeGeometry", "ConeSample", "Cost", "Display",
    "MatterSample", "Measurement", "NumberDensitySettings", "Statistic", "VpfSettings",
    "WpSettings",
    "annuli_box", "annuli_cone", "cic_box", "cic_cone", "count_rr_cone", "make_settings",
    "number_density_box", "number_density_cone", "statistic", "vpf_box", "vpf_cone",
    "wp_box", "wp_cone",
]
