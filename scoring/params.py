"""Scoring parameters and the study-level choice of embedding delay and dimension.

One delay and one dimension per stream kind are shared by every participant
of a study, so that reconstructed trajectories and their metrics are
comparable across people (``scoring/METHODS.md`` section 2.6). They are
chosen on the leader's reference signals, which are the same for everyone
who ran the same choreography and do not depend on how well anyone imitated.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from echoreo.errors import InputError
from echoreo.scoring.grade import GradeConfig

__all__ = [
    "EmbeddingChoice",
    "ScoringParams",
    "choose_embedding",
    "combine_choices",
]


@dataclass(frozen=True)
class EmbeddingChoice:
    """Delay and dimension used for one stream kind.

    Attributes
    ----------
    kind : str
        Stream kind (``imu``, ``head_pose``).
    dim : int
        Embedding dimension.
    delay : int
        Delay in samples at the scoring rate.
    method : str
        How they were chosen, for example ``"AMI first minimum + fnn"``,
        ``"fallback"`` or ``"given"``.
    n_signals : int
        Number of leader segments (or sessions) the choice summarises.
    note : str
        Why a fallback was used, if one was.
    """

    kind: str
    dim: int
    delay: int
    method: str = "given"
    n_signals: int = 0
    note: str = ""


@dataclass(frozen=True)
class ScoringParams:
    """Every setting of the scoring pipeline (defaults justified in METHODS.md).

    Attributes
    ----------
    rate_hz : float, Hz
        Common uniform rate all streams are resampled to (50 Hz: ten times the
        ~5 Hz bandwidth of voluntary arm movement; Winter 2009, ch. 3).
    filter_cutoff_hz : float, Hz
        -3 dB frequency of the complete zero-phase low-pass (8 Hz).
    filter_order : int
        Order of one pass of the Butterworth filter (2; Winter 2009).
    max_gap_s : float, s
        Longest interval between source samples bridged by interpolation (0.2 s).
    lag_min_s, lag_max_s : float, s
        Window of follower reaction lags searched (0 to 2 s).
    lag_min_correlation : float
        A pair's own lag estimate is used only when the correlation peak
        reaches this (0.3); otherwise the pair takes the median lag of the
        other pairs in the step, or of the session (METHODS.md 2.5).
    embedding : tuple of EmbeddingChoice
        Delay and dimension per stream kind; empty means "choose them from the
        session(s) being scored" (:func:`choose_embedding`).
    dim_method : {"fnn", "cao"}
        Dimension estimator for the choice.
    dim_threshold : float
        Criterion passed to ``choose_dimension``: the FNN fraction below which a
        dimension is accepted (0.10; our choice, see METHODS.md 2.6: the leader's
        segments contain rests and holds where noise-free delay vectors collapse
        and the fraction levels off near 0.1 instead of reaching 0.01), or Cao's
        E1 level for ``dim_method="cao"`` (then the core default 0.9 is used if
        this is left at 0.10).
    min_dim : int
        Smallest dimension used (3): an estimate below it is raised to it, so
        that three principal components exist for the trajectory plots. Taking
        more delay coordinates than the minimum keeps the reconstruction an
        embedding (Takens 1981; Sauer, Yorke & Casdagli 1991); taking fewer
        does not.
    max_dim : int
        Largest dimension tried.
    max_delay_s : float, s
        Largest delay searched by the AMI (1 s).
    max_window_fraction : float
        The embedding window ``(dim - 1) * delay`` is capped at this fraction of
        the median repetition length, so typical repetitions can be embedded.
    fallback_dim : int
        Dimension used when no estimate is possible (3).
    fallback_delay_s : float, s
        Delay used when no estimate is possible (0.2 s).
    max_choice_samples : int
        Longest leader segment used for the choice (samples; longer segments are
        cut, for speed).
    max_choice_segments : int
        Most leader segments per kind and session used for the choice
        (evenly spread over the session).
    leader_source : {"auto", "state", "command"}
        Leader joint stream for virtual sensors; ``auto`` takes ``leader_state``
        when it holds samples, else ``leader_command``.
    radius_fraction : float
        Cross-recurrence radius as a fraction of the leader's phase-space
        diameter (0.1; Marwan et al. 2007).
    lmin : int
        Shortest diagonal/vertical line of the recurrence analysis (2).
    grade : GradeConfig
        Weights, bands and flag limits.
    """

    rate_hz: float = 50.0
    filter_cutoff_hz: float = 8.0
    filter_order: int = 2
    max_gap_s: float = 0.2
    lag_min_s: float = 0.0
    lag_max_s: float = 2.0
    lag_min_correlation: float = 0.3
    embedding: tuple[EmbeddingChoice, ...] = ()
    dim_method: str = "fnn"
    dim_threshold: float = 0.10
    min_dim: int = 3
    max_dim: int = 8
    max_delay_s: float = 1.0
    max_window_fraction: float = 0.5
    fallback_dim: int = 3
    fallback_delay_s: float = 0.2
    max_choice_samples: int = 3000
    max_choice_segments: int = 12
    leader_source: str = "auto"
    radius_fraction: float = 0.1
    lmin: int = 2
    grade: GradeConfig = field(default_factory=GradeConfig)

    def __post_init__(self) -> None:
        problems = []
        if not (self.rate_hz > 0 and math.isfinite(self.rate_hz)):
            problems.append(f"rate_hz must be positive; got {self.rate_hz}")
        if not 0 < self.filter_cutoff_hz:
            problems.append(f"filter_cutoff_hz must be positive; got {self.filter_cutoff_hz}")
        if not 0 <= self.lag_min_s <= self.lag_max_s:
            problems.append(f"need 0 <= lag_min_s <= lag_max_s; got {self.lag_min_s}, "
                            f"{self.lag_max_s}")
        if self.dim_method not in ("fnn", "cao"):
            problems.append(f"dim_method must be 'fnn' or 'cao'; got {self.dim_method!r}")
        if self.leader_source not in ("auto", "state", "command"):
            problems.append(f"leader_source must be 'auto', 'state' or 'command'; got "
                            f"{self.leader_source!r}")
        if problems:
            raise InputError("; ".join(problems))

    def embedding_for(self, kind: str) -> EmbeddingChoice | None:
        """The :class:`EmbeddingChoice` of a stream kind, or None if not set."""
        for choice in self.embedding:
            if choice.kind == kind:
                return choice
        return None

    def with_embedding(self, choices: Iterable[EmbeddingChoice]) -> ScoringParams:
        """A copy with the given choices (replacing those of the same kinds)."""
        new = {c.kind: c for c in self.embedding}
        new.update({c.kind: c for c in choices})
        return replace(self, embedding=tuple(new[k] for k in sorted(new)))

    def fallback(self, kind: str, note: str) -> EmbeddingChoice:
        """The fallback choice of a kind, with the reason."""
        delay = max(1, round(self.fallback_delay_s * self.rate_hz))
        return EmbeddingChoice(kind, self.fallback_dim, delay, "fallback", 0, note)


def _lower_median(values: Sequence[int]) -> int:
    s = sorted(int(v) for v in values)
    return s[(len(s) - 1) // 2]


def choose_embedding(kind: str, segments: Sequence[np.ndarray], params: ScoringParams,
                     rep_samples: float | None = None) -> EmbeddingChoice:
    """Delay and dimension of one stream kind from leader reference segments of one session.

    For every segment :math:`x` (a contiguous stretch of the leader's
    one-dimensional reference while it performs one step of repetitions):

    - delay :math:`\\tau` = first minimum of the average mutual information
      (Fraser & Swinney 1986; ``echoreo.scoring.choose_delay``), searched up to
      ``max_delay_s``;
    - dimension :math:`m` = ``echoreo.scoring.choose_dimension(x, tau, method,
      threshold=dim_threshold)`` (false nearest neighbours, Kennel et al. 1992,
      or Cao 1997).

    The session's delay is the lower median of the segments' delays; every
    segment's dimension is then estimated with that delay, clipped to
    ``[min_dim, max_dim]``, and the session's dimension is their lower
    median. The window :math:`(m - 1)\\tau` is then capped at
    ``max_window_fraction`` of the median repetition length by lowering
    :math:`\\tau`. Segments that are too short or constant are skipped; with
    none left the fallback (``fallback_dim``, ``fallback_delay_s``) is used
    and the reason recorded.

    Parameters
    ----------
    kind : str
        Stream kind.
    segments : sequence of ndarray, shape (n_i,)
        Leader reference segments at ``params.rate_hz`` (finite).
    params : ScoringParams
    rep_samples : float, optional
        Median repetition length in samples, for the window cap.

    Returns
    -------
    EmbeddingChoice

    References
    ----------
    Fraser, A. M. & Swinney, H. L. (1986). Independent coordinates for strange
    attractors from mutual information. *Physical Review A* 33, 1134-1140.
    Kennel, M. B., Brown, R. & Abarbanel, H. D. I. (1992). Determining
    embedding dimension for phase-space reconstruction using a geometrical
    construction. *Physical Review A* 45, 3403-3411.
    Cao, L. (1997). Practical method for determining the minimum embedding
    dimension of a scalar time series. *Physica D* 110, 43-50.
    Sauer, T., Yorke, J. A. & Casdagli, M. (1991). Embedology. *Journal of
    Statistical Physics* 65, 579-616.
    """
    from echoreo.scoring.dimension import choose_dimension
    from echoreo.scoring.mutual_information import choose_delay

    usable = [np.asarray(s, dtype=np.float64)[: params.max_choice_samples] for s in segments]
    usable = [s for s in usable if s.size >= 64 and np.isfinite(s).all() and np.ptp(s) > 0]
    if len(usable) > params.max_choice_segments:
        pick = np.linspace(0, len(usable) - 1, params.max_choice_segments).round().astype(int)
        usable = [usable[i] for i in pick]
    max_lag = max(2, round(params.max_delay_s * params.rate_hz))
    delays, notes = [], []
    for s in usable:
        try:
            delays.append(int(choose_delay(s, max_lag=min(max_lag, s.size // 4))))
        except InputError as exc:
            notes.append(str(exc).splitlines()[0])
    if not delays:
        why = notes[0] if notes else f"no leader segment of kind {kind!r} long enough and moving"
        return params.fallback(kind, why)
    tau = _lower_median(delays)
    threshold = (params.dim_threshold if params.dim_method == "fnn" or
                 params.dim_threshold != 0.10 else None)
    dims = []
    for s in usable:
        try:
            m = choose_dimension(s, tau, method=params.dim_method, max_dim=params.max_dim,
                                 threshold=threshold)
        except InputError as exc:
            notes.append(str(exc).splitlines()[0])
            continue
        dims.append(int(min(max(m, params.min_dim), params.max_dim)))
    if not dims:
        return replace(params.fallback(kind, notes[-1]), delay=tau)
    m = _lower_median(dims)
    note = ""
    if rep_samples is not None and m > 1:
        cap = int(params.max_window_fraction * rep_samples // (m - 1))
        if 1 <= cap < tau:
            note = (f"delay lowered from {tau} to {cap} samples so that the embedding window "
                    f"stays within {params.max_window_fraction:g} of the median repetition")
            tau = cap
    return EmbeddingChoice(kind, m, tau, f"AMI first minimum + {params.dim_method}",
                           len(delays), note)


def combine_choices(per_session: Iterable[Mapping[str, EmbeddingChoice]],
                    params: ScoringParams) -> tuple[EmbeddingChoice, ...]:
    """Study-level delay and dimension per kind: lower median over the sessions.

    Sessions whose choice for a kind was a fallback are left out of that
    kind's median while at least one session has an estimate.

    Parameters
    ----------
    per_session : iterable of mapping kind -> EmbeddingChoice
    params : ScoringParams

    Returns
    -------
    tuple of EmbeddingChoice
        One per kind, sorted by kind, ``method`` prefixed with ``"study median of"``.
    """
    by_kind: dict[str, list[EmbeddingChoice]] = {}
    for choices in per_session:
        for kind, c in choices.items():
            by_kind.setdefault(kind, []).append(c)
    out = []
    for kind in sorted(by_kind):
        cs = by_kind[kind]
        est = [c for c in cs if c.method != "fallback"] or cs
        if all(c.method == "fallback" for c in est):
            out.append(replace(est[0], n_signals=0))
            continue
        out.append(EmbeddingChoice(
            kind, _lower_median([c.dim for c in est]), _lower_median([c.delay for c in est]),
            f"study median of {len(est)} session(s): {est[0].method}", len(est),
            "; ".join(sorted({c.note for c in est if c.note}))))
    return tuple(out)
