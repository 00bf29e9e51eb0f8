"""Session plans: which protocol a session runs, with whom, through which adapters.

A session plan is a YAML file (format in ``choreographies/FORMAT.md``, section
"3. Session plan") that names the study, the participant's pseudonymous code,
the choreographies to run with countdowns and rests between them, the
imitation mode, the follower streams expected and the leader body site each
is compared with, the leader and follower adapters with their settings, the
command rate, what a silent follower stream does, and a confirmation that
consent was recorded.

:func:`load_plan` parses and validates a plan and every choreography it names,
collecting all problems of one pass into one :class:`~echoreo.errors.PlanError`
whose problems carry ``file:line:column``. :func:`check_plan` is what
``echoreo check PLAN`` calls.

This module is the public entry point; every public name of the plan is
importable from here. The parts: the plan's dataclasses in
``_plantypes.py``, pseudonymous participant codes in
``_participant_code.py``, the located-problem checker in ``_plancheck.py``,
stream pairs in ``_planstreams.py``, adapter settings in
``_planadapters.py``, and the parsing of the plan file (robot,
choreographies, consent, silent streams) in ``_planparse.py``.
"""

from __future__ import annotations

from pathlib import Path

from echoreo.errors import InputError, PlanError
from echoreo.runner._participant_code import PARTICIPANT_CODE, check_participant_code
from echoreo.runner._planadapters import FOLLOWER_ADAPTERS as FOLLOWER_ADAPTERS
from echoreo.runner._planadapters import LEADER_ADAPTERS as LEADER_ADAPTERS
from echoreo.runner._planparse import MODES as MODES
from echoreo.runner._planparse import SILENT_ACTIONS as SILENT_ACTIONS
from echoreo.runner._planparse import _parse, shipped_choreography
from echoreo.runner._planstreams import SITES as SITES
from echoreo.runner._planstreams import STREAM_KINDS as STREAM_KINDS
from echoreo.runner._planstreams import leader_site_for
from echoreo.runner._plantypes import AdapterSpec, PlanItem, SessionPlan, StreamPair

__all__ = [
    "PARTICIPANT_CODE",
    "AdapterSpec",
    "PlanItem",
    "SessionPlan",
    "StreamPair",
    "check_participant_code",
    "check_plan",
    "leader_site_for",
    "load_plan",
    "shipped_choreography",
]


def load_plan(path: str | Path, *, participant: str | None = None) -> SessionPlan:
    """Load and validate a session plan and every choreography it names.

    Parameters
    ----------
    path : str or Path
        The plan file.
    participant : str, optional
        Participant code overriding the plan's ``participant:`` (validated the
        same way).

    Returns
    -------
    SessionPlan

    Raises
    ------
    PlanError
        Every problem found, each with ``file:line:column`` and a hint: unknown
        keys, missing or out-of-range values, a participant code that is not
        pseudonymous, missing consent confirmation, choreographies that do not
        exist, do not load, are written for another robot or exceed its limits,
        inconsistent stream pairings, unknown adapters or settings.
    """
    path = Path(path)
    try:
        plan, problems = _parse(path, participant=participant)
    except PlanError:
        raise
    except InputError as exc:
        raise PlanError(exc.problems) from exc
    if problems:
        raise PlanError(problems)
    assert plan is not None
    return plan


def check_plan(path: str | Path) -> SessionPlan:
    """Validate a plan for ``echoreo check``; the plan when valid, else :class:`PlanError`.

    Parameters
    ----------
    path : str or Path
        The plan file.
    """
    return load_plan(path)
