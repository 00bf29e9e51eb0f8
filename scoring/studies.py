"""From a set of session files to the cohort report.

Sessions are gathered, checked, scored with one study-level embedding (so
every participant's grades are comparable) and handed to
:func:`echoreo.scoring.report.write_report`. What cannot be used is left out
with the reason, and the report lists it:

- a file that is not a readable session file;
- sessions recorded with another robot or under another study than the
  majority (their grades would not be comparable); the majority group is
  reported;
- an interrupted session is scored up to where it stopped, and said so;
- a session with no stored scores yet is scored now, and said so.

Scores are recomputed for the report even where the files hold scores, since
the figures need the reconstructed trajectories that the stored records do
not keep; with the same files the recomputed grades equal the stored ones.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Iterable
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from echoreo.errors import ScoringInputError, SessionFileError
from echoreo.scoring.parallel import default_workers
from echoreo.scoring.report import ReportData, check_writable, write_report
from echoreo.sessionfile import SessionFile, find_sessions

__all__ = ["StudyReport", "gather_sessions", "score_with_details", "study_report"]


@dataclass
class StudyReport:
    """Result of :func:`study_report`.

    Attributes
    ----------
    report : Path
    used : list of Path
        Sessions shown in the report.
    notes : list of str
        What was left out or treated specially, and why.
    figures : list of Path
        Figure files written on request.
    """

    report: Path
    used: list[Path]
    notes: list[str] = field(default_factory=list)
    figures: list[Path] = field(default_factory=list)


def gather_sessions(paths: Iterable[str | Path]) -> tuple[list[dict], list[str]]:
    """Open every session file (folders are expanded to their ``*.sqlite``).

    Returns
    -------
    (sessions, notes)
        ``sessions``: dicts with ``path``, ``participant``, ``study``,
        ``robot``, ``state``, ``scored`` (bool), ``duration_s``; ``notes``:
        one line per file that could not be read.

    Raises
    ------
    ScoringInputError
        No path names an existing file or folder, or no session file was found.
    """
    files, problems = find_sessions(paths)
    notes = [f"{p.file}: {p.message}" for p in problems]
    if not files:
        raise ScoringInputError("no session files to report on",
                                hint="give session files (.sqlite) or a folder of them; "
                                     + "; ".join(notes))
    sessions = []
    for f in files:
        try:
            with SessionFile(f) as sf:
                sessions.append({
                    "path": f, "file": f.name, "participant": sf.participant,
                    "study": sf.study, "robot": sf.meta.get("robot_name"),
                    "state": sf.state, "scored": len(sf.scores()) > 0,
                    "duration_s": sf.duration(),
                })
        except SessionFileError as exc:
            notes.append(f"{f.name}: left out, not a readable session file "
                         f"({exc.problems[0].message})")
    return sessions, notes


def _majority(sessions: list[dict], notes: list[str]) -> list[dict]:
    groups = Counter((s["robot"], s["study"]) for s in sessions)
    if len(groups) <= 1:
        return sessions
    (robot, study), n = groups.most_common(1)[0]
    keep = [s for s in sessions if (s["robot"], s["study"]) == (robot, study)]
    for s in sessions:
        if (s["robot"], s["study"]) != (robot, study):
            notes.append(f"{s['file']}: left out, robot {s['robot']!r} / study {s['study']!r} "
                         f"differs from the {n} sessions of robot {robot!r} / study {study!r} "
                         "(grades from different robots or protocols are not comparable); "
                         "report it on its own")
    return keep


def score_with_details(paths: list[Path], *, workers: int | None = None,
                       progress: Callable[[int, int], None] | None = None):
    """Score sessions as one study on a process pool, keeping the plot details.

    Parameters
    ----------
    paths : list of Path
    workers : int, optional
        Worker processes (default: the available cores; 1 = in this process).
    progress : callable, optional
        ``progress(done, total)`` over both passes of :func:`score_study`
        (embedding choice, then scoring), ``total = 2 * len(paths)``.

    Returns
    -------
    (StudyScores, dict of int to dict)
        The study's scores, and the details of each record keyed by its
        index in ``study.records``.
    """
    from echoreo.scoring.session_scores import score_study

    n = min(workers or default_workers(), max(len(paths), 1))
    done = [0]
    pool = ProcessPoolExecutor(max_workers=n) if n > 1 else None

    def mapper(fn, items):
        for value in (pool.map(fn, list(items)) if pool is not None else map(fn, items)):
            done[0] += 1
            if progress is not None:
                progress(done[0], 2 * len(paths))
            yield value

    try:
        study = score_study(paths, details=True, map_fn=mapper)
    finally:
        if pool is not None:
            pool.shutdown()
    details: dict[int, dict] = {}
    offset = 0
    for session in study.sessions:
        for j, d in enumerate(session.details or []):
            details[offset + j] = d
        offset += len(session.records)
    return study, details


def study_report(paths: Iterable[str | Path], out: str | Path, *,
                 figures_dir: str | Path | None = None, figure_format: str = "png",
                 workers: int | None = None, title: str | None = None,
                 progress: Callable[[int, int], None] | None = None) -> StudyReport:
    """Score a set of sessions as one study and write its report.

    Parameters
    ----------
    paths : iterable of path
        Session files or folders of them.
    out : path
        The HTML file to write.
    figures_dir : path, optional
        Also write each figure as a file there.
    figure_format : {"png", "svg"}
    workers : int, optional
        Worker processes for scoring (default: the available cores).
    title : str, optional
        Report title (default: the study name).
    progress : callable, optional
        ``progress(done, total)`` over the scoring steps.

    Returns
    -------
    StudyReport
    """
    check_writable(out)  # before the scoring, not after it
    sessions, notes = gather_sessions(paths)
    sessions = _majority(sessions, notes)
    if not sessions:
        raise ScoringInputError("none of the given files is a readable session file",
                                hint="; ".join(notes))
    for s in sessions:
        if s["state"] != "complete":
            notes.append(f"{s['file']}: session {s['state']} after {s['duration_s']:.1f} s; "
                         "the repetitions it recorded are scored, the rest are missing")
        if not s["scored"]:
            notes.append(f"{s['file']}: had no scores yet; scored now for this report")
    paths_used = [s["path"] for s in sessions]
    study, details = score_with_details(paths_used, workers=workers, progress=progress)
    notes.extend(f"{p.location()}: {p.message}" for p in study.problems)
    info = [{k: v for k, v in s.items() if k != "path"} for s in sessions]
    name = title or next((s["study"] for s in sessions if s["study"]), "echoreo study")
    data = ReportData(study.records, details, sessions=info, notes=notes, title=name)
    fig_dir = Path(figures_dir) if figures_dir is not None else None
    path = write_report(data, out, figures_dir=fig_dir, figure_format=figure_format,
                        rng=np.random.default_rng(0))
    figures = sorted(fig_dir.glob(f"*.{figure_format}")) if fig_dir is not None else []
    return StudyReport(path, paths_used, notes, figures)
