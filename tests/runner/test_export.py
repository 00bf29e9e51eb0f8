"""Exports: CSV tables and Motion-BIDS, checked by the official BIDS validator."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from echoreo.adapters.base import StreamInfo
from echoreo.errors import ExportError
from echoreo.runner.export import export_bids, export_csv
from echoreo.runner.recorder import Recorder

JOINTS = ["neck_rotation", "neck_flexion"]


def _session(path, participant, rng, *, state="complete", seconds=4.0):
    """A small real session file: leader joints at 50 Hz, one wrist IMU at 100 Hz
    with a dropout, a head-pose stream at 30 Hz, spans and a cue."""
    meta = {"study": "warmup-study", "participant": participant, "mode": "mirror",
            "clock": "virtual", "utc_start": "2026-12-01T09:00:00.000000+00:00",
            "pairs": [{"stream": "right_wrist_imu", "kind": "imu", "site": "right_wrist",
                       "leader_site": "left_wrist"},
                      {"stream": "head_pose", "kind": "head_pose", "site": "head",
                       "leader_site": "head"}]}
    rec = Recorder(path, meta)
    rec.add_stream(StreamInfo("leader_command", "joints", tuple(JOINTS), ("rad", "rad"), 50.0,
                              "simulated"))
    imu_ch = ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y", "gyro_z")
    rec.add_stream(StreamInfo("right_wrist_imu", "imu", imu_ch, ("m/s^2",) * 3 + ("rad/s",) * 3,
                              100.0, "virtual wrist sensor"))
    rec.add_stream(StreamInfo("head_pose", "head_pose", ("yaw", "pitch", "roll"), ("rad",) * 3,
                              30.0, "virtual camera"))
    for name, rate, c in (("leader_command", 50, 2), ("right_wrist_imu", 100, 6),
                          ("head_pose", 30, 3)):
        n = int(seconds * rate)
        keep = np.ones(n, bool)
        if name == "right_wrist_imu":
            keep[100:120] = False  # a 0.2 s dropout
        t_ns = (np.arange(n)[keep] * 1e9 / rate).astype(np.int64) + 500_000_000
        rec.write(name, t_ns, t_ns + 123, np.arange(n)[keep], rng.normal(size=(keep.sum(), c)))
    spans = pd.DataFrame({"step": [0, 0, 1], "move": ["raise", "raise", "rest"],
                          "repetition": [1, 2, 0], "kind": ["move", "move", "rest"],
                          "t_start": [0.6, 1.8, 3.0], "t_end": [1.8, 3.0, 4.0]})
    rec.set_spans(spans, choreography="arm-raise")
    rec.event(700_000_000, "cue", None, {"text": "raise your arm with the robot"})
    rec.close(state)
    return path


@pytest.fixture
def sessions(tmp_path):
    rng = np.random.default_rng(11)
    folder = tmp_path / "sessions"
    folder.mkdir()
    _session(folder / "P01-1.sqlite", "P01", rng)
    _session(folder / "P01-2.sqlite", "P01", rng)
    _session(folder / "P02-1.sqlite", "P02", rng, state="interrupted")
    return folder


def test_csv_export_round_trips(sessions, tmp_path):
    """Every stream becomes a CSV table with all recorded samples (no loss)."""
    folders = export_csv([sessions], tmp_path / "csv")
    assert [f.name for f in folders] == ["P01-1", "P01-2", "P02-1"]
    imu = pd.read_csv(folders[0] / "stream_right_wrist_imu.csv")
    assert len(imu) == 400 - 20 and list(imu.columns[:4]) == ["t", "t_ns", "t_dev_ns", "seq"]
    assert (imu["t_dev_ns"] - imu["t_ns"] == 123).all()
    meta = json.loads((folders[0] / "meta.json").read_text())
    assert meta["participant"] == "P01"
    assert len(pd.read_csv(folders[0] / "spans.csv")) == 3


def test_bids_layout_and_channels(sessions, tmp_path):
    """Motion-BIDS (BIDS spec, "Motion"): one tracking system per stream, headerless
    motion.tsv whose column count equals the channels.tsv rows, channels.tsv columns
    name, component, type, tracked_point, units in that order, JNTANG in degrees."""
    result = export_bids([sessions], tmp_path / "bids")
    root = result["root"]
    assert [s["session"] for s in result["sessions"]] == ["01", "02", "01"]
    assert any("interrupted" in note for note in result["notes"])
    motion = root / "sub-P01" / "ses-01" / "motion"
    base = "sub-P01_ses-01_task-imitation_tracksys-"
    channels = pd.read_csv(motion / f"{base}leadercommand_channels.tsv", sep="\t")
    assert list(channels.columns) == ["name", "component", "type", "tracked_point", "units"]
    assert list(channels["type"]) == ["JNTANG", "JNTANG", "LATENCY"]
    assert list(channels["units"]) == ["deg", "deg", "s"]
    table = pd.read_csv(motion / f"{base}leadercommand_motion.tsv", sep="\t", header=None)
    assert table.shape == (200, 3)
    sidecar = json.loads((motion / f"{base}rightwristimu_motion.json").read_text())
    assert sidecar["TaskName"] == "imitation" and sidecar["SamplingFrequency"] == 100.0
    assert sidecar["ACCELChannelCount"] == 3 and sidecar["GYROChannelCount"] == 3
    scans = pd.read_csv(root / "sub-P01" / "ses-01" / "sub-P01_ses-01_scans.tsv", sep="\t")
    assert scans.loc[0, "acq_time"] == "2026-12-01T09:00:00.500000"
    events = pd.read_csv(motion / f"{base}leadercommand_events.tsv", sep="\t")
    assert list(events["trial_type"]) == ["repetition", "cue", "repetition", "rest"]
    assert events.loc[0, "onset"] == pytest.approx(0.1)


def test_bids_validator_reports_no_errors(sessions, tmp_path):
    """The official BIDS validator (bids-validator-deno, run offline) finds no errors."""
    validator = shutil.which("bids-validator-deno")
    if validator is None:
        pytest.skip("bids-validator-deno is not installed (pip install -e '.[test]')")
    root = export_bids([sessions], tmp_path / "bids")["root"]
    proc = subprocess.run([validator, "--json", str(root)], capture_output=True, text=True,
                          timeout=300, check=False)
    report = json.loads(proc.stdout)
    assert "motion" in report["summary"]["dataTypes"]
    issues = report.get("issues", {}).get("issues", [])
    errors = [i for i in issues if i.get("severity") == "error"]
    assert errors == [], json.dumps(errors[:5], indent=1)


def test_unwritable_output_is_a_clear_error(sessions, tmp_path):
    blocker = tmp_path / "file-not-folder"
    blocker.write_text("x")
    with pytest.raises(ExportError, match="cannot write to the output folder"):
        export_csv([sessions], blocker / "sub")
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "export",
                           str(tmp_path / "missing"), "--out", str(tmp_path / "o")],
                          capture_output=True, text=True, check=False)
    assert proc.returncode == 2 and "no such file or folder" in proc.stderr
    assert "Traceback" not in proc.stderr
