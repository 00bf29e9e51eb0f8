"""Session plans: validation with located errors, participant codes, consent, pairs."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from echoreo.errors import PlanError
from echoreo.runner.plan import (
    check_participant_code,
    check_plan,
    leader_site_for,
    load_plan,
)

PLANS = Path(__file__).resolve().parents[2] / "choreographies" / "plans"

GOOD = """\
study: plan-test
participant: P01
consent_recorded: true
robot: torso-e1
mode: mirror
command_rate_hz: 50
countdown_s: 2
rest_s: 3
choreographies:
  - warmup-right-arm
  - {name: warmup-head, countdown_s: 1}
streams:
  - {stream: right_wrist_imu, kind: imu, site: right_wrist}
  - {stream: head_pose, kind: head_pose, site: head, rate_hz: 30}
leader: {adapter: simulated, seed: 1}
followers:
  - {adapter: simulated, seed: 2, profile: good}
"""


def _write(tmp_path: Path, text: str, name: str = "plan.yaml") -> Path:
    p = tmp_path / name
    p.write_text(textwrap.dedent(text), encoding="utf-8")
    return p


@pytest.mark.parametrize("name", ["simulated.yaml", "zeromq.yaml"])
def test_shipped_plans_are_valid(name):
    """The shipped example plans load (FORMAT.md section 3 examples)."""
    plan = check_plan(PLANS / name)
    assert plan.consent_recorded and plan.items
    assert plan.all_simulated == (name == "simulated.yaml")


def test_good_plan_fields(tmp_path):
    """Defaults, per-item overrides and the mirror pairing come out as documented."""
    plan = load_plan(_write(tmp_path, GOOD))
    assert plan.study == "plan-test" and plan.participant == "P01"
    assert [it.countdown_s for it in plan.items] == [2.0, 1.0]
    assert [it.rest_s for it in plan.items] == [3.0, 3.0]
    assert plan.items[0].name == "warmup-right-arm"
    pairs = {p.stream: p.leader_site for p in plan.pairs}
    # FORMAT.md section 3: mirror mode pairs the participant's right wrist with the robot's left
    assert pairs == {"right_wrist_imu": "left_wrist", "head_pose": "head"}
    assert plan.pairs[1].rate_hz == 30.0
    assert plan.all_simulated


def test_mirror_and_anatomical_pairing():
    """Mirror swaps left and right; anatomical keeps the side; midline sites pair alike."""
    assert leader_site_for("right_wrist", "mirror") == "left_wrist"
    assert leader_site_for("left_wrist", "mirror") == "right_wrist"
    assert leader_site_for("right_wrist", "anatomical") == "right_wrist"
    assert leader_site_for("head", "mirror") == "head"


def test_all_problems_located_in_one_pass(tmp_path):
    """Several mistakes give one PlanError listing each with file:line:column."""
    text = GOOD.replace("mode: mirror", "mode: sideways") \
        .replace("command_rate_hz: 50", "comand_rate_hz: 50") \
        .replace("kind: imu", "kind: imuu") \
        .replace("- warmup-right-arm", "- no-such-choreography")
    path = _write(tmp_path, text)
    with pytest.raises(PlanError) as info:
        load_plan(path)
    problems = info.value.problems
    text_all = str(info.value)
    assert len(problems) >= 5
    assert all(p.file == str(path) and p.line is not None for p in problems)
    lines = {p.line for p in problems}
    assert 5 in lines   # mode: sideways is on line 5
    assert 6 in lines   # the misspelt key
    assert "did you mean 'command_rate_hz'" in text_all
    assert "no-such-choreography" in text_all
    assert "imuu" in text_all


@pytest.mark.parametrize("code", ["Anna", "John Smith", "Ann3", "P-01", "123", "ABCDE1",
                                  "P12345", "", "Jane.Doe1"])
def test_names_and_non_codes_refused(tmp_path, code):
    """Anything but 1-4 letters + 1-4 digits is refused, with the reason, and not echoed in full."""
    path = _write(tmp_path, GOOD.replace("participant: P01", f"participant: '{code}'"))
    with pytest.raises(PlanError) as info:
        load_plan(path)
    msg = str(info.value)
    assert "pseudonymous" in msg and "participant code" in msg
    assert info.value.problems[0].line == 2
    if len(code) > 3:
        assert code not in msg


@pytest.mark.parametrize("code", ["P01", "ab123", "X1", "GRPA9999"])
def test_codes_accepted(code):
    """Pseudonymous codes pass."""
    assert check_participant_code(code) == []


def test_participant_override_is_checked(tmp_path):
    """A code given at run time is validated like the plan's."""
    path = _write(tmp_path, GOOD)
    assert load_plan(path, participant="Q7").participant == "Q7"
    with pytest.raises(PlanError):
        load_plan(path, participant="Maria")


@pytest.mark.parametrize("replacement", ["", "consent_recorded: false\n",
                                         "consent_recorded: yes please\n"])
def test_consent_required(tmp_path, replacement):
    """A plan without `consent_recorded: true` is refused."""
    path = _write(tmp_path, GOOD.replace("consent_recorded: true\n", replacement))
    with pytest.raises(PlanError) as info:
        load_plan(path)
    assert "consent" in str(info.value)


def test_leader_site_contradicting_mode_refused(tmp_path):
    """Pairing the right wrist with the robot's right wrist in mirror mode is refused."""
    text = GOOD.replace("site: right_wrist}", "site: right_wrist, leader_site: right_wrist}")
    with pytest.raises(PlanError) as info:
        load_plan(_write(tmp_path, text))
    p = info.value.problems[0]
    assert p.line == 13 and "mirror" in p.message


def test_simulated_adapters_need_seeds(tmp_path):
    """Simulated adapters without a seed are refused (sessions must be repeatable)."""
    text = GOOD.replace("{adapter: simulated, seed: 1}", "{adapter: simulated}")
    with pytest.raises(PlanError) as info:
        load_plan(_write(tmp_path, text))
    assert "seed" in str(info.value)


def test_relative_choreography_path(tmp_path):
    """A choreography path is relative to the plan's folder."""
    src = Path(__file__).resolve().parents[2] / "choreographies" / "warmup-head.yaml"
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "mine.yaml").write_text(src.read_text(encoding="utf-8"),
                                                 encoding="utf-8")
    text = GOOD.replace("- warmup-right-arm", "- sub/mine.yaml")
    plan = load_plan(_write(tmp_path, text))
    assert plan.items[0].path == (tmp_path / "sub" / "mine.yaml").resolve()


def test_echoreo_check_reports_plan_problems(tmp_path, capsys):
    """`echoreo check PLAN` exits 2 and prints the located problem."""
    from echoreo.runner.cli import main

    path = _write(tmp_path, GOOD.replace("consent_recorded: true\n", ""))
    assert main(["check", str(path)]) == 2
    out = capsys.readouterr()
    assert "consent" in out.out + out.err
    assert main(["check", str(PLANS / "simulated.yaml")]) == 0


_VALUES = [None, True, False, 0, -1, 3.5, 1e9, "", "x", "P01", "mirror", "simulated",
           "warmup-head", [], ["warmup-head"], {}, {"adapter": "simulated"},
           {"adapter": "zmq", "endpoint": "tcp://127.0.0.1:1"}, [{"stream": "a"}],
           [{"stream": "head_pose", "kind": "head_pose", "site": "head"}]]


def test_mutated_plans_never_crash(tmp_path):
    """Property (STYLE.md, parsers): replacing any top-level value of a valid plan with any
    value of another type gives a loaded plan or a PlanError, never another exception."""
    import yaml
    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st

    base = yaml.safe_load(GOOD)
    keys = [*sorted(base), "silent_stream", "ramp_speed_fraction", "bogus"]

    @settings(max_examples=30, deadline=None,
              suppress_health_check=[HealthCheck.function_scoped_fixture])
    @given(st.dictionaries(st.sampled_from(keys), st.sampled_from(_VALUES), max_size=3))
    def check(changes):
        doc = {**base, **changes}
        path = tmp_path / "m.yaml"
        path.write_text(yaml.safe_dump(doc), encoding="utf-8")
        try:
            load_plan(path)
        except PlanError as exc:
            assert exc.problems and all(p.file for p in exc.problems)

    check()


def test_leader_stream_of_a_pair(tmp_path):
    """`leader_stream:` names a sensor on the robot (FORMAT.md section 3); it goes into the
    pairs meta; a bad name, the pair's own stream or another participant stream is refused
    with its line."""
    text = GOOD.replace("site: right_wrist}", "site: right_wrist, leader_stream: robot_imu}")
    plan = load_plan(_write(tmp_path, text))
    assert plan.pairs[0].leader_stream == "robot_imu"
    assert plan.pairs[0].as_meta()["leader_stream"] == "robot_imu"
    assert "leader_stream" not in plan.pairs[1].as_meta()
    for bad, words in (("9imu", "not a safe identifier"),
                       ("right_wrist_imu", "its own leader reference"),
                       ("head_pose", "participant's stream")):
        text = GOOD.replace("site: right_wrist}", f"site: right_wrist, leader_stream: {bad}}}")
        with pytest.raises(PlanError) as info:
            load_plan(_write(tmp_path, text))
        (p,) = info.value.problems
        assert words in p.message and p.line == 13, p


def test_simulated_sources_cannot_supply_a_leader_stream(tmp_path):
    """Simulated sources record no sensor on the robot: the session refuses to start."""
    from echoreo.runner.session import run_session

    text = GOOD.replace("site: right_wrist}", "site: right_wrist, leader_stream: robot_imu}")
    plan = load_plan(_write(tmp_path, text))
    with pytest.raises(PlanError) as info:
        run_session(plan, out_dir=tmp_path / "out")
    assert "robot_imu" in str(info.value) and "leader_stream" in str(info.value)
    assert not list(tmp_path.glob("out/*.sqlite"))  # refused before a file is made
