"""Encoding and strict decoding of wire messages (adapters/PROTOCOL.md)."""

from __future__ import annotations

import json
import struct

import numpy as np
import pytest

from echoreo.adapters.protocol import MAGIC, META_MAX_BYTES, MsgType, decode, encode
from echoreo.errors import ProtocolError

STREAM = {"name": "right_wrist_imu", "kind": "imu", "channels": ["acc_x", "gyro_x"],
          "units": ["m/s^2", "rad/s"], "rate_hz": 100.0}
INDEX = np.array([[5, 1_700_000_000_000_000_123], [6, 1_700_000_000_010_000_123]])
VALID = {
    "hello": (MsgType.HELLO, {"role": "leader", "client": "echoreo", "t_ns": 1}, ()),
    "welcome": (MsgType.WELCOME, {"robot": "torso-e1", "joint_names": ["a", "b"],
                                  "q": [0.0, 0.5], "watchdog_ms": 250, "heartbeat_ms": 200,
                                  "t_dev_ns": 5, "boot": 9}, ()),
    "announce": (MsgType.ANNOUNCE, {"device": "d", "boot": 1, "streams": [STREAM],
                                    "time_sync": True, "heartbeat_ms": 200}, ()),
    "command": (MsgType.COMMAND, {"seq": 3, "t_ns": 10}, (np.array([0.1, -0.2]),)),
    "ack": (MsgType.ACK, {"seq": 3, "t_dev_ns": 11, "status": "ok"}, ()),
    "state": (MsgType.STATE, {"seq": 0, "t_dev_ns": 12, "acked_seq": 3, "mode": "follow"},
              (np.array([0.1, -0.2]),)),
    # the optional lateness keys (a minor addition within version 1, PROTOCOL.md 2 and 5)
    "ack_late": (MsgType.ACK, {"seq": 4, "t_dev_ns": 13, "status": "ok",
                               "reason": "late by 200.7 ms; applied at once",
                               "late_ns": 200_666_017}, ()),
    "state_totals": (MsgType.STATE, {"seq": 1, "t_dev_ns": 14, "acked_seq": 4,
                                     "mode": "follow", "late": 1, "slipped": 0},
                     (np.array([0.1, -0.2]),)),
    "samples": (MsgType.SAMPLES, {"stream": "right_wrist_imu", "n": 2, "boot": 1},
                (INDEX, np.array([[1.0, 2.0], [np.nan, 4.0]]))),
    "time_rep": (MsgType.TIME_REP, {"id": 1, "t1_ns": 1, "t2_ns": 2, "t3_ns": 3}, ()),
    "error": (MsgType.ERROR, {"code": "busy", "message": "another host"}, ()),
    "bye": (MsgType.BYE, {}, ()),
}


@pytest.mark.parametrize("name", list(VALID))
def test_round_trip(name):
    """What encode writes, decode returns unchanged; int64 times survive exactly
    (1.7e18 ns is beyond float64's 2**53 exact integers)."""
    kind, meta, arrays = VALID[name]
    msg = decode(encode(kind, meta, *arrays))
    assert msg.type == kind and msg.meta == meta
    for a, b in zip(msg.arrays, arrays, strict=True):
        np.testing.assert_array_equal(a, b)


def _header(version=1, kind=7, flags=0):
    return struct.pack("<4sBBH", MAGIC, version, kind, flags)


GOOD = encode(*VALID["samples"][:2], *VALID["samples"][2])
BAD = {
    "one part": [GOOD[0]],
    "five parts": [*GOOD, b""],
    "samples without data": GOOD[:3],
    "short header": [GOOD[0][:7], *GOOD[1:]],
    "wrong magic": [b"XXXX" + GOOD[0][4:], *GOOD[1:]],
    "version 2": [_header(version=2), *GOOD[1:]],
    "unknown type": [_header(kind=77), *GOOD[1:]],
    "flags set": [_header(flags=1), *GOOD[1:]],
    "huge meta": [_header(kind=10), b'{"t_ns":1,"x":"' + b"a" * META_MAX_BYTES + b'"}'],
    "n too large": [GOOD[0], json.dumps({"stream": "s", "n": 2**40, "boot": 1}).encode(),
                    *GOOD[2:]],
    "n mismatch": [GOOD[0], json.dumps({"stream": "s", "n": 3, "boot": 1}).encode(),
                   *GOOD[2:]],
    "ragged data": [*GOOD[:3], GOOD[3][:-8]],
    "not json": [GOOD[0], b"\xff{", *GOOD[2:]],
    "NaN in json": [_header(kind=10), b'{"t_ns": NaN}'],
    "json array": [_header(kind=10), b"[1]"],
    "bool as int": [_header(kind=10), b'{"t_ns": true}'],
    "missing field": [_header(kind=10), b"{}"],
    "NaN joint": [_header(kind=4), b'{"seq":1,"t_ns":1}', np.array([np.nan]).tobytes()],
    "65 joints": [_header(kind=4), b'{"seq":1,"t_ns":1}', np.zeros(65).tobytes()],
    "negative late_ns": [_header(kind=5),
                         b'{"seq":1,"t_dev_ns":1,"status":"ok","late_ns":-5}'],
    "late as text": [_header(kind=6), b'{"seq":1,"t_dev_ns":1,"acked_seq":1,"mode":"follow",'
                     b'"late":"1"}', np.zeros(2).tobytes()],
    "slipped as float": [_header(kind=6), b'{"seq":1,"t_dev_ns":1,"acked_seq":1,'
                         b'"mode":"follow","slipped":1.5}', np.zeros(2).tobytes()],
    "units mismatch": [_header(kind=3), json.dumps({
        "device": "d", "boot": 1, "time_sync": True, "heartbeat_ms": 1,
        "streams": [{**STREAM, "units": ["m"]}]}).encode()],
}


@pytest.mark.parametrize("name", list(BAD))
def test_violations_raise_protocol_error(name):
    """Each violation of PROTOCOL.md is refused with ProtocolError naming the problem."""
    with pytest.raises(ProtocolError):
        decode(BAD[name])


def test_encode_refuses_what_decode_would():
    """The sender runs the same checks: a bad message is never sent."""
    with pytest.raises(ProtocolError, match="stream"):
        encode(MsgType.SAMPLES, {"stream": "", "n": 1, "boot": 1}, INDEX[:1],
               np.zeros((1, 2)))


def test_negative_lateness_is_named():
    """A negative ``late_ns`` is refused with a message naming the field and the rule."""
    with pytest.raises(ProtocolError, match="'late_ns' must be a non-negative int"):
        decode(BAD["negative late_ns"])
