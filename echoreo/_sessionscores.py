"""Writing a session's scores into its file: :func:`write_scores`.

The scoring side's only write to a session file (the ``scores`` table;
DEVELOPERS.md, "Session file"). Re-exported by :mod:`echoreo.sessionfile`.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from echoreo._sessionreader import SessionFile
from echoreo._sessionschema import _plain, _utc_now, to_json
from echoreo.errors import Problem, SessionFileError

__all__ = ["write_scores"]

_SCORE_KEYS = ("stream", "move", "step", "repetition", "grade", "band")


def write_scores(path: str | Path, records: pd.DataFrame | Iterable[Mapping[str, Any]], *,
                 scored_utc: str | None = None) -> int:
    """Replace the scores stored in a session file.

    Parameters
    ----------
    path : str or Path
        The session file.
    records : DataFrame or iterable of mapping
        Score records (DEVELOPERS.md, "Score records"), one per repetition ×
        paired stream. Each needs ``stream``, ``move``, ``step``, ``repetition``,
        ``grade``, ``band``; ``flags`` (list of str) is optional; the whole record
        is stored as JSON in ``record`` (NaN → null).
    scored_utc : str, optional
        ISO 8601 time of scoring; now (UTC) by default.

    Returns
    -------
    int
        Number of rows written.

    Notes
    -----
    One file holds one session, so "the previous scores of the same session"
    are all rows of ``scores``: they are deleted and the new rows inserted in
    one transaction (readers see either the old or the new set, never a mix).
    """
    sf = SessionFile(path)  # validates format, marks a crashed file interrupted
    sf.close()
    if isinstance(records, pd.DataFrame):
        recs = records.to_dict(orient="records")
    else:
        recs = [dict(r) for r in records]
    stamp = scored_utc or _utc_now()
    rows = []
    for i, rec in enumerate(recs):
        missing = [k for k in _SCORE_KEYS if k not in rec]
        if missing:
            raise SessionFileError(Problem(
                f"score record {i} lacks {', '.join(missing)}", str(path),
                hint="pass the records of echoreo.scoring.score_session(...).records"))
        plain = _plain(rec)
        flags = plain.get("flags") or []
        if isinstance(flags, str):
            flags = [flags]
        grade = plain.get("grade")
        rows.append((plain["stream"], plain["move"],
                     None if plain["step"] is None else int(plain["step"]),
                     None if plain["repetition"] is None else int(plain["repetition"]),
                     None if grade is None else float(grade), plain["band"],
                     to_json(flags), to_json(plain), stamp))
    try:
        conn = sqlite3.connect(f"{Path(path).resolve().as_uri()}?mode=rw", uri=True,
                               timeout=30.0)
    except sqlite3.OperationalError as exc:
        raise SessionFileError(Problem(f"cannot open the session file for writing ({exc})",
                                       str(path), hint="check the file's permissions")) from exc
    try:
        with conn:
            conn.execute("BEGIN IMMEDIATE")
            conn.execute("DELETE FROM scores")
            conn.executemany("INSERT INTO scores (stream, move, step, repetition, grade, band, "
                             "flags, record, scored_utc) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                             rows)
    except sqlite3.DatabaseError as exc:
        raise SessionFileError(Problem(f"cannot write scores ({exc})", str(path),
                                       hint="check free disk space and permissions")) from exc
    finally:
        conn.close()
    return len(rows)
