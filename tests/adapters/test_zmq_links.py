"""End to end over real ZeroMQ sockets: the reference bridge and two sensor publishers,
each in its own process on 127.0.0.1, driven by ZmqLeader and ZmqFollowers."""

from __future__ import annotations

import time

import numpy as np
import pytest
from zmq_peers import MonotonicClock, Peers, by_stream, drain, drain_states, read_log

from echoreo.adapters import Command, ZmqFollowers, ZmqLeader


@pytest.fixture
def spawn(tmp_path):
    with Peers(tmp_path) as start:
        yield start


def test_every_sample_once_in_order_and_commands_acknowledged(spawn, tmp_path):
    """Every sample a publisher logged as sent arrives exactly once, in order, under its
    stream with its sequence number and device time; every command is acknowledged.

    Expected values come from the publishers' own logs (what they handed to ZeroMQ)."""
    bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0")
    log_a, log_b = tmp_path / "a.log", tmp_path / "b.log"
    pub_a = spawn("publish", "--endpoint", "tcp://127.0.0.1:0", "--source", "synthetic",
                  "--streams", "right_wrist_imu,left_wrist_imu", "--rate", "100",
                  "--log", str(log_a))
    pub_b = spawn("publish", "--endpoint", "tcp://127.0.0.1:0", "--source", "synthetic",
                  "--streams", "head_pose", "--rate", "30", "--log", str(log_b))
    clock = MonotonicClock()
    leader = ZmqLeader(bridge.endpoint)
    followers = ZmqFollowers([pub_a.endpoint, pub_b.endpoint])
    try:
        hello = leader.connect(clock)
        infos = followers.connect(clock)
        assert [i.name for i in infos] == ["right_wrist_imu", "left_wrist_imu", "head_pose"]
        assert hello.robot == "torso-e1" and len(hello.joint_names) == 12
        j = hello.joint_names.index("right_elbow_flexion")
        batches, states = [], []
        for k in range(60):  # 60 commands at about 50 Hz
            q = hello.q.copy()
            q[j] += 0.2 * np.sin(k / 10)
            leader.send(Command(seq=k, t_ns=clock.now_ns(), q=q))
            batches.extend(followers.poll())
            states.extend(leader.read_state())
            time.sleep(0.02)
        states += drain_states(leader, lambda s: s and s[-1].acked_seq == 59)
        assert states[-1].acked_seq == 59
        seqs = [s.seq for s in states]
        assert seqs == sorted(set(seqs))
        assert leader.alive()
        assert leader.link_health()["rejections"] == []
        # stop the publishers gracefully: afterwards their logs are complete
        assert pub_a.terminate() == 0 and pub_b.terminate() == 0
        sent = {**read_log(log_a), **read_log(log_b)}
        n_sent = sum(len(v) for v in sent.values())
        batches += drain(followers, lambda got: sum(len(b) for b in got) + sum(
            len(b) for b in batches) >= n_sent, timeout_s=5.0)
        got = by_stream(batches)
        assert set(got) == set(sent)
        for name in sent:
            assert got[name] == sent[name], name
        assert all(len(v) > 20 for v in sent.values())
        for name, h in followers.health().items():
            assert (h.dropped, h.malformed) == (0, 0), name
        assert followers.malformed_total == 0
    finally:
        leader.close()
        followers.close()


def test_restarted_publisher_gap_reported_stream_resumes(spawn, tmp_path):
    """kill -9 of one publisher: a gap starts for its stream only; when it is restarted
    on the same endpoint the stream resumes (a new boot, noted on the gap's end event),
    and the other publisher's stream has no gap, no drop and every logged sample."""
    pub_a = spawn("publish", "--endpoint", "tcp://127.0.0.1:0", "--source", "synthetic",
                  "--streams", "right_wrist_imu", "--rate", "100", name="a1")
    log_b = tmp_path / "b.log"
    pub_b = spawn("publish", "--endpoint", "tcp://127.0.0.1:0", "--source", "synthetic",
                  "--streams", "left_wrist_imu", "--rate", "100", "--log", str(log_b))
    clock = MonotonicClock()
    followers = ZmqFollowers([pub_a.endpoint, pub_b.endpoint], gap_s=0.3)
    events = []
    try:
        followers.connect(clock)
        batches = drain(followers, lambda got: False, timeout_s=0.5)
        pub_a.kill9()
        batches += drain(followers, lambda got: False, timeout_s=0.8)
        events += followers.events()
        starts = [e for e in events if e[1] == "gap" and e[3]["phase"] == "start"]
        assert [e[2] for e in starts] == ["right_wrist_imu"]
        log_a2 = tmp_path / "a2.log"
        pub_a2 = spawn("publish", "--endpoint", pub_a.endpoint, "--source", "synthetic",
                       "--streams", "right_wrist_imu", "--rate", "100", "--log", str(log_a2),
                       name="a2")
        n0 = len(by_stream(batches).get("right_wrist_imu", []))
        batches += drain(followers, lambda got: len(by_stream(got).get("right_wrist_imu", []))
                         > 50, timeout_s=10.0)
        batches += drain(followers, lambda got: False, timeout_s=0.3)
        events += followers.events()
        h = followers.health()  # before the planned stop below (which starts gaps)
        assert pub_a2.terminate() == 0 and pub_b.terminate() == 0
        batches += drain(followers, lambda got: False, timeout_s=0.5)
        got = by_stream(batches)
        assert len(got["right_wrist_imu"]) > n0 + 50
        ends = [e for e in events if e[1] == "gap" and e[3]["phase"] == "end"]
        assert [e[2] for e in ends] == ["right_wrist_imu"]
        assert ends[0][3]["publisher_restarted"] is True
        # (a publisher-level fault, stream "", is an ERROR not_connected: the restart
        # was quicker than the host's timeout; PROTOCOL.md section 6)
        restarts = [e for e in events if e[1] == "fault" and e[2]]
        assert [e[2] for e in restarts] == ["right_wrist_imu"]
        assert "restarted" in restarts[0][3]["reason"]
        # the restarted run's samples all arrived, in order, after the gap
        second = read_log(log_a2)["right_wrist_imu"]
        assert got["right_wrist_imu"][-len(second):] == second
        # nothing else disturbed
        assert got["left_wrist_imu"] == read_log(log_b)["left_wrist_imu"]
        assert not [e for e in events if e[2] == "left_wrist_imu"]
        assert (h["left_wrist_imu"].gaps, h["left_wrist_imu"].dropped) == (0, 0)
        assert h["right_wrist_imu"].gaps == 1 and h["right_wrist_imu"].dropped == 0
    finally:
        followers.close()


def test_watchdog_holds_position_when_commands_stop(spawn):
    """Commands stop (the host stays connected and keeps its heartbeats): after the
    watchdog time the bridge reports mode ``watchdog`` and a constant measured pose,
    the pose it had reached (not rest). Requirement: PROTOCOL.md, section 6."""
    bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0", "--watchdog", "0.15")
    clock = MonotonicClock()
    leader = ZmqLeader(bridge.endpoint)
    try:
        hello = leader.connect(clock)
        j = hello.joint_names.index("left_shoulder_flexion")
        for k in range(25):
            q = hello.q.copy()
            q[j] += 0.03 * k  # a ramp the lagging robot is still following when we stop
            leader.send(Command(seq=k, t_ns=clock.now_ns(), q=q))
            time.sleep(0.02)
        drain_states(leader, lambda s: leader.bridge_mode == "watchdog", timeout_s=5.0)
        assert leader.bridge_mode == "watchdog"
        leader.read_state()  # states up to the first one in watchdog mode
        time.sleep(0.4)
        held = leader.read_state()
        assert len(held) >= 10
        assert leader.alive() and leader.bridge_mode == "watchdog"
        assert all(np.array_equal(s.q, held[0].q) for s in held)
        assert held[0].q[j] > hello.q[j] + 0.1  # held where it was, not back at rest
        assert held[-1].acked_seq == 24
    finally:
        leader.close()
