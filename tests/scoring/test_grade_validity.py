"""Validity of the grade on virtual participants with controlled degradations.

Hypothesis: on a seeded grid of imposed degradation levels (the participants
engineer's :data:`echoreo.sim.participant.DEGRADATIONS`: lag, gain, noise,
tremor, fatigue, skipped repetitions, wrong mirroring, one weak arm, head
following the arms, timing jitter) the session's mean grade falls
monotonically with the level (Spearman rank correlation <= -0.9, computed
with scipy.stats.spearmanr), each injected fault raises its flag, and clean
participants raise none. Runs directly on simulator output (compiled
timeline -> simulate_participant -> score_data), not on the session runner.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import spearmanr

from echoreo.runner.choreography import load_choreography
from echoreo.scoring.params import ScoringParams
from echoreo.scoring.session_data import session_from_arrays
from echoreo.scoring.session_scores import score_data, session_embedding
from echoreo.sim import load_robot
from echoreo.sim.participant import DEGRADATIONS, PROFILES, degrade, simulate_participant

CHOREOGRAPHY = "warmup-alternating.yaml"  # two-arm alternation plus one-arm reaches, 43 s
SEED = 7


@pytest.fixture(scope="module")
def world():
    from pathlib import Path

    import echoreo.choreographies as ch

    robot = load_robot("torso-e1")
    tl = load_choreography(Path(ch.__file__).parent / CHOREOGRAPHY).compile(50.0)
    # hold the last posture 3 s longer, as the session's closing ramp does, so that a
    # lagging follower's last repetition is recorded in full
    extra = np.arange(1, 151) / tl.rate_hz
    t = np.concatenate([tl.t, tl.t[-1] + extra])
    q = np.vstack([tl.q, np.repeat(tl.q[-1:], extra.size, axis=0)])
    clean = _session(robot, t, q, tl, PROFILES["good"], SEED)
    params = ScoringParams().with_embedding(session_embedding(clean).values())
    return robot, t, q, tl, params


def _session(robot, t, q, tl, profile, seed, **kw):
    rec = simulate_participant(robot, t, q, tl.rep_windows(), profile, mode="mirror",
                               rng=np.random.default_rng(seed), dropouts=0.0, **kw)
    return session_from_arrays(robot, t, q, tl.spans, rec.streams, mode="mirror",
                               session=f"sim-{seed}")


def _score(world, profile, seed=SEED):
    robot, t, q, tl, params = world
    return score_data(_session(robot, t, q, tl, profile, seed), params)


def _flag_counts(records: pd.DataFrame) -> dict[str, int]:
    counts: dict[str, int] = {}
    for flags in records["flags"]:
        for f in flags:
            counts[f] = counts.get(f, 0) + 1
    return counts


@pytest.mark.parametrize("kind", sorted(DEGRADATIONS))
def test_grade_falls_monotonically_with_each_degradation(world, kind):
    """Spearman rho(level, mean grade) <= -0.9 over the suggested grid of levels
    (spearmanr from scipy.stats; grid from DEGRADATIONS)."""
    levels = DEGRADATIONS[kind][1]
    grades = [_score(world, degrade(PROFILES["good"], kind, lv)).records["grade"].mean()
              for lv in levels]
    rho = spearmanr(levels, grades).statistic
    assert rho <= -0.9, (kind, levels, grades)


# fault -> (profile, flag that must be raised on at least one record)
FAULTS = {
    "lag": (degrade(PROFILES["good"], "lag", 0.8), "lag"),
    "gain": (degrade(PROFILES["good"], "gain", 0.6), "amplitude_low"),
    "over_amplified": (PROFILES["good"].replace(gain_left=2.5, gain_right=2.5),
                       "amplitude_high"),
    "skip": (degrade(PROFILES["good"], "skip", 0.4), "skipped"),
    "wrong_mirror": (degrade(PROFILES["good"], "wrong_mirror", 1.0), "skipped"),
    "weak_arm": (degrade(PROFILES["good"], "weak_arm", 0.6), "asymmetry"),
    "head": (PROFILES["head_follows"], "head_moving"),
}


@pytest.mark.parametrize("fault", sorted(FAULTS))
def test_each_injected_fault_raises_its_flag(world, fault):
    """An injected fault raises its flag (wrong mirroring leaves the asked arm at rest
    while the leader's paired arm moves, so it shows as skipped)."""
    profile, flag = FAULTS[fault]
    counts = _flag_counts(_score(world, profile).records)
    assert counts.get(flag, 0) >= 1, (fault, counts)


@pytest.mark.parametrize("name,seed", [("good", 1), ("good", 2), ("good_quick", 3),
                                       ("good_steady", 4), ("good_loose", 5)])
def test_clean_participants_raise_no_flag(world, name, seed):
    """Good imitators (PROFILES presets, several seeds) raise no flag and grade well."""
    rec = _score(world, PROFILES[name], seed).records
    assert _flag_counts(rec) == {}
    assert rec["grade"].mean() > 75


def test_missing_data_is_flagged_not_scored(world):
    """A 1.5 s hole in one wrist stream flags the repetitions it touches as missing_data
    with no grade; the other streams are still scored."""
    robot, t, q, tl, params = world
    data = _session(robot, t, q, tl, PROFILES["good"], SEED)
    s = data.streams["right_wrist_imu"]
    keep = (s.t < 10.0) | (s.t > 11.5)
    data.streams["right_wrist_imu"] = type(s)(s.name, s.kind, s.channels, s.t[keep],
                                              s.data[keep])
    sc = score_data(data, params)
    rec = sc.records
    hit = rec[rec["flags"].apply(lambda f: "missing_data" in f)]
    assert len(hit) >= 1
    assert set(hit["stream"]) == {"right_wrist_imu"}
    assert hit["grade"].isna().all()
    assert rec.loc[rec["stream"] != "right_wrist_imu", "grade"].notna().all()
    assert any("right_wrist_imu" in p.message and "gap" in p.message for p in sc.problems)
