"""Located problems of a robot description: the checker that collects them.

:class:`_Checker` gathers every problem of one robot file in one pass, each
with the ``file:line:column`` of the offending key or value (from the
located YAML of :mod:`echoreo.yamlload`), and checks the shapes of values:
mappings, known keys, finite numbers and 3-vectors (scaled to SI units).
Used by :mod:`echoreo.sim._robotparse`.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from echoreo.errors import Problem
from echoreo.yamlload import LDict, Loc

__all__: list[str] = []


class _Checker:
    def __init__(self, file: str):
        self.file = file
        self.problems: list[Problem] = []

    def add(self, loc: Loc | None, message: str, hint: str = "") -> None:
        if loc is None:
            loc = Loc(self.file, None, None)
        self.problems.append(loc.problem(message, hint))

    def mapping(self, parent: Any, key: str, where: str, required: bool = True) -> LDict | None:
        value = parent.get(key) if isinstance(parent, dict) else None
        if value is None:
            if required and isinstance(parent, dict):
                self.add(_loc(parent), f"{where}: '{key}' is missing",
                         f"add '{key}:' with a mapping")
            return None
        if not isinstance(value, dict):
            self.add(_vloc(parent, key), f"{where}: '{key}' must be a mapping, "
                     f"got {_kind(value)}")
            return None
        return value

    def unknown_keys(self, mapping: Any, allowed: tuple[str, ...], where: str) -> None:
        if not isinstance(mapping, dict):
            return
        for key in mapping:
            if key not in allowed:
                hint = "allowed keys: " + ", ".join(allowed)
                self.add(_kloc(mapping, key), f"{where}: unknown key {key!r}", hint)

    def number(self, parent: Any, key: str, where: str, scale: float = 1.0,
               required: bool = True) -> float | None:
        if not isinstance(parent, dict) or key not in parent or parent[key] is None:
            if required:
                self.add(_loc(parent), f"{where}: '{key}' is missing", f"add '{key}: <number>'")
            return None
        v = parent[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not np.isfinite(v):
            self.add(_vloc(parent, key), f"{where}: '{key}' must be a finite number, "
                     f"got {v!r}")
            return None
        return float(v) * scale

    def vector(self, parent: Any, key: str, where: str, scale: float = 1.0,
               default: tuple | None = None) -> NDArray | None:
        if not isinstance(parent, dict) or key not in parent:
            if default is not None:
                return np.array(default, dtype=float)
            self.add(_loc(parent), f"{where}: '{key}' is missing", f"add '{key}: [x, y, z]'")
            return None
        v = parent[key]
        ok = (isinstance(v, list) and len(v) == 3
              and all(not isinstance(x, bool) and isinstance(x, (int, float)) for x in v)
              and all(np.isfinite(x) for x in v))
        if not ok:
            self.add(_vloc(parent, key), f"{where}: '{key}' must be a list of 3 finite "
                     f"numbers, got {v!r}", f"write '{key}: [x, y, z]'")
            return None
        return np.array(v, dtype=float) * scale


def _loc(container: Any) -> Loc | None:
    return getattr(container, "loc", None)


def _vloc(container: Any, key: Any) -> Loc | None:
    return container.value_loc(key) if isinstance(container, LDict) else _loc(container)


def _kloc(container: Any, key: Any) -> Loc | None:
    return container.key_loc(key) if isinstance(container, LDict) else _loc(container)


def _kind(value: Any) -> str:
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return repr(value)
