"""Build, inspect and plot HEALPix footprint masks.

  conecheck mask build REGIONS.toml -o MASK.fits [--nside N]
  conecheck mask from-randoms CATALOGUE -o MASK.fits --nside N [--ra-column RA --dec-column DEC]
  conecheck mask info MASK.fits [--veto VETO.fits ...]
  conecheck mask plot MASK.fits -o PICTURE.png [--regions K] [--projection zoom]

Masks are HEALPix maps of completeness in [0, 1] (RING or NESTED, as the FITS header
says).  The region-file schema is in masks/README.md.
"""

from __future__ import annotations

import argparse
import json
import logging

from ..catalog import read_table, require_columns
from ..errors import InputError
from .from_randoms import mask_from_randoms
from .jackknife import jackknife_regions
from .maps import Footprint
from .plot import save_footprint_plot
from .regions import DEFAULT_OVERSAMPLE, build_mask
from .summary import format_summary, summarize

log = logging.getLogger(__name__)


def _nside(text: str) -> int:
    try:
        val = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"N_side must be an integer; got {text!r}") from None
    if val < 1 or val & (val - 1):
        raise argparse.ArgumentTypeError(f"N_side must be a power of 2; got {val}")
    return val


def _add_output(p: argparse.ArgumentParser) -> None:
    p.add_argument("-o", "--output", required=True, help="output HEALPix FITS file")
    p.add_argument("--nest", action="store_true", help="write NESTED ordering (default RING)")
    p.add_argument("--dtype", choices=("float32", "float64"), default="float32",
                   help="value type on disk (default float32)")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Attach the ``mask`` sub-subcommands to ``parser``."""
    sub = parser.add_subparsers(dest="mask_command", metavar="ACTION")

    p = sub.add_parser("build", help="build a mask from a TOML list of sky regions")
    p.add_argument("regions", help="region description (TOML; schema in masks/README.md)")
    p.add_argument("--nside", type=_nside, default=None,
                   help="HEALPix N_side (power of 2; default: [mask] nside of the file)")
    p.add_argument("--oversample", type=int, default=DEFAULT_OVERSAMPLE,
                   help="edge pixels are averaged over 4^K sub-pixels (default "
                        f"{DEFAULT_OVERSAMPLE})")
    _add_output(p)

    p = sub.add_parser("from-randoms", help="estimate a mask from a catalogue of randoms")
    p.add_argument("catalogue", help="random catalogue (FITS, HDF5, ECSV, Parquet, npz)")
    p.add_argument("--nside", type=_nside, required=True, help="HEALPix N_side (power of 2)")
    p.add_argument("--ra-column", default="ra", help="RA column in degrees (default ra)")
    p.add_argument("--dec-column", default="dec", help="Dec column in degrees (default dec)")
    _add_output(p)

    p = sub.add_parser("info", help="print N_side, area, completeness histogram, pieces")
    p.add_argument("mask", help="HEALPix FITS mask")
    p.add_argument("--veto", action="append", default=[], metavar="VETO",
                   help="veto map multiplied into the mask (repeatable)")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")

    p = sub.add_parser("plot", help="draw a mask, optionally with jackknife regions")
    p.add_argument("mask", help="HEALPix FITS mask")
    p.add_argument("-o", "--output", required=True, help="image file (PNG, PDF, SVG)")
    p.add_argument("--veto", action="append", default=[], metavar="VETO",
                   help="veto map multiplied into the mask (repeatable)")
    p.add_argument("--regions", type=int, default=None, metavar="K",
                   help="also draw K jackknife regions")
    p.add_argument("--seed", type=int, default=0, help="seed of the jackknife regions")
    p.add_argument("--save-regions", default=None, metavar="NPZ",
                   help="write the jackknife regions to this .npz file")
    p.add_argument("--projection", choices=("auto", "mollweide", "zoom"), default="auto",
                   help="sky projection (auto: zoom on small footprints)")


def _cmd_build(args: argparse.Namespace) -> int:
    fp = build_mask(args.regions, args.nside, oversample=args.oversample, nest=args.nest)
    fp.write_fits(args.output, dtype=args.dtype)
    log.info("wrote %s: N_side %d, %.2f deg2 effective", args.output, fp.nside, fp.area_deg2)
    return 0


def _cmd_from_randoms(args: argparse.Namespace) -> int:
    table = read_table(args.catalogue)
    require_columns(table, [args.ra_column, args.dec_column], args.catalogue,
                    hint="name them with --ra-column and --dec-column")
    fp = mask_from_randoms(table[args.ra_column], table[args.dec_column], args.nside,
                           nest=args.nest, source=str(args.catalogue))
    fp.write_fits(args.output, dtype=args.dtype)
    log.info("wrote %s: N_side %d, %.2f deg2 effective", args.output, fp.nside, fp.area_deg2)
    return 0


def _cmd_info(args: argparse.Namespace) -> int:
    info = summarize(Footprint.from_fits(args.mask, vetoes=args.veto))
    print(json.dumps(info, indent=2) if args.json else format_summary(info))
    return 0


def _cmd_plot(args: argparse.Namespace) -> int:
    fp = Footprint.from_fits(args.mask, vetoes=args.veto)
    regions = None
    if args.regions is not None:
        regions = jackknife_regions(fp, args.regions, seed=args.seed)
        log.info("%d jackknife regions: %.2f–%.2f deg2 (max/min %.3f)", regions.k,
                 regions.min_area_deg2, regions.max_area_deg2, regions.area_spread)
        if args.save_regions:
            regions.save(args.save_regions)
    elif args.save_regions:
        raise InputError("--save-regions needs --regions K")
    save_footprint_plot(fp, args.output, regions, projection=args.projection)
    log.info("wrote %s", args.output)
    return 0


ACTIONS = {"build": _cmd_build, "from-randoms": _cmd_from_randoms, "info": _cmd_info,
           "plot": _cmd_plot}


def main(args: argparse.Namespace) -> int:
    """Run ``conecheck mask ACTION``; returns the exit code."""
    action = getattr(args, "mask_command", None)
    if action not in ACTIONS:
        raise InputError("conecheck mask: give an action: " + ", ".join(ACTIONS))
    return ACTIONS[action](args)
