"""The session-file schema: format constants, table DDL, identifiers and JSON values.

The one place the SQLite layout of a session file is written down in code
(DEVELOPERS.md, "Session file"): the fixed tables of :data:`SCHEMA`, one
table per stream from :func:`stream_table_ddl`, the rules for stream and
channel names (:func:`check_name`) and the strict JSON encoding of ``meta``
values and score records (:func:`to_json`). Re-exported by
:mod:`echoreo.sessionfile`.
"""

from __future__ import annotations

import json
import math
import re
import sqlite3
from collections.abc import Iterable, Mapping
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from echoreo.errors import SessionFileError

__all__ = [
    "FORMAT",
    "FORMAT_VERSION",
    "SCHEMA",
    "STATES",
    "STREAM_FIXED_COLUMNS",
    "check_name",
    "create_schema",
    "quote_ident",
    "stream_table",
    "stream_table_ddl",
    "to_json",
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


def _utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="microseconds")
