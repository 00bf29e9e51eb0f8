"""The robot model: joints, sites, limits, mirroring and forward kinematics.

:class:`Robot` holds a parsed robot description (built by
:func:`echoreo.sim.robot.load_robot` or :func:`echoreo.sim.robot.parse_robot`,
which check the file first) and computes the poses and motion of its links
and body sites. :class:`Kinematics` is the result of
:meth:`Robot.kinematics`.

Forward kinematics is vectorised over samples: each joint is one batched
operation on all ``n`` samples at once, so the only Python loop is over the
joints (twelve for ``torso-e1``).

References
----------
.. [1] Craig, J. J. (2005). *Introduction to Robotics: Mechanics and
   Control* (3rd ed.). Pearson. Ch. 3 (forward kinematics as a product of
   link transforms) and ch. 5 (velocity propagation).
.. [2] Luh, J. Y. S., Walker, M. W., & Paul, R. P. C. (1980). On-line
   computational scheme for mechanical manipulators. *Journal of Dynamic
   Systems, Measurement, and Control*, 102(2), 69-76 (outward recursion of
   angular and linear velocity and acceleration).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from echoreo.errors import RobotError
from echoreo.sim import _kinematics as _k

__all__ = ["Kinematics", "Robot"]


@dataclass(frozen=True)
class Kinematics:
    """Poses and motion of frames over time, all in the base frame.

    Attributes
    ----------
    R : dict of str to ndarray, shape (n, 3, 3)
        Base-from-frame rotations.
    p : dict of str to ndarray, shape (n, 3), m
        Frame origins.
    omega : dict of str to ndarray, shape (n, 3), rad/s
        Angular velocities (base frame); present when velocities were given.
    alpha : dict of str to ndarray, shape (n, 3), rad/s^2
        Angular accelerations (base frame).
    acc : dict of str to ndarray, shape (n, 3), m/s^2
        Linear accelerations of the frame origins (base frame, gravity excluded).
    """

    R: dict
    p: dict
    omega: dict
    alpha: dict
    acc: dict


class Robot:
    """A parsed robot description. Build with :func:`~echoreo.sim.robot.load_robot` or
    :func:`~echoreo.sim.robot.parse_robot`.

    Attributes
    ----------
    name : str
    joint_names : tuple of str
        In file order; the columns of every joint array ``q``.
    site_names : tuple of str
    link_names : tuple of str
        The base link first, then the child links in kinematic order.
    base_link : str
    lower, upper : ndarray, shape (n_joints,), rad
        Position limits.
    max_velocity : ndarray, shape (n_joints,), rad/s
    max_acceleration : ndarray, shape (n_joints,), rad/s^2
    rest : ndarray, shape (n_joints,), rad
    mirror_index : ndarray of int, shape (n_joints,)
    mirror_sign : ndarray, shape (n_joints,)
        ``q[:, mirror_index] * mirror_sign`` is the left-right mirror image of
        the postures ``q``.
    source : str
        The file path, or the name given to :func:`~echoreo.sim.robot.parse_robot`.
    text : str
        The YAML text the robot was parsed from (stored in session files).
    """

    def __init__(self, *, name: str, description: str, base_link: str, joints: list[dict],
                 sites: dict[str, dict], rest: NDArray, mirror_index: NDArray,
                 mirror_sign: NDArray, source: str, text: str):
        self.name = name
        self.description = description
        self.base_link = base_link
        self.source = source
        self.text = text
        self.joint_names = tuple(j["name"] for j in joints)
        self.site_names = tuple(sites)
        self._joints = joints
        self._sites = sites
        self._index = {n: i for i, n in enumerate(self.joint_names)}
        # kinematic order: a joint comes after the joint that creates its parent link
        made_by = {j["child"]: j for j in joints}
        order: list[int] = []
        done = {base_link}
        pending = list(range(len(joints)))
        while pending:
            nxt = [i for i in pending if joints[i]["parent"] in done]
            for i in nxt:
                order.append(i)
                done.add(joints[i]["child"])
            pending = [i for i in pending if i not in nxt]
        self._order = tuple(order)
        self.link_names = (base_link, *(joints[i]["child"] for i in order))
        self._link_joint = {link: self._index[j["name"]] for link, j in made_by.items()}
        self._link_parent = {j["child"]: j["parent"] for j in joints}

        def arr(key: str) -> NDArray:
            a = np.array([j[key] for j in joints], dtype=float)
            a.setflags(write=False)
            return a

        self.lower = arr("lower")
        self.upper = arr("upper")
        self.max_velocity = arr("velocity")
        self.max_acceleration = arr("acceleration")
        for a in (rest, mirror_index, mirror_sign):
            a.setflags(write=False)
        self.rest = rest
        self.mirror_index = mirror_index
        self.mirror_sign = mirror_sign

    # -- description -------------------------------------------------------------

    @property
    def n_joints(self) -> int:
        """Number of joints."""
        return len(self.joint_names)

    def joint_index(self, name: str) -> int:
        """Column of joint ``name`` in ``q``.

        Raises
        ------
        RobotError
            The robot has no such joint; the message lists its joints.
        """
        try:
            return self._index[name]
        except KeyError:
            raise RobotError(
                f"robot {self.name!r} has no joint {name!r}",
                hint="its joints are " + ", ".join(self.joint_names),
            ) from None

    def link_parent(self, link: str) -> str | None:
        """Parent link of ``link`` (None for the base link)."""
        return self._link_parent.get(link)

    def site_link(self, site: str) -> str:
        """Link a site is attached to."""
        return self._site(site)["link"]

    def mirror(self, q: ArrayLike) -> NDArray[np.float64]:
        """Left-right mirror image of postures.

        .. math:: q'_{:, j} = s_j \\, q_{:, m(j)}

        with ``m = mirror_index`` and ``s = mirror_sign`` (reflection through
        the sagittal plane; see FORMAT.md section 1).

        Parameters
        ----------
        q : array_like, shape (n, n_joints) or (n_joints,), rad

        Returns
        -------
        ndarray, same shape as ``q``, rad
        """
        q = np.asarray(q, dtype=float)
        return q[..., self.mirror_index] * self.mirror_sign

    def __repr__(self) -> str:
        return (f"Robot(name={self.name!r}, joints={self.n_joints}, "
                f"sites={list(self.site_names)}, source={self.source!r})")

    # -- kinematics --------------------------------------------------------------

    def _site(self, site: str) -> dict:
        try:
            return self._sites[site]
        except KeyError:
            raise RobotError(
                f"robot {self.name!r} has no site {site!r}",
                hint="its sites are " + ", ".join(self.site_names),
            ) from None

    def _as_q(self, q: ArrayLike, what: str = "q") -> NDArray[np.float64]:
        q = np.asarray(q, dtype=float)
        if q.ndim == 1:
            q = q[None, :]
        if q.ndim != 2 or q.shape[1] != self.n_joints:
            raise ValueError(
                f"{what} must have shape (n, {self.n_joints}) for robot {self.name!r} "
                f"(columns {', '.join(self.joint_names)}); got shape {q.shape}"
            )
        return q

    def kinematics(self, q: ArrayLike, qd: ArrayLike | None = None,
                   qdd: ArrayLike | None = None) -> Kinematics:
        """Poses (and, given joint rates, velocities and accelerations) of all links.

        Outward recursion over the tree ([1]_ ch. 3 and 5, [2]_). For joint j
        with parent link P and child link C, fixed origin ``(R_o, p_o)`` in P,
        unit axis ``a`` in C and angle ``q_j``:

        .. math::
            R_C = R_P R_o \\operatorname{Rot}(a, q_j), \\quad
            p_C = p_P + R_P p_o, \\quad
            u = R_C a,

            \\omega_C = \\omega_P + \\dot q_j u, \\quad
            \\alpha_C = \\alpha_P + \\ddot q_j u + \\dot q_j\\, \\omega_P \\times u,

            \\ddot p_C = \\ddot p_P + \\alpha_P \\times r
                         + \\omega_P \\times (\\omega_P \\times r), \\quad r = R_P p_o.

        The base link is fixed: identity pose, zero motion. The motion terms
        are exact for the given ``qd``, ``qdd`` (no numerical differentiation
        here).

        Parameters
        ----------
        q : array_like, shape (n, n_joints), rad
        qd : array_like, shape (n, n_joints), rad/s, optional
        qdd : array_like, shape (n, n_joints), rad/s^2, optional
            Needed together with ``qd``.

        Returns
        -------
        Kinematics
            Keyed by link name; ``omega``, ``alpha``, ``acc`` are empty dicts
            when ``qd`` is not given.
        """
        q, qd, qdd = self._check_motion(q, qd, qdd)
        n = q.shape[0]
        R, p, w, al, ac = _k.recursion(self._joints, self._order, self.base_link, q, qd, qdd)
        links = self.link_names
        if qd is None:
            return Kinematics({k: _k.stack_mat(R[k], n) for k in links},
                              {k: _k.stack_vec(p[k], n) for k in links}, {}, {}, {})
        return Kinematics({k: _k.stack_mat(R[k], n) for k in links},
                          {k: _k.stack_vec(p[k], n) for k in links},
                          {k: _k.stack_vec(w[k], n) for k in links},
                          {k: _k.stack_vec(al[k], n) for k in links},
                          {k: _k.stack_vec(ac[k], n) for k in links})

    def _check_motion(self, q: ArrayLike, qd: ArrayLike | None, qdd: ArrayLike | None):
        q = self._as_q(q)
        if qd is not None:
            qd = self._as_q(qd, "qd")
            qdd = self._as_q(qdd if qdd is not None else np.zeros_like(qd), "qdd")
            if qd.shape[0] != q.shape[0] or qdd.shape[0] != q.shape[0]:
                raise ValueError("q, qd and qdd must have the same number of samples")
        return q, qd, qdd

    def _components(self, q: NDArray, qd: NDArray | None = None, qdd: NDArray | None = None):
        """Component form of the recursion (see ``_kinematics``); arguments checked."""
        return _k.recursion(self._joints, self._order, self.base_link, q, qd, qdd)

    def site_kinematics(self, kin: Kinematics, site: str) -> tuple:
        """Pose and motion of one site from the kinematics of its link.

        A site is rigidly attached to its link L at offset ``(R_s, p_s)``:

        .. math::
            R = R_L R_s, \\quad r = R_L p_s, \\quad p = p_L + r,

            \\ddot p = \\ddot p_L + \\alpha_L \\times r
                       + \\omega_L \\times (\\omega_L \\times r)

        (rigid-body acceleration transfer, [1]_ ch. 6).

        Returns
        -------
        tuple
            ``(R (n,3,3), p (n,3), omega (n,3) or None, acc (n,3) or None)``,
            base frame.
        """
        spec = self._site(site)
        L = spec["link"]
        RL = kin.R[L]
        R = RL @ spec["R"]
        r = RL @ spec["p"]
        p = kin.p[L] + r
        if not kin.omega:
            return R, p, None, None
        w = kin.omega[L]
        acc = kin.acc[L] + np.cross(kin.alpha[L], r) + np.cross(w, np.cross(w, r))
        return R, p, w, acc

    def fk_links(self, q: ArrayLike) -> dict[str, NDArray[np.float64]]:
        """Base-from-link transforms of every link.

        Parameters
        ----------
        q : array_like, shape (n, n_joints), rad

        Returns
        -------
        dict of str to ndarray, shape (n, 4, 4)
            Homogeneous transforms, one per link (the base link included).
        """
        kin = self.kinematics(q)
        return {name: _homogeneous(kin.R[name], kin.p[name]) for name in self.link_names}

    def fk(self, q: ArrayLike, sites: tuple[str, ...] | list[str] | None = None,
           ) -> dict[str, NDArray[np.float64]]:
        """Base-from-site transforms.

        The product of the fixed origin transforms and joint rotations along
        the chain from the base to each site's link, then the site offset
        (see :meth:`kinematics` for the formula; [1]_ ch. 3).

        Parameters
        ----------
        q : array_like, shape (n, n_joints), rad
            A single posture of shape ``(n_joints,)`` is taken as ``n = 1``.
        sites : sequence of str, optional
            Sites to compute (default: all).

        Returns
        -------
        dict of str to ndarray, shape (n, 4, 4)
            Homogeneous base-from-site transforms; translations in m.
        """
        q = self._as_q(q)
        n = q.shape[0]
        wanted = self.site_names if sites is None else tuple(sites)
        specs = [self._site(site) for site in wanted]
        out = {site: np.zeros((n, 4, 4)) for site in wanted}
        for T in out.values():
            T[:, 3, 3] = 1.0
        # chunks of samples keep the component arrays in cache (same result)
        for start in range(0, n, _k.CHUNK):
            sl = slice(start, min(start + _k.CHUNK, n))
            R, p, _, _, _ = self._components(q[sl])
            for site, spec in zip(wanted, specs, strict=True):
                L = spec["link"]
                T = out[site]
                Rs = _k.matmul(R[L], spec["c_R"])
                ps = _k.vadd(p[L], _k.matvec(R[L], spec["c_p"]))
                for k in range(9):
                    T[sl, k // 3, k % 3] = Rs[k]
                for k in range(3):
                    T[sl, k, 3] = ps[k]
        return out


def _homogeneous(R: NDArray, p: NDArray) -> NDArray[np.float64]:
    T = np.zeros((R.shape[0], 4, 4))
    T[:, :3, :3] = R
    T[:, :3, 3] = p
    T[:, 3, 3] = 1.0
    return T
