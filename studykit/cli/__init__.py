"""The ``studykit`` command.

Each subcommand lives in its own module of this package and exposes
``register(subparsers) -> None``; it sets ``func`` on its parser with ``set_defaults(func=...)``.
``func(args) -> int`` returns the exit status. Input errors (``StudyInputError``) are caught here:
one clear line on stderr, exit status 2, never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from studykit import __version__
from studykit.cli._output import EscapingWriter
from studykit.errors import StudyInputError
from studykit.runtime import numpy_small_pages, one_blas_thread

# subcommand modules, in the order --help lists them; a module that is not there yet is skipped
SUBCOMMANDS = [
    "check",
    "study",
    "analyze",
    "gauge",
    "report",
    "verify",
    "keygen",
    "monitor",
    "serve",
    "interval",
    "position",
]


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The parser; with ``only`` (a subcommand name), that subcommand alone is registered,
    so running one command does not import the modules of all the others."""
    parser = argparse.ArgumentParser(
        prog="studykit",
        description="Capability studies: import, gauge check, stability, shape, capability, evidence.",
    )
    parser.add_argument("--version", action="version", version=f"studykit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in SUBCOMMANDS if only is None else [only]:
        try:
            module = importlib.import_module(f"studykit.cli.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"studykit.cli.{name}":
                continue
            raise
        module.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    one_blas_thread()  # before numpy is imported (studykit/runtime.py says why)
    numpy_small_pages()  # the same
    args_in = sys.argv[1:] if argv is None else list(argv)
    first = args_in[0] if args_in else None
    # `studykit serve ...` needs only serve's module (the workbook opens about 1.5 s sooner);
    # anything else (no command, --help, an unknown word) gets the full parser
    parser = build_parser(first if first in SUBCOMMANDS else None)
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    out, err = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = EscapingWriter(out), EscapingWriter(err)  # no raw control chars
    try:
        return int(args.func(args) or 0)
    except StudyInputError as exc:
        print(f"studykit {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        return 0
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    finally:
        sys.stdout, sys.stderr = out, err


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
