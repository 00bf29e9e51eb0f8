"""Interpolation between keyframes: linear, clamped cubic spline, minimum-jerk.

All three take knot times ``times (k,)`` s, strictly increasing, and knot
postures ``knots (k, n_joints)`` rad, and evaluate the trajectory, its
velocity or its acceleration at any times ``t (m,)`` s. Times before the
first knot hold the first posture, times after the last hold the last one.

Which method for what:

``linear``
    Straight lines between keyframes. The velocity steps at every keyframe, so
    at the command rate the robot is asked for a velocity change within one
    command period; fine for slow adjustments, harsh for anything brisk.
``cubic``
    The interpolating cubic spline with *clamped* ends (zero velocity at the
    first and last keyframe), twice continuously differentiable inside. It may
    overshoot between keyframes.
``minimum-jerk``
    Every segment between two keyframes is the point-to-point movement of
    least integrated squared jerk, starting and ending at rest (zero velocity
    and acceleration at every keyframe). Never overshoots.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "INTERPOLATIONS",
    "clamped_spline_slopes",
    "evaluate",
    "minimum_jerk_profile",
]

#: The interpolation names a choreography may use, in the order documented.
INTERPOLATIONS: tuple[str, ...] = ("linear", "cubic", "minimum-jerk")

#: Peak of ds/dtau of the minimum-jerk profile, at tau = 1/2 (Flash & Hogan 1985).
MINIMUM_JERK_PEAK_VELOCITY = 1.875
#: Peak of |d2s/dtau2| of the minimum-jerk profile, 10/sqrt(3), at tau = 1/2 -+ sqrt(3)/6.
MINIMUM_JERK_PEAK_ACCELERATION = 10.0 / np.sqrt(3.0)


def minimum_jerk_profile(tau: np.ndarray, deriv: int = 0) -> np.ndarray:
    """The normalised minimum-jerk profile s(tau) or one of its derivatives.

    .. math::

        s(\\tau) = 10\\tau^3 - 15\\tau^4 + 6\\tau^5, \\qquad
        s'(\\tau) = 30\\tau^2 - 60\\tau^3 + 30\\tau^4, \\qquad
        s''(\\tau) = 60\\tau - 180\\tau^2 + 120\\tau^3

    for :math:`0 \\le \\tau \\le 1`; ``tau`` is clipped to that interval for
    ``deriv = 0`` and the derivatives are zero outside it. A movement of
    amplitude ``D`` over ``T`` seconds is :math:`x_0 + D\\, s(t/T)`, with
    velocity :math:`(D/T)\\, s'` and acceleration :math:`(D/T^2)\\, s''`.

    Parameters
    ----------
    tau : ndarray, shape (m,)
        Normalised time t / T, dimensionless.
    deriv : {0, 1, 2}
        Which derivative with respect to ``tau``.

    Returns
    -------
    ndarray, shape (m,)
        s, ds/dtau or d2s/dtau2, dimensionless.

    References
    ----------
    T. Flash and N. Hogan (1985). The coordination of arm movements: an
    experimentally confirmed mathematical model. *Journal of Neuroscience*
    5(7), 1688-1703.
    """
    tau = np.asarray(tau, dtype=float)
    inside = (tau >= 0.0) & (tau <= 1.0)
    u = np.clip(tau, 0.0, 1.0)
    if deriv == 0:
        return u**3 * (10.0 + u * (-15.0 + 6.0 * u))
    if deriv == 1:
        return np.where(inside, 30.0 * u**2 * (1.0 - u) ** 2, 0.0)
    if deriv == 2:
        return np.where(inside, 60.0 * u * (1.0 + u * (-3.0 + 2.0 * u)), 0.0)
    raise ValueError(f"deriv must be 0, 1 or 2, not {deriv!r}")


def clamped_spline_slopes(times: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Knot velocities of the clamped interpolating cubic spline.

    The spline is written in Hermite form on each interval
    :math:`[x_i, x_{i+1}]`, with knot values :math:`y_i` and knot slopes
    :math:`m_i`. Continuity of the second derivative at the interior knots
    gives the tridiagonal system

    .. math::

        h_i\\, m_{i-1} + 2 (h_{i-1} + h_i)\\, m_i + h_{i-1}\\, m_{i+1}
        = 3 (h_i\\, \\delta_{i-1} + h_{i-1}\\, \\delta_i),
        \\qquad i = 1, \\dots, k-2,

    with :math:`h_i = x_{i+1} - x_i` and :math:`\\delta_i = (y_{i+1} - y_i)/h_i`;
    the clamped end conditions are :math:`m_0 = m_{k-1} = 0`.

    Parameters
    ----------
    times : ndarray, shape (k,)
        Knot times, s, strictly increasing, k >= 2.
    knots : ndarray, shape (k, n_joints)
        Knot postures, rad.

    Returns
    -------
    ndarray, shape (k, n_joints)
        Velocities at the knots, rad/s.

    References
    ----------
    C. de Boor (1978). *A Practical Guide to Splines*. Springer, New York;
    chapter IV (piecewise cubic interpolation, complete spline).
    """
    times = np.asarray(times, dtype=float)
    knots = np.asarray(knots, dtype=float)
    k = times.size
    slopes = np.zeros_like(knots)
    if k <= 2:
        return slopes
    h = np.diff(times)
    delta = np.diff(knots, axis=0) / h[:, None]
    n_inner = k - 2
    a = np.zeros((n_inner, n_inner))
    idx = np.arange(n_inner)
    a[idx, idx] = 2.0 * (h[:-1] + h[1:])
    a[idx[1:], idx[1:] - 1] = h[2:]          # h_i * m_{i-1}, i = 2..k-2
    a[idx[:-1], idx[:-1] + 1] = h[:-2]       # h_{i-1} * m_{i+1}, i = 1..k-3
    rhs = 3.0 * (h[1:, None] * delta[:-1] + h[:-1, None] * delta[1:])
    slopes[1:-1] = np.linalg.solve(a, rhs)
    return slopes


def _segments(times: np.ndarray, t: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Segment index, segment length and clipped local fraction for each ``t``."""
    seg = np.clip(np.searchsorted(times, t, side="right") - 1, 0, times.size - 2)
    h = times[seg + 1] - times[seg]
    u = (t - times[seg]) / h
    return seg, h, u


def evaluate(method: str, times: np.ndarray, knots: np.ndarray, t: np.ndarray,
             deriv: int = 0) -> np.ndarray:
    """Evaluate an interpolated keyframe trajectory.

    Parameters
    ----------
    method : {"linear", "cubic", "minimum-jerk"}
        The interpolation (see the module docstring for the formulas).
    times : ndarray, shape (k,)
        Keyframe times, s, strictly increasing, k >= 2.
    knots : ndarray, shape (k, n_joints)
        Keyframe postures, rad.
    t : ndarray, shape (m,)
        Times to evaluate at, s. Outside ``[times[0], times[-1]]`` the
        trajectory holds its end postures (zero velocity and acceleration).
    deriv : {0, 1, 2}
        0 for position (rad), 1 for velocity (rad/s), 2 for acceleration
        (rad/s²). For ``linear`` the acceleration is zero between keyframes
        (the steps at keyframes are impulses that no sample represents).

    Returns
    -------
    ndarray, shape (m, n_joints)

    Notes
    -----
    linear: :math:`q = y_i + u\\,(y_{i+1} - y_i)`, :math:`u = (t - x_i)/h_i`.

    cubic: Hermite form with the slopes of :func:`clamped_spline_slopes`,

    .. math::

        q = (2u^3 - 3u^2 + 1)\\,y_i + (u^3 - 2u^2 + u)\\,h_i m_i
          + (-2u^3 + 3u^2)\\,y_{i+1} + (u^3 - u^2)\\,h_i m_{i+1}.

    minimum-jerk: :math:`q = y_i + (y_{i+1} - y_i)\\, s(u)` with ``s`` from
    :func:`minimum_jerk_profile` (Flash & Hogan 1985).

    References
    ----------
    T. Flash and N. Hogan (1985), *J. Neurosci.* 5(7), 1688-1703.
    C. de Boor (1978), *A Practical Guide to Splines*, Springer.
    """
    times = np.asarray(times, dtype=float)
    knots = np.asarray(knots, dtype=float)
    t = np.atleast_1d(np.asarray(t, dtype=float))
    if times.ndim != 1 or times.size < 2 or knots.shape[0] != times.size:
        raise ValueError("times must be (k,) with k >= 2 and knots (k, n_joints)")
    if np.any(np.diff(times) <= 0):
        raise ValueError("keyframe times must increase strictly")
    if deriv not in (0, 1, 2):
        raise ValueError(f"deriv must be 0, 1 or 2, not {deriv!r}")
    seg, h, u_raw = _segments(times, t)
    inside = (t >= times[0]) & (t <= times[-1])
    u = np.clip(u_raw, 0.0, 1.0)
    y0 = knots[seg]
    y1 = knots[seg + 1]
    dy = y1 - y0
    hc = h[:, None]
    if method == "linear":
        if deriv == 0:
            return y0 + u[:, None] * dy
        if deriv == 1:
            return np.where(inside[:, None], dy / hc, 0.0)
        return np.zeros_like(y0)
    if method == "minimum-jerk":
        s = minimum_jerk_profile(u, deriv)[:, None]
        if deriv == 0:
            return y0 + dy * s
        return np.where(inside[:, None], dy * s / hc**deriv, 0.0)
    if method == "cubic":
        m = clamped_spline_slopes(times, knots)
        m0 = m[seg] * hc
        m1 = m[seg + 1] * hc
        uc = u[:, None]
        if deriv == 0:
            b = (2 * uc**3 - 3 * uc**2 + 1, uc**3 - 2 * uc**2 + uc, -2 * uc**3 + 3 * uc**2,
                 uc**3 - uc**2)
            return b[0] * y0 + b[1] * m0 + b[2] * y1 + b[3] * m1
        if deriv == 1:
            b = (6 * uc**2 - 6 * uc, 3 * uc**2 - 4 * uc + 1, -6 * uc**2 + 6 * uc,
                 3 * uc**2 - 2 * uc)
        else:
            b = (12 * uc - 6, 6 * uc - 4, -12 * uc + 6, 6 * uc - 2)
        out = (b[0] * y0 + b[1] * m0 + b[2] * y1 + b[3] * m1) / hc**deriv
        return np.where(inside[:, None], out, 0.0)
    raise ValueError(f"unknown interpolation {method!r}; expected one of {INTERPOLATIONS}")
