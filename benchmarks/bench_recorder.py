"""Recorder throughput: sustained rows per second into SQLite, session durability.

16 streams of 6 channels are handed to :class:`~echoreo.runner.recorder.Recorder`
in blocks of 20 samples (what a 200 Hz sensor delivers every 100 ms) as fast
as the caller can, for ``--seconds`` (10 by default); the clock stops when
``close()`` has committed the last row. Run with the session settings
(``synchronous=NORMAL``, commits at most 50 ms apart, WAL checkpoints every
1 s in a second thread) and, side by side, with ``synchronous=FULL`` (an
fsync per commit) and with a naive per-row ``INSERT`` + commit every
96 rows in the caller's thread; then at the session's own load (3,200 rows/s)
it reports the process's CPU share and the longest open transaction.
Goal: at least 50 × the ingest load of 16 streams × 200 Hz = 3,200 rows/s,
i.e. 160,000 rows/s.

    python benchmarks/bench_recorder.py [--seconds 10] [--block 20]
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import tempfile
import time
from pathlib import Path

import numpy as np

from echoreo.runner.recorder import Recorder
from echoreo.sessionfile import SessionFile

LOAD_ROWS_S = 16 * 200
CHANNELS = ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y", "gyro_z")


def run_recorder(path: Path, seconds: float, block: int, synchronous: str,
                 rng: np.random.Generator) -> tuple[float, int, float]:
    rec = Recorder(path, {"study": "bench", "participant": "B01"}, synchronous=synchronous)
    for s in range(16):
        rec.add_stream({"name": f"s{s:02d}", "kind": "imu", "channels": CHANNELS,
                        "units": ["m/s^2"] * 3 + ["rad/s"] * 3, "rate_hz": 200.0})
    data = rng.normal(size=(block, 6))
    start = time.perf_counter()
    k = 0
    while time.perf_counter() - start < seconds:
        t = (np.arange(block) + block * k) * 5_000_000
        seq = np.arange(block) + block * k
        for s in range(16):
            rec.write(f"s{s:02d}", t, t, seq, data)
        k += 1
    rec.close()
    elapsed = time.perf_counter() - start
    rows = k * block * 16
    with SessionFile(path) as sf:  # check that every row landed
        stored = sum(len(sf.read_stream(f"s{s:02d}")) for s in range(16))
    assert stored == rows, (stored, rows)
    return rows / elapsed, rows, rec.stats.max_commit_gap_s


def run_paced(path: Path, seconds: float, synchronous: str,
              rng: np.random.Generator) -> tuple[float, float]:
    """The session's own load: 16 x 20 samples every 100 ms; CPU share and commit spacing."""
    rec = Recorder(path, {"study": "bench", "participant": "B01"}, synchronous=synchronous)
    for s in range(16):
        rec.add_stream({"name": f"s{s:02d}", "kind": "imu", "channels": CHANNELS,
                        "units": ["m/s^2"] * 3 + ["rad/s"] * 3, "rate_hz": 200.0})
    data = rng.normal(size=(20, 6))
    cpu0 = time.process_time()
    start = time.perf_counter()
    k = 0
    while k < seconds * 10:
        t = (np.arange(20) + 20 * k) * 5_000_000
        for s in range(16):
            rec.write(f"s{s:02d}", t, t, np.arange(20) + 20 * k, data)
        k += 1
        time.sleep(max(0.0, start + 0.1 * k - time.perf_counter()))
    rec.close()
    cpu = (time.process_time() - cpu0) / (time.perf_counter() - start)
    return cpu, rec.stats.max_commit_gap_s


def run_naive(path: Path, seconds: float, rng: np.random.Generator) -> float:
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("PRAGMA synchronous=FULL")
    cols = ", ".join(f"{c} REAL" for c in CHANNELS)
    for s in range(16):
        conn.execute(f"CREATE TABLE s{s:02d} (t_ns INTEGER, t_dev_ns INTEGER, seq INTEGER, {cols})")
    conn.commit()
    data = rng.normal(size=6).tolist()
    start = time.perf_counter()
    n = 0
    while time.perf_counter() - start < seconds:
        for s in range(16):
            conn.execute(f"INSERT INTO s{s:02d} VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                         (n, n, n, *data))
            n += 1
        if n % 96 == 0:
            conn.commit()
    conn.commit()
    elapsed = time.perf_counter() - start
    conn.close()
    return n / elapsed


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=10.0)
    ap.add_argument("--block", type=int, default=20, help="samples per hand-over")
    args = ap.parse_args()
    rng = np.random.default_rng(2)
    print(f"recorder: 16 streams x 6 channels, blocks of {args.block} samples, "
          f"{args.seconds:g} s per run, {os.cpu_count()} CPUs, load average "
          f"{os.getloadavg()[0]:.1f}, SQLite {sqlite3.sqlite_version}")
    with tempfile.TemporaryDirectory(dir=os.environ.get("BENCH_DIR")) as tmp:
        normal, rows, gap_n = run_recorder(Path(tmp) / "normal.sqlite", args.seconds,
                                           args.block, "NORMAL", rng)
        full, _, gap = run_recorder(Path(tmp) / "full.sqlite", args.seconds, args.block,
                                    "FULL", rng)
        naive = run_naive(Path(tmp) / "naive.sqlite", min(args.seconds, 5.0), rng)
        paced = {m: run_paced(Path(tmp) / f"paced_{m}.sqlite", min(args.seconds, 10.0), m, rng)
                 for m in ("NORMAL", "FULL")}
    # max batch→commit: longest open transaction; the caller hands over as fast as it can,
    # so the writer is saturated here (at the session's load it idles, see below)
    print(f"{'writer':<44}{'rows/s':>12}{'x load':>9}{'max batch→commit s':>20}")
    print(f"{'Recorder, synchronous=NORMAL (sessions)':<44}{normal:>12,.0f}"
          f"{normal / LOAD_ROWS_S:>9.0f}{gap_n:>20.3f}")
    print(f"{'Recorder, synchronous=FULL':<44}{full:>12,.0f}{full / LOAD_ROWS_S:>9.0f}"
          f"{gap:>20.3f}")
    print(f"{'naive per-row INSERT, commit every 96 rows':<44}{naive:>12,.0f}"
          f"{naive / LOAD_ROWS_S:>9.0f}{'-':>20}")
    print(f"rows committed (NORMAL run): {rows:,}; all read back")
    for m, (cpu, gap_p) in paced.items():
        print(f"at the session load (3,200 rows/s), synchronous={m}: process CPU "
              f"{100 * cpu:.1f} % of one core, longest batch→commit {gap_p * 1e3:.1f} ms")
    goal = 50 * LOAD_ROWS_S
    print(f"goal >= {goal:,} rows/s (50 x 3,200): {'met' if normal >= goal else 'NOT met'}; "
          f"Recorder NORMAL / naive = {normal / naive:.0f}x")


if __name__ == "__main__":
    main()
