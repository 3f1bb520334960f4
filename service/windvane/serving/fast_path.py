"""POST /v1/lookup, the bidder's call, answered straight from ASGI.

Every auction passes through here, so the hot path skips the framework: ``FastLookup``
wraps the FastAPI application, answers ``POST /v1/lookup`` itself and hands every
other request on. The FastAPI route for the same path calls the same ``answer_lookup``
and documents the endpoint in the OpenAPI document, so there is one implementation.
"""

from __future__ import annotations

import time

import orjson
from fastapi import FastAPI
from starlette.types import Receive, Scope, Send

from windvane.inputs.deadline import DEADLINE_HEADER_BYTES, header_deadline_ms
from windvane.inputs.lookup_request import decode_lookup_body
from windvane.serving.http_errors import JSON, error_answer, fault_answer
from windvane.serving.limits import read_body
from windvane.serving.lookup_service import LookupService

LOOKUP_PATH = "/v1/lookup"


async def answer_lookup(
    lookups: LookupService, body: bytes, deadline_header: bytes | None, started_s: float
) -> bytes:
    """The answer to one lookup body; raises windvane errors for the caller to map."""
    call = decode_lookup_body(body)
    deadline_ms = call.deadline_ms
    if deadline_ms is None:
        deadline_ms = header_deadline_ms(deadline_header)
    answer = await lookups.lookup(call, call.model, deadline_ms, started_s)
    return orjson.dumps(answer)


class FastLookup:
    """ASGI middleware that serves ``POST /v1/lookup`` without the framework's layers.

    It reads at most ``max_body_bytes`` of the body (``limits.read_body``) and answers
    every error in the shape of ``http_errors``, a fault of ours too (a 500, re-raised
    after the answer so that the server logs it).
    """

    def __init__(self, app: FastAPI, max_body_bytes: int) -> None:
        self.app = app
        self.max_body_bytes = max_body_bytes

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["path"] != LOOKUP_PATH or scope["method"] != "POST":
            await self.app(scope, receive, send)
            return
        started = time.perf_counter()
        deadline = length = None
        for name, value in scope["headers"]:
            if name == DEADLINE_HEADER_BYTES:
                deadline = value
            elif name == b"content-length":
                length = value
        status, headers = 200, [(b"content-type", JSON.encode())]
        fault = None
        try:
            lookups = self.app.state.windvane.lookups
            request = await read_body(receive, self.max_body_bytes, length)
            body = await answer_lookup(lookups, request, deadline, started)
        except Exception as exc:
            mapped = error_answer(exc)
            if mapped is None:
                fault, mapped = exc, fault_answer()
            status, body, extra = mapped
            headers += [(k.lower().encode(), v.encode()) for k, v in extra.items()]
        headers.append((b"content-length", str(len(body)).encode()))
        await send({"type": "http.response.start", "status": status, "headers": headers})
        await send({"type": "http.response.body", "body": body})
        if fault is not None:
            raise fault
