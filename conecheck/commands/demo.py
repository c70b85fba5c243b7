"""`conecheck demo`: the whole validation on an invented survey, end to end.

Runs the built-in synthetic box through the fictional "Kestrel" survey (made-up footprint,
flux limit, redshift errors, fibre collisions), two luminosity-threshold samples and an
alternative redshift cut, and writes validation.pdf, results.json, the tables and a log to
reports/demo/ (a few minutes on two cores; --quick: a reduced version in about a
minute). The configuration it runs is the `conecheck init` template.

Exit code 0 when the demo ran (its verdicts are in the report; `conecheck run` is the
command whose exit code follows the verdict), 2 on unusable input.
"""

from __future__ import annotations

import argparse

from ..attribution.stages import extensions, with_attribution
from ..demo import demo_config
from ..report.attribution_summary import finish_attribution
from ..run.validate import EXIT_INCOMPLETE, output_dir, print_summary, validate


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("-o", "--out", help="run directory (default: reports/demo)")
    parser.add_argument("--quick", action="store_true",
                        help="a reduced demo (small box, thin shell, 2 cones) for a quick look")
    parser.add_argument("--fresh", action="store_true", help="ignore cached task results")
    parser.add_argument("--ladder", action="store_true",
                        help="also run the effect ladder, the fibre-collision correction "
                             "comparison and the redshift-cut sweep. Runs at the --quick "
                             "scale, so it finishes in about a minute (the full scale costs "
                             "about three full demos)")


def main(args: argparse.Namespace) -> int:
    cfg = demo_config(args.quick or args.ladder)
    if args.ladder:
        cfg = with_attribution(cfg)
    results, code = validate(cfg, args.out, fresh=args.fresh,
                             progress=None if args.verbosity >= 0 else False,
                             extensions=extensions(cfg))
    print_summary(results, output_dir(cfg, args.out))
    finish_attribution(results, output_dir(cfg, args.out))
    if code == EXIT_INCOMPLETE:
        return code
    print(f"(demo: `conecheck run` would exit with code {code} for this verdict)")
    return 0
