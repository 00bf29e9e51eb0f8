"""Recurrence quantification analysis (Marwan et al. 2007), row by row in compiled kernels.

The recurrence matrix is never stored. Rows are processed in order; the recurrent
columns of a row are found among the points of a few strips of the coordinate of
largest spread, each sorted by the coordinate of second largest spread, so only
pairs within the radius in both coordinates are compared. They are set in a bit
row, from which the vertical lines (runs of set bits) are counted and, against
the previous row's bits, the diagonal lines that start and end (one start row
kept per diagonal). Work grows with the recurrences and the lines, memory with
N. Rows are split into parts run on separate threads; lines that cross a split
are joined afterwards.

The compiled kernels are in :mod:`echoreo.scoring._recurrence_kernels`; the
radius for a requested recurrence rate, :func:`recurrence_radius`, in
:mod:`echoreo.scoring.radius`.
"""

from __future__ import annotations

import itertools
import math
import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from echoreo.errors import ScoringInputError
from echoreo.scoring._checks import check_positive_int
from echoreo.scoring._recurrence_kernels import NORM_CODES, count_rows, strips
from echoreo.scoring.radius import Norm, _check_norm, _inputs, recurrence_radius

__all__ = ["RQA_KEYS", "recurrence_radius", "rqa"]

#: Keys of the dictionary returned by :func:`rqa`, in this order.
RQA_KEYS = ("RR", "DET", "L", "Lmax", "ENTR", "LAM", "TT")

#: Strip width as a fraction of the radius (a row looks at about 2 / fraction + 1 strips).
_STRIP_FRACTION = 0.5
#: Most strips, whatever the radius.
_MAX_STRIPS = 4096
#: Threads at most (scoring runs inside Dask or pool workers: two keep it polite).
_MAX_THREADS = 2
#: Below this many matrix cells one thread does the work (starting one costs more).
_PARALLEL_FROM = 2_000_000


def _threads() -> int:
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        cpus = os.cpu_count() or 1
    return max(1, min(cpus, _MAX_THREADS))


def _window_cells(n: int, m: int, theiler: int) -> int:
    """Number of cells (i, j), 0 <= i < n, 0 <= j < m, with |i - j| < theiler."""
    total = 0
    for offset in range(-(theiler - 1), theiler):
        lo = max(0, -offset)
        hi = min(n, m - offset)
        total += max(0, hi - lo)
    return total


def _row_bounds(n: int, cells: int) -> list[int]:
    """Row boundaries of the parts run on separate threads: equal shares of the rows."""
    parts = _threads() if cells >= _PARALLEL_FROM else 1
    parts = max(1, min(parts, n))
    return [n * p // parts for p in range(parts + 1)]


def _line_histograms(xs: np.ndarray, ys: np.ndarray, radius: float, theiler: int, auto: bool,
                     norm: str) -> tuple[np.ndarray, np.ndarray]:
    """Histograms of diagonal and vertical line lengths, each of size max(n_x, n_y) + 1."""
    n, ny = xs.shape[0], ys.shape[0]
    both = xs if auto else np.concatenate([xs, ys])
    spread = both.max(axis=0) - both.min(axis=0)
    order = np.argsort(-spread, kind="stable")
    ca = int(order[0])
    cb = int(order[1]) if order.size > 1 else ca
    # Reach: the radius widened by far more than rounding, so that no pair within the
    # radius is missed by a strip or a binary search; every candidate is then decided
    # by the exact comparison of the distance with the radius.
    reach = radius * (1.0 + 1e-9) + 1e-12 * float(np.abs(both).max())
    origin = float(both[:, ca].min())
    width = max(_STRIP_FRACTION * radius, float(spread[ca]) / _MAX_STRIPS)
    if not width > 0.0:
        width = 1.0
    n_strips = int(min(_MAX_STRIPS, float(spread[ca]) / width)) + 1
    strip = strips(np.ascontiguousarray(ys[:, ca]), origin, width, n_strips)
    sort = np.lexsort((ys[:, cb], strip))
    yt = np.ascontiguousarray(ys[sort].T)
    strip_start = np.searchsorted(strip[sort], np.arange(n_strips + 1)).astype(np.int64)
    col_of = sort.astype(np.int64)
    size = max(n, ny) + 1
    bounds = _row_bounds(n, n * ny)
    parts = []
    for r0, r1 in itertools.pairwise(bounds):
        parts.append((r0, r1, np.zeros(size, np.int64), np.zeros(size, np.int64),
                      np.zeros(n + ny - 1, np.int64), np.zeros(n + ny - 1, np.int64)))

    def run(part: tuple) -> None:
        r0, r1, diag, vert, head, tail = part
        count_rows(xs, yt, col_of, strip_start, origin, width, n_strips,
                    ca, cb, radius, reach, NORM_CODES[norm], theiler, auto, r0, r1,
                    diag, vert, head, tail)

    if len(parts) == 1:
        run(parts[0])
    else:
        with ThreadPoolExecutor(max_workers=min(len(parts) - 1, _MAX_THREADS)) as pool:
            done = [pool.submit(run, part) for part in parts[1:]]
            run(parts[0])
            for future in done:
                future.result()
    # Join the diagonal lines across the parts: a line open at a part's last row goes
    # on in the next part's line that starts at its first row (same diagonal).
    diag = np.sum([p[2] for p in parts], axis=0)
    vert = np.sum([p[3] for p in parts], axis=0)
    carry = np.zeros(n + ny - 1, np.int64)
    for r0, r1, _, _, head, tail in parts:
        whole = tail == r1 - r0
        joined = np.where(head > 0, carry + head, carry)[~whole]
        diag += np.bincount(joined[joined > 0], minlength=size)
        carry = np.where(whole, carry + tail, tail)
    diag += np.bincount(carry[carry > 0], minlength=size)
    return diag, vert


def _ratio(num: float, den: float) -> float:
    return float(num / den) if den > 0 else math.nan


def _entropy(counts: np.ndarray) -> float:
    total = counts.sum()
    if total == 0:
        return math.nan
    p = counts[counts > 0] / total
    return float(-np.sum(p * np.log(p)))


def rqa(x: object, y: object = None, *, radius: float | None = None,
        recurrence_rate: float | None = None, lmin: int = 2, vmin: int = 2,
        theiler: int = 0, norm: Norm = "max") -> dict[str, float]:
    r"""Recurrence quantification of one trajectory or of two (cross-recurrence).

    Recurrence matrix (Marwan et al. 2007, eqs. 2 and 27)

    .. math::

        R_{ij} = \Theta\bigl(\varepsilon - \|\mathbf{x}_i - \mathbf{y}_j\|\bigr),
        \qquad i < n_x,\; j < n_y,

    with :math:`\mathbf{y} = \mathbf{x}` for auto-recurrence and
    :math:`\Theta(0) = 1`. Pairs inside the Theiler window :math:`|i - j| < w` are
    set to 0 and left out of every count, including the number of pairs
    :math:`P = n_x n_y - \#\{|i-j| < w\}`. With :math:`P(l)` the number of
    diagonal lines of exactly length :math:`l` and :math:`P(v)` that of vertical
    lines (fixed :math:`i`, consecutive :math:`j`):

    .. math::

        RR = \frac{1}{P}\sum_{i,j} R_{ij}, \quad
        DET = \frac{\sum_{l \ge l_{min}} l P(l)}{\sum_{l \ge 1} l P(l)}, \quad
        L = \frac{\sum_{l \ge l_{min}} l P(l)}{\sum_{l \ge l_{min}} P(l)}, \quad
        L_{max} = \max\{l : P(l) > 0\},

    .. math::

        ENTR = -\sum_{l \ge l_{min}} p(l) \ln p(l),\; p(l) = \frac{P(l)}{\sum_{l \ge l_{min}} P(l)},
        \quad
        LAM = \frac{\sum_{v \ge v_{min}} v P(v)}{\sum_{v \ge 1} v P(v)}, \quad
        TT = \frac{\sum_{v \ge v_{min}} v P(v)}{\sum_{v \ge v_{min}} P(v)}.

    In auto-recurrence the line of identity (:math:`i = j`) is never counted as
    a diagonal line (Marwan et al. 2007); with ``theiler=0`` its points still
    count in RR and in vertical lines (as in pyunicorn's ``RecurrencePlot``);
    ``theiler >= 1`` removes them everywhere. Ratios whose denominator vanishes
    (no recurrence, no line of the minimum length) are NaN; ``Lmax`` is 0 then.

    Parameters
    ----------
    x : array_like, shape (n_x, m)
        Embedded state vectors (e.g. from :func:`embed`, or PCA scores).
    y : array_like, shape (n_y, m), optional
        Second trajectory for cross-recurrence; ``None`` for auto-recurrence.
    radius : float, optional
        Recurrence threshold :math:`\varepsilon \ge 0`, in the unit of the vectors.
    recurrence_rate : float, optional
        Alternatively, the recurrence rate wanted; the radius is then
        :func:`recurrence_radius`. Give exactly one of ``radius`` and ``recurrence_rate``.
    lmin, vmin : int, default 2
        Shortest diagonal and vertical line counted as a line (Marwan et al. 2007).
    theiler : int, default 0
        Theiler window :math:`w`: pairs with :math:`|i - j| < w` are excluded.
    norm : {"max", "euclidean", "manhattan"}, default "max"
        Vector norm; the maximum norm is the usual choice in RQA.

    Returns
    -------
    dict
        ``RR``, ``DET``, ``L``, ``Lmax``, ``ENTR``, ``LAM``, ``TT`` (floats;
        ``Lmax`` int). L, Lmax and TT are in samples, ENTR in nats.

    Raises
    ------
    ScoringInputError
        For NaN, empty or mismatched input, or a missing or doubled radius.

    Notes
    -----
    Computed row by row in a compiled kernel without storing the matrix: the
    recurrent columns of row :math:`i` are searched among the points within
    :math:`\varepsilon` of :math:`\mathbf{x}_i` in the two coordinates of largest
    spread (strips of one, sorted by the other), set in a bit row, and the lines
    are counted from that row and the previous one. Time grows with the number of
    pairs compared (a small multiple of the recurrences) and the number of lines,
    memory with :math:`n_x + n_y`. Large plots are split into two row ranges run
    on two threads; lines crossing the split are joined.

    References
    ----------
    N. Marwan, M. C. Romano, M. Thiel and J. Kurths (2007). Recurrence plots for
    the analysis of complex systems. *Physics Reports* 438(5-6):237-329.
    """
    xs, ys, auto = _inputs(x, y)
    norm = _check_norm(norm)
    lmin = check_positive_int(lmin, "lmin")
    vmin = check_positive_int(vmin, "vmin")
    theiler = check_positive_int(theiler, "theiler", minimum=0)
    if (radius is None) == (recurrence_rate is None):
        raise ScoringInputError("give exactly one of radius= and recurrence_rate=")
    if radius is None:
        radius = recurrence_radius(xs, None if auto else ys, recurrence_rate=recurrence_rate,
                                   theiler=theiler, norm=norm)
    radius = float(radius)
    if not math.isfinite(radius) or radius < 0:
        raise ScoringInputError(f"radius must be a finite number >= 0; got {radius!r}")
    pairs = xs.shape[0] * ys.shape[0] - _window_cells(xs.shape[0], ys.shape[0], theiler)
    if pairs <= 0:
        raise ScoringInputError(
            f"the Theiler window {theiler} excludes every pair of a recurrence plot of "
            f"{xs.shape[0]} x {ys.shape[0]} points"
        )
    diag_hist, vert_hist = _line_histograms(xs, ys, radius, theiler, auto, norm)
    length = np.arange(diag_hist.size)
    d_long = diag_hist[lmin:]
    d_long_points = float(length[lmin:] @ d_long)
    points = int(length @ vert_hist)  # every recurrence lies on one vertical line
    v_points = float(length[vmin:] @ vert_hist[vmin:])
    nonzero = np.flatnonzero(diag_hist)
    return {
        "RR": points / pairs,
        "DET": _ratio(d_long_points, float(length @ diag_hist)),
        "L": _ratio(d_long_points, float(d_long.sum())),
        "Lmax": int(nonzero[-1]) if nonzero.size else 0,
        "ENTR": _entropy(d_long),
        "LAM": _ratio(v_points, float(points)),
        "TT": _ratio(v_points, float(vert_hist[vmin:].sum())),
    }
