"""`conecheck cones`: not built yet (it needs the run configuration).

The light-cone builder is available from Python (``conecheck.cone.build_all_cones``);
the command that drives it from a configuration file comes with the config schema.
"""

from __future__ import annotations

import argparse
import sys


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Accept any arguments so the message below is what the user sees."""
    parser.add_argument("rest", nargs=argparse.REMAINDER, help=argparse.SUPPRESS)


def main(args: argparse.Namespace) -> int:
    """Explain that this command is not available yet; exit code 2."""
    print("conecheck cones: not available yet in this version; use "
          "conecheck.cone.build_all_cones from Python.", file=sys.stderr)
    return 2
