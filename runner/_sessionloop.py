"""The timed command loop of a session.

:class:`_Loop` plays the session program on the
:class:`~echoreo.runner.clock.Scheduler` with absolute deadlines, one
command per tick: the operator's keys and Ctrl-C, the controlled stop (a slow
ramp to rest) and the abort, pauses and resumes, the marks due at each tick
(:mod:`~echoreo.runner._sessionmarks`), the leader's states, the followers
(:mod:`~echoreo.runner._sessionstreams`), clock maps, live grades and the
live view's status. A lost leader ends the loop with a controlled stop;
:func:`~echoreo.runner._sessionfinish.finish` closes the session in any case.

Ticks are never skipped: a late tick still sends the next command of the
program (a skipped command would make the robot jump), so commanded samples
are identical on the real and the virtual clock.
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Callable
from typing import Any

import numpy as np

from echoreo.adapters.base import Command, StreamInfo
from echoreo.errors import LeaderLost
from echoreo.runner._sessionadapters import _safe
from echoreo.runner._sessionfinish import SessionResult, finish, summary
from echoreo.runner._sessiongrades import _grade_text, _Grader, _json_ready
from echoreo.runner._sessionmarks import _Marks
from echoreo.runner._sessionstart import _Connected
from echoreo.runner._sessionstreams import _Followers, _Rows
from echoreo.runner.liveview import SessionStatus, make_view

__all__ = ["LATE_TICK_FRACTION", "UNATTENDED_SILENCE_LIMIT_S"]

#: A tick this late (fraction of a command period) is logged as ``late_tick``.
LATE_TICK_FRACTION = 0.5
#: Longest pause for a silent stream without an operator to decide, s.
UNATTENDED_SILENCE_LIMIT_S = 30.0


class _Loop:
    """One play of a connected session's program into its open session file.

    Parameters
    ----------
    plan : SessionPlan
    status : SessionStatus
        The live view's status, kept up to date every tick.
    code : str
        The participant code.
    clock : SessionClock or VirtualClock
    ready : _Connected
        The connected leader and followers, the checked program and its start, ns.
    rec : Recorder
        The open session file.
    console, interactive
        Where the live view goes, and whether it takes keys (:func:`make_view`).
    on_repetition_end : callable or None
        The live-grade callback (:class:`~echoreo.runner._sessiongrades._Grader`).
    grade_worker : {"thread", "process"}
    """

    def __init__(self, plan: Any, status: SessionStatus, code: str, clock: Any,
                 ready: _Connected, rec: Any, *, console: Any, interactive: bool | None,
                 on_repetition_end: Callable | None, grade_worker: str):
        from echoreo.runner.clock import Scheduler

        self.plan = plan
        self.status = status
        self.code = code
        self.clock = clock
        self.rec = rec
        self.leader = ready.leader
        self.sources = ready.sources
        self.program = program = ready.program
        self.start_ns = start_ns = ready.start_ns
        self.rate = rate = program.rate_hz
        self.period_ns = 1e9 / rate
        names = tuple(plan.robot.joint_names)
        units = tuple("rad" for _ in names)
        rec.add_stream(StreamInfo("leader_command", "joints", names, units, rate,
                                  f"{plan.leader.adapter} leader (commands)"))
        rec.add_stream(StreamInfo("leader_state", "joints", names, units, rate,
                                  f"{plan.leader.adapter} leader (measured)"))
        self.followers = _Followers(plan, self.sources, ready.infos, rec, status)
        for name in ready.missing:
            rec.event(clock.now_ns(), "fault", name,
                      {"reason": "expected stream not announced at connect"})
        self.marks = _Marks(program, plan, rec, status)
        self.grader = None
        if on_repetition_end is not None:
            self.grader = _Grader(on_repetition_end, rec, clock, grade_worker)

        self.sched = Scheduler(clock, rate, start_ns=start_ns, skip_missed=False)
        self.view = make_view(console, status, interactive=interactive)
        #: "stop" (controlled) or "abort", from a key, Ctrl-C or an unanswered silence
        self.stop_request: str | None = None
        self.stop_reason: str | None = None
        self.ctrl_c = False
        self.old_handler = None
        if threading.current_thread() is threading.main_thread():
            self.old_handler = signal.signal(signal.SIGINT, self._on_sigint)

        real = clock.kind == "real"
        # Leader rows are handed over every 40 ms on the real clock (inside the
        # recorder's 100 ms crash bound with its 50 ms commits), every 0.2 s of
        # virtual time otherwise; followers are polled every tick on the real
        # clock and every 0.1 s of virtual time (the same samples, fewer batches).
        self.cmd_rows = _Rows("leader_command", 40_000_000 if real else 200_000_000)
        self.state_rows = _Rows("leader_state", 40_000_000 if real else 200_000_000)
        self.poll_every = 1 if real else max(1, min(round(0.1 * rate),
                                                    int(plan.silent_after_s * rate / 4)))
        self.crashed = False
        self.next_map_ns = 0
        self.i = 0                      # program index of the next command
        self.held_ticks = 0             # ticks spent paused (shift of everything later)
        self.paused_for: set[str] = set()
        self.paused_since_ns = 0
        self.cmd_seq = 0
        self.last_q = program.q[0]
        self.outcome = "complete"
        self.state = "complete"
        self.stop_ramp: np.ndarray | None = None
        self.stop_i = 0
        self.lat_max = 0.0
        self.late_ticks = 0
        self.silent_limit_ns = int(plan.silent_after_s * 1e9)
        self.unattended = not getattr(self.view, "interactive", False)
        self.total_ns_planned = start_ns + program.n_ticks * self.period_ns

    # -- small helpers ----------------------------------------------------------
    def t_prog_ns(self, t_s: float) -> int:
        """Session time, ns, of program time ``t_s``, s, with the pause shift so far."""
        return self.start_ns + round((t_s + self.held_ticks / self.rate) * 1e9)

    def log(self, text: str, level: str = "info") -> None:
        self.view.log(self.clock.now_ns() * 1e-9, text, level)

    def warn(self, text: str, level: str = "warning") -> None:
        self.status.warnings.append(f"{self.clock.now_ns() * 1e-9:7.2f} s  {text}")
        self.log(text, level)

    def _on_sigint(self, signum: int, frame: Any) -> None:
        if self.stop_request is not None:
            self.stop_request = "abort"  # a second Ctrl-C aborts
        else:
            self.stop_request = "stop"
        self.ctrl_c = True

    def pause(self, reason: str, now_ns: int) -> None:
        """Hold the robot (and simulated participants) for ``reason``; reasons add up."""
        if not self.paused_for:
            _safe(self.leader.hold)
            for src in self.sources:  # simulated participants hold still with the robot
                hook = getattr(src, "pause_at", None)
                if hook is not None:
                    _safe(lambda hook=hook: hook(now_ns))
            self.paused_since_ns = now_ns
            self.rec.event(now_ns, "pause", None, {"reason": reason, "program_tick": self.i})
            self.status.safety = f"holding (paused: {reason})"
            self.log(f"paused ({reason}); the robot holds", "warning")
        self.paused_for.add(reason)

    def resume(self, reason: str, now_ns: int) -> None:
        """Drop ``reason``; the robot moves on once no reason is left."""
        if reason in self.paused_for:
            self.paused_for.discard(reason)
            if not self.paused_for:
                for src in self.sources:
                    hook = getattr(src, "resume_at", None)
                    if hook is not None:
                        _safe(lambda hook=hook: hook(now_ns))
                self.rec.event(now_ns, "resume", None,
                               {"reason": reason,
                                "paused_s": (now_ns - self.paused_since_ns) * 1e-9})
                self.status.safety = "moving"
                self.log(f"resumed ({reason})")

    # -- the loop ---------------------------------------------------------------
    def run(self) -> SessionResult:
        """Play the program, close the session file and say how it ended."""
        program = self.program
        self.log(f"session file {self.rec.path}")
        self.log(f"clock {self.clock.kind}; {len(self.plan.items)} choreographies, "
                 f"{program.n_ticks} commands at {self.rate:g} Hz "
                 f"({program.duration_s:.1f} s); participant {self.code}")
        self.status.safety = "moving"
        try:
            with self.view:
                while True:
                    tick = self.sched.wait()
                    now = tick.deadline_ns
                    self._lateness(tick, now)
                    self._keys(now)
                    if self.stop_request == "abort":
                        self._abort(now)
                        break
                    if self.stop_request == "stop" and self.stop_ramp is None:
                        self._begin_stop(now)
                    if not self._command(now):
                        break
                    self._leader_states(now)
                    self._follow(tick.k, now)
                    # clock maps (they improve as exchanges accumulate): every 5 s
                    if now >= self.next_map_ns:
                        self.next_map_ns = now + 5_000_000_000
                        self.followers.store_maps()
                    self._grades(now)
                    self._show(now)
        except LeaderLost as exc:
            self._leader_lost(exc)
        except BaseException as exc:
            now = self.clock.now_ns()
            self.crashed = True
            self.outcome, self.state = "aborted", "interrupted"
            _safe(self.leader.stop)
            detail = repr(exc)
            _safe(lambda: self.rec.event(now, "fault", None, {"reason": "runner error",
                                                              "detail": detail}))
            raise
        finally:
            end_ns, stats = finish(self)
        return summary(self, end_ns, stats)

    def _lateness(self, tick: Any, now: int) -> None:
        late = tick.lateness_ns * 1e-6
        self.lat_max = max(self.lat_max, late)
        self.status.lateness_ms = late
        self.status.lateness_max_ms = self.lat_max
        if tick.lateness_ns > LATE_TICK_FRACTION * self.period_ns:
            self.late_ticks += 1
            self.status.late_ticks = self.late_ticks
            self.rec.event(now, "late_tick", None, {"k": tick.k,
                                                    "lateness_ns": tick.lateness_ns})

    def _keys(self, now: int) -> None:
        """The operator: ``p`` pauses or resumes, ``s`` stops, ``a`` aborts."""
        for key in self.view.keys():
            if key == "p":
                if "operator" in self.paused_for:
                    self.resume("operator", now)
                elif self.stop_ramp is None:
                    self.pause("operator", now)
            elif key == "s" and self.stop_request is None:
                self.stop_request = "stop"
            elif key == "a":
                self.stop_request = "abort"

    def _abort(self, now: int) -> None:
        self.outcome, self.state = "aborted", "interrupted"
        _safe(self.leader.stop)
        self.rec.event(now, "stop", None, {"reason": "abort", "controlled": False,
                                           "program_tick": self.i})
        self.status.safety = "stopped (aborted)"
        self.warn("aborted: the robot was told to stop where it is", "fault")

    def _begin_stop(self, now: int) -> None:
        """The controlled stop: a slow ramp from the last command to rest, then ``stop``."""
        from echoreo.runner.ramps import ramp

        robot = self.plan.robot
        why = self.stop_reason or ("Ctrl-C" if self.ctrl_c else "operator")
        _, qr = ramp(robot, self.last_q, np.asarray(robot.rest, dtype=float), self.rate,
                     self.plan.ramp_speed_fraction)
        self.stop_ramp, self.stop_i = qr[1:] if len(qr) > 1 else qr, 0
        if self.paused_for:
            resume_all = set(self.paused_for)
            for r in resume_all:
                self.resume(r, now)
        self.outcome = "silence" if self.stop_reason == "silent stream" else "stopped"
        self.rec.event(now, "stop", None, {"reason": why, "controlled": True,
                                           "program_tick": self.i,
                                           "ramp_s": len(self.stop_ramp) / self.rate})
        self.status.safety = "stopping (ramp to rest)"
        self.status.phase = "stopping"
        self.warn(f"controlled stop ({why}): ramping slowly to rest")

    def _command(self, now: int) -> bool:
        """Send this tick's command (none while paused); False when nothing is left."""
        leader = self.leader
        if not leader.alive():
            raise LeaderLost(leader.lost_reason() or "the leader stopped answering")
        if self.paused_for:
            self.held_ticks += 1
            return True
        if self.stop_ramp is not None:
            if self.stop_i >= len(self.stop_ramp):
                return False
            q = self.stop_ramp[self.stop_i]
            self.stop_i += 1
        else:
            if self.i >= self.program.n_ticks:
                return False
            q = self.program.q[self.i]
            self.marks.at_tick(self.i, now, self.t_prog_ns, self.log, self.grader)
            self.i += 1
        try:
            leader.send(Command(self.cmd_seq, now, q))
        except LeaderLost:
            raise
        except Exception as exc:
            raise LeaderLost(f"sending command {self.cmd_seq} failed: {exc!r}") from exc
        self.cmd_rows.add(now, now, self.cmd_seq, q)
        self.cmd_seq += 1
        self.last_q = q
        return True

    def _leader_states(self, now: int) -> None:
        try:
            states = self.leader.read_state()
        except LeaderLost:
            raise
        except Exception as exc:
            raise LeaderLost(f"reading the leader's state failed: {exc!r}") from exc
        for s in states:
            self.state_rows.add(s.t_ns, s.t_dev_ns, s.seq, s.q)
        if self.cmd_rows.due(now) or self.state_rows.due(now):
            self.cmd_rows.flush(self.rec)
            self.state_rows.flush(self.rec)

    def _follow(self, k: int, now: int) -> None:
        """Poll the followers, watch for silence; resume or stop after a silence."""
        followers = self.followers
        if k % self.poll_every == 0:
            for src in self.sources:
                followers.poll(src, now)
        for m in followers.monitors.values():
            followers.silence(m, now, self.start_ns, self.silent_limit_ns, self.warn,
                              self.pause)
        if "silence" in self.paused_for and not followers.any_silent():
            self.resume("silence", now)  # every paired stream is back
        if "silence" in self.paused_for and followers.any_silent() and (
                self.unattended and now - self.paused_since_ns
                > UNATTENDED_SILENCE_LIMIT_S * 1e9):
            self.warn("a silent stream did not come back; stopping", "fault")
            self.stop_request = "stop"
            self.stop_reason = "silent stream"

    def _grades(self, now: int) -> None:
        if self.grader is None:
            return
        for job, result in self.grader.results():
            text = _grade_text(job, result)
            self.status.grades.append(text)
            self.rec.event(now, "live_grade", None,
                           {"choreography": job.choreography, "move": job.move,
                            "step": job.step, "repetition": job.repetition,
                            "result": _json_ready(result)})
            self.log(f"grade {text}")

    def _show(self, now: int) -> None:
        st, program = self.status, self.program
        st.elapsed_s = now * 1e-9
        st.remaining_s = max(
            0.0, (self.total_ns_planned + self.held_ticks * self.period_ns - now) * 1e-9)
        seg = program.segment_at(min(self.i, program.n_ticks - 1))
        if seg.kind == "countdown" and self.stop_ramp is None:
            st.countdown_s = max(0.0, (seg.i_end - self.i) / self.rate)
        else:
            st.countdown_s = None
        self.view.update(now * 1e-9)

    def _leader_lost(self, exc: LeaderLost) -> None:
        now = self.clock.now_ns()
        self.outcome, self.state = "leader_lost", "interrupted"
        self.rec.event(now, "fault", None, {"reason": "leader lost", "detail": str(exc),
                                            "program_tick": self.i})
        _safe(self.leader.stop)
        self.rec.event(now, "stop", None, {"reason": "leader lost", "controlled": True})
        self.status.safety = "stopped (leader lost)"
        self.view.log(now * 1e-9, f"the leader was lost ({exc}); controlled stop sent, "
                                  "session marked interrupted", "fault")
