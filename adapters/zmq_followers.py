"""Follower sources over ZeroMQ: sensor publishers speaking adapters/PROTOCOL.md.

:class:`ZmqFollowers` connects one DEALER socket per publisher endpoint, says
HELLO, receives the publisher's ANNOUNCE (its streams with channels, units
and rates), keeps its clock mapped onto the session clock (NTP-style
exchanges at connect and every ``sync_interval_s``; the lower envelope for a
device that announces ``time_sync: false``) and delivers samples with their
device times and sequence numbers. Everything the reader meets is counted and
reported as events, never raised: missing sequence numbers (``dropped``),
silences (``gap``, with a second ``gap`` event when the stream resumes),
repeated or reordered sequence numbers (``out_of_order``), undecodable
messages (``malformed``, aggregated per publisher with a count), a publisher
that restarted (new boot id: its clock estimate and sequence expectations are
reset; a ``fault`` event says so, and the ``gap`` end event notes it), a publisher
that answers ERROR ``not_connected`` (it restarted or forgot us: greeted again with
HELLO, and a ``fault`` event naming its endpoint).
"""

from __future__ import annotations

import threading
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from echoreo.adapters._link import LinkEngine, Peer
from echoreo.adapters.base import (
    Clock,
    ClockMap,
    FollowerSource,
    SampleBatch,
    StreamHealth,
    StreamInfo,
)
from echoreo.adapters.clocksync import EnvelopeClockSync
from echoreo.adapters.protocol import Message, MsgType
from echoreo.adapters.security import CurveKeys, check_endpoint
from echoreo.errors import ProtocolError, RuntimeFault

__all__ = ["ZmqFollowers"]

Event = tuple[int, str, str, dict]


@dataclass
class _Stream:
    info: StreamInfo
    peer: int
    gap_ns: int
    health: StreamHealth = field(default_factory=StreamHealth)
    expected: int | None = None
    last_rx_ns: int | None = None
    in_gap: bool = False
    gap_start_ns: int = 0
    restarted: bool = False
    lat: deque = field(default_factory=lambda: deque(maxlen=256))
    rx: deque = field(default_factory=lambda: deque(maxlen=4096))
    lat_all: list = field(default_factory=list)


class _FollowerEngine(LinkEngine):
    def __init__(self, clock: Clock, gap_s: float, **kw: Any):
        super().__init__(clock, role="follower", **kw)
        self.gap_s = gap_s
        self.streams: dict[str, _Stream] = {}
        self.by_peer: dict[int, list[str]] = {}
        self.envelope: dict[int, EnvelopeClockSync] = {}
        self.waiting: dict[int, list[tuple[str, np.ndarray, np.ndarray, int]]] = {}
        self.out: deque[SampleBatch] = deque()
        self.events: deque[Event] = deque(maxlen=100_000)
        self.malformed_total = 0
        self.malformed_pending: dict[int, list] = {}
        self.stale_boot = 0
        self.frozen = False
        self.keep_latencies = False

    # ---- helpers -----------------------------------------------------------------------
    def cmap(self, peer: Peer) -> ClockMap:
        if peer.time_sync:
            return peer.sync.clock_map()
        env = self.envelope.get(peer.index)
        return env.clock_map() if env is not None else ClockMap(method="envelope")

    def synced(self, peer: Peer) -> bool:
        # four exchanges (half the connect burst) before the first sample is mapped
        return peer.sync.n_exchanges_ >= 4 if peer.time_sync else True

    def malformed(self, peer: Peer, reason: str, t_rx: int, stream: str | None = None) -> None:
        self.malformed_total += 1
        names = self.by_peer.get(peer.index, [])
        name = stream if stream in self.streams else (names[0] if names else None)
        if name is not None:
            self.streams[name].health.malformed += 1
        agg = self.malformed_pending.setdefault(peer.index, [t_rx, 0, reason, name or ""])
        agg[1] += 1

    # ---- hooks (I/O thread, under self.lock) ---------------------------------------------
    def on_malformed(self, peer: Peer, err: ProtocolError, t_rx_ns: int) -> None:
        self.malformed(peer, str(err).splitlines()[0], t_rx_ns)

    def on_message(self, peer: Peer, msg: Message, t_rx: int) -> None:
        if msg.type == MsgType.ANNOUNCE:
            self._announce(peer, msg.meta, t_rx)
        elif msg.type == MsgType.SAMPLES:
            self._samples(peer, msg, t_rx)
        elif msg.type == MsgType.BYE:
            peer.ready = False
        elif msg.type == MsgType.ERROR:
            if msg.meta["code"] == "not_connected" and not peer.ready:
                return  # replies to messages sent before we lost it; HELLO is on its way
            self.events.append((t_rx, "fault", "", {"endpoint": peer.endpoint,
                                                    "code": msg.meta["code"],
                                                    "message": msg.meta["message"]}))
        # WELCOME/ACK/STATE/COMMAND... are not for a follower: counted as malformed
        elif msg.type not in (MsgType.HEARTBEAT, MsgType.TIME_REP):
            self.malformed(peer, f"unexpected {msg.type.name} from a sensor publisher", t_rx)

    def _announce(self, peer: Peer, m: dict, t_rx: int) -> None:
        restarted = peer.boot is not None and peer.boot != m["boot"]
        if restarted:
            peer.sync.reset()
            self.envelope.pop(peer.index, None)
            self.waiting.pop(peer.index, None)
            for name in self.by_peer.get(peer.index, []):
                st = self.streams[name]
                st.expected = None
                st.restarted = True
                self.events.append((t_rx, "fault", name, {
                    "endpoint": peer.endpoint, "reason": "publisher restarted (new boot id): "
                    "its clock estimate and sequence numbers start afresh",
                    "old_boot": peer.boot, "new_boot": m["boot"]}))
        peer.boot = m["boot"]
        names = self.by_peer.setdefault(peer.index, [])
        for s in m["streams"]:
            name = s["name"]
            if name in names:
                continue
            if self.frozen or name in self.streams:
                why = ("announced after connect" if self.frozen else
                       f"also announced by {self.peers[self.streams[name].peer].endpoint}")
                self.events.append((t_rx, "fault", name, {"endpoint": peer.endpoint,
                                                          "reason": f"stream ignored: {why}"}))
                continue
            info = StreamInfo(name=name, kind=s["kind"], channels=tuple(s["channels"]),
                              units=tuple(s["units"]), rate_hz=float(s["rate_hz"]),
                              source=f"zmq {peer.endpoint} ({m['device']})")
            gap_ns = int(max(self.gap_s, 5.0 / info.rate_hz) * 1e9)
            self.streams[name] = _Stream(info, peer.index, gap_ns)
            names.append(name)
        if not m["time_sync"] and peer.index not in self.envelope:
            self.envelope[peer.index] = EnvelopeClockSync()
        self.mark_ready(peer, t_rx, time_sync=m["time_sync"])

    def _samples(self, peer: Peer, msg: Message, t_rx: int) -> None:
        name = msg.meta["stream"]
        if name not in self.by_peer.get(peer.index, []):
            self.malformed(peer, f"samples of stream {name!r}, which this publisher did not "
                                 "announce", t_rx)
            return
        if msg.meta["boot"] != peer.boot:
            self.stale_boot += 1  # in flight from a previous run of the publisher
            return
        index, data = msg.arrays
        st = self.streams[name]
        if data.shape[1] != len(st.info.channels):
            self.malformed(peer, f"{data.shape[1]} channels for stream {name!r} announced with "
                                 f"{len(st.info.channels)}", t_rx, name)
            return
        if index.shape[0] > 1 and np.any(np.diff(index[:, 0]) <= 0):
            self.malformed(peer, f"sequence numbers of {name!r} not increasing within a "
                                 "message", t_rx, name)
            return
        if not self.synced(peer):
            w = self.waiting.setdefault(peer.index, [])
            if len(w) < 100_000:
                w.append((name, index, data, t_rx))
            return
        self._deliver(peer, st, index, data, t_rx)

    def _deliver(self, peer: Peer, st: _Stream, index: np.ndarray, data: np.ndarray,
                 t_rx: int) -> None:
        seq, t_dev = index[:, 0], index[:, 1]
        h = st.health
        name = st.info.name
        if st.expected is not None:
            keep = seq >= st.expected
            if not keep.all():
                n_bad = int((~keep).sum())
                self.events.append((t_rx, "out_of_order", name,
                                    {"count": n_bad, "seq": int(seq[~keep][0]),
                                     "expected": int(st.expected)}))
                h.extra["out_of_order"] = h.extra.get("out_of_order", 0) + n_bad
                seq, t_dev, data = seq[keep], t_dev[keep], data[keep]
                if seq.size == 0:
                    return
            first = st.expected
        else:
            first = int(seq[0])
        steps = np.diff(np.concatenate([[first - 1], seq]))
        missing = int((steps - 1).sum())
        if missing:
            h.dropped += missing
            self.events.append((t_rx, "dropped", name, {"count": missing,
                                                        "after_seq": int(first - 1)}))
        env = self.envelope.get(peer.index)
        if env is not None:
            env.add(t_dev, t_rx)
        t_ns = self.cmap(peer).to_session(t_dev)
        lat = (t_rx - t_ns).astype(np.float64)
        st.lat.extend(lat.tolist())
        if self.keep_latencies and len(st.lat_all) < 2_000_000:
            st.lat_all.extend(lat.tolist())
        st.rx.append((t_rx, int(seq.size)))
        if st.in_gap:
            self.events.append((t_rx, "gap", name, {
                "phase": "end", "silence_s": (t_rx - st.last_rx_ns) / 1e9 if st.last_rx_ns
                else None, "publisher_restarted": st.restarted, "resumed_seq": int(seq[0])}))
            st.in_gap = False
        st.restarted = False
        st.last_rx_ns = t_rx
        st.expected = int(seq[-1]) + 1
        h.samples += int(seq.size)
        h.last_t_ns = int(t_ns[-1])
        self.out.append(SampleBatch(stream=name, t_ns=t_ns, t_dev_ns=t_dev.copy(),
                                    seq=seq.copy(), data=data))

    def on_synced(self, peer: Peer, now_ns: int) -> None:
        w = self.waiting.pop(peer.index, None)
        for name, index, data, t_rx in w or []:
            self._deliver(peer, self.streams[name], index, data, t_rx)

    def on_tick(self, now: int) -> None:
        for st in self.streams.values():
            if st.last_rx_ns is not None and not st.in_gap and now - st.last_rx_ns > st.gap_ns:
                st.in_gap = True
                st.health.gaps += 1
                self.events.append((now, "gap", st.info.name, {
                    "phase": "start", "silent_s": (now - st.last_rx_ns) / 1e9,
                    "last_seq": None if st.expected is None else st.expected - 1,
                    "endpoint": self.peers[st.peer].endpoint}))

    def flush_malformed(self) -> None:
        for idx, (t0, count, reason, name) in self.malformed_pending.items():
            self.events.append((t0, "malformed", name, {"count": count, "first_reason": reason,
                                                        "endpoint": self.peers[idx].endpoint}))
        self.malformed_pending.clear()


class ZmqFollowers(FollowerSource):
    """Sensor publishers reached over ZeroMQ (see adapters/PROTOCOL.md).

    Parameters
    ----------
    endpoints : sequence of str
        One endpoint per publisher, e.g. ``["tcp://127.0.0.1:47110"]``.
    keys : CurveKeys, str, Path or None
        CURVE key folder; required for non-loopback endpoints.
    sync_interval_s : float
        Interval of time exchanges per publisher after the initial burst, s.
    gap_s : float
        A stream silent for longer than ``max(gap_s, 5 / rate_hz)`` is in a gap, s.
    heartbeat_s, timeout_s : float
        Our heartbeat interval; silence after which a publisher is greeted again, s.
    connect_timeout_s : float
        How long :meth:`connect` waits for every ANNOUNCE and first clock sync, real s.
    require_all : bool
        Raise in :meth:`connect` when a publisher does not answer; otherwise
        announce what answered and keep greeting the others.
    """

    uses_network = True

    def __init__(self, endpoints: Sequence[str], *, keys: CurveKeys | str | Path | None = None,
                 sync_interval_s: float = 1.0, gap_s: float = 0.5, heartbeat_s: float = 0.2,
                 timeout_s: float = 1.0, connect_timeout_s: float = 5.0,
                 require_all: bool = True, client: str = "echoreo"):
        if isinstance(endpoints, str):
            endpoints = [endpoints]
        if not endpoints:
            raise ValueError("ZmqFollowers needs at least one endpoint")
        self.endpoints = list(endpoints)
        self.keys = CurveKeys(keys) if isinstance(keys, str | Path) else keys
        for ep in self.endpoints:
            check_endpoint(ep, self.keys, "connect to")
        self.sync_interval_s = sync_interval_s
        self.gap_s = gap_s
        self.heartbeat_s = heartbeat_s
        self.timeout_s = timeout_s
        self.connect_timeout_s = connect_timeout_s
        self.require_all = require_all
        self.client = client
        self._engine: _FollowerEngine | None = None
        self._infos: list[StreamInfo] = []
        self._closed = threading.Event()

    def connect(self, clock: Clock) -> list[StreamInfo]:
        """Greet every publisher; wait for its ANNOUNCE and first clock sync.

        Raises
        ------
        RuntimeFault
            When ``require_all`` and a publisher does not answer in time (the
            message names it, and says when it rejected our CURVE key).
        """
        if self._engine is not None:
            raise RuntimeError("ZmqFollowers.connect called twice")
        eng = _FollowerEngine(clock, self.gap_s, keys=self.keys, heartbeat_s=self.heartbeat_s,
                              timeout_s=self.timeout_s, sync_interval_s=self.sync_interval_s,
                              client=self.client)
        self._engine = eng
        try:
            for ep in self.endpoints:
                eng.add_peer(ep)
        except Exception:
            eng.close(bye=False)
            raise
        eng.start()

        def done() -> bool:
            return all(p.ready and (not p.time_sync or p.sync.n_exchanges_ >= 4)
                       for p in eng.peers)

        eng.wait_for(done, self.connect_timeout_s)
        with eng.lock:
            missing = [p for p in eng.peers if not (p.ready and eng.synced(p))]
            if missing and self.require_all:
                why = "; ".join(f"{p.endpoint}: " + (
                    p.auth_failure or (f"announced, but {p.sync.n_exchanges_} of 4 time "
                                       "exchanges answered" if p.ready else "no answer"))
                    for p in missing)
                eng.close(bye=False)
                raise RuntimeFault(f"sensor publisher(s) not reached within "
                                   f"{self.connect_timeout_s:g} s: {why}; is `echoreo publish` "
                                   "(or your sensor's publisher) running there?")
            eng.frozen = True
            self._infos = [eng.streams[n].info for p in eng.peers
                           for n in eng.by_peer.get(p.index, [])]
        return list(self._infos)

    def _eng(self) -> _FollowerEngine:
        if self._engine is None:
            raise RuntimeError("ZmqFollowers is not connected")
        return self._engine

    def poll(self) -> list[SampleBatch]:
        """New samples since the previous call, one batch per stream; never blocks."""
        eng = self._eng()
        with eng.lock:
            items = list(eng.out)
            eng.out.clear()
        by_stream: dict[str, list[SampleBatch]] = {}
        for b in items:
            by_stream.setdefault(b.stream, []).append(b)
        out = []
        for name, bs in by_stream.items():
            if len(bs) == 1:
                out.append(bs[0])
            else:
                out.append(SampleBatch(stream=name,
                                       t_ns=np.concatenate([b.t_ns for b in bs]),
                                       t_dev_ns=np.concatenate([b.t_dev_ns for b in bs]),
                                       seq=np.concatenate([b.seq for b in bs]),
                                       data=np.concatenate([b.data for b in bs])))
        return out

    def clock_maps(self) -> dict[str, ClockMap]:
        """Current device-to-session map per stream (its publisher's)."""
        eng = self._eng()
        with eng.lock:
            return {n: eng.cmap(eng.peers[st.peer]) for n, st in eng.streams.items()}

    def health(self) -> dict[str, StreamHealth]:
        """Health per stream: counts, recent rate and latency, clock offset ± uncertainty."""
        eng = self._eng()
        out = {}
        with eng.lock:
            now = eng.clock.now_ns()
            for name, st in eng.streams.items():
                cmap = eng.cmap(eng.peers[st.peer])
                recent = [(t, n) for t, n in st.rx if now - t <= 2_000_000_000]
                rate = float("nan")
                if len(recent) >= 2 and recent[-1][0] > recent[0][0]:
                    rate = sum(n for _, n in recent[1:]) / ((recent[-1][0] - recent[0][0]) / 1e9)
                lat = float(np.median(st.lat)) if st.lat else float("nan")
                extra = dict(st.health.extra)
                extra.update(method=cmap.method, drift_ppm=cmap.drift_ppm, in_gap=st.in_gap,
                             endpoint=eng.peers[st.peer].endpoint)
                out[name] = replace(st.health, latency_ns=lat, offset_ns=float(cmap.offset_ns),
                                    offset_uncertainty_ns=float(cmap.uncertainty_ns),
                                    rate_hz=rate, extra=extra)
        return out

    def events(self) -> list[tuple[int, str, str, dict]]:
        """Events since the previous call: ``(t_ns, kind, stream, detail)``."""
        eng = self._eng()
        with eng.lock:
            eng.flush_malformed()
            items = list(eng.events)
            eng.events.clear()
        return items

    @property
    def malformed_total(self) -> int:
        """Messages that failed to decode or broke the protocol, over all publishers."""
        eng = self._eng()
        with eng.lock:
            return eng.malformed_total

    def keep_latencies(self, on: bool = True) -> None:
        """Keep every sample's latency for :meth:`take_latencies` (benchmarks)."""
        self._eng().keep_latencies = on

    def take_latencies(self) -> dict[str, np.ndarray]:
        """Latencies (receive time minus mapped device time, ns) kept since the last call."""
        eng = self._eng()
        with eng.lock:
            out = {n: np.asarray(st.lat_all) for n, st in eng.streams.items()}
            for st in eng.streams.values():
                st.lat_all = []
        return out

    def close(self) -> None:
        """Say BYE to every publisher and release the sockets; idempotent."""
        if self._engine is not None and not self._closed.is_set():
            self._closed.set()
            self._engine.close()
