"""The reference bridge applies each command at its session time (PROTOCOL.md section 5).

The bridge runs as ``echoreo bridge`` in its own process on 127.0.0.1 and is driven
by ZmqLeader. Its ``--log`` records, per applied command, the moment (on its device
clock) it handed the pose to the robot. The bridge's device clock is
``DeviceClock()``, i.e. ``time.monotonic_ns()``, which every process of this host
shares, and the test's session clock is the same monotonic clock minus its origin,
so application times convert exactly: ``t_applied = applied_dev_ns - origin_ns``.
The bridge itself knows nothing of that; it estimates the session clock from the
host's send stamps (``HostClockEstimate``).

No wall-clock speed is asserted. Applying on arrival would put the burst's
commands 0.3 s to 1.3 s before their times; the bounds below (never early, at most
0.1 s late each, median at most 20 ms) separate the two by a wide margin on a
loaded machine.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from zmq_peers import MonotonicClock, Peers, drain_states

from echoreo.adapters import Command, ZmqLeader
from echoreo.adapters.bridge_peer import HostClockEstimate

LEAD_NS = 300_000_000     # the burst's first command is meant for 0.3 s after sending
PERIOD_NS = 25_000_000    # then one every 25 ms
N_BURST = 40              # 1 s of commands, all sent at once
LATE_NS = 200_000_000     # the late command is meant for 0.2 s before it is sent
MAX_LATE_S = 0.1          # bound on each command's application error, s
MAX_MEDIAN_S = 0.02       # bound on the median application error, s


@pytest.fixture
def spawn(tmp_path):
    with Peers(tmp_path) as start:
        yield start


def read_apply_log(path) -> list[tuple[int, int, int, int, int]]:
    """The bridge's ``--log``: (seq, t_ns, due_dev_ns, applied_dev_ns, late) per line."""
    rows = []
    for line in path.read_text().splitlines():
        seq, t_ns, due, applied, late = (int(x) for x in line.split())
        rows.append((seq, t_ns, due, applied, late))
    return rows


def counters(out_text: str) -> dict[str, int]:
    """The counters the bridge prints on stopping: ``bridge stopped: name n, ...``."""
    text = " ".join(out_text.split())
    tail = text.split("bridge stopped:", 1)[1]
    out = {}
    for item in tail.split(","):
        name, value = item.split()
        out[name] = int(value)
    return out


def test_burst_applied_at_command_times_late_command_counted(spawn, tmp_path):
    """40 commands sent at once for 0.3-1.3 s ahead are each applied at its own time
    (never early, each at most 0.1 s and in median at most 20 ms after it, in
    sequence order), STATE's ``acked_seq`` stays -1 until the first is due, and a
    command meant for 0.2 s in the past is applied at once and counted late.

    Expected values: the command times the test itself chose (PROTOCOL.md section 5)."""
    log = tmp_path / "apply.log"
    bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0", "--log", str(log))
    clock = MonotonicClock()
    leader = ZmqLeader(bridge.endpoint)
    try:
        hello = leader.connect(clock)
        j = hello.joint_names.index("right_elbow_flexion")
        t0 = clock.now_ns() + LEAD_NS
        times = [t0 + k * PERIOD_NS for k in range(N_BURST)]
        for k, t_k in enumerate(times):
            q = hello.q.copy()
            q[j] += 0.01 * k
            leader.send(Command(seq=k, t_ns=t_k, q=q))
        t_sent = clock.now_ns()
        states = drain_states(leader, lambda s: bool(s) and s[-1].acked_seq == N_BURST - 1,
                             timeout_s=10.0)
        assert states and states[-1].acked_seq == N_BURST - 1
        # every command was acknowledged at receipt, none refused
        health = leader.link_health()
        assert health["rejections"] == []
        # states measured between sending and the first command's time: nothing applied
        before = [s for s in states if t_sent < s.t_ns < t0 - 5_000_000]
        assert before and all(s.acked_seq == -1 for s in before)
        t_late = clock.now_ns() - LATE_NS
        leader.send(Command(seq=N_BURST, t_ns=t_late, q=hello.q))
        states = drain_states(leader, lambda s: bool(s) and s[-1].acked_seq == N_BURST,
                             timeout_s=5.0)
        assert states and states[-1].acked_seq == N_BURST
    finally:
        leader.close()
    assert bridge.terminate() == 0
    rows = read_apply_log(log)
    assert [r[0] for r in rows] == [*range(N_BURST), N_BURST]
    assert [r[1] for r in rows] == [*times, t_late]
    applied_s = np.array([(r[3] - clock.origin_ns) * 1e-9 for r in rows])
    error_s = applied_s - np.array([r[1] for r in rows]) * 1e-9
    burst = error_s[:N_BURST]
    print(f"burst application error: min {burst.min() * 1e3:.3f} ms, median "
          f"{np.median(burst) * 1e3:.3f} ms, max {burst.max() * 1e3:.3f} ms; late command "
          f"applied {error_s[-1] * 1e3:.1f} ms after its time")
    assert burst.min() >= -1e-6               # never before its time
    assert burst.max() <= MAX_LATE_S
    assert np.median(burst) <= MAX_MEDIAN_S
    assert np.all(np.diff(applied_s[:N_BURST]) > 0)
    assert [r[4] for r in rows] == [0] * N_BURST + [1]
    assert error_s[-1] >= LATE_NS * 1e-9 - 1e-6   # applied after it was sent, at once
    counts = counters(bridge.out.read_text())
    assert counts["late"] == 1
    assert counts["queued"] == N_BURST and counts["applied"] == N_BURST + 1
    assert counts["dropped"] == 0 and counts["superseded"] == 0


def test_queue_is_bounded_and_far_commands_refused(spawn, tmp_path):
    """With a queue of 4 and a lead limit of 2 s: a command 5 s ahead is refused, of six
    commands 1.5 s ahead the last two are refused (queue full), a command for an
    earlier time supersedes queued ones, and HOLD empties the queue so nothing queued
    is ever applied. Expected statuses: PROTOCOL.md section 5."""
    log = tmp_path / "apply.log"
    bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0", "--log", str(log),
                   "--queue-limit", "4", "--max-lead", "2.0")
    clock = MonotonicClock()
    leader = ZmqLeader(bridge.endpoint)
    try:
        hello = leader.connect(clock)
        now = clock.now_ns()
        leader.send(Command(seq=0, t_ns=now + 5_000_000_000, q=hello.q))
        base = now + 1_500_000_000
        for k in range(1, 7):
            leader.send(Command(seq=k, t_ns=base + k * 10_000_000, q=hello.q))
        # seq 7 is meant before seqs 3 and 4: they are superseded (seqs 5, 6 were refused)
        leader.send(Command(seq=7, t_ns=base + 25_000_000, q=hello.q))
        deadline = time.monotonic() + 5.0
        while leader.link_health()["acks"] < 8 and time.monotonic() < deadline:
            time.sleep(0.01)
        health = leader.link_health()
        assert health["acks"] == 8
        refused = {r["seq"]: r["reason"] for r in health["rejections"]}
        assert set(refused) == {0, 5, 6}
        assert "at most 2 s ahead" in refused[0]
        assert "queue full" in refused[5] and "queue full" in refused[6]
        leader.hold()  # queued: 1, 2, 7; all dropped, none applied
        time.sleep(1.8)  # past every queued command's time
        assert all(s.acked_seq == -1 for s in leader.read_state())
    finally:
        leader.close()
    assert bridge.terminate() == 0
    assert read_apply_log(log) == []
    counts = counters(bridge.out.read_text())
    assert counts["rejected"] == 3 and counts["superseded"] == 2
    assert counts["dropped"] == 3 and counts["applied"] == 0


def test_host_clock_estimate_is_the_lower_envelope():
    """HostClockEstimate: the offset is the smallest (receive - send) in the window,
    delayed messages never move it, and old minima leave the window. Expected values
    by hand from the definition (Moon, Skelly and Towsley 1999)."""
    est = HostClockEstimate(window_s=3.0, bin_s=1.0)
    assert not est.ready
    s = 1_000_000_000
    est.add(0, 5 * s + 300)          # offset 5 s, one-way delay 300 ns
    est.add(100, 5 * s + 100 + 50)   # delay 50 ns: the minimum
    est.add(200, 5 * s + 200 + 9000)  # a delayed message: no change
    assert est.offset_ns == 5 * s + 50
    assert est.to_device(7) == 5 * s + 57
    est.add(4 * s, 9 * s + 400)      # 4 s later: the first bin has left the window
    assert est.offset_ns == 5 * s + 400
    est.reset()
    assert not est.ready
