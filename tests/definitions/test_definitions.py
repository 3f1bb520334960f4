"""Definition files: every mistake is one line naming file, feature and field; exit status 2."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.conftest import FEATUREDEFS
from tests.support import write_defs
from windvane.cli.main import main

GOOD = """
[[feature]]
name = "imps_1h"
kind = "window_count"
key = "user+campaign"
events = ["impression"]
window = "1h"
granularity = "1m"
"""


def check(directory: Path, capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    code = main(["check", str(directory)])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize(
    ("edit", "field", "words"),
    [
        (("window_count", "window_cnt"), "kind", "unknown kind 'window_cnt'"),
        (('window = "1h"', 'window = "90s"'), "window", "not a multiple of granularity 1m"),
        (('window = "1h"', 'window = "90x"'), "window", "90x is not a duration"),
        (('granularity = "1m"', "granularity = 60"), "granularity", "not a duration"),
        (
            ('key = "user+campaign"', 'key = "user+creative"'),
            "key",
            "'creative' is not a key field",
        ),
        (('events = ["impression"]', 'events = ["impresion"]'), "events.0", "'impression'"),
        (('events = ["impression"]', "events = []"), "events", "at least one event kind"),
        (('granularity = "1m"', 'granularity = "1m"\nwindw = "2h"'), "windw", "unknown field"),
        (('key = "user+campaign"\n', ""), "key", "is missing"),
    ],
)
def test_each_mistake_is_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], edit: tuple, field: str, words: str
) -> None:
    write_defs(tmp_path, GOOD.replace(*edit))
    code, out, err = check(tmp_path, capsys)
    assert code == 2
    assert out == ""
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(
        f"{tmp_path / 'features.toml'}: feature 'imps_1h': field '{field}': "
    )
    assert words in lines[0]
    assert "Traceback" not in err


def test_undefined_event_field(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    write_defs(
        tmp_path,
        """
        [[feature]]
        name = "users"
        kind = "distinct_count"
        key = "app"
        events = ["request"]
        of = "usr"
        window = "24h"
        granularity = "1h"
        """,
    )
    code, _, err = check(tmp_path, capsys)
    assert code == 2
    assert err.startswith(
        f"{tmp_path / 'features.toml'}: feature 'users': field 'of': 'usr' is not an event field"
    )


def test_duplicate_names_across_files(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    write_defs(tmp_path, GOOD, "a.toml")
    write_defs(tmp_path, GOOD, "b.toml")
    code, _, err = check(tmp_path, capsys)
    assert code == 2
    assert err.strip() == (
        f"{tmp_path / 'b.toml'}: feature 'imps_1h': field 'name': duplicate feature name "
        f"(also defined in {tmp_path / 'a.toml'})"
    )


def test_all_mistakes_are_listed_together(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    write_defs(tmp_path, GOOD.replace('"1h"', '"90x"'), "a.toml")
    write_defs(tmp_path, GOOD.replace("imps_1h", "other").replace("window_count", "nope"), "b.toml")
    write_defs(tmp_path, "[[feature]]\nname = 'x'\nkind = 'recency'\n[bogus]\n", "c.toml")
    code, _, err = check(tmp_path, capsys)
    assert code == 2
    lines = err.splitlines()
    assert any("a.toml: feature 'imps_1h': field 'window'" in line for line in lines)
    assert any("b.toml: feature 'other': field 'kind'" in line for line in lines)
    assert any("c.toml: unknown section [bogus]" in line for line in lines)
    assert any("c.toml: feature 'x': field 'events': is missing" in line for line in lines)


def test_invalid_toml_and_empty_directory(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    write_defs(tmp_path / "bad", "[[feature]\nname = 'x'\n")
    code, _, err = check(tmp_path / "bad", capsys)
    assert (code, err.count("\n")) == (2, 1)
    assert "not valid TOML" in err
    (tmp_path / "empty").mkdir()
    code, _, err = check(tmp_path / "empty", capsys)
    assert code == 2
    assert "no *.toml feature definition files" in err


def test_demo_feature_set_plan(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, err = check(FEATUREDEFS, capsys)
    assert (code, err) == (0, "")
    # Three kinds of key, each with its retention and a byte estimate.
    for line in ("  app ", "  user ", "  user+campaign "):
        assert any(x.startswith(line) and "B at most per key" in x for x in out.splitlines())
    assert "impression  -> " in out
    for name in ("session_depth", "imps_1h", "app_users_24h", "screen_fraction"):
        assert f"  {name} " in out


def test_equal_states_share_one_field(tmp_path: Path) -> None:
    from windvane.definitions.plan import load_plan

    plan = load_plan(FEATUREDEFS)
    user = next(s for s in plan.key_shapes if s.name == "user")
    session = [
        s
        for s in user.states
        if {f.name for f in s.features} == {"session_depth", "session_length_s"}
    ]
    assert len(session) == 1
