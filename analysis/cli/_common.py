"""Arguments shared by the command groups of ``harken``, and the log line writer."""

from __future__ import annotations

import argparse
import sys

__all__ = ["add_store", "add_files", "add_profiles", "add_profile", "log"]


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
