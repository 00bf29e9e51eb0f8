"""Time-delay embedding: a strided view that equals the textbook construction (Takens 1981)."""

import numpy as np
import pytest

from echoreo.errors import ScoringInputError
from echoreo.scoring import embed


def naive_embedding(x, dim, delay):
    """Row i = (x[i], x[i + delay], ..., x[i + (dim - 1) delay]), built with a loop."""
    rows = len(x) - (dim - 1) * delay
    return np.array([[x[i + k * delay] for k in range(dim)] for i in range(rows)])


@pytest.mark.parametrize(("dim", "delay"), [(1, 1), (2, 1), (3, 4), (5, 7)],
                         ids=["d1t1", "d2t1", "d3t4", "d5t7"])
def test_embed_matches_naive_construction_and_is_a_view(dim, delay):
    """Hypothesis: embed equals the definition and copies nothing (expected: the loop above)."""
    x = np.random.default_rng(3).standard_normal(101)
    e = embed(x, dim, delay)
    assert e.shape == (101 - (dim - 1) * delay, dim)
    np.testing.assert_array_equal(e, naive_embedding(x, dim, delay))
    assert np.shares_memory(e, x)
    assert not e.flags.writeable


def test_single_column_input_is_viewed_too():
    """An (n, 1) float array is one channel; the result still shares its memory."""
    x = np.arange(20.0)[:, None]
    assert np.shares_memory(embed(x, 2, 3), x)


def test_too_short_message_gives_the_computed_facts():
    """The message of STYLE.md: 40 samples, dim 5, delay 12 need (5-1)*12+1 = 49 samples."""
    with pytest.raises(ScoringInputError, match="a series of 40 samples cannot be embedded "
                       "with dim 5 and delay 12: at least 49 samples are needed"):
        embed(np.zeros(40), 5, 12)


def test_exactly_long_enough_gives_one_vector():
    x = np.arange(49.0)
    np.testing.assert_array_equal(embed(x, 5, 12), [[0.0, 12.0, 24.0, 36.0, 48.0]])


@pytest.mark.parametrize("bad", [np.zeros((30, 3)), np.array([1.0, np.nan, 2.0] * 10), [],
                                 np.zeros((2, 2, 2))],
                         ids=["multichannel", "nan", "empty", "3d"])
def test_bad_series_raise_scoring_input_error(bad):
    with pytest.raises(ScoringInputError):
        embed(bad, 2, 1)


@pytest.mark.parametrize(("dim", "delay"), [(0, 1), (2, 0), (2.5, 1), (True, 1)])
def test_bad_parameters_raise(dim, delay):
    with pytest.raises(ScoringInputError):
        embed(np.arange(10.0), dim, delay)
