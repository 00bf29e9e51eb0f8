"""Recurrence radius for a requested recurrence rate: an order statistic of sampled distances.

The distances between up to 600 rows of one trajectory and 4,000 of the other are
computed in compiled passes (:mod:`echoreo.scoring._recurrence_kernels`) and the
wanted one is selected without sorting them all. Also the input checks shared with
:func:`echoreo.scoring.recurrence.rqa`.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np

from echoreo.errors import ScoringInputError
from echoreo.scoring._checks import as_points, check_positive_int
from echoreo.scoring._recurrence_kernels import NORM_CODES, bracket, sampled_distances

__all__ = ["recurrence_radius"]

Norm = Literal["max", "euclidean", "manhattan"]

#: Largest number of row and column samples used to pick a radius from a recurrence rate.
_RADIUS_ROWS = 600
_RADIUS_COLS = 4000


def _check_norm(norm: str) -> str:
    if norm not in NORM_CODES:
        raise ScoringInputError(f"norm must be 'max', 'euclidean' or 'manhattan'; got {norm!r}")
    return norm


def _inputs(x: object, y: object) -> tuple[np.ndarray, np.ndarray, bool]:
    xs = as_points(x, "x")
    if y is None:
        return xs, xs, True
    ys = as_points(y, "y")
    if ys.shape[1] != xs.shape[1]:
        raise ScoringInputError(
            f"x and y must have the same embedding dimension; got {xs.shape[1]} and {ys.shape[1]}",
            hint="embed leader and follower with the same dim",
        )
    return xs, ys, False


def _kth_distance(xs: np.ndarray, ys: np.ndarray, rows: np.ndarray, cols: np.ndarray,
                  theiler: int, norm: int, k: int, total: int) -> float:
    """The k-th smallest (1-based) of the ``total`` sampled distances, exactly.

    A coarse sub-grid of the sampled pairs brackets the wanted quantile; one pass
    then counts the distances below the bracket and keeps those inside it, and the
    answer is selected among those. If the bracket misses (or holds too many), all
    distances are computed and partitioned.
    """
    yt = np.ascontiguousarray(ys[cols].T)
    if total > 50_000:
        sub_r, every = rows[:: max(1, rows.size // 100)], max(1, cols.size // 100)
        sub_c = cols[::every]
        sample = np.empty(sub_r.size * sub_c.size)
        got = sampled_distances(xs, sub_r, np.ascontiguousarray(yt[:, ::every]), sub_c,
                                theiler, norm, sample)
        if got >= 1000:
            sample = np.sort(sample[:got])
            q = k / total
            spread = 6.0 * math.sqrt(got * q * (1.0 - q)) + 16.0
            a, b = int(q * got - spread), int(q * got + spread)
            lo = sample[a] if a >= 0 else -math.inf
            hi = sample[b] if b < got else math.inf
            room = int(4 * total * (b - a + 1) / got) + 1000
            inside = np.empty(min(total, room))
            below, count = bracket(xs, rows, yt, cols, theiler, norm, lo, hi, inside)
            if count >= 0 and below < k <= below + count:
                return float(np.partition(inside[:count], k - below - 1)[k - below - 1])
    values = np.empty(total)
    sampled_distances(xs, rows, yt, cols, theiler, norm, values)
    return float(np.partition(values, k - 1)[k - 1])


def recurrence_radius(x: object, y: object = None, *, recurrence_rate: float,
                      theiler: int = 0, norm: Norm = "max") -> float:
    r"""Radius :math:`\varepsilon` that gives a requested recurrence rate.

    :math:`\varepsilon` is the :math:`\lceil RR \cdot P \rceil`-th smallest of the
    :math:`P` distances :math:`\|\mathbf{x}_i - \mathbf{y}_j\|` between the state
    vectors sampled (pairs inside the Theiler window excluded), so that a fraction
    ``recurrence_rate`` of them lie within it. Up to 600 rows of ``x`` and 4,000
    rows of ``y``, evenly spaced in time, are sampled; for shorter inputs every
    pair is used and the rate is met exactly (up to ties). For longer ones the
    realised rate (``rqa(...)["RR"]``) differs from the request by the sampling
    error, about 1 % relative for N = 50,000 (0.7-0.9 % measured on Lorenz and
    noisy-sine embeddings at a requested 5 %).

    Parameters
    ----------
    x : array_like, shape (n, m)
        Embedded state vectors.
    y : array_like, shape (n_y, m), optional
        Second trajectory (cross-recurrence); ``None`` for auto-recurrence.
    recurrence_rate : float
        Requested recurrence rate, ``0 < recurrence_rate <= 1``.
    theiler : int, default 0
        Theiler window :math:`w` as in :func:`~echoreo.scoring.recurrence.rqa`.
    norm : {"max", "euclidean", "manhattan"}
        Vector norm, as in :func:`~echoreo.scoring.recurrence.rqa`.

    Returns
    -------
    float
        The radius, in the unit of the state vectors.

    Notes
    -----
    The distances are computed in a compiled pass and the order statistic is
    selected exactly, without sorting them all: a sub-grid of about 100 x 100 of
    the sampled pairs brackets it, and only the distances inside the bracket are
    kept and partitioned (all of them when the bracket misses).
    """
    xs, ys, _ = _inputs(x, y)
    norm = _check_norm(norm)
    theiler = check_positive_int(theiler, "theiler", minimum=0)
    rate = float(recurrence_rate)
    if not 0.0 < rate <= 1.0:
        raise ScoringInputError(f"recurrence_rate must lie in (0, 1]; got {recurrence_rate!r}")
    rows = np.unique(np.linspace(0, xs.shape[0] - 1, min(xs.shape[0], _RADIUS_ROWS))
                     .round().astype(np.int64))
    cols = np.unique(np.linspace(0, ys.shape[0] - 1, min(ys.shape[0], _RADIUS_COLS))
                     .round().astype(np.int64))
    total = rows.size * cols.size
    if theiler > 0:
        # Pairs of the sample inside the window: for each row, the columns in (i - w, i + w).
        near = (np.searchsorted(cols, rows + theiler, side="left")
                - np.searchsorted(cols, rows - theiler, side="right"))
        total -= int(near.sum())
    if total == 0:
        raise ScoringInputError(
            f"the Theiler window {theiler} excludes every pair of a recurrence plot of "
            f"{xs.shape[0]} x {ys.shape[0]} points"
        )
    k = min(total, max(1, math.ceil(rate * total)))
    return _kth_distance(xs, ys, rows, cols, theiler, NORM_CODES[norm], k, total)
