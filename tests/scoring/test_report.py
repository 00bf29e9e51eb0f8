"""The cohort report: self-contained HTML, checked in a real headless browser."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from echoreo.scoring.report import SAFETY_TEXT, ReportData, build_report, write_report

ARTIFACTS = Path(__file__).resolve().parents[2] / "build" / "test-artifacts"
CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync"]


def _data(rng: np.random.Generator, n_participants: int = 5) -> ReportData:
    """Synthetic records and details in the shape score_session produces."""
    rows, details = [], {}
    th = np.linspace(0, 2 * np.pi, 120)
    lead = np.c_[np.cos(th), np.sin(th), 0.2 * np.sin(2 * th)]
    for p in range(n_participants):
        gain = 0.5 + 0.12 * p
        for session in (1, 2):
            for stream in ("right_wrist_imu", "head_pose"):
                for rep in range(1, 5):
                    i = len(rows)
                    rows.append({"session": f"P0{p}-{session}", "participant": f"P0{p}",
                                 "stream": stream, "kind": stream.split("_")[-1],
                                 "move": "raise", "repetition": rep,
                                 "t_start": 3.0 * rep + 40 * session,
                                 "grade": float(np.clip(50 + 10 * p + rng.normal(0, 4), 0, 100)),
                                 "flags": ["head_moving"] if p == 1 else [], "delay": 6,
                                 "dim": 3, "signal": "gyro_norm", "rate_hz": 50.0,
                                 "filter_cutoff_hz": 6.0, "filter_order": 2})
                    follower = lead * gain + rng.normal(0, 0.03, lead.shape)
                    details[i] = SimpleNamespace(
                        leader_pc=lead, follower_pc=follower,
                        leader_dist=np.linalg.norm(lead, axis=1),
                        follower_dist=np.linalg.norm(follower, axis=1),
                        t=np.arange(120) / 50.0, leader_signal=np.sin(th),
                        follower_signal=gain * np.sin(th - 0.4))
    sessions = [{"file": f"P0{p}-{s}.sqlite", "state": "complete", "robot": "torso-e1"}
                for p in range(n_participants) for s in (1, 2)]
    return ReportData(pd.DataFrame(rows), details, sessions=sessions,
                      notes=["P09-1.sqlite: interrupted, no repetitions scored"],
                      title="Seated warm-up study (simulated)")


def test_report_is_self_contained_and_complete(tmp_path):
    """One HTML file, no external resources, every section and the safety caution."""
    text = build_report(_data(np.random.default_rng(1)), figures_dir=tmp_path / "figs",
                        figure_format="svg")
    assert not re.search(r"(src|href)=['\"]https?:", text)
    for heading in ("Study summary", "Ranking", "Grades per repetition",
                    "Distances in reconstructed space", "Reconstructed trajectories", "Flags",
                    "Reliability of the grade", "Methods", "Left out"):
        assert f"<h2>{heading}</h2>" in text
    assert SAFETY_TEXT.split(";")[0] in text
    assert text.count("data:image/png;base64,") == 6
    assert "Test-retest" in text
    assert sorted(p.name for p in (tmp_path / "figs").iterdir()) == [
        "distance_boxplots.svg", "grade_heatmap.svg", "ranking.svg", "timeseries.svg",
        "trajectories_2d.svg", "trajectories_3d.svg"]
    assert "P01" in text and "head_moving" in text


@pytest.mark.browser
def test_report_renders_in_headless_chromium(tmp_path):
    """Headless Chromium (Debian packages chromium, chromium-driver) loads the page with no
    script or resource errors and every figure decodes; a screenshot is kept under
    build/test-artifacts/."""
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    if chromium is None:
        pytest.skip("chromium is not installed (apt-get install chromium chromium-driver)")
    report = write_report(_data(np.random.default_rng(2)), tmp_path / "report.html")
    url = report.resolve().as_uri()
    dom = subprocess.run([chromium, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'u1'}",
                          "--virtual-time-budget=5000", "--dump-dom", url],
                         capture_output=True, text=True, timeout=120, check=False)
    figures = re.search(r'data-figures="(\d+)/(\d+)"', dom.stdout)
    errors = re.search(r'data-errors="(\d+)"', dom.stdout)
    assert figures is not None and errors is not None, dom.stderr[-2000:]
    assert figures.group(1) == figures.group(2) == "6"
    assert errors.group(1) == "0"
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    shot = ARTIFACTS / "report.png"
    subprocess.run([chromium, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'u2'}",
                    "--window-size=1200,3000", f"--screenshot={shot}", url],
                   capture_output=True, text=True, timeout=120, check=False)
    assert shot.exists() and shot.stat().st_size > 10_000
