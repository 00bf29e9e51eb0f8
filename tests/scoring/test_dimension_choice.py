"""choose_dimension stops each dimension's search once its false neighbours reach the
threshold; its answer must equal the rule applied to the full FNN curve of fnn().

The rule (first dimension whose fraction of false nearest neighbours is below the
threshold, else the dimension of the smallest fraction) reads Kennel, Brown &
Abarbanel (1992); the early stop must never change which dimension it picks.
"""

import numpy as np
import pytest

from echoreo.scoring import choose_dimension, fnn


def henon_x(n: int, rng: np.random.Generator) -> np.ndarray:
    """x of the Henon map (a = 1.4, b = 0.3; Henon 1976), after 1,000 transient steps."""
    x, y = rng.uniform(-0.1, 0.1, 2)
    out = np.empty(n + 1000)
    for i in range(out.size):
        x, y = 1.0 - 1.4 * x * x + y, 0.3 * x
        out[i] = x
    return out[1000:]


def noisy_sine(n: int, rng: np.random.Generator, noise: float) -> np.ndarray:
    return np.sin(2 * np.pi * np.arange(n) / 100) + noise * rng.standard_normal(n)


def rule(fractions: np.ndarray, threshold: float) -> int:
    below = np.flatnonzero(fractions < threshold)
    return int(below[0]) + 1 if below.size else int(np.argmin(fractions)) + 1


CASES = {
    # name: (series, delay, max_dim); n >= 4,000 uses two search threads
    "henon": (lambda rng: henon_x(3000, rng), 1, 6),
    "sine, noise 0.1": (lambda rng: noisy_sine(6000, rng, 0.1), 25, 6),
    "sine, noise 0.3": (lambda rng: noisy_sine(4500, rng, 0.3), 25, 6),
    "white noise": (lambda rng: rng.standard_normal(3000), 1, 5),  # none below 1 %
}


@pytest.mark.parametrize("name", list(CASES))
@pytest.mark.parametrize("threshold", [0.1, 0.01, 0.001])
def test_early_stop_picks_the_full_curve_dimension(name, threshold):
    make, delay, max_dim = CASES[name]
    for seed in range(3):
        x = make(np.random.default_rng(seed))
        fractions = fnn(x, delay, max_dim=max_dim)
        assert choose_dimension(x, delay, max_dim=max_dim, threshold=threshold) == \
            rule(fractions, threshold), (name, seed, fractions)


def test_white_noise_has_no_dimension_below_one_percent():
    """The fallback branch is exercised: for white noise the fraction stays far above
    1 % (it has no finite embedding dimension), so the smallest fraction decides."""
    x = np.random.default_rng(5).standard_normal(3000)
    fractions = fnn(x, 1, max_dim=5)
    assert fractions.min() > 0.05
    assert choose_dimension(x, 1, max_dim=5) == int(np.argmin(fractions)) + 1
