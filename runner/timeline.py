"""The compiled timeline and the limit checks run on sampled commands.

A :class:`Timeline` is what a choreography compiles to: the joint commands
sampled at the command rate and the table of spans that says which step, move
and repetition every instant belongs to. Spans are the ground truth of
repetitions for the recorder and for scoring.

Limits are checked on the samples exactly as the robot receives them, with
the finite differences of the command stream at the command rate
(:func:`sampled_velocity`, :func:`sampled_acceleration`), so a trajectory that
passes here never asks the robot for more than its limits between two
commands, whatever the interpolation did between keyframes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = [
    "SPAN_COLUMNS",
    "Timeline",
    "limit_usage",
    "sampled_acceleration",
    "sampled_velocity",
]

#: Columns of :attr:`Timeline.spans`, in order.
SPAN_COLUMNS: tuple[str, ...] = ("step", "move", "repetition", "kind", "t_start", "t_end")

#: Relative slack on limit comparisons, for round-off in unit conversion only.
LIMIT_RTOL = 1e-9


def sampled_velocity(q: np.ndarray, rate_hz: float) -> np.ndarray:
    """Velocity of a command stream by forward differences.

    .. math:: v_i = (q_{i+1} - q_i)\\, f_s, \\qquad i = 0, \\dots, n-2

    The value a position-controlled joint must reach to go from one command
    to the next within one command period :math:`1/f_s`.

    Parameters
    ----------
    q : ndarray, shape (n, n_joints)
        Commands, rad.
    rate_hz : float
        Command rate :math:`f_s`, Hz.

    Returns
    -------
    ndarray, shape (max(n - 1, 0), n_joints)
        rad/s.
    """
    return np.diff(q, axis=0) * rate_hz


def sampled_acceleration(q: np.ndarray, rate_hz: float) -> np.ndarray:
    """Acceleration of a command stream by second central differences.

    .. math:: a_i = (q_{i+1} - 2 q_i + q_{i-1})\\, f_s^2, \\qquad i = 1, \\dots, n-2

    The stream is taken to be at rest before its first and after its last
    sample (the session ramps into and out of it at rest), so the first and
    last samples use :math:`q_{-1} = q_0` and :math:`q_n = q_{n-1}`.

    Parameters
    ----------
    q : ndarray, shape (n, n_joints)
        Commands, rad.
    rate_hz : float
        Command rate :math:`f_s`, Hz.

    Returns
    -------
    ndarray, shape (n, n_joints)
        rad/s².
    """
    if q.shape[0] == 0:
        return np.zeros_like(q)
    padded = np.concatenate([q[:1], q, q[-1:]], axis=0)
    return np.diff(padded, n=2, axis=0) * rate_hz**2


def limit_usage(q: np.ndarray, rate_hz: float, lower: np.ndarray, upper: np.ndarray,
                max_velocity: np.ndarray, max_acceleration: np.ndarray) -> dict[str, np.ndarray]:
    """How much of each limit every sample uses.

    Parameters
    ----------
    q : ndarray, shape (n, n_joints)
        Commands, rad.
    rate_hz : float
        Command rate, Hz.
    lower, upper : ndarray, shape (n_joints,)
        Position limits, rad.
    max_velocity, max_acceleration : ndarray, shape (n_joints,)
        rad/s and rad/s².

    Returns
    -------
    dict
        ``"below"`` and ``"above"``, shape (n, n_joints), rad beyond the lower
        or upper limit (0 inside); ``"velocity"``, shape (n - 1, n_joints),
        ``|v| / max_velocity``; ``"acceleration"``, shape (n, n_joints),
        ``|a| / max_acceleration`` (1 = at the limit), with ``v`` and ``a``
        from :func:`sampled_velocity` and :func:`sampled_acceleration`.
    """
    v = sampled_velocity(q, rate_hz)
    a = sampled_acceleration(q, rate_hz)
    return {
        "below": np.maximum(lower - q, 0.0),
        "above": np.maximum(q - upper, 0.0),
        "velocity": np.abs(v) / max_velocity,
        "acceleration": np.abs(a) / max_acceleration,
    }


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float, copy=True)
    a.flags.writeable = False
    return a


@dataclass(frozen=True, eq=False)
class Timeline:
    """A compiled choreography: joint commands sampled at the command rate.

    Parameters
    ----------
    t : ndarray, shape (n,), s
        Sample times from 0, ``t[i] = i / rate_hz``. The last sample is at or
        just after the end of the last step and holds the final posture.
    q : ndarray, shape (n, n_joints), rad
        Joint commands, columns in ``joint_names`` order.
    joint_names : tuple of str
        The robot's joint names.
    rate_hz : float
        Command rate, Hz.
    robot_name : str
        Name of the robot the timeline was compiled and checked for.
    name : str
        Name of the choreography.
    spans : pandas.DataFrame
        One row per repetition of a move, and one per rest and hold, in time
        order; columns ``step`` (1-based index in the sequence), ``move``
        (the move's name; the pose's name for a hold; ``""`` for a rest),
        ``repetition`` (1-based; 0 for rests and holds), ``kind`` (``move``,
        ``rest`` or ``hold``), ``t_start`` and ``t_end`` (s).
    cues : pandas.DataFrame
        Columns ``t`` (s) and ``text``: what to show operator and participant
        from that time on.

    Notes
    -----
    ``t`` and ``q`` are read-only arrays; timelines compare by identity
    (``eq=False``), since element-wise array equality has no single truth value.
    """

    t: np.ndarray
    q: np.ndarray
    joint_names: tuple[str, ...]
    rate_hz: float
    robot_name: str
    name: str
    spans: pd.DataFrame
    cues: pd.DataFrame

    def __post_init__(self) -> None:
        object.__setattr__(self, "t", _readonly(self.t))
        object.__setattr__(self, "q", _readonly(self.q))
        object.__setattr__(self, "joint_names", tuple(self.joint_names))

    @property
    def duration(self) -> float:
        """End of the last span, s."""
        return float(self.spans["t_end"].iloc[-1]) if len(self.spans) else 0.0

    @property
    def n_repetitions(self) -> int:
        """Number of move repetitions (rows of kind ``move``)."""
        return int((self.spans["kind"] == "move").sum())

    def rep_windows(self) -> np.ndarray:
        """The ``(t_start, t_end)`` of every move repetition.

        Returns
        -------
        ndarray, shape (n_repetitions, 2), s
        """
        moves = self.spans[self.spans["kind"] == "move"]
        return moves[["t_start", "t_end"]].to_numpy(dtype=float).reshape(-1, 2)

    def velocity(self) -> np.ndarray:
        """Commanded velocity, shape (n - 1, n_joints), rad/s (:func:`sampled_velocity`)."""
        return sampled_velocity(self.q, self.rate_hz)

    def acceleration(self) -> np.ndarray:
        """Commanded acceleration, shape (n, n_joints), rad/s² (:func:`sampled_acceleration`)."""
        return sampled_acceleration(self.q, self.rate_hz)
