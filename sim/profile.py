"""Imitation profiles: how a virtual participant copies the leader, and named presets.

:class:`ImitationProfile` holds the faults of one virtual participant (used by
:func:`echoreo.sim.simulate_participant`, whose module docstring gives the
formulas); :data:`PROFILES` names the presets of the demo study and the
tests; :func:`degrade` and :data:`DEGRADATIONS` make the controlled
degradations of the grade-validity grid; :func:`vary_profile` makes
individual variants for a cohort.

References
----------
.. [1] Lakie, M., Vernooij, C. A., Osler, C. J., Stevenson, A. T., Scott,
   J. P. R., & Reynolds, R. F. (2015). Increased gravitational force reveals
   the mechanical, resonant nature of physiological tremor. *Journal of
   Physiology*, 593(19), 4411-4422.
.. [2] Elble, R. J., & Koller, W. C. (1990). *Tremor*. Johns Hopkins
   University Press. (From memory.)
.. [3] Wade, P., Gresty, M. A., & Findley, L. J. (1982). A normative study of
   postural tremor of the hand. *Archives of Neurology*, 39(6), 358-362.
   (Author list from memory.)
.. [4] Welford, A. T. (Ed.) (1980). *Reaction Times*. Academic Press.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from echoreo.errors import InputError, Problem

__all__ = [
    "DEGRADATIONS",
    "PROFILES",
    "ImitationProfile",
    "degrade",
    "vary_profile",
]


@dataclass(frozen=True)
class ImitationProfile:
    """How one virtual participant imitates the leader.

    All fields have the defaults of a good imitator. Units are SI.

    Parameters
    ----------
    lag_s : float, s
        Mean reaction lag of the participant behind the leader. Default 0.30 s:
        somewhat longer than a simple visual reaction time (about 0.2 s;
        Welford 1980, from memory), since the person has to recognise the
        movement first (our choice).
    lag_jitter_s : float, s
        Standard deviation of the lag from one repetition to the next
        (per-person timing variability).
    gain_left, gain_right : float
        Amplitude gain of the participant's own left and right arm: 1 copies
        the leader's excursion from rest, 0.5 makes half of it.
    gain_head : float
        Amplitude gain of the neck joints when the leader moves its head.
    noise_rad : float, rad
        RMS of the smooth movement noise on each arm joint.
    head_noise_rad : float, rad
        RMS of the smooth movement noise on each neck joint (postural sway).
    noise_band_hz : float, Hz
        Upper band edge of the movement noise (low-pass, lower edge 0).
    tremor_rad : float, rad
        RMS of the tremor on each arm joint. Default 4e-5 rad: with all five
        arm joints trembling this gives about 0.011 g RMS (0.1 m/s^2) of
        6-12 Hz acceleration at a wrist held at rest (measured on the model),
        the order of normal postural hand tremor (0.0015-0.035 g peak, mode
        0.01 g; Wade et al. 1982).
    tremor_hz : float, Hz
        Centre frequency of the tremor; physiological hand tremor peaks
        between 6 and 12 Hz (Lakie et al. 2015), 8-12 Hz for its neurogenic
        component (Elble & Koller 1990, from memory). Default 9 Hz.
    tremor_bandwidth_hz : float, Hz
        Width of the tremor band around ``tremor_hz``.
    fatigue_per_rep : float
        Fraction of arm amplitude lost per repetition: repetition ``k``
        (0-based, in time order) is made with amplitude ``(1 - f) ** k``.
    skip_fraction : float
        Fraction of the repetitions that are skipped (the participant stays
        at rest through them): the ``round(skip_fraction * k)`` repetitions
        with the smallest of ``k`` uniform random keys, so the count is exact
        and a higher fraction with the same seed skips a superset.
    skip_reps : tuple of int
        Repetitions (indices into ``rep_windows``) skipped in any case.
    head_follow : float
        Gain with which the head follows the participant's own arm motion
        when it should stay still (see :mod:`echoreo.sim.participant`, step 4).
    mode_error : float
        Share of the wrong imitation mode in [0, 1]: 0 imitates as asked,
        1 imitates anatomically when a mirror is asked (or the reverse).
    """

    lag_s: float = 0.30
    lag_jitter_s: float = 0.03
    gain_left: float = 1.0
    gain_right: float = 1.0
    gain_head: float = 1.0
    noise_rad: float = 0.02
    head_noise_rad: float = 0.008
    noise_band_hz: float = 1.0
    tremor_rad: float = 4.0e-5
    tremor_hz: float = 9.0
    tremor_bandwidth_hz: float = 1.5
    fatigue_per_rep: float = 0.0
    skip_fraction: float = 0.0
    skip_reps: tuple[int, ...] = field(default_factory=tuple)
    head_follow: float = 0.0
    mode_error: float = 0.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "skip_reps", tuple(int(k) for k in self.skip_reps))
        problems = []
        nonneg = ("lag_s", "lag_jitter_s", "gain_left", "gain_right", "gain_head",
                  "noise_rad", "head_noise_rad", "tremor_rad", "head_follow")
        for name in nonneg:
            v = getattr(self, name)
            if not np.isfinite(v) or v < 0:
                problems.append(Problem(f"ImitationProfile.{name} is {v!r}; it must be "
                                        "a finite number >= 0"))
        for name in ("fatigue_per_rep", "skip_fraction", "mode_error"):
            v = getattr(self, name)
            if not (0.0 <= v <= 1.0):
                problems.append(Problem(f"ImitationProfile.{name} is {v!r}; it must lie "
                                        "in [0, 1]"))
        for name in ("noise_band_hz", "tremor_hz", "tremor_bandwidth_hz"):
            v = getattr(self, name)
            if not np.isfinite(v) or v <= 0:
                problems.append(Problem(f"ImitationProfile.{name} is {v!r}; it must be > 0"))
        if self.tremor_bandwidth_hz >= 2 * self.tremor_hz:
            problems.append(Problem(
                f"ImitationProfile.tremor_bandwidth_hz ({self.tremor_bandwidth_hz}) must be "
                f"less than twice tremor_hz ({self.tremor_hz})"))
        if problems:
            raise InputError(problems)

    def replace(self, **changes: Any) -> ImitationProfile:
        """A copy with some fields changed (:func:`dataclasses.replace`)."""
        return dataclasses.replace(self, **changes)


#: Named profiles used by the demo study and the tests.
PROFILES: dict[str, ImitationProfile] = {
    "good": ImitationProfile(),
    "good_quick": ImitationProfile(lag_s=0.22, lag_jitter_s=0.02, noise_rad=0.015),
    "good_steady": ImitationProfile(lag_s=0.35, lag_jitter_s=0.02, noise_rad=0.012),
    "good_loose": ImitationProfile(lag_s=0.32, lag_jitter_s=0.05, gain_left=0.93,
                                   gain_right=0.95, noise_rad=0.025),
    "wrong_mirror": ImitationProfile(mode_error=1.0),
    "weak_left_arm": ImitationProfile(gain_left=0.45),
    "head_follows": ImitationProfile(head_follow=0.4),
    "skipper": ImitationProfile(skip_fraction=0.25, skip_reps=(2,)),
    "tiring": ImitationProfile(fatigue_per_rep=0.06),
}

#: Controlled degradations for the grade-validity grid: kind -> (what the
#: level means, a suggested grid of levels, level 0 always being the base).
DEGRADATIONS: dict[str, tuple[str, tuple[float, ...]]] = {
    "lag": ("seconds added to lag_s", (0.0, 0.2, 0.4, 0.6, 0.8)),
    "gain": ("fraction of amplitude lost on both arms", (0.0, 0.15, 0.3, 0.45, 0.6)),
    "noise": ("rad added to noise_rad", (0.0, 0.03, 0.06, 0.09, 0.12)),
    "tremor": ("rad added to tremor_rad", (0.0, 0.0025, 0.005, 0.0075, 0.01)),
    "fatigue": ("fatigue_per_rep", (0.0, 0.03, 0.06, 0.09, 0.12)),
    "skip": ("skip_fraction", (0.0, 0.2, 0.4, 0.6, 0.8)),
    "wrong_mirror": ("mode_error", (0.0, 0.25, 0.5, 0.75, 1.0)),
    "weak_arm": ("fraction of amplitude lost on the left arm", (0.0, 0.15, 0.3, 0.45, 0.6)),
    "head": ("head_follow gain", (0.0, 0.1, 0.2, 0.3, 0.4)),
    "timing": ("seconds added to lag_jitter_s", (0.0, 0.05, 0.1, 0.15, 0.2)),
}


def degrade(base: ImitationProfile, kind: str, level: float) -> ImitationProfile:
    """A profile degraded in one respect by a given level.

    ``level = 0`` returns ``base`` unchanged; the meaning of the level for
    each ``kind`` is listed in :data:`DEGRADATIONS` together with a suggested
    grid. Gains multiply: ``gain`` sets both arm gains to
    ``base_gain * (1 - level)``, ``weak_arm`` only the left one. Additive
    kinds (``lag``, ``noise``, ``tremor``, ``timing``) add the level to the
    base value; the others (``fatigue``, ``skip``, ``wrong_mirror``, ``head``)
    set the field to the level.

    Parameters
    ----------
    base : ImitationProfile
    kind : str
        One of the keys of :data:`DEGRADATIONS`.
    level : float

    Returns
    -------
    ImitationProfile
    """
    if kind not in DEGRADATIONS:
        raise InputError(f"unknown degradation {kind!r}",
                         hint="use one of " + ", ".join(sorted(DEGRADATIONS)))
    x = float(level)
    if x == 0.0:
        return base
    b = base
    changes: dict[str, Any] = {
        "lag": {"lag_s": b.lag_s + x},
        "gain": {"gain_left": b.gain_left * (1 - x), "gain_right": b.gain_right * (1 - x)},
        "noise": {"noise_rad": b.noise_rad + x},
        "tremor": {"tremor_rad": b.tremor_rad + x},
        "fatigue": {"fatigue_per_rep": x},
        "skip": {"skip_fraction": x},
        "wrong_mirror": {"mode_error": x},
        "weak_arm": {"gain_left": b.gain_left * (1 - x)},
        "head": {"head_follow": x},
        "timing": {"lag_jitter_s": b.lag_jitter_s + x},
    }[kind]
    return b.replace(**changes)


def vary_profile(
    base: ImitationProfile, rng: np.random.Generator, spread: float = 0.15
) -> ImitationProfile:
    """An individual variant of a profile, for a cohort of distinct people.

    Lag, jitter and noise amplitudes are multiplied by log-normal factors
    :math:`\\exp(\\sigma z)` and arm gains by :math:`1 + \\sigma z / 3`
    (:math:`z \\sim N(0, 1)`, :math:`\\sigma` = ``spread``), so that a cohort
    of good imitators differs the way people do without changing who is good.

    Parameters
    ----------
    base : ImitationProfile
    rng : numpy.random.Generator
    spread : float
        Relative spread :math:`\\sigma`.

    Returns
    -------
    ImitationProfile
    """
    z = rng.standard_normal(6)
    f = np.exp(spread * z[:4])
    return base.replace(
        lag_s=base.lag_s * f[0],
        lag_jitter_s=base.lag_jitter_s * f[1],
        noise_rad=base.noise_rad * f[2],
        head_noise_rad=base.head_noise_rad * f[3],
        gain_left=max(0.0, base.gain_left * (1 + spread * z[4] / 3)),
        gain_right=max(0.0, base.gain_right * (1 + spread * z[5] / 3)),
    )
