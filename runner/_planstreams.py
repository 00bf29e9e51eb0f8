"""Stream pairs: which leader body site each follower stream is compared with.

:func:`leader_site_for` gives the pairing of a mode (mirror: left <-> right);
:func:`_streams` validates a plan's ``streams:`` list into
:class:`~echoreo.runner._plantypes.StreamPair` items.
"""

from __future__ import annotations

import re
from typing import Any

from echoreo.runner._plancheck import _Checker
from echoreo.runner._plantypes import StreamPair
from echoreo.yamlload import LDict, LList, Loc

__all__ = ["SITES", "STREAM_KINDS", "leader_site_for"]

SITES = ("left_wrist", "right_wrist", "head", "chest")
STREAM_KINDS = ("imu", "head_pose", "joints")
_STREAM_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,63}$")


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
            ck.add(s.value_loc("stream"),
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
            ck.add(s.value_loc("kind"),
                   f"stream kind {kind!r} is not known", "use one of: " + ", ".join(STREAM_KINDS))
            ok = False
        site = s.get("site")
        if site not in SITES:
            ck.add(s.value_loc("site"),
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
