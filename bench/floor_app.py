"""The lookup floor: the least a Python service answering windvane's lookups must do.

It runs under the same server as windvane (uvicorn with uvloop and httptools, no
access log, one worker) and talks to Redis with the same client (redis.asyncio with
hiredis). For each POST it reads the body, sends the very commands windvane's lookup
would send for that body in one pipelined round trip, and answers a fixed JSON body.
It parses nothing, scores nothing and caches nothing: the commands for every body the
load generator sends are computed beforehand (``--commands``, a JSON object from body
to command list), so what is left is HTTP, one round trip and the event loop.

    python -m bench.floor_app --port P --redis redis://127.0.0.1:6379/0 --commands FILE
"""

from __future__ import annotations

import argparse
from collections.abc import Awaitable, Callable, MutableMapping, Sequence
from pathlib import Path
from typing import Any

import orjson
import redis.asyncio
import uvicorn
from redis.asyncio.retry import Retry
from redis.backoff import NoBackoff

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]

ANSWER = b'{"stored":"ok"}'
UNKNOWN = b'{"error":"unknown body"}'


def load_commands(path: Path) -> dict[bytes, list[tuple[str, ...]]]:
    """Body bytes to the commands windvane sends for that body, as written by the bench."""
    raw = orjson.loads(path.read_bytes())
    return {body.encode(): [tuple(c) for c in commands] for body, commands in raw.items()}


class FloorApp:
    """A raw ASGI app: no framework, no routing, one pipelined read per request."""

    def __init__(self, redis_url: str, commands: dict[bytes, list[tuple[str, ...]]]) -> None:
        self.redis_url = redis_url
        self.commands = commands
        self.client: redis.asyncio.Redis | None = None

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http":
            await self._http(receive, send)
        elif scope["type"] == "lifespan":
            await self._lifespan(receive, send)

    async def _lifespan(self, receive: Receive, send: Send) -> None:
        while True:
            message = await receive()
            if message["type"] == "lifespan.startup":
                # The same client settings as windvane's reader: 1 s timeouts, no retries.
                self.client = redis.asyncio.Redis.from_url(
                    self.redis_url,
                    socket_timeout=1.0,
                    socket_connect_timeout=1.0,
                    retry=Retry(NoBackoff(), 0),
                )
                await send({"type": "lifespan.startup.complete"})
            elif message["type"] == "lifespan.shutdown":
                if self.client is not None:
                    await self.client.aclose()
                await send({"type": "lifespan.shutdown.complete"})
                return

    async def _http(self, receive: Receive, send: Send) -> None:
        body = b""
        while True:
            message = await receive()
            body += message.get("body", b"")
            if not message.get("more_body", False):
                break
        commands = self.commands.get(body)
        if commands is None:
            await _respond(send, 404, UNKNOWN)
            return
        assert self.client is not None
        pipe = self.client.pipeline(transaction=False)
        for command in commands:
            pipe.execute_command(*command)
        await pipe.execute()
        await _respond(send, 200, ANSWER)


async def _respond(send: Send, status: int, body: bytes) -> None:
    headers = [(b"content-type", b"application/json"), (b"content-length", b"%d" % len(body))]
    await send({"type": "http.response.start", "status": status, "headers": headers})
    await send({"type": "http.response.body", "body": body})


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m bench.floor_app", description=__doc__)
    parser.add_argument("--port", type=int, required=True)
    parser.add_argument("--host", default="127.0.0.1")
    parser.add_argument("--redis", required=True, metavar="URL")
    parser.add_argument("--commands", required=True, type=Path, metavar="FILE")
    args = parser.parse_args(argv)
    app = FloorApp(args.redis, load_commands(args.commands))
    uvicorn.run(
        app,
        host=args.host,
        port=args.port,
        loop="uvloop",
        http="httptools",
        access_log=False,
        log_level="warning",
        lifespan="on",
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
