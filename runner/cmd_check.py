"""``echoreo check FILE...``: validate robots, choreographies and session plans.

Each file's kind is told from its top-level keys (or its ``format`` field).
Every problem of every file is printed with ``file:line:column`` and a fix;
the exit status is 2 when any file fails, 0 otherwise. For each valid
choreography a table shows, per step, the duration and the peak joint speed and
acceleration as a percentage of the robot's limits, on the trajectory sampled
at the command rate.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from echoreo.errors import InputError, Problem
from echoreo.yamlload import LDict, load_yaml

__all__ = ["add_arguments", "detect_kind", "run"]

_CHOREOGRAPHY_KEYS = {"sequence", "moves", "poses"}
_PLAN_KEYS = {"choreographies", "participant", "consent_recorded", "study", "followers",
              "streams", "leader"}
_ROBOT_KEYS = {"joints", "sites", "base"}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``echoreo check``."""
    parser.add_argument("files", nargs="+", metavar="FILE",
                        help="robot descriptions, choreographies or session plans (YAML)")
    parser.add_argument("--rate", type=float, default=50.0, metavar="HZ",
                        help="command rate at which choreographies are checked (default 50)")


def detect_kind(path: str | Path) -> str:
    """Tell a robot description, a choreography and a session plan apart.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    {"robot", "choreography", "plan"}

    Raises
    ------
    InputError
        The file cannot be read, is not YAML, or fits none of the three kinds.
    """
    data = load_yaml(path, what="file")
    if not isinstance(data, LDict):
        raise InputError(Problem(
            "expected a mapping of fields (a robot description, choreography or session plan)",
            str(path), 1, 1, "see choreographies/FORMAT.md for the three formats"))
    tag = data.get("format")
    if isinstance(tag, str):
        if tag.startswith("echoreo-robot/"):
            return "robot"
        if tag.startswith("echoreo-choreography/"):
            return "choreography"
        if tag.startswith("echoreo-plan/"):
            return "plan"
    keys = set(data)
    if keys & _CHOREOGRAPHY_KEYS:
        return "choreography"
    if keys & _PLAN_KEYS:
        return "plan"
    if keys & _ROBOT_KEYS:
        return "robot"
    raise InputError(Problem(
        "cannot tell what kind of file this is: it has none of the keys of a robot "
        "description (joints:), a choreography (poses:, moves:, sequence:) or a session "
        "plan (study:, choreographies:)", str(path), data.loc.line, data.loc.column,
        "see choreographies/FORMAT.md for the three formats"))


def _pct(value: float) -> str:
    colour = "green" if value < 80 else ("yellow" if value <= 100 else "red")
    return f"[{colour}]{value:.1f} %[/]"


def _check_choreography(path: str, rate_hz: float, console: Console) -> None:
    from echoreo.runner.choreography import load_choreography
    from echoreo.runner.ramps import ramp_duration

    chor = load_choreography(path)
    usage = chor.usage(rate_hz)
    robot = chor.robot
    ramp_s = ramp_duration(robot, robot.rest, chor.start_posture)
    ramp_text = f"ramp from the rest pose {ramp_s:.1f} s" if ramp_s > 0 else "starts at rest"
    table = Table(
        caption=("speed, accel.: peak joint speed and acceleration in % of that joint's limit, "
                 "on the sampled commands; ×n repetitions, @f effective tempo"),
        caption_justify="left",
        title=(f"[bold]{escape(chor.name)}[/] on {escape(robot.name)}: "
               f"{chor.duration:.1f} s, {len(chor.steps)} steps, "
               f"{chor.n_repetitions} repetitions (checked at {rate_hz:g} Hz; {ramp_text})"),
        title_justify="left")
    # numbers never wrap; names wrap when the terminal is narrow
    for column, justify, width in (("step", "right", 4), ("what", "left", None),
                                   ("duration", "right", 9), ("speed", "right", 7),
                                   ("joint", "left", None), ("accel.", "right", 7),
                                   ("joint", "left", None)):
        table.add_column(column, justify=justify, min_width=width,
                         no_wrap=width is not None, overflow="fold")
    for kind in ("velocity", "acceleration"):  # name a joint only for a visible share
        usage.loc[usage[f"{kind}_pct"] < 0.05, f"{kind}_joint"] = ""
    for _, row in usage.iterrows():
        if row["kind"] == "move":
            what = f"{row['name']} ×{row['repeat']}"
            if abs(row["tempo"] - 1.0) > 1e-12:
                what += f" @{row['tempo']:.3g}"
        elif row["kind"] == "hold":
            what = f"hold {row['name']}"
        else:
            what = "rest"
        table.add_row(str(row["step"]), escape(what), f"{row['duration']:.2f} s",
                      _pct(row["velocity_pct"]), row["velocity_joint"],
                      _pct(row["acceleration_pct"]), row["acceleration_joint"])
    iv = int(usage["velocity_pct"].to_numpy().argmax())
    ia = int(usage["acceleration_pct"].to_numpy().argmax())
    table.add_section()
    table.add_row("", f"[bold]all[/] ({chor.n_repetitions} repetitions)",
                  f"{chor.duration:.2f} s",
                  _pct(usage["velocity_pct"].iloc[iv]), usage["velocity_joint"].iloc[iv],
                  _pct(usage["acceleration_pct"].iloc[ia]), usage["acceleration_joint"].iloc[ia])
    console.print(f"[green]ok[/] {escape(path)}: choreography")
    console.print(table)


def _check_robot(path: str, console: Console) -> None:
    from echoreo.sim import load_robot

    robot = load_robot(path)
    console.print(f"[green]ok[/] {escape(path)}: robot {escape(robot.name)!s} with "
                  f"{len(robot.joint_names)} joints and {len(robot.site_names)} sites "
                  f"({escape(', '.join(robot.site_names))})")


def _check_plan(path: str, console: Console) -> bool:
    if importlib.util.find_spec("echoreo.runner.plan") is None:
        console.print(f"[yellow]not checked[/] {escape(path)}: this looks like a session plan, "
                      "but this build of echoreo cannot check session plans yet "
                      "(echoreo.runner.plan is missing)")
        return False
    plan_module = importlib.import_module("echoreo.runner.plan")
    plan = plan_module.check_plan(path)
    items = getattr(plan, "items", ())
    console.print(f"[green]ok[/] {escape(path)}: session plan"
                  + (f" with {len(items)} choreographies" if items else ""))
    return True


def run(args: argparse.Namespace, console: Console) -> int:
    """Check every file; print problems and tables; 2 if any file fails, else 0."""
    rate = float(args.rate)
    if not rate > 0 or rate > 10_000:
        raise InputError(f"--rate must be in (0, 10000] Hz, not {args.rate:g}",
                         hint="50 Hz is usual for servo-driven robots")
    failed = 0
    for path in args.files:
        try:
            kind = detect_kind(path)
            if kind == "choreography":
                _check_choreography(path, rate, console)
            elif kind == "robot":
                _check_robot(path, console)
            elif not _check_plan(path, console):
                failed += 1
        except InputError as exc:
            failed += 1
            n = len(exc.problems)
            console.print(f"[bold red]failed[/] {escape(path)}: "
                          f"{n} problem{'s' if n != 1 else ''}")
            for problem in exc.problems:
                console.print(escape(str(problem)), soft_wrap=True, emoji=False)
    if len(args.files) > 1:
        console.print(f"{len(args.files) - failed} of {len(args.files)} files passed")
    return 2 if failed else 0
