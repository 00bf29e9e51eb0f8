"""Robot descriptions: loading by shipped name, from a file or from text.

A robot is a kinematic tree of revolute joints fixed to a base link, with
named body sites (frames where sensors sit) and a rest pose. The file format
is described in ``choreographies/FORMAT.md``, section 1.

This module is the public entry point: :func:`load_robot`,
:func:`parse_robot` and :func:`shipped_robots` are defined here; the model
(:class:`Robot`, :class:`Kinematics`, forward kinematics) lives in
``_robotmodel.py``, the parsing and validation with located errors in
``_robotparse.py`` and ``_robotcheck.py``, and all their public names are
importable from here.
"""

from __future__ import annotations

from pathlib import Path

from echoreo.errors import InputError, RobotError
from echoreo.sim._robotmodel import Kinematics, Robot
from echoreo.sim._robotparse import FORMAT as FORMAT
from echoreo.sim._robotparse import REQUIRED_SITES, _build
from echoreo.yamlload import load_yaml

__all__ = [
    "REQUIRED_SITES",
    "Kinematics",
    "Robot",
    "load_robot",
    "parse_robot",
    "shipped_robots",
]

# -- loading ------------------------------------------------------------------------


def _robots_dir() -> Path:
    from echoreo.choreographies import DATA_DIR

    return DATA_DIR / "robots"


def shipped_robots() -> tuple[str, ...]:
    """Names of the robots shipped in ``choreographies/robots/``."""
    return tuple(sorted(p.stem for p in _robots_dir().glob("*.yaml")))


def load_robot(name_or_path: str | Path | Robot) -> Robot:
    """Load a robot description by shipped name or from a file.

    Parameters
    ----------
    name_or_path : str or Path or Robot
        A shipped robot's name (``"torso-e1"``), or a path to a YAML file
        (anything that ends in ``.yaml``/``.yml`` or contains a path
        separator). A :class:`Robot` is returned unchanged.

    Returns
    -------
    Robot

    Raises
    ------
    RobotError
        Unknown name (the message lists the shipped robots), missing or
        unreadable file, or every problem of the description with its
        ``file:line:column``.
    """
    if isinstance(name_or_path, Robot):
        return name_or_path
    text_arg = str(name_or_path)
    looks_like_path = (isinstance(name_or_path, Path) or text_arg.endswith((".yaml", ".yml"))
                       or "/" in text_arg or "\\" in text_arg)
    if looks_like_path:
        path = Path(name_or_path)
    else:
        path = _robots_dir() / f"{text_arg}.yaml"
        if not path.is_file():
            names = shipped_robots()
            raise RobotError(
                f"no shipped robot is named {text_arg!r}",
                hint=("shipped robots: " + ", ".join(names) if names else "no robots are shipped")
                + "; or give the path of a robot YAML file",
            )
    try:
        data = load_yaml(path, what="robot description")
    except InputError as exc:
        raise RobotError(exc.problems) from exc
    text = path.read_text(encoding="utf-8")
    source = str(path) if looks_like_path else text_arg
    return _build(data, text, source, str(path))


def parse_robot(text: str, source: str = "<text>") -> Robot:
    """Parse a robot description from YAML text.

    Used for robots generated in code (the human model writes YAML text for a
    given body height and parses it here) and for the robot snapshot stored
    in a session file.

    Parameters
    ----------
    text : str
        YAML in the format of FORMAT.md section 1.
    source : str
        Name reported in error locations and stored as ``Robot.source``.

    Returns
    -------
    Robot

    Raises
    ------
    RobotError
        Every problem of the description, each with ``source:line:column``.
    """
    try:
        data = load_yaml(source, text=text, what="robot description")
    except InputError as exc:
        raise RobotError(exc.problems) from exc
    return _build(data, text, source, source)

