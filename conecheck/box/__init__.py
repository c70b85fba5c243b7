"""Box stage: synthetic lognormal halos, HOD population and box-side effects.

Public entry points:

* :func:`read_halo_catalog`, :class:`HaloCatalog` — halo input.
* :class:`ZhengParams`, :class:`HODThreshold`, :class:`AssemblyBias`, :class:`HODModel`,
  :func:`load_hod`, :func:`default_hod_model` — occupation models.
* :func:`populate` — halos + HOD -> :class:`conecheck.catalog.GalaxyBox`
  (:func:`populate_models`: several models' boxes at once, with keyed draws).
* :func:`halo_threshold_densities`, :func:`synthetic_threshold_densities`,
  :func:`density_brighter_than` — expected galaxy densities before anything is drawn.
* :func:`make_synthetic_halos`, :func:`make_synthetic_box` — no N-body input needed.
* :func:`apply_box_rsd`, :func:`apply_box_redshift_scatter` — box-side effects.
"""

from .effects import apply_box_redshift_scatter, apply_box_rsd
from .halos import HaloCatalog, read_halo_catalog
from .hod import (
    AssemblyBias,
    HODModel,
    HODThreshold,
    ZhengParams,
    default_hod_model,
    default_hod_path,
    load_hod,
)
from .populate import (
    density_brighter_than,
    halo_threshold_densities,
    populate,
    populate_models,
)
from .synthetic import (
    hod_number_density,
    make_synthetic_box,
    make_synthetic_halos,
    synthetic_threshold_densities,
)

__all__ = [
    "AssemblyBias", "HODModel", "HODThreshold", "HaloCatalog", "ZhengParams",
    "apply_box_redshift_scatter", "apply_box_rsd", "default_hod_model", "default_hod_path",
    "density_brighter_than", "halo_threshold_densities", "hod_number_density",
    "load_hod", "make_synthetic_box", "make_synthetic_halos", "populate", "populate_models",
    "read_halo_catalog", "synthetic_threshold_densities",
]
