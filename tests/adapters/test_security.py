"""Loopback by default; CURVE keys for anything else (adapters/security.py).

The refusal checks send nothing anywhere: the endpoint is refused before any socket
exists. The CURVE link itself is tested on 127.0.0.1."""

from __future__ import annotations

import shutil
import subprocess
import sys

import numpy as np
import pytest
import zmq.auth
from zmq_peers import MonotonicClock, Peers

from echoreo.adapters import (
    Command,
    CurveKeys,
    ZmqFollowers,
    ZmqLeader,
    check_endpoint,
    generate_keys,
)
from echoreo.adapters.security import is_loopback_endpoint
from echoreo.errors import InputError, LeaderLost


@pytest.mark.parametrize("endpoint, loopback", [
    ("tcp://127.0.0.1:47100", True),
    ("tcp://127.8.9.10:1", True),
    ("tcp://[::1]:47100", True),
    ("tcp://localhost:47100", True),
    ("ipc:///tmp/echoreo.sock", True),
    ("tcp://192.0.2.10:47100", False),    # TEST-NET-1 (RFC 5737), never routed
    ("tcp://0.0.0.0:47100", False),
    ("tcp://*:47100", False),
    ("tcp://eth0:47100", False),
    ("tcp://robot.example.org:47100", False),  # names other than localhost: not resolved
    ("tcp://[2001:db8::1]:47100", False),      # documentation prefix (RFC 3849)
], ids=lambda v: str(v))
def test_loopback_classification(endpoint, loopback):
    """Only 127.0.0.0/8, ::1, localhost and ipc:// count as loopback (RFC 1122 3.2.1.3,
    RFC 4291 2.5.3)."""
    assert is_loopback_endpoint(endpoint) is loopback


def test_non_loopback_without_keys_refused_with_clear_message():
    """Connecting or binding to a non-loopback address without keys raises InputError
    saying why and how to fix it, before any socket is created."""
    with pytest.raises(InputError) as err:
        check_endpoint("tcp://192.0.2.10:47100", None, "connect to")
    text = str(err.value)
    assert "refusing to connect to tcp://192.0.2.10:47100" in text
    assert "not a loopback address" in text and "echoreo keys" in text
    with pytest.raises(InputError, match="refusing to connect"):
        ZmqLeader("tcp://192.0.2.10:47100")
    with pytest.raises(InputError, match="refusing to connect"):
        ZmqFollowers(["tcp://127.0.0.1:47110", "tcp://192.0.2.11:47110"])


def test_cli_bridge_refuses_wildcard_bind_without_keys():
    """``echoreo bridge --endpoint tcp://0.0.0.0:0`` exits 2 with the refusal message."""
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "bridge",
                           "--endpoint", "tcp://0.0.0.0:0"], capture_output=True, text=True,
                          timeout=60)
    assert proc.returncode == 2
    assert "refusing to bind tcp://0.0.0.0:0" in " ".join(proc.stderr.split())


def test_curve_link_works_and_wrong_key_rejected(tmp_path):
    """With keys from ``echoreo keys`` the bridge serves a client holding an authorized
    key over CURVE (hello, commands acknowledged); a client whose key is not in
    ``authorized/`` is rejected with a message that says so, and a client without keys
    gets no answer."""
    keys = tmp_path / "keys"
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "keys", str(keys)],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert (keys / "server.key_secret").is_file() and (keys / "authorized/client.key").is_file()
    intruder = tmp_path / "intruder"
    intruder.mkdir()
    shutil.copy(keys / "server.key", intruder / "server.key")
    zmq.auth.create_certificates(intruder, "mallory")
    with Peers(tmp_path) as spawn:
        bridge = spawn("bridge", "--endpoint", "tcp://127.0.0.1:0", "--keys", str(keys))
        clock = MonotonicClock()
        good = ZmqLeader(bridge.endpoint, keys=keys)
        try:
            hello = good.connect(clock)
            for k in range(5):
                good.send(Command(seq=k, t_ns=clock.now_ns(), q=np.asarray(hello.q)))
            good.stop()
            assert good.link_health()["acked_seq"] == 4
        finally:
            good.close()
        bad = ZmqLeader(bridge.endpoint, keys=CurveKeys(intruder, client="mallory"),
                        connect_timeout_s=3.0)
        with pytest.raises(LeaderLost, match="rejected our CURVE key"):
            bad.connect(clock)
        plain = ZmqLeader(bridge.endpoint, connect_timeout_s=1.5)
        with pytest.raises(LeaderLost, match="not reached"):
            plain.connect(clock)


def test_generate_keys_refuses_to_overwrite(tmp_path):
    """Existing secret keys are never overwritten silently."""
    files = generate_keys(tmp_path / "k", ("client", "laptop"))
    assert {f.name for f in files} >= {"server.key", "laptop.key_secret"}
    with pytest.raises(InputError, match="exists already"):
        generate_keys(tmp_path / "k")
