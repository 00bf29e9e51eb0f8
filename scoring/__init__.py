"""echoreo.scoring: state-space reconstruction, metrics, grades, cohort statistics.

Reads session files; never talks to the live runner. Imports echoreo.sim and the core only.

Public names are listed in ``_EXPORTS`` (name -> defining submodule) and
imported on first use, so importing the package stays cheap and each part
registers its own names with a one-line entry.
"""

from __future__ import annotations

import importlib
from typing import Any

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
    "recurrence_radius": "recurrence",
    "RQA_KEYS": "recurrence",
    "PCA": "pca",
    "icc": "reliability",
    "ReportData": "report",
    "build_report": "report",
    "write_report": "report",
    "mean_squares": "reliability",
    "bootstrap_ci": "cohort",
    "participant_summary": "cohort",
    "grade_reliability": "cohort",
    "flagged_participants": "cohort",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str) -> Any:
    try:
        module = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(importlib.import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS))
