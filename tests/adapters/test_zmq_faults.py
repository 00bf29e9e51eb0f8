"""Faults at the wire level: a bridge that dies, a bridge fed garbage, a device that
cannot answer time requests, a bridge or publisher restarted within the host's timeout."""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
import zmq
from zmq_peers import MonotonicClock, Peers, drain, read_log

from echoreo.adapters import Command, ZmqFollowers, ZmqLeader
from echoreo.adapters.protocol import MsgType, decode, encode


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


# A bridge or publisher killed and started again on its endpoint within the host's
# silence timeout (PROTOCOL.md section 6). The host's timeout is set to 30 s here so
# that silence cannot be what the host notices: the restart always falls within it.
RESTART_TIMEOUT_S = 30.0
DETECT_S = 10.0  # generous bound on noticing the restarted peer (loaded CI machines), real s


def test_quickly_restarted_bridge_makes_leader_lost_with_reason(spawn):
    """kill -9 of the bridge and a new bridge on the same endpoint, while the host keeps
    commanding at 50 Hz: the new bridge has no session with the host and answers
    ERROR ``not_connected``; the host counts the leader lost for good (within 10 s of the
    new bridge listening, far inside the 30 s silence timeout), names the cause, and
    drops later commands instead of sending them to a bridge that ignores them.

    Expected behaviour: PROTOCOL.md sections 4 and 6 (ERROR ``not_connected``)."""
    bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0", name="bridge1")
    clock = MonotonicClock()
    leader = ZmqLeader(bridge.endpoint, timeout_s=RESTART_TIMEOUT_S)
    seq = 0

    def command_for(duration_s: float) -> None:
        nonlocal seq
        end = time.monotonic() + duration_s
        while time.monotonic() < end and leader.alive():
            leader.send(Command(seq, clock.now_ns(), hello.q))
            seq += 1
            leader.read_state()
            time.sleep(0.02)

    try:
        hello = leader.connect(clock)
        command_for(0.3)
        assert leader.alive() and leader.lost_reason() == ""
        bridge.kill9()
        spawn("bridge", "--endpoint", bridge.endpoint, name="bridge2")
        t_up = time.monotonic()
        command_for(DETECT_S)
        detected_s = time.monotonic() - t_up
        print(f"leader lost {detected_s:.3f} s after the new bridge listened")
        assert not leader.alive()
        assert detected_s < DETECT_S
        reason = leader.lost_reason()
        assert "not_connected" in reason and "restarted" in reason and bridge.endpoint in reason
        assert any(e["code"] == "not_connected" for e in leader.link_health()["errors"])
        # lost for good: the new bridge's WELCOME (the host keeps greeting) changes nothing
        time.sleep(0.5)
        assert not leader.alive() and leader.lost_reason() == reason
        sent_before = leader.link_health()["commands_dropped"]
        leader.send(Command(seq, clock.now_ns(), hello.q))
        assert leader.link_health()["commands_dropped"] == sent_before + 1
    finally:
        leader.close()


def test_quickly_restarted_publisher_greeted_again_stream_resumes(spawn, tmp_path):
    """kill -9 of a publisher and a new one on the same endpoint within the host's
    silence timeout: the new publisher answers the host's heartbeats with ERROR
    ``not_connected``, the host says HELLO again, the new ANNOUNCE's boot differs, and
    the stream resumes (within 10 s, far inside the 30 s timeout) with every sample the
    new publisher logged, a ``fault`` event naming the restart and a gap end noting it.

    Expected behaviour: PROTOCOL.md sections 2 (a new ``boot``) and 6."""
    pub = spawn("publish", "--endpoint", "tcp://127.0.0.1:0", "--source", "synthetic",
                "--streams", "right_wrist_imu", "--rate", "100", name="p1")
    clock = MonotonicClock()
    followers = ZmqFollowers([pub.endpoint], gap_s=0.3, timeout_s=RESTART_TIMEOUT_S)
    try:
        followers.connect(clock)
        drain(followers, lambda got: False, timeout_s=0.3)
        followers.events()
        pub.kill9()
        log2 = tmp_path / "p2.log"
        pub2 = spawn("publish", "--endpoint", pub.endpoint, "--source", "synthetic",
                     "--streams", "right_wrist_imu", "--rate", "100", "--log", str(log2),
                     name="p2")
        t_up = time.monotonic()
        batches = drain(followers, lambda got: sum(b.seq.size for b in got) > 50,
                        timeout_s=DETECT_S)
        resumed_s = time.monotonic() - t_up
        print(f"stream resumed {resumed_s:.3f} s after the new publisher listened")
        assert sum(b.seq.size for b in batches) > 50
        events = followers.events()
        assert pub2.terminate() == 0
        batches += drain(followers, lambda got: False, timeout_s=0.3)
        restarts = [e for e in events if e[1] == "fault" and e[2] == "right_wrist_imu"]
        assert len(restarts) == 1 and "restarted" in restarts[0][3]["reason"]
        assert restarts[0][3]["old_boot"] != restarts[0][3]["new_boot"]
        assert any(e[1] == "fault" and e[3].get("code") == "not_connected" for e in events)
        ends = [e for e in events if e[1] == "gap" and e[3]["phase"] == "end"]
        assert len(ends) == 1 and ends[0][3]["publisher_restarted"] is True
        got = [(int(s), int(t)) for b in batches
               for s, t in zip(b.seq, b.t_dev_ns, strict=True)]
        second = read_log(log2)["right_wrist_imu"]  # all of the new run, in order, last
        assert len(second) > 50 and got[-len(second):] == second
    finally:
        followers.close()


def test_time_replies_alone_do_not_keep_a_publisher_connected():
    """A peer on the publisher's endpoint that answers TIME_REQ (as peers do for any
    host) but sends nothing else, nor ERROR: the host, silence timeout 1 s, time
    exchanges every 0.3 s, counts it lost after the silence and greets it with HELLO
    again (within 10 s); time replies are no sign of a session.

    Expected behaviour: PROTOCOL.md section 6 (what counts as silence)."""
    ctx = zmq.Context()
    router = ctx.socket(zmq.ROUTER)
    router.linger = 0
    port = router.bind_to_random_port("tcp://127.0.0.1")
    followers = ZmqFollowers([f"tcp://127.0.0.1:{port}"], timeout_s=1.0, sync_interval_s=0.3,
                             connect_timeout_s=3.0)
    clock = MonotonicClock()
    boot = 4242
    announce = encode(MsgType.ANNOUNCE, {
        "device": "time replies only", "boot": boot, "time_sync": True, "heartbeat_ms": 200,
        "streams": [{"name": "s", "kind": "imu", "channels": ["a"], "units": ["1"],
                     "rate_hz": 10.0}]})
    hellos: list[float] = []
    stop = threading.Event()

    def serve() -> None:
        while not stop.is_set():
            if not router.poll(20):
                continue
            ident, *frames = router.recv_multipart()
            msg = decode(frames)
            if msg.type == MsgType.HELLO:
                hellos.append(time.monotonic())
                if len(hellos) == 1:  # a session only for the first HELLO
                    router.send_multipart([ident, *announce])
            elif msg.type == MsgType.TIME_REQ:
                now = time.monotonic_ns()
                router.send_multipart([ident, *encode(MsgType.TIME_REP, {
                    "id": msg.meta["id"], "t1_ns": msg.meta["t1_ns"], "t2_ns": now,
                    "t3_ns": now})])

    server = threading.Thread(target=serve, daemon=True)
    server.start()
    try:
        followers.connect(clock)
        t0 = time.monotonic()
        deadline = t0 + DETECT_S
        while len(hellos) < 2 and time.monotonic() < deadline:
            time.sleep(0.02)
        assert len(hellos) >= 2, "the host never greeted the silent peer again"
        print(f"greeted again {hellos[1] - t0:.3f} s after connect")
    finally:
        followers.close()
        stop.set()
        server.join(5)
        router.close(0)
        ctx.term()
