"""Statistics measured identically on periodic boxes and light cones (docs/design.md §6).

Every statistic returns a :class:`Measurement` (vector, bin labels and, on request, the
jackknife delete-one vectors).  :data:`STATISTICS` maps the configured names to objects
with ``measure_box`` / ``prepare_cone`` / ``measure_cone``.
"""

from .annuli import annuli_box, annuli_cone
from .base import BoxSample, ConeGeometry, ConeSample, Measurement
from .cic import cic_box, cic_cone
from .number_density import number_density_box, number_density_cone
from .registry import STATISTICS, Statistic
from .settings import (
    SETTINGS_TYPES,
    AnnuliSettings,
    CicSettings,
    NumberDensitySettings,
    VpfSettings,
    WpSettings,
    make_settings,
)
from .vpf import vpf_box, vpf_cone
from .wp import count_rr_cone, wp_box, wp_cone

__all__ = [
    "SETTINGS_TYPES", "STATISTICS", "AnnuliSettings", "BoxSample", "CicSettings",
    "ConeGeometry", "ConeSample", "Measurement", "NumberDensitySettings", "Statistic",
    "VpfSettings", "WpSettings", "annuli_box", "annuli_cone", "cic_box", "cic_cone",
    "count_rr_cone", "make_settings", "number_density_box", "number_density_cone",
    "vpf_box", "vpf_cone", "wp_box", "wp_cone",
]
