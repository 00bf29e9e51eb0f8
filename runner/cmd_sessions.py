"""``echoreo sessions FOLDER``: list the session files in a folder.

One row per ``*.sqlite`` file (study, participant, plan and the
choreographies run, duration on the session clock, state, number of streams
and gaps), then a stream-health table with one row per stream: samples,
effective rate (samples − 1 over the first-to-last span) against the nominal
rate, and gaps (silences longer than ``--gap-factor`` nominal periods), and,
for sessions led by a ZeroMQ robot bridge, a bridge-timing table (meta
``bridge_timing``: commands the bridge applied late or slipped). The ``scores``
column gives the stored score records and the day they were written; records
written by an earlier echoreo that lack fields of the current record are shown
as "score again", since ``echoreo score FILE`` replaces them with complete ones.
Opening a file that a crashed recorder left ``running`` marks it ``interrupted`` (see
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
from echoreo.scoring.record_fields import missing_fields
from echoreo.sessionfile import SessionFile

__all__ = ["add_arguments", "run"]


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


def _scores_text(scores) -> tuple[str, list[str]]:
    """The ``scores`` cell of a session and the record fields its stored scores lack.

    ``scores`` is ``SessionFile.scores()``: "-" when empty, else the number of records
    and the UTC day of the latest ``scored_utc``, "score again" when records lack fields.
    """
    if not len(scores):
        return "-", []
    stamps = sorted(str(v) for v in scores["scored_utc"] if v)
    day = f" ({stamps[-1][:10]})" if stamps else ""
    missing = missing_fields(r if isinstance(r, dict) else {} for r in scores["record"])
    if missing:
        return f"[yellow]{len(scores)}{day}, score again[/]", missing
    return f"{len(scores)}{day}", []


def _timing_row(table: Table, name: str, entry: object) -> None:
    """One row of the bridge-timing table from meta ``bridge_timing`` (absent: no row).

    ``late`` and ``slipped`` are counts (``-`` when the bridge did not report them),
    ``late_max_ns`` is shown in ms; an entry that is not a mapping shows as unreadable.
    """
    if entry is None:
        return
    if not isinstance(entry, dict):
        table.add_row(name, "[red]unreadable[/]", "", "", "", "")
        return

    def count(key: str) -> str:
        v = entry.get(key)
        if isinstance(v, int) and not isinstance(v, bool):
            return f"[yellow]{v}[/]" if v and key in ("late", "slipped") else str(v)
        return "-"

    worst = entry.get("late_max_ns")
    worst_ms = (f"{worst * 1e-6:.1f}" if isinstance(worst, int | float)
                and not isinstance(worst, bool) and math.isfinite(worst) and worst > 0 else "-")
    table.add_row(name, count("late"), count("slipped"), count("late_acks"), worst_ms,
                  count("boots"))


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
    table = Table(title=f"sessions in {escape(str(folder))}")
    for col in ("file", "study", "participant", "plan / choreographies", "duration", "state",
                "streams", "scores"):
        table.add_column(col, overflow="fold")
    health = Table(title="stream health")
    for col, justify in (("file", "left"), ("stream", "left"), ("kind", "left"),
                         ("samples", "right"), ("rate Hz (eff / nominal)", "right"),
                         ("gaps", "right"), ("longest gap s", "right")):
        health.add_column(col, justify=justify, overflow="fold")
    timing = Table(title="bridge timing (commands applied more than the bridge's late limit "
                         "after their time)")
    for col in ("file", "late", "slipped", "late ACKs", "max late ms", "bridge boots"):
        timing.add_column(col, justify="left" if col == "file" else "right", overflow="fold")
    counts: dict[str, int] = {}
    stale: dict[str, list[str]] = {}  # file -> record fields its stored scores lack
    for path in files:
        name = escape(str(path.relative_to(folder)))
        try:
            with SessionFile(path) as sf:
                state = sf.state
                style = {"complete": "green", "interrupted": "yellow",
                         "running": "cyan"}.get(state, "red")
                note = " (marked now)" if sf.marked_interrupted else ""
                h = sf.stream_health(args.gap_factor)
                n_gaps = int(h["gaps"].sum()) if len(h) else 0
                scores, missing = _scores_text(sf.scores())
                if missing:
                    stale[str(path)] = missing
                table.add_row(name, escape(sf.study or "-"), escape(sf.participant or "-"),
                              escape(_plan_text(sf.meta)), _fmt_duration(sf.duration()),
                              f"[{style}]{state}{note}[/]",
                              f"{len(h)}, {n_gaps} gap{'s' if n_gaps != 1 else ''}", scores)
                for i, r in enumerate(h.itertuples(index=False)):
                    eff = f"{r.effective_hz:.1f}" if math.isfinite(r.effective_hz) else "-"
                    nom = f"{r.rate_hz:g}" if math.isfinite(r.rate_hz) else "?"
                    longest = f"{r.longest_gap_s:.2f}" if r.gaps else "-"
                    gap_style = "yellow" if r.gaps else "green"
                    health.add_row(name if i == 0 else "", escape(r.name),
                                   escape(str(r.kind or "")), str(r.samples), f"{eff} / {nom}",
                                   f"[{gap_style}]{r.gaps}[/]", longest,
                                   end_section=i == len(h) - 1)
                _timing_row(timing, name, sf.meta.get("bridge_timing"))
        except SessionFileError as exc:
            state = "unreadable"
            table.add_row(name, "-", "-", "-", "-", "[red]unreadable[/]",
                          escape(exc.problems[0].message), "-")
        counts[state] = counts.get(state, 0) + 1
    console.print(table)
    if health.row_count:
        console.print(health)
    if timing.row_count:
        console.print(timing)
    console.print(", ".join(f"{n} {s}" for s, n in sorted(counts.items())))
    if stale:
        fields = sorted({f for m in stale.values() for f in m})
        console.print(f"[yellow]{len(stale)} session file{'s' if len(stale) != 1 else ''} "
                      f"hold{'s' if len(stale) == 1 else ''} scores from an earlier echoreo "
                      f"without {', '.join(escape(f) for f in fields)}[/] (\"score again\" "
                      f"above); score the study's sessions again together, so that they "
                      f"share one embedding: echoreo score {escape(str(folder))}")
    return 0
