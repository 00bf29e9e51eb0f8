"""``echoreo bridge``: the reference robot bridge (simulated robot over ZeroMQ).

Thin wrapper around :class:`echoreo.adapters.bridge_peer.RobotBridge`; see
adapters/PROTOCOL.md for the protocol and the watchdog requirement.
"""

from __future__ import annotations

import argparse
import contextlib

from rich.console import Console

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``echoreo bridge``."""
    parser.add_argument("--endpoint", default="tcp://127.0.0.1:47100",
                        help="where to listen (port 0: any free port; default %(default)s)")
    parser.add_argument("--robot", default="torso-e1", help="robot name or YAML path")
    parser.add_argument("--keys", default=None, metavar="FOLDER",
                        help="CURVE key folder (required for a non-loopback endpoint)")
    parser.add_argument("--rate", type=float, default=100.0, help="control rate, Hz")
    parser.add_argument("--state-rate", type=float, default=50.0, help="state report rate, Hz")
    parser.add_argument("--watchdog", type=float, default=0.25,
                        help="hold when no command arrives for this long, s")
    parser.add_argument("--tau", type=float, default=0.05, help="simulated lag constant, s")
    parser.add_argument("--noise", type=float, default=0.0, help="measurement noise, rad")
    parser.add_argument("--seed", type=int, default=0, help="seed of the noise generator")
    parser.add_argument("--late", type=float, default=0.01,
                        help="a command applied more than this after its time counts as late, s")
    parser.add_argument("--max-lead", type=float, default=2.0,
                        help="furthest ahead a command may be meant for, s")
    parser.add_argument("--queue-limit", type=int, default=1000,
                        help="most commands waiting for their time")
    parser.add_argument("--log", default=None,
                        help="write 'seq t_ns due_dev_ns applied_dev_ns late' per applied command")
    parser.add_argument("--duration", type=float, default=None, help="stop after this many s")
    parser.add_argument("--ready-file", default=None,
                        help="write {endpoint, pid} as JSON here once listening")


def run(args: argparse.Namespace, console: Console) -> int:
    """Run the bridge until Ctrl-C, SIGTERM or ``--duration``."""
    import numpy as np

    from echoreo.adapters.bridge_peer import RobotBridge, SimulatedRobotBackend
    from echoreo.adapters.security import CurveKeys
    from echoreo.sim import load_robot

    robot = load_robot(args.robot)
    keys = CurveKeys(args.keys) if args.keys else None
    backend = SimulatedRobotBackend(robot, tau_s=args.tau, noise_std=args.noise,
                                    rng=np.random.default_rng(args.seed))
    with contextlib.ExitStack() as stack:
        log = stack.enter_context(open(args.log, "w")) if args.log else None
        bridge = RobotBridge(backend, robot.name, robot.joint_names, robot.lower, robot.upper,
                             args.endpoint, keys=keys, rate_hz=args.rate,
                             state_rate_hz=args.state_rate, watchdog_s=args.watchdog,
                             late_s=args.late, max_lead_s=args.max_lead,
                             queue_limit=args.queue_limit, log=log)
        counts = bridge.serve(duration_s=args.duration, ready_file=args.ready_file,
                              on_ready=lambda ep: console.print(
                                  f"bridge for {robot.name} listening on {ep} (Ctrl-C stops)"))
    console.print("bridge stopped: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
    return 0
