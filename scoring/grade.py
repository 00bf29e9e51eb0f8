"""Grades, bands and flags of one repetition.

The grade is a weighted mean of component scores in [0, 1], each a fixed,
monotone function of one metric (1 = indistinguishable from the leader),
times 100. Weights, scales, band limits and flag limits are the fields of
:class:`GradeConfig`; ``scoring/METHODS.md`` section 3 explains each default.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

__all__ = [
    "FLAGS",
    "GradeConfig",
    "asymmetric",
    "band_for",
    "component_scores",
    "grade_from_components",
    "still_grade",
]

#: every flag a record can carry, in display order (DEVELOPERS.md, "Score records")
FLAGS = ("lag", "amplitude_low", "amplitude_high", "asymmetry", "head_moving", "skipped",
         "missing_data")


@dataclass(frozen=True)
class GradeConfig:
    """Weights, scales, bands and flag limits of the grade.

    Component scores (each in [0, 1]):

    ========== ======================================= ==================
    component  score                                   metric
    ========== ======================================= ==================
    amplitude  :math:`\\min(r, 1/r)`                     median ratio r
    spread     :math:`\\min(q, 1/q)`                     IQR ratio q
    wasserstein :math:`e^{-W / s_W}`                    normalised W1
    shape      :math:`e^{-D / s_D}`                     shape distance D
    determinism :math:`\\mathrm{DET}` (0 if RR = 0)       cross-recurrence DET
    correlation :math:`\\max(0, \\rho)`                   record ``correlation`` ρ
    lag        :math:`e^{-\\ell / s_\\ell}`               lag ℓ (s)
    variability :math:`e^{-\\mathrm{CV} / s_V}`          across-repetition CV
    ========== ======================================= ==================

    grade = 100 · Σ w_c s_c / Σ w_c over the components that are defined.

    ρ is the record field ``correlation``: the Pearson correlation of the leader's and
    the lag-aligned follower's one-dimensional signals over the repetition,
    :math:`\\rho = \\sum_i (x_i - \\bar x)(y_i - \\bar y) / \\sqrt{\\sum_i (x_i - \\bar x)^2
    \\sum_i (y_i - \\bar y)^2}` (dimensionless, in [−1, 1]; METHODS.md 3.2).

    Attributes
    ----------
    w_amplitude, w_spread, w_wasserstein, w_shape, w_determinism, w_correlation,
    w_lag, w_variability : float
        Weights (any non-negative scale; they are normalised).
    wasserstein_scale, shape_scale, variability_scale : float
        Scales :math:`s_W`, :math:`s_D`, :math:`s_V` (dimensionless).
    lag_scale_s : float, s
        :math:`s_\\ell`.
    still_scale_imu : float, rad/s
        Scale of the stillness grade of gyroscope streams (see :func:`still_grade`).
    still_scale_head : float, rad
        Scale of the stillness grade of head-orientation streams.
    lag_limit_s : float, s
        ``lag`` flag above this lag.
    amplitude_low, amplitude_high : float
        ``amplitude_low`` below, ``amplitude_high`` above these motion ratios
        (follower RMS motion over the leader's, see METHODS.md 3.2).
    asymmetry_limit : float
        ``asymmetry`` when the two wrists' motion ratios differ by more than
        this factor.
    skipped_fraction : float
        ``skipped`` when the follower's RMS motion is below this fraction of
        the leader's.
    leader_still_imu : float, rad/s
        The leader counts as still below this RMS angular velocity.
    leader_still_head : float, rad
        The leader's head counts as still below this RMS angle deviation.
    head_moving_limit : float, rad
        ``head_moving`` when the follower's RMS head-angle deviation exceeds
        this while the leader's head is still.
    bands : tuple of (float, str)
        Lower grade limit and label, from the best band down; the last limit
        is 0.
    missing_band : str
        Band of a record that could not be graded.
    """

    w_amplitude: float = 0.20
    w_spread: float = 0.10
    w_wasserstein: float = 0.10
    w_shape: float = 0.20
    w_determinism: float = 0.05
    w_correlation: float = 0.20
    w_lag: float = 0.15
    w_variability: float = 0.0
    wasserstein_scale: float = 0.5
    shape_scale: float = 0.5
    variability_scale: float = 0.5
    lag_scale_s: float = 1.0
    still_scale_imu: float = 0.4
    still_scale_head: float = 0.1
    lag_limit_s: float = 1.0
    amplitude_low: float = 0.5
    amplitude_high: float = 2.0
    asymmetry_limit: float = 1.6
    skipped_fraction: float = 0.15
    leader_still_imu: float = 0.05
    leader_still_head: float = 0.01
    head_moving_limit: float = 0.07
    bands: tuple[tuple[float, str], ...] = (
        (85.0, "faithful"), (70.0, "close"), (50.0, "loose"), (30.0, "weak"),
        (0.0, "absent"))
    missing_band: str = "unscored"

    def __post_init__(self) -> None:
        weights = self.weights()
        if any(not (w >= 0 and math.isfinite(w)) for w in weights.values()):
            raise ValueError(f"grade weights must be finite and >= 0; got {weights}")
        if sum(weights.values()) <= 0:
            raise ValueError("at least one grade weight must be positive")
        limits = [b[0] for b in self.bands]
        if not limits or limits != sorted(limits, reverse=True) or limits[-1] != 0:
            raise ValueError(f"bands must run from the best down to a last limit of 0; "
                             f"got {self.bands}")

    def weights(self) -> dict[str, float]:
        """Component name -> weight."""
        return {"amplitude": self.w_amplitude, "spread": self.w_spread,
                "wasserstein": self.w_wasserstein, "shape": self.w_shape,
                "determinism": self.w_determinism, "correlation": self.w_correlation,
                "lag": self.w_lag, "variability": self.w_variability}

    def leader_still_limit(self, kind: str) -> float:
        """RMS motion below which the leader counts as still, for a stream kind."""
        return self.leader_still_head if kind == "head_pose" else self.leader_still_imu

    def still_scale(self, kind: str) -> float:
        """Scale of :func:`still_grade` for a stream kind."""
        return self.still_scale_head if kind == "head_pose" else self.still_scale_imu


def _ratio_score(r: float) -> float:
    if not math.isfinite(r):
        return float("nan")
    if r <= 0:
        return 0.0
    return min(r, 1.0 / r)


def _exp_score(x: float, scale: float) -> float:
    if not math.isfinite(x):
        return float("nan")
    return math.exp(-max(x, 0.0) / scale)


def component_scores(metrics: Mapping[str, float], cfg: GradeConfig) -> dict[str, float]:
    """Component scores in [0, 1] from one record's metrics.

    Parameters
    ----------
    metrics : mapping
        ``median_ratio``, ``iqr_ratio``, ``wasserstein``, ``shape_distance``,
        ``crqa_RR``, ``crqa_DET``, ``correlation``, ``lag_s``, ``variability`` (missing or
        NaN entries give a NaN score, which the grade leaves out).
    cfg : GradeConfig

    Returns
    -------
    dict of str to float
        One score per component of :meth:`GradeConfig.weights` (formulas in the
        class docstring).
    """
    def get(key: str) -> float:
        v = metrics.get(key, float("nan"))
        return float("nan") if v is None else float(v)

    det = get("crqa_DET")
    if get("crqa_RR") == 0.0:
        det = 0.0  # no cross-recurrence at all: the trajectories never come close
    rho = get("correlation")
    return {
        "amplitude": _ratio_score(get("median_ratio")),
        "spread": _ratio_score(get("iqr_ratio")),
        "wasserstein": _exp_score(get("wasserstein"), cfg.wasserstein_scale),
        "shape": _exp_score(get("shape_distance"), cfg.shape_scale),
        "determinism": min(max(det, 0.0), 1.0) if math.isfinite(det) else float("nan"),
        "correlation": max(rho, 0.0) if math.isfinite(rho) else float("nan"),
        "lag": _exp_score(get("lag_s"), cfg.lag_scale_s),
        "variability": _exp_score(get("variability"), cfg.variability_scale),
    }


def grade_from_components(scores: Mapping[str, float], cfg: GradeConfig) -> float:
    """Weighted mean of the defined component scores, times 100.

    .. math:: G = 100 \\, \\frac{\\sum_c w_c s_c}{\\sum_c w_c}
       \\quad (c \\text{ over components with a finite score and } w_c > 0)

    Parameters
    ----------
    scores : mapping of str to float
        From :func:`component_scores`.
    cfg : GradeConfig

    Returns
    -------
    float
        Grade in [0, 100]; NaN if no weighted component is defined.
    """
    num = den = 0.0
    for name, w in cfg.weights().items():
        s = scores.get(name, float("nan"))
        if w > 0 and s is not None and math.isfinite(s):
            num += w * s
            den += w
    return 100.0 * num / den if den > 0 else float("nan")


def still_grade(follower_rms: float, kind: str, cfg: GradeConfig) -> float:
    """Grade of a repetition in which the leader's paired site does not move.

    The follower should stay still too, so the grade falls with the
    follower's RMS motion :math:`m` (rad/s for gyroscopes, rad for head
    angles), slowly near the sensor noise floor and without saturating for
    large movements (so that more movement always costs more):

    .. math:: G = \\frac{100}{1 + (m / s_\\mathrm{still})^2}

    Parameters
    ----------
    follower_rms : float
        RMS deviation of the follower's filtered channels from their mean
        over the repetition.
    kind : str
        Stream kind (``imu`` or ``head_pose``).
    cfg : GradeConfig

    Returns
    -------
    float
        Grade in [0, 100].
    """
    if not math.isfinite(follower_rms):
        return float("nan")
    return 100.0 / (1.0 + (max(follower_rms, 0.0) / cfg.still_scale(kind)) ** 2)


def band_for(grade: float, cfg: GradeConfig) -> str:
    """Label of the band a grade falls in (``cfg.missing_band`` for NaN)."""
    if not math.isfinite(grade):
        return cfg.missing_band
    for limit, label in cfg.bands:
        if grade >= limit:
            return label
    return cfg.bands[-1][1]


def asymmetric(ratio_left: float, ratio_right: float, cfg: GradeConfig) -> bool:
    """Whether the two arms moved unlike each other in one repetition.

    Each wrist's motion ratio (follower RMS motion over the leader's) already
    divides by the leader's paired wrist, so the comparison is relative to
    the leader's own left/right relation:

    .. math:: \\lvert \\ln(r_\\mathrm{left} / r_\\mathrm{right}) \\rvert > \\ln(a)

    with ``a = cfg.asymmetry_limit``.

    Parameters
    ----------
    ratio_left, ratio_right : float
        Motion ratios (follower / leader) of the two wrist streams.
    cfg : GradeConfig

    Returns
    -------
    bool
        False when either ratio is undefined (NaN).
    """
    if not (math.isfinite(ratio_left) and math.isfinite(ratio_right)):
        return False
    lo, hi = sorted((max(ratio_left, 0.0), max(ratio_right, 0.0)))
    if hi <= 0:
        return False
    return lo * cfg.asymmetry_limit < hi
