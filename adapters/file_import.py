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

This module holds :class:`FileSource` and :func:`stream_pairs` and
re-exports every public name of the mapping: the units and the dataclasses
(:mod:`echoreo.adapters._importtypes`), :class:`ImportMapping` and its
parser (:mod:`echoreo.adapters._importmapping`); the tables are read by
:mod:`echoreo.adapters._importtable`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from echoreo.adapters._importmapping import ImportMapping
from echoreo.adapters._importtable import _read_table, _stream_samples
from echoreo.adapters._importtypes import CHANNEL_UNITS, TIME_UNITS, ChannelMap, StreamMap, TimeSpec
from echoreo.adapters.base import Clock, ClockMap, FollowerSource, SampleBatch, StreamInfo
from echoreo.errors import InputError, Problem

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

_MAX_LISTED = 25  # data problems listed in full; the rest are counted


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
