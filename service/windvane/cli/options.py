"""Options more than one command takes, written once: the store and definitions, times."""

from __future__ import annotations

import argparse
import os

from windvane.errors import UsageError
from windvane.inputs.event_time import parse_time_s

DEFAULT_DEFS = os.environ.get("WINDVANE_DEFS", "featuredefs")
DEFAULT_STORE = os.environ.get("WINDVANE_STORE", "memory://")


def store_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--store",
        default=DEFAULT_STORE,
        metavar="URL",
        help="memory:// (embedded, default) or redis://host:port/db",
    )
    parser.add_argument(
        "--defs",
        default=DEFAULT_DEFS,
        metavar="DIR",
        help="feature definition directory (default featuredefs)",
    )


def positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError("must be at least 1")
    return value


def time_option(name: str, text: str | None) -> float | None:
    if text is None:
        return None
    try:
        value: object = float(text)
    except ValueError:
        value = text
    try:
        return parse_time_s(value)
    except ValueError as exc:
        raise UsageError(f"{name}: {exc}") from None
