"""One place turns errors into HTTP answers: ``{"error": {"field", "reason"}}`` and a status.

422 for a bad field, 404 for an unknown model, 401 for a missing or wrong token, 413 for
a body over its endpoint's limit, 503 when the store does not answer a write or a read
of the registry; never a 500 for a client's mistake. The framework's own refusals (no
such path, a method the path does not take) get the same shape, and so does a 500 for
a fault of ours, which is logged.
"""

from __future__ import annotations

import orjson
from starlette.exceptions import HTTPException

from windvane.errors import (
    BodyTooLarge,
    InputError,
    NotAuthorized,
    StoreError,
    UnknownModel,
    WindvaneError,
)
from windvane.inputs.json_body import printable

JSON = "application/json"

_FRAMEWORK_REASONS = {
    404: "no such endpoint: the API is described at /docs",
    405: "this endpoint does not take that method: see the Allow header",
}


def error_answer(exc: BaseException) -> tuple[int, bytes, dict[str, str]] | None:
    """(status, body, extra headers) for an error a client or an outage can cause, else None."""
    if isinstance(exc, InputError):
        return _answer(422, exc.field, exc.reason)
    if isinstance(exc, UnknownModel):
        return _answer(404, "model", str(exc))
    if isinstance(exc, NotAuthorized):
        return _answer(401, "authorization", str(exc), {"WWW-Authenticate": "Bearer"})
    if isinstance(exc, BodyTooLarge):
        return _answer(413, "", str(exc))
    if isinstance(exc, StoreError):
        return _answer(503, "", str(exc))
    if isinstance(exc, WindvaneError):
        return _answer(400, "", str(exc))
    if isinstance(exc, HTTPException):
        reason = _FRAMEWORK_REASONS.get(exc.status_code, str(exc.detail))
        return _answer(exc.status_code, "", reason, dict(exc.headers or {}))
    return None


def fault_answer() -> tuple[int, bytes, dict[str, str]]:
    """The answer to an error no client can cause: a bug of ours, in the documented shape."""
    return _answer(500, "", "internal error: the service logged it")


def _answer(
    status: int, field: str, reason: str, headers: dict[str, str] | None = None
) -> tuple[int, bytes, dict[str, str]]:
    error = {"field": field, "reason": reason}
    try:
        body = orjson.dumps({"error": error})
    except orjson.JSONEncodeError:  # a lone surrogate echoed from the request
        body = orjson.dumps({"error": {k: printable(v) for k, v in error.items()}})
    return status, body, headers or {}
