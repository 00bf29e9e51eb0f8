"""Follower streams during a session: ingest, ordering, gaps, silence, health.

:class:`_Followers` polls every follower source, checks each batch (shapes,
strictly increasing sequence numbers, non-decreasing times), writes the good
samples, and logs ``malformed``, ``dropped`` and ``gap`` events; one
:class:`_Monitor` per stream keeps its counts and its live-view status.
:class:`_Rows` gathers the leader's command and state rows for the recorder.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable
from typing import Any

import numpy as np

from echoreo.adapters.base import FollowerSource, StreamInfo
from echoreo.runner.liveview import SessionStatus, StreamStatus

__all__: list[str] = []


class _Monitor:
    """Per-stream bookkeeping: ordering, sequence gaps, silence, health."""

    def __init__(self, info: StreamInfo, pair: Any, own_events: bool = False):
        self.info = info
        self.pair = pair
        #: the source reports its own dropped/gap events (the runner then adds none)
        self.own_events = own_events
        self.samples = 0
        self.dropped = 0
        self.malformed = 0
        self.gaps = 0
        self.last_seq: int | None = None
        self.last_t_ns: int | None = None
        self.last_recv_ns: int | None = None
        self.first_recv_ns: int | None = None
        self.silent_since_ns: int | None = None
        self.recent: deque = deque()  # (recv_ns, n) over the last seconds
        self.recent_n = 0
        self.latency_ns = float("nan")
        self.status = StreamStatus(
            name=info.name, nominal_hz=float(info.rate_hz),
            pair=(f"robot {pair.leader_site}" if pair is not None else "(not in plan)"))

    def received(self, now_ns: int, n: int, last_t_ns: int,
                 window_ns: int = 2_000_000_000) -> None:
        """Update the effective rate (over ``window_ns``) and the latency estimate.

        The latency is an exponentially weighted mean of (receive time - mapped
        time of the batch's last sample), weight 0.1 per batch.
        """
        self.recent.append((now_ns, n))
        self.recent_n += n
        while self.recent and self.recent[0][0] <= now_ns - window_ns:
            self.recent_n -= self.recent.popleft()[1]
        span = min(window_ns, max(now_ns - (self.first_recv_ns or now_ns), 1))
        self.status.rate_hz = self.recent_n / (span * 1e-9) if span > 1 else float("nan")
        lat = float(now_ns - last_t_ns)
        self.latency_ns = lat if self.latency_ns != self.latency_ns else \
            0.9 * self.latency_ns + 0.1 * lat
        self.status.latency_ms = self.latency_ns * 1e-6


class _Rows:
    """Leader rows gathered for a few ticks and handed to the recorder together."""

    def __init__(self, stream: str, max_age_ns: int):
        self.stream = stream
        self.max_age_ns = int(max_age_ns)
        self.t: list[int] = []
        self.td: list[int] = []
        self.seq: list[int] = []
        self.q: list[np.ndarray] = []

    def add(self, t_ns: int, t_dev_ns: int, seq: int, q: np.ndarray) -> None:
        self.t.append(int(t_ns))
        self.td.append(int(t_dev_ns))
        self.seq.append(int(seq))
        self.q.append(np.asarray(q, dtype=float))

    def due(self, now_ns: int) -> bool:
        return bool(self.t) and now_ns - self.t[0] >= self.max_age_ns

    def flush(self, rec: Any) -> None:
        if self.t:
            rec.write(self.stream, self.t, self.td, self.seq, np.vstack(self.q))
            self.t, self.td, self.seq, self.q = [], [], [], []



class _Followers:
    """The follower sources of a running session and one :class:`_Monitor` per stream.

    Parameters
    ----------
    plan : SessionPlan
        The plan (its pairs and its ``silent_stream`` action).
    sources : list of FollowerSource
        The connected sources.
    infos : list of (FollowerSource, StreamInfo)
        Every stream each source announced at connect.
    rec : Recorder
        The open session file; each stream is added to it with its clock map.
    status : SessionStatus
        The live view's status; its ``streams`` become the monitors' statuses.
    """

    def __init__(self, plan: Any, sources: list[FollowerSource], infos: list, rec: Any,
                 status: SessionStatus):
        self.plan = plan
        self.sources = sources
        self.rec = rec
        self.status = status
        pairs = {p.stream: p for p in plan.pairs}
        self.monitors: dict[str, _Monitor] = {}
        for src, info in infos:
            cmap = src.clock_maps().get(info.name)
            rec.add_stream(info, cmap)
            own = type(src).events is not FollowerSource.events
            self.monitors[info.name] = _Monitor(info, pairs.get(info.name), own)
            if cmap is not None:
                self.monitors[info.name].status.offset_ms = cmap.offset_ns * 1e-6
                self.monitors[info.name].status.offset_unc_ms = cmap.uncertainty_ns * 1e-6
        status.streams = [m.status for m in self.monitors.values()]

    def any_silent(self) -> bool:
        """Whether some paired stream is silent now."""
        return any(m.silent_since_ns is not None for m in self.monitors.values())

    def store_maps(self) -> None:
        """Store each stream's current device-to-session clock map when it changed."""
        monitors, rec = self.monitors, self.rec
        for src in self.sources:
            try:
                maps = src.clock_maps()
            except Exception:
                continue
            for name, cmap in maps.items():
                m = monitors.get(name)
                if m is None or cmap is None or getattr(m, "_map", None) == cmap:
                    continue
                m._map = cmap
                rec.set_clock_map(name, cmap)
                m.status.offset_ms = cmap.offset_ns * 1e-6
                m.status.offset_unc_ms = cmap.uncertainty_ns * 1e-6

    def poll(self, src: FollowerSource, now: int) -> None:
        """Read one source's batches, events and health at session time ``now``, ns."""
        monitors, rec = self.monitors, self.rec
        try:
            batches = src.poll()
        except Exception as exc:  # a broken source must not stop the robot loop
            rec.event(now, "fault", None, {"reason": "follower source failed to poll",
                                           "detail": repr(exc)})
            return
        for b in batches:
            self._ingest(b, now)
        try:
            events = src.events()
        except Exception as exc:
            events = [(now, "fault", None, {"reason": "events() failed", "detail": repr(exc)})]
        for t_ns, kind, stream, detail in events:
            rec.event(int(t_ns), str(kind), stream, detail)
            m = monitors.get(stream) if stream else None
            if m is not None and kind == "malformed":
                m.malformed += 1
                m.status.malformed = m.malformed
        try:
            health = src.health()
        except Exception:
            health = {}
        for name, h in health.items():
            m = monitors.get(name)
            if m is not None:
                if h.offset_ns == h.offset_ns:
                    m.status.offset_ms = h.offset_ns * 1e-6
                if h.offset_uncertainty_ns == h.offset_uncertainty_ns:
                    m.status.offset_unc_ms = h.offset_uncertainty_ns * 1e-6
                if h.malformed > m.malformed:
                    m.status.malformed = h.malformed

    def _ingest(self, b: Any, now: int) -> None:
        """Check one batch and write its in-order samples; count the rest."""
        monitors, rec = self.monitors, self.rec
        m = monitors.get(getattr(b, "stream", None))
        if m is None:
            rec.event(now, "malformed", str(getattr(b, "stream", ""))[:64],
                      {"reason": "samples of a stream that was never announced"})
            return
        try:
            t = np.asarray(b.t_ns, dtype=np.int64).reshape(-1)
            td = np.asarray(b.t_dev_ns, dtype=np.int64).reshape(-1)
            sq = np.asarray(b.seq, dtype=np.int64).reshape(-1)
            d = np.asarray(b.data, dtype=np.float64)
            n = t.shape[0]
            if d.ndim == 1 and n == 1:
                d = d.reshape(1, -1)
            if td.shape != (n,) or sq.shape != (n,) or d.shape != (n, len(m.info.channels)):
                raise ValueError(f"shapes {t.shape}, {td.shape}, {sq.shape}, {d.shape} for "
                                 f"{len(m.info.channels)} channels")
        except (TypeError, ValueError) as exc:
            m.malformed += 1
            m.status.malformed = m.malformed
            rec.event(now, "malformed", m.info.name, {"reason": f"bad batch: {exc}"})
            return
        if n == 0:
            return
        # in order: strictly increasing sequence numbers and non-decreasing times
        prev_seq = np.maximum.accumulate(np.concatenate(
            [[m.last_seq if m.last_seq is not None else np.iinfo(np.int64).min], sq]))[:-1]
        prev_t = np.maximum.accumulate(np.concatenate(
            [[m.last_t_ns if m.last_t_ns is not None else np.iinfo(np.int64).min], t]))[:-1]
        ok = (sq > prev_seq) & (t >= prev_t)
        bad = int(n - ok.sum())
        if bad:
            m.malformed += bad
            m.status.malformed = m.malformed
            rec.event(now, "malformed", m.info.name,
                      {"reason": "out of order (sequence number or time went back)",
                       "count": bad})
            t, td, sq, d = t[ok], td[ok], sq[ok], d[ok]
            if t.shape[0] == 0:
                return
        steps = np.diff(np.concatenate([[m.last_seq], sq])) if m.last_seq is not None \
            else np.diff(sq)
        missing = int(np.sum(steps - 1))
        if missing > 0 and not m.own_events:
            m.dropped += missing
            m.status.dropped = m.dropped
            rec.event(now, "dropped", m.info.name, {"missing": missing,
                                                    "after_seq": int(sq[0] - 1)})
        rec.write(m.info.name, t, td, sq, d)
        m.samples += int(t.shape[0])
        m.last_seq = int(sq[-1])
        m.last_t_ns = int(t[-1])
        m.last_recv_ns = now
        if m.first_recv_ns is None:
            m.first_recv_ns = now
        m.received(now, int(t.shape[0]), int(t[-1]))
        m.status.samples = m.samples

    def silence(self, m: _Monitor, now: int, start_ns: int, limit_ns: int,
                warn: Callable, pause: Callable) -> None:
        """A ``gap`` event when paired stream ``m`` has been silent over ``limit_ns``, ns.

        Silence counts from its last received batch (from ``start_ns`` before the
        first); ``pause("silence", now)`` follows when the plan says so, and a
        ``back`` gap event once a batch arrives again.
        """
        rec = self.rec
        if m.pair is None or now < start_ns:
            return
        last = m.last_recv_ns if m.last_recv_ns is not None else start_ns
        silent_for = now - last
        if m.silent_since_ns is None:
            if silent_for > limit_ns:
                m.silent_since_ns = last
                m.gaps += 1
                m.status.gaps = m.gaps
                m.status.silent = True
                if not m.own_events:
                    rec.event(now, "gap", m.info.name, {"state": "silent",
                                                        "silent_s": silent_for * 1e-9,
                                                        "last_sample_ns": m.last_t_ns})
                warn(f"stream {m.info.name} is silent (no sample for {silent_for * 1e-9:.1f} s)")
                if self.plan.on_silent == "pause":
                    pause("silence", now)
        elif m.last_recv_ns is not None and m.last_recv_ns > m.silent_since_ns:
            if not m.own_events:
                rec.event(now, "gap", m.info.name, {
                    "state": "back", "silent_s": (m.last_recv_ns - m.silent_since_ns) * 1e-9})
            self.status.warnings.append(f"{now * 1e-9:7.2f} s  stream {m.info.name} is back")
            m.silent_since_ns = None
            m.status.silent = False
