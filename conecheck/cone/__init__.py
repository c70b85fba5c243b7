"""Light-cone stage: turn a periodic galaxy box into survey-like light cones.

Public entry points: :func:`build_cone` (one cone), :func:`build_all_cones` (every cone
of a run, seeded per cone), :func:`make_randoms`, :func:`select_sample`,
:func:`volume_limit_zmax`, :func:`assign_fibres`, the correction registry
:data:`CORRECTIONS`, and the writers :func:`write_cone`, :func:`write_randoms`,
:func:`write_cones_directory`.  Settings dataclasses live in
:mod:`conecheck.cone.settings`.
"""

from .build import (
    CONE_STAGES,
    SurveyModel,
    build_all_cones,
    build_cone,
    cone_geometry,
    cone_rngs,
    prepare_box,
)
from .corrections import (
    CORRECTIONS,
    ZFLAG_COLLIDED,
    ZFLAG_MEANING,
    ZFLAG_NEAREST_REDSHIFT,
    ZFLAG_OWN_FIBRE,
    ZFLAG_SECOND_PASS,
    register_correction,
)
from .fibres import FibreResult, OverlapMap, assign_fibres, load_overlap_map
from .geometry import replica_offsets, sky_coordinates
from .output import write_cone, write_cones_directory, write_randoms
from .photometry import (
    apparent_magnitude,
    inferred_abs_mag,
    observed_frame_magnitude,
    volume_limit_zmax,
)
from .randoms import make_randoms, n_randoms
from .selection import (
    FullSky,
    select_cut,
    select_sample,
    volume_limits_report,
)
from .settings import (
    CorrectionSettings,
    EffectSwitches,
    FibreSettings,
    ObserverSettings,
    RandomSettings,
    RedshiftErrorSettings,
    SampleCut,
    SurveyShell,
)

__all__ = [
    "CORRECTIONS", "CONE_STAGES", "ZFLAG_COLLIDED", "ZFLAG_MEANING", "ZFLAG_NEAREST_REDSHIFT",
    "ZFLAG_OWN_FIBRE", "ZFLAG_SECOND_PASS", "CorrectionSettings", "EffectSwitches",
    "FibreResult", "FibreSettings", "FullSky", "ObserverSettings", "OverlapMap",
    "RandomSettings", "RedshiftErrorSettings", "SampleCut", "SurveyModel", "SurveyShell",
    "apparent_magnitude", "assign_fibres", "build_all_cones", "build_cone", "cone_geometry",
    "cone_rngs", "inferred_abs_mag", "load_overlap_map", "make_randoms", "n_randoms",
    "observed_frame_magnitude", "prepare_box",
    "register_correction", "replica_offsets", "select_cut", "select_sample", "sky_coordinates",
    "volume_limit_zmax", "volume_limits_report", "write_cone", "write_cones_directory",
    "write_randoms",
]
