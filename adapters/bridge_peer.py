"""The reference robot bridge of the wire protocol (``echoreo bridge``).

:class:`RobotBridge` serves one host at a time on a ROUTER socket, hands each
joint command to a robot backend at the command's session time (on the
session clock as :class:`HostClockEstimate` sees it from the host's send
stamps; commands sent ahead wait in a bounded queue, late ones are applied at
once and counted), reports measured joint state, answers time requests, and
**holds position when commands stop arriving** (watchdog; a
requirement for every bridge, adapters/PROTOCOL.md section 6). The backend
shipped here, :class:`SimulatedRobotBackend`, drives
:class:`echoreo.sim.LeaderSim`; the places where a real robot's SDK calls go
are marked ``>>> SDK``. It is the template to adapt to a real robot
(PROTOCOL.md section 9).

The loop is single-threaded with absolute deadlines and stops on SIGTERM,
SIGINT or after ``duration_s``.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
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

__all__ = ["HostClockEstimate", "RobotBridge", "SimulatedRobotBackend"]


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


class HostClockEstimate:
    """The host's session clock as seen from the bridge, from the host's own send stamps.

    Every message the host stamps with its session clock when sending (HELLO,
    HEARTBEAT, TIME_REQ ``t1_ns``, HOLD, STOP) gives, with the bridge's
    device time at receipt,

    .. math::

        d_i = t_{\\mathrm{rx},i} - t_{\\mathrm{host},i} = \\theta + \\lambda_i,
        \\qquad \\lambda_i \\ge 0,

    where :math:`\\theta` is the offset of the device clock from the session
    clock (device minus session, ns) and :math:`\\lambda_i` the one-way delay
    of message :math:`i`. The lower envelope (Moon, Skelly and Towsley 1999)
    over a sliding window, one minimum per ``bin_s`` of device time,

    .. math::

        \\hat\\theta = \\min_{i:\\; t_{\\mathrm{rx},i} > t_\\mathrm{now} - W} d_i ,
        \\qquad \\hat t_\\mathrm{dev}(t_s) = t_s + \\hat\\theta,

    never places a session time earlier on the device clock than it is:
    :math:`\\hat\\theta - \\theta` is the smallest one-way delay in the window
    (tens of microseconds on loopback), plus at most
    :math:`|\\mathrm{drift}|\\, W` for clocks that drift apart (0.5 ms for
    50 ppm over the default 10 s window). Delayed messages only raise
    :math:`d_i` and so never move the estimate.

    Parameters
    ----------
    window_s : float
        :math:`W`, device-time span of the minima kept, s.
    bin_s : float
        Device-time width of one bin (one minimum kept per bin), s.

    References
    ----------
    S. B. Moon, P. Skelly, D. Towsley (1999). Estimation and removal of clock
    skew from network delay measurements. Proc. IEEE INFOCOM '99, 227-234.
    """

    def __init__(self, window_s: float = 10.0, bin_s: float = 1.0):
        self.window_s = window_s
        self.bin_ns = max(1, round(bin_s * 1e9))
        self._bins: deque[list[int]] = deque()  # [bin number, minimum of d (ns)]
        self.offset_ns: int | None = None

    @property
    def ready(self) -> bool:
        """True once one stamp has been added since the last :meth:`reset`."""
        return self.offset_ns is not None

    def reset(self) -> None:
        """Forget every stamp (a new host, or the same host with a new session clock)."""
        self._bins.clear()
        self.offset_ns = None

    def add(self, t_host_ns: int, t_rx_dev_ns: int) -> None:
        """Add one host send stamp (session clock, ns) received at ``t_rx_dev_ns`` (device, ns)."""
        d = int(t_rx_dev_ns) - int(t_host_ns)
        k = int(t_rx_dev_ns) // self.bin_ns
        if self._bins and self._bins[-1][0] == k:
            self._bins[-1][1] = min(self._bins[-1][1], d)
        else:
            self._bins.append([k, d])
        oldest = k - int(self.window_s * 1e9 / self.bin_ns)
        while self._bins[0][0] < oldest:
            self._bins.popleft()
        self.offset_ns = min(b[1] for b in self._bins)

    def to_device(self, t_session_ns: int) -> int:
        """Device time (ns) of session time ``t_session_ns`` (ns); needs :attr:`ready`."""
        if self.offset_ns is None:
            raise RuntimeError("no host stamp received yet")
        return int(t_session_ns) + self.offset_ns


@dataclass
class _Pending:
    """An accepted command waiting for its time (device clock, ns)."""

    seq: int
    t_ns: int
    due_dev_ns: int
    q: np.ndarray


@dataclass
class _Host:
    identity: bytes
    last_rx: float
    last_hb: float = 0.0


class RobotBridge:
    """Reference robot bridge (ROUTER socket; one host at a time).

    Modes reported in every STATE: ``idle`` (no host), ``hold`` (welcomed or
    paused), ``follow`` (commands reaching the robot), ``watchdog`` (no command
    arrived or became due for more than ``watchdog_s``: holding), ``stopped``
    (controlled stop; commands ignored until a new HELLO).

    Each accepted command is applied (handed to ``backend.send_joints``) at its
    session time ``t_ns``, placed on the bridge's clock by
    :class:`HostClockEstimate` (PROTOCOL.md section 5):

    * due now or already past: applied at once; if more than ``late_s`` past
      on arrival it counts as ``late`` (and its ACK ``ok`` says by how much);
    * in the future by at most ``max_lead_s``: held in a queue of at most
      ``queue_limit`` commands, in time order, and applied when due (a queued
      command applied more than ``late_s`` after its time, because the loop
      was busy, counts as ``slipped``);
    * further ahead, or with the queue full: ACK ``rejected`` (the robot is
      not held; queued commands play on).

    A new command supersedes queued commands meant for the same time or later
    (counted ``superseded``). HOLD, STOP, BYE, a new HELLO, a lost host, the
    watchdog and a command rejected for its joint limits empty the queue
    (counted ``dropped``): a queued command never moves the robot after the
    host asked it to hold. STATE's ``acked_seq`` is the last command applied.

    The host learns of lateness from the messages themselves: the ACK of a
    command counted ``late`` carries ``late_ns`` (ns past its time on arrival,
    when it was applied), and every STATE carries ``late`` and ``slipped``,
    the running totals of :attr:`counts` since this bridge started.

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
        Hold when, while following, no command arrived or became due for this long, s.
    heartbeat_s, host_timeout_s : float
        Heartbeat interval; a host silent for longer is dropped (and the robot holds), s.
    clock : DeviceClock
        The bridge's own clock (device time of states and acks).
    late_s : float
        A command applied more than this after its time counts as late (on
        arrival) or slipped (from the queue), s.
    max_lead_s : float
        Furthest a command may lie in the future on arrival, s.
    queue_limit : int
        Most commands waiting for their time.
    log : TextIO or None
        Where to write one line ``seq t_ns due_dev_ns applied_dev_ns late`` per
        command applied (``t_ns`` session clock, the others device clock, ns;
        ``late`` 1 if it arrived late, else 0).
    """

    def __init__(self, backend: Any, robot_name: str, joint_names: tuple[str, ...],
                 lower: np.ndarray, upper: np.ndarray, endpoint: str, *,
                 keys: CurveKeys | None = None, rate_hz: float = 100.0,
                 state_rate_hz: float = 50.0, watchdog_s: float = 0.25,
                 heartbeat_s: float = 0.2, host_timeout_s: float = 1.0,
                 clock: DeviceClock | None = None, late_s: float = 0.01,
                 max_lead_s: float = 2.0, queue_limit: int = 1000,
                 log: TextIO | None = None):
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
        self.late_ns = round(late_s * 1e9)
        self.max_lead_ns = round(max_lead_s * 1e9)
        self.queue_limit = queue_limit
        self.log = log
        self.boot = boot_id()
        self.mode = "idle"
        self.host: _Host | None = None
        self.host_clock = HostClockEstimate()
        self.queue: deque[_Pending] = deque()
        self.last_seq = -1       # last command accepted (applied or queued)
        self.applied_seq = -1    # last command applied
        self.last_cmd = 0.0      # monotonic s of the last command arrival or application
        self.state_seq = 0
        self.counts = {"commands": 0, "applied": 0, "late": 0, "queued": 0, "slipped": 0,
                       "superseded": 0, "dropped": 0, "rejected": 0, "stale": 0,
                       "malformed": 0, "states": 0, "watchdog_holds": 0}
        self.stopper = Stopper()
        self.bound_endpoint = ""
        self._err_budget = 10.0
        self._err_t = time.monotonic()

    # the loop -----------------------------------------------------------------------
    def serve(self, duration_s: float | None = None, ready_file: str | Path | None = None,
              on_ready: Callable[[str], None] | None = None) -> dict[str, int]:
        """Listen and run the control loop until stopped.

        Parameters
        ----------
        duration_s : float or None
            Stop after this many s (real time); None runs until SIGTERM/SIGINT.
        ready_file : str, Path or None
            Where to write ``{endpoint, pid}`` as JSON once listening.
        on_ready : callable or None
            Called with the bound endpoint once listening.

        Returns
        -------
        dict of str to int
            The counters (commands accepted, applied, late, ...).
        """
        with listening(self.endpoint, self.keys, ready_file=ready_file,
                       on_ready=on_ready) as (sock, self.bound_endpoint):
            try:
                self._loop(sock, duration_s)
            finally:
                self._hold()
                if self.host is not None:
                    self._send(sock, self.host.identity, MsgType.BYE,
                               {"reason": "bridge stopping"})
                self.backend.close()
                if self.log is not None:
                    self.log.flush()
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
            wake = next_tick
            if self.queue:  # wake up when the next queued command is due
                wait_dev = self.queue[0].due_dev_ns - self.clock.now_ns()
                wake = min(wake, now + self.clock.real_s(max(0, wait_dev)))
            timeout_ms = max(0.0, (wake - now) * 1e3)
            if poller.poll(timeout_ms):
                receive_pending(sock, lambda frames: self._handle(sock, frames))
            if self.queue:
                self._apply_due()
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
            self._hold()
            self.mode = "idle"
            host = None
        if self.mode == "follow" and now - self.last_cmd > self.watchdog_s:
            self._hold()                     # watchdog: commands stopped -> hold position
            self.mode = "watchdog"
            self.counts["watchdog_holds"] += 1
        self.backend.advance(self.dt)
        if host is None:
            return
        if tick % self.state_every == 0:
            q = self.backend.read_joints()
            self._send(sock, host.identity, MsgType.STATE,
                       {"seq": self.state_seq, "t_dev_ns": self.clock.now_ns(),
                        "acked_seq": self.applied_seq, "mode": self.mode,
                        "late": self.counts["late"], "slipped": self.counts["slipped"]}, q)
            self.state_seq += 1
            self.counts["states"] += 1
            host.last_hb = now  # a state is a heartbeat
        elif now - host.last_hb >= self.heartbeat_s:
            host.last_hb = now
            self._send(sock, host.identity, MsgType.HEARTBEAT, {"t_ns": self.clock.now_ns()})

    # commands on time ---------------------------------------------------------------
    def _hold(self) -> None:
        """Hold the robot and forget the commands waiting for their time."""
        self.backend.hold()
        self.counts["dropped"] += len(self.queue)
        self.queue.clear()

    def _apply(self, p: _Pending, late: bool) -> None:
        """Hand one command to the robot now (the moment logged is just before the call)."""
        t_app = self.clock.now_ns()
        self.backend.send_joints(p.q)
        self.applied_seq = p.seq
        self.last_cmd = time.monotonic()
        self.mode = "follow"
        self.counts["applied"] += 1
        if self.log is not None:
            self.log.write(f"{p.seq} {p.t_ns} {p.due_dev_ns} {t_app} {int(late)}\n")

    def _apply_due(self) -> None:
        """Apply, in time order, every queued command whose time has come."""
        while self.queue and self.queue[0].due_dev_ns <= (now_dev := self.clock.now_ns()):
            p = self.queue.popleft()
            if now_dev - p.due_dev_ns > self.late_ns:
                self.counts["slipped"] += 1
            self._apply(p, late=False)

    # messages -----------------------------------------------------------------------
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
            self._hold()
            self.mode = "hold"
            self.last_seq = self.applied_seq = -1
            self.host_clock.reset()  # a new session clock, perhaps
            self.host_clock.add(m["t_ns"], t_rx_dev)
            self._send(sock, ident, MsgType.WELCOME, {
                "robot": self.robot_name, "joint_names": list(self.joint_names),
                "q": [float(x) for x in self.backend.read_joints()],
                "watchdog_ms": round(self.watchdog_s * 1e3),
                "heartbeat_ms": round(self.heartbeat_s * 1e3),
                "t_dev_ns": self.clock.now_ns(), "boot": self.boot,
                "bridge": "echoreo reference bridge (simulated robot)"})
            return
        if msg.type == MsgType.TIME_REQ:
            if is_host:
                self.host_clock.add(m["t1_ns"], t_rx_dev)
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
        if msg.type in (MsgType.HEARTBEAT, MsgType.HOLD, MsgType.STOP):
            self.host_clock.add(m["t_ns"], t_rx_dev)  # the host's send stamps
        if msg.type == MsgType.COMMAND:
            self._command(sock, ident, m, msg.arrays[0], t_rx_dev, now)
        elif msg.type == MsgType.HOLD:
            self._hold()
            if self.mode != "stopped":
                self.mode = "hold"
        elif msg.type == MsgType.STOP:
            self._hold()
            self.mode = "stopped"
        elif msg.type == MsgType.BYE:
            self._hold()
            self.host = None
            self.mode = "idle"

    def _command(self, sock: zmq.Socket, ident: bytes, m: dict, q: np.ndarray,
                 t_rx_dev: int, now: float) -> None:
        seq = m["seq"]

        def ack(status: str, reason: str = "", late_ns: int | None = None) -> None:
            meta: dict[str, Any] = {"seq": seq, "t_dev_ns": t_rx_dev, "status": status}
            if reason:
                meta["reason"] = reason
            if late_ns is not None:
                meta["late_ns"] = late_ns
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
            self._hold()
            self.mode = "hold"
            j = int(bad[0])
            ack("rejected", f"{self.joint_names[j]} = {q[j]:.4f} rad outside "
                            f"[{self.lower[j]:.4f}, {self.upper[j]:.4f}]")
            return
        t_ns = int(m["t_ns"])
        due = self.host_clock.to_device(t_ns)  # ready: HELLO came first
        lead = due - self.clock.now_ns()
        if lead > self.max_lead_ns:
            self.counts["rejected"] += 1
            ack("rejected", f"meant for {lead * 1e-9:.3f} s from now; this bridge queues "
                            f"commands at most {self.max_lead_ns * 1e-9:g} s ahead")
            return
        while self.queue and self.queue[-1].t_ns >= t_ns:  # a new plan from t_ns on
            self.queue.pop()
            self.counts["superseded"] += 1
        if lead > 0 and len(self.queue) >= self.queue_limit:
            self.counts["rejected"] += 1
            ack("rejected", f"command queue full ({self.queue_limit} commands waiting)")
            return
        self.last_seq = seq
        self.last_cmd = now
        self.counts["commands"] += 1
        pending = _Pending(seq, t_ns, due, q.copy())
        if lead > 0:
            self.queue.append(pending)
            self.counts["queued"] += 1
            ack("ok")
            return
        self._apply_due()  # anything queued is earlier, hence due as well
        late = -lead > self.late_ns
        if late:
            self.counts["late"] += 1
        self._apply(pending, late)
        if late:
            ack("ok", f"late by {-lead * 1e-6:.1f} ms; applied at once", late_ns=-lead)
        else:
            ack("ok")
