"""Rebuild the invented Kestrel Redshift Survey maps and copy them to package data.

Run from the repository root::

    python -m conecheck.footprint.demo_build

The mask is what ``conecheck mask build masks/kestrel_regions.toml -o
masks/kestrel_mask.fits --nside 128`` writes; the tile-overlap map comes from an
invented hexagonal tiling (:func:`demo_tiles`).
"""

from __future__ import annotations

import argparse
import logging
import shutil
from pathlib import Path

import numpy as np

from .demo import MASK_FILE, NSIDE, OVERLAP_FILE, REGIONS_FILE
from .maps import Footprint
from .overlap import hex_tile_centres, tile_overlap_map
from .regions import build_mask

#: Invented fibre-tile field radius and hexagonal tile spacing [deg].
TILE_RADIUS_DEG = 1.1
TILE_SPACING_DEG = 1.8
#: A tile is placed when at least this fraction of its field is in the footprint.
TILE_MIN_FRACTION = 0.2


def demo_tiles(footprint: Footprint) -> tuple[np.ndarray, np.ndarray]:
    """The invented KRS tiling: a hexagonal pattern kept where it covers the footprint."""
    ra, dec = hex_tile_centres(0.0, 360.0, -62.0, -18.0, TILE_SPACING_DEG)
    keep = footprint.disc_fraction(ra, dec, TILE_RADIUS_DEG, samples_per_radius=6) \
        >= TILE_MIN_FRACTION
    return ra[keep], dec[keep]


def build_demo(masks_dir: str | Path = "masks", data_dir: str | Path | None = None
               ) -> dict[str, float]:
    """Build the KRS mask and overlap map in ``masks_dir`` and copy them to package data."""
    masks_dir = Path(masks_dir)
    data_dir = Path(data_dir) if data_dir else Path(__file__).resolve().parent.parent / "data"
    fp = build_mask(masks_dir / REGIONS_FILE, NSIDE)
    fp.write_fits(masks_dir / MASK_FILE, dtype="float32")
    tra, tdec = demo_tiles(fp)
    overlap = tile_overlap_map(tra, tdec, TILE_RADIUS_DEG, NSIDE, oversample=2, within=fp)
    overlap.write_fits(masks_dir / OVERLAP_FILE, dtype="float32")
    data_dir.mkdir(parents=True, exist_ok=True)
    for name in (MASK_FILE, REGIONS_FILE, OVERLAP_FILE):
        shutil.copyfile(masks_dir / name, data_dir / name)
    stats = {"area_deg2": fp.area_deg2, "tiles": float(tra.size),
             "overlap_fraction_of_area": float((overlap.values * (fp.values > 0)).sum()
                                               / np.count_nonzero(fp.values))}
    return stats


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Rebuild the invented KRS demo footprint.")
    parser.add_argument("--masks-dir", default="masks", help="folder with the region TOML")
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.INFO, format="%(levelname)s: %(message)s")
    stats = build_demo(args.masks_dir)
    for key, val in stats.items():
        print(f"{key:28s} {val:.4g}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
