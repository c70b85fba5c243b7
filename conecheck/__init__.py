"""conecheck: validate box-based galaxy statistics against survey-like light cones.

The command line (``conecheck run CONFIG``) runs a whole validation from a configuration
file. From Python, the same steps are functions of this package, on objects in memory
(see :mod:`conecheck.api`)::

    import conecheck as cc

    cfg = cc.demo_config(quick=True)
    box = cc.build_box(cfg)
    cones = cc.build_cones(box, cfg, n=2)
    on_box = cc.measure_box(box, "wp", config=cfg)
    on_cones = [cc.measure_cone(c, "wp", config=cfg) for c in cones]
    print(cc.compare(on_box, on_cones, config=cfg).verdict)
"""

from .api import (
    build_box,
    build_cones,
    compare,
    cone_matter,
    config_from_dict,
    demo_config,
    galaxy_box,
    load_config,
    measure_box,
    measure_cone,
    render_run,
    survey_sky,
    validate,
    write_report,
)
from .catalog import GalaxyBox
from .compare import Comparison
from .config import RunConfig
from .errors import ConecheckError, InputError
from .footprint import Footprint, SkyRegions
from .stats import Measurement
from .version import __version__

__all__ = ["Comparison", "ConecheckError", "Footprint", "GalaxyBox", "InputError", "Measurement",
           "RunConfig", "SkyRegions", "__version__", "build_box", "build_cones", "compare",
           "cone_matter", "config_from_dict", "demo_config", "galaxy_box", "load_config",
           "measure_box", "measure_cone", "render_run", "survey_sky", "validate",
           "write_report"]
