"""``echoreo demo [--out FOLDER] [--participants N] [--seed S]``: the whole job, simulated."""

from __future__ import annotations

import argparse

from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from echoreo.scoring.report import SAFETY_TEXT


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--out", default="echoreo-demo", metavar="FOLDER",
                        help="output folder (default ./echoreo-demo)")
    parser.add_argument("--participants", type=int, default=12, metavar="N",
                        help="number of virtual participants (default 12)")
    parser.add_argument("--seed", type=int, default=2026, help="seed of the study (default 2026)")
    parser.add_argument("--workers", type=int, default=None,
                        help="worker processes (default: available cores)")


def run(args: argparse.Namespace, console: Console) -> int:
    from echoreo.errors import InputError
    from echoreo.runner.demo import run_demo

    if args.participants < 1 or args.participants > 500:
        raise InputError(f"--participants must be between 1 and 500; got {args.participants}")
    console.print("[bold]echoreo demo[/]: a simulated imitation study on the built-in robot "
                  f"torso-e1 with {args.participants} virtual participants")
    columns = (TextColumn("{task.description:<10}"), BarColumn(), MofNCompleteColumn(),
               TimeElapsedColumn())
    with Progress(*columns, console=console, transient=False) as bar:
        tasks = {"simulate": bar.add_task("simulate", total=args.participants),
                 "score": bar.add_task("score", total=2 * args.participants),
                 "report": bar.add_task("report", total=1)}

        def progress(stage: str, done: int, total: int) -> None:
            bar.update(tasks[stage], completed=done, total=total)

        result = run_demo(args.out, participants=args.participants, seed=args.seed,
                          workers=args.workers, progress=progress)
    table = Table(title="Participants ranked by mean grade (0-100) over repetitions and streams")
    for col in ("rank", "participant", "virtual profile", "mean grade", "95% CI",
                "most frequent flags"):
        table.add_column(col, justify="right" if col in ("rank", "mean grade") else "left")
    for r in result.ranking.itertuples():
        table.add_row(str(r.rank), r.participant, r.profile, f"{r.mean_grade:.1f}",
                      f"{r.ci_low:.1f}-{r.ci_high:.1f}", r.flags or "-")
    console.print(table)
    t = result.timings
    console.print(f"stages: simulate {t['simulate']:.1f} s, score {t['score']:.1f} s, "
                  f"report {t['report']:.1f} s")
    console.print(f"sessions: {result.out / 'sessions'}  ({len(result.sessions)} files)")
    console.print(f"scores:   {result.out / 'scores.csv'}")
    console.print(f"report:   [bold]{result.report}[/]")
    console.print(f"[dim]{SAFETY_TEXT}[/]")
    return 0
