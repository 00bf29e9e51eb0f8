"""Scoring real session files: bad input, and the ``echoreo score`` command in a subprocess.

Session files are recorded by the real session runner (simulated robot and
virtual participant on the virtual clock) and then damaged with plain SQL,
as a crash, a faulty device or a hand edit would.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from echoreo.errors import SessionFileError
from echoreo.scoring import RECORD_FIELDS, score_session
from echoreo.sessionfile import SessionFile

PLAN = """\
study: scoring-tests
participant: T01
consent_recorded: true
robot: torso-e1
mode: mirror
command_rate_hz: 50
countdown_s: 1
rest_s: 1
choreographies:
  - warmup-alternating
streams:
  - {stream: right_wrist_imu, kind: imu, site: right_wrist, rate_hz: 100}
  - {stream: left_wrist_imu, kind: imu, site: left_wrist, rate_hz: 100}
  - {stream: head_pose, kind: head_pose, site: head, rate_hz: 30}
leader:
  adapter: simulated
  tau_s: 0.05
  seed: 3
followers:
  - adapter: simulated
    profile: good
    seed: 5
"""


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    from echoreo.runner.session import run_session

    folder = tmp_path_factory.mktemp("sessions")
    plan = folder / "plan.yaml"
    plan.write_text(PLAN)
    return run_session(plan, out_dir=folder / "out", clock="virtual")


@pytest.fixture
def session(recorded, tmp_path):
    """A fresh copy of the recorded session, free to damage."""
    dst = tmp_path / "T01.sqlite"
    shutil.copy(recorded, dst)
    return dst


def _sql(path: Path, *statements: str) -> None:
    conn = sqlite3.connect(path)
    with conn:
        for s in statements:
            conn.execute(s)
    conn.close()


def _messages(scores) -> str:
    return "\n".join(str(p) for p in scores.problems)


def test_recorded_session_scores_cleanly(session):
    sc = score_session(session)
    rec = sc.records
    assert list(rec.columns) == list(RECORD_FIELDS)
    n_moves = int((SessionFile(session).spans()["kind"] == "move").sum())
    assert len(rec) == 3 * n_moves
    moving = rec[rec["median_ratio"].notna()]
    assert len(moving) > 0 and moving["grade"].mean() > 80
    assert rec["participant"].eq("T01").all() and rec["study"].eq("scoring-tests").all()


def test_missing_stream_is_flagged_and_the_rest_scored(session):
    _sql(session, "DELETE FROM streams WHERE name = 'head_pose'",
         "DROP TABLE stream_head_pose")
    sc = score_session(session)
    rec = sc.records
    head = rec[rec["stream"] == "head_pose"]
    assert len(head) > 0 and all(f == ["missing_data"] for f in head["flags"])
    assert rec.loc[rec["stream"] != "head_pose", "grade"].notna().all()
    assert "stream 'head_pose'" in _messages(sc) and "not recorded" in _messages(sc)


def test_nan_samples_flag_only_the_repetitions_they_touch(session):
    _sql(session, "UPDATE stream_left_wrist_imu SET gyro_x = NULL "
                  "WHERE t_ns BETWEEN 9000000000 AND 10500000000")
    sc = score_session(session)
    rec = sc.records
    left = rec[rec["stream"] == "left_wrist_imu"]
    hit = left[left["flags"].apply(lambda f: "missing_data" in f)]
    assert 1 <= len(hit) <= 2
    assert hit["grade"].isna().all()
    assert left["grade"].notna().sum() == len(left) - len(hit)
    msg = _messages(sc)
    assert "stream 'left_wrist_imu'" in msg and "repetition" in msg and "gap" in msg


def test_constant_follower_signal_is_missing_data_with_a_message(session):
    """A stuck sensor (exactly constant channels) is not taken for a participant who kept
    still: its repetitions are flagged missing_data with a located message."""
    _sql(session, "UPDATE stream_right_wrist_imu SET gyro_x = 0.1, gyro_y = 0.0, gyro_z = 0.0")
    sc = score_session(session)
    rec = sc.records
    right = rec[rec["stream"] == "right_wrist_imu"]
    stuck = right[right["flags"].apply(lambda f: f == ["missing_data"])]
    assert len(stuck) >= 3 and stuck["grade"].isna().all()
    # where the leader's paired arm rests, a constant reading is what stillness looks like
    assert (right.drop(stuck.index)["grade"] > 99).all()
    assert "stream 'right_wrist_imu'" in _messages(sc) and "constant" in _messages(sc)
    assert rec.loc[rec["stream"] == "left_wrist_imu", "grade"].notna().all()


def test_a_participant_who_does_not_move_is_skipped(session):
    """Sensor noise only (no movement) while the leader moves: skipped, grade 0."""
    rng = np.random.default_rng(0)
    conn = sqlite3.connect(session)
    n = conn.execute("SELECT COUNT(*) FROM stream_right_wrist_imu").fetchone()[0]
    noise = rng.normal(0.0, 0.005, (n, 3))
    rowids = [r[0] for r in conn.execute("SELECT rowid FROM stream_right_wrist_imu")]
    with conn:
        conn.executemany("UPDATE stream_right_wrist_imu SET gyro_x = ?, gyro_y = ?, gyro_z = ? "
                         "WHERE rowid = ?",
                         [(*map(float, v), r) for v, r in zip(noise, rowids, strict=True)])
    conn.close()
    rec = score_session(session).records
    right = rec[rec["stream"] == "right_wrist_imu"]
    skipped = right[right["flags"].apply(lambda f: "skipped" in f)]
    assert len(skipped) >= 3 and (skipped["grade"] == 0).all()


def test_empty_and_too_short_repetitions_get_located_messages(session):
    _sql(session,
         "INSERT INTO spans VALUES ('warmup-alternating', 9, 'blink', 1, 'move', "
         "30000000000, 30000000000)",
         "INSERT INTO spans VALUES ('warmup-alternating', 10, 'twitch', 1, 'move', "
         "31000000000, 31300000000)")
    sc = score_session(session)
    rec = sc.records
    msg = _messages(sc)
    assert "move 'blink', step 9, repetition 1: the repetition is empty" in msg
    assert "move 'twitch', step 10, repetition 1" in msg
    assert "shorter than the embedding window" in msg
    blink = rec[rec["move"] == "blink"]
    assert all(f == ["missing_data"] for f in blink["flags"])
    assert rec[rec["move"] == "twitch"]["grade"].isna().sum() >= 1
    others = rec[~rec["move"].isin(["blink", "twitch"])]
    assert others["grade"].notna().mean() > 0.9


def test_unequal_lengths_and_constant_leader_in_arrays():
    """Arrays of unequal length name the stream; a leader that never moves yields
    still-leader grades, not a crash."""
    import pandas as pd

    from echoreo.scoring import StreamArrays, score_data, session_from_arrays
    from echoreo.sim import load_robot

    robot = load_robot("torso-e1")
    t = np.arange(0, 12, 0.02)
    q = np.repeat(robot.rest[None, :], t.size, axis=0)
    spans = pd.DataFrame({"step": [1, 1], "move": ["still", "still"], "repetition": [1, 2],
                          "kind": ["move", "move"], "t_start": [2.0, 5.0],
                          "t_end": [5.0, 8.0]})
    ts = np.arange(0, 12, 0.01)
    quiet = np.random.default_rng(4).normal(0.0, 0.001, (ts.size, 6))  # sensor noise only
    streams = {
        "right_wrist_imu": StreamArrays("right_wrist_imu", "imu",
                                        ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y",
                                         "gyro_z"), ts, quiet),
        "left_wrist_imu": StreamArrays("left_wrist_imu", "imu",
                                       ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y",
                                        "gyro_z"), ts[:-7], np.zeros((ts.size, 6))),
    }
    sc = score_data(session_from_arrays(robot, t, q, spans, streams, mode="mirror",
                                        session="S9"))
    rec = sc.records
    assert "stream 'left_wrist_imu'" in _messages(sc) and "time stamps" in _messages(sc)
    assert all(f == ["missing_data"] for f in rec[rec["stream"] == "left_wrist_imu"]["flags"])
    right = rec[rec["stream"] == "right_wrist_imu"]
    assert (right["grade"] > 99).all()   # still leader, still follower
    assert all(f == [] for f in right["flags"])


def test_not_a_session_file_is_a_clear_error(tmp_path):
    bad = tmp_path / "notes.sqlite"
    bad.write_text("hello")
    with pytest.raises(SessionFileError, match="not a session file"):
        score_session(bad)


def _cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "score", *args],
                          cwd=cwd, capture_output=True, text=True, timeout=300)


def test_echoreo_score_json_writes_scores_and_exit_codes(session, tmp_path):
    """Real subprocess: JSON is a list of records with exactly the contract's keys; the
    scores land in the file's scores table; a missing path exits 2."""
    out = _cli(str(session), "--json", "--csv", str(tmp_path / "s.csv"), cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert isinstance(data, list) and len(data) > 0
    assert all(list(r) == list(RECORD_FIELDS) for r in data)
    assert all(isinstance(r["flags"], list) for r in data)
    stored = SessionFile(session).scores()
    assert len(stored) == len(data)
    assert (tmp_path / "s.csv").read_text().startswith("session,participant,study,stream")
    # `correlation` (the grade's correlation component's input) in all three outputs
    graded = [i for i, r in enumerate(data) if r["median_ratio"] is not None]
    assert graded and all(isinstance(data[i]["correlation"], float) for i in graded)
    assert all(list(r) == list(RECORD_FIELDS) for r in stored["record"])
    assert [r["correlation"] for r in stored["record"]] == [r["correlation"] for r in data]
    assert "correlation" in (tmp_path / "s.csv").read_text().splitlines()[0].split(",")
    missing = _cli(str(tmp_path / "nope.sqlite"), cwd=tmp_path)
    assert missing.returncode == 2
    assert "no such file or folder" in missing.stderr


def test_echoreo_score_folder_scores_every_session_and_reports_bad_ones(session, tmp_path):
    folder = tmp_path / "study"
    folder.mkdir()
    shutil.copy(session, folder / "a.sqlite")
    shutil.copy(session, folder / "b.sqlite")
    (folder / "c.sqlite").write_text("not a database")
    out = _cli(str(folder), cwd=tmp_path)
    assert out.returncode == 2
    assert "c.sqlite" in out.stderr and "not a session file" in out.stderr
    assert "a  (participant T01" in out.stdout and "b  (participant T01" in out.stdout
    assert len(SessionFile(folder / "b.sqlite").scores()) > 0
