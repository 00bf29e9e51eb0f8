"""Opening a session file: format check, crash detection and marking, WAL folding.

The reader's one write lives here (module docstring of
:mod:`echoreo.sessionfile`, "Crash handling" and "Journal mode"): a file left
``running`` by a recording process that no longer runs is marked
``interrupted`` and folded into one self-contained file. The recorder uses
:func:`process_identity` for the ``writer`` meta entry and
:func:`make_self_contained` on a clean close; :mod:`echoreo.sessionfile`
re-exports both.
"""

from __future__ import annotations

import json
import os
import socket
import sqlite3
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from echoreo._sessionschema import FORMAT, FORMAT_VERSION, _utc_now, to_json
from echoreo.errors import Problem, SessionFileError

__all__ = [
    "check_and_recover",
    "db_error",
    "make_self_contained",
    "open_error",
    "process_identity",
    "read_meta",
]


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


def open_error(path: Path, message: str, hint: str) -> SessionFileError:
    """A :class:`SessionFileError` about the session file at ``path``."""
    return SessionFileError(Problem(message, str(path), hint=hint))


def db_error(path: Path, exc: sqlite3.DatabaseError) -> SessionFileError:
    """The user-facing :class:`SessionFileError` of an SQLite error on ``path``."""
    text = str(exc)
    if "not a database" in text or "file is encrypted" in text:
        return open_error(path, "not a session file (not an SQLite database)",
                          "give a file written by `echoreo session` or `echoreo import`")
    if "no such table" in text:
        return open_error(path, f"not a session file ({text})",
                          "give a file written by `echoreo session` or `echoreo import`")
    if "malformed" in text or "corrupt" in text:
        return open_error(path, f"the session file is damaged ({text})",
                          "restore it from a backup; `sqlite3 FILE .recover` may "
                          "salvage its rows")
    return open_error(path, f"cannot read the session file ({text})",
                      "check that the file is readable and not on a failing disk")


def read_meta(conn: sqlite3.Connection, path: Path) -> dict[str, Any]:
    """The decoded ``meta`` table of ``path``, after checking its format name and version."""
    rows = conn.execute("SELECT key, value FROM meta").fetchall()
    meta: dict[str, Any] = {}
    for key, value in rows:
        try:
            meta[key] = json.loads(value) if value is not None else None
        except (TypeError, json.JSONDecodeError):
            meta[key] = value
    fmt = meta.get("format")
    if not isinstance(fmt, str) or not fmt.startswith("echoreo-session/"):
        raise open_error(path, f"not a session file (meta.format is {fmt!r}, "
                         f"expected {FORMAT!r})",
                         "give a file written by `echoreo session` or `echoreo import`")
    try:
        version = int(fmt.split("/", 1)[1])
    except ValueError:
        raise open_error(path, f"unknown session-file format {fmt!r}",
                         "give a file written by echoreo") from None
    if version > FORMAT_VERSION:
        raise open_error(
            path, f"written in format {fmt!r}, newer than this echoreo reads ({FORMAT!r})",
            "upgrade echoreo (`pip install -U echoreo`) to read this file")
    return meta


def check_and_recover(path: Path) -> bool:
    """Validate the file and mark a crashed ``running`` session ``interrupted``.

    Returns
    -------
    bool
        True when the session was found crashed (marked in the file, or only
        reported when the file cannot be written).
    """
    try:
        conn = sqlite3.connect(f"{path.resolve().as_uri()}?mode=rw", uri=True,
                               timeout=10.0)
    except sqlite3.OperationalError:
        conn = None  # read-only file or medium: validated below, no marking
    if conn is None:
        try:
            ro = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True)
            try:
                meta = read_meta(ro, path)
            finally:
                ro.close()
        except sqlite3.DatabaseError as exc:
            raise db_error(path, exc) from exc
        return meta.get("state") == "running" and not _writer_alive(meta.get("writer"))
    try:
        meta = read_meta(conn, path)
        if meta.get("state") != "running" or _writer_alive(meta.get("writer")):
            return False
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
        raise db_error(path, exc) from exc
    finally:
        conn.close()
    return True
