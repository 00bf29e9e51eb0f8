"""A session's content for scoring: streams on the session clock, spans, pairs, robot.

:func:`read_session` reads a session file into a :class:`SessionData`;
:func:`session_from_arrays` assembles one from simulator output; scoring
(:mod:`echoreo.scoring.session_scores`) works on either. ``scoring/METHODS.md``
section 2.1 describes what is read and how.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from echoreo.errors import Problem, ScoringInputError
from echoreo.scoring.params import ScoringParams
from echoreo.scoring.reference import KIND_CHANNELS, mirror_site

__all__ = ["SessionData", "StreamArrays", "default_pairs", "read_session",
           "session_from_arrays"]


@dataclass(frozen=True, eq=False)
class StreamArrays:
    """One recorded stream in memory.

    Attributes
    ----------
    name, kind : str
    channels : tuple of str
    t : ndarray, shape (n,), s
        Session-clock times.
    data : ndarray, shape (n, c)
        Values in SI units (rad, rad/s, m/s²).
    """

    name: str
    kind: str
    channels: tuple[str, ...]
    t: np.ndarray
    data: np.ndarray

    def columns(self, names: Sequence[str]) -> np.ndarray | None:
        """The given channels as an array ``(n, len(names))``, or None if one is missing."""
        idx = {c: i for i, c in enumerate(self.channels)}
        if any(c not in idx for c in names):
            return None
        return self.data[:, [idx[c] for c in names]]


@dataclass(frozen=True, eq=False)
class SessionData:
    """Everything scoring needs from one session.

    Attributes
    ----------
    session : str
        Session identifier (the file name without suffix).
    participant, study : str or None
    mode : {"mirror", "anatomical"}
    robot : Robot
        The leader's robot model.
    pairs : tuple of dict
        ``stream``, ``kind``, ``site``, ``leader_site`` (optional ``leader_stream``).
    spans : DataFrame
        ``choreography, step, move, repetition, kind, t_start, t_end`` (s).
    leader_t : ndarray, shape (m,), s
    leader_q : ndarray, shape (m, n_joints), rad
        Leader joints in robot joint order (empty when not recorded).
    streams : dict of str to StreamArrays
        Follower streams and recorded leader sensor streams.
    path : str or None
        Where the session was read from.
    problems : tuple of Problem
        What reading found wrong (missing streams, channels, ...).
    """

    session: str
    participant: str | None
    study: str | None
    mode: str
    robot: Any
    pairs: tuple[dict, ...]
    spans: pd.DataFrame
    leader_t: np.ndarray
    leader_q: np.ndarray
    streams: dict[str, StreamArrays]
    path: str | None = None
    problems: tuple[Problem, ...] = ()


def default_pairs(stream_names: Iterable[str], mode: str) -> tuple[dict, ...]:
    """Pairs for the simulator's default streams (``*_wrist_imu``, ``head_pose``).

    Parameters
    ----------
    stream_names : iterable of str
    mode : {"mirror", "anatomical"}

    Returns
    -------
    tuple of dict
        ``right_wrist_imu`` pairs with the leader's ``left_wrist`` in mirror mode
        and ``right_wrist`` in anatomical mode; ``head_pose`` with ``head``.
    """
    out = []
    for name in stream_names:
        if name.endswith("_wrist_imu"):
            site = name[: -len("_imu")]
            lead = mirror_site(site) if mode == "mirror" else site
            out.append({"stream": name, "kind": "imu", "site": site, "leader_site": lead})
        elif name == "head_pose":
            out.append({"stream": name, "kind": "head_pose", "site": "head",
                        "leader_site": "head"})
    return tuple(out)


def session_from_arrays(robot: Any, t: np.ndarray, q: np.ndarray, spans: pd.DataFrame,
                        streams: Mapping[str, Any], *, mode: str,
                        pairs: Sequence[Mapping[str, str]] | None = None,
                        session: str = "session", participant: str | None = None,
                        study: str | None = None) -> SessionData:
    """Assemble a :class:`SessionData` from arrays (for example simulator output).

    Parameters
    ----------
    robot : Robot
    t : ndarray, shape (m,), s
        Leader sample times on the session clock.
    q : ndarray, shape (m, n_joints), rad
        Leader joints (commanded or measured), robot joint order.
    spans : DataFrame
        The timeline's spans (``step, move, repetition, kind, t_start, t_end``;
        ``choreography`` optional).
    streams : mapping of str to stream
        Objects with ``name``, ``kind``, ``channels``, ``data`` and session-clock
        times ``t`` (``echoreo.sim.SimStream`` or :class:`StreamArrays`).
    mode : {"mirror", "anatomical"}
    pairs : sequence of mapping, optional
        Default :func:`default_pairs`.
    session, participant, study : str

    Returns
    -------
    SessionData
    """
    arrays = {}
    for name, s in streams.items():
        ts = getattr(s, "t", None)
        if ts is None:
            raise ScoringInputError(f"stream {name!r} has no session-clock times 't'")
        arrays[name] = StreamArrays(name, s.kind, tuple(s.channels), np.asarray(ts, float),
                                    np.asarray(s.data, float))
    sp = spans.copy()
    if "choreography" not in sp.columns:
        sp["choreography"] = ""
    return SessionData(session, participant, study, mode, robot,
                       tuple(dict(p) for p in (pairs if pairs is not None
                                               else default_pairs(arrays, mode))),
                       sp, np.asarray(t, float), np.asarray(q, float), arrays)


def _robot_from_meta(meta: Mapping[str, Any], path: str):
    from echoreo.sim import load_robot, parse_robot

    text = meta.get("robot")
    if isinstance(text, str) and text.strip():
        return parse_robot(text, source=f"{path} (robot snapshot)")
    name = meta.get("robot_name")
    if isinstance(name, str) and name:
        return load_robot(name)
    raise ScoringInputError(Problem(
        "the session file holds no robot snapshot (meta 'robot') and no 'robot_name'", path,
        hint="the leader's virtual sensors need the robot model; record the session with "
             "echoreo session, or add the robot YAML to meta"))


def _leader_stream_name(pair: Mapping[str, Any]) -> str:
    """Conventional name of a recorded leader sensor for a pair: ``leader_<site>_imu`` for
    kind ``imu``, ``leader_head_pose`` for kind ``head_pose``."""
    if pair.get("kind") == "head_pose":
        return "leader_head_pose"
    return f"leader_{pair.get('leader_site')}_imu"


def read_session(path_or_sessionfile: Any, params: ScoringParams | None = None) -> SessionData:
    """Read what scoring needs from a session file.

    Parameters
    ----------
    path_or_sessionfile : str, Path or SessionFile
    params : ScoringParams, optional
        ``leader_source`` decides between ``leader_state`` and ``leader_command``.

    Returns
    -------
    SessionData
        Missing follower streams or channels become entries of ``problems``
        (the pair stays, so its repetitions are recorded as ``missing_data``).

    Raises
    ------
    SessionFileError
        The file cannot be read as a session file.
    ScoringInputError
        No robot model, no leader joints, no pairs or no move spans.
    """
    from echoreo.sessionfile import SessionFile

    params = params or ScoringParams()
    own = not isinstance(path_or_sessionfile, SessionFile)
    sf = SessionFile(path_or_sessionfile) if own else path_or_sessionfile
    try:
        path = str(sf.path)
        meta = sf.meta
        problems: list[Problem] = []
        robot = _robot_from_meta(meta, path)
        available = set(sf.stream_names())
        order = {"state": ["leader_state"], "command": ["leader_command"],
                 "auto": ["leader_state", "leader_command"]}[params.leader_source]
        leader_t = np.zeros(0)
        leader_q = np.zeros((0, len(robot.joint_names)))
        for name in order:
            if name not in available:
                continue
            df = sf.read_stream(name)
            missing = [j for j in robot.joint_names if j not in df.columns]
            if missing:
                problems.append(Problem(f"leader stream {name!r} lacks joint channel(s) "
                                        f"{', '.join(missing)}", path))
                continue
            if len(df) >= 2:
                leader_t = df["t"].to_numpy(float)
                leader_q = df[list(robot.joint_names)].to_numpy(float)
                break
        pairs_meta = meta.get("pairs") or []
        if not isinstance(pairs_meta, list) or not pairs_meta:
            raise ScoringInputError(Problem(
                "the session file names no paired streams (meta 'pairs' is empty)", path,
                hint="pairs come from the session plan: each follower stream with its kind, "
                     "site and the leader site it copies"))
        pairs = []
        for p in pairs_meta:
            if not isinstance(p, Mapping) or not all(k in p for k in ("stream", "kind",
                                                                       "leader_site")):
                problems.append(Problem(f"meta 'pairs' entry {p!r} lacks stream, kind or "
                                        "leader_site; it is skipped", path))
                continue
            pair = dict(p)
            if not pair.get("leader_stream"):
                # a recorded leader sensor by naming convention (METHODS.md 2.2)
                guess = _leader_stream_name(pair)
                if guess in available:
                    pair["leader_stream"] = guess
            pairs.append(pair)
        streams: dict[str, StreamArrays] = {}
        desc = sf.streams().set_index("name")
        wanted = {p["stream"]: p["kind"] for p in pairs}
        wanted.update({p["leader_stream"]: p["kind"] for p in pairs if p.get("leader_stream")})
        for name, kind in wanted.items():
            if name not in available:
                problems.append(Problem(
                    f"stream {name!r} is paired in meta 'pairs' but was not recorded "
                    "(no such stream); its repetitions are flagged missing_data", path))
                continue
            all_channels = [c for c in desc.loc[name, "channels"]]
            all_units = list(desc.loc[name, "units"] or [])
            unit_of = dict(zip(all_channels, all_units, strict=False))
            needed = KIND_CHANNELS.get(str(desc.loc[name, "kind"] or kind), ())
            # Read only the compared channels when the stream has them all (half of an
            # IMU's); otherwise everything, so the missing-channel problem is reported later.
            channels = ([c for c in all_channels if c in needed]
                        if needed and all(c in all_channels for c in needed) else all_channels)
            units = [unit_of.get(c, "") for c in channels]
            df = sf.read_stream(name, channels=channels)
            data = df[channels].to_numpy(float) if channels else np.zeros((len(df), 0))
            for j, u in enumerate(units):
                if isinstance(u, str) and u.strip().lower() in ("deg", "degree", "degrees",
                                                                "deg/s"):
                    data[:, j] = np.deg2rad(data[:, j])
            streams[name] = StreamArrays(name, str(desc.loc[name, "kind"] or kind),
                                         tuple(channels), df["t"].to_numpy(float), data)
        spans = sf.spans()
        session = Path(path).stem
        return SessionData(
            session=session, participant=sf.participant, study=sf.study,
            mode=str(meta.get("mode", "mirror")), robot=robot, pairs=tuple(pairs),
            spans=spans, leader_t=leader_t, leader_q=leader_q, streams=streams, path=path,
            problems=tuple(problems))
    finally:
        if own:
            sf.close()


# --------------------------------------------------------------------------- preparation
