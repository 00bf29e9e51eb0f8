"""Virtual sensors at body sites: inertial measurement units and head orientation.

The IMU model is that of an ideal strapdown accelerometer and gyroscope rigidly
fixed at a site, plus optional white noise and constant bias:

.. math::
    a = R^\\top (\\ddot p - g) + b_a + n_a, \\qquad
    \\omega_s = R^\\top \\omega + b_g + n_g, \\qquad g = (0, 0, -g_0),

with ``R``, ``p`` the base-from-site rotation and position, ``omega`` the
site's angular velocity in the base frame (so ``[omega_s]x = R^T dR/dt``) and
``g_0 = 9.80665 m/s^2`` (standard gravity, 3rd CGPM 1901). The base frame is
taken as inertial (the robot and the seated participant do not travel).

How the motion is obtained
--------------------------
Joint rates come from the sampled joint angles: ``q`` is interpolated per
joint by a not-a-knot cubic spline through the samples ([1]_), and ``qd``,
``qdd`` are the spline's exact first and second derivatives at the sample
times. For a smooth trajectory with sample spacing ``h`` the errors are
O(h^3) in ``qd`` and O(h^2) in ``qdd`` ([2]_); they vanish for trajectories
that are cubic polynomials (constant rates in particular). From ``q, qd,
qdd`` the site's angular velocity and linear acceleration follow exactly, by
the outward velocity/acceleration recursion (:meth:`Robot.kinematics`) --
there is no numerical differentiation of positions or rotations. Callers
that know exact joint rates (an analytic trajectory) may pass ``qd`` and
``qdd`` instead.

References
----------
.. [1] de Boor, C. (1978). *A Practical Guide to Splines*. Springer.
.. [2] Hall, C. A., & Meyer, W. W. (1976). Optimal error bounds for cubic
   spline interpolation. *Journal of Approximation Theory*, 16(2), 105-122.
.. [3] IEEE Std 952-1997. IEEE Standard Specification Format Guide and Test
   Procedure for Single-Axis Interferometric Fiber Optic Gyros (random walk
   coefficient, white-noise density).
.. [4] Woodman, O. J. (2007). An introduction to inertial navigation.
   Technical Report UCAM-CL-TR-696, University of Cambridge Computer
   Laboratory.
.. [5] Diebel, J. (2006). Representing attitude: Euler angles, unit
   quaternions, and rotation vectors. Technical report, Stanford University.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import CubicSpline
from scipy.linalg import solve_banded

from echoreo.sim import _kinematics as _k
from echoreo.sim.robot import Robot
from echoreo.sim.rotations import euler_zyx_from_matrices, quaternions_from_matrices

__all__ = [
    "STANDARD_GRAVITY",
    "HeadPose",
    "ImuNoise",
    "head_orientation",
    "imu",
    "imus",
    "joint_derivatives",
]

#: Standard acceleration of gravity, m/s^2 (3rd CGPM, 1901).
STANDARD_GRAVITY = 9.80665


@dataclass(frozen=True)
class ImuNoise:
    """White noise and constant bias of a 3-axis accelerometer and gyroscope.

    The defaults are zero (an ideal sensor): noise levels differ by an order of
    magnitude between sensor grades, so the caller states the sensor it models.

    Attributes
    ----------
    acc_noise_density : float, m/s^2/sqrt(Hz)
        Accelerometer white-noise density (velocity random walk coefficient).
    gyro_noise_density : float, rad/s/sqrt(Hz)
        Gyroscope white-noise density (angle random walk coefficient, [3]_).
    acc_bias : tuple of 3 float, m/s^2
        Constant accelerometer bias, sensor frame.
    gyro_bias : tuple of 3 float, rad/s
        Constant gyroscope bias, sensor frame.

    Notes
    -----
    Sampled at rate ``f_s`` a white-noise density ``N`` becomes independent
    Gaussian samples of standard deviation ``sigma = N sqrt(f_s)`` ([4]_; the
    discrete equivalent of the continuous density over the sample interval).
    ``f_s`` is taken as one over the median sample interval.
    """

    acc_noise_density: float = 0.0
    gyro_noise_density: float = 0.0
    acc_bias: tuple[float, float, float] = (0.0, 0.0, 0.0)
    gyro_bias: tuple[float, float, float] = (0.0, 0.0, 0.0)

    def __post_init__(self) -> None:
        for name in ("acc_noise_density", "gyro_noise_density"):
            v = getattr(self, name)
            if not np.isfinite(v) or v < 0:
                raise ValueError(f"ImuNoise.{name} must be a finite number >= 0, got {v!r}")
        for name in ("acc_bias", "gyro_bias"):
            v = np.asarray(getattr(self, name), dtype=float)
            if v.shape != (3,) or not np.all(np.isfinite(v)):
                raise ValueError(f"ImuNoise.{name} must be 3 finite numbers, got {v!r}")

    def apply(self, t: NDArray, acc: NDArray, gyro: NDArray,
              rng: np.random.Generator | None) -> tuple[NDArray, NDArray]:
        """Add bias and white noise: ``x + b + N sqrt(f_s) * e``, ``e ~ N(0, I)``.

        Parameters
        ----------
        t : ndarray, shape (n,), s
        acc, gyro : ndarray, shape (n, 3)
        rng : numpy.random.Generator
            Needed when a noise density is above zero.

        Returns
        -------
        (acc, gyro) : ndarrays, shape (n, 3), new arrays
        """
        acc = acc + np.asarray(self.acc_bias, dtype=float)
        gyro = gyro + np.asarray(self.gyro_bias, dtype=float)
        if self.acc_noise_density > 0 or self.gyro_noise_density > 0:
            if rng is None:
                raise ValueError("IMU noise needs a random generator: pass "
                                 "rng=numpy.random.default_rng(seed)")
            dt = float(np.median(np.diff(t))) if len(t) > 1 else 1.0
            root_fs = np.sqrt(1.0 / dt)
            if self.acc_noise_density > 0:
                acc = acc + rng.normal(0.0, self.acc_noise_density * root_fs, acc.shape)
            if self.gyro_noise_density > 0:
                gyro = gyro + rng.normal(0.0, self.gyro_noise_density * root_fs, gyro.shape)
        return acc, gyro


@dataclass(frozen=True)
class HeadPose:
    """Orientation of the head site over time.

    Attributes
    ----------
    yaw, pitch, roll : ndarray, shape (n,), rad
        Intrinsic z-y'-x'' Euler angles of the base-from-head rotation,
        ``R = Rz(yaw) Ry(pitch) Rx(roll)``. With x forward, y left, z up:
        positive yaw turns the face left, positive pitch tilts it down,
        positive roll tilts the head toward its right shoulder.
    quaternion : ndarray, shape (n, 4)
        The same rotation as a unit quaternion ``(w, x, y, z)``, ``w >= 0``.
    """

    yaw: NDArray[np.float64]
    pitch: NDArray[np.float64]
    roll: NDArray[np.float64]
    quaternion: NDArray[np.float64]


def _check_t(t: ArrayLike, n: int) -> NDArray[np.float64]:
    t = np.asarray(t, dtype=float)
    if t.ndim != 1 or t.shape[0] != n:
        raise ValueError(f"t must have shape ({n},) to match q; got shape {t.shape}")
    if n > 1 and not np.all(np.diff(t) > 0):
        k = int(np.argmax(~(np.diff(t) > 0)))
        raise ValueError(f"t must increase strictly; t[{k + 1}] = {t[k + 1]!r} s follows "
                         f"t[{k}] = {t[k]!r} s")
    if not np.all(np.isfinite(t)):
        raise ValueError("t must be finite")
    return t


def joint_derivatives(t: ArrayLike, q: ArrayLike) -> tuple[NDArray, NDArray]:
    """Joint rates from samples: derivatives of the interpolating cubic spline.

    ``q`` is interpolated by a not-a-knot cubic spline per column ([1]_; the
    spline of ``scipy.interpolate.CubicSpline``). The knot slopes ``s_i``
    solve the tridiagonal C2-continuity system (written out in the code); with
    ``dx_i = t_{i+1} - t_i`` and ``m_i = (q_{i+1} - q_i) / dx_i``,

    .. math:: \\dot q(t_i) = s_i, \\qquad
              \\ddot q(t_i) = \\frac{2 (3 m_i - 2 s_i - s_{i+1})}{dx_i}

    (the last sample uses the last interval at its right end). Errors for a
    smooth ``q``: O(h^3) and O(h^2) ([2]_). With two samples the rate is the
    difference quotient and the acceleration zero; with one, both are zero.

    Parameters
    ----------
    t : array_like, shape (n,), s, strictly increasing
    q : array_like, shape (n, n_joints), rad

    Returns
    -------
    qd : ndarray, shape (n, n_joints), rad/s
    qdd : ndarray, shape (n, n_joints), rad/s^2
    """
    q = np.asarray(q, dtype=float)
    if q.ndim != 2:
        raise ValueError(f"q must have shape (n, n_joints); got shape {q.shape}")
    t = _check_t(t, q.shape[0])
    n = q.shape[0]
    if n <= 1:
        return np.zeros_like(q), np.zeros_like(q)
    if n == 2:
        rate = (q[1] - q[0]) / (t[1] - t[0])
        return np.repeat(rate[None], 2, axis=0), np.zeros_like(q)
    if n == 3:  # not-a-knot through three points is the interpolating parabola
        c = CubicSpline(t, q, axis=0, bc_type="not-a-knot").c  # (4, n-1, n_joints)
        qd = np.empty_like(q)
        qdd = np.empty_like(q)
        qd[:-1] = c[2]
        qdd[:-1] = 2.0 * c[1]
        h = t[-1] - t[-2]
        qd[-1] = 3.0 * c[0, -1] * h * h + 2.0 * c[1, -1] * h + c[2, -1]
        qdd[-1] = 6.0 * c[0, -1] * h + 2.0 * c[1, -1]
        return qd, qdd
    # Knot slopes s from the tridiagonal system of C2 continuity with not-a-knot
    # ends (de Boor 1978, ch. IV), solved for all joints at once:
    #   dx_i s_{i-1} + 2 (dx_{i-1} + dx_i) s_i + dx_{i-1} s_{i+1}
    #       = 3 (dx_i m_{i-1} + dx_{i-1} m_i),   m_i = (q_{i+1} - q_i) / dx_i
    dx = np.diff(t)
    m = np.diff(q, axis=0) / dx[:, None]
    ab = np.zeros((3, n))
    rhs = np.empty_like(q)
    ab[1, 1:-1] = 2.0 * (dx[:-1] + dx[1:])
    ab[0, 2:] = dx[:-1]
    ab[2, :-2] = dx[1:]
    rhs[1:-1] = 3.0 * (dx[1:, None] * m[:-1] + dx[:-1, None] * m[1:])
    d = t[2] - t[0]
    ab[1, 0] = dx[1]
    ab[0, 1] = d
    rhs[0] = ((dx[0] + 2.0 * d) * dx[1] * m[0] + dx[0] ** 2 * m[1]) / d
    d = t[-1] - t[-3]
    ab[1, -1] = dx[-2]
    ab[2, -2] = d
    rhs[-1] = (dx[-1] ** 2 * m[-2] + (2.0 * d + dx[-1]) * dx[-2] * m[-1]) / d
    qd = solve_banded((1, 1), ab, rhs, overwrite_ab=True, overwrite_b=True,
                      check_finite=False)
    # second derivative of each interval's Hermite cubic at its left end, and of
    # the last interval at its right end
    qdd = np.empty_like(q)
    qdd[:-1] = 2.0 * (3.0 * m - 2.0 * qd[:-1] - qd[1:]) / dx[:, None]
    qdd[-1] = (2.0 * qd[-2] + 4.0 * qd[-1] - 6.0 * m[-1]) / dx[-1]
    return qd, qdd


def imus(robot: Robot, t: ArrayLike, q: ArrayLike, sites: list[str] | tuple[str, ...] | None
         = None, *, noise: ImuNoise | None = None, rng: np.random.Generator | None = None,
         qd: ArrayLike | None = None, qdd: ArrayLike | None = None,
         ) -> dict[str, tuple[NDArray[np.float64], NDArray[np.float64]]]:
    """Virtual IMUs at several sites, sharing one kinematics pass.

    See :func:`imu` for the model; noise is drawn site by site in the order of
    ``sites``.

    Parameters
    ----------
    robot : Robot
    t : array_like, shape (n,), s
    q : array_like, shape (n, n_joints), rad
    sites : sequence of str, optional
        Default: all sites of the robot.
    noise, rng, qd, qdd
        As for :func:`imu`.

    Returns
    -------
    dict of str to (acc, gyro)
        Each ndarray, shape (n, 3), m/s^2 and rad/s, in the site frame.
    """
    q = robot._as_q(q)
    n = q.shape[0]
    t = _check_t(t, n)
    if qd is None:
        qd, qdd = joint_derivatives(t, q)
    q, qd, qdd = robot._check_motion(q, qd, qdd)
    wanted = robot.site_names if sites is None else tuple(sites)
    specs = [robot._site(site) for site in wanted]
    out = {site: (np.empty((n, 3)), np.empty((n, 3))) for site in wanted}
    up = [0.0, 0.0, STANDARD_GRAVITY]  # -g
    # Chunks of samples keep the component arrays in cache; the result does not
    # depend on the chunk size (every sample is computed independently).
    for start in range(0, n, _k.CHUNK):
        sl = slice(start, min(start + _k.CHUNK, n))
        R, _, w, al, a = robot._components(q[sl], qd[sl], qdd[sl])
        for site, spec in zip(wanted, specs, strict=True):
            L = spec["link"]
            Rs = _k.matmul(R[L], spec["c_R"])
            r = _k.matvec(R[L], spec["c_p"])
            wL = w[L]
            acc_base = _k.vadd(_k.vadd(a[L], _k.cross(al[L], r)),
                               _k.cross(wL, _k.cross(wL, r)))
            acc = _k.matTvec(Rs, _k.vadd(acc_base, up))
            gyro = _k.matTvec(Rs, wL)
            for k in range(3):
                out[site][0][sl, k] = acc[k]  # a float constant broadcasts
                out[site][1][sl, k] = gyro[k]
    if noise is not None:
        out = {site: noise.apply(t, acc, gyro, rng) for site, (acc, gyro) in out.items()}
    return out


def imu(robot: Robot, t: ArrayLike, q: ArrayLike, site: str, *, noise: ImuNoise | None = None,
        rng: np.random.Generator | None = None, qd: ArrayLike | None = None,
        qdd: ArrayLike | None = None) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Accelerometer and gyroscope readings of an IMU fixed at a site.

    .. math::
        a = R^\\top (\\ddot p - g), \\quad g = (0, 0, -9.80665)\\ \\mathrm{m/s^2},
        \\qquad \\omega_s = R^\\top \\omega

    (specific force and body angular velocity of a strapdown IMU, [4]_), with
    ``R``, ``p``, ``omega`` of the site in the base frame from the outward
    recursion of :meth:`Robot.kinematics` and the joint rates from
    :func:`joint_derivatives` (module docstring: method and error). A robot at
    rest reads ``(0, 0, +9.80665)`` in a site frame whose z axis points up.

    Parameters
    ----------
    robot : Robot
    t : array_like, shape (n,), s, strictly increasing
    q : array_like, shape (n, n_joints), rad
    site : str
    noise : ImuNoise, optional
        Bias and white noise to add (default: none).
    rng : numpy.random.Generator, optional
        Required when ``noise`` has a non-zero density.
    qd, qdd : array_like, shape (n, n_joints), optional
        Exact joint rates (rad/s) and accelerations (rad/s^2), when known;
        otherwise they come from the cubic spline through ``q``.

    Returns
    -------
    acc : ndarray, shape (n, 3), m/s^2
        Specific force (gravity included) in the site frame.
    gyro : ndarray, shape (n, 3), rad/s
        Angular velocity in the site frame.
    """
    return imus(robot, t, q, [site], noise=noise, rng=rng, qd=qd, qdd=qdd)[site]


def head_orientation(robot: Robot, q: ArrayLike, site: str = "head") -> HeadPose:
    """Orientation of a site (default the head) as Euler angles and quaternions.

    Euler angles are intrinsic z-y'-x'' (yaw, pitch, roll) of the base-from-site
    rotation, ``R = Rz(yaw) Ry(pitch) Rx(roll)`` ([5]_, the 3-2-1 sequence);
    the quaternion comes from Shepperd's method (see
    :func:`echoreo.sim.rotations.quaternions_from_matrices`).

    Parameters
    ----------
    robot : Robot
    q : array_like, shape (n, n_joints), rad
    site : str

    Returns
    -------
    HeadPose
        ``yaw``, ``pitch``, ``roll`` each shape (n,), rad; ``quaternion``
        shape (n, 4), ``(w, x, y, z)``.
    """
    R = robot.fk(q, sites=[site])[site][:, :3, :3]
    ypr = euler_zyx_from_matrices(R)
    return HeadPose(yaw=ypr[:, 0], pitch=ypr[:, 1], roll=ypr[:, 2],
                    quaternion=quaternions_from_matrices(R))
