"""Reading an import mapping, from a YAML file or from command-line options.

:class:`ImportMapping` says which columns of which file form which stream
(``choreographies/FORMAT.md``, section 4). Every problem of the mapping is
collected in one pass and reported at its ``file:line:column``
(:class:`~echoreo.errors.InputError`). Re-exported by
:mod:`echoreo.adapters.file_import`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from decimal import Decimal
from pathlib import Path
from typing import Any

from echoreo.adapters._importtypes import CHANNEL_UNITS, TIME_UNITS, ChannelMap, StreamMap, TimeSpec
from echoreo.errors import InputError, Problem
from echoreo.sessionfile import check_name
from echoreo.yamlload import LDict, Loc, load_yaml, loc_of

__all__ = ["ImportMapping"]


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
