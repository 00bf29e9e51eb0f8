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

    Each exchange :math:`i` gives an offset :math:`\\theta_i` and a round-trip
    delay :math:`\\delta_i` (:func:`ntp_offset_delay`) at the device time
    :math:`x_i = (T_2+T_3)/2`. The error of :math:`\\theta_i` is at most
    :math:`\\delta_i/2` and is smallest for the exchanges of lowest delay (RFC
    5905, sections 8 and 10: the clock filter keeps the lowest-delay sample of
    the last eight). Two regimes:

    * While the exchanges span less than ``drift_span_s`` of device time, the
      offset is that of the newest exchange whose delay is within 1.5 times
      the lowest (a clock filter in the spirit of RFC 5905: low delay, and
      recent because an unknown drift biases old offsets); the drift is the
      last one learned (0 at first).
    * Afterwards a weighted least-squares line through every exchange of the
      last ``horizon_s`` gives offset and drift, with weights that keep the
      lowest-delay exchanges and all but ignore queued ones:

      .. math::

          \\theta(x) = \\theta_\\mathrm{ref} + \\delta\\,(x - x_\\mathrm{ref}),
          \\qquad w_i = \\bigl(\\delta_i - \\delta_\\min + \\tfrac14 \\delta_\\min\\bigr)^{-2}

      with :math:`x_\\mathrm{ref}` the newest exchange (so the map's offset is
      the current one).

    The uncertainty reported is half the lowest delay (RFC 5905's error bound)
    plus the weighted root-mean-square residual of the fit.

    Parameters
    ----------
    horizon_s : float
        Device-time span of exchanges used in the fit, s.
    drift_span_s : float
        Device-time span of exchanges needed before a drift is fitted, s. A
        slope fitted over a few seconds of millisecond-noisy offsets would be
        worse than none (1 ms of noise over 2 s is 500 ppm).
    """

    method = "ntp"

    def __init__(self, horizon_s: float = 600.0, drift_span_s: float = 10.0):
        self.horizon_s = horizon_s
        self.drift_span_s = drift_span_s
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
        ref = float(raw[-1, 0])
        raw = raw[raw[:, 0] >= ref - self.horizon_s * 1e9]
        x, y, d = raw[:, 0] - ref, raw[:, 1], raw[:, 2]
        d_min = float(d.min())
        if float(np.ptp(x)) < self.drift_span_s * 1e9:
            b = self._map.drift_ppm * 1e-6
            # the newest exchange of near-lowest delay: recent (an unknown drift biases
            # old offsets) and good (RFC 5905 clock filter: low delay, small error)
            good = np.flatnonzero(d <= 1.5 * d_min + 1.0)
            i = int(good[-1])
            a = float(y[i] - b * x[i])
            rms = 0.0
        else:
            w = 1.0 / (d - d_min + 0.25 * d_min + 1.0) ** 2
            sw = np.sqrt(w)
            coef, *_ = np.linalg.lstsq(np.column_stack([sw, sw * x]), sw * y, rcond=None)
            a, b = float(coef[0]), float(coef[1])
            resid = y - (a + b * x)
            rms = float(np.sqrt(np.sum(w * resid**2) / np.sum(w)))
        self._map = ClockMap(offset_ns=round(a), drift_ppm=b * 1e6, ref_dev_ns=round(ref),
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
