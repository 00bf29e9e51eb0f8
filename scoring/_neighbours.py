"""Exact nearest neighbour of every point by a box-assisted (grid) search.

False nearest neighbours and Cao's method need, for every delay vector, its one
nearest other vector. A k-d tree answers that in general; delay vectors of the
low-dimensional signals we score fill a thin set, and a grid of boxes over their
first two coordinates finds the neighbour from a handful of nearby boxes. This is
the box-assisted search of Grassberger (1990), reviewed for nonlinear time-series
analysis by Schreiber (1995); our variant searches rings of boxes outwards until
no unseen box can hold a closer point, so the answer is exact.

When the grid does not pay (points too spread for their number, e.g. noise in
many dimensions; a pilot search over a few hundred points tells), the search
stops and ``scipy.spatial.cKDTree`` answers instead; both give the same distances.
"""

from __future__ import annotations

import itertools
import os
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import numpy as np
from scipy.spatial import cKDTree

from echoreo.scoring._neighbour_kernels import _bounds, _boxes, _bucket, _nearest_1d, _search

__all__ = ["nearest_other"]

#: Points per occupied box the grid aims at: in two dimensions, and in three or more
#: (where a box's points are sorted by the third coordinate and only a window of them
#: is compared, so larger boxes pay; both measured on Lorenz and noisy-sine vectors).
_TARGET_OCCUPANCY = 3.0
_TARGET_OCCUPANCY_SORTED = 12.0
#: Boxes of the dense box table at most, per point.
_CELLS_PER_POINT = 32
#: Work units (box visits + distance evaluations) per point above which the k-d tree is
#: cheaper. Measured over 24 sets (Gaussian noise d = 3-6, noisy sines d = 4-6, Lorenz
#: d = 5 and 7; n = 5,000 and 50,000), fastest of 5 runs: boxes were as fast or faster
#: on every set up to 96 units per point (1.0-2.3x), the tree faster on every set from
#: 117 on (1.1-2.2x) but one (148 units, equal).
_WORK_PER_QUERY = 100
#: Points of the pilot search that decides between boxes and the k-d tree.
_PILOT = 256
#: Below this many points one thread answers (thread start-up costs more than it saves).
_PARALLEL_FROM = 4000
#: Chunks of points per search thread.
_CHUNKS_PER_THREAD = 4
#: Points per chunk at most when a caller may stop the search early (see nearest_other).
_STOP_CHUNK = 256
#: Consecutive points (in box order) per block of such a chunk: a chunk is every
#: k-th block, an even sample of the set whose queries still read the same boxes.
_STOP_BLOCK = 16
#: Runs of consecutive points the k-d tree then answers in (one query call each).
_KDTREE_RUNS = 4


def _threads() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


_POOL: ThreadPoolExecutor | None = None
_POOL_LOCK = threading.Lock()


def _pool(threads: int) -> ThreadPoolExecutor:
    """One shared pool of search threads (starting threads per call costs ~0.1 ms)."""
    global _POOL
    with _POOL_LOCK:
        if _POOL is None or _POOL._max_workers < threads:
            _POOL = ThreadPoolExecutor(threads, thread_name_prefix="echoreo-neighbours")
        return _POOL


def _forget_pool() -> None:
    """A forked child has none of its parent's threads: it makes its own pool."""
    global _POOL, _POOL_LOCK
    _POOL = None
    _POOL_LOCK = threading.Lock()


os.register_at_fork(after_in_child=_forget_pool)


def _grid(points: np.ndarray):
    """Boxes over the first two coordinates, sized for about 3 (d = 2) or 12 (d >= 3)
    points per occupied box.

    Returns ``(cx, cy, counts, m0, m1, x0, y0, eps)`` or None when both coordinates
    are constant. The side starts from the bounding box and is corrected (at most
    three times) by the measured occupancy, since delay vectors fill a thin set.
    """
    n = points.shape[0]
    low, span = _bounds(points)
    live = span > 0.0
    if not live.any():
        return None
    g = int(np.count_nonzero(live))
    target = _TARGET_OCCUPANCY if points.shape[1] < 3 else _TARGET_OCCUPANCY_SORTED
    eps = (float(np.prod(span[live])) * target / n) ** (1.0 / g)
    max_cells = _CELLS_PER_POINT * n + 1000
    for attempt in range(4):
        eps = max(eps, float(np.max(span)) / 1e6)
        m = np.floor(span / eps).astype(np.int64) + 1
        while int(m[0] * m[1]) > max_cells:
            eps *= 1.25
            m = np.floor(span / eps).astype(np.int64) + 1
        m0, m1 = int(m[0]), int(m[1])
        cx, cy, counts, occupied = _boxes(points, float(low[0]), float(low[1]), eps, m0, m1)
        occupancy = n / occupied
        if target / 2 <= occupancy <= target * 2 or attempt == 3:
            break
        if occupancy > target and m0 * m1 * 1.25**g > max_cells:
            break  # finer boxes would exceed the table
        eps *= (target / occupancy) ** (1.0 / g)
    return cx, cy, counts, m0, m1, float(low[0]), float(low[1]), eps


def _kdtree_nearest(points: np.ndarray, p: float, nonzero: bool, stop=None,
                    reported: np.ndarray | None = None):
    """The same answer as the grid from ``scipy.spatial.cKDTree`` (ties may differ).

    With ``stop`` (see :func:`nearest_other`) the points are queried in four runs of
    consecutive points (each query call costs a thread start, and the tree reads
    best in the points' own order: every 16th point in 16 calls took 1.3-2.4 times
    as long as one call, four runs 1.1-1.3 times; 50,000 noisy-sine vectors,
    d = 4-5), and ``_HALTED`` is returned as soon as ``stop`` says so;
    rows marked in ``reported`` (n,) are answered but not passed to ``stop``.
    """
    n = points.shape[0]
    tree = cKDTree(points)
    nb = np.empty(n, dtype=np.int64)
    nd = np.empty(n)
    runs = 1 if stop is None else _KDTREE_RUNS
    cuts = sorted({k * n // runs for k in range(runs + 1)})
    for lo, hi in itertools.pairwise(cuts):
        rows = np.arange(lo, hi)
        _kdtree_rows(tree, points, rows, p, nonzero, nb, nd)
        if reported is not None:
            rows = rows[~reported[rows]]
        if stop is not None and stop(rows, nb, nd):
            return _HALTED
    return nb, nd


def _kdtree_rows(tree: cKDTree, points: np.ndarray, rows: np.ndarray, p: float,
                 nonzero: bool, nb: np.ndarray, nd: np.ndarray) -> None:
    """Nearest other point of the run of points ``rows`` (k,), written into ``nb``, ``nd``."""
    n = points.shape[0]
    dist, idx = tree.query(points[rows[0]:rows[-1] + 1], k=2, p=p, workers=-1)
    first_is_self = idx[:, 0] == rows
    nb[rows] = np.where(first_is_self, idx[:, 1], idx[:, 0])
    nd[rows] = np.where(first_is_self, dist[:, 1], dist[:, 0])
    if nonzero:
        todo = rows[nd[rows] == 0.0]
        k = 4
        while todo.size:
            kk = min(k, n)
            d2, i2 = tree.query(points[todo], k=kk, p=p, workers=-1)
            ok = d2 > 0.0
            has = ok.any(axis=1)
            col = np.argmax(ok, axis=1)
            at = np.arange(todo.size)
            nb[todo[has]] = i2[at, col][has]
            nd[todo[has]] = d2[at, col][has]
            todo = todo[~has]
            if kk == n:
                nb[todo] = -1
                nd[todo] = np.inf
                break
            k *= 4


def nearest_other(points: np.ndarray, p: float = 2.0, nonzero: bool = False, *,
                  stop: Callable[[np.ndarray, np.ndarray, np.ndarray], bool] | None = None,
                  ) -> tuple[np.ndarray, np.ndarray] | None:
    r"""Index and distance of every point's nearest neighbour other than itself.

    .. math:: j(i) = \arg\min_{j \ne i} \|\mathbf{y}_i - \mathbf{y}_j\|_p,
              \qquad p \in \{2, \infty\}

    Exact: the distances equal a k-d tree's. One dimension: the sorted values, the
    nearest other being an equal value or the nearer adjacent distinct one. Two and
    more: boxes of side :math:`\varepsilon` over the first two coordinates,
    :math:`\varepsilon` set so that occupied boxes hold about three points; the boxes
    at Chebyshev ring :math:`r = 0, 1, \dots` around a point's own are searched (a box
    skipped when its least possible distance exceeds the best found) until the best
    is below the distance from the point to the outside of the searched square, the
    least distance any unseen point can have (Grassberger 1990; Schreiber 1995).
    Among equally near points the smallest index is returned. When a pilot search
    over 256 points (with ``stop``: the first chunk) needs more than 100 box visits
    and distance evaluations per point (or the full search more than 200),
    ``scipy.spatial.cKDTree`` answers instead (its ties may resolve to another of
    the equally near points).

    A caller that needs only a count over the answers (e.g. whether the fraction
    of false neighbours reaches a level) passes ``stop``: the box search then
    answers the points in chunks of at most 256, each an evenly spread sample
    (every ``k``-th block of 16 consecutive points in box order; the k-d tree:
    four runs of consecutive points), calls ``stop`` after each, and ends as soon
    as it returns True. The sorted line (d = 1) answers all points at once and
    does not call it.

    Parameters
    ----------
    points : ndarray, shape (n, d)
        The points (e.g. delay vectors), finite.
    p : {2.0, inf}
        Euclidean or maximum norm.
    nonzero : bool
        Require a positive distance (identical points are skipped, as Cao 1997
        prescribes); a point without any other distinct point gets index -1 and
        distance ``inf``.
    stop : callable, optional
        ``stop(rows, idx, dist) -> bool``, called (never concurrently) after each
        chunk with the indices ``rows`` of the points just answered and the full
        ``idx``, ``dist`` arrays (valid at ``rows`` and at the rows of earlier
        calls). True ends the search. Each row is passed once, even when the
        boxes give up midway and the k-d tree answers all points again.

    Returns
    -------
    idx : ndarray of int64, shape (n,)
        Index of the nearest other point.
    dist : ndarray of float64, shape (n,)
        Its distance, in the units of the points.
    None
        Instead of both, when ``stop`` returned True.

    References
    ----------
    P. Grassberger (1990). An optimized box-assisted algorithm for fractal
    dimensions. *Physics Letters A* 148(1-2):63-68.

    T. Schreiber (1995). Efficient neighbor searching in nonlinear time series
    analysis. *International Journal of Bifurcation and Chaos* 5(2):349-358.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    n = points.shape[0]
    if p not in (2.0, np.inf):
        raise ValueError(f"p must be 2 or inf, got {p!r}")
    if n < 2:
        return np.full(n, -1, dtype=np.int64), np.full(n, np.inf)
    if points.shape[1] == 1:
        idx = np.empty(n, dtype=np.int64)
        dist = np.empty(n)
        # Any sort will do: the kernel breaks ties within a run of equal values by
        # index itself (the stable sort took 0.32 ms for 5,000 values, quicksort 0.17).
        order = np.argsort(points[:, 0])
        _nearest_1d(np.ascontiguousarray(points[order, 0]), order, nonzero, idx, dist)
        return idx, dist
    # Rows the boxes passed to stop before giving up are not passed again.
    reported = None if stop is None else np.zeros(n, dtype=bool)
    found = _grid_nearest(points, p, nonzero, stop, reported)
    if found is None:  # the boxes do not pay: the k-d tree answers
        found = _kdtree_nearest(points, p, nonzero, stop, reported)
    return None if found is _HALTED else found


#: What _grid_nearest returns when the caller's stop ended the search.
_HALTED = object()


def _grid_nearest(points: np.ndarray, p: float, nonzero: bool, stop=None,
                  reported: np.ndarray | None = None):
    """The grid search of :func:`nearest_other` (d >= 2): ``(idx, dist)``; None when it
    does not pay; ``_HALTED`` when ``stop`` ended it. Rows passed to ``stop`` are
    marked in ``reported`` (n,)."""
    n = points.shape[0]
    grid = _grid(points)
    if grid is None:  # both grid coordinates constant
        return None
    cx, cy, counts, m0, m1, x0, y0, eps = grid
    start, order, pts, scx, scy = _bucket(cx, cy, m1, counts, points)
    idx = np.empty(n, dtype=np.int64)
    dist = np.empty(n)
    maxnorm = p == np.inf
    threads = _threads() if n >= _PARALLEL_FROM else 1
    # Chunks taken in turn from a shared counter even out regions of unequal work; the
    # calling thread searches too, so one thread fewer is handed work. Without stop a
    # chunk is a run of points in box order; with stop, every parts-th block of
    # _STOP_BLOCK points in box order, so that each chunk samples the whole set while
    # consecutive queries still read the same boxes.
    parts = 1 if threads == 1 else _CHUNKS_PER_THREAD * threads
    block = 1
    if stop is not None:
        parts = max(parts, -(-n // _STOP_CHUNK))
        block = _STOP_BLOCK
    bounds = np.linspace(0, n, parts + 1).astype(np.int64)  # the runs without stop

    def chunk(part: int) -> tuple[int, int, int]:
        """``lo, hi, step`` of a chunk's points in box order (see _search)."""
        if stop is None:
            return int(bounds[part]), int(bounds[part + 1]), 1
        return part * block, n, parts * block

    def search(lo: int, hi: int, step: int, block: int, budget: int) -> int:
        """Answer the points of ``_search(lo, hi, step, block)``; its work, or -1."""
        return _search(pts, scx, scy, order, start, m0, m1, x0, y0, eps, maxnorm, nonzero,
                       lo, hi, step, block, idx, dist, budget)

    def report(part: int) -> bool:
        """Pass a searched chunk's rows to stop (under ``lock``); True: it said halt."""
        lo, hi, step = chunk(part)
        rows = order[_positions(lo, hi, step, block)]
        reported[rows] = True
        return bool(stop(rows, idx, dist))

    # A pilot search estimates the work per point; boxes are not tried when the k-d
    # tree would be cheaper. With stop the pilot is the first chunk (its answers
    # count); without, about 256 evenly spread points.
    if stop is not None:
        pilot = search(*chunk(0), block, 1 << 40)
        pilot_points = _positions(*chunk(0), block).size
        if report(0):
            return _HALTED
        first_part = 1
    else:
        step = max(1, n // _PILOT)
        pilot = search(0, n, step, 1, 1 << 40)
        pilot_points = len(range(0, n, step))
        first_part = 0
    if pilot / pilot_points > _WORK_PER_QUERY:
        return None
    chunks = iter(range(first_part, parts))
    lock = threading.Lock()
    failed = threading.Event()
    halted = threading.Event()

    def work() -> None:
        while not (failed.is_set() or halted.is_set()):
            with lock:
                part = next(chunks, None)
            if part is None:
                return
            if search(*chunk(part), block, 2 * _WORK_PER_QUERY) < 0:
                failed.set()
            elif stop is not None:
                with lock:
                    if not halted.is_set() and report(part):
                        halted.set()

    helpers = [_pool(threads).submit(work) for _ in range(threads - 1)]
    work()
    if halted.is_set():
        # Answers are no longer needed: a helper still finishing its chunk writes into
        # arrays nobody reads, so it is not waited for (its wake-up alone can take ms).
        return _HALTED
    for h in helpers:
        h.result()
    if failed.is_set():
        return None
    return _HALTED if halted.is_set() else (idx, dist)


def _positions(lo: int, hi: int, step: int, block: int) -> np.ndarray:
    """Positions ``b, ..., b + block - 1`` for ``b = lo, lo + step, ... < hi``, those
    below ``hi`` (the queries of :func:`_search`), in its order."""
    pos = (np.arange(lo, hi, step)[:, None] + np.arange(block)).ravel()
    return pos[pos < hi]
