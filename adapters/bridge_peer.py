"""The reference robot bridge of the wire protocol (``echoreo bridge``).

:class:`RobotBridge` serves one host at a time on a ROUTER socket, forwards
joint commands to a robot backend, reports measured joint state, answers time
requests, and **holds position when commands stop arriving** (watchdog; a
requirement for every bridge, adapters/PROTOCOL.md section 6). The backend
shipped here, :class:`SimulatedRobotBackend`, drives
:class:`echoreo.sim.LeaderSim`; the places where a real robot's SDK calls go
are marked ``>>> SDK``. It is the template to adapt to a real robot
(PROTOCOL.md section 9).

The loop is single-threaded with absolute deadlines and stops on SIGTERM,
SIGINT or after ``duration_s``.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import zmq

from echoreo.adapters._peer_common import (
    DeviceClock,
    Stopper,
    bind_endpoint,
    boot_id,
    drain_then_close,
    peer_socket,
    write_ready_file,
)
from echoreo.adapters.protocol import MsgType, decode, encode
from echoreo.adapters.security import CurveKeys, check_endpoint
from echoreo.errors import ProtocolError

__all__ = ["RobotBridge", "SimulatedRobotBackend"]


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
        self.boot = boot_id()
        self.mode = "idle"
        self.host: _Host | None = None
        self.last_seq = -1
        self.last_cmd = 0.0
        self.state_seq = 0
        self.counts = {"commands": 0, "rejected": 0, "stale": 0, "malformed": 0,
                       "states": 0, "watchdog_holds": 0}
        self.stopper = Stopper()
        self.bound_endpoint = ""
        self._err_budget = 10.0
        self._err_t = time.monotonic()

    # the loop -----------------------------------------------------------------------
    def serve(self, duration_s: float | None = None, ready_file: str | Path | None = None,
              on_ready: Callable[[str], None] | None = None) -> dict[str, int]:
        """Listen and run the control loop until stopped; returns the counters."""
        ctx = zmq.Context()
        sock, auth = peer_socket(ctx, self.keys)
        try:
            self.bound_endpoint = bind_endpoint(sock, self.endpoint)
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
            drain_then_close(sock)
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
