"""Session clock, virtual clock and the absolute-deadline scheduler."""

from __future__ import annotations

import itertools
from datetime import datetime

import numpy as np
import pytest

from echoreo.runner.clock import Scheduler, SessionClock, VirtualClock


@pytest.mark.parametrize("rate_hz", [100.0, 30.0, 50.0, 7.0], ids=lambda r: f"{r:g}Hz")
def test_virtual_deadlines_do_not_drift(rate_hz):
    """Deadline k is t0 + floor(k * 1e9 / rate) exactly, after a million ticks too.

    Expected values: integer arithmetic on the definition of the grid; the
    virtual clock adds no error of its own.
    """
    clock = VirtualClock(utc_start="2026-01-01T00:00:00+00:00")
    clock.advance(123)
    sched = Scheduler(clock, rate_hz)
    period_num = 1_000_000_000
    ticks = list(sched.ticks(1000))
    for tick in ticks:
        assert tick.deadline_ns == 123 + (tick.k * period_num) // int(rate_hz)
        assert tick.lateness_ns == 0 and tick.t_ns == tick.deadline_ns
    assert sched.deadline_ns(1_000_000) == 123 + 1_000_000 * period_num // int(rate_hz)
    assert np.all(sched.lateness_ns == 0) and sched.lateness_ns.shape == (1000,)


def test_lateness_is_recorded_and_does_not_shift_the_grid():
    """Work that overruns makes ticks late (recorded), later deadlines stay on the grid."""
    rng = np.random.default_rng(7)
    clock = VirtualClock()
    sched = Scheduler(clock, 100.0)  # period 10 ms
    work = rng.integers(0, 12_000_000, size=500)  # ns of simulated work per tick
    expected_late = [0]  # tick 0 is due at once
    for w in work:
        tick = sched.wait()
        assert tick.deadline_ns == tick.k * 10_000_000
        assert tick.lateness_ns == expected_late[-1]
        now = clock.advance(int(w))
        # next due deadline: k+1, or the latest passed one when the overrun skipped some
        due = max(tick.k + 1, now // 10_000_000) * 10_000_000
        expected_late.append(max(0, now - due))
    lat = sched.lateness_ns
    np.testing.assert_array_equal(lat, expected_late[:-1])
    assert (lat > 0).any() and lat.max() < 10_000_000
    st = sched.stats()
    assert st.n == 500 and st.max_ns == lat.max()


def test_overrun_by_more_than_a_period_skips_to_the_grid():
    """A 35 ms stall at 100 Hz skips the missed deadlines and lands on the grid."""
    clock = VirtualClock()
    sched = Scheduler(clock, 100.0)
    sched.wait()
    clock.advance(35_000_000)
    tick = sched.wait()
    assert tick.skipped == 2 and tick.k == 3 and tick.deadline_ns == 30_000_000
    assert tick.lateness_ns == 5_000_000 and sched.skipped == 2


def test_no_skipping_fires_missed_ticks():
    clock = VirtualClock()
    sched = Scheduler(clock, 100.0, skip_missed=False)
    sched.wait()
    clock.advance(35_000_000)
    ks = [sched.wait().k for _ in range(3)]
    assert ks == [1, 2, 3] and sched.lateness_ns[1] == 25_000_000


def test_real_clock_records_lateness():
    """On the real clock a few ticks run and each one's lateness is recorded (not judged).

    A loaded machine may stall the loop past a deadline; the scheduler then skips the
    missed deadlines and says so, which is what the test allows for.
    """
    clock = SessionClock()
    sched = Scheduler(clock, 200.0)
    ticks = list(sched.ticks(5))
    assert ticks[0].k == ticks[0].skipped  # 0 unless the loop stalled before the first
    ks = [t.k for t in ticks]
    assert ks == sorted(set(ks))
    assert ks[-1] + 1 == len(ticks) + sched.skipped
    assert all(t.k - prev.k == 1 + t.skipped for prev, t in itertools.pairwise(ticks))
    assert all(t.lateness_ns >= 0 and t.t_ns >= t.deadline_ns for t in ticks)
    assert sched.lateness_ns.shape == (len(ticks),)
    assert clock.now_ns() > 0 and clock.kind == "real"
    datetime.fromisoformat(clock.utc_start)


def test_virtual_clock_never_goes_back():
    clock = VirtualClock(utc_start="2026-01-01T00:00:00+00:00")
    clock.advance_to(5)
    assert clock.advance_to(3) == 5 and clock.sleep_until_ns(4) == 5
    with pytest.raises(ValueError):
        clock.advance(-1)
    assert clock.utc_from_ns(1_500_000_000).startswith("2026-01-01T00:00:01.5")
