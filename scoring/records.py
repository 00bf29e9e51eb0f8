"""Score records: their fields, a blank record and detail, and the second pass.

A record is one repetition × paired stream (DEVELOPERS.md, "Score records").
:func:`echoreo.scoring.session_scores.score_data` starts every record with
:func:`_base_record` and fills in its metrics; :func:`_second_pass` then adds
what needs several records at once (step 7 of the pipeline in
:mod:`echoreo.scoring.session_scores`): the variability of a move, the grades
and flags, the asymmetry of the two wrists, and the bands.
"""

from __future__ import annotations

import math
from typing import Any, NamedTuple

import numpy as np

from echoreo.scoring._preparation import _PairData
from echoreo.scoring.grade import (
    FLAGS,
    asymmetric,
    band_for,
    component_scores,
    grade_from_components,
    still_grade,
)
from echoreo.scoring.params import ScoringParams
from echoreo.scoring.record_fields import RECORD_FIELDS
from echoreo.scoring.session_data import SessionData

__all__: list[str] = []  # RECORD_FIELDS is in record_fields.py

_METRICS = ("median_ratio", "iqr_ratio", "wasserstein", "shape_distance", "crqa_RR",
            "crqa_DET", "crqa_L", "crqa_Lmax", "crqa_ENTR", "crqa_LAM", "crqa_TT",
            "correlation")
_NAN = float("nan")


class _Row(NamedTuple):
    """The fields of one move span that its records copy."""

    choreography: str
    step: int
    move: str
    repetition: int
    t_start: float
    t_end: float


def _base_record(data: SessionData, pd_: _PairData, row: Any, params: ScoringParams) -> dict:
    """A record of pair ``pd_`` and span ``row`` with its identity and parameters; metrics NaN."""
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
    """The plot details of a record before anything is computed (see ``SessionScores``)."""
    return {"t": None, "leader_signal": None, "follower_signal": None, "leader_pc": None,
            "follower_pc": None, "leader_dist": None, "follower_dist": None, "axis": None,
            "components": {}, "correlation": _NAN, "rms_leader": _NAN, "rms_follower": _NAN,
            "motion_ratio": _NAN}


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
