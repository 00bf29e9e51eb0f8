"""The slow ramp between two postures, used at session start and end."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from echoreo.errors import ChoreographyError, Problem
from echoreo.runner.interpolate import (
    MINIMUM_JERK_PEAK_ACCELERATION,
    MINIMUM_JERK_PEAK_VELOCITY,
    minimum_jerk_profile,
)

if TYPE_CHECKING:
    from echoreo.sim.robot import Robot

__all__ = ["ramp", "ramp_duration"]


def _check_posture(robot: Robot, q: np.ndarray, what: str) -> np.ndarray:
    n = len(robot.joint_names)
    q = np.asarray(q, dtype=float)
    if q.shape != (n,):
        raise ChoreographyError(Problem(
            f"{what} has shape {q.shape}; {robot.name} has {n} joints",
            hint=f"pass one angle in rad per joint, in the order {', '.join(robot.joint_names)}"))
    if not np.all(np.isfinite(q)):
        raise ChoreographyError(Problem(f"{what} contains NaN or infinite angles"))
    bad = [(robot.joint_names[j], q[j]) for j in range(n)
           if q[j] < robot.lower[j] - 1e-9 or q[j] > robot.upper[j] + 1e-9]
    if bad:
        text = "; ".join(
            f"{name} = {math.degrees(v):.1f} deg is outside "
            f"{math.degrees(robot.lower[robot.joint_index(name)]):.1f}.."
            f"{math.degrees(robot.upper[robot.joint_index(name)]):.1f} deg" for name, v in bad)
        raise ChoreographyError(Problem(f"{what} is outside the position limits: {text}",
                                        hint="move the robot inside its limits by hand first"))
    return q


def ramp_duration(robot: Robot, q_from: np.ndarray, q_to: np.ndarray,
                  speed_fraction: float = 0.25) -> float:
    """Shortest minimum-jerk duration that keeps every joint under a fraction of its limits.

    A minimum-jerk movement of amplitude :math:`D_j` over :math:`T` has peak
    speed :math:`1.875\\,|D_j|/T` and peak acceleration
    :math:`(10/\\sqrt{3})\\,|D_j|/T^2` (Flash & Hogan 1985), so with fraction
    :math:`c` of the limits :math:`\\dot q_j^{max}`, :math:`\\ddot q_j^{max}`

    .. math::

        T = \\max_j \\max\\left( \\frac{1.875\\,|D_j|}{c\\,\\dot q_j^{max}},
        \\sqrt{\\frac{5.7735\\,|D_j|}{c\\,\\ddot q_j^{max}}} \\right).

    Parameters
    ----------
    robot : Robot
        Supplies ``max_velocity`` (rad/s) and ``max_acceleration`` (rad/s²).
    q_from, q_to : ndarray, shape (n_joints,), rad
    speed_fraction : float
        :math:`c`, in (0, 1].

    Returns
    -------
    float
        T, s (0 when the postures are equal).

    References
    ----------
    T. Flash and N. Hogan (1985), *J. Neurosci.* 5(7), 1688-1703.
    """
    d = np.abs(np.asarray(q_to, dtype=float) - np.asarray(q_from, dtype=float))
    c = float(speed_fraction)
    t_v = MINIMUM_JERK_PEAK_VELOCITY * d / (c * np.asarray(robot.max_velocity, dtype=float))
    t_a = np.sqrt(MINIMUM_JERK_PEAK_ACCELERATION * d
                  / (c * np.asarray(robot.max_acceleration, dtype=float)))
    return float(max(np.max(t_v, initial=0.0), np.max(t_a, initial=0.0)))


def ramp(robot: Robot, q_from: np.ndarray, q_to: np.ndarray, rate_hz: float,
         speed_fraction: float = 0.25) -> tuple[np.ndarray, np.ndarray]:
    """The slow minimum-jerk ramp from one posture to another.

    All joints move together on one minimum-jerk profile
    :math:`q(t) = q_{from} + (q_{to} - q_{from})\\, s(t/T)`,
    :math:`s(\\tau) = 10\\tau^3 - 15\\tau^4 + 6\\tau^5` (Flash & Hogan 1985),
    with :math:`T` from :func:`ramp_duration` rounded up to a whole number of
    command periods, so no joint exceeds ``speed_fraction`` of its velocity or
    acceleration limit. The ramp starts and ends at rest.

    Parameters
    ----------
    robot : Robot
        The robot model (``joint_names``, ``lower``, ``upper``,
        ``max_velocity``, ``max_acceleration``).
    q_from, q_to : ndarray, shape (n_joints,), rad
        Start and end postures, both inside the position limits.
    rate_hz : float
        Command rate, Hz.
    speed_fraction : float
        Fraction of the velocity and acceleration limits to stay under, in (0, 1].
        The default 0.25 keeps the approach to the first pose slow enough for a
        participant to see it coming.

    Returns
    -------
    t : ndarray, shape (n,), s
        From 0; ``n >= 1``; the last sample equals ``q_to`` exactly.
    q : ndarray, shape (n, n_joints), rad

    Raises
    ------
    ChoreographyError
        A posture of the wrong shape or outside the limits, or a bad rate or fraction.

    References
    ----------
    T. Flash and N. Hogan (1985), *J. Neurosci.* 5(7), 1688-1703.
    """
    try:
        rate = float(rate_hz)
        frac = float(speed_fraction)
    except (TypeError, ValueError) as exc:
        raise ChoreographyError(Problem("rate_hz and speed_fraction must be numbers")) from exc
    if not (math.isfinite(rate) and rate > 0):
        raise ChoreographyError(Problem(f"command rate must be a positive number of Hz, "
                                        f"not {rate_hz!r}"))
    if not (math.isfinite(frac) and 0 < frac <= 1):
        raise ChoreographyError(Problem(
            f"speed_fraction must be in (0, 1], not {speed_fraction!r}"))
    a = _check_posture(robot, q_from, "the start posture")
    b = _check_posture(robot, q_to, "the target posture")
    duration = ramp_duration(robot, a, b, frac)
    n_periods = math.ceil(duration * rate - 1e-9)
    if n_periods <= 0:
        return np.zeros(1), b[None, :].copy()
    t = np.arange(n_periods + 1) / rate
    s = minimum_jerk_profile(t / t[-1])
    q = a[None, :] + (b - a)[None, :] * s[:, None]
    q[-1] = b
    return t, q
