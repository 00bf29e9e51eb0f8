"""Choreography loading and compiling on the shipped robot and example files."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from echoreo.choreographies import DATA_DIR
from echoreo.runner import Timeline, load_choreography
from echoreo.sim import load_robot

EXAMPLES = sorted(DATA_DIR.glob("*.yaml"))


@pytest.fixture(scope="module")
def robot():
    return load_robot("torso-e1")


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_shipped_examples_compile_within_limits(path, robot):
    """Every shipped choreography compiles at 50 Hz with every sample inside the
    robot's limits (limits from choreographies/robots/torso-e1.yaml) and lasts <= 60 s."""
    tl = load_choreography(path).compile()
    assert isinstance(tl, Timeline)
    assert tl.q.shape == (tl.t.size, len(robot.joint_names))
    assert np.all(tl.q >= robot.lower - 1e-12) and np.all(tl.q <= robot.upper + 1e-12)
    assert np.all(np.abs(np.diff(tl.q, axis=0)) * 50 <= robot.max_velocity * (1 + 1e-9))
    assert 0 < tl.duration <= 60.0
    assert list(tl.spans.columns) == ["step", "move", "repetition", "kind", "t_start", "t_end"]
    assert list(tl.cues.columns) == ["t", "text"]


def test_spans_one_row_per_repetition():
    """The right-arm example: 4 raises of 3.2 s and 4 curls of 2.4 s (the values written in
    choreographies/warmup-right-arm.yaml), rests with repetition 0, spans contiguous."""
    tl = load_choreography(DATA_DIR / "warmup-right-arm.yaml").compile()
    moves = tl.spans[tl.spans["kind"] == "move"]
    assert moves.groupby("move")["repetition"].apply(list).to_dict() == {
        "raise_right_forward": [1, 2, 3, 4], "curl_right": [1, 2, 3, 4]}
    durations = (moves["t_end"] - moves["t_start"]).round(9)
    assert sorted(set(durations)) == [2.4, 3.2]
    assert (tl.spans.loc[tl.spans["kind"] == "rest", "repetition"] == 0).all()
    np.testing.assert_allclose(tl.spans["t_start"].to_numpy()[1:],
                               tl.spans["t_end"].to_numpy()[:-1])
    assert tl.rep_windows().shape == (8, 2)
    assert isinstance(tl.spans, pd.DataFrame)


def test_timeline_is_read_only():
    tl = load_choreography(DATA_DIR / "warmup-right-arm.yaml").compile()
    with pytest.raises(ValueError):
        tl.q[0, 0] = 1.0


def test_format_md_example_loads(tmp_path):
    """The example in choreographies/FORMAT.md section 2 is a valid choreography."""
    text = (DATA_DIR / "FORMAT.md").read_text(encoding="utf-8")
    block = next(b for b in text.split("```yaml")[1:] if "echoreo-choreography/1" in b)
    path = tmp_path / "example.yaml"
    path.write_text(block.split("```")[0], encoding="utf-8")
    chor = load_choreography(path)
    assert chor.n_repetitions == 4


def test_count_cues_and_step_cues(tmp_path):
    """count: true cues 'i of n' at every repetition start, joined to the step's cue on
    the first (FORMAT.md section 2); cue times equal the span starts."""
    tl = load_choreography(DATA_DIR / "warmup-right-arm.yaml").compile()
    cues = dict(zip(tl.cues["t"].round(9), tl.cues["text"], strict=True))
    raises = tl.spans[tl.spans["move"] == "raise_right_forward"]
    starts = raises["t_start"].round(9).tolist()
    assert cues[starts[0]] == "Raise your right arm forward — 1 of 4"
    assert [cues[t] for t in starts[1:]] == ["2 of 4", "3 of 4", "4 of 4"]


def test_robot_by_relative_path_and_rest_only_sequence(tmp_path, torso):
    """A robot file given by a path relative to the choreography loads; a sequence of rests
    alone holds the robot's rest pose."""
    (tmp_path / "robots").mkdir()
    (tmp_path / "robots" / "mine.yaml").write_text(torso.text, encoding="utf-8")
    path = tmp_path / "c.yaml"
    path.write_text("robot: robots/mine.yaml\nunit: deg\nsequence:\n  - rest: 1.0\n"
                    "  - rest: 0.5\n", encoding="utf-8")
    tl = load_choreography(path).compile(20.0)
    assert tl.robot_name == "torso-e1"
    np.testing.assert_array_equal(tl.q, np.broadcast_to(torso.rest, tl.q.shape))
    assert tl.spans["kind"].tolist() == ["rest", "rest"]
    assert tl.t[-1] == pytest.approx(1.5)


def test_hold_first_starts_at_the_hold_pose(tmp_path, torso):
    """A sequence that begins with a hold starts (and holds) at that pose; the hold's span
    names the pose and has repetition 0."""
    path = tmp_path / "c.yaml"
    path.write_text("robot: torso-e1\nunit: deg\nposes:\n  up: {left_elbow_flexion: 90}\n"
                    "sequence:\n  - hold: up\n    duration: 2\n", encoding="utf-8")
    chor = load_choreography(path)
    tl = chor.compile()
    j = torso.joint_index("left_elbow_flexion")
    assert np.allclose(tl.q[:, j], np.radians(90))
    assert tl.spans.iloc[0][["move", "repetition", "kind"]].tolist() == ["up", 0, "hold"]
    np.testing.assert_array_equal(chor.start_posture, tl.q[0])
