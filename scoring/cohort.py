"""Study-level statistics over per-repetition score records.

A study is many participants, sometimes several sessions each. From the score
records (one row per repetition x paired stream, see DEVELOPERS.md) this
module derives

- per participant and stream: the distribution of grades with a bootstrap
  95 % confidence interval of the mean grade (:func:`participant_summary`);
- the reliability of the grade as intraclass correlations across repetitions
  or across sessions of the same participant (:func:`grade_reliability`);
- a table of participants whose repetitions raise a flag often
  (:func:`flagged_participants`).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from echoreo.errors import ScoringInputError
from echoreo.scoring.reliability import ICC_FORMS, icc

__all__ = [
    "bootstrap_ci",
    "flagged_participants",
    "grade_reliability",
    "participant_ranking",
    "participant_summary",
]


def bootstrap_ci(
    x,
    rng: np.random.Generator,
    *,
    statistic: Callable[[np.ndarray], np.ndarray] | None = None,
    n_boot: int = 2000,
    level: float = 0.95,
) -> tuple[float, float]:
    """Percentile bootstrap confidence interval of a statistic.

    The sample is resampled with replacement ``n_boot`` times, the statistic
    is computed on each resample, and the interval is the
    :math:`(1-\\alpha)/2` and :math:`(1+\\alpha)/2` quantiles of those values
    (Efron & Tibshirani 1993, ch. 13, the percentile interval).

    Parameters
    ----------
    x : array_like, shape (n,)
        The sample; non-finite values are dropped.
    rng : numpy.random.Generator
        Source of the resampling indices.
    statistic : callable, optional
        Maps an array of shape ``(n_boot, n)`` to ``(n_boot,)`` (row-wise);
        the mean by default.
    n_boot : int
        Number of resamples (2000 is common practice for 95 % percentile
        intervals; no single source).
    level : float
        Coverage level, in (0, 1).

    Returns
    -------
    (low, high) : tuple of float
        NaN, NaN for fewer than 2 finite values.

    References
    ----------
    Efron, B., & Tibshirani, R. J. (1993). An Introduction to the Bootstrap.
    Chapman & Hall.
    """
    if not 0.0 < level < 1.0:
        raise ScoringInputError(f"confidence level must lie in (0, 1); got {level}")
    values = np.asarray(x, dtype=np.float64).ravel()
    values = values[np.isfinite(values)]
    if values.size < 2:
        return float("nan"), float("nan")
    stat = statistic or (lambda a: a.mean(axis=1))
    idx = rng.integers(0, values.size, size=(int(n_boot), values.size))
    boots = np.asarray(stat(values[idx]), dtype=np.float64)
    alpha = (1.0 - level) / 2.0
    low, high = np.quantile(boots, [alpha, 1.0 - alpha])
    return float(low), float(high)


def _require(records: pd.DataFrame, columns: list[str]) -> None:
    missing = [c for c in columns if c not in records.columns]
    if missing:
        raise ScoringInputError(
            f"score records lack the column(s) {', '.join(missing)}",
            hint="pass the records produced by echoreo.scoring.score_session",
        )


def participant_summary(
    records: pd.DataFrame, rng: np.random.Generator, *, n_boot: int = 2000
) -> pd.DataFrame:
    """Per participant and stream: grade distribution with a bootstrap CI.

    Parameters
    ----------
    records : DataFrame
        Score records; needs ``participant``, ``stream``, ``grade``, ``flags``.
    rng : numpy.random.Generator
        For the bootstrap.
    n_boot : int
        Bootstrap resamples per row.

    Returns
    -------
    DataFrame
        Columns ``participant, stream, n, mean, ci_low, ci_high, median, q1, q3,
        flagged`` (``flagged``: repetitions with at least one flag), sorted by
        participant and stream.
    """
    _require(records, ["participant", "stream", "grade"])
    rows = []
    for (participant, stream), group in records.groupby(["participant", "stream"], sort=True):
        g = group["grade"].to_numpy(dtype=np.float64)
        finite = g[np.isfinite(g)]
        low, high = bootstrap_ci(finite, rng, n_boot=n_boot)
        flags = group["flags"] if "flags" in group else pd.Series([[]] * len(group))
        rows.append(
            {
                "participant": participant,
                "stream": stream,
                "n": int(finite.size),
                "mean": float(finite.mean()) if finite.size else float("nan"),
                "ci_low": low,
                "ci_high": high,
                "median": float(np.median(finite)) if finite.size else float("nan"),
                "q1": float(np.quantile(finite, 0.25)) if finite.size else float("nan"),
                "q3": float(np.quantile(finite, 0.75)) if finite.size else float("nan"),
                "flagged": int(sum(1 for f in flags if len(f))),
            }
        )
    return pd.DataFrame(rows)


def participant_ranking(records: pd.DataFrame, rng: np.random.Generator, *,
                        n_boot: int = 1000) -> pd.DataFrame:
    """Participants ranked by their mean grade over all repetitions and streams.

    The interval is the percentile bootstrap of that mean over the
    participant's graded records (see :func:`bootstrap_ci`); participants are
    resampled in sorted order, so the same ``rng`` gives the same table.

    Returns
    -------
    DataFrame
        Columns ``rank, participant, n, mean_grade, ci_low, ci_high, flagged,
        flags`` (``flagged``: records with at least one flag; ``flags``: the
        three most frequent flags with their counts), best first.
    """
    _require(records, ["participant", "grade", "flags"])
    rows = []
    for participant, group in records.groupby("participant", sort=True):
        grades = group["grade"].to_numpy(dtype=np.float64)
        finite = grades[np.isfinite(grades)]
        low, high = bootstrap_ci(finite, rng, n_boot=n_boot)
        counts: dict[str, int] = {}
        for flags in group["flags"]:
            for flag in flags:
                counts[flag] = counts.get(flag, 0) + 1
        top = sorted(counts.items(), key=lambda kv: -kv[1])[:3]
        rows.append({"participant": participant, "n": int(finite.size),
                     "mean_grade": float(finite.mean()) if finite.size else float("nan"),
                     "ci_low": low, "ci_high": high,
                     "flagged": int(sum(1 for f in group["flags"] if len(f))),
                     "flags": ", ".join(f"{k} ×{v}" for k, v in top)})
    df = pd.DataFrame(rows, columns=["participant", "n", "mean_grade", "ci_low", "ci_high",
                                     "flagged", "flags"])
    df = df.sort_values("mean_grade", ascending=False, kind="stable").reset_index(drop=True)
    df.insert(0, "rank", np.arange(1, len(df) + 1))
    return df


def grade_reliability(records: pd.DataFrame, *, across: str = "repetition") -> pd.DataFrame:
    """Intraclass correlations of the grade, per stream.

    Parameters
    ----------
    records : DataFrame
        Score records; needs ``participant``, ``stream``, ``grade`` and
        ``repetition`` (``across="repetition"``) or ``session``
        (``across="session"``).
    across : {"repetition", "session"}
        ``"repetition"``: targets are participants, raters are the repetition
        index within a move (grades averaged over moves), so the table asks
        whether single repetitions rank participants consistently.
        ``"session"``: raters are a participant's sessions in time order
        (test-retest); participants with fewer sessions than the most common
        count are dropped.

    Returns
    -------
    DataFrame
        One row per stream: ``stream, across, n_targets, k`` and the six ICC
        forms; a stream whose table is too small gets NaN and a ``note``.
    """
    if across not in ("repetition", "session"):
        raise ScoringInputError(f"across must be 'repetition' or 'session'; got {across!r}")
    _require(records, ["participant", "stream", "grade", across])
    out = []
    for stream, group in records.groupby("stream", sort=True):
        table = group.pivot_table(index="participant", columns=across, values="grade",
                                  aggfunc="mean")
        if across == "session":
            # Test-retest: each participant's sessions in order, as occasions 1..k.
            table = table.apply(lambda r: pd.Series(r.dropna().to_numpy()), axis=1)
        table = table.dropna(axis=1, thresh=max(2, int(0.8 * len(table))))
        row = {"stream": stream, "across": across, "n_targets": int(table.dropna().shape[0]),
               "k": int(table.shape[1]), "note": ""}
        try:
            row.update(icc(table.to_numpy(dtype=np.float64)))
        except ScoringInputError as exc:
            row.update({form: float("nan") for form in ICC_FORMS})
            row["note"] = exc.problems[0].message
        out.append(row)
    return pd.DataFrame(out)


def flagged_participants(records: pd.DataFrame, *, min_fraction: float = 0.25) -> pd.DataFrame:
    """Participants whose repetitions of a stream raise a flag often, with the reason.

    Flags belong to streams (``head_moving`` to the head, ``asymmetry`` to the
    wrists), so the fraction is taken per participant and stream: a
    participant is listed for a flag when at least ``min_fraction`` of their
    scored repetitions of one stream carry it (0.25 is our default: common
    practice in screening, no single source).

    Returns
    -------
    DataFrame
        Columns ``participant, stream, flag, fraction, count, n``, sorted by
        participant, then descending fraction.
    """
    _require(records, ["participant", "stream", "flags"])
    rows = []
    for (participant, stream), group in records.groupby(["participant", "stream"], sort=True):
        n = len(group)
        counts: dict[str, int] = {}
        for flags in group["flags"]:
            for flag in set(flags):
                counts[flag] = counts.get(flag, 0) + 1
        for flag, count in sorted(counts.items()):
            if n and count / n >= min_fraction:
                rows.append({"participant": participant, "stream": stream, "flag": flag,
                             "fraction": count / n, "count": count, "n": n})
    df = pd.DataFrame(rows, columns=["participant", "stream", "flag", "fraction", "count", "n"])
    if len(df):
        df = df.sort_values(["participant", "fraction"], ascending=[True, False], kind="stable")
    return df.reset_index(drop=True)
