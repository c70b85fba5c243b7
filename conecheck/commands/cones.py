"""`conecheck cones CONFIG -o DIR`: write the light-cone mocks and randoms of a config.

Every cone (RA, Dec, z_obs, χ_obs, weight, redshift flag, magnitude, jackknife region, …) and
one random catalogue per sample and cut are written as FITS, with ``manifest.json`` recording
what was applied (effects, fibre statistics, replicas, seeds), so the mocks can be measured with
any other estimator. Cone i is the same cone `conecheck run` measures for the same config.
"""

from __future__ import annotations

import argparse
import dataclasses
import logging
from pathlib import Path

from ..cone import write_cones_directory
from ..cone.build import prepare_box
from ..config import load_config
from ..errors import InputError
from ..run.cache import content_digest
from ..run.inputs import (
    cosmology_of,
    load_box,
    load_footprint,
    overlap_input,
    sky_regions,
    tiles_input,
)
from ..run.specs import cone_build_spec, randoms_spec
from ..run.tasks import (
    cone_table,
    cut_randoms,
    cut_randoms_multiple,
    expected_count,
    sample_density,
    shuffle_distances,
    smallest_random_cell,
    survey_model,
)
from ..version import __version__

log = logging.getLogger(__name__)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("config", help="run configuration (TOML)")
    parser.add_argument("-o", "--out", required=True, help="directory to write the cones to")
    parser.add_argument("--cones", type=int, help="write only the first N cones")


def main(args: argparse.Namespace) -> int:
    cfg = load_config(args.config)
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise InputError(f"--out {out}: exists and is a file, not a directory")
    box = load_box(cfg)
    footprint = load_footprint(cfg)
    regions = sky_regions(cfg, footprint)
    n = cfg.cones.n_cones if args.cones is None else max(1, min(args.cones, cfg.cones.n_cones))
    cells = prepare_box(box)
    # the specs `conecheck run` gives its tasks, so cone i and the randoms are the same
    box_content, fp_content = content_digest(box), content_digest(footprint)
    overlap, tiles = overlap_input(cfg), tiles_input(cfg)
    builds = [cone_build_spec(cfg, i, box_content, fp_content, overlap, tiles_file=tiles)
              for i in range(n)]
    cones = []
    for i in range(n):
        table, info = cone_table(builds[i], box, footprint, cells=cells)
        info = {k: v for k, v in info.items() if k != "targets"}
        info["cone_index"] = i
        cones.append((table, info))
        log.info("cone %d/%d: %d galaxies", i + 1, n, len(table))
    randoms = {}
    multiples = {}
    shuffle = cfg.randoms.radial == "shuffle"
    cosmo = cosmology_of(cfg)
    reg_content = content_digest(regions)
    for s in cfg.samples:
        density = sample_density(box, s)
        for cut in s.cuts:
            # the same catalogue `conecheck run` builds for this sample and cut
            data_chi = (shuffle_distances(cones[0][0], cut, survey_model(builds[0], footprint),
                                          s.name) if shuffle else None)
            spec = randoms_spec(cfg, s.name, cut, expected_count(cosmo, footprint, cut, density),
                                fp_content, reg_content, data_chi)
            randoms[f"{s.name}__{cut.label}"] = cut_randoms(spec, footprint)
            multiples[f"{s.name}__{cut.label}"] = cut_randoms_multiple(
                spec.randoms, smallest_random_cell(spec.statistics), spec.n_expected,
                footprint, cosmo, cut)
    manifest = {"config": str(Path(args.config).resolve()), "seed": cfg.seed,
                "config_hash": cfg.config_hash, "version": __version__,
                "cosmology": dataclasses.asdict(cfg.cosmology),
                "effects": dataclasses.asdict(cfg.effects),
                "correction": cfg.correction.name,
                "samples": {s.name: [dataclasses.asdict(c) for c in s.cuts]
                            for s in cfg.samples},
                "randoms_radial": cfg.randoms.radial,
                "randoms_multiple": multiples,
                "note": "randoms_multiple: randoms per box-expected galaxy of each sample and "
                        f"cut (randoms.multiple = {cfg.randoms.multiple!r})"}
    path = write_cones_directory(out, cones, randoms, manifest, regions)
    print(f"wrote {n} cones and {len(randoms)} random catalogues; manifest {path}")
    return 0
