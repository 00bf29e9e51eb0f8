"""Simulated adapters: the leader robot and a virtual participant, in process.

:class:`SimulatedLeader` plays joint commands on :class:`echoreo.sim.LeaderSim`
(first-order servo lag with velocity saturation) and reports the measured
pose after every command. :class:`SimulatedFollowers` is a virtual
participant wearing the usual sensors: at :meth:`~SimulatedFollowers.connect`
it simulates the whole session at once with
:func:`echoreo.sim.simulate_participant` on the session's *commanded*
trajectory (a kinematic virtual person whose output depends only on what the
robot was told to do), then hands the samples out as the session clock passes
their delivery times, with device time on the device's own (offset, drifting)
clock and the exact device-to-session clock map.

Both are deterministic under the generator passed in, and neither touches a
socket, so a session made only of these may run on a virtual clock.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from echoreo.adapters.base import (
    Clock,
    ClockMap,
    Command,
    FollowerSource,
    Leader,
    LeaderHello,
    LeaderState,
    SampleBatch,
    StreamHealth,
    StreamInfo,
)

__all__ = ["Dropout", "SimulatedFollowers", "SimulatedLeader", "clock_map_for_device"]


class SimulatedLeader(Leader):
    """The leader robot simulated in process (:class:`echoreo.sim.LeaderSim`).

    Each command is held until the next one (zero-order hold): :meth:`send`
    first advances the simulated servos under the previous command up to the
    new command's time, queues the measured pose at that time (acknowledging
    every command so far), then takes the new command.

    Parameters
    ----------
    robot : Robot
        The robot model.
    tau_s : float, s
        Servo lag time constant (see :class:`echoreo.sim.LeaderSim`).
    rng : numpy.random.Generator, optional
        Needed when ``noise_rad > 0``.
    noise_rad : float, rad
        Standard deviation of the measurement noise of the reported pose.
    q0 : array_like, shape (n_joints,), rad, optional
        Pose at connect (default: the robot's rest pose).
    fail_after_s : float, s, optional
        Fault injection: the robot stops answering this long after
        :meth:`connect` (:meth:`alive` turns False, commands are ignored and
        no more states arrive), as a robot bridge that vanished.
    """

    uses_network = False

    def __init__(self, robot: Any, *, tau_s: float = 0.05, rng: np.random.Generator | None = None,
                 noise_rad: float = 0.0, q0: ArrayLike | None = None,
                 fail_after_s: float | None = None):
        from echoreo.sim import LeaderSim

        self.robot = robot
        self._sim = LeaderSim(robot, tau_s=tau_s, rng=rng, noise_std=noise_rad, q0=q0)
        self._fail_after_ns = None if fail_after_s is None else round(fail_after_s * 1e9)
        self._clock: Clock | None = None
        self._t_connect = 0
        self._cmd: Command | None = None
        self._states: list[LeaderState] = []
        self._seq = 0
        self._closed = False

    def connect(self, clock: Clock) -> LeaderHello:
        """Start the simulated robot; the hello reports its present pose."""
        self._clock = clock
        self._t_connect = clock.now_ns()
        return LeaderHello(self.robot.name, tuple(self.robot.joint_names), self._sim.measure())

    def _failed(self) -> bool:
        if self._clock is None or self._fail_after_ns is None:
            return False
        return self._clock.now_ns() - self._t_connect >= self._fail_after_ns

    def alive(self) -> bool:
        """False once the injected failure time has passed (or after close)."""
        return not self._closed and not self._failed()

    def send(self, command: Command) -> None:
        """Advance the servos to the command's time, report the pose, take the command.

        Parameters
        ----------
        command : Command
            ``t_ns`` must not decrease from one command to the next.
        """
        if self._closed or self._failed():
            return
        q = np.asarray(command.q, dtype=float)
        if self._cmd is not None:
            dt = (command.t_ns - self._cmd.t_ns) * 1e-9
            if dt < 0:
                raise ValueError(f"command {command.seq} is older than command {self._cmd.seq}")
            measured = self._sim.step(self._cmd.q, dt)
            self._states.append(LeaderState(t_ns=int(command.t_ns), t_dev_ns=int(command.t_ns),
                                            seq=self._seq, q=measured, acked_seq=self._cmd.seq))
            self._seq += 1
        self._cmd = Command(int(command.seq), int(command.t_ns), q.copy())

    def read_state(self) -> list[LeaderState]:
        """Measured poses since the previous call."""
        out, self._states = self._states, []
        return out

    def _hold_here(self) -> None:
        if self._cmd is not None:
            self._cmd = Command(self._cmd.seq, self._cmd.t_ns, self._sim.q.copy())

    def hold(self) -> None:
        """Hold the present (true) pose: the pending command becomes the present pose."""
        self._hold_here()

    def stop(self) -> None:
        """Controlled stop: hold the present pose."""
        self._hold_here()

    def close(self) -> None:
        """Release the simulated robot; idempotent."""
        self._closed = True


@dataclass(frozen=True)
class Dropout:
    """Fault injection: a stream delivers nothing in a window of session time.

    Parameters
    ----------
    stream : str
        The stream to silence.
    start_s, duration_s : float, s
        Window ``[start_s, start_s + duration_s)`` on the session clock.
    """

    stream: str
    start_s: float
    duration_s: float


def clock_map_for_device(offset_s: float, drift_ppm: float) -> ClockMap:
    """The exact map of a device clock ``t_dev = o + (1 + d·1e-6) t`` to session time.

    Inverting the device clock model of :func:`echoreo.sim.simulate_participant`,

    .. math::

        t = \\frac{t_{dev} - o}{1 + d\\,10^{-6}}
          = t_{dev} + \\theta + \\delta\\,(t_{dev} - t_{ref})

    with :math:`\\theta = -o`, :math:`t_{ref} = o` and
    :math:`\\delta = 1 / (1 + d\\,10^{-6}) - 1`, the affine form of
    :class:`~echoreo.adapters.base.ClockMap`.

    Parameters
    ----------
    offset_s : float, s
        Device clock reading at session time 0.
    drift_ppm : float
        Device clock rate error, ppm.

    Returns
    -------
    ClockMap
        With ``method = "simulated"`` and zero uncertainty (the map is known).
    """
    o_ns = round(offset_s * 1e9)
    delta = 1.0 / (1.0 + drift_ppm * 1e-6) - 1.0
    return ClockMap(offset_ns=-o_ns, drift_ppm=delta * 1e6, ref_dev_ns=o_ns, uncertainty_ns=0,
                    method="simulated")


@dataclass
class _Feed:
    info: StreamInfo
    deliver_ns: NDArray[np.int64]
    t_ns: NDArray[np.int64]
    t_dev_ns: NDArray[np.int64]
    seq: NDArray[np.int64]
    data: NDArray[np.float64]
    cursor: int = 0
    last: tuple | None = None      # (seq, t_dev_ns, data row) of the last delivered sample
    held: int = 0                  # hold samples made during the present pause
    delivered: int = 0             # samples handed out
    last_t_ns: int | None = None   # session time of the last sample handed out


class SimulatedFollowers(FollowerSource):
    """A virtual participant's wearable-sensor and head-pose streams.

    Parameters
    ----------
    robot : Robot
        The leader's model.
    t : array_like, shape (n,), s
        Session-clock times of the whole session's commanded trajectory,
        strictly increasing (from 0 or later).
    q_commanded : array_like, shape (n, n_joints), rad
        What the leader is commanded at ``t``.
    rep_windows : array_like, shape (k, 2), s
        The leader's movement repetitions on the session clock.
    profile : ImitationProfile or str
        The participant's imitation profile, or a name in
        :data:`echoreo.sim.PROFILES`.
    mode : {"mirror", "anatomical"}
        The imitation mode asked for.
    rng : numpy.random.Generator
        All randomness (the same seed gives the same streams).
    height_m : float, m
        Body height.
    streams : sequence of str, optional
        Streams to produce (default: all of the simulator's:
        ``right_wrist_imu``, ``left_wrist_imu``, ``head_pose``).
    rates : mapping of str to float, optional
        Stream rates, Hz, overriding the simulator's defaults.
    dropouts : float or mapping, optional
        Fraction of samples lost in short bursts (see ``simulate_participant``).
    clock_offset_s : float, s
        Every device's clock reads this at session time 0.
    clock_drift_ppm : float
        Rate error of every device's clock, ppm.
    latency_s : float, s
        A sample is delivered this long after it was taken.
    dropout : iterable of Dropout
        Windows in which a stream delivers nothing (fault injection).
    glitch_every_s : float, s, optional
        Fault injection: every this many seconds of session time, one bad
        batch follows the good ones, alternately a re-sent old sample (out of
        order) and a batch with the wrong number of channels (malformed).

    Attributes
    ----------
    recording : ParticipantRecording or None
        The simulation (ground truth), available after :meth:`connect`.
    """

    uses_network = False

    def __init__(self, robot: Any, t: ArrayLike, q_commanded: ArrayLike, rep_windows: ArrayLike,
                 *, profile: Any, mode: str, rng: np.random.Generator, height_m: float = 1.70,
                 streams: Sequence[str] | None = None, rates: Mapping[str, float] | None = None,
                 dropouts: float | Mapping[str, float] | None = None,
                 clock_offset_s: float = 0.0, clock_drift_ppm: float = 0.0,
                 latency_s: float = 0.0, dropout: Iterable[Dropout] = (),
                 glitch_every_s: float | None = None):
        self.robot = robot
        self.t = np.asarray(t, dtype=float)
        self.q_commanded = np.asarray(q_commanded, dtype=float)
        self.rep_windows = np.asarray(rep_windows, dtype=float).reshape(-1, 2)
        self.profile = profile
        self.mode = mode
        self.rng = rng
        self.height_m = float(height_m)
        self.streams = None if streams is None else tuple(streams)
        self.rates = dict(rates or {})
        self.dropouts = dropouts
        self.clock_offset_s = float(clock_offset_s)
        self.clock_drift_ppm = float(clock_drift_ppm)
        self.latency_s = float(latency_s)
        self.dropout = tuple(dropout)
        self.glitch_every_ns = None if glitch_every_s is None else round(glitch_every_s * 1e9)
        self._next_glitch = self.glitch_every_ns
        self._glitches = 0
        self._frozen_at: int | None = None
        self._latency_ns = round(self.latency_s * 1e9)
        self.recording: Any = None
        self._clock: Clock | None = None
        self._feeds: dict[str, _Feed] = {}
        self._map = clock_map_for_device(self.clock_offset_s, self.clock_drift_ppm)

    def _profile(self) -> Any:
        if isinstance(self.profile, str):
            from echoreo.sim import PROFILES

            try:
                return PROFILES[self.profile]
            except KeyError:
                raise ValueError(f"unknown imitation profile {self.profile!r}; known: "
                                 + ", ".join(sorted(PROFILES))) from None
        return self.profile

    def connect(self, clock: Clock) -> list[StreamInfo]:
        """Simulate the whole session and announce the streams.

        Returns
        -------
        list of StreamInfo
            One per produced stream, in the simulator's order.
        """
        from echoreo.sim import simulate_participant
        from echoreo.sim.participant import DEFAULT_RATES

        self._clock = clock
        rates = dict(self.rates)
        if self.streams is not None:
            unknown = [s for s in self.streams if s not in DEFAULT_RATES]
            if unknown:
                raise ValueError(f"the virtual participant has no stream {unknown[0]!r}; it has "
                                 + ", ".join(DEFAULT_RATES))
            for name in DEFAULT_RATES:
                if name not in self.streams:
                    rates[name] = 0.0
        clocks = dict.fromkeys(DEFAULT_RATES, (self.clock_offset_s, self.clock_drift_ppm))
        rec = simulate_participant(self.robot, self.t, self.q_commanded, self.rep_windows,
                                   self._profile(), mode=self.mode, rng=self.rng,
                                   height_m=self.height_m, rates=rates, dropouts=self.dropouts,
                                   clocks=clocks)
        self.recording = rec
        latency_ns = round(self.latency_s * 1e9)
        infos = []
        for name, s in rec.streams.items():
            t_dev_ns = np.rint(np.asarray(s.t_dev) * 1e9).astype(np.int64)
            t_ns = self._map.to_session(t_dev_ns)
            rate = float(s.rate_hz) if math.isfinite(s.rate_hz) else float(DEFAULT_RATES[name])
            info = StreamInfo(name=name, kind=s.kind, channels=tuple(s.channels),
                              units=tuple(s.units), rate_hz=rate,
                              source=f"simulated virtual participant ({self._profile_name()})")
            self._feeds[name] = _Feed(info, t_ns + latency_ns, t_ns, t_dev_ns,
                                      np.asarray(s.seq, dtype=np.int64).copy(),
                                      np.asarray(s.data, dtype=float))
            infos.append(info)
        return infos

    def _profile_name(self) -> str:
        return self.profile if isinstance(self.profile, str) else "custom profile"

    def poll(self) -> list[SampleBatch]:
        """Samples whose delivery time the session clock has passed since the last call.

        While the robot is paused (:meth:`pause_at`), the virtual person holds
        still: every stream goes on sampling on its device clock, repeating its
        last sample, until :meth:`resume_at`.
        """
        if self._clock is None:
            return []
        now = self._clock.now_ns()
        limit = now if self._frozen_at is None else min(now, self._frozen_at + self._latency_ns)
        out = []
        for name, f in self._feeds.items():
            j = int(np.searchsorted(f.deliver_ns, limit, side="right"))
            if j > f.cursor:
                sl = slice(f.cursor, j)
                ok = ~self._dropped_mask(name, f.t_ns[sl])
                if ok.any():
                    out.append(SampleBatch(name, f.t_ns[sl][ok], f.t_dev_ns[sl][ok],
                                           f.seq[sl][ok], f.data[sl][ok]))
                    f.delivered += int(ok.sum())
                    f.last_t_ns = int(f.t_ns[sl][ok][-1])
                f.cursor = j
                f.last = (int(f.seq[j - 1]), int(f.t_dev_ns[j - 1]), f.data[j - 1].copy())
            if self._frozen_at is not None and f.last is not None:
                out.extend(self._hold_samples(f, now))
        if self._next_glitch is not None and now >= self._next_glitch:
            self._next_glitch += self.glitch_every_ns
            out.extend(self._glitch())
        return out

    def _hold_samples(self, f: _Feed, now: int) -> list[SampleBatch]:
        period = 1e9 / f.info.rate_hz
        seq0, tdev0, row = f.last
        rows = []
        while True:
            k = f.held + 1
            t_dev = tdev0 + round(k * period)
            t = int(self._map.to_session(t_dev))
            if t + self._latency_ns > now:
                break
            f.held = k
            if not self._dropped(f.info.name, t):
                rows.append((t, t_dev, seq0 + k))
        if not rows:
            return []
        t, td, sq = (np.array(c, dtype=np.int64) for c in zip(*rows, strict=True))
        f.delivered += len(rows)
        f.last_t_ns = int(t[-1])
        return [SampleBatch(f.info.name, t, td, sq, np.repeat(row[None, :], len(rows), axis=0))]

    def _dropped(self, stream: str, t_ns: int) -> bool:
        return bool(self._dropped_mask(stream, np.array([t_ns]))[0])

    def _dropped_mask(self, stream: str, t_ns: np.ndarray) -> np.ndarray:
        """True where a sample falls in one of the stream's dropout windows."""
        out = np.zeros(t_ns.shape[0], dtype=bool)
        for d in self.dropout:
            if d.stream == stream:
                a = round(d.start_s * 1e9)
                out |= (t_ns >= a) & (t_ns < a + round(d.duration_s * 1e9))
        return out

    def delay(self, dt_ns: int) -> None:
        """Start everything ``dt_ns`` later (the session's first command moved later).

        Device times move by the same span measured on the device clock, so
        each stream stays on its device's regular grid. Only before the first
        :meth:`poll` that delivered anything.
        """
        if dt_ns <= 0:
            return
        if any(f.cursor for f in self._feeds.values()):
            raise RuntimeError("SimulatedFollowers.delay after samples were delivered")
        shift_dev = round(dt_ns * (1.0 + self.clock_drift_ppm * 1e-6))
        for f in self._feeds.values():
            f.t_dev_ns += shift_dev
            f.t_ns = self._map.to_session(f.t_dev_ns)
            f.deliver_ns = f.t_ns + self._latency_ns

    def pause_at(self, t_ns: int) -> None:
        """The robot holds from session time ``t_ns``: the virtual person holds still too.

        A virtual person copies what the robot does, so when the robot pauses
        the rest of the person's planned motion waits as well (see :meth:`resume_at`).
        """
        if self._frozen_at is None:
            self._frozen_at = int(t_ns)
            for f in self._feeds.values():
                f.held = 0

    def resume_at(self, t_ns: int) -> None:
        """The robot moves again: the rest of every stream follows after the held samples.

        The samples not yet due move later on their device clocks by the
        number of sample periods held so far (sequence numbers and device
        times shifted alike), so each stream stays on its device's regular
        grid and no sample is lost or repeated.

        Parameters
        ----------
        t_ns : int
            Session time of the resume, ns (for the record; the shift is the
            number of hold samples already made by :meth:`poll`).
        """
        if self._frozen_at is None:
            return
        for f in self._feeds.values():
            if f.last is None or f.held == 0:
                continue
            rest = slice(f.cursor, None)
            shift_dev = round(f.held * 1e9 / f.info.rate_hz)
            f.t_dev_ns[rest] += shift_dev
            f.seq[rest] += f.held
            f.t_ns[rest] = self._map.to_session(f.t_dev_ns[rest])
            f.deliver_ns[rest] = f.t_ns[rest] + self._latency_ns
            f.last = (f.last[0] + f.held, f.last[1] + round(f.held * 1e9 / f.info.rate_hz),
                      f.last[2])
            f.held = 0
        self._frozen_at = None

    def _glitch(self) -> list[SampleBatch]:
        fed = [f for f in self._feeds.values() if f.cursor >= 2]
        if not fed:
            return []
        f = fed[self._glitches % len(fed)]
        self._glitches += 1
        k = f.cursor - 2
        sl = slice(k, k + 1)
        if self._glitches % 2:   # an old sample again: out of order
            return [SampleBatch(f.info.name, f.t_ns[sl].copy(), f.t_dev_ns[sl].copy(),
                                f.seq[sl].copy(), f.data[sl].copy())]
        return [SampleBatch(f.info.name, f.t_ns[sl].copy(), f.t_dev_ns[sl].copy(),
                            f.seq[sl].copy(), np.zeros((1, len(f.info.channels) + 1)))]

    def clock_maps(self) -> dict[str, ClockMap]:
        """The exact device-to-session map of every stream (see :func:`clock_map_for_device`)."""
        return dict.fromkeys(self._feeds, self._map)

    def health(self) -> dict[str, StreamHealth]:
        """Samples delivered, sequence gaps, last time, latency, offset per stream."""
        out = {}
        for name, f in self._feeds.items():
            n = f.delivered
            span = int(f.last[0] - f.seq[0] + 1) if f.last is not None else 0
            out[name] = StreamHealth(
                samples=n, dropped=max(span - n, 0), last_t_ns=f.last_t_ns,
                latency_ns=self.latency_s * 1e9, offset_ns=float(self._map.offset_ns),
                offset_uncertainty_ns=0.0, rate_hz=f.info.rate_hz)
        return out

    def remaining(self) -> int:
        """Samples not delivered yet, over all streams."""
        return sum(int(f.t_ns.shape[0] - f.cursor) for f in self._feeds.values())

    def close(self) -> None:
        """Nothing to release; idempotent."""
        self._clock = None
