"""``echoreo export SESSION... --format bids|csv --out FOLDER``."""

from __future__ import annotations

import argparse

from rich.console import Console

from echoreo.runner.export import export_bids, export_csv


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("sessions", nargs="+", metavar="SESSION",
                        help="session files (.sqlite) or folders of them")
    parser.add_argument("--format", choices=("bids", "csv"), default="csv",
                        help="csv: tables for any statistics package; bids: Motion-BIDS dataset")
    parser.add_argument("--out", required=True, metavar="FOLDER", help="output folder")
    parser.add_argument("--task", default="imitation", help="BIDS task label (default imitation)")


def run(args: argparse.Namespace, console: Console) -> int:
    if args.format == "csv":
        folders = export_csv(args.sessions, args.out)
        console.print(f"wrote {len(folders)} session folder(s) of CSV tables under {args.out}")
        return 0
    result = export_bids(args.sessions, args.out, task=args.task)
    console.print(f"wrote a Motion-BIDS dataset of {len(result['sessions'])} session(s) "
                  f"to {result['root']}")
    for note in result["notes"]:
        console.print(f"  note: {note}")
    return 0
