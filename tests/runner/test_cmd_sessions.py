"""``echoreo sessions FOLDER`` in a real subprocess, on real session files."""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np

from echoreo.runner.recorder import Recorder
from echoreo.scoring.record_fields import RECORD_FIELDS
from echoreo.sessionfile import write_scores

CRASHING_CHILD = r"""
import os, sys
import numpy as np
from echoreo.runner.recorder import Recorder
rec = Recorder(sys.argv[1], {"study": "pilot", "participant": "P02"})
rec.add_stream({"name": "head_pose", "kind": "head_pose", "channels": ["yaw", "pitch", "roll"],
                "units": ["rad"] * 3, "rate_hz": 30.0})
t = (np.arange(90) * 1e9 / 30).astype(np.int64)
rec.write("head_pose", t, t, np.arange(90), np.zeros((90, 3)))
rec.flush()
os._exit(0)   # dies without close(): the file stays 'running'
"""


def _cli(*args, env_extra=None):
    env = {**os.environ, "COLUMNS": "240", "NO_COLOR": "1", **(env_extra or {})}
    return subprocess.run([sys.executable, "-m", "echoreo.runner.cli", *args],
                          capture_output=True, text=True, env=env, timeout=60)


def test_lists_complete_interrupted_and_unreadable(tmp_path):
    """Each file is one row with its state; stream health counts samples and gaps."""
    rec = Recorder(tmp_path / "P01.sqlite", {"study": "pilot", "participant": "P01",
                                             "choreographies": {"greeting": "name: greeting"},
                                             "plan_path": "plans/pilot-a.yaml"})
    rec.add_stream({"name": "right_wrist_imu", "kind": "imu", "channels": ["acc_x"],
                    "units": ["m/s^2"], "rate_hz": 100.0})
    # 100 Hz for 2 s with one 0.5 s hole: one gap at the default threshold of 3 periods
    t = np.arange(200) * 10_000_000
    t = np.concatenate([t[:100], t[150:]])
    rec.write("right_wrist_imu", t, t, np.arange(t.size), np.zeros((t.size, 1)))
    rec.close()
    crashed = subprocess.run([sys.executable, "-c", CRASHING_CHILD,
                              str(tmp_path / "P02.sqlite")], timeout=60)
    assert crashed.returncode == 0
    (tmp_path / "notes.sqlite").write_text("not a database")

    out = _cli("sessions", str(tmp_path))
    assert out.returncode == 0, out.stderr
    text = out.stdout
    assert "P01.sqlite" in text and "P02.sqlite" in text and "notes.sqlite" in text
    assert "complete" in text and "interrupted" in text and "unreadable" in text
    assert "pilot-a: greeting" in text
    rows = {line.split("│")[2].strip(): [c.strip() for c in line.split("│")[3:8]]
            for line in text.splitlines() if line.count("│") == 8}
    # effective rate (150 - 1) / 1.99 s = 74.9 Hz; the hole is 0.99 s -> 1.50 s
    assert rows["right_wrist_imu"] == ["imu", "150", "74.9 / 100", "1", "0.51"]
    assert rows["head_pose"] == ["head_pose", "90", "30.0 / 30", "0", "-"]
    assert "1 complete, 1 interrupted, 1 unreadable" in text


def test_missing_folder_exits_2_without_traceback(tmp_path):
    out = _cli("sessions", str(tmp_path / "nope"))
    assert out.returncode == 2
    assert "no such folder" in out.stderr and "Traceback" not in out.stderr


def test_bridge_timing_table(tmp_path):
    """A session led by a bridge shows its meta ``bridge_timing`` in a table of its own
    (late_max_ns in ms); a session without the entry gets no row, and an entry that is
    not a mapping is shown as unreadable rather than stopping the listing.
    Expected values: the entries written here (FORMAT.md section 3, "Adapters")."""
    for code, entry in (("B01", {"late": 2, "slipped": 1, "late_acks": 2,
                                 "late_max_ns": 12_345_678, "boots": 1}),
                        ("B02", None), ("B03", "garbage")):
        rec = Recorder(tmp_path / f"{code}.sqlite", {"study": "pilot", "participant": code})
        if entry is not None:
            rec.set_meta("bridge_timing", entry)
        rec.close()
    out = _cli("sessions", str(tmp_path))
    assert out.returncode == 0, out.stderr
    rows = {c[0]: c[1:] for c in ([x.strip() for x in line.split("│")[1:-1]]
                                  for line in out.stdout.splitlines()
                                  if line.count("│") == 7)}
    assert rows["B01.sqlite"] == ["2", "1", "2", "12.3", "1"]
    assert rows["B03.sqlite"][0] == "unreadable"
    assert "B02.sqlite" not in rows
    assert "bridge timing" in out.stdout


def test_scores_column_and_scores_from_an_earlier_version(tmp_path):
    """The scores column counts the stored records and gives the day they were written;
    records without a field of the current record (here ``correlation``, as scores
    written before it existed) are marked "score again" and a hint names the field.
    Expected values: the records and ``scored_utc`` written here."""
    full = dict.fromkeys(RECORD_FIELDS, 1.0)
    full.update(stream="right_wrist_imu", move="wave", step=0, repetition=1, grade=80.0,
                band="close", flags=[])
    old = {k: v for k, v in full.items() if k != "correlation"}
    for code, recs in (("S01", [full, {**full, "repetition": 2}]), ("S02", [old]),
                       ("S03", None)):
        rec = Recorder(tmp_path / f"{code}.sqlite", {"study": "pilot", "participant": code})
        rec.close()
        if recs is not None:
            write_scores(tmp_path / f"{code}.sqlite", recs, scored_utc="2026-11-30T09:15:00Z")
    out = _cli("sessions", str(tmp_path))
    assert out.returncode == 0, out.stderr
    rows = {c[0]: c[-1] for c in ([x.strip() for x in line.split("│")[1:-1]]
                                  for line in out.stdout.splitlines()
                                  if line.count("│") == 9)}
    assert rows["S01.sqlite"] == "2 (2026-11-30)"
    assert rows["S02.sqlite"] == "1 (2026-11-30), score again"
    assert rows["S03.sqlite"] == "-"
    hint = " ".join(out.stdout.split())
    assert "1 session file holds scores from an earlier echoreo without correlation" in hint
    assert hint.endswith(f"echoreo score {tmp_path}")
