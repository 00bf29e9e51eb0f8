"""Command loop at 100 Hz on the real clock: tick lateness p50 / p99 / max.

Runs echoreo's :class:`~echoreo.runner.clock.Scheduler` (absolute deadlines,
hybrid sleep-then-spin wait) for ``--seconds`` (60 by default) and, for the
same time, a naive loop that calls ``time.sleep(period)`` after each tick's
work, and prints both side by side. Each tick does the work a command loop
does: look up the timeline's pose for the tick and build a command. With
``--recorder`` a recorder ingests 16 streams × 200 Hz in a second thread
during the scheduler's run (the session's real load on the GIL). Options for
the process: ``--realtime`` (SCHED_FIFO), ``--switch-interval 0.0002`` (GIL
hand-over), ``--gc-freeze`` (full garbage collections skip the objects made
at start-up, which otherwise stall every thread for tens of ms). Goal: p99
lateness under 1 ms.

    python benchmarks/bench_command_loop.py [--seconds 60] [--rate 100] [--recorder]
        [--realtime] [--switch-interval S] [--gc-freeze] [--skip-naive]
"""

from __future__ import annotations

import argparse
import gc
import os
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

from echoreo.adapters.base import Command
from echoreo.runner.clock import Scheduler, SessionClock, request_realtime_priority


def work(q: np.ndarray, k: int, t_ns: int) -> Command:
    """The per-tick work: the pose for this tick, as a command."""
    return Command(seq=k, t_ns=t_ns, q=q[k % q.shape[0]].copy())


def scheduled(seconds: float, rate: float, q: np.ndarray) -> tuple[np.ndarray, int, float]:
    clock = SessionClock()
    sched = Scheduler(clock, rate, start_ns=clock.now_ns() + 10_000_000)
    n = int(seconds * rate)
    for tick in sched.ticks(n):
        work(q, tick.k, tick.deadline_ns)
    # the grid is absolute: the last tick is off its ideal time by its own lateness only
    return sched.lateness_ns, sched.skipped, sched.lateness_ns[-1] * 1e-9


def naive(seconds: float, rate: float, q: np.ndarray) -> tuple[np.ndarray, float]:
    """time.sleep(period) after the work: lateness against the ideal grid."""
    period_ns = 1e9 / rate
    n = int(seconds * rate)
    start = time.monotonic_ns()
    late = np.empty(n, dtype=np.int64)
    for k in range(n):
        now = time.monotonic_ns()
        late[k] = now - (start + round(k * period_ns))
        work(q, k, now)
        time.sleep(1.0 / rate)
    return late, late[-1] * 1e-9


def recorder_load(stop: threading.Event, folder: Path, realtime: bool) -> int:
    from echoreo.runner.recorder import Recorder
    rec = Recorder(folder / "load.sqlite", {"study": "bench", "participant": "B01"})
    if realtime:  # below the command loop, above ordinary processes
        request_realtime_priority(5, rec.writer_native_id)
        request_realtime_priority(5)
    chans = ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y", "gyro_z")
    for s in range(16):
        rec.add_stream({"name": f"s{s:02d}", "kind": "imu", "channels": chans,
                        "units": ["1"] * 6, "rate_hz": 200.0})
    rng = np.random.default_rng(5)
    block = rng.normal(size=(20, 6))
    k = 0
    t0 = time.monotonic()
    while not stop.is_set():  # 20 samples per stream every 100 ms = 200 Hz
        t = (np.arange(20) + 20 * k) * 5_000_000
        for s in range(16):
            rec.write(f"s{s:02d}", t, t, np.arange(20) + 20 * k, block)
        k += 1
        time.sleep(max(0.0, t0 + 0.1 * k - time.monotonic()))
    rec.close()
    return k * 20 * 16


def fmt(late: np.ndarray) -> tuple[str, str, str]:
    p50, p99 = np.percentile(late, [50, 99]) * 1e-3
    return f"{p50:9.1f}", f"{p99:9.1f}", f"{late.max() * 1e-3:9.1f}"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--rate", type=float, default=100.0)
    ap.add_argument("--recorder", action="store_true",
                    help="run a recorder at 16 x 200 Hz in a thread during the scheduled loop")
    ap.add_argument("--skip-naive", action="store_true")
    ap.add_argument("--gc-freeze", action="store_true",
                    help="gc.freeze() after set-up: full collections skip the start-up heap")
    ap.add_argument("--switch-interval", type=float, default=None, metavar="S",
                    help="sys.setswitchinterval for the run (CPython default 0.005 s)")
    ap.add_argument("--realtime", action="store_true",
                    help="run the scheduled loop under SCHED_FIFO priority 10 and the "
                         "recorder's threads at 5 (needs root or CAP_SYS_NICE)")
    args = ap.parse_args()
    rng = np.random.default_rng(1)
    q = rng.uniform(-1, 1, size=(1000, 12))
    print(f"command loop, {args.rate:g} Hz for {args.seconds:g} s, {os.cpu_count()} CPUs, "
          f"load average {os.getloadavg()[0]:.1f}"
          + (", recorder 16 x 200 Hz in a thread" if args.recorder else ""))
    if args.switch_interval is not None:
        sys.setswitchinterval(args.switch_interval)
    if args.gc_freeze:
        import echoreo.runner.recorder  # noqa: F401  (import before freezing)
        gc.collect()
        gc.freeze()
    print(f"GIL switch interval {sys.getswitchinterval() * 1e3:g} ms"
          + (f", gc.freeze(): {gc.get_freeze_count()} objects frozen" if args.gc_freeze else ""))
    stop = threading.Event()
    loader = None
    with tempfile.TemporaryDirectory() as tmp:
        if args.recorder:
            loader = threading.Thread(target=recorder_load,
                                      args=(stop, Path(tmp), args.realtime))
            loader.start()
        rt = request_realtime_priority() if args.realtime else False
        if args.realtime:
            print("SCHED_FIFO priority 10: " + ("set" if rt else "refused (running as normal)"))
        late, skipped, drift_s = scheduled(args.seconds, args.rate, q)
        if rt:
            os.sched_setscheduler(0, os.SCHED_OTHER, os.sched_param(0))
        stop.set()
        if loader is not None:
            loader.join()
    rows = [("echoreo Scheduler", *fmt(late), f"{drift_s * 1e3:9.3f}", str(skipped))]
    if not args.skip_naive:
        nlate, ndrift = naive(args.seconds, args.rate, q)
        rows.append(("naive sleep(period)", *fmt(nlate), f"{ndrift * 1e3:9.3f}", "-"))
    print(f"{'loop':<22}{'p50 µs':>10}{'p99 µs':>10}{'max µs':>10}{'last tick ms':>14}"
          f"{'skipped':>9}")
    for name, p50, p99, mx, drift, sk in rows:
        print(f"{name:<22}{p50:>10}{p99:>10}{mx:>10}{drift:>14}{sk:>9}")
    p99_ms = np.percentile(late, 99) * 1e-6
    print(f"goal p99 < 1 ms: {'met' if p99_ms < 1.0 else 'NOT met'} ({p99_ms:.3f} ms)")
    if not args.skip_naive:
        ratio = np.percentile(nlate, 99) / max(np.percentile(late, 99), 1.0)
        print(f"ratio naive/echoreo: p99 {ratio:.0f}x, "
              f"end-of-run drift {abs(ndrift) / max(abs(drift_s), 1e-9):.0f}x")


if __name__ == "__main__":
    main()
