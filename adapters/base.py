"""The leader and follower interfaces every adapter implements.

A session talks to exactly one :class:`Leader` (the robot, simulated or behind
a bridge) and any number of :class:`FollowerSource` objects (wearable sensors,
a head-pose estimator, a file). The runner owns the session clock and hands it
to each adapter at :meth:`connect`; adapters timestamp what they receive on
that clock and keep the device's own time alongside, mapped by a
:class:`ClockMap` so the mapping can be redone offline.

Life cycle of a leader::

    hello = leader.connect(clock)        # joint names checked by the runner
    leader.send(command)                 # every tick, acknowledged
    states = leader.read_state()         # measured joint states since last call
    leader.hold() / leader.stop()        # pause in place / controlled stop
    leader.close()

Life cycle of a follower source::

    infos = source.connect(clock)        # announced streams
    batches = source.poll()              # new samples, never blocks
    source.close()
"""

from __future__ import annotations

import abc
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np

__all__ = [
    "Clock",
    "ClockMap",
    "Command",
    "FollowerSource",
    "Leader",
    "LeaderHello",
    "LeaderState",
    "SampleBatch",
    "StreamHealth",
    "StreamInfo",
]


class Clock(Protocol):
    """What adapters need of the session clock (see ``runner.clock``)."""

    def now_ns(self) -> int:
        """Nanoseconds since session start on the session clock."""
        ...


@dataclass(frozen=True)
class StreamInfo:
    """A stream announced by a follower source (or the leader).

    Parameters
    ----------
    name : str
        Unique stream name within a session; a safe identifier
        (letters, digits, underscore), e.g. ``"right_wrist_imu"``.
    kind : str
        ``"imu"``, ``"head_pose"``, ``"joints"`` or another documented kind.
    channels : tuple of str
        Channel names, e.g. ``("acc_x", ..., "gyro_z")``.
    units : tuple of str
        One unit per channel, e.g. ``("m/s^2", ..., "rad/s")``.
    rate_hz : float
        Nominal sample rate, Hz.
    source : str
        Where it comes from (adapter and device), for the record.
    """

    name: str
    kind: str
    channels: tuple[str, ...]
    units: tuple[str, ...]
    rate_hz: float
    source: str = ""

    def __post_init__(self) -> None:
        if len(self.channels) != len(self.units):
            raise ValueError(
                f"stream {self.name!r}: {len(self.channels)} channels but {len(self.units)} units"
            )


@dataclass(frozen=True)
class ClockMap:
    """Affine map from a device's clock to the session clock.

    .. math::

        t_s = t_d + \\theta + \\delta\\,(t_d - t_\\mathrm{ref})

    for device time :math:`t_d` and session time :math:`t_s`, with offset
    :math:`\\theta` (ns) at the reference device time :math:`t_\\mathrm{ref}`
    and drift :math:`\\delta` (dimensionless; ppm × 1e-6).
    Offsets come from the four-timestamp exchange of NTP (RFC 5905, section 8)
    or, for a device that cannot answer, from the lower envelope of
    (receive time − device time).

    Parameters
    ----------
    offset_ns : int
        :math:`\\theta`, ns.
    drift_ppm : float
        :math:`\\delta \\times 10^6`.
    ref_dev_ns : int
        :math:`t_\\mathrm{ref}`, ns of device time.
    uncertainty_ns : int
        Half-width of the offset's uncertainty (half the lowest round-trip
        delay for NTP-style estimates), ns.
    method : str
        ``"identity"``, ``"ntp"`` or ``"envelope"``.
    """

    offset_ns: int = 0
    drift_ppm: float = 0.0
    ref_dev_ns: int = 0
    uncertainty_ns: int = 0
    method: str = "identity"

    def to_session(self, t_dev_ns: np.ndarray | int) -> np.ndarray:
        """Map device times (ns) to session times (ns, int64)."""
        t = np.asarray(t_dev_ns, dtype=np.int64)
        corr = np.rint((t - self.ref_dev_ns).astype(np.float64) * (self.drift_ppm * 1e-6))
        return t + np.int64(self.offset_ns) + corr.astype(np.int64)

    def as_dict(self) -> dict:
        """JSON-ready form stored in the session file's ``streams.clock_map``."""
        return {
            "offset_ns": int(self.offset_ns),
            "drift_ppm": float(self.drift_ppm),
            "ref_dev_ns": int(self.ref_dev_ns),
            "uncertainty_ns": int(self.uncertainty_ns),
            "method": self.method,
        }


@dataclass(frozen=True)
class SampleBatch:
    """Consecutive samples of one stream, as delivered by a source.

    Parameters
    ----------
    stream : str
        Stream name (as announced in :class:`StreamInfo`).
    t_ns : ndarray, shape (n,), int64
        Session-clock times (ns), already mapped from device time.
    t_dev_ns : ndarray, shape (n,), int64
        Raw device times (ns).
    seq : ndarray, shape (n,), int64
        The device's sequence numbers (gaps reveal lost samples).
    data : ndarray, shape (n, n_channels), float64
        Sample values in the announced units.
    """

    stream: str
    t_ns: np.ndarray
    t_dev_ns: np.ndarray
    seq: np.ndarray
    data: np.ndarray

    def __len__(self) -> int:
        return int(self.seq.shape[0])


@dataclass
class StreamHealth:
    """Running health figures of one stream, shown in the live view."""

    samples: int = 0
    dropped: int = 0          # missing sequence numbers
    malformed: int = 0        # messages that could not be decoded
    gaps: int = 0             # silences longer than the stream's gap limit
    last_t_ns: int | None = None
    latency_ns: float = float("nan")   # receive minus mapped device time, recent median
    offset_ns: float = float("nan")
    offset_uncertainty_ns: float = float("nan")
    rate_hz: float = float("nan")      # effective, recent
    extra: dict = field(default_factory=dict)


@dataclass(frozen=True)
class LeaderHello:
    """What a leader says when it connects.

    Parameters
    ----------
    robot : str
        Robot name as the bridge knows it.
    joint_names : tuple of str
        Joint order of commands and states; the runner checks it against the
        robot description and refuses to start on any mismatch.
    q : ndarray, shape (n_joints,), rad
        The pose the robot reports now (the start of the slow ramp).
    """

    robot: str
    joint_names: tuple[str, ...]
    q: np.ndarray


@dataclass(frozen=True)
class Command:
    """One joint command.

    Parameters
    ----------
    seq : int
        Increasing command sequence number.
    t_ns : int
        Session-clock time the pose is meant for, ns.
    q : ndarray, shape (n_joints,), rad
        Joint targets.
    """

    seq: int
    t_ns: int
    q: np.ndarray


@dataclass(frozen=True)
class LeaderState:
    """Measured joint state reported by a leader.

    Parameters
    ----------
    t_ns : int
        Session-clock time of the measurement, ns.
    t_dev_ns : int
        Bridge's own time of the measurement, ns.
    seq : int
        State sequence number.
    q : ndarray, shape (n_joints,), rad
        Measured joint positions.
    acked_seq : int
        Highest command sequence number acknowledged so far (-1: none).
    """

    t_ns: int
    t_dev_ns: int
    seq: int
    q: np.ndarray
    acked_seq: int = -1


class Leader(abc.ABC):
    """The robot side of a session."""

    #: True when the adapter talks over a socket (forces the real clock).
    uses_network: bool = False

    @abc.abstractmethod
    def connect(self, clock: Clock) -> LeaderHello:
        """Open the link and return the robot's hello."""

    @abc.abstractmethod
    def send(self, command: Command) -> None:
        """Send one joint command (never blocks for long)."""

    @abc.abstractmethod
    def read_state(self) -> list[LeaderState]:
        """Measured states received since the previous call (may be empty)."""

    @abc.abstractmethod
    def hold(self) -> None:
        """Hold the current position (pause)."""

    @abc.abstractmethod
    def stop(self) -> None:
        """Controlled stop: stop moving, hold position, stay safe."""

    @abc.abstractmethod
    def close(self) -> None:
        """Release the link; idempotent."""

    def alive(self) -> bool:
        """False once the leader has stopped answering (heartbeat lost)."""
        return True

    def lost_reason(self) -> str:
        """Why :meth:`alive` is False, for the session's fault event (``""``: unknown)."""
        return ""


class FollowerSource(abc.ABC):
    """A source of follower samples (sensors, head pose, a file)."""

    uses_network: bool = False

    @abc.abstractmethod
    def connect(self, clock: Clock) -> list[StreamInfo]:
        """Open the source and announce its streams."""

    @abc.abstractmethod
    def poll(self) -> list[SampleBatch]:
        """New samples since the previous call; never blocks."""

    def clock_maps(self) -> dict[str, ClockMap]:
        """Current device-to-session clock map per stream."""
        return {}

    def health(self) -> dict[str, StreamHealth]:
        """Current health per stream."""
        return {}

    def events(self) -> list[tuple[int, str, str, dict]]:
        """Events since the previous call: (t_ns, kind, stream, detail)."""
        return []

    @abc.abstractmethod
    def close(self) -> None:
        """Release the source; idempotent."""
