"""File import: sensor data captured by another system, read from CSV/TSV.

A study may record its wearables with another program and still want the
same scoring. An *import mapping* says which columns of which text table form
which stream (kind, channels, units), where the time column is, its unit, and
the offset that puts it on the session clock (format: ``choreographies/
FORMAT.md``, section 4). :class:`FileSource` is a
:class:`~echoreo.adapters.base.FollowerSource` that reads and validates all
the data at :meth:`~FileSource.connect` and delivers it in one :meth:`poll`;
``echoreo import`` (:mod:`echoreo.runner.cmd_import`) records it into a
session file next to a choreography's timeline.

Time: session time (ns) = device time (ns) + offset, with device time =
the time column × its unit, kept exactly (decimal arithmetic, no float
rounding of long epoch times). Values are converted to SI on reading
(degrees → rad, g → m/s², ...); the stored unit is the SI one.

Every problem in the mapping or the data is collected in one pass and
reported with its location (``mapping.yaml:7:5``, ``data.csv:118``); nothing
reaches a session file until all of it is clean.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from decimal import Decimal, InvalidOperation
from pathlib import Path
from typing import Any

import numpy as np

from echoreo.adapters.base import Clock, ClockMap, FollowerSource, SampleBatch, StreamInfo
from echoreo.errors import InputError, Problem
from echoreo.sessionfile import check_name
from echoreo.yamlload import LDict, Loc, load_yaml, loc_of

__all__ = [
    "CHANNEL_UNITS",
    "TIME_UNITS",
    "ChannelMap",
    "FileSource",
    "ImportMapping",
    "StreamMap",
    "TimeSpec",
    "stream_pairs",
]

#: Time units of a time column: ns per unit.
TIME_UNITS: dict[str, int] = {"s": 1_000_000_000, "ms": 1_000_000, "us": 1_000, "µs": 1_000,
                              "ns": 1}

_G = 9.80665  # standard gravity, m/s² (CGPM 1901), for accelerations given in g
#: Channel units understood on import: unit -> (SI unit stored, factor to SI).
#: Units not listed are stored as given, unconverted.
CHANNEL_UNITS: dict[str, tuple[str, float]] = {
    "rad": ("rad", 1.0), "deg": ("rad", math.pi / 180.0),
    "rad/s": ("rad/s", 1.0), "deg/s": ("rad/s", math.pi / 180.0),
    "rad/s^2": ("rad/s^2", 1.0), "deg/s^2": ("rad/s^2", math.pi / 180.0),
    "m/s^2": ("m/s^2", 1.0), "m/s²": ("m/s^2", 1.0), "g": ("m/s^2", _G),
    "mg": ("m/s^2", _G * 1e-3),
    "m": ("m", 1.0), "cm": ("m", 1e-2), "mm": ("m", 1e-3), "m/s": ("m/s", 1.0),
    "1": ("1", 1.0),
}

_MAX_LISTED = 25  # data problems listed in full; the rest are counted


@dataclass(frozen=True)
class TimeSpec:
    """Where a stream's time comes from.

    Parameters
    ----------
    column : str
        Header name of the time column.
    unit : str
        One of :data:`TIME_UNITS`.
    offset_ns : int
        Added to the device time to give session time, ns.
    loc : Loc or None
        Where the column was named (mapping file position), for messages.
    """

    column: str
    unit: str
    offset_ns: int = 0
    loc: Loc | None = field(default=None, compare=False)


@dataclass(frozen=True)
class ChannelMap:
    """One channel: the column it comes from and its units.

    Parameters
    ----------
    name : str
        Channel name in the session file (``acc_x``).
    column : str
        Header name in the data file.
    unit : str
        Unit as written in the data file (``g``, ``deg/s``).
    si_unit : str
        Unit stored (``m/s^2``, ``rad/s``; the given unit when unknown).
    scale : float
        Factor from ``unit`` to ``si_unit``.
    loc : Loc or None
        Where the channel was described (mapping file position), for messages.
    """

    name: str
    column: str
    unit: str
    si_unit: str
    scale: float
    loc: Loc | None = field(default=None, compare=False)


@dataclass(frozen=True)
class StreamMap:
    """One stream of an import mapping.

    Parameters
    ----------
    name, kind : str
        Stream name (a safe identifier) and kind (``imu``, ``head_pose``, ...).
    channels : tuple of ChannelMap
        Its channels in order.
    time : TimeSpec
        Its time column.
    file : Path or None
        Data file for this stream (None: the command's data file).
    seq_column : str or None
        Column of sequence numbers (None: the row index within the stream).
    rate_hz : float or None
        Nominal rate, Hz (None: estimated as 1 / median sample interval).
    site, leader_site : str or None
        Body site wearing the sensor and the robot site it is compared with.
    leader_stream : str or None
        Another stream of the mapping, recorded from a sensor on the robot, that
        scoring takes as this stream's leader reference (FORMAT.md section 4).
    """

    name: str
    kind: str
    channels: tuple[ChannelMap, ...]
    time: TimeSpec
    file: Path | None = None
    seq_column: str | None = None
    rate_hz: float | None = None
    site: str | None = None
    leader_site: str | None = None
    leader_stream: str | None = None


@dataclass(frozen=True)
class ImportMapping:
    """Which columns of which file form which stream.

    Parameters
    ----------
    streams : tuple of StreamMap
        The streams to import.
    delimiter : str or None
        Field separator; None: from the extension (``.tsv``/``.tab`` → tab),
        else detected among ``,``, ``;`` and tab from the header line.
    source : str
        The mapping file, or ``"command line"``.
    text : str
        The mapping as written (stored in the session file).
    """

    streams: tuple[StreamMap, ...]
    delimiter: str | None = None
    source: str = "command line"
    text: str = ""

    # -- from a YAML file -------------------------------------------------------
    @classmethod
    def from_yaml(cls, path: str | Path) -> ImportMapping:
        """Read an import mapping (``choreographies/FORMAT.md``, section 4).

        Raises
        ------
        InputError
            Every problem of the file, each at ``file:line:column``.
        """
        doc = load_yaml(path, what="import mapping")
        name = str(path)
        base = Path(path).parent
        problems: list[Problem] = []
        if not isinstance(doc, LDict):
            raise InputError(loc_of(doc, default=Loc(name, 1, 1)).problem(
                "an import mapping is a mapping with 'time' and 'streams'"))
        known = {"format", "delimiter", "time", "streams"}
        for key in doc:
            if key not in known:
                problems.append(doc.key_loc(key).problem(
                    f"unknown key {key!r}", f"use {', '.join(sorted(known))}"))
        fmt = doc.get("format", "echoreo-import/1")
        if fmt != "echoreo-import/1":
            problems.append(doc.value_loc("format").problem(
                f"format {fmt!r} is not understood", "write format: echoreo-import/1"))
        delimiter = doc.get("delimiter")
        if delimiter is not None:
            delimiter = {"tab": "\t", "\\t": "\t", "comma": ",", "semicolon": ";"}.get(
                delimiter, delimiter)
            if not (isinstance(delimiter, str) and len(delimiter) == 1):
                problems.append(doc.value_loc("delimiter").problem(
                    f"delimiter must be one character, not {doc['delimiter']!r}",
                    "write delimiter: ',' or delimiter: tab"))
                delimiter = None
        top_time = None
        if "time" in doc:
            top_time = _time_from_yaml(doc["time"], doc.value_loc("time"), problems)
        streams_doc = doc.get("streams")
        streams: list[StreamMap] = []
        if not isinstance(streams_doc, LDict) or not streams_doc:
            problems.append(doc.value_loc("streams").problem(
                "'streams' must map each stream name to its description",
                "see choreographies/FORMAT.md, section 4"))
        else:
            for sname, sdoc in streams_doc.items():
                s = _stream_from_yaml(sname, sdoc, streams_doc.key_loc(sname),
                                      streams_doc.value_loc(sname), top_time, base, problems)
                if s is not None:
                    streams.append(s)
            by_name = {s.name: s for s in streams}
            for s in streams:
                if s.leader_stream is None:
                    continue
                where = streams_doc[s.name].value_loc("leader_stream")
                target = by_name.get(s.leader_stream)
                if target is None or target is s:
                    problems.append(where.problem(
                        f"stream {s.name!r}: leader_stream {s.leader_stream!r} is not another "
                        "stream of this mapping",
                        "map the robot's sensor as its own stream (without a site) and name it"))
                elif target.site:
                    problems.append(where.problem(
                        f"stream {s.name!r}: leader_stream {s.leader_stream!r} is a "
                        "participant stream (it names a site)",
                        "a leader stream is a sensor on the robot: remove its site"))
        if problems:
            raise InputError(problems)
        text = Path(path).read_text(encoding="utf-8")
        return cls(tuple(streams), delimiter, name, text)

    # -- from command-line options -------------------------------------------
    @classmethod
    def from_cli(cls, time: str, streams: Sequence[str], *, time_offset_s: float = 0.0,
                 delimiter: str | None = None) -> ImportMapping:
        """Build a mapping from ``--time`` and ``--stream`` options.

        Parameters
        ----------
        time : str
            ``COLUMN:UNIT``, e.g. ``timestamp:ms``.
        streams : sequence of str
            Each ``NAME:KIND[@RATE]:COL=CHANNEL[UNIT],...``; ``COL[UNIT]`` alone
            names the channel after its column. Example:
            ``right_wrist_imu:imu@100:ax=acc_x[g],ay=acc_y[g],az=acc_z[g]``.
        time_offset_s : float
            Offset added to the time column, s.
        delimiter : str, optional
            Field separator.

        Raises
        ------
        InputError
            Every malformed option, quoted in the message.
        """
        problems: list[Problem] = []
        tspec = None
        if not math.isfinite(time_offset_s):
            problems.append(Problem(f"--time-offset must be a finite number of s, "
                                    f"not {time_offset_s!r}"))
            time_offset_s = 0.0
        col, sep, unit = time.rpartition(":")
        if not sep or not col or unit not in TIME_UNITS:
            problems.append(Problem(
                f"--time {time!r}: expected COLUMN:UNIT with UNIT one of "
                f"{', '.join(TIME_UNITS)}", hint="for example --time timestamp:ms"))
        else:
            tspec = TimeSpec(col, unit, round(Decimal(repr(time_offset_s)) * 1_000_000_000))
        out: list[StreamMap] = []
        for spec in streams:
            parts = spec.split(":", 2)
            if len(parts) != 3 or not all(parts):
                problems.append(Problem(
                    f"--stream {spec!r}: expected NAME:KIND[@RATE]:COL=CHANNEL[UNIT],...",
                    hint="for example --stream head_pose:head_pose@30:yaw_deg=yaw[deg]"))
                continue
            name, kind, chans = parts
            rate = None
            if "@" in kind:
                kind, _, rate_text = kind.partition("@")
                try:
                    rate = float(rate_text)
                    if not (math.isfinite(rate) and rate > 0):
                        raise ValueError
                except ValueError:
                    problems.append(Problem(f"--stream {spec!r}: rate {rate_text!r} is not a "
                                            "positive number of Hz"))
                    rate = None
            here = Loc(None, None, None)
            channels = []
            for item in chans.split(","):
                item = item.strip()
                column, _, rest = item.partition("=")
                chan, unit = (rest or column), None
                if chan.endswith("]") and "[" in chan:
                    chan, _, unit = chan[:-1].partition("[")
                if not rest and "[" in column:
                    column = column.partition("[")[0]
                if not column or not chan or unit is None or not unit:
                    problems.append(Problem(
                        f"--stream {spec!r}: channel {item!r} needs COL=CHANNEL[UNIT] "
                        "or COL[UNIT]", hint="units are required, e.g. ax=acc_x[m/s^2]"))
                    continue
                channels.append(_channel(chan, column, unit, here, problems))
            out.append(_stream(name, kind, channels, tspec, None, None, rate, None, None,
                               here, problems))
        if not streams:
            problems.append(Problem("no streams to import",
                                    hint="give --mapping FILE or at least one --stream"))
        if problems:
            raise InputError(problems)
        text = " ".join([f"--time {time}", f"--time-offset {time_offset_s!r}",
                         *(f"--stream {s}" for s in streams)])
        return cls(tuple(s for s in out if s is not None), delimiter, "command line", text)


def _time_from_yaml(tdoc: Any, loc: Loc, problems: list[Problem]) -> TimeSpec | None:
    if not isinstance(tdoc, LDict):
        problems.append(loc.problem("'time' must be a mapping with 'column' and 'unit'",
                                    "for example time: {column: timestamp, unit: ms}"))
        return None
    ok = True
    for key in tdoc:
        if key not in ("column", "unit", "offset_s"):
            problems.append(tdoc.key_loc(key).problem(
                f"unknown key {key!r} in 'time'", "use column, unit, offset_s"))
    column = tdoc.get("column")
    if not isinstance(column, str) or not column:
        problems.append(tdoc.value_loc("column").problem(
            "'time' needs 'column': the header name of the time column"))
        ok = False
    unit = tdoc.get("unit")
    if unit not in TIME_UNITS:
        problems.append(tdoc.value_loc("unit").problem(
            f"time unit {unit!r} is not one of {', '.join(TIME_UNITS)}",
            "say which unit the time column is in, e.g. unit: ms"))
        ok = False
    offset = tdoc.get("offset_s", 0)
    if isinstance(offset, bool) or not isinstance(offset, (int, float)) \
            or not math.isfinite(offset):
        problems.append(tdoc.value_loc("offset_s").problem(
            f"offset_s must be a number of seconds, not {offset!r}"))
        ok = False
    if not ok:
        return None
    return TimeSpec(column, unit, round(Decimal(repr(offset)) * 1_000_000_000),
                    tdoc.value_loc("column"))


def _channel(name: Any, column: Any, unit: Any, loc: Loc, problems: list[Problem]) -> ChannelMap:
    try:
        check_name(name, "channel name")
    except InputError as exc:
        problems.append(loc.problem(exc.problems[0].message, exc.problems[0].hint))
    unit = str(unit)
    si, scale = CHANNEL_UNITS.get(unit, (unit, 1.0))
    return ChannelMap(str(name), str(column), unit, si, scale, loc if loc.file else None)


def _stream(name: Any, kind: Any, channels: list[ChannelMap], tspec: TimeSpec | None,
            file: Path | None, seq: str | None, rate: float | None, site: str | None,
            leader_site: str | None, loc: Loc, problems: list[Problem]) -> StreamMap | None:
    try:
        check_name(name, "stream name")
    except InputError as exc:
        problems.append(loc.problem(exc.problems[0].message, exc.problems[0].hint))
        return None
    if not isinstance(kind, str) or not kind:
        problems.append(loc.problem(f"stream {name!r} needs a 'kind' (imu, head_pose, ...)"))
        return None
    seen = set()
    for c in channels:
        if c.name.lower() in seen:
            problems.append(loc.problem(f"stream {name!r} names channel {c.name!r} twice"))
        seen.add(c.name.lower())
    if not channels:
        problems.append(loc.problem(f"stream {name!r} has no channels"))
        return None
    if tspec is None:
        return None
    return StreamMap(name, kind, tuple(channels), tspec, file, seq, rate, site, leader_site)


def _stream_from_yaml(name: Any, sdoc: Any, key_loc: Loc, loc: Loc, top_time: TimeSpec | None,
                      base: Path, problems: list[Problem]) -> StreamMap | None:
    if not isinstance(sdoc, LDict):
        problems.append(loc.problem(f"stream {name!r} must be a mapping with kind and channels"))
        return None
    known = {"kind", "channels", "time", "file", "seq", "rate_hz", "site", "leader_site",
             "leader_stream"}
    for key in sdoc:
        if key not in known:
            problems.append(sdoc.key_loc(key).problem(
                f"unknown key {key!r} in stream {name!r}", f"use {', '.join(sorted(known))}"))
    tspec = top_time
    if "time" in sdoc:
        tspec = _time_from_yaml(sdoc["time"], sdoc.value_loc("time"), problems)
    elif top_time is None:
        problems.append(key_loc.problem(f"stream {name!r} has no time column",
                                        "give 'time' at the top or in the stream"))
    channels: list[ChannelMap] = []
    cdoc = sdoc.get("channels")
    if not isinstance(cdoc, LDict) or not cdoc:
        problems.append(sdoc.value_loc("channels").problem(
            f"stream {name!r}: 'channels' must map channel names to {{column, unit}}",
            "for example acc_x: {column: ax, unit: g}"))
    else:
        for cname, c in cdoc.items():
            cl = cdoc.value_loc(cname)
            if not isinstance(c, LDict) or not isinstance(c.get("column"), str) \
                    or not isinstance(c.get("unit"), (str, int)):
                problems.append(cl.problem(
                    f"channel {cname!r} needs 'column' (header name) and 'unit'",
                    f"for example {cname}: {{column: ax, unit: m/s^2}}"))
                continue
            for key in c:
                if key not in ("column", "unit"):
                    problems.append(c.key_loc(key).problem(f"unknown key {key!r} in channel "
                                                           f"{cname!r}", "use column, unit"))
            channels.append(_channel(cname, c["column"], c["unit"], c.value_loc("column"),
                                     problems))
    file = None
    if "file" in sdoc:
        if not isinstance(sdoc["file"], str):
            problems.append(sdoc.value_loc("file").problem("'file' must be a path"))
        else:
            file = (base / sdoc["file"])
            if not file.is_file():
                problems.append(sdoc.value_loc("file").problem(
                    f"data file {str(file)!r} not found",
                    "give the path relative to the mapping file"))
    seq = sdoc.get("seq")
    if seq is not None and not isinstance(seq, str):
        problems.append(sdoc.value_loc("seq").problem("'seq' must be a column name"))
        seq = None
    rate = sdoc.get("rate_hz")
    if rate is not None and (isinstance(rate, bool) or not isinstance(rate, (int, float))
                             or not rate > 0 or not math.isfinite(rate)):
        problems.append(sdoc.value_loc("rate_hz").problem(
            f"rate_hz must be a positive number of Hz, not {rate!r}"))
        rate = None
    site = sdoc.get("site")
    leader_site = sdoc.get("leader_site")
    for key, v in (("site", site), ("leader_site", leader_site)):
        if v is not None and not isinstance(v, str):
            problems.append(sdoc.value_loc(key).problem(f"'{key}' must be a body-site name"))
    lead = sdoc.get("leader_stream")
    if lead is not None and not isinstance(lead, str):
        problems.append(sdoc.value_loc("leader_stream").problem(
            "'leader_stream' must be the name of another stream of this mapping"))
        lead = None
    made = _stream(name, sdoc.get("kind"), channels, tspec, file, seq,
                   None if rate is None else float(rate), site, leader_site, key_loc, problems)
    return made if made is None or lead is None else replace(made, leader_stream=lead)


# -- reading tables --------------------------------------------------------------------

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


class FileSource(FollowerSource):
    """Follower streams read from CSV/TSV files according to an import mapping.

    Parameters
    ----------
    mapping : ImportMapping
        Which columns form which stream.
    data_file : str or Path, optional
        The data file for streams whose mapping names none.

    Notes
    -----
    :meth:`connect` reads and checks every file and raises
    :class:`~echoreo.errors.InputError` listing every problem (missing or
    duplicate columns, rows with the wrong number of fields, values that are
    not numbers, time going backwards), each at ``file:line``. A row where all
    of a stream's channel cells are empty is not a sample of that stream (so
    one table can hold streams of different rates); a single empty cell is a
    missing value (NaN).
    """

    uses_network = False

    def __init__(self, mapping: ImportMapping, data_file: str | Path | None = None):
        self.mapping = mapping
        self.data_file = None if data_file is None else Path(data_file)
        self._batches: list[SampleBatch] | None = None
        self._infos: list[StreamInfo] = []
        self._maps: dict[str, ClockMap] = {}
        self._delivered = False

    def connect(self, clock: Clock | None = None) -> list[StreamInfo]:
        """Read and check all data; announce the streams (``clock`` is not needed)."""
        problems: list[Problem] = []
        tables: dict[Path, tuple[list[str], list[tuple[int, list[str]]]]] = {}
        batches, infos = [], []
        for sm in self.mapping.streams:
            path = sm.file or self.data_file
            if path is None:
                problems.append(Problem(f"stream {sm.name!r} has no data file",
                                        self.mapping.source,
                                        hint="give the data file on the command line or "
                                             "'file' in the stream's mapping"))
                continue
            if path not in tables:
                try:
                    tables[path] = _read_table(path, self.mapping.delimiter)
                except InputError as exc:
                    problems.extend(exc.problems)
                    tables[path] = ([], [])
                    continue
            header, rows = tables[path]
            if not header:
                continue
            result = _stream_samples(sm, path, header, rows, self.mapping.source, problems)
            if result is None:
                continue
            t_dev, seq, data = result
            t_ns = t_dev + np.int64(sm.time.offset_ns)
            rate = sm.rate_hz
            if rate is None:
                d = np.diff(t_dev)
                d = d[d > 0]
                rate = float(f"{1e9 / np.median(d):.4g}") if d.size else float("nan")
            infos.append(StreamInfo(sm.name, sm.kind, tuple(c.name for c in sm.channels),
                                    tuple(c.si_unit for c in sm.channels), rate,
                                    f"file import: {path.name}"))
            self._maps[sm.name] = ClockMap(offset_ns=sm.time.offset_ns, method="import")
            batches.append(SampleBatch(sm.name, t_ns, t_dev, seq, data))
        if problems:
            if len(problems) > _MAX_LISTED:
                extra = len(problems) - _MAX_LISTED
                problems = [*problems[:_MAX_LISTED],
                            Problem(f"... and {extra} more problems of the same kinds",
                                    problems[_MAX_LISTED].file,
                                    hint="fix the ones listed and run again")]
            raise InputError(problems)
        self._infos, self._batches = infos, batches
        return list(infos)

    def poll(self) -> list[SampleBatch]:
        """All samples, once (one batch per stream); then an empty list."""
        if self._delivered:
            return []
        if self._batches is None:
            raise RuntimeError("connect() first")
        self._delivered = True
        return list(self._batches)

    def clock_maps(self) -> dict[str, ClockMap]:
        """The constant offset map of each stream (method ``"import"``)."""
        return dict(self._maps)

    def close(self) -> None:
        """Drop the samples held in memory; idempotent."""
        self._batches = None
        self._delivered = True


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


def stream_pairs(mapping: ImportMapping) -> list[dict[str, Any]]:
    """``{stream, kind, site, leader_site[, leader_stream]}`` of the streams naming a site."""
    out = []
    for s in mapping.streams:
        if s.site:
            pair = {"stream": s.name, "kind": s.kind, "site": s.site,
                    "leader_site": s.leader_site}
            if s.leader_stream:
                pair["leader_stream"] = s.leader_stream
            out.append(pair)
    return out

