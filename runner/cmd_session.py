"""``echoreo session PLAN``: run a timed session from a session plan.

With a terminal the live view shows the session and reads keys (``p`` pause,
``s`` controlled stop, ``a`` abort; Ctrl-C is a controlled stop); without one
(a script, a pipe) it prints plain log lines and reads no keys.

Exit status: 0 when the session ran to its end or was stopped in a
controlled way by the operator, 130 after Ctrl-C, 1 when it was aborted or
ended by a fault (lost leader, a silent stream that never came back), 2 for
a plan or argument the user can fix (nothing moved then).
"""

from __future__ import annotations

import argparse

from rich.console import Console
from rich.markup import escape

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``echoreo session``."""
    parser.add_argument("plan", metavar="PLAN", help="the session plan (YAML; see "
                        "choreographies/FORMAT.md, section 3)")
    parser.add_argument("--participant", metavar="CODE", default=None,
                        help="pseudonymous participant code (letters then digits, e.g. P07); "
                        "overrides the plan's")
    parser.add_argument("--out", metavar="FOLDER", default="sessions",
                        help="folder for the session file (default: ./sessions)")
    parser.add_argument("--clock", choices=("real", "virtual"), default=None,
                        help="session clock (default: virtual when every adapter is simulated, "
                        "else real; any socket forces real)")
    parser.add_argument("--live-grades", action=argparse.BooleanOptionalAction, default=None,
                        help="grade every repetition as it ends, in a worker process (default: "
                        "on for the real clock, off for the virtual clock)")


def run(args: argparse.Namespace, console: Console) -> int:
    """Load the plan, run the session, print where the file is; the exit status."""
    from echoreo.runner.plan import load_plan
    from echoreo.runner.session import run_session

    plan = load_plan(args.plan, participant=args.participant)
    clock = args.clock or "auto"
    live = args.live_grades
    if live is None:
        live = clock == "real" or (clock == "auto" and not plan.all_simulated)
    callback = None
    if live:
        from echoreo.runner.livegrades import score_repetition

        callback = score_repetition
    results: list = []
    run_session(plan, out_dir=args.out, clock=clock, participant=args.participant,
                console=console, result=results, on_repetition_end=callback,
                grade_worker="process")
    res = results[0]
    samples = ", ".join(f"{n} {c}" for n, c in res.samples.items()) or "none"
    console.print(f"{res.outcome}: {res.ticks} commands, {res.duration_s:.1f} s of session "
                  f"time; follower samples: {samples}", markup=False, highlight=False,
                  soft_wrap=True)
    console.print(f"session file: {escape(str(res.path))} ({res.state})", highlight=False,
                  soft_wrap=True)
    if res.interrupted_by_ctrl_c:
        return 130
    if res.outcome in ("complete", "stopped"):
        return 0
    return 1
