"""The one bench command: run every benchmark there is, print the table, write the report.

    python -m bench.run [--smoke] [--only lookup,replay,ingest,memory] [--out DIR]

A full run of every benchmark writes its report to bench/results/ (the figures the
docs quote, committed); a smoke run or a partial one (--only) writes under
bench/results/work/ unless --out says otherwise, so it never overwrites them.

A benchmark that crashes is reported as failed and the others still run; the exit
status is 1 only then. A figure short of its target is reported, not fatal: targets
are for reading, and a smoke run (tiny sizes, one short run) judges none of them.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import signal
import time
import traceback
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from bench.common import RESULTS, Context, Result
from bench.report import markdown_table, number, target_text, write_report

BENCHMARKS = {
    "lookup": "bench.lookup_bench",
    "replay": "bench.replay_bench",
    "ingest": "bench.ingest_bench",
    "memory": "bench.memory_bench",
    "mixed": "bench.mixed_bench",
}


def parse_args(argv: Sequence[str] | None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(prog="python -m bench.run", description=__doc__)
    parser.add_argument("--smoke", action="store_true", help="tiny sizes, one run, no targets")
    parser.add_argument("--only", metavar="NAMES", help=f"comma-separated: {','.join(BENCHMARKS)}")
    parser.add_argument("--out", metavar="DIR", type=Path, help="where the report goes")
    args = parser.parse_args(argv)
    names = [n.strip() for n in (args.only or ",".join(BENCHMARKS)).split(",") if n.strip()]
    unknown = [n for n in names if n not in BENCHMARKS]
    if unknown:
        parser.error(f"unknown benchmark {', '.join(unknown)}; choose from {', '.join(BENCHMARKS)}")
    args.names = list(dict.fromkeys(names))
    if args.out is None:
        partial = args.smoke or set(args.names) != set(BENCHMARKS)
        args.out = RESULTS / "work" / ("smoke" if args.smoke else "partial") if partial else RESULTS
    return args


def run_one(name: str, ctx: Context) -> tuple[list[Result], dict[str, Any]]:
    """Run one benchmark module; a crash becomes a ``failed`` entry, not an exception."""
    module_name = BENCHMARKS[name]
    if importlib.util.find_spec(module_name) is None:
        print(f"-- {name}: {module_name} does not exist yet, skipped")
        return [], {"status": "absent"}
    print(f"-- {name}: running", flush=True)
    started = time.monotonic()
    try:
        found = importlib.import_module(module_name).run(ctx)
    except Exception as exc:
        traceback.print_exc()
        elapsed = round(time.monotonic() - started, 1)
        error = f"{type(exc).__name__}: {exc}"
        print(f"-- {name}: crashed after {elapsed} s: {error}", flush=True)
        return [], {"status": "failed", "error": error, "elapsed_s": elapsed}
    elapsed = round(time.monotonic() - started, 1)
    print(f"-- {name}: {len(found)} results in {elapsed} s", flush=True)
    return found, {"status": "ok", "elapsed_s": elapsed}


def judged(result: Result) -> str:
    """The figure a target is judged on: the ratio for ratio targets, else the value."""
    if result.target is not None and result.target[0].endswith("ratio"):
        return "no floor" if result.ratio is None else f"ratio {result.ratio:.2f}"
    return f"{number(result.value.median)} {result.unit}"


def _terminated(signum: int, frame: object) -> None:
    """SIGTERM (a cancelled CI job) unwinds like Ctrl-C, so every server started is stopped."""
    raise SystemExit(128 + signum)


def main(argv: Sequence[str] | None = None) -> int:
    args = parse_args(argv)
    signal.signal(signal.SIGTERM, _terminated)
    ctx = Context(smoke=args.smoke, runs=1 if args.smoke else 3)
    ctx.work.mkdir(parents=True, exist_ok=True)
    results: list[Result] = []
    benchmarks: dict[str, dict[str, Any]] = {}
    for name in args.names:
        found, benchmarks[name] = run_one(name, ctx)
        results += found
    failed = {n: b["error"] for n, b in benchmarks.items() if b["status"] == "failed"}
    print()
    print(markdown_table(results, ctx.smoke, failed))
    print()
    for path in write_report(results, ctx, benchmarks, args.out):
        print(f"wrote {path}")
    for note in ctx.notes:
        print(f"note: {note}")
    for result in results:
        if result.target is not None:
            wanted = target_text(result.target)
            print(f"{result.status(ctx.smoke):5}  {result.name}: {wanted} ({judged(result)})")
    for name, error in failed.items():
        print(f"FAILED {name}: {error}")
    return 1 if failed else 0


if __name__ == "__main__":
    raise SystemExit(main())
