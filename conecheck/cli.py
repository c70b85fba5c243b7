"""Command-line interface: subcommands, logging, exit codes.

Exit codes: 0 every statistic passes (or a non-validating command succeeded),
1 a statistic failed, 2 unusable input (bad config, file or value).  User errors
print one readable message and never a Python traceback.

Each subcommand lives in the module that owns its stage and exposes two functions,
``add_arguments(parser)`` and ``main(args) -> int``; this file only wires them.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import os
import sys
from collections.abc import Sequence

from .errors import ConecheckError, InputError
from .version import __version__

EXIT_PASS, EXIT_FAIL, EXIT_INPUT = 0, 1, 2

#: subcommand -> (module implementing it, one-line help)
SUBCOMMANDS: dict[str, tuple[str, str]] = {
    "init": ("conecheck.commands.init", "write a commented configuration template"),
    "check": ("conecheck.commands.check",
              "validate a configuration and the files it names; print resolved settings"),
    "run": ("conecheck.commands.run", "run a whole validation: box, cones, statistics, report"),
    "demo": ("conecheck.commands.demo",
             "run the built-in invented-survey demo end to end (writes reports/demo/)"),
    "report": ("conecheck.commands.report", "re-render the PDF report from a run directory"),
    "mask": ("conecheck.footprint.commands", "build, inspect and plot HEALPix footprint masks"),
    "mockbox": ("conecheck.box.commands",
                "make a galaxy box: populate halos with an HOD, or a synthetic box"),
    "cones": ("conecheck.commands.cones", "write light-cone mocks and randoms for a config"),
}

log = logging.getLogger("conecheck")


class _OncePerRun(logging.Filter):
    """Let each distinct warning reach the terminal once per command (run.log keeps all).

    The same remark can come from every stage, rung or sample that meets its cause.
    """

    def __init__(self) -> None:
        super().__init__()
        self._seen: set[tuple[int, str]] = set()

    def filter(self, record: logging.LogRecord) -> bool:
        if record.levelno < logging.WARNING:
            return True
        key = (record.levelno, record.getMessage())
        if key in self._seen:
            return False
        self._seen.add(key)
        return True


def _configure_logging(verbosity: int) -> None:
    level = {-1: logging.WARNING, 0: logging.INFO}.get(verbosity, logging.DEBUG)
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(levelname)s: %(message)s"))
    handler.addFilter(_OncePerRun())
    # The terminal's level belongs to the handler: a run lowers the logger's level to INFO
    # for its run.log, which must not make -q chatty.
    handler.setLevel(level)
    root = logging.getLogger("conecheck")
    root.handlers[:] = [handler]
    root.setLevel(level)
    root.propagate = False


def build_parser() -> argparse.ArgumentParser:
    """The top-level parser with every subcommand attached."""
    parser = argparse.ArgumentParser(
        prog="conecheck",
        description="Check that statistics measured in a periodic simulation box are unbiased "
                    "estimates of what survey-like light cones measure.",
        epilog="Exit codes: 0 all statistics pass, 1 a statistic fails, 2 unusable input.")
    parser.add_argument("--version", action="version", version=f"conecheck {__version__}")
    common = argparse.ArgumentParser(add_help=False)
    verb = common.add_mutually_exclusive_group()
    verb.add_argument("-v", "--verbose", action="store_const", const=1, dest="verbosity",
                      default=0, help="more log output (debug level)")
    verb.add_argument("-q", "--quiet", action="store_const", const=-1, dest="verbosity",
                      help="only warnings and errors; no progress display")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (module_name, help_text) in SUBCOMMANDS.items():
        module = importlib.import_module(module_name)
        p = sub.add_parser(name, help=help_text, description=(module.__doc__ or help_text),
                           parents=[common], formatter_class=argparse.RawDescriptionHelpFormatter)
        module.add_arguments(p)
        p.set_defaults(_handler=module.main)
    return parser


EXIT_INTERRUPTED = 130  # the shell's convention for a process stopped by SIGINT
EXIT_PIPE_CLOSED = 141  # ... and for one whose reader went away (128 + SIGPIPE)


def _quiet_stdout() -> None:
    """Point stdout at /dev/null so the interpreter's final flush cannot fail again."""
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, sys.stdout.fileno())


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``conecheck`` console script; returns the exit code."""
    try:
        return _main(argv)
    except KeyboardInterrupt:
        # The one place an interrupt ends: executors stop their queued tasks and re-raise
        # (a Ctrl-C caught inside a numba kernel included), whatever the stage.
        print("conecheck: interrupted; finished tasks are kept and a re-run resumes.",
              file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        # `conecheck mask info X | head`: the reader has what it wanted; end quietly, as
        # a shell tool killed by SIGPIPE does (Python's documented recipe for SIGPIPE)
        _quiet_stdout()
        return EXIT_PIPE_CLOSED


def _main(argv: Sequence[str] | None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_INPUT
    _configure_logging(args.verbosity)
    try:
        return int(args._handler(args))
    except InputError as exc:
        if len(exc.problems) > 1:
            print(f"conecheck {args.command}: {len(exc.problems)} problems:", file=sys.stderr)
            for p in exc.problems:
                print(f"  - {p}", file=sys.stderr)
        else:
            print(f"conecheck {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except ConecheckError as exc:
        print(f"conecheck {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except BrokenPipeError:
        raise  # not a problem of the input: handled in main
    except OSError as exc:
        # The environment, not a verdict: an unwritable directory, a full disk, a vanished
        # file. Exit code 2 with the path, never the code that means "a statistic fails".
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        print(f"conecheck {args.command}: error: {where}{exc.strerror or exc}; check the path, "
              f"its permissions and the free disk space", file=sys.stderr)
        return EXIT_INPUT


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
