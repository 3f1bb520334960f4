"""Closed-loop HTTP load at a fixed concurrency for a fixed time: wrk when installed, else asyncio.

A bidder keeps a few connections open to windvane and sends the next
request as soon as the previous answer is in, so the load here is the same: a fixed
number of keep-alive connections, each sending POSTs back to back, cycling through a
list of JSON bodies. wrk is preferred because it costs the machine almost nothing
beside the server under test; the built-in generator (raw HTTP/1.1 over asyncio
streams, far cheaper per request than an HTTP client library) stands in without it.
"""

from __future__ import annotations

import asyncio
import contextlib
import math
import shutil
import subprocess
import time
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import orjson

CONNECTIONS = 8
# One wrk thread drives 8 connections at tens of thousands of requests/s, far above a
# single Python worker; a second thread would only take a core from the servers.
WRK_THREADS = 1
PERCENTILES = {"p50": 50.0, "p90": 90.0, "p99": 99.0, "p99.9": 99.9}


@dataclass
class LoadResult:
    """What one load run measured; latencies in milliseconds."""

    generator: str
    connections: int
    duration_s: float
    requests: int
    errors: int
    requests_per_s: float
    latency_ms: dict[str, float]

    @property
    def p50_ms(self) -> float:
        return self.latency_ms["p50"]

    @property
    def p99_ms(self) -> float:
        return self.latency_ms["p99"]

    @property
    def p999_ms(self) -> float:
        return self.latency_ms["p99.9"]

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def generator_name(prefer: str = "auto") -> str:
    """``"wrk <version>"`` when wrk is used, else ``"asyncio"``."""
    binary = shutil.which("wrk")
    if prefer == "asyncio" or binary is None:
        if prefer == "wrk":
            raise RuntimeError("wrk is not installed")
        return "asyncio"
    done = subprocess.run([binary, "--version"], capture_output=True, text=True, check=False)
    words = (done.stdout or done.stderr).split()
    return " ".join(words[:2]) if words else "wrk"


def drive(
    url: str,
    bodies: Sequence[bytes],
    duration_s: float,
    work: Path,
    connections: int = CONNECTIONS,
    prefer: str = "auto",
) -> LoadResult:
    """POST the bodies to ``url`` round-robin from ``connections`` connections for a while."""
    if not bodies:
        raise ValueError("no request bodies to send")
    name = generator_name(prefer)
    if name == "asyncio":
        return asyncio.run(_drive_asyncio(url, list(bodies), duration_s, connections))
    return _drive_wrk(name, url, bodies, duration_s, work, connections)


# -- wrk ---------------------------------------------------------------------------

_WRK_SCRIPT = """\
local bodies = {%(bodies)s}
local prepared = {}
local counter = 0
local threads = {}
non2xx = 0

function setup(thread)
  thread:set("offset", #threads * 7919)
  table.insert(threads, thread)
end

function init(args)
  for i, body in ipairs(bodies) do
    prepared[i] = wrk.format("POST", nil, {["Content-Type"] = "application/json"}, body)
  end
  counter = offset or 0
end

function request()
  counter = counter + 1
  return prepared[(counter %% #prepared) + 1]
end

function response(status, headers, body)
  if status < 200 or status > 299 then
    non2xx = non2xx + 1
  end
end

function done(summary, latency, requests)
  local bad = 0
  for _, thread in ipairs(threads) do
    bad = bad + thread:get("non2xx")
  end
  local e = summary.errors
  io.write(string.format(
    '{"requests":%%d,"duration_us":%%d,"non2xx":%%d,"socket_errors":%%d,' ..
    '"p50_us":%%.1f,"p90_us":%%.1f,"p99_us":%%.1f,"p99.9_us":%%.1f}\\n',
    summary.requests, summary.duration, bad, e.connect + e.read + e.write + e.timeout,
    latency:percentile(50), latency:percentile(90), latency:percentile(99),
    latency:percentile(99.9)))
end
"""


def lua_string(data: bytes) -> str:
    """A Lua string literal for any bytes: safe characters as they are, others as \\ddd."""
    safe = b"abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789 :,.-_{}[]/+@#"
    return '"' + "".join(chr(b) if b in safe else f"\\{b:03d}" for b in data) + '"'


def wrk_script(bodies: Sequence[bytes]) -> str:
    return _WRK_SCRIPT % {"bodies": ",\n  ".join(lua_string(b) for b in bodies)}


def _drive_wrk(
    name: str,
    url: str,
    bodies: Sequence[bytes],
    duration_s: float,
    work: Path,
    connections: int,
) -> LoadResult:
    work.mkdir(parents=True, exist_ok=True)
    script = work / "lookup.lua"
    script.write_text(wrk_script(bodies))
    seconds = max(1, math.ceil(duration_s))  # wrk takes whole seconds only
    args = [
        shutil.which("wrk") or "wrk",
        f"-t{min(WRK_THREADS, connections)}",
        f"-c{connections}",
        f"-d{seconds}s",
        "--timeout",
        "5s",
        "-s",
        str(script),
        url,
    ]
    done = subprocess.run(args, capture_output=True, text=True, timeout=seconds + 60, check=False)
    line = next((x for x in done.stdout.splitlines() if x.startswith('{"requests":')), None)
    if done.returncode != 0 or line is None:
        raise RuntimeError(f"wrk failed ({done.returncode}):\n{done.stdout}\n{done.stderr}")
    figures = orjson.loads(line)
    elapsed_s = figures["duration_us"] / 1e6
    return LoadResult(
        generator=name,
        connections=connections,
        duration_s=elapsed_s,
        requests=figures["requests"],
        errors=figures["non2xx"] + figures["socket_errors"],
        requests_per_s=figures["requests"] / elapsed_s,
        latency_ms={label: figures[f"{label}_us"] / 1000 for label in PERCENTILES},
    )


# -- built-in asyncio generator -----------------------------------------------------


async def _drive_asyncio(
    url: str, bodies: list[bytes], duration_s: float, connections: int
) -> LoadResult:
    parts = urlsplit(url)
    host, port = parts.hostname or "127.0.0.1", parts.port or 80
    path = parts.path or "/"
    requests = [
        b"POST %s HTTP/1.1\r\nHost: %s:%d\r\nContent-Type: application/json\r\n"
        b"Content-Length: %d\r\n\r\n%s" % (path.encode(), host.encode(), port, len(b), b)
        for b in bodies
    ]
    latencies: list[int] = []
    errors = [0]
    started = time.perf_counter_ns()
    deadline = started + round(duration_s * 1e9)
    await asyncio.gather(
        *(
            _connection(host, port, requests, n * 7919, deadline, latencies, errors)
            for n in range(connections)
        )
    )
    elapsed_s = (time.perf_counter_ns() - started) / 1e9
    return LoadResult(
        generator="asyncio",
        connections=connections,
        duration_s=elapsed_s,
        requests=len(latencies),
        errors=errors[0],
        requests_per_s=len(latencies) / elapsed_s,
        latency_ms=percentiles_ms(latencies),
    )


async def _connection(
    host: str,
    port: int,
    requests: list[bytes],
    offset: int,
    deadline_ns: int,
    latencies: list[int],
    errors: list[int],
) -> None:
    reader, writer = await asyncio.open_connection(host, port)
    index = offset
    try:
        while time.perf_counter_ns() < deadline_ns:
            request = requests[index % len(requests)]
            index += 1
            sent = time.perf_counter_ns()
            try:
                writer.write(request)
                status = await _read_response(reader)
            except (ConnectionError, asyncio.IncompleteReadError):
                errors[0] += 1
                writer.close()
                reader, writer = await asyncio.open_connection(host, port)
                continue
            latencies.append(time.perf_counter_ns() - sent)
            if not 200 <= status < 300:
                errors[0] += 1
    finally:
        writer.close()
        with contextlib.suppress(ConnectionError):
            await writer.wait_closed()


async def _read_response(reader: asyncio.StreamReader) -> int:
    """Read one whole response (Content-Length or chunked); return its status."""
    head = await reader.readuntil(b"\r\n\r\n")
    status = int(head[9:12])
    length = 0
    chunked = False
    for line in head.lower().split(b"\r\n")[1:]:
        if line.startswith(b"content-length:"):
            length = int(line[15:])
        elif line.startswith(b"transfer-encoding:") and b"chunked" in line:
            chunked = True
    if not chunked:
        await reader.readexactly(length)
        return status
    while True:
        size = int((await reader.readuntil(b"\r\n")).split(b";")[0], 16)
        await reader.readexactly(size + 2)
        if size == 0:
            return status


def percentiles_ms(latencies_ns: list[int]) -> dict[str, float]:
    """Nearest-rank percentiles of nanosecond latencies, in milliseconds."""
    if not latencies_ns:
        return {label: math.nan for label in PERCENTILES}
    ordered = sorted(latencies_ns)
    last = len(ordered) - 1
    return {
        label: ordered[min(last, max(0, math.ceil(p / 100 * len(ordered)) - 1))] / 1e6
        for label, p in PERCENTILES.items()
    }
