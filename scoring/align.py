"""Alignment: the follower's reaction lag from the cross-correlation with the leader."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["LagEstimate", "estimate_lag", "lagged_correlation"]


@dataclass(frozen=True)
class LagEstimate:
    """Result of :func:`estimate_lag`.

    Attributes
    ----------
    lag : int
        Lag in samples (follower behind leader), or -1 when undefined.
    correlation : float
        Pearson correlation at that lag (NaN when undefined).
    at_edge : bool
        The maximum lies at the largest lag searched (the true lag may be longer).
    """

    lag: int
    correlation: float
    at_edge: bool


def lagged_correlation(x: np.ndarray, y: np.ndarray, i0: int, i1: int, lag: int,
                       min_pairs: int = 3) -> float:
    """Pearson correlation of ``x[i0:i1]`` with ``y[i0+lag:i1+lag]`` over finite pairs.

    .. math::

        \\rho(\\ell) = \\frac{\\sum_i (x_i - \\bar x)(y_{i+\\ell} - \\bar y)}
        {\\sqrt{\\sum_i (x_i - \\bar x)^2 \\sum_i (y_{i+\\ell} - \\bar y)^2}}

    Parameters
    ----------
    x, y : ndarray, shape (n,)
        Leader and follower signals on the same grid; NaN marks missing samples.
    i0, i1 : int
        Leader window (half-open).
    lag : int
        Follower shift in samples.
    min_pairs : int
        Fewer finite pairs give NaN.

    Returns
    -------
    float
        NaN when a window leaves the arrays, has too few pairs or no variance.
    """
    if i0 < 0 or i0 + lag < 0 or i1 + lag > y.shape[0] or i1 > x.shape[0] or i1 <= i0:
        return float("nan")
    a = x[i0:i1]
    b = y[i0 + lag:i1 + lag]
    ok = np.isfinite(a) & np.isfinite(b)
    if ok.sum() < min_pairs:
        return float("nan")
    a = a[ok] - a[ok].mean()
    b = b[ok] - b[ok].mean()
    den = np.sqrt(np.dot(a, a) * np.dot(b, b))
    return float(np.dot(a, b) / den) if den > 0 else float("nan")


def estimate_lag(x: np.ndarray, y: np.ndarray, i0: int, i1: int, min_lag: int,
                 max_lag: int, min_valid: float = 0.5) -> LagEstimate:
    """Follower lag maximising the normalised cross-correlation within a bounded window.

    .. math::

        \\hat\\ell = \\arg\\max_{\\ell_\\min \\le \\ell \\le \\ell_\\max} \\rho(\\ell)

    with :math:`\\rho` of :func:`lagged_correlation` over the leader window
    ``[i0, i1)`` (a step's repetitions). The lag of the leader-follower
    cross-correlation peak is the standard estimate of a time delay between
    two signals (Knapp & Carter 1976). Lags whose window leaves the data or
    has fewer than ``min_valid`` of its pairs finite are skipped.

    Parameters
    ----------
    x, y : ndarray, shape (n,)
        Leader reference and follower signal on one uniform grid.
    i0, i1 : int
        Leader window (half-open sample range).
    min_lag, max_lag : int
        Lag window in samples (0 and 2 s · rate by default).
    min_valid : float
        Smallest fraction of finite pairs for a lag to count.

    Returns
    -------
    LagEstimate
        ``lag = -1`` when no lag could be evaluated.

    References
    ----------
    Knapp, C. H. & Carter, G. C. (1976). The generalized correlation method for
    estimation of time delay. *IEEE Transactions on Acoustics, Speech, and
    Signal Processing* 24, 320-327.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = i1 - i0
    hi = min(max_lag, y.shape[0] - i1)
    lo = max(min_lag, -i0)
    if n < 3 or hi < lo:
        return LagEstimate(-1, float("nan"), False)
    a = x[i0:i1]
    seg = y[i0 + lo:i1 + hi]
    if np.isfinite(a).all() and np.isfinite(seg).all():
        # all lags at once: windows of y as a strided view, sums by cumulative sums
        from numpy.lib.stride_tricks import sliding_window_view

        win = sliding_window_view(seg, n)  # (hi - lo + 1, n), no copy
        ac = a - a.mean()
        num = win @ ac
        c1 = np.concatenate(([0.0], np.cumsum(seg)))
        c2 = np.concatenate(([0.0], np.cumsum(seg * seg)))
        s1 = c1[n:] - c1[:-n]
        s2 = c2[n:] - c2[:-n]
        var_y = np.maximum(s2 - s1 * s1 / n, 0.0)
        den = np.sqrt(np.dot(ac, ac) * var_y)
        with np.errstate(invalid="ignore", divide="ignore"):
            r = np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)
    else:
        r = np.full(hi - lo + 1, np.nan)
        need = max(3, int(np.ceil(min_valid * n)))
        for k, lag in enumerate(range(lo, hi + 1)):
            r[k] = lagged_correlation(x, y, i0, i1, lag, min_pairs=need)
    if not np.isfinite(r).any():
        return LagEstimate(-1, float("nan"), False)
    k = int(np.nanargmax(r))
    return LagEstimate(lo + k, float(r[k]), bool(lo + k == max_lag))
