"""Durations in definition files: a whole number and a unit, such as ``90s`` or ``7d``.

One unit per value keeps files easy to read and compare; seconds are the unit inside windvane.
"""

from __future__ import annotations

import re

_UNITS_S = {"s": 1, "m": 60, "h": 3600, "d": 86400}
_DURATION = re.compile(r"^\s*(\d+)\s*([smhd])\s*$")


def parse_duration_s(text: object) -> int:
    """Return the duration in whole seconds, or raise ValueError with a hint."""
    if isinstance(text, bool) or not isinstance(text, str):
        raise ValueError(f"{text!r} is not a duration: write a string such as '90s' or '7d'")
    match = _DURATION.match(text)
    if match is None:
        raise ValueError(
            f"{text} is not a duration: write a whole number followed by s, m, h or d, "
            "such as 90s, 30m, 24h or 7d"
        )
    seconds = int(match.group(1)) * _UNITS_S[match.group(2)]
    if seconds <= 0:
        raise ValueError(f"{text} is not a duration: it must be longer than zero")
    return seconds


def format_duration(seconds: float) -> str:
    """A short exact spelling of a duration for plans and messages, such as ``7d 1h``."""
    whole = int(seconds)
    if whole != seconds or whole <= 0:
        return f"{seconds:g}s"
    parts = []
    for unit, size in (("d", 86400), ("h", 3600), ("m", 60), ("s", 1)):
        count, whole = divmod(whole, size)
        if count:
            parts.append(f"{count}{unit}")
    return " ".join(parts)
