"""The echoreo core: located YAML, the error family, the command-line frame."""

from __future__ import annotations

import subprocess
import sys

import pytest

from echoreo.errors import InputError, Problem
from echoreo.yamlload import LDict, LList, load_yaml


def test_locations_of_keys_values_and_items(tmp_path):
    """Every key, value and list item reports its 1-based line and column."""
    f = tmp_path / "a.yaml"
    f.write_text("name: demo\nitems:\n  - 1\n  - {x: 2}\n", encoding="utf-8")
    data = load_yaml(f)
    assert isinstance(data, LDict) and isinstance(data["items"], LList)
    assert data.key_loc("items")[1:] == (2, 1)
    assert data.value_loc("name")[1:] == (1, 7)
    assert data["items"].item_loc(1)[1:] == (4, 5)
    assert data["items"][1].value_loc("x")[1:] == (4, 9)


@pytest.mark.parametrize(
    ("text", "line"),
    [
        pytest.param("a: 1\n  b: 2\n", 2, id="bad-indent"),
        pytest.param("a: [1, 2\n", 2, id="unclosed-list"),
        pytest.param("a: 1\na: 2\n", 2, id="duplicate-key"),
    ],
)
def test_bad_yaml_is_located(tmp_path, text, line):
    """Malformed YAML and duplicate keys raise InputError with file and line."""
    f = tmp_path / "bad.yaml"
    f.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_yaml(f)
    problem = info.value.problems[0]
    assert problem.file == str(f)
    assert problem.line == line


def test_missing_and_empty_files(tmp_path):
    with pytest.raises(InputError, match="not found"):
        load_yaml(tmp_path / "nope.yaml", what="choreography")
    (tmp_path / "empty.yaml").write_text("", encoding="utf-8")
    with pytest.raises(InputError, match="empty"):
        load_yaml(tmp_path / "empty.yaml")


def test_problem_rendering():
    p = Problem("too fast", "m.yaml", 3, 7, "slow it down")
    assert str(p) == "m.yaml:3:7: too fast\n    fix: slow it down"
    err = InputError([p, Problem("unknown joint", "m.yaml", 9, 1)])
    assert str(err).startswith("2 problems found:")


def test_cli_help_and_unknown_command():
    """The console script runs; an unknown command is a usage error (exit 2)."""
    ok = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "--help"],
                        capture_output=True, text=True, check=False)
    assert ok.returncode == 0 and "score" in ok.stdout
    bad = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "no-such-command"],
                         capture_output=True, text=True, check=False)
    assert bad.returncode == 2
    assert "Traceback" not in bad.stderr
