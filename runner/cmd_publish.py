"""``echoreo publish``: the reference sensor publisher (virtual participant over ZeroMQ).

Thin wrapper around :class:`echoreo.adapters.publisher_peer.SensorPublisher`.
"""

from __future__ import annotations

import argparse
import contextlib
import time

from rich.console import Console

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``echoreo publish``."""
    parser.add_argument("--endpoint", default="tcp://127.0.0.1:47110",
                        help="where to listen (port 0: any free port; default %(default)s)")
    parser.add_argument("--source", choices=("participant", "synthetic"), default="participant",
                        help="a virtual participant copying a simple arm raise, or sinusoids")
    parser.add_argument("--robot", default="torso-e1", help="leader robot of the participant")
    parser.add_argument("--streams", default="right_wrist_imu,left_wrist_imu",
                        help="synthetic source: comma-separated stream names")
    parser.add_argument("--rate", type=float, default=100.0, help="synthetic source: rate, Hz")
    parser.add_argument("--start-seq", type=int, default=0, help="first sequence number")
    parser.add_argument("--clock-offset", type=float, default=0.0,
                        help="device clock offset, s (device time at --clock-origin-ns)")
    parser.add_argument("--clock-drift-ppm", type=float, default=0.0, help="device clock drift")
    parser.add_argument("--time-scale", type=float, default=1.0,
                        help="device seconds per real second (>1 compresses a long run)")
    parser.add_argument("--time-leap", type=float, nargs=2, default=(0.0, 0.0),
                        metavar=("LEAP_S", "EVERY_S"),
                        help="device time leaps LEAP_S every EVERY_S real s (time-lapse tests)")
    parser.add_argument("--clock-origin-ns", type=int, default=None,
                        help="time.monotonic_ns() of device-clock origin (default: now)")
    parser.add_argument("--no-time-sync", action="store_true",
                        help="do not answer time requests (a device that cannot)")
    parser.add_argument("--batch", type=int, default=16, help="most samples per message")
    parser.add_argument("--keys", default=None, metavar="FOLDER",
                        help="CURVE key folder (required for a non-loopback endpoint)")
    parser.add_argument("--log", default=None, help="write 'stream seq t_dev_ns' per sent sample")
    parser.add_argument("--seed", type=int, default=0, help="seed of the participant simulation")
    parser.add_argument("--duration", type=float, default=None, help="stop after this many s")
    parser.add_argument("--ready-file", default=None,
                        help="write {endpoint, pid, boot} as JSON here once listening")


def run(args: argparse.Namespace, console: Console) -> int:
    """Publish until Ctrl-C, SIGTERM or ``--duration``."""
    import numpy as np

    from echoreo.adapters._peer_common import DeviceClock
    from echoreo.adapters.publisher_peer import (
        SensorPublisher,
        participant_streams,
        synthetic_streams,
    )
    from echoreo.adapters.security import CurveKeys

    rng = np.random.default_rng(args.seed)
    if args.source == "participant":
        streams = participant_streams(args.robot, rng, start_seq=args.start_seq)
    else:
        names = [n.strip() for n in args.streams.split(",") if n.strip()]
        streams = synthetic_streams(names, args.rate, start_seq=args.start_seq)
    origin = time.monotonic_ns() if args.clock_origin_ns is None else args.clock_origin_ns
    clock = DeviceClock(offset_s=args.clock_offset, drift_ppm=args.clock_drift_ppm,
                        scale=args.time_scale, origin_ns=origin,
                        leap_s=args.time_leap[0], leap_every_s=args.time_leap[1])
    keys = CurveKeys(args.keys) if args.keys else None
    with contextlib.ExitStack() as stack:
        log = stack.enter_context(open(args.log, "w")) if args.log else None
        pub = SensorPublisher(streams, args.endpoint, clock=clock, keys=keys,
                              time_sync=not args.no_time_sync, batch=args.batch, log=log)
        counts = pub.serve(duration_s=args.duration, ready_file=args.ready_file,
                           on_ready=lambda ep: console.print(
                               f"publishing {', '.join(s.name for s in streams)} on {ep} "
                               "(Ctrl-C stops)"))
    console.print("publisher stopped: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
    return 0
