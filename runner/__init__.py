"""echoreo.runner: choreographies, session plans, clock, recorder, command line.

Public names: ``_EXPORTS`` below, imported on first use (``echoreo._lazy``).
"""

from __future__ import annotations

from echoreo._lazy import lazy_exports

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
    "AdapterSpec": "_plantypes",
    "PlanItem": "_plantypes",
    "SessionPlan": "_plantypes",
    "StreamPair": "_plantypes",
    "check_plan": "plan",
    "load_plan": "plan",
    "SessionProgram": "program",
    "build_program": "program",
    "check_program": "program",
    "RepetitionEnd": "_sessiongrades",
    "SessionResult": "_sessionfinish",
    "run_session": "session",
    "LiveView": "liveview",
    "PlainLog": "liveview",
    "SessionStatus": "liveview",
    "make_view": "liveview",
    "score_repetition": "livegrades",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
