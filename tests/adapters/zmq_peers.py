"""Helpers for the ZeroMQ tests: reference peers in their own processes on 127.0.0.1.

Every peer binds ``tcp://127.0.0.1:0`` (an ephemeral port chosen by the kernel)
and writes its endpoint to a ready file, so tests never race for ports. Every
wait is bounded; every process is stopped (SIGTERM, then SIGKILL) at teardown.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

PEER_START_S = 20.0  # bound on a peer's start-up (imports numpy, zmq, the simulator)
PEER_LIFETIME_S = 120.0  # every peer stops by itself after this long


class MonotonicClock:
    """Session clock for tests: the host's monotonic clock, zero at creation.

    With ``scale`` > 1 it runs faster than real time (compressed runs); the
    origin can be shared with a publisher's device clock model.
    """

    def __init__(self, origin_ns: int | None = None, scale: float = 1.0):
        self.origin_ns = time.monotonic_ns() if origin_ns is None else origin_ns
        self.scale = scale

    def now_ns(self) -> int:
        return round((time.monotonic_ns() - self.origin_ns) * self.scale)


class Peer:
    """A reference peer process (``echoreo bridge`` / ``echoreo publish``)."""

    def __init__(self, proc: subprocess.Popen, ready: Path, out: Path):
        self.proc = proc
        self.ready = ready
        self.out = out
        self.info: dict = {}

    @property
    def endpoint(self) -> str:
        return self.info["endpoint"]

    def wait_ready(self) -> Peer:
        deadline = time.monotonic() + PEER_START_S
        while not self.ready.exists():
            if self.proc.poll() is not None:
                raise AssertionError(f"peer exited with {self.proc.returncode}:\n"
                                     f"{self.out.read_text()}")
            if time.monotonic() > deadline:
                raise AssertionError(f"peer not ready in {PEER_START_S} s:\n{self.out.read_text()}")
            time.sleep(0.02)
        self.info = json.loads(self.ready.read_text())
        return self

    def terminate(self, timeout: float = 10.0) -> int:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        try:
            return self.proc.wait(timeout)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            return self.proc.wait(5)

    def kill9(self) -> None:
        self.proc.kill()
        self.proc.wait(5)


class Peers:
    """``with Peers(tmp_path) as spawn:`` -- ``spawn(command, *args, name=...)`` starts
    ``echoreo COMMAND ARGS`` in its own process and waits until it listens; every
    process still running is stopped when the block ends."""

    def __init__(self, tmp_path: Path):
        self.tmp_path = tmp_path
        self.peers: list[Peer] = []

    def __enter__(self):
        return self.spawn

    def __exit__(self, *exc) -> None:
        for p in self.peers:
            p.terminate()

    def spawn(self, command: str, *args: str, name: str | None = None) -> Peer:
        tag = name or f"{command}{len(self.peers)}"
        ready = self.tmp_path / f"{tag}.ready.json"
        ready.unlink(missing_ok=True)
        out = self.tmp_path / f"{tag}.out"
        env = dict(os.environ, COLUMNS="200")
        if "--duration" not in args:  # a safety net: a peer ends by itself even if we die
            args = (*args, "--duration", str(PEER_LIFETIME_S))
        with open(out, "w") as fh:
            proc = subprocess.Popen(
                [sys.executable, "-m", "echoreo.runner.cli", command, *args,
                 "--ready-file", str(ready)],
                stdout=fh, stderr=subprocess.STDOUT, env=env)
        peer = Peer(proc, ready, out)
        self.peers.append(peer)
        return peer.wait_ready()


def read_log(path: Path) -> dict[str, list[tuple[int, int]]]:
    """A publisher's ``--log``: stream -> [(seq, t_dev_ns), ...] in sending order."""
    out: dict[str, list[tuple[int, int]]] = {}
    for line in path.read_text().splitlines():
        name, seq, t = line.split()
        out.setdefault(name, []).append((int(seq), int(t)))
    return out


def poll_until(read, until, timeout_s: float, step_s: float = 0.01) -> list:
    """Call ``read()`` (a list each time) until ``until(all_so_far)`` or ``timeout_s``."""
    got: list = []
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        got.extend(read())
        if until(got):
            break
        time.sleep(step_s)
    return got


def drain(source, until, timeout_s: float, step_s: float = 0.01):
    """Poll ``source`` until ``until(batches_so_far)`` or ``timeout_s``; returns the batches."""
    return poll_until(source.poll, until, timeout_s, step_s)


def drain_states(leader, until, timeout_s: float = 3.0):
    """Read the leader's STATE messages until ``until(states_so_far)`` or ``timeout_s``."""
    return poll_until(leader.read_state, until, timeout_s)


def by_stream(batches) -> dict[str, list[tuple[int, int]]]:
    """Batches -> stream -> [(seq, t_dev_ns), ...] in arrival order."""
    out: dict[str, list[tuple[int, int]]] = {}
    for b in batches:
        out.setdefault(b.stream, []).extend(zip(b.seq.tolist(), b.t_dev_ns.tolist(),
                                                strict=True))
    return out
