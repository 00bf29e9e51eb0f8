"""Exports of session files: plain CSV tables and Motion-BIDS.

CSV
    One folder per session with one table per stream (``t`` s, ``t_ns``,
    ``t_dev_ns``, ``seq``, channels), ``spans.csv``, ``events.csv``,
    ``scores.csv`` (one row per scored repetition, flags joined by ``;``) and
    ``meta.json`` (all session metadata, including the plan, robot and
    choreography snapshots): what any statistics package can read.

Motion-BIDS
    The motion extension of the Brain Imaging Data Structure (Jeung, Cockx,
    Appelhoff et al. 2024, "Motion-BIDS: an extension to the brain imaging
    data structure to organize motion data for reproducible research",
    Scientific Data 11:716; BIDS specification, section "Motion"). Every
    recorded stream is its own tracking system, because each comes from its
    own device with its own clock and sample count; the robot's commanded
    joints are the tracking system ``leadercommand`` with ``JNTANG``
    channels in degrees (the unit the specification recommends for joint
    angles). For each tracking system::

        sub-<p>/ses-<n>/motion/sub-<p>_ses-<n>_task-<task>_tracksys-<label>_motion.tsv
        ..._motion.json      TaskName, SamplingFrequency, TrackingSystemName + recommended
        ..._channels.tsv     name, component, type, tracked_point, units (in this order)

    plus ``..._tracksys-leadercommand_events.tsv`` (repetitions and cues,
    onsets relative to that system's first sample) and
    ``sub-<p>/ses-<n>/sub-<p>_ses-<n>_scans.tsv`` with ``acq_time`` of every
    file's first sample in UTC, which is how the specification asks
    simultaneously recorded systems to be synchronised. Motion files have no
    header row. Samples are written as recorded (no resampling); each system
    carries a ``LATENCY`` channel with the sample times in seconds from its
    first sample, because dropouts make the sampling uneven.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterable
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd

from echoreo import __version__
from echoreo.errors import ExportError, Problem
from echoreo.sessionfile import SessionFile, find_sessions

__all__ = ["BIDS_VERSION", "export_bids", "export_csv", "session_files"]

#: Version of the BIDS specification the export follows.
BIDS_VERSION = "1.10.0"


def session_files(paths: Iterable[str | Path]) -> list[Path]:
    """Session files named by ``paths`` (folders expanded, see ``find_sessions``).

    Raises
    ------
    ExportError
        A path does not exist or a folder holds no session file, or nothing was found.
    """
    found, problems = find_sessions(paths)
    if problems:
        raise ExportError(problems)
    if not found:
        raise ExportError("no session files found in the given paths",
                          hint="session files end in .sqlite; `echoreo sessions FOLDER` lists them")
    return found


def _prepare_out(out: str | Path) -> Path:
    out = Path(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
        probe = out / ".echoreo-write-test"
        probe.write_text("", encoding="utf-8")
        probe.unlink()
    except OSError as exc:
        raise ExportError(Problem(f"cannot write to the output folder: {exc.strerror}", str(out),
                                  hint="choose a folder you can write to with --out")) from exc
    return out


def _write(path: Path, text: str) -> None:
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise ExportError(Problem(f"cannot write: {exc.strerror}", str(path))) from exc


# --------------------------------------------------------------------------- CSV

def export_csv(paths: Iterable[str | Path], out: str | Path) -> list[Path]:
    """Write every session as a folder of CSV tables.

    Parameters
    ----------
    paths : iterable of path
        Session files or folders of them.
    out : path
        Output folder (created).

    Returns
    -------
    list of Path
        One folder per session, named after the session file.
    """
    out = _prepare_out(out)
    written = []
    for path in session_files(paths):
        with SessionFile(path) as sf:
            folder = out / path.stem
            folder.mkdir(exist_ok=True)
            for name in sf.stream_names():
                sf.read_stream(name).to_csv(folder / f"stream_{name}.csv", index=False)
            sf.spans().to_csv(folder / "spans.csv", index=False)
            sf.events().to_csv(folder / "events.csv", index=False)
            scores = sf.scores()
            if len(scores) and "flags" in scores:
                scores = scores.copy()
                scores["flags"] = [";".join(f) if isinstance(f, list | tuple) else f
                                   for f in scores["flags"]]
            scores.to_csv(folder / "scores.csv", index=False)
            _write(folder / "meta.json", json.dumps(dict(sf.meta), indent=2, default=str))
            written.append(folder)
    return written


# --------------------------------------------------------------------------- BIDS

def _label(text: str) -> str:
    """A BIDS label: letters and digits only."""
    label = re.sub(r"[^A-Za-z0-9]", "", str(text))
    return label or "x"


def _channel_rows(kind: str, channels: list[str], units: list[str], tracked: str) -> list[dict]:
    """Motion-BIDS channel descriptions for one stream (BIDS "Motion", channels.tsv)."""
    rows = []
    for name, unit in zip(channels, units, strict=True):
        lower = name.lower()
        axis = lower[-1] if lower[-2:] in ("_x", "_y", "_z") else "n/a"
        if kind == "joints":
            rows.append({"name": name, "component": "n/a", "type": "JNTANG",
                         "tracked_point": name, "units": "deg"})
        elif lower.startswith("acc"):
            rows.append({"name": name, "component": axis, "type": "ACCEL",
                         "tracked_point": tracked, "units": unit})
        elif lower.startswith("gyro"):
            rows.append({"name": name, "component": axis, "type": "GYRO",
                         "tracked_point": tracked, "units": unit})
        elif lower in ("yaw", "pitch", "roll"):
            # Euler angles about z (yaw), y (pitch), x (roll) of the base frame.
            component = {"yaw": "z", "pitch": "y", "roll": "x"}[lower]
            rows.append({"name": name, "component": component, "type": "ORNT",
                         "tracked_point": tracked, "units": unit})
        elif lower in ("qw", "qx", "qy", "qz", "quat_w", "quat_x", "quat_y", "quat_z"):
            rows.append({"name": name, "component": "quat_" + lower[-1], "type": "ORNT",
                         "tracked_point": tracked, "units": "n/a"})
        else:
            rows.append({"name": name, "component": "n/a", "type": "MISC",
                         "tracked_point": tracked, "units": unit or "n/a"})
    rows.append({"name": "latency", "component": "n/a", "type": "LATENCY",
                 "tracked_point": "n/a", "units": "s"})
    return rows


def _tsv(df: pd.DataFrame, header: bool = True) -> str:
    return df.to_csv(sep="\t", index=False, header=header, na_rep="n/a", lineterminator="\n")


def _acq_time(utc_start: str | None, t0: float) -> str:
    if not utc_start:
        return "n/a"
    start = datetime.fromisoformat(str(utc_start).replace("Z", "+00:00"))
    stamp = (start + timedelta(seconds=t0)).replace(tzinfo=None)
    return stamp.strftime("%Y-%m-%dT%H:%M:%S.%f")


def _pairs_by_stream(meta: dict) -> dict[str, dict]:
    return {p.get("stream"): p for p in (meta.get("pairs") or []) if isinstance(p, dict)}


def _write_tracksys(sf: SessionFile, stream: pd.Series, prefix: str, motion_dir: Path,
                    task: str, tracked: str) -> tuple[str, float] | None:
    data = sf.read_stream(stream["name"])
    if not len(data):
        return None
    channels = list(stream["channels"])
    kind = stream["kind"]
    label = _label(stream["name"])
    base = f"{prefix}_task-{task}_tracksys-{label}"
    values = data[channels].to_numpy(dtype=np.float64)
    if kind == "joints":
        values = np.degrees(values)
    t = data["t"].to_numpy()
    latency = t - t[0]
    table = pd.DataFrame(values, columns=channels)
    table["latency"] = np.round(latency, 6)
    _write(motion_dir / f"{base}_motion.tsv", _tsv(table, header=False))
    rows = _channel_rows(kind, channels, list(stream["units"]), tracked)
    _write(motion_dir / f"{base}_channels.tsv",
           _tsv(pd.DataFrame(rows, columns=["name", "component", "type", "tracked_point",
                                            "units"])))
    duration = float(latency[-1]) if len(latency) else 0.0
    nominal = float(stream["rate_hz"]) if math.isfinite(stream["rate_hz"]) else 0.0
    effective = (len(t) - 1) / duration if duration > 0 else nominal
    counts: dict[str, int] = {}
    for r in rows:
        counts[r["type"]] = counts.get(r["type"], 0) + 1
    sidecar = {
        "TaskName": task,
        "TaskDescription": "Imitation of a robot demonstrator: the participant copies each "
                           "demonstrated move for the planned number of repetitions.",
        "SamplingFrequency": nominal if nominal > 0 else round(effective, 6),
        "SamplingFrequencyEffective": round(effective, 6),
        "TrackingSystemName": stream["name"],
        "Manufacturer": "n/a",
        "ManufacturersModelName": str(stream.get("source") or "n/a"),
        "SoftwareVersions": f"echoreo {__version__}",
        "RecordingDuration": round(duration, 6),
        "MotionChannelCount": len(rows),
        "TrackedPointsCount": len({r["tracked_point"] for r in rows} - {"n/a"}),
        "MissingValues": "n/a",
        "SubjectArtefactDescription": "n/a",
    }
    for typ, count in sorted(counts.items()):
        sidecar[f"{typ}ChannelCount"] = count
    _write(motion_dir / f"{base}_motion.json", json.dumps(sidecar, indent=2))
    return f"motion/{base}_motion.tsv", float(t[0])


_EVENTS_SIDECAR = {
    "trial_type": {"Description": "What the span or event is.",
                   "Levels": {"repetition": "one repetition of a demonstrated move",
                              "rest": "the robot rests", "hold": "the robot holds a pose",
                              "cue": "a text cue shown to operator and participant",
                              "pause": "the operator paused the session",
                              "resume": "the session resumed", "stop": "controlled stop",
                              "fault": "a fault was recorded", "gap": "a sensor fell silent"}},
    "choreography": {"Description": "Name of the choreography the span belongs to."},
    "move": {"Description": "Name of the demonstrated move (or rest/hold)."},
    "repetition": {"Description": "Repetition index of the move, from 1; 0 for rests, holds "
                                  "and events."},
}


def _events_table(sf: SessionFile, t0: float) -> pd.DataFrame:
    spans = sf.spans()
    rows = []
    for s in spans.itertuples():
        rows.append({"onset": s.t_start - t0, "duration": s.t_end - s.t_start,
                     "trial_type": "repetition" if s.kind == "move" else s.kind,
                     "choreography": s.choreography, "move": s.move,
                     "repetition": int(s.repetition)})
    events = sf.events()
    for e in events.itertuples():
        if e.kind in ("cue", "pause", "resume", "stop", "fault", "gap"):
            rows.append({"onset": e.t_ns * 1e-9 - t0, "duration": 0.0, "trial_type": e.kind,
                         "choreography": "n/a", "move": "n/a", "repetition": 0})
    df = pd.DataFrame(rows, columns=["onset", "duration", "trial_type", "choreography", "move",
                                     "repetition"])
    df = df[df["onset"] >= 0].sort_values("onset", kind="stable")
    df["onset"] = df["onset"].round(6)
    df["duration"] = df["duration"].round(6)
    return df


def export_bids(paths: Iterable[str | Path], out: str | Path, *, task: str = "imitation",
                study: str | None = None) -> dict:
    """Write sessions as a Motion-BIDS dataset.

    Parameters
    ----------
    paths : iterable of path
        Session files or folders of them.
    out : path
        Dataset root (created).
    task : str
        BIDS task label (letters and digits are kept).
    study : str, optional
        Dataset name; by default the ``study`` of the first session.

    Returns
    -------
    dict
        ``root`` (Path), ``sessions`` (list of dict: file, subject, session,
        state), ``notes`` (list of str: what was left out and why).
    """
    out = _prepare_out(out)
    task = _label(task)
    files = session_files(paths)
    by_subject: dict[str, list[tuple[str, Path, SessionFile]]] = {}
    notes: list[str] = []
    opened = []
    try:
        for path in files:
            sf = SessionFile(path)
            opened.append(sf)
            participant = sf.participant or path.stem
            by_subject.setdefault(_label(participant), []).append(
                (str(sf.meta.get("utc_start") or ""), path, sf))
        name = study or next((sf.study for sf in opened if sf.study), None) or "echoreo study"
        summary = []
        for subject, items in sorted(by_subject.items()):
            items.sort(key=lambda item: item[0])
            for index, (_, path, sf) in enumerate(items, start=1):
                ses = f"{index:02d}"
                prefix = f"sub-{subject}_ses-{ses}"
                ses_dir = out / f"sub-{subject}" / f"ses-{ses}"
                motion_dir = ses_dir / "motion"
                motion_dir.mkdir(parents=True, exist_ok=True)
                if sf.state != "complete":
                    notes.append(f"{path.name}: state {sf.state}; exported what was recorded")
                pairs = _pairs_by_stream(sf.meta)
                scans = []
                t_leader = None
                for _, stream in sf.streams().iterrows():
                    tracked = (pairs.get(stream["name"], {}).get("site")
                               or ("robot" if stream["kind"] == "joints" else stream["name"]))
                    res = _write_tracksys(sf, stream, prefix, motion_dir, task, str(tracked))
                    if res is None:
                        notes.append(f"{path.name}: stream {stream['name']} has no samples; "
                                     "left out")
                        continue
                    rel, t0 = res
                    scans.append({"filename": rel,
                                  "acq_time": _acq_time(sf.meta.get("utc_start"), t0)})
                    if stream["name"] == "leader_command":
                        t_leader = t0
                if t_leader is not None:
                    events = _events_table(sf, t_leader)
                    _write(motion_dir / f"{prefix}_task-{task}_tracksys-leadercommand_events.tsv",
                           _tsv(events))
                else:
                    notes.append(f"{path.name}: no leader_command stream; events not exported")
                _write(ses_dir / f"{prefix}_scans.tsv",
                       _tsv(pd.DataFrame(scans, columns=["filename", "acq_time"])))
                summary.append({"file": str(path), "subject": subject, "session": ses,
                                "state": sf.state})
        participants = pd.DataFrame({"participant_id": [f"sub-{s}" for s in sorted(by_subject)]})
        _write(out / "participants.tsv", _tsv(participants))
        description = {
            "Name": name,
            "BIDSVersion": BIDS_VERSION,
            "DatasetType": "raw",
            "GeneratedBy": [{"Name": "echoreo", "Version": __version__,
                             "Description": "exported from echoreo session files"}],
        }
        _write(out / "dataset_description.json", json.dumps(description, indent=2))
        # Column descriptions of the events files, inherited by every session
        # (BIDS inheritance principle: a top-level sidecar applies to all files below).
        _write(out / f"task-{task}_events.json", json.dumps(_EVENTS_SIDECAR, indent=2))
        _write(out / "README",
               f"{name}\n\nMotion data of an imitation study exported by echoreo {__version__}.\n"
               "Each stream of a session is its own tracking system; the robot's commanded\n"
               "joint angles are the tracking system 'leadercommand' (JNTANG, degrees).\n"
               "Repetition spans and cues are in the leadercommand events files; acq_time in\n"
               "the scans files synchronises the tracking systems of one session.\n")
    finally:
        for sf in opened:
            sf.close()
    return {"root": out, "sessions": summary, "notes": notes}
