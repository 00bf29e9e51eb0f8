"""Helpers for the choreography tests: write a choreography file for the shipped robot."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from echoreo.sim import load_robot


@pytest.fixture(scope="session")
def torso():
    """The shipped robot (choreographies/robots/torso-e1.yaml)."""
    return load_robot("torso-e1")


@pytest.fixture
def write(tmp_path: Path):
    """``write(text, name="c.yaml") -> Path``: a dedented YAML file in a fresh folder."""

    def _write(text: str, name: str = "c.yaml") -> Path:
        path = tmp_path / name
        path.write_text(textwrap.dedent(text).lstrip("\n"), encoding="utf-8")
        return path

    return _write
