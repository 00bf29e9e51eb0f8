"""echoreo.scoring: state-space reconstruction, metrics, grades, cohort statistics."""

__all__: list[str] = []
