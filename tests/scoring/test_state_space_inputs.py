"""Short, constant, NaN-containing and multichannel input: a clear message or a documented
fallback, never a crash; and the compiled RQA against a brute-force dense computation."""

import math

import numpy as np
import pytest

from echoreo.errors import ScoringInputError
from echoreo.scoring import (
    PCA,
    ami,
    cao,
    choose_delay,
    choose_dimension,
    fnn,
    recurrence_radius,
    rqa,
)
from echoreo.scoring import recurrence as recurrence_module


def test_constant_series_cannot_choose_a_delay():
    with pytest.raises(ScoringInputError, match="constant"):
        choose_delay(np.full(200, 3.0))


def test_constant_series_has_zero_mutual_information():
    """Documented: I(tau) = 0 for a constant series (its binned entropy is 0)."""
    np.testing.assert_array_equal(ami(np.full(50, 2.0), 5), np.zeros(6))


@pytest.mark.parametrize("func", [fnn, cao], ids=["fnn", "cao"])
def test_constant_series_cannot_choose_a_dimension(func):
    with pytest.raises(ScoringInputError, match="constant"):
        func(np.ones(500), 1)


def test_nan_is_located():
    x = np.sin(np.arange(300) / 5.0)
    x[[17, 40]] = np.nan
    with pytest.raises(ScoringInputError, match=r"2 NaN or infinite value.*sample 17 of 300"):
        choose_delay(x)


def test_multichannel_series_is_refused_with_a_hint():
    with pytest.raises(ScoringInputError, match="3 channels") as info:
        choose_delay(np.zeros((100, 3)))
    assert "principal component" in str(info.value)


def test_fnn_too_short_names_the_samples_needed():
    """10 dimensions at delay 5 need 10 * 5 + 10 = 60 samples."""
    with pytest.raises(ScoringInputError, match="at least 60 samples"):
        fnn(np.random.default_rng(0).standard_normal(59), 5)


def test_choose_dimension_lowers_max_dim_on_short_series():
    """Documented fallback: max_dim is capped at (n - 10) // delay when the series is short."""
    x = np.random.default_rng(1).standard_normal(40)
    assert 1 <= choose_dimension(x, 10) <= 3
    with pytest.raises(ScoringInputError, match="too short"):
        choose_dimension(x, 20)


def test_choose_delay_fallback_for_a_monotone_ami():
    """A slow ramp-like series has no AMI minimum within max_lag: the documented 1/e rule
    or max_lag is returned, never an error."""
    x = np.cumsum(np.random.default_rng(2).standard_normal(400))
    tau = choose_delay(x, max_lag=5)
    assert 1 <= tau <= 5


def test_choose_delay_short_series():
    with pytest.raises(ScoringInputError, match="at least 4"):
        choose_delay([1.0, 2.0, 3.0])
    assert choose_delay([0.0, 1.0, 0.0, 1.0, 0.0]) == 1


def test_rqa_radius_arguments():
    x = np.random.default_rng(0).standard_normal((50, 2))
    with pytest.raises(ScoringInputError, match="exactly one"):
        rqa(x)
    with pytest.raises(ScoringInputError, match="exactly one"):
        rqa(x, radius=0.1, recurrence_rate=0.05)
    with pytest.raises(ScoringInputError, match="same embedding dimension"):
        rqa(x, np.zeros((10, 3)), radius=0.1)
    with pytest.raises(ScoringInputError, match="recurrence_rate"):
        rqa(x, recurrence_rate=1.5)


def test_rqa_without_lines_gives_nan_not_a_crash():
    """Documented: measures whose denominator vanishes are NaN; Lmax is 0."""
    x = np.arange(20.0)[:, None]
    out = rqa(x, x + 100.0, radius=0.5)
    assert out["RR"] == 0.0 and out["Lmax"] == 0
    assert all(math.isnan(out[k]) for k in ("DET", "L", "ENTR", "LAM", "TT"))


def test_rqa_of_constant_trajectory():
    """Every pair recurs: one line per diagonal, lengths 29, 28, ..., 1 on either side of the
    identity line (which is excluded); the two corner cells are lines of length 1."""
    out = rqa(np.zeros((30, 2)), radius=0.0)
    assert out["RR"] == 1.0 and out["LAM"] == 1.0 and out["TT"] == 30.0
    assert out["Lmax"] == 29 and out["L"] == 15.5
    assert out["DET"] == pytest.approx((30 * 29 - 2) / (30 * 29))


def test_pca_constant_data_fallback():
    pca = PCA().fit(np.ones((10, 3)))
    np.testing.assert_array_equal(pca.components_, np.eye(3))
    np.testing.assert_array_equal(pca.explained_variance_ratio_, np.zeros(3))


def test_pca_errors():
    with pytest.raises(ScoringInputError, match="not fitted"):
        PCA().transform(np.zeros((3, 2)))
    with pytest.raises(ScoringInputError, match="at least 2 samples"):
        PCA().fit(np.zeros((1, 2)))
    with pytest.raises(ScoringInputError, match="exceeds"):
        PCA(n_components=3).fit(np.zeros((5, 2)))
    pca = PCA().fit(np.random.default_rng(0).standard_normal((10, 3)))
    with pytest.raises(ScoringInputError, match="features"):
        pca.transform(np.zeros((4, 2)))


def dense_rqa(x, y, radius, lmin, vmin, theiler, norm):
    """Brute-force RQA from the full recurrence matrix (Marwan et al. 2007 definitions),
    written independently of the compiled code: loops over diagonals and rows."""
    auto = y is None
    y = x if auto else y
    p = {"max": np.inf, "euclidean": 2, "manhattan": 1}[norm]
    diff = x[:, None, :] - y[None, :, :]
    dist = np.linalg.norm(diff, ord=p, axis=2) if p != np.inf else np.abs(diff).max(axis=2)
    r = dist <= radius
    n, m = r.shape
    ii, jj = np.indices(r.shape)
    window = np.abs(ii - jj) < theiler
    r[window] = False
    pairs = n * m - window.sum()

    def runs(v):
        out, k = [], 0
        for b in [*list(v), False]:
            if b:
                k += 1
            elif k:
                out.append(k)
                k = 0
        return out

    diag = []
    for k in range(-(n - 1), m):
        if auto and k == 0:
            continue
        diag += runs(np.diagonal(r, offset=k))
    vert = []
    for i in range(n):
        vert += runs(r[i])
    diag, vert = np.array(diag, int), np.array(vert, int)
    dl, vl = diag[diag >= lmin], vert[vert >= vmin]
    nan = float("nan")
    entr = nan
    if dl.size:
        _, c = np.unique(dl, return_counts=True)
        q = c / c.sum()
        entr = float(-(q * np.log(q)).sum())
    return {
        "RR": r.sum() / pairs,
        "DET": dl.sum() / diag.sum() if diag.size else nan,
        "L": dl.mean() if dl.size else nan,
        "Lmax": int(diag.max()) if diag.size else 0,
        "ENTR": entr,
        "LAM": vl.sum() / vert.sum() if vert.size else nan,
        "TT": vl.mean() if vl.size else nan,
    }


def _trajectory(rng, n):
    t = np.arange(n) * 0.07
    return np.column_stack([np.sin(t), np.cos(1.3 * t)]) + 0.2 * rng.standard_normal((n, 2))


def _bounds(kind, n):
    """Row boundaries of the parts the line counting is split into (see ``_row_bounds``)."""
    if kind == "default":
        return None
    if kind == "one":
        return [0, n]
    if kind == "halves":
        return [0, n // 2, n]
    # awkward: a part of one row at each end and in the middle, and uneven parts between
    cuts = {0, 1, n // 3, n // 3 + 1, n - 1, n} if n > 3 else {0, n}
    return sorted(cuts)


def _split(monkeypatch, kind):
    if kind != "default":
        monkeypatch.setattr(recurrence_module, "_row_bounds", lambda n, cells: _bounds(kind, n))


@pytest.mark.parametrize("split", ["default", "one", "halves", "awkward"])
@pytest.mark.parametrize(("cross", "theiler", "norm", "lmin", "vmin"),
                         [(False, 0, "max", 2, 2), (False, 3, "euclidean", 2, 3),
                          (True, 0, "max", 3, 2), (True, 2, "manhattan", 2, 5),
                          (True, 0, "max", 2, 34)],
                         ids=["auto", "auto-theiler3-l2-vmin3", "cross-lmin3",
                              "cross-theiler2-l1-vmin5", "cross-vmin34"])
def test_rqa_equals_dense_brute_force(monkeypatch, split, cross, theiler, norm, lmin, vmin):
    """Internal check: the row-wise line counting, run in one part or split into parts whose
    lines are joined, equals the dense definition. Not an outside reference (see
    tests/reference)."""
    _split(monkeypatch, split)
    rng = np.random.default_rng(11)
    x = _trajectory(rng, 150)
    y = _trajectory(rng, 131) if cross else None
    radius = 0.45 if vmin < 30 else 1.2
    got = rqa(x, y, radius=radius, lmin=lmin, vmin=vmin, theiler=theiler, norm=norm)
    want = dense_rqa(x, y, radius, lmin, vmin, theiler, norm)
    assert got["Lmax"] == want["Lmax"]
    for key in ("RR", "DET", "L", "ENTR", "LAM", "TT"):
        assert got[key] == pytest.approx(want[key], rel=1e-12, nan_ok=True), key


def _random_case(rng):
    """A small random recurrence problem: smooth, noisy or integer-valued points (the last
    with many distances exactly equal to the radius), auto or cross, any norm and window."""
    n, m = int(rng.integers(1, 90)), int(rng.integers(1, 5))
    kind = int(rng.integers(3))
    if kind == 0:
        def make(k):
            return rng.integers(0, 4, (k, m)).astype(float)
        radius = float(rng.integers(0, 4))
    else:
        noise = 0.05 if kind == 1 else 0.6
        step = rng.uniform(0.02, 0.4)

        def make(k):
            t = np.arange(k) * step
            return (np.column_stack([np.sin(t + c) for c in range(m)])
                    + noise * rng.standard_normal((k, m)))
        radius = float(rng.uniform(0.0, 1.2))
    y = make(int(rng.integers(1, 90))) if rng.random() < 0.5 else None
    return {"x": make(n), "y": y, "radius": radius,
            "norm": ["max", "euclidean", "manhattan"][int(rng.integers(3))],
            "theiler": int(rng.integers(0, 4)) if rng.random() < 0.4 else 0,
            "lmin": int(rng.integers(1, 5)), "vmin": int(rng.integers(1, 5))}


@pytest.mark.parametrize("split", ["one", "halves", "awkward"])
def test_rqa_equals_dense_brute_force_on_random_cases(monkeypatch, split):
    """Internal check on 150 small random cases (auto and cross, every norm, Theiler
    windows, lmin and vmin from 1 to 4, ties d = eps): the dense definition, exactly for the
    integer counts. Not an outside reference."""
    _split(monkeypatch, split)
    rng = np.random.default_rng(2026)
    checked = 0
    for _ in range(150):
        case = _random_case(rng)
        x, y = case.pop("x"), case.pop("y")
        n_y = x.shape[0] if y is None else y.shape[0]
        if x.shape[0] * n_y <= recurrence_module._window_cells(x.shape[0], n_y,
                                                                case["theiler"]):
            with pytest.raises(ScoringInputError, match="excludes every pair"):
                rqa(x, y, **case)
            continue
        got = rqa(x, y, **case)
        want = dense_rqa(x, y, case["radius"], case["lmin"], case["vmin"], case["theiler"],
                         case["norm"])
        assert got["Lmax"] == want["Lmax"], case
        for key in ("RR", "DET", "L", "ENTR", "LAM", "TT"):
            assert got[key] == pytest.approx(want[key], rel=1e-12, nan_ok=True), (key, case)
        checked += 1
    assert checked > 120


@pytest.mark.parametrize("cross", [False, True], ids=["auto", "cross"])
def test_split_rows_give_the_single_thread_result(monkeypatch, cross):
    """Lines crossing the row splits are joined: every split (default threads, halves, many
    uneven parts, parts of one row) gives exactly the one-part result on a smooth
    trajectory whose long diagonal lines cross every split."""
    rng = np.random.default_rng(3)

    def smooth(n):
        t = np.arange(n) * 0.05
        return np.column_stack([np.sin(t), np.cos(1.3 * t)]) + 0.01 * rng.standard_normal((n, 2))

    x = smooth(2100)
    y = smooth(1900) if cross else None
    kw = {"radius": 0.2, "theiler": 0, "norm": "max"}
    default = rqa(x, y, **kw)  # 2100 x 2100 cells: two threads on a two-core machine
    with monkeypatch.context() as patch:
        patch.setattr(recurrence_module, "_row_bounds", lambda n, cells: [0, n])
        single = rqa(x, y, **kw)
    assert default == single
    assert single["Lmax"] > 100
    for bounds in ([0, 1050, 2100], [0, 1, 2, 3, 700, 701, 1999, 2100],
                   [*range(0, 2100, 97), 2100]):
        with monkeypatch.context() as patch:
            patch.setattr(recurrence_module, "_row_bounds", lambda n, cells, b=bounds: b)
            assert rqa(x, y, **kw) == single, bounds


def test_recurrence_radius_meets_the_rate_exactly_on_short_input():
    """With every pair sampled, the radius is the ceil(RR * P)-th smallest distance; in
    auto-recurrence each distance occurs twice (i, j and j, i), so k or k + 1 pairs recur."""
    x = np.random.default_rng(5).standard_normal((300, 2))
    pairs = 300 * 300 - 300
    k = math.ceil(0.05 * pairs)
    r = recurrence_radius(x, recurrence_rate=0.05, theiler=1)
    count = round(rqa(x, radius=r, theiler=1)["RR"] * pairs)
    assert count in (k, k + 1)
    y = np.random.default_rng(6).standard_normal((200, 2))
    r = recurrence_radius(x, y, recurrence_rate=0.1)
    assert rqa(x, y, radius=r)["RR"] == pytest.approx(6000 / 60000)
