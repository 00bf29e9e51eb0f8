"""Leader reference signals: what the follower's sensor would read if it copied the leader.

For every paired follower stream (session meta ``pairs``: ``stream``,
``kind``, ``site``, ``leader_site``) the reference is the leader's signal at
``leader_site``, expressed as the follower's sensor would read it:

- from a recorded leader sensor stream when the pair names one
  (``leader_stream``), reflected across the sagittal plane in mirror mode;
- otherwise a virtual sensor: the leader's joints through the robot model
  (:func:`echoreo.sim.imus`, :func:`echoreo.sim.head_orientation`). In mirror
  mode the joints are first mirrored (``robot.mirror``) and the sensor is
  placed at the mirror site of ``leader_site``, which is exactly the
  reflected signal (checked against :func:`reflect_lateral` in the tests).

Compared channels are size-independent (METHODS.md section 2.2): angular
velocity for IMUs, orientation angles for head pose.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from echoreo.errors import ScoringInputError

__all__ = [
    "KIND_CHANNELS",
    "KIND_SIGNAL",
    "mirror_site",
    "reflect_lateral",
    "virtual_references",
]

#: follower channels compared with the leader, per stream kind
KIND_CHANNELS: dict[str, tuple[str, str, str]] = {
    "imu": ("gyro_x", "gyro_y", "gyro_z"),
    "head_pose": ("yaw", "pitch", "roll"),
}

#: short description of the compared quantity, per kind (for the ``signal`` field)
KIND_SIGNAL: dict[str, str] = {
    "imu": "gyro",
    "head_pose": "yaw-pitch-roll",
}

#: sign of each compared channel under reflection through the sagittal (x-z) plane:
#: angular velocity is a pseudovector, omega' = -M omega with M = diag(1, -1, 1);
#: yaw and roll (rotations about z and x) change sign, pitch does not.
_REFLECT_SIGN: dict[str, np.ndarray] = {
    "imu": np.array([-1.0, 1.0, -1.0]),
    "head_pose": np.array([-1.0, 1.0, -1.0]),
}


def mirror_site(site: str) -> str:
    """The site's left-right counterpart (``left_wrist`` <-> ``right_wrist``; ``head`` stays)."""
    if site.startswith("left_"):
        return "right_" + site[5:]
    if site.startswith("right_"):
        return "left_" + site[6:]
    return site


def reflect_lateral(x: np.ndarray, kind: str) -> np.ndarray:
    """Reflect compared channels through the sagittal plane (the lateral axis y -> -y).

    With the reflection :math:`M = \\mathrm{diag}(1, -1, 1)` in a site frame
    whose y axis is lateral (DEVELOPERS.md frames):

    - angular velocity (a pseudovector): :math:`\\omega' = \\det(M) M \\omega
      = (-\\omega_x, \\omega_y, -\\omega_z)`;
    - head orientation :math:`R' = M R M`: yaw' = -yaw, pitch' = pitch,
      roll' = -roll (z-y'-x'' Euler angles).

    Parameters
    ----------
    x : ndarray, shape (n, 3)
        ``gyro_x, gyro_y, gyro_z`` (rad/s) for kind ``imu`` or ``yaw, pitch,
        roll`` (rad) for ``head_pose``.
    kind : str

    Returns
    -------
    ndarray, shape (n, 3)

    References
    ----------
    Goldstein, H., Poole, C. & Safko, J. (2002). *Classical Mechanics*, 3rd
    ed., Addison-Wesley, section 4.9 (axial vectors under improper rotations).
    """
    try:
        sign = _REFLECT_SIGN[kind]
    except KeyError:
        raise ScoringInputError(f"no lateral reflection is defined for stream kind {kind!r}",
                                hint="use kinds 'imu' or 'head_pose'") from None
    return np.asarray(x, dtype=np.float64) * sign


def _runs(valid: np.ndarray) -> list[tuple[int, int]]:
    from echoreo.scoring.preprocess import finite_runs

    return finite_runs(valid)


def virtual_references(robot, t: np.ndarray, q: np.ndarray,
                       pairs: Sequence[Mapping[str, str]], mode: str) -> dict[str, np.ndarray]:
    """Virtual leader sensors for paired follower streams.

    For a pair with leader site :math:`s` and kind ``imu``:

    .. math::

        \\omega^\\mathrm{ref}(t) =
        \\begin{cases}
          \\omega_{s}(q(t)) & \\text{anatomical} \\\\
          \\omega_{\\bar s}(\\bar q(t)) & \\text{mirror}
        \\end{cases}

    with :math:`\\bar q` = ``robot.mirror(q)`` and :math:`\\bar s` the mirror
    site; the gyroscope reading :math:`\\omega_s = R_s^\\top \\omega` comes from
    :func:`echoreo.sim.imus` (joint rates from a cubic spline). Kind
    ``head_pose`` uses :func:`echoreo.sim.head_orientation` (yaw, pitch,
    roll). Samples where ``q`` is not finite stay NaN; every finite run is
    computed on its own.

    Parameters
    ----------
    robot : Robot
        The leader's robot model (from the session's ``robot`` snapshot).
    t : ndarray, shape (n,), s
        Uniform grid times.
    q : ndarray, shape (n, n_joints), rad
        Leader joints on the grid, robot joint order; NaN where missing.
    pairs : sequence of mapping
        Pairs with ``stream``, ``kind``, ``leader_site``.
    mode : {"mirror", "anatomical"}

    Returns
    -------
    dict of str to ndarray, shape (n, 3)
        Stream name -> reference channels (:data:`KIND_CHANNELS` order).

    Raises
    ------
    ScoringInputError
        A pair's kind has no reference, or its leader site is not on the robot
        (raised for the first such pair; callers check pairs one by one).
    """
    from echoreo.sim import head_orientation, imus

    t = np.asarray(t, dtype=np.float64)
    q = np.asarray(q, dtype=np.float64)
    mirror = mode == "mirror"
    q_used = robot.mirror(q) if mirror else q
    want_imu: dict[str, list[str]] = {}
    want_head: dict[str, list[str]] = {}
    for p in pairs:
        kind = p["kind"]
        site = mirror_site(p["leader_site"]) if mirror else p["leader_site"]
        if site not in robot.site_names:
            raise ScoringInputError(
                f"stream {p['stream']!r} is paired with leader site {p['leader_site']!r}, which "
                f"the robot {robot.name!r} does not have (sites: {', '.join(robot.site_names)})",
                hint="fix the pairs in the session plan")
        if kind == "imu":
            want_imu.setdefault(site, []).append(p["stream"])
        elif kind == "head_pose":
            want_head.setdefault(site, []).append(p["stream"])
        else:
            raise ScoringInputError(
                f"stream {p['stream']!r} has kind {kind!r}, for which no leader reference is "
                "defined", hint="pair only streams of kind 'imu' or 'head_pose'")
    out = {p["stream"]: np.full((t.shape[0], 3), np.nan) for p in pairs}
    valid = np.isfinite(q_used).all(axis=1)
    for i, j in _runs(valid):
        if j - i < 2:
            continue
        if want_imu:
            res = imus(robot, t[i:j], q_used[i:j], list(want_imu))
            for site, names in want_imu.items():
                gyro = res[site][1]
                for name in names:
                    out[name][i:j] = gyro
        for site, names in want_head.items():
            hp = head_orientation(robot, q_used[i:j], site=site)
            ypr = np.column_stack([np.unwrap(hp.yaw), hp.pitch, np.unwrap(hp.roll)])
            for name in names:
                out[name][i:j] = ypr
    return out
