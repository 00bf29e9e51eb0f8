"""``echoreo sessions FOLDER``: list the session files in a folder.

One row per ``*.sqlite`` file: study, participant, the choreographies run,
duration on the session clock, state, and per-stream health (samples,
effective rate against the nominal rate, gaps). Opening a file that a crashed
recorder left ``running`` marks it ``interrupted`` (see
:mod:`echoreo.sessionfile`); files that are not session files are listed with
the reason instead of stopping the listing.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import yaml
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from echoreo.errors import InputError, Problem, SessionFileError
from echoreo.sessionfile import SessionFile

__all__ = ["add_arguments", "health_lines", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``echoreo sessions``."""
    parser.add_argument("folder", metavar="FOLDER", help="folder holding session files")
    parser.add_argument("-r", "--recursive", action="store_true",
                        help="look in sub-folders too")
    parser.add_argument("--gap-factor", type=float, default=3.0, metavar="K",
                        help="count a silence longer than K nominal periods as a gap "
                             "(default 3)")


def _fmt_duration(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "-"
    m, s = divmod(seconds, 60.0)
    h, m = divmod(int(m), 60)
    return f"{h}:{m:02d}:{s:04.1f}" if h else f"{m}:{s:04.1f}"


def health_lines(sf: SessionFile, gap_factor: float = 3.0) -> list[str]:
    """One line of health per stream: ``name  n samples  eff/nominal Hz  gaps``.

    Parameters
    ----------
    sf : SessionFile
        An open session file.
    gap_factor : float
        Gap threshold in nominal periods (see :meth:`SessionFile.stream_health`).

    Returns
    -------
    list of str
        Plain text, one entry per stream in the order they were added.
    """
    lines = []
    for h in sf.stream_health(gap_factor).itertuples(index=False):
        eff = f"{h.effective_hz:.1f}" if math.isfinite(h.effective_hz) else "-"
        nom = f"{h.rate_hz:g}" if math.isfinite(h.rate_hz) else "?"
        gaps = h.gaps
        gap_txt = "no gaps" if gaps == 0 else (
            f"{gaps} gap{'s' if gaps != 1 else ''} (longest {h.longest_gap_s:.2f} s)")
        lines.append(f"{h.name}: {h.samples} samples, {eff}/{nom} Hz, {gap_txt}")
    return lines


def _plan_text(meta: dict) -> str:
    names = []
    chors = meta.get("choreographies")
    if isinstance(chors, dict):
        names = list(chors)
    plan_name = None
    if isinstance(meta.get("plan_path"), str) and meta["plan_path"]:
        plan_name = Path(meta["plan_path"]).stem
    plan = meta.get("plan")
    if isinstance(plan, str) and plan.strip():
        try:
            doc = yaml.safe_load(plan)
        except yaml.YAMLError:
            doc = None
        if isinstance(doc, dict) and plan_name is None:
            plan_name = doc.get("name") or doc.get("plan")
    if meta.get("imported_from"):
        plan_name = plan_name or "import"
    text = ", ".join(str(n) for n in names) or "-"
    return f"{plan_name}: {text}" if plan_name else text


def run(args: argparse.Namespace, console: Console) -> int:
    """List the sessions of ``args.folder``; exit status 0, or 2 for a missing folder."""
    folder = Path(args.folder)
    if not folder.is_dir():
        raise InputError(Problem("no such folder" if not folder.exists() else "not a folder",
                                 str(folder), hint="give the folder that holds the .sqlite "
                                                   "session files (the session's --out)"))
    pattern = "**/*.sqlite" if args.recursive else "*.sqlite"
    files = sorted(p for p in folder.glob(pattern) if p.is_file())
    if not files:
        console.print(f"no session files (*.sqlite) in {escape(str(folder))}")
        return 0
    table = Table(title=f"sessions in {escape(str(folder))}", show_lines=True)
    for col in ("file", "study", "participant", "plan / choreographies", "duration", "state",
                "stream health"):
        table.add_column(col, overflow="fold")
    counts: dict[str, int] = {}
    for path in files:
        name = escape(str(path.relative_to(folder)))
        try:
            with SessionFile(path) as sf:
                state = sf.state
                style = {"complete": "green", "interrupted": "yellow",
                         "running": "cyan"}.get(state, "red")
                note = " (marked now)" if sf.marked_interrupted else ""
                table.add_row(name, escape(sf.study or "-"), escape(sf.participant or "-"),
                              escape(_plan_text(sf.meta)), _fmt_duration(sf.duration()),
                              f"[{style}]{state}{note}[/]",
                              escape("\n".join(health_lines(sf, args.gap_factor)) or "-"))
        except SessionFileError as exc:
            state = "unreadable"
            table.add_row(name, "-", "-", "-", "-", "[red]unreadable[/]",
                          escape(exc.problems[0].message))
        counts[state] = counts.get(state, 0) + 1
    console.print(table)
    console.print(", ".join(f"{n} {s}" for s, n in sorted(counts.items())))
    return 0
