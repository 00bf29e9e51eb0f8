"""Parsing and validation of robot descriptions (FORMAT.md section 1).

:func:`_build` turns the located YAML of a robot file into a
:class:`~echoreo.sim._robotmodel.Robot`: units converted to SI (m, rad,
rad/s, rad/s^2), the joint tree checked (one parent joint per link, every
parent reachable from the base), joint limits checked (upper above lower,
positive velocity and acceleration limits, the rest pose inside the limits),
the required body sites present, and the mirror pairing and signs completed
and checked. Every problem of the file is collected in one pass and raised
as one :class:`~echoreo.errors.RobotError`.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
from numpy.typing import NDArray

from echoreo.errors import RobotError
from echoreo.sim import _kinematics as _k
from echoreo.sim._robotcheck import _Checker, _kind, _kloc, _loc, _vloc
from echoreo.sim._robotmodel import Robot
from echoreo.sim.rotations import matrix_from_rpy
from echoreo.yamlload import Loc

__all__ = ["FORMAT", "REQUIRED_SITES"]

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
