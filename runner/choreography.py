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

import math
import numbers
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from echoreo.errors import ChoreographyError, Problem
from echoreo.runner.interpolate import evaluate
from echoreo.runner.ramps import ramp
from echoreo.runner.timeline import LIMIT_RTOL, SPAN_COLUMNS, Timeline, limit_usage
from echoreo.yamlload import Loc

if TYPE_CHECKING:
    from echoreo.sim.robot import Robot

__all__ = ["Choreography", "Move", "Step", "load_choreography"]

#: Default command rate, Hz (the contract default of :meth:`Choreography.compile`).
DEFAULT_RATE_HZ = 50.0
#: Most samples one compile may produce (memory guard: about 1 GB at 24 joints).
MAX_SAMPLES = 5_000_000


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
class Locs:
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

    def __init__(self, *, name: str, description: str, source: str, text: str, robot: Robot,
                 tempo: float, poses: dict[str, np.ndarray], moves: dict[str, Move],
                 steps: tuple[Step, ...], start_posture: np.ndarray, locs: Locs):
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
        # sample i belongs to the last span that starts at or before t[i]
        starts = np.array([r[4] for r in rows])
        first = np.searchsorted(t, starts, side="left")
        first[0] = 0
        last = np.append(first[1:], n_samples)
        for i, (step_index, name, _rep, kind, a, _b) in enumerate(rows):
            window = slice(first[i], last[i])
            span_of[window] = i
            if kind == "move":
                move = self.moves[name]
                local = (t[window] - a) * steps[step_index].tempo
                q[window] = move.evaluate(local)
                posture = move.knots[-1]
            else:
                q[window] = posture
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

        rates: dict[tuple[int, int], dict[str, tuple[float, float, int]]] = {}
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
                span_steps = spans["step"].to_numpy()[sample_span[kind][rows]]
                for step_index in np.unique(span_steps):
                    in_step = rows[span_steps == step_index]
                    vals = values[in_step, j]
                    # the first sample within round-off of the worst one, so the report
                    # names the first repetition where the peak occurs
                    i = int(in_step[np.flatnonzero(vals >= vals.max() * (1 - 1e-6))[0]])
                    hit = (float(values[i, j]), float(sample_t[kind][i]),
                           int(sample_span[kind][i]))
                    if kind in ("below", "above"):
                        problems.append(self._position_problem(kind, j, hit, spans, steps))
                    else:
                        rates.setdefault((int(step_index), int(j)), {})[kind] = hit
        for (_, j), hits in rates.items():
            problems.append(self._rate_problem(j, hits, spans, steps))
        problems.sort(key=lambda p: (p.line or 0, p.column or 0))
        return problems

    def _context(self, t: float, span_index: int, spans: pd.DataFrame,
                 steps: dict[int, Step]) -> tuple[str, Loc, Move | None, Step]:
        """Where a sample at ``t`` was written: text, location, move and step."""
        span = spans.iloc[span_index]
        step = steps[int(span["step"])]
        step_loc = self._locs.steps[step.index - 1]
        if span["kind"] != "move":
            return f"in step {step.index} (line {step_loc.line})", step_loc, None, step
        move = self.moves[step.name]
        where = (f"in step {step.index} (line {step_loc.line}), move {move.name!r}, "
                 f"repetition {int(span['repetition'])}")
        local = (t - float(span["t_start"])) * step.tempo
        seg = int(np.clip(np.searchsorted(move.times, local, side="right"), 1,
                          move.times.size - 1))
        if move.mirror_of is not None:
            return where, self._locs.mirror[move.name], move, step
        return where, self._locs.keyframes[move.name][seg], move, step

    def _position_problem(self, kind: str, j: int, hit: tuple[float, float, int],
                          spans: pd.DataFrame, steps: dict[int, Step]) -> Problem:
        robot = self.robot
        value, t, span_index = hit
        where, loc, move, _ = self._context(t, span_index, spans, steps)
        limit = float(robot.lower[j] if kind == "below" else robot.upper[j])
        reached = limit - value if kind == "below" else limit + value
        side = "lower" if kind == "below" else "upper"
        hint = "move the keyframes of this move away from the limit"
        if move is not None and move.interpolation == "cubic":
            hint = ("a cubic spline overshoots between keyframes: use interpolation: "
                    "minimum-jerk, add a keyframe, or move the keyframes away from the limit")
        return loc.problem(
            f"{robot.joint_names[j]} reaches {math.degrees(reached):.1f} deg ({reached:.3f} "
            f"rad) at t = {t:.2f} s {where}, beyond its {side} limit "
            f"{math.degrees(limit):.1f} deg", hint)

    def _rate_problem(self, j: int, hits: dict[str, tuple[float, float, int]],
                      spans: pd.DataFrame, steps: dict[int, Step]) -> Problem:
        """One problem for a joint's speed and/or acceleration excess in one step.

        The fix scales time: stretching a move by a factor :math:`s` divides its
        speeds by :math:`s` and the accelerations of smooth interpolants by
        :math:`s^2`; the velocity steps of linear moves, seen as acceleration at
        the command rate, scale with :math:`1/s`. The suggested factor is the
        largest one needed, plus a 2 % margin for sampling.
        """
        robot = self.robot
        joint = robot.joint_names[j]
        parts: list[str] = []
        stretches: dict[str, float] = {}
        for kind, (value, t, span_index) in hits.items():
            _, _, move, _ = self._context(t, span_index, spans, steps)
            if kind == "velocity":
                limit = float(robot.max_velocity[j])
                parts.append(f"speed reaches {value * limit:.2f} rad/s "
                             f"({math.degrees(value * limit):.0f} deg/s, {100 * value:.0f} % "
                             f"of its limit {limit:.2f} rad/s) at t = {t:.2f} s")
                stretches[kind] = value
            else:
                limit = float(robot.max_acceleration[j])
                parts.append(f"acceleration reaches {value * limit:.1f} rad/s² "
                             f"({100 * value:.0f} % of its limit {limit:.1f} rad/s²) at "
                             f"t = {t:.2f} s")
                linear = move is not None and move.interpolation == "linear"
                stretches[kind] = value if linear else math.sqrt(value)
        worst = max(stretches, key=stretches.get)
        value, t, span_index = hits[worst]
        where, loc, move, step = self._context(t, span_index, spans, steps)
        text = f"{joint} {' and '.join(parts)} {where}"
        if move is None:
            return loc.problem(text, "lengthen or slow down the step before this one")
        stretch = stretches[worst] * 1.02  # margin: sampled peaks do not scale exactly
        new_duration = math.ceil(move.duration * stretch * 100) / 100
        written_tempo = step.tempo / self.tempo  # the step's own factor, as in the file
        new_tempo = _round_down(written_tempo / stretch)
        hint = (f"lengthen move {move.name!r} to at least {new_duration:.2f} s (stretch its "
                f"keyframe times; the last is at {move.duration:.2f} s), set this step's tempo "
                f"to {new_tempo:g} or less (now {written_tempo:g}), or reduce the amplitude "
                f"of {joint}")
        if "acceleration" in hits and move.interpolation == "linear":
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



def _round_down(x: float, digits: int = 3) -> float:
    """``x > 0`` rounded down to ``digits`` significant digits."""
    scale = 10.0 ** (digits - 1 - math.floor(math.log10(x)))
    return math.floor(x * scale) / scale



def load_choreography(path: str | Path, robot: Robot | None = None) -> Choreography:
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
    from echoreo.runner._chorparse import parse_file

    name = str(path)
    parsed, parser = parse_file(path, robot)
    chor = Choreography(
        name=parsed["name"], description=parsed["description"], source=name, text=parser.text,
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
