"""`echoreo report`: the cohort report from session files, with what it leaves out."""

from __future__ import annotations

import json
import shutil
import sqlite3
import subprocess
import sys


def _set_meta(path, key, value):
    with sqlite3.connect(path) as conn:
        conn.execute("UPDATE meta SET value = ? WHERE key = ?", (json.dumps(value), key))


def test_report_lists_what_it_left_out_and_why(demo_study, tmp_path):
    """A folder with a broken file, a session of another robot, an interrupted session and
    a session without scores: exit 0, the report shows the rest and names each case."""
    sessions = sorted((demo_study["out"] / "sessions").glob("*.sqlite"))
    assert len(sessions) == 3, demo_study["proc"].stderr[-2000:]
    folder = tmp_path / "mixed"
    folder.mkdir()
    copies = [shutil.copy(p, folder / p.name) for p in sessions]
    (folder / "broken.sqlite").write_bytes(b"not a database at all")
    other = folder / "other-robot.sqlite"
    shutil.copy(sessions[0], other)
    _set_meta(other, "robot_name", "another-robot")
    _set_meta(copies[1], "state", "running")  # as a crashed recorder leaves it
    with sqlite3.connect(copies[2]) as conn:
        conn.execute("DELETE FROM scores")
    out = tmp_path / "report.html"
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "report", str(folder),
                           "--out", str(out)],
                          capture_output=True, text=True, timeout=300, check=False)
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert "report of 3 session(s)" in proc.stdout
    html = out.read_text(encoding="utf-8")
    assert "broken.sqlite: left out, not a readable session file" in html
    assert "other-robot.sqlite: left out, robot &#x27;another-robot&#x27;" in html
    assert "session interrupted" in html
    assert "had no scores yet; scored now" in html


def test_report_of_nothing_is_a_clear_error(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "report",
                           str(tmp_path / "nowhere"), "--out", str(tmp_path / "r.html")],
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 2 and "no session files to report on" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_report_to_an_unwritable_place_is_a_clear_error(demo_study, tmp_path):
    """--out under a regular file cannot be created: exit 2, located message, no traceback,
    and the session files are untouched."""
    sessions = demo_study["out"] / "sessions"
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    before = {p.name: p.stat().st_size for p in sessions.glob("*.sqlite")}
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "report", str(sessions),
                           "--out", str(blocker / "report.html")],
                          capture_output=True, text=True, timeout=300, check=False)
    assert proc.returncode == 2, proc.stderr[-2000:]
    assert "cannot write the report" in proc.stderr and "Traceback" not in proc.stderr
    assert {p.name: p.stat().st_size for p in sessions.glob("*.sqlite")} == before
