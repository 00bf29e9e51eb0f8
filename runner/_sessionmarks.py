"""The program's marks during a session: segments, spans and cues as their ticks come.

:class:`_Marks` places the session program's segments (``phase`` events),
the timelines' spans (``rep_start``/``rep_end`` events and the ``spans``
table, written as each ends) and cues (``cue`` events) on the session clock,
shifted by the ticks spent paused, and hands every finished repetition to the
live-grade worker.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from echoreo.runner._sessiongrades import GRADE_LAG_S, RepetitionEnd
from echoreo.runner.liveview import SessionStatus
from echoreo.runner.program import SessionProgram

__all__: list[str] = []


class _Marks:
    """Segments, spans and cues of a program, logged at the command ticks they fall on.

    A mark at program time ``t`` s falls on the first tick ``i`` with
    ``i >= t rate`` (``ceil(t rate - 1e-6)``); its session time is
    ``start_ns + (t + held_ticks / rate) 1e9`` ns (``t_prog_ns``).

    Parameters
    ----------
    program : SessionProgram
        The session program (its ``rate_hz``, ``spans``, ``cues``, ``segments``).
    plan : SessionPlan
        The plan (pairs and mode for :class:`RepetitionEnd`).
    rec : Recorder
        The open session file.
    status : SessionStatus
        The live view's status (phase, choreography, step, move, repetition).
    """

    def __init__(self, program: SessionProgram, plan: Any, rec: Any, status: SessionStatus):
        self.program = program
        self.plan = plan
        self.rec = rec
        self.status = status
        rate = program.rate_hz
        spans = program.spans.reset_index(drop=True)
        self.spans = spans
        self.span_start_tick = np.ceil(spans["t_start"].to_numpy() * rate - 1e-6).astype(int)
        self.span_end_tick = np.ceil(spans["t_end"].to_numpy() * rate - 1e-6).astype(int)
        self.cues = program.cues
        self.cue_tick = np.ceil(self.cues["t"].to_numpy() * rate - 1e-6).astype(int)
        status.rep_total = int((spans["kind"] == "move").sum())
        self.seg_starts = {s.i_start: s for s in program.segments}
        self.span_open: dict[int, int] = {}   # span row -> recorded start ns
        self.next_span_start = 0
        self.next_span_end = 0
        self.next_cue = 0

    def at_tick(self, i: int, now: int, t_prog_ns: Callable[[float], int], log: Callable,
                grader: Any) -> None:
        """Log the segment start, span ends, cues and span starts due at program tick ``i``.

        Parameters
        ----------
        i : int
            Program index of the command about to be sent.
        now : int
            Its deadline on the session clock, ns.
        t_prog_ns : callable
            Session time, ns, of a program time, s (with the pause shift so far).
        log : callable
            ``log(text)`` to the live view.
        grader : _Grader or None
            Gets every finished repetition.
        """
        spans, cues = self.spans, self.cues
        if i in self.seg_starts:
            self._segment(self.seg_starts[i], now, log)
        while self.next_span_end < len(spans) and self.span_end_tick[self.next_span_end] <= i:
            self._end_span(self.next_span_end, t_prog_ns, grader, log)
            self.next_span_end += 1
        while self.next_cue < len(cues) and self.cue_tick[self.next_cue] <= i:
            t_ev = t_prog_ns(float(cues["t"].iloc[self.next_cue]))
            text = str(cues["text"].iloc[self.next_cue])
            self.rec.event(t_ev, "cue", None,
                           {"text": text,
                            "choreography": str(cues["choreography"].iloc[self.next_cue])})
            self.status.cue = text
            log(f"cue: {text}")
            self.next_cue += 1
        while self.next_span_start < len(spans) and \
                self.span_start_tick[self.next_span_start] <= i:
            self._start_span(self.next_span_start, t_prog_ns)
            self.next_span_start += 1

    def _segment(self, seg: Any, now: int, log: Callable) -> None:
        st = self.status
        st.phase = seg.kind.replace("_", " ")
        if seg.item >= 0:
            st.choreography = self.program.names[seg.item]
            st.item = seg.item + 1
        if seg.kind != "choreography":
            st.move, st.step, st.repetition = "", 0, 0
        self.rec.event(now, "phase", None, {"phase": seg.kind, "label": seg.label,
                                            "item": seg.item})
        log(f"{seg.kind.replace('_', ' ')}: {seg.label}")

    def _start_span(self, r: int, t_prog_ns: Callable[[float], int]) -> None:
        spans = self.spans
        row = spans.iloc[r]
        t_ns = t_prog_ns(float(row["t_start"]))
        self.span_open[r] = t_ns
        st = self.status
        st.step = int(row["step"])
        st.move = str(row["move"]) if row["kind"] == "move" else f"({row['kind']})"
        if row["kind"] == "move":
            chor = str(row["choreography"])
            same = spans[(spans["choreography"] == chor) & (spans["step"] == row["step"])
                         & (spans["kind"] == "move")]
            st.repetition = int(row["repetition"])
            st.n_repetitions = int(same["repetition"].max())
            self.rec.event(t_ns, "rep_start", None,
                           {"choreography": chor, "step": int(row["step"]),
                            "move": str(row["move"]), "repetition": int(row["repetition"])})

    def _end_span(self, r: int, t_prog_ns: Callable[[float], int], grader: Any,
                  log: Callable) -> None:
        row = self.spans.iloc[r]
        rec = self.rec
        t0 = self.span_open.pop(r, t_prog_ns(float(row["t_start"])))
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
