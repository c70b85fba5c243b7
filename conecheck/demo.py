"""The invented scenario `conecheck demo` runs.

The fictional "Kestrel" survey: its made-up southern footprint (1953 deg², with holes and
patches of lower completeness, shipped in ``conecheck/data`` and ``masks/``), a shell
0.015 < z < 0.085 with a flux limit m < 16.9, 35 km/s redshift errors, 40″ fibre collisions
with tile overlaps, and two luminosity-threshold samples, "broad" (M < −20, cut at its volume
limit z = 0.075) and "luminous" (M < −21), the latter with an alternative "near" cut. The box
is the built-in synthetic lognormal halo box populated with the shipped illustrative HOD.
Every number here is invented for the demo.

The full demo is the configuration template of ``conecheck init`` unchanged; ``quick``
shrinks the box, the shell, the binning and the number of cones so the whole pipeline
runs in about a minute (for the tests).
"""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

from .config import RunConfig, config_from_dict
from .loader import parse_toml

DEMO_OUTPUT = Path("reports") / "demo"

#: What --quick changes in the template (section → key → value).
QUICK_CHANGES: dict[str, dict[str, Any]] = {
    "box": {"box_size": 160.0},
    "survey.shell": {"z_max": 0.055},
    "statistics.wp": {"rp_min": 0.5, "rp_max": 10.0, "n_rp": 5, "pi_max": 20.0},
    "statistics.cic": {"count_edges": [0, 1, 2, 4, 7, 12, 30]},
    "statistics.vpf": {"radii": [3.0, 5.0, 7.0], "n_spheres": 4000},
    "statistics.annuli": {"count_edges": [0, 1, 2, 4, 8, 20]},
    "statistics.multipoles": {"s_min": 2.0, "s_max": 20.0, "n_s": 3, "n_mu": 10},
    "statistics.delta_sigma": {"rp_min": 0.3, "rp_max": 5.0, "n_rp": 4, "pi_max": 20.0},
    "jackknife": {"sky_regions": 10, "box_n_side": 3},
    "cones": {"n_cones": 2},
    # the HOD derivatives re-measure the box a dozen times; the full demo shows them
    "parameter_shifts": {"enabled": False},
    "randoms": {"multiple": 5.0},
}


#: The commented configuration template `conecheck init` writes; it runs this demo.
TEMPLATE_PATH = Path(__file__).resolve().parent / "data" / "template.toml"


def template_text() -> str:
    """The commented configuration template (the demo's configuration)."""
    return TEMPLATE_PATH.read_text(encoding="utf-8")


def demo_dict(quick: bool = False) -> dict[str, Any]:
    """The demo configuration as a TOML-like dictionary."""
    data = parse_toml(template_text())
    if quick:
        data = copy.deepcopy(data)
        for section, changes in QUICK_CHANGES.items():
            node = data
            for part in section.split("."):
                node = node.setdefault(part, {})
            node.update(changes)
        zmax = QUICK_CHANGES["survey.shell"]["z_max"]
        for s in data["samples"]:
            s["z_max"] = min(s["z_max"], zmax)
            for alt in s.get("alt_cuts", []):
                alt["z_max"] = min(alt["z_max"], zmax - 0.01)
    data["output"]["directory"] = str(DEMO_OUTPUT)
    return data


def demo_config(quick: bool = False, base_dir: str | Path = ".") -> RunConfig:
    """The demo run configuration (paths relative to ``base_dir``)."""
    return config_from_dict(demo_dict(quick), "demo" + (" --quick" if quick else ""),
                            base_dir)
