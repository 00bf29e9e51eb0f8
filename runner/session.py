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

This module is the entry point and re-exports the public names of its
parts: :mod:`~echoreo.runner._sessionadapters` (adapters from the plan),
:mod:`~echoreo.runner._sessionstart` (steps 2-5: clock, hello, program,
followers, file name and ``meta``), :mod:`~echoreo.runner._sessionloop`
(step 6, the timed command loop), :mod:`~echoreo.runner._sessionmarks`
(segments, spans and cues on the session clock),
:mod:`~echoreo.runner._sessionstreams` (follower ingest, gaps, silence,
health), :mod:`~echoreo.runner._sessiongrades` (the live-grade worker) and
:mod:`~echoreo.runner._sessionfinish` (step 7, closing the file and the
:class:`SessionResult`).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

from echoreo.errors import PlanError, Problem
from echoreo.runner._sessionadapters import _close_all, _safe
from echoreo.runner._sessionadapters import make_followers as make_followers
from echoreo.runner._sessionadapters import make_leader as make_leader
from echoreo.runner._sessionfinish import DRAIN_S as DRAIN_S
from echoreo.runner._sessionfinish import SessionResult
from echoreo.runner._sessiongrades import GRADE_LAG_S as GRADE_LAG_S
from echoreo.runner._sessiongrades import RepetitionEnd
from echoreo.runner._sessionloop import LATE_TICK_FRACTION as LATE_TICK_FRACTION
from echoreo.runner._sessionloop import UNATTENDED_SILENCE_LIMIT_S as UNATTENDED_SILENCE_LIMIT_S
from echoreo.runner._sessionloop import _Loop
from echoreo.runner._sessionstart import START_DELAY_S as START_DELAY_S
from echoreo.runner._sessionstart import (
    connect,
    make_clock,
    new_session_path,
    session_file_name,
    session_meta,
)
from echoreo.runner.liveview import SessionStatus
from echoreo.runner.plan import SessionPlan, check_participant_code, load_plan

__all__ = ["RepetitionEnd", "SessionResult", "run_session", "session_file_name"]


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

    def run(self) -> SessionResult:
        """Start up (nothing moves before every check passed), play, close the file."""
        from echoreo.runner.recorder import Recorder

        plan = self.plan
        timelines = [it.choreography.compile(plan.command_rate_hz) for it in plan.items]
        clock = make_clock(self.clock_choice, plan)
        self.status.clock = clock.kind
        ready = connect(plan, clock, timelines)
        meta = session_meta(plan, self.code, clock, ready)
        path = new_session_path(self.out_dir, plan.study, self.code, clock.utc_start)
        try:
            rec = Recorder(path, meta)
        except BaseException:
            _close_all(ready.sources, ready.leader)
            raise
        self.status.path = str(path)
        try:
            loop = _Loop(plan, self.status, self.code, clock, ready, rec, console=self.console,
                         interactive=self.interactive, on_repetition_end=self.on_rep_end,
                         grade_worker=self.grade_worker)
            return loop.run()
        finally:
            # the loop closes everything itself; this covers a failure before it runs
            _close_all(ready.sources, ready.leader)
            _safe(lambda: rec.close("interrupted"))


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

