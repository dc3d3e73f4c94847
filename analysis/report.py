"""The session report: figures (matplotlib, Agg) and one self-contained HTML page.

Pure building only: every function here takes data already read (tidy DataFrames in the results
format of ``../shared/spec/results-format.md``, a :class:`vision.table.TableSpec`) and returns a
figure, PNG bytes or HTML text. Reading a results folder and writing the file is
``railtrace.report_cmd``'s job.

Frame and units: the table frame of ``vision/table.py`` (mm, s, mm/s; x along a long cushion,
y along a short one; rails bottom/right/top/left; diamonds L/8 on long rails and W/4 on short
ones). Figures draw the table to scale with x to the right and y up, as the frame is defined, so
what is on the left of a diagram is the ``left`` rail.

Self-contained: images are embedded as ``data:`` URIs (base64 PNG, or SVG as written by another
stage); the page carries its own CSS, no script, no font or file from elsewhere, so it opens
offline in any browser and fetches nothing.

Figures are built on :class:`matplotlib.figure.Figure` with the Agg canvas directly, never through
``pyplot``: pyplot keeps a global registry of open figures, which this project does not allow
(and which leaks memory over a 100-shot session).
"""

from __future__ import annotations

import base64
import html
import io
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Circle, Rectangle

from vision.table import RAILS, TableSpec

# Our own palette (hex sRGB). Diagram: a pale cloth so that paths and markers read clearly when
# printed, a walnut rail, and one distinct colour per ball.
CLOTH = "#e4ece6"
RAIL = "#8a7660"
RAIL_EDGE = "#5b4b3a"
POCKET = "#2b2420"
SIGHT = "#f3ead8"
INK = "#22252b"
MUTED = "#6b7078"
CUE_COLOUR = "#1d4e89"
OBJECT_COLOURS = ("#c8553d", "#2a9d8f", "#e9a03b", "#7b4f9d", "#4d8b31", "#b5179e", "#8d6a32", "#3d5a80")
DECLARED = "#7b4f9d"
MIRROR = "#2a9d8f"
RAIL_COLOURS = {"bottom": "#c8553d", "right": "#2a9d8f", "top": "#1d4e89", "left": "#e9a03b"}
BAND_COLOURS = ("#2a9d8f", "#e9a03b", "#c8553d", "#7b4f9d", "#3d5a80")

# Event markers: (matplotlib marker, face colour, size pt, label for the legend).
EVENT_STYLE = {
    "start": ("o", "white", 9, "cue strike (ball set moving)"),
    "collision": ("*", "#f4d35e", 15, "ball-ball collision"),
    "cushion": ("D", "white", 7, "cushion contact (ball centre)"),
    "pocket": ("X", "#22252b", 11, "pocketed"),
    "stop": ("s", "#9aa0a6", 6, "ball comes to rest"),
}


@dataclass(frozen=True)
class ReportConfig:
    """How the report is drawn.

    ``dpi`` and ``table_fig_width_in`` set the per-shot diagrams' size (pixels = dpi x inches;
    the defaults give 700 px, sharp at the page's column width). ``max_path_points`` thins long
    paths before plotting (a path is drawn through at most that many tracked positions, always
    keeping both ends), which keeps a 100-shot report quick without visibly changing a path at
    this scale (60 fps clips move a ball at most a few mm per frame). ``moved_min_mm``: a ball
    whose positions in a shot span less than this is drawn as resting. ``max_event_rows``: events
    listed under each diagram (the rest are counted).
    """

    dpi: int = 100
    table_fig_width_in: float = 7.0
    max_path_points: int = 600
    moved_min_mm: float = 5.0
    max_event_rows: int = 40

    def __post_init__(self) -> None:
        if not 30 <= self.dpi <= 400:
            raise ValueError(f"dpi {self.dpi} is outside 30..400")
        if not 2.0 <= self.table_fig_width_in <= 30.0:
            raise ValueError(f"table_fig_width_in {self.table_fig_width_in} is outside 2..30 inches")
        if self.max_path_points < 2:
            raise ValueError(f"max_path_points {self.max_path_points} must be at least 2")


@dataclass(frozen=True)
class ReportData:
    """Everything a report shows, already read from a results folder.

    ``tracks``, ``events``, ``shots``: the results format's tables (extra columns allowed;
    ``shots`` may lack the optional count columns). ``run``: run.json as a dict. ``calibration``:
    calibration.json as a dict. ``banks`` (one row per bank shot), ``bank_stats`` and
    ``cushion_results`` (``cushions.csv``): other stages' tables when present, else None; their
    columns are read defensively (whatever is there is shown). ``bank_findings``: lines of
    plain-language findings. ``images``: caption -> data URI of a figure another stage drew (the
    rail map, the bank chart). ``notes``: lines saying what could not be shown and why.
    """

    title: str
    table: TableSpec
    tracks: pd.DataFrame
    events: pd.DataFrame
    shots: pd.DataFrame
    run: dict = field(default_factory=dict)
    calibration: dict = field(default_factory=dict)
    banks: pd.DataFrame | None = None
    bank_stats: pd.DataFrame | None = None
    bank_findings: tuple[str, ...] = ()
    cushion_results: pd.DataFrame | None = None
    cushion_summary: str = ""
    images: tuple[tuple[str, str], ...] = ()
    notes: tuple[str, ...] = ()


# ---------------------------------------------------------------------------------------------
# Figures
# ---------------------------------------------------------------------------------------------
def png_bytes(fig: Figure, dpi: int) -> bytes:
    """Render ``fig`` with the Agg canvas to PNG bytes (no metadata, so no link text inside)."""
    FigureCanvasAgg(fig)  # attaches itself to fig as its canvas
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def data_uri(data: bytes, mime: str = "image/png") -> str:
    """``data:`` URI of ``data`` (base64), for embedding an image in the page."""
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"


def figure_uri(fig: Figure, dpi: int) -> str:
    """``fig`` as an embedded PNG data URI."""
    return data_uri(png_bytes(fig, dpi))


def ball_colour(ball: str, rank: int) -> str:
    """Colour of a ball in every figure: the cue ball always blue, object balls in turn."""
    return CUE_COLOUR if ball == "cue" else OBJECT_COLOURS[rank % len(OBJECT_COLOURS)]


def ball_names(tracks: pd.DataFrame) -> dict[int, tuple[str, str]]:
    """track -> (name for people, colour). Names use the ``label`` column where the results carry
    one (truth folders do), else the track number: "cue ball", "ball 3", "ball #2"."""
    out: dict[int, tuple[str, str]] = {}
    if len(tracks) == 0:
        return out
    first = tracks.drop_duplicates("track").sort_values("track")
    rank = 0
    for _, r in first.iterrows():
        k = int(r["track"])
        ball = str(r.get("ball", "object"))
        if ball == "cue":
            out[k] = ("cue ball", CUE_COLOUR)
            continue
        label = r.get("label") if "label" in first.columns else None
        name = f"ball {label}" if label is not None and not pd.isna(label) and str(label) != "" else f"ball #{k}"
        out[k] = (name, ball_colour(ball, rank))
        rank += 1
    return out


def draw_table(ax, table: TableSpec) -> None:
    """Draw the table to scale on ``ax`` (mm, x right, y up): rail band, cloth between cushion
    noses, pockets at their mouths and the sights on the rail top."""
    L, W, r = table.length_mm, table.width_mm, table.rail_width_mm * 0.6
    ax.add_patch(Rectangle((-r, -r), L + 2 * r, W + 2 * r, facecolor=RAIL, edgecolor=RAIL_EDGE, lw=1.0, zorder=0))
    ax.add_patch(Rectangle((0, 0), L, W, facecolor=CLOTH, edgecolor=RAIL_EDGE, lw=0.8, zorder=0.5))
    for p in table.pockets():
        cx, cy = p.mouth_centre
        ax.add_patch(Circle((cx, cy), 0.4 * p.mouth_mm, facecolor=POCKET, edgecolor="none", zorder=0.6))
    for _rail, _k, (sx, sy) in table.sights():
        # Sights are drawn a little inside the band so they stay on the drawn (narrower) rail.
        sx = min(max(sx, -r * 0.55), L + r * 0.55)
        sy = min(max(sy, -r * 0.55), W + r * 0.55)
        ax.plot([sx], [sy], marker="D", ms=3.2, color=SIGHT, mec=RAIL_EDGE, mew=0.4, zorder=0.7)
    ax.set_xlim(-r - 10, L + r + 10)
    ax.set_ylim(-r - 10, W + r + 10)
    ax.set_aspect("equal")
    ax.set_xticks([])
    ax.set_yticks([])
    for s in ax.spines.values():
        s.set_visible(False)


def _thin(xy: np.ndarray, n: int) -> np.ndarray:
    """At most ``n`` rows of (M, 2) ``xy``, evenly spaced, keeping the first and last."""
    if len(xy) <= n:
        return xy
    idx = np.unique(np.linspace(0, len(xy) - 1, n).round().astype(int))
    return xy[idx]


def _rail_xy(table: TableSpec, rail: str, diamond: float) -> tuple[float, float]:
    """Point on ``rail``'s reversal line (where a ball centre turns) at ``diamond``, mm."""
    return table.rail_point(rail, diamond, -table.reversal_offset_mm)


def _num(row, key) -> float:
    """``row[key]`` as a float, NaN when the column is missing or the value is not a number."""
    try:
        v = row[key]
    except (KeyError, IndexError):
        return math.nan
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def _text(row, key) -> str:
    """``row[key]`` as text, '' when missing or NaN."""
    try:
        v = row[key]
    except (KeyError, IndexError):
        return ""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return str(v)


def bank_geometry(table: TableSpec, bank: pd.Series) -> dict[str, np.ndarray]:
    """Lines to draw for one bank (row of ``banks.csv``, read defensively): ``declared`` (start ->
    declared contact), ``mirror`` (start -> mirror contact -> target, when the target is a pocket
    or rail point the table knows) as (N, 2) arrays of (x, y) mm. Missing columns leave the line
    out."""
    out: dict[str, np.ndarray] = {}
    start = np.array([_num(bank, "start_x_mm"), _num(bank, "start_y_mm")])
    rail = _text(bank, "rail")
    if not np.all(np.isfinite(start)) or rail not in RAILS:
        return out
    dec = _num(bank, "declared_diamond")
    if math.isfinite(dec):
        out["declared"] = np.array([start, _rail_xy(table, rail, dec)])
    mir = _num(bank, "mirror_diamond")
    if math.isfinite(mir):
        pts = [start, np.array(_rail_xy(table, rail, mir))]
        target = _text(bank, "target")
        names = {p.name: p for p in table.pockets()}
        if target in names:
            pts.append(np.array(names[target].mouth_centre))
        out["mirror"] = np.array(pts)
    return out


def shot_figure(
    table: TableSpec,
    tracks: pd.DataFrame,
    events: pd.DataFrame,
    names: dict[int, tuple[str, str]],
    config: ReportConfig,
    bank: pd.Series | None = None,
) -> Figure:
    """The table to scale with one shot drawn on it.

    ``tracks``: the shot's rows of tracks.csv (t within the shot); ``events``: the shot's rows of
    events.csv; ``names``: :func:`ball_names`; ``bank``: the shot's row of banks.csv, if any, which
    adds the declared aim line and the mirror line. Each moving ball's path is a line in its own
    colour from an open circle (where it was at the strike, drawn ball-sized) to a filled one
    (where it ended); balls that did not move are grey discs; events are marked as in
    :data:`EVENT_STYLE`, cushion contacts numbered in time order.
    """
    L, W, r = table.length_mm, table.width_mm, table.rail_width_mm * 0.6
    w_in = config.table_fig_width_in
    h_table = w_in * (W + 2 * r + 20) / (L + 2 * r + 20)
    legend_in = 0.62
    fig = Figure(figsize=(w_in, h_table + legend_in))
    ax = fig.add_axes((0.0, legend_in / (h_table + legend_in), 1.0, h_table / (h_table + legend_in)))
    draw_table(ax, table)
    R = table.radius_mm
    handles = []
    moved_tracks = []
    for k, g in tracks.groupby("track", sort=True):
        xy = g[["x", "y"]].to_numpy(float)
        name, colour = names.get(int(k), (f"ball #{int(k)}", MUTED))
        span = float(np.ptp(xy, axis=0).max()) if len(xy) else 0.0
        if span < config.moved_min_mm:
            ax.add_patch(Circle(tuple(xy[0]), R, facecolor="#b9bec4", edgecolor="#6b7078", lw=0.6, zorder=2))
            continue
        moved_tracks.append(int(k))
        pts = _thin(xy, config.max_path_points)
        lw = 2.6 if bank is not None and int(k) == int(_num(bank, "track") if math.isfinite(_num(bank, "track")) else -1) else 1.8
        ax.plot(pts[:, 0], pts[:, 1], color=colour, lw=lw, solid_capstyle="round", zorder=3)
        ax.add_patch(Circle(tuple(xy[0]), R, facecolor="white", edgecolor=colour, lw=1.4, zorder=4))
        ax.add_patch(Circle(tuple(xy[-1]), R, facecolor=colour, edgecolor=INK, lw=0.6, zorder=4))
        handles.append(Line2D([], [], color=colour, lw=2.2, label=f"{name} path"))
    if bank is not None:
        geo = bank_geometry(table, bank)
        if "declared" in geo:
            d = geo["declared"]
            ax.plot(d[:, 0], d[:, 1], color=DECLARED, lw=1.4, ls=(0, (6, 3)), zorder=3.5)
            handles.append(Line2D([], [], color=DECLARED, lw=1.4, ls=(0, (6, 3)), label="declared aim"))
        if "mirror" in geo:
            m = geo["mirror"]
            ax.plot(m[:, 0], m[:, 1], color=MIRROR, lw=1.4, ls=(0, (1.5, 2.5)), zorder=3.5)
            handles.append(Line2D([], [], color=MIRROR, lw=1.4, ls=(0, (1.5, 2.5)), label="mirror line"))
    n_cushion = 0
    ev = events.sort_values("t") if len(events) else events
    for _, e in ev.iterrows():
        kind = str(e["kind"])
        if kind not in EVENT_STYLE or not (math.isfinite(_num(e, "x")) and math.isfinite(_num(e, "y"))):
            continue
        marker, face, size, _label = EVENT_STYLE[kind]
        edge = names.get(int(e["track"]), ("", INK))[1] if kind in ("cushion", "start") else INK
        ax.plot([e["x"]], [e["y"]], marker=marker, ms=size, mfc=face, mec=edge, mew=1.2, zorder=5, ls="none")
        if kind == "cushion":
            n_cushion += 1
            nx, ny = _label_offset(table, str(e.get("rail", "")))
            ax.annotate(str(n_cushion), (e["x"], e["y"]), xytext=(nx, ny), textcoords="offset points",
                        fontsize=7, color=INK, ha="center", va="center", zorder=6)
    kinds_present = {str(k) for k in ev["kind"]} if len(ev) else set()
    for kind, (marker, face, size, label) in EVENT_STYLE.items():
        if kind in kinds_present:
            handles.append(Line2D([], [], marker=marker, ls="none", mfc=face, mec=INK, ms=min(size, 10), label=label))
    if handles:
        fig.legend(handles=handles, loc="lower center", ncol=min(4, len(handles)), fontsize=7.5, frameon=False,
                   bbox_to_anchor=(0.5, 0.0), handlelength=2.4, columnspacing=1.2)
    return fig


def _label_offset(table: TableSpec, rail: str) -> tuple[float, float]:
    """Offset (points) of a cushion contact's number, away from its rail into the cloth."""
    return {"bottom": (0, 9), "top": (0, -9), "left": (9, 0), "right": (-9, 0)}.get(rail, (8, 8))


def summary_figure(shots: pd.DataFrame, events: pd.DataFrame, dpi: int) -> str | None:
    """Two panels: each shot's strike speed, and every cushion contact's speed ratio (outgoing
    over incoming velocity normal to the cushion) against its normal impact speed, by rail.
    Returns a data URI, or None when there is nothing to plot."""
    starts = events[events["kind"] == "start"] if len(events) else events
    cush = events[events["kind"] == "cushion"] if len(events) else events
    if len(starts) == 0 and len(cush) == 0:
        return None
    fig = Figure(figsize=(9.0, 3.2))
    a1 = fig.add_axes((0.07, 0.18, 0.38, 0.7))
    a2 = fig.add_axes((0.56, 0.18, 0.36, 0.7))
    if len(starts):
        first = starts.sort_values("t").drop_duplicates("shot")
        a1.bar(first["shot"].astype(int), first["speed_out"].astype(float) / 1000.0, color=CUE_COLOUR, width=0.7)
    a1.set_xlabel("shot")
    a1.set_ylabel("speed at the strike (m/s)")
    a1.set_title("How hard each shot was struck", fontsize=10, loc="left")
    if len(cush):
        v = cush["speed_in"].astype(float) * np.cos(np.radians(cush["angle_in"].astype(float)))
        for rail in RAILS:
            m = (cush["rail"] == rail).to_numpy()
            if m.any():
                a2.plot(v[m] / 1000.0, cush["restitution"].astype(float)[m], "o", ms=4.5, color=RAIL_COLOURS[rail],
                        label=rail, alpha=0.85)
        a2.legend(fontsize=7.5, frameon=False, title="rail", title_fontsize=7.5, loc="upper left",
                  bbox_to_anchor=(1.0, 1.0))
    else:
        a2.text(0.5, 0.5, "no cushion contacts", ha="center", va="center", transform=a2.transAxes, color=MUTED)
    a2.set_xlabel("impact speed normal to the cushion (m/s)")
    a2.set_ylabel("speed ratio off / on")
    a2.set_title("How lively each cushion contact was", fontsize=10, loc="left")
    for a in (a1, a2):
        a.spines[["top", "right"]].set_visible(False)
        a.tick_params(labelsize=8)
    return figure_uri(fig, dpi)


def bank_figure(banks: pd.DataFrame, dpi: int) -> str | None:
    """The bank audit at a glance: per bank, the aim error (actual minus declared contact,
    diamonds) and how long (+) or short (-) it finished, against the speed it reached the cushion,
    coloured by speed band; missed banks hollow. Columns are read defensively: a panel whose
    column is missing is left out. Returns a data URI, or None when nothing can be plotted."""
    if banks is None or len(banks) == 0 or "speed_in_mm_s" not in banks.columns:
        return None
    panels = [(c, lab) for c, lab in (("aim_error_diamonds", "aim error (diamonds)\nactual minus declared contact"),
                                       ("long_diamonds", "finish long (+) / short (-)\n(diamonds)"))
              if c in banks.columns and pd.to_numeric(banks[c], errors="coerce").notna().any()]
    if not panels:
        return None
    fig = Figure(figsize=(4.5 * len(panels), 3.2))
    speed = pd.to_numeric(banks["speed_in_mm_s"], errors="coerce").to_numpy() / 1000.0
    bands = banks["band"].astype(str).to_numpy() if "band" in banks.columns else np.array(["all"] * len(banks))
    made = banks["made"].astype(str).str.lower().isin(["1", "true", "1.0"]).to_numpy() if "made" in banks.columns else np.ones(len(banks), bool)
    band_names = list(dict.fromkeys(bands))
    width = 0.84 / len(panels)
    for i, (col, label) in enumerate(panels):
        ax = fig.add_axes((0.1 / len(panels) + i / len(panels) + 0.02, 0.2, width - 0.06, 0.68))
        y = pd.to_numeric(banks[col], errors="coerce").to_numpy()
        for j, b in enumerate(band_names):
            m = bands == b
            colour = BAND_COLOURS[j % len(BAND_COLOURS)]
            ax.plot(speed[m & made], y[m & made], "o", ms=6, color=colour, label=f"{b} (made)")
            ax.plot(speed[m & ~made], y[m & ~made], "o", ms=6, mfc="white", mec=colour, mew=1.4, label=f"{b} (missed)")
        ax.axhline(0.0, color=MUTED, lw=0.8)
        ax.set_xlabel("speed into the cushion (m/s)", fontsize=8)
        ax.set_ylabel(label, fontsize=8)
        ax.tick_params(labelsize=8)
        ax.spines[["top", "right"]].set_visible(False)
        if i == 0:
            ax.legend(fontsize=7, frameon=False, loc="best")
    return figure_uri(fig, dpi)


# ---------------------------------------------------------------------------------------------
# HTML
# ---------------------------------------------------------------------------------------------
CSS = """
:root { --paper:#f6f4ef; --card:#ffffff; --ink:#22252b; --muted:#6b7078; --line:#ddd8cc;
        --accent:#1d4e89; --warm:#c8553d; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
       font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
header { background:#22303c; color:#f6f4ef; padding:22px 28px 18px; }
header h1 { margin:0 0 4px; font-size:24px; font-weight:650; letter-spacing:0.2px; }
header p { margin:0; color:#cfd6dc; }
main { max-width:1180px; margin:0 auto; padding:18px 22px 40px; }
h2 { font-size:19px; margin:30px 0 8px; padding-bottom:4px; border-bottom:2px solid var(--line); }
h3 { font-size:15px; margin:0 0 6px; }
.guide { background:#fffdf6; border-left:4px solid #e9a03b; padding:10px 16px; margin:16px 0; }
.guide ul { margin:4px 0 2px 18px; padding:0; }
.cards { display:flex; flex-wrap:wrap; gap:10px; margin:14px 0; }
.card { background:var(--card); border:1px solid var(--line); border-radius:8px; padding:8px 14px; min-width:120px; }
.card b { display:block; font-size:22px; }
.card span { color:var(--muted); font-size:12.5px; }
figure { margin:10px 0; }
figure img { max-width:100%; height:auto; display:block; background:#fff; border:1px solid var(--line); border-radius:6px; }
figcaption { color:var(--muted); font-size:13px; margin-top:4px; }
.shots { display:grid; grid-template-columns: repeat(auto-fill, minmax(520px, 1fr)); gap:16px; }
.shot { background:var(--card); border:1px solid var(--line); border-radius:8px; padding:12px 14px; }
.shot p { margin:2px 0 6px; }
table.data { border-collapse:collapse; font-size:12.5px; margin:6px 0; background:var(--card); }
table.data th, table.data td { border-bottom:1px solid var(--line); padding:3px 8px; text-align:right; white-space:nowrap; }
table.data th { background:#eeebe3; font-weight:600; }
table.data td.l, table.data th.l { text-align:left; }
.wrap { overflow-x:auto; }
.note { color:var(--muted); font-size:13px; }
.flag { color:var(--warm); font-weight:600; }
details summary { cursor:pointer; color:var(--accent); font-size:13px; }
footer { color:var(--muted); font-size:12px; margin-top:36px; border-top:1px solid var(--line); padding-top:8px; }
"""


def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _fmt(v, nd: int = 2) -> str:
    """A number for a table cell: fixed decimals, '' for NaN/missing, text passed through."""
    if v is None:
        return ""
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    if math.isnan(f):
        return ""
    if nd == 0:
        return str(int(round(f)))
    return f"{f:.{nd}f}"


def html_table(df: pd.DataFrame, labels: dict[str, str] | None = None, digits: dict[str, int] | None = None,
               max_rows: int = 500) -> str:
    """``df`` as an HTML table; ``labels`` renames known columns for people, unknown ones keep
    their file name (so a producer's new column still shows)."""
    labels = labels or {}
    digits = dict(digits or {})
    cols = list(df.columns)
    text_cols = {c for c in cols if df[c].dtype == object}
    for c in cols:
        # Counts read back from CSV arrive as floats; print whole-number columns without decimals.
        v = pd.to_numeric(df[c], errors="coerce") if c not in text_cols and df[c].dtype != bool else None
        if c not in digits and v is not None and v.notna().any() and np.all(np.mod(v.dropna(), 1) == 0):
            digits[c] = 0
    head = "".join(f'<th class="{"l" if c in text_cols else ""}">{_e(labels.get(c, c))}</th>' for c in cols)
    rows = []
    for _, r in df.head(max_rows).iterrows():
        cells = "".join(
            f'<td class="{"l" if c in text_cols else ""}">{_e(_fmt(r[c], digits.get(c, 2)))}</td>' for c in cols
        )
        rows.append(f"<tr>{cells}</tr>")
    more = f'<p class="note">{len(df) - max_rows} more rows are in the CSV file.</p>' if len(df) > max_rows else ""
    return f'<div class="wrap"><table class="data"><thead><tr>{head}</tr></thead><tbody>{"".join(rows)}</tbody></table></div>{more}'


def _img(uri: str, alt: str, caption: str = "") -> str:
    cap = f"<figcaption>{_e(caption)}</figcaption>" if caption else ""
    return f'<figure><img src="{uri}" alt="{_e(alt)}">{cap}</figure>'


def _shot_counts(data: ReportData) -> pd.DataFrame:
    """Per shot: start, duration, struck ball, strike speed and counts (from shots.csv where it
    has them, else counted from events.csv)."""
    names = ball_names(data.tracks)
    ev = data.events
    rows = []
    for _, s in data.shots.iterrows():
        k = int(s["shot"])
        e = ev[ev["shot"] == k] if len(ev) else ev
        start = e[e["kind"] == "start"] if len(e) else e
        cue = int(s["cue_track"]) if math.isfinite(_num(s, "cue_track")) else -1
        strike = start[start["track"] == cue]["speed_out"] if len(start) else pd.Series(dtype=float)
        cush = int((e["kind"] == "cushion").sum()) if len(e) else 0
        coll = int((e["kind"] == "collision").sum()) // 2 if len(e) else 0
        pocketed = int((e["kind"] == "pocket").sum()) if len(e) else 0
        moved = int(e["track"].nunique()) if len(e) else 0
        rows.append({
            "shot": k,
            "t_start": _num(s, "t_start"),
            "duration": _num(s, "t_end") - _num(s, "t_start"),
            "struck": names.get(cue, (f"#{cue}", ""))[0],
            "strike_speed": float(strike.iloc[0]) / 1000.0 if len(strike) else math.nan,
            "balls_moved": int(_num(s, "balls_moved")) if math.isfinite(_num(s, "balls_moved")) else moved,
            "cushions": int(_num(s, "cushions")) if math.isfinite(_num(s, "cushions")) else cush,
            "collisions": int(_num(s, "collisions")) if math.isfinite(_num(s, "collisions")) else coll,
            "pocketed": int(_num(s, "pocketed")) if math.isfinite(_num(s, "pocketed")) else pocketed,
        })
    return pd.DataFrame(rows, columns=["shot", "t_start", "duration", "struck", "strike_speed", "balls_moved",
                                       "cushions", "collisions", "pocketed"])


SHOT_LABELS = {"shot": "shot", "t_start": "starts at (s)", "duration": "lasts (s)", "struck": "struck ball",
               "strike_speed": "strike speed (m/s)", "balls_moved": "balls moved", "cushions": "cushion contacts",
               "collisions": "collisions", "pocketed": "pocketed"}

BANK_LABELS = {
    "shot": "shot", "track": "ball", "kind": "kind", "intent": "intent", "rail": "bank rail",
    "contact_diamond": "met rail at (diamonds)", "declared_diamond": "declared (diamonds)",
    "aim_error_diamonds": "aim error (diamonds)", "aim_error_mm": "aim error (mm)",
    "mirror_diamond": "mirror contact (diamonds)", "speed_in_mm_s": "speed in (mm/s)", "band": "speed band",
    "rebound_dev_deg": "rebound wider by (deg)", "dev_model_deg": "of which cushion (deg)",
    "dev_spin_deg": "of which spin (deg)", "target": "target", "long_diamonds": "long (+)/short (-) (diamonds)",
    "long_mm": "long/short (mm)", "made": "made", "correction_diamonds": "aim correction (diamonds)",
    "start_x_mm": "start x (mm)", "start_y_mm": "start y (mm)", "english": "side spin",
}


MEASURE_WORDS = {
    "speed_ratio": "speed ratio kept off the cushion (fitted)",
    "segment_shortfall": "stretch between sights below its rail by",
    "rolling_deceleration": "rolling ball slows by (cloth)",
    "sliding_deceleration": "sliding ball slows by (cloth)",
    "table_lengths_measured": "table lengths a firm shot ran (measured)",
    "table_lengths_predicted": "table lengths a firm shot runs (predicted)",
}


def _event_rows(events: pd.DataFrame, names: dict[int, tuple[str, str]], max_rows: int) -> str:
    """The shot's events as a small table for people."""
    if len(events) == 0:
        return '<p class="note">No events in this shot.</p>'
    rows = []
    n_cushion = 0
    for _, e in events.sort_values("t").head(max_rows).iterrows():
        kind = str(e["kind"])
        who = names.get(int(e["track"]), (f"#{int(e['track'])}", ""))[0]
        where = ""
        if kind == "cushion":
            n_cushion += 1
            where = f"{n_cushion}: {_text(e, 'rail')} rail at {_fmt(_num(e, 'diamond'), 2)} diamonds"
        elif kind == "collision" and math.isfinite(_num(e, "other")):
            where = f"with {names.get(int(_num(e, 'other')), ('#' + str(int(_num(e, 'other'))), ''))[0]}"
        elif kind == "pocket":
            where = _text(e, "pocket")
        angles = ""
        if kind == "cushion":
            angles = f"{_fmt(_num(e, 'angle_in'), 1)} / {_fmt(_num(e, 'angle_out'), 1)}"
        rows.append(
            f'<tr><td>{_fmt(_num(e, "t"), 3)}</td><td class="l">{_e(who)}</td><td class="l">{_e(kind)}</td>'
            f'<td class="l">{_e(where)}</td><td>{_fmt(_num(e, "speed_in"), 0)}</td><td>{_fmt(_num(e, "speed_out"), 0)}</td>'
            f'<td>{_e(angles)}</td><td>{_fmt(_num(e, "restitution"), 3)}</td></tr>'
        )
    more = f'<p class="note">{len(events) - max_rows} more events in events.csv.</p>' if len(events) > max_rows else ""
    return (
        '<details><summary>events of this shot</summary><div class="wrap"><table class="data"><thead><tr>'
        '<th>time (s)</th><th class="l">ball</th><th class="l">event</th><th class="l">where</th>'
        '<th>speed in (mm/s)</th><th>speed out (mm/s)</th><th>angle in / out (deg)</th><th>speed ratio</th>'
        f'</tr></thead><tbody>{"".join(rows)}</tbody></table></div>{more}</details>'
    )


def _shot_sentence(row: pd.Series, events: pd.DataFrame, names: dict[int, tuple[str, str]]) -> str:
    parts = [f"{row['struck']} struck"]
    if math.isfinite(row["strike_speed"]):
        parts[0] += f" at {row['strike_speed']:.2f} m/s"
    parts.append(f"{row['cushions']} cushion contact{'s' if row['cushions'] != 1 else ''}")
    parts.append(f"{row['collisions']} collision{'s' if row['collisions'] != 1 else ''}")
    pk = events[events["kind"] == "pocket"] if len(events) else events
    if len(pk):
        who = ", ".join(names.get(int(t), (f"#{int(t)}", ""))[0] for t in pk["track"])
        parts.append(f"pocketed: {who}")
    else:
        parts.append("nothing pocketed")
    return "; ".join(parts) + "."


def build_html(data: ReportData, config: ReportConfig = ReportConfig()) -> str:
    """The whole report page (HTML5 text): guide, summary, bank audit, cushion check, one
    diagram per shot, notes. Every figure is embedded; nothing refers outside the page."""
    table = data.table
    names = ball_names(data.tracks)
    counts = _shot_counts(data)
    ev = data.events
    n_cush = int((ev["kind"] == "cushion").sum()) if len(ev) else 0
    n_coll = int((ev["kind"] == "collision").sum()) // 2 if len(ev) else 0
    n_pocket = int((ev["kind"] == "pocket").sum()) if len(ev) else 0
    duration = float(data.tracks["t"].max()) if len(data.tracks) else 0.0
    clip = str(data.run.get("clip", "")) or "(not recorded)"
    parts: list[str] = []
    parts.append(
        f"<header><h1>{_e(data.title)}</h1><p>{_e(table.name)} table, playing area "
        f"{table.length_mm:g} x {table.width_mm:g} mm, balls {table.ball_diameter_mm:g} mm &middot; clip: {_e(clip)}</p></header>"
    )
    parts.append("<main>")
    parts.append(
        '<div class="guide"><b>How to read this report.</b> railtrace followed every ball in the clip '
        "from a fixed overhead camera and worked out where each one went, in millimetres on the table."
        "<ul>"
        "<li>A <b>shot</b> runs from the moment the cue strikes a ball until every ball is still.</li>"
        "<li>Each shot below is drawn as a <b>table seen from above, to scale</b>: the brown band is the "
        "rail, the small pale diamonds are the sights, the dark circles the pockets. Each ball's path "
        "is a coloured line from an open circle (where it was when the shot began) to a filled circle "
        "(where it stopped); grey discs are balls that did not move.</li>"
        "<li>Markers show what happened: a white diamond where a ball touched a cushion (numbered in "
        "time order), a yellow star for a collision between two balls, a black cross where a ball "
        "dropped into a pocket.</li>"
        "<li><b>Speed ratio</b> is how much of a ball's speed into a cushion it kept coming off it "
        "(measured square to the cushion): higher means a livelier cushion.</li>"
        "<li>Diamonds count along a rail from its left or lower end: eight along a long rail, four "
        "along a short one.</li>"
        "</ul></div>"
    )
    # --- summary
    parts.append("<h2>Summary</h2>")
    cards = [
        (str(len(data.shots)), "shots"),
        (f"{duration:.1f} s", "of play followed"),
        (str(len(names)), "balls on the table"),
        (str(n_cush), "cushion contacts"),
        (str(n_coll), "ball-ball collisions"),
        (str(n_pocket), "balls pocketed"),
    ]
    if data.banks is not None:
        cards.append((str(len(data.banks)), "bank shots audited"))
        if "made" in data.banks.columns and len(data.banks):
            made = data.banks["made"].astype(str).str.lower().isin(["1", "true", "1.0"])
            cards.append((f"{int(made.sum())} of {len(made)}", "banks made"))
    parts.append('<div class="cards">' + "".join(f"<div class=card><b>{_e(v)}</b><span>{_e(k)}</span></div>" for v, k in cards) + "</div>")
    if len(data.shots) == 0:
        parts.append('<p>No ball moved in this clip, so there are no shots to show. The balls were '
                     "tracked where they rested.</p>")
    uri = summary_figure(data.shots, ev, config.dpi)
    if uri:
        parts.append(_img(uri, "strike speed per shot and cushion speed ratios",
                          "Left: how hard each shot was struck. Right: every cushion contact, the speed "
                          "ratio against how fast the ball hit the cushion square-on, one colour per rail."))
    if len(counts):
        parts.append(html_table(counts, SHOT_LABELS, {"t_start": 2, "duration": 2, "strike_speed": 2}))
    # --- bank audit
    if data.banks is not None:
        parts.append("<h2>Bank shots</h2>")
        parts.append('<p>For each bank: where the player said they aimed on the rail (<b>declared</b>), '
                     "where a mirror-image reflection off the line the ball's centre turns on says the "
                     "ball should meet the rail to reach its target (<b>mirror line</b>), and where it "
                     "really met the rail. In the shot diagrams the declared aim is a purple dashed line "
                     "and the mirror line a teal dotted one.</p>")
        if data.bank_findings:
            parts.append("<ul>" + "".join(f"<li>{_e(x)}</li>" for x in data.bank_findings) + "</ul>")
        uri = bank_figure(data.banks, config.dpi)
        if uri:
            parts.append(_img(uri, "bank aim error and finish against speed",
                              "Each dot is one bank; hollow dots missed. Zero is a bank that met the rail "
                              "exactly where it was aimed (left) or finished on its target line (right)."))
        if len(data.banks):
            parts.append(html_table(data.banks, BANK_LABELS))
        else:
            parts.append('<p class="note">The bank audit found no bank shots in this clip.</p>')
        if data.bank_stats is not None and len(data.bank_stats):
            parts.append("<h3>By group</h3>" + html_table(data.bank_stats))
    for caption, uri in data.images:
        if caption.startswith("bank"):
            parts.append(_img(uri, caption, caption))
    # --- cushion check
    parts.append("<h2>Cushions</h2>")
    rail_imgs = [(c, u) for c, u in data.images if not c.startswith("bank")]
    if data.cushion_summary:
        parts.append(f"<p>{_e(data.cushion_summary)}</p>")
    for caption, uri in rail_imgs:
        parts.append(_img(uri, caption, caption))
    if data.cushion_results is not None and len(data.cushion_results):
        cr = data.cushion_results
        keep = [c for c in ("measure", "rail", "segment", "band", "speed_ref_mm_s", "n", "value", "ci_low", "ci_high",
                            "unit", "p_adjusted", "flagged") if c in cr.columns]
        sel = cr[cr["measure"].isin(["speed_ratio", "segment_shortfall", "rolling_deceleration",
                                     "sliding_deceleration", "table_lengths_measured",
                                     "table_lengths_predicted"])] if "measure" in cr.columns else cr
        sel = (sel[keep] if keep else sel).copy()
        if "measure" in sel.columns:
            sel["measure"] = [MEASURE_WORDS.get(m, m) for m in sel["measure"]]
        parts.append(html_table(sel, {
            "speed_ref_mm_s": "at speed (mm/s)", "ci_low": "95% low", "ci_high": "95% high",
            "p_adjusted": "p (adjusted)", "flagged": "flagged dead"}, {"value": 3, "ci_low": 3, "ci_high": 3,
                                                                      "p_adjusted": 3, "speed_ref_mm_s": 0}))
    elif not rail_imgs:
        parts.append('<p class="note">No cushion check could be made from this clip (see the notes at the end).</p>')
    # --- shots
    if len(data.shots):
        parts.append("<h2>Every shot</h2>")
        parts.append('<div class="shots">')
        banks_by_shot = {}
        if data.banks is not None and "shot" in data.banks.columns:
            for _, b in data.banks.iterrows():
                if math.isfinite(_num(b, "shot")):
                    banks_by_shot.setdefault(int(_num(b, "shot")), b)
        tr = data.tracks
        for (_, s), (_, c) in zip(data.shots.iterrows(), counts.iterrows()):
            k = int(s["shot"])
            t0, t1 = _num(s, "t_start"), _num(s, "t_end")
            part = tr[(tr["t"] >= t0 - 1e-9) & (tr["t"] <= t1 + 1e-9)]
            e = ev[ev["shot"] == k] if len(ev) else ev
            fig = shot_figure(table, part, e, names, config, banks_by_shot.get(k))
            uri = figure_uri(fig, config.dpi)
            bank_line = ""
            b = banks_by_shot.get(k)
            if b is not None:
                bits = []
                if math.isfinite(_num(b, "contact_diamond")):
                    bits.append(f"met the {_text(b, 'rail')} rail at {_num(b, 'contact_diamond'):.2f} diamonds")
                if math.isfinite(_num(b, "declared_diamond")):
                    bits.append(f"declared {_num(b, 'declared_diamond'):.2f}")
                if math.isfinite(_num(b, "mirror_diamond")):
                    bits.append(f"mirror line {_num(b, 'mirror_diamond'):.2f}")
                if _text(b, "made"):
                    bits.append("made" if _text(b, "made").lower() in ("1", "true", "1.0") else "missed")
                bank_line = f'<p><b>Bank:</b> {_e("; ".join(bits))}.</p>' if bits else ""
            parts.append(
                f'<section class="shot" id="shot-{k}"><h3>Shot {k} &middot; {t0:.2f} s to {t1:.2f} s</h3>'
                f"<p>{_e(_shot_sentence(c, e, names))}</p>{bank_line}"
                f'{_img(uri, f"table diagram of shot {k}")}'
                f"{_event_rows(e, names, config.max_event_rows)}</section>"
            )
        parts.append("</div>")
    if data.notes:
        parts.append("<h2>Notes</h2><ul>" + "".join(f"<li>{_e(n)}</li>" for n in data.notes) + "</ul>")
    version = data.run.get("railtrace_version", "")
    parts.append(
        f"<footer>Made by railtrace {_e(version)}. Units: millimetres and seconds; speeds in mm/s or m/s as "
        "labelled; angles in degrees from the cushion's normal (0 is square into the rail). The numbers "
        "behind every figure are in the results folder's CSV files.</footer></main>"
    )
    body = "\n".join(parts)
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{_e(data.title)}</title><style>{CSS}</style></head><body>\n{body}\n</body></html>\n"
    )
