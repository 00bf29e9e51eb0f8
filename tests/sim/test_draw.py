"""Stick-figure drawing: geometry from FK, files that open, the caution on every image."""

from __future__ import annotations

import numpy as np
import pytest
from PIL import Image

from echoreo.errors import ExportError
from echoreo.sim import load_robot
from echoreo.sim.draw import SAFETY_CAUTION, render_gif, render_strip, skeleton

ROBOT = load_robot("torso-e1")


def _motion(n: int = 60):
    t = np.arange(n) / 20.0
    q = np.tile(ROBOT.rest, (n, 1))
    q[:, ROBOT.joint_index("left_shoulder_abduction")] = np.linspace(0.1, 1.5, n)
    return t, q


def test_skeleton_ends_at_fk_points():
    """Segment end points are the FK link origins and site positions (same robot.fk)."""
    _, q = _motion(10)
    seg, sides = skeleton(ROBOT, q)
    links = ROBOT.fk_links(q)
    sites = ROBOT.fk(q)
    n_links = len(ROBOT.link_names) - 1
    assert seg.shape == (10, n_links + len(ROBOT.site_names) + 2, 2, 3)
    assert len(sides) == seg.shape[1]
    for k, link in enumerate(ROBOT.link_names[1:]):
        np.testing.assert_allclose(seg[:, k, 1], links[link][:, :3, 3])
    for k, site in enumerate(ROBOT.site_names):
        np.testing.assert_allclose(seg[:, n_links + k, 1], sites[site][:, :3, 3])
    assert sides[ROBOT.link_names[1:].index("left_forearm")] == "left"


def test_gif_and_strip_are_written(tmp_path):
    t, q = _motion()
    gif = render_gif(ROBOT, t, q, tmp_path / "a.gif", fps=10, max_frames=6, title="test")
    assert gif["frames"] == 6 and gif["speedup"] > 1.0  # 2.95 s at 10 fps needs 30 frames
    with Image.open(tmp_path / "a.gif") as im:
        assert im.n_frames == 6
        first = np.asarray(im.convert("RGB"))
        im.seek(5)
        last = np.asarray(im.convert("RGB"))
    assert np.any(first != last)  # the arm moved
    png = render_strip(ROBOT, t, q, [0.0, 1.0, 2.9], tmp_path / "a.png", labels=["a", "b", "c"])
    assert png["frames"] == 3
    with Image.open(tmp_path / "a.png") as im:
        assert im.size == png["size_px"]
    assert "Simulation only" in SAFETY_CAUTION and "safety standards" in SAFETY_CAUTION


@pytest.mark.parametrize("name", ["a.jpg", "missing/a.gif"])
def test_bad_output_path(tmp_path, name):
    t, q = _motion(5)
    with pytest.raises(ExportError):
        render_gif(ROBOT, t, q, tmp_path / name)
