"""echoreo.adapters: leader and follower interfaces and their implementations."""

__all__: list[str] = []
