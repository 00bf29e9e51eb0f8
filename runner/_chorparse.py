"""The choreography file parser: one pass over the YAML, every problem collected.

Private to :mod:`echoreo.runner.choreography`; the format is documented in
``choreographies/FORMAT.md``, section 2. The parser checks structure, types,
names, units, keyframe times, joint ranges and the continuity of postures
between steps; the limit checks on the sampled trajectory are done by
:class:`~echoreo.runner.choreography.Choreography` after the parse.

The parser is put together from :mod:`echoreo.runner._chorfields` (field values,
units, joint angles, the format's constants), :mod:`echoreo.runner._chormoves`
(moves and mirrors) and :mod:`echoreo.runner._chorsequence` (steps and
continuity); this module reads the file, the top-level fields, the robot and
the poses.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import yaml

from echoreo.errors import ChoreographyError, InputError, Problem
from echoreo.runner._chorfields import (
    FORMAT_TAG,
    MAX_DURATION_S,
    MAX_REPEAT,
    SAME_POSTURE_RAD,
    TOP_KEYS,
    UNITS,
    _type_name,
)
from echoreo.runner._chormoves import _MoveReader
from echoreo.runner._chorsequence import _SequenceReader
from echoreo.yamlload import LDict, Loc, load_yaml

# The constants are defined in echoreo.runner._chorfields and re-exported here.
__all__ = ["FORMAT_TAG", "MAX_DURATION_S", "MAX_REPEAT", "SAME_POSTURE_RAD", "UNITS",
           "parse_file"]


class _Parser(_MoveReader, _SequenceReader):
    """One pass over a choreography document, collecting every problem."""

    # the document -------------------------------------------------------------------------

    def parse(self) -> dict[str, Any]:
        doc = self.doc
        if not isinstance(doc, LDict):
            loc = getattr(doc, "loc", Loc(self.path, 1, 1))
            self.add(loc, f"a choreography must be a mapping of fields, found {_type_name(doc)}",
                     "start with 'robot: <name>', 'unit: deg', 'poses:', 'moves:' and "
                     "'sequence:'; see choreographies/FORMAT.md")
            return {}
        self.check_keys(doc, TOP_KEYS, "the choreography")
        if "format" in doc and doc["format"] != FORMAT_TAG:
            self.add(doc.value_loc("format"),
                     f"format must be {FORMAT_TAG!r}, found {_type_name(doc['format'])}",
                     f"write 'format: {FORMAT_TAG}' or leave the field out")
        name = self.string(doc, "name", "the choreography's name", required=False,
                           default=Path(self.path).stem)
        description = self.string(doc, "description", "the description", required=False,
                                  default="")
        self.parse_robot(doc)
        if "unit" not in doc:
            self.add(doc.loc, "the angle unit is missing (field 'unit')",
                     "add 'unit: deg' or 'unit: rad'; it applies to every angle in the file")
        self.unit = self.unit_of(doc, None)
        tempo = self.number(doc, "tempo", "the global tempo", required=False, default=1.0,
                            positive=True)
        poses = self.parse_poses(doc)
        moves = self.parse_moves(doc, poses)
        steps = self.parse_sequence(doc, poses, moves, tempo)
        start = self.check_continuity(steps, poses, moves)
        return {"name": name, "description": description, "tempo": tempo, "poses": poses,
                "moves": moves, "steps": steps, "start": start}

    def parse_robot(self, doc: LDict) -> None:
        if "robot" not in doc:
            self.add(doc.loc, "the robot is missing (field 'robot')",
                     "add 'robot: torso-e1' (a shipped robot) or the path of a robot file")
            return
        value = doc["robot"]
        loc = doc.value_loc("robot")
        self.locs.robot = loc
        if not isinstance(value, str) or not value.strip():
            self.add(loc, f"robot must be a name or a path, found {_type_name(value)}",
                     "write 'robot: torso-e1' or a path such as 'robot: robots/mine.yaml'")
            if self.robot is None:
                self.structural = True
            return
        is_path = "/" in value or "\\" in value or value.endswith((".yaml", ".yml"))
        if self.robot is not None:
            if not is_path and value != self.robot.name:
                self.add(loc, f"this choreography is written for robot {value!r}, but robot "
                              f"{self.robot.name!r} was given",
                         "use the robot the file names, or change 'robot:' in the file")
            return
        from echoreo.sim import load_robot

        target = str(Path(self.path).parent / value) if is_path else value
        try:
            self.robot = load_robot(target)
        except InputError as exc:
            first = exc.problems[0]
            self.add(loc, f"robot {value!r} cannot be loaded: {first.message}",
                     first.hint or ("give a shipped robot's name (such as torso-e1) or a path "
                                    "relative to this file"))
            own = [p for p in exc.problems if p.file and p.file != self.path and p.line]
            self.problems.extend(own)
        except (OSError, ValueError, KeyError) as exc:
            self.add(loc, f"robot {value!r} cannot be loaded: {exc}",
                     "give a shipped robot's name (such as torso-e1) or a path relative to "
                     "this file")

    def parse_poses(self, doc: LDict) -> dict[str, np.ndarray | None]:
        poses: dict[str, np.ndarray | None] = {}
        if "poses" not in doc:
            return poses
        section = doc["poses"]
        if section is None:
            return poses
        if not isinstance(section, LDict):
            self.add(doc.value_loc("poses"),
                     f"poses must be a mapping of pose names to joint angles, found "
                     f"{_type_name(section)}", "write 'poses:' then '  name: {joint: angle}'")
            return poses
        for pname, body in section.items():
            kloc = section.key_loc(pname)
            if not isinstance(pname, str):
                self.add(kloc, f"pose names are text, found {_type_name(pname)}",
                         "quote the name")
                continue
            if body is None:
                body_map: dict = {}
            elif isinstance(body, LDict):
                body_map = body
            else:
                self.add(section.value_loc(pname),
                         f"pose {pname!r} must be a mapping of joint angles, found "
                         f"{_type_name(body)}", "write e.g. '{right_elbow_flexion: 45}', or {} "
                         "for the robot's rest pose")
                poses[pname] = None
                continue
            unit = self.unit_of(body_map, self.unit) if body_map else self.unit
            targets = (self.joint_targets(body_map, unit, f"pose {pname!r}", skip=("unit",))
                       if body_map else {})
            if isinstance(body_map, LDict):
                for joint in targets:
                    self.locs.pose_joint[(pname, joint)] = body_map.value_loc(joint)
            poses[pname] = self.posture(targets)
        return poses


def _locate_reader_error(exc: InputError, name: str) -> list[Problem]:
    """Give a line and column to problems PyYAML and the decoder report by position only:
    characters YAML does not allow, and bytes that are not UTF-8."""
    cause = exc.__cause__
    if exc.problems[0].line is not None:
        return exc.problems
    try:
        raw = Path(name).read_bytes()
    except OSError:
        return exc.problems
    if isinstance(cause, UnicodeDecodeError):
        before = raw[: cause.start]
        line = before.count(b"\n") + 1
        column = cause.start - (before.rfind(b"\n") + 1) + 1
        return [Problem(f"choreography is not UTF-8 text (byte 0x{raw[cause.start]:02x} at "
                        f"byte {cause.start})", name, line, column, "save the file as UTF-8")]
    if isinstance(cause, yaml.reader.ReaderError):
        text = raw.decode("utf-8", errors="replace")
        before = text[: cause.position]
        line = before.count("\n") + 1
        column = cause.position - (before.rfind("\n") + 1) + 1
        char = cause.character
        shown = f"#x{ord(char):04x}" if isinstance(char, str) else repr(char)
        return [Problem(f"not valid YAML: the character {shown} is not allowed in YAML text",
                        name, line, column, "delete it or replace it with a printable character")]
    return exc.problems


def parse_file(path: str | Path, robot: Any = None) -> tuple[dict[str, Any], _Parser]:
    """Read and parse a choreography file.

    Returns
    -------
    parsed : dict
        ``name``, ``description``, ``tempo``, ``poses``, ``moves``, ``steps``, ``start``.
    parser : _Parser
        With ``problems`` (only non-structural ones remain: angles beyond a
        joint's range), ``robot``, ``locs`` and ``limit_problem_joints``.

    Raises
    ------
    ChoreographyError
        The file cannot be read or parsed, or has structural problems.
    """
    name = str(path)
    try:
        doc = load_yaml(path, what="choreography")
    except InputError as exc:
        raise ChoreographyError(_locate_reader_error(exc, name)) from exc
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:  # vanished between the two reads
        raise ChoreographyError(Problem(f"cannot read choreography: {exc}", name)) from exc
    parser = _Parser(name, doc, robot, text)
    parsed = parser.parse()
    parser.problems.sort(key=lambda p: (p.file != name, p.line or 0, p.column or 0))
    if parser.structural or parser.robot is None:
        raise ChoreographyError(parser.problems)
    return parsed, parser
