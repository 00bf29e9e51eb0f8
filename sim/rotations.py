"""Rotation conversions, batched over samples.

Names read ``x_from_y`` (STYLE.md); functions whose inputs and outputs carry a
leading sample axis are plural. All angles are in rad, all matrices are
proper rotations (orthonormal, determinant +1) acting on column vectors, and
quaternions are ``(w, x, y, z)`` with ``w >= 0``.

References
----------
.. [1] Shuster, M. D. (1993). A survey of attitude representations.
   *Journal of the Astronautical Sciences*, 41(4), 439-517.
.. [2] Shepperd, S. W. (1978). Quaternion from rotation matrix. *Journal of
   Guidance and Control*, 1(3), 223-224.
.. [3] Diebel, J. (2006). Representing attitude: Euler angles, unit
   quaternions, and rotation vectors. Technical report, Stanford University.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "cross_matrix",
    "euler_zyx_from_matrices",
    "matrices_from_axis_angles",
    "matrix_from_rpy",
    "quaternions_from_matrices",
]


def cross_matrix(v: ArrayLike) -> NDArray[np.float64]:
    """Skew-symmetric matrix ``[v]x`` with ``[v]x @ w == v x w``.

    Parameters
    ----------
    v : array_like, shape (3,)

    Returns
    -------
    ndarray, shape (3, 3)
    """
    x, y, z = np.asarray(v, dtype=float)
    return np.array([[0.0, -z, y], [z, 0.0, -x], [-y, x, 0.0]])


def matrix_from_rpy(rpy: ArrayLike) -> NDArray[np.float64]:
    """Rotation matrix from roll, pitch, yaw about the fixed x, y, z axes.

    .. math:: R = R_z(\\psi)\\, R_y(\\theta)\\, R_x(\\phi)

    for ``rpy = (phi, theta, psi)`` -- rotate about the fixed x axis by roll,
    then the fixed y axis by pitch, then the fixed z axis by yaw (equivalently
    intrinsic z-y'-x''). This is the convention of the URDF ``origin`` element
    and of [3]_ (eq. 287, "1-2-3" fixed-axis order).

    Parameters
    ----------
    rpy : array_like, shape (3,), rad

    Returns
    -------
    ndarray, shape (3, 3)
    """
    r, p, y = np.asarray(rpy, dtype=float)
    cr, sr = np.cos(r), np.sin(r)
    cp, sp = np.cos(p), np.sin(p)
    cy, sy = np.cos(y), np.sin(y)
    return np.array(
        [
            [cy * cp, cy * sp * sr - sy * cr, cy * sp * cr + sy * sr],
            [sy * cp, sy * sp * sr + cy * cr, sy * sp * cr - cy * sr],
            [-sp, cp * sr, cp * cr],
        ]
    )


def matrices_from_axis_angles(axis: ArrayLike, angles: ArrayLike) -> NDArray[np.float64]:
    """Rotation matrices about one fixed unit axis, one per angle (Rodrigues).

    .. math:: R(\\theta) = I + \\sin\\theta\\,[a]_\\times
              + (1 - \\cos\\theta)\\,[a]_\\times^2

    (Rodrigues' rotation formula; [1]_ eq. 98).

    Parameters
    ----------
    axis : array_like, shape (3,)
        Rotation axis; normalised here.
    angles : array_like, shape (n,), rad

    Returns
    -------
    ndarray, shape (n, 3, 3)
    """
    a = np.asarray(axis, dtype=float)
    a = a / np.linalg.norm(a)
    k = cross_matrix(a)
    k2 = k @ k
    th = np.asarray(angles, dtype=float).reshape(-1)
    return (np.eye(3) + np.sin(th)[:, None, None] * k
            + (1.0 - np.cos(th))[:, None, None] * k2)


def quaternions_from_matrices(R: ArrayLike) -> NDArray[np.float64]:
    """Unit quaternions ``(w, x, y, z)``, ``w >= 0``, from rotation matrices.

    Shepperd's method [2]_: of the four candidates ``4 w^2 = 1 + tr R``,
    ``4 x^2 = 1 + 2 R_00 - tr R`` (and likewise y, z), the largest is taken as
    the pivot so that the division is well conditioned; the other components
    follow from the off-diagonal sums and differences. The sign is then chosen
    so that ``w >= 0`` (q and -q are the same rotation).

    Parameters
    ----------
    R : array_like, shape (n, 3, 3)

    Returns
    -------
    ndarray, shape (n, 4)
    """
    R = np.asarray(R, dtype=float)
    r00, r11, r22 = R[:, 0, 0], R[:, 1, 1], R[:, 2, 2]
    tr = r00 + r11 + r22
    cand = np.stack([tr, r00, r11, r22], axis=1)
    pivot = np.argmax(cand, axis=1)
    q = np.empty((R.shape[0], 4))
    # pivot on w
    s = np.sqrt(np.maximum(1.0 + tr, 1e-300)) * 2.0
    qw = np.stack([0.25 * s, (R[:, 2, 1] - R[:, 1, 2]) / s,
                   (R[:, 0, 2] - R[:, 2, 0]) / s, (R[:, 1, 0] - R[:, 0, 1]) / s], axis=1)
    s = np.sqrt(np.maximum(1.0 + r00 - r11 - r22, 1e-300)) * 2.0
    qx = np.stack([(R[:, 2, 1] - R[:, 1, 2]) / s, 0.25 * s,
                   (R[:, 0, 1] + R[:, 1, 0]) / s, (R[:, 0, 2] + R[:, 2, 0]) / s], axis=1)
    s = np.sqrt(np.maximum(1.0 - r00 + r11 - r22, 1e-300)) * 2.0
    qy = np.stack([(R[:, 0, 2] - R[:, 2, 0]) / s, (R[:, 0, 1] + R[:, 1, 0]) / s,
                   0.25 * s, (R[:, 1, 2] + R[:, 2, 1]) / s], axis=1)
    s = np.sqrt(np.maximum(1.0 - r00 - r11 + r22, 1e-300)) * 2.0
    qz = np.stack([(R[:, 1, 0] - R[:, 0, 1]) / s, (R[:, 0, 2] + R[:, 2, 0]) / s,
                   (R[:, 1, 2] + R[:, 2, 1]) / s, 0.25 * s], axis=1)
    for i, cand_q in enumerate((qw, qx, qy, qz)):
        sel = pivot == i
        q[sel] = cand_q[sel]
    q *= np.where(q[:, :1] < 0.0, -1.0, 1.0)
    return q / np.linalg.norm(q, axis=1, keepdims=True)


def euler_zyx_from_matrices(R: ArrayLike) -> NDArray[np.float64]:
    """Intrinsic z-y'-x'' Euler angles (yaw, pitch, roll) from rotation matrices.

    .. math:: R = R_z(\\psi)\\, R_y(\\theta)\\, R_x(\\phi), \\quad
              \\psi = \\operatorname{atan2}(R_{10}, R_{00}), \\;
              \\theta = -\\arcsin R_{20}, \\;
              \\phi = \\operatorname{atan2}(R_{21}, R_{22})

    ([3]_ eq. 290, the "3-2-1" sequence). Yaw and roll lie in (-pi, pi],
    pitch in [-pi/2, pi/2]. At the gimbal lock (``|pitch| = pi/2``) roll is
    set to 0 and the whole rotation about z goes into yaw.

    Parameters
    ----------
    R : array_like, shape (n, 3, 3)

    Returns
    -------
    ndarray, shape (n, 3), rad
        Columns yaw, pitch, roll.
    """
    R = np.asarray(R, dtype=float)
    pitch = -np.arcsin(np.clip(R[:, 2, 0], -1.0, 1.0))
    yaw = np.arctan2(R[:, 1, 0], R[:, 0, 0])
    roll = np.arctan2(R[:, 2, 1], R[:, 2, 2])
    lock = np.hypot(R[:, 0, 0], R[:, 1, 0]) < 1e-9
    if np.any(lock):
        roll = np.where(lock, 0.0, roll)
        yaw = np.where(lock, np.arctan2(-R[:, 0, 1], R[:, 1, 1]), yaw)
    return np.stack([yaw, pitch, roll], axis=1)
