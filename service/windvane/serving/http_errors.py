"""One place turns errors into HTTP answers: ``{"error": {"field", "reason"}}`` and a status.

422 for a bad field, 404 for an unknown model, 401 for a missing or wrong token, 503
when the store does not answer a write or a read of the registry; never a 500 for a
client's mistake.
"""

from __future__ import annotations

import orjson

from windvane.errors import InputError, NotAuthorized, StoreError, UnknownModel, WindvaneError

JSON = "application/json"


def error_answer(exc: BaseException) -> tuple[int, bytes, dict[str, str]] | None:
    """(status, body, extra headers) for an error a client or an outage can cause, else None."""
    if isinstance(exc, InputError):
        return _answer(422, exc.field, exc.reason)
    if isinstance(exc, UnknownModel):
        return _answer(404, "model", str(exc))
    if isinstance(exc, NotAuthorized):
        return _answer(401, "authorization", str(exc), {"WWW-Authenticate": "Bearer"})
    if isinstance(exc, StoreError):
        return _answer(503, "", str(exc))
    if isinstance(exc, WindvaneError):
        return _answer(400, "", str(exc))
    return None


def _answer(
    status: int, field: str, reason: str, headers: dict[str, str] | None = None
) -> tuple[int, bytes, dict[str, str]]:
    return status, orjson.dumps({"error": {"field": field, "reason": reason}}), headers or {}
