"""A hostile sensor publisher for the malformed-message test (run as a script).

It binds a ROUTER socket on 127.0.0.1, announces one stream to the host that
says HELLO, answers time requests, then sends ``--count`` messages that break
adapters/PROTOCOL.md in the ways listed in ``CATEGORIES`` (seeded), then
``--valid`` valid samples, then answers until SIGTERM or ``--duration``.

Usage: python fuzz_peer.py READY_FILE --count N --valid M --seed S
"""

from __future__ import annotations

import argparse
import json
import signal
import struct
import time

import numpy as np
import zmq

from echoreo.adapters.protocol import (
    ARRAY_MAX_BYTES,
    MAGIC,
    META_MAX_BYTES,
    MsgType,
    decode,
    encode,
)
from echoreo.errors import ProtocolError

BOOT = 4242
STREAM = {"name": "chest_imu", "kind": "imu", "channels": ["acc_x", "acc_y", "acc_z"],
          "units": ["m/s^2"] * 3, "rate_hz": 100.0}
CATEGORIES = ("random_bytes", "part_count", "version", "huge_meta", "huge_array",
              "huge_claim", "bad_json", "bad_field", "unknown_type", "unknown_stream",
              "wrong_channels", "nonfinite")
SMALL = tuple(c for c in CATEGORIES if c != "huge_array")


def header(version: int = 1, kind: int = int(MsgType.SAMPLES), flags: int = 0) -> bytes:
    return struct.pack("<4sBBH", MAGIC, version, kind, flags)


def samples(n: int = 1, c: int = 3, stream: str = "chest_imu") -> list[bytes]:
    index = np.column_stack([np.arange(n), np.arange(n) * 10_000_000]).astype("<i8")
    meta = json.dumps({"stream": stream, "n": n, "boot": BOOT}).encode()
    return [header(), meta, index.tobytes(), np.zeros((n, c), "<f8").tobytes()]


def malformed(cat: str, rng: np.random.Generator) -> list[bytes]:
    """One message of category ``cat`` that a reader must refuse."""
    if cat == "random_bytes":
        return [rng.bytes(int(rng.integers(0, 200))) for _ in range(int(rng.integers(1, 5)))]
    if cat == "part_count":
        good = samples()
        k = int(rng.choice([1, 2, 3, 5, 6]))
        return (good + good)[:k]
    if cat == "version":
        good = samples()
        return [header(version=int(rng.choice([0, 2, 3, 255]))), *good[1:]]
    if cat == "huge_meta":
        return [header(kind=int(MsgType.HEARTBEAT)),
                b'{"t_ns":1,"pad":"' + b"x" * (META_MAX_BYTES + 10) + b'"}']
    if cat == "huge_array":   # over the protocol's limit, under the socket's cap
        good = samples()
        return [*good[:3], b"\0" * (ARRAY_MAX_BYTES + 8)]
    if cat == "huge_claim":   # declared counts that do not match (or exceed) the frames
        good = samples()
        n = int(rng.choice([2, 10**6, 2**40, -1, 0]))
        return [good[0], json.dumps({"stream": "chest_imu", "n": n, "boot": BOOT}).encode(),
                *good[2:]]
    if cat == "bad_json":
        good = samples()
        return [good[0], rng.choice([b"{", b"[1,2]", b"\xff\xfe", b'{"n": NaN}', b"null"]),
                *good[2:]]
    if cat == "bad_field":
        good = samples()
        meta = {"stream": "chest_imu", "n": 1, "boot": BOOT}
        key = str(rng.choice(["stream", "n", "boot"]))
        meta[key] = [None, "1", True, 1.5, {"a": 1}][int(rng.integers(0, 5))]
        if key == "stream":
            meta[key] = rng.choice(["", "x" * 100, 7])  # type: ignore[assignment]
        return [good[0], json.dumps(meta).encode(), *good[2:]]
    if cat == "unknown_type":
        return [header(kind=int(rng.choice([0, 15, 99, 255]))), b"{}"]
    if cat == "unknown_stream":
        return samples(stream="not_announced")
    if cat == "wrong_channels":
        return samples(c=int(rng.choice([1, 2, 4, 6])))
    if cat == "nonfinite":   # a command with NaN joints (also wrong for a publisher to send)
        return [header(kind=int(MsgType.COMMAND)), b'{"seq":1,"t_ns":1}',
                np.array([np.nan, 0.0]).tobytes()]
    raise AssertionError(cat)


def is_refused(frames: list[bytes]) -> bool:
    """True when decode refuses it or it is one the reader must refuse by content."""
    try:
        msg = decode(frames)
    except ProtocolError:
        return True
    if msg.type == MsgType.SAMPLES:
        return msg.meta["stream"] != "chest_imu" or msg.arrays[1].shape[1] != 3
    return False


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("ready")
    ap.add_argument("--count", type=int, default=10_000)
    ap.add_argument("--valid", type=int, default=20)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--duration", type=float, default=60.0)
    args = ap.parse_args()
    rng = np.random.default_rng(args.seed)
    stop = {"now": False}
    signal.signal(signal.SIGTERM, lambda *_: stop.update(now=True))
    ctx = zmq.Context()
    sock = ctx.socket(zmq.ROUTER)
    sock.linger = 0
    sock.router_mandatory = True
    sock.sndhwm = 0
    sock.bind("tcp://127.0.0.1:0")
    with open(args.ready + ".tmp", "w") as fh:
        json.dump({"endpoint": sock.getsockopt_string(zmq.LAST_ENDPOINT)}, fh)
    import os
    os.replace(args.ready + ".tmp", args.ready)
    host = None
    sent_bad = 0
    sent_valid = 0
    counts = dict.fromkeys(CATEGORIES, 0)
    t_end = time.monotonic() + args.duration
    synced = 0
    while not stop["now"] and time.monotonic() < t_end:
        if sock.poll(5):
            frames = sock.recv_multipart()
            ident, body = frames[0], frames[1:]
            msg = decode(body)
            if msg.type == MsgType.HELLO and host is None:
                host = ident
                sock.send_multipart([ident, *encode(MsgType.ANNOUNCE, {
                    "device": "fuzz", "boot": BOOT, "streams": [STREAM], "time_sync": True,
                    "heartbeat_ms": 200})])
            elif msg.type == MsgType.TIME_REQ:
                t = time.monotonic_ns()
                sock.send_multipart([ident, *encode(MsgType.TIME_REP, {
                    "id": msg.meta["id"], "t1_ns": msg.meta["t1_ns"], "t2_ns": t,
                    "t3_ns": time.monotonic_ns()})])
                synced += 1
        if host is None or synced < 8:
            continue
        for _ in range(200):  # a slice per turn, so time requests keep being answered
            if sent_bad < args.count:
                # 4 MiB frames are costly to make and move: one message in 500 is one
                cat = ("huge_array" if sent_bad % 500 == 0 else
                       SMALL[sent_bad % len(SMALL)])
                frames = malformed(cat, rng)
                while not is_refused(frames):  # astronomically rare for random bytes
                    frames = malformed(cat, rng)
                sock.send_multipart([host, *frames])
                counts[cat] += 1
                sent_bad += 1
            elif sent_valid < args.valid:
                k = sent_valid
                index = np.array([[k, time.monotonic_ns()]], "<i8")
                sock.send_multipart([host, *encode(MsgType.SAMPLES, {
                    "stream": "chest_imu", "n": 1, "boot": BOOT}, index,
                    np.full((1, 3), float(k)))])
                sent_valid += 1
            else:
                break
        if sent_bad == args.count and sent_valid == args.valid and counts:
            print(json.dumps({"sent_bad": sent_bad, "sent_valid": sent_valid,
                              "by_category": counts}), flush=True)
            counts = {}
    sock.close(0)
    ctx.term()


if __name__ == "__main__":
    main()
