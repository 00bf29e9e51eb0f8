"""Scoring a 30-minute session with six paired streams at 50 Hz, end to end.

Builds one session file (not timed): the shipped choreographies run one
after the other until 30 minutes are filled, on the simulated torso-e1; a
virtual participant (``good`` profile, mirror mode) copies it; six follower
streams at 50 Hz are paired with the leader: the simulator's two wrist IMUs
and head pose, plus IMUs at the head and chest and a second right-wrist IMU
computed from the participant's joints on the human model. Then times
``echoreo.scoring.score_session`` (reading included; the session's own
embedding choice included) and writing the scores back, and prints the stage
times. Goal (issue #4): under 20 s on the 2-core machine.

Run: ``python benchmarks/bench_scoring.py [--minutes 30] [--keep FILE]``
"""

from __future__ import annotations

import argparse
import json
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from echoreo.runner.choreography import load_choreography
from echoreo.scoring import score_session
from echoreo.sessionfile import FORMAT, create_schema, stream_table, stream_table_ddl, write_scores
from echoreo.sim import imus, load_robot
from echoreo.sim.participant import PROFILES, simulate_participant

CHOREOGRAPHIES = ("warmup-right-arm", "warmup-both-arms", "warmup-head", "warmup-alternating",
                  "warmup-mixed")
RATE = 50.0
REST_S = 4.0
IMU_CHANNELS = ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y", "gyro_z")


def build_timeline(robot, minutes: float):
    """Concatenate compiled choreographies (with rests) until ``minutes`` are filled."""
    import echoreo.choreographies as ch

    folder = Path(ch.__file__).parent
    compiled = [load_choreography(folder / f"{n}.yaml").compile(RATE) for n in CHOREOGRAPHIES]
    qs, spans = [], []
    t0 = 0.0
    k = 0
    rest = np.asarray(robot.rest, float)
    while t0 < minutes * 60.0:
        tl = compiled[k % len(compiled)]
        n_rest = int(REST_S * RATE)
        qs.append(np.repeat(rest[None, :], n_rest, axis=0))
        t0 += n_rest / RATE
        qs.append(np.asarray(tl.q[:-1]))
        sp = tl.spans.copy()
        sp["t_start"] += t0
        sp["t_end"] += t0
        sp["choreography"] = tl.name
        spans.append(sp)
        t0 += (tl.q.shape[0] - 1) / RATE
        k += 1
    qs.append(np.repeat(rest[None, :], int(REST_S * RATE), axis=0))
    q = np.vstack(qs)
    t = np.arange(q.shape[0]) / RATE
    return t, q, pd.concat(spans, ignore_index=True)


def write_session(path: Path, robot, t, q, spans, streams, pairs) -> None:
    """A session file in the schema of echoreo.sessionfile (what the recorder writes)."""
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA journal_mode=WAL")
    create_schema(conn)
    meta = {"format": FORMAT, "software_version": "bench", "state": "complete",
            "utc_start": "2026-01-01T00:00:00+00:00", "study": "bench", "participant": "B01",
            "mode": "mirror", "clock": "virtual", "robot": robot.text,
            "robot_name": robot.name, "pairs": pairs, "command_rate_hz": RATE}
    conn.executemany("INSERT INTO meta VALUES (?, ?)",
                     [(k, json.dumps(v)) for k, v in meta.items()])

    def add(name, kind, channels, units, ts, data, source):
        conn.execute("INSERT INTO streams VALUES (?, ?, ?, ?, ?, ?, ?)",
                     (name, kind, json.dumps(list(channels)), json.dumps(list(units)), RATE,
                      source, None))
        conn.execute(stream_table_ddl(name, channels))
        tns = np.round(ts * 1e9).astype(np.int64)
        rows = np.column_stack([tns, tns, np.arange(tns.size)]).tolist()
        vals = np.asarray(data, float).tolist()
        conn.executemany(f"INSERT INTO {stream_table(name)} VALUES "
                         f"({', '.join('?' * (3 + len(channels)))})",
                         [r + v for r, v in zip(rows, vals, strict=True)])

    add("leader_command", "joints", robot.joint_names, ["rad"] * robot.n_joints, t, q, "bench")
    for s in streams:
        add(s["name"], s["kind"], s["channels"], s["units"], s["t"], s["data"], "bench")
    conn.executemany("INSERT INTO spans VALUES (?, ?, ?, ?, ?, ?, ?)",
                     [(r.choreography, int(r.step), r.move, int(r.repetition), r.kind,
                       round(r.t_start * 1e9), round(r.t_end * 1e9))
                      for r in spans.itertuples(index=False)])
    conn.commit()
    conn.close()


def build_session(path: Path, minutes: float) -> dict:
    robot = load_robot("torso-e1")
    t, q, spans = build_timeline(robot, minutes)
    windows = spans.loc[spans["kind"] == "move", ["t_start", "t_end"]].to_numpy(float)
    rec = simulate_participant(robot, t, q, windows, PROFILES["good"], mode="mirror",
                               rng=np.random.default_rng(2026),
                               rates={"right_wrist_imu": RATE, "left_wrist_imu": RATE,
                                      "head_pose": RATE})
    streams = []
    for s in rec.streams.values():
        streams.append({"name": s.name, "kind": s.kind, "channels": s.channels,
                        "units": s.units, "t": s.t, "data": s.data})
    extra = imus(rec.model, rec.t, rec.q, ["head", "chest", "right_wrist"])
    noise = np.random.default_rng(7)
    for name, site in (("head_imu", "head"), ("chest_imu", "chest"),
                       ("right_wrist_imu_b", "right_wrist")):
        acc, gyro = extra[site]
        data = np.column_stack([acc, gyro]) + 0.002 * noise.standard_normal((rec.t.size, 6))
        streams.append({"name": name, "kind": "imu", "channels": IMU_CHANNELS,
                        "units": ("m/s^2",) * 3 + ("rad/s",) * 3, "t": rec.t, "data": data})
    mirror = {"right_wrist": "left_wrist", "left_wrist": "right_wrist", "head": "head",
              "chest": "chest"}
    sites = {"right_wrist_imu": "right_wrist", "left_wrist_imu": "left_wrist",
             "head_pose": "head", "head_imu": "head", "chest_imu": "chest",
             "right_wrist_imu_b": "right_wrist"}
    pairs = [{"stream": s["name"], "kind": s["kind"], "site": sites[s["name"]],
              "leader_site": mirror[sites[s["name"]]]} for s in streams]
    write_session(path, robot, t, q, spans, streams, pairs)
    return {"duration_s": float(t[-1]), "move_spans": int((spans["kind"] == "move").sum()),
            "streams": len(streams)}


def _load() -> float:
    import os

    return os.getloadavg()[0]


def _cores() -> int:
    import os

    return len(os.sched_getaffinity(0))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=30.0)
    ap.add_argument("--keep", metavar="FILE", help="keep the session file here")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(args.keep) if args.keep else Path(tmp) / "bench.sqlite"
        if path.exists():
            path.unlink()
        t0 = time.perf_counter()
        info = build_session(path, args.minutes)
        build_s = time.perf_counter() - t0
        print(f"session: {info['duration_s'] / 60:.1f} min, {info['move_spans']} move spans, "
              f"{info['streams']} paired streams at {RATE:g} Hz "
              f"(built in {build_s:.1f} s, not timed)")
        t0, c0 = time.perf_counter(), time.process_time()
        scores = score_session(path)
        score_s = time.perf_counter() - t0
        t1 = time.perf_counter()
        write_scores(path, scores.records)
        write_s = time.perf_counter() - t1
        total = score_s + write_s
        cpu = time.process_time() - c0
        print(f"{'stage':40s} {'s':>8s}")
        for stage, secs in scores.timings.items():
            print(f"{stage:40s} {secs:8.2f}")
        print(f"{'write scores into the session file':40s} {write_s:8.2f}")
        print(f"{'total (score_session + write)':40s} {total:8.2f}   goal < 20 s: "
              f"{'met' if total < 20 else 'NOT met'} ({total / 20:.2f} of the budget)")
        print(f"{'CPU time of this process (all stages)':40s} {cpu:8.2f}   "
              f"(wall exceeds CPU when other processes share the cores; load average "
              f"{_load():.1f} on {_cores()} cores)")
        rec = scores.records
        print(f"records: {len(rec)}, graded: {int(rec['grade'].notna().sum())}, "
              f"mean grade {rec['grade'].mean():.1f}, "
              f"per record {1e3 * total / max(len(rec), 1):.1f} ms; "
              f"embedding: " + ", ".join(f"{c.kind} dim {c.dim} delay {c.delay}"
                                          for c in scores.params.embedding))
    return 0


if __name__ == "__main__":
    sys.exit(main())
