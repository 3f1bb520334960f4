"""The ``windvane`` command: check definitions, replay logs, answer lookups.

Model commands live in ``cli.models``, the service commands in ``cli.serve``, the
stream and generation commands in ``cli.ingest``; options they share in ``cli.options``.

Every error a user can cause is printed as one line without a traceback; definition
and usage mistakes exit with status 2, an unreachable store with status 1.
"""

from __future__ import annotations

import argparse
import os
import shlex
import sys
from collections.abc import Sequence
from datetime import UTC, datetime
from importlib import metadata

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
from windvane.ingest.replay import (
    DEFAULT_BATCH_SIZE,
    LogPosition,
    ReplayStats,
    ReplayStopped,
    replay,
)
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
    parser.add_argument(
        "--version", action="version", version=f"windvane {metadata.version('windvane')}"
    )
    commands = parser.add_subparsers(title="commands", metavar="COMMAND")

    check = commands.add_parser("check", help="validate feature definitions and print the plan")
    check.add_argument(
        "defs", nargs="?", default=DEFAULT_DEFS, metavar="DIR",
        help="feature definition directory (default featuredefs)",
    )  # fmt: skip
    check.set_defaults(run=_check)

    rep = commands.add_parser("replay", help="apply event logs (JSON Lines, plain or gzip)")
    rep.add_argument("logs", nargs="+", metavar="LOG", help="JSON Lines logs, plain or .gz, or -")
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
    rep.add_argument(
        "--resume-from",
        metavar="FILE:LINE",
        help="go on after a replay that stopped: give the same logs in the same order and "
        "the point it printed; every line up to and including line LINE of FILE (and every "
        "log listed before FILE) is skipped, the rest applied, and --rejects is appended "
        "to rather than emptied; LINE alone will do with a single log",
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
    feat.add_argument(
        "--rejects", default="windvane-rejects.jsonl", metavar="PATH",
        help="where lines of --replay that cannot be applied go (default %(default)s)",
    )  # fmt: skip
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
    resume = _resume_point(args.resume_from, args.logs)
    with Engine.open(args.defs, args.store, args.generation) as engine:
        try:
            stats = _run_replay(
                engine, args.logs, args.rejects, args.batch, args.quiet, until, resume
            )
        except ReplayStopped as stop:
            summary = _summary(stop.stats, args.logs, args.rejects, engine, resume, stop)
            sys.stdout.write(summary + "\n")
            sys.stdout.flush()
            return _report_stop(stop)
        sys.stdout.write(_summary(stats, args.logs, args.rejects, engine, resume) + "\n")
    return 0


def _run_replay(
    engine: Engine,
    logs: Sequence[str],
    rejects_path: str,
    batch: int,
    quiet: bool,
    until_s: float | None = None,
    resume: LogPosition | None = None,
) -> ReplayStats:
    _check_rejects_path(rejects_path, logs)
    with RejectsFile(rejects_path, append=resume is not None) as rejects:
        if quiet:
            return replay(engine, logs, rejects, batch, until_s=until_s, resume_after=resume)
        with ReplayProgress() as progress:
            return replay(engine, logs, rejects, batch, progress, until_s, resume)


def _resume_point(text: str | None, logs: Sequence[str]) -> LogPosition | None:
    """``FILE:LINE`` names the file, so that with several logs the point cannot land in the
    wrong one; a bare ``LINE`` is unambiguous only with a single log."""
    if text is None:
        return None
    path, colon, number = text.rpartition(":")
    if not (number.isascii() and number.isdigit() and int(number) >= 1):
        raise UsageError(
            f"--resume-from {text}: expected FILE:LINE (or LINE with a single log), "
            "LINE a line number from 1"
        )
    line = int(number)
    if not colon:
        if len(logs) > 1:
            raise UsageError(
                f"--resume-from {text}: with several logs, say which one: --resume-from FILE:{line}"
            )
        return LogPosition(0, logs[0], line)
    found = [n for n, log in enumerate(logs) if log == path]
    if not found:
        found = [n for n, log in enumerate(logs) if _same_file(log, path)]
    if not found:
        raise UsageError(f"--resume-from {text}: {path} is not one of the logs given")
    if len(found) > 1:
        raise UsageError(f"--resume-from {text}: {path} is given more than once among the logs")
    return LogPosition(found[0], logs[found[0]], line)


def _same_file(a: str, b: str) -> bool:
    try:
        return a != "-" and b != "-" and os.path.samefile(a, b)
    except OSError:
        return False


def _check_rejects_path(rejects_path: str, logs: Sequence[str]) -> None:
    """Opening the rejects file empties it: it must not be one of the logs to read."""
    for log in logs:
        if _same_file(log, rejects_path):
            raise UsageError(f"--rejects {rejects_path} is the log {log}; choose another path")


def _report_stop(stop: ReplayStopped, resumable: bool = True) -> int:
    """What stopped the replay, how far it got and (``resumable``: for ``windvane replay``)
    how to go on, on stderr; returns the exit status for it."""
    cause = stop.cause
    through = stop.stats.through
    lines = ["interrupted" if isinstance(cause, KeyboardInterrupt) else str(stop)]
    if stop.in_doubt is None:
        where = f"through {through}" if through else "before the first line"
        lines.append(f"stopped with every line {where} applied or rejected and none after it")
    else:
        after = f"after {through}" if through else "from the start"
        lines.append(
            f"the lines {after} through {stop.in_doubt} went to the store, which did not "
            "confirm them: some of their writes may be in the store"
        )
    if resumable:
        again = "run the same command again"
        if through is not None:
            again = "run the same command with --resume-from " + shlex.quote(str(through))
        if stop.in_doubt is None:
            lines.append(f"to go on, {again}")
        else:
            lines.append(
                "a resumed run applies them again; to be exact, replay from the start into "
                f"a new generation (--generation NAME); to go on anyway, {again}"
            )
    sys.stderr.write("".join(f"windvane: {line}\n" for line in lines))
    if isinstance(cause, KeyboardInterrupt):
        return 130
    return 2 if isinstance(cause, UsageError) else 1


def _features(args: argparse.Namespace) -> int:
    failed = 0
    with Engine.open(args.defs, args.store, args.generation) as engine:
        if args.replay:
            try:
                stats = _run_replay(
                    engine, args.replay, args.rejects, DEFAULT_BATCH_SIZE, quiet=True
                )
            except ReplayStopped as stop:
                summary = _summary(stop.stats, args.replay, args.rejects, engine, stop=stop)
                sys.stderr.write(summary + "\n")
                return _report_stop(stop, resumable=False)
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


def _summary(
    stats: ReplayStats,
    logs: Sequence[str],
    rejects_path: str,
    engine: Engine,
    resume: LogPosition | None = None,
    stop: ReplayStopped | None = None,
) -> str:
    kinds = " · ".join(f"{kind} {count:,}" for kind, count in stats.by_kind.most_common())
    took = f"{stats.elapsed_s:.1f} s ({stats.events_per_s:,.0f} lines/s)"
    if stop is None:
        head = f"replayed {stats.lines:,} lines from {len(logs)} file(s) in {took}"
    elif stats.through is None:
        head = f"replay stopped after {took}, before any line was applied or rejected"
    else:
        head = (
            f"replay stopped after {took}: "
            f"every line through {stats.through} is applied or rejected"
        )
    lines = [
        head,
        f"  applied  {stats.applied:>12,}  ({kinds or 'none'})",
        f"  rejected {stats.rejected:>12,}  -> {rejects_path}",
    ]
    if resume is not None:
        lines.append(f"  skipped  every line through {resume} (--resume-from)")
    if stop is not None and stop.in_doubt is not None:
        lines.append(f"  in doubt the lines after that through {stop.in_doubt} (not confirmed)")
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
