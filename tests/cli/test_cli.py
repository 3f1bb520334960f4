"""The windvane command end to end, as a user runs it: replay, then features, on both backends."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import orjson

from tests.conftest import FEATUREDEFS, ROOT
from tests.redis_server import free_port
from tests.support import BAD_LINES, good_lines

NOW = round(time.time())


def windvane(
    *args: str, stdin: bytes = b"", cwd: Path | None = None
) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "windvane", *args],
        input=stdin,
        capture_output=True,
        cwd=cwd or ROOT,
        env={**os.environ, "PYTHONPATH": str(ROOT / "service")},
        timeout=120,
    )


def write_log(path: Path) -> Path:
    lines = good_lines(400) + [bad for bad, _ in BAD_LINES]
    path.write_bytes(b"\n".join(lines) + b"\n")
    return path


def requests() -> bytes:
    rows = [
        {"user": f"user-{n}", "app": "app-1", "ts": NOW, "campaigns": ["camp-0", "camp-1"]}
        for n in range(5)
    ]
    return b"".join(orjson.dumps(r) + b"\n" for r in rows)


def test_replay_then_features_on_a_real_server(redis_server, tmp_path: Path) -> None:
    from windvane.store import open_store

    open_store(redis_server.url).flush()
    log = write_log(tmp_path / "log.jsonl")
    rejects = tmp_path / "rejects.jsonl"
    store = redis_server.url
    done = windvane(
        "replay", str(log), "--store", store, "--defs", str(FEATUREDEFS), "--rejects", str(rejects)
    )
    assert done.returncode == 0, done.stderr
    summary = done.stdout.decode()
    assert "applied           400" in summary
    assert f"rejected {len(BAD_LINES):>12}  -> {rejects}" in summary
    assert len(rejects.read_bytes().splitlines()) == len(BAD_LINES)
    assert b"Traceback" not in done.stderr

    answered = windvane("features", "--store", store, "--defs", str(FEATUREDEFS), stdin=requests())
    assert answered.returncode == 0, answered.stderr
    answers = [orjson.loads(line) for line in answered.stdout.splitlines()]
    assert len(answers) == 5
    assert any(a["features"]["imps_24h"] for a in answers)
    assert all(set(a["campaigns"]) == {"camp-0", "camp-1"} for a in answers)

    # The same answers from the embedded store, loaded in the same process.
    embedded = windvane(
        "features",
        "--store",
        "memory://",
        "--defs",
        str(FEATUREDEFS),
        "--replay",
        str(log),
        "--rejects",
        str(tmp_path / "r2.jsonl"),
        stdin=requests(),
    )
    assert embedded.returncode == 0, embedded.stderr
    assert [orjson.loads(line) for line in embedded.stdout.splitlines()] == answers


def test_bad_request_lines_answer_in_place(tmp_path: Path) -> None:
    stdin = b'{"user": "u"}\nnot json\n{"campaigns": "c"}\n{"app": "a"}\n'
    done = windvane("features", "--defs", str(FEATUREDEFS), stdin=stdin)
    assert done.returncode == 1
    answers = [orjson.loads(line) for line in done.stdout.splitlines()]
    assert [("error" in a) for a in answers] == [False, True, True, False]
    assert answers[2]["error"]["field"] == "campaigns"
    assert b"Traceback" not in done.stderr
    assert done.stderr.decode().count("\n") == 2


def test_unreachable_store_is_one_line(tmp_path: Path) -> None:
    port = free_port()
    done = windvane("features", "--store", f"redis://127.0.0.1:{port}/0", stdin=b'{"user": "u"}\n')
    assert done.returncode == 1
    assert done.stderr.decode().startswith(
        f"windvane: the store at redis://127.0.0.1:{port}/0 did not answer"
    )
    assert done.stderr.decode().count("\n") == 1
    bad_url = windvane("replay", "x.jsonl", "--store", "mysql://x")
    assert bad_url.returncode == 1
    assert b"cannot use store URL" in bad_url.stderr


def test_missing_log_is_a_usage_error(tmp_path: Path) -> None:
    done = windvane("replay", str(tmp_path / "nope.jsonl"), "--rejects", str(tmp_path / "r.jsonl"))
    assert done.returncode == 2
    assert (
        done.stderr.decode().strip()
        == f"windvane: cannot read log {tmp_path / 'nope.jsonl'}: No such file or directory"
    )


def test_send_ingest_reserve_and_generations_from_the_command_line(
    redis_server, tmp_path: Path
) -> None:
    from windvane.store import open_store

    url = redis_server.url
    open_store(url).flush()
    log = write_log(tmp_path / "log.jsonl")
    sent = windvane(
        "send", str(log), "--stream", url, "--shards", "3", "--rejects", str(tmp_path / "r.jsonl")
    )
    assert sent.returncode == 0, sent.stderr
    assert sent.stdout.decode().startswith("sent 400 events to 3 shards")
    mismatch = windvane(
        "send", str(log), "--stream", url, "--shards", "5", "--rejects", str(tmp_path / "r2.jsonl")
    )
    assert mismatch.returncode == 2
    assert b"already has 3 shards" in mismatch.stderr
    reserved = windvane(
        "ingest",
        "--stream",
        url,
        "--store",
        url,
        "--generation",
        "g7",
        "--from-ts",
        str(NOW - 60),
        "--reserve",
    )
    assert reserved.returncode == 0, reserved.stderr
    assert b"reserved the stream for generation g7" in reserved.stdout
    replayed = windvane(
        "replay",
        str(log),
        "--store",
        url,
        "--generation",
        "g7",
        "--until",
        str(NOW - 3400),
        "--rejects",
        str(tmp_path / "r3.jsonl"),
        "--quiet",
    )
    assert replayed.returncode == 0, replayed.stderr
    assert "left out" in replayed.stdout.decode()
    listed = windvane("generations", "--store", url).stdout.decode()
    assert "* main" in listed
    assert "  g7" in listed
    assert windvane("generations", "activate", "g7", "--store", url).returncode == 0
    assert "* g7" in windvane("generations", "--store", url).stdout.decode()
    refused = windvane("generations", "drop", "g7", "--store", url)
    assert refused.returncode == 2
    assert b"is the active generation" in refused.stderr
    assert windvane("generations", "activate", "nope", "--store", url).returncode == 2
