"""echoreo.runner: choreographies, session plans, clock, recorder, command line."""

__all__: list[str] = []
