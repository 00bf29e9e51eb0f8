"""What the operator sees during a session: a rich live view, or plain log lines.

:class:`LiveView` draws the session's state with :class:`rich.live.Live` when a
terminal is present and reads single keys from it (``p`` pause / resume,
``s`` controlled stop, ``a`` abort; Ctrl-C is a controlled stop).
:class:`PlainLog` is used without a terminal (scripted runs, pipes, CI): no
keys, one plain line per event worth knowing (segment starts, cues,
repetition ends, faults, pauses, the end), each prefixed with session time.
:func:`make_view` picks one.

The runner fills a :class:`SessionStatus` every tick (cheap attribute
updates); the view renders it at a few frames per second from rich's own
refresh thread, so drawing never sits in the command loop.
"""

from __future__ import annotations

import os
import queue
import select
import sys
import threading
from dataclasses import dataclass, field
from typing import Any

from rich.console import Console, Group
from rich.live import Live
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

__all__ = [
    "SAFETY_CAUTION",
    "LiveView",
    "PlainLog",
    "SessionStatus",
    "StreamStatus",
    "make_view",
    "render_status",
]

#: The caution shown in the live view (and printed at the start of plain runs).
SAFETY_CAUTION = (
    "echoreo is a research tool, not a medical device. A robot is moving near a person: "
    "follow the robot maker's manual, the applicable robot-safety standards, local "
    "regulations, the study's ethics approval and, in clinical settings, licensed clinical "
    "practice. Keep the robot's own emergency stop within reach."
)


@dataclass
class StreamStatus:
    """Health of one follower stream as shown to the operator.

    Parameters
    ----------
    name : str
        Stream name.
    pair : str
        What it is compared with ("right_wrist <-> robot left_wrist"), or "".
    samples, dropped, malformed, gaps : int
        Counts so far (dropped = missing sequence numbers; gaps = silences).
    rate_hz : float
        Effective rate over the last seconds, Hz.
    nominal_hz : float
        Announced rate, Hz.
    latency_ms : float
        Receive time minus mapped sample time, recent median, ms.
    offset_ms, offset_unc_ms : float
        Device-to-session clock offset and its uncertainty, ms.
    silent : bool
        No sample for longer than the plan's limit.
    """

    name: str
    pair: str = ""
    samples: int = 0
    dropped: int = 0
    malformed: int = 0
    gaps: int = 0
    rate_hz: float = float("nan")
    nominal_hz: float = float("nan")
    latency_ms: float = float("nan")
    offset_ms: float = float("nan")
    offset_unc_ms: float = float("nan")
    silent: bool = False


@dataclass
class SessionStatus:
    """Everything the live view shows; updated by the runner, read by the view."""

    study: str = ""
    participant: str = ""
    clock: str = ""
    path: str = ""
    elapsed_s: float = 0.0
    remaining_s: float = 0.0
    phase: str = "connecting"
    choreography: str = ""
    item: int = 0
    n_items: int = 0
    step: int = 0
    move: str = ""
    repetition: int = 0
    n_repetitions: int = 0
    rep_done: int = 0
    rep_total: int = 0
    countdown_s: float | None = None
    cue: str = ""
    safety: str = "connecting"
    lateness_ms: float = 0.0
    lateness_max_ms: float = 0.0
    late_ticks: int = 0
    streams: list[StreamStatus] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    grades: list[str] = field(default_factory=list)
    keys: bool = False


def _fmt_time(s: float) -> str:
    s = max(0.0, float(s))
    m, sec = divmod(round(s), 60)
    return f"{m:d}:{sec:02d}"


def _num(x: float, fmt: str = "{:.1f}") -> str:
    return "–" if x != x else fmt.format(x)  # NaN -> dash


def render_status(st: SessionStatus) -> Group:
    """The live view's drawing of a status (a rich renderable)."""
    head = Text.assemble((f"{st.study}", "bold"), "  participant ", (st.participant, "bold"),
                         f"  clock {st.clock}  ", (st.path, "dim"))
    where = Table.grid(padding=(0, 2))
    where.add_column(justify="right", style="dim")
    where.add_column()
    where.add_row("phase", st.phase)
    if st.n_items:
        where.add_row("choreography", f"{st.choreography}  ({st.item}/{st.n_items})")
    if st.move:
        where.add_row("step / move", f"{st.step}  {st.move}")
    if st.n_repetitions:
        where.add_row("repetition", f"{st.repetition}/{st.n_repetitions}   "
                                    f"(session {st.rep_done}/{st.rep_total} done)")
    if st.countdown_s is not None:
        where.add_row("countdown", Text(f"{st.countdown_s:.0f}", style="bold yellow"))
    where.add_row("time", f"{_fmt_time(st.elapsed_s)} elapsed, "
                          f"{_fmt_time(st.remaining_s)} remaining")
    safety_style = {"moving": "green", "holding": "yellow", "stopped": "cyan"}.get(
        st.safety.split()[0], "bold red")
    where.add_row("safety", Text(st.safety, style=safety_style))
    where.add_row("tick lateness", f"last {st.lateness_ms:.2f} ms, max {st.lateness_max_ms:.2f}"
                                   f" ms, {st.late_ticks} late ticks")
    cue = Panel(Text(st.cue or " ", style="bold", justify="center"), title="cue")
    streams = Table(title="streams")
    for col in ("stream", "pairs with", "samples", "rate Hz", "dropped", "malformed", "gaps",
                "latency ms", "clock offset ± unc ms"):
        streams.add_column(col, justify="left" if col in ("stream", "pairs with") else "right",
                           no_wrap=col in ("stream", "rate Hz"))
    for s in st.streams:
        style = "bold red" if s.silent else None
        streams.add_row(s.name + (" (silent)" if s.silent else ""), s.pair, str(s.samples),
                        f"{_num(s.rate_hz)}/{_num(s.nominal_hz, '{:.0f}')}", str(s.dropped),
                        str(s.malformed), str(s.gaps), _num(s.latency_ms),
                        f"{_num(s.offset_ms, '{:.3f}')} ± {_num(s.offset_unc_ms, '{:.3f}')}",
                        style=style)
    parts: list[Any] = [head, where, cue, streams]
    if st.grades:
        parts.append(Panel("\n".join(st.grades[-5:]), title="live grades"))
    if st.warnings:
        parts.append(Panel(Text("\n".join(st.warnings[-5:]), style="bold red"),
                           title="warnings"))
    if st.keys:
        parts.append(Text("keys: p pause/resume (robot holds)   s stop (controlled)   "
                          "a abort   Ctrl-C stop", style="dim"))
    parts.append(Text(SAFETY_CAUTION, style="dim italic"))
    return Group(*parts)


class _KeyReader:
    """Single keys from a terminal, read in cbreak mode by a daemon thread."""

    def __init__(self, stream: Any):
        import termios
        import tty

        self._fd = stream.fileno()
        self._old = termios.tcgetattr(self._fd)
        tty.setcbreak(self._fd)  # keeps ISIG, so Ctrl-C still raises SIGINT
        self._queue: queue.SimpleQueue = queue.SimpleQueue()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="keys", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while not self._stop.is_set():
            try:
                ready, _, _ = select.select([self._fd], [], [], 0.1)
                if ready:
                    ch = os.read(self._fd, 1).decode("utf-8", "ignore")
                    if ch:
                        self._queue.put(ch.lower())
            except (OSError, ValueError):
                return

    def keys(self) -> list[str]:
        out = []
        while True:
            try:
                out.append(self._queue.get_nowait())
            except queue.Empty:
                return out

    def close(self) -> None:
        import termios

        self._stop.set()
        self._thread.join(timeout=1.0)
        termios.tcsetattr(self._fd, termios.TCSADRAIN, self._old)


class LiveView:
    """Rich live view with keys, for a terminal.

    Parameters
    ----------
    console : rich.console.Console
        Where to draw.
    status : SessionStatus
        The status object the runner keeps up to date.
    keys : bool
        Read keys from standard input (it must be a terminal).
    refresh_per_second : float
        Drawing rate (rich's refresh thread), Hz.
    """

    interactive = True

    def __init__(self, console: Console, status: SessionStatus, *, keys: bool = True,
                 refresh_per_second: float = 4.0):
        self.console = console
        self.status = status
        self._want_keys = keys
        self._reader: _KeyReader | None = None
        self._live = Live(console=console, get_renderable=lambda: render_status(self.status),
                          refresh_per_second=refresh_per_second, transient=False)

    def __enter__(self) -> LiveView:
        if self._want_keys:
            try:
                self._reader = _KeyReader(sys.stdin)
                self.status.keys = True
            except (OSError, ValueError, ImportError):
                self._reader = None
        self._live.__enter__()
        return self

    def __exit__(self, *exc: Any) -> None:
        self._live.__exit__(*exc)
        if self._reader is not None:
            self._reader.close()

    def update(self, t_s: float) -> None:
        """Nothing to do: rich redraws the status on its own thread."""

    def log(self, t_s: float, text: str, level: str = "info") -> None:
        """Print a line above the live display (warnings and the end only)."""
        if level in ("warning", "fault", "end"):
            style = {"warning": "yellow", "fault": "bold red", "end": "bold"}[level]
            self._live.console.print(f"[{t_s:8.2f} s] {text}", style=style, markup=False,
                                     highlight=False)

    def keys(self) -> list[str]:
        """Keys pressed since the last call (lower case)."""
        return self._reader.keys() if self._reader is not None else []


class PlainLog:
    """Plain log lines for runs without a terminal (no keys).

    Parameters
    ----------
    console : rich.console.Console
        Where to print (markup and highlighting off).
    status : SessionStatus
        The runner's status (used for periodic progress lines).
    progress_every_s : float
        Session time between progress lines, s.
    """

    interactive = False

    def __init__(self, console: Console, status: SessionStatus, *,
                 progress_every_s: float = 10.0):
        self.console = console
        self.status = status
        self.progress_every_s = float(progress_every_s)
        self._next = self.progress_every_s

    def __enter__(self) -> PlainLog:
        self.console.print("caution: " + SAFETY_CAUTION, markup=False, highlight=False,
                           soft_wrap=True)
        return self

    def __exit__(self, *exc: Any) -> None:
        return None

    def update(self, t_s: float) -> None:
        """Print a progress line every ``progress_every_s`` of session time."""
        if t_s >= self._next:
            st = self.status
            self._next = t_s + self.progress_every_s
            streams = ", ".join(f"{s.name} {s.samples}" + (" SILENT" if s.silent else "")
                                for s in st.streams)
            self.log(t_s, f"progress: {st.phase} {st.choreography} step {st.step} "
                          f"rep {st.repetition}/{st.n_repetitions}; "
                          f"{_fmt_time(st.remaining_s)} remaining; samples: {streams}")

    def log(self, t_s: float, text: str, level: str = "info") -> None:
        """Print one line ``[   12.34 s] level: text``."""
        tag = "" if level == "info" else f"{level}: "
        self.console.print(f"[{t_s:8.2f} s] {tag}{text}", markup=False, highlight=False,
                           soft_wrap=True)

    def keys(self) -> list[str]:
        """No keys without a terminal."""
        return []


def make_view(console: Console, status: SessionStatus, *, interactive: bool | None = None):
    """The live view when a terminal is present, else plain log lines.

    Parameters
    ----------
    console : rich.console.Console
    status : SessionStatus
    interactive : bool, optional
        Force one or the other (default: a live view when both the console
        and standard input are terminals).
    """
    if interactive is None:
        try:
            stdin_tty = sys.stdin is not None and sys.stdin.isatty()
        except (AttributeError, ValueError):
            stdin_tty = False
        interactive = bool(console.is_terminal and stdin_tty)
    if interactive:
        return LiveView(console, status, keys=True)
    return PlainLog(console, status)
