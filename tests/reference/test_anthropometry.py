"""Human model against the anthropometric table it cites and against hand computation.

Source of the expected fractions: Drillis, R., & Contini, R. (1966), *Body segment
parameters*, as reproduced in Winter, D. A. (2009), *Biomechanics and Motor Control
of Human Movement*, 4th ed., Fig. 4.1 (values quoted from memory; see
``sim/human.py``). Positions at known postures are computed by hand from those
fractions with the joint sign conventions of ``choreographies/FORMAT.md``.
"""

from __future__ import annotations

import numpy as np
import pytest

from echoreo.sim import (
    RANGE_OF_MOTION_DEG,
    SEGMENT_FRACTIONS,
    human_model,
    load_robot,
    segment_lengths,
)

#: Winter (2009), Fig. 4.1 (after Drillis & Contini 1966), fractions of height H.
WINTER_FIG_4_1 = {
    "upper_arm": 0.186,
    "forearm": 0.146,
    "hand": 0.108,
    "shoulder_width": 0.259,
    "shoulder_height": 0.818,
    "chin_height": 0.870,
    "eye_height": 0.936,
    "chest_height": 0.720,
    "elbow_height": 0.630,
    "wrist_height": 0.485,
}

HEIGHTS = [1.52, 1.70, 1.93]


@pytest.mark.parametrize("height", HEIGHTS, ids=lambda h: f"H={h}")
def test_segment_lengths_equal_table_fractions(height):
    """Each segment length is the table's fraction times body height (Winter 2009, Fig. 4.1)."""
    L = segment_lengths(height)
    for name, frac in WINTER_FIG_4_1.items():
        assert L[name] == pytest.approx(frac * height, rel=1e-12), name
        assert SEGMENT_FRACTIONS[name] == frac


def test_table_is_internally_consistent():
    """Shoulder height minus upper arm is the elbow height, elbow minus forearm the wrist
    height, to the table's rounding (Winter 2009, Fig. 4.1: 0.818 - 0.186 = 0.632 vs
    0.630; 0.630 - 0.146 = 0.484 vs 0.485)."""
    f = SEGMENT_FRACTIONS
    assert f["shoulder_height"] - f["upper_arm"] == pytest.approx(f["elbow_height"], abs=0.003)
    assert f["elbow_height"] - f["forearm"] == pytest.approx(f["wrist_height"], abs=0.003)


def _links(model, q):
    T = model.fk_links(np.atleast_2d(q))
    return {k: v[0, :3, 3] for k, v in T.items()}


@pytest.mark.parametrize("height", HEIGHTS, ids=lambda h: f"H={h}")
def test_positions_at_zero_posture(height):
    """Arms hanging (q = 0): shoulders at (0, +-0.259H/2, 0.818H), wrists 0.186H + 0.146H
    below them, head at eye height 0.936H, chest at 0.720H (Winter 2009, Fig. 4.1)."""
    H = height
    m = human_model(H)
    q = np.zeros(m.n_joints)
    links = _links(m, q)
    sites = {k: v[0, :3, 3] for k, v in m.fk(q[None]).items()}
    for side, s in (("left", 1), ("right", -1)):
        np.testing.assert_allclose(links[f"{side}_shoulder"], [0, s * 0.1295 * H, 0.818 * H],
                                   atol=1e-9)
        np.testing.assert_allclose(links[f"{side}_forearm_root"],
                                   [0, s * 0.1295 * H, (0.818 - 0.186) * H], atol=1e-9)
        np.testing.assert_allclose(sites[f"{side}_wrist"],
                                   [0, s * 0.1295 * H, (0.818 - 0.186 - 0.146) * H], atol=1e-9)
    np.testing.assert_allclose(sites["head"], [0, 0, 0.936 * H], atol=1e-9)
    np.testing.assert_allclose(sites["chest"], [0, 0, 0.720 * H], atol=1e-9)


@pytest.mark.parametrize("posture, side, expected", [
    # left arm raised forward to the horizontal: wrist 0.332H in front of the shoulder
    ({"left_shoulder_flexion": 90}, "left", (0.332, 0.1295, 0.818)),
    # right arm lifted sideways to the horizontal: wrist 0.332H further to the right
    ({"right_shoulder_abduction": 90}, "right", (0.0, -0.1295 - 0.332, 0.818)),
    # left elbow bent 90 deg, arm hanging: forearm points forward at elbow height
    ({"left_elbow_flexion": 90}, "left", (0.146, 0.1295, 0.818 - 0.186)),
    # elbow bent 90 deg and shoulder internally rotated 90 deg: forearm across the belly
    ({"left_elbow_flexion": 90, "left_shoulder_rotation": 90}, "left",
     (0.0, 0.1295 - 0.146, 0.818 - 0.186)),
    # right arm straight up (flexion 180 deg)
    ({"right_shoulder_flexion": 180}, "right", (0.0, -0.1295, 0.818 + 0.332)),
], ids=["flex90", "abd90", "elbow90", "elbow90-introt90", "flex180"])
def test_wrist_at_known_postures(posture, side, expected):
    """Wrist positions at simple postures, computed by hand from Winter (2009) Fig. 4.1
    fractions and the anatomical signs of FORMAT.md (H = 1.70 m)."""
    H = 1.70
    m = human_model(H)
    q = np.zeros(m.n_joints)
    for name, deg in posture.items():
        q[m.joint_index(name)] = np.deg2rad(deg)
    p = m.fk(q[None])[f"{side}_wrist"][0, :3, 3]
    np.testing.assert_allclose(p, np.array(expected) * H, atol=1e-9)


def test_same_joint_semantics_as_the_robot():
    """Human model and torso-e1 share joint names, mirror signs, and axes: for random
    postures the wrist and head site orientations agree (orientation depends only on the
    axes, not on the segment lengths)."""
    robot = load_robot("torso-e1")
    m = human_model(1.70)
    assert m.joint_names == robot.joint_names
    assert set(m.site_names) >= {"left_wrist", "right_wrist", "head", "chest"}
    np.testing.assert_array_equal(m.mirror_index, robot.mirror_index)
    np.testing.assert_array_equal(m.mirror_sign, robot.mirror_sign)
    rng = np.random.default_rng(7)
    lo = np.maximum(m.lower, robot.lower)
    hi = np.minimum(m.upper, robot.upper)
    q = rng.uniform(lo, hi, size=(200, m.n_joints))
    Th, Tr = m.fk(q), robot.fk(q)
    for site in ("left_wrist", "right_wrist", "head"):
        np.testing.assert_allclose(Th[site][:, :3, :3], Tr[site][:, :3, :3], atol=1e-12)


def test_ranges_of_motion_in_the_model():
    """Joint limits are the tabulated ranges of motion (AAOS, Greene & Heckman 1994;
    Youdas et al. 1992), converted to rad."""
    m = human_model(1.70)
    for i, name in enumerate(m.joint_names):
        key = name.removeprefix("left_").removeprefix("right_")
        lo, hi = RANGE_OF_MOTION_DEG[key]
        assert m.lower[i] == pytest.approx(np.deg2rad(lo))
        assert m.upper[i] == pytest.approx(np.deg2rad(hi))


def test_mirror_image_is_reflection():
    """mirror(q) of the human model reflects every site through the x-z plane."""
    m = human_model(1.70)
    q = np.random.default_rng(1).uniform(m.lower * 0.5, m.upper * 0.5, size=(50, m.n_joints))
    a = m.fk(q)
    b = m.fk(q[:, m.mirror_index] * m.mirror_sign)
    M = np.diag([1.0, -1.0, 1.0])
    for site, partner in (("left_wrist", "right_wrist"), ("head", "head")):
        np.testing.assert_allclose(b[partner][:, :3, 3], a[site][:, :3, 3] @ M, atol=1e-9)
