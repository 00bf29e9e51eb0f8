"""Signal generators for the virtual participants (private to :mod:`echoreo.sim.participant`).

Everything here is vectorised over samples and takes its randomness from a
passed :class:`numpy.random.Generator`. Every generator draws the same
number of random values whatever its amplitude parameter is, so that a grid of
degradation levels run with one seed scales one and the same realisation
(the grade-validity grid of issue 4 relies on this).

References
----------
.. [1] Butterworth, S. (1930). On the theory of filter amplifiers.
   *Experimental Wireless and the Wireless Engineer*, 7, 536-541.
.. [2] Gustafsson, F. (1996). Determining the initial states in
   forward-backward filtering. *IEEE Transactions on Signal Processing*,
   44(4), 988-992.
.. [3] Gilbert, E. N. (1960). Capacity of a burst-noise channel. *Bell System
   Technical Journal*, 39(5), 1253-1265.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray
from scipy import signal

__all__ = [
    "band_noise",
    "burst_keep_mask",
    "device_clock",
    "window_presence",
]


def band_noise(
    rng: np.random.Generator,
    n: int,
    n_channels: int,
    rate_hz: float,
    band_hz: tuple[float, float],
    rms: float | NDArray[np.float64],
    *,
    order: int = 4,
) -> NDArray[np.float64]:
    """Gaussian noise limited to a frequency band, scaled to an exact RMS.

    White Gaussian noise :math:`w_j[i] \\sim N(0, 1)` is filtered forward and
    backward (zero phase, [2]_) by a Butterworth filter [1]_ of the given
    order (low-pass when the lower edge is 0, band-pass otherwise) and each
    channel is divided by its own sample RMS and multiplied by ``rms``:

    .. math:: x_j = \\mathrm{rms}_j\\,
              \\frac{(h * w_j)}{\\sqrt{\\overline{(h * w_j)^2}}}

    Normalising by the realised RMS makes the amplitude exactly the one asked
    for, so grids of levels run with one seed differ only by scale. The
    signal is generated with a padding of three periods of the lowest band
    edge on each side and cropped, which keeps filter start-up transients out.

    Parameters
    ----------
    rng : numpy.random.Generator
    n, n_channels : int
        Output shape ``(n, n_channels)``.
    rate_hz : float
        Sampling rate, Hz.
    band_hz : (float, float)
        Lower and upper band edges, Hz; ``lower = 0`` gives a low-pass.
    rms : float or ndarray, shape (n_channels,)
        Root mean square of each channel, in the output unit.

    Returns
    -------
    ndarray, shape (n, n_channels)
    """
    lo, hi = float(band_hz[0]), float(band_hz[1])
    nyq = 0.5 * rate_hz
    hi = min(hi, 0.95 * nyq)
    edge = max(lo if lo > 0 else hi, 0.05)
    pad = int(np.ceil(3.0 * rate_hz / edge))
    white = rng.standard_normal((n + 2 * pad, n_channels))
    if lo > 0:
        sos = signal.butter(order, [lo / nyq, hi / nyq], btype="bandpass", output="sos")
    else:
        sos = signal.butter(order, hi / nyq, btype="lowpass", output="sos")
    x = signal.sosfiltfilt(sos, white, axis=0)[pad : pad + n]
    x = x - x.mean(axis=0)
    scale = np.sqrt(np.mean(x * x, axis=0))
    scale[scale == 0] = 1.0
    return x / scale * np.asarray(rms, dtype=float)


def burst_keep_mask(
    rng: np.random.Generator, n: int, fraction: float, mean_burst: float
) -> NDArray[np.bool_]:
    """Mask of kept samples with exactly ``round(fraction * n)`` lost, in bursts.

    Losses on a wireless link come in bursts (the two-state channel of
    Gilbert [3]_). Here burst lengths are geometric with mean ``mean_burst``
    samples, drawn until they cover the number of samples to lose (the last
    one is shortened), and the bursts are placed at uniformly random points
    among the kept samples (a random composition), so that the lost fraction
    is exactly the one asked for. The random draws do not depend on
    ``fraction`` beyond how many of them are used.

    Parameters
    ----------
    rng : numpy.random.Generator
    n : int
        Number of samples.
    fraction : float
        Fraction of samples lost, in [0, 1).
    mean_burst : float
        Mean burst length, samples (>= 1).

    Returns
    -------
    ndarray of bool, shape (n,)
        True where the sample is kept.
    """
    n_lost = round(float(fraction) * n)
    n_lost = min(max(n_lost, 0), n)
    keep = np.ones(n, dtype=bool)
    # Always draw the same amount so one seed gives nested loss patterns.
    lengths = rng.geometric(1.0 / max(mean_burst, 1.0), size=n + 1)
    u = rng.random(n + 1)
    if n_lost == 0:
        return keep
    cum = np.cumsum(lengths)
    k = int(np.searchsorted(cum, n_lost)) + 1
    lengths = lengths[:k].copy()
    lengths[-1] -= int(cum[k - 1] - n_lost)
    n_keep = n - n_lost
    # burst i starts after pos[i] kept samples (sorted, ties merge bursts)
    pos = np.sort(np.floor(u[:k] * (n_keep + 1)).astype(np.int64))
    # the m-th lost sample overall, in burst i, sits at pos[i] + m
    idx = np.repeat(pos, lengths) + np.arange(n_lost)
    keep[idx] = False
    return keep


def device_clock(
    t_start: float, t_end: float, rate_hz: float, offset_s: float, drift_ppm: float
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.int64]]:
    """Sample instants of a device that ticks regularly on its own clock.

    The device clock reads :math:`t_{dev} = o + (1 + d\\,10^{-6})\\,t` at
    session time :math:`t` (offset :math:`o`, drift :math:`d` in ppm, the
    linear clock model used for clock synchronisation, e.g. Mills 1991,
    *IEEE Trans. Communications* 39(10), 1482-1493). The device samples at
    :math:`t_{dev,k} = t_{dev}(t_{start}) + k / f`, so the true instants are
    :math:`t_k = (t_{dev,k} - o) / (1 + d\\,10^{-6})`; samples up to
    ``t_end`` are kept.

    Parameters
    ----------
    t_start, t_end : float
        Session-clock span to cover, s.
    rate_hz : float
        Nominal rate on the device clock, Hz.
    offset_s : float
        Device clock reading at session time 0, s.
    drift_ppm : float
        Device clock rate error, parts per million (positive: runs fast).

    Returns
    -------
    t : ndarray, shape (n,), s
        Session-clock instants of the samples.
    t_dev : ndarray, shape (n,), s
        Device timestamps.
    seq : ndarray of int64, shape (n,)
        Sequence numbers 0, 1, 2, ...
    """
    rate = 1.0 + drift_ppm * 1e-6
    dev0 = offset_s + rate * t_start
    n = int(np.floor((t_end - t_start) * rate * rate_hz + 1e-9)) + 1
    seq = np.arange(n, dtype=np.int64)
    t_dev = dev0 + seq / rate_hz
    t = (t_dev - offset_s) / rate
    return t, t_dev, seq


def window_presence(
    t: NDArray[np.float64], windows: NDArray[np.float64], ramp_s: float
) -> NDArray[np.float64]:
    """Weight that is 0 inside the given windows and 1 away from them.

    .. math:: w(t) = 1 - \\max_k b_k(t),\\quad
              b_k(t) = \\begin{cases} 1 & s_k \\le t \\le e_k \\\\
              \\tfrac12\\,(1 + \\cos(\\pi\\,\\delta / r)) & 0 < \\delta < r \\\\
              0 & \\text{otherwise}\\end{cases}

    with :math:`\\delta` the distance of :math:`t` from the window and
    :math:`r` the ramp length (a raised-cosine, Hann-shaped edge, so the
    weight has a continuous first derivative). Only the two windows that
    bracket each sample are considered (windows sorted by start), which keeps
    memory at O(n).

    Parameters
    ----------
    t : ndarray, shape (n,), s
    windows : ndarray, shape (k, 2), s
        ``(start, end)`` of each window.
    ramp_s : float
        Length of each raised-cosine edge, s (> 0).

    Returns
    -------
    ndarray, shape (n,)
    """
    t = np.asarray(t, dtype=float)
    w = np.asarray(windows, dtype=float).reshape(-1, 2)
    if len(w) == 0:
        return np.ones_like(t)
    w = w[np.argsort(w[:, 0])]
    starts = w[:, 0]
    ends = np.maximum.accumulate(w[:, 1])
    i = np.searchsorted(starts, t, side="right") - 1  # last window starting <= t
    bump = np.zeros_like(t)
    has_prev = i >= 0
    ip = np.clip(i, 0, len(w) - 1)
    d_after = t - ends[ip]  # <= 0 inside the window
    b_prev = np.where(d_after <= 0, 1.0, _hann_edge(d_after, ramp_s))
    bump = np.where(has_prev, b_prev, bump)
    inext = np.clip(i + 1, 0, len(w) - 1)
    has_next = i + 1 < len(w)
    d_before = starts[inext] - t
    b_next = np.where(has_next, _hann_edge(d_before, ramp_s), 0.0)
    return 1.0 - np.maximum(bump, b_next)


def _hann_edge(d: NDArray[np.float64], ramp_s: float) -> NDArray[np.float64]:
    """``0.5 (1 + cos(pi d / r))`` for ``0 <= d < r``, 1 for ``d < 0``, 0 beyond."""
    x = np.clip(d / ramp_s, 0.0, 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * x))
