"""How many bytes each endpoint reads of a request body, and the reading that holds to it.

Without a limit a client could make the service hold any body in memory. A body is
read chunk by chunk and refused with ``BodyTooLarge`` (a 413) as soon as the running
total passes its endpoint's limit; a ``Content-Length`` that already passes it is
refused before the first chunk is read. Only routes that read a body have a limit: a
body sent to any other route is never read.

The check runs when the route first reads its body, not when the request arrives, so
a write without its token is refused (401) before its size is looked at, like
everything else about its body.

The defaults leave room over real bodies: a lookup is a few hundred bytes (500
campaigns of 40-character ids make 21 KiB), a BidRequest a few KiB, an events batch of
4 MiB about 15,000 events, a snapshot a few KiB.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from starlette.routing import compile_path
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from windvane.errors import BodyTooLarge, UsageError

KIB = 1024
MIB = 1024 * KIB

DEFAULT_MAX_LOOKUP_BYTES = 64 * KIB
DEFAULT_MAX_OPENRTB_BYTES = 256 * KIB
DEFAULT_MAX_EVENTS_BYTES = 4 * MIB
DEFAULT_MAX_MODEL_BYTES = 1 * MIB
# A limit below a kibibyte refuses real requests; above this it no longer bounds memory.
SMALLEST_LIMIT = 1 * KIB
LARGEST_LIMIT = 256 * MIB


@dataclass(frozen=True)
class BodyLimits:
    """The largest body, in bytes, of each endpoint that reads one."""

    lookup: int = DEFAULT_MAX_LOOKUP_BYTES
    openrtb: int = DEFAULT_MAX_OPENRTB_BYTES
    events: int = DEFAULT_MAX_EVENTS_BYTES
    model: int = DEFAULT_MAX_MODEL_BYTES

    def by_route(self) -> dict[str, int]:
        """Each POST route that reads a body, by its path template, with its limit."""
        return {
            "/v1/lookup": self.lookup,
            "/v1/lookup/openrtb": self.openrtb,
            "/v1/events": self.events,
            "/v1/models/{name}/snapshots": self.model,
            "/v1/models/{name}/activate": self.model,
        }


def check_limit(value: int, flag: str) -> None:
    """Refuse a configured limit that is not a whole number of bytes in the allowed range."""
    if type(value) is not int or not SMALLEST_LIMIT <= value <= LARGEST_LIMIT:
        raise UsageError(
            f"{flag} must be a whole number of bytes from {SMALLEST_LIMIT:,} to "
            f"{LARGEST_LIMIT:,}, not {value!r}"
        )


def declared_too_long(content_length: bytes | None, limit: int) -> bool:
    """True when the request's Content-Length already passes ``limit``.

    A missing or malformed header says nothing; the count while reading still holds.
    """
    return content_length is not None and content_length.isdigit() and int(content_length) > limit


async def read_body(receive: Receive, limit: int, content_length: bytes | None) -> bytes:
    """The whole body, or ``BodyTooLarge`` as soon as it passes ``limit`` bytes.

    A body in one message (every lookup from a bidder) is returned without a copy.
    """
    if content_length is not None and declared_too_long(content_length, limit):
        raise BodyTooLarge(limit)
    message = await receive()
    body: bytes = message.get("body", b"")
    if len(body) > limit:
        raise BodyTooLarge(limit)
    if not message.get("more_body", False):
        return body
    chunks = [body]
    size = len(body)
    while message.get("more_body", False):
        message = await receive()
        chunk = message.get("body", b"")
        size += len(chunk)
        if size > limit:
            raise BodyTooLarge(limit)
        chunks.append(chunk)
    return b"".join(chunks)


class LimitedReceive:
    """An ASGI ``receive`` that raises ``BodyTooLarge`` instead of passing ``limit`` bytes."""

    def __init__(self, receive: Receive, limit: int, content_length: bytes | None) -> None:
        self.receive = receive
        self.limit = limit
        self.content_length = content_length
        self.size = 0

    async def __call__(self) -> Message:
        if declared_too_long(self.content_length, self.limit):
            raise BodyTooLarge(self.limit)
        message = await self.receive()
        if message["type"] == "http.request":
            self.size += len(message.get("body", b""))
            if self.size > self.limit:
                raise BodyTooLarge(self.limit)
        return message


def content_length(scope: Scope) -> bytes | None:
    for name, value in scope["headers"]:
        if name == b"content-length":
            return value
    return None


class BodyLimit:
    """ASGI middleware: a POST to a route in ``routes`` reads at most that route's limit.

    The route raises ``BodyTooLarge`` from its own read, so the application's error
    handler answers it like any other error.
    """

    def __init__(self, app: ASGIApp, routes: dict[str, int]) -> None:
        self.app = app
        self.routes: list[tuple[re.Pattern[str], int]] = [
            (compile_path(template)[0], limit) for template, limit in routes.items()
        ]

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http" and scope["method"] == "POST":
            for pattern, limit in self.routes:
                if pattern.match(scope["path"]):
                    receive = LimitedReceive(receive, limit, content_length(scope))
                    break
        await self.app(scope, receive, send)
