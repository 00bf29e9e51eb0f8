"""From a session to per-repetition score records.

:func:`score_session` reads one session file; :func:`score_data` scores a
:class:`SessionData` held in memory (a session file's content, or simulator
output assembled with :func:`session_from_arrays`); :func:`score_study`
chooses the study-level embedding parameters and then scores every session.
Per-session scoring is a pure function of ``(path, params)``, so a process
pool can run it.

Pipeline (``scoring/METHODS.md`` sections 2 and 3):

1. spans of kind ``move`` from the session's ``spans`` table;
2. one uniform grid on the session clock at ``params.rate_hz``; leader joints,
   follower channels and recorded leader sensors resampled onto it without
   bridging gaps longer than ``params.max_gap_s``;
3. leader reference channels per pair (:mod:`echoreo.scoring.reference`);
4. the same zero-phase low-pass on both (:func:`~echoreo.scoring.preprocess.lowpass`);
5. per pair and move, the leader's first principal axis of the three channels;
   both projected onto it: the one-dimensional signals;
6. per step and pair, the follower lag by cross-correlation (:mod:`.align`);
7. per repetition and pair, the metrics (:mod:`.metrics`), grade and flags
   (:mod:`.grade`); then the cross-stream flags and the variability.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any, NamedTuple

import numpy as np
import pandas as pd

from echoreo.errors import InputError, Problem, ScoringInputError
from echoreo.scoring.align import estimate_lag, lagged_correlation
from echoreo.scoring.grade import (
    FLAGS,
    asymmetric,
    band_for,
    component_scores,
    grade_from_components,
    still_grade,
)
from echoreo.scoring.metrics import compare_repetition
from echoreo.scoring.params import EmbeddingChoice, ScoringParams, choose_embedding, combine_choices
from echoreo.scoring.preprocess import lowpass, principal_axis, resample_uniform
from echoreo.scoring.reference import (
    KIND_CHANNELS,
    KIND_SIGNAL,
    mirror_site,
    reflect_lateral,
    virtual_references,
)
from echoreo.scoring.session_data import (
    SessionData,
    read_session,
)

__all__ = [
    "RECORD_FIELDS",
    "SessionScores",
    "StudyScores",
    "score_data",
    "score_session",
    "score_study",
    "session_embedding",
]

#: the score-record fields, in order (DEVELOPERS.md, "Score records")
RECORD_FIELDS: tuple[str, ...] = (
    "session", "participant", "study", "stream", "kind", "site", "leader_site",
    "choreography", "move", "step", "repetition", "t_start", "t_end", "lag_s",
    "median_ratio", "iqr_ratio", "wasserstein", "shape_distance", "crqa_RR", "crqa_DET",
    "crqa_L", "crqa_Lmax", "crqa_ENTR", "crqa_LAM", "crqa_TT", "correlation", "variability",
    "grade", "band", "flags", "delay", "dim", "signal", "rate_hz", "filter_cutoff_hz",
    "filter_order",
)
_METRICS = ("median_ratio", "iqr_ratio", "wasserstein", "shape_distance", "crqa_RR",
            "crqa_DET", "crqa_L", "crqa_Lmax", "crqa_ENTR", "crqa_LAM", "crqa_TT",
            "correlation")
_NAN = float("nan")
#: peak-to-peak below which a follower's channels count as exactly constant while the
#: leader moves (no real sensor on a person reads one value through a whole movement)
_STUCK = 1e-9


# --------------------------------------------------------------------------- data holders


@dataclass(eq=False)
class SessionScores:
    """Scores of one session.

    Attributes
    ----------
    session : str
    path : str or None
    records : DataFrame
        One row per repetition × paired stream, columns :data:`RECORD_FIELDS`.
    problems : list of Problem
        Located messages about everything that could not be scored as asked.
    params : ScoringParams
        The parameters used (with the embedding actually used).
    details : list of dict or None
        With ``details=True``: per record (same order), ``t`` (leader window
        times, s), ``leader_signal`` and ``follower_signal`` (aligned 1-D
        signals, follower shifted by the lag), ``leader_pc`` and
        ``follower_pc`` (n, 3), ``leader_dist`` and ``follower_dist`` (n,),
        ``axis`` (3,), ``components`` (component scores), ``correlation``,
        ``rms_leader``, ``rms_follower``, ``motion_ratio``; arrays are None where
        not computed.
    timings : dict of str to float
        Wall time of each stage, s (for benchmarks; reading is ``"read"``).
    """

    session: str
    path: str | None
    records: pd.DataFrame
    problems: list[Problem]
    params: ScoringParams
    details: list[dict] | None = None
    timings: dict[str, float] = field(default_factory=dict)

    def detail(self, index: int) -> dict:
        """Plot details of record ``index`` (requires ``details=True`` when scoring)."""
        if self.details is None:
            raise ValueError("score with details=True to keep trajectories for plots")
        return self.details[index]


@dataclass(eq=False)
class StudyScores:
    """Scores of a study: every session scored with one set of embedding parameters.

    Attributes
    ----------
    sessions : list of SessionScores
    params : ScoringParams
        With the study-level embedding.
    per_session : list of dict of str to EmbeddingChoice
        Each session's own choice, from which the study's was taken.
    records : DataFrame
        All sessions' records, concatenated.
    problems : list of Problem
    """

    sessions: list[SessionScores]
    params: ScoringParams
    per_session: list[dict]
    records: pd.DataFrame = field(default_factory=pd.DataFrame)
    problems: list[Problem] = field(default_factory=list)


def _grid_index(t: float, rate: float) -> int:
    """Index of the first grid sample at or after ``t`` (tolerant to rounding)."""
    return math.ceil(t * rate - 1e-6)


@dataclass(eq=False)
class _PairData:
    pair: dict
    ref: np.ndarray | None      # (n, 3) filtered leader reference on the grid
    fol: np.ndarray | None      # (n, 3) filtered follower channels on the grid
    axes: dict = field(default_factory=dict)   # move -> (3,)
    source: str = ""


@dataclass(eq=False)
class _Prepared:
    data: SessionData
    params: ScoringParams
    k0: int
    n: int
    moves: pd.DataFrame
    pairs: list[_PairData]
    problems: list[Problem]


def _where(data: SessionData, stream: str | None = None,
           move: tuple[str, str] | None = None, step: int | None = None,
           repetition: int | None = None) -> str:
    parts = [f"session {data.session!r}"]
    if stream is not None:
        parts.append(f"stream {stream!r}")
    if move is not None:
        chor, name = move
        parts.append(f"choreography {chor!r}, move {name!r}" if chor else f"move {name!r}")
    if step is not None:
        parts.append(f"step {step}")
    if repetition is not None:
        parts.append(f"repetition {repetition}")
    return ", ".join(parts)


def _prepare(data: SessionData, params: ScoringParams) -> _Prepared:
    problems = list(data.problems)
    file = data.path
    spans = data.spans
    moves = spans[spans["kind"] == "move"].sort_values("t_start").reset_index(drop=True)
    if "choreography" not in moves.columns:
        moves["choreography"] = ""
    moves["choreography"] = moves["choreography"].fillna("").astype(str)
    if moves.empty:
        raise ScoringInputError(Problem(
            f"{_where(data)}: the spans table holds no repetitions of kind 'move'", file,
            hint="scoring needs the leader's timeline spans; record the session with "
                 "echoreo session"))
    rate = params.rate_hz
    margin = round(rate)  # 1 s before and after, for the filter's edges
    k0 = _grid_index(float(moves["t_start"].min()), rate) - margin
    k1 = _grid_index(float(moves["t_end"].max()) + params.lag_max_s, rate) + margin
    n = k1 - k0 + 1
    t_grid = (k0 + np.arange(n)) / rate
    robot = data.robot

    def smooth(x: np.ndarray) -> np.ndarray:
        return lowpass(x, rate, params.filter_cutoff_hz, params.filter_order)

    out: list[_PairData] = []
    virtual: list[dict] = []
    for p in data.pairs:
        kind = p.get("kind")
        if kind not in KIND_CHANNELS:
            problems.append(Problem(
                f"{_where(data, p.get('stream'))}: kind {kind!r} has no leader reference; the "
                "stream is not scored", file, hint="pair streams of kind 'imu' or 'head_pose'"))
            continue
        leader_site = p.get("leader_site")
        target = mirror_site(leader_site) if data.mode == "mirror" else leader_site
        if target not in robot.site_names:
            problems.append(Problem(
                f"{_where(data, p['stream'])}: leader site {leader_site!r} is not a site of "
                f"robot {robot.name!r} ({', '.join(robot.site_names)}); not scored", file))
            continue
        pd_ = _PairData(pair=dict(p), ref=None, fol=None)
        pd_.pair.setdefault("site", target)
        # follower
        s = data.streams.get(p["stream"])
        if s is not None:
            x = s.columns(KIND_CHANNELS[kind])
            if x is None:
                problems.append(Problem(
                    f"{_where(data, p['stream'])}: lacks channel(s) "
                    f"{', '.join(c for c in KIND_CHANNELS[kind] if c not in s.channels)}; "
                    "its repetitions are flagged missing_data", file))
            elif s.t.shape[0] != x.shape[0]:
                problems.append(Problem(
                    f"{_where(data, p['stream'])}: {s.t.shape[0]} time stamps but "
                    f"{x.shape[0]} samples; its repetitions are flagged missing_data", file))
            elif s.t.shape[0] < 2:
                problems.append(Problem(
                    f"{_where(data, p['stream'])}: fewer than two samples; its repetitions "
                    "are flagged missing_data", file))
            else:
                t_s = s.t
                if kind == "head_pose":
                    x = x.copy()
                    ok = np.isfinite(x).all(axis=1)
                    x[ok] = np.unwrap(x[ok], axis=0)
                rs = resample_uniform(t_s, x, rate, k0, n, params.max_gap_s)
                pd_.fol = smooth(rs.x)
        # leader reference
        lead_name = p.get("leader_stream")
        if lead_name:
            ls = data.streams.get(lead_name)
            lx = ls.columns(KIND_CHANNELS[kind]) if ls is not None else None
            if lx is None or ls.t.shape[0] != lx.shape[0] or ls.t.shape[0] < 2:
                problems.append(Problem(
                    f"{_where(data, p['stream'])}: recorded leader stream {lead_name!r} is "
                    "missing or lacks its channels; using the virtual sensor instead", file))
            else:
                if kind == "head_pose":
                    lx = lx.copy()
                    ok = np.isfinite(lx).all(axis=1)
                    lx[ok] = np.unwrap(lx[ok], axis=0)
                rs = resample_uniform(ls.t, lx, rate, k0, n, params.max_gap_s)
                ref = reflect_lateral(rs.x, kind) if data.mode == "mirror" else rs.x
                pd_.ref = smooth(ref)
                pd_.source = f"recorded {lead_name}"
        if pd_.ref is None:
            virtual.append(pd_.pair)
        out.append(pd_)
    if virtual:
        if data.leader_q.shape[0] >= 2:
            rq = resample_uniform(data.leader_t, data.leader_q, rate, k0, n, params.max_gap_s)
            refs = virtual_references(robot, t_grid, rq.x, virtual, data.mode)
            for pd_ in out:
                if pd_.ref is None and pd_.pair["stream"] in refs:
                    pd_.ref = smooth(refs[pd_.pair["stream"]])
                    pd_.source = "virtual"
        else:
            problems.append(Problem(
                f"{_where(data)}: no leader joints recorded (leader_state / leader_command "
                "empty); streams without a recorded leader sensor cannot be scored", file))
    # the leader's principal axis per pair and move
    for pd_ in out:
        if pd_.ref is None:
            continue
        for move, grp in moves.groupby(["choreography", "move"], sort=False):
            idx = np.concatenate([np.arange(_grid_index(a, rate), _grid_index(b, rate)) - k0
                                  for a, b in zip(grp["t_start"], grp["t_end"], strict=True)])
            idx = idx[(idx >= 0) & (idx < n)]
            pd_.axes[move] = principal_axis(pd_.ref[idx]) if idx.size else np.eye(3)[0]
    return _Prepared(data, params, k0, n, moves, out, problems)


def _rms(x: np.ndarray) -> float:
    """RMS deviation of multichannel samples from their mean: sqrt(mean ||x - mean||^2)."""
    if x.shape[0] == 0:
        return _NAN
    d = x - x.mean(axis=0)
    return float(np.sqrt(np.mean(np.sum(d * d, axis=1))))


def _steps(moves: pd.DataFrame) -> list[tuple[int, tuple[str, str], pd.DataFrame]]:
    """Steps in time order as ``(step, (choreography, move), spans)``.

    A step is a run of consecutive move spans with the same choreography and
    step number: step numbers restart in every choreography of a session, and
    a plan may run the same choreography twice.
    """
    key = moves["choreography"].astype(str) + "\x00" + moves["step"].astype(str)
    block = (key != key.shift()).cumsum()
    return [(int(grp["step"].iloc[0]), (str(grp["choreography"].iloc[0]),
                                          str(grp["move"].iloc[0])), grp)
            for _, grp in moves.groupby(block, sort=True)]


def _leader_segments(prep: _Prepared) -> tuple[dict[str, list[np.ndarray]],
                                                 dict[str, list[float]]]:
    """Leader 1-D reference per step and pair where the leader moves, by kind, and the
    lengths (samples) of the repetitions of those steps, by kind."""
    rate = prep.params.rate_hz
    cfg = prep.params.grade
    segs: dict[str, list[np.ndarray]] = {}
    reps: dict[str, list[float]] = {}
    for _step, move, grp in _steps(prep.moves):
        a = max(_grid_index(float(grp["t_start"].min()), rate) - prep.k0, 0)
        b = min(_grid_index(float(grp["t_end"].max()), rate) - prep.k0, prep.n)
        lengths = ((grp["t_end"] - grp["t_start"]).to_numpy(float) * rate).tolist()
        for pd_ in prep.pairs:
            if pd_.ref is None or b - a < 3:
                continue
            r = pd_.ref[a:b]
            if not np.isfinite(r).all():
                continue
            kind = pd_.pair["kind"]
            if _rms(r) < cfg.leader_still_limit(kind):
                continue
            segs.setdefault(kind, []).append(r @ pd_.axes.get(move, np.eye(3)[0]))
            reps.setdefault(kind, []).extend(lengths)
    return segs, reps


def _choose_for(prep: _Prepared) -> dict[str, EmbeddingChoice]:
    """This session's choice per kind; the window cap uses the median length of the
    repetitions in which that kind's leader site moves."""
    params = prep.params
    segs, reps = _leader_segments(prep)
    kinds = sorted({pd_.pair["kind"] for pd_ in prep.pairs})
    out = {}
    for kind in kinds:
        rep = float(np.median(reps[kind])) if reps.get(kind) else None
        out[kind] = choose_embedding(kind, segs.get(kind, []), params, rep)
    return out


def session_embedding(path_or_data: Any, params: ScoringParams | None = None
                      ) -> dict[str, EmbeddingChoice]:
    """This session's own choice of delay and dimension per stream kind.

    Parameters
    ----------
    path_or_data : str, Path, SessionFile or SessionData
    params : ScoringParams, optional

    Returns
    -------
    dict of str to EmbeddingChoice
        See :func:`echoreo.scoring.params.choose_embedding`.
    """
    params = params or ScoringParams()
    data = path_or_data if isinstance(path_or_data, SessionData) else read_session(
        path_or_data, params)
    return _choose_for(_prepare(data, params))


# --------------------------------------------------------------------------- scoring


class _Row(NamedTuple):
    choreography: str
    step: int
    move: str
    repetition: int
    t_start: float
    t_end: float


def _base_record(data: SessionData, pd_: _PairData, row: Any, params: ScoringParams) -> dict:
    p = pd_.pair
    rec = dict.fromkeys(RECORD_FIELDS, _NAN)
    rec.update(
        session=data.session, participant=data.participant, study=data.study,
        stream=p["stream"], kind=p["kind"], site=p.get("site"), leader_site=p["leader_site"],
        choreography=str(row.choreography), move=str(row.move), step=int(row.step),
        repetition=int(row.repetition), t_start=float(row.t_start), t_end=float(row.t_end),
        flags=[], band=params.grade.missing_band, delay=None, dim=None, signal=None,
        rate_hz=float(params.rate_hz), filter_cutoff_hz=float(params.filter_cutoff_hz),
        filter_order=int(params.filter_order))
    return rec


def _empty_detail() -> dict:
    return {"t": None, "leader_signal": None, "follower_signal": None, "leader_pc": None,
            "follower_pc": None, "leader_dist": None, "follower_dist": None, "axis": None,
            "components": {}, "correlation": _NAN, "rms_leader": _NAN, "rms_follower": _NAN,
            "motion_ratio": _NAN}


def _step_lags(prep: _Prepared, grp: pd.DataFrame, move: tuple[str, str], lag_lo: int,
               lag_hi: int) -> dict[str, tuple[int, float, bool, bool]]:
    """Reliable lags of one step, per pair: ``stream -> (lag, rho, at_edge, True)``.

    A pair's own estimate counts only when its leader moves, its follower moves
    (RMS at least ``skipped_fraction`` of the leader's) and the correlation peak
    reaches ``params.lag_min_correlation``; a constant or unrelated follower
    signal has a meaningless peak.
    """
    params, cfg, rate = prep.params, prep.params.grade, prep.params.rate_hz
    a_step = _grid_index(float(grp["t_start"].min()), rate) - prep.k0
    b_step = _grid_index(float(grp["t_end"].max()), rate) - prep.k0
    lags: dict[str, tuple[int, float, bool, bool]] = {}
    if a_step < 0 or b_step - a_step < 3:
        return lags
    for pd_ in prep.pairs:
        if pd_.ref is None or pd_.fol is None:
            continue
        r = pd_.ref[a_step:b_step]
        if not np.isfinite(r).all():
            continue
        rms_l = _rms(r)
        if rms_l < cfg.leader_still_limit(pd_.pair["kind"]):
            continue
        hi = min(b_step + lag_hi, prep.n)
        f = pd_.fol[a_step:hi]
        ok = np.isfinite(f).all(axis=1)
        if not ok.any() or _rms(f[ok]) < cfg.skipped_fraction * rms_l:
            continue
        u = pd_.axes.get(move, np.eye(3)[0])
        est = estimate_lag(pd_.ref[a_step:hi] @ u, f @ u, 0, b_step - a_step, lag_lo, lag_hi)
        if est.lag >= 0 and est.correlation >= params.lag_min_correlation:
            lags[pd_.pair["stream"]] = (est.lag, est.correlation, est.at_edge, True)
    return lags


def score_data(data: SessionData, params: ScoringParams | None = None, *,
               details: bool = False) -> SessionScores:
    """Score one session held in memory.

    Parameters
    ----------
    data : SessionData
    params : ScoringParams, optional
        When ``params.embedding`` lacks a kind, this session's own choice is
        used for it (a study of one).
    details : bool
        Keep trajectories and aligned signals for plots.

    Returns
    -------
    SessionScores

    Raises
    ------
    ScoringInputError
        Nothing at all can be scored (no move spans). Everything narrower
        (a stream, a repetition) becomes a located entry of ``problems`` and
        the rest is scored.
    """
    params = params or ScoringParams()
    clock = time.perf_counter
    timings: dict[str, float] = {}
    mark = clock()
    prep = _prepare(data, params)
    timings["resample, references, filter"] = clock() - mark
    mark = clock()
    problems = prep.problems
    file = data.path
    cfg = params.grade
    rate = params.rate_hz
    kinds = sorted({pd_.pair["kind"] for pd_ in prep.pairs})
    missing_kinds = [k for k in kinds if params.embedding_for(k) is None]
    if missing_kinds:
        own = _choose_for(prep)
        params = params.with_embedding(own[k] for k in missing_kinds)
    for k in kinds:
        c = params.embedding_for(k)
        if c is not None and c.method == "fallback" and c.note:
            problems.append(Problem(f"{_where(data)}: kind {k!r}: embedding fallback dim "
                                    f"{c.dim}, delay {c.delay} ({c.note})", file))
    lag_lo = round(params.lag_min_s * rate)
    lag_hi = round(params.lag_max_s * rate)

    records: list[dict] = []
    det: list[dict] = []
    extra: list[dict] = []  # per record: private values for the second pass
    timings["embedding choice"] = clock() - mark
    mark = clock()
    steps = _steps(prep.moves)
    step_lags = [_step_lags(prep, grp, move, lag_lo, lag_hi) for _, move, grp in steps]
    reliable = [v[0] for lags in step_lags for v in lags.values()]
    session_lag = int(np.median(reliable)) if reliable else lag_lo
    timings["lags"] = clock() - mark
    mark = clock()
    # plain records instead of itertuples, which builds a namedtuple class per call
    rows_of = {id(grp): [_Row(**r) for r in grp[list(_Row._fields)].to_dict("records")]
               for _, _, grp in steps}
    for (step, move, grp), lags in zip(steps, step_lags, strict=True):
        # a pair without a reliable lag of its own takes the step's median, else the session's
        borrowed = int(np.median([v[0] for v in lags.values()])) if lags else session_lag
        for pd_ in prep.pairs:
            p = pd_.pair
            name, kind = p["stream"], p["kind"]
            choice = params.embedding_for(kind)
            u = pd_.axes.get(move, np.eye(3)[0])
            lag, _, at_edge, own_lag = lags.get(name, (borrowed, _NAN, False, False))
            for row in rows_of[id(grp)]:
                rec = _base_record(data, pd_, row, params)
                rec["delay"] = int(choice.delay)
                rec["dim"] = int(choice.dim)
                rec["signal"] = (f"{KIND_SIGNAL[kind]} on leader PC1 of move "
                                 f"[{u[0]:+.3f} {u[1]:+.3f} {u[2]:+.3f}]")
                d = _empty_detail()
                d["axis"] = u
                ex = {"still": False, "rms_l": _NAN, "rms_f": _NAN, "fmed": _NAN,
                      "scored": False, "skipped": False, "at_edge": at_edge,
                      "own_lag": own_lag}
                where = _where(data, name, move, step, int(row.repetition))
                a = _grid_index(float(row.t_start), rate) - prep.k0
                b = _grid_index(float(row.t_end), rate) - prep.k0
                rec["lag_s"] = lag / rate
                records.append(rec)
                det.append(d)
                extra.append(ex)
                if pd_.fol is None or pd_.ref is None:
                    rec["flags"] = ["missing_data"]
                    continue
                if b - a < 2:
                    problems.append(Problem(f"{where}: the repetition is empty "
                                            f"({row.t_start:.3f} s to {row.t_end:.3f} s); not "
                                            "scored", file))
                    rec["flags"] = ["missing_data"]
                    continue
                if a < 0 or b + lag > prep.n:
                    rec["flags"] = ["missing_data"]
                    continue
                R = pd_.ref[a:b]
                F = pd_.fol[a + lag:b + lag]
                if not (np.isfinite(R).all() and np.isfinite(F).all()):
                    bad_l = int((~np.isfinite(R).all(axis=1)).sum())
                    bad_f = int((~np.isfinite(F).all(axis=1)).sum())
                    who = []
                    if bad_f:
                        who.append(f"follower {bad_f} of {b - a} samples")
                    if bad_l:
                        who.append(f"leader reference {bad_l} of {b - a} samples")
                    problems.append(Problem(
                        f"{where}: data missing across a gap longer than "
                        f"{params.max_gap_s:g} s ({', '.join(who)}); flagged missing_data, "
                        "not scored", file))
                    rec["flags"] = ["missing_data"]
                    continue
                if (float(np.ptp(F, axis=0).max()) <= _STUCK
                        and _rms(R) >= cfg.leader_still_limit(kind)):
                    problems.append(Problem(
                        f"{where}: the follower's {', '.join(KIND_CHANNELS[kind])} are "
                        "constant through the repetition (a stuck or disconnected sensor?); "
                        "flagged missing_data, not scored", file))
                    rec["flags"] = ["missing_data"]
                    continue
                sl = R @ u
                sf = F @ u
                rms_l, rms_f = _rms(R), _rms(F)
                ex.update(rms_l=rms_l, rms_f=rms_f)
                d.update(t=(prep.k0 + a + np.arange(b - a)) / rate, leader_signal=sl,
                         follower_signal=sf, rms_leader=rms_l, rms_follower=rms_f,
                         motion_ratio=rms_f / rms_l if rms_l > 0 else _NAN)
                if rms_l < cfg.leader_still_limit(kind):
                    ex["still"] = True
                    continue
                if rms_f < cfg.skipped_fraction * rms_l:
                    ex["skipped"] = True
                try:
                    cmp = compare_repetition(sl, sf, int(choice.dim), int(choice.delay),
                                             radius_fraction=params.radius_fraction,
                                             lmin=params.lmin, vmin=params.lmin)
                except InputError as exc:
                    if not ex["skipped"]:
                        problems.append(Problem(f"{where}: {str(exc).splitlines()[0]}; not "
                                                "scored", file))
                    continue
                rec.update(median_ratio=cmp.median_ratio, iqr_ratio=cmp.iqr_ratio,
                           wasserstein=cmp.wasserstein, shape_distance=cmp.shape_distance,
                           **{f"crqa_{k}": v for k, v in cmp.crqa.items()},
                           correlation=lagged_correlation(sl, sf, 0, sl.shape[0], 0))
                ex["fmed"] = float(np.median(cmp.follower_dist))
                ex["scored"] = True
                d.update(leader_pc=cmp.leader_pc, follower_pc=cmp.follower_pc,
                         leader_dist=cmp.leader_dist, follower_dist=cmp.follower_dist,
                         correlation=rec["correlation"])

    timings["metrics (embed, PCA, distances, CRQA)"] = clock() - mark
    mark = clock()
    _second_pass(records, extra, det, cfg)
    df = pd.DataFrame.from_records(records, columns=list(RECORD_FIELDS))
    for c in ("step", "repetition"):
        df[c] = df[c].astype(np.int64)
    timings["grades and flags"] = clock() - mark
    return SessionScores(data.session, data.path, df, problems, params,
                         det if details else None, timings)


def _second_pass(records: list[dict], extra: list[dict], det: list[dict], cfg) -> None:
    """Variability, grades, flags (including the cross-stream asymmetry)."""
    # variability: CV of the follower's median distance across repetitions of a move
    groups: dict[tuple[str, str], list[int]] = {}
    for i, rec in enumerate(records):
        groups.setdefault((rec["stream"], rec["choreography"], rec["move"]), []).append(i)
    for idx in groups.values():
        vals = np.array([extra[i]["fmed"] for i in idx if extra[i]["scored"]])
        cv = _NAN
        if vals.size >= 2 and vals.mean() > 0:
            cv = float(vals.std(ddof=1) / vals.mean())
        for i in idx:
            if extra[i]["scored"]:
                records[i]["variability"] = cv
    # grades and per-record flags
    for i, rec in enumerate(records):
        ex = extra[i]
        flags = list(rec["flags"])
        if "missing_data" in flags:
            rec["grade"] = _NAN
        elif ex["still"]:
            rec["grade"] = still_grade(ex["rms_f"], rec["kind"], cfg)
            if rec["kind"] == "head_pose" and ex["rms_f"] > cfg.head_moving_limit:
                flags.append("head_moving")
        elif ex["skipped"]:
            rec["grade"] = 0.0
            flags.append("skipped")
        elif ex["scored"]:
            # the grade is computed from the record's own fields (correlation included)
            m = {k: rec[k] for k in ("median_ratio", "iqr_ratio", "wasserstein",
                                      "shape_distance", "crqa_RR", "crqa_DET", "correlation",
                                      "lag_s", "variability")}
            comp = component_scores(m, cfg)
            det[i]["components"] = comp
            rec["grade"] = grade_from_components(comp, cfg)
            r = ex["rms_f"] / ex["rms_l"]
            if math.isfinite(r) and r < cfg.amplitude_low:
                flags.append("amplitude_low")
            if math.isfinite(r) and r > cfg.amplitude_high:
                flags.append("amplitude_high")
        else:
            rec["grade"] = _NAN
        if (ex["own_lag"] and (rec["lag_s"] > cfg.lag_limit_s or ex["at_edge"])
                and "missing_data" not in flags):
            flags.append("lag")
        rec["flags"] = flags
    # asymmetry: the two wrists of one repetition, each relative to its leader wrist
    by_rep: dict[tuple[str, int, int], dict[str, int]] = {}
    for i, rec in enumerate(records):
        if rec["kind"] == "imu" and rec["site"] in ("left_wrist", "right_wrist"):
            key = (rec["choreography"], rec["step"], rec["repetition"])
            by_rep.setdefault(key, {})[rec["site"]] = i
    for sites in by_rep.values():
        if len(sites) != 2:
            continue
        il, ir = sites["left_wrist"], sites["right_wrist"]
        if any(extra[i]["still"] or not math.isfinite(extra[i]["rms_l"]) for i in (il, ir)):
            continue
        if extra[il]["skipped"] and extra[ir]["skipped"]:
            continue
        rl = extra[il]["rms_f"] / extra[il]["rms_l"]
        rr = extra[ir]["rms_f"] / extra[ir]["rms_l"]
        if asymmetric(rl, rr, cfg):
            for i in (il, ir):
                if "asymmetry" not in records[i]["flags"]:
                    records[i]["flags"].append("asymmetry")
    for rec in records:
        rec["flags"] = [f for f in FLAGS if f in rec["flags"]]
        rec["band"] = band_for(rec["grade"], cfg)


def score_session(path_or_sessionfile: Any, params: ScoringParams | None = None, *,
                  details: bool = False) -> SessionScores:
    """Score every repetition × paired stream of one session file.

    A pure function of its arguments (it reads the file and returns records;
    it writes nothing), so sessions can be scored in a process pool.

    Parameters
    ----------
    path_or_sessionfile : str, Path, SessionFile or SessionData
    params : ScoringParams, optional
        Default :class:`ScoringParams`; a kind without a study-level embedding
        gets this session's own choice.
    details : bool
        Keep trajectories, distances and aligned signals for plots.

    Returns
    -------
    SessionScores
        ``.records`` has the columns of :data:`RECORD_FIELDS`.
    """
    mark = time.perf_counter()
    data = (path_or_sessionfile if isinstance(path_or_sessionfile, SessionData)
            else read_session(path_or_sessionfile, params))
    read_s = time.perf_counter() - mark
    scores = score_data(data, params, details=details)
    scores.timings = {"read": read_s, **scores.timings}
    return scores


def score_study(paths: Sequence[Any], params: ScoringParams | None = None, *,
                details: bool = False, map_fn: Callable | None = None) -> StudyScores:
    """Choose the study-level embedding, then score every session with it.

    1. Each session's own choice per stream kind (:func:`session_embedding`).
    2. The study's: lower median over sessions per kind
       (:func:`~echoreo.scoring.params.combine_choices`).
    3. Every session scored with it (:func:`score_session`).

    Parameters
    ----------
    paths : sequence of str or Path
        Session files.
    params : ScoringParams, optional
        Kinds that already have an embedding keep it.
    details : bool
    map_fn : callable, optional
        A ``map``-like function (``concurrent.futures.Executor.map``) to run the
        per-session steps in parallel; default the built-in ``map``.

    Returns
    -------
    StudyScores
    """
    import functools

    params = params or ScoringParams()
    mapper = map_fn or map
    per_session = list(mapper(functools.partial(session_embedding, params=params), paths))
    chosen = combine_choices(per_session, params)
    keep = {c.kind for c in params.embedding}
    study_params = params.with_embedding(c for c in chosen if c.kind not in keep)
    sessions = list(mapper(functools.partial(score_session, params=study_params,
                                             details=details), paths))
    records = (pd.concat([s.records for s in sessions], ignore_index=True)
               if sessions else pd.DataFrame(columns=list(RECORD_FIELDS)))
    problems = [p for s in sessions for p in s.problems]
    return StudyScores(sessions, study_params, per_session, records, problems)
