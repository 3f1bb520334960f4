"""The lookup deadline, in one place: its default, its limits, its header and its check.

A bidder says how long it can wait, in the body (``deadline_ms``) or in the
``X-Deadline-Ms`` header; the body wins. The service's own default applies when
neither is given, and ``windvane serve --deadline-ms`` must lie within the same limits.
"""

from __future__ import annotations

from windvane.errors import BadRequest

DEFAULT_DEADLINE_MS = 5.0
MAX_DEADLINE_MS = 10_000.0
DEADLINE_HEADER = "x-deadline-ms"
DEADLINE_HEADER_BYTES = DEADLINE_HEADER.encode()
DEADLINE_REASON = f"must be above 0 and at most {MAX_DEADLINE_MS:g} ms"


def check_deadline_ms(value: object, field: str = "deadline_ms") -> float:
    """``value`` as a deadline in milliseconds, or ``BadRequest`` naming ``field``."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise BadRequest(field, "must be a number of milliseconds")
    if not 0 < value <= MAX_DEADLINE_MS:
        raise BadRequest(field, DEADLINE_REASON)
    return float(value)


def header_deadline_ms(value: bytes | str | None) -> float | None:
    """The ``X-Deadline-Ms`` header's deadline, or None when the header is absent."""
    if value is None:
        return None
    try:
        number = float(value)
    except ValueError:
        raise BadRequest("X-Deadline-Ms", "must be a number of milliseconds") from None
    return check_deadline_ms(number, "X-Deadline-Ms")
