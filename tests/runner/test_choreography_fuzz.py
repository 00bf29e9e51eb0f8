"""Property tests: random choreographies never crash and never compile beyond a limit.

Hypotheses (issue #2, "Bad input"): for random keyframes, joints, units and YAML shapes,
load_choreography either returns a choreography whose compiled timeline respects every
position, velocity and acceleration limit of choreographies/robots/torso-e1.yaml at the
command rate, or raises ChoreographyError whose every problem names a file and a line;
nothing else escapes. Seeded through hypothesis' database-free derandomised mode.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from echoreo.errors import ChoreographyError
from echoreo.runner import load_choreography
from echoreo.sim import load_robot

ROBOT = load_robot("torso-e1")
JOINTS = list(ROBOT.joint_names)
POSE_NAMES = ["home", "a", "b", "c"]
MOVE_NAMES = ["m1", "m2", "m3"]

SETTINGS = settings(max_examples=50, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])

scalar = st.one_of(st.none(), st.booleans(), st.integers(-1000, 1000),
                   st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=6))
wild = st.recursive(scalar, lambda c: st.lists(c, max_size=3)
                    | st.dictionaries(st.text(max_size=5), c, max_size=3), max_leaves=8)

def maybe_wild(strategy, wild_ok: bool):
    """``strategy``, or sometimes any YAML shape at all when ``wild_ok``."""
    return st.one_of(strategy, wild) if wild_ok else strategy


def build(wild_ok: bool):
    """A strategy of choreography documents; ``wild_ok`` mixes in random YAML shapes,
    unknown names, bad units and broken keyframe times at every level."""
    joint = (st.one_of(st.sampled_from(JOINTS), st.sampled_from(["elbow", "left_knee", ""]))
             if wild_ok else st.sampled_from(JOINTS))
    # angles near the rest pose: many inside the ranges, some beyond (elbow rest is 15 deg)
    angle = st.floats(-30, 30, allow_nan=False).map(lambda x: round(x, 2))
    if wild_ok:
        angle = st.one_of(angle, st.integers(-400, 400), wild)
    unit = st.sampled_from(["deg", "deg", "deg", "rad", "grad", 1]) if wild_ok \
        else st.just("deg")
    pose = maybe_wild(st.dictionaries(joint, angle, max_size=3), wild_ok)

    @st.composite
    def keyframes(draw):
        """Start and end at 'home' with increasing times; broken sometimes when wild_ok."""
        if wild_ok and draw(st.integers(0, 9)) == 0:
            return draw(st.one_of(wild, st.lists(wild, max_size=3)))
        n = draw(st.integers(2, 5))
        gaps = draw(st.lists(st.floats(0.05, 3.0), min_size=n - 1, max_size=n - 1))
        times = np.concatenate([[0.0], np.cumsum(gaps)]).round(3).tolist()
        frames = []
        for i, t in enumerate(times):
            frame = {"at": t}
            if i in (0, n - 1):
                frame["pose"] = "home"
            else:
                choice = draw(st.integers(0, 3))
                if choice <= 1:
                    frame["pose"] = draw(st.sampled_from(
                        POSE_NAMES + (["nope"] if wild_ok else [])))
                if choice >= 1:
                    frame["joints"] = draw(st.dictionaries(joint, angle, min_size=1,
                                                           max_size=2))
            frames.append(frame)
        if wild_ok and draw(st.integers(0, 5)) == 0:  # break the order or the start time
            i = draw(st.integers(0, n - 1))
            frames[i]["at"] = draw(st.one_of(st.floats(-1, 5), wild))
        return frames

    interpolation = st.sampled_from(["linear", "cubic", "minimum-jerk", "minimum-jerk"]
                                    + (["spline"] if wild_ok else []))
    move = st.one_of(
        st.fixed_dictionaries({"keyframes": keyframes()},
                              optional={"interpolation": interpolation}),
        st.fixed_dictionaries({"mirror_of": st.sampled_from(
            [*MOVE_NAMES, "zz"] if wild_ok else MOVE_NAMES)}),
    )
    move = maybe_wild(move, wild_ok)
    step = st.one_of(
        st.fixed_dictionaries({"move": st.sampled_from(MOVE_NAMES)},
                              optional={"repeat": maybe_wild(st.integers(1, 3), wild_ok),
                                        "tempo": maybe_wild(st.floats(0.3, 3.0), wild_ok),
                                        "cue": maybe_wild(st.text(max_size=10), wild_ok),
                                        "count": st.booleans()}),
        st.fixed_dictionaries({"rest": maybe_wild(st.floats(0.1, 3.0), wild_ok)}),
        st.fixed_dictionaries({"hold": st.sampled_from(POSE_NAMES[:1] * 3 + POSE_NAMES[1:]),
                               "duration": maybe_wild(st.floats(0.1, 2.0), wild_ok)}),
    )
    step = maybe_wild(step, wild_ok)
    robots = ["torso-e1"] * 8 + (["torso-x", "robots/none.yaml"] if wild_ok else [])
    optional = {"tempo": maybe_wild(st.floats(0.5, 2.0), wild_ok), "name": st.text(max_size=8)}
    if wild_ok:
        optional["extra"] = wild
    return st.fixed_dictionaries(
        {"robot": st.sampled_from(robots),
         "unit": unit,
         "poses": maybe_wild(st.fixed_dictionaries({"home": st.just({})}, optional={
             name: pose for name in POSE_NAMES[1:]}), wild_ok),
         "moves": maybe_wild(st.fixed_dictionaries({}, optional={m: move for m in MOVE_NAMES}),
                             wild_ok),
         "sequence": maybe_wild(st.lists(step, min_size=1, max_size=4), wild_ok)},
        optional=optional,
    )


def check(text: str, rate_hz: float, robot=None) -> str:
    """Load and compile; assert the properties; return 'ok' or 'rejected'."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "fuzz.yaml"
        path.write_text(text, encoding="utf-8")
        try:
            tl = load_choreography(path, robot=robot).compile(rate_hz)
        except ChoreographyError as exc:
            for p in exc.problems:
                assert p.file is not None and p.line is not None, str(p)
                assert p.message
            return "rejected"
    q = tl.q
    assert np.all(np.isfinite(q))
    assert np.all(q >= ROBOT.lower - 1e-9) and np.all(q <= ROBOT.upper + 1e-9)
    v = np.abs(np.diff(q, axis=0)) * rate_hz
    assert np.all(v <= ROBOT.max_velocity * (1 + 1e-6))
    padded = np.concatenate([q[:1], q, q[-1:]])
    a = np.abs(np.diff(padded, n=2, axis=0)) * rate_hz**2
    assert np.all(a <= ROBOT.max_acceleration * (1 + 1e-6))
    spans = tl.spans
    assert len(spans) >= 1
    assert np.all(spans["t_end"].to_numpy() > spans["t_start"].to_numpy())
    np.testing.assert_allclose(spans["t_start"].to_numpy()[1:], spans["t_end"].to_numpy()[:-1])
    assert set(spans["kind"]) <= {"move", "rest", "hold"}
    assert (spans.loc[spans["kind"] != "move", "repetition"] == 0).all()
    assert (spans.loc[spans["kind"] == "move", "repetition"] >= 1).all()
    assert tl.t[-1] >= spans["t_end"].iloc[-1] - 1e-9
    return "ok"


@SETTINGS
@given(doc=build(wild_ok=False), rate=st.sampled_from([25.0, 50.0, 100.0]))
def test_random_well_formed_documents(doc, rate):
    """Well-formed random choreographies (random joints, angles, keyframe times,
    interpolations, mirrors, tempi, holds): accepted ones are inside every limit at the
    command rate; rejected ones (ranges, limits, continuity) carry locations."""
    OUTCOMES.append(check(yaml.safe_dump(doc, allow_unicode=True, sort_keys=False), rate))


@SETTINGS
@given(doc=build(wild_ok=True), rate=st.sampled_from([25.0, 50.0, 100.0]))
def test_random_shapes(doc, rate):
    """Random YAML shapes, unknown names, bad units and broken times anywhere: never a
    traceback, and every rejection has a location."""
    check(yaml.safe_dump(doc, allow_unicode=True, sort_keys=False), rate)


OUTCOMES: list[str] = []


@settings(max_examples=40, deadline=None, derandomize=True)
@given(text=st.text(alphabet=st.sampled_from(list("ab:-[]{}, \n\t'\"&*!%#|>1.")), max_size=60))
def test_random_text(text):
    """Arbitrary short texts of YAML punctuation are rejected with a location, never with a
    traceback."""
    assert check(text, 50.0) == "rejected"


@settings(max_examples=40, deadline=None, derandomize=True)
@given(data=st.binary(max_size=40))
def test_random_bytes(data):
    """Arbitrary bytes (often not UTF-8) are rejected with a location, never a traceback."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "bytes.yaml"
        path.write_bytes(data)
        try:
            load_choreography(path, robot=ROBOT)
        except ChoreographyError as exc:
            assert all(p.file == str(path) and p.line is not None for p in exc.problems)
        else:
            raise AssertionError("random bytes were accepted as a choreography")


def test_the_generator_reaches_both_outcomes():
    """Simple random moves (seeded numpy generator) both pass and fail the limit checks, so
    the limit property above is exercised on accepted timelines, not only on rejections."""
    outcomes = []
    rng = np.random.default_rng(7)
    for _ in range(30):
        gaps = rng.uniform(0.2, 2.0, size=2)
        text = yaml.safe_dump({
            "robot": "torso-e1", "unit": "deg",
            "poses": {"home": {}, "a": {str(rng.choice(JOINTS)): float(rng.uniform(5, 60))}},
            "moves": {"m1": {"interpolation": str(rng.choice(["linear", "cubic",
                                                                "minimum-jerk"])),
                             "keyframes": [{"at": 0.0, "pose": "home"},
                                           {"at": float(gaps[0]), "pose": "a"},
                                           {"at": float(gaps.sum()), "pose": "home"}]}},
            "sequence": [{"move": "m1", "repeat": 2}]})
        outcomes.append(check(text, 50.0, robot=ROBOT))
    assert {"ok", "rejected"} <= set(outcomes)
