"""Forward kinematics, rotations and sensors against independent libraries.

The chain is rebuilt from the YAML file read with plain PyYAML (not our
parser), once as a URDF document handed to pytransform3d's
``UrdfTransformManager`` and once by composing ``scipy.spatial.transform``
rotations; neither path uses echoreo's kinematics.
"""

from __future__ import annotations

import numpy as np
import pytest
import yaml
from pytransform3d.urdf import UrdfTransformManager
from scipy.spatial.transform import Rotation

from echoreo.choreographies import DATA_DIR
from echoreo.sim import head_orientation, imu, joint_derivatives, load_robot
from echoreo.sim.rotations import (
    euler_zyx_from_matrices,
    matrices_from_axis_angles,
    matrix_from_rpy,
    quaternions_from_matrices,
)

PATH = DATA_DIR / "robots" / "torso-e1.yaml"
RAW = yaml.safe_load(PATH.read_text(encoding="utf-8"))
ROBOT = load_robot("torso-e1")
DEG = np.pi / 180


def _urdf() -> str:
    """The shipped robot as a URDF string (origins in m and rad)."""
    links = {RAW["base"]} | {j["child"] for j in RAW["joints"].values()}
    parts = [f'<link name="{name}"/>' for name in sorted(links)]
    for name, j in RAW["joints"].items():
        o = j.get("origin", {})
        xyz = " ".join(str(v) for v in o.get("xyz", [0, 0, 0]))
        rpy = " ".join(str(v * DEG) for v in o.get("rpy", [0, 0, 0]))
        axis = " ".join(str(v) for v in j["axis"])
        lim = j["limits"]
        parts.append(
            f'<joint name="{name}" type="revolute"><parent link="{j["parent"]}"/>'
            f'<child link="{j["child"]}"/><origin xyz="{xyz}" rpy="{rpy}"/>'
            f'<axis xyz="{axis}"/><limit lower="{lim["lower"] * DEG}" '
            f'upper="{lim["upper"] * DEG}" effort="1" velocity="1"/></joint>')
    for name, s in RAW["sites"].items():
        xyz = " ".join(str(v) for v in s.get("xyz", [0, 0, 0]))
        rpy = " ".join(str(v * DEG) for v in s.get("rpy", [0, 0, 0]))
        parts.append(f'<link name="site_{name}"/>')
        parts.append(f'<joint name="fix_{name}" type="fixed"><parent link="{s["link"]}"/>'
                     f'<child link="site_{name}"/><origin xyz="{xyz}" rpy="{rpy}"/></joint>')
    return '<robot name="ref">' + "".join(parts) + "</robot>"


def _random_q(rng: np.random.Generator, n: int) -> np.ndarray:
    """Random postures inside the limits (read from the raw YAML, in rad)."""
    lo = np.array([j["limits"]["lower"] for j in RAW["joints"].values()]) * DEG
    hi = np.array([j["limits"]["upper"] for j in RAW["joints"].values()]) * DEG
    return rng.uniform(lo, hi, size=(n, len(lo)))


def test_fk_matches_pytransform3d_urdf():
    """Base-from-site transforms equal pytransform3d's URDF chain (pytransform3d,
    Fabisch 2019, JOSS 4(33):1159) on 40 random postures, to 1e-12."""
    tm = UrdfTransformManager()
    tm.load_urdf(_urdf())
    q = _random_q(np.random.default_rng(2026), 40)
    ours = ROBOT.fk(q)
    names = list(RAW["joints"])
    for k in range(len(q)):
        for i, name in enumerate(names):
            tm.set_joint(name, q[k, i])
        for site in RAW["sites"]:
            ref = tm.get_transform(f"site_{site}", RAW["base"])
            np.testing.assert_allclose(ours[site][k], ref, atol=1e-12)


def test_fk_matches_scipy_chain():
    """The same sites by composing scipy Rotation objects ('xyz' extrinsic rpy, rotvec
    joint rotations) along the chain, vectorised over 200 random postures."""
    q = _random_q(np.random.default_rng(7), 200)
    names = list(RAW["joints"])
    by_child = {j["child"]: (name, j) for name, j in RAW["joints"].items()}
    ours = ROBOT.fk(q)
    for site, s in RAW["sites"].items():
        chain = []
        link = s["link"]
        while link != RAW["base"]:
            name, j = by_child[link]
            chain.append((name, j))
            link = j["parent"]
        rot = Rotation.identity(len(q))
        pos = np.zeros((len(q), 3))
        for name, j in reversed(chain):
            o = j.get("origin", {})
            pos = pos + rot.apply(o.get("xyz", [0, 0, 0]))
            rot = rot * Rotation.from_euler("xyz", np.array(o.get("rpy", [0, 0, 0])) * DEG)
            axis = np.array(j["axis"], float) / np.linalg.norm(j["axis"])
            rot = rot * Rotation.from_rotvec(q[:, names.index(name), None] * axis)
        pos = pos + rot.apply(s.get("xyz", [0, 0, 0]))
        rot = rot * Rotation.from_euler("xyz", np.array(s.get("rpy", [0, 0, 0])) * DEG)
        np.testing.assert_allclose(ours[site][:, :3, 3], pos, atol=1e-12)
        np.testing.assert_allclose(ours[site][:, :3, :3], rot.as_matrix(), atol=1e-12)


def test_rotation_helpers_match_scipy():
    """rpy, axis-angle, quaternion and z-y'-x'' Euler conversions equal scipy's
    (scipy.spatial.transform.Rotation; scalar-last quaternions reordered)."""
    rng = np.random.default_rng(11)
    for rpy in rng.uniform(-np.pi, np.pi, size=(20, 3)):
        np.testing.assert_allclose(matrix_from_rpy(rpy),
                                   Rotation.from_euler("xyz", rpy).as_matrix(), atol=1e-12)
    axis = rng.normal(size=3)
    ang = rng.uniform(-4, 4, 50)
    ref = Rotation.from_rotvec(ang[:, None] * axis / np.linalg.norm(axis)).as_matrix()
    np.testing.assert_allclose(matrices_from_axis_angles(axis, ang), ref, atol=1e-12)
    rot = Rotation.random(500, random_state=np.random.default_rng(12))
    R = rot.as_matrix()
    qs = rot.as_quat()[:, [3, 0, 1, 2]]
    qs *= np.where(qs[:, :1] < 0, -1, 1)
    np.testing.assert_allclose(quaternions_from_matrices(R), qs, atol=1e-12)
    np.testing.assert_allclose(euler_zyx_from_matrices(R), rot.as_euler("ZYX"), atol=1e-10)


def test_head_orientation_matches_scipy():
    """Head yaw/pitch/roll equal scipy's intrinsic 'ZYX' Euler angles of the head site."""
    q = _random_q(np.random.default_rng(5), 100)
    hp = head_orientation(ROBOT, q)
    ref = Rotation.from_matrix(ROBOT.fk(q)["head"][:, :3, :3])
    np.testing.assert_allclose(np.stack([hp.yaw, hp.pitch, hp.roll], 1), ref.as_euler("ZYX"),
                               atol=1e-10)


def test_imu_matches_finite_differences():
    """On a smooth random motion the IMU equals an independent estimate: site position
    differentiated twice and R^T dR/dt from scipy-differenced rotations (central
    differences at 1 kHz, error O(h^2)), agreeing to 1e-3 relative."""
    rng = np.random.default_rng(8)
    t = np.arange(0, 2.0, 0.001)
    freq = rng.uniform(0.3, 1.0, 12)
    q = ROBOT.rest + 0.4 * np.sin(2 * np.pi * np.outer(t, freq) + rng.uniform(0, 6, 12))
    T = ROBOT.fk(q)["right_wrist"]
    acc, gyro = imu(ROBOT, t, q, "right_wrist")
    h = t[1] - t[0]
    p = T[:, :3, 3]
    pdd = (p[2:] - 2 * p[1:-1] + p[:-2]) / h**2
    R = T[:, :3, :3]
    ref_acc = np.einsum("nji,nj->ni", R[1:-1], pdd + np.array([0, 0, 9.80665]))
    rel = Rotation.from_matrix(R[:-2]).inv() * Rotation.from_matrix(R[2:])
    ref_gyro = Rotation.from_matrix(R[1:-1]).inv().apply(
        Rotation.from_matrix(R[:-2]).apply(rel.as_rotvec() / (2 * h)))
    sl = slice(10, -10)
    scale_a = np.max(np.abs(ref_acc[sl]))
    np.testing.assert_allclose(acc[1:-1][sl], ref_acc[sl], atol=1e-3 * scale_a)
    np.testing.assert_allclose(gyro[1:-1][sl], ref_gyro[sl], atol=1e-3 * np.max(np.abs(gyro)))


@pytest.mark.parametrize("n", [3, 4, 5, 200, 1000])
def test_spline_derivatives_match_scipy(n):
    """Our per-knot derivatives equal scipy's CubicSpline(...).derivative() evaluation."""
    from scipy.interpolate import CubicSpline

    rng = np.random.default_rng(n)
    t = np.cumsum(rng.uniform(0.005, 0.015, n))
    q = np.cumsum(rng.normal(size=(n, 3)), axis=0) * 0.01
    qd, qdd = joint_derivatives(t, q)
    cs = CubicSpline(t, q, axis=0)
    np.testing.assert_allclose(qd, cs(t, 1), atol=1e-9)
    np.testing.assert_allclose(qdd, cs(t, 2), atol=1e-7)
