"""``echoreo import``: record sensor data from CSV/TSV into a session file.

Offline data (captured by another system) becomes a session file that scores
exactly like a recorded one: the follower streams come from the table through
an import mapping (:mod:`echoreo.adapters.file_import`, format in
``choreographies/FORMAT.md`` section 4), and the leader side comes from a
choreography's compiled timeline: ``leader_command`` (the commanded joints at
the command rate), the spans (the ground truth of repetitions) and the cues.
Session time zero is the start of the timeline; the mapping's time offset
puts the table's clock on it.

Examples
--------
::

    echoreo import wrist.csv --choreography warmup-right-arm.yaml \\
        --mapping wrist-mapping.yaml --participant P07 --out imported/

    echoreo import head.tsv --choreography warmup-right-arm.yaml \\
        --time t:s --time-offset -2.5 \\
        --stream "head_pose:head_pose@30:yaw=yaw[deg],pitch=pitch[deg],roll=roll[deg]" \\
        --pair head_pose=head --participant P07 --out P07-head.sqlite
"""

from __future__ import annotations

import argparse
import hashlib
import math
from dataclasses import dataclass, replace
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
from rich.console import Console
from rich.markup import escape

from echoreo.adapters.base import StreamInfo
from echoreo.adapters.file_import import FileSource, ImportMapping, stream_pairs
from echoreo.errors import InputError, Problem

__all__ = ["ImportResult", "add_arguments", "record_import", "run"]

_SITES = ("left_wrist", "right_wrist", "head", "chest")


@dataclass(frozen=True)
class ImportResult:
    """What :func:`record_import` wrote.

    Parameters
    ----------
    path : Path
        The session file.
    samples : dict of str to int
        Samples per imported stream.
    outside : dict of str to int
        Samples per stream outside the timeline (before 0 or after its end);
        recorded too, but a large number means a wrong offset.
    duration_s : float
        The timeline's duration, s.
    """

    path: Path
    samples: dict[str, int]
    outside: dict[str, int]
    duration_s: float


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def record_import(out: str | Path, choreography: Any, source: FileSource, *,
                  participant: str, study: str = "import", mode: str = "mirror",
                  rate_hz: float = 50.0, utc_start: str | None = None,
                  overwrite: bool = False) -> ImportResult:
    """Record imported follower data against a choreography's timeline.

    Parameters
    ----------
    out : str or Path
        The session file to write.
    choreography : Choreography
        From :func:`echoreo.runner.load_choreography`; compiled at ``rate_hz``.
    source : FileSource
        The imported streams (not yet connected).
    participant : str
        Pseudonymous participant code (``"P07"``), checked like a plan's.
    study : str
        Study name stored in meta.
    mode : {"mirror", "anatomical"}
        Imitation mode; sets the default robot site each stream's site pairs with.
    rate_hz : float
        Command rate of the timeline (``leader_command``), Hz.
    utc_start : str, optional
        ISO 8601 UTC time of session zero, when known (stored as given; null
        otherwise: an import does not know when the original recording began).
    overwrite : bool
        Replace an existing session file.

    Returns
    -------
    ImportResult

    Raises
    ------
    InputError
        Any problem of the data, the mapping or the arguments, all at once and
        located; nothing is written then.
    """
    from echoreo.runner.plan import check_participant_code, leader_site_for
    from echoreo.runner.recorder import Recorder

    problems = list(check_participant_code(participant))
    if mode not in ("mirror", "anatomical"):
        problems.append(Problem(f"mode {mode!r} is not 'mirror' or 'anatomical'"))
    if utc_start is not None:
        try:
            datetime.fromisoformat(utc_start.replace("Z", "+00:00"))
        except ValueError:
            problems.append(Problem(f"--utc-start {utc_start!r} is not an ISO 8601 time",
                                    hint="for example 2026-03-04T09:30:00Z"))
    if problems:
        raise InputError(problems)
    timeline = choreography.compile(rate_hz)
    infos = source.connect(None)  # reads and checks every row before anything is written
    batches = {b.stream: b for b in source.poll()}
    maps = source.clock_maps()
    robot = choreography.robot
    pairs = []
    for p in stream_pairs(source.mapping):
        leader = p["leader_site"] or leader_site_for(p["site"], mode)
        pairs.append({**p, "leader_site": leader})
    for info in infos:
        if info.name == "leader_command" or info.name == "leader_state":
            raise InputError(f"stream name {info.name!r} is reserved for the leader",
                             hint="rename the imported stream")
    files = sorted({str(s.file or source.data_file) for s in source.mapping.streams})
    meta = {
        "study": study, "participant": participant, "mode": mode, "clock": "imported",
        "utc_start": utc_start, "plan": None, "robot": robot.text, "robot_name": robot.name,
        "choreographies": {choreography.name: choreography.text}, "pairs": pairs,
        "command_rate_hz": float(timeline.rate_hz),
        "imported_from": [{"file": Path(f).name, "sha256": _sha256(Path(f))} for f in files],
        "import_mapping": source.mapping.text,
    }
    rec = Recorder(out, meta, overwrite=overwrite)
    ok = False
    try:
        names = tuple(timeline.joint_names)
        rec.add_stream(StreamInfo("leader_command", "joints", names, ("rad",) * len(names),
                                  float(timeline.rate_hz), f"timeline {timeline.name}"))
        t_ns = np.rint(np.asarray(timeline.t) * 1e9).astype(np.int64)
        rec.write("leader_command", t_ns, t_ns, np.arange(t_ns.size), np.asarray(timeline.q))
        rec.set_spans(timeline.spans, choreography=timeline.name)
        for row in timeline.cues.itertuples(index=False):
            rec.event(round(row.t * 1e9), "cue", None, str(row.text))
        for row in timeline.spans.itertuples(index=False):
            if row.kind == "move":
                detail = {"choreography": timeline.name, "step": int(row.step),
                          "move": row.move, "repetition": int(row.repetition)}
                rec.event(round(row.t_start * 1e9), "rep_start", None, detail)
                rec.event(round(row.t_end * 1e9), "rep_end", None, detail)
        end_ns = round(timeline.duration * 1e9)
        samples, outside = {}, {}
        for info in infos:
            rec.add_stream(info, maps.get(info.name))
            b = batches[info.name]
            rec.write_batch(b)
            samples[info.name] = len(b)
            outside[info.name] = int(np.count_nonzero((b.t_ns < 0) | (b.t_ns > end_ns)))
        ok = True
    finally:
        rec.close("complete" if ok else "interrupted")
    return ImportResult(Path(out), samples, outside, float(timeline.duration))


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``echoreo import``."""
    parser.add_argument("data", nargs="?", metavar="DATA",
                        help="CSV or TSV file (optional when the mapping names each "
                             "stream's file)")
    parser.add_argument("--choreography", "-c", required=True, metavar="FILE",
                        help="choreography whose timeline the data was recorded against")
    parser.add_argument("--mapping", "-m", metavar="FILE",
                        help="import mapping YAML (FORMAT.md section 4)")
    parser.add_argument("--time", metavar="COLUMN:UNIT",
                        help="time column and unit (s, ms, us, ns) without --mapping")
    parser.add_argument("--time-offset", type=float, default=0.0, metavar="S",
                        help="seconds added to the time column to give session time "
                             "(without --mapping)")
    parser.add_argument("--stream", action="append", default=[], metavar="SPEC",
                        help="NAME:KIND[@RATE]:COL=CHANNEL[UNIT],... (repeatable; "
                             "without --mapping)")
    parser.add_argument("--pair", action="append", default=[], metavar="STREAM=SITE[:LEADER]",
                        help="body site of a stream and, optionally, the robot site it is "
                             "compared with (default by --mode)")
    parser.add_argument("--delimiter", metavar="CHAR",
                        help="field separator (default: tab for .tsv, else detected)")
    parser.add_argument("--participant", "-p", required=True, metavar="CODE",
                        help="pseudonymous participant code, e.g. P07")
    parser.add_argument("--study", default="import", help="study name (default: import)")
    parser.add_argument("--mode", choices=("mirror", "anatomical"), default="mirror",
                        help="imitation mode (default: mirror)")
    parser.add_argument("--rate", type=float, default=50.0, metavar="HZ",
                        help="command rate of the timeline (default 50 Hz)")
    parser.add_argument("--utc-start", metavar="ISO",
                        help="UTC time of session zero, when known")
    parser.add_argument("--out", "-o", required=True, metavar="PATH",
                        help="session file (.sqlite) or folder for it")
    parser.add_argument("--force", action="store_true", help="replace an existing file")


def _apply_pairs(mapping: ImportMapping, pairs: list[str]) -> ImportMapping:
    problems = []
    by_name = {s.name: s for s in mapping.streams}
    for spec in pairs:
        name, sep, sites = spec.partition("=")
        site, _, leader = sites.partition(":")
        if not sep or name not in by_name or site not in _SITES \
                or (leader and leader not in _SITES):
            problems.append(Problem(
                f"--pair {spec!r}: expected STREAM=SITE[:LEADER_SITE] with a stream of the "
                f"mapping ({', '.join(by_name)}) and sites among {', '.join(_SITES)}"))
            continue
        by_name[name] = replace(by_name[name], site=site, leader_site=leader or None)
    if problems:
        raise InputError(problems)
    return replace(mapping, streams=tuple(by_name[s.name] for s in mapping.streams))


def run(args: argparse.Namespace, console: Console) -> int:
    """Import, then print what was recorded; exit 0, or 2 on any input problem."""
    from echoreo.runner.choreography import load_choreography

    if args.mapping and (args.time or args.stream):
        raise InputError("give either --mapping or --time/--stream, not both",
                         hint="put everything in the mapping file")
    if args.mapping:
        mapping = ImportMapping.from_yaml(args.mapping)
        if args.delimiter:
            mapping = replace(mapping, delimiter=args.delimiter)
    elif args.time or args.stream:
        if not args.time:
            raise InputError("--stream needs --time COLUMN:UNIT",
                             hint="for example --time timestamp:ms")
        if not math.isfinite(args.rate) or args.rate <= 0:
            raise InputError(f"--rate must be a positive number of Hz, not {args.rate!r}")
        mapping = ImportMapping.from_cli(args.time, args.stream, time_offset_s=args.time_offset,
                                         delimiter=args.delimiter)
    else:
        raise InputError("say which columns form which stream",
                         hint="give --mapping FILE, or --time COLUMN:UNIT and --stream SPEC")
    if args.pair:
        mapping = _apply_pairs(mapping, args.pair)
    if args.data is None and any(s.file is None for s in mapping.streams):
        raise InputError("no data file given",
                         hint="give DATA, or 'file' for every stream in the mapping")
    if args.data is not None and not Path(args.data).is_file():
        raise InputError(Problem("data file not found", args.data,
                                 hint="check the path and the file name"))
    chor = load_choreography(args.choreography)
    out = Path(args.out)
    if out.suffix.lower() != ".sqlite":
        out = out / f"{args.participant}-{chor.name}-import.sqlite"
    result = record_import(out, chor, FileSource(mapping, args.data),
                           participant=args.participant, study=args.study, mode=args.mode,
                           rate_hz=args.rate, utc_start=args.utc_start, overwrite=args.force)
    console.print(f"recorded {escape(str(result.path))}: timeline {escape(chor.name)} "
                  f"({result.duration_s:.1f} s)")
    for name, n in result.samples.items():
        note = ""
        if result.outside[name]:
            note = (f" [yellow]({result.outside[name]} outside the timeline: check the time "
                    "offset)[/]")
        console.print(f"  {escape(name)}: {n} samples{note}")
    return 0
