"""Replay: apply event logs to a store in batches, for backfills and rebuilds.

A line that cannot be applied is never half-applied: it is validated whole first,
then either becomes part of a batch or goes to the rejects file with its file, line
number and reason. Batches change nothing but the number of round trips: the state
after a replay is the same for any batch size.
"""

from __future__ import annotations

import gc
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

from windvane.engine import Engine, PendingBatch
from windvane.errors import BadEvent
from windvane.ingest.logfile import read_lines
from windvane.ingest.rejects import RejectsFile
from windvane.inputs.events import Event, parse_event_line
from windvane.kinds.batch_writes import BatchWrites

DEFAULT_BATCH_SIZE = 5000


@dataclass
class ReplayStats:
    lines: int = 0
    applied: int = 0
    rejected: int = 0
    after_until: int = 0
    by_kind: Counter[str] = field(default_factory=Counter)
    first_ts_s: float | None = None
    last_ts_s: float | None = None
    started_s: float = field(default_factory=time.monotonic)
    elapsed_s: float = 0.0

    @property
    def events_per_s(self) -> float:
        elapsed = self.elapsed_s or (time.monotonic() - self.started_s)
        return self.lines / elapsed if elapsed > 0 else 0.0


ProgressCallback = Callable[[ReplayStats, str], None]


def replay(
    engine: Engine,
    paths: Sequence[str],
    rejects: RejectsFile,
    batch_size: int = DEFAULT_BATCH_SIZE,
    progress: ProgressCallback | None = None,
    until_s: float | None = None,
) -> ReplayStats:
    """Apply every valid event of ``paths`` in order; rejected lines go to ``rejects``.

    With ``until_s``, events at or after that time are left out (and counted), so that a
    rebuilt generation can be topped up from the stream from exactly that time on.
    """
    if batch_size < 1:
        raise ValueError("batch_size must be at least 1")
    stats = ReplayStats()
    batch: list[Event] = []
    # A replay makes millions of short-lived objects and no reference cycles, so the
    # cycle collector only spends time scanning them (about a third of the run).
    collecting = gc.isenabled()
    gc.disable()
    try:
        with _Overlapped(engine) as writer:
            _replay_files(
                engine, paths, rejects, batch_size, progress, until_s, stats, batch, writer
            )
    finally:
        if collecting:
            gc.enable()
    stats.elapsed_s = time.monotonic() - stats.started_s
    return stats


def _replay_files(
    engine: Engine,
    paths: Sequence[str],
    rejects: RejectsFile,
    batch_size: int,
    progress: ProgressCallback | None,
    until_s: float | None,
    stats: ReplayStats,
    batch: list[Event],
    writer: _Overlapped,
) -> None:
    for path in paths:
        for number, line in read_lines(path):
            stats.lines += 1
            try:
                event = parse_event_line(line)
            except BadEvent as exc:
                rejects.write(path, number, exc.field, exc.reason, line)
                stats.rejected += 1
                continue
            if until_s is not None and event.ts_s >= until_s:
                stats.after_until += 1
                continue
            batch.append(event)
            if len(batch) >= batch_size:
                _flush(engine, batch, stats, writer)
                if progress is not None:
                    progress(stats, path)
        if batch:
            _flush(engine, batch, stats, writer)
        if progress is not None:
            progress(stats, path)


class _Overlapped:
    """Keeps one batch on the wire while the next is parsed, in one thread.

    The store works on batch N while this process reads, decodes and routes batch N+1;
    its replies are read just before N+1 is sent. A thread did the same before, and
    cost more in handing the interpreter lock back and forth than it saved.
    """

    def __init__(self, engine: Engine) -> None:
        self.engine = engine
        self.pending: PendingBatch | None = None

    def __enter__(self) -> _Overlapped:
        return self

    def submit(self, writes: BatchWrites) -> None:
        self.finish()
        self.pending = self.engine.send(writes)

    def finish(self) -> None:
        pending, self.pending = self.pending, None
        if pending is not None:
            pending.wait()

    def __exit__(self, kind: object, exc: object, tb: object) -> None:
        if exc is None:
            self.finish()
        elif self.pending is not None:
            self.pending.abandon()
            self.pending = None


def _flush(engine: Engine, batch: list[Event], stats: ReplayStats, writer: _Overlapped) -> None:
    writes = engine.router.batch(batch)
    writer.submit(writes)
    first, last = writes.first_ts_s, writes.last_ts_s
    stats.applied += len(batch)
    stats.by_kind.update([event.kind for event in batch])
    if stats.first_ts_s is None or first < stats.first_ts_s:
        stats.first_ts_s = first
    if stats.last_ts_s is None or last > stats.last_ts_s:
        stats.last_ts_s = last
    batch.clear()
