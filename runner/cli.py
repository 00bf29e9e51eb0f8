"""The ``echoreo`` command line.

Each subcommand lives in its own module ``echoreo.runner.cmd_<name>`` that
defines two functions::

    def add_arguments(parser: argparse.ArgumentParser) -> None: ...
    def run(args: argparse.Namespace, console: rich.console.Console) -> int: ...

Modules are imported only when their command runs, so a slow import (plotting,
ZeroMQ) never delays another command. Exit status: 0 success, 2 for an error
the user can fix (an :class:`~echoreo.errors.InputError`, printed without a
traceback), 1 for a fault at run time, 130 after Ctrl-C.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

from rich.console import Console
from rich.markup import escape

from echoreo import __version__
from echoreo.errors import EchoreoError, InputError

__all__ = ["COMMANDS", "main"]

#: name -> (module under echoreo.runner, one-line help)
COMMANDS: dict[str, tuple[str, str]] = {
    "demo": ("cmd_demo", "simulate, score and report the built-in demo study"),
    "check": ("cmd_check", "validate robot descriptions, choreographies and session plans"),
    "preview": ("cmd_preview", "render a choreography on the simulated robot (GIF + PNG)"),
    "session": ("cmd_session", "run a timed session from a session plan"),
    "sessions": ("cmd_sessions", "list the sessions in a folder"),
    "score": ("cmd_score", "score session files per repetition"),
    "report": ("cmd_report", "write the cohort report (self-contained HTML)"),
    "export": ("cmd_export", "export sessions as CSV or Motion-BIDS"),
    "import": ("cmd_import", "record sensor data from CSV/TSV into a session file"),
    "bridge": ("cmd_bridge", "run the reference robot bridge (simulated robot over ZeroMQ)"),
    "publish": ("cmd_publish", "run the reference sensor publisher (virtual participant)"),
    "keys": ("cmd_keys", "generate CURVE keys for non-loopback ZeroMQ links"),
}


def _load(name: str):
    module_name, _ = COMMANDS[name]
    return importlib.import_module(f"echoreo.runner.{module_name}")


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The argument parser; subcommand arguments are added for ``only`` alone."""
    parser = argparse.ArgumentParser(
        prog="echoreo",
        description="Imitation studies with a robot demonstrator: script, run, record, score.",
    )
    parser.add_argument("--version", action="version", version=f"echoreo {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (_, help_text) in COMMANDS.items():
        p = sub.add_parser(name, help=help_text, description=help_text)
        if name == only:
            _load(name).add_arguments(p)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``echoreo`` console script."""
    argv = list(sys.argv[1:] if argv is None else argv)
    console = Console(stderr=False, highlight=False)
    err = Console(stderr=True, highlight=False)
    command = next((a for a in argv if not a.startswith("-")), None)
    only = command if command in COMMANDS else None
    try:
        parser = build_parser(only)
    except ModuleNotFoundError as exc:
        err.print(f"[bold red]error:[/] the command {command!r} is not available in this "
                  f"build ({exc.name} is missing)", markup=True)
        return 1
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    try:
        return int(_load(args.command).run(args, console) or 0)
    except InputError as exc:
        err.print(f"[bold red]error:[/] {escape(str(exc))}", soft_wrap=True, emoji=False)
        return exc.exit_code
    except EchoreoError as exc:
        err.print(f"[bold red]fault:[/] {escape(str(exc))}", soft_wrap=True, emoji=False)
        return exc.exit_code
    except KeyboardInterrupt:
        err.print("interrupted")
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
