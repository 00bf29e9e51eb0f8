"""Minimum-jerk segments and the start ramp against the closed form of Flash & Hogan (1985).

T. Flash and N. Hogan (1985), The coordination of arm movements: an experimentally
confirmed mathematical model, J. Neurosci. 5(7), 1688-1703: a point-to-point movement
of amplitude D over T starting and ending at rest is x(tau) = x0 + D (10 tau^3 -
15 tau^4 + 6 tau^5), tau = t/T, with peak velocity 1.875 D/T at tau = 1/2 and peak
acceleration 10/sqrt(3) D/T^2 = 5.7735 D/T^2 at tau = 1/2 -+ sqrt(3)/6.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest

from echoreo.runner import load_choreography, ramp
from echoreo.runner.interpolate import evaluate, minimum_jerk_profile
from echoreo.runner.ramps import ramp_duration
from echoreo.sim import load_robot


@pytest.fixture
def write(tmp_path):
    """``write(text) -> Path``: a dedented choreography file in a fresh folder."""

    def _write(text: str):
        path = tmp_path / "c.yaml"
        path.write_text(textwrap.dedent(text).lstrip("\n"), encoding="utf-8")
        return path

    return _write


@pytest.fixture(scope="module")
def torso():
    """The shipped robot (choreographies/robots/torso-e1.yaml)."""
    return load_robot("torso-e1")

CASES = [pytest.param(0.7, 1.3, id="D=0.7rad,T=1.3s"), pytest.param(-1.2, 2.5, id="D=-1.2,T=2.5"),
         pytest.param(0.05, 0.4, id="D=0.05,T=0.4")]


@pytest.mark.parametrize(("d", "duration"), CASES)
def test_position_polynomial(d, duration):
    """Positions equal x0 + D(10 tau^3 - 15 tau^4 + 6 tau^5) (Flash & Hogan 1985, eq. for
    a movement between rest points)."""
    x0 = 0.3
    t = np.linspace(0.0, duration, 401)
    q = evaluate("minimum-jerk", np.array([0.0, duration]), np.array([[x0], [x0 + d]]), t)
    tau = t / duration
    expected = x0 + d * (10 * tau**3 - 15 * tau**4 + 6 * tau**5)
    np.testing.assert_allclose(q[:, 0], expected, rtol=0, atol=1e-14)


@pytest.mark.parametrize(("d", "duration"), CASES)
def test_peak_velocity_and_acceleration(d, duration):
    """Peak |v| = 1.875 |D|/T at T/2 and peak |a| = 5.7735 |D|/T^2 at (1/2 - sqrt(3)/6) T
    (Flash & Hogan 1985; 10/sqrt(3) = 5.7735)."""
    t = np.linspace(0.0, duration, 200_001)
    times, knots = np.array([0.0, duration]), np.array([[0.0], [d]])
    v = evaluate("minimum-jerk", times, knots, t, deriv=1)[:, 0]
    a = evaluate("minimum-jerk", times, knots, t, deriv=2)[:, 0]
    i = int(np.argmax(np.abs(v)))
    assert abs(v[i]) == pytest.approx(1.875 * abs(d) / duration, rel=1e-9)
    assert t[i] == pytest.approx(duration / 2, abs=duration * 1e-5)
    j = int(np.argmax(np.abs(a)))
    assert abs(a[j]) == pytest.approx(5.7735 * abs(d) / duration**2, rel=1e-4)
    assert t[j] == pytest.approx((0.5 - math.sqrt(3) / 6) * duration, abs=duration * 1e-4)


def test_profile_boundary_conditions():
    """s(0) = 0, s(1) = 1, and s' = s'' = 0 at both ends (rest-to-rest; Flash & Hogan 1985)."""
    ends = np.array([0.0, 1.0])
    np.testing.assert_array_equal(minimum_jerk_profile(ends), [0.0, 1.0])
    np.testing.assert_array_equal(minimum_jerk_profile(ends, 1), [0.0, 0.0])
    np.testing.assert_array_equal(minimum_jerk_profile(ends, 2), [0.0, 0.0])


def test_compiled_timeline_peaks_match_closed_form(write, torso):
    """A single minimum-jerk move of 60 deg in 1.5 s compiled at 1000 Hz: the sampled
    peak speed is 1.875 D/T and the sampled peak acceleration 5.7735 D/T^2 to within
    the finite-difference error (Flash & Hogan 1985)."""
    path = write("""
        robot: torso-e1
        unit: deg
        poses:
          low: {right_elbow_flexion: 20}
          high: {right_elbow_flexion: 80}
        moves:
          bend:
            interpolation: minimum-jerk
            keyframes: [{at: 0, pose: low}, {at: 1.5, pose: high}]
        sequence:
          - move: bend
    """)
    tl = load_choreography(path).compile(1000.0)
    j = tl.joint_names.index("right_elbow_flexion")
    d, duration = math.radians(60), 1.5
    v = tl.velocity()[:, j]
    a = tl.acceleration()[:, j]
    assert v.max() == pytest.approx(1.875 * d / duration, rel=1e-5)
    assert np.abs(a).max() == pytest.approx(5.7735 * d / duration**2, rel=1e-4)
    assert tl.t[np.argmax(v)] == pytest.approx(duration / 2, abs=1e-3)


def test_ramp_uses_a_quarter_of_the_limits(torso):
    """The start ramp is one minimum-jerk profile whose duration makes the closed-form
    peaks 1.875 D/T and 5.7735 D/T^2 equal to at most 25 % of each joint's limits
    (limits from choreographies/robots/torso-e1.yaml); the samples respect that too."""
    q_to = np.array(torso.rest, dtype=float)
    q_to[torso.joint_index("right_shoulder_flexion")] = math.radians(120)
    q_to[torso.joint_index("neck_rotation")] = math.radians(-30)
    rate = 100.0
    t, q = ramp(torso, torso.rest, q_to, rate)
    d = np.abs(q_to - torso.rest)
    duration = ramp_duration(torso, torso.rest, q_to)
    expected = max(np.max(1.875 * d / (0.25 * torso.max_velocity)),
                   np.max(np.sqrt(5.7735 * d / (0.25 * torso.max_acceleration))))
    assert duration == pytest.approx(expected, rel=1e-4)
    assert t[-1] == pytest.approx(math.ceil(duration * rate) / rate)
    np.testing.assert_array_equal(q[0], torso.rest)
    np.testing.assert_array_equal(q[-1], q_to)
    v = np.abs(np.diff(q, axis=0)) * rate
    assert np.all(v <= 0.25 * torso.max_velocity + 1e-12)
    a = np.abs(np.diff(q, n=2, axis=0)) * rate**2
    assert np.all(a <= 0.25 * torso.max_acceleration * (1 + 1e-3))


def test_ramp_between_equal_postures_is_one_sample(torso):
    t, q = ramp(torso, torso.rest, torso.rest, 50.0)
    assert t.shape == (1,) and q.shape == (1, len(torso.joint_names))
