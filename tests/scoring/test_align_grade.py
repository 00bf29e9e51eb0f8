"""Lag estimation by cross-correlation, grade components, bands and the asymmetry rule."""

from __future__ import annotations

import math

import numpy as np
import pytest

from echoreo.scoring.align import estimate_lag, lagged_correlation
from echoreo.scoring.grade import (
    FLAGS,
    GradeConfig,
    asymmetric,
    band_for,
    component_scores,
    grade_from_components,
    still_grade,
)


def _chirp(n, rate):
    t = np.arange(n) / rate
    return np.sin(2 * np.pi * (0.3 + 0.1 * t) * t)


@pytest.mark.parametrize("shift", [0, 7, 23, 60])
def test_known_shift_is_recovered(shift):
    """A follower that is the leader delayed by k samples has its cross-correlation peak
    at k (Knapp & Carter 1976; analytic for a pure delay)."""
    rate = 50.0
    x = _chirp(800, rate)
    y = np.concatenate([np.zeros(shift), x[: 800 - shift]])
    est = estimate_lag(x, y, 100, 600, 0, 100)
    assert est.lag == shift
    assert est.correlation == pytest.approx(1.0, abs=1e-9)
    assert not est.at_edge


def test_lag_search_is_bounded_and_reports_the_edge():
    """A delay beyond the window gives a peak at the window's edge, flagged as such."""
    x = _chirp(800, 50.0)
    y = np.concatenate([np.zeros(150), x[:650]])
    est = estimate_lag(x, y, 100, 500, 0, 100)
    assert 0 <= est.lag <= 100


def test_lag_with_nan_uses_finite_pairs():
    x = _chirp(600, 50.0)
    y = np.concatenate([np.zeros(12), x[:588]])
    y[300:310] = np.nan
    est = estimate_lag(x, y, 50, 450, 0, 50)
    assert est.lag == 12
    assert math.isnan(lagged_correlation(x, y, 0, 10, 1000))


def test_default_flags_are_the_contract_list():
    """DEVELOPERS.md, "Score records": exactly these flags."""
    assert FLAGS == ("lag", "amplitude_low", "amplitude_high", "asymmetry", "head_moving",
                     "skipped", "missing_data")


def test_perfect_copy_scores_100_and_components_fall_monotonically():
    cfg = GradeConfig()
    perfect = {"median_ratio": 1.0, "iqr_ratio": 1.0, "wasserstein": 0.0,
               "shape_distance": 0.0, "crqa_DET": 1.0, "correlation": 1.0, "lag_s": 0.0,
               "variability": 0.0}
    assert grade_from_components(component_scores(perfect, cfg), cfg) == pytest.approx(100)
    grades = []
    for g in (1.0, 0.8, 0.6, 0.4):
        m = dict(perfect, median_ratio=g, iqr_ratio=g, wasserstein=1 - g)
        grades.append(grade_from_components(component_scores(m, cfg), cfg))
    assert grades == sorted(grades, reverse=True)
    assert len(set(grades)) == 4
    # the ratio score is symmetric in log scale: twice as large = half as large
    assert (component_scores({"median_ratio": 2.0}, cfg)["amplitude"]
            == component_scores({"median_ratio": 0.5}, cfg)["amplitude"])


def test_undefined_components_are_left_out():
    cfg = GradeConfig()
    g = grade_from_components(component_scores({"median_ratio": 1.0}, cfg), cfg)
    assert g == pytest.approx(100.0)
    assert math.isnan(grade_from_components(component_scores({}, cfg), cfg))


def test_bands_and_config_validation():
    cfg = GradeConfig()
    assert band_for(100.0, cfg) == "faithful"
    assert band_for(0.0, cfg) == "absent"
    assert band_for(float("nan"), cfg) == "unscored"
    with pytest.raises(ValueError):
        GradeConfig(w_amplitude=-1.0)
    with pytest.raises(ValueError):
        GradeConfig(bands=((50.0, "a"), (70.0, "b"), (0.0, "c")))
    with pytest.raises(ValueError):
        GradeConfig(**{f.name: 0.0 for f in __import__("dataclasses").fields(GradeConfig)
                       if f.name.startswith("w_")})


def test_still_grade_and_asymmetry_rule():
    cfg = GradeConfig()
    assert still_grade(0.0, "head_pose", cfg) == 100.0
    assert still_grade(0.1, "head_pose", cfg) < still_grade(0.05, "head_pose", cfg)
    assert not asymmetric(0.6, 0.62, cfg)        # both arms weak alike: not asymmetric
    assert asymmetric(0.5, 1.0, cfg)             # one arm half the other
    assert asymmetric(0.0, 1.0, cfg)             # one arm skipped
    assert not asymmetric(float("nan"), 1.0, cfg)
