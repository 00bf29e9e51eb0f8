"""The session plan's data: items, stream pairs, adapter specs and the plan itself.

Frozen dataclasses built by :func:`echoreo.runner.plan.load_plan` once the
plan file has been validated; vary a plan with :func:`dataclasses.replace`
or the ``with_*`` methods of :class:`SessionPlan`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from echoreo.errors import PlanError
from echoreo.runner._participant_code import check_participant_code
from echoreo.yamlload import Loc

__all__ = ["AdapterSpec", "PlanItem", "SessionPlan", "StreamPair"]


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
