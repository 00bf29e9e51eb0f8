"""Run a timed session from a session plan.

:func:`run_session` is the whole protocol with one participant:

1. compile every choreography of the plan at the command rate;
2. choose the clock: the virtual clock when every adapter is simulated (the
   default), the real session clock otherwise (any socket forces it);
3. connect the leader and check its hello (robot and joint names against the
   robot description; any mismatch refuses to start);
4. lay out the session program (:mod:`echoreo.runner.program`: slow ramp from
   the reported pose, countdowns, choreographies, rests, ramp to rest) and
   check every command against the robot's limits — before anything moves;
5. connect the follower sources (simulated ones get the commanded trajectory)
   and open the session file (:class:`~echoreo.runner.recorder.Recorder`);
6. play every command on the :class:`~echoreo.runner.clock.Scheduler` with
   absolute deadlines, reading the leader's states and every follower's
   samples each tick, logging cues, repetition starts and ends, pauses,
   faults, gaps, dropped and malformed data as events, writing each span as
   it ends, and keeping the live view's status up to date;
7. end with a controlled stop (ramp to rest, then ``stop``) and close the file
   ``complete``, or ``interrupted`` after an abort or a fault.

Faults never crash the loop: a silent follower stream raises a ``gap`` event
and a visible warning (and pauses the robot when the plan says so); a lost
leader triggers a controlled stop and marks the session interrupted;
malformed or out-of-order samples are counted, logged and left out.

Ticks are never skipped: a late tick still sends the next command of the
program (a skipped command would make the robot jump), so commanded samples
are identical on the real and the virtual clock.
"""

from __future__ import annotations

import math
import re
import signal
import threading
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from echoreo.adapters.base import Command, FollowerSource, Leader, StreamInfo
from echoreo.errors import LeaderLost, PlanError, Problem
from echoreo.runner.liveview import SessionStatus, StreamStatus, make_view
from echoreo.runner.plan import SessionPlan, check_participant_code, load_plan
from echoreo.runner.program import SessionProgram, build_program, check_program

__all__ = ["RepetitionEnd", "SessionResult", "run_session", "session_file_name"]

#: The first command is due this long after session-clock zero, s: time to
#: connect the followers and open the file. Fixed, so the spans of a plan fall
#: at the same session times on the real and the virtual clock.
START_DELAY_S = 1.0
#: A tick this late (fraction of a command period) is logged as ``late_tick``.
LATE_TICK_FRACTION = 0.5
#: Seconds after a repetition's end before its live grade is computed
#: (the follower's lag; the participant finishes after the robot).
GRADE_LAG_S = 1.0
#: After the last command, followers and the leader are read this long, s
#: (samples still in flight, the state after the last command).
DRAIN_S = 0.25
#: Longest pause for a silent stream without an operator to decide, s.
UNATTENDED_SILENCE_LIMIT_S = 30.0


@dataclass(frozen=True)
class RepetitionEnd:
    """A finished repetition, handed to the ``on_repetition_end`` callback.

    Parameters
    ----------
    session_path : str
        The session file (readable while the session runs; WAL mode).
    choreography, move : str
        Which choreography and move.
    step, repetition : int
        1-based step index and repetition number.
    t_start, t_end : float
        The repetition's span on the session clock, s.
    pairs : tuple of dict
        The plan's ``{stream, kind, site, leader_site}`` pairs.
    mode : str
        Imitation mode.
    """

    session_path: str
    choreography: str
    move: str
    step: int
    repetition: int
    t_start: float
    t_end: float
    pairs: tuple = ()
    mode: str = "mirror"


@dataclass
class SessionResult:
    """How a session ended.

    Parameters
    ----------
    path : Path
        The session file.
    state : str
        ``complete`` or ``interrupted``.
    outcome : str
        ``complete``, ``stopped`` (operator or Ctrl-C; controlled), ``aborted``,
        ``leader_lost`` or ``silence`` (a silent stream never came back).
    ticks : int
        Commands sent.
    duration_s : float
        Session time at the end, s.
    samples : dict of str to int
        Follower samples recorded per stream.
    lateness_p99_ms, lateness_max_ms : float
        Tick lateness, ms.
    interrupted_by_ctrl_c : bool
        Ctrl-C asked for the stop.
    """

    path: Path
    state: str
    outcome: str
    ticks: int
    duration_s: float
    samples: dict[str, int] = field(default_factory=dict)
    lateness_p99_ms: float = float("nan")
    lateness_max_ms: float = float("nan")
    interrupted_by_ctrl_c: bool = False


def _slug(text: str) -> str:
    s = re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower()
    return s[:40] or "session"


def session_file_name(study: str, participant: str, utc_start: str) -> str:
    """``<study>_<participant>_<YYYYMMDDTHHMMSSZ>.sqlite`` for a session's file."""
    stamp = re.sub(r"[^0-9T]", "", utc_start.split(".")[0].replace("+00:00", ""))
    return f"{_slug(study)}_{participant}_{stamp}Z.sqlite"


# ------------------------------------------------------------------ adapters


def _rng(seed: int) -> np.random.Generator:
    return np.random.default_rng(int(seed))


def make_leader(plan: SessionPlan) -> Leader:
    """The leader adapter named in the plan."""
    spec = plan.leader
    s = spec.settings
    if spec.adapter == "simulated":
        from echoreo.adapters.simulated import SimulatedLeader

        q0 = None
        if s.get("start_pose") == "first":
            q0 = plan.items[0].choreography.compile(plan.command_rate_hz).q[0]
        return SimulatedLeader(plan.robot, tau_s=float(s.get("tau_s", 0.05)),
                               rng=_rng(s["seed"]), noise_rad=float(s.get("noise_rad", 0.0)),
                               q0=q0, fail_after_s=s.get("fail_after_s"))
    return _zmq_adapter("leader", spec, plan)


def _zmq_adapter(role: str, spec: Any, plan: SessionPlan) -> Any:
    """A ZeroMQ leader or follower source from a plan entry (adapters/PROTOCOL.md)."""
    import echoreo.adapters as adapters

    name = "ZmqLeader" if role == "leader" else "ZmqFollowers"
    try:
        cls = getattr(adapters, name)
    except (AttributeError, ImportError):
        raise PlanError(spec.loc.problem(
            f"the ZeroMQ {role} adapter is not available in this build",
            "use `adapter: simulated`")) from None
    s = dict(spec.settings)
    kw: dict[str, Any] = {k: s[k] for k in ("keys", "timeout_s", "heartbeat_s",
                                            "connect_timeout_s", "sync_interval_s") if k in s}
    if role == "leader":
        return cls(s["endpoint"], **kw)
    eps = s.get("endpoints", s.get("endpoint"))
    eps = list(eps.values()) if isinstance(eps, dict) else (
        [eps] if isinstance(eps, str) else list(eps))
    # the adapter reports its own gap events; make its limit the plan's
    kw["gap_s"] = float(s.get("gap_s", plan.silent_after_s))
    if "require_all" in s:
        kw["require_all"] = bool(s["require_all"])
    return cls(eps, **kw)


def make_followers(plan: SessionPlan, t_s: np.ndarray, q_cmd: np.ndarray,
                   rep_windows: np.ndarray) -> list[FollowerSource]:
    """The follower sources named in the plan.

    Parameters
    ----------
    plan : SessionPlan
    t_s : ndarray, shape (n,), s
        Session-clock times of the whole commanded trajectory.
    q_cmd : ndarray, shape (n, n_joints), rad
        The commanded trajectory (what simulated participants watch).
    rep_windows : ndarray, shape (k, 2), s
        Movement repetitions on the session clock.
    """
    from echoreo.adapters.simulated import Dropout, SimulatedFollowers

    out: list[FollowerSource] = []
    planned = [p.stream for p in plan.pairs]
    rates = {p.stream: p.rate_hz for p in plan.pairs if p.rate_hz}
    for spec in plan.followers:
        s = spec.settings
        if spec.adapter != "simulated":
            out.append(_zmq_adapter("followers", spec, plan))
            continue
        drops = s.get("dropout") or []
        drops = drops if isinstance(drops, list) else [drops]
        from echoreo.sim.participant import DEFAULT_RATES

        streams = s.get("streams") or [n for n in planned if n in DEFAULT_RATES]
        out.append(SimulatedFollowers(
            plan.robot, t_s, q_cmd, rep_windows, profile=s.get("profile", "good"),
            mode=plan.mode, rng=_rng(s["seed"]), height_m=float(s.get("height_m", 1.70)),
            streams=streams, rates={k: v for k, v in rates.items() if k in streams},
            dropouts=s.get("loss_fraction"),
            clock_offset_s=float(s.get("clock_offset_s", 0.0)),
            clock_drift_ppm=float(s.get("clock_drift_ppm", 0.0)),
            latency_s=float(s.get("latency_s", 0.0)), glitch_every_s=s.get("glitch_every_s"),
            dropout=[Dropout(d["stream"], float(d["start_s"]), float(d["duration_s"]))
                     for d in drops]))
    return out


# ------------------------------------------------------------------ streams


class _Monitor:
    """Per-stream bookkeeping: ordering, sequence gaps, silence, health."""

    def __init__(self, info: StreamInfo, pair: Any, own_events: bool = False):
        self.info = info
        self.pair = pair
        #: the source reports its own dropped/gap events (the runner then adds none)
        self.own_events = own_events
        self.samples = 0
        self.dropped = 0
        self.malformed = 0
        self.gaps = 0
        self.last_seq: int | None = None
        self.last_t_ns: int | None = None
        self.last_recv_ns: int | None = None
        self.first_recv_ns: int | None = None
        self.silent_since_ns: int | None = None
        self.recent: deque = deque()  # (recv_ns, n) over the last seconds
        self.recent_n = 0
        self.latency_ns = float("nan")
        self.status = StreamStatus(
            name=info.name, nominal_hz=float(info.rate_hz),
            pair=(f"robot {pair.leader_site}" if pair is not None else "(not in plan)"))

    def received(self, now_ns: int, n: int, last_t_ns: int,
                 window_ns: int = 2_000_000_000) -> None:
        """Update the effective rate (over ``window_ns``) and the latency estimate.

        The latency is an exponentially weighted mean of (receive time - mapped
        time of the batch's last sample), weight 0.1 per batch.
        """
        self.recent.append((now_ns, n))
        self.recent_n += n
        while self.recent and self.recent[0][0] <= now_ns - window_ns:
            self.recent_n -= self.recent.popleft()[1]
        span = min(window_ns, max(now_ns - (self.first_recv_ns or now_ns), 1))
        self.status.rate_hz = self.recent_n / (span * 1e-9) if span > 1 else float("nan")
        lat = float(now_ns - last_t_ns)
        self.latency_ns = lat if self.latency_ns != self.latency_ns else \
            0.9 * self.latency_ns + 0.1 * lat
        self.status.latency_ms = self.latency_ns * 1e-6


class _Rows:
    """Leader rows gathered for a few ticks and handed to the recorder together."""

    def __init__(self, stream: str, max_age_ns: int):
        self.stream = stream
        self.max_age_ns = int(max_age_ns)
        self.t: list[int] = []
        self.td: list[int] = []
        self.seq: list[int] = []
        self.q: list[np.ndarray] = []

    def add(self, t_ns: int, t_dev_ns: int, seq: int, q: np.ndarray) -> None:
        self.t.append(int(t_ns))
        self.td.append(int(t_dev_ns))
        self.seq.append(int(seq))
        self.q.append(np.asarray(q, dtype=float))

    def due(self, now_ns: int) -> bool:
        return bool(self.t) and now_ns - self.t[0] >= self.max_age_ns

    def flush(self, rec: Any) -> None:
        if self.t:
            rec.write(self.stream, self.t, self.td, self.seq, np.vstack(self.q))
            self.t, self.td, self.seq, self.q = [], [], [], []


# ------------------------------------------------------------------ live grades


class _Grader:
    """Runs ``on_repetition_end`` off the command loop, in a worker thread.

    The command loop only appends to a list; a dispatcher thread waits until
    a repetition's end plus :data:`GRADE_LAG_S` has passed on the session
    clock, asks the recorder to commit what it holds (so the callback reads
    the repetition's samples from the file), calls the callback — in a
    worker process when ``worker="process"`` — and queues what it returns.
    """

    def __init__(self, callback: Callable[[RepetitionEnd], Any], recorder: Any, clock: Any,
                 worker: str = "thread"):
        self.callback = callback
        self.recorder = recorder
        self.clock = clock
        self._jobs: deque = deque()
        self._results: deque = deque()
        self._cv = threading.Condition()
        self._closing = False
        self._executor = None
        if worker == "process":
            import multiprocessing as mp
            from concurrent.futures import ProcessPoolExecutor

            # spawn: no fork of a process with running threads; nice 10: on a small
            # machine the scheduler gives the command loop the CPU before the scorer
            self._executor = ProcessPoolExecutor(max_workers=1,
                                                 mp_context=mp.get_context("spawn"),
                                                 initializer=_lower_priority)
        self.pending = 0
        self._thread = threading.Thread(target=self._run, name="live-grades", daemon=True)
        self._thread.start()

    def submit(self, job: RepetitionEnd, due_ns: int) -> None:
        with self._cv:
            self._jobs.append((due_ns, job))
            self.pending += 1
            self._cv.notify()

    def results(self) -> list[tuple[RepetitionEnd, Any]]:
        out = []
        while self._results:
            out.append(self._results.popleft())
        return out

    def _run(self) -> None:
        while True:
            with self._cv:
                while not self._jobs and not self._closing:
                    self._cv.wait(0.1)
                if not self._jobs and self._closing:
                    return
                due, job = self._jobs[0]
                if not self._closing and self.clock.now_ns() < due:
                    self._cv.wait(0.02)
                    continue
                self._jobs.popleft()
            try:
                self.recorder.flush(timeout=5.0)
                if self._executor is not None:
                    result = self._executor.submit(self.callback, job).result()
                else:
                    result = self.callback(job)
            except Exception as exc:  # a scoring failure must not end the session
                result = {"error": f"{type(exc).__name__}: {exc}"}
            self._results.append((job, result))
            with self._cv:
                self.pending -= 1

    def close(self, timeout_s: float = 60.0) -> None:
        with self._cv:
            self._closing = True
            self._cv.notify()
        self._thread.join(timeout=timeout_s)
        if self._executor is not None:
            self._executor.shutdown(wait=False, cancel_futures=True)


def _lower_priority() -> None:
    """Worker-process initializer: lower the scheduling priority (nice +10)."""
    import os

    try:
        os.nice(10)
    except (AttributeError, OSError):  # not available here: run at normal priority
        pass


def _grade_text(job: RepetitionEnd, result: Any) -> str:
    """One line for the live view: ``move #k: stream grade band flags; ...``."""
    label = f"{job.move} #{job.repetition}"

    def one(r: dict) -> str:
        if "error" in r:
            return f"not graded ({r['error']})"
        parts = [str(r["stream"])] if r.get("stream") else []
        if r.get("grade") is not None:
            parts.append(f"{float(r['grade']):.0f}")
        if r.get("band"):
            parts.append(str(r["band"]))
        if r.get("flags"):
            parts.append("[" + ",".join(map(str, r["flags"])) + "]")
        return " ".join(parts)

    if isinstance(result, dict):
        return f"{label}: {one(result)}"
    if isinstance(result, list | tuple):
        return f"{label}: " + ("; ".join(one(r) if isinstance(r, dict) else str(r)
                                         for r in result) or "no grade yet")
    return f"{label}: {result}"


def _json_ready(x: Any) -> Any:
    if isinstance(x, dict):
        return {str(k): _json_ready(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [_json_ready(v) for v in x]
    if isinstance(x, np.generic):
        return x.item()
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, str | int | float | bool) or x is None:
        return x
    if isinstance(x, pd.DataFrame):
        return _json_ready(x.to_dict(orient="records"))
    return str(x)


# ------------------------------------------------------------------ the session


class _Session:
    """One run of a plan (use :func:`run_session`)."""

    def __init__(self, plan: SessionPlan, *, out_dir: Path, clock: str, participant: str | None,
                 console: Any, on_repetition_end: Callable | None, grade_worker: str,
                 interactive: bool | None):
        self.plan = plan
        self.out_dir = Path(out_dir)
        self.clock_choice = clock
        self.console = console
        self.on_rep_end = on_repetition_end
        self.grade_worker = grade_worker
        self.interactive = interactive
        code = participant if participant is not None else plan.participant
        if code is None:
            raise PlanError(Problem(
                "no participant code: the plan has none and none was given",
                str(plan.path), hint="add `participant: P01` to the plan or pass "
                "--participant CODE"))
        problems = check_participant_code(code)
        if problems:
            raise PlanError(problems)
        self.code = code
        self.status = SessionStatus(study=plan.study, participant=code,
                                    n_items=len(plan.items))
        self._stop_request: str | None = None
        self._stop_reason: str | None = None
        self._pause_request = False
        self._ctrl_c = False

    # -- clock -------------------------------------------------------------
    def _make_clock(self) -> Any:
        from echoreo.runner.clock import SessionClock, VirtualClock

        choice = self.clock_choice
        if choice not in ("auto", "real", "virtual"):
            raise PlanError(f"clock must be auto, real or virtual, not {choice!r}")
        if choice == "virtual" and not self.plan.all_simulated:
            raise PlanError(Problem(
                "the virtual clock is refused: this plan uses a ZeroMQ adapter, and anything "
                "with a socket runs on the real clock", str(self.plan.path),
                hint="drop --clock virtual (the real clock is chosen automatically)"))
        if choice == "real" or (choice == "auto" and not self.plan.all_simulated):
            return SessionClock()
        return VirtualClock()

    # -- signals ------------------------------------------------------------
    def _on_sigint(self, signum: int, frame: Any) -> None:
        if self._stop_request is not None:
            self._stop_request = "abort"  # a second Ctrl-C aborts
        else:
            self._stop_request = "stop"
        self._ctrl_c = True

    # -- main ---------------------------------------------------------------
    def run(self) -> SessionResult:
        from echoreo.runner.recorder import Recorder

        plan = self.plan
        robot = plan.robot
        rate = plan.command_rate_hz
        timelines = [it.choreography.compile(rate) for it in plan.items]
        clock = self._make_clock()
        self.status.clock = clock.kind

        leader = make_leader(plan)
        sources: list[FollowerSource] = []
        try:
            hello = leader.connect(clock)
            self._check_hello(hello, robot)
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
            self._check_streams(infos)
        except BaseException:
            for src in sources:
                _safe(src.close)
            _safe(leader.close)
            raise

        meta = {
            "study": plan.study, "participant": self.code, "mode": plan.mode,
            "clock": clock.kind, "utc_start": clock.utc_start, "plan": plan.text,
            "plan_path": str(plan.path), "robot": robot.text, "robot_name": robot.name,
            "choreographies": dict(zip(program.names, (it.text for it in plan.items),
                                       strict=True)),
            "pairs": [p.as_meta() for p in plan.pairs], "command_rate_hz": rate,
            "program_start_ns": start_ns, "program_ticks": program.n_ticks,
            "leader_adapter": plan.leader.adapter, "leader_robot": str(hello.robot),
            "clock_info": {"kind": clock.kind, "utc_start": clock.utc_start,
                           "source": ("time.monotonic_ns (CLOCK_MONOTONIC)" if clock.kind == "real"
                                      else "virtual (advanced by the scheduler)"),
                           "program_start_ns": start_ns, "command_rate_hz": rate},
            "follower_adapters": [f.adapter for f in plan.followers],
        }
        self.out_dir.mkdir(parents=True, exist_ok=True)
        path = self.out_dir / session_file_name(plan.study, self.code, clock.utc_start)
        k = 2
        while path.exists():
            path = path.with_name(path.stem.split("~")[0] + f"~{k}.sqlite")
            k += 1
        try:
            rec = Recorder(path, meta)
        except BaseException:
            for src in sources:
                _safe(src.close)
            _safe(leader.close)
            raise
        self.status.path = str(path)
        try:
            return self._play(clock, leader, sources, infos, program, start_ns, rec)
        finally:
            # _play closes everything itself; this covers a failure before its loop
            for src in sources:
                _safe(src.close)
            _safe(leader.close)
            _safe(lambda: rec.close("interrupted"))

    def _check_hello(self, hello: Any, robot: Any) -> None:
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
                + "; ".join(detail), str(self.plan.path),
                hint="the bridge must report the description's joint names in its order"))
        q = np.asarray(hello.q, dtype=float)
        if q.shape != (len(robot.joint_names),) or not np.all(np.isfinite(q)):
            raise PlanError(Problem(f"the leader reported an unusable pose (shape {q.shape})",
                                    str(self.plan.path)))

    def _check_streams(self, infos: list) -> None:
        names = [i.name for _, i in infos]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise PlanError(Problem(f"two follower sources announce the stream {dup[0]!r}",
                                    str(self.plan.path),
                                    hint="give each source its own `streams:`"))
        simulated_only = all(not f.uses_network for f in self.plan.followers)
        missing = [p.stream for p in self.plan.pairs if p.stream not in names]
        missing += [p.leader_stream for p in self.plan.pairs
                    if p.leader_stream and p.leader_stream not in names]
        if missing and simulated_only:
            raise PlanError(Problem(
                f"the plan expects stream {missing[0]!r} but no follower source announces it "
                f"(announced: {', '.join(names) or 'none'})", str(self.plan.path),
                hint="list only streams the sources produce (simulated sources record no "
                     "sensor on the robot, so drop `leader_stream:` with them)"))
        self._missing_at_start = missing

    # -- the loop -------------------------------------------------------------
    def _play(self, clock: Any, leader: Leader, sources: list[FollowerSource], infos: list,
              program: SessionProgram, start_ns: int, rec: Any) -> SessionResult:
        from echoreo.runner.clock import Scheduler

        plan = self.plan
        robot = plan.robot
        rate = program.rate_hz
        period_ns = 1e9 / rate
        names = tuple(robot.joint_names)
        units = tuple("rad" for _ in names)
        rec.add_stream(StreamInfo("leader_command", "joints", names, units, rate,
                                  f"{plan.leader.adapter} leader (commands)"))
        rec.add_stream(StreamInfo("leader_state", "joints", names, units, rate,
                                  f"{plan.leader.adapter} leader (measured)"))
        pairs = {p.stream: p for p in plan.pairs}
        monitors: dict[str, _Monitor] = {}
        for src, info in infos:
            cmap = src.clock_maps().get(info.name)
            rec.add_stream(info, cmap)
            own = type(src).events is not FollowerSource.events
            monitors[info.name] = _Monitor(info, pairs.get(info.name), own)
            if cmap is not None:
                monitors[info.name].status.offset_ms = cmap.offset_ns * 1e-6
                monitors[info.name].status.offset_unc_ms = cmap.uncertainty_ns * 1e-6
        self.status.streams = [m.status for m in monitors.values()]
        for name in self._missing_at_start:
            rec.event(clock.now_ns(), "fault", name,
                      {"reason": "expected stream not announced at connect"})

        spans = program.spans.reset_index(drop=True)
        span_start_tick = np.ceil(spans["t_start"].to_numpy() * rate - 1e-6).astype(int)
        span_end_tick = np.ceil(spans["t_end"].to_numpy() * rate - 1e-6).astype(int)
        cues = program.cues
        cue_tick = np.ceil(cues["t"].to_numpy() * rate - 1e-6).astype(int)
        rep_counts = {name: int(((spans["choreography"] == name) & (spans["kind"] == "move"))
                                .sum()) for name in program.names}
        self.status.rep_total = int((spans["kind"] == "move").sum())
        seg_starts = {s.i_start: s for s in program.segments}
        span_open: dict[int, int] = {}   # span row -> recorded start ns
        next_span_start = 0
        next_span_end = 0
        next_cue = 0

        grader = None
        if self.on_rep_end is not None:
            grader = _Grader(self.on_rep_end, rec, clock, self.grade_worker)

        sched = Scheduler(clock, rate, start_ns=start_ns, skip_missed=False)
        view = make_view(self.console, self.status, interactive=self.interactive)
        old_handler = None
        if threading.current_thread() is threading.main_thread():
            old_handler = signal.signal(signal.SIGINT, self._on_sigint)

        real = clock.kind == "real"
        # Leader rows are handed over every 40 ms on the real clock (inside the
        # recorder's 100 ms crash bound with its 50 ms commits), every 0.2 s of
        # virtual time otherwise; followers are polled every tick on the real
        # clock and every 0.1 s of virtual time (the same samples, fewer batches).
        cmd_rows = _Rows("leader_command", 40_000_000 if real else 200_000_000)
        state_rows = _Rows("leader_state", 40_000_000 if real else 200_000_000)
        poll_every = 1 if real else max(1, min(round(0.1 * rate),
                                               int(plan.silent_after_s * rate / 4)))
        crashed = False
        next_map_ns = 0
        i = 0                      # program index of the next command
        held_ticks = 0             # ticks spent paused (shift of everything later)
        paused_for: set[str] = set()
        paused_since_ns = 0
        cmd_seq = 0
        last_q = program.q[0]
        outcome = "complete"
        state = "complete"
        stop_ramp: np.ndarray | None = None
        stop_i = 0
        lat_max = 0.0
        late_ticks = 0
        silent_limit_ns = int(plan.silent_after_s * 1e9)
        unattended = not getattr(view, "interactive", False)
        total_ns_planned = start_ns + program.n_ticks * period_ns

        def t_prog_ns(t_s: float) -> int:
            """Session time of program time t_s, with the pause shift so far."""
            return start_ns + round((t_s + held_ticks / rate) * 1e9)

        def log(text: str, level: str = "info") -> None:
            view.log(clock.now_ns() * 1e-9, text, level)

        def warn(text: str, level: str = "warning") -> None:
            self.status.warnings.append(f"{clock.now_ns() * 1e-9:7.2f} s  {text}")
            log(text, level)

        def pause(reason: str, now_ns: int) -> None:
            nonlocal paused_since_ns
            if not paused_for:
                _safe(leader.hold)
                for src in sources:  # simulated participants hold still with the robot
                    hook = getattr(src, "pause_at", None)
                    if hook is not None:
                        _safe(lambda hook=hook: hook(now_ns))
                paused_since_ns = now_ns
                rec.event(now_ns, "pause", None, {"reason": reason, "program_tick": i})
                self.status.safety = f"holding (paused: {reason})"
                log(f"paused ({reason}); the robot holds", "warning")
            paused_for.add(reason)

        def resume(reason: str, now_ns: int) -> None:
            if reason in paused_for:
                paused_for.discard(reason)
                if not paused_for:
                    for src in sources:
                        hook = getattr(src, "resume_at", None)
                        if hook is not None:
                            _safe(lambda hook=hook: hook(now_ns))
                    rec.event(now_ns, "resume", None,
                              {"reason": reason, "paused_s": (now_ns - paused_since_ns) * 1e-9})
                    self.status.safety = "moving"
                    log(f"resumed ({reason})")

        log(f"session file {rec.path}")
        log(f"clock {clock.kind}; {len(plan.items)} choreographies, {program.n_ticks} commands "
            f"at {rate:g} Hz ({program.duration_s:.1f} s); participant {self.code}")
        self.status.safety = "moving"
        try:
            with view:
                while True:
                    tick = sched.wait()
                    now = tick.deadline_ns
                    late = tick.lateness_ns * 1e-6
                    lat_max = max(lat_max, late)
                    self.status.lateness_ms = late
                    self.status.lateness_max_ms = lat_max
                    if tick.lateness_ns > LATE_TICK_FRACTION * period_ns:
                        late_ticks += 1
                        self.status.late_ticks = late_ticks
                        rec.event(now, "late_tick", None, {"k": tick.k,
                                                           "lateness_ns": tick.lateness_ns})

                    # operator
                    for key in view.keys():
                        if key == "p":
                            if "operator" in paused_for:
                                resume("operator", now)
                            elif stop_ramp is None:
                                pause("operator", now)
                        elif key == "s" and self._stop_request is None:
                            self._stop_request = "stop"
                        elif key == "a":
                            self._stop_request = "abort"
                    if self._stop_request == "abort":
                        outcome, state = "aborted", "interrupted"
                        _safe(leader.stop)
                        rec.event(now, "stop", None, {"reason": "abort", "controlled": False,
                                                      "program_tick": i})
                        self.status.safety = "stopped (aborted)"
                        warn("aborted: the robot was told to stop where it is", "fault")
                        break
                    if self._stop_request == "stop" and stop_ramp is None:
                        from echoreo.runner.ramps import ramp

                        why = self._stop_reason or ("Ctrl-C" if self._ctrl_c else "operator")
                        _, qr = ramp(robot, last_q, np.asarray(robot.rest, dtype=float), rate,
                                     plan.ramp_speed_fraction)
                        stop_ramp, stop_i = qr[1:] if len(qr) > 1 else qr, 0
                        if paused_for:
                            resume_all = set(paused_for)
                            for r in resume_all:
                                resume(r, now)
                        outcome = "silence" if self._stop_reason == "silent stream" \
                            else "stopped"
                        rec.event(now, "stop", None, {"reason": why, "controlled": True,
                                                      "program_tick": i,
                                                      "ramp_s": len(stop_ramp) / rate})
                        self.status.safety = "stopping (ramp to rest)"
                        self.status.phase = "stopping"
                        warn(f"controlled stop ({why}): ramping slowly to rest")

                    # leader
                    if not leader.alive():
                        raise LeaderLost(leader.lost_reason() or "the leader stopped answering")
                    if not paused_for:
                        if stop_ramp is not None:
                            if stop_i >= len(stop_ramp):
                                break
                            q = stop_ramp[stop_i]
                            stop_i += 1
                        else:
                            if i >= program.n_ticks:
                                break
                            q = program.q[i]
                            # segment, spans and cues due at this tick
                            if i in seg_starts:
                                self._segment(seg_starts[i], rec, now, log, program)
                            while next_span_end < len(spans) and \
                                    span_end_tick[next_span_end] <= i:
                                self._end_span(spans, next_span_end, span_open, t_prog_ns, rec,
                                               grader, log)
                                next_span_end += 1
                            while next_cue < len(cues) and cue_tick[next_cue] <= i:
                                t_ev = t_prog_ns(float(cues["t"].iloc[next_cue]))
                                text = str(cues["text"].iloc[next_cue])
                                rec.event(t_ev, "cue", None,
                                          {"text": text,
                                           "choreography": str(cues["choreography"]
                                                               .iloc[next_cue])})
                                self.status.cue = text
                                log(f"cue: {text}")
                                next_cue += 1
                            while next_span_start < len(spans) and \
                                    span_start_tick[next_span_start] <= i:
                                self._start_span(spans, next_span_start, span_open, t_prog_ns,
                                                 rec, rep_counts)
                                next_span_start += 1
                            i += 1
                        try:
                            leader.send(Command(cmd_seq, now, q))
                        except LeaderLost:
                            raise
                        except Exception as exc:
                            raise LeaderLost(f"sending command {cmd_seq} failed: {exc!r}") \
                                from exc
                        cmd_rows.add(now, now, cmd_seq, q)
                        cmd_seq += 1
                        last_q = q
                    else:
                        held_ticks += 1
                    try:
                        states = leader.read_state()
                    except LeaderLost:
                        raise
                    except Exception as exc:
                        raise LeaderLost(f"reading the leader's state failed: {exc!r}") from exc
                    for s in states:
                        state_rows.add(s.t_ns, s.t_dev_ns, s.seq, s.q)
                    if cmd_rows.due(now) or state_rows.due(now):
                        cmd_rows.flush(rec)
                        state_rows.flush(rec)

                    # followers
                    if tick.k % poll_every == 0:
                        for src in sources:
                            self._poll(src, monitors, rec, now, log)
                    for m in monitors.values():
                        self._silence(m, now, start_ns, silent_limit_ns, rec, warn, pause)
                    if "silence" in paused_for and not any(
                            m.silent_since_ns is not None for m in monitors.values()):
                        resume("silence", now)  # every paired stream is back
                    if "silence" in paused_for and any(
                            m.silent_since_ns is not None for m in monitors.values()) and (
                            unattended and now - paused_since_ns
                            > UNATTENDED_SILENCE_LIMIT_S * 1e9):
                        warn("a silent stream did not come back; stopping", "fault")
                        self._stop_request = "stop"
                        self._stop_reason = "silent stream"

                    # clock maps (they improve as exchanges accumulate): every 5 s
                    if now >= next_map_ns:
                        next_map_ns = now + 5_000_000_000
                        self._store_maps(sources, monitors, rec)

                    # grades
                    if grader is not None:
                        for job, result in grader.results():
                            text = _grade_text(job, result)
                            self.status.grades.append(text)
                            rec.event(now, "live_grade", None,
                                      {"choreography": job.choreography, "move": job.move,
                                       "step": job.step, "repetition": job.repetition,
                                       "result": _json_ready(result)})
                            log(f"grade {text}")

                    # status
                    self.status.elapsed_s = now * 1e-9
                    self.status.remaining_s = max(
                        0.0, (total_ns_planned + held_ticks * period_ns - now) * 1e-9)
                    seg = program.segment_at(min(i, program.n_ticks - 1))
                    if seg.kind == "countdown" and stop_ramp is None:
                        self.status.countdown_s = max(0.0, (seg.i_end - i) / rate)
                    else:
                        self.status.countdown_s = None
                    view.update(now * 1e-9)
        except LeaderLost as exc:
            now = clock.now_ns()
            outcome, state = "leader_lost", "interrupted"
            rec.event(now, "fault", None, {"reason": "leader lost", "detail": str(exc),
                                           "program_tick": i})
            _safe(leader.stop)
            rec.event(now, "stop", None, {"reason": "leader lost", "controlled": True})
            self.status.safety = "stopped (leader lost)"
            view.log(now * 1e-9, f"the leader was lost ({exc}); controlled stop sent, session "
                                 "marked interrupted", "fault")
        except BaseException as exc:
            now = clock.now_ns()
            crashed = True
            outcome, state = "aborted", "interrupted"
            _safe(leader.stop)
            detail = repr(exc)
            _safe(lambda: rec.event(now, "fault", None, {"reason": "runner error",
                                                         "detail": detail}))
            raise
        finally:
            if old_handler is not None:
                signal.signal(signal.SIGINT, old_handler)
            end_ns = clock.now_ns()
            if outcome in ("complete", "stopped", "silence"):
                _safe(leader.stop)
                if outcome == "complete":
                    rec.event(end_ns, "stop", None, {"reason": "end of program",
                                                     "controlled": True})
            if not crashed:
                # keep reading for a moment: samples in flight, the last states
                lag_s = max([float(getattr(src, "latency_s", 0.0)) for src in sources],
                            default=0.0)
                drain_until = end_ns + int((DRAIN_S + lag_s) * 1e9)
                while True:
                    tick = _safe(sched.wait)
                    if tick is None or tick.deadline_ns > drain_until:
                        break
                    for s in _safe(leader.read_state) or []:
                        state_rows.add(s.t_ns, s.t_dev_ns, s.seq, s.q)
                    for src in sources:
                        _safe(lambda src=src, t=tick.deadline_ns:
                              self._poll(src, monitors, rec, t, log))
            end_ns = clock.now_ns()
            _safe(lambda: self._store_maps(sources, monitors, rec))
            _safe(lambda: cmd_rows.flush(rec))
            _safe(lambda: state_rows.flush(rec))
            if grader is not None:
                grader.close()
                for job, result in grader.results():
                    _safe(lambda job=job, result=result: rec.event(
                        end_ns, "live_grade", None,
                        {"choreography": job.choreography, "move": job.move, "step": job.step,
                         "repetition": job.repetition, "result": _json_ready(result)}))
                    self.status.grades.append(_grade_text(job, result))
                    _safe(lambda job=job, result=result: view.log(
                        end_ns * 1e-9, f"grade {_grade_text(job, result)}"))
            for src in sources:
                _safe(src.close)
            _safe(leader.close)
            stats = sched.stats()
            _safe(lambda: rec.set_meta("outcome", outcome))
            _safe(lambda: rec.set_meta("tick_lateness", {
                "n": stats.n, "p50_ns": _json_ready(stats.p50_ns),
                "p99_ns": _json_ready(stats.p99_ns), "max_ns": _json_ready(stats.max_ns),
                "late_ticks": late_ticks}))
            _safe(lambda: rec.set_meta("held_s", held_ticks / rate))
            if callable(getattr(leader, "timing", None)):  # a bridge's lateness (ZmqLeader)
                bridge_timing = _safe(leader.timing)
                if bridge_timing is not None:
                    _safe(lambda: rec.set_meta("bridge_timing", bridge_timing))
                    if bridge_timing["late"] or bridge_timing["slipped"]:
                        _safe(lambda: warn(f"the bridge applied {bridge_timing['late']} "
                                           f"commands late and {bridge_timing['slipped']} "
                                           "slipped (meta bridge_timing)"))
            rec.close(state)
            self.status.phase = "ended"
        samples = {n: m.samples for n, m in monitors.items()}
        view.log(end_ns * 1e-9, f"session {outcome}: {cmd_seq} commands, "
                 + ", ".join(f"{n} {c} samples" for n, c in samples.items())
                 + f"; file {rec.path} ({state})", "end")
        return SessionResult(path=Path(rec.path), state=state, outcome=outcome, ticks=cmd_seq,
                             duration_s=end_ns * 1e-9, samples=samples,
                             lateness_p99_ms=stats.p99_ns * 1e-6,
                             lateness_max_ms=stats.max_ns * 1e-6,
                             interrupted_by_ctrl_c=self._ctrl_c)

    # -- helpers of the loop --------------------------------------------------------
    def _store_maps(self, sources: list, monitors: dict, rec: Any) -> None:
        """Store each stream's current device-to-session clock map when it changed."""
        for src in sources:
            try:
                maps = src.clock_maps()
            except Exception:
                continue
            for name, cmap in maps.items():
                m = monitors.get(name)
                if m is None or cmap is None or getattr(m, "_map", None) == cmap:
                    continue
                m._map = cmap
                rec.set_clock_map(name, cmap)
                m.status.offset_ms = cmap.offset_ns * 1e-6
                m.status.offset_unc_ms = cmap.uncertainty_ns * 1e-6

    def _segment(self, seg: Any, rec: Any, now: int, log: Callable, program: Any) -> None:
        st = self.status
        st.phase = seg.kind.replace("_", " ")
        if seg.item >= 0:
            st.choreography = program.names[seg.item]
            st.item = seg.item + 1
        if seg.kind != "choreography":
            st.move, st.step, st.repetition = "", 0, 0
        rec.event(now, "phase", None, {"phase": seg.kind, "label": seg.label,
                                       "item": seg.item})
        log(f"{seg.kind.replace('_', ' ')}: {seg.label}")

    def _start_span(self, spans: pd.DataFrame, r: int, span_open: dict, t_prog_ns: Callable,
                    rec: Any, rep_counts: dict) -> None:
        row = spans.iloc[r]
        t_ns = t_prog_ns(float(row["t_start"]))
        span_open[r] = t_ns
        st = self.status
        st.step = int(row["step"])
        st.move = str(row["move"]) if row["kind"] == "move" else f"({row['kind']})"
        if row["kind"] == "move":
            chor = str(row["choreography"])
            same = spans[(spans["choreography"] == chor) & (spans["step"] == row["step"])
                         & (spans["kind"] == "move")]
            st.repetition = int(row["repetition"])
            st.n_repetitions = int(same["repetition"].max())
            rec.event(t_ns, "rep_start", None, {"choreography": chor, "step": int(row["step"]),
                                                "move": str(row["move"]),
                                                "repetition": int(row["repetition"])})

    def _end_span(self, spans: pd.DataFrame, r: int, span_open: dict, t_prog_ns: Callable,
                  rec: Any, grader: Any, log: Callable) -> None:
        row = spans.iloc[r]
        t0 = span_open.pop(r, t_prog_ns(float(row["t_start"])))
        t1 = t_prog_ns(float(row["t_end"]))
        chor = str(row["choreography"])
        rec.set_spans(pd.DataFrame({
            "choreography": [chor], "step": [int(row["step"])], "move": [str(row["move"])],
            "repetition": [int(row["repetition"])], "kind": [str(row["kind"])],
            "t_start_ns": [t0], "t_end_ns": [t1]}), append=True)
        if row["kind"] == "move":
            self.status.rep_done += 1
            rec.event(t1, "rep_end", None, {"choreography": chor, "step": int(row["step"]),
                                            "move": str(row["move"]),
                                            "repetition": int(row["repetition"])})
            log(f"repetition done: {chor} step {int(row['step'])} {row['move']} "
                f"#{int(row['repetition'])}")
            if grader is not None:
                job = RepetitionEnd(str(rec.path), chor, str(row["move"]), int(row["step"]),
                                    int(row["repetition"]), t0 * 1e-9, t1 * 1e-9,
                                    tuple(p.as_meta() for p in self.plan.pairs), self.plan.mode)
                grader.submit(job, t1 + int(GRADE_LAG_S * 1e9))

    def _poll(self, src: FollowerSource, monitors: dict, rec: Any, now: int,
              log: Callable) -> None:
        try:
            batches = src.poll()
        except Exception as exc:  # a broken source must not stop the robot loop
            rec.event(now, "fault", None, {"reason": "follower source failed to poll",
                                           "detail": repr(exc)})
            return
        for b in batches:
            self._ingest(b, monitors, rec, now, log)
        try:
            events = src.events()
        except Exception as exc:
            events = [(now, "fault", None, {"reason": "events() failed", "detail": repr(exc)})]
        for t_ns, kind, stream, detail in events:
            rec.event(int(t_ns), str(kind), stream, detail)
            m = monitors.get(stream) if stream else None
            if m is not None and kind == "malformed":
                m.malformed += 1
                m.status.malformed = m.malformed
        try:
            health = src.health()
        except Exception:
            health = {}
        for name, h in health.items():
            m = monitors.get(name)
            if m is not None:
                if h.offset_ns == h.offset_ns:
                    m.status.offset_ms = h.offset_ns * 1e-6
                if h.offset_uncertainty_ns == h.offset_uncertainty_ns:
                    m.status.offset_unc_ms = h.offset_uncertainty_ns * 1e-6
                if h.malformed > m.malformed:
                    m.status.malformed = h.malformed

    def _ingest(self, b: Any, monitors: dict, rec: Any, now: int, log: Callable) -> None:
        m = monitors.get(getattr(b, "stream", None))
        if m is None:
            rec.event(now, "malformed", str(getattr(b, "stream", ""))[:64],
                      {"reason": "samples of a stream that was never announced"})
            return
        try:
            t = np.asarray(b.t_ns, dtype=np.int64).reshape(-1)
            td = np.asarray(b.t_dev_ns, dtype=np.int64).reshape(-1)
            sq = np.asarray(b.seq, dtype=np.int64).reshape(-1)
            d = np.asarray(b.data, dtype=np.float64)
            n = t.shape[0]
            if d.ndim == 1 and n == 1:
                d = d.reshape(1, -1)
            if td.shape != (n,) or sq.shape != (n,) or d.shape != (n, len(m.info.channels)):
                raise ValueError(f"shapes {t.shape}, {td.shape}, {sq.shape}, {d.shape} for "
                                 f"{len(m.info.channels)} channels")
        except (TypeError, ValueError) as exc:
            m.malformed += 1
            m.status.malformed = m.malformed
            rec.event(now, "malformed", m.info.name, {"reason": f"bad batch: {exc}"})
            return
        if n == 0:
            return
        # in order: strictly increasing sequence numbers and non-decreasing times
        prev_seq = np.maximum.accumulate(np.concatenate(
            [[m.last_seq if m.last_seq is not None else np.iinfo(np.int64).min], sq]))[:-1]
        prev_t = np.maximum.accumulate(np.concatenate(
            [[m.last_t_ns if m.last_t_ns is not None else np.iinfo(np.int64).min], t]))[:-1]
        ok = (sq > prev_seq) & (t >= prev_t)
        bad = int(n - ok.sum())
        if bad:
            m.malformed += bad
            m.status.malformed = m.malformed
            rec.event(now, "malformed", m.info.name,
                      {"reason": "out of order (sequence number or time went back)",
                       "count": bad})
            t, td, sq, d = t[ok], td[ok], sq[ok], d[ok]
            if t.shape[0] == 0:
                return
        steps = np.diff(np.concatenate([[m.last_seq], sq])) if m.last_seq is not None \
            else np.diff(sq)
        missing = int(np.sum(steps - 1))
        if missing > 0 and not m.own_events:
            m.dropped += missing
            m.status.dropped = m.dropped
            rec.event(now, "dropped", m.info.name, {"missing": missing,
                                                    "after_seq": int(sq[0] - 1)})
        rec.write(m.info.name, t, td, sq, d)
        m.samples += int(t.shape[0])
        m.last_seq = int(sq[-1])
        m.last_t_ns = int(t[-1])
        m.last_recv_ns = now
        if m.first_recv_ns is None:
            m.first_recv_ns = now
        m.received(now, int(t.shape[0]), int(t[-1]))
        m.status.samples = m.samples

    def _silence(self, m: _Monitor, now: int, start_ns: int, limit_ns: int, rec: Any,
                 warn: Callable, pause: Callable) -> None:
        if m.pair is None or now < start_ns:
            return
        last = m.last_recv_ns if m.last_recv_ns is not None else start_ns
        silent_for = now - last
        if m.silent_since_ns is None:
            if silent_for > limit_ns:
                m.silent_since_ns = last
                m.gaps += 1
                m.status.gaps = m.gaps
                m.status.silent = True
                if not m.own_events:
                    rec.event(now, "gap", m.info.name, {"state": "silent",
                                                        "silent_s": silent_for * 1e-9,
                                                        "last_sample_ns": m.last_t_ns})
                warn(f"stream {m.info.name} is silent (no sample for {silent_for * 1e-9:.1f} s)")
                if self.plan.on_silent == "pause":
                    pause("silence", now)
        elif m.last_recv_ns is not None and m.last_recv_ns > m.silent_since_ns:
            if not m.own_events:
                rec.event(now, "gap", m.info.name, {
                    "state": "back", "silent_s": (m.last_recv_ns - m.silent_since_ns) * 1e-9})
            self.status.warnings.append(f"{now * 1e-9:7.2f} s  stream {m.info.name} is back")
            m.silent_since_ns = None
            m.status.silent = False


def _safe(fn: Callable) -> Any:
    """Call ``fn`` and swallow any error (used while shutting down)."""
    try:
        return fn()
    except Exception:
        return None


def run_session(plan: SessionPlan | str | Path, *, out_dir: str | Path,
                clock: str = "auto", participant: str | None = None, console: Any = None,
                on_repetition_end: Callable[[RepetitionEnd], Any] | None = None,
                grade_worker: str = "thread", interactive: bool | None = None,
                result: list | None = None) -> Path:
    """Run one session of a plan and return the path of its session file.

    Parameters
    ----------
    plan : SessionPlan or path
        The plan (loaded with :func:`~echoreo.runner.plan.load_plan` when a path).
    out_dir : str or Path
        Folder for the session file (created if needed); the file is named
        ``<study>_<participant>_<UTC start>.sqlite``.
    clock : {"auto", "real", "virtual"}
        ``auto``: virtual when every adapter is simulated, else real.
        ``virtual`` is refused for plans with a ZeroMQ adapter.
    participant : str, optional
        Participant code overriding the plan's.
    console : rich.console.Console, optional
        Where the live view or the log lines go (a quiet console by default).
    on_repetition_end : callable, optional
        Called with a :class:`RepetitionEnd` for every finished repetition,
        off the command loop (:data:`GRADE_LAG_S` after its end, once the
        recorder has committed it); a dict it returns (``grade``, ``band``,
        ``flags``) is shown in the live view and logged as a ``live_grade`` event.
    grade_worker : {"thread", "process"}
        Run the callback in a worker thread, or in a worker process (the
        callback must then be picklable, e.g. a module-level function) so
        heavy scoring never competes with the command loop for the GIL.
    interactive : bool, optional
        Force the live view with keys (True) or plain log lines (False);
        default: live view when the console and stdin are terminals.
    result : list, optional
        When given, the :class:`SessionResult` is appended to it.

    Returns
    -------
    Path
        The session file, closed ``complete`` or ``interrupted``.

    Raises
    ------
    PlanError
        The plan is invalid, the participant code is missing or refused, the
        virtual clock was asked for a plan with sockets, the leader's joints do
        not match the robot, or a command would exceed a limit (nothing has
        moved then, and no file is written).
    """
    if not isinstance(plan, SessionPlan):
        plan = load_plan(plan, participant=participant)
    if console is None:
        from rich.console import Console

        console = Console(quiet=True)
    sess = _Session(plan, out_dir=Path(out_dir), clock=clock, participant=participant,
                    console=console, on_repetition_end=on_repetition_end,
                    grade_worker=grade_worker, interactive=interactive)
    res = sess.run()
    if result is not None:
        result.append(res)
    return res.path

