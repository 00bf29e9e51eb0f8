"""Encoding and strict decoding of the echoreo wire protocol (``adapters/PROTOCOL.md``).

Every message is a ZeroMQ multipart message::

    frame 0   header    8 bytes, struct "<4sBBH": magic b"ECWP", version, type, flags (0)
    frame 1   meta      UTF-8 JSON object, at most META_MAX bytes
    frame 2.. arrays    little-endian binary arrays, as many as the type defines

Two types carry arrays: ``COMMAND`` and ``STATE`` carry one float64 joint vector;
``SAMPLES`` carries an int64 index ``(n, 2)`` of (sequence number, device time in
ns) and a float64 data block ``(n, n_channels)``. Integers that are times in ns
travel as int64 (or JSON integers) because a float64 holds integers exactly only
up to 2**53 ns, about 104 days, and device clocks often count from an epoch.

:func:`decode` checks everything (part count, header, version, type, sizes, JSON
fields and their types, array lengths) and raises
:class:`echoreo.errors.ProtocolError` on the first violation; it never raises
anything else for any input, so a reader can count and skip bad messages.
"""

from __future__ import annotations

import json
import math
import struct
from dataclasses import dataclass, field
from enum import IntEnum
from typing import Any

import numpy as np

from echoreo.errors import ProtocolError

__all__ = [
    "ARRAY_MAX_BYTES",
    "MAGIC",
    "META_MAX_BYTES",
    "PROTOCOL_VERSION",
    "Message",
    "MsgType",
    "decode",
    "encode",
]

#: four bytes that open every header frame
MAGIC = b"ECWP"
#: the version this implementation speaks; a receiver rejects any other
PROTOCOL_VERSION = 1
_HEADER = struct.Struct("<4sBBH")
#: largest metadata frame accepted (bytes); a hello with 64 joint names needs < 4 KiB
META_MAX_BYTES = 64 * 1024
#: largest array frame accepted (bytes): 4 MiB, e.g. 8192 samples x 64 channels
ARRAY_MAX_BYTES = 4 * 1024 * 1024
#: socket-level cap set as ZMQ_MAXMSGSIZE on every socket (any one frame); libzmq
#: drops a connection that sends more, before our decoder sees it
SOCKET_MAX_FRAME_BYTES = ARRAY_MAX_BYTES + 1024
#: largest number of samples in one SAMPLES message, channels per stream, joints
MAX_SAMPLES = 8192
MAX_CHANNELS = 64
MAX_JOINTS = 64
_MAX_NAME = 64
_MAX_TEXT = 4096
_INT64_MIN = -(2**63)
_INT64_MAX = 2**63 - 1


class MsgType(IntEnum):
    """Message types (header byte 5)."""

    HELLO = 1
    WELCOME = 2
    ANNOUNCE = 3
    COMMAND = 4
    ACK = 5
    STATE = 6
    SAMPLES = 7
    HOLD = 8
    STOP = 9
    HEARTBEAT = 10
    TIME_REQ = 11
    TIME_REP = 12
    ERROR = 13
    BYE = 14


# field kinds: "int" (int64, not bool), "count" (int64 >= 0), "str" (short identifier-ish text),
# "text" (free text), "bool", "num" (finite number), "names" (list of short str),
# "floats" (list of finite numbers), "streams" (list of stream descriptions), "any"
_SCHEMA: dict[MsgType, tuple[dict[str, str], dict[str, str], int]] = {
    # type: (required fields, optional fields, number of array frames)
    MsgType.HELLO: ({"role": "str", "client": "text", "t_ns": "int"},
                    {"heartbeat_ms": "int"}, 0),
    MsgType.WELCOME: ({"robot": "str", "joint_names": "names", "q": "floats",
                       "watchdog_ms": "int", "heartbeat_ms": "int", "t_dev_ns": "int",
                       "boot": "int"}, {"bridge": "text"}, 0),
    MsgType.ANNOUNCE: ({"device": "text", "boot": "int", "streams": "streams",
                        "time_sync": "bool", "heartbeat_ms": "int"}, {}, 0),
    MsgType.COMMAND: ({"seq": "int", "t_ns": "int"}, {}, 1),
    MsgType.ACK: ({"seq": "int", "t_dev_ns": "int", "status": "str"},
                  {"reason": "text", "late_ns": "count"}, 0),
    MsgType.STATE: ({"seq": "int", "t_dev_ns": "int", "acked_seq": "int", "mode": "str"},
                    {"late": "count", "slipped": "count"}, 1),
    MsgType.SAMPLES: ({"stream": "str", "n": "int", "boot": "int"}, {}, 2),
    MsgType.HOLD: ({"t_ns": "int"}, {}, 0),
    MsgType.STOP: ({"t_ns": "int"}, {}, 0),
    MsgType.HEARTBEAT: ({"t_ns": "int"}, {}, 0),
    MsgType.TIME_REQ: ({"id": "int", "t1_ns": "int"}, {}, 0),
    MsgType.TIME_REP: ({"id": "int", "t1_ns": "int", "t2_ns": "int", "t3_ns": "int"}, {}, 0),
    MsgType.ERROR: ({"code": "str", "message": "text"}, {}, 0),
    MsgType.BYE: ({}, {"reason": "text"}, 0),
}

_STREAM_FIELDS = {"name": "str", "kind": "str", "channels": "names", "units": "names",
                  "rate_hz": "num"}


@dataclass(frozen=True)
class Message:
    """One decoded message.

    Parameters
    ----------
    type : MsgType
        Message type.
    meta : dict
        The validated metadata fields.
    arrays : tuple of ndarray
        ``COMMAND``/``STATE``: ``(q,)`` float64 ``(n_joints,)``; ``SAMPLES``:
        ``(index, data)`` with index int64 ``(n, 2)`` (seq, t_dev_ns) and data float64
        ``(n, n_channels)``; empty otherwise.
    """

    type: MsgType
    meta: dict[str, Any]
    arrays: tuple[np.ndarray, ...] = field(default=())


def _fail(message: str) -> ProtocolError:
    return ProtocolError(message, hint="the peer must follow adapters/PROTOCOL.md "
                                       f"(protocol version {PROTOCOL_VERSION})")


def _is_name(v: Any) -> bool:
    return isinstance(v, str) and 0 < len(v) <= _MAX_NAME and v.isprintable()


def _check_field(kind: str, key: str, v: Any) -> None:
    ok: bool
    if kind in ("int", "count"):
        ok = (isinstance(v, int) and not isinstance(v, bool)
              and (0 if kind == "count" else _INT64_MIN) <= v <= _INT64_MAX)
    elif kind == "str":
        ok = _is_name(v)
    elif kind == "text":
        ok = isinstance(v, str) and len(v) <= _MAX_TEXT
    elif kind == "bool":
        ok = isinstance(v, bool)
    elif kind == "num":
        ok = (isinstance(v, int | float) and not isinstance(v, bool)
              and math.isfinite(float(v)))
    elif kind == "names":
        ok = (isinstance(v, list) and len(v) <= max(MAX_JOINTS, MAX_CHANNELS)
              and all(_is_name(x) for x in v))
    elif kind == "floats":
        ok = (isinstance(v, list) and len(v) <= MAX_JOINTS
              and all(isinstance(x, int | float) and not isinstance(x, bool)
                      and math.isfinite(float(x)) for x in v))
    elif kind == "streams":
        ok = isinstance(v, list) and 0 < len(v) <= 64
        if ok:
            for s in v:
                if not isinstance(s, dict):
                    raise _fail(f"'{key}' must list stream objects, got {type(s).__name__}")
                _check_fields(s, _STREAM_FIELDS, {}, f"{key}[]")
                if len(s["channels"]) != len(s["units"]) or not s["channels"]:
                    raise _fail(f"stream {s['name']!r}: {len(s['channels'])} channels but "
                                f"{len(s['units'])} units")
                if not 0 < float(s["rate_hz"]) <= 100_000:
                    raise _fail(f"stream {s['name']!r}: rate_hz {s['rate_hz']} outside (0, 1e5]")
    else:  # pragma: no cover - schema typo
        raise AssertionError(kind)
    if not ok:
        what = "a non-negative int" if kind == "count" else kind
        raise _fail(f"field '{key}' must be {what}, got {type(v).__name__} {str(v)[:40]!r}")


def _check_fields(meta: dict, required: dict[str, str], optional: dict[str, str],
                  where: str) -> None:
    for key, kind in required.items():
        if key not in meta:
            raise _fail(f"{where}: field '{key}' is missing")
        _check_field(kind, key, meta[key])
    for key, kind in optional.items():
        if key in meta:
            _check_field(kind, key, meta[key])


def encode(kind: MsgType, meta: dict[str, Any], *arrays: np.ndarray,
           check: bool = True) -> list[bytes]:
    """Encode one message as a list of frames.

    Parameters
    ----------
    kind : MsgType
        Message type.
    meta : dict
        Metadata fields (validated against the type's schema).
    *arrays : ndarray
        Array frames in the order the type defines: float64 ``q`` for
        ``COMMAND``/``STATE``; int64 ``index (n, 2)`` and float64 ``data (n, c)``
        for ``SAMPLES``.
    check : bool
        Run :func:`decode` on the result (default). Time requests and replies
        pass ``False`` so that the timestamp is taken as close to the send as
        possible (their fields are plain integers built by this module).

    Returns
    -------
    list of bytes
        The frames, ready for ``send_multipart``.

    Raises
    ------
    ProtocolError
        If the message would not pass :func:`decode` on the other side.
    """
    frames = [_HEADER.pack(MAGIC, PROTOCOL_VERSION, int(kind), 0),
              json.dumps(meta, separators=(",", ":"), allow_nan=False).encode()]
    if kind == MsgType.SAMPLES:
        index, data = arrays
        frames.append(np.ascontiguousarray(index, dtype="<i8").tobytes())
        frames.append(np.ascontiguousarray(data, dtype="<f8").tobytes())
    else:
        frames.extend(np.ascontiguousarray(a, dtype="<f8").tobytes() for a in arrays)
    if check:
        decode(frames)  # one checker for both directions: never send what we would refuse
    return frames


def decode(frames: list[bytes] | list[Any]) -> Message:
    """Decode and validate one multipart message.

    Parameters
    ----------
    frames : list of bytes (or zmq.Frame)
        The parts as received.

    Returns
    -------
    Message

    Raises
    ------
    ProtocolError
        For any violation of PROTOCOL.md; nothing else is raised for any input.
    """
    try:
        return _decode(frames)
    except ProtocolError:
        raise
    except Exception as exc:  # any surprise in third-party parsing is still a bad message
        raise _fail(f"undecodable message ({type(exc).__name__}: {str(exc)[:80]})") from exc


def _decode(frames: list[Any]) -> Message:
    if not isinstance(frames, list | tuple) or len(frames) < 2:
        n = len(frames) if isinstance(frames, list | tuple) else "?"
        raise _fail(f"a message has at least 2 parts (header, meta); got {n}")
    if len(frames) > 4:
        raise _fail(f"a message has at most 4 parts; got {len(frames)}")
    parts = [bytes(f.buffer) if hasattr(f, "buffer") else bytes(f) for f in frames]
    head = parts[0]
    if len(head) != _HEADER.size:
        raise _fail(f"header frame must be {_HEADER.size} bytes; got {len(head)}")
    magic, version, type_code, flags = _HEADER.unpack(head)
    if magic != MAGIC:
        raise _fail(f"header magic {magic!r} is not {MAGIC!r}")
    if version != PROTOCOL_VERSION:
        raise _fail(f"protocol version {version} is not supported (this side speaks "
                    f"{PROTOCOL_VERSION})")
    try:
        kind = MsgType(type_code)
    except ValueError:
        raise _fail(f"unknown message type {type_code}") from None
    if flags != 0:
        raise _fail(f"header flags must be 0 in version {PROTOCOL_VERSION}; got {flags}")
    required, optional, n_arrays = _SCHEMA[kind]
    if len(parts) != 2 + n_arrays:
        raise _fail(f"{kind.name} has {2 + n_arrays} parts; got {len(parts)}")
    if len(parts[1]) > META_MAX_BYTES:
        raise _fail(f"meta frame of {len(parts[1])} bytes exceeds {META_MAX_BYTES}")
    for p in parts[2:]:
        if len(p) > ARRAY_MAX_BYTES:
            raise _fail(f"array frame of {len(p)} bytes exceeds {ARRAY_MAX_BYTES}")
    try:
        meta = json.loads(parts[1].decode("utf-8"),
                          parse_constant=lambda c: _raise(f"non-finite number {c}"))
    except (UnicodeDecodeError, json.JSONDecodeError, RecursionError) as exc:
        raise _fail(f"meta frame is not UTF-8 JSON ({str(exc)[:60]})") from None
    if not isinstance(meta, dict):
        raise _fail(f"meta must be a JSON object; got {type(meta).__name__}")
    _check_fields(meta, required, optional, kind.name)
    arrays: tuple[np.ndarray, ...] = ()
    if kind in (MsgType.COMMAND, MsgType.STATE):
        buf = parts[2]
        if len(buf) % 8 or not 0 < len(buf) // 8 <= MAX_JOINTS:
            raise _fail(f"{kind.name} joint frame of {len(buf)} bytes is not 1..{MAX_JOINTS} "
                        "float64 values")
        q = np.frombuffer(buf, dtype="<f8").astype(np.float64)
        if not np.all(np.isfinite(q)):
            raise _fail(f"{kind.name} joint vector holds non-finite values")
        arrays = (q,)
    elif kind == MsgType.SAMPLES:
        n = meta["n"]
        if not 0 < n <= MAX_SAMPLES:
            raise _fail(f"SAMPLES n = {n} outside 1..{MAX_SAMPLES}")
        if len(parts[2]) != n * 16:
            raise _fail(f"SAMPLES index frame has {len(parts[2])} bytes; n = {n} needs {n * 16}")
        size = len(parts[3])
        if size == 0 or size % (8 * n):
            raise _fail(f"SAMPLES data frame of {size} bytes is not n = {n} rows of float64")
        c = size // (8 * n)
        if c > MAX_CHANNELS:
            raise _fail(f"SAMPLES with {c} channels exceeds {MAX_CHANNELS}")
        index = np.frombuffer(parts[2], dtype="<i8").astype(np.int64).reshape(n, 2)
        data = np.frombuffer(parts[3], dtype="<f8").astype(np.float64).reshape(n, c)
        arrays = (index, data)
    return Message(kind, meta, arrays)


def _raise(message: str):
    raise _fail(message)
