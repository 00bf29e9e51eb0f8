"""YAML loading that remembers where every value came from.

Robot descriptions, choreographies and session plans are YAML files written by
hand. A problem in any of them must be reported as ``file:line:column``, so the
loader keeps the position of every mapping key and value and of every list
item. The result behaves like plain ``dict``/``list`` objects.

Only YAML's safe subset is accepted (``yaml.SafeLoader``): no Python objects.
Duplicate keys in one mapping are an error (PyYAML keeps the last silently).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

from echoreo.errors import InputError, Problem

__all__ = ["LDict", "LList", "Loc", "load_yaml", "loc_of"]

# libyaml's C parser, when PyYAML was built with it, composes the same nodes with
# the same marks about ten times faster than the pure-Python one.
_COMPOSE_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


class Loc(tuple):
    """A ``(file, line, column)`` triple, 1-based."""

    __slots__ = ()

    def __new__(cls, file: str | None, line: int | None, column: int | None):
        return super().__new__(cls, (file, line, column))

    @property
    def file(self) -> str | None:
        return self[0]

    @property
    def line(self) -> int | None:
        return self[1]

    @property
    def column(self) -> int | None:
        return self[2]

    def problem(self, message: str, hint: str = "") -> Problem:
        """A :class:`~echoreo.errors.Problem` at this location."""
        return Problem(message, self.file, self.line, self.column, hint)


class LDict(dict):
    """A dict that knows the location of itself, its keys and its values."""

    loc: Loc
    key_locs: dict
    value_locs: dict

    def key_loc(self, key: Any) -> Loc:
        """Location of ``key`` (of the mapping itself when absent)."""
        return self.key_locs.get(key, self.loc)

    def value_loc(self, key: Any) -> Loc:
        """Location of the value under ``key`` (of the mapping when absent)."""
        return self.value_locs.get(key, self.loc)


class LList(list):
    """A list that knows the location of itself and of each item."""

    loc: Loc
    item_locs: list

    def item_loc(self, index: int) -> Loc:
        """Location of item ``index``."""
        if 0 <= index < len(self.item_locs):
            return self.item_locs[index]
        return self.loc


def loc_of(container: Any, key: Any = None, default: Loc | None = None) -> Loc:
    """Best location for ``container[key]`` (or the container when ``key`` is None)."""
    if isinstance(container, LDict):
        return container.loc if key is None else container.value_loc(key)
    if isinstance(container, LList):
        return container.loc if key is None else container.item_loc(int(key))
    return default if default is not None else Loc(None, None, None)


def _mark(node: yaml.Node, file: str | None) -> Loc:
    m = node.start_mark
    return Loc(file, m.line + 1, m.column + 1)


class _Builder:
    def __init__(self, file: str | None):
        self.file = file
        self.constructor = yaml.SafeLoader("")  # for scalar resolution only
        self.problems: list[Problem] = []

    def build(self, node: yaml.Node) -> Any:
        if isinstance(node, yaml.MappingNode):
            out = LDict()
            out.loc = _mark(node, self.file)
            out.key_locs = {}
            out.value_locs = {}
            self.constructor.flatten_mapping(node)
            for key_node, value_node in node.value:
                key = self.build(key_node)
                try:
                    hash(key)
                except TypeError:
                    self.problems.append(
                        _mark(key_node, self.file).problem(
                            "a mapping key must be a plain value, not a list or mapping"
                        )
                    )
                    continue
                if key in out:
                    first = out.key_locs[key]
                    self.problems.append(
                        _mark(key_node, self.file).problem(
                            f"key {key!r} appears twice in one mapping "
                            f"(first at line {first.line})",
                            "keep one of the two entries",
                        )
                    )
                    continue
                out[key] = self.build(value_node)
                out.key_locs[key] = _mark(key_node, self.file)
                out.value_locs[key] = _mark(value_node, self.file)
            return out
        if isinstance(node, yaml.SequenceNode):
            out_list = LList(self.build(item) for item in node.value)
            out_list.loc = _mark(node, self.file)
            out_list.item_locs = [_mark(item, self.file) for item in node.value]
            return out_list
        return self.constructor.construct_object(node, deep=True)


def load_yaml(source: str | Path, *, text: str | None = None, what: str = "file") -> Any:
    """Load one YAML document with locations.

    Parameters
    ----------
    source : str or Path
        The file to read, or (when ``text`` is given) the name to report.
    text : str, optional
        YAML text to parse instead of reading ``source``.
    what : str
        What kind of file this is, for messages ("robot description", ...).

    Returns
    -------
    LDict, LList or scalar
        The document; mappings and lists carry their locations.

    Raises
    ------
    InputError
        The file is missing or unreadable, is not valid YAML, is empty, or has
        duplicate keys; the message gives ``file:line:column``.
    """
    name = str(source)
    if text is None:
        path = Path(source)
        if not path.exists():
            raise InputError(
                Problem(f"{what} not found", name, hint="check the path and the file name")
            )
        if path.is_dir():
            raise InputError(Problem(f"{what} expected, but this is a folder", name))
        try:
            text = path.read_text(encoding="utf-8")
        except UnicodeDecodeError as exc:
            raise InputError(
                Problem(f"{what} is not UTF-8 text ({exc.reason} at byte {exc.start})", name,
                        hint="save the file as UTF-8")
            ) from exc
        except OSError as exc:
            raise InputError(Problem(f"cannot read {what}: {exc.strerror}", name)) from exc
    try:
        node = yaml.compose(text, Loader=_COMPOSE_LOADER)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark else None
        col = mark.column + 1 if mark else None
        reason = exc.problem or str(exc)
        raise InputError(
            Problem(f"not valid YAML: {reason}", name, line, col,
                    "check indentation, colons and quotes near this position")
        ) from exc
    except yaml.YAMLError as exc:
        raise InputError(Problem(f"not valid YAML: {exc}", name)) from exc
    if node is None:
        raise InputError(Problem(f"{what} is empty", name, 1, 1))
    builder = _Builder(name)
    try:
        data = builder.build(node)
    except yaml.constructor.ConstructorError as exc:
        mark = exc.problem_mark
        raise InputError(
            Problem(f"not valid YAML: {exc.problem}", name,
                    mark.line + 1 if mark else None, mark.column + 1 if mark else None)
        ) from exc
    if builder.problems:
        raise InputError(builder.problems)
    return data
