"""echoreo.runner: choreographies, session plans, clock, recorder, command line.

Public names are listed in ``_EXPORTS`` (name -> defining submodule) and
imported on first use, so importing the package stays cheap and each part
registers its own names with a one-line entry.
"""

from __future__ import annotations

import importlib
from typing import Any

#: public name -> submodule of this package that defines it
_EXPORTS: dict[str, str] = {
    "request_realtime_priority": "clock",
    "ImportResult": "cmd_import",
    "record_import": "cmd_import",
    "Choreography": "choreography",
    "Move": "choreography",
    "Step": "choreography",
    "Timeline": "timeline",
    "load_choreography": "choreography",
    "ramp": "ramps",
    "LatenessStats": "clock",
    "Recorder": "recorder",
    "RecorderStats": "recorder",
    "Scheduler": "clock",
    "SessionClock": "clock",
    "Tick": "clock",
    "VirtualClock": "clock",
    "AdapterSpec": "plan",
    "PlanItem": "plan",
    "SessionPlan": "plan",
    "StreamPair": "plan",
    "check_plan": "plan",
    "load_plan": "plan",
    "SessionProgram": "program",
    "build_program": "program",
    "check_program": "program",
    "RepetitionEnd": "session",
    "SessionResult": "session",
    "run_session": "session",
    "LiveView": "liveview",
    "PlainLog": "liveview",
    "SessionStatus": "liveview",
    "make_view": "liveview",
    "score_repetition": "livegrades",
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
