"""Study-scale benchmark: the demo end to end, and scoring many sessions.

1. The demo study (12 virtual participants by default): wall time of each
   stage (simulate, score, report) and in total. Goal: under 60 s on 2 cores.
2. Scoring a study of N session files (200 by default; copies of the demo's
   sessions, so every file is a real recording) with one study-level
   embedding: serially in this process vs on the local process pool.
   Printed: wall time, speed-up, and memory: the peak of this process's
   Python allocations (tracemalloc) and, for the pool, the largest worker's
   peak resident set. The coordinating process holds only score records,
   never the sessions' samples.

Run: ``python benchmarks/bench_study.py [--participants 12] [--sessions 200]``.
"""

from __future__ import annotations

import argparse
import resource
import shutil
import tempfile
import time
import tracemalloc
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

from echoreo.runner.demo import run_demo
from echoreo.scoring.parallel import default_workers
from echoreo.scoring.session_scores import score_study


def _score(paths: list[Path], workers: int) -> tuple[float, int, int]:
    tracemalloc.start()
    t0 = time.perf_counter()
    if workers > 1:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            study = score_study(paths, map_fn=lambda fn, items: pool.map(fn, items, chunksize=4))
    else:
        study = score_study(paths)
    wall = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return wall, peak, len(study.records)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--participants", type=int, default=12)
    ap.add_argument("--sessions", type=int, default=200)
    args = ap.parse_args()
    workers = default_workers()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        t0 = time.perf_counter()
        demo = run_demo(tmp / "demo", participants=args.participants, seed=2026)
        total = time.perf_counter() - t0
        t = demo.timings
        print(f"demo study, {args.participants} participants, {workers} cores")
        print(f"  simulate {t['simulate']:6.1f} s   score {t['score']:6.1f} s   "
              f"report {t['report']:6.1f} s   total {total:6.1f} s   (goal < 60 s: "
              f"{'met' if total < 60 else 'NOT met'})")
        study = tmp / "study"
        study.mkdir()
        sources = demo.sessions
        paths = []
        for i in range(args.sessions):
            dst = study / f"S{i:04d}.sqlite"
            shutil.copy(sources[i % len(sources)], dst)
            paths.append(dst)
        print(f"\nscoring {len(paths)} session files (copies of the demo's recordings)")
        serial, serial_peak, n_rec = _score(paths, 1)
        pooled, pooled_peak, n_rec2 = _score(paths, workers)
        assert n_rec == n_rec2
        child_rss = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
        print(f"  {'':24s}{'wall (s)':>10s}{'sessions/s':>12s}{'py peak (MB)':>14s}")
        print(f"  {'serial':24s}{serial:10.1f}{len(paths) / serial:12.2f}"
              f"{serial_peak / 1e6:14.1f}")
        print(f"  {f'process pool x{workers}':24s}{pooled:10.1f}{len(paths) / pooled:12.2f}"
              f"{pooled_peak / 1e6:14.1f}")
        print(f"  speed-up {serial / pooled:.2f}x on {workers} cores; {n_rec} records; largest "
              f"worker peak RSS {child_rss:.0f} MB")


if __name__ == "__main__":
    main()
