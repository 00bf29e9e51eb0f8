"""Lateness reaches the host: ACK ``late_ns`` and STATE ``late``/``slipped`` (PROTOCOL.md 5).

The reference bridge runs as ``echoreo bridge`` in its own process on 127.0.0.1.
Its device clock is ``time.monotonic_ns()``, shared by every process of this
host, and the test's session clock is the same clock minus its origin, so the
bridge's ``--log`` converts exactly to session time (as in test_bridge_timing.py).

Bridges that predate the keys, and a bridge that restarts, are played by a small
ROUTER peer in a thread of this test (:class:`OldStyleBridge`), built on the
protocol module's own ``encode``/``decode``: a real socket on 127.0.0.1 that
sends exactly the messages the test chose.

No wall-clock speed is asserted: the only time bound is "late by at least X",
where X is the lateness built into a command sent with a time in the past.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest
import zmq
from test_bridge_timing import counters, read_apply_log
from zmq_peers import MonotonicClock, Peers, drain_states, poll_until

from echoreo.adapters import Command, ZmqLeader
from echoreo.adapters.protocol import MsgType, decode, encode

LATE_NS = 200_000_000   # the late command is meant for 0.2 s before it is sent
LEAD_NS = 100_000_000   # the on-time command is meant for 0.1 s after it is sent
SLACK_NS = 1_000_000    # the bridge's clock estimate may place a time up to ~1 ms later
JOINTS = ["neck_rotation", "neck_flexion"]


@pytest.fixture
def spawn(tmp_path):
    with Peers(tmp_path) as start:
        yield start


def test_late_command_ack_carries_late_ns_and_state_totals_reach_the_host(spawn, tmp_path):
    """A command meant for 0.2 s in the past is applied at once and counted late: its ACK
    carries ``late_ns`` >= 0.2 s (less the clock estimate's slack), the host counts one
    late ACK, and the STATE totals the host keeps equal the counters the bridge prints
    when it stops. A command sent ahead is queued and gets a plain ACK.

    Expected values: the command times the test chose (PROTOCOL.md section 5)."""
    log = tmp_path / "apply.log"
    bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0", "--log", str(log))
    clock = MonotonicClock()
    leader = ZmqLeader(bridge.endpoint)
    try:
        hello = leader.connect(clock)
        assert leader.timing()["late_acks"] == 0 and leader.timing()["boots"] == 1
        t_late = clock.now_ns() - LATE_NS
        leader.send(Command(seq=0, t_ns=t_late, q=hello.q))
        t_ahead = clock.now_ns() + LEAD_NS
        leader.send(Command(seq=1, t_ns=t_ahead, q=hello.q))
        # the state built after seq 1 was applied holds the final totals
        states = drain_states(leader, lambda s: bool(s) and s[-1].acked_seq == 1,
                              timeout_s=5.0)
        assert states and states[-1].acked_seq == 1
        poll_until(lambda: [leader.timing()] if leader.timing()["late"] == 1 else [],
                   bool, timeout_s=2.0)
        timing = leader.timing()
        health = leader.link_health()
    finally:
        leader.close()
    assert bridge.terminate() == 0
    print(f"bridge timing seen by the host: {timing}")
    assert health["acks"] == 2 and health["rejections"] == [] and health["malformed"] == 0
    assert timing["late_acks"] == 1
    assert timing["late_max_ns"] >= LATE_NS - SLACK_NS
    rows = read_apply_log(log)
    assert [(r[0], r[1], r[4]) for r in rows] == [(0, t_late, 1), (1, t_ahead, 0)]
    _, t_ns, due_dev, applied_dev, _ = rows[0]
    # late_ns is measured just before the command is applied: at most applied - due
    assert timing["late_max_ns"] <= applied_dev - due_dev
    assert applied_dev - clock.origin_ns - t_ns >= LATE_NS - 1000  # on the session clock
    counts = counters(bridge.out.read_text())
    assert counts["late"] == 1 and counts["applied"] == 2 and counts["queued"] == 1
    assert timing["late"] == counts["late"]
    assert timing["slipped"] == counts["slipped"]
    assert timing["boots"] == 1


class OldStyleBridge(threading.Thread):
    """A minimal bridge on a ROUTER socket that sends exactly the chosen keys.

    It welcomes a HELLO with the current boot of ``boots`` and sends one STATE at
    once, answers time requests and heartbeats, and acknowledges every COMMAND
    ``ok`` (meta: ``seq``, ``t_dev_ns``, ``status`` only) followed by a STATE. The
    extra meta keys of every STATE are ``totals[boot index]`` (``{}``: a bridge
    predating the keys). After a COMMAND whose ``seq`` is in ``restart_after`` it
    says BYE and, at the host's next HELLO, comes back with the next boot.
    """

    def __init__(self, boots: list[int], totals: list[dict], restart_after: set[int]):
        super().__init__(daemon=True)
        self.boots, self.totals, self.restart_after = boots, totals, restart_after
        self.ctx = zmq.Context()
        self.sock = self.ctx.socket(zmq.ROUTER)
        self.sock.linger = 0
        port = self.sock.bind_to_random_port("tcp://127.0.0.1")
        self.endpoint = f"tcp://127.0.0.1:{port}"
        self.halt = threading.Event()
        self.k = -1              # index of the current boot (-1: not started)
        self.restarting = False
        self.state_seq = 0
        self.q = np.zeros(len(JOINTS))

    def now(self) -> int:
        return 1_000_000_000 + self.state_seq  # any device clock will do

    def send(self, ident: bytes, kind: MsgType, meta: dict, *arrays) -> None:
        self.sock.send_multipart([ident, *encode(kind, meta, *arrays)])

    def state(self, ident: bytes, acked_seq: int) -> None:
        self.send(ident, MsgType.STATE, {"seq": self.state_seq, "t_dev_ns": self.now(),
                                         "acked_seq": acked_seq, "mode": "follow",
                                         **self.totals[self.k]}, self.q)
        self.state_seq += 1

    def run(self) -> None:
        poller = zmq.Poller()
        poller.register(self.sock, zmq.POLLIN)
        while not self.halt.is_set():
            if not poller.poll(10):
                continue
            ident, *frames = self.sock.recv_multipart()
            msg = decode(frames)
            m = msg.meta
            if msg.type == MsgType.HELLO:
                if self.k < 0 or self.restarting:
                    self.k += 1
                    self.restarting = False
                    self.state_seq = 0
                self.send(ident, MsgType.WELCOME, {
                    "robot": "torso-e1", "joint_names": JOINTS, "q": [0.0, 0.0],
                    "watchdog_ms": 250, "heartbeat_ms": 200, "t_dev_ns": self.now(),
                    "boot": self.boots[self.k]})
                self.state(ident, -1)
            elif msg.type == MsgType.TIME_REQ:
                t = self.now()
                self.send(ident, MsgType.TIME_REP, {"id": m["id"], "t1_ns": m["t1_ns"],
                                                    "t2_ns": t, "t3_ns": t})
            elif msg.type == MsgType.COMMAND:
                self.send(ident, MsgType.ACK, {"seq": m["seq"], "t_dev_ns": self.now(),
                                               "status": "ok"})
                self.state(ident, m["seq"])
                if m["seq"] in self.restart_after:
                    self.send(ident, MsgType.BYE, {"reason": "restarting"})
                    self.restarting = True
            elif msg.type == MsgType.HEARTBEAT:
                self.send(ident, MsgType.HEARTBEAT, {"t_ns": self.now()})

    def stop(self) -> None:
        self.halt.set()
        self.join(5.0)
        self.sock.close(0)
        self.ctx.term()


def test_old_style_ack_and_state_still_accepted():
    """A bridge that sends neither ``late_ns`` nor ``late``/``slipped`` (before the
    minor addition) is served as before: every ACK and STATE accepted, nothing
    malformed, and the host reports the totals as unknown (None), no late ACKs.

    Expected values: PROTOCOL.md section 2 (receivers ignore keys they do not know;
    the keys are optional)."""
    peer = OldStyleBridge(boots=[11], totals=[{}], restart_after=set())
    peer.start()
    leader = ZmqLeader(peer.endpoint)
    try:
        leader.connect(MonotonicClock())
        for k in range(3):
            leader.send(Command(seq=k, t_ns=0, q=np.zeros(len(JOINTS))))
        states = drain_states(leader, lambda s: bool(s) and s[-1].acked_seq == 2,
                              timeout_s=5.0)
        health = leader.link_health()
        timing = leader.timing()
    finally:
        leader.close()
        peer.stop()
    assert [s.acked_seq for s in states if s.acked_seq >= 0] == [0, 1, 2]
    assert health["acks"] == 3 and health["malformed"] == 0 and health["errors"] == []
    assert health["rejections"] == []
    assert timing == {"late": None, "slipped": None, "late_acks": 0, "late_max_ns": 0,
                      "boots": 1}


def test_totals_survive_a_bridge_restart():
    """Boot 21 reports late 3, slipped 1, then the bridge says BYE and comes back as
    boot 22, counting from zero again: late 2, slipped 0. The host's session totals
    are the sums, 5 and 1, over 2 boots.

    Expected values: the totals the test peer sends (PROTOCOL.md section 5: totals
    start from zero with every new boot)."""
    peer = OldStyleBridge(boots=[21, 22], totals=[{"late": 3, "slipped": 1},
                                                  {"late": 2, "slipped": 0}],
                          restart_after={0})
    peer.start()
    leader = ZmqLeader(peer.endpoint)
    try:
        leader.connect(MonotonicClock())
        before = poll_until(lambda: [leader.timing()], lambda t: t[-1]["late"] == 3,
                            timeout_s=5.0)[-1]
        leader.send(Command(seq=0, t_ns=0, q=np.zeros(len(JOINTS))))
        # after BYE the host keeps quiet for 1 s, then says HELLO again: boot 22
        after = poll_until(lambda: [leader.timing()],
                           lambda t: t[-1]["boots"] == 2 and t[-1]["late"] != 3,
                           timeout_s=5.0)[-1]
    finally:
        leader.close()
        peer.stop()
    assert before == {"late": 3, "slipped": 1, "late_acks": 0, "late_max_ns": 0, "boots": 1}
    assert after == {"late": 5, "slipped": 1, "late_acks": 0, "late_max_ns": 0, "boots": 2}
