"""The service's ASGI application driven in this process: its lifespan run, no sockets.

``running`` serves async tests; ``InProcessService`` drives the same from plain code
(hypothesis examples) on one event loop kept for the whole service, so the service
starts once rather than once per example. ``call`` sends a hand-made request straight
to the application to see exactly which body messages it asked for.
"""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import AsyncIterator, Awaitable, Callable
from typing import Any

import httpx

from windvane.serving.app import create_asgi
from windvane.serving.config import ServiceConfig

Message = dict[str, Any]


@contextlib.asynccontextmanager
async def running(app: Any) -> AsyncIterator[httpx.AsyncClient]:
    """An in-process client for ``app`` with its lifespan started and stopped around it."""
    inbox: asyncio.Queue[dict] = asyncio.Queue()
    outbox: asyncio.Queue[dict] = asyncio.Queue()
    task = asyncio.create_task(app({"type": "lifespan"}, inbox.get, outbox.put))
    await inbox.put({"type": "lifespan.startup"})
    assert (await outbox.get())["type"] == "lifespan.startup.complete"
    try:
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://test") as client:
            yield client
    finally:
        await inbox.put({"type": "lifespan.shutdown"})
        await outbox.get()
        await task


class InProcessService:
    """``create_asgi(config)`` (the fast path in front of the routes), started in-process."""

    def __init__(self, config: ServiceConfig) -> None:
        self.app = create_asgi(config)
        self.loop = asyncio.new_event_loop()
        self._running = running(self.app)
        self.client: httpx.AsyncClient | None = None

    def __enter__(self) -> InProcessService:
        self.client = self.loop.run_until_complete(self._running.__aenter__())
        return self

    def __exit__(self, *exc: object) -> None:
        try:
            self.loop.run_until_complete(self._running.__aexit__(None, None, None))
        finally:
            self.loop.close()

    def request(self, method: str, url: str, **kwargs: Any) -> httpx.Response:
        assert self.client is not None, "use InProcessService as a context manager"
        return self.loop.run_until_complete(self.client.request(method, url, **kwargs))

    def call(
        self, method: str, path: str, headers: list[tuple[bytes, bytes]],
        receive: Callable[[], Awaitable[Message]], sent: list[Message] | None = None,
    ) -> list[Message]:  # fmt: skip
        """Send one request to the application as a server would; the messages it sent back.

        They are also appended to ``sent`` when given, to be read when the application raises.
        """
        scope = {
            "type": "http", "asgi": {"version": "3.0"}, "http_version": "1.1",
            "method": method, "scheme": "http", "path": path, "raw_path": path.encode(),
            "root_path": "", "query_string": b"", "headers": headers,
            "client": ("127.0.0.1", 50000), "server": ("127.0.0.1", 8700),
        }  # fmt: skip
        answer: list[Message] = [] if sent is None else sent

        async def send(message: Message) -> None:
            answer.append(message)

        self.loop.run_until_complete(self.app(scope, receive, send))
        return answer
