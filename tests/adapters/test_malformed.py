"""Readers survive hostile input: 10,000 malformed messages from a peer process."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from zmq_peers import MonotonicClock, Peer, drain

from echoreo.adapters import ZmqFollowers
from echoreo.adapters.protocol import decode
from echoreo.errors import ProtocolError

HERE = Path(__file__).parent


def test_ten_thousand_malformed_frames_counted_none_crash(tmp_path):
    """A peer sends 10,000 messages that break PROTOCOL.md (random bytes, wrong part
    counts, wrong versions, oversize meta and array frames, sizes that do not match,
    bad JSON, wrong field types, unknown types and streams, wrong channel counts,
    non-finite joints), then 20 valid samples. The reader counts exactly 10,000
    malformed messages (the count the peer reports), reports them as ``malformed``
    events whose counts sum to 10,000, and still delivers the 20 valid samples."""
    ready = tmp_path / "fuzz.ready.json"
    out = tmp_path / "fuzz.out"
    with open(out, "w") as fh:
        proc = subprocess.Popen([sys.executable, str(HERE / "fuzz_peer.py"), str(ready),
                                 "--count", "10000", "--valid", "20", "--seed", "7"],
                                stdout=fh, stderr=subprocess.STDOUT)
    peer = Peer(proc, ready, out).wait_ready()
    followers = ZmqFollowers([peer.endpoint], gap_s=30.0, timeout_s=30.0)
    try:
        infos = followers.connect(MonotonicClock())
        assert [i.name for i in infos] == ["chest_imu"]
        batches = drain(followers, lambda got: sum(len(b) for b in got) >= 20, timeout_s=30.0)
        assert followers.malformed_total == 10_000
        assert proc.poll() is None  # the peer, too, is still there
        report = json.loads(out.read_text().splitlines()[-1])
        assert report["sent_bad"] == 10_000 and min(report["by_category"].values()) > 0
        events = followers.events()
        mal = [e for e in events if e[1] == "malformed"]
        assert sum(e[3]["count"] for e in mal) == 10_000
        values = np.concatenate([b.data[:, 0] for b in batches])
        assert values.tolist() == [float(k) for k in range(20)]
        assert followers.health()["chest_imu"].malformed == 10_000
    finally:
        followers.close()
        peer.terminate()


@settings(max_examples=300, deadline=None)
@given(st.lists(st.binary(max_size=64), min_size=0, max_size=6))
def test_decode_random_frames_only_protocol_error(frames):
    """Random frames never raise anything but ProtocolError (STYLE.md: random bytes
    never crash a socket reader)."""
    with pytest.raises(ProtocolError):
        decode(frames)

