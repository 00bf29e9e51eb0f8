"""A simulated leader robot: servos that follow commands with lag and a speed limit.

Each joint is a first-order lag toward its command, with the rate clipped
at the joint's velocity limit and the position clipped to its range:

.. math::
    \\dot q = \\operatorname{clip}\\!\\left(\\frac{q_{cmd} - q}{\\tau},
              -v_{max}, v_{max}\\right)

A first-order lag is the usual low-order model of a position-controlled
servo's closed loop ([1]_ ch. 3, first-order systems). Over one step of length
``dt`` with the command held (zero-order hold) the unsaturated lag is
integrated exactly,

.. math:: q_{k+1}^{lag} = q_{cmd} + (q_k - q_{cmd})\\, e^{-dt/\\tau},

and the step is then limited to ``|q_{k+1} - q_k| <= v_max dt``. While the
speed limit is not reached this is the exact solution of the lag (step
response ``1 - exp(-t/tau)``); while it is reached the joint moves at
``v_max``, which is also exact. Within a step that crosses from one regime to
the other the result is a first-order approximation.

References
----------
.. [1] Franklin, G. F., Powell, J. D., & Emami-Naeini, A. (2015). *Feedback
   Control of Dynamic Systems* (7th ed.). Pearson.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from echoreo.sim.robot import Robot

__all__ = ["LeaderSim"]


class LeaderSim:
    """Simulated leader robot with first-order actuator lag and velocity saturation.

    Parameters
    ----------
    robot : Robot
    tau_s : float, s
        Time constant of the lag. The default 0.05 s is a round value of the
        order of the closed-loop response of small hobby servos; set it from a
        measured step response when modelling a particular robot.
    rng : numpy.random.Generator, optional
        Needed when ``noise_std > 0``.
    noise_std : float, rad
        Standard deviation of Gaussian measurement noise added to the
        reported pose (the internal state stays noise-free). Default 0.
    q0 : array_like, shape (n_joints,), rad, optional
        Initial pose (default: the robot's rest pose).

    Attributes
    ----------
    q : ndarray, shape (n_joints,), rad
        The true (noise-free) pose.
    """

    def __init__(self, robot: Robot, tau_s: float = 0.05, rng: np.random.Generator | None = None,
                 *, noise_std: float = 0.0, q0: ArrayLike | None = None):
        if not np.isfinite(tau_s) or tau_s <= 0:
            raise ValueError(f"tau_s must be a positive number of seconds, got {tau_s!r}")
        if not np.isfinite(noise_std) or noise_std < 0:
            raise ValueError(f"noise_std must be >= 0 rad, got {noise_std!r}")
        if noise_std > 0 and rng is None:
            raise ValueError("measurement noise needs a random generator: pass "
                             "rng=numpy.random.default_rng(seed)")
        self.robot = robot
        self.tau_s = float(tau_s)
        self.noise_std = float(noise_std)
        self.rng = rng
        self.q = np.empty(robot.n_joints)
        self.reset(robot.rest if q0 is None else q0)

    def _vec(self, v: ArrayLike, what: str) -> NDArray[np.float64]:
        v = np.asarray(v, dtype=float)
        if v.shape != (self.robot.n_joints,):
            raise ValueError(f"{what} must have shape ({self.robot.n_joints},) "
                             f"(joints of {self.robot.name!r}); got shape {v.shape}")
        if not np.all(np.isfinite(v)):
            raise ValueError(f"{what} must be finite")
        return v

    def reset(self, q0: ArrayLike) -> None:
        """Set the true pose to ``q0`` (rad, shape (n_joints,))."""
        self.q = np.clip(self._vec(q0, "q0"), self.robot.lower, self.robot.upper)

    def measure(self) -> NDArray[np.float64]:
        """The reported pose: the true pose plus measurement noise, shape (n_joints,), rad."""
        if self.noise_std > 0:
            return self.q + self.rng.normal(0.0, self.noise_std, self.q.shape)
        return self.q.copy()

    def _advance(self, q: NDArray, q_cmd: NDArray, dt: float) -> NDArray:
        lag = q_cmd + (q - q_cmd) * np.exp(-dt / self.tau_s)
        vmax = self.robot.max_velocity * dt
        new = q + np.clip(lag - q, -vmax, vmax)
        return np.clip(new, self.robot.lower, self.robot.upper)

    def step(self, q_cmd: ArrayLike, dt: float) -> NDArray[np.float64]:
        """Hold ``q_cmd`` for ``dt`` seconds and return the measured pose afterwards.

        Formula in the module docstring (exact lag step, then the speed and
        position limits).

        Parameters
        ----------
        q_cmd : array_like, shape (n_joints,), rad
        dt : float, s, >= 0

        Returns
        -------
        ndarray, shape (n_joints,), rad
        """
        if not np.isfinite(dt) or dt < 0:
            raise ValueError(f"dt must be >= 0 s, got {dt!r}")
        self.q = self._advance(self.q, self._vec(q_cmd, "q_cmd"), float(dt))
        return self.measure()

    def run(self, t: ArrayLike, q_cmd: ArrayLike) -> NDArray[np.float64]:
        """Play a sampled command stream from the current pose.

        The command ``q_cmd[k]`` is held from ``t[k]`` to ``t[k+1]`` (zero-order
        hold). Row ``k`` of the result is the measured pose at ``t[k]``, so row 0
        is the pose before any command acted.

        Parameters
        ----------
        t : array_like, shape (n,), s, strictly increasing
        q_cmd : array_like, shape (n, n_joints), rad

        Returns
        -------
        ndarray, shape (n, n_joints), rad
            Measured poses; the simulator's state is the true pose at ``t[-1]``.
        """
        t = np.asarray(t, dtype=float)
        q_cmd = np.asarray(q_cmd, dtype=float)
        n = t.shape[0]
        if t.ndim != 1 or q_cmd.shape != (n, self.robot.n_joints):
            raise ValueError(f"t must have shape (n,) and q_cmd shape (n, "
                             f"{self.robot.n_joints}); got {t.shape} and {q_cmd.shape}")
        dts = np.diff(t)
        if np.any(~(dts > 0)) or not np.all(np.isfinite(q_cmd)):
            raise ValueError("t must increase strictly and q_cmd must be finite")
        true = np.empty((n, self.robot.n_joints))
        if n == 0:
            return true
        q = self.q
        true[0] = q
        # A loop over samples is inherent (each state depends on the last); the
        # per-step work is vectorised over joints.
        decay = np.exp(-dts / self.tau_s)
        vmax = self.robot.max_velocity
        lo, hi = self.robot.lower, self.robot.upper
        for k in range(n - 1):
            c = q_cmd[k]
            lag = c + (q - c) * decay[k]
            lim = vmax * dts[k]
            q = np.clip(q + np.clip(lag - q, -lim, lim), lo, hi)
            true[k + 1] = q
        self.q = q
        if self.noise_std > 0:
            return true + self.rng.normal(0.0, self.noise_std, true.shape)
        return true
