"""kill -9 of a recording process mid-session (a real subprocess, SIGKILL).

Hypothesis (issue 3, "Recorder"): a session file whose recording process is
killed without warning opens, passes ``PRAGMA integrity_check``, is marked
``interrupted`` on open, and holds every sample handed to the recorder up to
at most 100 ms before the kill. The child prints each sample's sequence number
and the host monotonic time right after handing it over (flushed), so the
test knows the truth; CLOCK_MONOTONIC is shared by all processes of the host.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time

import numpy as np

from echoreo.sessionfile import SessionFile

CHILD = r"""
import sys, time
from echoreo.runner.clock import Scheduler, SessionClock
from echoreo.runner.recorder import Recorder

clock = SessionClock()
rec = Recorder(sys.argv[1], {"study": "kill9", "participant": "P03", "clock": "real",
                             "utc_start": clock.utc_start})
rec.add_stream({"name": "synthetic", "kind": "test", "channels": ["a", "b"],
                "units": ["1", "1"], "rate_hz": 200.0, "source": "kill9 child"})
print("ready", flush=True)
for tick in Scheduler(clock, 200.0).ticks():
    k = tick.k
    rec.write("synthetic", [tick.t_ns], [tick.t_ns + 1000], [k], [[0.5 * k, -1.0 * k]])
    if k % 50 == 0:
        rec.event(tick.t_ns, "cue", None, f"cue {k}")
    print(k, time.monotonic_ns(), flush=True)
"""


def test_kill9_mid_session_keeps_committed_samples(tmp_path):
    rng = np.random.default_rng(20261202)
    run_s = 0.6 + 0.4 * rng.random()  # kill at a seeded, not round, moment
    path = tmp_path / "P03.sqlite"
    proc = subprocess.Popen([sys.executable, "-c", CHILD, str(path)], stdout=subprocess.PIPE,
                            text=True, bufsize=1)
    handed: dict[int, int] = {}
    try:
        assert proc.stdout.readline().strip() == "ready"
        first = None
        while True:
            line = proc.stdout.readline()
            assert line, "the child ended before it was killed"
            k, t = map(int, line.split())
            handed[k] = t
            first = t if first is None else first
            if t - first > run_s * 1e9:
                break
        kill_ns = time.monotonic_ns()
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
        for line in proc.stdout:  # what the child printed before it died
            k, t = map(int, line.split())
            handed[k] = t
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        proc.stdout.close()
    assert proc.returncode == -signal.SIGKILL

    conn = sqlite3.connect(path)
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    conn.close()
    with SessionFile(path) as sf:
        assert sf.state == "interrupted" and sf.marked_interrupted
        df = sf.read_stream("synthetic")
        events = sf.events("cue")
    assert not path.with_name(path.name + "-wal").exists()  # log folded into the file
    with SessionFile(path) as again:  # the mark was written to the file
        assert again.state == "interrupted" and not again.marked_interrupted

    recorded = set(df["seq"].tolist())
    due = {k for k, t in handed.items() if t <= kill_ns - 100_000_000}
    assert len(due) > 50
    missing = sorted(due - recorded)
    assert missing == [], f"{len(missing)} samples handed >= 100 ms before the kill are lost"
    assert recorded <= set(handed)  # nothing recorded that was not handed over
    assert df["seq"].is_unique and df["seq"].is_monotonic_increasing
    np.testing.assert_array_equal(df["a"], 0.5 * df["seq"])
    np.testing.assert_array_equal(df["t_dev_ns"], df["t_ns"] + 1000)
    assert len(events) >= 1
