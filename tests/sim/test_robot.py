"""Robot descriptions: loading, hand-checked poses, mirroring and located errors."""

from __future__ import annotations

import numpy as np
import pytest

from echoreo.errors import RobotError
from echoreo.sim import load_robot, parse_robot
from echoreo.sim.robot import REQUIRED_SITES, shipped_robots

ROBOT = load_robot("torso-e1")
SHIPPED_TEXT = ROBOT.text


def _q(**angles: float) -> np.ndarray:
    q = np.zeros((1, ROBOT.n_joints))
    for name, value in angles.items():
        q[0, ROBOT.joint_index(name)] = value
    return q


def test_shipped_robot_contract():
    """The shipped robot has the contract's joint and site names (DEVELOPERS.md)."""
    assert "torso-e1" in shipped_robots()
    names = ["neck_rotation", "neck_flexion"] + [
        f"{side}_{j}" for side in ("left", "right")
        for j in ("shoulder_flexion", "shoulder_abduction", "shoulder_rotation",
                  "elbow_flexion", "forearm_rotation")]
    assert ROBOT.joint_names == tuple(names)
    assert set(REQUIRED_SITES) <= set(ROBOT.site_names)
    for a in (ROBOT.lower, ROBOT.upper, ROBOT.max_velocity, ROBOT.max_acceleration, ROBOT.rest):
        assert a.shape == (12,)
    assert np.all((ROBOT.rest >= ROBOT.lower) & (ROBOT.rest <= ROBOT.upper))
    # hobby-servo class limits asked for in issue #2: about 5-7 rad/s, 20-40 rad/s^2
    assert np.all((ROBOT.max_velocity >= 5) & (ROBOT.max_velocity <= 7))
    assert np.all((ROBOT.max_acceleration >= 20) & (ROBOT.max_acceleration <= 40))


def test_zero_pose_sites_by_hand():
    """Site positions at q = 0 follow from the YAML offsets summed by hand.

    Left wrist: shoulder (0, 0.10, 0.38) + (0, 0.03, 0) + (0, 0, -0.03 - 0.11 - 0.03 - 0.10)
    = (0, 0.13, 0.11); head: (0, 0, 0.43 + 0.03) + (0.02, 0, 0.07) = (0.02, 0, 0.53).
    """
    T = ROBOT.fk(np.zeros((1, 12)))
    np.testing.assert_allclose(T["left_wrist"][0, :3, 3], [0, 0.13, 0.11], atol=1e-12)
    np.testing.assert_allclose(T["right_wrist"][0, :3, 3], [0, -0.13, 0.11], atol=1e-12)
    np.testing.assert_allclose(T["head"][0, :3, 3], [0.02, 0, 0.53], atol=1e-12)
    np.testing.assert_allclose(T["chest"][0], np.eye(4) + np.pad([[0.05], [0], [0.30]],
                                                                 ((0, 1), (3, 0))), atol=1e-12)


def test_anatomical_signs_by_hand():
    """Positive abduction lifts either arm outward, positive flexion raises it forward,
    positive neck rotation turns the face left (+y), positive neck flexion nods down
    (anatomical conventions of DEVELOPERS.md; geometry from the YAML offsets)."""
    arm = 0.27  # 0.03 + 0.11 + 0.03 + 0.10 m below the abduction joint
    T = ROBOT.fk(_q(left_shoulder_abduction=np.pi / 2, right_shoulder_abduction=np.pi / 2))
    np.testing.assert_allclose(T["left_wrist"][0, :3, 3], [0, 0.13 + arm, 0.38], atol=1e-12)
    np.testing.assert_allclose(T["right_wrist"][0, :3, 3], [0, -0.13 - arm, 0.38], atol=1e-12)
    T = ROBOT.fk(_q(left_shoulder_flexion=np.pi / 2))
    np.testing.assert_allclose(T["left_wrist"][0, :3, 3], [arm, 0.13, 0.38], atol=1e-12)
    T = ROBOT.fk(_q(neck_rotation=np.pi / 2, neck_flexion=0.3))
    face = T["head"][0, :3, 0]  # the head frame's forward axis in the base frame
    assert face[1] > 0.9 * np.cos(0.3) and face[2] < 0


def test_mirror_is_reflection():
    """Mirroring a posture reflects every site through the sagittal plane (y -> -y):
    M T(q) M = T(mirror(q)) with M = diag(1, -1, 1) (reflection, DEVELOPERS.md contract)."""
    rng = np.random.default_rng(1)
    q = rng.uniform(ROBOT.lower, ROBOT.upper, size=(50, 12))
    T = ROBOT.fk(q)
    Tm = ROBOT.fk(ROBOT.mirror(q))
    M = np.diag([1.0, -1.0, 1.0, 1.0])
    pairs = {"left_wrist": "right_wrist", "right_wrist": "left_wrist", "head": "head",
             "chest": "chest"}
    for site, other in pairs.items():
        np.testing.assert_allclose(M @ T[site][:, :, :] @ M, Tm[other], atol=1e-12)
    np.testing.assert_array_equal(ROBOT.mirror(ROBOT.mirror(q)), q)


def test_unknown_name_lists_shipped():
    with pytest.raises(RobotError, match="torso-e1"):
        load_robot("no-such-robot")


def test_missing_file(tmp_path):
    with pytest.raises(RobotError, match="not found"):
        load_robot(tmp_path / "absent.yaml")


def test_unknown_joint_and_site_lookup():
    with pytest.raises(RobotError, match="neck_rotation"):
        ROBOT.joint_index("tail_wag")
    with pytest.raises(RobotError, match="left_wrist"):
        ROBOT.fk(np.zeros(12), sites=["knee"])


def test_errors_are_collected_and_located():
    """Three independent mistakes are reported together, each at its line and column."""
    text = (SHIPPED_TEXT
            .replace("axis: [0, 0, 1]\n    limits: {lower: -90",
                     "axis: [0, 0]\n    limits: {lower: -90")
            .replace("lower: 0, upper: 135, velocity: 360", "lower: 0, upper: -5, velocity: 360", 1)
            .replace("units:\n  length: m", "units:\n  length: furlong"))
    with pytest.raises(RobotError) as err:
        parse_robot(text, source="bad.yaml")
    probs = err.value.problems
    lines = text.splitlines()
    assert len(probs) >= 3
    msgs = {p.message: p for p in probs}
    assert all(p.file == "bad.yaml" and p.line is not None and p.column for p in probs)
    unit = next(p for m, p in msgs.items() if "furlong" in m)
    assert lines[unit.line - 1][unit.column - 1:].startswith("furlong")
    axis = next(p for m, p in msgs.items() if "'axis'" in m)
    assert lines[axis.line - 1][axis.column - 1:].startswith("[0, 0]")
    upper = next(p for m, p in msgs.items() if "upper limit" in m)
    assert lines[upper.line - 1][upper.column - 1:].startswith("-5")


@pytest.mark.parametrize(
    ("old", "new", "needle"),
    [
        pytest.param("parent: neck\n", "parent: nek\n", "not connected", id="unknown-parent"),
        pytest.param("link: head,", "link: hed,", "does not exist", id="site-link"),
        pytest.param("  chest: {link", "  breast: {link", "'chest'", id="missing-site"),
        pytest.param("neck_flexion: 0\n", "neck_flexion: 80\n", "outside its limits",
                     id="rest-outside"),
        pytest.param("axis: [0, 1, 0]", "axis: [0, 1, 0]\n    damping: 3", "unknown key",
                     id="unknown-key"),
        pytest.param("velocity: 370, acceleration: 2000}\n  neck_flexion",
                     "velocity: -1, acceleration: 2000}\n  neck_flexion", "positive",
                     id="negative-velocity"),
        pytest.param("  right_forearm_rotation:\n", "  right_forearm_twist:\n", "mirror",
                     id="no-mirror-partner"),
        pytest.param("name: torso-e1", "name: [a]", "'name'", id="bad-name"),
        pytest.param("rest:\n", "rest:\n  tail: 3\n", "unknown joint", id="rest-joint"),
    ],
)
def test_single_mistakes_are_located(old, new, needle):
    assert old in SHIPPED_TEXT
    with pytest.raises(RobotError) as err:
        parse_robot(SHIPPED_TEXT.replace(old, new, 1), source="x.yaml")
    hits = [p for p in err.value.problems if needle in p.message]
    assert hits, [str(p) for p in err.value.problems]
    assert all(p.line is not None for p in hits)


@pytest.mark.parametrize("text", ["", "- 1\n- 2\n", "name: [\n", "just text\n"])
def test_not_a_robot(text):
    with pytest.raises(RobotError):
        parse_robot(text)


def test_parse_robot_round_trip():
    """parse_robot on the stored text gives the same robot (session-file snapshots)."""
    r = parse_robot(ROBOT.text, source="snapshot")
    assert r.joint_names == ROBOT.joint_names and r.source == "snapshot"
    np.testing.assert_array_equal(r.upper, ROBOT.upper)
    q = np.random.default_rng(0).normal(size=(5, 12))
    np.testing.assert_array_equal(r.fk(q)["head"], ROBOT.fk(q)["head"])
