"""Live grades: the ``on_repetition_end`` callback run off the command loop.

:class:`RepetitionEnd` is what the callback gets; :class:`_Grader` runs it in
a worker thread (or process) once the repetition's samples are committed;
:func:`_grade_text` is the live view's line for what it returns and
:func:`_json_ready` makes that storable as a ``live_grade`` event.
"""

from __future__ import annotations

import math
import threading
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["GRADE_LAG_S", "RepetitionEnd"]

#: Seconds after a repetition's end before its live grade is computed
#: (the follower's lag; the participant finishes after the robot).
GRADE_LAG_S = 1.0


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
