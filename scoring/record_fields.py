"""The fields of a score record, in order (DEVELOPERS.md, "Score records").

Kept apart from :mod:`echoreo.scoring.records`, which computes records, so that
commands that only read stored scores (``echoreo sessions``) can check them
without importing the scoring pipeline.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

__all__ = ["RECORD_FIELDS", "missing_fields"]

#: the score-record fields, in order (DEVELOPERS.md, "Score records")
RECORD_FIELDS: tuple[str, ...] = (
    "session", "participant", "study", "stream", "kind", "site", "leader_site",
    "choreography", "move", "step", "repetition", "t_start", "t_end", "lag_s",
    "median_ratio", "iqr_ratio", "wasserstein", "shape_distance", "crqa_RR", "crqa_DET",
    "crqa_L", "crqa_Lmax", "crqa_ENTR", "crqa_LAM", "crqa_TT", "correlation", "variability",
    "grade", "band", "flags", "delay", "dim", "signal", "rate_hz", "filter_cutoff_hz",
    "filter_order",
)


def missing_fields(records: Iterable[Mapping]) -> list[str]:
    """The fields of :data:`RECORD_FIELDS` that some of ``records`` lack, in field order.

    Scores stored by an earlier version of echoreo lack the fields added since (for
    example ``correlation``); scoring the session again writes complete records.

    Parameters
    ----------
    records : iterable of mapping
        Stored score records (``SessionFile.scores()["record"]``).

    Returns
    -------
    list of str
        Empty when every record has every field (or there are no records).
    """
    absent: set[str] = set()
    for rec in records:
        absent.update(k for k in RECORD_FIELDS if k not in rec)
    return [k for k in RECORD_FIELDS if k in absent]
