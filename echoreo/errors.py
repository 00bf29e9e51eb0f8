"""The one exception family of echoreo.

Every error a user can cause (a bad file, a bad argument, bad data) is an
:class:`InputError`; the command line prints its message without a traceback
and exits with status 2. Faults at run time that are not the user's input
(a robot bridge that vanished, a disk that filled up) are :class:`RuntimeFault`
and exit with status 1.

::

    EchoreoError
    ├── InputError                 exit 2: what is wrong, where, how to fix it
    │   ├── RobotError             robot description files
    │   ├── ChoreographyError      choreography files and their limit checks
    │   ├── PlanError              session plan files
    │   ├── SessionFileError       session files (SQLite) that cannot be read
    │   ├── ScoringInputError      data that cannot be scored as asked
    │   ├── ProtocolError          wire messages that break PROTOCOL.md
    │   └── ExportError            exports and reports that cannot be written
    └── RuntimeFault               exit 1: a fault during a run
        └── LeaderLost             the robot bridge stopped answering

Lower-level errors (YAML, SQLite, ZeroMQ, OS) are converted at the boundary
with ``raise SomeError(...) from exc``.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "ChoreographyError",
    "EchoreoError",
    "ExportError",
    "InputError",
    "LeaderLost",
    "PlanError",
    "Problem",
    "ProtocolError",
    "RobotError",
    "RuntimeFault",
    "ScoringInputError",
    "SessionFileError",
]


@dataclass(frozen=True)
class Problem:
    """One located problem in an input file.

    Parameters
    ----------
    message : str
        What is wrong, stated with the values found ("elbow flexion reaches
        2.31 rad at t = 3.20 s; the limit is 2.09 rad").
    file : str or None
        Path of the file, as the user gave it.
    line, column : int or None
        1-based line and column of the offending YAML node.
    hint : str
        How to fix it.
    """

    message: str
    file: str | None = None
    line: int | None = None
    column: int | None = None
    hint: str = ""

    def location(self) -> str:
        """``file:line:column`` with whatever parts are known."""
        parts = [self.file or "<input>"]
        if self.line is not None:
            parts.append(str(self.line))
            if self.column is not None:
                parts.append(str(self.column))
        return ":".join(parts)

    def __str__(self) -> str:
        text = f"{self.location()}: {self.message}"
        if self.hint:
            text += f"\n    fix: {self.hint}"
        return text


class EchoreoError(Exception):
    """Root of every exception echoreo raises on purpose."""

    exit_code = 1


class InputError(EchoreoError):
    """An error the user caused and can fix; carries one or more problems.

    Parameters
    ----------
    message_or_problems : str or Problem or list of Problem
        Either one message, or the located problems found in one pass.
    hint : str, optional
        How to fix it, when a plain message is given.
    """

    exit_code = 2

    def __init__(self, message_or_problems: str | Problem | list[Problem], hint: str = ""):
        if isinstance(message_or_problems, str):
            problems = [Problem(message_or_problems, hint=hint)]
        elif isinstance(message_or_problems, Problem):
            problems = [message_or_problems]
        else:
            problems = list(message_or_problems)
            if not problems:
                raise ValueError("InputError needs at least one problem")
        self.problems: list[Problem] = problems
        super().__init__(self._render())

    def _render(self) -> str:
        if len(self.problems) == 1:
            p = self.problems[0]
            if p.file is None and p.line is None:
                return p.message + (f"\n    fix: {p.hint}" if p.hint else "")
            return str(p)
        head = f"{len(self.problems)} problems found:"
        return "\n".join([head, *(str(p) for p in self.problems)])


class RobotError(InputError):
    """A robot description is malformed or inconsistent."""


class ChoreographyError(InputError):
    """A choreography is malformed or would exceed the robot's limits."""


class PlanError(InputError):
    """A session plan is malformed or inconsistent."""


class SessionFileError(InputError):
    """A session file is missing, not a session file, or damaged."""


class ScoringInputError(InputError):
    """Data cannot be scored as asked (too short, constant, missing, ...)."""


class ProtocolError(InputError):
    """A wire message does not follow adapters/PROTOCOL.md."""


class ExportError(InputError):
    """An export or report cannot be written where asked."""


class RuntimeFault(EchoreoError):
    """A fault during a run that is not the user's input."""

    exit_code = 1


class LeaderLost(RuntimeFault):
    """The leader (robot bridge) stopped answering during a session."""
