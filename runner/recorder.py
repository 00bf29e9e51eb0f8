"""The session recorder: one SQLite file per session, one writer thread.

Everything a session produces (leader commands and states, follower samples,
events, the timeline's spans, meta) is handed to a :class:`Recorder`, which
queues it and returns at once; a single writer thread owns the SQLite
connection and commits what arrived in batched transactions (a second
thread only checkpoints the write-ahead log). The schema is
the one of :mod:`echoreo.sessionfile` (DEVELOPERS.md, "Session file").

Durability
----------
* ``journal_mode = WAL`` while recording: readers (``echoreo sessions``, a
  live scorer) never block the writer, and a crash leaves the database
  consistent: on the next open SQLite replays every committed transaction
  from the ``-wal`` file and ignores a torn, uncommitted tail. A clean
  :meth:`close` checkpoints the log and leaves WAL mode, so the finished file
  is self-contained (:func:`echoreo.sessionfile.make_self_contained`).
* ``synchronous = NORMAL`` (the default here) with checkpoints in their own
  thread: the writer's commits write the WAL without waiting for the disk,
  so a commit takes about a millisecond and batches are committed at most
  ``commit_interval_s`` (50 ms) apart. Once committed, data survives a
  process kill (``kill -9``, a crash): it is in the operating system's file
  cache. A second connection runs ``PRAGMA wal_checkpoint(PASSIVE)`` every
  ``checkpoint_interval_s`` (1 s); each checkpoint fsyncs the WAL and the
  database, so an operating-system crash or power loss loses at most the
  transactions of the last ~1 s, and never corrupts the file. The writer's
  own auto-checkpoint is off, so its commits never wait for an fsync.
* ``synchronous="FULL"`` fsyncs the WAL at every commit: power-loss safe up
  to the last commit, but each commit then waits for the disk. On this
  project's 2-core test machine (a VM sharing its disk) fsync took 1–2 ms
  typically and 40–170 ms at times, which stalls the writer beyond the
  100 ms commit bound the crash guarantee needs; ``benchmarks/bench_recorder.py``
  shows both settings side by side.
* Data handed to the recorder is committed at most ``commit_interval_s`` plus
  the batch's execution time after the hand-over; a clean :meth:`close`
  commits everything still queued before it returns, so nothing handed over
  is lost. ``kill -9`` loses only what was not yet committed (at most the
  last ~100 ms).

Memory and back-pressure
------------------------
The queue holds references to copies of the handed-over arrays. Its size is
bounded by ``max_pending_rows`` (default 400,000 rows, about two minutes of
16 streams × 200 Hz): when the writer falls that far behind (a stalled
disk), :meth:`write` blocks until it has caught up. That back-pressure slows
the caller rather than dropping data; with the writer ≥ 50 times faster than
the session's load (see the benchmark) it is never reached in practice.
"""

from __future__ import annotations

import queue
import sqlite3
import threading
import time
import weakref
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from echoreo import __version__
from echoreo.errors import Problem, RuntimeFault, SessionFileError
from echoreo.sessionfile import (
    FORMAT,
    check_name,
    create_schema,
    make_self_contained,
    process_identity,
    stream_table,
    stream_table_ddl,
    to_json,
)

__all__ = ["Recorder", "RecorderStats"]

_SYNCHRONOUS = ("OFF", "NORMAL", "FULL", "EXTRA")


@dataclass(frozen=True)
class RecorderStats:
    """Counters of a recorder (for the live view and the benchmark).

    Parameters
    ----------
    rows_written : int
        Stream rows committed so far.
    events_written : int
        Events committed so far.
    commits : int
        Transactions committed.
    pending_rows : int
        Rows handed over but not yet committed.
    max_commit_gap_s : float
        Longest time between the first hand-over of a batch and its commit, s.
    """

    rows_written: int
    events_written: int
    commits: int
    pending_rows: int
    max_commit_gap_s: float


class _Stop:
    def __init__(self, state: str):
        self.state = state


class _Flush:
    def __init__(self) -> None:
        self.done = threading.Event()


def _utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="microseconds")


class Recorder:
    """Write one session file from any thread, committed by one writer thread.

    Parameters
    ----------
    path : str or Path
        The session file to create (``.sqlite``). Must not exist unless
        ``overwrite`` is true.
    meta : mapping
        Initial meta entries (``study``, ``participant``, ``mode``, ``clock``,
        ``plan``, ``robot``, ...; values JSON-encodable). ``format``,
        ``software_version``, ``state`` (``running``) and ``writer`` are set by
        the recorder; ``utc_start`` defaults to now.
    commit_interval_s : float
        Longest time, s, a transaction stays open: the writer commits at most
        this long (plus the execution of the item in hand) after taking the
        first item of a batch from the queue. With the writer keeping up (no
        backlog), that bounds the time from hand-over to commit. 50 ms by
        default so commits land well inside the 100 ms bound of the crash
        guarantee.
    synchronous : {"NORMAL", "FULL", "OFF", "EXTRA"}
        SQLite ``PRAGMA synchronous`` (see the module docstring for the
        durability each gives).
    checkpoint_interval_s : float
        Period, s, of the checkpointing thread (the bound on what a power
        loss can take with ``synchronous="NORMAL"``).
    max_pending_rows : int
        Bound on rows queued but not yet committed; beyond it :meth:`write`
        blocks (back-pressure).
    overwrite : bool
        Replace an existing file at ``path``.

    Raises
    ------
    SessionFileError
        The file exists (and ``overwrite`` is false) or cannot be created.
    """

    def __init__(self, path: str | Path, meta: Mapping[str, Any], *,
                 commit_interval_s: float = 0.05, synchronous: str = "NORMAL",
                 checkpoint_interval_s: float = 1.0, max_pending_rows: int = 400_000,
                 overwrite: bool = False):
        self.path = Path(path)
        sync = synchronous.upper()
        if sync not in _SYNCHRONOUS:
            raise ValueError(f"synchronous must be one of {_SYNCHRONOUS}, not {synchronous!r}")
        if commit_interval_s <= 0:
            raise ValueError("commit_interval_s must be positive")
        if self.path.exists():
            if not overwrite:
                raise SessionFileError(Problem(
                    "a session file already exists here", str(self.path),
                    hint="choose another output folder or participant code, or remove the file"))
            for suffix in ("", "-wal", "-shm", "-journal"):
                Path(str(self.path) + suffix).unlink(missing_ok=True)
        self.commit_interval_s = float(commit_interval_s)
        self.checkpoint_interval_s = float(checkpoint_interval_s)
        self.synchronous = sync
        self.max_pending_rows = int(max_pending_rows)
        self._channels: dict[str, int] = {}
        self._closed = False
        self._error: BaseException | None = None
        self._queue: queue.SimpleQueue = queue.SimpleQueue()
        self._pending = 0
        self._cond = threading.Condition()
        self._rows_written = 0
        self._events_written = 0
        self._commits = 0
        self._max_gap = 0.0
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            conn = sqlite3.connect(self.path, check_same_thread=False, isolation_level=None)
            mode = conn.execute("PRAGMA journal_mode=WAL").fetchone()[0]
            if str(mode).lower() != "wal":
                raise sqlite3.OperationalError(f"WAL mode not available (got {mode})")
            conn.execute(f"PRAGMA synchronous={sync}")
            conn.execute("PRAGMA wal_autocheckpoint=0")  # the checkpoint thread does it
            conn.execute("BEGIN IMMEDIATE")
            create_schema(conn)
            first = {"format": FORMAT, "software_version": __version__, "state": "running",
                     "utc_start": _utc_now(), "writer": process_identity()}
            first.update({k: v for k, v in meta.items()
                          if k not in ("format", "state", "writer")})
            conn.executemany("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                             [(str(k), to_json(v)) for k, v in first.items()])
            conn.execute("COMMIT")
        except (sqlite3.Error, OSError) as exc:
            raise SessionFileError(Problem(
                f"cannot create the session file ({exc})", str(self.path),
                hint="check that the folder is writable and the disk has space")) from exc
        self._conn = conn
        self._thread = threading.Thread(target=self._run, name=f"recorder:{self.path.name}",
                                        daemon=True)
        self._thread.start()
        self._ckpt_stop = threading.Event()
        self._ckpt_thread = threading.Thread(target=self._checkpoints,
                                             name=f"checkpoint:{self.path.name}", daemon=True)
        self._ckpt_thread.start()
        # A program that exits without close() leaves an interrupted session,
        # with everything handed over committed.
        self._finalizer = weakref.finalize(self, Recorder._atexit_close, self._queue,
                                           self._thread)

    # -- hand-over (any thread) --------------------------------------------
    def _put(self, item: Any, rows: int = 0) -> None:
        if self._error is not None:
            raise RuntimeFault(f"the recorder of {self.path} failed: {self._error}; "
                               "data handed over since then is not recorded") from self._error
        if self._closed:
            raise RuntimeError(f"the recorder of {self.path} is closed")
        if rows:
            with self._cond:
                while self._pending + rows > self.max_pending_rows and self._pending > 0:
                    self._cond.wait(0.1)  # back-pressure: wait for the writer to catch up
                    if self._error is not None or not self._thread.is_alive():
                        break
                self._pending += rows
        self._queue.put(item)

    def add_stream(self, info: Any, clock_map: Any = None) -> None:
        """Declare a stream and create its table.

        Parameters
        ----------
        info : StreamInfo or mapping
            ``name``, ``kind``, ``channels``, ``units``, ``rate_hz`` (nominal, Hz),
            ``source`` (:class:`echoreo.adapters.base.StreamInfo` fits).
        clock_map : ClockMap or mapping, optional
            The device-to-session clock map (``as_dict()`` is stored); update it
            later with :meth:`set_clock_map`.

        Raises
        ------
        SessionFileError
            An unsafe stream or channel name, duplicate channels, or a stream
            declared twice.
        """
        get = info.get if isinstance(info, Mapping) else lambda k, d=None: getattr(info, k, d)
        name = check_name(get("name"))
        channels = [str(c) for c in get("channels", ())]
        units = [str(u) for u in get("units", ())] or [""] * len(channels)
        ddl = stream_table_ddl(name, channels)  # validates the channel names
        if len(units) != len(channels):
            raise SessionFileError(f"stream {name!r}: {len(channels)} channels but "
                                   f"{len(units)} units", hint="give one unit per channel")
        if name in self._channels:
            raise SessionFileError(f"stream {name!r} is declared twice",
                                   hint="give every stream of a session its own name")
        self._channels[name] = len(channels)
        rate = get("rate_hz")
        row = (name, str(get("kind", "")), to_json(channels), to_json(units),
               None if rate is None else float(rate), str(get("source", "") or ""),
               None if clock_map is None else to_json(_cmap(clock_map)))
        self._put(("stream", ddl, row))

    def set_clock_map(self, stream: str, clock_map: Any) -> None:
        """Store the current device-to-session clock map of ``stream``."""
        self._need(stream)
        self._put(("clock_map", stream, to_json(_cmap(clock_map))))

    def _need(self, stream: str) -> int:
        try:
            return self._channels[stream]
        except KeyError:
            raise SessionFileError(f"stream {stream!r} was not declared",
                                   hint="call add_stream(info) before writing it") from None

    def write(self, stream: str, t_ns: Any, t_dev_ns: Any, seq: Any, data: Any) -> None:
        """Hand over samples of one stream.

        Parameters
        ----------
        stream : str
            A declared stream.
        t_ns : array_like, shape (n,), int64
            Session-clock times, ns.
        t_dev_ns : array_like, shape (n,), int64
            Device times, ns (the session time again for streams without a
            device clock, such as ``leader_command``).
        seq : array_like, shape (n,), int64
            Sequence numbers.
        data : array_like, shape (n, n_channels), float64
            Values in the stream's units; NaN is stored as NULL (read back as NaN).

        Notes
        -----
        The arrays are copied, so the caller may reuse its buffers. The call
        returns at once unless the queue is full (see the module docstring).
        """
        n_ch = self._need(stream)
        t = np.array(t_ns, dtype=np.int64, ndmin=1)
        td = np.array(t_dev_ns, dtype=np.int64, ndmin=1)
        s = np.array(seq, dtype=np.int64, ndmin=1)
        d = np.array(data, dtype=np.float64)
        n = t.shape[0]
        if d.ndim == 1 and n_ch == 1:
            d = d.reshape(-1, 1)
        elif d.ndim == 1 and n == 1:
            d = d.reshape(1, -1)
        if t.ndim != 1 or td.shape != t.shape or s.shape != t.shape or d.shape != (n, n_ch):
            raise ValueError(f"stream {stream!r}: expected t_ns, t_dev_ns, seq of shape (n,) and "
                             f"data of shape (n, {n_ch}); got {t.shape}, {td.shape}, {s.shape}, "
                             f"{d.shape}")
        if n:
            self._put(("rows", stream, t, td, s, d), rows=n)

    def write_batch(self, batch: Any) -> None:
        """Hand over a :class:`~echoreo.adapters.base.SampleBatch` (see :meth:`write`)."""
        self.write(batch.stream, batch.t_ns, batch.t_dev_ns, batch.seq, batch.data)

    def event(self, t_ns: int, kind: str, stream: str | None = None,
              detail: Any = None) -> None:
        """Log one event.

        Parameters
        ----------
        t_ns : int
            Session-clock time, ns.
        kind : str
            ``cue``, ``rep_start``, ``rep_end``, ``pause``, ``resume``, ``stop``,
            ``fault``, ``gap``, ``malformed``, ``dropped``, ``late_tick``, ...
        stream : str, optional
            The stream the event concerns.
        detail : str or JSON-encodable, optional
            Text, or a structure stored as JSON.
        """
        text = detail if detail is None or isinstance(detail, str) else to_json(detail)
        self._put(("event", (int(t_ns), str(kind), stream, text)))

    def set_spans(self, spans: pd.DataFrame, *, choreography: str | None = None,
                  append: bool = False) -> None:
        """Store the leader's timeline spans placed on the session clock.

        Parameters
        ----------
        spans : DataFrame
            Columns ``step``, ``move``, ``repetition``, ``kind`` and either
            ``t_start``/``t_end`` (s) or ``t_start_ns``/``t_end_ns`` (ns), both on
            the session clock; optional ``choreography`` column.
        choreography : str, optional
            Choreography name for rows without a ``choreography`` column.
        append : bool
            Add to the stored spans instead of replacing them (sessions that
            run several choreographies one after the other).
        """
        df = spans
        if "t_start_ns" in df.columns:
            t0 = df["t_start_ns"].to_numpy(dtype=np.int64)
            t1 = df["t_end_ns"].to_numpy(dtype=np.int64)
        else:
            t0 = np.rint(df["t_start"].to_numpy(dtype=np.float64) * 1e9).astype(np.int64)
            t1 = np.rint(df["t_end"].to_numpy(dtype=np.float64) * 1e9).astype(np.int64)
        chor = (df["choreography"].astype(str).tolist() if "choreography" in df.columns
                else [choreography] * len(df))
        rows = list(zip(chor, (int(v) for v in df["step"]), df["move"].astype(str).tolist(),
                        (int(v) for v in df["repetition"]), df["kind"].astype(str).tolist(),
                        t0.tolist(), t1.tolist(), strict=True))
        self._put(("spans", rows, append))

    def set_meta(self, key: str, value: Any) -> None:
        """Set one meta entry (``value`` is stored JSON-encoded)."""
        if key in ("format", "writer"):
            raise ValueError(f"meta {key!r} is set by the recorder")
        self._put(("meta", str(key), to_json(value)))

    def flush(self, timeout: float | None = None) -> bool:
        """Block until everything handed over so far is committed.

        Returns
        -------
        bool
            False when ``timeout`` (s) passed first.
        """
        marker = _Flush()
        self._put(marker)
        return marker.done.wait(timeout)

    def close(self, state: str = "complete") -> None:
        """Commit everything queued, set ``state`` and ``ended_utc``, close the file.

        Parameters
        ----------
        state : {"complete", "interrupted"}
            Final state of the session.

        Raises
        ------
        RuntimeFault
            The writer thread failed earlier (the message says why).
        """
        if self._closed:
            return
        if state not in ("complete", "interrupted"):
            raise ValueError(f"state must be 'complete' or 'interrupted', not {state!r}")
        self._queue.put(_Stop(state))
        self._closed = True
        self._thread.join()
        self._finalizer.detach()
        if self._error is not None:
            raise RuntimeFault(f"the recorder of {self.path} failed: {self._error}") \
                from self._error

    def __enter__(self) -> Recorder:
        return self

    def __exit__(self, exc_type: Any, *rest: Any) -> None:
        self.close("complete" if exc_type is None else "interrupted")

    @property
    def writer_native_id(self) -> int | None:
        """Kernel thread id of the writer thread (for scheduling priority), or None."""
        return self._thread.native_id

    @property
    def stats(self) -> RecorderStats:
        """Current counters (see :class:`RecorderStats`)."""
        return RecorderStats(self._rows_written, self._events_written, self._commits,
                             self._pending, self._max_gap)

    @staticmethod
    def _atexit_close(q: queue.SimpleQueue, thread: threading.Thread) -> None:
        if thread.is_alive():
            q.put(_Stop("interrupted"))
            thread.join(timeout=10.0)

    # -- writer thread -----------------------------------------------------
    def _run(self) -> None:
        conn = self._conn
        stop: _Stop | None = None
        try:
            while stop is None:
                item = self._queue.get()  # idle: wait without a transaction open
                first = time.monotonic()
                deadline = first + self.commit_interval_s
                # Items are executed as they arrive inside one open transaction,
                # so a commit follows at most commit_interval_s plus one item's
                # execution after the batch's first hand-over, however fast
                # items arrive.
                conn.execute("BEGIN")
                counts = [0, 0]
                flushes: list[_Flush] = []
                while True:
                    if isinstance(item, _Stop):
                        stop = item
                        break
                    if isinstance(item, _Flush):
                        flushes.append(item)
                        break
                    self._apply(conn, item, counts)
                    left = deadline - time.monotonic()
                    if left <= 0:
                        break
                    try:
                        item = self._queue.get(timeout=left)
                    except queue.Empty:
                        break
                conn.execute("COMMIT")
                self._commits += 1
                self._max_gap = max(self._max_gap, time.monotonic() - first)
                self._rows_written += counts[0]
                self._events_written += counts[1]
                if counts[0]:
                    with self._cond:
                        self._pending -= counts[0]
                        self._cond.notify_all()
                for f in flushes:
                    f.done.set()
            self._finish(conn, stop.state)
        except BaseException as exc:  # disk full, I/O error: report on the next call
            self._error = exc
            self._ckpt_stop.set()
            with self._cond:
                self._cond.notify_all()
            try:
                conn.close()
            except sqlite3.Error:
                pass

    def _apply(self, conn: sqlite3.Connection, item: tuple, counts: list[int]) -> None:
        """Execute one handed-over item inside the open transaction."""
        tag = item[0]
        if tag == "rows":
            _, stream, t, td, s, d = item
            placeholders = ", ".join("?" * (3 + d.shape[1]))
            conn.executemany(f"INSERT INTO {stream_table(stream)} VALUES ({placeholders})",
                             zip(t.tolist(), td.tolist(), s.tolist(), *d.T.tolist(),
                                 strict=True))
            counts[0] += t.shape[0]
        elif tag == "event":
            conn.execute("INSERT INTO events (t_ns, kind, stream, detail) "
                         "VALUES (?, ?, ?, ?)", item[1])
            counts[1] += 1
        elif tag == "stream":
            _, ddl, row = item
            conn.execute(ddl)
            conn.execute("INSERT INTO streams (name, kind, channels, units, rate_hz, "
                         "source, clock_map) VALUES (?, ?, ?, ?, ?, ?, ?)", row)
        elif tag == "clock_map":
            conn.execute("UPDATE streams SET clock_map = ? WHERE name = ?",
                         (item[2], item[1]))
        elif tag == "spans":
            _, span_rows, append = item
            if not append:
                conn.execute("DELETE FROM spans")
            conn.executemany("INSERT INTO spans (choreography, step, move, repetition, "
                             "kind, t_start_ns, t_end_ns) VALUES (?, ?, ?, ?, ?, ?, ?)",
                             span_rows)
        elif tag == "meta":
            conn.execute("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                         (item[1], item[2]))

    def _checkpoints(self) -> None:
        """Checkpoint the WAL every ``checkpoint_interval_s`` from a second connection."""
        try:
            conn = sqlite3.connect(self.path, isolation_level=None, timeout=1.0)
            conn.execute(f"PRAGMA synchronous={self.synchronous}")
        except sqlite3.Error:
            return  # the writer keeps working; the WAL is folded in at close
        try:
            while not self._ckpt_stop.wait(self.checkpoint_interval_s):
                try:
                    conn.execute("PRAGMA wal_checkpoint(PASSIVE)").fetchall()
                except sqlite3.Error:
                    pass  # busy or transient: the next period tries again
        finally:
            conn.close()

    def _finish(self, conn: sqlite3.Connection, state: str) -> None:
        self._ckpt_stop.set()
        self._ckpt_thread.join()
        conn.execute("BEGIN")
        conn.executemany("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                         [("state", to_json(state)), ("ended_utc", to_json(_utc_now()))])
        conn.execute("COMMIT")
        make_self_contained(conn)  # one self-contained file (see echoreo.sessionfile)
        conn.close()


def _cmap(clock_map: Any) -> dict:
    if isinstance(clock_map, Mapping):
        return dict(clock_map)
    if hasattr(clock_map, "as_dict"):
        return clock_map.as_dict()
    raise TypeError(f"clock_map must be a ClockMap or a mapping, not {type(clock_map).__name__}")

