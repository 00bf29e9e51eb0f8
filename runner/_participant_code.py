"""Pseudonymous participant codes: the rule and its check.

A participant code is 1-4 letters then 1-4 digits (``P07``, ``ab123``); a
code that looks like a name is refused, and a refused value is never echoed
in full. Used by plan validation, ``SessionPlan.with_participant``, the
session runner's ``--participant`` and ``echoreo import``.
"""

from __future__ import annotations

import re
from typing import Any

from echoreo.errors import Problem
from echoreo.yamlload import Loc

__all__ = ["PARTICIPANT_CODE", "check_participant_code"]

#: Pseudonymous participant code: 1-4 letters then 1-4 digits ("P07", "ab123").
PARTICIPANT_CODE = re.compile(r"^[A-Za-z]{1,4}[0-9]{1,4}$")

_PARTICIPANT_WHY = (
    "participant codes are pseudonymous: 1 to 4 letters followed by 1 to 4 digits "
    "(for example P07 or AB123), with the letters in one case. A name, initials with a birth "
    "date or any other identifying text must never enter a session file, which is "
    "copied, shared and archived with the study data; keep the key that links codes "
    "to people apart from the data, as the study's ethics approval requires"
)


def check_participant_code(code: Any, loc: Loc | None = None) -> list[Problem]:
    """Problems with a participant code (empty list when it is acceptable).

    Parameters
    ----------
    code : object
        The code as given (plan value or ``--participant`` argument).
    loc : Loc, optional
        Where it was given, for the message.
    """
    loc = loc or Loc(None, None, None)
    if not isinstance(code, str) or not PARTICIPANT_CODE.match(code):
        shown = code if isinstance(code, str) else type(code).__name__
        # never echo something that may be a person's name in full
        if isinstance(shown, str) and len(shown) > 3 and not PARTICIPANT_CODE.match(shown):
            shown = shown[:1] + "…"
        return [loc.problem(f"participant code {shown!r} refused: it is not a pseudonymous "
                            "code of letters then digits", _PARTICIPANT_WHY)]
    letters = code.rstrip("0123456789")
    if len(letters) >= 3 and letters[0].isupper() and letters[1:].islower():
        return [loc.problem(f"participant code {code[:1] + '…'!r} refused: its letters are "
                            "written like a name (capital then small letters)", _PARTICIPANT_WHY)]
    return []
