"""The session clock, a virtual clock, and the command loop's scheduler.

Session time is int64 nanoseconds since session start (DESIGN.md, "Session
clock and devices"). :class:`SessionClock` reads the host's monotonic clock
(``time.monotonic_ns``, CLOCK_MONOTONIC on Linux: never steps, unaffected by
NTP or daylight saving); the UTC wall time of its zero is captured once at
start and stored in the session file's ``meta.utc_start``.
:class:`VirtualClock` has the same interface but advances only when told,
so a fully simulated session runs as fast as the computer allows and gives
the same recorded result.

:class:`Scheduler` paces the command loop on either clock with absolute
deadlines ``t_k = t_0 + floor(k · 10⁹ / rate)`` ns, computed in exact integer
arithmetic from the tick index, so no error accumulates however long a
session runs, and records every tick's lateness (wake time − deadline, ns).

Reaching sub-millisecond lateness on the real clock
---------------------------------------------------
``time.sleep`` on Linux wakes 50–100 µs late on an idle machine (the default
timer slack is 50 µs) and sometimes much later under load; a pure busy-wait
is exact but burns a core. :meth:`SessionClock.sleep_until_ns` is a hybrid:
it sleeps until ``spin_ns`` before the deadline, then spins on
``time.monotonic_ns`` (with ``time.sleep(0)`` yields, which release the GIL
so the recorder's writer thread keeps running) until the deadline passes.
``spin_ns`` adapts: it starts at 1 ms and follows twice the largest recent
sleep overshoot, kept between 200 µs and 2 ms, so an idle machine spins
about 0.2 ms per tick (2 % of a core at 100 Hz) and a loaded one spins longer
instead of waking late.

On a machine shared with other busy processes the loop can still be
descheduled at the wrong moment; :func:`request_realtime_priority` asks the
kernel for the ``SCHED_FIFO`` policy for the calling thread (needs root or
``CAP_SYS_NICE``; refused quietly otherwise). Linux's real-time throttling
(``kernel.sched_rt_runtime_us``, 95 % by default) keeps a spinning real-time
thread from locking up a core.

Other Python threads (the recorder's writer, follower polling) share the
GIL: a command loop that wakes while another thread holds it waits up to
the interpreter's switch interval (5 ms by default) before the holder is
made to let go. ``sys.setswitchinterval(2e-4)`` bounds that wait to about
0.2 ms. A full garbage collection holds the GIL while it scans every
tracked object (tens of ms once numpy, pandas and the rest are imported);
``gc.freeze()`` after set-up moves the start-up objects out of its way.
``benchmarks/bench_command_loop.py --recorder --realtime --switch-interval
0.0002 --gc-freeze`` measures the combined effect.
"""

from __future__ import annotations

import os
import time
from array import array
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from fractions import Fraction

import numpy as np

__all__ = ["LatenessStats", "Scheduler", "SessionClock", "Tick", "VirtualClock",
           "request_realtime_priority"]


def request_realtime_priority(priority: int = 10, thread_id: int | None = None) -> bool:
    """Run a thread under ``SCHED_FIFO`` at ``priority`` (Linux), if allowed.

    Parameters
    ----------
    priority : int
        Real-time priority, 1 (lowest) to 99; 10 is above every ordinary
        process and below the kernel's own real-time threads.
    thread_id : int, optional
        Kernel thread id (``threading.Thread.native_id``); the calling thread
        by default. Raising the recorder's writer thread as well (at a lower
        priority) keeps it from being preempted by other processes while it
        holds the GIL the command loop is waiting for.

    Returns
    -------
    bool
        True when the policy was set; False when the system or the user's
        rights do not allow it (nothing changes then).
    """
    setter = getattr(os, "sched_setscheduler", None)
    if setter is None:
        return False
    try:
        setter(0 if thread_id is None else int(thread_id), os.SCHED_FIFO,
               os.sched_param(priority))
    except (OSError, ValueError):
        return False
    return True


def _utc_iso(dt: datetime) -> str:
    return dt.astimezone(UTC).isoformat(timespec="microseconds")


class SessionClock:
    """The real session clock: host monotonic time, zero at construction.

    Parameters
    ----------
    spin_ns : int
        Initial busy-wait window before a deadline, ns (adapted at run time,
        see the module docstring).

    Attributes
    ----------
    kind : str
        ``"real"`` (stored as ``meta.clock``).
    utc_start : str
        ISO 8601 UTC time of session-clock zero.
    """

    kind = "real"
    _SPIN_MIN_NS = 200_000
    _SPIN_MAX_NS = 2_000_000

    def __init__(self, spin_ns: int = 1_000_000):
        # Bracket the wall-clock reading between two monotonic readings and
        # keep the tightest of three tries: the wall time of zero is then
        # known to within half that bracket (typically < 1 µs).
        best = None
        for _ in range(3):
            m0 = time.monotonic_ns()
            w = time.time_ns()
            m1 = time.monotonic_ns()
            if best is None or m1 - m0 < best[0]:
                best = (m1 - m0, (m0 + m1) // 2, w)
        _, mono, wall = best
        self._t0 = mono
        self._utc_zero_ns = wall
        self.utc_start = _utc_iso(datetime.fromtimestamp(wall / 1e9, UTC))
        self.spin_ns = int(spin_ns)
        self._overshoot_max = 0

    def now_ns(self) -> int:
        """Session time, ns: ``time.monotonic_ns() − t₀``."""
        return time.monotonic_ns() - self._t0

    def now(self) -> float:
        """Session time, s."""
        return self.now_ns() * 1e-9

    def utc_from_ns(self, t_ns: int) -> str:
        """ISO 8601 UTC time of session time ``t_ns`` (zero's wall time + t_ns)."""
        dt = datetime.fromtimestamp(self._utc_zero_ns // 1_000_000_000, UTC) + timedelta(
            microseconds=((self._utc_zero_ns % 1_000_000_000) + t_ns) / 1000)
        return _utc_iso(dt)

    def sleep_until_ns(self, t_ns: int) -> int:
        """Wait until session time ``t_ns`` (hybrid sleep, then spin).

        Returns
        -------
        int
            The session time on waking, ns (≥ ``t_ns``).
        """
        now = self.now_ns()
        remaining = t_ns - now
        if remaining > self.spin_ns:
            target = t_ns - self.spin_ns
            time.sleep((target - now) * 1e-9)
            now = self.now_ns()
            overshoot = now - target
            # decaying maximum of the overshoot: follows load up quickly, down slowly
            self._overshoot_max = max(overshoot, (self._overshoot_max * 15) // 16)
            self.spin_ns = min(self._SPIN_MAX_NS,
                               max(self._SPIN_MIN_NS, 2 * self._overshoot_max))
        while now < t_ns:
            if t_ns - now > 50_000:
                time.sleep(0)  # yield the GIL while far enough from the deadline
            now = self.now_ns()
        return now


class VirtualClock:
    """A clock that advances only when told; same interface as :class:`SessionClock`.

    Parameters
    ----------
    utc_start : str, optional
        ISO 8601 UTC time to report for zero (now by default; pass a fixed
        value for reproducible files).
    """

    kind = "virtual"

    def __init__(self, utc_start: str | None = None):
        self._t = 0
        self.utc_start = utc_start or _utc_iso(datetime.now(UTC))

    def now_ns(self) -> int:
        """Current virtual time, ns."""
        return self._t

    def now(self) -> float:
        """Current virtual time, s."""
        return self._t * 1e-9

    def advance(self, dt_ns: int) -> int:
        """Move time forward by ``dt_ns`` ≥ 0 ns; returns the new time."""
        if dt_ns < 0:
            raise ValueError("a clock cannot go backwards")
        self._t += int(dt_ns)
        return self._t

    def advance_to(self, t_ns: int) -> int:
        """Move time forward to ``t_ns`` (no change if already later); returns the time."""
        self._t = max(self._t, int(t_ns))
        return self._t

    def sleep_until_ns(self, t_ns: int) -> int:
        """Jump to ``t_ns`` without sleeping (no change if already later)."""
        return self.advance_to(t_ns)

    def utc_from_ns(self, t_ns: int) -> str:
        """ISO 8601 UTC time of virtual time ``t_ns``."""
        zero = datetime.fromisoformat(self.utc_start)
        return _utc_iso(zero + timedelta(microseconds=t_ns / 1000))


@dataclass(frozen=True)
class Tick:
    """One tick of the command loop.

    Parameters
    ----------
    k : int
        Tick index (deadline number since the scheduler's start).
    deadline_ns : int
        ``t₀ + floor(k · 10⁹ / rate)``, ns on the session clock.
    t_ns : int
        Session time on waking, ns.
    lateness_ns : int
        ``t_ns − deadline_ns`` (≥ 0 on both clocks).
    skipped : int
        Deadlines skipped just before this one because the loop overran
        (0 normally).
    """

    k: int
    deadline_ns: int
    t_ns: int
    lateness_ns: int
    skipped: int = 0


@dataclass(frozen=True)
class LatenessStats:
    """Summary of recorded tick lateness.

    Parameters
    ----------
    n : int
        Ticks recorded.
    p50_ns, p99_ns, max_ns : float
        Median, 99th percentile (linear interpolation, numpy's default) and
        maximum lateness, ns (NaN when no tick was recorded).
    skipped : int
        Deadlines skipped in total.
    """

    n: int
    p50_ns: float
    p99_ns: float
    max_ns: float
    skipped: int


class Scheduler:
    """Absolute-deadline pacing of a periodic loop.

    Parameters
    ----------
    clock : SessionClock or VirtualClock
        Anything with ``now_ns()`` and ``sleep_until_ns(t_ns)``.
    rate_hz : float
        Loop rate, Hz (for example 100).
    start_ns : int, optional
        Deadline of tick 0, ns on the session clock; the clock's present time
        by default.
    skip_missed : bool
        When the loop overran by more than one period, jump to the latest
        deadline that has passed instead of firing the missed ticks back to
        back (a command loop wants the present pose, not a burst of stale ones).
        Deadlines stay on the same grid either way.

    Notes
    -----
    Deadline of tick ``k``:

    .. math::

        t_k = t_0 + \\left\\lfloor \\frac{k \\cdot 10^9 \\cdot q}{p} \\right\\rfloor

    with the period ``10⁹ / rate = 10⁹ · q / p`` ns held as an exact fraction
    (``rate = p / q``), so ``t_k`` depends on ``k`` alone and rounding never
    accumulates (a relative schedule ``t_{k+1} = wake_k + period`` drifts by
    the sum of all latenesses).
    """

    def __init__(self, clock, rate_hz: float, *, start_ns: int | None = None,
                 skip_missed: bool = True):
        if not rate_hz > 0:
            raise ValueError(f"rate_hz must be positive, not {rate_hz!r}")
        self.clock = clock
        self.rate_hz = float(rate_hz)
        self._period = Fraction(1_000_000_000) / Fraction(self.rate_hz)
        self.period_ns = float(self._period)
        self.start_ns = int(clock.now_ns() if start_ns is None else start_ns)
        self.skip_missed = skip_missed
        self._k = 0
        self._lateness = array("q")
        self._skipped = 0

    def deadline_ns(self, k: int) -> int:
        """Deadline of tick ``k``, ns: ``t₀ + floor(k · period)`` in exact arithmetic."""
        return self.start_ns + (k * self._period.numerator) // self._period.denominator

    def wait(self) -> Tick:
        """Wait for the next deadline and record the tick's lateness.

        Returns
        -------
        Tick
            The tick that is due now.
        """
        k = self._k
        skipped = 0
        if self.skip_missed:
            now = self.clock.now_ns()
            # latest k' with deadline(k') <= now, if that is beyond k
            latest = ((now - self.start_ns) * self._period.denominator) // self._period.numerator
            if latest > k:
                skipped = int(latest - k)
                k = int(latest)
                self._skipped += skipped
        deadline = self.deadline_ns(k)
        t = self.clock.sleep_until_ns(deadline)
        late = t - deadline
        self._lateness.append(late)
        self._k = k + 1
        return Tick(k, deadline, t, late, skipped)

    def ticks(self, n: int | None = None) -> Iterator[Tick]:
        """Yield ``n`` ticks (forever when None), each after :meth:`wait`."""
        i = 0
        while n is None or i < n:
            yield self.wait()
            i += 1

    @property
    def lateness_ns(self) -> np.ndarray:
        """Lateness of every tick so far, shape (n_ticks,), int64 ns."""
        return np.frombuffer(self._lateness, dtype=np.int64).copy()

    @property
    def skipped(self) -> int:
        """Deadlines skipped so far."""
        return self._skipped

    def stats(self) -> LatenessStats:
        """p50, p99 and maximum of the recorded lateness (see :class:`LatenessStats`)."""
        lat = self.lateness_ns
        if lat.size == 0:
            nan = float("nan")
            return LatenessStats(0, nan, nan, nan, self._skipped)
        p50, p99 = np.percentile(lat, [50, 99])
        return LatenessStats(int(lat.size), float(p50), float(p99), float(lat.max()),
                             self._skipped)
