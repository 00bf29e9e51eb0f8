"""The cohort report: one self-contained HTML file.

The report is for looking, not reading: which participants imitated well,
who used one arm differently from the other, whose head moved, how
consistent each person was, how reliable the grade is, and the methods
paragraph with the parameters actually used. Every figure is a PNG embedded
as a ``data:`` URI, so the file opens without a network and can be mailed or
archived as it is. The same figures can be written as PNG or SVG files.

Sections: study summary; ranking with bootstrap 95 % intervals; heatmap of
grades (participant x repetition); box plots of the distances from the origin
in the reconstructed space per participant and stream, with the leader's as
reference; reconstructed trajectories in the first principal components (2-D
and 3-D) for the leader and chosen participants; leader and follower time
series of one repetition; flags; reliability (six ICC forms); methods; what
was left out and why; safety and ethics cautions.
"""

from __future__ import annotations

import base64
import html
import io
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from echoreo import __version__
from echoreo.errors import ExportError, Problem
from echoreo.scoring.cohort import flagged_participants, grade_reliability, participant_ranking

__all__ = ["SAFETY_TEXT", "ReportData", "build_report", "check_writable", "write_report"]

#: The caution printed in every report (and shown by the README and live view).
SAFETY_TEXT = (
    "echoreo is a research tool, not a medical device; its grades are research measures, not "
    "a clinical assessment. A robot moving near a person can hurt them: operate it as its "
    "maker's manual says, within the applicable robot-safety standards and local regulations, "
    "under the study's ethics approval with recorded consent, and, in therapy, under licensed "
    "clinical practice."
)


@dataclass
class ReportData:
    """Everything a report shows.

    Parameters
    ----------
    records : DataFrame
        Score records (DEVELOPERS.md, "Score records"), all sessions together.
    details : mapping of int to object
        Optional per-record details keyed by the records' index: objects or
        dicts with ``leader_pc``, ``follower_pc`` (n, 3), ``leader_dist``,
        ``follower_dist`` (n,), and optionally ``t``, ``leader_signal``,
        ``follower_signal`` (n,) for the time-series figure.
    sessions : list of dict
        One per session: ``file``, ``participant``, ``state``, ``study``,
        ``robot``, ``plan``, ``duration_s``.
    params : mapping
        Study-level parameters to print in the methods paragraph (for
        example ``{"imu": {"delay": 7, "dim": 4}, ...}`` plus rates and filter).
    notes : list of str
        What was left out and why.
    title : str
        Study title.
    """

    records: pd.DataFrame
    details: Mapping[int, Any] = field(default_factory=dict)
    sessions: list[dict] = field(default_factory=list)
    params: Mapping[str, Any] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    title: str = "echoreo study"


def _get(obj: Any, name: str) -> Any:
    if obj is None:
        return None
    if isinstance(obj, Mapping):
        return obj.get(name)
    return getattr(obj, name, None)


def _figure_bytes(fig, fmt: str) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=110, bbox_inches="tight")
    return buf.getvalue()


class _Figures:
    """Collects figures; each is rendered once as PNG (inline) and optionally saved."""

    def __init__(self, save_dir: Path | None, fmt: str):
        import matplotlib

        matplotlib.use("Agg", force=True)
        import matplotlib.pyplot as plt

        self.plt = plt
        self.save_dir = save_dir
        self.fmt = fmt
        self.saved: list[Path] = []

    def html(self, fig, name: str, alt: str) -> str:
        png = _figure_bytes(fig, "png")
        if self.save_dir is not None:
            path = self.save_dir / f"{name}.{self.fmt}"
            path.write_bytes(png if self.fmt == "png" else _figure_bytes(fig, self.fmt))
            self.saved.append(path)
        self.plt.close(fig)
        data = base64.b64encode(png).decode("ascii")
        return (f'<figure><img class="fig" alt="{html.escape(alt)}" '
                f'src="data:image/png;base64,{data}"><figcaption>{html.escape(alt)}'
                f"</figcaption></figure>")


def _table(df: pd.DataFrame, float_fmt: str = "{:.2f}") -> str:
    if df is None or not len(df):
        return "<p class='muted'>none</p>"
    out = ["<table><thead><tr>"]
    out += [f"<th>{html.escape(str(c))}</th>" for c in df.columns]
    out.append("</tr></thead><tbody>")
    for row in df.itertuples(index=False):
        out.append("<tr>")
        for v in row:
            if isinstance(v, float | np.floating):
                text = "–" if not np.isfinite(v) else float_fmt.format(v)
            elif isinstance(v, list | tuple):
                text = ", ".join(map(str, v))
            else:
                text = str(v)
            out.append(f"<td>{html.escape(text)}</td>")
        out.append("</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _ranking_figure(figs: _Figures, ranking: pd.DataFrame) -> str:
    per = ranking.iloc[::-1]  # best at the top of the chart
    fig, ax = figs.plt.subplots(figsize=(7, 0.35 * len(per) + 1.2))
    y = np.arange(len(per))
    err = np.vstack([per["mean_grade"] - per["ci_low"], per["ci_high"] - per["mean_grade"]])
    ax.barh(y, per["mean_grade"], color="#4a7ab5", xerr=np.nan_to_num(err), capsize=3)
    ax.set_yticks(y, per["participant"])
    ax.set_xlim(0, 100)
    ax.set_xlabel("mean grade over repetitions and streams (0-100), bars: bootstrap 95% CI")
    return figs.html(fig, "ranking", "Participants ranked by mean grade")


def _heatmap_figure(figs: _Figures, records: pd.DataFrame) -> str:
    rec = records.copy()
    rec["order"] = rec.groupby(["participant"])["t_start"].rank(method="dense").astype(int)
    table = rec.pivot_table(index="participant", columns="order", values="grade", aggfunc="mean")
    fig, ax = figs.plt.subplots(figsize=(min(14, 2 + 0.18 * table.shape[1]),
                                         0.35 * len(table) + 1.5))
    im = ax.imshow(table.to_numpy(), aspect="auto", cmap="viridis", vmin=0, vmax=100,
                   interpolation="nearest")
    ax.set_yticks(np.arange(len(table)), table.index)
    step = max(1, table.shape[1] // 20)
    ticks = np.arange(0, table.shape[1], step)
    ax.set_xticks(ticks, [str(table.columns[k]) for k in ticks])
    ax.set_xlabel("repetition, in session order (all moves)")
    fig.colorbar(im, ax=ax, label="grade (mean over streams)")
    return figs.html(fig, "grade_heatmap", "Grades per participant and repetition")


def _boxplot_figure(figs: _Figures, records: pd.DataFrame, details: Mapping[int, Any]) -> str:
    streams = sorted(records["stream"].unique())
    participants = sorted(records["participant"].unique())
    fig, axes = figs.plt.subplots(len(streams), 1, figsize=(max(7, 0.5 * len(participants) + 2),
                                                            2.6 * len(streams)), squeeze=False)
    drawn = 0
    for ax, stream in zip(axes[:, 0], streams, strict=True):
        rows = records[records["stream"] == stream]
        leader = [np.asarray(_get(details.get(i), "leader_dist"), dtype=float)
                  for i in rows.index if _get(details.get(i), "leader_dist") is not None]
        boxes = [np.concatenate(leader) if leader else np.array([np.nan])]
        labels = ["leader"]
        for p in participants:
            d = [np.asarray(_get(details.get(i), "follower_dist"), dtype=float)
                 for i in rows.index[rows["participant"] == p]
                 if _get(details.get(i), "follower_dist") is not None]
            boxes.append(np.concatenate(d) if d else np.array([np.nan]))
            labels.append(str(p))
        boxes = [b[np.isfinite(b)] if np.isfinite(b).any() else np.array([0.0]) for b in boxes]
        bp = ax.boxplot(boxes, showfliers=False, patch_artist=True)
        ax.set_xticks(np.arange(1, len(labels) + 1), labels, rotation=45, ha="right")
        for k, patch in enumerate(bp["boxes"]):
            patch.set_facecolor("#d9a441" if k == 0 else "#9bbbe0")
        ax.set_title(f"{stream}: distance from the origin in PC space", fontsize=10)
        drawn += 1 if leader else 0
    fig.tight_layout()
    return figs.html(fig, "distance_boxplots",
                     "Distances from the origin of the reconstructed (PCA) space, per "
                     "participant and stream; leader in gold as reference")


def _chosen(records: pd.DataFrame, details: Mapping[int, Any]) -> tuple[pd.Series | None, list]:
    """One repetition and up to 3 participants (best, median, worst grade) to draw.

    The repetition is the earliest (stream, move, repetition) for which the most
    participants have trajectories, so a repetition lost to a sensor gap is skipped.
    """
    has = [i for i in records.index if _get(details.get(i), "follower_pc") is not None]
    if not has:
        return None, []
    rec = records.loc[has]
    counts = rec.groupby(["stream", "move", "repetition"]).size()
    best = counts[counts == counts.max()].index
    keyed = rec.set_index(["stream", "move", "repetition"], drop=False)
    candidates = keyed.loc[keyed.index.isin(best)].sort_values("t_start")
    first = candidates.iloc[0]
    same = rec[(rec["stream"] == first["stream"]) & (rec["move"] == first["move"])
               & (rec["repetition"] == first["repetition"])]
    ranked = same.sort_values("grade", ascending=False)
    picks = [ranked.index[pos] for pos in sorted({0, len(ranked) // 2, len(ranked) - 1})]
    return first, picks


def _trajectory_figures(figs: _Figures, records: pd.DataFrame,
                        details: Mapping[int, Any]) -> str:
    first, picks = _chosen(records, details)
    if first is None or not picks:
        return "<p class='muted'>no trajectories available (scores without details)</p>"
    lead = np.asarray(_get(details[picks[0]], "leader_pc"), dtype=float)
    colours = ["#2b8a3e", "#e67700", "#c92a2a"]
    fig, ax = figs.plt.subplots(figsize=(6, 5))
    ax.plot(lead[:, 0], lead[:, 1], color="black", lw=2, label="leader")
    for c, i in zip(colours, picks, strict=False):
        pc = np.asarray(_get(details[i], "follower_pc"), dtype=float)
        r = records.loc[i]
        ax.plot(pc[:, 0], pc[:, 1], color=c, lw=1,
                label=f"{r['participant']} (grade {r['grade']:.0f})")
    ax.set_xlabel("PC1")
    ax.set_ylabel("PC2")
    ax.legend(fontsize=8)
    title = f"{first['stream']}, move {first['move']}, repetition {first['repetition']}"
    ax.set_title(title, fontsize=10)
    out = figs.html(fig, "trajectories_2d", f"Reconstructed trajectories, PC1-PC2: {title}")
    fig = figs.plt.figure(figsize=(6, 5))
    ax3 = fig.add_subplot(projection="3d")
    ax3.plot(lead[:, 0], lead[:, 1], lead[:, 2], color="black", lw=2, label="leader")
    for c, i in zip(colours, picks, strict=False):
        pc = np.asarray(_get(details[i], "follower_pc"), dtype=float)
        ax3.plot(pc[:, 0], pc[:, 1], pc[:, 2], color=c, lw=1,
                 label=str(records.loc[i, "participant"]))
    ax3.set_xlabel("PC1")
    ax3.set_ylabel("PC2")
    ax3.set_zlabel("PC3")
    ax3.legend(fontsize=8)
    out += figs.html(fig, "trajectories_3d", f"Reconstructed trajectories, PC1-PC3: {title}")
    # Time series of the best-graded pick, when the details carry the signals.
    i = picks[0]
    t = _get(details[i], "t")
    ls, fs = _get(details[i], "leader_signal"), _get(details[i], "follower_signal")
    if t is not None and ls is not None and fs is not None:
        fig, ax = figs.plt.subplots(figsize=(8, 3))
        ax.plot(np.asarray(t), np.asarray(ls), color="black", label="leader (reference)")
        ax.plot(np.asarray(t), np.asarray(fs), color=colours[0],
                label=f"follower {records.loc[i, 'participant']} (lag-aligned)")
        ax.set_xlabel("time in repetition (s)")
        label = str(records.loc[i].get("signal", "signal")).split(" of ")[0]
        ax.set_ylabel(label[:40])
        ax.legend(fontsize=8)
        out += figs.html(fig, "timeseries", f"Leader and follower signals: {title}")
    return out


def _methods(data: ReportData) -> str:
    rec = data.records
    parts = []
    for kind, group in rec.groupby("kind") if "kind" in rec else []:
        delay = group["delay"].iloc[0] if "delay" in group else "?"
        dim = group["dim"].iloc[0] if "dim" in group else "?"
        signal = group["signal"].iloc[0] if "signal" in group else "?"
        rate = group["rate_hz"].iloc[0] if "rate_hz" in group else float("nan")
        fc = group["filter_cutoff_hz"].iloc[0] if "filter_cutoff_hz" in group else float("nan")
        order = group["filter_order"].iloc[0] if "filter_order" in group else "?"
        tau_ms = float(delay) / float(rate) * 1000 if np.isfinite(float(rate)) else float("nan")
        parts.append(
            f"{kind} streams ({signal}) were resampled to {float(rate):g} Hz, low-pass "
            f"filtered with a zero-phase Butterworth filter of order {order} "
            f"(cutoff {float(fc):g} Hz, corrected for the dual pass after Winter 2009) and "
            f"embedded with dimension {dim} and delay {delay} samples ({tau_ms:.0f} ms)")
    n_p = rec["participant"].nunique() if len(rec) else 0
    n_s = len(data.sessions)
    text = (
        f"Imitation was scored per repetition with echoreo {__version__}. Repetitions were "
        f"delimited by the robot's recorded timeline; the follower's reaction lag was estimated "
        f"per move by cross-correlation within 0-2 s. " + "; ".join(parts) + ". "
        "Delays were chosen at the first minimum of the average mutual information (Fraser & "
        "Swinney 1986) and dimensions by false nearest neighbours (Kennel, Brown & Abarbanel "
        "1992) and Cao's method (Cao 1997), once per stream kind for the whole study. The "
        "follower's embedding was projected onto the principal components of the leader's "
        "embedded repetition; distances from the origin were compared by median and "
        "interquartile ratios and the Wasserstein distance, trajectories by a normalised "
        "nearest-neighbour shape distance and by cross-recurrence quantification (Marwan et al. "
        "2007). Reliability of the grade is given as the intraclass correlations of Shrout & "
        f"Fleiss (1979). {n_p} participants, {n_s} sessions."
    )
    return f"<p class='methods'>{html.escape(text)}</p>"


#: Longest list of left-out items printed in full.
_MAX_NOTES = 25

_CSS = """
body{font-family:system-ui,sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;color:#222}
h1{margin-bottom:.2em} h2{border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:2em}
table{border-collapse:collapse;font-size:.85em;margin:.5em 0} td,th{border:1px solid #ccc;
padding:.2em .5em;text-align:left} th{background:#f1f3f5} .muted{color:#777}
.caution{background:#fff4e6;border-left:4px solid #e67700;padding:.6em 1em}
figure{margin:1em 0} img.fig{max-width:100%} figcaption{font-size:.85em;color:#555}
.methods{background:#f8f9fa;padding:.8em 1em;border-left:4px solid #4a7ab5}
"""

# Marks the page once every figure has decoded, and counts script and resource
# errors, for automated checks in a browser (body attributes data-figures, data-errors).
_ERROR_COUNTER = """<script>
var echoreoErrors = 0;
window.addEventListener('error', function () { echoreoErrors += 1; }, true);
</script>"""
_SELF_CHECK = """
<script>
window.addEventListener('load', function () {
  document.body.setAttribute('data-errors', String(echoreoErrors));
  var imgs = document.querySelectorAll('img.fig'); var ok = 0;
  imgs.forEach(function (im) { if (im.complete && im.naturalWidth > 0) { ok += 1; } });
  document.body.setAttribute('data-figures', ok + '/' + imgs.length);
});
</script>
"""


def build_report(data: ReportData, *, figures_dir: str | Path | None = None,
                 figure_format: str = "png", rng: np.random.Generator | None = None) -> str:
    """Render the report as one HTML string.

    Parameters
    ----------
    data : ReportData
        What to show.
    figures_dir : path, optional
        Also write each figure there as a file.
    figure_format : {"png", "svg"}
        Format of the figure files.
    rng : numpy.random.Generator, optional
        For the bootstrap intervals (:func:`~echoreo.scoring.cohort.participant_ranking`
        draws first); a generator seeded with 0 when omitted, so that the same
        data give the same report.

    Returns
    -------
    str
        A complete, self-contained HTML document.
    """
    if figure_format not in ("png", "svg"):
        raise ExportError(f"figure format must be png or svg, not {figure_format!r}")
    save = None
    if figures_dir is not None:
        save = Path(figures_dir)
        try:
            save.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise ExportError(Problem(f"cannot create the figures folder: {exc.strerror}",
                                      str(save))) from exc
    rng = rng if rng is not None else np.random.default_rng(0)
    figs = _Figures(save, figure_format)
    rec = data.records
    body = [f"<h1>{html.escape(data.title)}</h1>",
            f"<p class='muted'>echoreo {__version__} cohort report</p>",
            f"<p class='caution'><b>Caution.</b> {html.escape(SAFETY_TEXT)}</p>"]
    # Summary
    states = pd.Series([s.get("state", "?") for s in data.sessions]).value_counts().to_dict()
    summary_rows = pd.DataFrame([
        {"item": "participants", "value": str(rec["participant"].nunique() if len(rec) else 0)},
        {"item": "sessions", "value": ", ".join(f"{v} {k}" for k, v in states.items()) or "0"},
        {"item": "scored repetition records", "value": str(len(rec))},
        {"item": "streams", "value": ", ".join(sorted(rec["stream"].unique())) if len(rec)
         else "none"},
        {"item": "robots", "value": ", ".join(sorted({str(s.get("robot")) for s in
                                                       data.sessions})) or "?"},
    ])
    body += ["<h2>Study summary</h2>", _table(summary_rows)]
    if len(rec):
        ranking = participant_ranking(rec, rng)
        body += ["<h2>Ranking</h2>", _ranking_figure(figs, ranking), _table(ranking)]
        body += ["<h2>Grades per repetition</h2>", _heatmap_figure(figs, rec)]
        body += ["<h2>Distances in reconstructed space</h2>",
                 _boxplot_figure(figs, rec, data.details)]
        body += ["<h2>Reconstructed trajectories</h2>",
                 _trajectory_figures(figs, rec, data.details)]
        flags = flagged_participants(rec)
        body += ["<h2>Flags</h2>",
                 "<p>Participants with a flag on at least 25% of their repetitions of a "
                 "stream.</p>",
                 _table(flags)]
        rel = grade_reliability(rec, across="repetition")
        body += ["<h2>Reliability of the grade</h2>",
                 "<p>Intraclass correlations across repetitions (targets: participants; "
                 "occasions: repetition index; Shrout &amp; Fleiss 1979).</p>",
                 _table(rel, "{:.3f}")]
        if "session" in rec and rec.groupby("participant")["session"].nunique().max() > 1:
            body += ["<p>Test-retest across sessions:</p>",
                     _table(grade_reliability(rec, across="session"), "{:.3f}")]
        body += ["<h2>Methods</h2>", _methods(data)]
    else:
        body += ["<p>No scored repetitions to show.</p>"]
    shown = list(data.notes[:_MAX_NOTES])
    if len(data.notes) > _MAX_NOTES:
        shown.append(f"... and {len(data.notes) - _MAX_NOTES} more (the score records carry "
                     "the flags of every repetition)")
    body += ["<h2>Left out</h2>",
             ("<ul>" + "".join(f"<li>{html.escape(n)}</li>" for n in shown) + "</ul>")
             if shown else "<p class='muted'>nothing</p>"]
    body += [f"<p class='caution'>{html.escape(SAFETY_TEXT)}</p>"]
    return ("<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
            f"<title>{html.escape(data.title)}</title><style>{_CSS}</style>{_ERROR_COUNTER}"
            "</head><body>"
            + "\n".join(body) + _SELF_CHECK + "</body></html>")


def check_writable(out: str | Path) -> Path:
    """Make sure the report file ``out`` can be written (parent folders created).

    Raises
    ------
    ExportError
        The folder cannot be created or the file cannot be written.
    """
    out = Path(out)
    existed = out.exists()
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        with open(out, "a", encoding="utf-8"):
            pass
        if not existed:
            out.unlink()  # a probe only: leave no empty report behind
    except OSError as exc:
        raise ExportError(Problem(f"cannot write the report: {exc.strerror}", str(out),
                                  hint="choose a writable path with --out")) from exc
    return out


def write_report(data: ReportData, out: str | Path, **kwargs: Any) -> Path:
    """Write :func:`build_report` to ``out`` (parent folders created).

    Raises
    ------
    ExportError
        The file cannot be written.
    """
    out = check_writable(out)
    text = build_report(data, **kwargs)
    try:
        out.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise ExportError(Problem(f"cannot write the report: {exc.strerror}", str(out),
                                  hint="choose a writable path with --out")) from exc
    return out
