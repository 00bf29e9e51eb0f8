"""Validation of choreographies: every problem located, all in one pass, with a fix.

Expected limits come from choreographies/robots/torso-e1.yaml (for example the right
elbow's range 0..135 deg and velocity limit 360 deg/s); expected locations are the
1-based line and column of the offending YAML node in the file written by the test.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest

from echoreo.errors import ChoreographyError, InputError
from echoreo.runner import load_choreography

DATA = Path(__file__).parent / "data"

HEAD = """\
robot: torso-e1
unit: deg
poses:
  rest: {}
  up: {right_shoulder_flexion: 90}
moves:
  raise:
    keyframes:
      - {at: 0, pose: rest}
      - {at: 1.5, pose: up}
      - {at: 3.0, pose: rest}
"""


def problems_of(path) -> list:
    with pytest.raises(ChoreographyError) as info:
        load_choreography(path)
    return info.value.problems


def test_broken_example_reports_every_marked_line():
    """tests/runner/data/broken-choreography.yaml marks each faulty line with '# P';
    one pass reports exactly those lines, each with file, column and a fix."""
    path = DATA / "broken-choreography.yaml"
    lines = path.read_text(encoding="utf-8").splitlines()
    marked = {i + 1 for i, line in enumerate(lines) if "# P" in line and i > 2}
    problems = problems_of(path)
    assert {p.line for p in problems} == marked
    assert len(problems) == len(marked)
    for p in problems:
        assert p.file == str(path) and p.column is not None and p.hint


@pytest.mark.parametrize(
    ("text", "line", "column", "words"),
    [
        pytest.param(HEAD + "sequence:\n  - move: raise\n    repeat: two\n", 14, 13,
                     "repeat must be a whole number", id="repeat-text"),
        pytest.param(HEAD.replace("up: {right_shoulder_flexion: 90}",
                                  "up: {right_shoulder_flexion: 90, left_knee: 3}")
                     + "sequence:\n  - move: raise\n", 5, 36, "unknown joint 'left_knee'",
                     id="unknown-joint"),
        pytest.param(HEAD.replace("unit: deg", "unit: degree") + "sequence:\n  - move: raise\n",
                     2, 7, "unit must be 'deg' or 'rad'", id="bad-unit"),
        pytest.param(HEAD.replace("unit: deg\n", "") + "sequence:\n  - move: raise\n",
                     1, 1, "angle unit is missing", id="missing-unit"),
        pytest.param(HEAD.replace("{at: 3.0, pose: rest}", "{at: 1.5, pose: rest}")
                     + "sequence:\n  - move: raise\n", 11, 14, "not after the previous",
                     id="equal-times"),
        pytest.param(HEAD + "sequence:\n  - move: rase\n", 13, 11, "did you mean 'raise'",
                     id="unknown-move"),
        pytest.param(HEAD + "sequence:\n  - hold: upp\n    duration: 2\n", 13, 11,
                     "unknown pose 'upp'", id="unknown-pose"),
        pytest.param(HEAD + "sequence:\n  - move: raise\n  - hold: up\n    duration: 2\n",
                     14, 5, "holds pose 'up'", id="hold-elsewhere"),
        pytest.param(HEAD + "sequence: []\n", 12, 11, "non-empty list", id="empty-sequence"),
        pytest.param(HEAD, 1, 1, "sequence is missing", id="missing-sequence"),
        pytest.param(HEAD.replace("robot: torso-e1", "robot: torso-e9")
                     + "sequence:\n  - move: raise\n", 1, 8, "no shipped robot", id="robot-name"),
        pytest.param(HEAD.replace("robot: torso-e1", "robot: ../nowhere/r.yaml")
                     + "sequence:\n  - move: raise\n", 1, 8, "not found", id="robot-path"),
        pytest.param(HEAD.replace("{at: 3.0, pose: rest}", "{at: 3.0, pose: up}")
                     + "sequence:\n  - move: raise\n    repeat: 2\n", 13, 5, "cannot repeat",
                     id="no-repeat-loop"),
        pytest.param(HEAD + "  left: {mirror_of: right}\n  right: {mirror_of: left}\n"
                     "sequence:\n  - move: raise\n", 12, 21, "mirrors itself", id="mirror-cycle"),
        pytest.param(HEAD + "sequence:\n  - move: raise\n    tempo: 0\n", 14, 12,
                     "greater than 0", id="tempo-zero"),
        pytest.param(HEAD + "sequence:\n  - move: raise\n    count: yes please\n", 14, 12,
                     "count must be true or false", id="count-text"),
        pytest.param(HEAD.replace("{at: 1.5, pose: up}", "{at: 1e1, pose: up}")
                     + "sequence:\n  - move: raise\n", 10, 14, "decimal point", id="yaml-1e1"),
        pytest.param("- just\n- a list\n", 1, 1, "must be a mapping", id="not-a-mapping"),
        pytest.param("robot: [torso-e1\n", 2, 1, "not valid YAML", id="malformed-yaml"),
    ],
)
def test_single_problem_is_located(write, text, line, column, words):
    """One planted fault gives a problem at its exact line and column whose message
    contains the expected words, and a fix."""
    problems = problems_of(write(text))
    hits = [p for p in problems if words in p.message or words in p.hint]
    assert hits, [str(p) for p in problems]
    assert (hits[0].line, hits[0].column) == (line, column), str(hits[0])


def test_missing_file_is_a_clear_error(tmp_path):
    with pytest.raises(ChoreographyError, match="choreography not found"):
        load_choreography(tmp_path / "nope.yaml")


def test_pose_beyond_range_names_the_range(write):
    """right_elbow_flexion's range is 0..135 deg (torso-e1.yaml); 150 deg is reported at
    the value with the range in degrees."""
    text = HEAD.replace("up: {right_shoulder_flexion: 90}", "up: {right_elbow_flexion: 150}")
    (p,) = problems_of(write(text + "sequence:\n  - move: raise\n"))
    assert (p.line, p.column) == (5, 29)
    assert "0.0 .. 135.0 deg" in p.message


def fast_text(duration: float, tempo: float = 1.0) -> str:
    return f"""\
robot: torso-e1
unit: deg
poses:
  rest: {{}}
  bent: {{right_elbow_flexion: 130}}
moves:
  flick:
    interpolation: minimum-jerk
    keyframes:
      - {{at: 0, pose: rest}}
      - {{at: {duration / 2!r}, pose: bent}}
      - {{at: {duration!r}, pose: rest}}
sequence:
  - move: flick
    repeat: 2
    tempo: {tempo!r}
"""


def test_too_fast_move_is_located_and_the_suggested_fix_works(write):
    """A 115 deg elbow flick in 0.5 s needs 1.875 * 115 / 0.25 = 862 deg/s (Flash & Hogan
    1985 peak), far above the 360 deg/s limit: the problem points at the keyframe that
    ends the segment, names joint, time, step and repetition, and its hint gives a
    duration that, once written into the file, passes."""
    problems = problems_of(write(fast_text(0.5)))
    speed = [p for p in problems if "speed" in p.message]
    assert speed and all(p.line in (11, 12) for p in problems)
    p = speed[0]
    assert "right_elbow_flexion" in p.message and "step 1" in p.message
    assert "repetition" in p.message and "% of its limit" in p.message
    longest = max(float(re.search(r"at least ([0-9.]+) s", q.hint).group(1)) for q in problems)
    chor = load_choreography(write(fast_text(longest)))
    assert chor.compile().duration == pytest.approx(2 * longest)


@pytest.mark.parametrize("global_tempo", [1.0, 1.5])
def test_suggested_tempo_works(write, global_tempo):
    """The hint's step-tempo bound, written into the step, makes the same move pass (also
    under a global tempo, which multiplies the step's)."""
    text = fast_text(0.5).replace("unit: deg", f"unit: deg\ntempo: {global_tempo}")
    problems = problems_of(write(text))
    tempo = min(float(re.search(r"tempo to ([0-9.]+) or less", p.hint).group(1))
                for p in problems)
    load_choreography(write(fast_text(0.5, tempo).replace(
        "unit: deg", f"unit: deg\ntempo: {global_tempo}")))


def test_cubic_overshoot_is_caught_between_keyframes(write, torso):
    """Keyframes inside the range whose clamped cubic spline dips below the elbow's lower
    limit (0 deg) between keyframes are rejected on the sampled trajectory."""
    text = """\
robot: torso-e1
unit: deg
poses:
  a: {right_elbow_flexion: 2}
  b: {right_elbow_flexion: 120}
moves:
  m:
    interpolation: cubic
    keyframes:
      - {at: 0, pose: a}
      - {at: 0.4, pose: b}
      - {at: 0.8, pose: a}
      - {at: 3.0, pose: a}
sequence:
  - move: m
"""
    problems = problems_of(write(text))
    below = [p for p in problems if "lower limit" in p.message]
    assert below and "cubic spline overshoots" in below[0].hint
    assert below[0].line == 13  # the keyframe ending the 0.8-3.0 s segment


def test_robot_argument_must_match_file(write, torso):
    path = write(HEAD.replace("robot: torso-e1", "robot: other-robot")
                 + "sequence:\n  - move: raise\n")
    (p,) = problems_of_with_robot(path, torso)
    assert "written for robot 'other-robot'" in p.message and p.line == 1


def problems_of_with_robot(path, robot):
    with pytest.raises(ChoreographyError) as info:
        load_choreography(path, robot=robot)
    return info.value.problems


def test_mirror_uses_the_robots_mirror_map(write, torso):
    """A mirrored move's keyframes are q[:, mirror_index] * mirror_sign of the original
    (DEVELOPERS.md, robot model contract); neck rotation flips sign."""
    text = HEAD.replace("up: {right_shoulder_flexion: 90}",
                        "up: {right_shoulder_flexion: 90, neck_rotation: -20}")
    text += "  raise_left: {mirror_of: raise}\nsequence:\n  - move: raise\n  - move: raise_left\n"
    chor = load_choreography(write(text))
    right, left = chor.moves["raise"], chor.moves["raise_left"]
    np.testing.assert_array_equal(left.knots, right.knots[:, torso.mirror_index]
                                  * torso.mirror_sign)
    j = torso.joint_index
    assert left.knots[1, j("left_shoulder_flexion")] == pytest.approx(math.radians(90))
    assert left.knots[1, j("neck_rotation")] == pytest.approx(math.radians(20))
    assert left.knots[1, j("right_shoulder_flexion")] == pytest.approx(0.0)


def test_tempo_scales_moves_not_rests(write):
    """Effective tempo = global x step (FORMAT.md section 2): a 3 s move at 1.5 x 1.2 lasts
    3 / 1.8 s; rests stay as written."""
    text = HEAD.replace("unit: deg", "unit: deg\ntempo: 1.5")
    text += "sequence:\n  - move: raise\n    tempo: 1.2\n  - rest: 2.5\n"
    tl = load_choreography(write(text)).compile()
    durations = (tl.spans["t_end"] - tl.spans["t_start"]).to_numpy()
    np.testing.assert_allclose(durations, [3 / 1.8, 2.5])
    assert tl.spans["kind"].tolist() == ["move", "rest"]


def test_radians_and_per_pose_units(write, torso):
    """unit: rad at the top and unit: deg inside a pose give the same posture."""
    text = """\
robot: torso-e1
unit: rad
poses:
  rest: {}
  a: {right_elbow_flexion: 1.0}
  b: {unit: deg, right_elbow_flexion: 57.29577951308232}
moves:
  m: {keyframes: [{at: 0, pose: rest}, {at: 1.5, pose: a}, {at: 3, pose: rest}]}
sequence:
  - move: m
"""
    chor = load_choreography(write(text))
    np.testing.assert_allclose(chor.poses["a"], chor.poses["b"], atol=1e-12)
    assert chor.poses["a"][torso.joint_index("right_elbow_flexion")] == 1.0


def test_compile_rejects_bad_rate():
    chor = load_choreography(Path(__file__).parents[2] / "choreographies"
                             / "warmup-head.yaml")
    for rate in (0, -5, float("nan"), "50", True):
        with pytest.raises(ChoreographyError, match="command rate"):
            chor.compile(rate)


def test_errors_are_input_errors():
    """ChoreographyError is an InputError (exit status 2, DEVELOPERS.md)."""
    assert issubclass(ChoreographyError, InputError)
