"""Moves of a choreography file: keyframes, interpolation and mirrored moves.

:class:`_MoveReader` reads the ``moves:`` section (``choreographies/FORMAT.md``,
section 2): each move's interpolation, its keyframes (times in s from the
start of the move, starting at 0 and increasing; postures from a pose, joint
angles or both, in rad), and moves that mirror another one left<->right
through the robot's ``mirror_index`` and ``mirror_sign``, with chains of
mirrors resolved and cycles reported. Mixed into the parser of
:mod:`echoreo.runner._chorparse`.
"""

from __future__ import annotations

import math

import numpy as np

from echoreo.runner._chorfields import KEYFRAME_KEYS, MOVE_KEYS, _closest, _FieldReader, _type_name
from echoreo.runner.choreography import Move
from echoreo.runner.interpolate import INTERPOLATIONS
from echoreo.yamlload import LDict, LList, Loc

__all__: list[str] = []


class _MoveReader(_FieldReader):
    """Reads the ``moves:`` section into :class:`~echoreo.runner.choreography.Move` s."""

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
