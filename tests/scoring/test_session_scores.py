"""Session scoring on simulator output: record contract, perfect copies, details, study choice."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import echoreo.choreographies as ch
from echoreo.runner.choreography import load_choreography
from echoreo.scoring import (
    FLAGS,
    RECORD_FIELDS,
    EmbeddingChoice,
    ScoringParams,
    combine_choices,
    score_data,
    session_from_arrays,
)
from echoreo.sim import load_robot
from echoreo.sim.participant import PROFILES, simulate_participant

CONTRACT = ("session participant study stream kind site leader_site choreography move step "
            "repetition t_start t_end lag_s median_ratio iqr_ratio wasserstein shape_distance "
            "crqa_RR crqa_DET crqa_L crqa_Lmax crqa_ENTR crqa_LAM crqa_TT correlation variability "
            "grade band flags delay dim signal rate_hz filter_cutoff_hz filter_order").split()


@pytest.fixture(scope="module")
def world():
    robot = load_robot("torso-e1")
    tl = load_choreography(Path(ch.__file__).parent / "warmup-both-arms.yaml").compile(50.0)
    return robot, tl


def _data(world, profile, seed=1, **kw):
    robot, tl = world
    rec = simulate_participant(robot, tl.t, tl.q, tl.rep_windows(), profile, mode="mirror",
                               rng=np.random.default_rng(seed), **kw)
    return session_from_arrays(robot, tl.t, tl.q, tl.spans, rec.streams, mode="mirror",
                               session="P01", participant="P01", study="demo")


def test_records_follow_the_contract(world):
    """Columns are exactly DEVELOPERS.md "Score records", one row per move span x pair."""
    _, tl = world
    sc = score_data(_data(world, PROFILES["good"]))
    rec = sc.records
    assert list(rec.columns) == CONTRACT == list(RECORD_FIELDS)
    n_moves = int((tl.spans["kind"] == "move").sum())
    assert len(rec) == n_moves * 3
    assert set(rec["stream"]) == {"right_wrist_imu", "left_wrist_imu", "head_pose"}
    right = rec[rec["stream"] == "right_wrist_imu"].iloc[0]
    assert right["leader_site"] == "left_wrist" and right["site"] == "right_wrist"
    assert all(set(f) <= set(FLAGS) for f in rec["flags"])
    assert rec["grade"].between(0, 100).all()
    assert (rec["rate_hz"] == 50.0).all() and (rec["filter_order"] == 2).all()
    assert rec["signal"].str.startswith(("gyro", "yaw-pitch-roll")).all()
    assert (rec["dim"] >= 3).all() and (rec["delay"] >= 1).all()


def test_a_noise_free_exact_copy_grades_near_100(world):
    """A participant with no lag, noise, tremor or sensor error copies the joints exactly;
    angular velocity does not depend on body size, so every moving record is near 100
    (analytic: identical trajectories give ratio 1 and distances 0)."""
    exact = PROFILES["good"].replace(lag_s=0.0, lag_jitter_s=0.0, noise_rad=0.0,
                                     head_noise_rad=0.0, tremor_rad=0.0)
    sc = score_data(_data(world, exact, sensor_noise=False, dropouts=0.0))
    rec = sc.records
    moving = rec[rec["median_ratio"].notna()]
    assert len(moving) > 0
    assert moving["grade"].min() > 93
    assert np.allclose(moving["median_ratio"], 1.0, atol=0.06)
    assert (rec["lag_s"] <= 0.06).all()
    assert all(f == [] for f in rec["flags"])


def test_details_hold_trajectories_for_plots(world):
    sc = score_data(_data(world, PROFILES["good"]), details=True)
    i = int(np.flatnonzero(sc.records["median_ratio"].notna())[0])
    d = sc.detail(i)
    assert d["leader_pc"].shape[1] == 3 and d["follower_pc"].shape == d["leader_pc"].shape
    assert d["leader_dist"].shape == (d["leader_pc"].shape[0],)
    assert d["t"].shape == d["leader_signal"].shape == d["follower_signal"].shape
    with pytest.raises(ValueError):
        score_data(_data(world, PROFILES["good"])).detail(0)


def test_given_embedding_is_used_and_study_choice_is_a_median():
    params = ScoringParams(embedding=(EmbeddingChoice("imu", 4, 9),))
    assert params.embedding_for("imu").dim == 4
    assert params.embedding_for("head_pose") is None
    per = [{"imu": EmbeddingChoice("imu", d, t, "AMI first minimum + fnn", 3)}
           for d, t in [(3, 20), (5, 12), (4, 15)]]
    (c,) = combine_choices(per, params)
    assert (c.dim, c.delay) == (4, 15)
    with pytest.raises(Exception, match="dim_method"):
        ScoringParams(dim_method="pca")


def test_recorded_leader_sensor_gives_the_virtual_sensor_scores(world):
    """A recorded leader IMU at the paired leader site (named by the pair's leader_stream),
    reflected in mirror mode, gives the same grades as the virtual sensor computed from the
    joints (both are the leader's gyroscope; METHODS.md 2.2)."""
    from echoreo.scoring import StreamArrays
    from echoreo.sim import imu

    robot, tl = world
    base = _data(world, PROFILES["good"])
    acc, gyro = imu(robot, tl.t, tl.q, "left_wrist")
    lead = StreamArrays("leader_left_wrist_imu", "imu",
                        ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y", "gyro_z"),
                        np.asarray(tl.t), np.column_stack([acc, gyro]))
    pairs = [dict(p) for p in base.pairs]
    for p in pairs:
        if p["stream"] == "right_wrist_imu":
            p["leader_stream"] = "leader_left_wrist_imu"
    streams = dict(base.streams, leader_left_wrist_imu=lead)
    params = ScoringParams(embedding=(EmbeddingChoice("imu", 3, 15),
                                      EmbeddingChoice("head_pose", 3, 15)))
    import dataclasses

    with_rec = dataclasses.replace(base, pairs=tuple(pairs), streams=streams)
    a = score_data(base, params).records
    b = score_data(with_rec, params).records
    right = a["stream"] == "right_wrist_imu"
    assert np.allclose(a.loc[right, "grade"], b.loc[right, "grade"], atol=0.5)


def test_score_study_shares_one_embedding_and_results_pickle(tmp_path, world):
    """score_study chooses one (dim, delay) per kind for all sessions and scores each with
    it; per-session results pickle (process pools)."""
    import pickle

    from echoreo.scoring import score_study

    d1 = _data(world, PROFILES["good"], seed=1)
    d2 = _data(world, PROFILES["good_loose"], seed=2)
    study = score_study([d1, d2])
    assert len(study.sessions) == 2 and len(study.records) == sum(
        len(s.records) for s in study.sessions)
    for kind in ("imu", "head_pose"):
        c = study.params.embedding_for(kind)
        for s in study.sessions:
            sub = s.records[s.records["kind"] == kind]
            assert (sub["dim"] == c.dim).all() and (sub["delay"] == c.delay).all()
    again = pickle.loads(pickle.dumps(study.sessions[0]))
    assert again.records.equals(study.sessions[0].records)
