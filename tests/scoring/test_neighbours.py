"""The box-assisted nearest-neighbour search against brute force with scipy.

Reference: ``scipy.spatial.distance.cdist`` (Virtanen et al. 2020, SciPy 1.0) gives
every pairwise distance; the nearest other point is the row minimum with the
diagonal excluded. ``scipy.spatial.cKDTree`` is the second reference on inputs too
large for a full distance matrix.
"""

import numpy as np
import pytest
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist

from echoreo.scoring import _neighbours
from echoreo.scoring._neighbours import nearest_other
from echoreo.scoring.embedding import embed


def distance_matrix(points, p, nonzero):
    """All pairwise distances (scipy), the diagonal (and zeros if nonzero) set to inf."""
    dmat = cdist(points, points, metric="euclidean" if p == 2.0 else "chebyshev")
    np.fill_diagonal(dmat, np.inf)
    if nonzero:
        dmat[dmat == 0.0] = np.inf
    return dmat


def check(points, p, nonzero):
    """Distances equal brute force; the index is the smallest of the nearest points.

    Ties are judged with a relative tolerance of 1e-12: the search compares squared
    Euclidean distances, and two sums of squares that differ in the last bit can
    round to the same square root.
    """
    idx, dist = nearest_other(points, p=p, nonzero=nonzero)
    dmat = distance_matrix(points, p, nonzero)
    ref_dist = dmat.min(axis=1)
    np.testing.assert_allclose(dist, ref_dist, rtol=1e-12, atol=0.0)
    lone = ~np.isfinite(ref_dist)
    assert np.all(idx[lone] == -1)
    rows = np.flatnonzero(~lone)
    tied = dmat[rows] <= ref_dist[rows, None] * (1.0 + 1e-12)
    assert np.all(tied[np.arange(rows.size), idx[rows]]), "returned point is not a nearest one"
    exact = tied.sum(axis=1) == 1
    first = np.argmax(tied, axis=1)
    np.testing.assert_array_equal(idx[rows][exact], first[exact])
    return idx


def lorenz_like(n, rng):
    """A thin curved set in 3-D: points near a helix, as delay vectors often are."""
    t = np.sort(rng.uniform(0, 20 * np.pi, n))
    return np.column_stack([np.cos(t), np.sin(t), 0.05 * t]) + 0.01 * rng.standard_normal((n, 3))


@pytest.mark.parametrize("p", [2.0, np.inf])
@pytest.mark.parametrize("nonzero", [False, True])
@pytest.mark.parametrize("dim", [1, 2, 3, 5, 8])
def test_random_points_equal_brute_force(p, nonzero, dim):
    rng = np.random.default_rng(100 + dim)
    check(rng.standard_normal((700, dim)), p, nonzero)


@pytest.mark.parametrize("p", [2.0, np.inf])
@pytest.mark.parametrize("nonzero", [False, True])
def test_quantised_points_with_many_ties_and_duplicates(p, nonzero):
    """Rounded data: exact duplicates and equidistant neighbours everywhere."""
    rng = np.random.default_rng(7)
    for dim in (1, 2, 3):
        points = np.round(rng.standard_normal((600, dim)) * 3.0) / 3.0
        check(points, p, nonzero)


@pytest.mark.parametrize("nonzero", [False, True])
def test_ties_on_a_line_go_to_the_smallest_index(nonzero):
    """One dimension, values on a grid of quarters (differences exact in binary): the
    answer is the smallest index among all equally near points, whatever order the
    sort leaves equal values in (brute force over the full distance matrix)."""
    rng = np.random.default_rng(17)
    points = rng.integers(-12, 13, size=(800, 1)) / 4.0
    idx, dist = nearest_other(points, nonzero=nonzero)
    dmat = distance_matrix(points, 2.0, nonzero)
    ref = dmat.min(axis=1)
    np.testing.assert_array_equal(dist, ref)
    np.testing.assert_array_equal(idx, np.argmax(dmat == ref[:, None], axis=1))


@pytest.mark.parametrize("p", [2.0, np.inf])
def test_thin_set_delay_vectors_and_noise(p):
    rng = np.random.default_rng(11)
    check(lorenz_like(900, rng), p, False)
    x = np.sin(np.arange(1200) * 0.07) + 0.05 * rng.standard_normal(1200)
    for dim in (2, 3, 4):
        check(np.ascontiguousarray(embed(x, dim, 20)), p, True)


def test_clusters_far_apart_and_lone_outliers():
    rng = np.random.default_rng(3)
    a = rng.standard_normal((300, 2)) * 1e-3
    b = rng.standard_normal((300, 2)) * 1e-3 + 50.0
    lone = np.array([[25.0, -40.0], [-80.0, 3.0]])
    check(np.vstack([a, b, lone]), 2.0, False)
    check(np.vstack([a, b, lone]), np.inf, True)


def test_constant_grid_coordinates_and_identical_points():
    rng = np.random.default_rng(5)
    flat = np.column_stack([np.zeros(200), np.ones(200), rng.standard_normal(200)])
    check(flat, 2.0, False)  # the k-d tree answers
    same = np.ones((50, 3))
    idx, dist = nearest_other(same, p=np.inf, nonzero=True)
    assert np.all(idx == -1) and np.all(np.isinf(dist))
    idx, dist = nearest_other(same, p=2.0, nonzero=False)
    assert np.all(dist == 0.0) and np.all(idx != np.arange(50))
    line = np.column_stack([np.arange(100.0), np.full(100, 2.0)])  # one live grid axis
    check(line, 2.0, False)


def test_few_points():
    idx, dist = nearest_other(np.zeros((1, 2)))
    assert idx.tolist() == [-1] and np.isinf(dist[0])
    idx, dist = nearest_other(np.array([[0.0, 0.0], [3.0, 4.0]]))
    assert idx.tolist() == [1, 0] and dist.tolist() == [5.0, 5.0]
    with pytest.raises(ValueError, match="p must be 2 or inf"):
        nearest_other(np.zeros((3, 2)), p=1.0)


@pytest.mark.parametrize("p", [2.0, np.inf])
def test_threaded_search_on_a_large_set_equals_the_kd_tree(p):
    """Above the threading threshold: distances equal scipy's k-d tree."""
    rng = np.random.default_rng(21)
    n = max(2 * _neighbours._PARALLEL_FROM, 12000)
    x = np.cumsum(rng.standard_normal(n + 40))
    points = np.ascontiguousarray(embed(x, 3, 10))
    _idx, dist = nearest_other(points, p=p)
    ref, _ = cKDTree(points).query(points, k=2, p=p)
    np.testing.assert_allclose(dist, ref[:, 1], rtol=1e-12)


def test_fallback_to_the_kd_tree_gives_the_same_distances(monkeypatch):
    """With no work allowed per query the grid gives up at once and the tree answers."""
    monkeypatch.setattr(_neighbours, "_WORK_PER_QUERY", 0)
    rng = np.random.default_rng(9)
    points = rng.standard_normal((30000, 4))  # the budget slack is spent well before the end
    assert _neighbours._grid_nearest(points, 2.0, False) is None
    _idx, dist = nearest_other(points)
    ref, _ = cKDTree(points).query(points, k=2)
    np.testing.assert_allclose(dist, ref[:, 1], rtol=1e-12)


def test_concurrent_callers_share_the_thread_pool_safely():
    """Callers in several threads at once (as in a Dask worker) get the single-caller
    answer; the search threads are shared, never nested."""
    from concurrent.futures import ThreadPoolExecutor

    rng = np.random.default_rng(31)
    sets = [np.ascontiguousarray(embed(np.cumsum(rng.standard_normal(9000)), 3, 7))
            for _ in range(4)]
    alone = [nearest_other(s)[1] for s in sets]
    with ThreadPoolExecutor(4) as callers:
        together = list(callers.map(lambda s: nearest_other(s)[1], sets))
    for a, b in zip(alone, together, strict=True):
        np.testing.assert_array_equal(a, b)


def _recorder(halt_after=None):
    """A stop callable that records the rows it is given; True after ``halt_after`` calls."""
    calls = []

    def stop(rows, idx, dist):
        calls.append((rows.copy(), idx[rows].copy(), dist[rows].copy()))
        return halt_after is not None and len(calls) >= halt_after

    return stop, calls


@pytest.mark.parametrize("n", [3000, 12000])  # one search thread, and two
def test_stop_sees_every_row_once_with_its_final_answer(n):
    """A stop that never halts: the answer is the one without stop, every row reaches
    stop exactly once, and what stop saw for a row is its final answer."""
    rng = np.random.default_rng(41)
    x = np.sin(2 * np.pi * np.arange(n + 60) / 100) + 0.1 * rng.standard_normal(n + 60)
    points = np.ascontiguousarray(embed(x, 3, 25))
    plain = nearest_other(points)
    stop, calls = _recorder()
    found = nearest_other(points, stop=stop)
    np.testing.assert_array_equal(found[1], plain[1])
    rows = np.concatenate([c[0] for c in calls])
    assert len(calls) >= points.shape[0] // 256
    np.testing.assert_array_equal(np.sort(rows), np.arange(points.shape[0]))
    for r, i, d in calls:
        np.testing.assert_array_equal(found[0][r], i)
        np.testing.assert_array_equal(found[1][r], d)


def test_stop_ends_the_search():
    """True from stop: no answer is returned and no further chunk reaches stop."""
    rng = np.random.default_rng(42)
    points = np.ascontiguousarray(embed(np.cumsum(rng.standard_normal(9000)), 3, 7))
    stop, calls = _recorder(halt_after=2)
    assert nearest_other(points, stop=stop) is None
    assert len(calls) == 2
    assert all(len(c[0]) <= 256 for c in calls)


def test_stop_with_the_kd_tree(monkeypatch):
    """Where the boxes do not pay, the k-d tree answers in runs and honours stop; rows
    the boxes already passed to stop (their pilot) are not passed again."""
    monkeypatch.setattr(_neighbours, "_WORK_PER_QUERY", 0)
    rng = np.random.default_rng(43)
    points = rng.standard_normal((4000, 4))
    ref, _ = cKDTree(points).query(points, k=2)
    stop, calls = _recorder()
    _idx, dist = nearest_other(points, stop=stop)
    np.testing.assert_allclose(dist, ref[:, 1], rtol=1e-12)
    # the boxes' pilot (their first chunk) is passed first, then the tree's runs
    assert len(calls) == 1 + _neighbours._KDTREE_RUNS
    assert 0 < len(calls[0][0]) <= _neighbours._STOP_CHUNK
    np.testing.assert_array_equal(np.sort(np.concatenate([c[0] for c in calls])),
                                  np.arange(4000))
    stop, calls = _recorder(halt_after=1)
    assert nearest_other(points, stop=stop) is None and len(calls) == 1
    reported = np.zeros(4000, dtype=bool)
    reported[::3] = True
    stop, calls = _recorder()
    _neighbours._kdtree_nearest(points, 2.0, False, stop, reported)
    np.testing.assert_array_equal(np.concatenate([c[0] for c in calls]),
                                  np.flatnonzero(~reported))
