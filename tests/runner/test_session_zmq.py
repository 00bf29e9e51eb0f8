"""A session over ZeroMQ: the reference robot bridge and sensor publisher in their own processes.

The plan names ZeroMQ adapters, so the runner must load them from the plan and
run on the real clock (DESIGN.md: anything with a socket runs on the real
clock). Real sockets on 127.0.0.1, real processes, a real SQLite file.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

from echoreo.runner.session import run_session
from echoreo.sessionfile import SessionFile

TINY = (Path(__file__).parent / "data" / "tiny-raise.yaml").read_text(encoding="utf-8")

START_S = 30.0  # bound on a peer's start-up (imports numpy, zmq, the simulator)


def _start(tmp_path: Path, command: str, *args: str, tag: str | None = None) -> subprocess.Popen:
    tag = tag or command  # names the ready and output files (two peers of one command)
    with open(tmp_path / f"{tag}.out", "w") as out:   # the child keeps its own copy
        return subprocess.Popen([sys.executable, "-m", "echoreo.runner.cli", command,
                                 "--endpoint", "tcp://127.0.0.1:0", "--ready-file",
                                 str(tmp_path / f"{tag}.ready.json"), "--duration", "60",
                                 *args],
                                stdout=out, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL)


def _ready(tmp_path: Path, command: str, proc: subprocess.Popen) -> str:
    ready = tmp_path / f"{command}.ready.json"
    deadline = time.monotonic() + START_S
    while not ready.exists():
        assert proc.poll() is None, (tmp_path / f"{command}.out").read_text()
        assert time.monotonic() < deadline, f"{command} did not start"
        time.sleep(0.05)
    time.sleep(0.05)
    return json.loads(ready.read_text())["endpoint"]


def _stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(5)


def _write_plan(tmp_path: Path, participant: str, streams: str, bridge: str,
                publishers: list[str]) -> Path:
    """A one-choreography ZeroMQ plan (the tiny raise) with the given ``streams:`` lines."""
    (tmp_path / "tiny.yaml").write_text(TINY, encoding="utf-8")
    followers = "".join(f'  - {{adapter: zmq, endpoint: "{ep}"}}\n' for ep in publishers)
    plan = tmp_path / "plan.yaml"
    plan.write_text(f"""\
study: zmq-test
participant: {participant}
consent_recorded: true
robot: torso-e1
mode: mirror
command_rate_hz: 50
countdown_s: 0.5
choreographies: [tiny.yaml]
streams:
{streams}leader: {{adapter: zmq, endpoint: "{bridge}"}}
followers:
{followers}""", encoding="utf-8")
    return plan


def _run_with_peers(tmp_path: Path, participant: str, streams: str, bridge_args: tuple = (),
                    publishers: tuple = (("publish", ()),)) -> tuple[Path, list]:
    """Start a bridge and the publishers (tag, arguments) as processes, run the session of
    a one-choreography plan with the given ``streams:`` lines, stop the peers; returns
    the session file's path and the run's results."""
    procs: dict[str, subprocess.Popen] = {}
    try:
        procs["bridge"] = _start(tmp_path, "bridge", *bridge_args)
        for tag, args in publishers:
            procs[tag] = _start(tmp_path, "publish", *args, tag=tag)
        endpoints = {tag: _ready(tmp_path, tag, proc) for tag, proc in procs.items()}
        _write_plan(tmp_path, participant, streams, endpoints.pop("bridge"),
                    list(endpoints.values()))
        res: list = []
        path = run_session(tmp_path / "plan.yaml", out_dir=tmp_path / "out", result=res)
    finally:
        for proc in reversed(list(procs.values())):
            _stop(proc)
    return path, res


def test_session_over_zeromq(tmp_path):
    """Bridge and publisher in separate processes: the session completes on the real clock,
    every command is recorded and acknowledged states and all three streams arrive."""
    path, res = _run_with_peers(tmp_path, "Z01", """\
  - {stream: right_wrist_imu, kind: imu, site: right_wrist}
  - {stream: left_wrist_imu, kind: imu, site: left_wrist}
  - {stream: head_pose, kind: head_pose, site: head}
""", publishers=(("publish", ("--clock-offset", "3.7")),))
    f = SessionFile(path)
    assert f.state == "complete" and f.meta["clock"] == "real"
    assert len(f.read_stream("leader_command")) == res[0].ticks
    assert len(f.read_stream("leader_state")) > 0.5 * res[0].ticks
    for name, rate in (("right_wrist_imu", 100), ("left_wrist_imu", 100), ("head_pose", 30)):
        s = f.read_stream(name)
        # the publisher streams from before the first command to after the last
        assert len(s) >= 0.8 * rate * (res[0].ticks / 50), name
        assert (s["seq"].diff().dropna() >= 1).all()
        # device time runs 3.7 s ahead of the publisher's start; the recorded session time
        # is mapped back with one offset (NTP exchange), so the difference is constant
        diff = (s["t_dev_ns"] - s["t_ns"]).to_numpy()
        assert 3.7e9 <= diff.mean() < 3.7e9 + START_S * 1e9
        assert diff.max() - diff.min() < 5e6
    assert len(f.spans()) > 0
    assert os.path.getsize(path) > 0


def test_recorded_leader_sensor_named_in_the_plan(tmp_path):
    """A sensor on the robot, published like a follower stream and named by a pair's
    `leader_stream:` (FORMAT.md section 3), is recorded, stored in the pairs meta and
    used by scoring as the leader reference (no fall-back to the virtual sensor)."""
    from echoreo.scoring import score_session

    path, _ = _run_with_peers(tmp_path, "Z02", """\
  - {stream: right_wrist_imu, kind: imu, site: right_wrist,
      leader_stream: robot_left_wrist_imu}
  - {stream: left_wrist_imu, kind: imu, site: left_wrist}
""", publishers=(("publish", ()), ("robot-imu", ("--source", "synthetic", "--streams",
                                                 "robot_left_wrist_imu"))))
    f = SessionFile(path)
    assert f.state == "complete"
    pairs = {p["stream"]: p for p in f.meta["pairs"]}
    assert pairs["right_wrist_imu"]["leader_stream"] == "robot_left_wrist_imu"
    assert "leader_stream" not in pairs["left_wrist_imu"]
    assert len(f.read_stream("robot_left_wrist_imu")) > 0
    scores = score_session(path)
    messages = " ".join(p.message for p in scores.problems)
    assert "recorded leader stream" not in messages
    assert set(scores.records["stream"]) == {"right_wrist_imu", "left_wrist_imu"}


def _bridge_counters(out_text: str) -> dict[str, int]:
    """The counters ``echoreo bridge`` prints on stopping: ``bridge stopped: name n, ...``."""
    tail = " ".join(out_text.split()).split("bridge stopped:", 1)[1]
    return {name: int(value) for name, value in (item.split() for item in tail.split(","))}


def test_bridge_timing_recorded_in_the_session_file(tmp_path):
    """With a bridge whose late limit is 0 (every command applied any time after its
    own counts), the session file's meta ``bridge_timing`` holds the bridge's own totals:
    `late` and `slipped` equal the counters the bridge prints when it stops, the host
    saw one ACK with ``late_ns`` per late command, and one bridge boot.

    Expected values: the bridge's own counters (PROTOCOL.md section 5); no timing."""
    path, res = _run_with_peers(tmp_path, "Z03",
                                "  - {stream: head_pose, kind: head_pose, site: head}\n",
                                bridge_args=("--late", "0"),
                                publishers=(("publish", ("--streams", "head_pose")),))
    counts = _bridge_counters((tmp_path / "bridge.out").read_text())
    f = SessionFile(path)
    assert f.state == "complete"
    timing = f.meta["bridge_timing"]
    print(f"bridge counters {counts}; recorded {timing}")
    assert counts["applied"] == res[0].ticks  # every command reached the robot
    assert timing["late"] == counts["late"] and timing["slipped"] == counts["slipped"]
    assert timing["late"] + timing["slipped"] > 0  # with a limit of 0 ns nearly all count
    assert timing["late_acks"] == counts["late"]
    assert (timing["late_max_ns"] > 0) == (counts["late"] > 0)
    assert timing["boots"] == 1


def test_simulated_leader_records_no_bridge_timing(demo_study):
    """A simulated leader has no bridge: ``bridge_timing`` is absent (FORMAT.md section 3,
    "Adapters"), while the runner's own ``tick_lateness`` is there."""
    sessions = sorted((demo_study["out"] / "sessions").glob("*.sqlite"))
    assert sessions, demo_study["proc"].stderr[-2000:]
    for p in sessions:
        meta = SessionFile(p).meta
        assert meta["leader_adapter"] == "simulated"
        assert "bridge_timing" not in meta and "tick_lateness" in meta


def test_bridge_restarted_mid_session_stops_it_as_leader_lost(tmp_path):
    """kill -9 of the bridge during the choreography and a new bridge on the same
    endpoint at once (the leader's silence timeout is 30 s, so the restart falls within
    it): the new bridge answers ``not_connected``, the runner stops the session as for
    a lost leader (outcome ``leader_lost``, file ``interrupted``) and the fault event
    names the cause; the new bridge applies none of the session's commands.

    Expected behaviour: adapters/PROTOCOL.md section 6 (ERROR ``not_connected``)."""
    bridge = _start(tmp_path, "bridge")
    bridge2 = None
    try:
        pub = _start(tmp_path, "publish", "--streams", "head_pose")
        try:
            ep_bridge = _ready(tmp_path, "bridge", bridge)
            ep_pub = _ready(tmp_path, "publish", pub)
            plan = _write_plan(tmp_path, "Z04",
                               "  - {stream: head_pose, kind: head_pose, site: head}\n",
                               ep_bridge, [ep_pub])
            plan.write_text(plan.read_text().replace(f'endpoint: "{ep_bridge}"}}',
                                                     f'endpoint: "{ep_bridge}", timeout_s: 30}}'))
            (tmp_path / "tiny.yaml").write_text(TINY.replace("repeat: 2", "repeat: 10"))
            out = tmp_path / "out"
            restarted: list = []

            def restart() -> None:
                nonlocal bridge2
                deadline = time.monotonic() + START_S
                while not list(out.glob("*.sqlite")) and time.monotonic() < deadline:
                    time.sleep(0.02)
                time.sleep(1.5)  # into the session's commands
                bridge.kill()
                bridge.wait(5)
                bridge2 = _start(tmp_path, "bridge", "--endpoint", ep_bridge, tag="bridge2")
                _ready(tmp_path, "bridge2", bridge2)
                restarted.append(time.monotonic())

            killer = threading.Thread(target=restart, daemon=True)
            killer.start()
            res: list = []
            path = run_session(plan, out_dir=out, result=res)
            t_end = time.monotonic()
            killer.join(START_S)
        finally:
            _stop(pub)
    finally:
        _stop(bridge)
        if bridge2 is not None:
            _stop(bridge2)
    assert restarted, "the bridge was not restarted during the session"
    print(f"session ended {t_end - restarted[0]:.3f} s after the new bridge listened")
    assert t_end - restarted[0] < 5.0
    assert res[0].outcome == "leader_lost"
    f = SessionFile(path)
    assert f.state == "interrupted"
    ev = f.events()
    faults = [json.loads(d) for d in ev.loc[ev["kind"] == "fault", "detail"]]
    lost = [d for d in faults if d.get("reason") == "leader lost"]
    assert len(lost) == 1
    assert "not_connected" in lost[0]["detail"] and "restarted" in lost[0]["detail"]
    # the host greeted the new bridge again after the loss (its WELCOME counts as a second
    # boot) but never commanded it: the restarted robot moved by no command of this session
    assert f.meta["bridge_timing"]["boots"] == 2
    assert _bridge_counters((tmp_path / "bridge2.out").read_text())["applied"] == 0
