"""Arguments shared by the command groups of ``harken``, and the log line writer."""

from __future__ import annotations

import argparse
import getpass
import sys

from ..errors import AnalysisError

__all__ = ["add_store", "add_files", "add_profiles", "add_profile", "log", "cli_person", "read_password"]


def add_store(p: argparse.ArgumentParser) -> None:
    p.add_argument("--store", default=None, metavar="URL",
                   help="results store: sqlite:///FILE, a file path, or postgresql+psycopg://USER@HOST/DB "
                        "(default: harken.db in the working folder)")


def add_files(p: argparse.ArgumentParser) -> None:
    p.add_argument("--files", default=None, metavar="DIR",
                   help="folder for the archive and quarantine (default: beside a SQLite store, else here)")


def add_profiles(p: argparse.ArgumentParser) -> None:
    p.add_argument("--profiles", action="append", default=[], metavar="DIR",
                   help="folder with device profiles, searched before the shipped ones (repeatable)")


def add_profile(p: argparse.ArgumentParser, *, required: bool = False) -> None:
    """--profile NAME_OR_PATH and --profiles DIR."""
    p.add_argument("--profile", required=required, metavar="NAME_OR_PATH",
                   help="device profile name (NAME.toml looked up in --profiles folders, then demo_data/profiles) "
                        "or a path")
    add_profiles(p)


def log(msg: str) -> None:
    """A progress line on stderr (stdout keeps the command's result)."""
    print(msg, file=sys.stderr, flush=True)


def cli_person() -> str:
    """Who a command-line act is recorded under: the login name, marked as the command line."""
    from ..scoring import current_user

    return f"{current_user()} (command line)"


def read_password(args, *, twice: bool = True) -> str:
    """A password from the first line of standard input (--password-stdin), or asked on the terminal (twice to
    set one)."""
    if args.password_stdin:
        line = sys.stdin.readline().rstrip("\r\n")
        if not line:
            raise AnalysisError("--password-stdin: standard input holds no password")
        return line
    if not sys.stdin.isatty():
        raise AnalysisError("no terminal to ask for a password on: use --password-stdin")
    first = getpass.getpass("password: ")
    if twice and getpass.getpass("password again: ") != first:
        raise AnalysisError("the two passwords differ; nothing was changed")
    return first
