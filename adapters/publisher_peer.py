"""The reference sensor publisher of the wire protocol (``echoreo publish``).

:class:`SensorPublisher` announces streams and sends samples to every host
that said hello, stamped on its own (optionally offset, drifting and
time-compressed) device clock (:class:`~echoreo.adapters.DeviceClock`), and
answers time requests; a host it has no session with (it restarted, or forgot
that host after its silence) gets ERROR ``not_connected`` for its heartbeats, so
it says HELLO again (PROTOCOL.md section 6). :func:`synthetic_streams` (sinusoids) and
:func:`participant_streams` (a virtual participant) make what it publishes.

The loop is single-threaded with absolute deadlines and stops on SIGTERM,
SIGINT or after ``duration_s``.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

import numpy as np
import zmq

from echoreo.adapters._peer_common import (
    DeviceClock,
    Stopper,
    boot_id,
    listening,
    receive_pending,
)
from echoreo.adapters.protocol import MsgType, decode, encode
from echoreo.adapters.security import CurveKeys, check_endpoint
from echoreo.errors import ProtocolError

__all__ = ["PublishedStream", "SensorPublisher", "participant_streams", "synthetic_streams"]


@dataclass
class PublishedStream:
    """One stream of a :class:`SensorPublisher`.

    Parameters
    ----------
    name, kind : str
        Stream name and kind (as in :class:`~echoreo.adapters.base.StreamInfo`).
    channels, units : tuple of str
        Channel names and units.
    rate_hz : float
        Sample rate in device time, Hz.
    values : callable
        ``values(k) -> ndarray (n_channels,)`` for sample number ``k`` (0, 1, ...).
    start_seq : int
        Sequence number of sample 0.
    """

    name: str
    kind: str
    channels: tuple[str, ...]
    units: tuple[str, ...]
    rate_hz: float
    values: Callable[[int], np.ndarray]
    start_seq: int = 0
    next_k: int = field(default=0, init=False)

    def describe(self) -> dict[str, Any]:
        """The stream's entry in ANNOUNCE."""
        return {"name": self.name, "kind": self.kind, "channels": list(self.channels),
                "units": list(self.units), "rate_hz": float(self.rate_hz)}


def synthetic_streams(names: list[str], rate_hz: float, start_seq: int = 0,
                      rng: np.random.Generator | None = None) -> list[PublishedStream]:
    """Streams of sinusoids (IMU-like channels), a stand-in for a participant.

    Channel ``j`` of stream ``i`` is ``sin(2 pi f_ij k / rate)`` with
    ``f_ij = 0.3 + 0.1 i + 0.05 j`` Hz, plus Gaussian noise of 0.01 when ``rng``
    is given. Streams named ``*head*`` carry ``yaw pitch roll`` (rad).
    """
    out = []
    for i, name in enumerate(names):
        if "head" in name:
            kind, ch, un = "head_pose", ("yaw", "pitch", "roll"), ("rad",) * 3
        else:
            kind = "imu"
            ch = ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y", "gyro_z")
            un = ("m/s^2",) * 3 + ("rad/s",) * 3
        freqs = 0.3 + 0.1 * i + 0.05 * np.arange(len(ch))

        def values(k: int, f: np.ndarray = freqs) -> np.ndarray:
            v = np.sin(2 * np.pi * f * k / rate_hz)
            return v + rng.normal(0.0, 0.01, v.shape) if rng is not None else v

        out.append(PublishedStream(name, kind, ch, un, rate_hz, values, start_seq))
    return out


def participant_streams(robot_name: str, rng: np.random.Generator, duration_s: float = 60.0,
                        start_seq: int = 0) -> list[PublishedStream]:
    """A virtual participant's sensor streams (:func:`echoreo.sim.simulate_participant`).

    The leader performs a slow two-arm raise (shoulder flexion, 0.25 Hz,
    0.8 rad) for ``duration_s``; the participant copies it in mirror mode.
    The recording loops when the stream runs longer.
    """
    from echoreo.sim import ImitationProfile, load_robot, simulate_participant

    robot = load_robot(robot_name)
    t = np.arange(0.0, duration_s, 0.01)
    q = np.tile(robot.rest, (t.size, 1))
    for side in ("left", "right"):
        j = robot.joint_index(f"{side}_shoulder_flexion")
        lo, hi = robot.lower[j], robot.upper[j]
        q[:, j] = np.clip(robot.rest[j] + 0.4 * (1 - np.cos(2 * np.pi * 0.25 * t)), lo, hi)
    reps = np.column_stack([np.arange(0, duration_s - 4, 4.0), np.arange(4, duration_s, 4.0)])
    rec = simulate_participant(robot, t, q, reps, ImitationProfile(), mode="mirror", rng=rng,
                               dropouts=0.0, clocks=None)
    out = []
    for s in rec.streams.values():
        data = np.asarray(s.data, float)
        rate = float(s.rate_hz) if np.isfinite(s.rate_hz) else 1.0 / float(
            np.median(np.diff(s.t_dev)))

        def values(k: int, d: np.ndarray = data) -> np.ndarray:
            return d[k % d.shape[0]]

        out.append(PublishedStream(s.name, s.kind, tuple(s.channels), tuple(s.units), rate,
                                   values, start_seq))
    return out


@dataclass
class _Subscriber:
    identity: bytes
    last_rx: float
    outbox: deque = field(default_factory=deque)


class SensorPublisher:
    """Reference sensor publisher (ROUTER socket; streams to every host that said hello).

    Sample ``k`` of a stream is taken at device time ``t_start + k / rate`` and
    sent when the device clock reaches it; sequence numbers are ``start_seq + k``.
    A message the host's queue cannot take yet waits in a per-host outbox of
    ``outbox_limit`` messages (oldest dropped beyond that; the host sees the
    gap in the sequence numbers).

    Parameters
    ----------
    streams : list of PublishedStream
        What to publish.
    endpoint : str
        Where to listen (port 0: any free port).
    clock : DeviceClock
        The device clock (offset, drift, time scale).
    keys : CurveKeys or None
        CURVE keys; required for a non-loopback endpoint.
    device : str
        Device name announced.
    time_sync : bool
        Answer time requests (False models a device that cannot).
    batch : int
        Most samples per message (late samples are sent together).
    log : TextIO or None
        Where to write one line ``stream seq t_dev_ns`` per sample sent.
    heartbeat_s, host_timeout_s : float
        Heartbeat interval; a host silent for longer is dropped (real s).
    """

    def __init__(self, streams: list[PublishedStream], endpoint: str, *,
                 clock: DeviceClock | None = None, keys: CurveKeys | None = None,
                 device: str = "echoreo reference publisher", time_sync: bool = True,
                 batch: int = 16, log: TextIO | None = None, heartbeat_s: float = 0.2,
                 host_timeout_s: float = 3.0, outbox_limit: int = 100_000):
        check_endpoint(endpoint, keys, "bind")
        self.streams = streams
        self.endpoint = endpoint
        self.clock = clock or DeviceClock()
        self.keys = keys
        self.device = device
        self.time_sync = time_sync
        self.batch = batch
        self.log = log
        self.heartbeat_s = heartbeat_s
        self.host_timeout_s = host_timeout_s
        self.outbox_limit = outbox_limit
        self.boot = boot_id()
        self.subs: dict[bytes, _Subscriber] = {}
        self.counts = {"samples_sent": 0, "messages": 0, "outbox_dropped": 0, "malformed": 0,
                       "time_replies": 0}
        self.stopper = Stopper()
        self.bound_endpoint = ""
        self._err_budget = 10.0
        self._err_t = time.monotonic()

    def serve(self, duration_s: float | None = None, ready_file: str | Path | None = None,
              on_ready: Callable[[str], None] | None = None) -> dict[str, int]:
        """Listen and publish until stopped; returns the counters."""
        with listening(self.endpoint, self.keys, ready_file=ready_file,
                       ready_info={"boot": self.boot}, on_ready=on_ready,
                       sndhwm=10_000) as (sock, self.bound_endpoint):
            try:
                self._loop(sock, duration_s)
            finally:
                for sub in self.subs.values():
                    self._try_send(sock, sub,
                                   encode(MsgType.BYE, {"reason": "publisher stopping"}))
                if self.log is not None:
                    self.log.flush()
        return dict(self.counts)

    def _loop(self, sock: zmq.Socket, duration_s: float | None) -> None:
        poller = zmq.Poller()
        poller.register(sock, zmq.POLLIN)
        t0 = time.monotonic()
        t_start = self.clock.now_ns()
        periods = [1e9 / s.rate_hz for s in self.streams]
        last_hb = 0.0
        last_flush = t0
        while not self.stopper.event.is_set():
            now = time.monotonic()
            if duration_s is not None and now - t0 >= duration_s:
                break
            t_dev = self.clock.now_ns()
            due = min(t_start + (s.next_k) * p for s, p in zip(self.streams, periods,
                                                                strict=True))
            wait_ms = max(0.0, min(self.clock.real_s(due - t_dev) * 1e3, 20.0))
            if any(sub.outbox for sub in self.subs.values()):
                wait_ms = min(wait_ms, 1.0)
            if poller.poll(wait_ms):
                receive_pending(sock, lambda frames: self._handle(sock, frames))
            now = time.monotonic()
            for ident in [i for i, s in self.subs.items() if now - s.last_rx > self.host_timeout_s]:
                del self.subs[ident]
            self._flush_outboxes(sock)
            t_dev = self.clock.now_ns()
            for s, p in zip(self.streams, periods, strict=True):
                n_due = int((t_dev - t_start) // p) + 1 - s.next_k
                while n_due > 0:
                    n = min(n_due, self.batch)
                    ks = np.arange(s.next_k, s.next_k + n)
                    t_samples = np.rint(t_start + ks * p).astype(np.int64)
                    index = np.column_stack([ks + s.start_seq, t_samples])
                    data = (s.values(int(ks[0]))[None, :] if n == 1 else
                            np.vstack([s.values(int(k)) for k in ks]))
                    s.next_k += n
                    n_due -= n
                    if self.subs:
                        # built from our own validated stream description: the
                        # decode round trip of encode() is skipped in this hot path
                        frames = encode(MsgType.SAMPLES, {"stream": s.name, "n": n,
                                                          "boot": self.boot}, index, data,
                                        check=False)
                        for sub in self.subs.values():
                            self._queue(sock, sub, frames, s.name, index)
            if now - last_hb >= self.heartbeat_s:
                last_hb = now
                hb = encode(MsgType.HEARTBEAT, {"t_ns": self.clock.now_ns()})
                for sub in self.subs.values():
                    if not sub.outbox:
                        self._try_send(sock, sub, hb)
            if self.log is not None and now - last_flush > 0.1:
                self.log.flush()
                last_flush = now

    def _try_send(self, sock: zmq.Socket, sub: _Subscriber, frames: list[bytes]) -> bool:
        try:
            sock.send_multipart([sub.identity, *frames], zmq.NOBLOCK)
            return True
        except zmq.Again:
            return False
        except zmq.ZMQError:  # EHOSTUNREACH: the host disconnected
            return False

    def _sent(self, name: str, index: np.ndarray) -> None:
        self.counts["messages"] += 1
        self.counts["samples_sent"] += index.shape[0]
        if self.log is not None:
            self.log.write("".join(f"{name} {int(q)} {int(t)}\n" for q, t in index))

    def _queue(self, sock: zmq.Socket, sub: _Subscriber, frames: list[bytes], name: str,
               index: np.ndarray) -> None:
        if not sub.outbox and self._try_send(sock, sub, frames):
            self._sent(name, index)
            return
        sub.outbox.append((frames, name, index))
        while len(sub.outbox) > self.outbox_limit:
            sub.outbox.popleft()
            self.counts["outbox_dropped"] += 1

    def _flush_outboxes(self, sock: zmq.Socket) -> None:
        for sub in self.subs.values():
            while sub.outbox:
                frames, name, index = sub.outbox[0]
                if not self._try_send(sock, sub, frames):
                    break
                sub.outbox.popleft()
                self._sent(name, index)

    def _handle(self, sock: zmq.Socket, frames: list[bytes]) -> None:
        t2 = self.clock.now_ns()
        ident, body = frames[0], frames[1:]
        try:
            msg = decode(body)
        except ProtocolError:
            self.counts["malformed"] += 1
            return
        m = msg.meta
        sub = self.subs.get(ident)
        if sub is not None:
            sub.last_rx = time.monotonic()
        if msg.type == MsgType.TIME_REQ:
            if self.time_sync:
                self.counts["time_replies"] += 1
                rep = encode(MsgType.TIME_REP, {"id": m["id"], "t1_ns": m["t1_ns"],
                                                "t2_ns": t2, "t3_ns": self.clock.now_ns()},
                             check=False)
                try:
                    sock.send_multipart([ident, *rep], zmq.NOBLOCK)
                except zmq.ZMQError:
                    pass
        elif msg.type == MsgType.HELLO:
            if m["role"] != "follower":
                err = encode(MsgType.ERROR, {"code": "role", "message":
                                             "this is a sensor publisher; connect a follower"})
                try:
                    sock.send_multipart([ident, *err], zmq.NOBLOCK)
                except zmq.ZMQError:
                    pass
                return
            if sub is None:
                sub = self.subs[ident] = _Subscriber(ident, time.monotonic())
            self._try_send(sock, sub, encode(MsgType.ANNOUNCE, {
                "device": self.device, "boot": self.boot,
                "streams": [s.describe() for s in self.streams],
                "time_sync": self.time_sync,
                "heartbeat_ms": round(self.heartbeat_s * 1e3)}))
        elif msg.type == MsgType.BYE and sub is not None:
            del self.subs[ident]
        elif msg.type == MsgType.HEARTBEAT and sub is None:
            # a host we have no session with (we restarted, or forgot it after its
            # silence) still thinks it is connected: tell it, so it says HELLO again
            self._not_connected(sock, ident)

    def _not_connected(self, sock: zmq.Socket, ident: bytes) -> None:
        """ERROR ``not_connected``, at most 10 per second (flood guard, as the bridge)."""
        now = time.monotonic()
        self._err_budget = min(10.0, self._err_budget + (now - self._err_t) * 10.0)
        self._err_t = now
        if self._err_budget < 1.0:
            return
        self._err_budget -= 1.0
        err = encode(MsgType.ERROR, {"code": "not_connected", "message": "say HELLO first"})
        try:
            sock.send_multipart([ident, *err], zmq.NOBLOCK)
        except zmq.ZMQError:
            pass
