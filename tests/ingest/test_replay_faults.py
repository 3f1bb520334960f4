"""Replay under faults: it applies nothing or stops at an exact line, and resumes from it.

Each stopped run is checked against a clean replay of exactly the lines it reports as
applied, and the resumed run against a clean replay of the whole log: a line applied
twice would double session depths and window counts, a line lost would show as well.
"""

from __future__ import annotations

import gzip
import os
import re
import resource
import subprocess
import sys
from pathlib import Path

import orjson
import pytest

from tests.conftest import FEATUREDEFS, ROOT
from tests.redis_server import RedisServer
from tests.support import BAD_LINES, compare_generations, dump_state, good_lines, wait_until
from windvane.definitions.plan import load_plan
from windvane.engine import Engine
from windvane.ingest.logfile import LogUnreadable
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import LogPosition, ReplayStopped, replay
from windvane.store import open_store

RESUME = re.compile(r"--resume-from (\S+):(\d+)$", re.MULTILINE)


def run_cli(
    *args: str, stdin: bytes = b"", file_size_limit: int | None = None
) -> subprocess.CompletedProcess[bytes]:
    """The real command; ``file_size_limit`` makes every file it writes fail past that many
    bytes, as a full disk would (Python ignores SIGXFSZ, so the write raises EFBIG)."""

    def limit() -> None:
        if file_size_limit is not None:
            resource.setrlimit(resource.RLIMIT_FSIZE, (file_size_limit, file_size_limit))

    return subprocess.run(
        [sys.executable, "-m", "windvane", *args, "--defs", str(FEATUREDEFS), "--quiet"],
        input=stdin,
        capture_output=True,
        cwd=ROOT,
        env={**os.environ, "PYTHONPATH": str(ROOT / "service")},
        timeout=120,
        preexec_fn=limit,
    )


def mixed_lines(good: int, bad_every: int, seed: int = 3) -> list[bytes]:
    """Good lines with a malformed one after every ``bad_every``-th."""
    lines: list[bytes] = []
    for n, line in enumerate(good_lines(good, seed=seed), start=1):
        lines.append(line)
        if n % bad_every == 0:
            lines.append(BAD_LINES[(n // bad_every) % len(BAD_LINES)][0])
    return lines


def is_bad(line: bytes) -> bool:
    return any(line == bad for bad, _ in BAD_LINES)


def bad_numbers(lines: list[bytes], through: int) -> list[int]:
    return [n for n, line in enumerate(lines[:through], start=1) if is_bad(line)]


def reference(url: str, generation: str, lines: list[bytes], tmp_path: Path) -> Engine:
    """A clean replay of exactly ``lines`` into its own generation of the same store."""
    engine = Engine(load_plan(FEATUREDEFS), open_store(url), generation)
    log = tmp_path / f"{generation}.jsonl"
    log.write_bytes(b"".join(line + b"\n" for line in lines))
    with RejectsFile(tmp_path / f"{generation}-rejects.jsonl") as rejects:
        replay(engine, [str(log)], rejects, batch_size=1000)
    return engine


def rejected_lines(path: Path) -> list[int]:
    return [orjson.loads(record)["line"] for record in path.read_bytes().splitlines()]


def resume_point(stderr: bytes) -> tuple[str, int]:
    found = RESUME.findall(stderr.decode())
    assert len(found) == 1, stderr.decode()
    return found[0][0], int(found[0][1])


def applied_count(stdout: bytes) -> int:
    found = re.search(r"^  applied +([\d,]+)", stdout.decode(), re.MULTILINE)
    assert found, stdout.decode()
    return int(found.group(1).replace(",", ""))


@pytest.mark.parametrize("where", ["device", "under_a_file", "directory"])
def test_an_unwritable_rejects_file_stops_the_replay_before_anything_is_applied(
    redis_server, tmp_path: Path, where: str
) -> None:
    url = redis_server.url
    open_store(url).flush()
    log = tmp_path / "log.jsonl"
    log.write_bytes(b"\n".join(mixed_lines(600, bad_every=50)) + b"\n")
    rejects, reason = {
        # /dev/full takes the open and refuses every write: ENOSPC (Linux null(4) man page).
        "device": ("/dev/full", "No space left on device"),
        "under_a_file": (
            f"{log}/rejects.jsonl",
            f"cannot make its directory {log} (File exists)",
        ),
        "directory": (str(tmp_path), "Is a directory"),
    }[where]
    done = run_cli("replay", str(log), "--store", url, "--rejects", rejects)
    assert done.returncode == 2
    assert done.stderr.decode() == f"windvane: cannot write rejects file {rejects}: {reason}\n"
    assert done.stdout == b""
    assert list(open_store(url).scan_keys("*")) == []


# (bad line every, batch, bytes the file may reach): with a dozen records fitting, the
# write fails when a batch's rejects are flushed before it is sent; with many rejects per
# batch, the write fails while the next batch is read and one batch is on the wire.
FILLS_UP = {"between_batches": (100, 250, 2_500), "while_reading": (10, 1000, 30_000)}


@pytest.mark.parametrize("when", sorted(FILLS_UP))
def test_a_rejects_file_that_fills_up_stops_at_an_exact_line_and_resumes(
    redis_server, tmp_path: Path, when: str
) -> None:
    url = redis_server.url
    open_store(url).flush()
    bad_every, batch, size_limit = FILLS_UP[when]
    lines = mixed_lines(3000, bad_every=bad_every)
    log = tmp_path / "log.jsonl"
    log.write_bytes(b"\n".join(lines) + b"\n")
    rejects = tmp_path / "rejects.jsonl"

    stopped = run_cli(
        "replay", str(log), "--store", url, "--batch", str(batch), "--rejects", str(rejects),
        file_size_limit=size_limit,
    )  # fmt: skip
    assert stopped.returncode == 1, stopped.stderr
    assert b"Traceback" not in stopped.stderr
    assert stopped.stderr.decode().startswith(
        f"windvane: cannot write rejects file {rejects}: File too large\n"
    )
    path, through = resume_point(stopped.stderr)
    assert path == str(log)
    assert 0 < through < len(lines)
    assert f"every line through {log}:{through} is applied or rejected" in stopped.stdout.decode()
    handled = lines[:through]
    assert applied_count(stopped.stdout) == sum(not is_bad(line) for line in handled)
    # The file holds whole records, exactly those of the lines handled.
    assert rejected_lines(rejects) == bad_numbers(lines, through)
    main = Engine(load_plan(FEATUREDEFS), open_store(url), "main")
    assert dump_state(main)
    assert compare_generations(main, reference(url, "part", handled, tmp_path)) == []

    resumed = run_cli(
        "replay", str(log), "--store", url, "--batch", str(batch), "--rejects", str(rejects),
        "--resume-from", f"{log}:{through}",
    )  # fmt: skip
    assert resumed.returncode == 0, resumed.stderr
    assert applied_count(resumed.stdout) == sum(not is_bad(line) for line in lines[through:])
    assert compare_generations(main, reference(url, "whole", lines, tmp_path)) == []
    assert rejected_lines(rejects) == bad_numbers(lines, len(lines))


def cut_gzip(path: Path, lines: list[bytes]) -> bytes:
    """Writes the gzip of ``lines`` cut in the middle of its bytes; returns it whole."""
    whole = gzip.compress(b"\n".join(lines) + b"\n")
    path.write_bytes(whole[: len(whole) // 2])
    return whole


def test_a_cut_gzip_reports_exactly_what_was_applied_and_resumes(
    redis_server, tmp_path: Path
) -> None:
    url = redis_server.url
    open_store(url).flush()
    lines = mixed_lines(4000, bad_every=97)
    log = tmp_path / "log.jsonl.gz"
    whole = cut_gzip(log, lines)
    rejects = tmp_path / "rejects.jsonl"

    stopped = run_cli(
        "replay", str(log), "--store", url, "--batch", "300", "--rejects", str(rejects)
    )
    assert stopped.returncode == 2, stopped.stderr
    assert b"Traceback" not in stopped.stderr
    path, through = resume_point(stopped.stderr)
    assert path == str(log)
    assert 0 < through < len(lines)
    assert stopped.stderr.decode().startswith(
        f"windvane: cannot read log {log} past line {through}: Compressed file ended"
    )
    handled = lines[:through]
    assert applied_count(stopped.stdout) == sum(not is_bad(line) for line in handled)
    assert rejected_lines(rejects) == bad_numbers(lines, through)
    main = Engine(load_plan(FEATUREDEFS), open_store(url), "main")
    assert compare_generations(main, reference(url, "part", handled, tmp_path)) == []

    log.write_bytes(whole)  # the complete file, copied again
    resumed = run_cli(
        "replay", str(log), "--store", url, "--batch", "300", "--rejects", str(rejects),
        "--resume-from", str(through),
    )  # fmt: skip
    assert resumed.returncode == 0, resumed.stderr
    assert compare_generations(main, reference(url, "whole", lines, tmp_path)) == []
    assert rejected_lines(rejects) == bad_numbers(lines, len(lines))


def test_a_cut_gzip_in_process_on_both_backends(store_url: str, tmp_path: Path) -> None:
    lines = mixed_lines(2500, bad_every=61, seed=8)
    log = tmp_path / "log.jsonl.gz"
    whole = cut_gzip(log, lines)
    main = Engine(load_plan(FEATUREDEFS), open_store(store_url), "main")
    rejects = tmp_path / "rejects.jsonl"
    with RejectsFile(rejects) as out, pytest.raises(ReplayStopped) as stopped:
        replay(main, [str(log)], out, batch_size=200)
    stop = stopped.value
    assert isinstance(stop.cause, LogUnreadable)
    assert stop.in_doubt is None
    assert stop.stats.through is not None
    through = stop.stats.through.line
    assert stop.cause.line == through
    assert 0 < through < len(lines)
    assert stop.stats.applied == sum(not is_bad(line) for line in lines[:through])
    assert stop.stats.rejected == len(bad_numbers(lines, through))
    assert compare_generations(main, reference(store_url, "part", lines[:through], tmp_path)) == []

    log.write_bytes(whole)
    with RejectsFile(rejects, append=True) as out:
        replay(main, [str(log)], out, batch_size=200, resume_after=stop.stats.through)
    assert compare_generations(main, reference(store_url, "whole", lines, tmp_path)) == []
    assert rejected_lines(rejects) == bad_numbers(lines, len(lines))


def test_resuming_several_logs_skips_the_logs_before_the_point(
    store_url: str, tmp_path: Path
) -> None:
    lines = mixed_lines(1200, bad_every=37, seed=5)
    first, second = tmp_path / "a.jsonl", tmp_path / "b.jsonl"
    first.write_bytes(b"\n".join(lines[:500]) + b"\n")
    second.write_bytes(b"\n".join(lines[500:]) + b"\n")
    main = Engine(load_plan(FEATUREDEFS), open_store(store_url), "main")
    logs = [str(first), str(second)]
    # A first run over the first log and 300 lines of the second, as if it stopped there.
    head = tmp_path / "b-head.jsonl"
    head.write_bytes(b"\n".join(lines[500:800]) + b"\n")
    with RejectsFile(tmp_path / "r.jsonl") as out:
        replay(main, [str(first), str(head)], out, batch_size=128)
    with RejectsFile(tmp_path / "r.jsonl", append=True) as out:
        stats = replay(main, logs, out, batch_size=128, resume_after=LogPosition(1, logs[1], 300))
    assert stats.through == LogPosition(1, logs[1], len(lines) - 500)
    assert stats.applied == sum(not is_bad(line) for line in lines[800:])
    assert compare_generations(main, reference(store_url, "whole", lines, tmp_path)) == []


def test_the_store_going_away_leaves_the_unconfirmed_batch_named(tmp_path: Path) -> None:
    """The log comes on stdin, so the replay is known to wait for more when the server dies."""
    server = RedisServer().start()
    try:
        lines = good_lines(1000, seed=4)
        replay_process = subprocess.Popen(
            [
                sys.executable, "-m", "windvane", "replay", "-", "--store", server.url,
                "--defs", str(FEATUREDEFS), "--batch", "100", "--quiet",
                "--rejects", str(tmp_path / "rejects.jsonl"),
            ],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=ROOT,
            env={**os.environ, "PYTHONPATH": str(ROOT / "service")},
        )  # fmt: skip
        assert replay_process.stdin is not None
        replay_process.stdin.write(b"".join(line + b"\n" for line in lines[:600]))
        replay_process.stdin.flush()
        # Six batches sent: the first five confirmed and recorded, the sixth on the wire.
        client = open_store(server.url).client
        assert wait_until(lambda: client.hget("wv:genstats:{g:main}", "events") == b"500", 30)
        client.close()
        server.kill()
        out, err = replay_process.communicate(
            b"".join(line + b"\n" for line in lines[600:]), timeout=120
        )
    finally:
        server.cleanup()
    assert replay_process.returncode == 1
    assert b"Traceback" not in err
    messages = err.decode().splitlines()
    assert messages[0].startswith(f"windvane: the store at {server.url} did not answer")
    assert messages[1].startswith("windvane: the lines after -:500 through -:600 went to the store")
    assert messages[2].endswith("to go on anyway, run the same command with --resume-from -:500")
    assert "every line through -:500 is applied or rejected" in out.decode()
    assert applied_count(out) == 500
