"""Preprocessing: uniform resampling with gap detection, zero-phase low-pass, 1-D signals.

Every stream of a session is brought onto one uniform grid on the session
clock (``t_k = k / rate_hz``), filtered with the same zero-phase Butterworth
low-pass, and reduced to the one-dimensional signal that is embedded.
``scoring/METHODS.md`` section 2 gives the formulas and defaults.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal as _signal

from echoreo.errors import ScoringInputError

__all__ = [
    "Resampled",
    "corrected_cutoff",
    "finite_runs",
    "lowpass",
    "principal_axis",
    "project",
    "resample_uniform",
    "winter_correction",
]


def winter_correction(n_passes: int = 2, order: int = 2) -> float:
    """Cutoff correction factor of a Butterworth low-pass applied several times.

    Running a Butterworth low-pass of order ``N`` forwards and backwards
    (``n_passes = 2``) squares its magnitude response, so the -3 dB point moves
    below the design cutoff. Designing at ``fc / C`` restores the -3 dB point
    of the whole filter to ``fc``:

    .. math::

        C = \\left(2^{1/n_\\mathrm{passes}} - 1\\right)^{1/(2N)}

    which for ``N = 2`` is Winter's :math:`C = (2^{1/n} - 1)^{1/4}`; for two
    passes :math:`C = 0.802`.

    Parameters
    ----------
    n_passes : int
        Number of passes of the filter over the data (2 for forward-backward).
    order : int
        Order ``N`` of the Butterworth filter of one pass.

    Returns
    -------
    float
        The factor ``C`` (0 < C <= 1).

    References
    ----------
    Winter, D. A. (2009). *Biomechanics and Motor Control of Human Movement*,
    4th ed., Wiley, section 3.4.4 (digital filtering; correction for multiple
    passes of a second-order Butterworth filter).
    """
    if n_passes < 1 or order < 1:
        raise ValueError(f"n_passes and order must be >= 1; got {n_passes}, {order}")
    return float((2.0 ** (1.0 / n_passes) - 1.0) ** (1.0 / (2.0 * order)))


def corrected_cutoff(cutoff_hz: float, n_passes: int = 2, order: int = 2) -> float:
    """Design cutoff ``fc / C`` of one pass so that ``n_passes`` passes reach -3 dB at ``fc``.

    Parameters
    ----------
    cutoff_hz : float, Hz
        The wanted -3 dB frequency of the complete (multi-pass) filter.
    n_passes, order : int
        As in :func:`winter_correction`.

    Returns
    -------
    float, Hz
        :math:`f_c / C` (Winter 2009, section 3.4.4).
    """
    return float(cutoff_hz) / winter_correction(n_passes, order)


def finite_runs(valid: np.ndarray) -> list[tuple[int, int]]:
    """Half-open index ranges ``[i, j)`` of consecutive True values.

    Parameters
    ----------
    valid : ndarray of bool, shape (n,)

    Returns
    -------
    list of (int, int)
        The runs, in order.
    """
    v = np.asarray(valid, dtype=bool)
    if v.size == 0:
        return []
    d = np.diff(np.concatenate(([0], v.astype(np.int8), [0])))
    starts = np.flatnonzero(d == 1)
    ends = np.flatnonzero(d == -1)
    return list(zip(starts.tolist(), ends.tolist(), strict=True))


def lowpass(x: np.ndarray, rate_hz: float, cutoff_hz: float, order: int = 2) -> np.ndarray:
    """Zero-phase (forward-backward) Butterworth low-pass with Winter's cutoff correction.

    The filter of one pass is a Butterworth low-pass of order ``order``
    designed at :func:`corrected_cutoff` ``(cutoff_hz, 2, order)``; it runs
    forwards and backwards (``scipy.signal.sosfiltfilt``, odd extension at both
    ends) so the result has no phase lag and its -3 dB point is ``cutoff_hz``.
    NaN samples are never filtered across: every run of finite samples is
    filtered on its own and NaNs stay NaN.

    .. math::

        |H_\\mathrm{total}(f)|^2 = \\frac{1}{\\left(1 + (f / f_c')^{2N}\\right)^{2}},
        \\qquad f_c' = f_c / C

    (analog prototype; scipy's bilinear design prewarps ``f_c'``).

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)
        Uniformly sampled signal, any unit; NaN marks missing samples.
    rate_hz : float, Hz
        Sampling rate.
    cutoff_hz : float, Hz
        -3 dB frequency of the complete filter; must lie below
        ``C · rate_hz / 2``.
    order : int
        Order of one pass (2: Winter's second-order filter).

    Returns
    -------
    ndarray, same shape as ``x``
        The filtered signal.

    Raises
    ------
    ScoringInputError
        The corrected cutoff reaches the Nyquist frequency.

    References
    ----------
    Winter, D. A. (2009). *Biomechanics and Motor Control of Human Movement*,
    4th ed., Wiley, section 3.4.4.
    Butterworth, S. (1930). On the theory of filter amplifiers. *Wireless
    Engineer* 7, 536-541.
    """
    x = np.asarray(x, dtype=np.float64)
    fc = corrected_cutoff(cutoff_hz, 2, order)
    nyq = rate_hz / 2.0
    if not 0 < fc < nyq:
        raise ScoringInputError(
            f"a low-pass at {cutoff_hz:g} Hz (design cutoff {fc:.3g} Hz after Winter's "
            f"correction) cannot be applied at {rate_hz:g} Hz: the design cutoff must lie "
            f"below the Nyquist frequency {nyq:g} Hz",
            hint="lower filter_cutoff_hz or raise rate_hz",
        )
    sos = _signal.butter(order, fc, btype="low", fs=rate_hz, output="sos")
    out = np.full_like(x, np.nan)
    flat = x.reshape(x.shape[0], -1)
    res = out.reshape(out.shape[0], -1)
    valid = np.isfinite(flat).all(axis=1)
    # scipy's default pad length for this design: 3 * (2 * n_sections + 1)
    default_pad = 3 * (2 * sos.shape[0] + 1)
    for i, j in finite_runs(valid):
        seg = flat[i:j]
        if j - i < 2:
            res[i:j] = seg
            continue
        pad = min(default_pad, j - i - 1)
        res[i:j] = _signal.sosfiltfilt(sos, seg, axis=0, padlen=pad)
    return out


@dataclass(frozen=True)
class Resampled:
    """A stream on a uniform grid.

    Attributes
    ----------
    t : ndarray, shape (n,), s
        Grid times ``(k0 + arange(n)) / rate_hz``.
    x : ndarray, shape (n, n_channels)
        Linearly interpolated values; NaN where ``valid`` is False.
    valid : ndarray of bool, shape (n,)
        True where the grid time lies between two finite source samples no
        more than ``max_gap_s`` apart.
    k0 : int
        Grid index of the first sample (``t[0] = k0 / rate_hz``).
    rate_hz : float, Hz
    """

    t: np.ndarray
    x: np.ndarray
    valid: np.ndarray
    k0: int
    rate_hz: float


def resample_uniform(t: np.ndarray, x: np.ndarray, rate_hz: float, k0: int, n: int,
                     max_gap_s: float) -> Resampled:
    """Linear interpolation onto the uniform grid ``t_k = k / rate_hz``, never across gaps.

    For a grid time :math:`\\tau` between the finite source samples
    :math:`(t_a, x_a)` and :math:`(t_b, x_b)`:

    .. math::

        x(\\tau) = x_a + (x_b - x_a) \\frac{\\tau - t_a}{t_b - t_a}
        \\quad\\text{if } t_b - t_a \\le \\text{max\\_gap\\_s}, \\text{ else NaN}.

    Grid times before the first or after the last finite sample are NaN. A
    source row with a NaN in any channel counts as missing. Samples with equal
    times keep the first.

    Parameters
    ----------
    t : ndarray, shape (m,), s
        Source sample times on the session clock (any order).
    x : ndarray, shape (m,) or (m, c)
        Source values.
    rate_hz : float, Hz
        Grid rate.
    k0, n : int
        First grid index and number of grid samples.
    max_gap_s : float, s
        Longest interval between source samples that is interpolated.

    Returns
    -------
    Resampled
    """
    t = np.asarray(t, dtype=np.float64).reshape(-1)
    x = np.asarray(x, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    if x.shape[0] != t.shape[0]:
        raise ScoringInputError(
            f"a stream has {t.shape[0]} time stamps but {x.shape[0]} rows of values",
            hint="every sample needs one time stamp",
        )
    grid = (k0 + np.arange(n)) / rate_hz
    out = np.full((n, x.shape[1]), np.nan)
    valid = np.zeros(n, dtype=bool)
    keep = np.isfinite(t) & np.isfinite(x).all(axis=1)
    t, x = t[keep], x[keep]
    if t.size >= 1 and n > 0:
        order = np.argsort(t, kind="stable")
        t, x = t[order], x[order]
        first = np.concatenate(([True], np.diff(t) > 0))
        t, x = t[first], x[first]
        # index of the first source sample at or after each grid time
        b = np.searchsorted(t, grid, side="left")
        exact = (b < t.size) & (t[np.minimum(b, t.size - 1)] == grid)
        inside = (b > 0) & (b < t.size)
        a = np.clip(b - 1, 0, t.size - 1)
        bb = np.clip(b, 0, t.size - 1)
        gap = t[bb] - t[a]
        valid = exact | (inside & (gap <= max_gap_s))
        if t.size >= 2:
            for c in range(x.shape[1]):
                out[:, c] = np.interp(grid, t, x[:, c])
        else:
            out[:] = x[0]
        out[~valid] = np.nan
    return Resampled(grid, out, valid, int(k0), float(rate_hz))


def principal_axis(x: np.ndarray) -> np.ndarray:
    """Unit direction of largest variance of multichannel samples (first principal axis).

    The eigenvector of the largest eigenvalue of the sample covariance of the
    finite rows of ``x`` (Pearson 1901), signed so that its component of
    largest magnitude is positive (a fixed, data-independent sign rule).

    Parameters
    ----------
    x : ndarray, shape (n_samples, c)

    Returns
    -------
    ndarray, shape (c,)
        Unit vector; the first unit vector if the input has no variance.

    References
    ----------
    Pearson, K. (1901). On lines and planes of closest fit to systems of points
    in space. *Philosophical Magazine* 2, 559-572.
    """
    x = np.asarray(x, dtype=np.float64)
    x = x[np.isfinite(x).all(axis=1)]
    c = x.shape[1]
    if x.shape[0] < 2:
        return np.eye(c)[0]
    xc = x - x.mean(axis=0)
    cov = xc.T @ xc / (x.shape[0] - 1)
    w, v = np.linalg.eigh(cov)
    if not np.isfinite(w).all() or w[-1] <= 0:
        return np.eye(c)[0]
    u = v[:, -1]
    if u[np.argmax(np.abs(u))] < 0:
        u = -u
    return u


def project(x: np.ndarray, axis: np.ndarray) -> np.ndarray:
    """One-dimensional signal ``s_k = x_k · u`` (NaN rows stay NaN).

    Parameters
    ----------
    x : ndarray, shape (n, c)
    axis : ndarray, shape (c,)

    Returns
    -------
    ndarray, shape (n,)
    """
    return np.asarray(x, dtype=np.float64) @ np.asarray(axis, dtype=np.float64)
