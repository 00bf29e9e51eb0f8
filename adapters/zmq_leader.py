"""The leader over ZeroMQ: a robot bridge speaking adapters/PROTOCOL.md.

:class:`ZmqLeader` connects a DEALER socket to a bridge's ROUTER socket,
says HELLO, receives WELCOME (robot name, joint names, current pose),
synchronises clocks with NTP-style exchanges, sends sequenced commands
stamped on the session clock, collects ACKs and measured STATEs (mapped
from the bridge's clock onto the session clock), and exchanges heartbeats.
When the bridge falls silent for ``timeout_s``, says BYE, or answers ERROR
``not_connected`` (it restarted, or forgot us, and ignores our commands),
:meth:`alive` turns False for good and :meth:`lost_reason` says why (the runner
then stops the session; the bridge, having lost our commands and heartbeats,
holds position by its watchdog). :meth:`ZmqLeader.timing`
reports how many commands the bridge applied late (ACK ``late_ns``, STATE
``late``/``slipped``, PROTOCOL.md section 5), summed over bridge restarts.
"""

from __future__ import annotations

from collections import deque
from pathlib import Path
from typing import Any

import numpy as np

from echoreo.adapters._link import LinkEngine, Peer
from echoreo.adapters.base import Clock, ClockMap, Command, Leader, LeaderHello, LeaderState
from echoreo.adapters.protocol import Message, MsgType, encode
from echoreo.adapters.security import CurveKeys, check_endpoint
from echoreo.errors import InputError, LeaderLost, ProtocolError

__all__ = ["ZmqLeader"]


class _LeaderEngine(LinkEngine):
    def __init__(self, clock: Clock, **kw: Any):
        super().__init__(clock, role="leader", **kw)
        self.welcome: dict[str, Any] | None = None
        self.states: deque[tuple[dict, np.ndarray, int]] = deque(maxlen=100_000)
        self.acked_seq = -1
        self.acks = 0
        self.rejections: deque[dict] = deque(maxlen=100)
        self.mode = ""
        self.lost = False
        self.lost_reason = ""
        self.errors: deque[dict] = deque(maxlen=100)
        self.commands_dropped = 0
        # lateness reported by the bridge (PROTOCOL.md section 5); see ZmqLeader.timing
        self.boot: int | None = None          # the bridge's boot of the latest WELCOME
        self.boots = 0                        # distinct boots welcomed so far
        self.totals: dict[str, int] | None = None   # latest STATE totals of this boot
        self.totals_before = {"late": 0, "slipped": 0}  # last totals of earlier boots
        self.totals_seen = False              # any STATE carried the totals
        self.late_acks = 0
        self.late_ns_max = 0

    def _fold_totals(self) -> None:
        """A bridge restart: keep the old boot's last totals, start the new boot at zero."""
        if self.totals is not None:
            for k in self.totals_before:
                self.totals_before[k] += self.totals[k]
        self.totals = None

    def on_message(self, peer: Peer, msg: Message, t_rx_ns: int) -> None:
        m = msg.meta
        if msg.type == MsgType.WELCOME:
            if m["boot"] != self.boot:
                self._fold_totals()
                self.boot = m["boot"]
                self.boots += 1
            if self.welcome is None:
                self.welcome = dict(m)
                self.mark_ready(peer, t_rx_ns)
            elif not self.lost:
                self.mark_ready(peer, t_rx_ns)
        elif msg.type == MsgType.STATE:
            self.mode = m["mode"]
            self.acked_seq = max(self.acked_seq, m["acked_seq"])
            self.states.append((m, msg.arrays[0], t_rx_ns))
            if "late" in m or "slipped" in m:
                new = {"late": m.get("late", 0), "slipped": m.get("slipped", 0)}
                if self.totals is not None and any(new[k] < self.totals[k] for k in new):
                    self._fold_totals()  # totals went back: a restart under the same boot
                self.totals = new
                self.totals_seen = True
        elif msg.type == MsgType.ACK:
            self.acks += 1
            if m["status"] == "ok":
                self.acked_seq = max(self.acked_seq, m["seq"])
            else:
                self.rejections.append(dict(m))
            if "late_ns" in m:
                self.late_acks += 1
                self.late_ns_max = max(self.late_ns_max, m["late_ns"])
        elif msg.type == MsgType.ERROR:
            self.errors.append(dict(m))
        elif msg.type == MsgType.BYE:
            self._lose(peer, "said BYE" + (f" ({m['reason']})" if m.get("reason") else ""))
            peer.ready = False

    def on_malformed(self, peer: Peer, err: ProtocolError, t_rx_ns: int) -> None:
        self.errors.append({"code": "malformed", "message": str(err)})

    def on_lost(self, peer: Peer, now_ns: int, reason: str) -> None:
        self._lose(peer, reason)

    def _lose(self, peer: Peer, reason: str) -> None:
        if not self.lost:  # lost for good: the first cause is the one reported
            self.lost = True
            self.lost_reason = f"the robot bridge at {peer.endpoint} {reason}"


class ZmqLeader(Leader):
    """A robot bridge reached over ZeroMQ (see adapters/PROTOCOL.md).

    Parameters
    ----------
    endpoint : str
        The bridge's endpoint, e.g. ``"tcp://127.0.0.1:47100"``. Anything but
        loopback needs ``keys``.
    keys : CurveKeys, str, Path or None
        CURVE key folder (see :mod:`echoreo.adapters.security`).
    heartbeat_s : float
        Our heartbeat interval, s.
    timeout_s : float
        Silence after which the bridge counts as lost, s.
    connect_timeout_s : float
        How long :meth:`connect` waits for WELCOME and the first clock sync, real s.
    sync_interval_s : float
        Interval of time exchanges with the bridge, s.
    client : str
        Our name, sent in HELLO.
    """

    uses_network = True

    def __init__(self, endpoint: str, *, keys: CurveKeys | str | Path | None = None,
                 heartbeat_s: float = 0.2, timeout_s: float = 1.0,
                 connect_timeout_s: float = 5.0, sync_interval_s: float = 1.0,
                 client: str = "echoreo"):
        self.keys = CurveKeys(keys) if isinstance(keys, str | Path) else keys
        check_endpoint(endpoint, self.keys, "connect to")
        self.endpoint = endpoint
        self.heartbeat_s = heartbeat_s
        self.timeout_s = timeout_s
        self.connect_timeout_s = connect_timeout_s
        self.sync_interval_s = sync_interval_s
        self.client = client
        self._engine: _LeaderEngine | None = None
        self._peer: Peer | None = None
        self.joint_names: tuple[str, ...] = ()
        self._state_seq_seen = -1

    # ------------------------------------------------------------------------------------
    def connect(self, clock: Clock) -> LeaderHello:
        """Connect, say HELLO, wait for WELCOME and a first clock sync.

        Raises
        ------
        LeaderLost
            If the bridge does not answer within ``connect_timeout_s`` (or rejects
            our CURVE key, or reports an error such as ``busy``).
        """
        if self._engine is not None:
            raise RuntimeError("ZmqLeader.connect called twice")
        eng = _LeaderEngine(clock, keys=self.keys, heartbeat_s=self.heartbeat_s,
                            timeout_s=self.timeout_s, sync_interval_s=self.sync_interval_s,
                            client=self.client)
        self._engine = eng
        self._peer = peer = eng.add_peer(self.endpoint)
        eng.start()
        ok = eng.wait_for(lambda: (eng.welcome is not None and peer.sync.n_exchanges_ >= 4)
                          or bool(eng.errors) or bool(peer.auth_failure),
                          self.connect_timeout_s)
        if not ok or eng.welcome is None or peer.sync.n_exchanges_ < 1:
            reason = peer.auth_failure or (
                f"the bridge answered {eng.errors[0]['code']}: {eng.errors[0]['message']}"
                if eng.errors else f"no answer within {self.connect_timeout_s:g} s")
            self.close()
            raise LeaderLost(f"robot bridge at {self.endpoint} not reached: {reason}; "
                             "is `echoreo bridge` (or your robot's bridge) running there?")
        w = eng.welcome
        self.joint_names = tuple(w["joint_names"])
        q = np.asarray(w["q"], dtype=np.float64)
        if q.shape != (len(self.joint_names),):
            self.close()
            raise ProtocolError(f"WELCOME from {self.endpoint} reports {q.size} joint values "
                                f"for {len(self.joint_names)} joint names")
        return LeaderHello(robot=w["robot"], joint_names=self.joint_names, q=q)

    def _require(self) -> tuple[_LeaderEngine, Peer]:
        if self._engine is None or self._peer is None:
            raise RuntimeError("ZmqLeader is not connected")
        return self._engine, self._peer

    def send(self, command: Command) -> None:
        """Send one command (non-blocking; dropped, and counted, once the bridge is lost)."""
        eng, peer = self._require()
        q = np.asarray(command.q, dtype=np.float64)
        if q.shape != (len(self.joint_names),):
            raise InputError(f"command {command.seq} has {q.size} joint values; the bridge "
                             f"has {len(self.joint_names)} joints {self.joint_names}")
        if eng.lost:
            eng.commands_dropped += 1  # never queue commands for a bridge that is gone
            return
        eng.submit(peer, encode(MsgType.COMMAND, {"seq": int(command.seq),
                                                  "t_ns": int(command.t_ns)}, q))

    def read_state(self) -> list[LeaderState]:
        """Measured states received since the previous call, on the session clock."""
        eng, peer = self._require()
        out = []
        with eng.lock:
            cmap = peer.sync.clock_map()
            items = list(eng.states)
            eng.states.clear()
        for m, q, _t_rx in items:
            t_dev = int(m["t_dev_ns"])
            out.append(LeaderState(t_ns=int(cmap.to_session(t_dev)), t_dev_ns=t_dev,
                                   seq=int(m["seq"]), q=q, acked_seq=int(m["acked_seq"])))
        return out

    def hold(self) -> None:
        """Ask the bridge to hold the current position (pause)."""
        eng, peer = self._require()
        eng.submit(peer, encode(MsgType.HOLD, {"t_ns": eng.clock.now_ns()}))

    def stop(self, wait_s: float = 0.5) -> None:
        """Controlled stop: the bridge holds and ignores commands until a new HELLO.

        Waits up to ``wait_s`` for a state confirming mode ``stopped``.
        """
        if self._engine is None or self._peer is None:
            return
        eng, peer = self._engine, self._peer
        eng.submit(peer, encode(MsgType.STOP, {"t_ns": eng.clock.now_ns()}))
        if not eng.lost:
            eng.wait_for(lambda: eng.mode == "stopped" or eng.lost, wait_s)

    def close(self) -> None:
        """Send BYE and release the socket; idempotent."""
        if self._engine is not None:
            self._engine.close()

    def alive(self) -> bool:
        """False for good once the bridge has been silent for ``timeout_s``, said BYE,
        or answered ERROR ``not_connected`` (PROTOCOL.md section 6)."""
        if self._engine is None:
            return False
        return not self._engine.lost and self._engine.fault is None

    def lost_reason(self) -> str:
        """Why :meth:`alive` is False (``""`` while alive), e.g. "the robot bridge at
        tcp://127.0.0.1:47100 answered not_connected: it restarted or lost the session"."""
        if self._engine is None:
            return "not connected"
        if self._engine.fault is not None:
            return f"the link to {self.endpoint} failed: {self._engine.fault!r}"
        with self._engine.lock:
            return self._engine.lost_reason

    # ---- extras for the live view and tests ----------------------------------------------
    @property
    def bridge_mode(self) -> str:
        """The mode in the bridge's latest STATE (``follow``, ``hold``, ``watchdog``, ...)."""
        return self._engine.mode if self._engine is not None else ""

    def clock_map(self) -> ClockMap:
        """Current bridge-to-session clock map."""
        _, peer = self._require()
        with self._engine.lock:  # type: ignore[union-attr]
            return peer.sync.clock_map()

    def timing(self) -> dict[str, Any]:
        """How well the bridge kept the commands' times (PROTOCOL.md section 5).

        Returns
        -------
        dict
            ``late`` : int or None
                Commands the bridge applied at once because they arrived more
                than its late limit past their time, summed over this session:
                the latest STATE ``late`` total of the bridge's current boot
                plus the last totals of every earlier boot (a restarted bridge
                counts from zero again). None if the bridge never reported
                totals (a bridge predating the ``late``/``slipped`` keys).
            ``slipped`` : int or None
                Commands the bridge queued but applied more than its late limit
                after their time because its loop was busy; summed as ``late``.
            ``late_acks`` : int
                ACKs received that carried ``late_ns``, i.e. commands this host
                saw counted late (0 for a bridge that does not send the key).
            ``late_max_ns`` : int
                Largest ``late_ns`` among those ACKs, ns past the command's
                time (0 if none).
            ``boots`` : int
                Distinct bridge boots welcomed in this session (1 normally).

        Raises
        ------
        RuntimeError
            If the leader was never connected.
        """
        eng, _ = self._require()
        with eng.lock:
            cur, before = eng.totals, eng.totals_before
            reported = eng.totals_seen
            now = cur or {"late": 0, "slipped": 0}
            return {"late": before["late"] + now["late"] if reported else None,
                    "slipped": before["slipped"] + now["slipped"] if reported else None,
                    "late_acks": eng.late_acks, "late_max_ns": eng.late_ns_max,
                    "boots": eng.boots}

    def link_health(self) -> dict[str, Any]:
        """Counters of the link: acks, rejections, malformed, dropped sends, last errors."""
        eng, peer = self._require()
        with eng.lock:
            cmap = peer.sync.clock_map()
            return {"acks": eng.acks, "acked_seq": eng.acked_seq,
                    "rejections": list(eng.rejections), "malformed": peer.malformed,
                    "send_dropped": peer.send_dropped, "errors": list(eng.errors),
                    "commands_dropped": eng.commands_dropped,
                    "offset_ns": cmap.offset_ns, "uncertainty_ns": cmap.uncertainty_ns,
                    "mode": eng.mode, "alive": self.alive(),
                    "lost_reason": eng.lost_reason}
