"""The sequence of a choreography file: its steps and the continuity between them.

:class:`_SequenceReader` reads the ``sequence:`` section
(``choreographies/FORMAT.md``, section 2) into
:class:`~echoreo.runner.choreography.Step` s (moves with repeat count and
tempo, rests and holds, durations in s), checks the total duration against
:data:`~echoreo.runner._chorfields.MAX_DURATION_S`, and checks that every
step starts in the posture the previous one ends in (within
:data:`~echoreo.runner._chorfields.SAME_POSTURE_RAD` rad on every joint).
Mixed into the parser of :mod:`echoreo.runner._chorparse`.
"""

from __future__ import annotations

import math

import numpy as np

from echoreo.runner._chorfields import (
    MAX_DURATION_S,
    MAX_REPEAT,
    SAME_POSTURE_RAD,
    STEP_KEYS,
    _closest,
    _FieldReader,
    _type_name,
)
from echoreo.runner.choreography import Step
from echoreo.yamlload import LDict, LList

__all__: list[str] = []


class _SequenceReader(_FieldReader):
    """Reads the ``sequence:`` section into steps and checks that they join up."""

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
