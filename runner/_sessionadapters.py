"""The leader and follower adapters a session plan names.

:func:`make_leader` and :func:`make_followers` build the simulated adapters
(:mod:`echoreo.adapters.simulated`) or the ZeroMQ ones
(``adapters/PROTOCOL.md``) from the plan's ``leader:`` and ``followers:``
entries; :func:`echoreo.runner.session.run_session` connects them.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from echoreo.adapters.base import FollowerSource, Leader
from echoreo.errors import PlanError
from echoreo.runner.plan import SessionPlan

__all__ = ["make_followers", "make_leader"]


def _rng(seed: int) -> np.random.Generator:
    return np.random.default_rng(int(seed))


def make_leader(plan: SessionPlan) -> Leader:
    """The leader adapter named in the plan."""
    spec = plan.leader
    s = spec.settings
    if spec.adapter == "simulated":
        from echoreo.adapters.simulated import SimulatedLeader

        q0 = None
        if s.get("start_pose") == "first":
            q0 = plan.items[0].choreography.compile(plan.command_rate_hz).q[0]
        return SimulatedLeader(plan.robot, tau_s=float(s.get("tau_s", 0.05)),
                               rng=_rng(s["seed"]), noise_rad=float(s.get("noise_rad", 0.0)),
                               q0=q0, fail_after_s=s.get("fail_after_s"))
    return _zmq_adapter("leader", spec, plan)


def _zmq_adapter(role: str, spec: Any, plan: SessionPlan) -> Any:
    """A ZeroMQ leader or follower source from a plan entry (adapters/PROTOCOL.md)."""
    import echoreo.adapters as adapters

    name = "ZmqLeader" if role == "leader" else "ZmqFollowers"
    try:
        cls = getattr(adapters, name)
    except (AttributeError, ImportError):
        raise PlanError(spec.loc.problem(
            f"the ZeroMQ {role} adapter is not available in this build",
            "use `adapter: simulated`")) from None
    s = dict(spec.settings)
    kw: dict[str, Any] = {k: s[k] for k in ("keys", "timeout_s", "heartbeat_s",
                                            "connect_timeout_s", "sync_interval_s") if k in s}
    if role == "leader":
        return cls(s["endpoint"], **kw)
    eps = s.get("endpoints", s.get("endpoint"))
    eps = list(eps.values()) if isinstance(eps, dict) else (
        [eps] if isinstance(eps, str) else list(eps))
    # the adapter reports its own gap events; make its limit the plan's
    kw["gap_s"] = float(s.get("gap_s", plan.silent_after_s))
    if "require_all" in s:
        kw["require_all"] = bool(s["require_all"])
    return cls(eps, **kw)


def make_followers(plan: SessionPlan, t_s: np.ndarray, q_cmd: np.ndarray,
                   rep_windows: np.ndarray) -> list[FollowerSource]:
    """The follower sources named in the plan.

    Parameters
    ----------
    plan : SessionPlan
    t_s : ndarray, shape (n,), s
        Session-clock times of the whole commanded trajectory.
    q_cmd : ndarray, shape (n, n_joints), rad
        The commanded trajectory (what simulated participants watch).
    rep_windows : ndarray, shape (k, 2), s
        Movement repetitions on the session clock.
    """
    from echoreo.adapters.simulated import Dropout, SimulatedFollowers

    out: list[FollowerSource] = []
    planned = [p.stream for p in plan.pairs]
    rates = {p.stream: p.rate_hz for p in plan.pairs if p.rate_hz}
    for spec in plan.followers:
        s = spec.settings
        if spec.adapter != "simulated":
            out.append(_zmq_adapter("followers", spec, plan))
            continue
        drops = s.get("dropout") or []
        drops = drops if isinstance(drops, list) else [drops]
        from echoreo.sim.participant import DEFAULT_RATES

        streams = s.get("streams") or [n for n in planned if n in DEFAULT_RATES]
        out.append(SimulatedFollowers(
            plan.robot, t_s, q_cmd, rep_windows, profile=s.get("profile", "good"),
            mode=plan.mode, rng=_rng(s["seed"]), height_m=float(s.get("height_m", 1.70)),
            streams=streams, rates={k: v for k, v in rates.items() if k in streams},
            dropouts=s.get("loss_fraction"),
            clock_offset_s=float(s.get("clock_offset_s", 0.0)),
            clock_drift_ppm=float(s.get("clock_drift_ppm", 0.0)),
            latency_s=float(s.get("latency_s", 0.0)), glitch_every_s=s.get("glitch_every_s"),
            dropout=[Dropout(d["stream"], float(d["start_s"]), float(d["duration_s"]))
                     for d in drops]))
    return out


def _safe(fn: Callable) -> Any:
    """Call ``fn`` and swallow any error (used while shutting down)."""
    try:
        return fn()
    except Exception:
        return None


def _close_all(sources: list[FollowerSource], leader: Leader) -> None:
    """Close every follower source, then the leader, ignoring their errors."""
    for src in sources:
        _safe(src.close)
    _safe(leader.close)
