"""Reference peers of the wire protocol: a robot bridge and a sensor publisher.

Both run as their own processes (``echoreo bridge``, ``echoreo publish``) and
are the templates to adapt to real hardware:

* :class:`RobotBridge` serves one host at a time on a ROUTER socket, forwards
  joint commands to a robot backend, reports measured joint state, answers
  time requests, and **holds position when commands stop arriving**
  (watchdog; a requirement for every bridge, PROTOCOL.md section 6). The
  backend shipped here, :class:`SimulatedRobotBackend`, drives
  :class:`echoreo.sim.LeaderSim`; the places where a real robot's SDK calls
  go are marked ``>>> SDK``.
* :class:`SensorPublisher` announces streams and sends samples to every host
  that said hello, stamped on its own (optionally offset, drifting and
  time-compressed) device clock, and answers time requests.

Both loops are single-threaded with absolute deadlines and stop on SIGTERM,
SIGINT or after ``duration_s``.
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

import numpy as np
import zmq

from echoreo.adapters.protocol import SOCKET_MAX_FRAME_BYTES, MsgType, decode, encode
from echoreo.adapters.security import CurveKeys, check_endpoint, secure_server
from echoreo.errors import InputError, ProtocolError

__all__ = ["DeviceClock", "PublishedStream", "RobotBridge", "SensorPublisher",
           "SimulatedRobotBackend", "participant_streams", "synthetic_streams"]


@dataclass(frozen=True)
class DeviceClock:
    """A device's own clock, modelled from the host's monotonic clock.

    .. math::

        T = s\\,(m - m_0) + J \\left\\lfloor \\frac{m - m_0}{P} \\right\\rfloor,
        \\qquad t_d = \\theta_d + (1 + \\delta)\\, T

    with the monotonic clock :math:`m` (ns, ``time.monotonic_ns``, shared by
    all processes of one Linux host), origin :math:`m_0`, time scale :math:`s`,
    and optional leaps of :math:`J` every :math:`P` of real time; :math:`T` is
    the simulated true time, :math:`\\delta` the drift and :math:`\\theta_d`
    the offset. A real device is ``DeviceClock()`` (:math:`s = 1`, no leaps,
    no offset). Leaps compress a long run into a short one while time between
    leaps runs at real speed, so message delays stay those of the real link
    (scaling them by :math:`s` would magnify every delay and asymmetry).

    Parameters
    ----------
    offset_s : float
        :math:`\\theta_d`, s (device time at the origin).
    drift_ppm : float
        :math:`\\delta \\times 10^6`.
    scale : float
        :math:`s`.
    origin_ns : int
        :math:`m_0`, ns of ``time.monotonic_ns()``.
    leap_s, leap_every_s : float
        :math:`J` and :math:`P`, s (no leaps when either is 0).
    """

    offset_s: float = 0.0
    drift_ppm: float = 0.0
    scale: float = 1.0
    origin_ns: int = 0
    leap_s: float = 0.0
    leap_every_s: float = 0.0

    def true_ns(self, m_ns: int | None = None) -> float:
        """Simulated true time :math:`T` (ns) at monotonic time ``m_ns`` (default now)."""
        m = (time.monotonic_ns() if m_ns is None else m_ns) - self.origin_ns
        t = self.scale * m
        if self.leap_s > 0 and self.leap_every_s > 0:
            t += self.leap_s * 1e9 * (m // round(self.leap_every_s * 1e9))
        return t

    def now_ns(self) -> int:
        """Device time now, ns."""
        return round(self.offset_s * 1e9 + (1.0 + self.drift_ppm * 1e-6) * self.true_ns())

    def real_s(self, device_span_ns: float) -> float:
        """Real seconds that pass (on average) while device time advances by ``device_span_ns``."""
        rate = self.scale
        if self.leap_s > 0 and self.leap_every_s > 0:
            rate += self.leap_s / self.leap_every_s
        return device_span_ns / (1e9 * rate * (1.0 + self.drift_ppm * 1e-6))


def _boot_id() -> int:
    return int.from_bytes(os.urandom(6), "little")


def write_ready_file(path: str | Path, info: dict[str, Any]) -> None:
    """Write ``info`` as JSON atomically (for scripts waiting for a peer to listen)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(info))
    tmp.replace(path)


def _peer_socket(ctx: zmq.Context, keys: CurveKeys | None, *,
                 sndhwm: int | None = None) -> tuple[zmq.Socket, Any]:
    """The ROUTER socket a reference peer listens on, with CURVE when keys are given.

    A non-zero linger also makes libzmq let a reader finish the messages of a
    peer that disconnects instead of cutting its pipe (a cut in the middle of a
    multipart message aborts libzmq 4.3.5 on an assertion, fq.cpp:80).
    """
    sock = ctx.socket(zmq.ROUTER)
    sock.linger = 1000
    sock.router_mandatory = True
    sock.maxmsgsize = SOCKET_MAX_FRAME_BYTES
    if sndhwm is not None:
        sock.sndhwm = sndhwm
    return sock, secure_server(sock, keys, ctx)


def _bind(sock: zmq.Socket, endpoint: str) -> str:
    try:
        sock.bind(endpoint)
    except zmq.ZMQError as exc:
        raise InputError(f"cannot listen on {endpoint}: {exc}",
                         hint="choose a free port, e.g. tcp://127.0.0.1:0 for any") from exc
    return sock.getsockopt_string(zmq.LAST_ENDPOINT)


def _drain_then_close(sock: zmq.Socket, grace_s: float = 0.2) -> None:
    """Read and discard what peers still send for ``grace_s``, then close with linger.

    Closing a TCP socket with unread input makes the kernel reset the
    connection, and the peer's kernel may then discard our last messages that
    it had not handed to ZeroMQ yet. Hosts stop sending for a second after our
    BYE; reading until then lets the connection end with an orderly FIN.
    """
    end = time.monotonic() + grace_s
    while (left := end - time.monotonic()) > 0:
        if sock.poll(left * 1e3):
            try:
                sock.recv_multipart(zmq.NOBLOCK)
            except zmq.ZMQError:
                pass
    sock.close(linger=1000)  # deliver what was sent (and logged) before leaving


class _Stopper:
    """Stops a serve loop on SIGTERM/SIGINT (main thread only) or on request."""

    def __init__(self) -> None:
        self.event = threading.Event()
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGTERM, signal.SIGINT):
                signal.signal(sig, lambda *_: self.event.set())


# --------------------------------------------------------------------------------------
# robot bridge
# --------------------------------------------------------------------------------------
class SimulatedRobotBackend:
    """The robot behind the reference bridge: :class:`echoreo.sim.LeaderSim`.

    To bridge a real robot, write a class with these methods calling its SDK
    (the ``>>> SDK`` comments say what each must do) and pass it to
    :class:`RobotBridge`.

    Parameters
    ----------
    robot : echoreo.sim.Robot
        Robot description (joint order and limits).
    tau_s : float
        Lag time constant of the simulator, s.
    noise_std : float
        Measurement noise, rad (needs ``rng``).
    rng : numpy.random.Generator or None
        Random generator for the noise.
    """

    def __init__(self, robot: Any, tau_s: float = 0.05, noise_std: float = 0.0,
                 rng: np.random.Generator | None = None):
        from echoreo.sim import LeaderSim

        # >>> SDK: connect to the robot controller here and enable its joints.
        self.robot = robot
        self._sim = LeaderSim(robot, tau_s=tau_s, rng=rng, noise_std=noise_std)
        self._target = self._sim.measure()

    def read_joints(self) -> np.ndarray:
        """Measured joint positions, shape (n_joints,), rad, in the robot file's order.

        >>> SDK: read the encoders; convert units and joint order to the robot file's.
        """
        return self._sim.measure()

    def send_joints(self, q: np.ndarray) -> None:
        """Command joint position targets, shape (n_joints,), rad (limits already checked).

        >>> SDK: send a position target to the controller, with its own speed limits on.
        """
        self._target = np.asarray(q, dtype=float).copy()

    def hold(self) -> None:
        """Hold the current position (watchdog, pause, stop).

        >>> SDK: command the measured pose as target, or engage the controller's hold/brake.
        """
        self._target = self._sim.q.copy()

    def advance(self, dt: float) -> None:
        """Simulation only (a real robot moves by itself): move the model by ``dt`` s."""
        self._sim.step(self._target, dt)

    def close(self) -> None:
        """Release the robot.

        >>> SDK: hold, disable motion and disconnect.
        """
        self.hold()


@dataclass
class _Host:
    identity: bytes
    last_rx: float
    last_hb: float = 0.0


class RobotBridge:
    """Reference robot bridge (ROUTER socket; one host at a time).

    Modes reported in every STATE: ``idle`` (no host), ``hold`` (welcomed or
    paused), ``follow`` (commands arriving), ``watchdog`` (commands stopped for
    more than ``watchdog_s``: holding), ``stopped`` (controlled stop; commands
    ignored until a new HELLO).

    Parameters
    ----------
    backend : SimulatedRobotBackend or compatible
        Robot access (``read_joints``, ``send_joints``, ``hold``, ``advance``, ``close``).
    robot_name : str
        Robot name announced in WELCOME.
    joint_names : tuple of str
        Joint order of commands and states.
    lower, upper : ndarray, shape (n_joints,), rad
        Position limits; commands outside are rejected (and the robot holds).
    endpoint : str
        Where to listen, e.g. ``tcp://127.0.0.1:47100`` (port 0: any free port).
    keys : CurveKeys or None
        CURVE keys; required for a non-loopback endpoint.
    rate_hz, state_rate_hz : float
        Control loop rate and state report rate, Hz.
    watchdog_s : float
        Hold when no command arrived for this long while following, s.
    heartbeat_s, host_timeout_s : float
        Heartbeat interval; a host silent for longer is dropped (and the robot holds), s.
    clock : DeviceClock
        The bridge's own clock (device time of states and acks).
    """

    def __init__(self, backend: Any, robot_name: str, joint_names: tuple[str, ...],
                 lower: np.ndarray, upper: np.ndarray, endpoint: str, *,
                 keys: CurveKeys | None = None, rate_hz: float = 100.0,
                 state_rate_hz: float = 50.0, watchdog_s: float = 0.25,
                 heartbeat_s: float = 0.2, host_timeout_s: float = 1.0,
                 clock: DeviceClock | None = None):
        check_endpoint(endpoint, keys, "bind")
        self.backend = backend
        self.robot_name = robot_name
        self.joint_names = tuple(joint_names)
        self.lower = np.asarray(lower, float)
        self.upper = np.asarray(upper, float)
        self.endpoint = endpoint
        self.keys = keys
        self.dt = 1.0 / rate_hz
        self.state_every = max(1, round(rate_hz / state_rate_hz))
        self.watchdog_s = watchdog_s
        self.heartbeat_s = heartbeat_s
        self.host_timeout_s = host_timeout_s
        self.clock = clock or DeviceClock()
        self.boot = _boot_id()
        self.mode = "idle"
        self.host: _Host | None = None
        self.last_seq = -1
        self.last_cmd = 0.0
        self.state_seq = 0
        self.counts = {"commands": 0, "rejected": 0, "stale": 0, "malformed": 0,
                       "states": 0, "watchdog_holds": 0}
        self.stopper = _Stopper()
        self.bound_endpoint = ""
        self._err_budget = 10.0
        self._err_t = time.monotonic()

    # the loop -----------------------------------------------------------------------
    def serve(self, duration_s: float | None = None, ready_file: str | Path | None = None,
              on_ready: Callable[[str], None] | None = None) -> dict[str, int]:
        """Listen and run the control loop until stopped; returns the counters."""
        ctx = zmq.Context()
        sock, auth = _peer_socket(ctx, self.keys)
        try:
            self.bound_endpoint = _bind(sock, self.endpoint)
            if ready_file:
                write_ready_file(ready_file, {"endpoint": self.bound_endpoint,
                                              "pid": os.getpid()})
            if on_ready:
                on_ready(self.bound_endpoint)
            self._loop(sock, duration_s)
        finally:
            self.backend.hold()
            if self.host is not None:
                self._send(sock, self.host.identity, MsgType.BYE, {"reason": "bridge stopping"})
            self.backend.close()
            _drain_then_close(sock)
            if auth is not None:
                auth.stop()
            ctx.term()
        return dict(self.counts)

    def _loop(self, sock: zmq.Socket, duration_s: float | None) -> None:
        poller = zmq.Poller()
        poller.register(sock, zmq.POLLIN)
        t0 = time.monotonic()
        tick = 0
        next_tick = t0
        while not self.stopper.event.is_set():
            now = time.monotonic()
            if duration_s is not None and now - t0 >= duration_s:
                break
            timeout_ms = max(0.0, (next_tick - now) * 1e3)
            if poller.poll(timeout_ms):
                for _ in range(1000):
                    try:
                        frames = sock.recv_multipart(zmq.NOBLOCK)
                    except zmq.Again:
                        break
                    self._handle(sock, frames)
            now = time.monotonic()
            if now < next_tick:
                continue
            next_tick += self.dt
            if next_tick < now:  # fell behind by more than a tick: skip, do not burst
                next_tick = now + self.dt
            tick += 1
            self._control(sock, now, tick)

    def _control(self, sock: zmq.Socket, now: float, tick: int) -> None:
        host = self.host
        if host is not None and now - host.last_rx > self.host_timeout_s:
            self.host = None                 # host lost: hold where we are
            self.backend.hold()
            self.mode = "idle"
            host = None
        if self.mode == "follow" and now - self.last_cmd > self.watchdog_s:
            self.backend.hold()              # watchdog: commands stopped -> hold position
            self.mode = "watchdog"
            self.counts["watchdog_holds"] += 1
        self.backend.advance(self.dt)
        if host is None:
            return
        if tick % self.state_every == 0:
            q = self.backend.read_joints()
            self._send(sock, host.identity, MsgType.STATE,
                       {"seq": self.state_seq, "t_dev_ns": self.clock.now_ns(),
                        "acked_seq": self.last_seq, "mode": self.mode}, q)
            self.state_seq += 1
            self.counts["states"] += 1
            host.last_hb = now  # a state is a heartbeat
        elif now - host.last_hb >= self.heartbeat_s:
            host.last_hb = now
            self._send(sock, host.identity, MsgType.HEARTBEAT, {"t_ns": self.clock.now_ns()})

    def _send(self, sock: zmq.Socket, ident: bytes, kind: MsgType, meta: dict,
              *arrays: np.ndarray) -> None:
        try:
            sock.send_multipart([ident, *encode(kind, meta, *arrays)], zmq.NOBLOCK)
        except zmq.ZMQError:
            pass  # host gone or its queue full: it will notice missing states

    def _error(self, sock: zmq.Socket, ident: bytes, code: str, message: str) -> None:
        now = time.monotonic()       # at most 10 error replies per second (flood guard)
        self._err_budget = min(10.0, self._err_budget + (now - self._err_t) * 10.0)
        self._err_t = now
        if self._err_budget >= 1.0:
            self._err_budget -= 1.0
            self._send(sock, ident, MsgType.ERROR, {"code": code, "message": message[:4000]})

    def _handle(self, sock: zmq.Socket, frames: list[bytes]) -> None:
        t_rx_dev = self.clock.now_ns()
        ident, body = frames[0], frames[1:]
        try:
            msg = decode(body)
        except ProtocolError as err:
            self.counts["malformed"] += 1
            self._error(sock, ident, "malformed", str(err))
            return
        now = time.monotonic()
        m = msg.meta
        is_host = self.host is not None and self.host.identity == ident
        if msg.type == MsgType.HELLO:
            if m["role"] != "leader":
                self._error(sock, ident, "role", f"this is a robot bridge; role {m['role']!r} "
                            "connected (sensor hosts connect to sensor publishers)")
                return
            if self.host is not None and not is_host:
                self._error(sock, ident, "busy", "another host is connected to this bridge")
                return
            self.host = _Host(ident, now)
            self.backend.hold()
            self.mode = "hold"
            self.last_seq = -1
            self._send(sock, ident, MsgType.WELCOME, {
                "robot": self.robot_name, "joint_names": list(self.joint_names),
                "q": [float(x) for x in self.backend.read_joints()],
                "watchdog_ms": round(self.watchdog_s * 1e3),
                "heartbeat_ms": round(self.heartbeat_s * 1e3),
                "t_dev_ns": self.clock.now_ns(), "boot": self.boot,
                "bridge": "echoreo reference bridge (simulated robot)"})
            return
        if msg.type == MsgType.TIME_REQ:
            rep = encode(MsgType.TIME_REP, {"id": m["id"], "t1_ns": m["t1_ns"],
                                            "t2_ns": t_rx_dev, "t3_ns": self.clock.now_ns()},
                         check=False)
            try:
                sock.send_multipart([ident, *rep], zmq.NOBLOCK)
            except zmq.ZMQError:
                pass
            return
        if not is_host:
            if msg.type != MsgType.BYE:
                self._error(sock, ident, "not_connected", "say HELLO first")
            return
        assert self.host is not None
        self.host.last_rx = now
        if msg.type == MsgType.COMMAND:
            self._command(sock, ident, m, msg.arrays[0], t_rx_dev, now)
        elif msg.type == MsgType.HOLD:
            self.backend.hold()
            if self.mode != "stopped":
                self.mode = "hold"
        elif msg.type == MsgType.STOP:
            self.backend.hold()
            self.mode = "stopped"
        elif msg.type == MsgType.BYE:
            self.backend.hold()
            self.host = None
            self.mode = "idle"

    def _command(self, sock: zmq.Socket, ident: bytes, m: dict, q: np.ndarray,
                 t_rx_dev: int, now: float) -> None:
        seq = m["seq"]

        def ack(status: str, reason: str = "") -> None:
            meta = {"seq": seq, "t_dev_ns": t_rx_dev, "status": status}
            if reason:
                meta["reason"] = reason
            self._send(sock, ident, MsgType.ACK, meta)

        if self.mode == "stopped":
            ack("stopped", "controlled stop in force; send HELLO to start again")
            return
        if seq <= self.last_seq:
            self.counts["stale"] += 1
            ack("stale", f"sequence {seq} is not above {self.last_seq}")
            return
        if q.shape != (len(self.joint_names),):
            self.counts["rejected"] += 1
            ack("rejected", f"{q.size} joint values for {len(self.joint_names)} joints")
            return
        tol = 1e-9
        bad = np.flatnonzero((q < self.lower - tol) | (q > self.upper + tol))
        if bad.size:
            self.counts["rejected"] += 1
            self.backend.hold()
            self.mode = "hold"
            j = int(bad[0])
            ack("rejected", f"{self.joint_names[j]} = {q[j]:.4f} rad outside "
                            f"[{self.lower[j]:.4f}, {self.upper[j]:.4f}]")
            return
        self.last_seq = seq
        self.last_cmd = now
        self.mode = "follow"
        self.backend.send_joints(q)
        self.counts["commands"] += 1
        ack("ok")


# --------------------------------------------------------------------------------------
# sensor publisher
# --------------------------------------------------------------------------------------
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
        self.boot = _boot_id()
        self.subs: dict[bytes, _Subscriber] = {}
        self.counts = {"samples_sent": 0, "messages": 0, "outbox_dropped": 0, "malformed": 0,
                       "time_replies": 0}
        self.stopper = _Stopper()
        self.bound_endpoint = ""

    def serve(self, duration_s: float | None = None, ready_file: str | Path | None = None,
              on_ready: Callable[[str], None] | None = None) -> dict[str, int]:
        """Listen and publish until stopped; returns the counters."""
        ctx = zmq.Context()
        sock, auth = _peer_socket(ctx, self.keys, sndhwm=10_000)
        try:
            self.bound_endpoint = _bind(sock, self.endpoint)
            if ready_file:
                write_ready_file(ready_file, {"endpoint": self.bound_endpoint,
                                              "pid": os.getpid(), "boot": self.boot})
            if on_ready:
                on_ready(self.bound_endpoint)
            self._loop(sock, duration_s)
        finally:
            for sub in self.subs.values():
                self._try_send(sock, sub, encode(MsgType.BYE, {"reason": "publisher stopping"}))
            if self.log is not None:
                self.log.flush()
            _drain_then_close(sock)
            if auth is not None:
                auth.stop()
            ctx.term()
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
                for _ in range(1000):
                    try:
                        frames = sock.recv_multipart(zmq.NOBLOCK)
                    except zmq.Again:
                        break
                    self._handle(sock, frames)
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
