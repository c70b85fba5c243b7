"""`conecheck run CONFIG`: the whole validation.

Builds (or reads) the box, builds every light cone with the survey's effects, makes the
randoms and their pair counts once per sample and cut, measures every statistic on box and
cones with jackknife errors, compares them, and writes results.json, one table per sample ×
cut × statistic, validation.pdf, the resolved config and a log into the run directory.
Finished tasks are cached there, so an interrupted run resumes where it stopped.

Exit code 0: every statistic passes (or only warns); 1: a statistic fails; 2: unusable input.
"""

from __future__ import annotations

import argparse

from ..attribution.stages import extensions, with_attribution
from ..config import load_config
from ..report.attribution_summary import finish_attribution
from ..run.validate import output_dir, print_summary, validate


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("config", help="run configuration (TOML)")
    parser.add_argument("-o", "--out", help="run directory (default: output.directory)")
    parser.add_argument("--fresh", action="store_true",
                        help="ignore cached task results and recompute everything")
    parser.add_argument("--scheduler",
                        help="'local', 'local-cluster' or a dask scheduler address "
                             "tcp://HOST:PORT (overrides compute.scheduler)")
    parser.add_argument("--workers", type=int, help="workers of a local-cluster")
    parser.add_argument("--ladder", action="store_true",
                        help="also attribute the offsets: the effect ladder, the fibre-"
                             "collision correction comparison and the redshift-cut sweep "
                             "(the [ladder], [corrections] and [cut_sweep] sections, with "
                             "their defaults when absent)")
    parser.add_argument("--force", action="store_true",
                        help="run even when the pre-flight estimate exceeds a limit (more than "
                             "10000 cones, a task needing over half the machine's memory)")


def main(args: argparse.Namespace) -> int:
    cfg = load_config(args.config)
    if args.ladder:
        cfg = with_attribution(cfg)
    results, code = validate(cfg, args.out, fresh=args.fresh, scheduler=args.scheduler,
                             workers=args.workers,
                             progress=None if args.verbosity >= 0 else False,
                             config_path=args.config,
                             extensions=extensions(cfg), force=args.force)
    print_summary(results, output_dir(cfg, args.out))
    finish_attribution(results, output_dir(cfg, args.out))
    return code
