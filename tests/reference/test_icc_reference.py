"""Intraclass correlations against the published worked example and pingouin."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from echoreo.errors import ScoringInputError
from echoreo.scoring import icc
from echoreo.scoring.reliability import mean_squares

# Shrout & Fleiss (1979), Psychological Bulletin 86(2), Table 2: six targets
# rated by four judges. Published ICC values (Table 4), two decimals.
SF_TABLE = [[9, 2, 5, 8], [6, 1, 3, 2], [8, 4, 6, 8], [7, 1, 2, 6], [10, 5, 6, 9], [6, 2, 4, 7]]
SF_PUBLISHED = {"ICC(1,1)": 0.17, "ICC(2,1)": 0.29, "ICC(3,1)": 0.71,
                "ICC(1,k)": 0.44, "ICC(2,k)": 0.62, "ICC(3,k)": 0.91}


@pytest.mark.parametrize("form", list(SF_PUBLISHED))
def test_shrout_fleiss_worked_example(form):
    """Each of the six forms equals Shrout & Fleiss (1979) Table 4 to two decimals."""
    assert round(icc(SF_TABLE)[form], 2) == SF_PUBLISHED[form]


def test_shrout_fleiss_mean_squares():
    """ANOVA mean squares of Shrout & Fleiss (1979) Table 3: BMS 11.24, JMS 32.49,
    WMS 6.26, EMS 1.02 (values recalled from the paper's table)."""
    ms = mean_squares(SF_TABLE)
    assert [round(ms[k], 2) for k in ("BMS", "JMS", "WMS", "EMS")] == [11.24, 32.49, 6.26, 1.02]


def test_against_pingouin_on_random_tables():
    """Same six values as pingouin.intraclass_corr (Vallat 2018) on seeded random tables."""
    pingouin = pytest.importorskip("pingouin")
    rng = np.random.default_rng(20261201)
    # pingouin >= 0.7 labels forms 2 and 3 in McGraw & Wong's (1996) terms:
    # A = absolute agreement (Shrout-Fleiss form 2), C = consistency (form 3);
    # older releases used ICC1..ICC3k.
    names = {"ICC(1,1)": "ICC(1,1)", "ICC(A,1)": "ICC(2,1)", "ICC(C,1)": "ICC(3,1)",
             "ICC(1,k)": "ICC(1,k)", "ICC(A,k)": "ICC(2,k)", "ICC(C,k)": "ICC(3,k)",
             "ICC1": "ICC(1,1)", "ICC2": "ICC(2,1)", "ICC3": "ICC(3,1)",
             "ICC1k": "ICC(1,k)", "ICC2k": "ICC(2,k)", "ICC3k": "ICC(3,k)"}
    for _ in range(5):
        n, k = rng.integers(5, 15), rng.integers(2, 6)
        table = rng.normal(size=(n, 1)) * rng.uniform(0.5, 2) + rng.normal(size=(n, k))
        long = pd.DataFrame([(i, j, table[i, j]) for i in range(n) for j in range(k)],
                            columns=["target", "rater", "rating"])
        ref = pingouin.intraclass_corr(long, targets="target", raters="rater", ratings="rating")
        ours = icc(table)
        assert len(ref) == 6
        for _, row in ref.iterrows():
            assert ours[names[row["Type"]]] == pytest.approx(row["ICC"], abs=1e-10)


def test_too_small_tables_are_refused_clearly():
    with pytest.raises(ScoringInputError, match="at least 2 targets and 2 raters"):
        icc([[1.0, 2.0]])
    with pytest.raises(ScoringInputError, match="2-D table"):
        icc([1.0, 2.0, 3.0])
    # a row with a missing rating is dropped, not propagated as NaN
    values = icc([*SF_TABLE, [np.nan, 1, 2, 3]])
    assert round(values["ICC(3,1)"], 2) == 0.71
