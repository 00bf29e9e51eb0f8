"""Simulated leader and virtual-participant followers (adapters/simulated.py).

Expected values come from the models they wrap: the leader's measured pose is
:class:`echoreo.sim.LeaderSim` under zero-order hold; the followers' streams
are :func:`echoreo.sim.simulate_participant` on the commanded trajectory, with
the device clock ``t_dev = o + (1 + d 1e-6) t`` of that function's docstring.
"""

from __future__ import annotations

import numpy as np
import pytest

from echoreo.adapters import (
    Command,
    Dropout,
    SimulatedFollowers,
    SimulatedLeader,
    clock_map_for_device,
)
from echoreo.runner.clock import VirtualClock
from echoreo.sim import LeaderSim, load_robot


@pytest.fixture(scope="module")
def robot():
    return load_robot("torso-e1")


def _trajectory(robot, duration_s=4.0, rate=50.0):
    t = np.arange(int(duration_s * rate) + 1) / rate
    q = np.tile(robot.rest, (t.size, 1))
    j = robot.joint_index("right_shoulder_flexion")
    q[:, j] = robot.rest[j] + 0.5 * (1 - np.cos(2 * np.pi * 0.5 * t))
    return t, q, np.array([[0.0, 2.0], [2.0, 4.0]])


def test_leader_follows_commands_like_leadersim(robot):
    """States are LeaderSim's poses under zero-order hold, at the commands' times, acknowledged."""
    t, q, _ = _trajectory(robot, 1.0)
    clock = VirtualClock()
    leader = SimulatedLeader(robot, tau_s=0.05)
    hello = leader.connect(clock)
    assert hello.joint_names == robot.joint_names
    np.testing.assert_allclose(hello.q, robot.rest)
    for k, (tk, qk) in enumerate(zip(t, q, strict=True)):
        clock.advance_to(round(tk * 1e9))
        leader.send(Command(k, round(tk * 1e9), qk))
    states = leader.read_state()
    assert len(states) == len(t) - 1 and leader.read_state() == []
    ref = LeaderSim(robot, tau_s=0.05).run(t, q)
    got = np.array([s.q for s in states])
    np.testing.assert_allclose(got, ref[1:], atol=1e-12)
    assert [s.acked_seq for s in states] == list(range(len(t) - 1))


def test_leader_fault_injection(robot):
    """With fail_after_s the leader stops answering after that time."""
    clock = VirtualClock()
    leader = SimulatedLeader(robot, fail_after_s=0.5)
    leader.connect(clock)
    assert leader.alive()
    clock.advance_to(600_000_000)
    assert not leader.alive()
    leader.send(Command(0, clock.now_ns(), robot.rest))
    assert leader.read_state() == []


def _followers(robot, seed=5, **kw):
    t, q, reps = _trajectory(robot)
    return SimulatedFollowers(robot, t, q, reps, profile="good", mode="mirror",
                              rng=np.random.default_rng(seed), **kw)


def test_followers_deliver_as_clock_passes(robot):
    """Nothing before its time; everything once the clock has passed the end; in order."""
    src = _followers(robot, clock_offset_s=2.5, clock_drift_ppm=30.0)
    clock = VirtualClock()
    infos = src.connect(clock)
    assert [i.name for i in infos] == ["right_wrist_imu", "left_wrist_imu", "head_pose"]
    got: dict[str, list] = {i.name: [] for i in infos}
    for t_ns in range(0, 4_200_000_000, 100_000_000):
        clock.advance_to(t_ns)
        for b in src.poll():
            assert b.t_ns.max() <= t_ns
            got[b.stream].append(b)
    for name, s in src.recording.streams.items():
        seq = np.concatenate([b.seq for b in got[name]])
        np.testing.assert_array_equal(seq, s.seq)
        t_ns = np.concatenate([b.t_ns for b in got[name]])
        # the exact clock map gives back the simulation's true sample times (to 1 ns rounding)
        np.testing.assert_allclose(t_ns, np.asarray(s.t) * 1e9, atol=2.0)
    assert src.remaining() == 0


def test_clock_map_inverts_device_clock():
    """t = (t_dev - o) / (1 + d 1e-6) (the device clock model of simulate_participant)."""
    cmap = clock_map_for_device(3.7, 50.0)
    t = np.array([0.0, 10.0, 300.0])
    t_dev = 3.7 + (1 + 50e-6) * t
    got = cmap.to_session(np.rint(t_dev * 1e9).astype(np.int64))
    np.testing.assert_allclose(got, t * 1e9, atol=2.0)


def test_followers_deterministic_under_seed(robot):
    """The same seed gives identical streams; another seed does not."""
    def run(seed):
        src = _followers(robot, seed)
        clock = VirtualClock()
        src.connect(clock)
        clock.advance_to(5_000_000_000)
        return {b.stream: b.data for b in src.poll()}

    a, b, c = run(1), run(1), run(2)
    for k in a:
        np.testing.assert_array_equal(a[k], b[k])
    assert not np.array_equal(a["right_wrist_imu"], c["right_wrist_imu"])


def test_dropout_and_hold(robot):
    """A dropout window delivers nothing; a pause holds the person still (samples go on, on the
    device grid) and shifts the rest by the periods held."""
    src = _followers(robot, dropout=[Dropout("head_pose", 1.0, 0.5)])
    clock = VirtualClock()
    src.connect(clock)
    out: dict[str, list] = {}

    def poll():
        for b in src.poll():
            out.setdefault(b.stream, []).append(b)

    clock.advance_to(2_000_000_000)
    poll()
    src.pause_at(2_000_000_000)
    clock.advance_to(2_500_000_000)
    poll()
    src.resume_at(2_500_000_000)
    clock.advance_to(6_000_000_000)
    poll()
    head_t = np.concatenate([b.t_ns for b in out["head_pose"]]) * 1e-9
    assert not ((head_t >= 1.0) & (head_t < 1.5)).any()
    imu = out["right_wrist_imu"]
    seq = np.concatenate([b.seq for b in imu])
    t = np.concatenate([b.t_ns for b in imu])
    assert np.all(np.diff(seq) == 1) and np.all(np.diff(t) > 0)
    held = np.concatenate([b.data for b in imu])[(t > 2.0e9) & (t <= 2.5e9)]
    assert len(held) == 50 and np.ptp(held, axis=0).max() == 0.0   # held still
    # the whole planned stream is still delivered, 0.5 s later
    assert len(seq) == len(src.recording.streams["right_wrist_imu"].seq) + 50
