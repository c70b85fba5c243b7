"""Footprint stage: HEALPix completeness maps, region-built masks, jackknife sky regions.

Public API:

* :class:`Footprint` — a completeness map (areas, lookups, random positions, disc
  fractions, FITS input/output);
* :func:`build_mask` — a mask from a TOML list of sky regions;
* :func:`mask_from_randoms` — a mask estimated from random points;
* :func:`jackknife_regions` / :class:`SkyRegions` — K sky regions of equal area;
* :func:`tile_overlap_map` — fraction of each pixel covered by ≥ 2 fibre tiles;
* :func:`demo_mask_path` & co. — the invented demo survey shipped as package data.
"""

from .demo import demo_mask_path, demo_overlap_path, demo_regions_path
from .from_randoms import mask_from_randoms
from .jackknife import SkyRegions, jackknife_regions
from .maps import Footprint
from .overlap import hex_tile_centres, tile_overlap_map
from .regions import build_mask, load_regions
from .summary import summarize

__all__ = [
    "Footprint", "SkyRegions", "build_mask", "demo_mask_path", "demo_overlap_path",
    "demo_regions_path", "hex_tile_centres", "jackknife_regions", "load_regions",
    "mask_from_randoms", "summarize", "tile_overlap_map",
]
