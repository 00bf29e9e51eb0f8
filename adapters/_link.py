"""The host side of ZeroMQ links: one I/O thread owning DEALER sockets to peers.

Private helper of :mod:`echoreo.adapters.zmq_leader` and
:mod:`echoreo.adapters.zmq_followers`. The thread stamps every received
message on the session clock as it arrives (so latencies and the T4 of time
exchanges are not inflated by how often the caller polls), answers nothing on
its own except the protocol's housekeeping: hello until welcomed, heartbeats,
NTP-style time requests, loss detection (silence, or ERROR ``not_connected`` from
a peer that restarted or forgot us; PROTOCOL.md section 6). ZeroMQ sockets are not thread-safe,
so callers never touch them: outgoing messages go through a queue and an
inproc wake-up socket.
"""

from __future__ import annotations

import itertools
import threading
import time
from collections import deque
from typing import Any

import zmq
from zmq.utils.monitor import recv_monitor_message

from echoreo.adapters.base import Clock
from echoreo.adapters.clocksync import NtpClockSync
from echoreo.adapters.protocol import SOCKET_MAX_FRAME_BYTES, Message, MsgType, decode, encode
from echoreo.adapters.security import CurveKeys, check_endpoint, secure_client
from echoreo.errors import ProtocolError

__all__ = ["NOT_CONNECTED_REASON", "LinkEngine", "Peer"]

#: Why a peer that answered ERROR ``not_connected`` counts as lost (PROTOCOL.md section 6).
NOT_CONNECTED_REASON = "answered not_connected: it restarted or lost the session"

_wake_ids = itertools.count()
_AUTH_EVENTS = zmq.EVENT_HANDSHAKE_FAILED_AUTH | zmq.EVENT_HANDSHAKE_FAILED_PROTOCOL


class Peer:
    """Link state of one remote peer (owned by the I/O thread)."""

    def __init__(self, index: int, endpoint: str, sock: zmq.Socket, monitor: zmq.Socket):
        self.index = index
        self.endpoint = endpoint
        self.sock = sock
        self.monitor = monitor
        self.ready = False            # welcomed / announced
        self.ever_ready = False
        self.last_rx_ns: int | None = None
        self.last_hb_ns = -(2**62)
        self.last_hello_ns = -(2**62)
        self.next_sync_ns = 0
        self.burst_left = 0
        self.pending: dict[int, int] = {}
        self.sync = NtpClockSync()
        self.time_sync = True
        self.malformed = 0
        self.send_dropped = 0
        self.auth_failure = ""
        self.last_error: dict[str, Any] | None = None
        self.boot: int | None = None
        self.bye_ns: int | None = None    # when the peer said BYE (we keep quiet a while)
        self.hello_meta: dict[str, Any] = {}


class LinkEngine(threading.Thread):
    """I/O thread for the host's links to robot bridges or sensor publishers.

    Parameters
    ----------
    clock : Clock
        Session clock (``now_ns``).
    keys : CurveKeys or None
        CURVE keys; required for non-loopback endpoints.
    role : str
        ``"leader"`` or ``"follower"`` (sent in HELLO).
    heartbeat_s, timeout_s : float
        Heartbeat interval; silence after which a peer counts as lost (session s).
    sync_interval_s : float
        Interval of time requests after the initial burst (session s).
    burst : int
        Time exchanges done back to back when a peer becomes ready.
    """

    def __init__(self, clock: Clock, *, keys: CurveKeys | None, role: str,
                 heartbeat_s: float = 0.2, timeout_s: float = 1.0,
                 sync_interval_s: float = 1.0, burst: int = 8, client: str = "echoreo"):
        super().__init__(name=f"echoreo-{role}-io", daemon=True)
        self.clock = clock
        self.keys = keys
        self.role = role
        self.client = client
        self.heartbeat_ns = int(heartbeat_s * 1e9)
        self.timeout_ns = int(timeout_s * 1e9)
        self.sync_ns = int(sync_interval_s * 1e9)
        self.burst = burst
        self.hello_retry_ns = int(0.2e9)
        self.quiet_ns = int(1e9)
        self.ctx = zmq.Context()
        self.peers: list[Peer] = []
        self._out: deque[tuple[int, list[bytes]]] = deque()
        self._wake_addr = f"inproc://echoreo-wake-{next(_wake_ids)}"
        self._wake_rx = self.ctx.socket(zmq.PAIR)
        self._wake_rx.bind(self._wake_addr)
        self._wake_tx = self.ctx.socket(zmq.PAIR)
        self._wake_tx.connect(self._wake_addr)
        self._wake_lock = threading.Lock()
        self._halt = threading.Event()
        self._req_ids = itertools.count(1)
        self.lock = threading.RLock()  # guards state shared with the caller thread
        self.fault: BaseException | None = None

    # ---- set-up (caller thread, before start) --------------------------------------------
    def add_peer(self, endpoint: str, hello_meta: dict[str, Any] | None = None) -> Peer:
        """Create the DEALER socket for ``endpoint`` (checked against the policy)."""
        check_endpoint(endpoint, self.keys, "connect to")
        sock = self.ctx.socket(zmq.DEALER)
        sock.linger = 0
        # ZMQ_IMMEDIATE stays 0: with it libzmq terminates the pipe on every disconnect,
        # and a disconnect in the middle of reading a multipart message then trips an
        # assertion in libzmq 4.3.5 (fq.cpp:80) that aborts the process.
        sock.maxmsgsize = SOCKET_MAX_FRAME_BYTES
        sock.rcvhwm = 100_000
        sock.sndhwm = 10_000
        sock.reconnect_ivl = 100
        sock.reconnect_ivl_max = 1000
        secure_client(sock, self.keys)
        monitor = sock.get_monitor_socket(_AUTH_EVENTS)
        try:
            sock.connect(endpoint)
        except zmq.ZMQError as exc:
            from echoreo.errors import InputError
            raise InputError(f"cannot connect to {endpoint}: {exc}",
                             hint="check the endpoint (tcp://HOST:PORT)") from exc
        peer = Peer(len(self.peers), endpoint, sock, monitor)
        peer.hello_meta = dict(hello_meta or {})
        self.peers.append(peer)
        return peer

    # ---- caller thread -----------------------------------------------------------------
    def submit(self, peer: Peer, frames: list[bytes]) -> None:
        """Queue a message for ``peer`` and wake the I/O thread (thread-safe)."""
        self._out.append((peer.index, frames))
        with self._wake_lock:
            try:
                self._wake_tx.send(b"", zmq.NOBLOCK)
            except zmq.ZMQError:
                pass  # a wake-up is pending already or we are closing

    def close(self, bye: bool = True) -> None:
        """Say goodbye, stop the thread and release every socket; idempotent."""
        if self._halt.is_set():
            return
        if bye and self.is_alive():
            for p in self.peers:
                if p.ready:
                    self.submit(p, encode(MsgType.BYE, {"reason": "closing"}))
            time.sleep(0.02)
        self._halt.set()
        with self._wake_lock:
            try:
                self._wake_tx.send(b"", zmq.NOBLOCK)
            except zmq.ZMQError:
                pass
        if self.is_alive():
            self.join(timeout=2.0)
        for p in self.peers:
            p.sock.disable_monitor()
            p.monitor.close(0)
            p.sock.close(0)
        self._wake_tx.close(0)
        self._wake_rx.close(0)
        self.ctx.term()

    # ---- hooks for subclasses (I/O thread) -----------------------------------------------
    def on_message(self, peer: Peer, msg: Message, t_rx_ns: int) -> None:
        """A decoded message other than housekeeping."""

    def on_malformed(self, peer: Peer, err: ProtocolError, t_rx_ns: int) -> None:
        """A message that failed to decode (already counted in ``peer.malformed``)."""

    def on_lost(self, peer: Peer, now_ns: int, reason: str) -> None:
        """``peer`` lost its session with us: silent for longer than the timeout, or
        it answered ERROR ``not_connected`` (it restarted or forgot us); ``reason``
        says which. The peer is no longer ready; the loop greets it again."""

    def on_synced(self, peer: Peer, now_ns: int) -> None:
        """A time exchange with ``peer`` was added to its estimator."""

    def on_tick(self, now_ns: int) -> None:
        """Called every loop turn (at least every 10 ms)."""

    # ---- helpers for subclasses ------------------------------------------------------------
    def send_now(self, peer: Peer, frames: list[bytes]) -> bool:
        """Send from the I/O thread; False (and counted) if the peer is unreachable."""
        try:
            peer.sock.send_multipart(frames, zmq.NOBLOCK, copy=False)
            return True
        except zmq.Again:
            peer.send_dropped += 1
            return False

    def mark_ready(self, peer: Peer, now_ns: int, time_sync: bool = True) -> None:
        """The peer welcomed/announced: start heartbeats and the sync burst."""
        peer.ready = True
        peer.ever_ready = True
        peer.time_sync = time_sync
        peer.burst_left = self.burst if time_sync else 0
        peer.next_sync_ns = now_ns

    def _send_time_req(self, peer: Peer, now_ns: int) -> None:
        rid = next(self._req_ids)
        t1 = self.clock.now_ns()  # stamped last, just before the send (RFC 5905: T1 = send)
        if self.send_now(peer, encode(MsgType.TIME_REQ, {"id": rid, "t1_ns": t1}, check=False)):
            peer.pending[rid] = t1
        if len(peer.pending) > 64:
            for k in sorted(peer.pending)[:-32]:
                del peer.pending[k]

    # ---- the loop ----------------------------------------------------------------------
    def run(self) -> None:
        try:
            self._loop()
        except BaseException as exc:  # recorded, shown by the adapter; never silent
            self.fault = exc

    def _loop(self) -> None:
        poller = zmq.Poller()
        poller.register(self._wake_rx, zmq.POLLIN)
        socks = {}
        for p in self.peers:
            poller.register(p.sock, zmq.POLLIN)
            poller.register(p.monitor, zmq.POLLIN)
            socks[p.sock] = p
            socks[p.monitor] = p
        while not self._halt.is_set():
            events = dict(poller.poll(10))
            if self._wake_rx in events:
                while True:
                    try:
                        self._wake_rx.recv(zmq.NOBLOCK)
                    except zmq.Again:
                        break
            while self._out:
                idx, frames = self._out.popleft()
                self.send_now(self.peers[idx], frames)
            for sock in events:
                p = socks.get(sock)
                if p is None:
                    continue
                if sock is p.monitor:
                    self._read_monitor(p)
                else:
                    self._read_peer(p)
            now = self.clock.now_ns()
            with self.lock:
                for p in self.peers:
                    self._timers(p, now)
                self.on_tick(now)

    def _read_monitor(self, p: Peer) -> None:
        while True:
            try:
                ev = recv_monitor_message(p.monitor, zmq.NOBLOCK)
            except zmq.Again:
                return
            if ev["event"] == zmq.EVENT_HANDSHAKE_FAILED_AUTH:
                p.auth_failure = (f"{p.endpoint} rejected our CURVE key (ZAP status "
                                  f"{ev['value']}): this client's public key is not in the "
                                  "server's authorized/ folder")
            elif ev["event"] == zmq.EVENT_HANDSHAKE_FAILED_PROTOCOL:
                p.auth_failure = (f"security handshake with {p.endpoint} failed: both sides "
                                  "must use CURVE with matching keys, or neither")

    def _read_peer(self, p: Peer) -> None:
        for _ in range(2000):  # bounded per turn so one flooding peer cannot starve timers
            try:
                frames = p.sock.recv_multipart(zmq.NOBLOCK, copy=False)
            except zmq.Again:
                return
            t_rx = self.clock.now_ns()
            with self.lock:
                try:
                    msg = decode(frames)
                except ProtocolError as err:
                    p.last_rx_ns = t_rx
                    p.malformed += 1
                    self.on_malformed(p, err, t_rx)
                    continue
                if msg.type not in (MsgType.TIME_REP, MsgType.ERROR):
                    # peers answer TIME_REQ, and reply ERROR, to any host, with or without
                    # a session: neither shows that the peer still has a session with us
                    p.last_rx_ns = t_rx
                if msg.type == MsgType.TIME_REP:
                    self._time_rep(p, msg, t_rx)
                elif msg.type == MsgType.HEARTBEAT:
                    pass
                elif msg.type == MsgType.BYE:
                    p.ready = False
                    p.bye_ns = t_rx
                    self.on_message(p, msg, t_rx)
                else:
                    if msg.type == MsgType.ERROR:
                        p.last_error = dict(msg.meta)
                    self.on_message(p, msg, t_rx)
                    if (msg.type == MsgType.ERROR and p.ready
                            and msg.meta["code"] == "not_connected"):
                        self._session_lost(p, t_rx, NOT_CONNECTED_REASON)

    def _time_rep(self, p: Peer, msg: Message, t_rx: int) -> None:
        m = msg.meta
        t1 = p.pending.pop(m["id"], None)
        if t1 is None or t1 != m["t1_ns"]:
            return  # late or unknown reply: ignored (its T4 is meaningless now)
        p.sync.add(t1, m["t2_ns"], m["t3_ns"], t_rx)
        self.on_synced(p, t_rx)
        if p.burst_left > 0:
            p.burst_left -= 1
            if p.burst_left > 0:
                self._send_time_req(p, t_rx)

    def _session_lost(self, p: Peer, now: int, reason: str) -> None:
        p.ready = False
        p.pending.clear()
        self.on_lost(p, now, reason)

    def _timers(self, p: Peer, now: int) -> None:
        if p.ready and p.last_rx_ns is not None and now - p.last_rx_ns > self.timeout_ns:
            self._session_lost(p, now, f"was silent for more than {self.timeout_ns / 1e9:g} s")
        if p.bye_ns is not None and now - p.bye_ns < self.quiet_ns:
            return  # the peer is closing: sending now could make its kernel reset the link
        if not p.ready:
            if now - p.last_hello_ns >= self.hello_retry_ns:
                p.last_hello_ns = now
                meta = {"role": self.role, "client": self.client, "t_ns": now,
                        "heartbeat_ms": int(self.heartbeat_ns // 1_000_000)}
                meta.update(p.hello_meta)
                self.send_now(p, encode(MsgType.HELLO, meta))
            return
        if now - p.last_hb_ns >= self.heartbeat_ns:
            p.last_hb_ns = now
            self.send_now(p, encode(MsgType.HEARTBEAT, {"t_ns": now}))
        if p.time_sync and now >= p.next_sync_ns:
            # during a burst, replies chain the next request at once; this timer only
            # re-kicks a burst whose reply was lost
            p.next_sync_ns = now + (self.sync_ns if p.burst_left == 0 else int(0.1e9))
            self._send_time_req(p, now)

    # ---- waiting (caller thread) ---------------------------------------------------------
    def wait_for(self, predicate, timeout_s: float) -> bool:
        """Poll ``predicate()`` (under the lock) every 5 ms for at most ``timeout_s`` real s."""
        deadline = time.monotonic() + timeout_s
        while True:
            with self.lock:
                if predicate():
                    return True
            if self.fault is not None or time.monotonic() >= deadline:
                return False
            time.sleep(0.005)
