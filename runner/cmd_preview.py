"""``echoreo preview CHOREOGRAPHY --out FILE.gif``: the choreography on the simulated robot.

Compiles the choreography (with all its limit checks), then draws the robot
as a stick figure, front and side views: an animated GIF at ``--out`` and a
PNG strip of key frames beside it (same name, ``.png``). Every image carries
a one-line caution that it is a simulation.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

from echoreo.errors import ExportError
from echoreo.runner.choreography import load_choreography

__all__ = ["add_arguments", "key_frames", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("choreography", metavar="CHOREOGRAPHY", help="choreography YAML file")
    parser.add_argument("--out", required=True, metavar="FILE",
                        help="animated GIF to write (the key-frame strip goes to FILE with .png)")
    parser.add_argument("--strip", metavar="PNG", default=None,
                        help="where to write the key-frame strip (default: --out with .png)")
    parser.add_argument("--fps", type=float, default=10.0,
                        help="GIF frames per second of playback (default 10)")
    parser.add_argument("--max-frames", type=int, default=400,
                        help="at most this many GIF frames; longer choreographies play "
                             "faster than real time (default 400)")
    parser.add_argument("--key-frames", type=int, default=8,
                        help="key frames in the PNG strip (default 8)")
    parser.add_argument("--rate", type=float, default=50.0,
                        help="command rate the choreography is compiled and checked at, Hz "
                             "(default 50)")


def key_frames(t: np.ndarray, q: np.ndarray, spans: pd.DataFrame, count: int,
               ) -> tuple[list[float], list[str]]:
    """Times and captions of the key frames of a timeline.

    Candidates are the first sample, then for each step the sample of its
    first span that lies farthest (Euclidean norm over joints, rad) from the
    span's starting posture -- the peak of the movement, or the middle of a
    rest or hold -- and the last sample. With more candidates than ``count``
    rests are dropped first, then the rest are thinned evenly, keeping the
    first and the last.

    Returns
    -------
    times : list of float, s
    labels : list of str
    """
    cands: list[tuple[float, str]] = [(float(t[0]), "start")]
    for _, first in spans.drop_duplicates("step", keep="first").iterrows():
        i0 = int(np.searchsorted(t, first["t_start"]))
        i1 = max(i0 + 1, int(np.searchsorted(t, first["t_end"])))
        if first["kind"] == "move" and i1 - i0 > 1:
            dev = np.linalg.norm(q[i0:i1] - q[i0], axis=1)
            i = i0 + int(np.argmax(dev))
        else:
            i = min((i0 + i1) // 2, len(t) - 1)
        name = first["move"] or first["kind"]
        cands.append((float(t[min(i, len(t) - 1)]), f"step {int(first['step'])}: {name}"))
    cands.append((float(t[-1]), "end"))
    rests = {f"step {int(r['step'])}: rest" for _, r in spans.iterrows() if r["kind"] == "rest"}
    while len(cands) > count and any(c[1] in rests for c in cands):
        # drop rests first: they look like the start
        cands.remove(next(c for c in cands if c[1] in rests))
    if len(cands) > count >= 2:
        pick = np.unique(np.round(np.linspace(0, len(cands) - 1, count)).astype(int))
        cands = [cands[i] for i in pick]
    return [c[0] for c in cands], [f"t = {c[0]:.1f} s\n{c[1]}" for c in cands]


def _labeller(spans: pd.DataFrame):
    reps = spans[spans["kind"] == "move"].groupby("step")["repetition"].max().to_dict()
    starts = spans["t_start"].to_numpy()
    rows = spans.to_dict("records")

    def label(t_s: float) -> str:
        if not rows:
            return f"t = {t_s:.2f} s"
        k = max(0, int(np.searchsorted(starts, t_s, side="right")) - 1)
        r = rows[k]
        text = f"t = {t_s:5.2f} s   step {int(r['step'])}"
        if r["kind"] == "move":
            text += f"  {r['move']}  repetition {int(r['repetition'])}/{reps.get(r['step'], 1)}"
        else:
            text += f"  {r['kind']}" + (f" ({r['move']})" if r["move"] else "")
        return text

    return label


def run(args: argparse.Namespace, console: Console) -> int:
    from echoreo.sim.draw import SAFETY_CAUTION, render_gif, render_strip

    out = Path(args.out)
    if out.suffix.lower() != ".gif":
        raise ExportError(f"--out {args.out}: the animation is written as a GIF, so the "
                          "file name must end in .gif", hint="for example --out preview.gif")
    strip = Path(args.strip) if args.strip else out.with_suffix(".png")
    if strip.suffix.lower() != ".png":
        raise ExportError(f"--strip {strip}: the key-frame strip is a PNG, so the file name "
                          "must end in .png", hint="for example --strip keyframes.png")
    for path in (out, strip):
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise ExportError(f"{path}: cannot create the folder {path.parent} "
                              f"({exc.strerror})", hint="choose a writable place") from exc
    for name, value, low in (("--fps", args.fps, 0.1), ("--max-frames", args.max_frames, 1),
                             ("--key-frames", args.key_frames, 1)):
        if not value >= low:
            raise ExportError(f"{name} must be at least {low}, got {value}")

    choreography = load_choreography(args.choreography)
    timeline = choreography.compile(args.rate)
    robot = choreography.robot
    title = f"{timeline.name} on {robot.name} (simulated)"
    console.print(f"[bold]{timeline.name}[/]: {len(timeline.t)} samples at "
                  f"{timeline.rate_hz:g} Hz, {timeline.t[-1]:.1f} s, robot {robot.name}")

    columns = (TextColumn("rendering"), BarColumn(), MofNCompleteColumn(),
               TextColumn("frames"), TimeRemainingColumn())
    with Progress(*columns, console=console, transient=False) as progress:
        task = progress.add_task("gif", total=None)

        def tick(done: int, total: int) -> None:
            progress.update(task, completed=done, total=total)

        gif = render_gif(robot, timeline.t, timeline.q, out, fps=args.fps,
                         max_frames=args.max_frames, title=title,
                         label=_labeller(timeline.spans), progress=tick)
    times, labels = key_frames(timeline.t, timeline.q, timeline.spans, args.key_frames)
    png = render_strip(robot, timeline.t, timeline.q, times, strip, labels=labels, title=title)

    speed = ("real time" if gif["speedup"] == 1.0
             else f"{gif['speedup']:.2f}x real time (--max-frames {args.max_frames})")
    console.print(f"wrote {gif['path']} ({gif['frames']} frames, {args.fps:g} fps, {speed})")
    console.print(f"wrote {png['path']} ({png['frames']} key frames)")
    console.print(f"[yellow]caution:[/] {SAFETY_CAUTION}")
    return 0
