"""What every benchmark shares: the run context, results with their floor and target, timing.

Speed is never judged in absolute terms here (these machines are shared and noisy):
each figure is measured beside its floor, the least work any system answering the
same question must do, in the same run, and reported as a ratio. Each figure is the
median of several runs, with the min and max.
"""

from __future__ import annotations

import statistics
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
RESULTS = ROOT / "bench" / "results"


@dataclass
class Context:
    """Settings of one ``make bench`` run; ``smoke`` shrinks every size and skips targets."""

    smoke: bool = False
    runs: int = 3
    work: Path = field(default_factory=lambda: RESULTS / "work")
    notes: list[str] = field(default_factory=list)

    def size(self, full: int, smoke: int) -> int:
        return smoke if self.smoke else full


@dataclass
class Measure:
    """A figure over several runs: the median, with min and max."""

    median: float
    low: float
    high: float
    samples: list[float]

    @classmethod
    def of(cls, samples: list[float]) -> Measure:
        return cls(statistics.median(samples), min(samples), max(samples), list(samples))


@dataclass
class Result:
    """One benchmark figure, with the floor it is measured against and its target.

    ``target`` is a ``(kind, number)`` pair: ``("min_ratio", 0.7)`` means value/floor must
    be at least 0.7, ``("max_ratio", 1.5)`` at most 1.5, ``("min", 100000)`` the value at
    least that, ``("max", 300)`` at most that.
    """

    name: str
    unit: str
    value: Measure
    floor: Measure | None = None
    target: tuple[str, float] | None = None
    detail: dict[str, Any] = field(default_factory=dict)

    @property
    def ratio(self) -> float | None:
        if self.floor is None or self.floor.median == 0:
            return None
        return self.value.median / self.floor.median

    def status(self, smoke: bool) -> str:
        if self.target is None:
            return ""
        if smoke:
            return "smoke"
        kind, number = self.target
        figure = self.ratio if kind.endswith("ratio") else self.value.median
        if figure is None:
            return "short"
        ok = figure >= number if kind.startswith("min") else figure <= number
        return "pass" if ok else "short"

    def to_dict(self, smoke: bool) -> dict[str, Any]:
        out = asdict(self)
        out["ratio"] = self.ratio
        out["status"] = self.status(smoke)
        return out


def repeat(runs: int, once: Callable[[], float]) -> Measure:
    """Run ``once`` several times; each call returns one sample."""
    return Measure.of([once() for _ in range(runs)])


class Stopwatch:
    def __enter__(self) -> Stopwatch:
        self.started = time.perf_counter()
        return self

    def __exit__(self, *exc: object) -> None:
        self.elapsed_s = time.perf_counter() - self.started


def redis_server_version() -> str:
    """The version of the redis-server on PATH (the one benchmarks start), or "unknown"."""
    import shutil
    import subprocess

    binary = shutil.which("redis-server")
    if binary is None:
        return "unknown"
    done = subprocess.run([binary, "--version"], capture_output=True, text=True, check=False)
    for word in done.stdout.split():
        if word.startswith("v="):
            return word[2:]
    return done.stdout.strip() or "unknown"


def redis_cpu_s(url: str) -> float:
    """CPU seconds the redis-server has used so far (INFO cpu, user plus system)."""
    import redis

    info = redis.Redis.from_url(url).info("cpu")
    return float(info["used_cpu_user"]) + float(info["used_cpu_sys"])
