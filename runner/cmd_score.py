"""``echoreo score SESSION... [--json] [--csv FILE]``: per-repetition grades.

Every argument is a session file or a folder (each ``*.sqlite`` in it). The
sessions given together are one study: one embedding delay and dimension per
stream kind is chosen across all of them (``scoring/METHODS.md`` 2.6), then
every session is scored, its scores are written into its ``scores`` table,
and a table per session is printed (move, repetition, stream, lag, grade,
band, flags) followed by the problems found. ``--json`` prints instead one
JSON array of score records (METHODS.md 3.5); ``--csv FILE`` also writes the
records as CSV.

Sessions are scored in parallel on the local cores (``--workers``), or on a
Dask distributed scheduler (``--cluster ADDRESS``); results are identical to
the serial run, and each worker opens its own session file, so the command
never holds more than the score records of the study in memory.

Exit status: 0 when every session was scored; 2 when a session could not be
read or scored at all (the others are still scored and written), or no
session file was found.
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from echoreo.sessionfile import find_sessions, to_json, write_scores

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``echoreo score``."""
    parser.add_argument("sessions", nargs="+", metavar="SESSION",
                        help="session files (.sqlite) or folders holding them")
    parser.add_argument("--json", action="store_true",
                        help="print the score records as one JSON array instead of tables")
    parser.add_argument("--csv", metavar="FILE", help="also write the score records as CSV")
    parser.add_argument("--no-write", action="store_true",
                        help="do not store the scores in the session files")
    parser.add_argument("--rate", type=float, default=None, metavar="HZ",
                        help="analysis rate (default 50 Hz)")
    parser.add_argument("--cutoff", type=float, default=None, metavar="HZ",
                        help="low-pass cutoff, -3 dB of the dual-pass filter (default 8 Hz)")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="worker processes (default: the available cores; 1 = serial)")
    parser.add_argument("--cluster", default=None, metavar="ADDRESS",
                        help="score on a Dask distributed scheduler, e.g. tcp://127.0.0.1:8786 "
                             "(needs the dask extra)")


def _score_and_write(path: Path, params: Any, write: bool) -> Any:
    """Score one session and store its scores in it (runs in a worker process)."""
    from echoreo.scoring.session_scores import score_session

    scores = score_session(path, params)
    if write:
        write_scores(path, scores.records)
    return scores


def _fmt(x: Any, spec: str) -> str:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return "-"
    return format(v, spec) if math.isfinite(v) else "-"


def _tables(scores) -> list[Table]:
    """One table per choreography of a session: move, repetition, stream, lag, grade, flags."""
    rec = scores.records
    who = ""
    if len(rec):
        first = rec.iloc[0]
        who = f"  (participant {first['participant']}, study {first['study']})"
    out = []
    for chor, grp in rec.groupby("choreography", sort=False):
        table = Table(title=escape(f"{scores.session}{who}: {chor}"), title_justify="left")
        for col, kw in [("move", {}), ("rep", {"justify": "right"}), ("stream", {}),
                        ("lag s", {"justify": "right"}), ("grade", {"justify": "right"}),
                        ("band", {}), ("flags", {})]:
            table.add_column(col, **kw)
        for r in grp.itertuples(index=False):
            table.add_row(escape(str(r.move)), str(r.repetition), escape(str(r.stream)),
                          _fmt(r.lag_s, ".2f"), _fmt(r.grade, ".0f"), escape(str(r.band)),
                          escape(", ".join(r.flags)))
        out.append(table)
    return out


def _parameters_line(params) -> str:
    parts = [f"rate {params.rate_hz:g} Hz", f"low-pass {params.filter_cutoff_hz:g} Hz "
             f"(order {params.filter_order}, zero-phase)"]
    for c in params.embedding:
        parts.append(f"{c.kind}: dim {c.dim}, delay {c.delay} ({c.method})")
    return "; ".join(parts)


def run(args: argparse.Namespace, console: Console) -> int:
    """Score the sessions; print tables or JSON; write the scores back."""
    import dataclasses

    import pandas as pd

    from echoreo.scoring.params import ScoringParams, combine_choices
    from echoreo.scoring.session_scores import RECORD_FIELDS, session_embedding

    err = Console(stderr=True, highlight=False)
    paths, problems = find_sessions(args.sessions)
    for p in problems:
        err.print(f"[bold red]error:[/] {escape(str(p))}", soft_wrap=True)
    if not paths:
        return 2
    changes = {}
    if args.rate is not None:
        changes["rate_hz"] = args.rate
    if args.cutoff is not None:
        changes["filter_cutoff_hz"] = args.cutoff
    params = dataclasses.replace(ScoringParams(), **changes) if changes else ScoringParams()
    status = 0 if not problems else 2

    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

    from echoreo.scoring.parallel import map_sessions

    def mapped(label, func, items, **kwargs):
        with Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), console=err,
                      transient=True, disable=args.json or len(items) < 2) as bar:
            task = bar.add_task(label, total=len(items))
            return map_sessions(func, items, workers=args.workers, cluster=args.cluster,
                                progress=lambda d, t: bar.update(task, completed=d), **kwargs)

    # 1. the study's embedding, chosen across every readable session
    choices, usable = [], []
    for p, (state, value) in zip(paths, mapped("choosing embedding", session_embedding, paths,
                                                params=params), strict=True):
        if state == "ok":
            choices.append(value)
            usable.append(p)
        else:
            err.print(f"[bold red]error:[/] {escape(value)}", soft_wrap=True)
            status = 2
    study_params = params.with_embedding(combine_choices(choices, params))

    # 2. every session with it; each worker writes its own session's scores
    all_records = []
    results = mapped("scoring", _score_and_write, usable, params=study_params,
                     write=not args.no_write)
    for state, scores in results:
        if state != "ok":
            err.print(f"[bold red]error:[/] {escape(scores)}", soft_wrap=True)
            status = 2
            continue
        all_records.append(scores.records)
        if not args.json:
            for table in _tables(scores):
                console.print(table)
            for prob in scores.problems:
                console.print(f"[yellow]note:[/] {escape(str(prob))}", soft_wrap=True)
            written = "" if args.no_write else "; scores written to the session file"
            console.print(f"{len(scores.records)} records{written}")
    records = (pd.concat(all_records, ignore_index=True) if all_records
               else pd.DataFrame(columns=list(RECORD_FIELDS)))
    if not args.json:
        console.print(f"parameters: {escape(_parameters_line(study_params))}", soft_wrap=True)
    else:
        text = to_json(records.to_dict(orient="records"))
        console.file.write(json.dumps(json.loads(text), indent=1) + "\n")
    if args.csv:
        out = records.copy()
        out["flags"] = out["flags"].apply(lambda f: ";".join(f))
        try:
            out.to_csv(args.csv, index=False)
        except OSError as exc:
            err.print(f"[bold red]error:[/] cannot write {escape(args.csv)}: {escape(str(exc))}")
            return 2
    return status
