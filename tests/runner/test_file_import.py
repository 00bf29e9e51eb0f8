"""File import: CSV/TSV tables recorded into a session file against a timeline."""

from __future__ import annotations

import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from echoreo.adapters.file_import import FileSource, ImportMapping
from echoreo.errors import InputError
from echoreo.runner import load_choreography
from echoreo.runner.cmd_import import record_import
from echoreo.sessionfile import SessionFile

CHOREOGRAPHY = Path(__file__).parents[2] / "choreographies" / "warmup-right-arm.yaml"

MAPPING = """\
format: echoreo-import/1
time: {column: time_ms, unit: ms, offset_s: -1.5}
streams:
  right_wrist_imu:
    kind: imu
    rate_hz: 100
    site: right_wrist
    channels:
      acc_x: {column: ax, unit: g}
      gyro_z: {column: gz, unit: deg/s}
  head_pose:
    kind: head_pose
    site: head
    channels:
      yaw: {column: yaw, unit: deg}
"""


def _table(path: Path, rng: np.random.Generator, n: int = 400, sep: str = ",") -> np.ndarray:
    """100 Hz rows of ax, gz, and a 25 Hz yaw column (empty on the other rows)."""
    vals = rng.normal(size=(n, 3)).round(5)
    lines = ["# written by another system", sep.join(["time_ms", "ax", "gz", "yaw"])]
    for i in range(n):
        yaw = f"{vals[i, 2]:.5f}" if i % 4 == 0 else ""
        lines.append(sep.join([f"{i * 10}", f"{vals[i, 0]:.5f}", f"{vals[i, 1]:.5f}", yaw]))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return vals


def test_round_trip(tmp_path):
    """Values come back in SI, times as t·unit + offset, leader side from the timeline.

    Expected values: g = 9.80665 m/s² (CGPM 1901), 1° = π/180 rad; the timeline
    is the choreography compiled at the same rate.
    """
    rng = np.random.default_rng(11)
    data = tmp_path / "wrist.csv"
    vals = _table(data, rng)
    (tmp_path / "map.yaml").write_text(MAPPING, encoding="utf-8")
    mapping = ImportMapping.from_yaml(tmp_path / "map.yaml")
    chor = load_choreography(CHOREOGRAPHY)
    out = tmp_path / "P07.sqlite"
    res = record_import(out, chor, FileSource(mapping, data), participant="P07",
                        study="offline", mode="mirror", rate_hz=50.0)
    assert res.samples == {"right_wrist_imu": 400, "head_pose": 100}
    assert res.outside["right_wrist_imu"] == 150  # the first 1.5 s fall before zero
    timeline = chor.compile(50.0)
    with SessionFile(out) as sf:
        assert sf.state == "complete" and sf.participant == "P07" and sf.study == "offline"
        assert sf.meta["clock"] == "imported"
        assert {"stream": "right_wrist_imu", "kind": "imu", "site": "right_wrist",
                "leader_site": "left_wrist"} in sf.meta["pairs"]
        imu = sf.read_stream("right_wrist_imu")
        np.testing.assert_array_equal(imu["t_dev_ns"], np.arange(400) * 10_000_000)
        np.testing.assert_array_equal(imu["t_ns"], np.arange(400) * 10_000_000 - 1_500_000_000)
        np.testing.assert_allclose(imu["acc_x"], vals[:, 0] * 9.80665, rtol=1e-15)
        np.testing.assert_allclose(imu["gyro_z"], np.deg2rad(vals[:, 1]), rtol=1e-15)
        head = sf.read_stream("head_pose")
        np.testing.assert_allclose(head["yaw"], np.deg2rad(vals[::4, 2]), rtol=1e-15)
        st = sf.streams().set_index("name")
        assert st.loc["right_wrist_imu", "units"] == ["m/s^2", "rad/s"]
        assert st.loc["head_pose", "rate_hz"] == pytest.approx(25.0)  # estimated
        assert st.loc["head_pose", "clock_map"]["offset_ns"] == -1_500_000_000
        lc = sf.read_stream("leader_command")
        assert len(lc) == timeline.t.size
        np.testing.assert_allclose(lc[list(timeline.joint_names)].to_numpy(), timeline.q)
        sp = sf.spans()
        np.testing.assert_allclose(sp["t_start"], timeline.spans["t_start"], atol=1e-9)
        assert sp["move"].tolist() == timeline.spans["move"].tolist()
        assert len(sf.events("rep_start")) == timeline.n_repetitions
        assert len(sf.events("cue")) == len(timeline.cues)


def test_cli_short_form_tsv(tmp_path):
    """--time/--stream on the command line import a TSV the same way (subprocess)."""
    rng = np.random.default_rng(12)
    data = tmp_path / "head.tsv"
    vals = _table(data, rng, n=50, sep="\t")
    out = tmp_path / "P08.sqlite"
    proc = subprocess.run(
        [sys.executable, "-m", "echoreo.runner.cli", "import", str(data), "-c",
         str(CHOREOGRAPHY), "--time", "time_ms:ms", "--time-offset", "0.25",
         "--stream", "wrist:imu@100:ax=acc_x[m/s^2],gz[rad/s]", "--pair", "wrist=left_wrist",
         "-p", "P08", "-o", str(out)],
        capture_output=True, text=True, timeout=60, env={**os.environ, "COLUMNS": "200"})
    assert proc.returncode == 0, proc.stderr
    assert "wrist: 50 samples" in proc.stdout
    with SessionFile(out) as sf:
        df = sf.read_stream("wrist")
        assert list(df.columns)[-2:] == ["acc_x", "gz"]
        np.testing.assert_array_equal(df["acc_x"], vals[:, 0])
        assert df["t_ns"].iloc[0] == 250_000_000
        assert sf.meta["pairs"][0]["leader_site"] == "right_wrist"


BAD_DATA = [
    pytest.param("time_ms,ax,gz,yaw\n0,1,2,3\n10,x,2,3\n", "wrist.csv:3:", "'x' is not a number",
                 id="not-a-number"),
    pytest.param("time_ms,ax,gz,yaw\n0,1,2,3\n10,1,2\n", "wrist.csv:3:", "3 fields",
                 id="field-count"),
    pytest.param("time_ms,ax,gz,yaw\n0,1,2,3\n20,1,2,3\n10,1,2,3\n", "wrist.csv:4:",
                 "time goes back", id="time-back"),
    pytest.param("time_ms,ax,gz,yaw\n0,1,2,3\n,1,2,3\n", "wrist.csv:3:", "not a number of ms",
                 id="no-time"),
    pytest.param("time_ms,ax,yaw\n0,1,3\n", "map.yaml:10:", "column 'gz' is not in",
                 id="missing-column"),
    pytest.param("time_ms,ax,gz,yaw\n0,1,2,3\n10,\"1,2,3\n", "wrist.csv:", "malformed",
                 id="open-quote"),
]


@pytest.mark.parametrize(("table", "where", "what"), BAD_DATA)
def test_bad_data_is_located(tmp_path, table, where, what):
    """Each bad row or column is reported at file:line with what is wrong (no traceback)."""
    (tmp_path / "wrist.csv").write_text(table, encoding="utf-8")
    (tmp_path / "map.yaml").write_text(MAPPING, encoding="utf-8")
    mapping = ImportMapping.from_yaml(tmp_path / "map.yaml")
    with pytest.raises(InputError) as info:
        FileSource(mapping, tmp_path / "wrist.csv").connect(None)
    text = str(info.value)
    assert where in text and what in text
    assert all(p.hint or p.file for p in info.value.problems)


def test_many_bad_rows_are_listed_then_counted(tmp_path):
    (tmp_path / "d.csv").write_text("t,a\n" + "x,1\n" * 40, encoding="utf-8")
    with pytest.raises(InputError) as info:
        FileSource(ImportMapping.from_cli("t:s", ["s:imu:a[g]"]), tmp_path / "d.csv").connect()
    problems = info.value.problems
    assert len(problems) == 26 and "15 more problems" in problems[-1].message
    assert problems[-1].file == str(tmp_path / "d.csv")


def test_all_bad_rows_reported_in_one_pass(tmp_path):
    rows = ["time_ms,ax,gz,yaw"] + [f"{i * 10},{'bad' if i % 2 else 1},2,3" for i in range(8)]
    (tmp_path / "wrist.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    (tmp_path / "map.yaml").write_text(MAPPING, encoding="utf-8")
    with pytest.raises(InputError) as info:
        FileSource(ImportMapping.from_yaml(tmp_path / "map.yaml"),
                   tmp_path / "wrist.csv").connect(None)
    lines = sorted(p.line for p in info.value.problems)
    assert lines == [3, 5, 7, 9]


BAD_MAPPINGS = [
    pytest.param(MAPPING.replace("unit: ms", "unit: minutes"), 2, "time unit 'minutes'",
                 id="time-unit"),
    pytest.param(MAPPING.replace("kind: imu", "knd: imu"), 5, "unknown key 'knd'",
                 id="unknown-key"),
    pytest.param(MAPPING.replace("right_wrist_imu:", "right wrist:"), 4, "stream name",
                 id="unsafe-name"),
    pytest.param(MAPPING.replace("acc_x: {column: ax, unit: g}", "acc_x: ax"), 9,
                 "needs 'column'", id="channel-form"),
    pytest.param(MAPPING.replace("offset_s: -1.5", "offset_s: soon"), 2, "offset_s",
                 id="offset"),
]


@pytest.mark.parametrize(("text", "line", "what"), BAD_MAPPINGS)
def test_bad_mapping_is_located(tmp_path, text, line, what):
    f = tmp_path / "map.yaml"
    f.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as info:
        ImportMapping.from_yaml(f)
    problem = next(p for p in info.value.problems if what in p.message)
    assert problem.file == str(f) and problem.line == line


@pytest.mark.parametrize(("time", "stream", "what"), [
    ("t", "s:imu:a=b[g]", "COLUMN:UNIT"),
    ("t:ms", "s:imu", "NAME:KIND"),
    ("t:ms", "s:imu:a=b", "units are required"),
    ("t:ms", "s:imu@fast:a=b[g]", "positive number of Hz"),
])
def test_bad_command_line_mapping(time, stream, what):
    with pytest.raises(InputError, match=what):
        ImportMapping.from_cli(time, [stream])


def test_cli_errors_exit_2_without_traceback(tmp_path):
    (tmp_path / "d.csv").write_text("t,a\n0,1\n1,zz\n", encoding="utf-8")
    proc = subprocess.run(
        [sys.executable, "-m", "echoreo.runner.cli", "import", str(tmp_path / "d.csv"), "-c",
         str(CHOREOGRAPHY), "--time", "t:s", "--stream", "s:imu:a[g]", "-p", "P09",
         "-o", str(tmp_path / "o.sqlite")],
        capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert "d.csv:3" in proc.stderr and "'zz' is not a number" in proc.stderr
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "o.sqlite").exists()  # nothing written on bad input


def test_time_is_exact_for_long_epoch_values(tmp_path):
    """Decimal parsing keeps ns exact where float64 would round (1.7e9 s has ~240 ns ulp)."""
    (tmp_path / "d.csv").write_text("t,a\n1733097600.000000001,1\n1733097600.010000003,2\n",
                                    encoding="utf-8")
    m = ImportMapping.from_cli("t:s", ["s:imu:a[1]"], time_offset_s=-1733097600.0)
    src = FileSource(m, tmp_path / "d.csv")
    src.connect(None)
    (batch,) = src.poll()
    assert batch.t_dev_ns.tolist() == [1733097600000000001, 1733097600010000003]
    assert batch.t_ns.tolist() == [1, 10_000_003]
    assert math.isclose(float(batch.data[1, 0]), 2.0)


def test_imported_data_scores_like_the_same_data_recorded(tmp_path):
    """A virtual participant's IMU stream scores the same whether recorded or imported.

    Hypothesis: the import path (CSV written with round-tripping %.17g floats,
    read back in exact decimal time) is transparent to scoring. Reference:
    the same samples handed to the Recorder directly, with the same timeline.
    """
    import pandas as pd

    from echoreo.runner.recorder import Recorder
    from echoreo.scoring import score_session
    from echoreo.sim import PROFILES, simulate_participant

    chor = load_choreography(CHOREOGRAPHY)
    tl = chor.compile(50.0)
    sim = simulate_participant(chor.robot, tl.t, tl.q, tl.rep_windows(), PROFILES["good"],
                               mode="mirror", rng=np.random.default_rng(3))
    s = sim.streams["right_wrist_imu"]
    pair = {"stream": s.name, "kind": "imu", "site": "right_wrist", "leader_site": "left_wrist"}

    direct = tmp_path / "direct.sqlite"
    rec = Recorder(direct, {"participant": "P07", "mode": "mirror", "robot": chor.robot.text,
                            "robot_name": chor.robot.name, "pairs": [pair],
                            "choreographies": {chor.name: chor.text}})
    names = tuple(tl.joint_names)
    rec.add_stream({"name": "leader_command", "kind": "joints", "channels": names,
                    "units": ["rad"] * len(names), "rate_hz": 50.0})
    t_cmd = np.rint(tl.t * 1e9).astype(np.int64)
    rec.write("leader_command", t_cmd, t_cmd, np.arange(t_cmd.size), tl.q)
    rec.set_spans(tl.spans, choreography=chor.name)
    rec.add_stream({"name": s.name, "kind": s.kind, "channels": s.channels, "units": s.units,
                    "rate_hz": 100.0})
    t_s = np.rint(s.t * 1e9).astype(np.int64)
    rec.write(s.name, t_s, t_s, s.seq, s.data)
    rec.close()

    table = pd.DataFrame(s.data, columns=list(s.channels))
    table.insert(0, "seq", s.seq)
    table.insert(0, "t", s.t)
    table.to_csv(tmp_path / "wrist.csv", index=False, float_format="%.17g")
    channels = "\n".join(f"      {c}: {{column: {c}, unit: {u}}}"
                         for c, u in zip(s.channels, s.units, strict=True))
    (tmp_path / "map.yaml").write_text(
        "time: {column: t, unit: s}\nstreams:\n  right_wrist_imu:\n    kind: imu\n"
        f"    rate_hz: 100\n    site: right_wrist\n    seq: seq\n    channels:\n{channels}\n",
        encoding="utf-8")
    imported = tmp_path / "imported.sqlite"
    record_import(imported, chor, FileSource(ImportMapping.from_yaml(tmp_path / "map.yaml"),
                                             tmp_path / "wrist.csv"), participant="P07")

    a = score_session(direct).records
    b = score_session(imported).records
    assert len(a) == tl.n_repetitions and len(b) == len(a)
    np.testing.assert_allclose(b["grade"].to_numpy(float), a["grade"].to_numpy(float),
                               rtol=0, atol=1e-6)
    assert b["band"].tolist() == a["band"].tolist()


_CHARS = "0123456789.,;-+eE\t\n\r\" #xnaNinf"


@settings(max_examples=300, deadline=None)
@given(body=st.text(alphabet=_CHARS, max_size=300))
def test_random_tables_never_crash(tmp_path_factory, body):
    """Any text after a valid header either imports or raises a located InputError."""
    folder = tmp_path_factory.mktemp("fuzz")
    f = folder / "d.csv"
    f.write_text("t,a,b\n" + body, encoding="utf-8")
    m = ImportMapping.from_cli("t:ms", ["s:imu:a[g],b[deg/s]"])
    try:
        FileSource(m, f).connect(None)
    except InputError as exc:
        assert all(p.file for p in exc.problems)


LEADER_MAPPING = MAPPING.replace("""    site: right_wrist
    channels:""", """    site: right_wrist
    leader_stream: robot_left_wrist_imu
    channels:""") + """\
  robot_left_wrist_imu:
    kind: imu
    rate_hz: 100
    channels:
      acc_x: {column: ax, unit: g}
      gyro_z: {column: gz, unit: deg/s}
"""


def test_leader_stream_of_an_imported_pair(tmp_path):
    """A robot sensor imported as its own stream (no site) and named by a pair's
    `leader_stream:` (FORMAT.md section 4) is recorded and stored in the pairs meta."""
    rng = np.random.default_rng(13)
    data = tmp_path / "wrist.csv"
    _table(data, rng)
    (tmp_path / "map.yaml").write_text(LEADER_MAPPING, encoding="utf-8")
    mapping = ImportMapping.from_yaml(tmp_path / "map.yaml")
    out = tmp_path / "P08.sqlite"
    record_import(out, load_choreography(CHOREOGRAPHY), FileSource(mapping, data),
                  participant="P08", study="offline", mode="mirror", rate_hz=50.0)
    with SessionFile(out) as sf:
        pairs = {p["stream"]: p for p in sf.meta["pairs"]}
        assert set(pairs) == {"right_wrist_imu", "head_pose"}  # the robot's IMU is no pair
        assert pairs["right_wrist_imu"]["leader_stream"] == "robot_left_wrist_imu"
        assert len(sf.read_stream("robot_left_wrist_imu")) == 400


@pytest.mark.parametrize(("old", "new", "what"), [
    ("leader_stream: robot_left_wrist_imu", "leader_stream: nowhere", "not another stream"),
    ("leader_stream: robot_left_wrist_imu", "leader_stream: head_pose", "participant stream"),
    ("leader_stream: robot_left_wrist_imu", "leader_stream: [a]", "must be the name"),
])
def test_bad_leader_stream_is_located(tmp_path, old, new, what):
    f = tmp_path / "map.yaml"
    f.write_text(LEADER_MAPPING.replace(old, new), encoding="utf-8")
    with pytest.raises(InputError) as info:
        ImportMapping.from_yaml(f)
    (problem,) = [p for p in info.value.problems if what in p.message]
    assert problem.file == str(f) and problem.line == 8
