"""The end of a session: drain, close and record the summary; :class:`SessionResult`.

:func:`finish` runs whatever ended the command loop (the program's end, a
stop, an abort, a lost leader, an error): the final ``stop``, a short drain of
samples still in flight, the last rows, clock maps and live grades, the
adapters' close, the summary in ``meta`` (``outcome``, ``tick_lateness``,
``held_s``, ``bridge_timing``), and the file's close ``complete`` or
``interrupted``. :func:`summary` is the closing log line and the result.
"""

from __future__ import annotations

import signal
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from echoreo.runner._sessionadapters import _close_all, _safe
from echoreo.runner._sessiongrades import _grade_text, _json_ready

__all__ = ["DRAIN_S", "SessionResult"]

#: After the last command, followers and the leader are read this long, s
#: (samples still in flight, the state after the last command).
DRAIN_S = 0.25


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


def finish(loop: Any) -> tuple[int, Any]:
    """Close the session of a command loop that has ended (any way).

    Parameters
    ----------
    loop : _Loop
        The loop (:mod:`echoreo.runner._sessionloop`): its outcome and state,
        adapters, scheduler, rows, followers, grader and recorder.

    Returns
    -------
    end_ns : int
        Session time after the drain, ns.
    stats : LatenessStats
        The scheduler's tick lateness.
    """
    clock, leader, rec, sources = loop.clock, loop.leader, loop.rec, loop.sources
    if loop.old_handler is not None:
        signal.signal(signal.SIGINT, loop.old_handler)
    end_ns = clock.now_ns()
    if loop.outcome in ("complete", "stopped", "silence"):
        _safe(leader.stop)
        if loop.outcome == "complete":
            rec.event(end_ns, "stop", None, {"reason": "end of program", "controlled": True})
    if not loop.crashed:
        # keep reading for a moment: samples in flight, the last states
        lag_s = max([float(getattr(src, "latency_s", 0.0)) for src in sources], default=0.0)
        drain_until = end_ns + int((DRAIN_S + lag_s) * 1e9)
        while True:
            tick = _safe(loop.sched.wait)
            if tick is None or tick.deadline_ns > drain_until:
                break
            for s in _safe(leader.read_state) or []:
                loop.state_rows.add(s.t_ns, s.t_dev_ns, s.seq, s.q)
            for src in sources:
                _safe(lambda src=src, t=tick.deadline_ns: loop.followers.poll(src, t))
    end_ns = clock.now_ns()
    _safe(loop.followers.store_maps)
    _safe(lambda: loop.cmd_rows.flush(rec))
    _safe(lambda: loop.state_rows.flush(rec))
    grader = loop.grader
    if grader is not None:
        grader.close()
        for job, result in grader.results():
            _safe(lambda job=job, result=result: rec.event(
                end_ns, "live_grade", None,
                {"choreography": job.choreography, "move": job.move, "step": job.step,
                 "repetition": job.repetition, "result": _json_ready(result)}))
            loop.status.grades.append(_grade_text(job, result))
            _safe(lambda job=job, result=result: loop.view.log(
                end_ns * 1e-9, f"grade {_grade_text(job, result)}"))
    _close_all(sources, leader)
    stats = loop.sched.stats()
    _safe(lambda: rec.set_meta("outcome", loop.outcome))
    _safe(lambda: rec.set_meta("tick_lateness", {
        "n": stats.n, "p50_ns": _json_ready(stats.p50_ns),
        "p99_ns": _json_ready(stats.p99_ns), "max_ns": _json_ready(stats.max_ns),
        "late_ticks": loop.late_ticks}))
    _safe(lambda: rec.set_meta("held_s", loop.held_ticks / loop.rate))
    if callable(getattr(leader, "timing", None)):  # a bridge's lateness (ZmqLeader)
        bridge_timing = _safe(leader.timing)
        if bridge_timing is not None:
            _safe(lambda: rec.set_meta("bridge_timing", bridge_timing))
            if bridge_timing["late"] or bridge_timing["slipped"]:
                _safe(lambda: loop.warn(f"the bridge applied {bridge_timing['late']} "
                                        f"commands late and {bridge_timing['slipped']} "
                                        "slipped (meta bridge_timing)"))
    rec.close(loop.state)
    loop.status.phase = "ended"
    return end_ns, stats


def summary(loop: Any, end_ns: int, stats: Any) -> SessionResult:
    """Log the closing line of a finished loop and return its :class:`SessionResult`."""
    samples = {n: m.samples for n, m in loop.followers.monitors.items()}
    loop.view.log(end_ns * 1e-9, f"session {loop.outcome}: {loop.cmd_seq} commands, "
                  + ", ".join(f"{n} {c} samples" for n, c in samples.items())
                  + f"; file {loop.rec.path} ({loop.state})", "end")
    return SessionResult(path=Path(loop.rec.path), state=loop.state, outcome=loop.outcome,
                         ticks=loop.cmd_seq, duration_s=end_ns * 1e-9, samples=samples,
                         lateness_p99_ms=stats.p99_ns * 1e-6,
                         lateness_max_ms=stats.max_ns * 1e-6,
                         interrupted_by_ctrl_c=loop.ctrl_c)
