"""Located problems of a session plan: the checker that collects them.

:class:`_Checker` gathers every problem of one plan in one pass, each with
the ``file:line:column`` of the offending key or value (from the located
YAML of :mod:`echoreo.yamlload`); it checks numbers against their ranges and
keys against the allowed ones (suggesting the closest allowed key).
"""

from __future__ import annotations

import math

from echoreo.errors import Problem
from echoreo.yamlload import LDict, Loc

__all__: list[str] = []


class _Checker:
    """Collects every problem of one plan in one pass."""

    def __init__(self) -> None:
        self.problems: list[Problem] = []

    def add(self, loc: Loc, message: str, hint: str = "") -> None:
        self.problems.append(loc.problem(message, hint))

    def number(self, d: LDict, key: str, default: float | None, *, low: float, high: float,
               unit: str, required: bool = False, low_open: bool = False) -> float | None:
        if key not in d:
            if required:
                self.add(d.loc, f"{key!r} is missing", f"add `{key}: <number in {unit}>`")
            return default
        v = d[key]
        loc = d.value_loc(key)
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            self.add(loc, f"{key} must be a number ({unit}), found {v!r}")
            return default
        if v < low or v > high or (low_open and v == low):
            lo = f"above {low:g}" if low_open else f"at least {low:g}"
            self.add(loc, f"{key} = {v:g} {unit} is out of range", f"use a value {lo} and at "
                     f"most {high:g} {unit}")
            return default
        return float(v)

    def unknown_keys(self, d: LDict, allowed: set[str], what: str) -> None:
        for k in d:
            if k not in allowed:
                near = _closest(str(k), allowed)
                hint = f"did you mean {near!r}?" if near else (
                    "allowed keys: " + ", ".join(sorted(allowed)))
                self.add(d.key_loc(k), f"unknown key {k!r} in {what}", hint)


def _closest(word: str, options: set[str]) -> str | None:
    import difflib

    m = difflib.get_close_matches(word, sorted(options), n=1, cutoff=0.7)
    return m[0] if m else None
