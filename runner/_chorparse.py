"""The choreography file parser: one pass over the YAML, every problem collected.

Private to :mod:`echoreo.runner.choreography`; the format is documented in
``choreographies/FORMAT.md``, section 2. The parser checks structure, types,
names, units, keyframe times, joint ranges and the continuity of postures
between steps; the limit checks on the sampled trajectory are done by
:class:`~echoreo.runner.choreography.Choreography` after the parse.
"""

from __future__ import annotations

import difflib
import math
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from echoreo.errors import ChoreographyError, InputError, Problem
from echoreo.runner.choreography import Locs, Move, Step
from echoreo.runner.interpolate import INTERPOLATIONS
from echoreo.yamlload import LDict, LList, Loc, load_yaml

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


class _Parser:
    """One pass over a choreography document, collecting every problem."""

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

    # the document -------------------------------------------------------------------------

    def parse(self) -> dict[str, Any]:
        doc = self.doc
        if not isinstance(doc, LDict):
            loc = getattr(doc, "loc", Loc(self.path, 1, 1))
            self.add(loc, f"a choreography must be a mapping of fields, found {_type_name(doc)}",
                     "start with 'robot: <name>', 'unit: deg', 'poses:', 'moves:' and "
                     "'sequence:'; see choreographies/FORMAT.md")
            return {}
        self.check_keys(doc, TOP_KEYS, "the choreography")
        if "format" in doc and doc["format"] != FORMAT_TAG:
            self.add(doc.value_loc("format"),
                     f"format must be {FORMAT_TAG!r}, found {_type_name(doc['format'])}",
                     f"write 'format: {FORMAT_TAG}' or leave the field out")
        name = self.string(doc, "name", "the choreography's name", required=False,
                           default=Path(self.path).stem)
        description = self.string(doc, "description", "the description", required=False,
                                  default="")
        self.parse_robot(doc)
        if "unit" not in doc:
            self.add(doc.loc, "the angle unit is missing (field 'unit')",
                     "add 'unit: deg' or 'unit: rad'; it applies to every angle in the file")
        self.unit = self.unit_of(doc, None)
        tempo = self.number(doc, "tempo", "the global tempo", required=False, default=1.0,
                            positive=True)
        poses = self.parse_poses(doc)
        moves = self.parse_moves(doc, poses)
        steps = self.parse_sequence(doc, poses, moves, tempo)
        start = self.check_continuity(steps, poses, moves)
        return {"name": name, "description": description, "tempo": tempo, "poses": poses,
                "moves": moves, "steps": steps, "start": start}

    def parse_robot(self, doc: LDict) -> None:
        if "robot" not in doc:
            self.add(doc.loc, "the robot is missing (field 'robot')",
                     "add 'robot: torso-e1' (a shipped robot) or the path of a robot file")
            return
        value = doc["robot"]
        loc = doc.value_loc("robot")
        self.locs.robot = loc
        if not isinstance(value, str) or not value.strip():
            self.add(loc, f"robot must be a name or a path, found {_type_name(value)}",
                     "write 'robot: torso-e1' or a path such as 'robot: robots/mine.yaml'")
            if self.robot is None:
                self.structural = True
            return
        is_path = "/" in value or "\\" in value or value.endswith((".yaml", ".yml"))
        if self.robot is not None:
            if not is_path and value != self.robot.name:
                self.add(loc, f"this choreography is written for robot {value!r}, but robot "
                              f"{self.robot.name!r} was given",
                         "use the robot the file names, or change 'robot:' in the file")
            return
        from echoreo.sim import load_robot

        target = str(Path(self.path).parent / value) if is_path else value
        try:
            self.robot = load_robot(target)
        except InputError as exc:
            first = exc.problems[0]
            self.add(loc, f"robot {value!r} cannot be loaded: {first.message}",
                     first.hint or ("give a shipped robot's name (such as torso-e1) or a path "
                                    "relative to this file"))
            own = [p for p in exc.problems if p.file and p.file != self.path and p.line]
            self.problems.extend(own)
        except (OSError, ValueError, KeyError) as exc:
            self.add(loc, f"robot {value!r} cannot be loaded: {exc}",
                     "give a shipped robot's name (such as torso-e1) or a path relative to "
                     "this file")

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

    def parse_poses(self, doc: LDict) -> dict[str, np.ndarray | None]:
        poses: dict[str, np.ndarray | None] = {}
        if "poses" not in doc:
            return poses
        section = doc["poses"]
        if section is None:
            return poses
        if not isinstance(section, LDict):
            self.add(doc.value_loc("poses"),
                     f"poses must be a mapping of pose names to joint angles, found "
                     f"{_type_name(section)}", "write 'poses:' then '  name: {joint: angle}'")
            return poses
        for pname, body in section.items():
            kloc = section.key_loc(pname)
            if not isinstance(pname, str):
                self.add(kloc, f"pose names are text, found {_type_name(pname)}",
                         "quote the name")
                continue
            if body is None:
                body_map: dict = {}
            elif isinstance(body, LDict):
                body_map = body
            else:
                self.add(section.value_loc(pname),
                         f"pose {pname!r} must be a mapping of joint angles, found "
                         f"{_type_name(body)}", "write e.g. '{right_elbow_flexion: 45}', or {} "
                         "for the robot's rest pose")
                poses[pname] = None
                continue
            unit = self.unit_of(body_map, self.unit) if body_map else self.unit
            targets = (self.joint_targets(body_map, unit, f"pose {pname!r}", skip=("unit",))
                       if body_map else {})
            if isinstance(body_map, LDict):
                for joint in targets:
                    self.locs.pose_joint[(pname, joint)] = body_map.value_loc(joint)
            poses[pname] = self.posture(targets)
        return poses

    def parse_moves(self, doc: LDict, poses: dict) -> dict[str, Move | None]:
        moves: dict[str, Move | None] = {}
        if "moves" not in doc:
            return moves
        section = doc["moves"]
        if not isinstance(section, LDict):
            self.add(doc.value_loc("moves"),
                     f"moves must be a mapping of move names to moves, found "
                     f"{_type_name(section)}",
                     "write 'moves:' then '  name: {interpolation: ..., keyframes: [...]}'")
            return moves
        mirrors: dict[str, tuple[str, Loc, str | None]] = {}
        for mname, body in section.items():
            kloc = section.key_loc(mname)
            if not isinstance(mname, str):
                self.add(kloc, f"move names are text, found {_type_name(mname)}",
                         "quote the name")
                continue
            if not isinstance(body, LDict):
                self.add(section.value_loc(mname),
                         f"move {mname!r} must be a mapping, found {_type_name(body)}",
                         "give it 'interpolation:' and 'keyframes:', or 'mirror_of:'")
                moves[mname] = None
                continue
            self.check_keys(body, MOVE_KEYS, f"move {mname!r}")
            description = self.string(body, "description", "the description", required=False,
                                      default="")
            interp = None
            if "interpolation" in body:
                interp = body["interpolation"]
                if not isinstance(interp, str) or interp not in INTERPOLATIONS:
                    shown = repr(interp) if isinstance(interp, str) else _type_name(interp)
                    self.add(body.value_loc("interpolation"),
                             f"unknown interpolation {shown} in move {mname!r}",
                             "use one of: " + ", ".join(INTERPOLATIONS))
                    interp = None
            if "mirror_of" in body:
                if "keyframes" in body:
                    self.add(body.key_loc("keyframes"),
                             f"move {mname!r} has both 'mirror_of' and 'keyframes'",
                             "a mirrored move takes its keyframes from the other move: "
                             "remove one of the two")
                src = self.string(body, "mirror_of", f"the move {mname!r} mirrors")
                if src is not None:
                    mirrors[mname] = (src, body.value_loc("mirror_of"), interp)
                    self.locs.mirror[mname] = body.value_loc("mirror_of")
                moves[mname] = None
                continue
            interp = interp or "minimum-jerk"
            moves[mname] = self.parse_keyframes(mname, body, interp, poses, description)
        # mirrors, after every plain move is known (a mirror of a mirror is resolved too)
        resolved: set[str] = set()
        for mname in mirrors:
            if mname in resolved:
                continue
            chain = [mname]
            src = mirrors[mname][0]
            ok = True
            while src in mirrors and src not in resolved:
                if src in chain:
                    self.add(mirrors[mname][1],
                             f"move {mname!r} mirrors itself through " + " -> ".join(
                                 [*chain, src]),
                             "let one of these moves have keyframes of its own")
                    resolved.update(chain)
                    ok = False
                    break
                chain.append(src)
                src = mirrors[src][0]
            if not ok:
                continue
            for name in reversed(chain):
                src_name, loc, interp = mirrors[name]
                if src_name not in section:
                    self.add(loc, f"move {name!r} mirrors {src_name!r}, which is not defined",
                             _closest(src_name, [m for m in section if m != name], "move"))
                    resolved.update(chain)
                    break
                source = moves.get(src_name)
                resolved.add(name)
                if source is None or self.robot is None:
                    continue  # the source has problems of its own
                moves[name] = self.mirror(name, source, loc, interp)
        return moves

    def mirror(self, name: str, source: Move, loc: Loc, interp: str | None) -> Move | None:
        robot = self.robot
        index = np.asarray(robot.mirror_index)
        sign = np.asarray(robot.mirror_sign, dtype=float)
        knots = source.knots[:, index] * sign[None, :]
        lo, hi = np.asarray(robot.lower), np.asarray(robot.upper)
        bad = (knots < lo - 1e-12) | (knots > hi + 1e-12)
        for k, j in zip(*np.nonzero(bad), strict=True):
            joint = robot.joint_names[j]
            self.add(loc, f"mirrored keyframe {k + 1} of {source.name!r} puts {joint} at "
                          f"{math.degrees(knots[k, j]):.1f} deg, outside its range "
                          f"{math.degrees(lo[j]):.1f} .. {math.degrees(hi[j]):.1f} deg",
                     f"change keyframe {k + 1} of move {source.name!r} so that its mirror "
                     f"image fits the other side's range", structural=False)
            self.limit_problem_joints.add(joint)
        return Move(name=name, interpolation=interp or source.interpolation,
                    times=source.times, knots=knots, mirror_of=source.name,
                    description=source.description)

    def parse_keyframes(self, mname: str, body: LDict, interp: str, poses: dict,
                        description: str) -> Move | None:
        if "keyframes" not in body:
            self.add(body.loc, f"move {mname!r} has no keyframes",
                     "add 'keyframes:' with at least two entries, or 'mirror_of: <move>'")
            return None
        frames = body["keyframes"]
        if not isinstance(frames, LList) or len(frames) < 2:
            found = (f"{len(frames)} keyframe(s)" if isinstance(frames, list)
                     else _type_name(frames))
            self.add(body.value_loc("keyframes"),
                     f"the keyframes of move {mname!r} must be a list of at least two "
                     f"keyframes, found {found}",
                     "write '- {at: 0, pose: start}' and '- {at: 1.5, pose: end}'")
            return None
        self.locs.keyframes[mname] = [frames.item_loc(i) for i in range(len(frames))]
        times: list[float | None] = []
        knots: list[np.ndarray | None] = []
        ok = True
        prev_t: float | None = None
        prev_line: int | None = None
        for i, frame in enumerate(frames):
            what = f"keyframe {i + 1} of move {mname!r}"
            if not isinstance(frame, LDict):
                self.add(frames.item_loc(i), f"{what} must be a mapping, found "
                                             f"{_type_name(frame)}",
                         "write '- {at: <seconds>, pose: <pose name>}'")
                ok = False
                continue
            self.check_keys(frame, KEYFRAME_KEYS, what)
            at = self.number(frame, "at", f"the time of {what}", nonneg=True)
            if at is not None:
                if i == 0 and at != 0:
                    self.add(frame.value_loc("at"),
                             f"the first keyframe of move {mname!r} is at {at:g} s",
                             "start every move at 'at: 0' (hold a pose with a hold step "
                             "instead of delaying the first keyframe)")
                if prev_t is not None and at <= prev_t:
                    self.add(frame.value_loc("at"),
                             f"{what} is at {at:g} s, not after the previous keyframe "
                             f"({prev_t:g} s, line {prev_line})",
                             "keyframe times are seconds from the start of the move and must "
                             "increase from one keyframe to the next")
                    at = None
                else:
                    prev_t, prev_line = at, frame.value_loc("at").line
            times.append(at)
            if at is None:
                ok = False
            unit = self.unit_of(frame, self.unit)
            targets: dict[str, float] = {}
            base = None
            has_pose = "pose" in frame
            if has_pose:
                pname = frame["pose"]
                if not isinstance(pname, str):
                    self.add(frame.value_loc("pose"),
                             f"the pose of {what} must be a pose name, found "
                             f"{_type_name(pname)}",
                             "write the name of a pose from 'poses:', or give 'joints:'")
                    ok = False
                elif pname not in poses:
                    self.add(frame.value_loc("pose"), f"unknown pose {pname!r} in {what}",
                             _closest(pname, poses, "pose"))
                    ok = False
                else:
                    base = poses[pname]
                    if base is None and self.robot is not None:
                        ok = False
            if unit is None:
                ok = False
            if "joints" in frame:
                joints = frame["joints"]
                if not isinstance(joints, LDict):
                    self.add(frame.value_loc("joints"),
                             f"the joints of {what} must be a mapping of joint angles, found "
                             f"{_type_name(joints)}", "write 'joints: {right_elbow_flexion: 30}'")
                    ok = False
                else:
                    targets = self.joint_targets(joints, unit, what)
            elif not has_pose:
                self.add(frame.loc, f"{what} has neither 'pose' nor 'joints'",
                         "add 'pose: <pose name>' or 'joints: {joint: angle}' (or both: the "
                         "joints then change the pose)")
                ok = False
            if self.robot is None:
                knots.append(None)
                continue
            q = np.array(base if base is not None else self.robot.rest, dtype=float, copy=True)
            for joint, value in targets.items():
                q[self.robot.joint_index(joint)] = value
            knots.append(q)
        if not ok or self.robot is None:
            return None
        return Move(name=mname, interpolation=interp, times=np.array(times, dtype=float),
                    knots=np.array(knots, dtype=float), description=description)

    def parse_sequence(self, doc: LDict, poses: dict, moves: dict,
                       tempo: float | None) -> list[Step | None]:
        steps: list[Step | None] = []
        if "sequence" not in doc:
            self.add(doc.loc, "the sequence is missing (field 'sequence')",
                     "add 'sequence:' with a list of steps such as '- move: <name>'")
            return steps
        seq = doc["sequence"]
        if not isinstance(seq, LList) or not seq:
            self.add(doc.value_loc("sequence"),
                     f"the sequence must be a non-empty list of steps, found {_type_name(seq)}",
                     "write '- move: <name>', '- rest: <seconds>' or '- hold: <pose>' items")
            return steps
        self.locs.steps = [seq.item_loc(i) for i in range(len(seq))]
        total = 0.0
        for i, item in enumerate(seq):
            what = f"step {i + 1}"
            loc = seq.item_loc(i)
            if not isinstance(item, LDict):
                self.add(loc, f"{what} must be a mapping, found {_type_name(item)}",
                         "write '- move: <name>', '- rest: <seconds>' or '- hold: <pose>'")
                steps.append(None)
                continue
            kinds = [k for k in STEP_KEYS if k in item]
            if len(kinds) != 1:
                self.add(loc, f"{what} must have exactly one of 'move', 'rest' or 'hold', "
                              f"found {', '.join(kinds) if kinds else 'none'}",
                         "split it into one step per action")
                steps.append(None)
                continue
            kind = kinds[0]
            self.check_keys(item, STEP_KEYS[kind], f"{what} ({kind})")
            cue = self.string(item, "cue", f"the cue of {what}", required=False, default="")
            step: Step | None = None
            if kind == "move":
                mname = self.string(item, "move", f"the move of {what}")
                repeat = 1
                if "repeat" in item:
                    r = item["repeat"]
                    if isinstance(r, bool) or not isinstance(r, int) or not 1 <= r <= MAX_REPEAT:
                        self.add(item.value_loc("repeat"),
                                 f"repeat must be a whole number from 1 to {MAX_REPEAT}, found "
                                 f"{_type_name(r)}", "write e.g. 'repeat: 4'")
                        r = None
                    repeat = r
                step_tempo = self.number(item, "tempo", f"the tempo of {what}", required=False,
                                         default=1.0, positive=True)
                count = item.get("count", False)
                if not isinstance(count, bool):
                    self.add(item.value_loc("count"),
                             f"count must be true or false, found {_type_name(count)}",
                             "write 'count: true' to cue every repetition")
                    count = False
                move = None
                if mname is not None:
                    if mname not in moves:
                        self.add(item.value_loc("move"), f"unknown move {mname!r} in {what}",
                                 _closest(mname, moves, "move"))
                    else:
                        move = moves[mname]
                if move is not None and repeat is not None and step_tempo is not None \
                        and tempo is not None:
                    eff = tempo * step_tempo
                    step = Step(index=i + 1, kind="move", name=mname, repeat=repeat, tempo=eff,
                                duration=move.duration / eff, cue=cue or "", count=count)
            elif kind == "rest":
                duration = self.number(item, "rest", f"the duration of the rest in {what}",
                                       positive=True)
                if duration is not None:
                    step = Step(index=i + 1, kind="rest", duration=duration, cue=cue or "")
            else:
                pname = self.string(item, "hold", f"the pose held in {what}")
                duration = self.number(item, "duration", f"the duration of the hold in {what}",
                                       positive=True)
                if pname is not None and pname not in poses:
                    self.add(item.value_loc("hold"), f"unknown pose {pname!r} in {what}",
                             _closest(pname, poses, "pose"))
                elif pname is not None and duration is not None and poses[pname] is not None:
                    step = Step(index=i + 1, kind="hold", name=pname, duration=duration,
                                cue=cue or "")
            if step is None:
                self.structural = True
            else:
                total += step.total_duration
            steps.append(step)
        if total > MAX_DURATION_S:
            self.add(doc.value_loc("sequence"),
                     f"the sequence lasts {total:.0f} s, more than {MAX_DURATION_S:.0f} s",
                     "split it into several choreographies and list them in a session plan")
        return steps

    def check_continuity(self, steps: list[Step | None], poses: dict,
                         moves: dict) -> np.ndarray | None:
        """Every step must start where the previous one ended."""
        if self.robot is None or self.structural:
            return None
        names = self.robot.joint_names

        def differs(a: np.ndarray, b: np.ndarray) -> str:
            d = np.abs(a - b)
            j = int(np.argmax(d))
            if d[j] <= SAME_POSTURE_RAD:
                return ""
            return (f"{names[j]} is at {math.degrees(b[j]):.1f} deg, not "
                    f"{math.degrees(a[j]):.1f} deg")

        current: np.ndarray | None = None
        previous = "the start"
        start: np.ndarray | None = None
        for step, loc in zip(steps, self.locs.steps, strict=True):
            if step is None:
                continue
            if step.kind == "move":
                move = moves[step.name]
                first, last = move.knots[0], move.knots[-1]
                if step.repeat > 1:
                    diff = differs(last, first)
                    if diff:
                        self.add(loc, f"move {step.name!r} ends in another posture than it "
                                      f"starts, so it cannot repeat ({diff} at its start)",
                                 "make its last keyframe the same pose as its first, or use "
                                 "'repeat: 1' and add a move back")
                if current is not None:
                    diff = differs(current, first)
                    if diff:
                        self.add(loc, f"step {step.index} (move {step.name!r}) does not start "
                                      f"where {previous} ends: {diff}",
                                 f"start move {step.name!r} at the pose {previous} ends in, or "
                                 f"insert a move between the two")
                else:
                    start = first
                current = last
                previous = f"step {step.index} (move {step.name!r})"
            elif step.kind == "hold":
                pose = poses[step.name]
                if current is not None:
                    diff = differs(current, pose)
                    if diff:
                        self.add(loc, f"step {step.index} holds pose {step.name!r}, but "
                                      f"{previous} ends elsewhere: {diff}",
                                 f"end the previous move at pose {step.name!r}, or hold the "
                                 f"pose it ends in")
                else:
                    start = pose
                current = pose
                previous = f"step {step.index} (hold {step.name!r})"
        if start is None:
            start = np.array(self.robot.rest, dtype=float, copy=True)
        return start


def _locate_reader_error(exc: InputError, name: str) -> list[Problem]:
    """Give a line and column to problems PyYAML and the decoder report by position only:
    characters YAML does not allow, and bytes that are not UTF-8."""
    cause = exc.__cause__
    if exc.problems[0].line is not None:
        return exc.problems
    try:
        raw = Path(name).read_bytes()
    except OSError:
        return exc.problems
    if isinstance(cause, UnicodeDecodeError):
        before = raw[: cause.start]
        line = before.count(b"\n") + 1
        column = cause.start - (before.rfind(b"\n") + 1) + 1
        return [Problem(f"choreography is not UTF-8 text (byte 0x{raw[cause.start]:02x} at "
                        f"byte {cause.start})", name, line, column, "save the file as UTF-8")]
    if isinstance(cause, yaml.reader.ReaderError):
        text = raw.decode("utf-8", errors="replace")
        before = text[: cause.position]
        line = before.count("\n") + 1
        column = cause.position - (before.rfind("\n") + 1) + 1
        char = cause.character
        shown = f"#x{ord(char):04x}" if isinstance(char, str) else repr(char)
        return [Problem(f"not valid YAML: the character {shown} is not allowed in YAML text",
                        name, line, column, "delete it or replace it with a printable character")]
    return exc.problems


def parse_file(path: str | Path, robot: Any = None) -> tuple[dict[str, Any], _Parser]:
    """Read and parse a choreography file.

    Returns
    -------
    parsed : dict
        ``name``, ``description``, ``tempo``, ``poses``, ``moves``, ``steps``, ``start``.
    parser : _Parser
        With ``problems`` (only non-structural ones remain: angles beyond a
        joint's range), ``robot``, ``locs`` and ``limit_problem_joints``.

    Raises
    ------
    ChoreographyError
        The file cannot be read or parsed, or has structural problems.
    """
    name = str(path)
    try:
        doc = load_yaml(path, what="choreography")
    except InputError as exc:
        raise ChoreographyError(_locate_reader_error(exc, name)) from exc
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:  # vanished between the two reads
        raise ChoreographyError(Problem(f"cannot read choreography: {exc}", name)) from exc
    parser = _Parser(name, doc, robot, text)
    parsed = parser.parse()
    parser.problems.sort(key=lambda p: (p.file != name, p.line or 0, p.column or 0))
    if parser.structural or parser.robot is None:
        raise ChoreographyError(parser.problems)
    return parsed, parser
