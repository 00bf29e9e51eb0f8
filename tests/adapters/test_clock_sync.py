"""Clock offset and drift: the RFC 5905 formulas, the estimators, and a real run over
ZeroMQ with a publisher whose clock is offset by +3.7 s and drifts by 50 ppm."""

from __future__ import annotations

import time

import numpy as np
import pytest
from zmq_peers import Peers, drain

from echoreo.adapters import (
    DeviceClock,
    EnvelopeClockSync,
    NtpClockSync,
    ZmqFollowers,
    ntp_offset_delay,
)


def test_ntp_offset_and_delay_formulas():
    """RFC 5905, section 8: device ahead by 5 s, 10 ms out, 30 ms back, 2 ms in the device.
    Offset of the device (RFC sign) = ((T2-T1)+(T3-T4))/2 = 4.99 s; delay = (T4-T1)-(T3-T2)
    = 40 ms. ClockMap's offset is the opposite sign (session minus device)."""
    t1 = 1_000_000_000
    t2 = t1 + 5_000_000_000 + 10_000_000
    t3 = t2 + 2_000_000
    t4 = t1 + 10_000_000 + 2_000_000 + 30_000_000
    offset, delay = ntp_offset_delay(t1, t2, t3, t4)
    assert offset == -4_990_000_000
    assert delay == 40_000_000


def test_ntp_estimator_recovers_offset_and_drift():
    """Synthetic exchanges, device clock t_d = 3.7 s + (1 + 50e-6) t, symmetric random
    delays of 0.1-2 ms each way plus 10 % of exchanges queued by up to 20 ms (single
    offsets then err by up to 10 ms): the fitted map reproduces the true session time
    within 0.2 ms over 300 s and the drift within 1 ppm of the true -49.9975 ppm
    (session per device rate 1/(1+50e-6) - 1)."""
    rng = np.random.default_rng(3)
    est = NtpClockSync()
    drift = 50e-6

    def dev(t_ns):
        return round(3.7e9 + (1 + drift) * t_ns)

    for k in range(300):
        t1 = k * 1_000_000_000
        out = rng.uniform(0.1e6, 2e6) + (rng.uniform(0, 20e6) if rng.random() < 0.1 else 0)
        back = rng.uniform(0.1e6, 2e6)
        t2 = dev(t1 + out)
        t3 = t2 + 50_000
        t4 = round(t1 + out + 50_000 / (1 + drift) + back)
        est.add(t1, t2, t3, t4)
    cmap = est.clock_map()
    t_true = np.arange(0, 300e9, 1e9)
    t_dev = np.rint(3.7e9 + (1 + drift) * t_true).astype(np.int64)
    err = cmap.to_session(t_dev) - t_true
    assert np.max(np.abs(err)) < 200_000
    assert cmap.drift_ppm == pytest.approx((1 / (1 + drift) - 1) * 1e6, abs=1.0)
    assert cmap.method == "ntp"


def test_envelope_estimator_lower_bound():
    """One-way timestamps with latency 1 ms + exponential(2 ms): the lower envelope's
    offset is the true offset plus the minimum latency (about 1 ms), its drift within
    1 ppm of the truth (Moon, Skelly and Towsley 1999)."""
    rng = np.random.default_rng(5)
    est = EnvelopeClockSync()
    t_true = np.arange(0, 120e9, 10e6)
    t_dev = np.rint(-2.0e9 + (1 + 20e-6) * t_true).astype(np.int64)
    t_rx = np.rint(t_true + 1e6 + rng.exponential(2e6, t_true.size)).astype(np.int64)
    for a in range(0, t_true.size, 100):
        est.add(t_dev[a:a + 100], t_rx[a:a + 100])
    cmap = est.clock_map()
    err = cmap.to_session(t_dev) - t_true
    assert np.all(err > 0.9e6) and np.all(err < 1.3e6)
    assert cmap.drift_ppm == pytest.approx((1 / (1 + 20e-6) - 1) * 1e6, abs=1.0)


def test_offset_drifting_publisher_mapped_within_1ms_over_5_minutes(tmp_path):
    """A publisher whose clock is +3.7 s off and 50 ppm fast, over 5 minutes of its time,
    with real time exchanges over ZeroMQ on loopback: every sample's session time (as
    mapped on arrival) and the final map over the whole run are within 1 ms of the truth.

    Method (time-lapse, stated honestly): both clocks are modelled from the one monotonic
    clock m of this computer, which all processes share (DeviceClock). Simulated true time
    T runs at real speed for 50 ms, then leaps by 1.45 s, on both sides alike; the session
    clock is T and the publisher's device clock is t_d = 3.7 s + (1 + 50e-6) T. Five
    simulated minutes thus pass in 10 real seconds, and the truth for a sample stamped t_d
    is T = (t_d - 3.7 s) / (1 + 50e-6). Between leaps every message crosses the real link
    at real speed, so the delays and asymmetries the estimator sees are those of real
    loopback exchanges between two processes (a plain speed-up would multiply them by 30).
    An exchange that straddles a leap looks like one queued for 1.45 s and is discounted
    by the lowest-delay weighting as any queued exchange is. What the compression does not
    reproduce is 5 real minutes of scheduling noise: 200 exchanges stand for 300. The
    sample rate is 5 Hz of device time, and the stream timeouts are 30 simulated s."""
    offset_s, drift_ppm, leap_s, every_s = 3.7, 50.0, 1.45, 0.05
    origin = time.monotonic_ns()
    clock = DeviceClock(origin_ns=origin, leap_s=leap_s, leap_every_s=every_s)
    with Peers(tmp_path) as spawn:
        pub = spawn("publish", "--endpoint", "tcp://127.0.0.1:0", "--source", "synthetic",
                    "--streams", "chest_imu", "--rate", "5", "--batch", "64",
                    "--clock-offset", str(offset_s), "--clock-drift-ppm", str(drift_ppm),
                    "--time-leap", str(leap_s), str(every_s), "--clock-origin-ns", str(origin))
        followers = ZmqFollowers([pub.endpoint], sync_interval_s=1.0, gap_s=30.0,
                                 heartbeat_s=1.0, timeout_s=30.0, connect_timeout_s=10.0)
        try:
            followers.connect(clock)
            first = []

            def five_minutes(got):
                if got and not first:
                    first.append(int(got[0].t_dev_ns[0]))
                return bool(got) and int(got[-1].t_dev_ns[-1]) - first[0] >= 300e9

            batches = drain(followers, five_minutes, timeout_s=25.0)
            final = followers.clock_maps()["chest_imu"]
            h = followers.health()["chest_imu"]
        finally:
            followers.close()
    t_dev = np.concatenate([b.t_dev_ns for b in batches])
    t_ns = np.concatenate([b.t_ns for b in batches])
    assert t_dev[-1] - t_dev[0] >= 300e9
    truth = (t_dev - offset_s * 1e9) / (1 + drift_ppm * 1e-6)
    online_err = np.abs(t_ns - truth)
    final_err = np.abs(final.to_session(t_dev) - truth)
    assert online_err.max() < 1e6, f"online max error {online_err.max() / 1e6:.3f} ms"
    assert final_err.max() < 1e6, f"final-map max error {final_err.max() / 1e6:.3f} ms"
    assert final.drift_ppm == pytest.approx((1 / (1 + drift_ppm * 1e-6) - 1) * 1e6, abs=3.0)
    assert h.dropped == 0 and h.malformed == 0
