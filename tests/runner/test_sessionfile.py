"""The session-file reader (echoreo.sessionfile) on real SQLite files.

Files here are built with the schema DDL of echoreo.sessionfile and plain
sqlite3, so the reader is checked independently of the recorder; the
recorder's own round trip is in test_recorder.py.
"""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pytest

from echoreo.errors import SessionFileError
from echoreo.sessionfile import (
    FORMAT,
    SessionFile,
    check_name,
    create_schema,
    stream_table,
    stream_table_ddl,
    write_scores,
)


def _make(path, state="complete", fmt=FORMAT, writer=None):
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA journal_mode=WAL")
    create_schema(conn)
    meta = {"format": fmt, "state": state, "participant": "P07", "study": "pilot"}
    if writer is not None:
        meta["writer"] = writer
    conn.executemany("INSERT INTO meta VALUES (?, ?)",
                     [(k, json.dumps(v)) for k, v in meta.items()])
    conn.execute("INSERT INTO streams VALUES (?, ?, ?, ?, ?, ?, ?)",
                 ("head_pose", "head_pose", json.dumps(["yaw", "pitch", "roll"]),
                  json.dumps(["rad"] * 3), 30.0, "test", None))
    conn.execute(stream_table_ddl("head_pose", ["yaw", "pitch", "roll"]))
    # 30 samples at 30 Hz, inserted in reverse to check time ordering
    rows = [(int(i * 1e9 / 30), 5 + i, i, 0.1 * i, None, -0.1 * i) for i in range(30)][::-1]
    conn.executemany(f"INSERT INTO {stream_table('head_pose')} VALUES (?, ?, ?, ?, ?, ?)", rows)
    conn.execute("INSERT INTO spans VALUES ('c', 1, 'wave', 1, 'move', 0, 500000000)")
    conn.execute("INSERT INTO events VALUES (250000000, 'cue', NULL, 'go')")
    conn.commit()
    conn.close()


def test_round_trip_of_every_table(tmp_path):
    """Rows written with the schema come back with seconds added and dtypes fixed."""
    f = tmp_path / "s.sqlite"
    _make(f)
    with SessionFile(f) as sf:
        assert sf.state == "complete" and sf.participant == "P07" and sf.study == "pilot"
        st = sf.streams()
        assert st.loc[0, "channels"] == ["yaw", "pitch", "roll"]
        df = sf.read_stream("head_pose")
        assert list(df.columns) == ["t", "t_ns", "t_dev_ns", "seq", "yaw", "pitch", "roll"]
        assert df["seq"].tolist() == list(range(30))
        assert df["t_ns"].dtype == np.int64
        np.testing.assert_allclose(df["t"], df["t_ns"] * 1e-9)
        assert df["pitch"].isna().all()  # NULL -> NaN
        assert len(sf.read_stream("head_pose", start=0.5, end=1.0)) == 15
        arrival = sf.read_stream("head_pose", order="arrival")
        assert arrival["seq"].iloc[0] == 29
        sp = sf.spans()
        assert sp.loc[0, "t_end"] == pytest.approx(0.5)
        ev = sf.events()
        assert ev.loc[0, "t"] == pytest.approx(0.25) and ev.loc[0, "kind"] == "cue"
        health = sf.stream_health()
        assert health.loc[0, "samples"] == 30 and health.loc[0, "gaps"] == 0
        assert health.loc[0, "effective_hz"] == pytest.approx(30.0, rel=1e-6)
        assert sf.duration() == pytest.approx(29 / 30, abs=1e-9)
        with pytest.raises(SessionFileError, match="no stream 'nope'"):
            sf.read_stream("nope")


def test_running_file_of_dead_process_is_marked_interrupted(tmp_path):
    """A file left 'running' by a dead writer becomes 'interrupted' on open."""
    f = tmp_path / "s.sqlite"
    dead = {"host": "no-such-host.invalid", "pid": 1, "start_ticks": None}
    _make(f, state="running", writer=dead)
    sf = SessionFile(f)
    assert sf.state == "interrupted" and sf.marked_interrupted
    sf.close()
    conn = sqlite3.connect(f)
    assert json.loads(conn.execute("SELECT value FROM meta WHERE key='state'").fetchone()[0]) \
        == "interrupted"
    conn.close()


def test_live_writer_keeps_running(tmp_path):
    """A file whose writer (this process) is alive stays 'running'."""
    from echoreo.sessionfile import process_identity

    f = tmp_path / "s.sqlite"
    _make(f, state="running", writer=process_identity())
    with SessionFile(f) as sf:
        assert sf.state == "running"


@pytest.mark.parametrize(
    ("content", "match"),
    [
        pytest.param(b"hello, not a database" * 100, "not a session file", id="text"),
        pytest.param(b"", "not a session file", id="empty"),
    ],
)
def test_not_a_session_file(tmp_path, content, match):
    f = tmp_path / "x.sqlite"
    f.write_bytes(content)
    with pytest.raises(SessionFileError, match=match) as info:
        SessionFile(f)
    assert info.value.problems[0].file == str(f) and info.value.problems[0].hint


def test_newer_format_and_missing(tmp_path):
    f = tmp_path / "new.sqlite"
    _make(f, fmt="echoreo-session/9")
    with pytest.raises(SessionFileError, match="newer"):
        SessionFile(f)
    with pytest.raises(SessionFileError, match="no such file"):
        SessionFile(tmp_path / "missing.sqlite")


def test_damaged_file(tmp_path):
    """Overwritten pages of a valid file are reported as damaged or not a session file."""
    f = tmp_path / "d.sqlite"
    _make(f)
    SessionFile(f).close()  # checkpoint and clean close
    raw = bytearray(f.read_bytes())
    raw[100:4096] = b"\xff" * (4096 - 100)  # wreck the schema page after the header
    f.write_bytes(bytes(raw))
    with pytest.raises(SessionFileError) as info:
        SessionFile(f)
    assert "damaged" in str(info.value) or "not a session file" in str(info.value)


def test_write_scores_replaces(tmp_path):
    """A second write_scores replaces the first set; NaN becomes JSON null."""
    f = tmp_path / "s.sqlite"
    _make(f)
    rec = {"stream": "head_pose", "move": "wave", "step": 1, "repetition": 1,
           "grade": np.float64(71.5), "band": "good", "flags": ["lag"], "lag_s": float("nan")}
    assert write_scores(f, [rec, {**rec, "repetition": 2}]) == 2
    assert write_scores(f, [rec]) == 1
    with SessionFile(f) as sf:
        sc = sf.scores()
    assert len(sc) == 1 and sc.loc[0, "flags"] == ["lag"]
    assert sc.loc[0, "record"]["lag_s"] is None and sc.loc[0, "grade"] == 71.5
    with pytest.raises(SessionFileError, match="lacks"):
        write_scores(f, [{"stream": "x"}])


@pytest.mark.parametrize("name", ["", "1abc", "a b", 'x"; DROP TABLE meta; --', "é", "a" * 64])
def test_unsafe_names_refused(name):
    with pytest.raises(SessionFileError):
        check_name(name)


def test_reserved_and_duplicate_channels():
    with pytest.raises(SessionFileError, match="reserved"):
        stream_table_ddl("s", ["t_ns"])
    with pytest.raises(SessionFileError, match="more than once"):
        stream_table_ddl("s", ["a", "A"])


def test_channel_selection_and_exact_large_device_times(tmp_path):
    """Reading a subset of channels; device times of an epoch clock (~1.7e18 ns, beyond
    float64's 2**53 exact range) come back exact as int64."""
    f = tmp_path / "s.sqlite"
    _make(f)
    big = 1_764_579_600_123_456_789
    with sqlite3.connect(f) as conn:
        conn.execute(f"UPDATE {stream_table('head_pose')} SET t_dev_ns = ? + seq", (big,))
    with SessionFile(f) as sf:
        df = sf.read_stream("head_pose", channels=["roll"])
        assert list(df.columns) == ["t", "t_ns", "t_dev_ns", "seq", "roll"]
        assert df["t_dev_ns"].tolist() == [big + i for i in range(30)]
        np.testing.assert_allclose(df["roll"], -0.1 * np.arange(30))
        with pytest.raises(SessionFileError, match="no channel"):
            sf.read_stream("head_pose", channels=["yaw", "heading"])
