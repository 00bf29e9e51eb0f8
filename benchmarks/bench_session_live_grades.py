"""A real-clock session with and without live grades: is the command loop slowed?

Runs the same simulated plan twice on the real clock (simulated robot and
virtual participant, 50 Hz commands): once without live grades, once with
every repetition scored by :func:`echoreo.runner.livegrades.score_repetition`
in a worker process as it ends (issue 5, item 2). Prints, side by side, the
tick lateness p50 / p99 / max of the command loop, the late ticks, and how
many repetitions were graded live. The claim to check: lateness unchanged.

    python benchmarks/bench_session_live_grades.py [--choreographies warmup-right-arm]
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import textwrap
import time
from pathlib import Path

from echoreo.runner.livegrades import score_repetition
from echoreo.runner.session import run_session
from echoreo.sessionfile import SessionFile


def plan_text(choreographies: list[str]) -> str:
    items = "\n".join(f"  - {c}" for c in choreographies)
    return textwrap.dedent("""\
        study: live-grade-benchmark
        participant: B01
        consent_recorded: true
        robot: torso-e1
        mode: mirror
        command_rate_hz: 50
        countdown_s: 2
        rest_s: 2
        choreographies:
        {items}
        streams:
          - {{stream: right_wrist_imu, kind: imu, site: right_wrist}}
          - {{stream: left_wrist_imu, kind: imu, site: left_wrist}}
          - {{stream: head_pose, kind: head_pose, site: head}}
        leader: {{adapter: simulated, seed: 1}}
        followers:
          - {{adapter: simulated, seed: 2, profile: good}}
        """).format(items=items)


def run(plan: Path, out: Path, live: bool) -> dict:
    t0 = time.perf_counter()
    res: list = []
    path = run_session(plan, out_dir=out, clock="real", result=res,
                       on_repetition_end=score_repetition if live else None,
                       grade_worker="process", interactive=False)
    wall = time.perf_counter() - t0
    f = SessionFile(path)
    lat = f.meta["tick_lateness"]
    ev = f.events()
    return {"wall_s": wall, "p50_ms": lat["p50_ns"] / 1e6, "p99_ms": lat["p99_ns"] / 1e6,
            "max_ms": lat["max_ns"] / 1e6, "late": lat["late_ticks"], "ticks": lat["n"],
            "graded": int((ev["kind"] == "live_grade").sum()),
            "reps": int((ev["kind"] == "rep_end").sum())}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--choreographies", default="warmup-right-arm",
                    help="comma-separated shipped choreographies (default: warmup-right-arm)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        plan = Path(tmp) / "plan.yaml"
        plan.write_text(plan_text(args.choreographies.split(",")), encoding="utf-8")
        rows = {"without live grades": run(plan, Path(tmp) / "a", False),
                "with live grades": run(plan, Path(tmp) / "b", True)}
    print(f"python {sys.version.split()[0]}, {os.cpu_count()} cores, load average "
          + " ".join(f"{x:.2f}" for x in os.getloadavg()))
    print(f"{'':22s} {'ticks':>6s} {'p50 ms':>8s} {'p99 ms':>8s} {'max ms':>8s} {'late':>5s} "
          f"{'graded/reps':>12s} {'wall s':>7s}")
    for name, r in rows.items():
        print(f"{name:22s} {r['ticks']:6d} {r['p50_ms']:8.3f} {r['p99_ms']:8.3f} "
              f"{r['max_ms']:8.3f} {r['late']:5d} {r['graded']:5d}/{r['reps']:<6d} "
              f"{r['wall_s']:7.1f}")
    a, b = rows["without live grades"], rows["with live grades"]
    print(f"ratio with/without: p99 {b['p99_ms'] / max(a['p99_ms'], 1e-9):.2f}, "
          f"max {b['max_ms'] / max(a['max_ms'], 1e-9):.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
