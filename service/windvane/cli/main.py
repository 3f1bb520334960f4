"""The ``windvane`` command: check definitions, replay logs, answer lookups.

Model commands live in ``cli.models``, the service commands in ``cli.serve``, the
stream and generation commands in ``cli.ingest``; options they share in ``cli.options``.

Every error a user can cause is printed as one line without a traceback; definition
and usage mistakes exit with status 2, an unreachable store with status 1.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from datetime import UTC, datetime

import orjson

from windvane.cli.ingest import add_ingest_commands
from windvane.cli.models import add_model_commands
from windvane.cli.options import DEFAULT_DEFS, positive_int, store_options, time_option
from windvane.cli.serve import add_service_commands
from windvane.definitions.plan import load_plan
from windvane.engine import Engine
from windvane.errors import (
    DefinitionError,
    InputError,
    StoreError,
    UsageError,
    WindvaneError,
)
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import DEFAULT_BATCH_SIZE, ReplayStats, replay
from windvane.ingest.replay_progress import ReplayProgress
from windvane.inputs.lookup_request import parse_lookup_request
from windvane.keys import check_generation


def main(argv: Sequence[str] | None = None) -> int:
    parser = _parser()
    args = parser.parse_args(argv)
    if not hasattr(args, "run"):
        parser.print_help(sys.stderr)
        return 2
    try:
        return args.run(args)
    except DefinitionError as exc:
        for line in exc.problems:
            sys.stderr.write(f"{line}\n")
        return 2
    except UsageError as exc:
        sys.stderr.write(f"windvane: {exc}\n")
        return 2
    except StoreError as exc:
        sys.stderr.write(f"windvane: {exc}\n")
        return 1
    except WindvaneError as exc:
        sys.stderr.write(f"windvane: {exc}\n")
        return 1
    except KeyboardInterrupt:
        sys.stderr.write("windvane: interrupted\n")
        return 130
    except BrokenPipeError:
        return 0


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="windvane",
        description="Streaming behavioural features for real-time bidders, kept in Redis.",
    )
    commands = parser.add_subparsers(title="commands", metavar="COMMAND")

    check = commands.add_parser("check", help="validate feature definitions and print the plan")
    check.add_argument("defs", nargs="?", default=DEFAULT_DEFS, metavar="DIR")
    check.set_defaults(run=_check)

    rep = commands.add_parser("replay", help="apply event logs (JSON Lines, plain or gzip)")
    rep.add_argument("logs", nargs="+", metavar="LOG")
    store_options(rep)
    rep.add_argument(
        "--batch",
        type=positive_int,
        default=DEFAULT_BATCH_SIZE,
        help=f"events per round trip (default {DEFAULT_BATCH_SIZE})",
    )
    rep.add_argument(
        "--rejects",
        default="windvane-rejects.jsonl",
        metavar="PATH",
        help="where rejected lines go (default windvane-rejects.jsonl)",
    )
    rep.add_argument("--quiet", action="store_true", help="no progress display")
    rep.add_argument(
        "--generation",
        metavar="NAME",
        help="build this generation (default: the one lookups read now)",
    )
    rep.add_argument(
        "--until", metavar="TS", help="leave out events at or after TS (epoch s or RFC 3339)"
    )
    rep.set_defaults(run=_replay)

    feat = commands.add_parser(
        "features", help="answer lookup requests: JSON Lines on stdin, features on stdout"
    )
    store_options(feat)
    feat.add_argument(
        "--replay",
        nargs="+",
        default=[],
        metavar="LOG",
        help="replay these logs first (useful with the embedded memory:// store)",
    )
    feat.add_argument("--rejects", default="windvane-rejects.jsonl", metavar="PATH")
    feat.add_argument("--pretty", action="store_true", help="indented JSON for reading")
    feat.add_argument("--generation", metavar="NAME", help="default: the active generation")
    feat.set_defaults(run=_features)

    add_model_commands(commands)
    add_service_commands(commands)
    add_ingest_commands(commands)
    return parser


def _check(args: argparse.Namespace) -> int:
    plan = load_plan(args.defs)
    sys.stdout.write(plan.describe() + "\n")
    return 0


def _replay(args: argparse.Namespace) -> int:
    until = time_option("--until", args.until)
    if args.generation is not None:
        check_generation(args.generation)
    with Engine.open(args.defs, args.store, args.generation) as engine:
        stats = _run_replay(engine, args.logs, args.rejects, args.batch, args.quiet, until)
        sys.stdout.write(_summary(stats, args.logs, args.rejects, engine) + "\n")
    return 0


def _run_replay(
    engine: Engine,
    logs: Sequence[str],
    rejects_path: str,
    batch: int,
    quiet: bool,
    until_s: float | None = None,
) -> ReplayStats:
    with RejectsFile(rejects_path) as rejects:
        if quiet:
            return replay(engine, logs, rejects, batch, until_s=until_s)
        with ReplayProgress() as progress:
            return replay(engine, logs, rejects, batch, progress, until_s)


def _features(args: argparse.Namespace) -> int:
    failed = 0
    with Engine.open(args.defs, args.store, args.generation) as engine:
        if args.replay:
            stats = _run_replay(engine, args.replay, args.rejects, DEFAULT_BATCH_SIZE, quiet=True)
            sys.stderr.write(_summary(stats, args.replay, args.rejects, engine) + "\n")
        out = sys.stdout.buffer
        indent = orjson.OPT_INDENT_2 if args.pretty else 0
        for number, line in enumerate(sys.stdin.buffer, start=1):
            if not line.strip():
                continue
            try:
                try:
                    obj = orjson.loads(line)
                except orjson.JSONDecodeError as exc:
                    raise InputError("", f"not valid JSON ({exc})") from None
                answer = engine.lookup(parse_lookup_request(obj))
            except InputError as exc:
                failed += 1
                sys.stderr.write(f"windvane: stdin line {number}: {exc}\n")
                answer = {"line": number, "error": {"field": exc.field, "reason": exc.reason}}
            out.write(orjson.dumps(answer, option=indent) + b"\n")
            out.flush()
    return 1 if failed else 0


def _summary(stats: ReplayStats, logs: Sequence[str], rejects_path: str, engine: Engine) -> str:
    kinds = " · ".join(f"{kind} {count:,}" for kind, count in stats.by_kind.most_common())
    lines = [
        f"replayed {stats.lines:,} lines from {len(logs)} file(s) in {stats.elapsed_s:.1f} s "
        f"({stats.events_per_s:,.0f} lines/s)",
        f"  applied  {stats.applied:>12,}  ({kinds or 'none'})",
        f"  rejected {stats.rejected:>12,}  -> {rejects_path}",
    ]
    if stats.after_until:
        lines.append(f"  left out {stats.after_until:>12,}  (at or after --until)")
    if stats.first_ts_s is not None and stats.last_ts_s is not None:
        lines.append(f"  event time {_iso(stats.first_ts_s)} .. {_iso(stats.last_ts_s)}")
    lines.append(f"  store {engine.store.url} (generation {engine.layout.generation})")
    if engine.store.url.startswith("memory://"):
        lines.append("  note: the embedded memory:// store lives only as long as this process")
    return "\n".join(lines)


def _iso(ts_s: float) -> str:
    return datetime.fromtimestamp(ts_s, UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


if __name__ == "__main__":
    sys.exit(main())
