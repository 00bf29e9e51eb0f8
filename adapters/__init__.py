"""echoreo.adapters: leader and follower interfaces and their implementations.

Public names: ``_EXPORTS`` below, imported on first use (``echoreo._lazy``).
"""

from __future__ import annotations

from echoreo._lazy import lazy_exports

#: public name -> submodule of this package that defines it
_EXPORTS: dict[str, str] = {
    "ChannelMap": "_importtypes",
    "FileSource": "file_import",
    "ImportMapping": "_importmapping",
    "StreamMap": "_importtypes",
    "TimeSpec": "_importtypes",
    "Clock": "base",
    "ClockMap": "base",
    "Command": "base",
    "FollowerSource": "base",
    "Leader": "base",
    "LeaderHello": "base",
    "LeaderState": "base",
    "SampleBatch": "base",
    "StreamHealth": "base",
    "StreamInfo": "base",
    "CurveKeys": "security",
    "DeviceClock": "_peer_common",
    "EnvelopeClockSync": "clocksync",
    "NtpClockSync": "clocksync",
    "PROTOCOL_VERSION": "protocol",
    "RobotBridge": "bridge_peer",
    "SensorPublisher": "publisher_peer",
    "SimulatedRobotBackend": "bridge_peer",
    "ZmqFollowers": "zmq_followers",
    "ZmqLeader": "zmq_leader",
    "check_endpoint": "security",
    "generate_keys": "security",
    "ntp_offset_delay": "clocksync",
    "Dropout": "simulated",
    "SimulatedFollowers": "simulated",
    "SimulatedLeader": "simulated",
    "clock_map_for_device": "simulated",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
