"""Property: any mutation of a robot file gives a Robot or a located RobotError.

Hypothesis (MacIver et al. 2019, JOSS 4(43):1891) replaces one value anywhere
in the shipped description with an arbitrary YAML value, or feeds arbitrary
text; the parser must never raise anything but RobotError, and every problem
in a file that is valid YAML must carry a line number.
"""

from __future__ import annotations

import numpy as np
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from echoreo.errors import RobotError
from echoreo.sim import Robot, load_robot, parse_robot

BASE = yaml.safe_load(load_robot("torso-e1").text)

scalars = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6),
                    st.floats(allow_nan=True, allow_infinity=True),
                    st.text(max_size=12), st.sampled_from(["torso", "head", "neck_rotation",
                                                           "deg", "rad", "m", "left_wrist"]))
values = st.recursive(scalars, lambda c: st.one_of(st.lists(c, max_size=4),
                                                   st.dictionaries(st.text(max_size=8), c,
                                                                   max_size=3)),
                      max_leaves=8)


def _paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, (*prefix, i))


PATHS = [p for p in _paths(BASE) if p]


def _mutated(path, value, delete):
    import copy

    doc = copy.deepcopy(BASE)
    node = doc
    for key in path[:-1]:
        node = node[key]
    if delete and isinstance(node, dict):
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return yaml.safe_dump(doc, sort_keys=False)


@settings(max_examples=40, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(path=st.sampled_from(PATHS), value=values, delete=st.booleans())
def test_mutations_are_located(path, value, delete):
    text = _mutated(path, value, delete)
    try:
        robot = parse_robot(text, source="m.yaml")
    except RobotError as exc:
        assert all(p.line is not None for p in exc.problems), [str(p) for p in exc.problems]
        return
    assert isinstance(robot, Robot)
    q = np.tile(robot.rest, (2, 1))
    for T in robot.fk(q).values():
        assert T.shape == (2, 4, 4)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(st.text(max_size=200))
def test_arbitrary_text_never_crashes(text):
    try:
        parse_robot(text)
    except RobotError:
        pass
