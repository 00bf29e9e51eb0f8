"""echoreo.scoring: state-space reconstruction, metrics, grades, cohort statistics.

Reads session files; never talks to the live runner. Imports echoreo.sim and the core only.

Public names: ``_EXPORTS`` below, imported on first use (``echoreo._lazy``).
"""

from __future__ import annotations

from echoreo._lazy import lazy_exports

#: public name -> submodule of this package that defines it
_EXPORTS: dict[str, str] = {
    "embed": "embedding",
    "embedding_length": "embedding",
    "ami": "mutual_information",
    "choose_delay": "mutual_information",
    "fnn": "dimension",
    "cao": "dimension",
    "CaoResult": "dimension",
    "choose_dimension": "dimension",
    "rqa": "recurrence",
    "recurrence_radius": "radius",
    "RQA_KEYS": "recurrence",
    "PCA": "pca",
    "score_session": "session_scores",
    "score_study": "session_scores",
    "score_data": "session_scores",
    "read_session": "session_data",
    "session_from_arrays": "session_data",
    "session_embedding": "session_scores",
    "SessionScores": "session_scores",
    "StudyScores": "session_scores",
    "SessionData": "session_data",
    "StreamArrays": "session_data",
    "RECORD_FIELDS": "record_fields",
    "missing_fields": "record_fields",
    "ScoringParams": "params",
    "EmbeddingChoice": "params",
    "choose_embedding": "params",
    "combine_choices": "params",
    "GradeConfig": "grade",
    "FLAGS": "grade",
    "lowpass": "preprocess",
    "winter_correction": "preprocess",
    "resample_uniform": "preprocess",
    "estimate_lag": "align",
    "virtual_references": "reference",
    "reflect_lateral": "reference",
    "compare_repetition": "metrics",
    "wasserstein_1d": "metrics",
    "shape_distance": "metrics",
    "icc": "reliability",
    "study_report": "studies",
    "gather_sessions": "studies",
    "StudyReport": "studies",
    "score_with_details": "studies",
    "map_sessions": "parallel",
    "ReportData": "report",
    "build_report": "report",
    "write_report": "report",
    "mean_squares": "reliability",
    "bootstrap_ci": "cohort",
    "participant_summary": "cohort",
    "participant_ranking": "cohort",
    "grade_reliability": "cohort",
    "flagged_participants": "cohort",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
