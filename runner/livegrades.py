"""Live grades: score each repetition as soon as it ends, off the command loop.

:func:`score_repetition` is the ``on_repetition_end`` callback that
``echoreo session`` uses (issue 5, item 2). The session runner calls it in a
worker process (``grade_worker="process"``), one repetition at a time, after
the repetition's end plus the lag allowance, once the recorder has committed
the samples; the command loop only appends the finished repetition to a
queue, so scoring never competes with it for the interpreter.

It scores the session file as recorded so far with
:func:`echoreo.scoring.score_session` (the same pure function offline scoring
uses, so a live grade is the grade the file gives at that moment; the
embedding parameters are chosen from the repetitions recorded so far, so a
later offline score of the whole session may differ slightly) and returns the
records of the repetition that just ended, one per paired stream.
"""

from __future__ import annotations

from typing import Any

__all__ = ["score_repetition"]


def score_repetition(job: Any) -> list[dict]:
    """Grades of one finished repetition, one entry per paired stream.

    Parameters
    ----------
    job : RepetitionEnd
        The repetition (session file, choreography, step, repetition).

    Returns
    -------
    list of dict
        ``{stream, grade, band, flags}`` for each paired stream scored; an
        empty list when the repetition could not be scored yet.
    """
    from echoreo.scoring import score_session

    rec = score_session(job.session_path).records
    mine = rec[(rec["choreography"] == job.choreography) & (rec["step"] == job.step)
               & (rec["repetition"] == job.repetition)]
    out = []
    for r in mine.itertuples():
        grade = None if r.grade != r.grade else float(r.grade)  # NaN -> None
        out.append({"stream": str(r.stream), "grade": grade, "band": str(r.band),
                    "flags": list(r.flags) if isinstance(r.flags, list | tuple) else []})
    return out
