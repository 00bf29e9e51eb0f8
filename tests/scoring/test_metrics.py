"""Repetition metrics on analytic cases (identical, scaled, shifted, concentric circles)."""

from __future__ import annotations

import numpy as np
import pytest

from echoreo.errors import ScoringInputError
from echoreo.scoring.metrics import (
    compare_repetition,
    distances_from_origin,
    iqr_ratio,
    median_ratio,
    shape_distance,
)


def _signal(n=200, rate=50.0):
    t = np.arange(n) / rate
    return np.sin(2 * np.pi * 0.5 * t) + 0.4 * np.sin(2 * np.pi * 1.3 * t + 0.7)


def test_identical_repetitions_are_indistinguishable():
    """A follower equal to the leader: ratios 1, distances 0, full cross-recurrence
    determinism (analytic)."""
    x = _signal()
    c = compare_repetition(x, x.copy(), 3, 12)
    assert c.median_ratio == pytest.approx(1.0)
    assert c.iqr_ratio == pytest.approx(1.0)
    assert c.wasserstein == pytest.approx(0.0, abs=1e-12)
    assert c.shape_distance == pytest.approx(0.0, abs=1e-12)
    assert c.crqa["DET"] == pytest.approx(1.0, abs=0.02)
    assert c.leader_pc.shape == c.follower_pc.shape == (200 - 24, 3)


@pytest.mark.parametrize("gain", [0.5, 0.8, 1.5])
def test_a_gain_scales_the_distance_ratios_exactly(gain):
    """Embedding and PCA projection are linear: a follower g * x has every distance from
    the origin multiplied by g, so median and IQR ratios equal g and the Wasserstein
    distance of the distance distributions equals |g - 1| times the leader's mean
    distance (analytic; W1 of a scaled sample)."""
    x = _signal()
    c = compare_repetition(x, gain * x, 3, 12)
    assert c.median_ratio == pytest.approx(gain, rel=1e-9)
    assert c.iqr_ratio == pytest.approx(gain, rel=1e-9)
    size = np.median(c.leader_dist)
    assert c.wasserstein == pytest.approx(abs(gain - 1) * c.leader_dist.mean() / size,
                                          rel=1e-9)


def test_an_offset_does_not_count():
    """Each repetition is centred on its own mean, so a constant offset (sensor bias, a
    different neutral posture) changes nothing."""
    x = _signal()
    a = compare_repetition(x, x + 3.0, 3, 12)
    assert a.shape_distance == pytest.approx(0.0, abs=1e-9)


def test_shape_distance_of_concentric_circles():
    """Densely sampled circles of radius 1 and 2: every point is 1 from the other circle,
    so the symmetric mean nearest-neighbour distance over the leader's size 1 is 1
    (analytic; Dubuisson & Jain 1994 modified Hausdorff, mean form)."""
    th = np.linspace(0, 2 * np.pi, 2000, endpoint=False)
    a = np.column_stack([np.cos(th), np.sin(th)])
    assert shape_distance(a, 2 * a, 1.0) == pytest.approx(1.0, abs=1e-3)
    assert np.isnan(shape_distance(a, a, 0.0))
    d = distances_from_origin(a)
    assert median_ratio(2 * d, d) == pytest.approx(2.0)
    assert np.isnan(iqr_ratio(d, d))  # constant distances: IQR 0


def test_too_short_or_constant_repetitions_are_clear_errors():
    x = _signal(30)
    with pytest.raises(ScoringInputError, match="shorter than the embedding window"):
        compare_repetition(x, x, 3, 12)
    with pytest.raises(ScoringInputError, match="constant"):
        compare_repetition(np.ones(100), x[:30].repeat(4)[:100], 3, 5)
    with pytest.raises(ScoringInputError, match="differ in length"):
        compare_repetition(x, x[:-1], 2, 2)
