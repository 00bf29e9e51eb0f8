"""`echoreo demo`: the whole job (simulate, score, report) in one command."""

from __future__ import annotations

import subprocess
import sys

import pandas as pd

from echoreo.sessionfile import SessionFile


def test_demo_runs_end_to_end_and_ranks_the_wrong_mirror_last(demo_study):
    """Three virtual participants (a good imitator, one who mirrors the wrong way, a
    quick good imitator): the command exits 0, writes complete session files with
    scores, the scores table and the report, and ranks the wrong-way mirror last.
    (Expected order: imitating the anatomical instead of the mirrored side moves the
    wrong arm, which a per-repetition comparison must grade lower.)"""
    out, proc = demo_study["out"], demo_study["proc"]
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert "report.html" in proc.stdout
    sessions = sorted((out / "sessions").glob("*.sqlite"))
    assert len(sessions) == 3
    for path in sessions:
        with SessionFile(path) as sf:
            assert sf.state == "complete"
            assert len(sf.scores()) > 0
    scores = pd.read_csv(out / "scores.csv")
    means = scores.groupby("participant")["grade"].mean()
    assert means.idxmin() == "D02"  # D02 is the wrong-way mirror of the cast
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "<h2>Reliability of the grade</h2>" in html and "D02" in html


def test_demo_refuses_a_folder_with_earlier_sessions(tmp_path):
    (tmp_path / "sessions").mkdir()
    (tmp_path / "sessions" / "old.sqlite").write_text("x")
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "demo", "--out",
                           str(tmp_path), "--participants", "1"],
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 2 and "earlier run" in proc.stderr
    assert "Traceback" not in proc.stderr
