"""Timed sessions end to end on real SQLite files: spans, samples, clocks, faults, the command.

Expected values come from the plan and the documents that define them:
spans are the compiled timelines' spans offset to where each timeline starts
on the session clock (choreographies/FORMAT.md, section 3, "Session
timeline"); follower sample counts follow from the device clock model of
``simulate_participant`` (a device ticking at ``rate`` on its own clock
``t_dev = o + (1 + d 1e-6) t`` takes ``floor(T rate (1 + d 1e-6)) + 1``
samples in ``[0, T]``, DEVELOPERS.md "Robot model").
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from echoreo.errors import PlanError
from echoreo.runner.plan import load_plan
from echoreo.runner.program import build_program
from echoreo.runner.session import START_DELAY_S, RepetitionEnd, run_session
from echoreo.sessionfile import SessionFile

TINY = (Path(__file__).parent / "data" / "tiny-raise.yaml").read_text(encoding="utf-8")

PLAN = """\
study: session-test
participant: T01
consent_recorded: true
robot: torso-e1
mode: mirror
command_rate_hz: 50
countdown_s: 1
rest_s: 0.5
choreographies:
  - tiny.yaml
  - tiny.yaml
streams:
  - {stream: right_wrist_imu, kind: imu, site: right_wrist}
  - {stream: left_wrist_imu, kind: imu, site: left_wrist}
  - {stream: head_pose, kind: head_pose, site: head}
leader: {adapter: simulated, seed: 3}
followers:
  - adapter: simulated
    seed: 4
    profile: good
    loss_fraction: 0.0
    clock_offset_s: 7.5
    clock_drift_ppm: 40
"""


@pytest.fixture
def plan_path(tmp_path: Path):
    """``plan_path(extra="", replace=None)``: a short plan (two 3 s choreographies) on disk."""

    def make(extra: str = "", replace: tuple[str, str] | None = None) -> Path:
        (tmp_path / "tiny.yaml").write_text(TINY, encoding="utf-8")
        text = PLAN + extra
        if replace:
            text = text.replace(*replace)
        p = tmp_path / "plan.yaml"
        p.write_text(text, encoding="utf-8")
        return p

    return make


def _expected_count(t_end_s: float, rate_hz: float, drift_ppm: float) -> int:
    return math.floor(t_end_s * rate_hz * (1 + drift_ppm * 1e-6) + 1e-9) + 1


def _program(plan):
    tls = [it.choreography.compile(plan.command_rate_hz) for it in plan.items]
    return tls, build_program(plan.robot, tls, plan.robot.rest,
                              countdowns_s=[it.countdown_s for it in plan.items],
                              rests_s=[it.rest_s for it in plan.items],
                              rate_hz=plan.command_rate_hz)


def test_virtual_session_complete_file(plan_path, tmp_path):
    """A simulated session on the virtual clock writes a complete file whose spans are the
    timelines' spans offset on the session clock and whose sample counts match the rates."""
    plan = load_plan(plan_path())
    res: list = []
    path = run_session(plan, out_dir=tmp_path / "out", result=res)
    f = SessionFile(path)
    assert f.state == "complete" and res[0].outcome == "complete"
    meta = f.meta
    assert meta["clock"] == "virtual" and meta["participant"] == "T01"
    assert meta["mode"] == "mirror" and meta["robot_name"] == "torso-e1"
    assert set(meta["choreographies"]) == {"tiny-raise", "tiny-raise#2"}
    assert meta["pairs"][0] == {"stream": "right_wrist_imu", "kind": "imu",
                                "site": "right_wrist", "leader_site": "left_wrist"}

    tls, program = _program(plan)
    start_ns = round(START_DELAY_S * 1e9)
    spans = f.spans()
    expected = []
    for k, tl in enumerate(tls):
        off = start_ns + program.item_start[k] * round(1e9 / plan.command_rate_hz)
        for row in tl.spans.itertuples():
            expected.append((program.names[k], row.step, row.move, row.repetition, row.kind,
                             off + round(row.t_start * 1e9), off + round(row.t_end * 1e9)))
    got = list(zip(spans["choreography"], spans["step"], spans["move"], spans["repetition"],
                   spans["kind"], spans["t_start_ns"], spans["t_end_ns"], strict=True))
    assert len(got) == len(expected)
    for g, e in zip(got, expected, strict=True):
        assert g[:5] == e[:5]
        assert abs(g[5] - e[5]) <= 1 and abs(g[6] - e[6]) <= 1   # ns rounding only

    # one command per program tick, one state per command after the first
    assert len(f.read_stream("leader_command")) == program.n_ticks
    assert len(f.read_stream("leader_state")) == program.n_ticks - 1
    t_end = START_DELAY_S + (program.n_ticks - 1) / plan.command_rate_hz
    for name, rate in (("right_wrist_imu", 100.0), ("left_wrist_imu", 100.0),
                       ("head_pose", 30.0)):
        s = f.read_stream(name)
        assert len(s) == _expected_count(t_end, rate, 40.0), name
        assert np.all(np.diff(s["seq"]) == 1) and np.all(np.diff(s["t_ns"]) > 0)
        # device time on the devices' own clock: 7.5 s ahead at session zero
        assert abs(s["t_dev_ns"].iloc[0] - 7_500_000_000) < 1_000
    ev = f.events()
    n_moves = int((spans["kind"] == "move").sum())
    assert (ev["kind"] == "rep_start").sum() == n_moves == 4
    assert (ev["kind"] == "rep_end").sum() == n_moves
    assert (ev["kind"] == "cue").sum() == len(program.cues)
    assert (ev["kind"] == "stop").sum() == 1


def test_virtual_and_real_clock_same_spans_and_counts(plan_path, tmp_path):
    """The same plan on the virtual and on the real clock records the same spans and the same
    number of samples per stream (issue 3: virtual-clock and real-clock runs agree)."""
    plan = load_plan(plan_path(replace=("  - tiny.yaml\n  - tiny.yaml\n", "  - tiny.yaml\n")))
    paths = {c: run_session(plan, out_dir=tmp_path / c, clock=c) for c in ("virtual", "real")}
    fv, fr = SessionFile(paths["virtual"]), SessionFile(paths["real"])
    assert fv.meta["clock"] == "virtual" and fr.meta["clock"] == "real"
    assert fv.state == fr.state == "complete"
    cols = ["choreography", "step", "move", "repetition", "kind", "t_start_ns", "t_end_ns"]
    assert fv.spans()[cols].equals(fr.spans()[cols])
    for name in ("leader_command", "leader_state", "right_wrist_imu", "left_wrist_imu",
                 "head_pose"):
        sv, sr = fv.read_stream(name), fr.read_stream(name)
        assert len(sv) == len(sr), name
        assert np.array_equal(sv["t_ns"].to_numpy(), sr["t_ns"].to_numpy()), name
    ev_v, ev_r = fv.events(), fr.events()
    for kind in ("rep_start", "rep_end", "cue"):
        a = ev_v[ev_v["kind"] == kind]["t_ns"].to_numpy()
        b = ev_r[ev_r["kind"] == kind]["t_ns"].to_numpy()
        assert np.array_equal(a, b), kind


def test_session_command_without_terminal(plan_path, tmp_path):
    """`echoreo session` in a subprocess without a terminal prints plain log lines and exits 0."""
    plan = plan_path()
    env = {**os.environ, "TERM": "dumb"}
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "session", str(plan),
                           "--out", str(tmp_path / "cli"), "--participant", "C02"],
                          stdin=subprocess.DEVNULL, capture_output=True, text=True, timeout=120,
                          env=env)
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout
    assert "\x1b[" not in out                       # no terminal control sequences
    lines = [ln for ln in out.splitlines() if ln.startswith("[")]
    assert len(lines) > 10
    assert any("cue: go" in ln for ln in lines)
    assert any("repetition done" in ln for ln in lines)
    assert "research tool, not a medical device" in out
    files = list((tmp_path / "cli").glob("*.sqlite"))
    assert len(files) == 1 and "C02" in files[0].name
    assert SessionFile(files[0]).state == "complete"


def test_silent_stream_recorded_as_gap_event(plan_path, tmp_path):
    """A stream that goes silent for 1.5 s gives a `gap` event (silent, then back) and the
    session still completes."""
    extra = ("    dropout: {stream: left_wrist_imu, start_s: 3.0, duration_s: 1.5}\n"
             "silent_stream: {after_s: 0.5, action: warn}\n")
    path = run_session(plan_path(extra), out_dir=tmp_path / "out")
    f = SessionFile(path)
    ev = f.events()
    gaps = ev[(ev["kind"] == "gap") & (ev["stream"] == "left_wrist_imu")]
    assert len(gaps) == 2
    assert '"silent"' in gaps["detail"].iloc[0] and '"back"' in gaps["detail"].iloc[1]
    assert f.state == "complete"
    s = f.read_stream("left_wrist_imu")
    inside = (s["t"] >= 3.0) & (s["t"] < 4.5)
    assert not inside.any()
    assert (ev[ev["stream"] != "left_wrist_imu"]["kind"] == "gap").sum() == 0


def test_silent_stream_pauses_when_plan_says_so(plan_path, tmp_path):
    """With `action: pause` the robot holds while the stream is silent and the rest of the
    session is shifted by the pause."""
    extra = ("    dropout: {stream: head_pose, start_s: 2.0, duration_s: 1.0}\n"
             "silent_stream: {after_s: 0.4, action: pause}\n")
    plan = load_plan(plan_path(extra))
    path = run_session(plan, out_dir=tmp_path / "out")
    f = SessionFile(path)
    ev = f.events()
    assert (ev["kind"] == "pause").sum() == 1 and (ev["kind"] == "resume").sum() == 1
    held = f.meta["held_s"]
    assert held > 0.3
    tls, program = _program(plan)
    assert len(f.read_stream("leader_command")) == program.n_ticks
    last = f.spans()["t_end_ns"].iloc[-1]
    planned = START_DELAY_S * 1e9 + (program.item_start[-1] / 50 + tls[-1].spans["t_end"]
                                     .iloc[-1]) * 1e9
    assert abs(last - planned - held * 1e9) < 2e6


def test_lost_leader_stops_and_marks_interrupted(plan_path, tmp_path):
    """A leader that stops answering ends the session with a fault event, state interrupted."""
    p = plan_path(replace=("{adapter: simulated, seed: 3}",
                           "{adapter: simulated, seed: 3, fail_after_s: 2.5}"))
    res: list = []
    path = run_session(p, out_dir=tmp_path / "out", result=res)
    f = SessionFile(path)
    assert f.state == "interrupted" and res[0].outcome == "leader_lost"
    ev = f.events()
    assert (ev["kind"] == "fault").sum() == 1
    assert "leader lost" in ev[ev["kind"] == "fault"]["detail"].iloc[0]
    cmd = f.read_stream("leader_command")
    assert cmd["t"].iloc[-1] < 2.6


def test_malformed_and_out_of_order_counted_not_crashing(plan_path, tmp_path):
    """Re-sent old samples and wrong-width batches are logged as `malformed` and left out."""
    p = plan_path(replace=("    loss_fraction: 0.0\n", "    loss_fraction: 0.0\n"
                                                        "    glitch_every_s: 0.5\n"))
    path = run_session(p, out_dir=tmp_path / "out")
    f = SessionFile(path)
    ev = f.events()
    bad = ev[ev["kind"] == "malformed"]
    assert len(bad) >= 10
    assert bad["detail"].str.contains("out of order").any()
    assert bad["detail"].str.contains("bad batch").any()
    assert f.state == "complete"
    for name in ("right_wrist_imu", "left_wrist_imu", "head_pose"):
        s = f.read_stream(name)
        assert np.all(np.diff(s["seq"]) >= 1)       # recorded once, in order


def _grade(job: RepetitionEnd) -> dict:
    f = SessionFile(job.session_path)
    s = f.read_stream("right_wrist_imu")
    n = int(((s["t"] >= job.t_start) & (s["t"] <= job.t_end)).sum())
    return {"grade": 50.0, "band": "fair", "flags": [], "samples": n}


def test_repetition_end_hook_runs_off_the_loop(plan_path, tmp_path):
    """`on_repetition_end` is called once per repetition, after its samples are committed."""
    path = run_session(plan_path(), out_dir=tmp_path / "out", on_repetition_end=_grade)
    ev = SessionFile(path).events()
    grades = ev[ev["kind"] == "live_grade"]
    assert len(grades) == 4
    import json

    for d in grades["detail"]:
        r = json.loads(d)["result"]
        assert r["grade"] == 50.0 and r["samples"] >= 119   # 1.2 s at 100 Hz


def test_virtual_clock_refused_for_sockets(tmp_path):
    """`--clock virtual` with a ZeroMQ plan is refused before anything connects."""
    plan = load_plan(Path(__file__).resolve().parents[2] / "choreographies" / "plans"
                     / "zeromq.yaml", participant="Z01")
    with pytest.raises(PlanError) as info:
        run_session(plan, out_dir=tmp_path, clock="virtual")
    assert "real clock" in str(info.value)
    assert not list(tmp_path.glob("*.sqlite"))


def test_ctrl_c_is_a_controlled_stop(plan_path, tmp_path):
    """SIGINT (Ctrl-C) during a real-clock run: the robot ramps slowly to rest, the stop is
    logged, the file is closed and the command exits 130 (runner/cli.py convention)."""
    import json
    import signal

    plan = plan_path(replace=("  - tiny.yaml\n  - tiny.yaml\n", "  - tiny.yaml\n"))
    proc = subprocess.Popen([sys.executable, "-m", "echoreo.runner.cli", "session", str(plan),
                             "--clock", "real", "--no-live-grades", "--out",
                             str(tmp_path / "out")],
                            stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True)
    lines = []
    try:
        for line in proc.stdout:
            lines.append(line)
            if "cue: 1 of 2" in line:   # the first repetition has begun
                proc.send_signal(signal.SIGINT)
                break
        rest = proc.communicate(timeout=60)[0]
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130, "".join(lines) + rest
    assert "controlled stop (Ctrl-C)" in rest
    f = SessionFile(next((tmp_path / "out").glob("*.sqlite")))
    ev = f.events()
    stop = json.loads(ev[ev["kind"] == "stop"]["detail"].iloc[0])
    assert stop == {**stop, "reason": "Ctrl-C", "controlled": True}
    assert f.state == "complete" and f.meta["outcome"] == "stopped"
    plan_obj = load_plan(plan)
    last = f.read_stream("leader_command").iloc[-1]
    assert np.allclose([last[n] for n in plan_obj.robot.joint_names], plan_obj.robot.rest)
    assert (ev["kind"] == "rep_end").sum() < 2
