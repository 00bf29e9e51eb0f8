"""Ingest over ZeroMQ: 16 sensor streams x 200 Hz for 60 s, samples lost and latency.

Reference publishers (``echoreo publish --source synthetic``) run in their own
processes on 127.0.0.1 and send every sample as soon as it is due (one sample
per message); one :class:`~echoreo.adapters.ZmqFollowers` in this process
receives them, polled every 10 ms as a session runner would. Each publisher
logs what it handed to ZeroMQ; after a graceful stop the log is compared with
what arrived.

* lost: logged as sent but never received (goal 0); also missing sequence
  numbers, duplicates and malformed messages as the reader counted them.
* latency: receive time (stamped by the reader's I/O thread on the session
  clock) minus the sample's device time mapped to the session clock, i.e.
  from the instant the sample was taken to its arrival in the host process,
  including the publisher's scheduling, two ZeroMQ I/O threads, loopback TCP
  and the clock-mapping error. Also given as a ratio to the 5 ms sample period.

Side by side: 4 publishers x 4 streams and 1 publisher x 16 streams (default);
``16x1`` (16 publisher processes) is possible but exceeds what 16 Python
publishers at 200 Hz can do on a 2-core machine.

    python benchmarks/bench_ingest.py [--seconds 60] [--layouts 4x4,1x16]
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from echoreo.adapters import ZmqFollowers

RATE_HZ = 200.0
N_STREAMS = 16


class Clock:
    """Session clock: the monotonic clock, zero at creation."""

    def __init__(self) -> None:
        self.t0 = time.monotonic_ns()

    def now_ns(self) -> int:
        return time.monotonic_ns() - self.t0


def start_publishers(folder: Path, n_pub: int, per_pub: int, lifetime_s: float) -> list[tuple]:
    procs = []
    for p in range(n_pub):
        names = ",".join(f"s{p * per_pub + k:02d}" for k in range(per_pub))
        ready, log = folder / f"p{p}.json", folder / f"p{p}.log"
        proc = subprocess.Popen(
            [sys.executable, "-m", "echoreo.runner.cli", "publish", "--endpoint",
             "tcp://127.0.0.1:0", "--source", "synthetic", "--streams", names, "--rate",
             str(RATE_HZ), "--batch", "1", "--log", str(log), "--ready-file", str(ready),
             "--duration", str(lifetime_s)],  # ends by itself even if this script dies
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        procs.append((proc, ready, log))
    deadline = time.monotonic() + 60
    for proc, ready, _ in procs:
        while not ready.exists():
            if proc.poll() is not None or time.monotonic() > deadline:
                raise SystemExit("a publisher did not start")
            time.sleep(0.05)
    return procs


def run(layout: str, seconds: float) -> dict:
    n_pub, per_pub = (int(x) for x in layout.split("x"))
    assert n_pub * per_pub == N_STREAMS, layout
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        procs = start_publishers(folder, n_pub, per_pub, seconds + 120.0)
        try:
            return _measure(procs, seconds, n_pub, per_pub)
        finally:
            for proc, _, _ in procs:
                if proc.poll() is None:
                    proc.kill()
                    proc.wait(10)


def _measure(procs: list[tuple], seconds: float, n_pub: int, per_pub: int) -> dict:
    endpoints = [json.loads(r.read_text())["endpoint"] for _, r, _ in procs]
    followers = ZmqFollowers(endpoints, connect_timeout_s=20.0)
    received: dict[str, list[np.ndarray]] = {}
    lat: list[np.ndarray] = []
    try:
        followers.connect(Clock())
        followers.keep_latencies()
        t_end = time.monotonic() + seconds
        while time.monotonic() < t_end:
            for b in followers.poll():
                received.setdefault(b.stream, []).append(b.seq)
            lat.extend(followers.take_latencies().values())
            time.sleep(0.01)
        health_run = followers.health()
        for proc, _, _ in procs:
            proc.send_signal(signal.SIGTERM)
        for proc, _, _ in procs:
            proc.wait(30)
        t_end = time.monotonic() + 1.0  # what was in flight at the stop
        while time.monotonic() < t_end:
            for b in followers.poll():
                received.setdefault(b.stream, []).append(b.seq)
            time.sleep(0.01)
        lat.extend(followers.take_latencies().values())
        malformed = followers.malformed_total
    finally:
        followers.close()
    sent: dict[str, list[int]] = {}
    for _, _, log in procs:
        for line in log.read_text().splitlines():
            name, seq, _ = line.split()
            sent.setdefault(name, []).append(int(seq))
    n_sent = sum(len(v) for v in sent.values())
    lost = dup = 0
    for name, seqs in sent.items():
        got = np.concatenate(received.get(name, [np.empty(0, np.int64)]))
        lost += len(set(seqs) - set(got.tolist()))
        dup += int(got.size - np.unique(got).size)
    lat_all = np.concatenate([x for x in lat if x.size]) / 1e6
    return {"layout": f"{n_pub} publishers x {per_pub} streams", "sent": n_sent, "lost": lost,
            "duplicates": dup, "dropped_seq": sum(h.dropped for h in health_run.values()),
            "gaps": sum(h.gaps for h in health_run.values()), "malformed": malformed,
            "rate_hz": n_sent / seconds, "p50": float(np.percentile(lat_all, 50)),
            "p99": float(np.percentile(lat_all, 99)), "max": float(lat_all.max()),
            "n_lat": lat_all.size}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--layouts", default="4x4,1x16")
    args = ap.parse_args()
    print(f"ingest over ZeroMQ on 127.0.0.1: {N_STREAMS} streams x {RATE_HZ:g} Hz, "
          f"{args.seconds:g} s per layout, {os.cpu_count()} CPUs")
    rows = [run(layout, args.seconds) for layout in args.layouts.split(",")]
    period_ms = 1e3 / RATE_HZ
    head = f"{'layout':<28}{'sent':>9}{'lost':>6}{'dup':>5}{'gaps':>6}{'malf':>6}" \
           f"{'samples/s':>11}{'p50 ms':>9}{'p99 ms':>9}{'max ms':>9}{'p99/period':>12}"
    print(head)
    for r in rows:
        print(f"{r['layout']:<28}{r['sent']:>9}{r['lost']:>6}{r['duplicates']:>5}{r['gaps']:>6}"
              f"{r['malformed']:>6}{r['rate_hz']:>11.0f}{r['p50']:>9.3f}{r['p99']:>9.3f}"
              f"{r['max']:>9.3f}{r['p99'] / period_ms:>12.2f}")
    if len(rows) == 2:
        a, b = rows
        print(f"ratio {b['layout']} / {a['layout']}: p50 {b['p50'] / a['p50']:.2f}, "
              f"p99 {b['p99'] / a['p99']:.2f}")
    print("goal: 0 lost;", "met" if all(r["lost"] == 0 for r in rows) else "NOT met")


if __name__ == "__main__":
    main()
