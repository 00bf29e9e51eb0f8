"""Our zero-phase low-pass and Wasserstein distance against scipy (independent references)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal, stats

from echoreo.scoring.metrics import wasserstein_1d
from echoreo.scoring.preprocess import corrected_cutoff, lowpass


@pytest.mark.parametrize("rate,fc", [(50.0, 6.0), (100.0, 8.0), (30.0, 4.0)])
def test_lowpass_equals_scipy_filtfilt(rate, fc):
    """lowpass() equals scipy.signal.filtfilt with butter(2, fc / 0.802) in (b, a) form
    (scipy.signal reference; Winter 2009 section 3.4.4 for the corrected cutoff)."""
    rng = np.random.default_rng(11)
    x = np.cumsum(rng.standard_normal((600, 3)), axis=0)
    b, a = signal.butter(2, corrected_cutoff(fc), fs=rate)
    ref = signal.filtfilt(b, a, x, axis=0)
    assert np.allclose(lowpass(x, rate, fc), ref, atol=1e-8)


@pytest.mark.parametrize("nu,nv", [(50, 50), (37, 120), (1, 9)])
def test_wasserstein_equals_scipy(nu, nv):
    """Our W1 (area between the empirical CDFs, Vallender 1973) equals
    scipy.stats.wasserstein_distance on random samples of equal and unequal size."""
    rng = np.random.default_rng(nu * 1000 + nv)
    u = rng.gamma(2.0, 1.0, nu)
    v = rng.normal(1.0, 2.0, nv)
    assert wasserstein_1d(u, v) == pytest.approx(stats.wasserstein_distance(u, v), rel=1e-12)


def test_wasserstein_of_a_shift_is_the_shift():
    """Shifting a sample by c moves it by exactly W1 = |c| (analytic)."""
    u = np.linspace(0, 1, 101)
    assert wasserstein_1d(u, u + 0.3) == pytest.approx(0.3)
