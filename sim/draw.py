"""Stick-figure drawings of a robot (or the human model) from forward kinematics.

Two orthographic views side by side: the front view, as seen by a person
facing the robot (the robot's left on the viewer's right: horizontal axis +y),
and the side view from the robot's right (horizontal axis +x, the robot faces
right). Each link is a segment from its parent link's origin to its own, each
site a segment from its link's origin to the site; the head site is a disc.
Left-side parts are blue, right-side parts orange, midline parts grey.

Drawing uses matplotlib's Agg canvas directly (no pyplot state, no display);
GIFs are written with Pillow. matplotlib is imported only when this module is.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike, NDArray

from echoreo.errors import ExportError
from echoreo.sim.robot import Robot

__all__ = [
    "SAFETY_CAUTION",
    "StickFigure",
    "render_gif",
    "render_strip",
    "skeleton",
]

#: One-line caution carried by every preview image.
SAFETY_CAUTION = ("Simulation only. Operate a real robot according to its maker's manual "
                  "and the applicable robot-safety standards.")

#: length of the segment that shows where the head faces, m
_NOSE_M = 0.05
_COLOURS = {"left": "#1f5fbf", "right": "#e07b00", "mid": "#555555"}


def _side(name: str) -> str:
    if name.startswith("left_"):
        return "left"
    if name.startswith("right_"):
        return "right"
    return "mid"


def skeleton(robot: Robot, q: ArrayLike) -> tuple[NDArray[np.float64], list[str]]:
    """Segments of the stick figure for every sample.

    Parameters
    ----------
    robot : Robot
    q : array_like, shape (n, n_joints), rad

    Returns
    -------
    segments : ndarray, shape (n, m, 2, 3), m
        Start and end point (base frame) of each of the ``m`` segments:
        parent-link origin to link origin for every non-base link, then link
        origin to site for every site, then (with a ``head`` site) a short
        segment along the head's x axis showing where it faces, then the spine. Links and sites on
        the base link start from the base's z axis at their own height, and
        the spine runs up that axis from the origin to the highest of them.
    sides : list of str, length m
        ``"left"``, ``"right"`` or ``"mid"`` for colouring.
    """
    links = robot.fk_links(q)
    sites = robot.fk(q)
    base = robot.base_link

    def on_spine(p: NDArray) -> NDArray:
        out = np.zeros_like(p)
        out[:, 2] = p[:, 2]
        return out

    starts, ends, sides = [], [], []
    top = 0.0
    for link in robot.link_names[1:]:
        parent = robot.link_parent(link)
        end = links[link][:, :3, 3]
        # links on the fixed base start from the spine at their own height
        starts.append(on_spine(end) if parent == base else links[parent][:, :3, 3])
        ends.append(end)
        sides.append(_side(link))
        if parent == base:
            top = max(top, float(end[0, 2]))
    for site in robot.site_names:
        end = sites[site][:, :3, 3]
        link = robot.site_link(site)
        starts.append(on_spine(end) if link == base else links[link][:, :3, 3])
        ends.append(end)
        sides.append(_side(site))
        if link == base:
            top = max(top, float(end[0, 2]))
    n = ends[0].shape[0]
    if "head" in robot.site_names:  # a nose: where the head faces (its x axis)
        T = sites["head"]
        starts.append(T[:, :3, 3])
        ends.append(T[:, :3, 3] + _NOSE_M * T[:, :3, 0])
        sides.append("mid")
    # the spine: the base's z axis from the mount up to its highest attachment
    starts.append(np.zeros((n, 3)))
    ends.append(np.tile([0.0, 0.0, top], (n, 1)))
    sides.append("mid")
    seg = np.stack([np.stack(starts, axis=1), np.stack(ends, axis=1)], axis=2)
    return seg, sides


def _head_segment(robot: Robot) -> int | None:
    """Index of the segment of :func:`skeleton` that ends at the head site."""
    if "head" not in robot.site_names:
        return None
    return len(robot.link_names) - 1 + robot.site_names.index("head")


class StickFigure:
    """A figure with a front and a side view of a robot, redrawn per posture.

    Parameters
    ----------
    robot : Robot
    q_all : array_like, shape (n, n_joints), rad
        All postures that will be drawn (they fix the common axis limits).
    title : str
        Shown above the views.
    size_in : (float, float)
        Figure size in inches.
    dpi : int
    """

    def __init__(self, robot: Robot, q_all: ArrayLike, *, title: str = "",
                 size_in: tuple[float, float] = (6.4, 3.6), dpi: int = 80):
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.collections import LineCollection
        from matplotlib.figure import Figure

        self.robot = robot
        seg, self.sides = skeleton(robot, q_all)
        pts = seg.reshape(-1, 3)
        lo, hi = pts.min(axis=0), pts.max(axis=0)
        pad = 0.08 * float(np.max(hi - lo)) + 0.02
        lo, hi = lo - pad, hi + pad
        self.fig = Figure(figsize=size_in, dpi=dpi)
        self.canvas = FigureCanvasAgg(self.fig)
        self.fig.subplots_adjust(left=0.03, right=0.97, top=0.84, bottom=0.12, wspace=0.08)
        self.axes = [self.fig.add_subplot(1, 2, k + 1) for k in range(2)]
        # front: horizontal +y (viewer facing the robot), side: horizontal +x
        self._dims = [(1, 2), (0, 2)]
        colours = [_COLOURS[s] for s in self.sides]
        self.lines = []
        self.heads = []
        for ax, (h, _v), label in zip(self.axes, self._dims,
                                     ("front (facing the robot)", "side (from its right)"),
                                     strict=True):
            ax.set_xlim(lo[h], hi[h])
            ax.set_ylim(lo[2], hi[2])
            ax.set_aspect("equal", adjustable="box")
            ax.set_xticks([])
            ax.set_yticks([])
            ax.set_title(label, fontsize=8)
            ax.axhline(0.0, color="#bbbbbb", lw=1.0)  # the table top (base frame z = 0)
            lc = LineCollection([], colors=colours, linewidths=3.0, capstyle="round")
            ax.add_collection(lc)
            self.lines.append(lc)
            (head,) = ax.plot([], [], "o", ms=14,
                              mfc="#dddddd", mec=_COLOURS["mid"], mew=1.5)
            self.heads.append(head)
        self.title = self.fig.suptitle(title, fontsize=10, y=0.97)
        self.label = self.fig.text(0.5, 0.88, "", ha="center", fontsize=8)
        self.fig.text(0.5, 0.03, SAFETY_CAUTION, ha="center", fontsize=6, color="#aa0000")
        # draw the static parts once, then only the moving artists per frame (blitting)
        self._moving = [*self.heads, *self.lines, self.label]  # disc under the lines
        for artist in self._moving:
            artist.set_animated(True)
        self.canvas.draw()
        self._background = self.canvas.copy_from_bbox(self.fig.bbox)
        self._head_index = _head_segment(robot)

    def draw(self, segments: NDArray, label: str = "") -> NDArray[np.uint8]:
        """Draw one posture; return the image as RGB.

        Parameters
        ----------
        segments : ndarray, shape (m, 2, 3)
            One sample of :func:`skeleton`.
        label : str
            Line of text under the title (time, step, move).

        Returns
        -------
        ndarray, shape (height, width, 3), uint8
        """
        for lc, head, (h, v) in zip(self.lines, self.heads, self._dims, strict=True):
            lc.set_segments(segments[:, :, [h, v]])
            if self._head_index is not None:
                end = segments[self._head_index, 1]
                head.set_data([end[h]], [end[v]])
        self.label.set_text(label)
        self.canvas.restore_region(self._background)
        for artist in self._moving:
            self.fig.draw_artist(artist)
        return np.asarray(self.canvas.buffer_rgba())[:, :, :3].copy()


def _check_path(path: str | Path, suffix: str) -> Path:
    path = Path(path)
    if path.suffix.lower() != suffix:
        raise ExportError(f"{path}: the file name must end in {suffix}",
                          hint=f"for example --out preview{suffix}")
    if not path.parent.exists():
        raise ExportError(f"{path}: folder {path.parent} does not exist",
                          hint="create it first or choose another place")
    return path


def render_gif(robot: Robot, t: ArrayLike, q: ArrayLike, path: str | Path, *,
               fps: float = 10.0, max_frames: int = 400, title: str = "",
               label: Callable[[float], str] | None = None,
               progress: Callable[[int, int], None] | None = None) -> dict:
    """Write an animated GIF of the stick figure following ``q``.

    Frames are taken every ``1/fps`` seconds of ``t`` (nearest sample); when
    that would give more than ``max_frames`` frames the frame interval grows so
    that the whole trajectory fits, and the GIF plays faster than real time
    (the returned ``speedup`` says by how much).

    Parameters
    ----------
    robot : Robot
    t : array_like, shape (n,), s
    q : array_like, shape (n, n_joints), rad
    path : str or Path
        Ends in ``.gif``; its folder must exist.
    fps : float
        Frames per second of playback.
    max_frames : int
    title : str
    label : callable, optional
        ``label(t_s) -> str`` for the caption of each frame.
    progress : callable, optional
        Called as ``progress(done, total)`` after each frame.

    Returns
    -------
    dict
        ``path``, ``frames``, ``speedup`` (1.0 = real time), ``size_px``.
    """
    t = np.asarray(t, dtype=float)
    q = np.asarray(q, dtype=float)
    path = _check_path(path, ".gif")
    from PIL import Image

    duration = float(t[-1] - t[0]) if len(t) > 1 else 0.0
    n_frames = max(1, min(max_frames, int(np.floor(duration * fps)) + 1))
    step = duration / (n_frames - 1) if n_frames > 1 else 0.0
    speedup = step * fps if n_frames > 1 and step * fps > 1.0 + 1e-9 else 1.0
    times = t[0] + step * np.arange(n_frames)
    idx = np.clip(np.searchsorted(t, times), 0, len(t) - 1)
    fig = StickFigure(robot, q, title=title)
    seg, _ = skeleton(robot, q[idx])
    frames = []
    for k, i in enumerate(idx):
        rgb = fig.draw(seg[k], label(float(t[i])) if label else f"t = {t[i]:.2f} s")
        frames.append(Image.fromarray(rgb).quantize(colors=32, method=Image.Quantize.MEDIANCUT))
        if progress:
            progress(k + 1, n_frames)
    ms = max(20, round(1000.0 / fps))
    try:
        frames[0].save(path, save_all=True, append_images=frames[1:], duration=ms, loop=0,
                       optimize=False, disposal=1)
    except OSError as exc:
        raise ExportError(f"{path}: cannot write the GIF ({exc.strerror or exc})") from exc
    return {"path": path, "frames": n_frames, "speedup": speedup,
            "size_px": frames[0].size}


def render_strip(robot: Robot, t: ArrayLike, q: ArrayLike, times: Sequence[float],
                 path: str | Path, *, labels: Sequence[str] | None = None,
                 title: str = "") -> dict:
    """Write a PNG strip of key frames: one column per time, front view above side view.

    Parameters
    ----------
    robot : Robot
    t : array_like, shape (n,), s
    q : array_like, shape (n, n_joints), rad
    times : sequence of float, s
        Key frame times (nearest sample is drawn).
    path : str or Path
        Ends in ``.png``; its folder must exist.
    labels : sequence of str, optional
        One caption per key frame (default: the time).
    title : str

    Returns
    -------
    dict
        ``path``, ``frames``, ``size_px``.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.collections import LineCollection
    from matplotlib.figure import Figure

    t = np.asarray(t, dtype=float)
    q = np.asarray(q, dtype=float)
    path = _check_path(path, ".png")
    idx = np.clip(np.searchsorted(t, np.asarray(times, dtype=float)), 0, len(t) - 1)
    k = len(idx)
    seg_all, sides = skeleton(robot, q)
    pts = seg_all.reshape(-1, 3)
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    pad = 0.08 * float(np.max(hi - lo)) + 0.02
    lo, hi = lo - pad, hi + pad
    seg = seg_all[idx]
    colours = [_COLOURS[s] for s in sides]
    head_i = _head_segment(robot)
    fig = Figure(figsize=(1.7 * k + 0.6, 4.4), dpi=90)
    FigureCanvasAgg(fig)
    fig.subplots_adjust(left=0.05, right=0.99, top=0.82, bottom=0.09, wspace=0.05,
                        hspace=0.08)
    for c in range(k):
        for r, (h, v) in enumerate([(1, 2), (0, 2)]):
            ax = fig.add_subplot(2, k, r * k + c + 1)
            ax.set_xlim(lo[h], hi[h])
            ax.set_ylim(lo[2], hi[2])
            ax.set_aspect("equal", adjustable="box")
            ax.set_xticks([])
            ax.set_yticks([])
            ax.axhline(0.0, color="#bbbbbb", lw=1.0)
            ax.add_collection(LineCollection(seg[c][:, :, [h, v]], colors=colours,
                                             linewidths=2.5, capstyle="round"))
            if head_i is not None:
                end = seg[c][head_i, 1]
                ax.plot([end[h]], [end[v]], "o", ms=10, mfc="#dddddd",
                        mec=_COLOURS["mid"], mew=1.2, zorder=1.5)
            if r == 0:
                text = labels[c] if labels is not None else f"t = {t[idx[c]]:.2f} s"
                ax.set_title(text, fontsize=7)
            if c == 0:
                ax.set_ylabel("front" if r == 0 else "side", fontsize=8)
    fig.suptitle(title, fontsize=10)
    fig.text(0.5, 0.02, SAFETY_CAUTION, ha="center", fontsize=7, color="#aa0000")
    try:
        fig.savefig(path, format="png")
    except OSError as exc:
        raise ExportError(f"{path}: cannot write the PNG ({exc.strerror or exc})") from exc
    w, h = fig.canvas.get_width_height()
    return {"path": path, "frames": k, "size_px": (w, h)}
