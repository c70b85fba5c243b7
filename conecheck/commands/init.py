"""`conecheck init`: not built yet.

The configuration schema and the end-to-end pipeline are still being built; until
then this command says so plainly and exits with code 2.
"""

from __future__ import annotations

import argparse
import sys


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Accept any arguments so the message below is what the user sees."""
    parser.add_argument("rest", nargs=argparse.REMAINDER, help=argparse.SUPPRESS)


def main(args: argparse.Namespace) -> int:
    """Explain that this command is not available yet; exit code 2."""
    print("conecheck init: not available yet in this version. It will run the whole "
          "validation (box, light cones, statistics, jackknife, comparison, PDF report). "
          "Available now: 'conecheck mask', 'conecheck mockbox'.", file=sys.stderr)
    return 2
