"""Recurrence quantification analysis (Marwan et al. 2007), computed blockwise and sparsely.

The recurrence matrix is never stored. Rows are processed in blocks; each block's
recurrences are found by a sweep over the coordinate of largest spread (only
pairs whose gap in that coordinate is within the radius are compared), placed
in a boolean block of ``(rows + 2) x (m + 2)`` cells, and turned into the
lengths of vertical lines (complete within a block) and the starts and ends of
diagonal lines; diagonal lines that cross a block boundary are carried as one
open start row per diagonal. Peak memory is therefore set by the block size,
not by N^2 (see ``_CELL_BUDGET`` and ``_POINT_BUDGET``).
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from typing import Literal

import numpy as np

from echoreo.errors import ScoringInputError
from echoreo.scoring._checks import as_points, check_positive_int

__all__ = ["RQA_KEYS", "recurrence_radius", "rqa"]

#: Keys of the dictionary returned by :func:`rqa`, in this order.
RQA_KEYS = ("RR", "DET", "L", "Lmax", "ENTR", "LAM", "TT")

Norm = Literal["max", "euclidean", "manhattan"]

#: Cells of one boolean row block (32 MiB); bounds memory when recurrences are sparse.
_CELL_BUDGET = 1 << 25
#: Recurrence points of one row block; bounds memory when recurrences are dense.
_POINT_BUDGET = 1 << 21
#: Rows compared at once in the sweep (they are consecutive in the sweep order).
_GROUP = 32
#: Largest number of row and column samples used to pick a radius from a recurrence rate.
_RADIUS_ROWS = 600
_RADIUS_COLS = 4000


def _check_norm(norm: str) -> str:
    if norm not in ("max", "euclidean", "manhattan"):
        raise ScoringInputError(f"norm must be 'max', 'euclidean' or 'manhattan'; got {norm!r}")
    return norm


def _pair_distances(a: np.ndarray, b: np.ndarray, norm: str) -> np.ndarray:
    """Distances between every row of ``a`` (g, m) and every row of ``b`` (w, m).

    Computed in row chunks with in-place operations (no large temporaries).
    """
    out = np.empty((a.shape[0], b.shape[0]))
    b_t = np.ascontiguousarray(b.T)
    chunk = max(1, (1 << 18) // max(b.shape[0], 1))
    tmp = np.empty((min(chunk, a.shape[0]), b.shape[0]))
    for r0 in range(0, a.shape[0], chunk):
        rows = a[r0 : r0 + chunk]
        acc = out[r0 : r0 + chunk]
        gap = tmp[: rows.shape[0]]
        for k in range(a.shape[1]):
            target = acc if k == 0 else gap
            np.subtract.outer(rows[:, k], b_t[k], out=target)
            if norm == "euclidean":
                np.multiply(target, target, out=target)
            else:
                np.abs(target, out=target)
            if k:
                if norm == "max":
                    np.maximum(acc, gap, out=acc)
                else:
                    acc += gap
        if norm == "euclidean":
            np.sqrt(acc, out=acc)
    return out


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


def _window_cells(n: int, m: int, theiler: int) -> int:
    """Number of cells (i, j), 0 <= i < n, 0 <= j < m, with |i - j| < theiler."""
    total = 0
    for offset in range(-(theiler - 1), theiler):
        lo = max(0, -offset)
        hi = min(n, m - offset)
        total += max(0, hi - lo)
    return total


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
        Theiler window :math:`w` as in :func:`rqa`.
    norm : {"max", "euclidean", "manhattan"}
        Vector norm, as in :func:`rqa`.

    Returns
    -------
    float
        The radius, in the unit of the state vectors.
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
    dist = _pair_distances(xs[rows], ys[cols], norm)
    if theiler > 0:
        keep = np.abs(rows[:, None] - cols[None, :]) >= theiler
        values = dist[keep]
    else:
        values = dist.ravel()
    if values.size == 0:
        raise ScoringInputError(
            f"the Theiler window {theiler} excludes every pair of a recurrence plot of "
            f"{xs.shape[0]} x {ys.shape[0]} points"
        )
    k = min(values.size, max(1, math.ceil(rate * values.size)))
    return float(np.partition(values, k - 1)[k - 1])


class _LineCounter:
    """Blockwise recurrence points and line-length histograms of one recurrence plot.

    Work buffers are allocated once and reused for every block: allocating and
    releasing large temporaries per block makes the kernel map and unmap pages
    over and over, which costs more than the arithmetic on a busy machine.
    """

    def __init__(self, xs: np.ndarray, ys: np.ndarray, radius: float, theiler: int,
                 auto: bool, norm: str, vmin: int = 2):
        self.xs, self.ys = xs, ys
        self.n, self.m_cols = xs.shape[0], ys.shape[0]
        self.radius, self.theiler, self.auto, self.norm = radius, theiler, auto, norm
        both = np.concatenate([xs, ys]) if not auto else xs
        # Sweep along the coordinate of largest spread: it prunes the most pairs.
        self.key = int(np.argmax(both.max(axis=0) - both.min(axis=0)))
        col_order = np.argsort(ys[:, self.key], kind="stable")
        # Coordinates of y sorted along the sweep key, one contiguous row per coordinate.
        self.ys_t = np.ascontiguousarray(ys[col_order].T)
        self.key_sorted = self.ys_t[self.key]
        self.col_slot = col_order + 1  # dense-block column of each sorted y
        self.diag_hist = np.zeros(max(self.n, self.m_cols) + 1, dtype=np.int64)
        self.vmin = vmin
        # Vertical lines of at least vmin: their number and their points.
        self.vert_long_lines = 0
        self.vert_long_points = 0
        self.points = 0
        # Global start row of the diagonal line open at the current block boundary, per
        # diagonal k = j - i + n (0 .. n + m); -1 where no line is open.
        self.open_start = np.full(self.n + self.m_cols + 1, -1, dtype=np.int64)
        self.words = -(-(self.m_cols + 2) // 64)  # 64-bit words per packed row
        self.stride = 64 * self.words
        self.max_rows = max(1, min(self.n, _CELL_BUDGET // self.stride))
        cells = _GROUP * self.m_cols
        self._gap = np.empty(cells)
        self._mask = np.empty(cells, dtype=bool)
        self._tmp = np.empty(cells, dtype=bool)
        size = (self.max_rows + 2) * self.words
        self._w = [np.empty(size, dtype=np.uint64) for _ in range(6)]
        self._count8 = np.empty(size, dtype=np.uint8)
        self._dense = [np.empty((self.max_rows + 2) * self.stride, dtype=bool) for _ in range(2)]

    def _within(self, pts: np.ndarray, c0: int, c1: int) -> np.ndarray:
        """Boolean (g, c1 - c0): point i within the radius of sorted column c0 + j."""
        g, w = pts.shape[0], c1 - c0
        gap = self._gap[: g * w].reshape(g, w)
        mask = self._mask[: g * w].reshape(g, w)
        tmp = self._tmp[: g * w].reshape(g, w)
        r = self.radius
        cols = self.ys_t[:, c0:c1]
        if self.norm == "max":
            for k in range(pts.shape[1]):
                np.subtract.outer(pts[:, k], cols[k], out=gap)
                np.abs(gap, out=gap)
                np.less_equal(gap, r, out=mask if k == 0 else tmp)
                if k:
                    mask &= tmp
            return mask
        acc = np.zeros((g, w))
        for k in range(pts.shape[1]):
            np.subtract.outer(pts[:, k], cols[k], out=gap)
            if self.norm == "euclidean":
                np.multiply(gap, gap, out=gap)
            else:
                np.abs(gap, out=gap)
            acc += gap
        np.less_equal(acc, r * r if self.norm == "euclidean" else r, out=mask)
        return mask

    def _fill(self, dense: np.ndarray, lo: int, hi: int, first: int) -> None:
        """Mark the recurrences of rows lo..hi-1 in ``dense`` (row r at ``r - first``,
        column j at ``j + 1``)."""
        rows = np.arange(lo, hi)
        order = rows[np.argsort(self.xs[lo:hi, self.key], kind="stable")]
        r = self.radius
        for g in range(0, order.shape[0], _GROUP):
            grp = order[g : g + _GROUP]
            kv = self.xs[grp, self.key]
            c0 = int(np.searchsorted(self.key_sorted, kv.min() - r, side="left"))
            c1 = int(np.searchsorted(self.key_sorted, kv.max() + r, side="right"))
            if c1 <= c0:
                continue
            mask = self._within(self.xs[grp], c0, c1)
            dense[(grp - first)[:, None], self.col_slot[None, c0:c1]] = mask
        if self.theiler > 0:
            # Clear the Theiler band |i - j| < w of these rows.
            for offset in range(-(self.theiler - 1), self.theiler):
                cols = rows + offset
                ok = (cols >= 0) & (cols < self.m_cols)
                dense[rows[ok] - first, cols[ok] + 1] = False

    def run(self) -> None:
        n = self.n
        rows_per_block = min(self.max_rows, 64)
        # The dense block of the next rows is filled on a second thread while this one
        # counts lines (numpy releases the GIL in both); two dense buffers alternate.
        with ThreadPoolExecutor(max_workers=1) as pool:
            a, slot = 0, 0
            b = min(n, a + rows_per_block)
            pending = pool.submit(self._dense_block, a, b, slot)
            while a < n:
                dense = pending.result()
                points = int(np.count_nonzero(dense))
                per_row = max(points / (b - a + 2), 1.0)
                rows_per_block = int(max(1, min(self.max_rows, _POINT_BUDGET / per_row)))
                a_next, b_next = b, min(n, b + rows_per_block)
                if a_next < n:
                    pending = pool.submit(self._dense_block, a_next, b_next, 1 - slot)
                self._count(dense, a, b)
                a, b, slot = a_next, b_next, 1 - slot

    def _dense_block(self, a: int, b: int, slot: int) -> np.ndarray:
        """Boolean block of rows a-1 .. b (zero rows outside the plot), padded columns."""
        dense = self._dense[slot][: (b - a + 2) * self.stride].reshape(b - a + 2, self.stride)
        dense.fill(False)
        self._fill(dense, max(0, a - 1), min(self.n, b + 1), a - 1)
        return dense

    def _popcount(self, words: np.ndarray) -> int:
        if hasattr(np, "bitwise_count"):
            out = self._count8[: words.size]
            np.bitwise_count(words, out=out)
            return int(out.sum(dtype=np.int64))
        return _popcount(words)

    def _count(self, dense: np.ndarray, a: int, b: int) -> None:
        rows, words = b - a, self.words
        packed = np.packbits(dense, axis=None, bitorder="little").view("<u8")
        size = packed.size
        left, right, t1, t2, t3, t4 = (w[:size] for w in self._w)
        own = slice(words, (rows + 1) * words)
        self.points += self._popcount(packed[own])
        _shift_up(packed, 1, left, t1)     # bit c holds column c - 1
        _shift_down(packed, 1, right, t1)  # bit c holds column c + 1
        self._count_vertical(packed, own, t1, t2, t3, t4)
        n_own = rows * words
        diag = t4[:n_own]
        np.copyto(diag, packed[own])
        if self.auto and self.theiler == 0:
            # The line of identity is never a diagonal line (Marwan et al. 2007).
            col = np.arange(a, b) + 1
            where = np.arange(rows) * words + col // 64
            diag[where] &= ~(np.uint64(1) << (col % 64).astype(np.uint64))
        d_start = t1[:n_own]
        np.invert(left[:n_own], out=d_start)            # no point up-left of it
        d_start &= diag
        d_end = t2[:n_own]
        np.invert(right[2 * words : (rows + 2) * words], out=d_end)  # none down-right
        d_end &= diag
        # Isolated points (lines of length 1) are only counted; longer lines are followed.
        work = t3[:n_own]
        np.bitwise_and(d_start, d_end, out=work)
        self.diag_hist[1] += self._popcount(work)
        np.invert(d_end, out=work)
        work &= d_start
        self._follow_diagonals(dense.ravel(), _bit_positions(work) + words * 64, a, b)

    def _follow_diagonals(self, flat: np.ndarray, starts: np.ndarray, a: int, b: int) -> None:
        """Lengths of the diagonal lines starting in rows a..b-1 or carried into row a.

        Every line is followed down-right one step per pass (all lines at once) until
        its next cell is empty; a line still going at row b is carried to the next
        block as its start row. Work is one look-up per line point.
        """
        n, stride = self.n, self.stride
        carried = np.flatnonzero(self.open_start >= 0)
        # Continuation cells at row a (dense row 1) of the lines carried in.
        carried_pos = stride + (a + carried - n) + 1
        pos = np.concatenate([carried_pos, starts])
        row = pos // stride - 1 + a  # global row of the current cell
        origin = np.concatenate([self.open_start[carried], row[carried.size :]])
        self.open_start[carried] = -1
        finished: list[np.ndarray] = []
        while pos.size:
            pos += stride + 1  # the next cell down-right
            going = flat[pos]
            ended = ~going
            if ended.any():
                finished.append(row[ended] - origin[ended] + 1)
            row += 1
            beyond = going & (row == b)  # continues in the next block
            if beyond.any():
                k = (pos[beyond] % stride) - 1 - row[beyond] + n
                self.open_start[k] = origin[beyond]
                going &= ~beyond
            pos, row, origin = pos[going], row[going], origin[going]
        if finished:
            lengths = np.concatenate(finished)
            self.diag_hist += np.bincount(lengths, minlength=self.diag_hist.size)[
                : self.diag_hist.size]

    def _count_vertical(self, packed: np.ndarray, own: slice, t1: np.ndarray, t2: np.ndarray,
                        t3: np.ndarray, t4: np.ndarray) -> None:
        """Vertical lines (fixed row i, consecutive columns j) without listing them.

        With ``E`` the points whose ``vmin - 1`` left neighbours are all recurrent, the
        lines of length >= vmin are the runs of ``E`` (one start each) and their points are
        ``E`` spread ``vmin - 1`` columns back; both are bit counts.
        """
        vmin = self.vmin
        if vmin > 32:
            _shift_up(packed, 1, t1, t2)
            np.invert(t1, out=t1)
            t1 &= packed
            _shift_down(packed, 1, t3, t2)
            np.invert(t3, out=t3)
            t3 &= packed
            lengths = _bit_positions(t3[own]) - _bit_positions(t1[own]) + 1
            long = lengths[lengths >= vmin]
            self.vert_long_lines += int(long.size)
            self.vert_long_points += int(long.sum())
            return
        eroded = t3
        np.copyto(eroded, packed)
        for s in range(1, vmin):
            _shift_up(packed, s, t1, t2)
            eroded &= t1
        _shift_up(eroded, 1, t1, t2)
        np.invert(t1, out=t1)
        t1 &= eroded
        self.vert_long_lines += self._popcount(t1[own])
        spread = t4
        np.copyto(spread, eroded)
        for s in range(1, vmin):
            _shift_down(eroded, s, t1, t2)
            spread |= t1
        self.vert_long_points += self._popcount(spread[own])


def _popcount(words: np.ndarray) -> int:
    """Number of set bits in a uint64 array."""
    if hasattr(np, "bitwise_count"):
        return int(np.bitwise_count(words).sum(dtype=np.int64))
    return int(np.unpackbits(words.view(np.uint8)).sum(dtype=np.int64))


def _shift_up(words: np.ndarray, s: int, out: np.ndarray, tmp: np.ndarray) -> np.ndarray:
    """Bit string moved ``s`` (1 to 63) bits towards higher positions (bit c takes c - s),
    written into ``out``; ``tmp`` is scratch of the same length."""
    np.left_shift(words, np.uint64(s), out=out)
    np.right_shift(words[:-1], np.uint64(64 - s), out=tmp[1:])
    out[1:] |= tmp[1:]
    return out


def _shift_down(words: np.ndarray, s: int, out: np.ndarray, tmp: np.ndarray) -> np.ndarray:
    """Bit string moved ``s`` (1 to 63) bits towards lower positions (bit c takes c + s),
    written into ``out``; ``tmp`` is scratch of the same length."""
    np.right_shift(words, np.uint64(s), out=out)
    np.left_shift(words[1:], np.uint64(64 - s), out=tmp[:-1])
    out[:-1] |= tmp[:-1]
    return out


def _bit_positions(words: np.ndarray) -> np.ndarray:
    """Ascending positions of the set bits of a little-endian uint64 bit string."""
    idx = np.flatnonzero(words)
    if idx.size == 0:
        return np.empty(0, dtype=np.int64)
    flat = np.flatnonzero(np.unpackbits(words[idx].view(np.uint8), bitorder="little").view(bool))
    return idx[flat >> 6] * 64 + (flat & 63)


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
    Memory grows with the row block (at most 32 MiB of booleans and 2 M points
    at once), never with :math:`n_x n_y`. Time grows with the number of pairs
    whose gap in the swept coordinate is within :math:`\varepsilon`.

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
    counter = _LineCounter(xs, ys, radius, theiler, auto, norm, vmin)
    counter.run()
    d_hist = counter.diag_hist
    d_len = np.arange(d_hist.size)
    d_long = d_hist[lmin:]
    v_points = float(counter.vert_long_points)
    nonzero = np.flatnonzero(d_hist)
    return {
        "RR": counter.points / pairs,
        "DET": _ratio(float(d_len[lmin:] @ d_long), float(d_len @ d_hist)),
        "L": _ratio(float(d_len[lmin:] @ d_long), float(d_long.sum())),
        "Lmax": int(nonzero[-1]) if nonzero.size else 0,
        "ENTR": _entropy(d_long),
        "LAM": _ratio(v_points, float(counter.points)),
        "TT": _ratio(v_points, float(counter.vert_long_lines)),
    }
