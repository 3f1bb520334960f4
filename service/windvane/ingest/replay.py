"""Replay: apply event logs to a store in batches, for backfills and rebuilds.

A line that cannot be applied is never half-applied: it is validated whole first,
then either becomes part of a batch or goes to the rejects file with its file, line
number and reason. Batches change nothing but the number of round trips: the state
after a replay is the same for any batch size.

A replay that stops part way (the store goes away, the rejects file or a log fails,
Ctrl-C) says exactly how far it got: every line through ``ReplayStats.through`` is
applied (its batch confirmed by the store) or rejected (its record in the rejects
file), and no line after it, so that ``resume_after`` that point neither loses nor
counts twice. Only a batch the store failed on while it was sent or confirmed is in
doubt (some of its writes may have been applied), and ``ReplayStopped.in_doubt`` says
which lines.
"""

from __future__ import annotations

import contextlib
import gc
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

from windvane.engine import Engine, PendingBatch
from windvane.errors import BadEvent, StoreError, UsageError, WindvaneError
from windvane.ingest.logfile import LogUnreadable, check_logs, read_lines
from windvane.ingest.rejects import RejectsFile, RejectsMark, RejectsUnwritable
from windvane.inputs.events import Event, parse_event_line

DEFAULT_BATCH_SIZE = 5000


@dataclass(frozen=True)
class LogPosition:
    """One line of a replay's logs: ``index`` into its paths, ``path`` as given there."""

    index: int
    path: str
    line: int

    def __str__(self) -> str:
        return f"{self.path}:{self.line}"


@dataclass
class ReplayStats:
    """``lines`` counts lines read as they are read (for progress); the other counts and
    ``through`` move only when a batch is confirmed, so they always agree."""

    lines: int = 0
    applied: int = 0
    rejected: int = 0
    after_until: int = 0
    by_kind: Counter[str] = field(default_factory=Counter)
    first_ts_s: float | None = None
    last_ts_s: float | None = None
    through: LogPosition | None = None
    started_s: float = field(default_factory=time.monotonic)
    elapsed_s: float = 0.0

    @property
    def events_per_s(self) -> float:
        elapsed = self.elapsed_s or (time.monotonic() - self.started_s)
        return self.lines / elapsed if elapsed > 0 else 0.0


class ReplayStopped(WindvaneError):
    """A replay stopped part way by ``cause`` (a ``KeyboardInterrupt`` too), after it had
    applied or rejected something.

    Every line through ``stats.through`` is applied or rejected, and no line after it,
    except for ``in_doubt``: the lines after ``stats.through`` through ``in_doubt`` went
    to the store, which failed before confirming them, so some of their writes may
    have been applied.
    """

    def __init__(
        self, cause: BaseException, stats: ReplayStats, in_doubt: LogPosition | None
    ) -> None:
        self.cause = cause
        self.stats = stats
        self.in_doubt = in_doubt
        super().__init__(str(cause) or type(cause).__name__)


ProgressCallback = Callable[[ReplayStats, str], None]


def replay(
    engine: Engine,
    paths: Sequence[str],
    rejects: RejectsFile,
    batch_size: int = DEFAULT_BATCH_SIZE,
    progress: ProgressCallback | None = None,
    until_s: float | None = None,
    resume_after: LogPosition | None = None,
) -> ReplayStats:
    """Apply every valid event of ``paths`` in order; rejected lines go to ``rejects``.

    With ``until_s``, events at or after that time are left out (and counted), so that a
    rebuilt generation can be topped up from the stream from exactly that time on.
    With ``resume_after``, every line up to and including that one is passed over (the
    logs before its file are not opened): a replay that stopped goes on from the
    ``through`` it reported. An error once something was applied raises
    ``ReplayStopped``; before that, the error itself.
    """
    if batch_size < 1:
        raise ValueError("batch_size must be at least 1")
    first = 0
    if resume_after is not None:
        if not 0 <= resume_after.index < len(paths) or paths[resume_after.index] != (
            resume_after.path
        ):
            raise UsageError(f"cannot resume after {resume_after}: not one of the logs given")
        first = resume_after.index
    check_logs(paths[first:])
    stats = ReplayStats(through=resume_after)
    writer = _Overlapped(engine, rejects, stats)
    # A replay makes millions of short-lived objects and no reference cycles, so the
    # cycle collector only spends time scanning them (about a third of the run).
    collecting = gc.isenabled()
    gc.disable()
    try:
        for index in range(first, len(paths)):
            skip = resume_after.line if resume_after and index == resume_after.index else 0
            _replay_file(index, paths[index], skip, batch_size, progress, until_s, stats, writer)
        writer.finish()
    except (WindvaneError, OSError, KeyboardInterrupt) as exc:
        stats.elapsed_s = time.monotonic() - stats.started_s
        in_doubt = writer.stop()
        if stats.through == resume_after and in_doubt is None:
            raise
        raise ReplayStopped(exc, stats, in_doubt) from exc
    finally:
        writer.abandon()
        if collecting:
            gc.enable()
    stats.elapsed_s = time.monotonic() - stats.started_s
    return stats


def _replay_file(
    index: int,
    path: str,
    skip: int,
    batch_size: int,
    progress: ProgressCallback | None,
    until_s: float | None,
    stats: ReplayStats,
    writer: _Overlapped,
) -> None:
    rejects = writer.rejects
    batch: list[Event] = []
    rejected = after_until = 0
    number = skip
    try:
        for number, line in read_lines(path, skip):
            stats.lines += 1
            try:
                event = parse_event_line(line)
            except BadEvent as exc:
                rejects.write(path, number, exc.field, exc.reason, line)
                rejected += 1
                continue
            if until_s is not None and event.ts_s >= until_s:
                after_until += 1
                continue
            batch.append(event)
            if len(batch) >= batch_size:
                writer.submit(batch, LogPosition(index, path, number), rejected, after_until)
                batch, rejected, after_until = [], 0, 0
                if progress is not None:
                    progress(stats, path)
    except LogUnreadable:
        # The log is at fault, not the store: what was read before the fault is applied,
        # so the replay stops exactly at the last line read.
        if number > skip:
            writer.submit(batch, LogPosition(index, path, number), rejected, after_until)
        writer.finish()
        raise
    if number > skip:
        writer.submit(batch, LogPosition(index, path, number), rejected, after_until)
    if progress is not None:
        progress(stats, path)


@dataclass(slots=True)
class _Mark:
    """What a batch settles once confirmed: every line through ``position``."""

    position: LogPosition
    events: int
    kinds: Counter[str]
    first_ts_s: float
    last_ts_s: float
    rejected: int
    after_until: int
    rejects: RejectsMark


class _Overlapped:
    """Keeps one batch on the wire while the next is parsed, in one thread.

    The store works on batch N while this process reads, decodes and routes batch N+1;
    its replies are read just before N+1 is sent. A thread did the same before, and
    cost more in handing the interpreter lock back and forth than it saved.

    The rejects of a batch's lines are flushed before it is sent, and its lines count
    as handled once the store confirms it; ``in_doubt`` is set while a batch is being
    sent or confirmed, so that a failure there is known to leave it in doubt.
    """

    def __init__(self, engine: Engine, rejects: RejectsFile, stats: ReplayStats) -> None:
        self.engine = engine
        self.rejects = rejects
        self.stats = stats
        self.pending: tuple[PendingBatch, _Mark] | None = None
        self.in_doubt: LogPosition | None = None
        self.kept = rejects.savepoint()

    def submit(
        self, batch: list[Event], position: LogPosition, rejected: int, after_until: int
    ) -> None:
        """Send ``batch``, the events among the lines since the last submit through
        ``position``, of which ``rejected`` went to the rejects file and ``after_until``
        were left out."""
        engine = self.engine
        writes = engine.router.batch(batch) if batch else None
        kinds = Counter([event.kind for event in batch])
        self.finish()
        saved = self.rejects.savepoint()
        if writes is None:
            self._confirm(_Mark(position, 0, kinds, 0.0, 0.0, rejected, after_until, saved))
            return
        mark = _Mark(
            position,
            len(batch),
            kinds,
            writes.first_ts_s,
            writes.last_ts_s,
            rejected,
            after_until,
            saved,
        )
        self.in_doubt = position
        self.pending = (engine.send(writes), mark)
        self.in_doubt = None

    def finish(self) -> None:
        if self.pending is None:
            return
        pending, mark = self.pending
        self.in_doubt = mark.position
        self.pending = None
        pending.wait()
        self.in_doubt = None
        self._confirm(mark)

    def _confirm(self, mark: _Mark) -> None:
        stats = self.stats
        stats.applied += mark.events
        stats.rejected += mark.rejected
        stats.after_until += mark.after_until
        stats.by_kind.update(mark.kinds)
        if mark.events:
            if stats.first_ts_s is None or mark.first_ts_s < stats.first_ts_s:
                stats.first_ts_s = mark.first_ts_s
            if stats.last_ts_s is None or mark.last_ts_s > stats.last_ts_s:
                stats.last_ts_s = mark.last_ts_s
        stats.through = mark.position
        self.kept = mark.rejects

    def stop(self) -> LogPosition | None:
        """Settle what can be settled after a failure; returns the batch left in doubt.

        A batch still on the wire is confirmed unless the store itself failed (then it
        is already in doubt); rejects of lines after the settled point are taken back.
        """
        if self.pending is not None and self.in_doubt is None:
            with contextlib.suppress(StoreError, KeyboardInterrupt):
                self.finish()
        # Failing to cut the file back leaves records a resumed run writes again; the
        # error that stopped the replay is still the one to report.
        with contextlib.suppress(RejectsUnwritable):
            self.rejects.discard_after(self.kept)
        return self.in_doubt

    def abandon(self) -> None:
        """Drop the connection of a batch nobody will confirm (a failure outside ``stop``)."""
        if self.pending is not None:
            self.pending[0].abandon()
            self.pending = None
