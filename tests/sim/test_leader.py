"""Leader simulator: first-order lag and velocity saturation."""

from __future__ import annotations

import numpy as np
import pytest

from echoreo.sim import LeaderSim, load_robot

ROBOT = load_robot("torso-e1")


def test_step_response_is_first_order():
    """A 0.1 rad command step (initial rate 0.1/tau = 2 rad/s, below every velocity
    limit) gives q(t) = q0 + 0.1 (1 - exp(-t/tau)), the analytic first-order step
    response (Franklin, Powell & Emami-Naeini 2015, ch. 3)."""
    tau = 0.05
    sim = LeaderSim(ROBOT, tau_s=tau)
    q0 = ROBOT.rest.copy()
    t = np.arange(0, 0.5, 0.01)
    cmd = np.tile(q0 + 0.1, (len(t), 1))
    out = sim.run(t, cmd)
    expected = q0 + 0.1 * (1 - np.exp(-t / tau))[:, None]
    np.testing.assert_allclose(out, expected, atol=1e-12)


def test_step_and_run_agree():
    """step() repeated equals run() on the same commands (same exact discretisation)."""
    rng = np.random.default_rng(4)
    t = np.arange(100) / 50.0
    cmd = ROBOT.rest + 0.5 * np.sin(np.outer(t, rng.uniform(0.5, 2, 12)))
    a = LeaderSim(ROBOT, 0.08).run(t, cmd)
    sim = LeaderSim(ROBOT, 0.08)
    b = [sim.measure()] + [sim.step(cmd[k], t[k + 1] - t[k]) for k in range(len(t) - 1)]
    np.testing.assert_allclose(a, np.array(b), atol=1e-12)


def test_velocity_saturates_at_limit():
    """A large step moves each joint at exactly its velocity limit until the lag
    takes over (the saturation of DEVELOPERS.md's contract)."""
    sim = LeaderSim(ROBOT, tau_s=0.05)
    q0 = ROBOT.rest.copy()
    target = np.clip(q0 + 1.5, ROBOT.lower, ROBOT.upper)
    dt = 0.01
    q1 = sim.step(target, dt)
    moved = np.abs(q1 - q0)
    big = np.abs(target - q0) > 0.5
    np.testing.assert_allclose(moved[big], ROBOT.max_velocity[big] * dt, rtol=1e-12)
    out = sim.run(np.arange(200) * dt, np.tile(target, (200, 1)))
    speed = np.abs(np.diff(out, axis=0)) / dt
    assert np.all(speed <= ROBOT.max_velocity * (1 + 1e-12))
    np.testing.assert_allclose(out[-1], target, atol=1e-6)


def test_measurement_noise_is_seeded():
    t = np.arange(50) / 50.0
    cmd = np.tile(ROBOT.rest, (50, 1))
    a = LeaderSim(ROBOT, 0.05, np.random.default_rng(1), noise_std=0.01).run(t, cmd)
    b = LeaderSim(ROBOT, 0.05, np.random.default_rng(1), noise_std=0.01).run(t, cmd)
    np.testing.assert_array_equal(a, b)
    assert 0.005 < np.std(a - ROBOT.rest) < 0.015
    with pytest.raises(ValueError, match="random generator"):
        LeaderSim(ROBOT, 0.05, noise_std=0.01)


def test_bad_arguments():
    with pytest.raises(ValueError, match="tau_s"):
        LeaderSim(ROBOT, tau_s=0)
    sim = LeaderSim(ROBOT)
    with pytest.raises(ValueError, match="shape"):
        sim.step(np.zeros(3), 0.01)
