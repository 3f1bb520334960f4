"""``windvane serve`` and ``windvane demo``: the lookup service under uvicorn.

Definitions, store URL and token are checked before uvicorn starts, so a mistake is
one line on the terminal rather than a traceback from inside the server.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import sys
import time
from pathlib import Path
from typing import Any

import uvicorn

from windvane.definitions.plan import load_plan
from windvane.engine import Engine
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.inputs.deadline import DEFAULT_DEADLINE_MS
from windvane.models.registry import ModelRegistry
from windvane.serving.app import create_asgi
from windvane.serving.config import ENVIRONMENT_KEY, ServiceConfig, load_config
from windvane.serving.limits import (
    DEFAULT_MAX_EVENTS_BYTES,
    DEFAULT_MAX_LOOKUP_BYTES,
    DEFAULT_MAX_MODEL_BYTES,
    DEFAULT_MAX_OPENRTB_BYTES,
)
from windvane.serving.state import feature_shapes
from windvane.store import open_store

BODY_LIMIT_FLAGS = (
    ("--max-lookup-bytes", "POST /v1/lookup", DEFAULT_MAX_LOOKUP_BYTES),
    ("--max-openrtb-bytes", "POST /v1/lookup/openrtb", DEFAULT_MAX_OPENRTB_BYTES),
    ("--max-events-bytes", "POST /v1/events", DEFAULT_MAX_EVENTS_BYTES),
    ("--max-model-bytes", "snapshot or activation", DEFAULT_MAX_MODEL_BYTES),
)


def add_service_commands(commands: Any) -> None:
    serve = commands.add_parser("serve", help="run the HTTP lookup service")
    serve.add_argument("--config", metavar="FILE", help="TOML settings file")
    serve.add_argument("--store", metavar="URL", help="memory:// (default) or redis://host:port/db")
    serve.add_argument("--defs", metavar="DIR", help="feature definitions (default featuredefs)")
    serve.add_argument("--generation", metavar="NAME", help="pin one (default: follow the active)")
    serve.add_argument("--stream", metavar="URL", help="event stream for POST /v1/events")
    serve.add_argument("--shards", type=int, help="stream shards (default: the stream's, else 4)")
    serve.add_argument("--host", help="address to listen on (default 127.0.0.1)")
    serve.add_argument("--port", type=int, help="port (default 8700)")
    serve.add_argument("--workers", type=int, help="processes (default 1; needs redis://)")
    serve.add_argument("--replay", nargs="+", metavar="LOG", help="load logs into memory:// first")
    serve.add_argument(
        "--deadline-ms",
        type=float,
        help=f"default lookup deadline (default {DEFAULT_DEADLINE_MS:g})",
    )
    serve.add_argument("--default-model", metavar="NAME", help="model for lookups naming none")
    serve.add_argument("--cache-ms", type=float, help="max age of cached app state (default 500)")
    serve.add_argument("--read-only", action="store_true", default=None, help="no write endpoints")
    for flag, what, default in BODY_LIMIT_FLAGS:
        serve.add_argument(
            flag, type=int, metavar="BYTES", help=f"largest {what} body (default {default:,})"
        )
    serve.add_argument(
        "--insecure-dev",
        action="store_true",
        default=None,
        help="allow writes without a token (local demos only)",
    )
    serve.set_defaults(run=_serve)

    demo = commands.add_parser(
        "demo", help="generate a demo log, load it, publish a snapshot and serve it"
    )
    demo.add_argument(
        "--port", type=int, default=8700, help="port to serve on (default %(default)s)"
    )
    demo.add_argument(
        "--events", type=int, default=60_000, help="demo events to generate (default %(default)s)"
    )
    demo.add_argument(
        "--seed", type=int, default=7, help="seed of the demo generator (default %(default)s)"
    )
    demo.add_argument("--out", default="demo/out", help="where the demo log goes")
    demo.add_argument(
        "--defs",
        default="featuredefs",
        metavar="DIR",
        help="feature definitions (default %(default)s)",
    )
    demo.set_defaults(run=_demo)


def _serve(args: argparse.Namespace) -> int:
    overrides = {
        "store": args.store, "defs": args.defs, "generation": args.generation,
        "stream": args.stream, "shards": args.shards,
        "host": args.host, "port": args.port, "workers": args.workers,
        "replay": args.replay, "deadline_ms": args.deadline_ms,
        "default_model": args.default_model, "cache_ms": args.cache_ms,
        "read_only": args.read_only, "insecure_dev": args.insecure_dev,
        "max_lookup_bytes": args.max_lookup_bytes, "max_openrtb_bytes": args.max_openrtb_bytes,
        "max_events_bytes": args.max_events_bytes, "max_model_bytes": args.max_model_bytes,
    }  # fmt: skip
    config = load_config(args.config, overrides).check()
    load_plan(config.defs)  # definition mistakes are reported here, one line each
    open_store(config.store).close()  # and an unusable store URL
    if config.insecure_dev and config.writes_enabled:
        sys.stderr.write("windvane: --insecure-dev: writes are accepted without a token\n")
    run_service(config)
    return 0


def run_service(config: ServiceConfig) -> None:
    options: dict[str, Any] = {
        "host": config.host,
        "port": config.port,
        "loop": "uvloop",
        "http": "httptools",
        "access_log": False,
        "log_level": config.log_level,
        "lifespan": "on",
    }
    if config.workers == 1:
        uvicorn.run(create_asgi(config), **options)
        return
    os.environ[ENVIRONMENT_KEY] = config.to_environment()
    uvicorn.run(
        "windvane.serving.app:app_from_environment",
        factory=True,
        workers=config.workers,
        **options,
    )


DEMO_MODEL = "demo-ctr"


def _demo(args: argparse.Namespace) -> int:
    from windvane_demo import generate

    snapshot_path = Path(generate.__file__).with_name("snapshot.json")
    out = Path(args.out)
    log = out / "demo.jsonl.gz"
    end = time.time() // 60 * 60
    sys.stderr.write(f"windvane demo: writing {args.events:,} demo events to {log}\n")
    demo_log = generate.build_log(seed=args.seed, events=args.events, end_ts=end)
    generate.write_lines(demo_log.lines, str(log))
    config = ServiceConfig(
        store="memory://demo", defs=args.defs, port=args.port, insecure_dev=True
    ).check()
    with Engine.open(config.defs, config.store) as engine:
        with RejectsFile(out / "rejects.jsonl") as rejects:
            stats = replay(engine, [str(log)], rejects)
        registry = ModelRegistry(engine.store, feature_shapes(engine.plan))
        registry.publish(DEMO_MODEL, snapshot_path.read_bytes(), "windvane demo", activate=True)
        _print_sample_lookups(engine, demo_log.lookups[:3])
    request = _demo_request(demo_log.lookups)
    _print_demo_help(config, stats.applied, stats.rejected, request)
    run_service(dataclasses.replace(config, default_model=DEMO_MODEL))
    return 0


def _print_sample_lookups(engine: Engine, requests: list[dict[str, Any]]) -> None:
    import orjson

    sys.stderr.write("\nA few lookups from the engine (windvane features does the same):\n")
    for request in requests:
        answer = engine.lookup(request)
        sys.stderr.write(orjson.dumps(answer).decode() + "\n")


def _demo_request(lookups: list[dict[str, Any]]) -> dict[str, Any]:
    """An unrestricted lookup from the demo, without its time so that it asks about now."""
    chosen = next(
        (r for r in lookups if not r.get("coppa") and not r.get("device", {}).get("lmt")),
        lookups[0],
    )
    request = {k: v for k, v in chosen.items() if k != "ts"}
    request["model"] = DEMO_MODEL
    return request


def _print_demo_help(
    config: ServiceConfig, applied: int, rejected: int, request: dict[str, Any]
) -> None:
    import orjson

    base = f"http://{config.host}:{config.port}"
    bid_request = {
        "id": "demo-auction-1",
        "imp": [{"id": "1", "banner": {"w": 320, "h": 50}}],
        "app": {"bundle": request["app"]},
        "device": {**request.get("device", {}), "ifa": request["user"],
                   "geo": request.get("geo", {})},
        "regs": {"coppa": request.get("coppa", 0)},
    }  # fmt: skip
    campaigns = ",".join(request["campaigns"])

    def quoted(data: object) -> str:
        return "'" + orjson.dumps(data).decode().replace("'", "'\\''") + "'"

    json_header = "-H 'content-type: application/json'"
    lines = [
        "",
        f"windvane demo: {applied:,} events loaded ({rejected} malformed lines set aside),",
        f"model {DEMO_MODEL} published and active. Insecure dev mode: writes need no token.",
        "",
        "Try, in another terminal:",
        "",
        f"  curl -s {base}/v1/lookup {json_header} -d {quoted(request)}",
        "",
        f"  curl -s '{base}/v1/lookup/openrtb?campaigns={campaigns}' {json_header} "
        f"-d {quoted(bid_request)}",
        "",
        f"  curl -s {base}/v1/models/{DEMO_MODEL}",
        "",
        f"OpenAPI: {base}/docs (JSON at {base}/openapi.json). Ctrl-C stops the demo.",
        "",
    ]
    sys.stderr.write("\n".join(lines))
    sys.stderr.flush()
