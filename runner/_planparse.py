"""Parsing and validation of a session plan file (FORMAT.md section 3).

:func:`_parse` reads the located YAML of a plan and checks consent, study,
participant code, mode, rates, the robot, every choreography it names (which
must load, be written for the plan's robot and compile within its limits),
the stream pairs, the adapters and the silent-stream rule, collecting every
problem with its ``file:line:column`` in one pass.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

from echoreo.errors import InputError, Problem
from echoreo.runner._participant_code import check_participant_code
from echoreo.runner._planadapters import FOLLOWER_ADAPTERS, LEADER_ADAPTERS, _adapter
from echoreo.runner._plancheck import _Checker
from echoreo.runner._planstreams import _streams
from echoreo.runner._plantypes import AdapterSpec, PlanItem, SessionPlan
from echoreo.yamlload import LDict, LList, Loc, load_yaml, loc_of

__all__ = ["MODES", "SILENT_ACTIONS", "shipped_choreography"]

MODES = ("mirror", "anatomical")
SILENT_ACTIONS = ("warn", "pause")
_SHIPPED_NAME = re.compile(r"^[a-z0-9][a-z0-9_-]*$")

_TOP_KEYS = {
    "study", "participant", "consent_recorded", "robot", "mode", "command_rate_hz",
    "countdown_s", "rest_s", "choreographies", "streams", "leader", "followers",
    "silent_stream", "ramp_speed_fraction", "description",
}


def _package_dir() -> Path:
    """Folder of the shipped choreographies (``echoreo.choreographies``)."""
    import echoreo.choreographies as pkg

    return Path(pkg.__file__).resolve().parent


def shipped_choreography(name: str) -> Path | None:
    """Path of a shipped choreography by name, or None when there is none.

    Parameters
    ----------
    name : str
        File stem under ``choreographies/`` (``"arm-raise"`` for
        ``choreographies/arm-raise.yaml``); searched also one folder deep.
    """
    base = _package_dir()
    for candidate in (base / f"{name}.yaml", *sorted(base.glob(f"*/{name}.yaml"))):
        if candidate.is_file() and candidate.parent.name not in ("robots", "plans"):
            return candidate
    return None


def _load_robot(ck: _Checker, value: Any, loc: Loc, base: Path) -> Any:
    from echoreo.sim import load_robot

    if not isinstance(value, str) or not value:
        ck.add(loc, "robot must be a shipped robot name or a path", "e.g. robot: torso-e1")
        return None
    candidate = (base / value)
    ref = str(candidate) if (value.endswith((".yaml", ".yml")) or "/" in value) else value
    try:
        return load_robot(ref)
    except InputError as exc:
        if len(exc.problems) == 1 and exc.problems[0].file is None:
            ck.add(loc, exc.problems[0].message, exc.problems[0].hint)
        else:
            ck.problems.extend(exc.problems)
        return None


def _load_item(ck: _Checker, entry: Any, loc: Loc, base: Path, robot: Any, defaults: dict,
               rate_hz: float | None) -> PlanItem | None:
    if isinstance(entry, str):
        entry_d: dict = {"file": entry}
        eloc = loc
        elocs: dict[str, Loc] = {"file": loc}
    elif isinstance(entry, LDict):
        ck.unknown_keys(entry, {"file", "name", "countdown_s", "rest_s"}, "choreography entry")
        entry_d = dict(entry)
        eloc = entry.loc
        elocs = {k: entry.value_loc(k) for k in entry}
    else:
        ck.add(loc, "a choreography entry must be a file path, a shipped name, or a mapping "
               "with `file:`")
        return None
    ref = entry_d.get("file", entry_d.get("name"))
    rloc = elocs.get("file", elocs.get("name", eloc))
    if not isinstance(ref, str) or not ref:
        ck.add(eloc, "choreography entry needs `file:` (a path relative to the plan) or "
               "`name:` (a shipped choreography)")
        return None
    path: Path | None = None
    as_path = base / ref
    if as_path.is_file():
        path = as_path
    elif _SHIPPED_NAME.match(ref) and not ref.endswith((".yaml", ".yml")):
        path = shipped_choreography(ref)
    if path is None:
        ck.add(rloc, f"choreography {ref!r} not found (looked for {as_path} and for a shipped "
               "choreography of that name)",
               "paths are relative to the plan's folder; shipped names have no .yaml ending")
        return None
    countdown = defaults["countdown_s"]
    rest = defaults["rest_s"]
    if isinstance(entry, LDict):
        countdown = ck.number(entry, "countdown_s", countdown, low=0.0, high=120.0, unit="s")
        rest = ck.number(entry, "rest_s", rest, low=0.0, high=3600.0, unit="s")
    try:
        from echoreo.runner.choreography import load_choreography

        chor = load_choreography(path, robot=robot)
    except InputError as exc:
        ck.problems.extend(exc.problems)
        return None
    if robot is not None:
        rname = getattr(chor, "robot_name", None) or getattr(getattr(chor, "robot", None),
                                                             "name", None)
        if rname is not None and rname != robot.name:
            ck.add(rloc, f"choreography {path.name} is written for robot {rname!r}, the plan "
                   f"runs {robot.name!r}", "use a choreography for this robot")
    if rate_hz is not None:
        try:
            chor.compile(rate_hz)
        except InputError as exc:
            ck.problems.extend(exc.problems)
            return None
    return PlanItem(path.resolve(), float(countdown or 0.0), float(rest or 0.0), chor,
                    path.read_text(encoding="utf-8"))


def _entries(ck: _Checker, data: LDict, key: str, message: str,
             hint: str) -> list[tuple[int, Any, Loc]]:
    """(index, entry, location) of every entry of the non-empty list under ``key``; none,
    after a located problem, when it is missing, empty or not a list."""
    value = data.get(key)
    if not isinstance(value, LList) or not value:
        ck.add(data.value_loc(key), message, hint)
        return []
    return [(i, entry, value.item_loc(i)) for i, entry in enumerate(value)]


def _parse(path: Path, *, participant: str | None = None) -> tuple[SessionPlan | None,
                                                                  list[Problem]]:
    ck = _Checker()
    data = load_yaml(path, what="session plan")
    text = path.read_text(encoding="utf-8")
    if not isinstance(data, LDict):
        return None, [loc_of(data, default=Loc(str(path), 1, 1)).problem(
            "a session plan must be a mapping (study:, participant:, ...)")]
    ck.unknown_keys(data, _TOP_KEYS, "session plan")
    base = path.parent

    # consent first: nothing runs without it
    consent = data.get("consent_recorded")
    if consent is not True:
        where = data.value_loc("consent_recorded")
        ck.add(where, "consent_recorded must be `true`: a session may only run once the "
               "participant's informed consent has been recorded"
               + ("" if "consent_recorded" in data else " (the key is missing)"),
               "record consent as the study's ethics approval requires, then add "
               "`consent_recorded: true`")

    study = data.get("study")
    if not isinstance(study, str) or not study.strip():
        ck.add(data.value_loc("study"),
               "study must be a non-empty name", "e.g. study: arm-imitation-pilot")
        study = ""

    code = participant if participant is not None else data.get("participant")
    if code is not None:
        ck.problems.extend(check_participant_code(
            code, Loc(None, None, None) if participant is not None
            else data.value_loc("participant")))

    mode = data.get("mode")
    if mode not in MODES:
        ck.add(data.value_loc("mode"),
               f"mode {mode!r} is not known" if "mode" in data else "`mode:` is missing",
               "use mode: mirror (participant faces the robot and copies it like a mirror) "
               "or mode: anatomical (same side)")
        mode = "mirror"

    rate = ck.number(data, "command_rate_hz", None, low=1.0, high=1000.0, unit="Hz",
                     required=True)
    countdown = ck.number(data, "countdown_s", 3.0, low=0.0, high=120.0, unit="s")
    rest = ck.number(data, "rest_s", 5.0, low=0.0, high=3600.0, unit="s")
    ramp_frac = ck.number(data, "ramp_speed_fraction", 0.25, low=0.0, high=0.5, unit="",
                          low_open=True)

    robot = None
    if "robot" not in data:
        ck.add(data.loc, "`robot:` is missing", "e.g. robot: torso-e1")
    else:
        robot = _load_robot(ck, data["robot"], data.value_loc("robot"), base)

    items: list[PlanItem] = []
    for _, entry, loc in _entries(ck, data, "choreographies",
                                  "choreographies must be a non-empty list",
                                  "list shipped names or files relative to the plan"):
        item = _load_item(ck, entry, loc, base, robot,
                          {"countdown_s": countdown, "rest_s": rest}, rate)
        if item is not None:
            items.append(item)

    pairs = _streams(ck, data.get("streams"),
                     data.value_loc("streams"), mode)

    leader = _adapter(ck, data.get("leader"), "leader", LEADER_ADAPTERS,
                      data.value_loc("leader"))
    followers: list[AdapterSpec] = []
    entries = _entries(ck, data, "followers",
                       "followers must be a non-empty list of follower sources",
                       "e.g.\n  followers:\n    - {adapter: simulated, profile: good, seed: 1}")
    for i, f, loc in entries:
        spec = _adapter(ck, f, f"followers[{i}]", FOLLOWER_ADAPTERS, loc)
        if spec is not None:
            followers.append(spec)
    if entries:
        names = {p.stream for p in pairs}
        for _, f, _ in entries:
            if isinstance(f, LDict) and isinstance(f.get("dropout"), LDict | LList):
                drops = f["dropout"] if isinstance(f["dropout"], LList) else [f["dropout"]]
                for dd in drops:
                    if isinstance(dd, LDict) and isinstance(dd.get("stream"), str) \
                            and dd["stream"] not in names:
                        ck.add(dd.value_loc("stream"), f"dropout names stream "
                               f"{dd['stream']!r}, which is not in `streams:`")

    silent_after = 1.0
    on_silent = "warn"
    ss = data.get("silent_stream")
    if ss is not None:
        if not isinstance(ss, LDict):
            ck.add(data.value_loc("silent_stream"),
                   "silent_stream must be a mapping {after_s, action}")
        else:
            ck.unknown_keys(ss, {"after_s", "action"}, "silent_stream")
            silent_after = ck.number(ss, "after_s", 1.0, low=0.0, high=600.0, unit="s",
                                     low_open=True) or 1.0
            act = ss.get("action", "warn")
            if act not in SILENT_ACTIONS:
                ck.add(ss.value_loc("action"), f"silent_stream action {act!r} is not known",
                       "use `warn` (event and warning) or `pause` (the robot holds until the "
                       "stream is back)")
            else:
                on_silent = act

    if ck.problems or robot is None or leader is None or rate is None:
        return None, ck.problems
    plan = SessionPlan(
        path=path.resolve(), text=text, study=study, participant=code, mode=mode, robot=robot,
        command_rate_hz=rate, items=tuple(items), pairs=tuple(pairs), leader=leader,
        followers=tuple(followers), silent_after_s=silent_after, on_silent=on_silent,
        ramp_speed_fraction=ramp_frac or 0.25, consent_recorded=True,
    )
    return plan, []
