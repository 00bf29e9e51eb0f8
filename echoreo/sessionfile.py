"""The session file: schema, read-only reader, and the scores writer.

One SQLite database per session (DEVELOPERS.md, "Session file"). The recorder
in :mod:`echoreo.runner.recorder` writes it through the DDL defined here; the
scoring side reads it through :class:`SessionFile` and writes its results
with :func:`write_scores`. Neither side imports the other.

Tables::

    meta(key TEXT PRIMARY KEY, value TEXT)            values JSON-encoded
    streams(name, kind, channels, units, rate_hz, source, clock_map)
    stream_<name>(t_ns, t_dev_ns, seq, <channel> REAL, ...)   one per stream
    spans(choreography, step, move, repetition, kind, t_start_ns, t_end_ns)
    events(t_ns, kind, stream, detail)
    scores(stream, move, step, repetition, grade, band, flags, record, scored_utc)

Times are int64 nanoseconds on the session clock (the host's monotonic
clock, zero at session start); the reader adds float seconds (``t``,
``t_start``, ``t_end``) for analysis.

Crash handling
--------------
A recorder writes ``state = "running"`` when it starts and ``"complete"``
(or another final state) when it closes. A file whose recording process was
killed stays ``running``. Opening such a file with :class:`SessionFile`
marks it ``interrupted``: a short write transaction on ``meta`` (the only
write the reader ever makes). The reader first checks the ``writer`` meta
entry (host, process id and process start time of the recording process):
if that process is still alive on this host, the session is live and is left
``running``. If the file cannot be written (read-only medium or permissions),
the file is left unchanged and the reader reports ``interrupted`` anyway.
Everything committed before the crash is intact: SQLite's WAL recovery runs
on the first open and replays every committed transaction; the marking then
folds the log into the file (:func:`make_self_contained`).

Journal mode
------------
A session is recorded in WAL mode. When the recorder closes cleanly, or the
reader marks a crashed file, the log is checkpointed and the file switched to
SQLite's rollback-journal mode, so the ``.sqlite`` file alone holds the session
(copy it without a ``-wal`` companion; open it on read-only media). Files
still in WAL mode (a live session, or a crash found on a read-only medium)
read the same.
"""

from __future__ import annotations

import json
import math
import os
import re
import socket
import sqlite3
from collections.abc import Iterable, Mapping
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from echoreo.errors import Problem, SessionFileError

__all__ = [
    "FORMAT",
    "FORMAT_VERSION",
    "SCHEMA",
    "STATES",
    "SessionFile",
    "check_name",
    "create_schema",
    "find_sessions",
    "make_self_contained",
    "process_identity",
    "quote_ident",
    "stream_table",
    "stream_table_ddl",
    "to_json",
    "write_scores",
]

#: Format name stored in ``meta.format``; the suffix is the format version.
FORMAT = "echoreo-session/1"
FORMAT_VERSION = 1
#: Session states in ``meta.state``.
STATES = ("running", "complete", "interrupted")

#: The fixed tables, in creation order. Stream tables come from
#: :func:`stream_table_ddl`. The one place the schema is written down in code.
SCHEMA: tuple[str, ...] = (
    "CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT)",
    "CREATE TABLE IF NOT EXISTS streams (name TEXT PRIMARY KEY, kind TEXT, channels TEXT,"
    " units TEXT, rate_hz REAL, source TEXT, clock_map TEXT)",
    "CREATE TABLE IF NOT EXISTS spans (choreography TEXT, step INTEGER, move TEXT,"
    " repetition INTEGER, kind TEXT, t_start_ns INTEGER, t_end_ns INTEGER)",
    "CREATE TABLE IF NOT EXISTS events (t_ns INTEGER, kind TEXT, stream TEXT, detail TEXT)",
    "CREATE TABLE IF NOT EXISTS scores (stream TEXT, move TEXT, step INTEGER,"
    " repetition INTEGER, grade REAL, band TEXT, flags TEXT, record TEXT, scored_utc TEXT)",
)

#: Columns every stream table has before its channels.
STREAM_FIXED_COLUMNS = ("t_ns", "t_dev_ns", "seq")
#: Column names the reader adds or the table already has; channels may not use them.
_RESERVED = frozenset({"t", "t_ns", "t_dev_ns", "seq", "rowid", "oid", "_rowid_"})
# Letters, digits and underscores, starting with a letter: safe as a SQL
# identifier, a pandas column and a file-name part. 63 characters leave room
# for the "stream_" prefix well inside SQLite's limits.
_NAME_RE = re.compile(r"[A-Za-z][A-Za-z0-9_]{0,62}")


def check_name(name: Any, what: str = "stream name") -> str:
    """Validate a stream or channel name for use as a SQL identifier.

    Parameters
    ----------
    name : str
        The candidate name.
    what : str
        What the name is, for the message ("stream name", "channel name").

    Returns
    -------
    str
        ``name`` unchanged.

    Raises
    ------
    SessionFileError
        The name is not 1–63 characters of letters, digits and underscores
        starting with a letter, or (for channels) is one of the reserved column
        names ``t``, ``t_ns``, ``t_dev_ns``, ``seq``.
    """
    if not isinstance(name, str) or not _NAME_RE.fullmatch(name):
        raise SessionFileError(
            f"{what} {name!r} cannot be stored: expected 1 to 63 letters, digits or "
            "underscores, starting with a letter",
            hint="rename it, for example 'right_wrist_imu' or 'acc_x'",
        )
    if what.startswith("channel") and name.lower() in _RESERVED:
        raise SessionFileError(
            f"{what} {name!r} is reserved for the stream table's own columns",
            hint="rename the channel (for example 'time_value' instead of 't')",
        )
    return name


def quote_ident(name: str) -> str:
    """Quote a SQL identifier (``"name"``, inner quotes doubled; SQLite syntax)."""
    return '"' + name.replace('"', '""') + '"'


def stream_table(name: str) -> str:
    """The quoted table name of stream ``name`` (``"stream_<name>"``), validated."""
    return quote_ident("stream_" + check_name(name))


def stream_table_ddl(name: str, channels: Iterable[str]) -> str:
    """``CREATE TABLE`` statement of one stream table.

    Parameters
    ----------
    name : str
        Stream name (validated with :func:`check_name`).
    channels : iterable of str
        Channel names, one ``REAL`` column each, in order (validated, unique).

    Returns
    -------
    str
        The DDL: ``t_ns``, ``t_dev_ns``, ``seq`` (``INTEGER NOT NULL``), then the
        channels.
    """
    chans = [check_name(c, "channel name") for c in channels]
    lowered = [c.lower() for c in chans]
    if len(set(lowered)) != len(lowered):
        dup = sorted({c for c in lowered if lowered.count(c) > 1})
        raise SessionFileError(
            f"stream {name!r} names channel(s) {', '.join(dup)} more than once "
            "(SQLite column names ignore case)",
            hint="give every channel of a stream its own name",
        )
    if not chans:
        raise SessionFileError(f"stream {name!r} has no channels",
                               hint="describe at least one channel")
    cols = ", ".join(f"{quote_ident(c)} REAL" for c in chans)
    return (f"CREATE TABLE IF NOT EXISTS {stream_table(name)} "
            f"(t_ns INTEGER NOT NULL, t_dev_ns INTEGER NOT NULL, seq INTEGER NOT NULL, {cols})")


def create_schema(conn: sqlite3.Connection) -> None:
    """Create the fixed tables of :data:`SCHEMA` on an open connection."""
    for ddl in SCHEMA:
        conn.execute(ddl)


def _plain(value: Any) -> Any:
    """Numpy scalars/arrays, paths and non-finite floats to JSON-safe Python values."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None  # strict JSON has no NaN/inf; missing values are null
    if isinstance(value, (Path, datetime)):
        return str(value)
    if value is pd.NaT:
        return None
    return value


def to_json(value: Any) -> str:
    """Strict JSON text of ``value`` (numpy types converted, NaN and inf as null)."""
    return json.dumps(_plain(value), ensure_ascii=False, allow_nan=False)


def _proc_start_ticks(pid: int) -> int | None:
    """Start time of process ``pid`` in clock ticks since boot (Linux ``/proc``), or None."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            stat = fh.read()
    except OSError:
        return None
    # The command name (field 2) is in parentheses and may hold spaces.
    fields = stat[stat.rfind(")") + 2:].split()
    if fields and fields[0] in ("Z", "X"):  # zombie or dead: not running
        return -1
    try:
        return int(fields[19])  # field 22 of proc(5): starttime
    except (IndexError, ValueError):
        return None


def process_identity(pid: int | None = None) -> dict[str, Any]:
    """Identity of a process for the ``writer`` meta entry.

    Returns
    -------
    dict
        ``{"host": hostname, "pid": pid, "start_ticks": int or None}``; the start
        time guards against a later process reusing the same id.
    """
    pid = os.getpid() if pid is None else pid
    return {"host": socket.gethostname(), "pid": pid, "start_ticks": _proc_start_ticks(pid)}


def _writer_alive(writer: Any) -> bool:
    """Whether the recording process described by ``writer`` still runs on this host."""
    if not isinstance(writer, Mapping):
        return False
    if writer.get("host") != socket.gethostname():
        return False  # cannot tell for another host; a crash is the safer reading
    pid = writer.get("pid")
    if not isinstance(pid, int) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass  # exists, owned by someone else
    ticks = _proc_start_ticks(pid)
    if ticks == -1:
        return False
    want = writer.get("start_ticks")
    return ticks is None or want is None or ticks == want


def make_self_contained(conn: sqlite3.Connection) -> bool:
    """Fold the write-ahead log into the database file and leave WAL mode.

    ``PRAGMA wal_checkpoint(TRUNCATE)`` copies every committed transaction into
    the main file, then ``PRAGMA journal_mode=DELETE`` clears the file's WAL
    flag, so the ``.sqlite`` file alone holds the session: it can be copied
    without its ``-wal`` companion and opened on read-only media by any SQLite
    client. Needs the only connection to the file; when another one is open
    (a live reader) the file simply stays in WAL mode, which is just as valid.

    Returns
    -------
    bool
        True when the file left WAL mode.
    """
    try:
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        mode = conn.execute("PRAGMA journal_mode=DELETE").fetchone()[0]
    except sqlite3.OperationalError:
        return False
    return str(mode).lower() == "delete"


def _utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="microseconds")


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
        return SessionFileError(Problem(message, str(self.path), hint=hint))

    def _db_error(self, exc: sqlite3.DatabaseError) -> SessionFileError:
        text = str(exc)
        if "not a database" in text or "file is encrypted" in text:
            return self._error("not a session file (not an SQLite database)",
                               "give a file written by `echoreo session` or `echoreo import`")
        if "no such table" in text:
            return self._error(f"not a session file ({text})",
                               "give a file written by `echoreo session` or `echoreo import`")
        if "malformed" in text or "corrupt" in text:
            return self._error(f"the session file is damaged ({text})",
                               "restore it from a backup; `sqlite3 FILE .recover` may "
                               "salvage its rows")
        return self._error(f"cannot read the session file ({text})",
                           "check that the file is readable and not on a failing disk")

    def _read_meta(self, conn: sqlite3.Connection) -> dict[str, Any]:
        rows = conn.execute("SELECT key, value FROM meta").fetchall()
        meta: dict[str, Any] = {}
        for key, value in rows:
            try:
                meta[key] = json.loads(value) if value is not None else None
            except (TypeError, json.JSONDecodeError):
                meta[key] = value
        fmt = meta.get("format")
        if not isinstance(fmt, str) or not fmt.startswith("echoreo-session/"):
            raise self._error(f"not a session file (meta.format is {fmt!r}, "
                              f"expected {FORMAT!r})",
                              "give a file written by `echoreo session` or `echoreo import`")
        try:
            version = int(fmt.split("/", 1)[1])
        except ValueError:
            raise self._error(f"unknown session-file format {fmt!r}",
                              "give a file written by echoreo") from None
        if version > FORMAT_VERSION:
            raise self._error(
                f"written in format {fmt!r}, newer than this echoreo reads ({FORMAT!r})",
                "upgrade echoreo (`pip install -U echoreo`) to read this file")
        return meta

    def _check_and_recover(self) -> None:
        """Validate the file and mark a crashed ``running`` session ``interrupted``."""
        try:
            conn = sqlite3.connect(f"{self.path.resolve().as_uri()}?mode=rw", uri=True,
                                   timeout=10.0)
        except sqlite3.OperationalError:
            conn = None  # read-only file or medium: validated below, no marking
        if conn is None:
            try:
                ro = sqlite3.connect(f"{self.path.resolve().as_uri()}?mode=ro", uri=True)
                try:
                    meta = self._read_meta(ro)
                finally:
                    ro.close()
            except sqlite3.DatabaseError as exc:
                raise self._db_error(exc) from exc
            if meta.get("state") == "running" and not _writer_alive(meta.get("writer")):
                self.marked_interrupted = True
            return
        try:
            meta = self._read_meta(conn)
            if meta.get("state") != "running" or _writer_alive(meta.get("writer")):
                return
            self.marked_interrupted = True
            try:
                with conn:
                    conn.execute("BEGIN IMMEDIATE")
                    conn.execute(
                        "UPDATE meta SET value = ? WHERE key = 'state' AND value = ?",
                        (to_json("interrupted"), to_json("running")))
                    conn.execute("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                                 ("interrupted_marked_utc", to_json(_utc_now())))
            except sqlite3.OperationalError:
                pass  # read-only: reported as interrupted without changing the file
            else:
                make_self_contained(conn)
        except sqlite3.DatabaseError as exc:
            raise self._db_error(exc) from exc
        finally:
            conn.close()

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


_SCORE_KEYS = ("stream", "move", "step", "repetition", "grade", "band")


def find_sessions(args: Iterable[str | Path]) -> tuple[list[Path], list[Problem]]:
    """Session files named by the arguments: files as given, folders expanded to ``*.sqlite``.

    Returns
    -------
    (paths, problems)
        Paths in argument order (sorted within a folder, duplicates removed),
        and a problem per argument that is neither a file nor a folder with
        session files.
    """
    paths: list[Path] = []
    problems: list[Problem] = []
    seen = set()
    for a in args:
        p = Path(a)
        if p.is_dir():
            found = sorted(p.glob("*.sqlite"))
            if not found:
                problems.append(Problem("no session files (*.sqlite) in this folder", str(p),
                                        hint="give a folder written by `echoreo session`"))
            items = found
        elif p.exists():
            items = [p]
        else:
            problems.append(Problem("no such file or folder", str(p),
                                    hint="check the path"))
            items = []
        for f in items:
            key = f.resolve()
            if key not in seen:
                seen.add(key)
                paths.append(f)
    return paths, problems


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
