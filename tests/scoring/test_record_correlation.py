"""The ``correlation`` field of the score record and the grade's correlation component.

``correlation`` is the Pearson correlation of the lag-aligned one-dimensional leader
and follower signals over the repetition (METHODS.md 3.2); the grade's correlation
component is max(0, correlation) (METHODS.md 3.3). These tests check that the field is
part of the record (and so of the JSON, the CSV and the session file's ``scores``
table, which all carry the record's fields), that it is finite for a good repetition,
and that the grade is computed from it.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import echoreo.choreographies as ch
from echoreo.runner.choreography import load_choreography
from echoreo.scoring import RECORD_FIELDS, GradeConfig, score_data, session_from_arrays
from echoreo.scoring.grade import component_scores, grade_from_components
from echoreo.sessionfile import to_json
from echoreo.sim import load_robot
from echoreo.sim.participant import PROFILES, simulate_participant


@pytest.fixture(scope="module")
def scored():
    """A good virtual participant (seed 3) on warmup-both-arms, scored with details."""
    robot = load_robot("torso-e1")
    tl = load_choreography(Path(ch.__file__).parent / "warmup-both-arms.yaml").compile(50.0)
    rec = simulate_participant(robot, tl.t, tl.q, tl.rep_windows(), PROFILES["good"],
                               mode="mirror", rng=np.random.default_rng(3))
    data = session_from_arrays(robot, tl.t, tl.q, tl.spans, rec.streams, mode="mirror",
                               session="P03", participant="P03", study="demo")
    return score_data(data, details=True)


def _graded(records: pd.DataFrame) -> pd.DataFrame:
    """Records graded from their metrics (leader moving, follower not skipped)."""
    return records[records["median_ratio"].notna()
                   & records["flags"].apply(lambda f: "skipped" not in f)]


def test_correlation_is_a_record_field_beside_the_metrics():
    fields = list(RECORD_FIELDS)
    assert "correlation" in fields
    assert fields.index("correlation") == fields.index("crqa_TT") + 1
    assert fields.index("correlation") + 1 == fields.index("variability")


def test_correlation_is_finite_for_a_good_repetition_and_equals_pearson(scored):
    """Reference: numpy.corrcoef (Pearson's product-moment correlation, Pearson 1896,
    Phil. Trans. R. Soc. A 187:253) of the aligned signals kept in the details."""
    rec = scored.records
    good = _graded(rec)
    good = good[good["flags"].apply(lambda f: f == [])]
    assert len(good) > 0
    assert np.isfinite(good["correlation"]).all()
    assert good["correlation"].between(-1.0, 1.0).all()
    # a good copy is strongly and positively correlated with the leader
    assert good["correlation"].median() > 0.8
    for i in good.index:
        d = scored.detail(int(i))
        ref = np.corrcoef(d["leader_signal"], d["follower_signal"])[0, 1]
        assert rec.at[i, "correlation"] == pytest.approx(ref, abs=1e-12)
        assert d["correlation"] == rec.at[i, "correlation"]
    # the leader standing still leaves every metric, correlation included, undefined
    still = rec[rec["median_ratio"].isna() & rec["grade"].notna()]
    assert still["correlation"].isna().all()


def test_grade_correlation_component_is_computed_from_the_record_field(scored):
    """The grade of every metric-graded record is recomputed from the record alone
    (METHODS.md 3.3); its correlation component is max(0, record["correlation"])."""
    cfg = GradeConfig()
    rec = scored.records
    graded = _graded(rec)
    assert len(graded) > 0
    for i, row in graded.iterrows():
        comp = component_scores(row.to_dict(), cfg)
        assert comp["correlation"] == pytest.approx(max(0.0, row["correlation"]), abs=0)
        assert scored.detail(int(i))["components"] == pytest.approx(comp, nan_ok=True)
        assert grade_from_components(comp, cfg) == pytest.approx(row["grade"], abs=1e-9)
        # a different correlation in the record gives a different grade, by w_c Δs_c / Σ w
        other = dict(row.to_dict(), correlation=0.0)
        changed = grade_from_components(component_scores(other, cfg), cfg)
        defined = sum(w for k, w in cfg.weights().items() if w > 0 and math.isfinite(comp[k]))
        expected = row["grade"] - 100.0 * cfg.w_correlation * comp["correlation"] / defined
        assert changed == pytest.approx(expected, abs=1e-9)


def test_correlation_reaches_json_and_csv_of_the_records(scored, tmp_path):
    """The JSON text and the CSV are made from the record's fields (as `echoreo score`
    writes them), so both carry `correlation`; NaN becomes null in JSON."""
    rec = scored.records
    data = json.loads(to_json(rec.to_dict(orient="records")))
    assert all("correlation" in r for r in data)
    graded = set(_graded(rec).index)
    assert all(isinstance(data[i]["correlation"], float) for i in graded)
    assert any(r["correlation"] is None for r in data) == bool(rec["correlation"].isna().any())
    out = rec.copy()
    out["flags"] = out["flags"].apply(";".join)
    out.to_csv(tmp_path / "s.csv", index=False)
    back = pd.read_csv(tmp_path / "s.csv")
    assert list(back.columns) == list(RECORD_FIELDS)
    np.testing.assert_allclose(back["correlation"], rec["correlation"], rtol=1e-12)
