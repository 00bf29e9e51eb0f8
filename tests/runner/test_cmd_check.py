"""``echoreo check`` run as a real subprocess: tables for good files, located problems
and exit status 2 (DEVELOPERS.md: user errors exit 2, printed without a traceback)."""

from __future__ import annotations

import io
import subprocess
import sys
from argparse import Namespace
from pathlib import Path

import pytest
from rich.console import Console

from echoreo.choreographies import DATA_DIR
from echoreo.errors import InputError
from echoreo.runner import cmd_check

BROKEN = Path(__file__).parent / "data" / "broken-choreography.yaml"
EXAMPLES = sorted(str(p) for p in DATA_DIR.glob("*.yaml"))


def echoreo(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "echoreo.runner.cli", *args],
                          capture_output=True, text=True, timeout=120,
                          env={"COLUMNS": "200", "PATH": "/usr/bin:/bin"})


def test_examples_and_robot_pass_with_tables():
    """All shipped choreographies and the shipped robot pass; each choreography gets its
    table with the peak speed and acceleration share of the limits."""
    result = echoreo("check", *EXAMPLES, str(DATA_DIR / "robots" / "torso-e1.yaml"))
    assert result.returncode == 0, result.stdout + result.stderr
    out = result.stdout
    assert out.count("peak joint speed") == len(EXAMPLES)
    assert "robot torso-e1 with 12 joints" in out
    assert f"{len(EXAMPLES) + 1} of {len(EXAMPLES) + 1} files passed" in out
    assert "Traceback" not in result.stderr


def test_broken_file_exits_2_with_every_problem_and_no_traceback():
    """The broken example's 17 marked problems are all printed with file:line:column."""
    result = echoreo("check", str(BROKEN), EXAMPLES[0])
    assert result.returncode == 2
    text = result.stdout + result.stderr
    assert "Traceback" not in text
    assert "failed" in text and "17 problems" in text
    assert f"{BROKEN}:12:29:" in text  # right_shoulder_flexion 200 deg, beyond 170 deg
    assert "1 of 2 files passed" in text


@pytest.mark.parametrize(
    ("content", "words"),
    [
        pytest.param(None, "not found", id="missing-file"),
        pytest.param("a: [1, 2\n", "not valid YAML", id="malformed"),
        pytest.param("colour: blue\n", "cannot tell what kind of file", id="unknown-kind"),
        pytest.param("robot: torso-x\nunit: deg\nsequence: [{rest: 1}]\n",
                     "no shipped robot is named 'torso-x'", id="unknown-robot"),
        pytest.param("study: s\nchoreographies: [nowhere.yaml]\n", "", id="plan"),
        pytest.param("format: echoreo-robot/1\nname: r\njoints: {}\n", "", id="bad-robot"),
    ],
)
def test_bad_files_exit_2_without_traceback(tmp_path, content, words):
    path = tmp_path / "f.yaml"
    if content is not None:
        path.write_text(content, encoding="utf-8")
    result = echoreo("check", str(path))
    text = result.stdout + result.stderr
    assert result.returncode == 2, text
    assert "Traceback" not in text
    assert words in text
    assert str(path) in text


def test_detect_kind(tmp_path):
    """Kinds are told from the format tag or the top-level keys."""
    assert cmd_check.detect_kind(EXAMPLES[0]) == "choreography"
    assert cmd_check.detect_kind(DATA_DIR / "robots" / "torso-e1.yaml") == "robot"
    plan = tmp_path / "p.yaml"
    plan.write_text("study: s\nparticipant: P01\n", encoding="utf-8")
    assert cmd_check.detect_kind(plan) == "plan"


def test_run_with_injected_console():
    """run() prints to the console it is given and returns the exit status."""
    buffer = io.StringIO()
    console = Console(file=buffer, width=200, color_system=None)
    status = cmd_check.run(Namespace(files=[EXAMPLES[0]], rate=100.0), console)
    assert status == 0
    assert "checked at 100 Hz" in buffer.getvalue()
    with pytest.raises(InputError, match="--rate"):
        cmd_check.run(Namespace(files=[EXAMPLES[0]], rate=0.0), console)
