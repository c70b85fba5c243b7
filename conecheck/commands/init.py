"""`conecheck init [PATH]`: write a commented configuration template.

The template runs unchanged with `conecheck run PATH`: it points at the built-in synthetic
box and the invented "Kestrel" demo footprint shipped with the package. Edit it to point at
your box, mask and samples.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from ..atomic import write_text_atomic
from ..demo import template_text
from ..errors import InputError


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("path", nargs="?", default="conecheck.toml",
                        help="where to write the template (default: conecheck.toml)")
    parser.add_argument("--force", action="store_true", help="overwrite an existing file")


def main(args: argparse.Namespace) -> int:
    path = Path(args.path)
    if path.is_dir():
        raise InputError(f"{path}: is a directory; give a file name such as {path}/run.toml")
    if path.exists() and not args.force:
        raise InputError(f"{path}: already exists; use --force to overwrite it")
    if not path.parent.exists():
        raise InputError(f"{path}: directory {path.parent} does not exist")
    write_text_atomic(path, template_text())
    print(f"wrote {path}\nnext: conecheck check {path}   then   conecheck run {path}")
    return 0
