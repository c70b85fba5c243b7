"""The invented Kestrel Redshift Survey footprint shipped for the demo.

The Kestrel Redshift Survey (KRS) does not exist: it is a made-up southern-sky
fibre survey whose footprint (``masks/kestrel_regions.toml``) exercises every
region shape.  The built maps ship as package data, so the demo finds them with
:func:`demo_mask_path` whatever the installation.

Rebuild everything (from the repository root)::

    python -m conecheck.footprint.demo_build

which runs the equivalent of ``conecheck mask build masks/kestrel_regions.toml -o
masks/kestrel_mask.fits --nside 128``, makes the tile-overlap map and copies the
files into ``conecheck/data/``.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

SURVEY_NAME = "Kestrel Redshift Survey"
MASK_FILE = "kestrel_mask.fits"
REGIONS_FILE = "kestrel_regions.toml"
OVERLAP_FILE = "kestrel_overlap.fits"
NSIDE = 128


def _data_file(name: str) -> Path:
    return Path(str(resources.files("conecheck").joinpath("data", name)))


def demo_mask_path() -> Path:
    """Path of the packaged KRS completeness map (HEALPix FITS, N_side 128)."""
    return _data_file(MASK_FILE)


def demo_regions_path() -> Path:
    """Path of the packaged KRS region description (TOML)."""
    return _data_file(REGIONS_FILE)


def demo_overlap_path() -> Path:
    """Path of the packaged KRS tile-overlap map (fraction of a pixel in ≥ 2 tiles)."""
    return _data_file(OVERLAP_FILE)
