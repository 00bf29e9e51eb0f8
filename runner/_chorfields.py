"""Field values of a choreography file: located problems, numbers, text, units, angles.

:class:`_FieldReader` holds the state of one pass over a choreography document
(format: ``choreographies/FORMAT.md``, section 2): the problems found so far,
each with the ``file:line:column`` of its key or value, whether any of them
prevents compiling, and the locations the limit checks report against. Its
methods read one field each (numbers, text, the angle unit, joint targets in
the file's unit converted to rad and checked against the joint ranges).
The constants here are the format's field names and limits. Used by
:mod:`echoreo.runner._chormoves`, :mod:`echoreo.runner._chorsequence` and
:mod:`echoreo.runner._chorparse`.
"""

from __future__ import annotations

import difflib
import math
from typing import Any

import numpy as np

from echoreo.errors import Problem
from echoreo.runner.choreography import Locs
from echoreo.yamlload import LDict, Loc

__all__ = ["FORMAT_TAG", "MAX_DURATION_S", "MAX_REPEAT", "SAME_POSTURE_RAD", "UNITS"]

#: Longest choreography accepted, s: a session plan runs several; split longer ones.
MAX_DURATION_S = 7200.0
#: Most repetitions of one step.
MAX_REPEAT = 1000
#: Postures closer than this (rad, every joint) count as the same posture.
SAME_POSTURE_RAD = 1e-6

UNITS: dict[str, float] = {"deg": math.pi / 180.0, "rad": 1.0}
#: The optional ``format`` field's one accepted value.
FORMAT_TAG = "echoreo-choreography/1"
TOP_KEYS = ("format", "name", "description", "robot", "unit", "tempo", "poses", "moves", "sequence")
MOVE_KEYS = ("description", "interpolation", "keyframes", "mirror_of")
KEYFRAME_KEYS = ("at", "pose", "joints", "unit")
STEP_KEYS = {
    "move": ("move", "repeat", "tempo", "cue", "count"),
    "rest": ("rest", "cue"),
    "hold": ("hold", "duration", "cue"),
}


def _closest(word: str, options, what: str) -> str:
    options = [str(o) for o in options]
    close = difflib.get_close_matches(str(word), options, n=1, cutoff=0.6)
    if close:
        return f"did you mean {close[0]!r}?"
    if not options:
        return f"define the {what} first"
    shown = ", ".join(options[:14]) + (", ..." if len(options) > 14 else "")
    return f"known {what}s: {shown}"


def _type_name(value: Any) -> str:
    if value is None:
        return "nothing (null)"
    if isinstance(value, bool):
        return f"a true/false value ({str(value).lower()})"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, str):
        return f"the text {value!r}"
    if isinstance(value, int | float):
        return f"the number {value!r}"
    return f"a value of type {type(value).__name__}"


class _FieldReader:
    """The state of one pass over a choreography document and its field readers."""

    def __init__(self, path: str, doc: Any, robot: Any, text: str):
        self.path = path
        self.doc = doc
        self.text = text
        self.robot = robot
        self.problems: list[Problem] = []
        self.limit_problem_joints: set[str] = set()
        self.structural = False  # a problem that prevents compiling
        self.locs = Locs()
        self.unit: float | None = None

    # helpers ------------------------------------------------------------------------------

    def add(self, loc: Loc, message: str, hint: str = "", *, structural: bool = True) -> None:
        self.problems.append(loc.problem(message, hint))
        if structural:
            self.structural = True

    def check_keys(self, mapping: LDict, allowed, what: str) -> None:
        for key in mapping:
            if key not in allowed:
                self.add(mapping.key_loc(key), f"unknown field {key!r} in {what}",
                         _closest(key, allowed, "field"))

    def number(self, mapping: LDict, key: str, what: str, *, required: bool = True,
               default: float | None = None, positive: bool = False,
               nonneg: bool = False) -> float | None:
        if key not in mapping:
            if required:
                self.add(mapping.loc, f"{what} is missing (field {key!r})",
                         f"add '{key}: <number>'")
            return default
        value = mapping[key]
        loc = mapping.value_loc(key)
        if isinstance(value, bool) or not isinstance(value, int | float):
            hint = "write a plain number such as 1.5"
            if isinstance(value, str) and "e" in value.lower():
                hint += " (YAML needs a decimal point in exponents: 1.0e+3, not 1e3)"
            self.add(loc, f"{what} must be a number, found {_type_name(value)}", hint)
            return default
        value = float(value)
        if not math.isfinite(value):
            self.add(loc, f"{what} must be a finite number, found {value}", "write a number")
            return default
        if positive and value <= 0:
            self.add(loc, f"{what} must be greater than 0, found {value:g}",
                     "write a positive number")
            return default
        if nonneg and value < 0:
            self.add(loc, f"{what} must not be negative, found {value:g}", "write 0 or more")
            return default
        return value

    def string(self, mapping: LDict, key: str, what: str, *, required: bool = True,
               default: str | None = None) -> str | None:
        if key not in mapping:
            if required:
                self.add(mapping.loc, f"{what} is missing (field {key!r})", f"add '{key}: ...'")
            return default
        value = mapping[key]
        if not isinstance(value, str) or not value.strip():
            self.add(mapping.value_loc(key), f"{what} must be text, found {_type_name(value)}",
                     "write it as text; quote it if it looks like a number or true/false")
            return default
        return value

    def unit_of(self, mapping: LDict, default: float | None) -> float | None:
        """The unit factor to rad; None when the unit is unknown (angles not range-checked)."""
        if "unit" not in mapping:
            return default
        value = mapping["unit"]
        if not isinstance(value, str) or value not in UNITS:
            self.add(mapping.value_loc("unit"),
                     f"unit must be 'deg' or 'rad', found {_type_name(value)}",
                     "write 'unit: deg' for degrees or 'unit: rad' for radians")
            return None
        return UNITS[value]

    def joint_targets(self, mapping: LDict, unit: float | None, what: str,
                      skip: tuple[str, ...] = ()) -> dict[str, float]:
        """Joint name -> rad from a mapping of joint targets."""
        out: dict[str, float] = {}
        robot = self.robot
        for key, value in mapping.items():
            if key in skip:
                continue
            kloc = mapping.key_loc(key)
            vloc = mapping.value_loc(key)
            if not isinstance(key, str):
                self.add(kloc, f"joint names are text, found {_type_name(key)} in {what}",
                         "write a joint name of the robot")
                continue
            if robot is not None and key not in robot.joint_names:
                self.add(kloc, f"unknown joint {key!r} in {what} (robot {robot.name!r})",
                         _closest(key, robot.joint_names, "joint"))
                continue
            if isinstance(value, bool) or not isinstance(value, int | float) \
                    or not math.isfinite(float(value)):
                self.add(vloc, f"the angle of {key} in {what} must be a number, "
                               f"found {_type_name(value)}",
                         "write the angle as a plain number in the file's unit")
                continue
            if unit is None:  # unknown unit, reported already: the angle means nothing yet
                self.structural = True
                continue
            rad = float(value) * unit
            out[key] = rad
            if robot is not None:
                j = robot.joint_index(key)
                lo, hi = float(robot.lower[j]), float(robot.upper[j])
                if rad < lo - 1e-12 or rad > hi + 1e-12:
                    self.add(vloc, f"{key} = {math.degrees(rad):.1f} deg in {what} is outside "
                                   f"its range {math.degrees(lo):.1f} .. {math.degrees(hi):.1f} "
                                   f"deg", "choose an angle inside the joint's range",
                             structural=False)
                    self.limit_problem_joints.add(key)
        return out

    def posture(self, targets: dict[str, float]) -> np.ndarray | None:
        if self.robot is None:
            return None
        q = np.array(self.robot.rest, dtype=float, copy=True)
        for name, value in targets.items():
            q[self.robot.joint_index(name)] = value
        return q
