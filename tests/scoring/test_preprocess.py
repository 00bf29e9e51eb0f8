"""Preprocessing: Winter's cutoff correction, zero-phase low-pass, resampling with gaps."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from echoreo.errors import ScoringInputError
from echoreo.scoring.preprocess import (
    corrected_cutoff,
    finite_runs,
    lowpass,
    principal_axis,
    resample_uniform,
    winter_correction,
)


def test_winter_correction_two_passes_is_0802():
    """C = (2^(1/2) - 1)^(1/4) = 0.802 for a 2nd-order filter run twice (Winter 2009,
    Biomechanics and Motor Control of Human Movement, 4th ed., section 3.4.4)."""
    assert winter_correction(2, 2) == pytest.approx(0.802, abs=5e-4)
    assert winter_correction(1, 2) == pytest.approx(1.0)
    assert corrected_cutoff(6.0) == pytest.approx(6.0 / 0.8022, rel=1e-3)


def test_dual_pass_minus_3db_at_requested_cutoff():
    """The forward-backward filter's magnitude |H(fc')|^2 at the requested cutoff is
    1/sqrt(2) (-3 dB): the purpose of the correction (analytic, Winter 2009 sec. 3.4.4).
    Checked on scipy's frequency response of the single-pass design, squared."""
    rate, fc = 200.0, 6.0
    sos = signal.butter(2, corrected_cutoff(fc), fs=rate, output="sos")
    _, h = signal.sosfreqz(sos, worN=[fc], fs=rate)
    # fc / C is Winter's analog-domain correction; the bilinear transform's frequency
    # warping makes it exact only for fc << rate / 2 (METHODS.md 2.3): 0.5 % at 6 of 100 Hz
    assert abs(h[0]) ** 2 == pytest.approx(1 / np.sqrt(2), rel=0.01)


def test_lowpass_keeps_slow_and_removes_fast_sine_without_phase_shift():
    """A 1 Hz sine passes a 6 Hz zero-phase low-pass unchanged in phase and nearly in
    amplitude; a 20 Hz sine is removed (analytic Butterworth response)."""
    rate = 100.0
    t = np.arange(2000) / rate
    slow = np.sin(2 * np.pi * 1.0 * t)
    y = lowpass(slow + 0.5 * np.sin(2 * np.pi * 20.0 * t), rate, 6.0)
    mid = slice(200, 1800)
    assert np.max(np.abs(y[mid] - slow[mid])) < 0.01


def test_lowpass_never_filters_across_nan():
    """NaN samples stay NaN and the runs either side are filtered on their own: a step in
    the second run does not leak into the first."""
    x = np.concatenate([np.zeros(100), [np.nan] * 5, np.ones(100)])
    y = lowpass(x, 50.0, 6.0)
    assert np.isnan(y[100:105]).all()
    assert np.allclose(y[:100], 0.0)
    assert np.allclose(y[105:], 1.0)


def test_lowpass_cutoff_beyond_nyquist_is_a_clear_error():
    with pytest.raises(ScoringInputError, match="Nyquist"):
        lowpass(np.zeros(50), 20.0, 9.0)


def test_resample_interpolates_but_never_across_long_gaps():
    """Linear interpolation is exact for a line; grid points inside a gap longer than
    max_gap_s are NaN and marked invalid (definition in METHODS.md 2.3)."""
    t = np.concatenate([np.arange(0, 1, 0.01), np.arange(1.5, 2.0, 0.01)])
    x = 2.0 * t + 1.0
    rs = resample_uniform(t, x, 50.0, 0, 100, max_gap_s=0.2)
    ok = rs.valid
    assert np.allclose(rs.x[ok, 0], 2.0 * rs.t[ok] + 1.0)
    inside = (rs.t > 0.99) & (rs.t < 1.5)
    assert not ok[inside].any()
    assert np.isnan(rs.x[inside]).all()
    assert not ok[rs.t > 1.99].any()  # after the last sample


def test_resample_drops_nan_rows_and_unsorted_input_is_sorted():
    t = np.array([0.3, 0.0, 0.1, 0.2])
    x = np.array([[3.0], [0.0], [np.nan], [2.0]])
    rs = resample_uniform(t, x, 10.0, 0, 4, max_gap_s=0.25)
    assert rs.valid.all()
    assert np.allclose(rs.x[:, 0], [0.0, 1.0, 2.0, 3.0])


def test_finite_runs():
    assert finite_runs(np.array([True, True, False, True])) == [(0, 2), (3, 4)]
    assert finite_runs(np.array([], dtype=bool)) == []


def test_principal_axis_of_a_line_and_sign_rule():
    """Points along (1, -2, 2)/3 have that direction as first principal axis (Pearson 1901),
    signed so that the largest-magnitude component is positive."""
    rng = np.random.default_rng(3)
    s = rng.standard_normal(500)
    u0 = np.array([1.0, -2.0, 2.0]) / 3.0
    x = s[:, None] * u0 + 0.01 * rng.standard_normal((500, 3))
    u = principal_axis(x)
    assert abs(abs(u @ u0) - 1.0) < 1e-3
    assert u[np.argmax(np.abs(u))] > 0
    assert np.allclose(principal_axis(np.zeros((10, 3))), [1.0, 0.0, 0.0])
