"""`conecheck report RUN_DIR`: re-render validation.pdf (and with --html validation.html).

Nothing is recomputed: the report is drawn from results.json (and the footprint and region
files it names), so it can be re-made after an upgrade of the report or on another machine.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from ..errors import InputError
from ..report import render_html, rerender, summary_table


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run_dir", help="run directory holding results.json")
    parser.add_argument("-o", "--output", help="PDF to write (default RUN_DIR/validation.pdf)")
    parser.add_argument("--html", action="store_true",
                        help="also write RUN_DIR/validation.html, the report as one "
                             "self-contained web page")


def main(args: argparse.Namespace) -> int:
    run_dir = Path(args.run_dir)
    if not run_dir.is_dir():
        raise InputError(f"{run_dir}: not a run directory (expected a directory holding "
                         f"results.json)")
    if not (run_dir / "results.json").is_file():
        raise InputError(f"{run_dir}: no results.json here; run `conecheck run CONFIG` first")
    svgs: dict[int, str] | None = {} if args.html else None  # each figure drawn once
    results, n = rerender(run_dir, args.output, svgs=svgs)
    print(summary_table(results))
    print(f"\nwrote {args.output or run_dir / 'validation.pdf'} ({n} pages)")
    if args.html:
        n_fig = render_html(results, run_dir, run_dir / "validation.html", svgs=svgs)
        print(f"wrote {run_dir / 'validation.html'} ({n_fig} figures)")
    return 0
