"""The clamped cubic spline against scipy.interpolate.CubicSpline on the same knots.

Boundary condition: clamped (first derivative zero at the first and last knot),
scipy's ``bc_type="clamped"``; our spline solves de Boor's (1978) tridiagonal slope
system independently of scipy.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from scipy.interpolate import CubicSpline

from echoreo.runner import load_choreography
from echoreo.runner.interpolate import evaluate


@pytest.fixture
def write(tmp_path):
    """``write(text) -> Path``: a dedented choreography file in a fresh folder."""

    def _write(text: str):
        path = tmp_path / "c.yaml"
        path.write_text(textwrap.dedent(text).lstrip("\n"), encoding="utf-8")
        return path

    return _write


@pytest.mark.parametrize("k", [2, 3, 5, 9])
@pytest.mark.parametrize("deriv", [0, 1, 2])
def test_matches_scipy_clamped(k, deriv):
    """Position, velocity and acceleration agree with scipy's clamped CubicSpline on
    random uneven knots (seeded) to 1e-12 relative."""
    rng = np.random.default_rng(20261201 + k)
    times = np.concatenate([[0.0], np.cumsum(rng.uniform(0.2, 1.5, k - 1))])
    knots = rng.normal(0.0, 0.8, size=(k, 4))
    t = np.linspace(0.0, times[-1], 777)
    ours = evaluate("cubic", times, knots, t, deriv)
    ref = CubicSpline(times, knots, bc_type="clamped", axis=0)(t, deriv)
    np.testing.assert_allclose(ours, ref, rtol=1e-12, atol=1e-12 * np.abs(ref).max())


def test_compiled_cubic_move_matches_scipy(write):
    """A compiled cubic move with four uneven keyframes equals scipy's clamped spline
    through the same knots at every command sample (tempo 1, one repetition)."""
    path = write("""
        robot: torso-e1
        unit: deg
        poses:
          a: {left_shoulder_abduction: 10}
          b: {left_shoulder_abduction: 70}
          c: {left_shoulder_abduction: 40}
        moves:
          swing:
            interpolation: cubic
            keyframes:
              - {at: 0.0, pose: a}
              - {at: 1.3, pose: b}
              - {at: 2.1, pose: c}
              - {at: 3.6, pose: a}
        sequence:
          - move: swing
    """)
    chor = load_choreography(path)
    tl = chor.compile(50.0)
    j = tl.joint_names.index("left_shoulder_abduction")
    times = np.array([0.0, 1.3, 2.1, 3.6])
    values = np.radians([10.0, 70.0, 40.0, 10.0])
    ref = CubicSpline(times, values, bc_type="clamped")(np.clip(tl.t, 0, 3.6))
    np.testing.assert_allclose(tl.q[:, j], ref, atol=1e-12)
    assert math.isclose(tl.duration, 3.6)
