"""The session program: every command of a session, laid out tick by tick.

A session plays one continuous command stream at the command rate: a slow
ramp from the pose the leader reports to the first choreography's first pose;
for each choreography a countdown (the robot holds), the compiled timeline,
and, between choreographies, a rest that begins with a slow ramp to the next
first pose; finally a slow ramp to the robot's rest pose. :func:`build_program`
lays that out and :func:`check_program` checks the whole stream against the
robot's limits before anything moves.

Times in a :class:`SessionProgram` are seconds from the program's first tick;
the runner places tick ``i`` at ``start + i / rate_hz`` on the session clock.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from echoreo.errors import PlanError, Problem

__all__ = ["Segment", "SessionProgram", "build_program", "check_program", "unique_names"]

#: Relative slack on the limit comparisons (round-off only).
_RTOL = 1e-9


@dataclass(frozen=True)
class Segment:
    """A contiguous part of the program.

    Parameters
    ----------
    kind : str
        ``ramp_in``, ``countdown``, ``choreography``, ``rest`` or ``ramp_out``.
    i_start, i_end : int
        Tick range ``[i_start, i_end)``.
    item : int
        Index of the plan item it belongs to (-1 for the final ramp).
    label : str
        Text for the operator ("countdown to arm-raise").
    """

    kind: str
    i_start: int
    i_end: int
    item: int
    label: str


@dataclass(frozen=True)
class SessionProgram:
    """Every command of a session and what each part of it is.

    Parameters
    ----------
    rate_hz : float
        Command rate, Hz.
    q : ndarray, shape (n_ticks, n_joints), rad
        Command of every tick.
    segments : tuple of Segment
        The parts, in order, covering every tick.
    spans : DataFrame
        Columns ``choreography, step, move, repetition, kind, t_start, t_end``
        (s from the first tick): every timeline's spans offset to where the
        timeline starts.
    cues : DataFrame
        Columns ``t`` (s from the first tick), ``text``, ``choreography``:
        countdown cues and every timeline's cues.
    item_start : tuple of int
        Tick at which each choreography's timeline starts.
    names : tuple of str
        Choreography names, one per plan item.
    """

    rate_hz: float
    q: np.ndarray = field(repr=False)
    segments: tuple[Segment, ...]
    spans: pd.DataFrame = field(repr=False)
    cues: pd.DataFrame = field(repr=False)
    item_start: tuple[int, ...]
    names: tuple[str, ...]

    @property
    def n_ticks(self) -> int:
        """Number of commands."""
        return int(self.q.shape[0])

    @property
    def duration_s(self) -> float:
        """Time from the first to the last command, s."""
        return (self.n_ticks - 1) / self.rate_hz

    @property
    def t(self) -> np.ndarray:
        """Tick times, shape (n_ticks,), s from the first tick."""
        return np.arange(self.n_ticks) / self.rate_hz

    def rep_windows(self) -> np.ndarray:
        """``(t_start, t_end)`` of every move repetition, shape (k, 2), s from the first tick."""
        m = self.spans[self.spans["kind"] == "move"]
        return m[["t_start", "t_end"]].to_numpy(dtype=float).reshape(-1, 2)

    def segment_at(self, i: int) -> Segment:
        """The segment holding tick ``i`` (the last one past the end)."""
        for s in self.segments:
            if s.i_start <= i < s.i_end:
                return s
        return self.segments[-1]


def unique_names(names: list[str]) -> tuple[str, ...]:
    """Choreography names made unique: a repeated name gets ``#2``, ``#3``, ...

    Spans, events and scores identify a repetition by (choreography, step,
    repetition), so a plan that runs one choreography twice (before and after
    an intervention, say) must tell the two runs apart.
    """
    seen: dict[str, int] = {}
    out = []
    for n in names:
        seen[n] = seen.get(n, 0) + 1
        out.append(n if seen[n] == 1 else f"{n}#{seen[n]}")
    return tuple(out)


def _ticks(seconds: float, rate_hz: float) -> int:
    return round(seconds * rate_hz)


def build_program(robot, timelines, q_start: np.ndarray, *, countdowns_s, rests_s,
                  rate_hz: float, speed_fraction: float = 0.25) -> SessionProgram:
    """Lay out a session's commands.

    Parameters
    ----------
    robot : Robot
        The leader's model (limits and ``rest`` pose).
    timelines : sequence of Timeline
        The compiled choreographies, in order, all at ``rate_hz``.
    q_start : ndarray, shape (n_joints,), rad
        The pose the leader reports at connect (start of the first ramp).
    countdowns_s, rests_s : sequence of float
        Countdown before and rest after each timeline, s (rounded to whole
        command periods; the rest after the last timeline is not used).
    rate_hz : float
        Command rate, Hz.
    speed_fraction : float
        Fraction of the velocity and acceleration limits used by the ramps
        (see :func:`echoreo.runner.ramp.ramp`).

    Returns
    -------
    SessionProgram
    """
    from echoreo.runner.ramps import ramp

    if not timelines:
        raise PlanError("a session needs at least one choreography")
    parts: list[np.ndarray] = []
    segments: list[Segment] = []
    n = 0

    def add(kind: str, q: np.ndarray, item: int, label: str) -> None:
        nonlocal n
        if q.shape[0] == 0:
            return
        parts.append(np.asarray(q, dtype=float))
        segments.append(Segment(kind, n, n + q.shape[0], item, label))
        n += q.shape[0]

    names = unique_names([tl.name for tl in timelines])
    _, q_r = ramp(robot, np.asarray(q_start, dtype=float), timelines[0].q[0], rate_hz,
                  speed_fraction)
    add("ramp_in", q_r, 0, f"moving slowly to the first pose of {names[0]}")
    starts: list[int] = []
    span_frames: list[pd.DataFrame] = []
    cue_rows: list[tuple[float, str, str]] = []
    for k, tl in enumerate(timelines):
        if abs(float(tl.rate_hz) - rate_hz) > 1e-9:
            raise PlanError(f"timeline {tl.name!r} is compiled at {tl.rate_hz} Hz, the session "
                            f"commands at {rate_hz} Hz")
        n_cd = _ticks(countdowns_s[k], rate_hz)
        c0 = n
        name = names[k]
        add("countdown", np.repeat(tl.q[:1], n_cd, axis=0), k, f"countdown to {name}")
        start = n
        starts.append(start)
        t_go = start / rate_hz
        if n_cd > 0:
            # whole seconds before "go", on the tick grid; the first one shares
            # its instant with "get ready" when the countdown is a whole number of seconds
            ready = f"get ready: {name}"
            numbers = [(start - round(m * rate_hz), m)
                       for m in range(math.ceil(n_cd / rate_hz - 1e-9), 0, -1)]
            numbers = [(i, m) for i, m in numbers if i >= c0]
            if numbers and numbers[0][0] == c0:
                ready += f" — {numbers[0][1]}"
                numbers = numbers[1:]
            cue_rows.append((c0 / rate_hz, ready, name))
            cue_rows.extend((i / rate_hz, str(m), name) for i, m in numbers)
        cue_rows.append((t_go, "go", name))
        add("choreography", tl.q, k, name)
        sp = tl.spans.copy()
        sp["t_start"] = sp["t_start"].astype(float) + t_go
        sp["t_end"] = sp["t_end"].astype(float) + t_go
        sp.insert(0, "choreography", name)
        span_frames.append(sp)
        for t, text in zip(tl.cues["t"].astype(float), tl.cues["text"].astype(str),
                           strict=True):
            cue_rows.append((t + t_go, text, name))
        if k + 1 < len(timelines):
            nxt = timelines[k + 1]
            _, q_m = ramp(robot, tl.q[-1], nxt.q[0], rate_hz, speed_fraction)
            q_m = q_m[1:]
            n_rest = max(_ticks(rests_s[k], rate_hz), q_m.shape[0])
            hold = np.repeat(nxt.q[:1], n_rest - q_m.shape[0], axis=0)
            add("rest", np.concatenate([q_m, hold], axis=0), k, f"rest after {name}")
            if n_rest:
                cue_rows.append(((start + tl.q.shape[0]) / rate_hz, "rest", name))
    last = timelines[-1].q[-1]
    _, q_o = ramp(robot, last, np.asarray(robot.rest, dtype=float), rate_hz, speed_fraction)
    add("ramp_out", q_o[1:] if q_o.shape[0] > 1 else q_o, -1, "moving slowly to rest")
    q = np.concatenate(parts, axis=0)
    spans = pd.concat(span_frames, ignore_index=True)
    cues = pd.DataFrame(cue_rows, columns=["t", "text", "choreography"])
    cues = cues.sort_values("t", kind="stable").reset_index(drop=True)
    return SessionProgram(rate_hz=float(rate_hz), q=q, segments=tuple(segments), spans=spans,
                          cues=cues, item_start=tuple(starts), names=names)


def check_program(robot, program: SessionProgram) -> None:
    """Check every command of the program against the robot's limits.

    Uses the finite differences of the command stream at the command rate
    (:func:`echoreo.runner.timeline.limit_usage`): position inside
    ``[lower, upper]``, ``|v| <= max_velocity``, ``|a| <= max_acceleration``,
    the stream taken at rest before its first and after its last command.

    Raises
    ------
    PlanError
        One problem per joint and kind of limit exceeded, with the worst value
        and when it happens (s from the first command).
    """
    from echoreo.runner.timeline import limit_usage

    use = limit_usage(program.q, program.rate_hz, np.asarray(robot.lower),
                      np.asarray(robot.upper), np.asarray(robot.max_velocity),
                      np.asarray(robot.max_acceleration))
    problems: list[Problem] = []
    for key, what, bad in (("below", "below its lower limit by", 1e-9),
                           ("above", "above its upper limit by", 1e-9),
                           ("velocity", "at this fraction of its velocity limit:", 1 + _RTOL),
                           ("acceleration", "at this fraction of its acceleration limit:",
                            1 + _RTOL)):
        u = use[key]
        if u.size == 0:
            continue
        for j, name in enumerate(robot.joint_names):
            col = u[:, j]
            i = int(np.argmax(col))
            if col[i] > bad:
                seg = program.segment_at(i)
                value = f"{col[i]:.3g} rad" if key in ("below", "above") else f"{col[i]:.3f}"
                problems.append(Problem(
                    f"{name} is {what} {value} at t = {i / program.rate_hz:.2f} s of the "
                    f"session ({seg.kind}: {seg.label})",
                    hint="slow the choreography down or check the robot's reported pose"))
    if problems:
        raise PlanError(problems)
