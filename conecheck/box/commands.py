"""Make a galaxy box: populate a halo catalogue with an HOD, or build a synthetic one.

Examples::

    conecheck mockbox --halos halos.fits --hod hod.toml -o box.fits --seed 7
    conecheck mockbox --halos halos.h5 --column mass=M200m --box-size 1000 --redshift 0.25 \\
        --hod hod.toml -o box.fits
    conecheck mockbox --synthetic --box-size 400 --seed 7 -o box.fits [--grid 200]

Without --hod the built-in illustrative HOD is used (conecheck/data/hod_default.toml).
The output records how it was made (recipe, parameters, seed) in its header.
"""

from __future__ import annotations

import argparse
import json
import logging
import time

import numpy as np

from ..catalog import file_sha256, write_galaxy_box
from ..config import SYNTHETIC_BOX_SIZE, SYNTHETIC_REDSHIFT, BoxConfig, CosmologyConfig
from ..cosmology import Cosmology
from ..errors import InputError
from .halos import read_halo_catalog
from .hod import HODModel, default_hod_model, load_hod
from .populate import populate
from .synthetic import make_synthetic_box

log = logging.getLogger(__name__)



def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``conecheck mockbox``."""
    src = parser.add_mutually_exclusive_group(required=True)
    src.add_argument("--halos", metavar="FILE",
                     help="halo catalogue (FITS/HDF5/ECSV/Parquet/npz) with x y z [Mpc/h], "
                          "vx vy vz [km/s], mass [Msun/h]")
    src.add_argument("--synthetic", action="store_true",
                     help="build lognormal halos (no N-body input) and populate them")
    parser.add_argument("-o", "--output", required=True, metavar="BOX",
                        help="output galaxy box; format from the suffix (.fits, .h5, ...)")
    parser.add_argument("--hod", metavar="PARAMS.toml",
                        help="HOD parameters (TOML); default: the built-in illustrative model")
    parser.add_argument("--box-size", type=float, metavar="L",
                        help="box side in Mpc/h (halo file: default from its BOXSIZE header; "
                             f"synthetic: default {SYNTHETIC_BOX_SIZE:g}, as `run`)")
    parser.add_argument("--redshift", type=float, metavar="Z",
                        help="snapshot redshift (halo file: default from its REDSHIFT header; "
                             f"synthetic: default {SYNTHETIC_REDSHIFT:g}, as `run`)")
    parser.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    parser.add_argument("--column", action="append", default=[], metavar="NAME=COLUMN",
                        help="map a canonical halo column to the file's name (repeatable), "
                             "e.g. --column mass=M200m")
    syn = parser.add_argument_group("synthetic box")
    syn.add_argument("--grid", type=int, metavar="N",
                     help="FFT cells per side (even; default cells of about 2 Mpc/h, <= 256)")
    syn.add_argument("--m-min", type=float, metavar="M",
                     help="smallest halo mass in Msun/h (default: from the HOD)")
    # the defaults of a run's [box] and [cosmology], so both make the same synthetic box
    syn.add_argument("--sigma8", type=float, default=BoxConfig.sigma8,
                     help=f"sigma_8 (default {BoxConfig.sigma8:g})")
    syn.add_argument("--n-s", type=float, default=BoxConfig.n_s,
                     help=f"spectral index (default {BoxConfig.n_s:g})")
    syn.add_argument("--omega-b", type=float, default=BoxConfig.omega_b,
                     help=f"Omega_b (default {BoxConfig.omega_b:g})")
    parser.add_argument("--omega-m", type=float, default=CosmologyConfig.omega_m,
                        help=f"Omega_m (flat LCDM; default {CosmologyConfig.omega_m:g})")
    parser.add_argument("--hubble-h", type=float, default=CosmologyConfig.h,
                        help=f"h = H0/(100 km/s/Mpc), to convert halo columns given in Mpc or "
                             f"Msun (default {CosmologyConfig.h:g})")


def _column_map(items: list[str]) -> dict[str, str]:
    out = {}
    for item in items:
        name, sep, col = item.partition("=")
        if not sep or not name or not col:
            raise InputError(f"--column {item!r}: expected NAME=COLUMN, e.g. mass=M200m")
        out[name.strip()] = col.strip()
    return out


def _summary(box_len: int, mags: np.ndarray, abs_mag: np.ndarray, volume: float) -> str:
    lines = [f"{box_len} galaxies in {volume:.4g} (Mpc/h)^3"]
    for m in mags:
        n = int(np.sum(abs_mag < m))
        lines.append(f"  M - 5 log h < {m:+.2f}: {n:9d} galaxies, n = {n / volume:.4e} (h/Mpc)^3")
    return "\n".join(lines)


def main(args: argparse.Namespace) -> int:
    """Run ``conecheck mockbox``; returns 0 (InputError on unusable input)."""
    t0 = time.perf_counter()
    if not (0.05 < args.omega_m < 1.0):
        raise InputError(f"--omega-m {args.omega_m}: expected 0.05 < Omega_m < 1")
    cosmology = Cosmology(omega_m=args.omega_m, h=args.hubble_h)
    model: HODModel = load_hod(args.hod) if args.hod else default_hod_model()
    rng = np.random.default_rng(args.seed)
    meta: dict[str, object] = {"SEED": int(args.seed),
                               "HODPARS": json.dumps(model.to_dict(), sort_keys=True)}
    if args.hod:
        meta["HODFILE"] = str(args.hod)
    if args.synthetic:
        if args.column:
            raise InputError("--column applies to --halos files only")
        z = SYNTHETIC_REDSHIFT if args.redshift is None else args.redshift
        size = SYNTHETIC_BOX_SIZE if args.box_size is None else args.box_size
        box = make_synthetic_box(size, z, cosmology, args.sigma8, args.n_s,
                                 args.omega_b, model, rng, grid=args.grid, m_min=args.m_min)
    else:
        for opt in ("grid", "m_min"):
            if getattr(args, opt) is not None:
                raise InputError(f"--{opt.replace('_', '-')} applies to --synthetic only")
        halos = read_halo_catalog(args.halos, _column_map(args.column) or None,
                                  args.box_size, args.redshift, hubble_h=args.hubble_h)
        box = populate(halos, model, rng, cosmology)
        meta.update({"BOXMADE": "halo catalogue + HOD (conecheck)",
                     "HALOSHA": file_sha256(args.halos), "NHALO": len(halos)})
    box.meta.update(meta)
    write_galaxy_box(box, args.output)
    print(_summary(len(box), model.mag_limits, box.abs_mag, box.box_size**3))
    print(f"wrote {args.output} ({time.perf_counter() - t0:.1f} s, seed {args.seed})")
    return 0
