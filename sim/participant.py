"""Virtual participants: people who copy the leader robot, imperfectly.

A participant watches the leader and copies its joint motion onto a human
upper body (:func:`echoreo.sim.human_model`) with the faults an
:class:`ImitationProfile` describes: reaction lag and its variability from
repetition to repetition, amplitude gain per arm, smooth movement noise,
physiological tremor, fatigue over repetitions, skipped repetitions, a head
that follows the arms, and imitation in the wrong mode (anatomical when a
mirror image is asked for, or the reverse). :func:`simulate_participant`
returns the joint trajectories and the streams a wearable set-up would give:
one IMU on each wrist and a camera-based head-pose estimate.

Construction of the participant's joint trajectory :math:`q_p(t)`
(per joint :math:`j`; all steps vectorised over samples):

1. *Mode.* The leader's posture :math:`q_L` or its mirror image
   :math:`\\tilde q_L = q_L[\\,m\\,]\\,s` (the robot's ``mirror_index`` :math:`m`
   and ``mirror_sign`` :math:`s`) is copied joint by joint by name. Facing
   the robot, a participant asked to mirror copies the robot's right arm
   with the left; anatomical imitation copies the same side. With a mode
   error :math:`e \\in [0, 1]` the copied target is
   :math:`(1 - e)\\,q_{asked} + e\\,q_{other}`.
2. *Lag.* :math:`x_j(t) = q_{target,j}(t - \\ell(t))`, where the lag
   :math:`\\ell(t)` interpolates per-repetition lags
   :math:`\\ell_k = \\ell_0 + \\sigma_\\ell z_k` at the repetition centres.
   The result is low-pass filtered at 4 Hz with zero phase (voluntary arm
   movement carries little power above a few hertz; Winter 2009, ch. 3), so
   the filter adds no delay of its own.
3. *Amplitude.* About the leader's rest posture :math:`r` (mapped the same
   way): :math:`y_j = r_j + g_j\\,a(t)\\,p(t)\\,(x_j - r_j)` with the gain
   :math:`g_j` of the joint's side, fatigue :math:`a(t)` interpolating
   :math:`(1 - f)^k` over repetitions :math:`k = 0, 1, ...` (arms only), and
   presence :math:`p(t)`, 0 during skipped repetitions with raised-cosine
   edges of 0.25 s outside the window.
4. *Head following the arms.* With gain :math:`h`, neck rotation gains
   :math:`\\tfrac h2 (d_L - d_R)` and neck flexion :math:`-\\tfrac h4 (d_L + d_R)`,
   where :math:`d_{side}` is the side's shoulder flexion plus abduction
   away from rest: the head turns toward a raised arm and lifts with both.
5. *Noise and tremor.* Band-limited Gaussian noise (0 to ``noise_band_hz``)
   on every joint and narrow-band tremor around ``tremor_hz`` on the arm
   joints are added, and the result is clipped to the human ranges of motion.

Everything random comes from the passed generator, split into independent
child generators in a fixed order, and every generator draws the same
amount whatever the profile's levels are, so a grid of degradations run
with one seed differs only in the degraded quantity.

References
----------
.. [1] Winter, D. A. (2009). *Biomechanics and Motor Control of Human
   Movement* (4th ed.). Wiley. (ch. 3: frequency content of human movement.)
.. [2] Lakie, M., Vernooij, C. A., Osler, C. J., Stevenson, A. T., Scott,
   J. P. R., & Reynolds, R. F. (2015). Increased gravitational force reveals
   the mechanical, resonant nature of physiological tremor. *Journal of
   Physiology*, 593(19), 4411-4422. (Physiological hand tremor peaks
   between 6 and 12 Hz.)
.. [3] Elble, R. J., & Koller, W. C. (1990). *Tremor*. Johns Hopkins
   University Press. (8-12 Hz neurogenic component of physiological tremor;
   from memory.)
.. [4] Wade, P., Gresty, M. A., & Findley, L. J. (1982). A normative study of
   postural tremor of the hand. *Archives of Neurology*, 39(6), 358-362.
   (Hand tremor 0.0015-0.035 g peak, mode 0.01 g; author list from memory.)
.. [5] Murphy-Chutorian, E., & Trivedi, M. M. (2009). Head pose estimation
   in computer vision: a survey. *IEEE Transactions on Pattern Analysis and
   Machine Intelligence*, 31(4), 607-626. (Camera estimators err by a few
   degrees; from memory.)
.. [6] Woodman, O. J. (2007). *An introduction to inertial navigation*.
   Technical Report UCAM-CL-TR-696, University of Cambridge Computer
   Laboratory. (White noise and bias of MEMS inertial sensors.)
.. [7] Welford, A. T. (Ed.) (1980). *Reaction Times*. Academic Press.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import signal

from echoreo.errors import InputError, Problem
from echoreo.sim._participant_signals import (
    band_noise,
    burst_keep_mask,
    device_clock,
    window_presence,
)
from echoreo.sim.profile import (
    DEGRADATIONS,
    PROFILES,
    ImitationProfile,
    degrade,
    vary_profile,
)

__all__ = [
    "DEFAULT_DROPOUTS",
    "DEFAULT_RATES",
    "DEGRADATIONS",
    "IMU_NOISE",
    "PROFILES",
    "ImitationProfile",
    "ParticipantRecording",
    "SimStream",
    "degrade",
    "simulate_participant",
    "vary_profile",
]

MODES = ("mirror", "anatomical")

#: Nominal sampling rates of the simulated streams, Hz. 100 Hz is a common
#: rate of wearable IMUs for human movement; 30 Hz is a common video frame rate.
DEFAULT_RATES: dict[str, float] = {
    "right_wrist_imu": 100.0,
    "left_wrist_imu": 100.0,
    "head_pose": 30.0,
}

#: Fraction of samples lost per stream when ``dropouts`` is not given: the
#: wrist IMUs lose none, the camera loses 2 % of frames (face not found).
DEFAULT_DROPOUTS: dict[str, float] = {
    "right_wrist_imu": 0.0,
    "left_wrist_imu": 0.0,
    "head_pose": 0.02,
}

_IMU_CHANNELS = ("acc_x", "acc_y", "acc_z", "gyro_x", "gyro_y", "gyro_z")
_IMU_UNITS = ("m/s^2", "m/s^2", "m/s^2", "rad/s", "rad/s", "rad/s")
_HEAD_CHANNELS = ("yaw", "pitch", "roll")
_HEAD_UNITS = ("rad", "rad", "rad")
_STREAM_SITES = {"right_wrist_imu": "right_wrist", "left_wrist_imu": "left_wrist"}

# Mean burst lengths of lost samples (samples): short radio dropouts of a few
# packets, and a face lost for a few video frames. Modelling choices.
_MEAN_BURST = {"imu": 5.0, "head_pose": 3.0}

# Camera head-pose error (rad): white frame-to-frame error plus a slowly
# varying error below 0.5 Hz. Camera estimators err by a few degrees [5]; the
# split into 1.5 deg white and 1 deg slow is our choice.
_HEAD_WHITE_RAD = np.deg2rad(1.5)
_HEAD_SLOW_RAD = np.deg2rad(1.0)
_HEAD_SLOW_HZ = 0.5

# Human movement smoothing: 4 Hz zero-phase low-pass, order 2 (see step 2).
_SMOOTH_HZ = 4.0
# Raised-cosine edge of a skipped repetition, s.
_SKIP_RAMP_S = 0.25


@dataclass(frozen=True, eq=False)
class SimStream:
    """One simulated sensor stream as a device would deliver it.

    Parameters
    ----------
    name : str
        Stream name (``right_wrist_imu``, ``left_wrist_imu``, ``head_pose``).
    kind : str
        ``imu`` or ``head_pose``.
    channels : tuple of str
    units : tuple of str
    t_dev : ndarray, shape (n,), s
        Device timestamps (the device's own clock).
    data : ndarray, shape (n, c)
    seq : ndarray of int64, shape (n,)
        Device sequence numbers; lost samples leave gaps.
    t : ndarray, shape (n,), s, optional
        Session-clock instants of the samples (the simulation's ground truth;
        a real device does not send it).
    rate_hz : float, optional
        Nominal rate on the device clock, Hz.
    """

    name: str
    kind: str
    channels: tuple[str, ...]
    units: tuple[str, ...]
    t_dev: NDArray[np.float64]
    data: NDArray[np.float64]
    seq: NDArray[np.int64]
    t: NDArray[np.float64] | None = None
    rate_hz: float = float("nan")


@dataclass(frozen=True, eq=False)
class ParticipantRecording:
    """What :func:`simulate_participant` returns.

    Parameters
    ----------
    t : ndarray, shape (n,), s
        The leader's sample times (as passed in).
    q : ndarray, shape (n, n_joints), rad
        The participant's joint angles at ``t``, in ``joint_names`` order.
    joint_names : tuple of str
        Joint names of the human model.
    streams : dict of str to SimStream
    model : Robot
        The human model the participant was simulated on.
    profile : ImitationProfile
    mode : str
        The imitation mode that was asked for.
    skipped : ndarray of bool, shape (k,)
        Which repetitions of ``rep_windows`` were skipped.
    rep_lag_s : ndarray, shape (k,), s
        The lag of each repetition.
    rep_amplitude : ndarray, shape (k,)
        Fatigue factor of each repetition (1 = fresh).
    height_m : float, m
    """

    t: NDArray[np.float64]
    q: NDArray[np.float64]
    joint_names: tuple[str, ...]
    streams: dict[str, SimStream]
    model: Any
    profile: ImitationProfile
    mode: str
    skipped: NDArray[np.bool_]
    rep_lag_s: NDArray[np.float64]
    rep_amplitude: NDArray[np.float64]
    height_m: float


def simulate_participant(
    robot: Any,
    t: ArrayLike,
    q_leader: ArrayLike,
    rep_windows: ArrayLike,
    profile: ImitationProfile,
    *,
    mode: str,
    rng: np.random.Generator,
    height_m: float = 1.70,
    rates: Mapping[str, float] | None = None,
    dropouts: float | Mapping[str, float] | None = None,
    clocks: Mapping[str, tuple[float, float]] | None = None,
    sensor_noise: bool = True,
) -> ParticipantRecording:
    """Simulate one participant copying the leader, with wearable-sensor streams.

    The joint trajectory follows the steps in the module docstring. It is
    computed on an internal grid of at least 200 Hz (twice the highest stream
    rate) and linearly interpolated onto ``t`` and onto the sample instants of
    each stream. The streams:

    * ``right_wrist_imu``, ``left_wrist_imu`` (kind ``imu``): accelerometer
      (specific force, m/s^2) and gyroscope (rad/s) in the wrist-site frame,
      from :func:`echoreo.sim.imu` on the human model, with white noise and a
      constant bias per device when ``sensor_noise`` (consumer-grade MEMS
      levels; see :data:`IMU_NOISE`).
    * ``head_pose`` (kind ``head_pose``): yaw, pitch, roll (rad) of the head
      site from :func:`echoreo.sim.head_orientation`, plus camera error
      (1.5 deg white and 1 deg slowly varying, RMS).

    Each stream's device samples regularly on its own clock
    ``t_dev = offset + (1 + drift_ppm 1e-6) t`` (``clocks``), carries
    sequence numbers, and loses the fraction of samples given by
    ``dropouts`` in short bursts (the sequence numbers then show gaps).

    Parameters
    ----------
    robot : Robot
        The leader.
    t : array_like, shape (n,), s
        Leader sample times, strictly increasing.
    q_leader : array_like, shape (n, robot n_joints), rad
        The leader's measured (or commanded) joint angles.
    rep_windows : array_like, shape (k, 2), s
        Start and end of each movement repetition of the leader.
    profile : ImitationProfile
    mode : {"mirror", "anatomical"}
        The imitation mode asked of the participant.
    rng : numpy.random.Generator
        Source of all randomness; the same seed gives identical output.
    height_m : float, m
        Body height of the participant.
    rates : mapping of str to float, optional
        Stream rates in Hz overriding :data:`DEFAULT_RATES`; a rate of 0
        leaves the stream out.
    dropouts : float or mapping of str to float, optional
        Fraction of samples lost: one number for every stream, or per stream
        name over :data:`DEFAULT_DROPOUTS` (the default).
    clocks : mapping of str to (float, float), optional
        Per stream ``(offset_s, drift_ppm)`` of the device clock; default
        ``(0, 0)`` (device time equals session time).
    sensor_noise : bool
        Add IMU noise and bias and camera error (default True).

    Returns
    -------
    ParticipantRecording
    """
    from echoreo.sim import head_orientation, imu
    from echoreo.sim.human import human_model

    t = np.asarray(t, dtype=float)
    qL = np.asarray(q_leader, dtype=float)
    windows = np.asarray(rep_windows, dtype=float).reshape(-1, 2)
    _check_inputs(robot, t, qL, windows, mode, height_m)
    rates_all = dict(DEFAULT_RATES)
    rates_all.update(rates or {})
    drop_all = dict(DEFAULT_DROPOUTS)
    if isinstance(dropouts, Mapping):
        drop_all.update(dropouts)
    elif dropouts is not None:
        drop_all = dict.fromkeys(drop_all, float(dropouts))
    clocks = dict(clocks or {})

    human = human_model(height_m)
    p = profile
    (r_timing, r_skip, r_noise, r_tremor, *r_streams) = rng.spawn(4 + 2 * 3)
    r_sensor = dict(zip(DEFAULT_RATES, r_streams[:3], strict=True))
    r_drop = dict(zip(DEFAULT_RATES, r_streams[3:], strict=True))

    # ---- 1. mode: the target posture in human joint order
    target, rest = _mapped_target(robot, human, qL, mode, p.mode_error)

    # ---- internal grid
    fs = max(200.0, 2.0 * max(rates_all.values()))
    n_int = int(np.floor((t[-1] - t[0]) * fs + 1e-9)) + 1
    tg = t[0] + np.arange(n_int) / fs

    # ---- 2. lag with per-repetition jitter
    k = len(windows)
    order = np.argsort(windows[:, 0], kind="stable")
    rank = np.empty(k, dtype=np.int64)
    rank[order] = np.arange(k)
    z = r_timing.standard_normal(k)
    rep_lag = np.maximum(p.lag_s + p.lag_jitter_s * z, 0.0)
    centres = windows.mean(axis=1)
    if k:
        lag_t = np.interp(tg, centres[order], rep_lag[order])
    else:
        lag_t = np.full(n_int, p.lag_s)
    t_src = np.maximum.accumulate(tg - lag_t)
    x = np.column_stack([np.interp(t_src, t, target[:, j]) for j in range(target.shape[1])])
    sos = signal.butter(2, _SMOOTH_HZ / (0.5 * fs), output="sos")
    if n_int > 30:
        x = signal.sosfiltfilt(sos, x, axis=0)

    # ---- 3. amplitude: side gains, fatigue, skipped repetitions
    names = human.joint_names
    arm = np.array([n.startswith(("left_", "right_")) for n in names])
    gains = np.array([p.gain_left if n.startswith("left_") else
                      p.gain_right if n.startswith("right_") else p.gain_head for n in names])
    rep_amp = (1.0 - p.fatigue_per_rep) ** rank.astype(float)
    if k:
        fatigue_t = np.interp(tg, centres[order] + rep_lag[order], rep_amp[order])
    else:
        fatigue_t = np.ones(n_int)
    u = r_skip.random(k)
    skipped = np.zeros(k, dtype=bool)
    skipped[np.argsort(u, kind="stable")[: round(p.skip_fraction * k)]] = True
    skipped[[s for s in p.skip_reps if 0 <= s < k]] = True
    skip_win = np.column_stack([windows[:, 0], windows[:, 1] + rep_lag])[skipped]
    presence = window_presence(tg, skip_win, _SKIP_RAMP_S)
    amp = gains[None, :] * presence[:, None] * np.where(arm[None, :], fatigue_t[:, None], 1.0)
    y = rest[None, :] + amp * (x - rest[None, :])

    # ---- 4. head following the arms
    jx = {n: i for i, n in enumerate(names)}
    d = {s: (y[:, jx[f"{s}_shoulder_flexion"]] - rest[jx[f"{s}_shoulder_flexion"]])
         + (y[:, jx[f"{s}_shoulder_abduction"]] - rest[jx[f"{s}_shoulder_abduction"]])
         for s in ("left", "right")}
    y[:, jx["neck_rotation"]] += 0.5 * p.head_follow * (d["left"] - d["right"])
    y[:, jx["neck_flexion"]] -= 0.25 * p.head_follow * (d["left"] + d["right"])

    # ---- 5. movement noise and tremor, then the ranges of motion
    noise_rms = np.where(arm, p.noise_rad, p.head_noise_rad)
    y += band_noise(r_noise, n_int, len(names), fs, (0.0, p.noise_band_hz), noise_rms)
    half = 0.5 * p.tremor_bandwidth_hz
    tremor_rms = np.where(arm, p.tremor_rad, 0.0)
    y += band_noise(r_tremor, n_int, len(names), fs,
                    (p.tremor_hz - half, p.tremor_hz + half), tremor_rms)
    y = np.clip(y, human.lower, human.upper)

    q_out = _resample(tg, y, t)

    # ---- sensor streams
    streams: dict[str, SimStream] = {}
    for name in DEFAULT_RATES:
        rate = float(rates_all.get(name, 0.0))
        if rate <= 0:
            continue
        offset, drift = clocks.get(name, (0.0, 0.0))
        ts, t_dev, seq = device_clock(t[0], t[-1], rate, float(offset), float(drift))
        qs = np.clip(_resample(tg, y, ts), human.lower, human.upper)
        if name == "head_pose":
            hp = head_orientation(human, qs, site="head")
            data = np.column_stack([hp.yaw, hp.pitch, hp.roll])
            data = data + _camera_error(r_sensor[name], len(ts), rate, sensor_noise)
            kind, channels, units = "head_pose", _HEAD_CHANNELS, _HEAD_UNITS
        else:
            acc, gyro = _imu_with_noise(imu, human, ts, qs, _STREAM_SITES[name],
                                        r_sensor[name], sensor_noise)
            data = np.column_stack([acc, gyro])
            kind, channels, units = "imu", _IMU_CHANNELS, _IMU_UNITS
        keep = burst_keep_mask(r_drop[name], len(ts), float(drop_all.get(name, 0.0)),
                               _MEAN_BURST[kind])
        streams[name] = SimStream(name=name, kind=kind, channels=channels, units=units,
                                  t_dev=t_dev[keep], data=data[keep], seq=seq[keep],
                                  t=ts[keep], rate_hz=rate)

    return ParticipantRecording(
        t=t, q=q_out, joint_names=tuple(names), streams=streams, model=human,
        profile=profile, mode=mode, skipped=skipped, rep_lag_s=rep_lag,
        rep_amplitude=rep_amp, height_m=float(height_m),
    )


# --------------------------------------------------------------------------- helpers


def _check_inputs(robot: Any, t: NDArray, qL: NDArray, windows: NDArray, mode: str,
                  height_m: float) -> None:
    problems = []
    if mode not in MODES:
        problems.append(Problem(f"imitation mode {mode!r} is unknown",
                                hint="use 'mirror' or 'anatomical'"))
    if t.ndim != 1 or len(t) < 2:
        problems.append(Problem(f"t must have shape (n,) with n >= 2; got {t.shape}"))
    elif not np.all(np.diff(t) > 0):
        problems.append(Problem("t must be strictly increasing"))
    n_j = len(robot.joint_names)
    if qL.ndim != 2 or qL.shape != (len(t), n_j):
        problems.append(Problem(
            f"q_leader must have shape (len(t), n_joints) = ({len(t)}, {n_j}); got {qL.shape}"))
    elif not np.all(np.isfinite(qL)):
        problems.append(Problem("q_leader contains NaN or infinite values"))
    if windows.size and not np.all(windows[:, 1] > windows[:, 0]):
        problems.append(Problem("every repetition window must end after it starts"))
    if not (0.5 <= height_m <= 2.5):
        problems.append(Problem(f"body height {height_m} m is outside 0.5-2.5 m"))
    if problems:
        raise InputError(problems)


def _mapped_target(robot: Any, human: Any, qL: NDArray, mode: str,
                   mode_error: float) -> tuple[NDArray, NDArray]:
    """Leader posture and rest posture copied onto the human joints by name.

    Returns ``(target (n, n_h), rest (n_h,))``, rad, clipped to the human
    ranges. Joints the leader lacks are held at the human model's rest.
    """
    mi = np.asarray(robot.mirror_index)
    ms = np.asarray(robot.mirror_sign, dtype=float)
    both = np.vstack([np.asarray(robot.rest, dtype=float)[None, :], qL])
    mirrored = both[:, mi] * ms
    asked, other = (mirrored, both) if mode == "mirror" else (both, mirrored)
    src = (1.0 - mode_error) * asked + mode_error * other
    out = np.repeat(np.asarray(human.rest, dtype=float)[None, :], len(both), axis=0)
    rj = {n: i for i, n in enumerate(robot.joint_names)}
    for i, name in enumerate(human.joint_names):
        if name in rj:
            out[:, i] = src[:, rj[name]]
    out = np.clip(out, human.lower, human.upper)
    return out[1:], out[0]


def _resample(tg: NDArray, y: NDArray, t_new: NDArray) -> NDArray:
    """Linear interpolation of the internal-grid trajectory onto ``t_new``."""
    return np.column_stack([np.interp(t_new, tg, y[:, j]) for j in range(y.shape[1])])


def _camera_error(rng: np.random.Generator, n: int, rate: float, on: bool) -> NDArray:
    """White plus slowly varying head-pose error of a camera estimator, rad."""
    white = rng.standard_normal((n, 3)) * _HEAD_WHITE_RAD
    slow = band_noise(rng, n, 3, rate, (0.0, _HEAD_SLOW_HZ), _HEAD_SLOW_RAD)
    return white + slow if on else np.zeros((n, 3))


def _imu_with_noise(imu_fn: Any, human: Any, ts: NDArray, qs: NDArray, site: str,
                    rng: np.random.Generator, on: bool) -> tuple[NDArray, NDArray]:
    """IMU readings at a wrist site with a per-device bias and white noise.

    The bias of each axis is drawn once per device, :math:`b \\sim N(0,
    \\sigma_b^2)`; white noise of density :math:`N_d` is added by
    :class:`echoreo.sim.ImuNoise` (standard deviation :math:`N_d \\sqrt{f_s}`;
    Woodman 2007). Levels: :data:`IMU_NOISE`.
    """
    from echoreo.sim.sensors import ImuNoise

    b = rng.standard_normal(6)
    acc, gyro = _chunked_imu(imu_fn, human, ts, qs, site)
    if not on:
        return acc, gyro
    noise = ImuNoise(
        acc_noise_density=IMU_NOISE["acc_density"],
        gyro_noise_density=IMU_NOISE["gyro_density"],
        acc_bias=tuple(b[:3] * IMU_NOISE["acc_bias"]),
        gyro_bias=tuple(b[3:] * IMU_NOISE["gyro_bias"]),
    )
    return noise.apply(ts, acc, gyro, rng)


# Long recordings go through the IMU model in blocks, so that the per-link
# kinematics arrays stay small. Each block carries a margin of samples on
# both sides that is discarded: the spline derivatives at a sample depend on
# samples k steps away only through a factor decaying like (2 - sqrt 3)^k
# ~ 0.27^k (de Boor 1978, ch. IV), so 64 samples of margin leave the result
# unchanged to rounding.
_IMU_BLOCK = 6000
_IMU_MARGIN = 64


def _chunked_imu(imu_fn: Any, human: Any, ts: NDArray, qs: NDArray,
                 site: str) -> tuple[NDArray, NDArray]:
    n = len(ts)
    if n <= _IMU_BLOCK + 2 * _IMU_MARGIN:
        return imu_fn(human, ts, qs, site)
    acc = np.empty((n, 3))
    gyro = np.empty((n, 3))
    for a in range(0, n, _IMU_BLOCK):
        b = min(a + _IMU_BLOCK, n)
        lo, hi = max(a - _IMU_MARGIN, 0), min(b + _IMU_MARGIN, n)
        ac, gy = imu_fn(human, ts[lo:hi], qs[lo:hi], site)
        acc[a:b] = ac[a - lo : a - lo + (b - a)]
        gyro[a:b] = gy[a - lo : a - lo + (b - a)]
    return acc, gyro


#: IMU noise of a consumer-grade MEMS device (typical data-sheet magnitudes,
#: our choice, from memory; white noise plus constant bias as in Woodman 2007):
#: accelerometer noise density 200 ug/sqrt(Hz) and turn-on bias 0.05 m/s^2
#: (1 sigma); gyroscope noise density 0.01 deg/s/sqrt(Hz) and turn-on bias
#: 0.5 deg/s (1 sigma). At 100 Hz: 0.020 m/s^2 and 0.0017 rad/s per sample.
IMU_NOISE: dict[str, float] = {
    "acc_density": 200e-6 * 9.80665,        # m/s^2 / sqrt(Hz)
    "acc_bias": 0.05,                       # m/s^2
    "gyro_density": float(np.deg2rad(0.01)),  # rad/s / sqrt(Hz)
    "gyro_bias": float(np.deg2rad(0.5)),    # rad/s
}
