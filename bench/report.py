"""The written record of a bench run: results.json for tools, results.md for people, a plot.

Everything a reader needs to judge a figure goes beside it: its floor, the ratio, the
target and the machine it ran on, since a figure from a shared machine means little
without the floor measured next to it.
"""

from __future__ import annotations

import dataclasses
import datetime
import os
import platform
from pathlib import Path
from typing import Any

import orjson

from bench.common import RESULTS, Context, Measure, Result, redis_server_version
from bench.load import PERCENTILES, generator_name

LATENCY_KEY = "latency_percentiles_ms"
PLOT_NAME = "lookup_latency.png"


def machine_info(results: list[Result]) -> dict[str, Any]:
    generators = {r.detail["generator"] for r in results if "generator" in r.detail}
    return {
        "cpu_count": os.cpu_count(),
        "python": platform.python_version(),
        "platform": platform.platform(),
        "redis_server": redis_server_version(),
        "load_generator": ", ".join(sorted(generators)) or generator_name(),
    }


def number(x: float) -> str:
    if x != x:  # NaN
        return "n/a"
    if abs(x) >= 100:
        return f"{x:,.0f}"
    if abs(x) >= 1:
        return f"{x:.2f}"
    return f"{x:.3f}"


def spread(measure: Measure | None, unit: str) -> str:
    if measure is None:
        return ""
    if measure.low == measure.high:
        return f"{number(measure.median)} {unit}"
    return f"{number(measure.median)} ({number(measure.low)}–{number(measure.high)}) {unit}"


def target_text(target: tuple[str, float] | None) -> str:
    if target is None:
        return ""
    kind, figure = target
    sign = "≥" if kind.startswith("min") else "≤"
    return f"ratio {sign} {figure:g}" if kind.endswith("ratio") else f"{sign} {figure:g}"


def markdown_table(results: list[Result], smoke: bool, failed: dict[str, str]) -> str:
    lines = [
        "| benchmark | value (median, min–max) | floor | ratio | target | status |",
        "|---|---|---|---|---|---|",
    ]
    for r in results:
        ratio = "" if r.ratio is None else f"{r.ratio:.2f}"
        floor = spread(r.floor, r.unit)
        status = r.status(smoke)
        lines.append(
            f"| {r.name} | {spread(r.value, r.unit)} | {floor} | {ratio} "
            f"| {target_text(r.target)} | {status} |"
        )
    lines += [f"| {name} | crashed: {error} | | | | failed |" for name, error in failed.items()]
    return "\n".join(lines)


def write_report(
    results: list[Result],
    ctx: Context,
    benchmarks: dict[str, dict[str, Any]],
    out: Path = RESULTS,
) -> list[Path]:
    """Write results.json, results.md and (with lookup figures) the latency plot."""
    out.mkdir(parents=True, exist_ok=True)
    failed = {n: b["error"] for n, b in benchmarks.items() if b.get("status") == "failed"}
    machine = machine_info(results)
    context = {**dataclasses.asdict(ctx), "work": str(ctx.work)}
    written = datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds")
    document = {
        "written": written,
        "context": context,
        "machine": machine,
        "benchmarks": benchmarks,
        "results": [r.to_dict(ctx.smoke) for r in results],
    }
    json_path = out / "results.json"
    json_path.write_bytes(orjson.dumps(document, option=orjson.OPT_INDENT_2) + b"\n")

    md_path = out / "results.md"
    mode = "smoke run: sizes shrunk, targets not judged" if ctx.smoke else "full run"
    about = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in machine.items())
    parts = [
        "# windvane benchmarks",
        "",
        f"{written}, {mode}; each figure is the median of {ctx.runs} run(s) with min–max, "
        "beside its floor measured in the same run.",
        "",
        f"Machine: {about}.",
        "",
        markdown_table(results, ctx.smoke, failed),
        "",
    ]
    if ctx.notes:
        parts += ["Notes:", "", *(f"- {note}" for note in ctx.notes), ""]
    md_path.write_text("\n".join(parts))

    paths = [json_path, md_path]
    plot_path = out / PLOT_NAME
    if plot_latency(results, plot_path):
        paths.append(plot_path)
    else:
        plot_path.unlink(missing_ok=True)  # a plot from an earlier run would mislead
    return paths


def plot_latency(results: list[Result], path: Path) -> bool:
    """Latency percentiles of windvane and its floor (median, min–max bars), log scale."""
    source = next((r for r in results if LATENCY_KEY in r.detail), None)
    if source is None:
        return False
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    series: dict[str, dict[str, list[float]]] = source.detail[LATENCY_KEY]
    labels = list(PERCENTILES)
    figure, axes = plt.subplots(figsize=(7, 4.5))
    for offset, (server, by_label) in zip((-0.06, 0.06), series.items(), strict=False):
        medians = [Measure.of(by_label[label]).median for label in labels]
        lows = [m - min(by_label[label]) for m, label in zip(medians, labels, strict=True)]
        highs = [max(by_label[label]) - m for m, label in zip(medians, labels, strict=True)]
        axes.errorbar(
            [i + offset for i in range(len(labels))],
            medians,
            yerr=[lows, highs],
            marker="o",
            capsize=4,
            label=server,
        )
    axes.set_yscale("log")
    axes.set_xticks(range(len(labels)), labels)
    axes.set_xlabel("percentile")
    axes.set_ylabel("latency (ms, log scale)")
    detail = source.detail
    axes.set_title(
        f"POST /v1/lookup, {detail.get('connections')} connections, "
        f"{detail.get('generator')}, {detail.get('runs')} × {detail.get('duration_s')} s"
    )
    axes.grid(True, which="both", axis="y", alpha=0.3)
    axes.legend()
    figure.tight_layout()
    figure.savefig(path, dpi=120)
    plt.close(figure)
    return True
