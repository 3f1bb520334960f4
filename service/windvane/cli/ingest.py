"""``windvane send``, ``ingest`` and ``generations``: the data engineer's stream commands."""

from __future__ import annotations

import argparse
import contextlib
import signal
import sys
import time
from collections.abc import Sequence
from datetime import UTC, datetime
from typing import Any

from windvane.cli.options import time_option
from windvane.engine import Engine
from windvane.errors import BadEvent, UsageError
from windvane.ingest.event_stream import (
    StreamClient,
    append,
    drop_consumer_groups,
    open_stream,
    shard_count,
    shard_of,
)
from windvane.ingest.logfile import read_lines
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.worker import IngestSettings, IngestWorker
from windvane.inputs.events import parse_event_line
from windvane.keys import check_generation
from windvane.store import open_store, parse_store_url
from windvane.store.generations import Generations


def add_ingest_commands(commands: Any) -> None:
    send = commands.add_parser("send", help="append event logs to the event stream")
    send.add_argument("logs", nargs="+", metavar="LOG", help="JSON Lines logs, plain or .gz")
    send.add_argument("--stream", required=True, metavar="URL", help="redis://host:port/db")
    send.add_argument("--shards", type=int, help="shard count (default: the stream's, else 4)")
    send.add_argument("--batch", type=int, default=1000, help="entries per round trip")
    send.add_argument("--rate", type=float, help="events per second to offer (default: flat out)")
    send.add_argument(
        "--rejects", default="windvane-rejects.jsonl", metavar="PATH",
        help="where lines that cannot be sent go (default %(default)s)",
    )  # fmt: skip
    send.set_defaults(run=_send)

    ingest = commands.add_parser("ingest", help="apply the event stream to the store")
    ingest.add_argument(
        "--stream", required=True, metavar="URL", help="the event stream's Redis server"
    )
    ingest.add_argument("--store", required=True, metavar="URL", help="the state store to apply to")
    ingest.add_argument(
        "--defs",
        default="featuredefs",
        metavar="DIR",
        help="feature definitions (default %(default)s)",
    )
    ingest.add_argument("--generation", metavar="NAME", help="default: the active generation")
    ingest.add_argument("--shards", default="all", help="shards to serve: all, or e.g. 0,1")
    ingest.add_argument("--name", help="this worker's consumer name (default host-random)")
    ingest.add_argument(
        "--batch",
        type=int,
        default=1000,
        help="entries read per shard and step (default %(default)s)",
    )
    ingest.add_argument("--lease-ms", type=int, default=5000, help="shard lease (default 5000)")
    ingest.add_argument(
        "--claim-idle-ms", type=int, default=5000,
        help="claim entries a dead worker left pending after this idle time (default 5000)",
    )  # fmt: skip
    ingest.add_argument(
        "--from-ts", metavar="TS", help="apply only events at or after TS (tops up a rebuild)"
    )
    ingest.add_argument(
        "--status-every", type=float, default=5.0, metavar="SECONDS",
        help="seconds between status lines (default %(default)s)",
    )  # fmt: skip
    ingest.add_argument(
        "--retain", type=float, default=7200, metavar="SECONDS",
        help="stream history kept after acknowledgement, for top-ups (default 7200)",
    )  # fmt: skip
    ingest.add_argument(
        "--reserve", action="store_true",
        help="only create this generation's consumer groups (holds the stream), then exit",
    )  # fmt: skip
    ingest.set_defaults(run=_ingest)

    gens = commands.add_parser("generations", help="list, activate or drop state generations")
    gens.add_argument(
        "action", nargs="?", choices=("list", "activate", "drop"), default="list",
        help="list (default), activate NAME or drop NAME",
    )  # fmt: skip
    gens.add_argument("name", nargs="?", help="the generation to activate or drop")
    gens.add_argument("--store", required=True, metavar="URL", help="the state store")
    gens.set_defaults(run=_generations)


def _send(args: argparse.Namespace) -> int:
    with contextlib.closing(open_stream(args.stream)) as client:
        return _send_logs(args, client)


def _send_logs(args: argparse.Namespace, client: StreamClient) -> int:
    shards = shard_count(client, args.shards)
    sent = rejected = 0
    started = time.monotonic()
    batch: list[tuple[int, bytes]] = []
    with RejectsFile(args.rejects) as rejects:
        for path in args.logs:
            for number, line in read_lines(path):
                try:
                    event = parse_event_line(line)
                except BadEvent as exc:
                    rejects.write(path, number, exc.field, exc.reason, line)
                    rejected += 1
                    continue
                batch.append((shard_of(event, shards), line))
                if len(batch) >= args.batch:
                    sent += _append_paced(client, batch, sent, started, args.rate)
                    batch = []
        if batch:
            sent += _append_paced(client, batch, sent, started, args.rate)
    elapsed = time.monotonic() - started
    sys.stdout.write(
        f"sent {sent:,} events to {shards} shards in {elapsed:.1f} s "
        f"({sent / max(elapsed, 1e-9):,.0f} events/s); {rejected:,} rejected -> {args.rejects}\n"
    )
    return 0


def _append_paced(
    client: StreamClient, batch: list[tuple[int, bytes]], sent: int, started: float,
    rate: float | None,
) -> int:  # fmt: skip
    if rate:
        due = started + (sent + len(batch)) / rate
        delay = due - time.monotonic()
        if delay > 0:
            time.sleep(delay)
    append(client, batch)
    return len(batch)


def _ingest(args: argparse.Namespace) -> int:
    if args.generation is not None:
        check_generation(args.generation)
    with (
        contextlib.closing(open_stream(args.stream)) as stream,
        Engine.open(args.defs, args.store, args.generation, "stream ingest") as engine,
    ):
        return _run_worker(args, stream, engine)


def _run_worker(args: argparse.Namespace, stream: StreamClient, engine: Engine) -> int:
    generation = engine.generation
    settings = IngestSettings(
        shards=_parse_shards(args.shards),
        batch=args.batch,
        lease_ms=args.lease_ms,
        claim_idle_ms=args.claim_idle_ms,
        from_ts=time_option("--from-ts", args.from_ts),
        status_every_s=args.status_every,
        retain_s=args.retain,
    )
    if args.name:
        settings.name = args.name
    worker = IngestWorker(engine, stream, settings, stream_url=args.stream)
    if args.reserve:
        shards = worker.reserve()
        sys.stdout.write(
            f"reserved the stream for generation {generation} (group {worker.group}) on "
            f"shards {','.join(map(str, shards))}\n"
        )
        return 0
    stopping = False

    def stop(*_: object) -> None:
        nonlocal stopping
        stopping = True

    signal.signal(signal.SIGTERM, stop)
    signal.signal(signal.SIGINT, stop)
    sys.stderr.write(
        f"ingest {settings.name}: generation {generation}, group {worker.group}, "
        f"shards {args.shards}\n"
    )
    worker.run(lambda: stopping)
    totals = worker.totals
    sys.stderr.write(
        f"ingest {settings.name}: stopped after {totals['events']:,} events, "
        f"{totals['dead_letters']:,} dead letters, {totals['skipped']:,} before --from-ts\n"
    )
    return 0


def _parse_shards(text: str) -> tuple[int, ...] | None:
    if text == "all":
        return None
    try:
        shards = tuple(int(part) for part in text.split(",") if part)
    except ValueError:
        raise UsageError(f"--shards {text!r}: write all, or shard numbers such as 0,1") from None
    if not shards or min(shards) < 0:
        raise UsageError(f"--shards {text!r}: shard numbers start at 0")
    return shards


def _generations(args: argparse.Namespace) -> int:
    with open_store(args.store) as store:
        return _generation_action(args, Generations(store))


def _generation_action(args: argparse.Namespace, generations: Generations) -> int:
    if args.action == "list":
        for row in generations.list():
            mark = "*" if row["active"] else " "
            sys.stdout.write(
                f"{mark} {row['name']:<20} {row['events']:>12,} events  "
                f"{_iso(row['first_ts'])} .. {_iso(row['last_ts'])}  ({row['source']})\n"
            )
        return 0
    if not args.name:
        raise UsageError(f"windvane generations {args.action} needs a generation name")
    if args.action == "activate":
        generations.activate(args.name)
        sys.stdout.write(f"{args.name} is now the active generation\n")
    else:
        deleted = generations.drop(args.name)
        if not parse_store_url(args.store).embedded:
            with contextlib.closing(open_stream(args.store)) as stream:
                drop_consumer_groups(stream, args.name)
        sys.stdout.write(f"dropped generation {args.name}: {deleted:,} keys deleted\n")
    return 0


def _iso(ts: float | None) -> str:
    if ts is None:
        return "-" * 20
    return datetime.fromtimestamp(ts, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


__all__: Sequence[str] = ["add_ingest_commands"]
