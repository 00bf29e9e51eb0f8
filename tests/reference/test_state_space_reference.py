"""Embedding parameters, RQA and PCA against published values, analytic results and
independent reference libraries (pyunicorn, scikit-learn).

Every expected value names its source beside the check.
"""

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from echoreo.scoring import PCA, ami, cao, choose_delay, choose_dimension, embed, fnn, rqa


def lorenz_x(n, rng, dt=0.01, transient_s=20.0):
    """x(t) of the Lorenz system (sigma 10, rho 28, beta 8/3; Lorenz 1963), sampled every
    ``dt`` s after a transient, from a seeded initial condition near (1, 1, 1)."""
    def rhs(_t, s):
        x, y, z = s
        return [10.0 * (y - x), x * (28.0 - z) - y, x * y - 8.0 / 3.0 * z]

    s0 = np.array([1.0, 1.0, 1.0]) + rng.uniform(-0.5, 0.5, 3)
    t = transient_s + dt * np.arange(n)
    sol = solve_ivp(rhs, (0.0, t[-1]), s0, t_eval=t, rtol=1e-9, atol=1e-9, method="DOP853")
    return sol.y[0]


def henon_x(n, rng, transient=200):
    """x_k of the Henon map x' = 1 - a x^2 + y, y' = b x with a 1.4, b 0.3 (Henon 1976)."""
    x, y = rng.uniform(-0.1, 0.1, 2)
    out = np.empty(n + transient)
    for k in range(n + transient):
        x, y = 1.0 - 1.4 * x * x + y, 0.3 * x
        out[k] = x
    return out[transient:]


@pytest.mark.parametrize("period", [20.0, 50.0 * math.sqrt(2.0), 100.0],
                         ids=["P20", "P70.7", "P100"])
def test_sine_first_ami_minimum_is_a_quarter_period(period):
    """Analytic: for x = sin(2 pi t / P), the pair (x_t, x_{t+tau}) is most spread, and its
    mutual information smallest, at tau = P / 4, where x_{t+tau} is the cosine. Samples come
    in whole steps, so the chosen delay is within one sample of P / 4."""
    x = np.sin(2.0 * np.pi * np.arange(4000) / period)
    assert abs(choose_delay(x) - period / 4.0) <= 1.0


@pytest.mark.parametrize("period", [100.0, 250.0], ids=["P100", "P250"])
def test_noisy_sine_delay_is_a_quarter_period(period):
    """Analytic as above: with white noise (standard deviation 0.1, a tenth of the
    amplitude) added, the mutual information is still smallest at tau = P / 4; its curve
    is flat there, and the chosen delay stays within 8 % of P / 4 (at least 2 samples;
    our tolerance) for every one of ten seeds."""
    quarter = period / 4.0
    for seed in range(10):
        rng = np.random.default_rng(seed)
        x = np.sin(2.0 * np.pi * np.arange(5000) / period) + 0.1 * rng.standard_normal(5000)
        tau = choose_delay(x, max_lag=int(0.6 * period))
        assert abs(tau - quarter) <= max(2.0, 0.08 * quarter), (seed, tau)


def test_ami_at_lag_zero_is_the_entropy_and_decreases_at_first():
    """I(0) = H(X) >= I(tau) (Fraser & Swinney 1986: mutual information of a variable with
    itself is its entropy, the largest value)."""
    x = np.sin(2.0 * np.pi * np.arange(3000) / 64.0)
    values = ami(x, 16)
    assert np.all(values[1:] <= values[0]) and values[1] < values[0]


@pytest.fixture(scope="module")
def lorenz():
    return lorenz_x(6000, np.random.default_rng(20260))


@pytest.fixture(scope="module")
def henon():
    return henon_x(3000, np.random.default_rng(1976))


@pytest.mark.parametrize("method", ["fnn", "cao"])
def test_lorenz_dimension_is_three(lorenz, method):
    """Kennel, Brown & Abarbanel (1992) and Cao (1997): the Lorenz attractor reconstructed
    from x(t) needs dimension 3. Delay from the first AMI minimum (Fraser & Swinney 1986)."""
    delay = choose_delay(lorenz)
    # 0.14-0.2 s; with 64 bins at n = 50,000 the minimum sits at 0.16 s (our computation).
    assert 14 <= delay <= 20
    assert choose_dimension(lorenz, delay, method=method) == 3


@pytest.mark.parametrize("method", ["fnn", "cao"])
def test_henon_dimension_is_two(henon, method):
    """Kennel et al. (1992) and Cao (1997): the Henon map embeds in dimension 2 (delay 1)."""
    assert choose_dimension(henon, 1, method=method) == 2


def test_fnn_of_henon_drops_to_zero_at_two(henon):
    """Kennel et al. (1992), Henon: the fraction of false neighbours is zero from d = 2."""
    f = fnn(henon, 1, max_dim=5)
    assert f[0] > 0.3 and np.all(f[1:] < 0.005)


def test_cao_e2_is_near_one_for_white_noise():
    """Cao (1997): for a random series E2(d) ~ 1 for every d, since future values do not
    depend on the past; the deviation at n = 4000 is a few per cent (sampling error)."""
    x = np.random.default_rng(42).standard_normal(4000)
    _, e2 = cao(x, 1, max_dim=8)
    assert np.all(np.abs(e2 - 1.0) < 0.08)


def test_cao_e2_departs_from_one_for_henon(henon):
    """Cao (1997): for deterministic data some E2(d) differ clearly from 1 (E2(1) ~ 0 here)."""
    _, e2 = cao(henon, 1, max_dim=6)
    assert e2.min() < 0.5


def _pyunicorn_rqa(x, radius, metric, lmin, vmin):
    pyunicorn_ts = pytest.importorskip("pyunicorn.timeseries")
    rp = pyunicorn_ts.RecurrencePlot(x, metric=metric, threshold=radius, silence_level=3)
    return {
        "RR": rp.recurrence_rate(),
        "DET": rp.determinism(l_min=lmin),
        "L": rp.average_diaglength(l_min=lmin),
        "Lmax": rp.max_diaglength(),
        "ENTR": rp.diag_entropy(l_min=lmin),
        "LAM": rp.laminarity(v_min=vmin),
        "TT": rp.trapping_time(v_min=vmin),
    }


def _cases():
    rng = np.random.default_rng(7)
    lor = lorenz_x(1400, np.random.default_rng(3))
    t = np.arange(900) * 0.05
    noisy_sine = np.sin(t) + 0.3 * rng.standard_normal(900)
    return {
        "lorenz-m3-max": (np.ascontiguousarray(embed(lor, 3, 15)), 4.0, "supremum", "max", 2),
        "lorenz-m3-euclid-l3": (np.ascontiguousarray(embed(lor, 3, 15)), 5.0, "euclidean",
                                "euclidean", 3),
        "noisy-sine-m2-manhattan": (np.ascontiguousarray(embed(noisy_sine, 2, 8)), 0.6,
                                    "manhattan", "manhattan", 2),
        "noise-m1": (rng.standard_normal((800, 1)), 0.2, "supremum", "max", 2),
    }


@pytest.mark.parametrize("case", list(_cases()))
def test_rqa_equals_pyunicorn(case):
    """Reference library: pyunicorn's RecurrencePlot (Donges et al. 2015, Chaos 25:113101)
    on the same embedded vectors, norm and threshold. Same conventions: the identity line is
    in RR and in the vertical lines but not among the diagonal lines. (pyunicorn counts
    d < eps, we d <= eps; with continuous data no distance equals eps exactly.)"""
    x, radius, metric, norm, lmin = _cases()[case]
    ours = rqa(x, radius=radius, norm=norm, lmin=lmin, vmin=2)
    ref = _pyunicorn_rqa(x, radius, metric, lmin, 2)
    assert ours["Lmax"] == ref["Lmax"]
    for key in ("RR", "DET", "L", "ENTR", "LAM", "TT"):
        # pyunicorn adds 1e-10 to denominators, hence a relative tolerance of 1e-9.
        assert ours[key] == pytest.approx(float(ref[key]), rel=1e-9), key


@pytest.mark.parametrize("cross", [False, True], ids=["auto", "cross"])
def test_white_noise_determinism_follows_independent_recurrences(cross):
    """Analytic (Marwan et al. 2007, white noise): if recurrences are independent with
    probability RR, a recurrence point is isolated on its diagonal with probability
    (1 - RR)^2, so DET = 1 - (1 - RR)^2 for lmin = 2. For m = 1 white noise, R_ij and
    R_{i+1,j+1} involve disjoint samples, hence are independent. With n = 1500 there are
    about 2.2e5 recurrence points; the binomial standard error of DET is sqrt(DET (1 - DET)
    / 2.2e5) ~ 0.001, so a tolerance of 0.006 allows for the residual correlation (shared
    samples along rows) and still rejects the structured data of the other tests."""
    rng = np.random.default_rng(99)
    x = rng.standard_normal((1500, 1))
    y = rng.standard_normal((1500, 1)) if cross else None
    out = rqa(x, y, recurrence_rate=0.1, theiler=1 if not cross else 0)
    assert out["RR"] == pytest.approx(0.1, rel=0.02)
    assert out["DET"] == pytest.approx(1.0 - (1.0 - out["RR"]) ** 2, abs=0.006)


def test_pca_equals_scikit_learn():
    """Reference library: sklearn.decomposition.PCA(svd_solver="full") (Pedregosa et al.
    2011, JMLR 12:2825), whose sign convention (largest |entry| of each axis positive,
    scikit-learn >= 1.5) we share, so axes and scores agree without sign alignment."""
    sk = pytest.importorskip("sklearn.decomposition")
    rng = np.random.default_rng(5)
    leader = rng.standard_normal((400, 5)) @ rng.standard_normal((5, 5))
    follower = leader + 0.3 * rng.standard_normal((400, 5))
    for k in (None, 2):
        ours = PCA(n_components=k).fit(leader)
        ref = sk.PCA(n_components=k, svd_solver="full").fit(leader)
        np.testing.assert_allclose(ours.mean_, ref.mean_, rtol=1e-12)
        np.testing.assert_allclose(ours.explained_variance_, ref.explained_variance_, rtol=1e-10)
        np.testing.assert_allclose(ours.explained_variance_ratio_,
                                   ref.explained_variance_ratio_, rtol=1e-10)
        np.testing.assert_allclose(ours.components_, ref.components_, atol=1e-10)
        np.testing.assert_allclose(ours.transform(follower), ref.transform(follower),
                                   atol=1e-9)
