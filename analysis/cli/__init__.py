"""The ``harken`` command: the application layer over the library (analysis.*) and the dashboard.

One module per command group, each with ``register(subparsers)`` that adds its commands and sets, on every
command's parser, ``func``: the function that runs it and returns the exit code. ``main`` parses, calls
``args.func(args)`` and is the one error handler: a bad input, a store that cannot be opened, a file that cannot
be read or written all give one line on stderr naming the file or URL and the reason, and exit code 1; no
traceback. The library never imports this package.
"""

from __future__ import annotations

import argparse
import sys

from ..errors import AnalysisError
from . import analyse, audit, bench, check, demo, demo_data, export, model, reference, serve, user, validate, worker

__all__ = ["main", "build_parser", "EXIT_BAD_INPUT"]

EXIT_BAD_INPUT = 1
GROUPS = (analyse, demo_data, model, worker, reference, export, check, validate, serve, demo, bench, user, audit)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="harken", description="Acoustic trend review for device test rigs.")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for group in GROUPS:
        group.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except AnalysisError as exc:  # StoreError among them: the message names the file or store URL
        print(f"harken: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as exc:  # a folder we cannot write, a disk that is full: say which path and why
        where = exc.filename if exc.filename is not None else "harken"
        print(f"harken: {where}: {exc.strerror or exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("harken: interrupted", file=sys.stderr)
        return 130
