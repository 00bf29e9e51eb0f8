"""Validation of a plan's leader and follower adapters and their settings.

:func:`_adapter` checks one ``leader:`` or ``followers:`` entry (simulated or
ZeroMQ: known keys, seeds, ranges, imitation profiles, dropouts, endpoints)
and returns its :class:`~echoreo.runner._plantypes.AdapterSpec` with plain
settings.
"""

from __future__ import annotations

import re
from typing import Any

from echoreo.runner._plancheck import _Checker
from echoreo.runner._plantypes import AdapterSpec
from echoreo.yamlload import LDict, LList, Loc

__all__ = ["FOLLOWER_ADAPTERS", "LEADER_ADAPTERS"]

LEADER_ADAPTERS = ("simulated", "zmq")
FOLLOWER_ADAPTERS = ("simulated", "zmq")

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
        ck.add(d.value_loc("adapter"),
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
