"""A session prepared for scoring: leader references and follower channels on one grid.

:func:`_prepare` puts a :class:`SessionData` on one uniform grid of the session
clock (steps 1 to 5 of the pipeline in :mod:`echoreo.scoring.session_scores`):
the move spans, every pair's filtered leader reference and follower channels,
and the leader's principal axis per pair and move. On the prepared session,
:func:`_steps` groups the repetitions into steps, :func:`_step_lags` estimates
each step's follower lags (step 6) and :func:`_choose_for` makes the session's
own choice of embedding parameters per stream kind.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from echoreo.errors import Problem, ScoringInputError
from echoreo.scoring.align import estimate_lag
from echoreo.scoring.params import EmbeddingChoice, ScoringParams, choose_embedding
from echoreo.scoring.preprocess import lowpass, principal_axis, resample_uniform
from echoreo.scoring.reference import (
    KIND_CHANNELS,
    mirror_site,
    reflect_lateral,
    virtual_references,
)
from echoreo.scoring.session_data import SessionData

_NAN = float("nan")


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
