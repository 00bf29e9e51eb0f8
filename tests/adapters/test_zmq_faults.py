"""Faults at the wire level: a bridge that dies, a bridge fed garbage, a device that
cannot answer time requests."""

from __future__ import annotations

import time

import numpy as np
import pytest
import zmq
from zmq_peers import MonotonicClock, Peers, drain

from echoreo.adapters import Command, ZmqFollowers, ZmqLeader


@pytest.fixture
def spawn(tmp_path):
    with Peers(tmp_path) as start:
        yield start


def test_killed_bridge_makes_leader_not_alive_and_commands_dropped(spawn):
    """kill -9 of the bridge: after the 1 s heartbeat timeout ``alive()`` is False for
    good, and later commands are dropped (counted), never queued for a late delivery."""
    bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0")
    clock = MonotonicClock()
    leader = ZmqLeader(bridge.endpoint, timeout_s=0.5)
    try:
        hello = leader.connect(clock)
        leader.send(Command(0, clock.now_ns(), hello.q))
        assert leader.alive()
        bridge.kill9()
        deadline = time.monotonic() + 10
        while leader.alive() and time.monotonic() < deadline:
            time.sleep(0.02)
        assert not leader.alive()
        leader.send(Command(1, clock.now_ns(), hello.q))
        assert leader.link_health()["commands_dropped"] == 1
    finally:
        leader.close()


def test_bridge_survives_malformed_messages(spawn):
    """1,000 messages of random bytes and wrong versions at the bridge: it answers with
    ERROR (rate-limited), keeps serving a proper host, and reports the count at exit."""
    bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0")
    rng = np.random.default_rng(11)
    ctx = zmq.Context()
    sock = ctx.socket(zmq.DEALER)
    sock.linger = 5000  # every message queued must reach the bridge before close returns
    sock.connect(bridge.endpoint)
    try:
        for k in range(1000):
            if k % 2:
                sock.send_multipart([rng.bytes(int(rng.integers(1, 64)))
                                     for _ in range(int(rng.integers(1, 5)))])
            else:
                sock.send_multipart([b"ECWP" + bytes([2, 1, 0, 0]), b"{}"])
        assert sock.poll(5000)
        assert b"malformed" in sock.recv_multipart()[1]
    finally:
        sock.close()
        ctx.term()
    clock = MonotonicClock()
    leader = ZmqLeader(bridge.endpoint)
    try:
        hello = leader.connect(clock)
        leader.send(Command(0, clock.now_ns(), hello.q))
        leader.stop()
        assert leader.link_health()["acked_seq"] == 0
    finally:
        leader.close()
    assert bridge.terminate() == 0
    assert "malformed 1000" in " ".join(bridge.out.read_text().split())


def test_device_without_time_sync_mapped_by_lower_envelope(spawn):
    """A publisher that does not answer time requests, its clock 2 s behind the session
    clock (both modelled on this computer's monotonic clock with one origin): samples
    still flow, mapped by the lower envelope of (receive - device time), whose offset is
    the true +2 s plus the minimum one-way latency (positive, on loopback < 5 ms)."""
    clock = MonotonicClock()
    pub = spawn("publish", "--endpoint", "tcp://127.0.0.1:0", "--source", "synthetic",
                "--streams", "head_pose", "--rate", "50", "--no-time-sync",
                "--clock-offset", "-2.0", "--clock-origin-ns", str(clock.origin_ns))
    followers = ZmqFollowers([pub.endpoint])
    try:
        infos = followers.connect(clock)
        assert [i.name for i in infos] == ["head_pose"]
        batches = drain(followers, lambda got: sum(len(b) for b in got) >= 50, timeout_s=10)
        assert sum(len(b) for b in batches) >= 50
        cmap = followers.clock_maps()["head_pose"]
        assert cmap.method == "envelope"
        assert 2.0e9 < cmap.offset_ns < 2.0e9 + 5e6
        assert followers.health()["head_pose"].dropped == 0
    finally:
        followers.close()
