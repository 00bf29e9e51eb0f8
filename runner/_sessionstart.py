"""Session start-up: the clock, the leader's hello, the program, the followers, the file.

Everything here happens before the robot moves: :func:`make_clock` chooses
the clock, :func:`connect` connects the leader, checks its hello against the
robot description, lays out and checks the session program, connects the
followers and checks their streams (a :class:`~echoreo.errors.PlanError`
then, and every adapter closed again); :func:`session_meta` and
:func:`new_session_path` give the session file's ``meta`` and name.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from echoreo.adapters.base import FollowerSource, Leader, StreamInfo
from echoreo.errors import PlanError, Problem
from echoreo.runner._sessionadapters import _close_all, make_followers, make_leader
from echoreo.runner.plan import SessionPlan
from echoreo.runner.program import SessionProgram, build_program, check_program

__all__ = ["START_DELAY_S", "session_file_name"]

#: The first command is due this long after session-clock zero, s: time to
#: connect the followers and open the file. Fixed, so the spans of a plan fall
#: at the same session times on the real and the virtual clock.
START_DELAY_S = 1.0


def _slug(text: str) -> str:
    s = re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower()
    return s[:40] or "session"


def session_file_name(study: str, participant: str, utc_start: str) -> str:
    """``<study>_<participant>_<YYYYMMDDTHHMMSSZ>.sqlite`` for a session's file."""
    stamp = re.sub(r"[^0-9T]", "", utc_start.split(".")[0].replace("+00:00", ""))
    return f"{_slug(study)}_{participant}_{stamp}Z.sqlite"


def new_session_path(out_dir: Path, study: str, participant: str, utc_start: str) -> Path:
    """A new file in ``out_dir`` (created) named by :func:`session_file_name`.

    An existing name gets ``~2``, ``~3``, ... before ``.sqlite``.
    """
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / session_file_name(study, participant, utc_start)
    k = 2
    while path.exists():
        path = path.with_name(path.stem.split("~")[0] + f"~{k}.sqlite")
        k += 1
    return path


def make_clock(choice: str, plan: SessionPlan) -> Any:
    """The session clock for ``choice`` in ``auto``, ``real``, ``virtual``.

    ``auto`` is virtual when every adapter of the plan is simulated, else real;
    ``virtual`` is refused for a plan with a socket.
    """
    from echoreo.runner.clock import SessionClock, VirtualClock

    if choice not in ("auto", "real", "virtual"):
        raise PlanError(f"clock must be auto, real or virtual, not {choice!r}")
    if choice == "virtual" and not plan.all_simulated:
        raise PlanError(Problem(
            "the virtual clock is refused: this plan uses a ZeroMQ adapter, and anything "
            "with a socket runs on the real clock", str(plan.path),
            hint="drop --clock virtual (the real clock is chosen automatically)"))
    if choice == "real" or (choice == "auto" and not plan.all_simulated):
        return SessionClock()
    return VirtualClock()


@dataclass
class _Connected:
    """The connected adapters and the checked program of a session about to start.

    ``start_ns`` is the first command's deadline on the session clock, ns;
    ``missing`` the planned streams no source announced (a network source may
    still bring them).
    """

    leader: Leader
    hello: Any
    program: SessionProgram
    start_ns: int
    sources: list[FollowerSource]
    infos: list[tuple[FollowerSource, StreamInfo]]
    missing: list[str] = field(default_factory=list)


def connect(plan: SessionPlan, clock: Any, timelines: list) -> _Connected:
    """Connect the leader and the followers and lay out the checked program.

    The first command is due at :data:`START_DELAY_S`, or later on a 0.1 s
    grid when connecting took long (simulated participants are then delayed
    with the robot). Any error closes every adapter and propagates.
    """
    robot = plan.robot
    rate = plan.command_rate_hz
    leader = make_leader(plan)
    sources: list[FollowerSource] = []
    try:
        hello = leader.connect(clock)
        check_hello(plan, hello)
        program = build_program(
            robot, timelines, np.asarray(hello.q, dtype=float),
            countdowns_s=[it.countdown_s for it in plan.items],
            rests_s=[it.rest_s for it in plan.items], rate_hz=rate,
            speed_fraction=plan.ramp_speed_fraction)
        check_program(robot, program)
        start_ns = round(START_DELAY_S * 1e9)
        now = clock.now_ns()
        if now > start_ns - 200_000_000:  # a slow connect: start later, on a 0.1 s grid
            start_ns = int(math.ceil((now + 200_000_000) / 1e8) * 1e8)
        t0 = start_ns * 1e-9
        # the commanded trajectory on the session clock, from 0 (hold before the start)
        n_pre = math.floor(t0 * rate + 1e-9)
        t_pre = np.arange(n_pre) / rate
        t_cmd = np.concatenate([t_pre, t0 + program.t])
        q_cmd = np.concatenate([np.repeat(program.q[:1], n_pre, axis=0), program.q])
        sources = make_followers(plan, t_cmd, q_cmd, program.rep_windows() + t0)
        infos: list[tuple[FollowerSource, StreamInfo]] = []
        for src in sources:
            for info in src.connect(clock):
                infos.append((src, info))
        now = clock.now_ns()
        if now > start_ns - 100_000_000:
            # the followers took long to connect (a long simulation on the real clock):
            # start later, and let simulated participants start later with the robot
            later = int(math.ceil((now + 200_000_000) / 1e8) * 1e8)
            for src in sources:
                hook = getattr(src, "delay", None)
                if hook is not None:
                    hook(later - start_ns)
            start_ns = later
        missing = check_streams(plan, infos)
    except BaseException:
        _close_all(sources, leader)
        raise
    return _Connected(leader, hello, program, start_ns, sources, infos, missing)


def check_hello(plan: SessionPlan, hello: Any) -> None:
    """Refuse a leader whose joint names or pose do not fit the plan's robot."""
    robot = plan.robot
    names = tuple(hello.joint_names)
    if names != tuple(robot.joint_names):
        missing = [n for n in robot.joint_names if n not in names]
        extra = [n for n in names if n not in robot.joint_names]
        detail = []
        if missing:
            detail.append("missing " + ", ".join(missing))
        if extra:
            detail.append("unknown " + ", ".join(extra))
        if not detail:
            detail.append("same joints in another order")
        raise PlanError(Problem(
            f"the leader's joints do not match the robot description {robot.name!r}: "
            + "; ".join(detail), str(plan.path),
            hint="the bridge must report the description's joint names in its order"))
    q = np.asarray(hello.q, dtype=float)
    if q.shape != (len(robot.joint_names),) or not np.all(np.isfinite(q)):
        raise PlanError(Problem(f"the leader reported an unusable pose (shape {q.shape})",
                                str(plan.path)))


def check_streams(plan: SessionPlan, infos: list) -> list[str]:
    """Refuse duplicate streams, and missing planned streams of simulated sources.

    Returns the planned streams (and their ``leader_stream``) not announced,
    which only network sources may leave out.
    """
    names = [i.name for _, i in infos]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise PlanError(Problem(f"two follower sources announce the stream {dup[0]!r}",
                                str(plan.path),
                                hint="give each source its own `streams:`"))
    simulated_only = all(not f.uses_network for f in plan.followers)
    missing = [p.stream for p in plan.pairs if p.stream not in names]
    missing += [p.leader_stream for p in plan.pairs
                if p.leader_stream and p.leader_stream not in names]
    if missing and simulated_only:
        raise PlanError(Problem(
            f"the plan expects stream {missing[0]!r} but no follower source announces it "
            f"(announced: {', '.join(names) or 'none'})", str(plan.path),
            hint="list only streams the sources produce (simulated sources record no "
                 "sensor on the robot, so drop `leader_stream:` with them)"))
    return missing


def session_meta(plan: SessionPlan, participant: str, clock: Any, ready: _Connected) -> dict:
    """The session file's ``meta`` at the start (DEVELOPERS.md, "Session file")."""
    robot = plan.robot
    rate = plan.command_rate_hz
    start_ns = ready.start_ns
    return {
        "study": plan.study, "participant": participant, "mode": plan.mode,
        "clock": clock.kind, "utc_start": clock.utc_start, "plan": plan.text,
        "plan_path": str(plan.path), "robot": robot.text, "robot_name": robot.name,
        "choreographies": dict(zip(ready.program.names, (it.text for it in plan.items),
                                   strict=True)),
        "pairs": [p.as_meta() for p in plan.pairs], "command_rate_hz": rate,
        "program_start_ns": start_ns, "program_ticks": ready.program.n_ticks,
        "leader_adapter": plan.leader.adapter, "leader_robot": str(ready.hello.robot),
        "clock_info": {"kind": clock.kind, "utc_start": clock.utc_start,
                       "source": ("time.monotonic_ns (CLOCK_MONOTONIC)" if clock.kind == "real"
                                  else "virtual (advanced by the scheduler)"),
                       "program_start_ns": start_ns, "command_rate_hz": rate},
        "follower_adapters": [f.adapter for f in plan.followers],
    }
