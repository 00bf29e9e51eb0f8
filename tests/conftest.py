"""Fixtures shared across suites."""

from __future__ import annotations

import subprocess
import sys

import pytest


@pytest.fixture(scope="session")
def demo_study(tmp_path_factory):
    """One real run of `echoreo demo` with three virtual participants (a real
    subprocess), shared by every test that needs scored session files.

    Returns
    -------
    dict
        ``out`` (the demo folder), ``proc`` (the CompletedProcess).
    """
    out = tmp_path_factory.mktemp("demo") / "study"
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "demo", "--out",
                           str(out), "--participants", "3", "--seed", "5"],
                          capture_output=True, text=True, timeout=600, check=False)
    return {"out": out, "proc": proc}
