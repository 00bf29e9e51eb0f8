"""Leader reference signals: the lateral reflection equals the kinematic mirror image."""

from __future__ import annotations

import numpy as np
import pytest

from echoreo.errors import ScoringInputError
from echoreo.scoring.reference import mirror_site, reflect_lateral, virtual_references
from echoreo.sim import head_orientation, imu, load_robot


@pytest.fixture(scope="module")
def robot():
    return load_robot("torso-e1")


def _motion(robot, n=250, rate=50.0, seed=5):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    phase = rng.uniform(0, 2 * np.pi, robot.n_joints)
    q = robot.rest + 0.3 * np.sin(2 * np.pi * 0.4 * t[:, None] + phase)
    return t, np.clip(q, robot.lower, robot.upper)


def test_mirror_site_names():
    assert mirror_site("left_wrist") == "right_wrist"
    assert mirror_site("right_wrist") == "left_wrist"
    assert mirror_site("head") == "head"


def test_reflection_formula_equals_kinematic_mirror(robot):
    """The gyroscope at the right wrist of the mirrored posture equals the left wrist's
    gyroscope with (-x, +y, -z), and the head's yaw and roll change sign: the rule for
    pseudovectors under the reflection y -> -y (Goldstein et al. 2002, sec. 4.9),
    checked on the shipped robot's kinematics."""
    t, q = _motion(robot)
    qm = robot.mirror(q)
    _, g_left = imu(robot, t, q, "left_wrist")
    _, g_right_m = imu(robot, t, qm, "right_wrist")
    assert np.allclose(g_right_m, reflect_lateral(g_left, "imu"), atol=1e-9)
    h = head_orientation(robot, q)
    hm = head_orientation(robot, qm)
    ypr = np.column_stack([h.yaw, h.pitch, h.roll])
    assert np.allclose(np.column_stack([hm.yaw, hm.pitch, hm.roll]),
                       reflect_lateral(ypr, "head_pose"), atol=1e-9)


def test_virtual_references_mirror_and_anatomical(robot):
    """In mirror mode the follower's right wrist is compared with the reflected leader left
    wrist; in anatomical mode with the leader's right wrist unchanged."""
    t, q = _motion(robot)
    pairs_m = [{"stream": "r", "kind": "imu", "site": "right_wrist", "leader_site": "left_wrist"},
               {"stream": "h", "kind": "head_pose", "site": "head", "leader_site": "head"}]
    refs = virtual_references(robot, t, q, pairs_m, "mirror")
    _, g_left = imu(robot, t, q, "left_wrist")
    assert np.allclose(refs["r"], reflect_lateral(g_left, "imu"), atol=1e-9)
    pairs_a = [{"stream": "r", "kind": "imu", "site": "right_wrist",
                "leader_site": "right_wrist"}]
    _, g_right = imu(robot, t, q, "right_wrist")
    assert np.allclose(virtual_references(robot, t, q, pairs_a, "anatomical")["r"], g_right)


def test_virtual_references_keep_gaps_and_name_bad_pairs(robot):
    t, q = _motion(robot)
    q = q.copy()
    q[100:110] = np.nan
    pairs = [{"stream": "r", "kind": "imu", "site": "right_wrist", "leader_site": "left_wrist"}]
    ref = virtual_references(robot, t, q, pairs, "mirror")["r"]
    assert np.isnan(ref[100:110]).all() and np.isfinite(ref[:100]).all()
    with pytest.raises(ScoringInputError, match="elbow"):
        virtual_references(robot, t, q, [{"stream": "x", "kind": "imu",
                                          "leader_site": "elbow"}], "anatomical")
    with pytest.raises(ScoringInputError, match="emg"):
        virtual_references(robot, t, q, [{"stream": "x", "kind": "emg",
                                          "leader_site": "head"}], "anatomical")
