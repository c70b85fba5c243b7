"""`conecheck check CONFIG`: validate a configuration and the files it names.

Nothing is computed: the configuration is parsed and validated (every problem is listed with
its key path), every input file is checked to exist and is opened (mask, vetoes and overlap
map read, the box file's columns and content checked), the checks `run` makes before
computing are made (observers, replicas, each sample's threshold against the box — counted
in a file box, expected from the HOD otherwise —, the memory of the largest task, the number
of cones and the pair-counting work, refused above their limits unless --force), and the
resolved settings — every default filled in — are
printed as TOML, followed by the registered statistics (built in and from installed plug-ins,
with any plug-in that failed to load).
"""

from __future__ import annotations

import argparse
import sys

from ..box import read_halo_catalog
from ..catalog import read_table
from ..cone import volume_limit_zmax
from ..config import SYNTHETIC_BOX_SIZE, config_warnings, load_config, resolved_toml
from ..run.inputs import (
    cosmology_of,
    header_disagreements,
    hod_model_of,
    input_files,
    load_box,
    load_footprint,
)
from ..run.preflight import box_size_of, preflight, raise_problems
from ..stats.registry import LOAD_PROBLEMS, ORIGINS, STATISTICS


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("config", help="run configuration (TOML)")
    parser.add_argument("--force", action="store_true",
                        help="report resource limits (cones, memory) as notes, not problems")


def main(args: argparse.Namespace) -> int:
    cfg = load_config(args.config)
    files = input_files(cfg)
    fp = load_footprint(cfg)
    box_note = "synthetic (built at run time)"
    box = halos = model = None
    if cfg.box.source in ("halos", "synthetic"):
        model = hod_model_of(cfg)  # read and validated as the run will
    header_notes: list[str] = []
    if cfg.box.source in ("file", "halos"):
        table = read_table(files["box.path"], cfg.box.hdf5_path)
        header_notes = header_disagreements(cfg, dict(table.meta))
        if cfg.box.source == "file":
            # every check the run makes: dtypes, NaN/inf, positions inside [0, L), units
            box = load_box(cfg)
            box_note = f"{len(box)} galaxies, L = {box.box_size:g} Mpc/h, z = {box.redshift:g}"
        else:
            halos = read_halo_catalog(files["box.path"], cfg.box.columns or None,
                                      cfg.box.box_size, cfg.box.redshift,
                                      hdf5_path=cfg.box.hdf5_path,
                                      hubble_h=cfg.cosmology.h)
            box_note = f"{len(halos)} halos (populated with the HOD at run time)"
    checked = preflight(cfg, fp, box, box_size_of(cfg, SYNTHETIC_BOX_SIZE), force=args.force,
                        model=model, halos=halos)
    raise_problems(checked)
    print(resolved_toml(cfg))
    out = sys.stderr
    for note in checked.notes:
        print(f"# {note}", file=out)
    for caution in checked.cautions:
        print(f"# caution: {caution}", file=out)
    print(f"# box: {box_note}", file=out)
    print(f"# footprint: {fp.area_deg2:.1f} deg² effective area (N_side {fp.nside})", file=out)
    for key, path in files.items():
        print(f"# {key}: {path}", file=out)
    if cfg.shell.m_lim is not None and cfg.effects.flux_limit:
        cosmo = cosmology_of(cfg)
        for s in cfg.samples:
            if s.mag_max is None:
                continue
            zlim = volume_limit_zmax(cfg.shell.m_lim, s.mag_max, cosmo, cfg.shell)
            for cut in s.cuts:
                flag = "" if cut.z_max <= zlim + 1e-12 else "  NOT volume limited"
                print(f"# sample {s.name} cut {cut.label}: z {cut.z_min}–{cut.z_max}, "
                      f"volume limit z = {zlim:.4f}{flag}", file=out)
    by_origin: dict[str, list[str]] = {}
    for name in STATISTICS:
        by_origin.setdefault(ORIGINS.get(name, "?"), []).append(name)
    print("# statistics registered: " + "; ".join(f"{', '.join(names)} ({origin})"
                                                  for origin, names in by_origin.items()),
          file=out)
    for problem in LOAD_PROBLEMS:
        print(f"# warning: statistic plug-in not loaded: {problem}", file=out)
    for w in (*config_warnings(cfg), *header_notes):
        print(f"# warning: {w}", file=out)
    print(f"# {args.config}: configuration OK", file=out)
    return 0
