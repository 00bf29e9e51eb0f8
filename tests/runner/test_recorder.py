"""The recorder writes what the reader reads (real SQLite files, real writer thread)."""

from __future__ import annotations

import sqlite3

import numpy as np
import pandas as pd
import pytest

from echoreo.adapters.base import ClockMap, SampleBatch, StreamInfo
from echoreo.errors import SessionFileError
from echoreo.runner.recorder import Recorder
from echoreo.sessionfile import SessionFile

IMU = StreamInfo("right_wrist_imu", "imu",
                 ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y", "gyro_z"),
                 ("m/s^2",) * 3 + ("rad/s",) * 3, 100.0, "test")


def test_round_trip(tmp_path):
    """Samples, events, spans and meta come back unchanged through SessionFile."""
    rng = np.random.default_rng(3)
    f = tmp_path / "P07.sqlite"
    rec = Recorder(f, {"study": "pilot", "participant": "P07", "mode": "mirror",
                       "clock": "virtual", "command_rate_hz": 50.0})
    rec.add_stream(IMU, ClockMap(offset_ns=5, method="ntp"))
    t = np.arange(1000, dtype=np.int64) * 10_000_000
    data = rng.normal(size=(1000, 6))
    data[10, 2] = np.nan
    for i in range(0, 1000, 100):  # ten hand-overs of 100 samples
        rec.write_batch(SampleBatch("right_wrist_imu", t[i:i + 100], t[i:i + 100] - 5,
                                    np.arange(i, i + 100), data[i:i + 100]))
    rec.event(1_000_000, "cue", None, "look at the robot")
    rec.event(2_000_000, "gap", "right_wrist_imu", {"seconds": 0.5})
    spans = pd.DataFrame({"step": [1, 1], "move": ["wave", "wave"], "repetition": [1, 2],
                          "kind": ["move", "move"], "t_start": [0.5, 2.5], "t_end": [2.0, 4.0]})
    rec.set_spans(spans, choreography="greeting")
    rec.set_meta("robot_name", "torso-e1")
    assert rec.flush(timeout=10)
    with SessionFile(f) as live:  # readable while the recorder is open; not marked interrupted
        assert live.state == "running" and len(live.read_stream("right_wrist_imu")) == 1000
    rec.close()
    assert rec.stats.rows_written == 1000 and rec.stats.pending_rows == 0
    with SessionFile(f) as sf:
        assert sf.state == "complete" and sf.meta["ended_utc"] and sf.meta["utc_start"]
        assert sf.meta["format"] == "echoreo-session/1" and sf.meta["robot_name"] == "torso-e1"
        df = sf.read_stream("right_wrist_imu")
        np.testing.assert_array_equal(df["t_ns"], t)
        np.testing.assert_array_equal(df["t_dev_ns"], t - 5)
        np.testing.assert_array_equal(df["seq"], np.arange(1000))
        np.testing.assert_array_equal(df[list(IMU.channels)].to_numpy(), data)  # NaN kept
        st = sf.streams()
        assert st.loc[0, "clock_map"]["offset_ns"] == 5 and st.loc[0, "units"][0] == "m/s^2"
        sp = sf.spans()
        assert sp["choreography"].tolist() == ["greeting"] * 2
        assert sp["t_start_ns"].tolist() == [500_000_000, 2_500_000_000]
        ev = sf.events()
        assert ev["kind"].tolist() == ["cue", "gap"]
        assert sf.stream_health().loc[0, "gap_events"] == 1
        assert sf.integrity_check() == "ok"
    # recorded in WAL mode, then folded into one self-contained file at close
    assert not (tmp_path / "P07.sqlite-wal").exists()
    conn = sqlite3.connect(f"file:{f}?mode=ro", uri=True)
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "delete"
    conn.close()


def test_unsafe_names_and_shapes_are_refused(tmp_path):
    rec = Recorder(tmp_path / "s.sqlite", {"participant": "P01"})
    with pytest.raises(SessionFileError):
        rec.add_stream({"name": "x; DROP TABLE meta", "kind": "imu", "channels": ["a"],
                        "units": ["m"], "rate_hz": 1.0})
    with pytest.raises(SessionFileError):
        rec.add_stream({"name": "ok", "kind": "imu", "channels": ['a"b'], "units": ["m"],
                        "rate_hz": 1.0})
    rec.add_stream({"name": "ok", "kind": "imu", "channels": ["a", "b"], "units": ["m", "m"],
                    "rate_hz": 1.0})
    with pytest.raises(SessionFileError, match="twice"):
        rec.add_stream({"name": "ok", "kind": "imu", "channels": ["a"], "units": ["m"]})
    with pytest.raises(SessionFileError, match="not declared"):
        rec.write("nope", [0], [0], [0], [[1.0]])
    with pytest.raises(ValueError, match="expected"):
        rec.write("ok", [0, 1], [0, 1], [0, 1], np.zeros((2, 3)))
    rec.close("interrupted")
    with SessionFile(tmp_path / "s.sqlite") as sf:
        assert sf.state == "interrupted" and sf.stream_names() == ["ok"]
    with pytest.raises(SessionFileError, match="already exists"):
        Recorder(tmp_path / "s.sqlite", {})


def test_back_pressure_bound_keeps_all_rows(tmp_path):
    """With a tiny queue bound the writer applies back-pressure and still loses nothing."""
    rec = Recorder(tmp_path / "s.sqlite", {}, max_pending_rows=50, synchronous="NORMAL",
                   commit_interval_s=0.01)
    rec.add_stream({"name": "s", "kind": "x", "channels": ["v"], "units": ["1"],
                    "rate_hz": 100.0})
    for i in range(200):
        rec.write("s", np.arange(10) + 10 * i, np.arange(10) + 10 * i,
                  np.arange(10) + 10 * i, np.ones(10))
        assert rec.stats.pending_rows <= 60
    rec.close()
    with SessionFile(tmp_path / "s.sqlite") as sf:
        assert len(sf.read_stream("s")) == 2000


EXITING_CHILD = r"""
import sys
import numpy as np
from echoreo.runner.recorder import Recorder
rec = Recorder(sys.argv[1], {"participant": "P04"})
rec.add_stream({"name": "s", "kind": "x", "channels": ["v"], "units": ["1"], "rate_hz": 10.0})
rec.write("s", np.arange(500), np.arange(500), np.arange(500), np.ones(500))
# the program ends without close(): the recorder's exit hook commits what was handed over
"""


def test_exit_without_close_commits_and_marks_interrupted(tmp_path):
    """A program that forgets close() still keeps its data; the session is 'interrupted'."""
    import subprocess
    import sys

    path = tmp_path / "P04.sqlite"
    proc = subprocess.run([sys.executable, "-c", EXITING_CHILD, str(path)], timeout=60,
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    with SessionFile(path) as sf:
        assert sf.state == "interrupted" and not sf.marked_interrupted
        assert len(sf.read_stream("s")) == 500


def test_many_threads_hand_over_concurrently(tmp_path):
    """Four producer threads writing their own streams: every row lands exactly once."""
    import threading

    rec = Recorder(tmp_path / "s.sqlite", {}, synchronous="NORMAL")
    for i in range(4):
        rec.add_stream({"name": f"s{i}", "kind": "x", "channels": ["v"], "units": ["1"],
                        "rate_hz": 200.0})

    def produce(i: int) -> None:
        for k in range(250):
            seq = np.arange(20) + 20 * k
            rec.write(f"s{i}", seq * 5_000_000, seq, seq, seq.astype(float) + i)
            if k % 50 == 0:
                rec.event(int(seq[0]) * 5_000_000, "cue", f"s{i}", {"k": k})

    threads = [threading.Thread(target=produce, args=(i,)) for i in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    rec.close()
    with SessionFile(tmp_path / "s.sqlite") as sf:
        for i in range(4):
            df = sf.read_stream(f"s{i}", order="arrival")
            np.testing.assert_array_equal(df["seq"], np.arange(5000))
            np.testing.assert_array_equal(df["v"], np.arange(5000) + i)
        assert len(sf.events("cue")) == 20


def test_checkpoints_fold_committed_rows_into_the_file_while_recording(tmp_path):
    """The checkpoint thread moves committed rows into the main file during the session.

    A copy of the ``.sqlite`` file alone (what survives if the ``-wal`` file's
    unsynced pages are lost, as in a power cut) holds every row committed
    before the last checkpoint.
    """
    import shutil
    import time

    path = tmp_path / "s.sqlite"
    rec = Recorder(path, {}, checkpoint_interval_s=0.05)
    rec.add_stream({"name": "s", "kind": "x", "channels": ["v"], "units": ["1"],
                    "rate_hz": 100.0})
    rec.write("s", np.arange(100), np.arange(100), np.arange(100), np.ones(100))
    assert rec.flush(timeout=10)
    copy = tmp_path / "copy.sqlite"
    for _ in range(100):  # wait for a checkpoint (50 ms period), at most ~5 s
        time.sleep(0.05)
        shutil.copyfile(path, copy)
        conn = sqlite3.connect(copy)
        try:
            n = conn.execute('SELECT COUNT(*) FROM "stream_s"').fetchone()[0]
        except sqlite3.DatabaseError:
            # The table itself is not checkpointed yet, or the copy was taken while a
            # checkpoint was writing pages into the file (a torn copy): try again.
            n = 0
        conn.close()
        for suffix in ("-wal", "-shm"):
            (tmp_path / f"copy.sqlite{suffix}").unlink(missing_ok=True)
        if n == 100:
            break
    rec.close()
    assert n == 100
