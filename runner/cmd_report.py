"""``echoreo report SESSION... | FOLDER --out report.html``: the cohort report."""

from __future__ import annotations

import argparse

from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("sessions", nargs="+", metavar="SESSION",
                        help="session files (.sqlite) or folders of them")
    parser.add_argument("--out", default="report.html", metavar="FILE",
                        help="HTML file to write (default report.html)")
    parser.add_argument("--figures", metavar="FOLDER", default=None,
                        help="also write every figure as a file into FOLDER")
    parser.add_argument("--figure-format", choices=("png", "svg"), default="png")
    parser.add_argument("--workers", type=int, default=None,
                        help="worker processes for scoring (default: available cores)")
    parser.add_argument("--title", default=None, help="report title (default: the study name)")


def run(args: argparse.Namespace, console: Console) -> int:
    from echoreo.scoring.studies import study_report

    with Progress(TextColumn("scoring"), BarColumn(), MofNCompleteColumn(),
                  console=console, transient=True) as bar:
        task = bar.add_task("score", total=None)
        result = study_report(args.sessions, args.out, figures_dir=args.figures,
                              figure_format=args.figure_format, workers=args.workers,
                              title=args.title,
                              progress=lambda d, t: bar.update(task, completed=d, total=t))
    console.print(f"report of {len(result.used)} session(s): [bold]{result.report}[/]")
    if result.figures:
        console.print(f"{len(result.figures)} figure files in {args.figures}")
    left_out = [n for n in result.notes if "left out" in n]
    for note in left_out:
        console.print(f"  left out: {note}")
    if len(result.notes) > len(left_out):
        console.print(f"  {len(result.notes) - len(left_out)} further note(s) are listed in "
                      "the report's 'Left out' section")
    return 0
