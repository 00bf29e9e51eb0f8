"""Study-level statistics: bootstrap intervals, reliability tables, flagged participants."""

from __future__ import annotations

import numpy as np
import pandas as pd

from echoreo.scoring import (
    bootstrap_ci,
    flagged_participants,
    grade_reliability,
    participant_summary,
)


def test_bootstrap_coverage_near_95_percent():
    """Percentile-bootstrap 95 % intervals of a normal mean cover the true mean in
    close to 95 % of samples (common practice check; for n = 40 the percentile
    interval under-covers slightly, Efron & Tibshirani 1993, so 0.90-0.98 is accepted)."""
    rng = np.random.default_rng(7)
    hits = 0
    trials = 400
    for _ in range(trials):
        sample = rng.normal(loc=3.0, scale=2.0, size=40)
        low, high = bootstrap_ci(sample, rng, n_boot=1000)
        hits += low <= 3.0 <= high
    assert 0.90 <= hits / trials <= 0.98


def _records(rng):
    rows = []
    for p, ability in [("P01", 80), ("P02", 60), ("P03", 40), ("P04", 70)]:
        for session in (1, 2):
            for rep in range(1, 6):
                flags = ["head_moving"] if p == "P03" else []
                rows.append({"participant": p, "session": f"{p}-s{session}", "stream": "imu",
                             "move": "raise", "repetition": rep,
                             "grade": ability + rng.normal(0, 3), "flags": flags})
    return pd.DataFrame(rows)


def test_summary_reliability_and_flags():
    """Participants with distinct abilities and small noise give a high ICC(3,1);
    the always-flagged participant is listed with its reason."""
    rng = np.random.default_rng(3)
    records = _records(rng)
    summary = participant_summary(records, rng, n_boot=500)
    assert list(summary["participant"]) == ["P01", "P02", "P03", "P04"]
    assert (summary["ci_low"] < summary["mean"]).all()
    assert (summary["mean"] < summary["ci_high"]).all()
    rel = grade_reliability(records, across="repetition")
    assert rel.loc[0, "ICC(3,1)"] > 0.9
    retest = grade_reliability(records, across="session")
    assert retest.loc[0, "k"] == 2 and retest.loc[0, "ICC(3,1)"] > 0.9
    flagged = flagged_participants(records)
    assert flagged.to_dict("records") == [{"participant": "P03", "stream": "imu",
                                           "flag": "head_moving", "fraction": 1.0,
                                           "count": 10, "n": 10}]


def test_participant_ranking_orders_by_mean_with_intervals():
    """Best mean first; each interval brackets its mean; flag counts reported; the same
    generator seed gives the same table (it is shared by the demo and the report)."""
    from echoreo.scoring import participant_ranking

    records = _records(np.random.default_rng(3))
    a = participant_ranking(records, np.random.default_rng(9), n_boot=500)
    b = participant_ranking(records, np.random.default_rng(9), n_boot=500)
    pd.testing.assert_frame_equal(a, b)
    assert list(a["participant"]) == ["P01", "P04", "P02", "P03"]
    assert list(a["rank"]) == [1, 2, 3, 4]
    assert ((a["ci_low"] < a["mean_grade"]) & (a["mean_grade"] < a["ci_high"])).all()
    p03 = a.set_index("participant").loc["P03"]
    assert p03["flags"] == "head_moving ×10" and p03["flagged"] == 10 and p03["n"] == 10
