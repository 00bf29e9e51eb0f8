"""Compiled kernels of the recurrence analysis (numba, CPU only, nogil).

Used by :mod:`echoreo.scoring.radius` (the sampled distances from which a radius
is selected: :func:`sampled_distances`, :func:`bracket`) and by
:mod:`echoreo.scoring.recurrence` (the row-wise line counting of :func:`count_rows`
and the strips it searches, :func:`strips`). Norms are passed as the codes of
``NORM_CODES``: 0 maximum, 1 Euclidean, 2 Manhattan.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["NORM_CODES", "bracket", "count_rows", "sampled_distances", "strips"]

#: Norm name -> the code the kernels take.
NORM_CODES = {"max": 0, "euclidean": 1, "manhattan": 2}

# Bit position of the lowest set bit of a uint64 by de Bruijn multiplication
# (Leiserson, Prokop & Randall 1998, "Using de Bruijn sequences to index a 1 in a
# computer word"): the top six bits of lowbit * _DEBRUIJN index _DEBRUIJN_TABLE.
_DEBRUIJN = np.uint64(0x03F79D71B4CB0A89)
_DEBRUIJN_TABLE = np.zeros(64, dtype=np.int64)
for _bit in range(64):
    _DEBRUIJN_TABLE[((1 << _bit) * 0x03F79D71B4CB0A89 % (1 << 64)) >> 58] = _bit
del _bit


@njit(cache=True, nogil=True)
def _distance_row(xs, i, yt, norm, out):  # pragma: no cover - compiled
    """Distances of x_i to every column of ``yt`` (m, c), coordinates in order and
    differences taken as x - y (the same floating-point values as :func:`count_rows`
    compares, before the square root of the Euclidean norm)."""
    out[:] = 0.0
    for k in range(yt.shape[0]):
        xk = xs[i, k]
        row = yt[k]
        if norm == 0:
            for c in range(row.shape[0]):
                out[c] = max(out[c], abs(xk - row[c]))
        elif norm == 1:
            for c in range(row.shape[0]):
                gap = xk - row[c]
                out[c] += gap * gap
        else:
            for c in range(row.shape[0]):
                out[c] += abs(xk - row[c])
    if norm == 1:
        for c in range(out.shape[0]):
            out[c] = math.sqrt(out[c])


@njit(cache=True, nogil=True)
def sampled_distances(xs, rows, yt, cols, theiler, norm, out):  # pragma: no cover - compiled
    """Distances of the pairs (rows[r], cols[c]) outside the Theiler window, into ``out``;
    returns how many. ``yt`` (m, cols.size) holds the columns' points."""
    row = np.empty(cols.shape[0])
    count = 0
    for r in range(rows.shape[0]):
        _distance_row(xs, rows[r], yt, norm, row)
        for c in range(cols.shape[0]):
            if theiler > 0 and abs(rows[r] - cols[c]) < theiler:
                continue
            out[count] = row[c]
            count += 1
    return count


@njit(cache=True, nogil=True)
def bracket(xs, rows, yt, cols, theiler, norm, lo, hi, out):  # pragma: no cover - compiled
    """Of the sampled distances: how many are below ``lo``, and those in [lo, hi] put into
    ``out``; returns (below, inside), inside = -1 when ``out`` is too small."""
    row = np.empty(cols.shape[0])
    below = 0
    inside = 0
    for r in range(rows.shape[0]):
        _distance_row(xs, rows[r], yt, norm, row)
        for c in range(cols.shape[0]):
            d = row[c]
            if d > hi or (theiler > 0 and abs(rows[r] - cols[c]) < theiler):
                continue
            if d < lo:
                below += 1
            else:
                if inside == out.shape[0]:
                    return below, -1
                out[inside] = d
                inside += 1
    return below, inside


@njit(cache=True, nogil=True)
def _strip_of(v, origin, width, n_strips):  # pragma: no cover - compiled
    """Strip index of coordinate value v; monotone in v, clipped to 0 .. n_strips - 1."""
    q = (v - origin) / width
    if q < 0.0:
        return 0
    if q >= n_strips - 1:
        return n_strips - 1
    return int(q)


@njit(cache=True, nogil=True)
def strips(values, origin, width, n_strips):  # pragma: no cover - compiled
    """Strip index (:func:`_strip_of`) of every value of ``values`` (n,), as int64."""
    out = np.empty(values.shape[0], dtype=np.int64)
    for c in range(values.shape[0]):
        out[c] = _strip_of(values[c], origin, width, n_strips)
    return out


@njit(cache=True, nogil=True)
def _first_above(keys, lo, hi, value, past_equal):  # pragma: no cover - compiled
    """First index c in lo .. hi of the ascending ``keys`` with keys[c] >= value, or with
    keys[c] > value when ``past_equal`` (binary search; hi if there is none)."""
    while lo < hi:
        mid = (lo + hi) >> 1
        if keys[mid] < value or (past_equal and keys[mid] == value):
            lo = mid + 1
        else:
            hi = mid
    return lo


@njit(cache=True, nogil=True)
def _lowest(bits):  # pragma: no cover - compiled
    """Position (0-63) of the lowest set bit of a nonzero uint64."""
    low = bits & (~bits + np.uint64(1))
    return _DEBRUIJN_TABLE[(low * _DEBRUIJN) >> np.uint64(58)]


@njit(cache=True, nogil=True)
def count_rows(xs, yt, col_of, strip_start, origin, width, n_strips, ca, cb, radius, reach,
               norm, theiler, auto, r0, r1, diag_hist, vert_hist, head,
               tail):  # pragma: no cover - compiled
    """Line-length histograms of rows r0 .. r1 - 1 of the recurrence plot.

    ``yt`` (m, n_y) holds the columns' points sorted by strip of coordinate ``ca`` and,
    within a strip, by coordinate ``cb``; ``col_of`` maps a sorted point to its column and
    ``strip_start`` (n_strips + 1) gives each strip's first sorted point. Vertical
    lines go to ``vert_hist``; diagonal lines (k = j - i + n - 1) that neither start
    at row r0 nor are open at row r1 - 1 go to ``diag_hist``; those that start at r0
    and end inside give their length in ``head[k]``, those open at r1 - 1 in
    ``tail[k]`` (= r1 - r0 when the line also starts at r0), for joining across parts.
    """
    n = xs.shape[0]
    ny = yt.shape[1]
    m = xs.shape[1]
    keys = yt[cb]
    buf = np.empty(ny)
    words = ny // 64 + 1  # at least one always-zero bit after column ny - 1
    cur = np.zeros(words, dtype=np.uint64)
    prev = np.zeros(words, dtype=np.uint64)
    start = np.empty(n + ny - 1, dtype=np.int64)
    one = np.uint64(1)
    s63 = np.uint64(63)
    limit = radius * radius if norm == 1 else radius
    for i in range(r0, r1):
        cur[:] = 0
        # Recurrent columns of row i: the strips within reach of x_i[ca], and in each the
        # points within reach in cb (a binary search), compared in every coordinate.
        xa = xs[i, ca]
        xb = xs[i, cb]
        s_hi = _strip_of(xa + reach, origin, width, n_strips)
        for s in range(_strip_of(xa - reach, origin, width, n_strips), s_hi + 1):
            c0 = _first_above(keys, strip_start[s], strip_start[s + 1], xb - reach, False)
            c1 = _first_above(keys, c0, strip_start[s + 1], xb + reach, True)
            dist = buf[: c1 - c0]
            dist[:] = 0.0
            for k in range(m):
                xk = xs[i, k]
                coord = yt[k, c0:c1]
                if norm == 0:
                    for c in range(c1 - c0):
                        dist[c] = max(dist[c], abs(xk - coord[c]))
                elif norm == 1:
                    for c in range(c1 - c0):
                        gap = xk - coord[c]
                        dist[c] += gap * gap
                else:
                    for c in range(c1 - c0):
                        dist[c] += abs(xk - coord[c])
            for c in range(c1 - c0):
                j = col_of[c0 + c]
                cur[j >> 6] |= np.uint64(dist[c] <= limit) << np.uint64(j & 63)
        if theiler > 0:
            for j in range(max(0, i - theiler + 1), min(ny, i + theiler)):
                cur[j >> 6] &= ~(one << np.uint64(j & 63))
        # Vertical lines: runs of set bits, a start (no bit before) then an end (none after).
        open_at = -1
        for t in range(words):
            c_w = cur[t]
            if c_w == 0:
                continue
            before = cur[t - 1] >> s63 if t > 0 else np.uint64(0)
            after = cur[t + 1] << s63 if t + 1 < words else np.uint64(0)
            starts = c_w & ~((c_w << one) | before)
            ends = c_w & ~((c_w >> one) | after)
            while True:
                if open_at < 0:
                    if starts == 0:
                        break
                    open_at = 64 * t + _lowest(starts)
                    starts &= starts - one
                else:
                    if ends == 0:
                        break
                    vert_hist[64 * t + _lowest(ends) - open_at + 1] += 1
                    ends &= ends - one
                    open_at = -1
        if auto and theiler == 0 and i < ny:
            # The line of identity is never a diagonal line (Marwan et al. 2007).
            cur[i >> 6] &= ~(one << np.uint64(i & 63))
        # Diagonal lines: (i, j) starts one if (i - 1, j - 1) is empty; (i - 1, j) ends
        # one if (i, j + 1) is empty.
        for t in range(words):
            c_w = cur[t]
            p_w = prev[t]
            if c_w == 0 and p_w == 0:
                continue
            if c_w != 0:
                shifted = (p_w << one) | (prev[t - 1] >> s63 if t > 0 else np.uint64(0))
                starts = c_w & ~shifted
                while starts:
                    start[64 * t + _lowest(starts) - i + n - 1] = i
                    starts &= starts - one
            if p_w != 0:
                shifted = (c_w >> one) | (cur[t + 1] << s63 if t + 1 < words else np.uint64(0))
                ends = p_w & ~shifted
                while ends:
                    k = 64 * t + _lowest(ends) - i + n  # (i - 1, j) lies on j - (i - 1) + n - 1
                    if start[k] == r0:
                        head[k] = i - r0
                    else:
                        diag_hist[i - start[k]] += 1
                    ends &= ends - one
        cur, prev = prev, cur
    last = r1 - 1
    for t in range(words):
        p_w = prev[t]
        while p_w:
            k = 64 * t + _lowest(p_w) - last + n - 1
            tail[k] = r1 - start[k]
            p_w &= p_w - one

