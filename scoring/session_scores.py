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

Steps 1 to 6 and the session's own embedding choice are in
:mod:`echoreo.scoring._preparation`; the record fields, the blank record and the
second pass of step 7 (variability, grades, flags, bands) in
:mod:`echoreo.scoring.records`.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from echoreo.errors import InputError, Problem
from echoreo.scoring._preparation import (
    _choose_for,
    _grid_index,
    _prepare,
    _rms,
    _step_lags,
    _steps,
    _where,
)
from echoreo.scoring.align import lagged_correlation
from echoreo.scoring.metrics import compare_repetition
from echoreo.scoring.params import EmbeddingChoice, ScoringParams, combine_choices
from echoreo.scoring.record_fields import RECORD_FIELDS
from echoreo.scoring.records import _base_record, _empty_detail, _Row, _second_pass
from echoreo.scoring.reference import KIND_CHANNELS, KIND_SIGNAL
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
