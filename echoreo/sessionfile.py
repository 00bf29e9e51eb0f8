"""The session file: schema, read-only reader, and the scores writer.

One SQLite database per session (DEVELOPERS.md, "Session file"). The recorder
in :mod:`echoreo.runner.recorder` writes it through the DDL defined here; the
scoring side reads it through :class:`SessionFile` and writes its results
with :func:`write_scores`. Neither side imports the other.

This module is the public face and re-exports every public name; the code
lives in :mod:`echoreo._sessionschema` (constants, DDL, names, JSON values),
:mod:`echoreo._sessionopen` (format check, crash marking, WAL folding, the
writer's identity), :mod:`echoreo._sessionreader` (:class:`SessionFile`) and
:mod:`echoreo._sessionscores` (:func:`write_scores`). :func:`find_sessions`
is defined here.

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

from collections.abc import Iterable
from pathlib import Path

from echoreo._sessionopen import make_self_contained, process_identity
from echoreo._sessionreader import SessionFile
from echoreo._sessionschema import (
    FORMAT,
    FORMAT_VERSION,
    SCHEMA,
    STATES,
    check_name,
    create_schema,
    quote_ident,
    stream_table,
    stream_table_ddl,
    to_json,
)
from echoreo._sessionschema import (
    STREAM_FIXED_COLUMNS as STREAM_FIXED_COLUMNS,
)
from echoreo._sessionscores import write_scores
from echoreo.errors import Problem

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
