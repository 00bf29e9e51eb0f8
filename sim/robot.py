"""Robot descriptions: parsing, validation and forward kinematics.

A robot is a kinematic tree of revolute joints fixed to a base link, with
named body sites (frames where sensors sit) and a rest pose. The file format
is described in ``choreographies/FORMAT.md``, section 1.

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

import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from echoreo.errors import InputError, Problem, RobotError
from echoreo.sim import _kinematics as _k
from echoreo.sim.rotations import matrix_from_rpy
from echoreo.yamlload import LDict, Loc, load_yaml

__all__ = [
    "REQUIRED_SITES",
    "Kinematics",
    "Robot",
    "load_robot",
    "parse_robot",
    "shipped_robots",
]

#: Body sites every robot (and the human model) must define; sensors pair by these names.
REQUIRED_SITES = ("left_wrist", "right_wrist", "head", "chest")

FORMAT = "echoreo-robot/1"

_LENGTH_UNITS = {"m": 1.0, "cm": 0.01, "mm": 0.001}
_ANGLE_UNITS = {"rad": 1.0, "deg": np.pi / 180.0}
_VELOCITY_UNITS = {"rad/s": 1.0, "deg/s": np.pi / 180.0}
_ACCEL_UNITS = {"rad/s^2": 1.0, "rad/s2": 1.0, "rad/s²": 1.0,
                "deg/s^2": np.pi / 180.0, "deg/s2": np.pi / 180.0, "deg/s²": np.pi / 180.0}
_UNIT_TABLES = {
    "length": _LENGTH_UNITS,
    "angle": _ANGLE_UNITS,
    "velocity": _VELOCITY_UNITS,
    "acceleration": _ACCEL_UNITS,
}
_TOP_KEYS = ("format", "name", "description", "units", "base", "joints", "sites", "rest")
_JOINT_KEYS = ("parent", "child", "origin", "axis", "limits", "mirror", "mirror_sign",
               "description")
_ORIGIN_KEYS = ("xyz", "rpy")
_LIMIT_KEYS = ("lower", "upper", "velocity", "acceleration")
_SITE_KEYS = ("link", "xyz", "rpy", "description")
_NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_\-]*$")

# Reflection through the sagittal (x-z) plane: y -> -y.
_MIRROR = np.diag([1.0, -1.0, 1.0])


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
    """A parsed robot description. Build with :func:`load_robot` or :func:`parse_robot`.

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
        The file path, or the name given to :func:`parse_robot`.
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


# -- loading ------------------------------------------------------------------------


def _robots_dir() -> Path:
    from echoreo.choreographies import DATA_DIR

    return DATA_DIR / "robots"


def shipped_robots() -> tuple[str, ...]:
    """Names of the robots shipped in ``choreographies/robots/``."""
    return tuple(sorted(p.stem for p in _robots_dir().glob("*.yaml")))


def load_robot(name_or_path: str | Path | Robot) -> Robot:
    """Load a robot description by shipped name or from a file.

    Parameters
    ----------
    name_or_path : str or Path or Robot
        A shipped robot's name (``"torso-e1"``), or a path to a YAML file
        (anything that ends in ``.yaml``/``.yml`` or contains a path
        separator). A :class:`Robot` is returned unchanged.

    Returns
    -------
    Robot

    Raises
    ------
    RobotError
        Unknown name (the message lists the shipped robots), missing or
        unreadable file, or every problem of the description with its
        ``file:line:column``.
    """
    if isinstance(name_or_path, Robot):
        return name_or_path
    text_arg = str(name_or_path)
    looks_like_path = (isinstance(name_or_path, Path) or text_arg.endswith((".yaml", ".yml"))
                       or "/" in text_arg or "\\" in text_arg)
    if looks_like_path:
        path = Path(name_or_path)
    else:
        path = _robots_dir() / f"{text_arg}.yaml"
        if not path.is_file():
            names = shipped_robots()
            raise RobotError(
                f"no shipped robot is named {text_arg!r}",
                hint=("shipped robots: " + ", ".join(names) if names else "no robots are shipped")
                + "; or give the path of a robot YAML file",
            )
    try:
        data = load_yaml(path, what="robot description")
    except InputError as exc:
        raise RobotError(exc.problems) from exc
    text = path.read_text(encoding="utf-8")
    source = str(path) if looks_like_path else text_arg
    return _build(data, text, source, str(path))


def parse_robot(text: str, source: str = "<text>") -> Robot:
    """Parse a robot description from YAML text.

    Used for robots generated in code (the human model writes YAML text for a
    given body height and parses it here) and for the robot snapshot stored
    in a session file.

    Parameters
    ----------
    text : str
        YAML in the format of FORMAT.md section 1.
    source : str
        Name reported in error locations and stored as ``Robot.source``.

    Returns
    -------
    Robot

    Raises
    ------
    RobotError
        Every problem of the description, each with ``source:line:column``.
    """
    try:
        data = load_yaml(source, text=text, what="robot description")
    except InputError as exc:
        raise RobotError(exc.problems) from exc
    return _build(data, text, source, source)


# -- validation ---------------------------------------------------------------------


class _Checker:
    def __init__(self, file: str):
        self.file = file
        self.problems: list[Problem] = []

    def add(self, loc: Loc | None, message: str, hint: str = "") -> None:
        if loc is None:
            loc = Loc(self.file, None, None)
        self.problems.append(loc.problem(message, hint))

    def mapping(self, parent: Any, key: str, where: str, required: bool = True) -> LDict | None:
        value = parent.get(key) if isinstance(parent, dict) else None
        if value is None:
            if required and isinstance(parent, dict):
                self.add(_loc(parent), f"{where}: '{key}' is missing",
                         f"add '{key}:' with a mapping")
            return None
        if not isinstance(value, dict):
            self.add(_vloc(parent, key), f"{where}: '{key}' must be a mapping, "
                     f"got {_kind(value)}")
            return None
        return value

    def unknown_keys(self, mapping: Any, allowed: tuple[str, ...], where: str) -> None:
        if not isinstance(mapping, dict):
            return
        for key in mapping:
            if key not in allowed:
                hint = "allowed keys: " + ", ".join(allowed)
                self.add(_kloc(mapping, key), f"{where}: unknown key {key!r}", hint)

    def number(self, parent: Any, key: str, where: str, scale: float = 1.0,
               required: bool = True) -> float | None:
        if not isinstance(parent, dict) or key not in parent or parent[key] is None:
            if required:
                self.add(_loc(parent), f"{where}: '{key}' is missing", f"add '{key}: <number>'")
            return None
        v = parent[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not np.isfinite(v):
            self.add(_vloc(parent, key), f"{where}: '{key}' must be a finite number, "
                     f"got {v!r}")
            return None
        return float(v) * scale

    def vector(self, parent: Any, key: str, where: str, scale: float = 1.0,
               default: tuple | None = None) -> NDArray | None:
        if not isinstance(parent, dict) or key not in parent:
            if default is not None:
                return np.array(default, dtype=float)
            self.add(_loc(parent), f"{where}: '{key}' is missing", f"add '{key}: [x, y, z]'")
            return None
        v = parent[key]
        ok = (isinstance(v, list) and len(v) == 3
              and all(not isinstance(x, bool) and isinstance(x, (int, float)) for x in v)
              and all(np.isfinite(x) for x in v))
        if not ok:
            self.add(_vloc(parent, key), f"{where}: '{key}' must be a list of 3 finite "
                     f"numbers, got {v!r}", f"write '{key}: [x, y, z]'")
            return None
        return np.array(v, dtype=float) * scale


def _loc(container: Any) -> Loc | None:
    return getattr(container, "loc", None)


def _vloc(container: Any, key: Any) -> Loc | None:
    return container.value_loc(key) if isinstance(container, LDict) else _loc(container)


def _kloc(container: Any, key: Any) -> Loc | None:
    return container.key_loc(key) if isinstance(container, LDict) else _loc(container)


def _kind(value: Any) -> str:
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return repr(value)


def _mirror_name(name: str) -> str:
    if name.startswith("left_"):
        return "right_" + name[5:]
    if name.startswith("right_"):
        return "left_" + name[6:]
    return name


def _build(data: Any, text: str, source: str, file: str) -> Robot:
    ck = _Checker(file)
    if not isinstance(data, dict):
        ck.add(_loc(data) or Loc(file, 1, 1),
               f"a robot description must be a mapping at the top level, got {_kind(data)}",
               "start with 'name:', 'units:', 'base:', 'joints:', 'sites:'")
        raise RobotError(ck.problems)
    ck.unknown_keys(data, _TOP_KEYS, "robot")

    fmt = data.get("format")
    if fmt is not None and fmt != FORMAT:
        ck.add(_vloc(data, "format"), f"format {fmt!r} is not supported",
               f"write 'format: {FORMAT}'")
    name = data.get("name")
    if not isinstance(name, str) or not name.strip():
        ck.add(_vloc(data, "name") if "name" in data else _loc(data),
               "robot: 'name' must be a non-empty text", "add 'name: my-robot'")
        name = "<unnamed>"
    description = data.get("description", "")
    if not isinstance(description, str):
        ck.add(_vloc(data, "description"), "robot: 'description' must be text")
        description = ""

    # units
    scale = {"length": 1.0, "angle": 1.0, "velocity": 1.0, "acceleration": 1.0}
    units = ck.mapping(data, "units", "robot")
    if units is not None:
        ck.unknown_keys(units, tuple(_UNIT_TABLES), "units")
        for kind, table in _UNIT_TABLES.items():
            u = units.get(kind)
            if u is None:
                ck.add(_loc(units), f"units: '{kind}' is missing",
                       f"add '{kind}:' with one of " + ", ".join(table))
            elif not isinstance(u, str) or u not in table:
                ck.add(_vloc(units, kind), f"units: {kind} unit {u!r} is not known",
                       "use one of " + ", ".join(table))
            else:
                scale[kind] = table[u]
    ang = scale["angle"]

    base = data.get("base")
    if not isinstance(base, str) or not _NAME_RE.match(base):
        ck.add(_vloc(data, "base") if "base" in data else _loc(data),
               "robot: 'base' must name the base link", "add 'base: torso'")
        base = None

    # joints
    joints: list[dict] = []
    jmap = ck.mapping(data, "joints", "robot")
    if jmap is not None and not jmap:
        ck.add(_vloc(data, "joints"), "robot: 'joints' is empty", "add at least one joint")
    children: dict[str, str] = {}
    for jname, spec in (jmap or {}).items():
        where = f"joint {jname!r}"
        if not isinstance(jname, str) or not _NAME_RE.match(jname):
            ck.add(_kloc(jmap, jname), f"joint name {jname!r} is not a valid name",
                   "use letters, digits, '_' and '-', starting with a letter")
            continue
        if not isinstance(spec, dict):
            ck.add(_vloc(jmap, jname), f"{where} must be a mapping, got {_kind(spec)}",
                   "give parent, child, origin, axis and limits")
            continue
        ck.unknown_keys(spec, _JOINT_KEYS, where)
        j: dict[str, Any] = {"name": jname, "loc": _kloc(jmap, jname), "spec": spec}
        ok = True
        for key in ("parent", "child"):
            v = spec.get(key)
            if not isinstance(v, str) or not _NAME_RE.match(v):
                ck.add(_vloc(spec, key) if key in spec else _loc(spec),
                       f"{where}: '{key}' must name a link", f"add '{key}: <link name>'")
                ok = False
                v = None
            j[key] = v
        if ok:
            if j["child"] in children:
                ck.add(_vloc(spec, "child"),
                       f"{where}: link {j['child']!r} is already the child of joint "
                       f"{children[j['child']]!r}; a link has one parent joint",
                       "give each joint its own child link")
                ok = False
            elif j["child"] == base:
                ck.add(_vloc(spec, "child"), f"{where}: the base link {base!r} cannot be "
                       "a joint's child")
                ok = False
            else:
                children[j["child"]] = jname
        origin = spec.get("origin")
        if origin is None:
            xyz, rpy = np.zeros(3), np.zeros(3)
        elif not isinstance(origin, dict):
            ck.add(_vloc(spec, "origin"), f"{where}: 'origin' must be a mapping with xyz "
                   "and rpy", "write 'origin: {xyz: [0, 0, 0.1], rpy: [0, 0, 0]}'")
            ok = False
            xyz = rpy = None
        else:
            ck.unknown_keys(origin, _ORIGIN_KEYS, f"{where} origin")
            xyz = ck.vector(origin, "xyz", f"{where} origin", scale["length"], (0, 0, 0))
            rpy = ck.vector(origin, "rpy", f"{where} origin", ang, (0, 0, 0))
        axis = ck.vector(spec, "axis", where)
        if axis is not None and np.linalg.norm(axis) < 1e-9:
            ck.add(_vloc(spec, "axis"), f"{where}: 'axis' has zero length",
                   "give a direction such as [0, 0, 1]")
            axis = None
        limits = ck.mapping(spec, "limits", where)
        lim = {}
        if limits is not None:
            ck.unknown_keys(limits, _LIMIT_KEYS, f"{where} limits")
            lim["lower"] = ck.number(limits, "lower", f"{where} limits", ang)
            lim["upper"] = ck.number(limits, "upper", f"{where} limits", ang)
            lim["velocity"] = ck.number(limits, "velocity", f"{where} limits",
                                        scale["velocity"])
            lim["acceleration"] = ck.number(limits, "acceleration", f"{where} limits",
                                            scale["acceleration"])
            lo, up = lim["lower"], lim["upper"]
            if lo is not None and up is not None and not lo < up:
                ck.add(_vloc(limits, "upper"), f"{where}: upper limit {limits['upper']} is "
                       f"not above lower limit {limits['lower']}", "swap or correct them")
            for key in ("velocity", "acceleration"):
                if lim[key] is not None and lim[key] <= 0:
                    ck.add(_vloc(limits, key), f"{where}: {key} limit must be positive, "
                           f"got {limits[key]}")
                    lim[key] = None
        if (any(v is None for v in (xyz, rpy, axis)) or limits is None
                or any(v is None for v in lim.values())):
            ok = False
        j["mirror_name"] = spec.get("mirror")
        j["mirror_sign_given"] = spec.get("mirror_sign")
        if ok:
            a = axis / np.linalg.norm(axis)
            Ro = matrix_from_rpy(rpy)
            K = np.array([[0, -a[2], a[1]], [a[2], 0, -a[0]], [-a[1], a[0], 0]])
            j.update(axis=a, po=xyz, Ro=Ro, RoK=Ro @ K, RoK2=Ro @ K @ K, **lim)
            j.update(c_axis=_k.consts(a), c_po=_k.consts(xyz), c_Ro=_k.consts(Ro),
                     c_RoK=_k.consts(Ro @ K), c_RoK2=_k.consts(Ro @ K @ K))
            joints.append(j)
        else:
            j["bad"] = True
            joints.append(j)

    # tree: every parent must be reachable from the base
    if base is not None and jmap:
        reach = {base}
        changed = True
        while changed:
            changed = False
            for j in joints:
                if j.get("parent") in reach and j.get("child") and j["child"] not in reach:
                    reach.add(j["child"])
                    changed = True
        for j in joints:
            if j.get("parent") and j["parent"] not in reach and _NAME_RE.match(j["parent"]):
                known = sorted({base, *children})
                ck.add(_vloc(j["spec"], "parent"),
                       f"joint {j['name']!r}: parent link {j['parent']!r} is not connected "
                       f"to the base link {base!r}",
                       "name the base link or the child link of another joint "
                       "(links: " + ", ".join(known) + "); a loop of joints is not allowed")
    links = {base, *children} if base else set(children)

    # sites
    sites: dict[str, dict] = {}
    smap = ck.mapping(data, "sites", "robot")
    for sname, spec in (smap or {}).items():
        where = f"site {sname!r}"
        if not isinstance(sname, str) or not _NAME_RE.match(sname):
            ck.add(_kloc(smap, sname), f"site name {sname!r} is not a valid name")
            continue
        if not isinstance(spec, dict):
            ck.add(_vloc(smap, sname), f"{where} must be a mapping with link, xyz, rpy",
                   "write '{link: hand, xyz: [0, 0, -0.1], rpy: [0, 0, 0]}'")
            continue
        ck.unknown_keys(spec, _SITE_KEYS, where)
        link = spec.get("link")
        if not isinstance(link, str):
            ck.add(_vloc(spec, "link") if "link" in spec else _loc(spec),
                   f"{where}: 'link' must name a link", "add 'link: <link name>'")
            link = None
        elif link not in links:
            ck.add(_vloc(spec, "link"), f"{where}: link {link!r} does not exist",
                   "links: " + ", ".join(sorted(x for x in links if x)))
            link = None
        xyz = ck.vector(spec, "xyz", where, scale["length"], (0, 0, 0))
        rpy = ck.vector(spec, "rpy", where, ang, (0, 0, 0))
        if link is not None and xyz is not None and rpy is not None:
            Rs = matrix_from_rpy(rpy)
            sites[sname] = {"link": link, "p": xyz, "R": Rs, "c_p": _k.consts(xyz),
                            "c_R": _k.consts(Rs)}
    if smap is not None:
        missing = [s for s in REQUIRED_SITES if s not in smap]
        if missing:
            ck.add(_vloc(data, "sites"), "robot: sites " + ", ".join(map(repr, missing))
                   + " are missing", "every robot defines the body sites "
                   + ", ".join(REQUIRED_SITES) + " (sensors are paired by these names)")

    names = [j["name"] for j in joints]
    index = {n: i for i, n in enumerate(names)}

    # rest pose (omitted joints rest at 0)
    rest = np.zeros(len(joints))
    rmap = data.get("rest")
    if rmap is not None and not isinstance(rmap, dict):
        ck.add(_vloc(data, "rest"), "robot: 'rest' must map joint names to angles",
               "write 'rest: {left_elbow_flexion: 10}'")
        rmap = None
    for jn in rmap or {}:
        if jn not in index:
            ck.add(_kloc(rmap, jn), f"rest: unknown joint {jn!r}",
                   "joints: " + ", ".join(names))
            continue
        v = ck.number(rmap, jn, "rest", ang)
        if v is not None:
            rest[index[jn]] = v
    for i, j in enumerate(joints):
        if j.get("bad"):
            continue
        if not j["lower"] <= rest[i] <= j["upper"]:
            given = rmap is not None and j["name"] in rmap
            loc = _vloc(rmap, j["name"]) if given else _loc(data.get("rest")) or j["loc"]
            ck.add(loc, f"rest: joint {j['name']!r} rests at {rest[i] / ang:g} "
                   f"outside its limits [{j['lower'] / ang:g}, {j['upper'] / ang:g}]",
                   "choose a rest angle inside the limits" + ("" if given else
                                                              " (an omitted joint rests at 0)"))

    # mirroring
    mirror_index = np.arange(len(joints))
    mirror_sign = np.ones(len(joints))
    for i, j in enumerate(joints):
        mname = j["mirror_name"]
        spec = j["spec"]
        if mname is None:
            mname = _mirror_name(j["name"])
            if mname not in index:
                ck.add(j["loc"], f"joint {j['name']!r}: no mirror joint {mname!r}",
                       f"add joint {mname!r} or give 'mirror: <joint>' for this joint")
                continue
        elif not isinstance(mname, str) or mname not in index:
            ck.add(_vloc(spec, "mirror"), f"joint {j['name']!r}: mirror joint {mname!r} "
                   "does not exist", "joints: " + ", ".join(names))
            continue
        mirror_index[i] = index[mname]
        sgn = j["mirror_sign_given"]
        if sgn is not None:
            if isinstance(sgn, bool) or sgn not in (1, -1):
                ck.add(_vloc(spec, "mirror_sign"), f"joint {j['name']!r}: mirror_sign must "
                       f"be 1 or -1, got {sgn!r}")
                continue
            mirror_sign[i] = float(sgn)
    if not ck.problems:
        for i in range(len(joints)):
            if mirror_index[mirror_index[i]] != i:
                ck.add(joints[i]["loc"], f"joint {names[i]!r}: mirror joint "
                       f"{names[mirror_index[i]]!r} does not mirror back to it",
                       "mirroring pairs must be symmetric")
        if not ck.problems:
            _derive_mirror_signs(joints, base, mirror_index, mirror_sign, ck)

    if ck.problems:
        raise RobotError(ck.problems)
    for j in joints:
        for key in ("spec", "loc", "mirror_name", "mirror_sign_given"):
            j.pop(key, None)
    return Robot(name=name, description=description.strip(), base_link=base, joints=joints,
                 sites=sites, rest=rest, mirror_index=mirror_index, mirror_sign=mirror_sign,
                 source=source, text=text)


def _derive_mirror_signs(joints: list[dict], base: str, mirror_index: NDArray,
                         mirror_sign: NDArray, ck: _Checker) -> None:
    """Fill in mirror signs not given in the file, from the axes at the zero pose.

    Reflecting a rotation about axis ``a`` through the sagittal plane
    (``M = diag(1, -1, 1)``, det -1) gives ``M R(a, q) M = R(M a, -q)``. So a
    joint whose mirror partner has base-frame axis ``b`` at the zero pose
    mirrors with sign ``s = -b . (M a)``, which must be +-1: the partner's
    axis must be parallel to the reflected axis.
    """
    R = {base: np.eye(3)}
    pending = list(joints)
    while pending:
        nxt = [j for j in pending if j["parent"] in R]
        for j in nxt:
            R[j["child"]] = R[j["parent"]] @ j["Ro"]
        pending = [j for j in pending if j not in nxt]
    axes = [R[j["child"]] @ j["axis"] for j in joints]
    for i, j in enumerate(joints):
        m = int(mirror_index[i])
        s = -float(axes[m] @ (_MIRROR @ axes[i]))
        if j["mirror_sign_given"] is not None:
            continue
        if abs(abs(s) - 1.0) > 1e-6:
            ck.add(j["loc"], f"joint {j['name']!r}: its axis at the zero pose is not the "
                   f"mirror image of the axis of {joints[m]['name']!r}, so the mirror sign "
                   "cannot be derived", "give 'mirror_sign: 1' or 'mirror_sign: -1'")
            continue
        mirror_sign[i] = np.sign(s)
