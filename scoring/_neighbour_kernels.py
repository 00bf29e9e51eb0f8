"""Compiled kernels of the exact nearest-neighbour search (see ``_neighbours``).

Box assignment and counting sort, the ring-by-ring box search with its distance and
box-gap bounds (Grassberger 1990; Schreiber 1995), and the sorted-line search for
one dimension. All take and return plain arrays; ``_neighbours`` sizes the grid,
decides between boxes and the k-d tree and splits the work over threads.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def _distance(pts, q, j, maxnorm, bound):  # pragma: no cover - compiled
    """Distance (squared for the Euclidean norm) of sorted points q and j; stops past bound.

    The bound is tested after every fourth coordinate, not after each: for the 2-5
    coordinates of the usual delay vectors the branch-free sum is cheaper than the
    early exit (nearest neighbours of noisy-sine vectors at d = 4 and n = 5,000:
    4.1 -> 3.6 ms; Lorenz 2.0 -> 1.9 ms, single thread, medians of 40 interleaved runs).
    """
    acc = 0.0
    for k in range(pts.shape[1]):
        diff = abs(pts[q, k] - pts[j, k])
        if maxnorm:
            acc = max(acc, diff)
        else:
            acc += diff * diff
        if (k & 3) == 3 and acc > bound:
            break
    return acc


@njit(cache=True, nogil=True)
def _scan_box(pts, orig, start, box, q, maxnorm, nonzero, best, best_j):  # pragma: no cover
    """Best (distance, sorted index) after the points of one box; also the points scanned."""
    first, stop = start[box], start[box + 1]
    for j in range(first, stop):
        if j == q:
            continue
        acc = _distance(pts, q, j, maxnorm, best)
        if acc > best or (nonzero and acc == 0.0):
            continue
        if acc < best or orig[j] < orig[best_j]:
            best = acc
            best_j = j
    return best, best_j, stop - first


@njit(cache=True, nogil=True)
def _scan_box_z(pts, orig, start, box, q, maxnorm, nonzero, best, best_j):  # pragma: no cover
    """As :func:`_scan_box` for a box sorted by the third coordinate: only the points
    whose third-coordinate gap is within the best distance are compared."""
    first, stop = start[box], start[box + 1]
    if stop == first:
        return best, best_j, 0
    qz = pts[q, 2]
    lo, hi = first, stop
    while lo < hi:  # first point with z >= qz
        mid = (lo + hi) // 2
        if pts[mid, 2] < qz:
            lo = mid + 1
        else:
            hi = mid
    seen = 1
    for direction in (1, -1):
        j = lo if direction == 1 else lo - 1
        while first <= j < stop:
            gap = abs(pts[j, 2] - qz)
            if (gap if maxnorm else gap * gap) > best:
                break
            if j != q:
                seen += 1
                acc = _distance(pts, q, j, maxnorm, best)
                if acc <= best and not (nonzero and acc == 0.0):
                    if acc < best or orig[j] < orig[best_j]:
                        best = acc
                        best_j = j
            j += direction
    return best, best_j, seen


@njit(cache=True, nogil=True)
def _box_gap(v, c, b, origin, eps):  # pragma: no cover - compiled
    """Least distance along one grid axis from a value ``v`` in box ``c`` to box ``b``."""
    if b < c:
        return max(v - (origin + (b + 1) * eps), 0.0)
    if b > c:
        return max((origin + b * eps) - v, 0.0)
    return 0.0


@njit(cache=True, nogil=True)
def _query(pts, cx, cy, orig, start, m0, m1, x0, y0, eps, maxnorm, nonzero,
           q):  # pragma: no cover - compiled
    """Nearest other point of sorted point ``q``: (best distance, squared for the
    Euclidean norm; its sorted index or -1; box visits plus distances evaluated)."""
    safe = 1.0 - 1e-9  # lower bounds are shrunk against rounding at box edges
    by_z = pts.shape[1] >= 3  # boxes are sorted by the third coordinate
    work = 0
    qx, qy = pts[q, 0], pts[q, 1]
    c0, c1 = cx[q], cy[q]
    best = np.inf
    best_j = -1
    r = 0
    while True:
        lo1, hi1 = max(c1 - r, 0), min(c1 + r, m1 - 1)
        for bx in range(max(c0 - r, 0), min(c0 + r, m0 - 1) + 1):
            gx = _box_gap(qx, c0, bx, x0, eps) * safe
            edge = bx == c0 - r or bx == c0 + r
            by = lo1
            while by <= hi1:
                if not edge and by != c1 - r and by != c1 + r:
                    by = c1 + r  # skip the shell's interior
                    continue
                work += 1
                gy = _box_gap(qy, c1, by, y0, eps) * safe
                lb = max(gx, gy) if maxnorm else gx * gx + gy * gy
                if lb <= best:
                    if by_z:
                        best, best_j, seen = _scan_box_z(pts, orig, start, bx * m1 + by,
                                                         q, maxnorm, nonzero, best, best_j)
                    else:
                        best, best_j, seen = _scan_box(pts, orig, start, bx * m1 + by, q,
                                                       maxnorm, nonzero, best, best_j)
                    work += seen
                by += 1
        # Points outside the searched square of boxes lie beyond one of its sides.
        reach = np.inf
        if c0 - r > 0:
            reach = min(reach, qx - (x0 + (c0 - r) * eps))
        if c0 + r < m0 - 1:
            reach = min(reach, (x0 + (c0 + r + 1) * eps) - qx)
        if c1 - r > 0:
            reach = min(reach, qy - (y0 + (c1 - r) * eps))
        if c1 + r < m1 - 1:
            reach = min(reach, (y0 + (c1 + r + 1) * eps) - qy)
        if reach == np.inf:
            return best, best_j, work  # the square covers the whole grid
        reach *= safe
        if best_j >= 0 and best < (reach if maxnorm else reach * reach):
            return best, best_j, work
        r += 1


@njit(cache=True, nogil=True)
def _search(pts, cx, cy, orig, start, m0, m1, x0, y0, eps, maxnorm, nonzero, lo, hi, step,
            block, out_idx, out_dist, work_per_query):  # pragma: no cover - compiled
    """Nearest other point of the sorted points ``b, ..., b + block - 1`` for
    ``b = lo, lo + step, ... < hi`` (none at or past ``hi``); the work done, -1 over budget.

    ``pts`` (n, d) are sorted by box, ``cx``, ``cy`` (n,) their box coordinates
    (``m0`` x ``m1`` boxes of side ``eps`` from the origin ``x0, y0``), ``orig``
    (n,) their original indices; ``start`` (m0 * m1 + 1,) the first sorted point of every box.
    Queries run in box order, so that consecutive queries read the same boxes; the
    boxes at ring ``r = 0, 1, ...`` around a query's own are searched until no
    unseen box can hold a nearer point (see :func:`_query`).
    Euclidean distances are compared squared.
    """
    work = 0
    budget = 20000
    for b in range(lo, hi, step):
        for q in range(b, min(b + block, hi)):
            budget += work_per_query
            best, best_j, done = _query(pts, cx, cy, orig, start, m0, m1, x0, y0, eps,
                                        maxnorm, nonzero, q)
            work += done
            if work > budget:
                return -1
            out_idx[orig[q]] = orig[best_j] if best_j >= 0 else -1
            out_dist[orig[q]] = best if maxnorm else math.sqrt(best)
    return work


@njit(cache=True, nogil=True)
def _nearest_1d(values, order, nonzero, out_idx, out_dist):  # pragma: no cover - compiled
    """Nearest other point on a line from the sorted ``values`` (n,) and ``order`` (n,).

    Equal values form runs; a point's nearest other is a copy of itself in its run
    (distance 0, unless ``nonzero``) or else the nearer adjacent run; within a run
    the smallest original index is taken.
    """
    n = values.shape[0]
    run_of = np.empty(n, dtype=np.int64)
    starts = np.empty(n + 1, dtype=np.int64)
    runs = 0
    for pos in range(n):
        if pos == 0 or values[pos] != values[pos - 1]:
            starts[runs] = pos
            runs += 1
        run_of[pos] = runs - 1
    starts[runs] = n
    first = np.empty(runs, dtype=np.int64)  # smallest and second smallest original index
    second = np.empty(runs, dtype=np.int64)
    for r in range(runs):
        a, b = n, n
        for pos in range(starts[r], starts[r + 1]):
            o = order[pos]
            if o < a:
                a, b = o, a
            elif o < b:
                b = o
        first[r], second[r] = a, b
    for pos in range(n):
        i = order[pos]
        r = run_of[pos]
        if not nonzero and starts[r + 1] - starts[r] >= 2:
            out_idx[i] = second[r] if first[r] == i else first[r]
            out_dist[i] = 0.0
            continue
        left = values[pos] - values[starts[r] - 1] if r > 0 else np.inf
        right = values[starts[r + 1]] - values[pos] if r < runs - 1 else np.inf
        if left == np.inf and right == np.inf:
            out_idx[i] = -1
            out_dist[i] = np.inf
        elif left < right or (left == right and first[r - 1] < first[r + 1]):
            out_idx[i] = first[r - 1]
            out_dist[i] = left
        else:
            out_idx[i] = first[r + 1]
            out_dist[i] = right


@njit(cache=True, nogil=True)
def _boxes(pts, x0, y0, eps, m0, m1):  # pragma: no cover - compiled
    """Box coordinates ``cx``, ``cy`` (n,), points per box (m0 * m1,), occupied boxes."""
    n = pts.shape[0]
    cx = np.empty(n, dtype=np.int64)
    cy = np.empty(n, dtype=np.int64)
    counts = np.zeros(m0 * m1, dtype=np.int64)
    occupied = 0
    for i in range(n):
        a = min(max(int((pts[i, 0] - x0) / eps), 0), m0 - 1)
        b = min(max(int((pts[i, 1] - y0) / eps), 0), m1 - 1)
        cx[i] = a
        cy[i] = b
        if counts[a * m1 + b] == 0:
            occupied += 1
        counts[a * m1 + b] += 1
    return cx, cy, counts, occupied


@njit(cache=True, nogil=True)
def _bucket(cx, cy, m1, counts, points):  # pragma: no cover - compiled
    """Counting sort by box: start (boxes + 1,), order, sorted points and box coordinates."""
    n = cx.shape[0]
    start = np.zeros(counts.shape[0] + 1, dtype=np.int64)
    for b in range(counts.shape[0]):
        start[b + 1] = start[b] + counts[b]
    fill = start[:-1].copy()
    order = np.empty(n, dtype=np.int64)
    for i in range(n):
        box = cx[i] * m1 + cy[i]
        order[fill[box]] = i
        fill[box] += 1
    d = points.shape[1]
    pts = np.empty((n, d))
    scx = np.empty(n, dtype=np.int64)
    scy = np.empty(n, dtype=np.int64)
    if d >= 3:  # within each box, order the points by their third coordinate
        for b in range(counts.shape[0]):
            a, e = start[b], start[b + 1]
            if 1 < e - a <= 32:  # insertion sort (stable) for the usual small box
                for i in range(a + 1, e):
                    o = order[i]
                    z = points[o, 2]
                    j = i - 1
                    while j >= a and points[order[j], 2] > z:
                        order[j + 1] = order[j]
                        j -= 1
                    order[j + 1] = o
            elif e - a > 32:
                seg = order[a:e].copy()
                zs = np.empty(e - a)
                for i in range(e - a):
                    zs[i] = points[seg[i], 2]
                order[a:e] = seg[np.argsort(zs, kind="mergesort")]
    for pos in range(n):
        o = order[pos]
        for k in range(d):
            pts[pos, k] = points[o, k]
        scx[pos] = cx[o]
        scy[pos] = cy[o]
    return start, order, pts, scx, scy


@njit(cache=True, nogil=True)
def _bounds(pts):  # pragma: no cover - compiled
    """Least value (2,) and range (2,) of the first two coordinates, in one pass."""
    low = np.full(2, np.inf)
    high = np.full(2, -np.inf)
    for i in range(pts.shape[0]):
        for k in range(2):
            v = pts[i, k]
            if v < low[k]:
                low[k] = v
            if v > high[k]:
                high[k] = v
    return low, high - low
