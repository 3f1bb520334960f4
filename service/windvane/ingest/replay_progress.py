"""Progress of a replay: a live bar on a terminal, a plain line every few seconds otherwise."""

from __future__ import annotations

import sys
import time
from typing import TextIO

from rich.console import Console
from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

from windvane.ingest.replay import ReplayStats


class ReplayProgress:
    def __init__(self, stream: TextIO | None = None, every_s: float = 5.0) -> None:
        self.stream = stream or sys.stderr
        self.every_s = every_s
        self._last_s = 0.0
        self._progress: Progress | None = None
        self._task = None
        if self.stream.isatty():
            self._progress = Progress(
                SpinnerColumn(),
                TextColumn("{task.description}"),
                TextColumn("{task.fields[events]:>12,} events"),
                TextColumn("{task.fields[rate]:>9,.0f} events/s"),
                TextColumn("{task.fields[rejected]:>7,} rejected"),
                TimeElapsedColumn(),
                console=Console(file=self.stream),
                transient=False,
            )

    def __enter__(self) -> ReplayProgress:
        if self._progress is not None:
            self._progress.start()
            self._task = self._progress.add_task("replay", events=0, rate=0.0, rejected=0)
        return self

    def __call__(self, stats: ReplayStats, path: str) -> None:
        if self._progress is not None and self._task is not None:
            self._progress.update(
                self._task,
                description=path,
                events=stats.lines,
                rate=stats.events_per_s,
                rejected=stats.rejected,
            )
            return
        now = time.monotonic()
        if now - self._last_s >= self.every_s:
            self._last_s = now
            self.stream.write(
                f"replay {path}: {stats.lines:,} events, {stats.events_per_s:,.0f} events/s, "
                f"{stats.rejected:,} rejected\n"
            )
            self.stream.flush()

    def __exit__(self, *exc: object) -> None:
        if self._progress is not None:
            self._progress.stop()
