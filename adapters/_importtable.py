"""Reading the data tables of a file import: CSV/TSV rows to a stream's samples.

:func:`_read_table` splits a delimited text file into its header and numbered
rows; :func:`_stream_samples` turns one stream's columns into exact int64 ns
device times (decimal arithmetic), sequence numbers and SI values, appending
every problem at ``file:line``. Used by
:class:`~echoreo.adapters.file_import.FileSource`.
"""

from __future__ import annotations

import csv
import math
from decimal import Decimal, InvalidOperation
from pathlib import Path

import numpy as np

from echoreo.adapters._importtypes import TIME_UNITS, StreamMap
from echoreo.errors import InputError, Problem

__all__: list[str] = []


def _parse_time_ns(text: str, per_unit: int) -> int:
    """Exact ns of a decimal time string (``"12.345"`` ms → 12_345_000 ns)."""
    try:
        return int(text) * per_unit
    except ValueError:
        pass
    d = Decimal(text)  # raises InvalidOperation
    if not d.is_finite():
        raise InvalidOperation
    return round(d * per_unit)


def _read_table(path: Path, delimiter: str | None) -> tuple[list[str], list[tuple[int, list[str]]]]:
    """Header and ``(line number, fields)`` rows of a delimited text file."""
    try:
        with open(path, encoding="utf-8-sig", newline="") as fh:
            text = fh.read()
    except FileNotFoundError:
        raise InputError(Problem("data file not found", str(path),
                                 hint="check the path and the file name")) from None
    except UnicodeDecodeError as exc:
        raise InputError(Problem(f"data file is not UTF-8 text ({exc.reason} at byte "
                                 f"{exc.start})", str(path),
                                 hint="export the table as UTF-8 CSV or TSV")) from exc
    except OSError as exc:
        raise InputError(Problem(f"cannot read the data file: {exc.strerror}",
                                 str(path))) from exc
    lines = text.splitlines(keepends=True)
    # skip leading comment lines ('#') and blank lines before the header
    first = 0
    while first < len(lines) and (not lines[first].strip() or lines[first].lstrip()
                                  .startswith("#")):
        first += 1
    if first == len(lines):
        raise InputError(Problem("data file has no header line", str(path), 1,
                                 hint="the first line names the columns"))
    if delimiter is None:
        if path.suffix.lower() in (".tsv", ".tab"):
            delimiter = "\t"
        else:
            header_line = lines[first]
            counts = {d: header_line.count(d) for d in (",", ";", "\t")}
            delimiter = max(counts, key=lambda d: counts[d]) if any(counts.values()) else ","
    reader = csv.reader(lines[first:], delimiter=delimiter, strict=True)
    rows: list[tuple[int, list[str]]] = []
    header: list[str] | None = None
    try:
        for fields in reader:
            line = first + reader.line_num
            if header is None:
                header = [h.strip() for h in fields]
                continue
            if not fields or (len(fields) == 1 and not fields[0].strip()):
                continue  # blank line
            if fields[0].lstrip().startswith("#"):
                continue
            rows.append((line, fields))
    except csv.Error as exc:
        raise InputError(Problem(f"malformed table: {exc}", str(path), first + reader.line_num,
                                 hint="check quotes and separators on this line")) from exc
    assert header is not None
    return header, rows


def _stream_samples(sm: StreamMap, path: Path, header: list[str],
                    rows: list[tuple[int, list[str]]], mapping_source: str,
                    problems: list[Problem]) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Parse one stream's columns; problems are appended with ``file:line``."""
    name = str(path)
    index: dict[str, int] = {}
    for i, h in enumerate(header):
        if h in index:
            problems.append(Problem(f"column {h!r} appears twice in the header (columns "
                                    f"{index[h] + 1} and {i + 1})", name, 1,
                                    hint="give every column its own name"))
        index.setdefault(h, i)
    wanted = [(sm.time.column, sm.time.loc)] + [(c.column, c.loc) for c in sm.channels]
    if sm.seq_column:
        wanted.append((sm.seq_column, None))
    missing = [(col, loc) for col, loc in wanted if col not in index]
    if missing:
        shown = ", ".join(repr(h) for h in header[:20]) + (" ..." if len(header) > 20 else "")
        hint = "fix the column name in the mapping; it must match the header exactly"
        for col, loc in missing:
            message = (f"stream {sm.name!r}: column {col!r} is not in {name} "
                       f"(columns: {shown})")
            problems.append(loc.problem(message, hint) if loc is not None
                            else Problem(message, mapping_source, hint=hint))
        return None
    t_col = index[sm.time.column]
    c_cols = [index[c.column] for c in sm.channels]
    s_col = index[sm.seq_column] if sm.seq_column else None
    per_unit = TIME_UNITS[sm.time.unit]
    scales = np.array([c.scale for c in sm.channels])
    n_fields = len(header)
    times: list[int] = []
    seqs: list[int] = []
    values: list[list[float]] = []
    before = len(problems)
    last_t = None
    for line, fields in rows:
        if len(fields) != n_fields:
            problems.append(Problem(f"{len(fields)} fields, the header has {n_fields}",
                                    name, line, hint="check separators and quotes"))
            continue
        cells = [fields[j].strip() for j in c_cols]
        if all(c == "" for c in cells):
            continue  # no sample of this stream on this row
        row_ok = True
        vals = []
        for j, cell, ch in zip(c_cols, cells, sm.channels, strict=True):
            if cell == "":
                vals.append(math.nan)
                continue
            try:
                v = float(cell)
            except ValueError:
                v = None
            if v is None or math.isinf(v):
                problems.append(Problem(f"column {ch.column!r} (field {j + 1}): {cell!r} is "
                                        "not a number", name, line,
                                        hint="leave the cell empty for a missing value"))
                row_ok = False
            else:
                vals.append(v)
        tcell = fields[t_col].strip()
        try:
            t = _parse_time_ns(tcell, per_unit)
        except (InvalidOperation, ValueError):
            problems.append(Problem(f"time column {sm.time.column!r} (field {t_col + 1}): "
                                    f"{tcell!r} is not a number of {sm.time.unit}", name, line,
                                    hint="every sample needs a time"))
            row_ok = False
            t = None
        if t is not None and last_t is not None and t < last_t[0]:
            problems.append(Problem(f"time goes back from {last_t[0] / per_unit:g} (line "
                                    f"{last_t[1]}) to {t / per_unit:g} {sm.time.unit}",
                                    name, line, hint="sort the rows by time"))
            row_ok = False
        if s_col is not None:
            scell = fields[s_col].strip()
            try:
                seqs.append(int(scell))
            except ValueError:
                problems.append(Problem(f"sequence column {sm.seq_column!r} (field "
                                        f"{s_col + 1}): {scell!r} is not an integer",
                                        name, line))
                row_ok = False
        if row_ok:
            times.append(t)
            values.append(vals)
            last_t = (t, line)
        elif s_col is not None and len(seqs) > len(times):
            seqs.pop()
    if len(problems) > before:
        return None
    if not times:
        problems.append(Problem(f"stream {sm.name!r}: no samples (every row's channel cells "
                                "are empty)", name, hint="check the column mapping"))
        return None
    t_dev = np.array(times, dtype=np.int64)
    seq = np.array(seqs, dtype=np.int64) if s_col is not None else np.arange(len(times))
    data = np.array(values, dtype=np.float64).reshape(len(times), len(sm.channels)) * scales
    return t_dev, seq, data
