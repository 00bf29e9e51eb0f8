"""Cross-recurrence quantification (``rqa(x, y)``) against pyunicorn.

Reference library: pyunicorn 1.0 (J. F. Donges, J. Heitzig, B. Beronov, M. Wiedermann,
J. Runge, Q.-Y. Feng, L. Tupikina, V. Stolbova, R. V. Donner, N. Marwan, H. A. Dijkstra,
J. Kurths (2015). Unified functional network and nonlinear time series analysis for
complex systems science: The pyunicorn package. *Chaos* 25:113101).

- The cross-recurrence matrix CR (n_x × n_y) and the cross-recurrence rate come from
  ``pyunicorn.timeseries.CrossRecurrencePlot`` (``recurrence_matrix()``,
  ``cross_recurrence_rate()``); RR = ΣCR / (n_x n_y), every pair counted, the main
  diagonal i = j included (a cross plot has no line of identity, and pyunicorn's
  cross plot has no Theiler window).
- pyunicorn 1.0 gives no line distributions for a cross plot (``diagline_dist`` and
  ``vertline_dist`` raise ``NotImplementedError``). Its line counting of
  ``RecurrencePlot`` is applied instead, through the class's public extension point
  (a subclass overriding ``recurrence_matrix()``, built with ``skip_recurrence=True``,
  as pyunicorn's own ``CrossRecurrencePlot`` does), to the square matrix S of size
  n_y + n_x that holds CR in its lower-left block and zeros elsewhere:
  S[n_y + i, j] = CR[i, j]. Why this gives CR's lines: pyunicorn counts diagonal
  lines on the strictly lower triangle of S only (it doubles the counts, assuming a
  symmetric plot) and skips S's main diagonal; every diagonal of S below the main one
  crosses the CR block in one contiguous piece, which is one diagonal of CR (CR's
  main diagonal i = j included), and zeros lie on either side, so S's diagonal-line
  histogram is twice CR's. Its vertical lines run along a row of S (fixed row,
  consecutive columns), over the whole matrix and without doubling; a row of S is a
  row i of CR padded with zeros, so they are CR's lines of fixed i and consecutive j,
  the vertical lines of ``rqa``. DET, L and ENTR are ratios, unchanged by the factor
  2; Lmax is a position. ``test_embedding_reproduces_pyunicorns_own_line_counts``
  checks the construction on an auto-recurrence plot, where pyunicorn's own counts
  are available.
- pyunicorn counts d < ε, ``rqa`` d ≤ ε; with continuous data no distance equals ε.
  pyunicorn adds 1e-8 to the denominators of DET, L, ENTR, LAM and TT, hence a
  relative tolerance of 1e-9 (the observed agreement is at rounding level).

Definitions that differ (METHODS.md 1.7): ``rqa(x, y)`` with y given is always a
cross plot, so ``rqa(x, x)`` counts the main diagonal as a diagonal line of length n,
while ``rqa(x)`` (auto-recurrence) never does; both agree with pyunicorn's cross and
auto plots respectively (``test_cross_plot_of_a_trajectory_with_itself``).
"""

from __future__ import annotations

import numpy as np
import pytest

from echoreo.scoring import embed, rqa
from echoreo.scoring.metrics import compare_repetition

pyunicorn_ts = pytest.importorskip("pyunicorn.timeseries")

METRIC = {"max": "supremum", "euclidean": "euclidean"}
LINE_KEYS = ("DET", "L", "ENTR", "LAM", "TT")


class _MatrixPlot(pyunicorn_ts.RecurrencePlot):
    """pyunicorn's RecurrencePlot measures on a given square 0/1 matrix."""

    def __init__(self, matrix: np.ndarray, metric: str):
        super().__init__(np.zeros((matrix.shape[0], 1)), metric=metric, silence_level=3,
                         skip_recurrence=True)
        self._matrix = matrix
        self.N = matrix.shape[0]

    def recurrence_matrix(self) -> np.ndarray:
        return self._matrix


def _lower_left(cr: np.ndarray) -> np.ndarray:
    """S of size n_y + n_x with S[n_y + i, j] = cr[i, j] and zeros elsewhere."""
    n_x, n_y = cr.shape
    s = np.zeros((n_y + n_x, n_y + n_x), dtype=cr.dtype)
    s[n_y:, :n_y] = cr
    return s


def pyunicorn_crqa(x: np.ndarray, y: np.ndarray, radius: float, norm: str, lmin: int = 2,
                   vmin: int = 2) -> dict[str, float]:
    """RR, DET, L, Lmax, ENTR, LAM, TT of the cross plot of x (n_x, m) and y (n_y, m)
    from pyunicorn (CrossRecurrencePlot for CR and RR, RecurrencePlot line counts on
    the embedding of CR described in the module docstring)."""
    crp = pyunicorn_ts.CrossRecurrencePlot(x, y, metric=METRIC[norm], threshold=radius,
                                           silence_level=3)
    cr = crp.recurrence_matrix()
    rp = _MatrixPlot(_lower_left(cr), METRIC[norm])
    diag, vert = rp.diagline_dist(), rp.vertline_dist()
    # Every recurrence point of CR lies on exactly one diagonal and one vertical line.
    lengths = np.arange(1, diag.size + 1)
    assert int(lengths @ diag) == 2 * int(cr.sum())
    assert int(lengths @ vert) == int(cr.sum())
    return {
        "RR": crp.cross_recurrence_rate(),
        "DET": rp.determinism(l_min=lmin),
        "L": rp.average_diaglength(l_min=lmin),
        "Lmax": int(rp.max_diaglength()),
        "ENTR": rp.diag_entropy(l_min=lmin),
        "LAM": rp.laminarity(v_min=vmin),
        "TT": rp.trapping_time(v_min=vmin),
    }


# ------------------------------------------------------------------------- data sets


def _coupled_henon(n: int, rng: np.random.Generator, coupling: float = 0.6,
                   transient: int = 500) -> tuple[np.ndarray, np.ndarray]:
    """Driver and response Hénon maps, unidirectionally coupled (Schiff, So, Chang,
    Burke & Sauer 1996, Phys. Rev. E 54:6708):
    x' = 1.4 − x² + 0.3 u, u' = x;  y' = 1.4 − (C x + (1 − C) y) y + 0.3 v, v' = y."""
    x, u, y, v = rng.uniform(0.0, 0.5, 4)
    out = np.empty((n + transient, 2))
    for k in range(n + transient):
        x, u, y, v = (1.4 - x * x + 0.3 * u, x,
                      1.4 - (coupling * x + (1.0 - coupling) * y) * y + 0.3 * v, y)
        out[k] = (x, y)
    return out[transient:, 0], out[transient:, 1]


def _movement(t: np.ndarray) -> np.ndarray:
    """A smooth, repetition-like leader signal (sum of three harmonics)."""
    return np.sin(1.3 * t) + 0.5 * np.sin(2.9 * t + 0.4) + 0.25 * np.sin(4.7 * t + 1.1)


def _cases() -> dict[str, tuple[np.ndarray, np.ndarray, float]]:
    """name -> (x, y, radius as a fraction of the joint spread); all seeded."""
    rng = np.random.default_rng(20260)
    cases = {}
    # two noisy oscillators sharing one driver (phase-shifted, one with a harmonic)
    t = np.arange(620) * 0.05
    a = np.sin(t) + 0.2 * rng.standard_normal(t.size)
    b = np.sin(t + 0.4) + 0.3 * np.sin(3 * t) + 0.2 * rng.standard_normal(t.size)
    cases["coupled-noisy-oscillators"] = (embed(a, 3, 5), embed(b, 3, 5), 0.12)
    # leader vs lagged follower: 9 samples late, gain 0.85, noise; unequal lengths
    t = np.arange(700) * 0.04
    lead = _movement(t)
    follow = 0.85 * np.roll(lead, 9) + 0.1 * rng.standard_normal(t.size)
    cases["leader-lagged-follower"] = (embed(lead[:680], 3, 6), embed(follow[40:], 3, 6),
                                       0.08)
    # unidirectionally coupled chaotic maps (driver vs response)
    hx, hy = _coupled_henon(800, rng)
    cases["coupled-henon"] = (embed(hx, 2, 1), embed(hy, 2, 1), 0.1)
    # independent white noise, no coupling: diagonal lines by chance only
    # (DET ≈ 1 − (1 − RR)², about 0.4 here)
    cases["independent-noise"] = (rng.standard_normal((500, 2)),
                                  rng.standard_normal((450, 2)), 0.15)
    return {k: (np.ascontiguousarray(x), np.ascontiguousarray(y), f)
            for k, (x, y, f) in cases.items()}


CASES = _cases()


def _radius(x: np.ndarray, y: np.ndarray, fraction: float) -> float:
    both = np.concatenate([x, y])
    return fraction * float(np.ptp(both, axis=0).max())


def _assert_equal(ours: dict, ref: dict) -> None:
    assert ours["RR"] == pytest.approx(ref["RR"], rel=1e-12)
    assert ours["Lmax"] == ref["Lmax"]
    for key in LINE_KEYS:
        assert ours[key] == pytest.approx(float(ref[key]), rel=1e-9), key


# ---------------------------------------------------------------------------- checks


@pytest.mark.parametrize("norm", ["max", "euclidean"])
@pytest.mark.parametrize("case", list(CASES))
def test_cross_rqa_equals_pyunicorn(case, norm):
    """Reference: pyunicorn 1.0 CrossRecurrencePlot (RR) and RecurrencePlot line
    counts on the embedded cross matrix (Donges et al. 2015, Chaos 25:113101); same
    vectors, norm and radius, lmin = vmin = 2, no Theiler window."""
    x, y, fraction = CASES[case]
    radius = _radius(x, y, fraction)
    ours = rqa(x, y, radius=radius, norm=norm, lmin=2, vmin=2, theiler=0)
    ref = pyunicorn_crqa(x, y, radius, norm)
    assert ref["RR"] > 0 and ref["Lmax"] >= 2  # the plots hold lines
    _assert_equal(ours, ref)


@pytest.mark.parametrize(("lmin", "vmin"), [(3, 2), (2, 4)])
def test_cross_rqa_equals_pyunicorn_for_other_minimum_lengths(lmin, vmin):
    """Reference: as above (Donges et al. 2015), leader vs lagged follower, max norm."""
    x, y, fraction = CASES["leader-lagged-follower"]
    radius = _radius(x, y, fraction)
    ours = rqa(x, y, radius=radius, norm="max", lmin=lmin, vmin=vmin)
    _assert_equal(ours, pyunicorn_crqa(x, y, radius, "max", lmin, vmin))


def test_record_crqa_fields_equal_pyunicorn():
    """The record's crqa_* as the scoring computes them (compare_repetition: leader and
    follower PC trajectories, ε = 10 % of the leader's diameter, Euclidean norm;
    METHODS.md 3.2) against pyunicorn on the same trajectories and radius
    (Donges et al. 2015)."""
    rng = np.random.default_rng(41)
    t = np.arange(240) / 50.0
    leader = _movement(2.0 * t)
    follower = 0.9 * _movement(2.0 * (t - 0.06)) + 0.05 * rng.standard_normal(t.size)
    cmp = compare_repetition(leader, follower, 4, 6)
    ref = pyunicorn_crqa(cmp.leader_pc, cmp.follower_pc, cmp.radius, "euclidean")
    assert ref["RR"] > 0
    _assert_equal(cmp.crqa, ref)


def test_cross_plot_of_a_trajectory_with_itself():
    """Definitions differ on purpose: rqa(x, x) is a cross plot, whose main diagonal is
    an ordinary diagonal line (pyunicorn's CrossRecurrencePlot, Donges et al. 2015);
    rqa(x) is an auto plot, whose line of identity is left out of the diagonal lines
    (pyunicorn's RecurrencePlot; Marwan et al. 2007). RR, LAM and TT are the same."""
    x, _, fraction = CASES["coupled-noisy-oscillators"]
    radius = _radius(x, x, fraction)
    cross = rqa(x, x, radius=radius)
    _assert_equal(cross, pyunicorn_crqa(x, x, radius, "max"))
    auto = rqa(x, radius=radius)
    n = x.shape[0]
    assert cross["Lmax"] == n and auto["Lmax"] < n
    assert cross["DET"] > auto["DET"]
    for key in ("RR", "LAM", "TT"):
        assert cross[key] == pytest.approx(auto[key], rel=1e-12), key


def test_embedding_reproduces_pyunicorns_own_line_counts():
    """Check of the reference construction itself: for an auto-recurrence plot R (line of
    identity included), the lower-left embedding of R gives pyunicorn's own
    RecurrencePlot.vertline_dist() exactly, and half its diagonal histogram (the lines
    of R in both triangles and on the main diagonal) is pyunicorn's own diagline_dist()
    (both triangles of the symmetric plot, line of identity left out) plus that line
    (one line of length n)."""
    x, _, fraction = CASES["leader-lagged-follower"]
    radius = _radius(x, x, fraction)
    rp = pyunicorn_ts.RecurrencePlot(x, metric="supremum", threshold=radius,
                                     silence_level=3)
    n = x.shape[0]
    emb = _MatrixPlot(_lower_left(rp.recurrence_matrix()), "supremum")
    diag, vert = emb.diagline_dist(), emb.vertline_dist()
    assert not (diag % 2).any()
    own_diag = np.zeros_like(diag)
    own_diag[:n] = rp.diagline_dist()
    own_diag[n - 1] += 1
    np.testing.assert_array_equal(diag // 2, own_diag)
    np.testing.assert_array_equal(vert[:n], rp.vertline_dist())
    assert not vert[n:].any()
