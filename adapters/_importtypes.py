"""The parts of an import mapping: units, time column, channels, streams.

:class:`TimeSpec`, :class:`ChannelMap` and :class:`StreamMap` describe where
a stream's time and channels come from in a CSV/TSV table (format:
``choreographies/FORMAT.md``, section 4); :data:`TIME_UNITS` and
:data:`CHANNEL_UNITS` are the units understood on import and their factors
to SI. Re-exported by :mod:`echoreo.adapters.file_import`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from echoreo.yamlload import Loc

__all__ = [
    "CHANNEL_UNITS",
    "TIME_UNITS",
    "ChannelMap",
    "StreamMap",
    "TimeSpec",
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
