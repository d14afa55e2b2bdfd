"""Command-line interface: ``fringecount SUBCOMMAND ...``.

Each subcommand lives in its own module in this package and exposes
``register(subparsers)``, which adds its parser and sets ``func`` to a function
``run(args) -> int``. Known errors end in one line on stderr and a non-zero exit.

Examples
--------
::

    fringecount count sample_clips/gap_scan.avi
    fringecount count clip.avi --out results/run1 --json
    fringecount derive plate-rotation --fringes 16.14+/-0.05 --thickness 1mm --wavelength 632.8nm --angle 10deg
"""

from __future__ import annotations

import argparse
import importlib
import logging
import sys

from .. import __version__
from ..errors import FringecountError

__all__ = ["main", "build_parser"]

#: Subcommand modules, in the order ``--help`` lists them.
COMMAND_MODULES = ("count", "roi", "report", "derive", "air", "batch")

logger = logging.getLogger("fringecount")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="fringecount",
        description="Count interferometer fringes in a recording and derive physical results.",
    )
    parser.add_argument("--version", action="version", version=f"fringecount {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(f"{__name__}.{name}")
        except ModuleNotFoundError as exc:  # a command not yet built in this checkout
            if exc.name != f"{__name__}.{name}":
                raise
            continue
        module.register(sub)
    return parser


def _configure_logging(args: argparse.Namespace) -> None:
    level = logging.WARNING
    if getattr(args, "verbose", False):
        level = logging.DEBUG
    elif getattr(args, "quiet", False):
        level = logging.ERROR
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("fringecount: %(levelname)s: %(message)s"))
    root = logging.getLogger("fringecount")
    root.handlers[:] = [handler]
    root.setLevel(level)
    root.propagate = False


def main(argv: list[str] | None = None) -> int:
    """Run the CLI with ``argv`` (default: ``sys.argv[1:]``) and return the exit status."""
    parser = build_parser()
    args = parser.parse_args(sys.argv[1:] if argv is None else argv)
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return 2
    _configure_logging(args)
    try:
        return int(args.func(args) or 0)
    except FringecountError as exc:
        print(f"fringecount: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("fringecount: interrupted; nothing was written for unfinished results", file=sys.stderr)
        return 130
    except MemoryError:
        print("fringecount: error: out of memory; analyse a frame range (--frames) or a smaller crop",
              file=sys.stderr)
        return 1
    except Exception as exc:  # last resort: one line, the traceback only with --verbose
        if getattr(args, "verbose", False):
            raise
        print(f"fringecount: internal error: {type(exc).__name__}: {exc} "
              "(rerun with --verbose for the traceback and report it)", file=sys.stderr)
        return 1


def add_output_arguments(parser: argparse.ArgumentParser) -> None:
    """Options every subcommand shares: ``--json``, ``--quiet``, ``--verbose``."""
    parser.add_argument("--json", action="store_true",
                        help="print only the result as JSON on stdout")
    parser.add_argument("-q", "--quiet", action="store_true",
                        help="no progress bar and no log lines below errors")
    parser.add_argument("-v", "--verbose", action="store_true",
                        help="debug log lines on stderr (and tracebacks for internal errors)")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
