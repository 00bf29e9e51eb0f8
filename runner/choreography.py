"""Choreographies: load, validate and compile a robot's timed demonstration.

A choreography file (format in ``choreographies/FORMAT.md``, section 2) names
its robot, defines poses and moves, and lists the sequence of steps the robot
performs. :func:`load_choreography` reads and validates the whole file in one
pass, including the robot's position, velocity and acceleration limits on the
trajectory sampled at the default command rate, and raises one
:class:`~echoreo.errors.ChoreographyError` listing every problem with its
``file:line:column`` and a fix. :meth:`Choreography.compile` samples the
trajectory at any command rate into a :class:`~echoreo.runner.timeline.Timeline`
and checks it again at that rate.
"""

from __future__ import annotations

import difflib
import math
import numbers
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import yaml

from echoreo.errors import ChoreographyError, InputError, Problem
from echoreo.runner.interpolate import INTERPOLATIONS, evaluate
from echoreo.runner.ramps import ramp
from echoreo.runner.timeline import LIMIT_RTOL, SPAN_COLUMNS, Timeline, limit_usage
from echoreo.yamlload import LDict, LList, Loc, load_yaml

__all__ = ["Choreography", "Move", "Step", "load_choreography"]

#: Default command rate, Hz (the contract default of :meth:`Choreography.compile`).
DEFAULT_RATE_HZ = 50.0
#: Longest choreography accepted, s: a session plan runs several; split longer ones.
MAX_DURATION_S = 7200.0
#: Most repetitions of one step.
MAX_REPEAT = 1000
#: Most samples one compile may produce (memory guard: about 1 GB at 24 joints).
MAX_SAMPLES = 5_000_000
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


@dataclass(frozen=True)
class Move:
    """One move: keyframes and how to interpolate between them.

    Parameters
    ----------
    name : str
    interpolation : {"linear", "cubic", "minimum-jerk"}
    times : ndarray, shape (k,), s
        Keyframe times from the start of the move, ``times[0] == 0``, increasing.
    knots : ndarray, shape (k, n_joints), rad
        Keyframe postures (full postures: joints a keyframe does not name are
        at the robot's rest angle).
    mirror_of : str or None
        The move this one mirrors left<->right, if any.
    description : str
    """

    name: str
    interpolation: str
    times: np.ndarray
    knots: np.ndarray
    mirror_of: str | None = None
    description: str = ""

    @property
    def duration(self) -> float:
        """Time of the last keyframe, s (at tempo 1)."""
        return float(self.times[-1])

    def evaluate(self, t: np.ndarray, deriv: int = 0) -> np.ndarray:
        """Posture (or its derivative) at move-local times ``t (m,)`` s; see
        :func:`echoreo.runner.interpolate.evaluate` for the formulas."""
        return evaluate(self.interpolation, self.times, self.knots, t, deriv)


@dataclass(frozen=True)
class Step:
    """One step of the sequence.

    Parameters
    ----------
    index : int
        1-based position in the sequence.
    kind : {"move", "rest", "hold"}
    name : str
        The move's name (``move``), the pose's name (``hold``) or ``""`` (``rest``).
    repeat : int
        Repetitions (1 for rests and holds).
    tempo : float
        Effective tempo factor (the file's global tempo times the step's own);
        a move's keyframe times are divided by it. 1 for rests and holds.
    duration : float
        Duration of one repetition (``move``) or of the rest or hold, s.
    cue : str
        Text shown to operator and participant when the step starts.
    count : bool
        Whether every repetition also gets a cue ``"i of n"``.
    """

    index: int
    kind: str
    name: str = ""
    repeat: int = 1
    tempo: float = 1.0
    duration: float = 0.0
    cue: str = ""
    count: bool = False

    @property
    def total_duration(self) -> float:
        """``repeat * duration``, s."""
        return self.repeat * self.duration


@dataclass
class _Locs:
    """Where things were written, for locating limit problems."""

    robot: Loc | None = None
    keyframes: dict[str, list[Loc]] = field(default_factory=dict)
    mirror: dict[str, Loc] = field(default_factory=dict)
    steps: list[Loc] = field(default_factory=list)
    pose_joint: dict[tuple[str, str], Loc] = field(default_factory=dict)


class Choreography:
    """A validated choreography, ready to compile.

    Use :func:`load_choreography` to make one. Attributes are read-only by
    convention.

    Attributes
    ----------
    name : str
    description : str
    source : str
        The path it was read from.
    text : str
        The YAML text (stored in session files as a snapshot).
    robot : Robot
        The robot it was validated for.
    tempo : float
        Global tempo factor.
    poses : dict of str to ndarray, shape (n_joints,), rad
        Full postures (rest angles where the file names no value).
    moves : dict of str to Move
    steps : tuple of Step
    start_posture : ndarray, shape (n_joints,), rad
        Where the timeline starts; the session ramps there from the robot's pose.
    """

    def __init__(self, *, name: str, description: str, source: str, text: str, robot: Any,
                 tempo: float, poses: dict[str, np.ndarray], moves: dict[str, Move],
                 steps: tuple[Step, ...], start_posture: np.ndarray, locs: _Locs):
        self.name = name
        self.description = description
        self.source = source
        self.text = text
        self.robot = robot
        self.tempo = tempo
        self.poses = poses
        self.moves = moves
        self.steps = steps
        self.start_posture = start_posture
        self._locs = locs
        self._cache: dict[float, Timeline] = {}

    def __repr__(self) -> str:
        return (f"Choreography({self.name!r}, robot={self.robot.name!r}, "
                f"{len(self.steps)} steps, {self.duration:.2f} s)")

    @property
    def duration(self) -> float:
        """Sum of all step durations, s."""
        return float(sum(s.total_duration for s in self.steps))

    @property
    def n_repetitions(self) -> int:
        """Total number of move repetitions."""
        return sum(s.repeat for s in self.steps if s.kind == "move")

    # -- compiling -------------------------------------------------------------------------

    def _sample(self, rate_hz: float) -> tuple[Timeline, np.ndarray]:
        """Sample the sequence; also return the span index of every sample."""
        rows: list[tuple] = []
        cues: list[tuple[float, str]] = []
        t0 = 0.0
        for step in self.steps:
            if step.cue:
                cues.append((t0, step.cue))
            for rep in range(1, step.repeat + 1):
                t1 = t0 + step.duration
                if step.kind == "move":
                    rows.append((step.index, step.name, rep, "move", t0, t1))
                    if step.count:
                        text = f"{rep} of {step.repeat}"
                        if rep == 1 and step.cue:
                            cues[-1] = (t0, f"{step.cue} — {text}")
                        else:
                            cues.append((t0, text))
                else:
                    rows.append((step.index, step.name, 0, step.kind, t0, t1))
                t0 = t1
        total = t0
        n_samples = math.ceil(total * rate_hz - 1e-9) + 1
        if n_samples > MAX_SAMPLES:
            raise ChoreographyError(Problem(
                f"{total:.1f} s at {rate_hz:g} Hz would be {n_samples} samples, "
                f"more than {MAX_SAMPLES}", self.source,
                hint="use a lower command rate or split the choreography"))
        t = np.arange(n_samples) / rate_hz
        q = np.empty((n_samples, len(self.robot.joint_names)))
        span_of = np.zeros(n_samples, dtype=np.int64)
        steps = {s.index: s for s in self.steps}
        posture = self.start_posture
        starts = np.array([r[4] for r in rows])
        idx = np.clip(np.searchsorted(starts, t, side="right") - 1, 0, len(rows) - 1)
        for i, (step_index, name, _rep, kind, a, _b) in enumerate(rows):
            mask = idx == i
            span_of[mask] = i
            if kind == "move":
                move = self.moves[name]
                local = (t[mask] - a) * steps[step_index].tempo
                q[mask] = move.evaluate(local)
                posture = move.knots[-1]
            else:
                q[mask] = posture
        spans = pd.DataFrame(rows, columns=list(SPAN_COLUMNS))
        spans = spans.astype({"step": "int64", "repetition": "int64", "t_start": "float64",
                              "t_end": "float64"})
        cue_frame = pd.DataFrame(cues, columns=["t", "text"]).astype({"t": "float64"})
        timeline = Timeline(t=t, q=q, joint_names=tuple(self.robot.joint_names),
                            rate_hz=float(rate_hz), robot_name=str(self.robot.name),
                            name=self.name, spans=spans, cues=cue_frame)
        return timeline, span_of

    def compile(self, rate_hz: float = DEFAULT_RATE_HZ) -> Timeline:
        """Sample the choreography at the command rate and check it against the limits.

        Each move repetition of a step with effective tempo :math:`f` that
        starts at :math:`t_0` commands :math:`q(t) = m((t - t_0) f)`, with
        :math:`m` the move's interpolant (:func:`~echoreo.runner.interpolate.evaluate`);
        rests and holds command the posture the previous step ended at. Samples
        are at :math:`t_i = i / f_s` up to the first sample at or after the end.
        Position limits, and velocity and acceleration by finite differences
        of the samples (:func:`~echoreo.runner.timeline.limit_usage`), are
        checked at this rate, as are the limits of the ramp from the robot's
        rest pose to the first posture (:func:`~echoreo.runner.ramps.ramp`).

        Parameters
        ----------
        rate_hz : float
            Command rate, Hz, > 0.

        Returns
        -------
        Timeline

        Raises
        ------
        ChoreographyError
            Any limit exceeded at this rate, each problem located in the file.
        """
        if isinstance(rate_hz, bool) or not isinstance(rate_hz, numbers.Real) \
                or not math.isfinite(rate_hz) or not 0 < rate_hz <= 10_000:
            raise ChoreographyError(Problem(
                f"command rate must be a number of Hz in (0, 10000], not {rate_hz!r}",
                hint="50 Hz is usual for servo-driven robots"))
        rate = float(rate_hz)
        if rate in self._cache:
            return self._cache[rate]
        timeline, span_of = self._sample(rate)
        problems = self._limit_problems(timeline, span_of)
        if problems:
            raise ChoreographyError(problems)
        self._cache[rate] = timeline
        return timeline

    # -- limit checks ------------------------------------------------------------------------

    def _limit_problems(self, timeline: Timeline, span_of: np.ndarray,
                        skip_position: set[str] | None = None) -> list[Problem]:
        robot = self.robot
        rate = timeline.rate_hz
        usage = limit_usage(timeline.q, rate, robot.lower, robot.upper, robot.max_velocity,
                            robot.max_acceleration)
        problems: list[Problem] = []
        spans = timeline.spans
        names = list(robot.joint_names)
        skip_position = skip_position or set()
        steps = {s.index: s for s in self.steps}
        first_loc = self._locs.steps[0] if self._locs.steps else Loc(self.source, None, None)

        # ramp from the robot's rest pose to the first posture
        try:
            _, q_ramp = ramp(robot, robot.rest, self.start_posture, rate)
        except ChoreographyError:
            q_ramp = None  # the first posture is out of range: reported below
        if q_ramp is not None and len(q_ramp) > 1:
            ramp_use = limit_usage(q_ramp, rate, robot.lower, robot.upper, robot.max_velocity,
                                   robot.max_acceleration)
            for kind in ("velocity", "acceleration"):
                worst = ramp_use[kind].max(axis=0)
                j = int(np.argmax(worst))
                if worst[j] > 1 + LIMIT_RTOL:
                    problems.append(first_loc.problem(
                        f"the ramp from the robot's rest pose to the first posture needs "
                        f"{100 * worst[j]:.0f} % of the {kind} limit of {names[j]}",
                        "check the robot's limits; the ramp is meant to use a quarter of them"))

        sample_t = {"below": timeline.t, "above": timeline.t,
                    "velocity": timeline.t[:-1], "acceleration": timeline.t}
        sample_span = {"below": span_of, "above": span_of, "velocity": span_of[:-1],
                       "acceleration": span_of}
        for kind in ("below", "above", "velocity", "acceleration"):
            values = usage[kind]
            if values.size == 0:
                continue
            if kind in ("below", "above"):
                bad = values > 1e-9
            else:
                bad = values > 1 + LIMIT_RTOL
            if not bad.any():
                continue
            for j in np.flatnonzero(bad.any(axis=0)):
                joint = names[j]
                if kind in ("below", "above") and joint in skip_position:
                    continue
                rows = np.flatnonzero(bad[:, j])
                # one problem per step for this joint and quantity, at its worst sample
                span_steps = spans["step"].to_numpy()[sample_span[kind][rows]]
                for step_index in np.unique(span_steps):
                    in_step = rows[span_steps == step_index]
                    i = int(in_step[np.argmax(values[in_step, j])])
                    problems.append(self._limit_problem(
                        kind, j, float(values[i, j]), float(sample_t[kind][i]),
                        int(sample_span[kind][i]), spans, steps, rate, timeline))
        problems.sort(key=lambda p: (p.line or 0, p.column or 0))
        return problems

    def _limit_problem(self, kind: str, j: int, value: float, t: float, span_index: int,
                       spans: pd.DataFrame, steps: dict[int, Step], rate: float,
                       timeline: Timeline) -> Problem:
        robot = self.robot
        joint = robot.joint_names[j]
        span = spans.iloc[span_index]
        step = steps[int(span["step"])]
        step_loc = self._locs.steps[step.index - 1]
        where = f"at t = {t:.2f} s in step {step.index} (line {step_loc.line})"
        loc = step_loc
        move = None
        if span["kind"] == "move":
            move = self.moves[step.name]
            where = (f"at t = {t:.2f} s in step {step.index} (line {step_loc.line}), "
                     f"move {move.name!r}, repetition {int(span['repetition'])}")
            local = (t - float(span["t_start"])) * step.tempo
            seg = int(np.clip(np.searchsorted(move.times, local, side="right"), 1,
                              move.times.size - 1))
            if move.mirror_of is not None:
                loc = self._locs.mirror[move.name]
            else:
                loc = self._locs.keyframes[move.name][seg]
        if kind in ("below", "above"):
            limit = robot.lower[j] if kind == "below" else robot.upper[j]
            reached = limit - value if kind == "below" else limit + value
            side = "lower" if kind == "below" else "upper"
            hint = "move the keyframes of this move away from the limit"
            if move is not None and move.interpolation == "cubic":
                hint = ("a cubic spline overshoots between keyframes: use interpolation: "
                        "minimum-jerk, add a keyframe, or move the keyframes away from the limit")
            return loc.problem(
                f"{joint} reaches {math.degrees(reached):.1f} deg ({reached:.3f} rad) {where}, "
                f"beyond its {side} limit {math.degrees(limit):.1f} deg", hint)
        if kind == "velocity":
            limit = float(robot.max_velocity[j])
            text = (f"{joint} speed reaches {value * limit:.2f} rad/s "
                    f"({math.degrees(value * limit):.0f} deg/s) {where}, "
                    f"{100 * value:.0f} % of its limit {limit:.2f} rad/s")
            stretch = value
        else:
            limit = float(robot.max_acceleration[j])
            text = (f"{joint} acceleration reaches {value * limit:.1f} rad/s² {where}, "
                    f"{100 * value:.0f} % of its limit {limit:.1f} rad/s²")
            # smooth interpolants: acceleration ~ 1/T²; velocity steps of linear moves: ~ 1/T
            linear = move is not None and move.interpolation == "linear"
            stretch = value if linear else math.sqrt(value)
        stretch *= 1.02  # margin: sampled peaks do not scale exactly with duration
        if move is None:
            hint = "lengthen or slow down the step before this one"
            return loc.problem(text, hint)
        new_duration = math.ceil(move.duration * stretch * 100) / 100
        written_tempo = step.tempo / self.tempo  # the step's own factor, as in the file
        new_tempo = _round_down(written_tempo / stretch)
        hint = (f"lengthen move {move.name!r} to at least {new_duration:.2f} s (stretch its "
                f"keyframe times; the last is at {move.duration:.2f} s), set this step's tempo "
                f"to {new_tempo:g} or less (now {written_tempo:g}), or reduce the amplitude "
                f"of {joint}")
        if kind == "acceleration" and move.interpolation == "linear":
            hint += ("; linear interpolation changes velocity abruptly at every keyframe, "
                     "interpolation: minimum-jerk starts and ends every segment at rest")
        if move.mirror_of is not None:
            hint += f" (this move mirrors {move.mirror_of!r}: change that one)"
        return loc.problem(text, hint)

    # -- summaries ---------------------------------------------------------------------------

    def usage(self, rate_hz: float = DEFAULT_RATE_HZ) -> pd.DataFrame:
        """Peak joint speed and acceleration of every step as a share of the limits.

        Parameters
        ----------
        rate_hz : float
            Command rate, Hz.

        Returns
        -------
        pandas.DataFrame
            One row per step: ``step``, ``kind``, ``name``, ``repeat``,
            ``tempo``, ``duration`` (s, all repetitions), ``velocity_pct`` and
            ``velocity_joint`` (the joint that uses most of its velocity limit,
            in % of that limit), ``acceleration_pct`` and ``acceleration_joint``.
            Values from :func:`~echoreo.runner.timeline.limit_usage` on the
            compiled samples.
        """
        timeline = self.compile(rate_hz)
        robot = self.robot
        usage = limit_usage(timeline.q, timeline.rate_hz, robot.lower, robot.upper,
                            robot.max_velocity, robot.max_acceleration)
        span_step = timeline.spans["step"].to_numpy()
        starts = timeline.spans["t_start"].to_numpy()
        idx = np.clip(np.searchsorted(starts, timeline.t, side="right") - 1, 0,
                      len(starts) - 1)
        sample_step = span_step[idx]
        rows = []
        for step in self.steps:
            row: dict[str, Any] = {"step": step.index, "kind": step.kind, "name": step.name,
                                   "repeat": step.repeat, "tempo": step.tempo,
                                   "duration": step.total_duration}
            for kind, steps_of in (("velocity", sample_step[:-1]),
                                   ("acceleration", sample_step)):
                values = usage[kind][steps_of == step.index]
                if values.size == 0:
                    row[f"{kind}_pct"], row[f"{kind}_joint"] = 0.0, ""
                    continue
                peak = values.max(axis=0)
                j = int(np.argmax(peak))
                row[f"{kind}_pct"] = 100.0 * float(peak[j])
                row[f"{kind}_joint"] = robot.joint_names[j] if peak[j] > 0 else ""
            rows.append(row)
        return pd.DataFrame(rows)


# ------------------------------------------------------------------------------------------
# parsing


def _round_down(x: float, digits: int = 3) -> float:
    """``x > 0`` rounded down to ``digits`` significant digits."""
    scale = 10.0 ** (digits - 1 - math.floor(math.log10(x)))
    return math.floor(x * scale) / scale


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
        self.locs = _Locs()
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
    """Give a line and column to YAML reader errors (bad characters), which PyYAML
    reports by character position only."""
    cause = exc.__cause__
    if not isinstance(cause, yaml.reader.ReaderError) or exc.problems[0].line is not None:
        return exc.problems
    try:
        text = Path(name).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        return exc.problems
    before = text[: cause.position]
    line = before.count("\n") + 1
    column = cause.position - (before.rfind("\n") + 1) + 1
    char = cause.character
    shown = f"#x{ord(char):04x}" if isinstance(char, str) else repr(char)
    return [Problem(f"not valid YAML: the character {shown} is not allowed in YAML text",
                    name, line, column, "delete it or replace it with a printable character")]


def load_choreography(path: str | Path, robot: Any = None) -> Choreography:
    """Read, validate and limit-check a choreography file.

    Parameters
    ----------
    path : str or Path
        The YAML file (format: ``choreographies/FORMAT.md``, section 2).
    robot : Robot, optional
        The robot to validate for; by default the one the file names (a
        shipped robot's name, or a path relative to the file), loaded with
        :func:`echoreo.sim.load_robot`.

    Returns
    -------
    Choreography
        Already compiled and checked once at the default command rate
        (:meth:`Choreography.compile` with 50 Hz returns that timeline).

    Raises
    ------
    ChoreographyError
        Every problem found, each with ``file:line:column`` and a fix:
        malformed YAML, missing or mistyped fields, unknown joints, poses or
        moves, bad units, non-increasing keyframe times, postures that do not
        join up, angles outside the joint ranges, and speed or acceleration
        beyond the robot's limits on the trajectory sampled at 50 Hz
        (including the ramp from the robot's rest pose to the first posture).
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
    chor = Choreography(
        name=parsed["name"], description=parsed["description"], source=name, text=text,
        robot=parser.robot, tempo=parsed["tempo"],
        poses={k: v for k, v in parsed["poses"].items() if v is not None},
        moves={k: v for k, v in parsed["moves"].items() if v is not None},
        steps=tuple(s for s in parsed["steps"] if s is not None),
        start_posture=parsed["start"], locs=parser.locs)
    problems = list(parser.problems)
    timeline, span_of = chor._sample(DEFAULT_RATE_HZ)
    problems += chor._limit_problems(timeline, span_of, skip_position=parser.limit_problem_joints)
    if problems:
        raise ChoreographyError(problems)
    chor._cache[DEFAULT_RATE_HZ] = timeline
    return chor
