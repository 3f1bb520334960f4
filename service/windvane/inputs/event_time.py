"""Event and request times: epoch seconds as a number, or an RFC 3339 string with an offset.

Both spellings occur in bidder logs. A time without an offset is refused rather than
guessed, since a guess would shift every windowed count by the guessed offset.
"""

from __future__ import annotations

import math
import re
from datetime import datetime

# Times outside this range are almost always a unit mistake (milliseconds sent as seconds).
EARLIEST_S = 946_684_800.0  # 2000-01-01T00:00:00Z
LATEST_S = 4_102_444_800.0  # 2100-01-01T00:00:00Z

_RFC3339 = re.compile(
    r"^(\d{4}-\d{2}-\d{2})[Tt ](\d{2}:\d{2}:\d{2})(\.\d+)?([Zz]|[+-]\d{2}:\d{2})$"
)


def parse_time_s(value: object) -> float:
    """Epoch seconds of ``value``, or ValueError saying why it is not a time."""
    if isinstance(value, bool):
        raise ValueError("must be epoch seconds or an RFC 3339 string, not a boolean")
    if isinstance(value, int | float):
        seconds = float(value)
        if not math.isfinite(seconds):
            raise ValueError("must be a finite number of epoch seconds")
    elif isinstance(value, str):
        seconds = _parse_rfc3339(value)
    else:
        raise ValueError("must be epoch seconds (a number) or an RFC 3339 string with offset")
    if seconds < EARLIEST_S or seconds >= LATEST_S:
        hint = " (it looks like milliseconds; send seconds)" if seconds >= LATEST_S * 100 else ""
        raise ValueError(f"{value!r} is outside 2000-01-01 to 2100-01-01{hint}")
    return seconds


def _parse_rfc3339(text: str) -> float:
    match = _RFC3339.match(text)
    if match is None:
        raise ValueError(
            f"{text!r} is not an RFC 3339 time with offset, such as 2026-12-01T09:30:00.250+01:00"
        )
    date, clock, fraction, offset = match.groups()
    fraction = (fraction or "")[:7]
    offset = "+00:00" if offset in ("Z", "z") else offset
    try:
        stamp = datetime.fromisoformat(f"{date}T{clock}{fraction}{offset}")
    except ValueError as exc:
        raise ValueError(f"{text!r} is not a valid calendar time: {exc}") from None
    return stamp.timestamp()
