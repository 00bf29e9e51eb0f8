"""The read-only reader of a session file, :class:`SessionFile`.

Tables come back as pandas DataFrames with float seconds (``t``,
``t_start``, ``t_end``) beside the stored int64 ns. Opening validates the
file and marks a crashed recording ``interrupted``
(:mod:`echoreo._sessionopen`). Re-exported by :mod:`echoreo.sessionfile`.
"""

from __future__ import annotations

import json
import math
import sqlite3
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from echoreo._sessionopen import check_and_recover, db_error, open_error, read_meta
from echoreo._sessionschema import quote_ident, stream_table
from echoreo.errors import Problem, SessionFileError

__all__ = ["SessionFile"]


class SessionFile:
    """Read-only view of one session file.

    Parameters
    ----------
    path : str or Path
        The ``.sqlite`` session file.

    Raises
    ------
    SessionFileError
        The file is missing, is not an SQLite database, is not a session file,
        was written by a newer format version, or is damaged. The message names
        the file and says how to fix it.

    Notes
    -----
    Opening a file left in state ``running`` by a crashed recorder marks it
    ``interrupted`` (see the module docstring); this is the reader's only
    write. Reads use a read-only connection; in WAL mode they never block a
    recorder that is still writing.

    Examples
    --------
    >>> with SessionFile("P07.sqlite") as sf:          # doctest: +SKIP
    ...     imu = sf.read_stream("right_wrist_imu")
    ...     reps = sf.spans().query("kind == 'move'")
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        if not self.path.exists():
            raise self._error("no such file", "check the path; session files end in .sqlite")
        if self.path.is_dir():
            raise self._error("is a folder, not a session file",
                              "give one file, or use `echoreo sessions FOLDER` to list a folder")
        self.marked_interrupted = False
        self._check_and_recover()
        try:
            self._conn = sqlite3.connect(f"{self.path.resolve().as_uri()}?mode=ro", uri=True,
                                         timeout=10.0)
            self.meta = self._read_meta(self._conn)
        except sqlite3.DatabaseError as exc:
            raise self._db_error(exc) from exc
        if self.marked_interrupted and self.meta.get("state") == "running":
            self.meta["state"] = "interrupted"  # the file could not be written

    # -- opening ---------------------------------------------------------
    def _error(self, message: str, hint: str) -> SessionFileError:
        return open_error(self.path, message, hint)

    def _db_error(self, exc: sqlite3.DatabaseError) -> SessionFileError:
        return db_error(self.path, exc)

    def _read_meta(self, conn: sqlite3.Connection) -> dict[str, Any]:
        return read_meta(conn, self.path)

    def _check_and_recover(self) -> None:
        """Validate the file and mark a crashed ``running`` session ``interrupted``."""
        if check_and_recover(self.path):
            self.marked_interrupted = True

    # -- context manager ---------------------------------------------------
    def close(self) -> None:
        """Close the read connection."""
        self._conn.close()

    def __enter__(self) -> SessionFile:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return (f"SessionFile({str(self.path)!r}, participant={self.participant!r}, "
                f"state={self.state!r})")

    # -- meta --------------------------------------------------------------
    @property
    def state(self) -> str:
        """``running``, ``complete`` or ``interrupted``."""
        return str(self.meta.get("state", "interrupted"))

    @property
    def participant(self) -> str | None:
        """The pseudonymous participant code (for example ``"P07"``)."""
        value = self.meta.get("participant")
        return None if value is None else str(value)

    @property
    def study(self) -> str | None:
        """The study name from the plan."""
        value = self.meta.get("study")
        return None if value is None else str(value)

    # -- tables ------------------------------------------------------------
    def _query(self, sql: str, params: tuple = ()) -> list[tuple]:
        try:
            return self._conn.execute(sql, params).fetchall()
        except sqlite3.DatabaseError as exc:
            raise self._db_error(exc) from exc

    def streams(self) -> pd.DataFrame:
        """The stream descriptions.

        Returns
        -------
        DataFrame
            One row per stream, indexed by nothing, columns ``name``, ``kind``,
            ``channels`` (list of str), ``units`` (list of str), ``rate_hz``
            (nominal, Hz), ``source``, ``clock_map`` (dict with ``offset_ns``,
            ``drift_ppm``, ``uncertainty_ns``, ``method``, or None).
        """
        rows = self._query("SELECT name, kind, channels, units, rate_hz, source, clock_map "
                           "FROM streams ORDER BY rowid")
        cols = ["name", "kind", "channels", "units", "rate_hz", "source", "clock_map"]
        out = []
        for name, kind, channels, units, rate, source, cmap in rows:
            out.append((name, kind, _loads(channels, []), _loads(units, []),
                        float(rate) if rate is not None else float("nan"), source,
                        _loads(cmap, None)))
        return pd.DataFrame(out, columns=cols)

    def stream_names(self) -> list[str]:
        """Names of the recorded streams, in the order they were added."""
        return [r[0] for r in self._query("SELECT name FROM streams ORDER BY rowid")]

    def _channels(self, name: str) -> list[str]:
        rows = self._query("SELECT channels FROM streams WHERE name = ?", (name,))
        if not rows:
            known = ", ".join(self.stream_names()) or "none"
            raise SessionFileError(Problem(
                f"no stream {name!r} in this session (streams: {known})", str(self.path),
                hint="use one of the listed names; `echoreo sessions` shows them"))
        return list(_loads(rows[0][0], []))

    def read_stream(self, name: str, *, start: float | None = None, end: float | None = None,
                    order: str = "time", channels: Iterable[str] | None = None) -> pd.DataFrame:
        """Samples of one stream.

        Parameters
        ----------
        name : str
            Stream name, as in :meth:`streams`.
        start, end : float, optional
            Keep samples with ``start <= t < end`` (s on the session clock).
        order : {"time", "arrival"}
            ``"time"`` sorts by session time (ties in arrival order); ``"arrival"``
            keeps the order the recorder received the samples.
        channels : iterable of str, optional
            Read only these channels (default: all, in the stream's order).

        Returns
        -------
        DataFrame, shape (n_samples, 4 + n_channels)
            ``t`` (float s, = ``t_ns`` · 1e-9), ``t_ns`` (int64 ns, session clock),
            ``t_dev_ns`` (int64 ns, the device's own clock), ``seq`` (int64), then
            one float64 column per channel in the stream's units (missing → NaN).
        """
        known = self._channels(name)
        if channels is None:
            channels = known
        else:
            channels = list(channels)
            unknown = [c for c in channels if c not in known]
            if unknown:
                raise SessionFileError(Problem(
                    f"stream {name!r} has no channel(s) {', '.join(map(repr, unknown))} "
                    f"(channels: {', '.join(known)})", str(self.path),
                    hint="use the channel names listed by `echoreo sessions`"))
        where, params = [], []
        if start is not None:
            where.append("t_ns >= ?")
            params.append(round(start * 1e9))
        if end is not None:
            where.append("t_ns < ?")
            params.append(round(end * 1e9))
        if order not in ("time", "arrival"):
            raise ValueError(f"order must be 'time' or 'arrival', not {order!r}")
        cols = ", ".join(["t_ns", "t_dev_ns", "seq", *(quote_ident(c) for c in channels)])
        sql = f"SELECT {cols} FROM {stream_table(name)}"
        if where:
            sql += " WHERE " + " AND ".join(where)
        sql += " ORDER BY t_ns, rowid" if order == "time" else " ORDER BY rowid"
        rows = self._query(sql, tuple(params))
        n = len(rows)
        ints = np.zeros((n, 3), dtype=np.int64)
        vals = np.empty((n, len(channels)), dtype=np.float64)
        if n:
            # One object array, then typed column blocks: several times faster than
            # converting row by row; NULL (None) becomes NaN in the float cast.
            table = np.array(rows, dtype=object)
            ints[:] = table[:, :3].astype(np.int64)
            vals[:] = table[:, 3:].astype(np.float64)
        data: dict[str, np.ndarray] = {
            "t": ints[:, 0] * 1e-9,
            "t_ns": ints[:, 0],
            "t_dev_ns": ints[:, 1],
            "seq": ints[:, 2],
        }
        for j, c in enumerate(channels):
            data[c] = vals[:, j]
        return pd.DataFrame(data)

    def spans(self) -> pd.DataFrame:
        """The leader's timeline spans on the session clock.

        Returns
        -------
        DataFrame
            Columns ``choreography``, ``step``, ``move``, ``repetition``, ``kind``
            (``move``/``rest``/``hold``), ``t_start``, ``t_end`` (float s) and
            ``t_start_ns``, ``t_end_ns`` (int64 ns), sorted by ``t_start``.
        """
        rows = self._query("SELECT choreography, step, move, repetition, kind, t_start_ns, "
                           "t_end_ns FROM spans ORDER BY t_start_ns, rowid")
        df = pd.DataFrame(rows, columns=["choreography", "step", "move", "repetition", "kind",
                                         "t_start_ns", "t_end_ns"])
        for c in ("step", "repetition", "t_start_ns", "t_end_ns"):
            df[c] = df[c].astype(np.int64)
        df.insert(5, "t_start", df["t_start_ns"].to_numpy(dtype=np.float64) * 1e-9)
        df.insert(6, "t_end", df["t_end_ns"].to_numpy(dtype=np.float64) * 1e-9)
        return df

    def events(self, kind: str | None = None) -> pd.DataFrame:
        """Logged events (cues, repetition boundaries, pauses, faults, gaps, ...).

        Parameters
        ----------
        kind : str, optional
            Keep only events of this kind.

        Returns
        -------
        DataFrame
            Columns ``t`` (float s), ``t_ns`` (int64 ns), ``kind``, ``stream``
            (None when not tied to a stream), ``detail`` (text; JSON where the
            writer stored structured detail), in time order.
        """
        sql = "SELECT t_ns, kind, stream, detail FROM events"
        params: tuple = ()
        if kind is not None:
            sql += " WHERE kind = ?"
            params = (kind,)
        rows = self._query(sql + " ORDER BY t_ns, rowid", params)
        df = pd.DataFrame(rows, columns=["t_ns", "kind", "stream", "detail"])
        df["t_ns"] = df["t_ns"].astype(np.int64)
        df.insert(0, "t", df["t_ns"].to_numpy(dtype=np.float64) * 1e-9)
        return df

    def scores(self) -> pd.DataFrame:
        """Stored score records (written by :func:`write_scores`).

        Returns
        -------
        DataFrame
            Columns ``stream``, ``move``, ``step``, ``repetition``, ``grade``
            (0–100), ``band``, ``flags`` (list of str), ``record`` (dict: the full
            score record), ``scored_utc``.
        """
        rows = self._query("SELECT stream, move, step, repetition, grade, band, flags, record, "
                           "scored_utc FROM scores ORDER BY rowid")
        out = [(*r[:6], _loads(r[6], []), _loads(r[7], {}), r[8]) for r in rows]
        return pd.DataFrame(out, columns=["stream", "move", "step", "repetition", "grade",
                                          "band", "flags", "record", "scored_utc"])

    def stream_health(self, gap_factor: float = 3.0) -> pd.DataFrame:
        """Per-stream sample counts, effective rate and gaps.

        Parameters
        ----------
        gap_factor : float
            A gap is an interval between consecutive samples (in session time)
            longer than ``gap_factor`` nominal periods (``gap_factor / rate_hz``).

        Returns
        -------
        DataFrame
            Columns ``name``, ``kind``, ``samples``, ``t_first``, ``t_last`` (s),
            ``rate_hz`` (nominal), ``effective_hz`` = (samples − 1) / (t_last −
            t_first), ``gaps`` (count), ``longest_gap_s``, ``gap_events`` (events of
            kind ``gap`` logged for the stream).
        """
        out = []
        for row in self.streams().itertuples(index=False):
            table = stream_table(row.name)
            n, t0, t1 = self._query(f"SELECT COUNT(*), MIN(t_ns), MAX(t_ns) FROM {table}")[0]
            rate = row.rate_hz
            gaps, longest = 0, 0.0
            if n and n > 1:
                limit = (int(gap_factor * 1e9 / rate) if rate and math.isfinite(rate) and rate > 0
                         else None)
                dsql = (f"SELECT t_ns - LAG(t_ns) OVER (ORDER BY t_ns) AS d FROM {table}")
                if limit is not None:
                    g, mx = self._query(f"SELECT COUNT(*), MAX(d) FROM ({dsql}) WHERE d > ?",
                                        (limit,))[0]
                    gaps = int(g)
                    longest = (mx or 0) * 1e-9
                else:
                    mx = self._query(f"SELECT MAX(d) FROM ({dsql})")[0][0]
                    longest = (mx or 0) * 1e-9
            gap_events = self._query("SELECT COUNT(*) FROM events WHERE kind = 'gap' AND "
                                     "stream = ?", (row.name,))[0][0]
            span = ((t1 - t0) * 1e-9) if n else float("nan")
            eff = (n - 1) / span if n and n > 1 and span > 0 else float("nan")
            out.append((row.name, row.kind, int(n), t0 * 1e-9 if n else float("nan"),
                        t1 * 1e-9 if n else float("nan"), rate, eff, gaps, longest,
                        int(gap_events)))
        return pd.DataFrame(out, columns=["name", "kind", "samples", "t_first", "t_last",
                                          "rate_hz", "effective_hz", "gaps", "longest_gap_s",
                                          "gap_events"])

    def duration(self) -> float:
        """Session duration in s: the latest time in any stream, span or event.

        Returns
        -------
        float
            max(t_ns) · 1e-9 over every stream table, the spans' ends and the
            events (0.0 for an empty session).
        """
        best = 0
        for name in self.stream_names():
            v = self._query(f"SELECT MAX(t_ns) FROM {stream_table(name)}")[0][0]
            best = max(best, v or 0)
        for sql in ("SELECT MAX(t_end_ns) FROM spans", "SELECT MAX(t_ns) FROM events"):
            v = self._query(sql)[0][0]
            best = max(best, v or 0)
        return best * 1e-9

    def integrity_check(self) -> str:
        """Result of ``PRAGMA integrity_check`` (``"ok"`` for an undamaged file)."""
        rows = self._query("PRAGMA integrity_check")
        return "\n".join(str(r[0]) for r in rows)


def _loads(text: Any, default: Any) -> Any:
    if text is None:
        return default
    try:
        return json.loads(text)
    except (TypeError, json.JSONDecodeError):
        return text
