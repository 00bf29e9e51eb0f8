"""Session plans: which protocol a session runs, with whom, through which adapters.

A session plan is a YAML file (format in ``choreographies/FORMAT.md``, section
"3. Session plan") that names the study, the participant's pseudonymous code,
the choreographies to run with countdowns and rests between them, the
imitation mode, the follower streams expected and the leader body site each
is compared with, the leader and follower adapters with their settings, the
command rate, what a silent follower stream does, and a confirmation that
consent was recorded.

:func:`load_plan` parses and validates a plan and every choreography it names,
collecting all problems of one pass into one :class:`~echoreo.errors.PlanError`
whose problems carry ``file:line:column``. :func:`check_plan` is what
``echoreo check PLAN`` calls.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from echoreo.errors import InputError, PlanError, Problem
from echoreo.yamlload import LDict, LList, Loc, load_yaml, loc_of

__all__ = [
    "PARTICIPANT_CODE",
    "AdapterSpec",
    "PlanItem",
    "SessionPlan",
    "StreamPair",
    "check_participant_code",
    "check_plan",
    "leader_site_for",
    "load_plan",
    "shipped_choreography",
]

#: Pseudonymous participant code: 1-4 letters then 1-4 digits ("P07", "ab123").
PARTICIPANT_CODE = re.compile(r"^[A-Za-z]{1,4}[0-9]{1,4}$")

_PARTICIPANT_WHY = (
    "participant codes are pseudonymous: 1 to 4 letters followed by 1 to 4 digits "
    "(for example P07 or AB123), with the letters in one case. A name, initials with a birth "
    "date or any other identifying text must never enter a session file, which is "
    "copied, shared and archived with the study data; keep the key that links codes "
    "to people apart from the data, as the study's ethics approval requires"
)

MODES = ("mirror", "anatomical")
SITES = ("left_wrist", "right_wrist", "head", "chest")
STREAM_KINDS = ("imu", "head_pose", "joints")
LEADER_ADAPTERS = ("simulated", "zmq")
FOLLOWER_ADAPTERS = ("simulated", "zmq")
SILENT_ACTIONS = ("warn", "pause")
_STREAM_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,63}$")
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


def leader_site_for(site: str, mode: str) -> str:
    """The robot's body site a participant's site is compared with.

    In ``mirror`` mode the participant faces the robot and copies it like a
    mirror image, so left and right swap (participant's right wrist <-> robot's
    left wrist); in ``anatomical`` mode the same side is used. Midline sites
    (head, chest) pair with themselves in both modes.

    Parameters
    ----------
    site : str
        Participant's body site (``left_wrist``, ``right_wrist``, ``head``, ``chest``).
    mode : str
        ``"mirror"`` or ``"anatomical"``.
    """
    if mode == "mirror":
        if site.startswith("left_"):
            return "right_" + site[len("left_"):]
        if site.startswith("right_"):
            return "left_" + site[len("right_"):]
    return site


def check_participant_code(code: Any, loc: Loc | None = None) -> list[Problem]:
    """Problems with a participant code (empty list when it is acceptable).

    Parameters
    ----------
    code : object
        The code as given (plan value or ``--participant`` argument).
    loc : Loc, optional
        Where it was given, for the message.
    """
    loc = loc or Loc(None, None, None)
    if not isinstance(code, str) or not PARTICIPANT_CODE.match(code):
        shown = code if isinstance(code, str) else type(code).__name__
        # never echo something that may be a person's name in full
        if isinstance(shown, str) and len(shown) > 3 and not PARTICIPANT_CODE.match(shown):
            shown = shown[:1] + "…"
        return [loc.problem(f"participant code {shown!r} refused: it is not a pseudonymous "
                            "code of letters then digits", _PARTICIPANT_WHY)]
    letters = code.rstrip("0123456789")
    if len(letters) >= 3 and letters[0].isupper() and letters[1:].islower():
        return [loc.problem(f"participant code {code[:1] + '…'!r} refused: its letters are "
                            "written like a name (capital then small letters)", _PARTICIPANT_WHY)]
    return []


@dataclass(frozen=True)
class PlanItem:
    """One choreography of a session plan.

    Parameters
    ----------
    path : Path
        Resolved choreography file.
    countdown_s : float
        Countdown before it starts, s (robot holds its first pose).
    rest_s : float
        Rest after it, s (robot moves to the next first pose and holds);
        ignored after the last item.
    choreography : object
        The loaded :class:`~echoreo.runner.choreography.Choreography`.
    text : str
        The file's YAML text (snapshot for the session file).
    """

    path: Path
    countdown_s: float
    rest_s: float
    choreography: Any = field(compare=False, repr=False)
    text: str = field(compare=False, repr=False, default="")

    @property
    def name(self) -> str:
        """The choreography's name (its own ``name`` or the file stem)."""
        return str(getattr(self.choreography, "name", None) or self.path.stem)


@dataclass(frozen=True)
class StreamPair:
    """A follower stream and the leader body site it is compared with.

    Parameters
    ----------
    stream : str
        Stream name (``right_wrist_imu``).
    kind : str
        ``imu``, ``head_pose`` or ``joints``.
    site : str
        The participant's body site wearing the sensor.
    leader_site : str
        The robot's site it pairs with (mirror: left <-> right).
    rate_hz : float or None
        Expected nominal rate, Hz, when the plan states one.
    leader_stream : str or None
        A stream recorded from a sensor on the robot at ``leader_site`` (e.g. the
        robot's own IMU, published like a follower stream); scoring then uses it as
        the leader reference instead of the virtual sensor (METHODS.md 2.2).
    """

    stream: str
    kind: str
    site: str
    leader_site: str
    rate_hz: float | None = None
    leader_stream: str | None = None

    def as_meta(self) -> dict:
        """Entry of the session file's ``pairs`` meta list."""
        meta = {"stream": self.stream, "kind": self.kind, "site": self.site,
                "leader_site": self.leader_site}
        if self.leader_stream:
            meta["leader_stream"] = self.leader_stream
        return meta


@dataclass(frozen=True)
class AdapterSpec:
    """An adapter named in a plan and its settings.

    Parameters
    ----------
    adapter : str
        ``"simulated"`` or ``"zmq"``.
    settings : dict
        The remaining keys of the adapter's mapping (plain values).
    loc : Loc
        Where the adapter is declared, for run-time messages.
    """

    adapter: str
    settings: dict
    loc: Loc = field(default=Loc(None, None, None), compare=False)

    @property
    def uses_network(self) -> bool:
        """True for adapters that talk over sockets (force the real clock)."""
        return self.adapter != "simulated"


@dataclass(frozen=True)
class SessionPlan:
    """A validated session plan.

    Parameters
    ----------
    path : Path
        The plan file.
    text : str
        Its YAML text (snapshot for the session file).
    study : str
        Study name.
    participant : str or None
        Pseudonymous participant code (None: must be given at run time).
    mode : str
        ``"mirror"`` or ``"anatomical"``.
    robot : object
        The loaded :class:`~echoreo.sim.Robot`.
    command_rate_hz : float
        Rate of joint commands, Hz (also the compile rate of every choreography).
    items : tuple of PlanItem
        Choreographies in order.
    pairs : tuple of StreamPair
        Expected follower streams and their leader sites.
    leader : AdapterSpec
        The leader adapter.
    followers : tuple of AdapterSpec
        Follower sources.
    silent_after_s : float
        A stream with no sample for this long is silent, s.
    on_silent : str
        ``"warn"`` (event and warning) or ``"pause"`` (also hold the robot until
        the stream is back).
    ramp_speed_fraction : float
        Fraction of the joint velocity limits used by the start and end ramps.
    consent_recorded : bool
        Always True in a loaded plan (a plan without it is refused).
    """

    path: Path
    text: str = field(repr=False)
    study: str
    participant: str | None
    mode: str
    robot: Any = field(repr=False)
    command_rate_hz: float
    items: tuple[PlanItem, ...]
    pairs: tuple[StreamPair, ...]
    leader: AdapterSpec
    followers: tuple[AdapterSpec, ...]
    silent_after_s: float = 1.0
    on_silent: str = "warn"
    ramp_speed_fraction: float = 0.25
    consent_recorded: bool = True

    @property
    def all_simulated(self) -> bool:
        """True when no adapter uses a socket (the virtual clock is allowed)."""
        return not self.leader.uses_network and not any(f.uses_network for f in self.followers)

    def with_participant(self, code: str) -> SessionPlan:
        """A copy for another participant code (validated)."""
        problems = check_participant_code(code)
        if problems:
            raise PlanError(problems)
        return replace(self, participant=code)

    def with_follower_settings(self, index: int = 0, **settings: Any) -> SessionPlan:
        """A copy with follower source ``index``'s settings updated.

        Used by studies of virtual participants to give each one its own
        profile and seed, e.g. ``plan.with_follower_settings(profile="tired", seed=4)``.
        """
        followers = list(self.followers)
        spec = followers[index]
        followers[index] = replace(spec, settings={**spec.settings, **settings})
        return replace(self, followers=tuple(followers))


# ---------------------------------------------------------------- validation


class _Checker:
    """Collects every problem of one plan in one pass."""

    def __init__(self) -> None:
        self.problems: list[Problem] = []

    def add(self, loc: Loc, message: str, hint: str = "") -> None:
        self.problems.append(loc.problem(message, hint))

    def number(self, d: LDict, key: str, default: float | None, *, low: float, high: float,
               unit: str, required: bool = False, low_open: bool = False) -> float | None:
        if key not in d:
            if required:
                self.add(d.loc, f"{key!r} is missing", f"add `{key}: <number in {unit}>`")
            return default
        v = d[key]
        loc = d.value_loc(key)
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            self.add(loc, f"{key} must be a number ({unit}), found {v!r}")
            return default
        if v < low or v > high or (low_open and v == low):
            lo = f"above {low:g}" if low_open else f"at least {low:g}"
            self.add(loc, f"{key} = {v:g} {unit} is out of range", f"use a value {lo} and at "
                     f"most {high:g} {unit}")
            return default
        return float(v)

    def unknown_keys(self, d: LDict, allowed: set[str], what: str) -> None:
        for k in d:
            if k not in allowed:
                near = _closest(str(k), allowed)
                hint = f"did you mean {near!r}?" if near else (
                    "allowed keys: " + ", ".join(sorted(allowed)))
                self.add(d.key_loc(k), f"unknown key {k!r} in {what}", hint)


def _closest(word: str, options: set[str]) -> str | None:
    import difflib

    m = difflib.get_close_matches(word, sorted(options), n=1, cutoff=0.7)
    return m[0] if m else None


def _as_text(d: LDict, key: str) -> str:
    v = d.get(key)
    return v if isinstance(v, str) else ""


_SIM_LEADER_KEYS = {"adapter", "tau_s", "seed", "noise_rad", "fail_after_s", "start_pose"}
_SIM_FOLLOWER_KEYS = {"adapter", "profile", "height_m", "seed", "latency_s", "dropout",
                      "streams", "clock_offset_s", "clock_drift_ppm", "loss_fraction",
                      "glitch_every_s"}
_ZMQ_KEYS = {"adapter", "endpoint", "endpoints", "keys", "timeout_s", "heartbeat_s",
             "connect_timeout_s", "sync_interval_s"}
_ZMQ_FOLLOWER_KEYS = _ZMQ_KEYS | {"gap_s", "require_all"}


def _check_endpoint(ck: _Checker, value: Any, loc: Loc) -> None:
    if not isinstance(value, str) or not re.match(r"^(tcp|ipc|inproc)://\S+$", value):
        ck.add(loc, f"endpoint {value!r} is not a ZeroMQ address",
               "write it as tcp://HOST:PORT, e.g. tcp://127.0.0.1:5601")


def _adapter(ck: _Checker, d: Any, where: str, allowed_adapters: tuple[str, ...],
             loc: Loc) -> AdapterSpec | None:
    if not isinstance(d, LDict):
        ck.add(loc, f"{where} must be a mapping with an `adapter:` key",
               "e.g.\n      adapter: simulated")
        return None
    kind = d.get("adapter")
    if kind not in allowed_adapters:
        ck.add(d.value_loc("adapter") if "adapter" in d else d.loc,
               f"{where}: adapter {kind!r} is not known" if "adapter" in d
               else f"{where}: `adapter:` is missing",
               "use one of: " + ", ".join(allowed_adapters))
        return None
    settings = {k: v for k, v in d.items() if k != "adapter"}
    if kind == "simulated":
        leader = where == "leader"
        ck.unknown_keys(d, _SIM_LEADER_KEYS if leader else _SIM_FOLLOWER_KEYS,
                        f"{where} (simulated)")
        if "seed" in d and (isinstance(d["seed"], bool) or not isinstance(d["seed"], int)
                            or d["seed"] < 0):
            ck.add(d.value_loc("seed"), f"seed must be a non-negative integer, found {d['seed']!r}")
        if "seed" not in d:
            ck.add(d.loc, f"{where}: `seed:` is missing",
                   "simulated adapters are random; give a seed so the session can be repeated")
        if leader:
            ck.number(d, "tau_s", None, low=0.0, high=2.0, unit="s")
            ck.number(d, "noise_rad", None, low=0.0, high=0.1, unit="rad")
            ck.number(d, "fail_after_s", None, low=0.0, high=1e6, unit="s")
            if "start_pose" in d and d["start_pose"] not in ("rest", "first"):
                ck.add(d.value_loc("start_pose"), "start_pose must be `rest` or `first`")
        else:
            prof = d.get("profile", "good")
            if not isinstance(prof, str):
                ck.add(d.value_loc("profile"), f"profile must be a profile name, found {prof!r}")
            else:
                known = _profile_names()
                if known and prof not in known:
                    ck.add(d.value_loc("profile"), f"unknown imitation profile {prof!r}",
                           "use one of: " + ", ".join(sorted(known)))
            ck.number(d, "height_m", None, low=1.0, high=2.3, unit="m")
            ck.number(d, "latency_s", None, low=0.0, high=1.0, unit="s")
            ck.number(d, "clock_offset_s", None, low=-1e9, high=1e9, unit="s")
            ck.number(d, "clock_drift_ppm", None, low=-1000.0, high=1000.0, unit="ppm")
            ck.number(d, "loss_fraction", None, low=0.0, high=0.5, unit="")
            ck.number(d, "glitch_every_s", None, low=0.0, high=1e6, unit="s", low_open=True)
            if "streams" in d and (not isinstance(d["streams"], LList) or not all(
                    isinstance(x, str) for x in d["streams"])):
                ck.add(d.value_loc("streams"), "streams must be a list of stream names")
            drop = d.get("dropout")
            if drop is not None:
                items = drop if isinstance(drop, LList) else [drop]
                for i, it in enumerate(items):
                    il = drop.item_loc(i) if isinstance(drop, LList) else d.value_loc("dropout")
                    if not isinstance(it, LDict):
                        ck.add(il, "dropout must be a mapping {stream, start_s, duration_s}")
                        continue
                    ck.unknown_keys(it, {"stream", "start_s", "duration_s"}, "dropout")
                    if not isinstance(it.get("stream"), str):
                        ck.add(it.loc, "dropout needs `stream:` (the stream to silence)")
                    ck.number(it, "start_s", None, low=0.0, high=1e6, unit="s", required=True)
                    ck.number(it, "duration_s", None, low=0.0, high=1e6, unit="s",
                              required=True, low_open=True)
    else:  # zmq
        leader = where == "leader"
        ck.unknown_keys(d, _ZMQ_KEYS if leader else _ZMQ_FOLLOWER_KEYS, f"{where} (zmq)")
        if leader and "endpoints" in d:
            ck.add(d.key_loc("endpoints"), "a leader has one bridge: use `endpoint:`")
        if "endpoint" in d:
            _check_endpoint(ck, d["endpoint"], d.value_loc("endpoint"))
        elif "endpoints" in d:
            eps = d["endpoints"]
            if isinstance(eps, LDict):
                for k, v in eps.items():
                    _check_endpoint(ck, v, eps.value_loc(k))
            elif isinstance(eps, LList):
                for i, v in enumerate(eps):
                    _check_endpoint(ck, v, eps.item_loc(i))
            else:
                ck.add(d.value_loc("endpoints"), "endpoints must be a list or mapping of "
                       "ZeroMQ addresses")
        else:
            ck.add(d.loc, f"{where} (zmq): `endpoint:` is missing",
                   "e.g. endpoint: tcp://127.0.0.1:5601")
        for key in ("timeout_s", "heartbeat_s", "connect_timeout_s", "sync_interval_s",
                    "gap_s"):
            ck.number(d, key, None, low=0.0, high=600.0, unit="s", low_open=True)
        if "require_all" in d and not isinstance(d["require_all"], bool):
            ck.add(d.value_loc("require_all"), "require_all must be true or false")
        if "keys" in d and not isinstance(d["keys"], str):
            ck.add(d.value_loc("keys"), "keys must be the path of a CURVE key folder")
    return AdapterSpec(str(kind), _plain(settings), d.loc)


def _plain(x: Any) -> Any:
    """Strip location wrappers (LDict/LList -> dict/list)."""
    if isinstance(x, dict):
        return {k: _plain(v) for k, v in x.items()}
    if isinstance(x, list):
        return [_plain(v) for v in x]
    return x


def _profile_names() -> set[str]:
    try:
        from echoreo.sim import PROFILES
    except (ImportError, AttributeError):  # the participants model is not in this build
        return set()
    return set(PROFILES)


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


def _streams(ck: _Checker, d: Any, loc: Loc, mode: str) -> list[StreamPair]:
    if not isinstance(d, LList) or not d:
        ck.add(loc, "streams must be a non-empty list of follower streams",
               "e.g.\n  streams:\n    - {stream: right_wrist_imu, kind: imu, site: right_wrist}")
        return []
    out: list[StreamPair] = []
    seen: dict[str, Loc] = {}
    for i, s in enumerate(d):
        sl = d.item_loc(i)
        if not isinstance(s, LDict):
            ck.add(sl, "a stream entry must be a mapping {stream, kind, site}")
            continue
        ck.unknown_keys(s, {"stream", "kind", "site", "leader_site", "rate_hz", "leader_stream"},
                        "stream entry")
        name = s.get("stream")
        ok = True
        if not isinstance(name, str) or not _STREAM_NAME.match(name):
            ck.add(s.value_loc("stream") if "stream" in s else s.loc,
                   f"stream name {name!r} is missing or not a safe identifier",
                   "letters, digits and underscores, starting with a letter")
            ok = False
        elif name in seen:
            ck.add(s.value_loc("stream"), f"stream {name!r} is listed twice (first at line "
                   f"{seen[name].line})")
            ok = False
        else:
            seen[name] = s.value_loc("stream")
        kind = s.get("kind")
        if kind not in STREAM_KINDS:
            ck.add(s.value_loc("kind") if "kind" in s else s.loc,
                   f"stream kind {kind!r} is not known", "use one of: " + ", ".join(STREAM_KINDS))
            ok = False
        site = s.get("site")
        if site not in SITES:
            ck.add(s.value_loc("site") if "site" in s else s.loc,
                   f"body site {site!r} is not known", "use one of: " + ", ".join(SITES))
            ok = False
        expected = leader_site_for(site, mode) if site in SITES else None
        lsite = s.get("leader_site", expected)
        if "leader_site" in s:
            if lsite not in SITES:
                ck.add(s.value_loc("leader_site"), f"leader site {lsite!r} is not known",
                       "use one of: " + ", ".join(SITES))
                ok = False
            elif expected is not None and lsite != expected:
                ck.add(s.value_loc("leader_site"),
                       f"in {mode} mode the participant's {site} pairs with the robot's "
                       f"{expected}, not {lsite}",
                       "remove leader_site to use the mode's pairing, or change `mode:`")
                ok = False
        rate = ck.number(s, "rate_hz", None, low=0.0, high=10000.0, unit="Hz", low_open=True)
        lstream = s.get("leader_stream")
        if "leader_stream" in s:
            if not isinstance(lstream, str) or not _STREAM_NAME.match(lstream):
                ck.add(s.value_loc("leader_stream"),
                       f"leader stream name {lstream!r} is not a safe identifier",
                       "letters, digits and underscores, starting with a letter")
                ok = False
            elif lstream == name:
                ck.add(s.value_loc("leader_stream"),
                       f"stream {name!r} cannot be its own leader reference",
                       "name the stream of the sensor on the robot")
                ok = False
        if ok:
            out.append(StreamPair(name, kind, site, lsite, rate, lstream))
    followers = {p.stream: p for p in out}
    for p in out:
        if p.leader_stream in followers:
            ck.add(seen[p.stream], f"stream {p.stream!r} names the participant's stream "
                   f"{p.leader_stream!r} as its leader reference",
                   "leader_stream must be a sensor on the robot, not one of `streams:`")
    return out


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
        where = data.value_loc("consent_recorded") if "consent_recorded" in data else data.loc
        ck.add(where, "consent_recorded must be `true`: a session may only run once the "
               "participant's informed consent has been recorded"
               + ("" if "consent_recorded" in data else " (the key is missing)"),
               "record consent as the study's ethics approval requires, then add "
               "`consent_recorded: true`")

    study = data.get("study")
    if not isinstance(study, str) or not study.strip():
        ck.add(data.value_loc("study") if "study" in data else data.loc,
               "study must be a non-empty name", "e.g. study: arm-imitation-pilot")
        study = ""

    code = participant if participant is not None else data.get("participant")
    if code is not None:
        ck.problems.extend(check_participant_code(
            code, Loc(None, None, None) if participant is not None
            else data.value_loc("participant")))

    mode = data.get("mode")
    if mode not in MODES:
        ck.add(data.value_loc("mode") if "mode" in data else data.loc,
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
    chors = data.get("choreographies")
    if not isinstance(chors, LList) or not chors:
        ck.add(data.value_loc("choreographies") if "choreographies" in data else data.loc,
               "choreographies must be a non-empty list",
               "list shipped names or files relative to the plan")
    else:
        for i, entry in enumerate(chors):
            item = _load_item(ck, entry, chors.item_loc(i), base, robot,
                              {"countdown_s": countdown, "rest_s": rest}, rate)
            if item is not None:
                items.append(item)

    pairs = _streams(ck, data.get("streams"),
                     data.value_loc("streams") if "streams" in data else data.loc, mode)

    leader = _adapter(ck, data.get("leader"), "leader", LEADER_ADAPTERS,
                      data.value_loc("leader") if "leader" in data else data.loc)
    followers: list[AdapterSpec] = []
    fl = data.get("followers")
    if not isinstance(fl, LList) or not fl:
        ck.add(data.value_loc("followers") if "followers" in data else data.loc,
               "followers must be a non-empty list of follower sources",
               "e.g.\n  followers:\n    - {adapter: simulated, profile: good, seed: 1}")
    else:
        for i, f in enumerate(fl):
            spec = _adapter(ck, f, f"followers[{i}]", FOLLOWER_ADAPTERS, fl.item_loc(i))
            if spec is not None:
                followers.append(spec)
        names = {p.stream for p in pairs}
        for f in fl:
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


def load_plan(path: str | Path, *, participant: str | None = None) -> SessionPlan:
    """Load and validate a session plan and every choreography it names.

    Parameters
    ----------
    path : str or Path
        The plan file.
    participant : str, optional
        Participant code overriding the plan's ``participant:`` (validated the
        same way).

    Returns
    -------
    SessionPlan

    Raises
    ------
    PlanError
        Every problem found, each with ``file:line:column`` and a hint: unknown
        keys, missing or out-of-range values, a participant code that is not
        pseudonymous, missing consent confirmation, choreographies that do not
        exist, do not load, are written for another robot or exceed its limits,
        inconsistent stream pairings, unknown adapters or settings.
    """
    path = Path(path)
    try:
        plan, problems = _parse(path, participant=participant)
    except PlanError:
        raise
    except InputError as exc:
        raise PlanError(exc.problems) from exc
    if problems:
        raise PlanError(problems)
    assert plan is not None
    return plan


def check_plan(path: str | Path) -> SessionPlan:
    """Validate a plan for ``echoreo check``; the plan when valid, else :class:`PlanError`.

    Parameters
    ----------
    path : str or Path
        The plan file.
    """
    return load_plan(path)
