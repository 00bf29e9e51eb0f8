"""Per-device clock offset and drift estimation, producing :class:`~echoreo.adapters.base.ClockMap`.

Two estimators, both fitted online as data arrive:

* :class:`NtpClockSync` for devices that answer time requests: the
  four-timestamp exchange of NTP (RFC 5905, section 8), lowest-delay samples
  kept, a linear drift fit over time.
* :class:`EnvelopeClockSync` for devices that only send timestamps: the lower
  envelope of (receive time - device time), also with a linear drift term.

Both return the map :math:`t_s = t_d + \\theta + \\delta (t_d - t_\\mathrm{ref})`
of :class:`~echoreo.adapters.base.ClockMap`.

References
----------
D. Mills, J. Martin, J. Burbank, W. Kasch (2010). Network Time Protocol
Version 4: Protocol and Algorithms Specification. RFC 5905, IETF, sections 8
(on-wire protocol: offset and delay from four timestamps) and 10 (clock filter:
the sample of lowest delay among the last eight is the most accurate).

S. B. Moon, P. Skelly, D. Towsley (1999). Estimation and removal of clock skew
from network delay measurements. Proc. IEEE INFOCOM '99, 227-234 (skew as
the slope of a line below all one-way delays: the lower envelope).
"""

from __future__ import annotations

from collections import deque

import numpy as np

from echoreo.adapters.base import ClockMap

__all__ = ["EnvelopeClockSync", "NtpClockSync", "ntp_offset_delay"]


def ntp_offset_delay(t1_ns: int, t2_ns: int, t3_ns: int, t4_ns: int) -> tuple[float, float]:
    """Offset of the session clock relative to the device, and round-trip delay.

    The host sends at :math:`T_1` (session clock), the device receives at
    :math:`T_2` and answers at :math:`T_3` (device clock), the host receives at
    :math:`T_4` (session clock). RFC 5905, section 8, gives the device's offset
    relative to the host as :math:`((T_2-T_1)+(T_3-T_4))/2` and the round-trip
    delay :math:`\\delta = (T_4-T_1)-(T_3-T_2)`. A :class:`ClockMap` adds its
    offset to device time, so its sign is the opposite:

    .. math::

        \\theta = \\frac{(T_1 - T_2) + (T_4 - T_3)}{2}, \\qquad
        \\delta = (T_4 - T_1) - (T_3 - T_2)

    The error of :math:`\\theta` is at most :math:`\\delta/2` (the worst
    asymmetry of the two paths; RFC 5905, section 8).

    Parameters
    ----------
    t1_ns, t2_ns, t3_ns, t4_ns : int
        The four timestamps, ns.

    Returns
    -------
    offset_ns, delay_ns : float
        :math:`\\theta` (session minus device) and :math:`\\delta`, ns.
    """
    offset = ((t1_ns - t2_ns) + (t4_ns - t3_ns)) / 2.0
    delay = float((t4_ns - t1_ns) - (t3_ns - t2_ns))
    return offset, delay


def _line_fit(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Least-squares line ``y = a + b x``; ``b = 0`` when x has no spread."""
    if x.size < 2 or float(np.ptp(x)) <= 0.0:
        return float(np.mean(y)), 0.0
    xm = float(np.mean(x))
    ym = float(np.mean(y))
    dx = x - xm
    b = float(np.dot(dx, y - ym) / np.dot(dx, dx))
    return ym - b * xm, b


class NtpClockSync:
    """Offset and drift of one device from NTP-style four-timestamp exchanges.

    Each exchange gives an offset :math:`\\theta_i` and delay :math:`\\delta_i`
    (:func:`ntp_offset_delay`) at the device time :math:`(T_2+T_3)/2`.
    Exchanges are taken in consecutive groups of up to ``group`` and only the
    lowest-delay exchange of each group is kept (the clock filter of RFC 5905,
    section 10, which keeps the lowest-delay sample of the last eight); kept
    samples whose delay exceeds ``min + 3 (median - min)`` of the kept delays are
    discarded as queued. A least-squares line through the kept offsets over the
    last ``horizon_s`` of device time gives the offset at the newest sample and
    the drift (its slope):

    .. math::

        \\theta(t_d) = \\theta_\\mathrm{ref} + \\delta\\,(t_d - t_\\mathrm{ref})

    The uncertainty reported is half the lowest kept delay (RFC 5905's error
    bound) plus the root-mean-square residual of the fit.

    Parameters
    ----------
    group : int
        Exchanges per clock-filter group (8 in RFC 5905). Early on, while fewer
        than ``2 * group`` exchanges exist, every exchange is its own group so a
        drift can be estimated from the start.
    horizon_s : float
        Device-time span of kept samples used in the fit, s.
    min_span_s : float
        Below this device-time span of kept samples no drift is fitted
        (the offset is the mean), s.
    """

    method = "ntp"

    def __init__(self, group: int = 8, horizon_s: float = 600.0, min_span_s: float = 2.0):
        self.group = group
        self.horizon_s = horizon_s
        self.min_span_s = min_span_s
        self._raw: deque[tuple[float, float, float]] = deque(maxlen=4096)
        self._map = ClockMap(method="ntp")
        self.n_exchanges_ = 0
        self.min_delay_ns_ = float("inf")

    def reset(self) -> None:
        """Forget all exchanges (the device restarted with a new clock)."""
        self._raw.clear()
        self._map = ClockMap(method="ntp")
        self.n_exchanges_ = 0
        self.min_delay_ns_ = float("inf")

    @property
    def ready(self) -> bool:
        """True once at least one exchange has been added."""
        return self.n_exchanges_ > 0

    def add(self, t1_ns: int, t2_ns: int, t3_ns: int, t4_ns: int) -> None:
        """Add one exchange (session T1, T4; device T2, T3; ns) and refit."""
        offset, delay = ntp_offset_delay(t1_ns, t2_ns, t3_ns, t4_ns)
        if delay < 0 or t3_ns < t2_ns:
            return  # impossible timestamps: a device answering nonsense is not used
        self._raw.append(((t2_ns + t3_ns) / 2.0, offset, delay))
        self.n_exchanges_ += 1
        self.min_delay_ns_ = min(self.min_delay_ns_, delay)
        self._refit()

    def _refit(self) -> None:
        raw = np.asarray(self._raw, dtype=np.float64)
        newest = raw[-1, 0]
        raw = raw[raw[:, 0] >= newest - self.horizon_s * 1e9]
        g = self.group if raw.shape[0] >= 2 * self.group else 1
        n_groups = raw.shape[0] // g
        # groups counted from the newest so the latest exchanges always form a group
        rows = raw[raw.shape[0] - n_groups * g:].reshape(n_groups, g, 3)
        pick = rows[np.arange(n_groups), np.argmin(rows[:, :, 2], axis=1)]
        d = pick[:, 2]
        d_min = float(d.min())
        keep = d <= d_min + 3.0 * (float(np.median(d)) - d_min) + 1.0
        pick = pick[keep]
        x = pick[:, 0]
        ref = float(x[-1])
        if float(np.ptp(x)) < self.min_span_s * 1e9:
            a, b = float(np.mean(pick[:, 1])), 0.0
            if self._map.drift_ppm != 0.0:  # keep a drift already learned over a longer span
                b = self._map.drift_ppm * 1e-6
                a = float(np.mean(pick[:, 1] - b * (x - ref)))
        else:
            a, b = _line_fit(x - ref, pick[:, 1])
        resid = pick[:, 1] - (a + b * (x - ref))
        rms = float(np.sqrt(np.mean(resid**2))) if resid.size > 2 else 0.0
        self._map = ClockMap(offset_ns=round(a), drift_ppm=b * 1e6,
                             ref_dev_ns=round(ref),
                             uncertainty_ns=round(d_min / 2.0 + rms), method="ntp")

    def clock_map(self) -> ClockMap:
        """The current map (identity with method ``ntp`` before any exchange)."""
        return self._map


class EnvelopeClockSync:
    """Offset and drift of a device that cannot answer, from one-way timestamps.

    Each sample gives :math:`d_i = t_{\\mathrm{recv},i} - t_{d,i}` = offset +
    one-way latency :math:`\\ge` offset. Taking the minimum of :math:`d` in
    consecutive device-time bins of ``bin_s`` and fitting a line through the
    minima, shifted down until it lies below every minimum, gives the lower
    envelope (Moon, Skelly and Towsley 1999):

    .. math::

        \\theta(t_d) = \\min_i d_i \\text{ along the line } a + \\delta (t_d - t_\\mathrm{ref})

    The offset so found still contains the minimum one-way latency (unknowable
    without an answer); the reported uncertainty is the median distance of
    the bin minima above the envelope.

    Parameters
    ----------
    bin_s : float
        Device-time bin width, s.
    horizon_s : float
        Device-time span used, s.
    """

    method = "envelope"

    def __init__(self, bin_s: float = 1.0, horizon_s: float = 600.0):
        self.bin_s = bin_s
        self.horizon_s = horizon_s
        self._bins: dict[int, tuple[float, float]] = {}
        self._map = ClockMap(method="envelope")
        self.n_samples_ = 0

    @property
    def ready(self) -> bool:
        """True once at least one sample has been added."""
        return self.n_samples_ > 0

    def reset(self) -> None:
        """Forget all samples."""
        self._bins.clear()
        self._map = ClockMap(method="envelope")
        self.n_samples_ = 0

    def add(self, t_dev_ns: np.ndarray, t_recv_ns: np.ndarray | int) -> None:
        """Add samples (device time and session receive time, ns) and refit."""
        t_dev = np.atleast_1d(np.asarray(t_dev_ns, dtype=np.int64))
        d = (np.asarray(t_recv_ns, dtype=np.int64) - t_dev).astype(np.float64)
        d = np.broadcast_to(d, t_dev.shape)
        keys = (t_dev // int(self.bin_s * 1e9)).tolist()
        for k, td, di in zip(keys, t_dev.tolist(), d.tolist(), strict=True):
            cur = self._bins.get(k)
            if cur is None or di < cur[1]:
                self._bins[k] = (float(td), di)
        self.n_samples_ += t_dev.size
        newest = max(self._bins)
        for k in [k for k in self._bins if k < newest - self.horizon_s / self.bin_s]:
            del self._bins[k]
        pts = np.asarray([self._bins[k] for k in sorted(self._bins)], dtype=np.float64)
        ref = float(pts[-1, 0])
        x = pts[:, 0] - ref
        a, b = _line_fit(x, pts[:, 1])
        above = pts[:, 1] - (a + b * x)
        a += float(above.min())
        unc = float(np.median(above - above.min()))
        self._map = ClockMap(offset_ns=round(a), drift_ppm=b * 1e6,
                             ref_dev_ns=round(ref), uncertainty_ns=round(unc),
                             method="envelope")

    def clock_map(self) -> ClockMap:
        """The current map."""
        return self._map
