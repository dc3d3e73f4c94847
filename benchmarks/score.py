"""Accuracy scorer: compare a railtrace results folder with a truth folder.

Both folders follow ``spec/results-format.md``: ``tracks.csv``, ``events.csv``, ``shots.csv`` and
``calibration.json``. Positions are mm in the table frame, times s, speeds mm/s, angles degrees.
Only ``table.length_mm`` and ``table.width_mm`` are read from ``calibration.json`` (the truth's,
else the results'); every other key is ignored.

What is scored, in order:

1. **Table frame.** The results may have their origin at the opposite corner; the only two
   right-handed frames with x along a long cushion are the identity and the 180-degree turn
   (:func:`rotate_tracks_180`, :func:`rotate_events_180`). Both are scored on ball positions and
   the one with the smaller median position error is kept (rule in :func:`choose_frame`).
2. **Tracks.** Per frame, result balls are assigned to truth balls by the Hungarian method on
   centre distance, gated at ``gate_mm`` (:func:`match_frames`). Counts follow CLEAR-MOT
   (Bernardin & Stiefelhagen 2008, "Evaluating multiple object tracking performance: the CLEAR
   MOT metrics", EURASIP J. Image and Video Processing): misses, false positives, identity
   switches, MOTA = 1 - (misses + false positives + switches) / truth ball-frames, and MOTP as the
   mean matched distance (mm).
3. **Position error** of matched ball-frames (mm), over all, moving and resting (truth speed
   against ``moving_mm_s``), and split by the results' ``seen`` flag when present.
4. **Events.** Result events are matched one-to-one to truth events of the same kind by the
   Hungarian method on time difference within ``window_s``, through the identity map that sends
   each result track to the truth track it matched most often (:func:`match_events`). Cushion
   contacts must also share the rail; collisions the unordered ball pair.

Percentiles use numpy's default linear interpolation. A metric without data is ``None``.
"""

from __future__ import annotations

import argparse
import json
import logging
import math
import numbers
import re
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

from vision.table import POOL_BALL_DIAMETER_MM, RAILS, TableSpec

logger = logging.getLogger(__name__)

DEFAULT_GATE_MM = POOL_BALL_DIAMETER_MM
DEFAULT_WINDOW_S = 0.1
DEFAULT_MOVING_MM_S = 20.0
# Both rows of one collision carry the same interpolated time; 1 ms separates genuine repeats.
COLLISION_DEDUPE_S = 1e-3
# Slack for values that went through decimal text (CSV), so a value exactly on a gate or window
# edge is not lost to rounding.
_EDGE_SLACK = 1e-9

FRAMES = ("identity", "rotated_180")
EVENT_KINDS = ("start", "collision", "cushion", "pocket", "stop")
LONG_RAILS = ("bottom", "top")

TRACK_COLUMNS = ("frame", "t", "track", "x", "y", "vx", "vy")
EVENT_COLUMNS = (
    "t", "kind", "track", "other", "x", "y", "rail", "diamond",
    "speed_in", "speed_out", "angle_in", "angle_out", "restitution",
)  # fmt: skip
SHOT_COLUMNS = ("shot", "t_start", "t_end")
_ID_COLUMNS = ("track", "other")
_TEXT_COLUMNS = ("kind", "rail", "ball")


class ScoreInputError(ValueError):
    """A results or truth folder does not follow the results format; the message is one line."""


# --- reading ---------------------------------------------------------------------------------
_INT_TEXT = re.compile(r"^(-?\d+)\.0*$")


def _text_or_none(value) -> str | None:
    """A cell as stripped text, None when empty (plain Python objects, no pandas NA)."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return None
    text = str(value).strip()
    return text or None


def _normalise_id(value) -> str | None:
    """A track id as text, with ``3.0`` written as ``3`` so int and float writers agree."""
    text = _text_or_none(value)
    return None if text is None else _INT_TEXT.sub(r"\1", text)


def _read_csv(path: Path, required: tuple[str, ...], numeric: tuple[str, ...]) -> pd.DataFrame:
    """Read one results-format CSV and check its columns; ScoreInputError names the problem."""
    if not path.is_file():
        raise ScoreInputError(f"{path}: file not found; the results format needs this file")
    dtypes = {c: "string" for c in _ID_COLUMNS + _TEXT_COLUMNS}
    try:
        df = pd.read_csv(path, dtype=dtypes, keep_default_na=True)
    except pd.errors.EmptyDataError:
        raise ScoreInputError(f"{path}: file is empty; write at least the header row") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise ScoreInputError(f"{path}: not a readable CSV ({first})") from None
    df.columns = [str(c).strip() for c in df.columns]
    for col in required:
        if col not in df.columns:
            raise ScoreInputError(
                f"{path}: missing column {col!r}; required columns are {', '.join(required)}"
            )
    for col in numeric:
        if col in df.columns and not pd.api.types.is_numeric_dtype(df[col]):
            as_num = pd.to_numeric(df[col], errors="coerce")
            bad = df[col][as_num.isna() & df[col].notna()]
            if bad.empty:  # e.g. a header-only file: no values, so nothing non-numeric
                df[col] = as_num.astype(float)
                continue
            raise ScoreInputError(
                f"{path}: column {col!r} must be numeric, found {bad.iloc[0]!r} "
                f"on data row {int(bad.index[0]) + 1}; write numbers (empty for none)"
            )
    # Plain str / None cells, so comparisons never meet pandas' three-valued NA.
    for col in _ID_COLUMNS:
        if col in df.columns:
            df[col] = pd.Series([_normalise_id(v) for v in df[col]], index=df.index, dtype=object)
    for col in _TEXT_COLUMNS:
        if col in df.columns:
            df[col] = pd.Series([_text_or_none(v) for v in df[col]], index=df.index, dtype=object)
    return df


def read_tracks(path: Path) -> pd.DataFrame:
    """``tracks.csv`` as a DataFrame with columns frame (int), t, track (str), x, y, vx, vy and,
    where present, seen (float, 1/0) and ball; row order as in the file, index 0..N-1."""
    numeric = ("frame", "t", "x", "y", "vx", "vy", "seen")
    df = _read_csv(path, TRACK_COLUMNS, numeric).reset_index(drop=True)
    for col in ("frame", "t", "x", "y"):
        values = df[col].to_numpy(dtype=float)
        bad = ~np.isfinite(values)
        if bad.any():
            row = int(np.flatnonzero(bad)[0])
            raise ScoreInputError(
                f"{path}: column {col!r} is empty or not finite on data row {row + 1}; "
                "every tracks row needs frame, t, x and y"
            )
    if df["track"].isna().any():
        row = int(np.flatnonzero(df["track"].isna().to_numpy())[0])
        raise ScoreInputError(f"{path}: column 'track' is empty on data row {row + 1}")
    frames = df["frame"].to_numpy(dtype=float)
    if np.any(frames != np.round(frames)):
        row = int(np.flatnonzero(frames != np.round(frames))[0])
        raise ScoreInputError(
            f"{path}: column 'frame' must hold whole frame indices, found {frames[row]!r} "
            f"on data row {row + 1}"
        )
    df["frame"] = frames.astype(np.int64)
    dup = df.duplicated(["frame", "track"])
    if dup.any():
        row = int(np.flatnonzero(dup.to_numpy())[0])
        raise ScoreInputError(
            f"{path}: track {df['track'].iloc[row]!r} appears twice in frame "
            f"{df['frame'].iloc[row]} (data row {row + 1}); one row per ball per frame"
        )
    return df


def read_events(path: Path) -> pd.DataFrame:
    """``events.csv`` as a DataFrame with the columns of :data:`EVENT_COLUMNS` (track, other,
    kind, rail as str or missing; the rest float); index 0..N-1 in file order."""
    numeric = ("t", "x", "y", "diamond", "speed_in", "speed_out", "angle_in", "angle_out",
               "restitution", "event", "shot")  # fmt: skip
    df = _read_csv(path, EVENT_COLUMNS, numeric).reset_index(drop=True)
    for i, kind in enumerate(df["kind"]):
        if kind not in EVENT_KINDS:
            raise ScoreInputError(
                f"{path}: unknown event kind {kind!r} on data row {i + 1}; "
                f"use one of {', '.join(EVENT_KINDS)}"
            )
    t = df["t"].to_numpy(dtype=float)
    if (~np.isfinite(t)).any():
        row = int(np.flatnonzero(~np.isfinite(t))[0])
        raise ScoreInputError(f"{path}: column 't' is empty or not finite on data row {row + 1}")
    if df["track"].isna().any():
        row = int(np.flatnonzero(df["track"].isna().to_numpy())[0])
        raise ScoreInputError(f"{path}: column 'track' is empty on data row {row + 1}")
    cushion = df["kind"] == "cushion"
    for i in np.flatnonzero(cushion.to_numpy()):
        if df["rail"].iloc[i] not in RAILS:
            raise ScoreInputError(
                f"{path}: cushion event on data row {i + 1} has rail {df['rail'].iloc[i]!r}; "
                f"use one of {', '.join(RAILS)}"
            )
    collision = (df["kind"] == "collision").to_numpy()
    missing_other = collision & df["other"].isna().to_numpy()
    if missing_other.any():
        row = int(np.flatnonzero(missing_other)[0])
        raise ScoreInputError(
            f"{path}: collision on data row {row + 1} has no 'other' track; name both balls"
        )
    return df


def read_shots(path: Path) -> pd.DataFrame:
    """``shots.csv`` as a DataFrame with at least shot, t_start, t_end."""
    return _read_csv(path, SHOT_COLUMNS, SHOT_COLUMNS)


def read_table_size(truth_dir: Path, results_dir: Path) -> tuple[float, float, str]:
    """(length_mm, width_mm, source) from ``table`` in the truth's calibration.json, else the
    results'; ``source`` is ``"truth"`` or ``"results"``."""
    tried = []
    for source, folder in (("truth", truth_dir), ("results", results_dir)):
        path = folder / "calibration.json"
        if not path.is_file():
            tried.append(f"{path} (not found)")
            continue
        try:
            data = json.loads(path.read_text())
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise ScoreInputError(f"{path}: not valid JSON ({exc})") from None
        table = data.get("table") if isinstance(data, dict) else None
        if not isinstance(table, dict) or "length_mm" not in table or "width_mm" not in table:
            tried.append(f"{path} (no table.length_mm/table.width_mm)")
            continue
        try:
            length, width = float(table["length_mm"]), float(table["width_mm"])
        except (TypeError, ValueError):
            raise ScoreInputError(
                f"{path}: table.length_mm={table['length_mm']!r}, table.width_mm="
                f"{table['width_mm']!r} must be numbers of mm"
            ) from None
        if not (math.isfinite(length) and math.isfinite(width) and 0 < width <= length):
            raise ScoreInputError(
                f"{path}: table {length:g} x {width:g} mm is not a playing area; give "
                "table.length_mm >= table.width_mm > 0, e.g. 2540 and 1270"
            )
        return length, width, source
    raise ScoreInputError(
        "no table size: need table.length_mm and table.width_mm in " + " or ".join(tried)
    )


# --- frames ----------------------------------------------------------------------------------
_RAIL_TURNED = {"bottom": "top", "top": "bottom", "left": "right", "right": "left"}


def rotate_tracks_180(tracks: pd.DataFrame, length_mm: float, width_mm: float) -> pd.DataFrame:
    """Tracks in the frame turned 180 degrees about the table centre (a copy).

    (x, y) -> (L - x, W - y) and (vx, vy) -> (-vx, -vy), mm and mm/s; other columns unchanged.
    Applying it twice gives the input back.
    """
    out = tracks.copy()
    out["x"] = length_mm - tracks["x"]
    out["y"] = width_mm - tracks["y"]
    out["vx"] = -tracks["vx"]
    out["vy"] = -tracks["vy"]
    return out


def rotate_events_180(events: pd.DataFrame, length_mm: float, width_mm: float) -> pd.DataFrame:
    """Events in the frame turned 180 degrees about the table centre (a copy).

    Positions as in :func:`rotate_tracks_180`; rails bottom <-> top and left <-> right; diamonds
    d -> 8 - d on long rails and 4 - d on short ones (the rail's lower-coordinate end swaps with
    its upper end; a long rail is 8 diamonds, a short one 4); cushion angles change sign.

    Why the angles change sign: the format signs an angle by the velocity's component along the
    rail, positive toward increasing rail coordinate (x on bottom/top, y on left/right). The turn
    maps bottom <-> top and left <-> right, so the rail coordinate stays x (or y), but every
    velocity becomes (-vx, -vy): the along-rail component flips sign. The angle's size (between
    the velocity and the normal) is unchanged by a rotation, so angle_in and angle_out -> -angle.
    Speeds and restitution are magnitudes and ratios of normal components: unchanged.
    """
    out = events.copy()
    out["x"] = length_mm - events["x"]
    out["y"] = width_mm - events["y"]
    out["rail"] = events["rail"].map(lambda r: _RAIL_TURNED.get(r, r))
    long_rail = events["rail"].isin(LONG_RAILS)
    out["diamond"] = np.where(long_rail, 8.0 - events["diamond"], 4.0 - events["diamond"])
    out["angle_in"] = -events["angle_in"]
    out["angle_out"] = -events["angle_out"]
    return out


# --- matching --------------------------------------------------------------------------------
def _assign(cost: np.ndarray, limit: float) -> tuple[np.ndarray, np.ndarray]:
    """Hungarian assignment keeping only pairs with cost <= limit (most pairs first, then least
    total cost). ``cost`` is an (n, m) array; returns row and column indices of kept pairs."""
    ok = cost <= limit + _EDGE_SLACK
    if not ok.any():
        return np.empty(0, dtype=int), np.empty(0, dtype=int)
    # A penalty above the largest possible sum of admissible costs makes the solver prefer one
    # more admissible pair over any saving in distance.
    big = (limit + 1.0) * (min(cost.shape) + 1)
    rows, cols = linear_sum_assignment(np.where(ok, cost, big))
    keep = ok[rows, cols]
    return rows[keep], cols[keep]


def match_frames(truth: pd.DataFrame, results: pd.DataFrame, gate_mm: float) -> pd.DataFrame:
    """Per-frame one-to-one assignment of result balls to truth balls.

    ``truth`` and ``results`` are tracks tables (columns frame, track, x, y in mm) indexed
    0..N-1. In each frame the Hungarian method minimises the total centre distance over pairs no
    further apart than ``gate_mm``, after first maximising the number of such pairs.

    Returns a DataFrame, one row per matched ball-frame: frame, truth_row, result_row (positions
    in the inputs), truth_track, result_track, error_mm (Euclidean centre distance).
    """
    columns = ["frame", "truth_row", "result_row", "truth_track", "result_track", "error_mm"]
    tf = truth["frame"].to_numpy(dtype=np.int64)
    rf = results["frame"].to_numpy(dtype=np.int64)
    t_order = np.argsort(tf, kind="stable")
    r_order = np.argsort(rf, kind="stable")
    tf_sorted, rf_sorted = tf[t_order], rf[r_order]
    common = np.intersect1d(tf_sorted, rf_sorted)
    t_lo, t_hi = (np.searchsorted(tf_sorted, common, side) for side in ("left", "right"))
    r_lo, r_hi = (np.searchsorted(rf_sorted, common, side) for side in ("left", "right"))
    txy = truth[["x", "y"]].to_numpy(dtype=float)
    rxy = results[["x", "y"]].to_numpy(dtype=float)
    out_t, out_r, out_d = [], [], []
    for a, b, c, d in zip(t_lo, t_hi, r_lo, r_hi):
        ti, ri = t_order[a:b], r_order[c:d]
        dist = np.hypot(*(txy[ti, None, :] - rxy[None, ri, :]).transpose(2, 0, 1))
        rows, cols = _assign(dist, gate_mm)
        out_t.append(ti[rows])
        out_r.append(ri[cols])
        out_d.append(dist[rows, cols])
    if not out_t:
        return pd.DataFrame({c: pd.Series(dtype=float if c == "error_mm" else object)
                             for c in columns})  # fmt: skip
    trow, rrow = np.concatenate(out_t), np.concatenate(out_r)
    return pd.DataFrame(
        {
            "frame": tf[trow],
            "truth_row": trow,
            "result_row": rrow,
            "truth_track": truth["track"].to_numpy()[trow],
            "result_track": results["track"].to_numpy()[rrow],
            "error_mm": np.concatenate(out_d),
        }
    )


def identity_map(matches: pd.DataFrame) -> dict[str, str]:
    """Each result track -> the truth track it matched in most frames.

    Ties go to the smaller mean error, then the smaller truth track id (as text), so the map is
    deterministic. Result tracks never matched are absent.
    """
    if matches.empty:
        return {}
    g = matches.groupby(["result_track", "truth_track"], sort=True)["error_mm"]
    table = pd.DataFrame({"n": g.size(), "mean": g.mean()}).reset_index()
    table = table.sort_values(
        ["result_track", "n", "mean", "truth_track"], ascending=[True, False, True, True]
    )
    best = table.drop_duplicates("result_track", keep="first")
    return dict(zip(best["result_track"], best["truth_track"]))


def count_switches(matches: pd.DataFrame) -> int:
    """Identity switches (CLEAR-MOT): per truth track, the number of times its matched result
    track differs from the one matched at its previous matched frame."""
    if matches.empty:
        return 0
    m = matches.sort_values(["truth_track", "frame"], kind="stable")
    same_truth = m["truth_track"].to_numpy()[1:] == m["truth_track"].to_numpy()[:-1]
    changed = m["result_track"].to_numpy()[1:] != m["result_track"].to_numpy()[:-1]
    return int(np.sum(same_truth & changed))


def choose_frame(
    truth: pd.DataFrame, results_by_frame: dict[str, pd.DataFrame], gate_mm: float
) -> tuple[str, dict[str, dict], dict[str, pd.DataFrame]]:
    """Pick the results frame that fits the truth best.

    The key is the median position error over *all* truth ball-frames, a miss counting as an
    infinite error, so a frame in which a few balls match by coincidence cannot beat one in which
    most match; ties (e.g. both frames match under half) go to more matches, then the smaller
    median error of matched ball-frames, then the identity.

    Returns (chosen name, per-frame summary {matched, median_error_mm}, per-frame matches).
    """
    summaries, all_matches, keys = {}, {}, []
    for order, name in enumerate(FRAMES):
        m = match_frames(truth, results_by_frame[name], gate_mm)
        errors = np.full(len(truth), np.inf)
        errors[m["truth_row"].to_numpy(dtype=int)] = m["error_mm"].to_numpy(dtype=float)
        overall = float(np.median(errors)) if len(errors) else math.inf
        matched_median = float(m["error_mm"].median()) if len(m) else math.inf
        keys.append((overall, -len(m), matched_median, order))
        all_matches[name] = m
        summaries[name] = {
            "matched": len(m),
            "median_error_mm": matched_median if len(m) else None,
        }
    chosen = FRAMES[min(keys)[-1]]
    return chosen, summaries, all_matches


def match_events(
    truth_keys: pd.Series, truth_t: pd.Series, result_keys: pd.Series, result_t: pd.Series,
    window_s: float,
) -> pd.DataFrame:  # fmt: skip
    """One-to-one match of result events to truth events with equal keys and times within
    ``window_s`` (s), by the Hungarian method on |time difference| within each key.

    Keys are hashable (e.g. (truth track, rail)); a missing key (None) never matches. Returns a
    DataFrame with truth_row, result_row (index labels of the inputs) and dt_s (result - truth).
    """
    def groups(keys: pd.Series) -> dict:
        out: dict = {}
        for label, key in keys.items():
            if key is not None and not (isinstance(key, float) and math.isnan(key)):
                out.setdefault(key, []).append(label)
        return out

    t_groups, r_groups = groups(truth_keys), groups(result_keys)
    rows = []
    for key in sorted(set(t_groups) & set(r_groups), key=repr):
        ti, ri = t_groups[key], r_groups[key]
        tt = truth_t.loc[ti].to_numpy(dtype=float)
        rt = result_t.loc[ri].to_numpy(dtype=float)
        dt = rt[None, :] - tt[:, None]
        a, b = _assign(np.abs(dt), window_s)
        rows.extend((ti[i], ri[j], float(dt[i, j])) for i, j in zip(a, b))
    return pd.DataFrame(rows, columns=["truth_row", "result_row", "dt_s"]).astype(
        {"dt_s": float}
    )


def collision_pairs(events: pd.DataFrame) -> pd.DataFrame:
    """Collisions counted once per unordered ball pair: rows (track, other) and (other, track)
    within :data:`COLLISION_DEDUPE_S` of each other collapse to the first.

    Returns a DataFrame with columns a, b (the pair's track ids, sorted as text) and t (s),
    indexed by the kept event rows.
    """
    col = events[events["kind"] == "collision"]
    pairs = pd.DataFrame(
        {
            "a": [min(p, q) for p, q in zip(col["track"], col["other"])],
            "b": [max(p, q) for p, q in zip(col["track"], col["other"])],
            "t": col["t"].astype(float),
        },
        index=col.index,
    ).sort_values(["a", "b", "t"], kind="stable")
    keep = []
    last: dict = {}
    for label, a, b, t in zip(pairs.index, pairs["a"], pairs["b"], pairs["t"]):
        prev = last.get((a, b))
        if prev is None or t - prev > COLLISION_DEDUPE_S + _EDGE_SLACK:
            keep.append(label)
            last[(a, b)] = t
    return pairs.loc[keep].sort_index()


# --- statistics ------------------------------------------------------------------------------
def _finite(values) -> np.ndarray:
    v = np.asarray(values, dtype=float).ravel()
    return v[np.isfinite(v)]


def summary(values) -> dict:
    """n, median, p95, max and mean of a non-negative error (e.g. mm); None without data."""
    v = _finite(values)
    if len(v) == 0:
        return {"n": 0, "median": None, "p95": None, "max": None, "mean": None}
    return {
        "n": int(len(v)),
        "median": float(np.median(v)),
        "p95": float(np.percentile(v, 95)),
        "max": float(np.max(v)),
        "mean": float(np.mean(v)),
    }


def signed_summary(values) -> dict:
    """Statistics of |e| (median_abs, p95_abs, max_abs) and of e (median, mean) for a signed
    error e = result - truth; None without data."""
    v = _finite(values)
    if len(v) == 0:
        return {"n": 0, "median_abs": None, "p95_abs": None, "max_abs": None,
                "median": None, "mean": None}  # fmt: skip
    a = np.abs(v)
    return {
        "n": int(len(v)),
        "median_abs": float(np.median(a)),
        "p95_abs": float(np.percentile(a, 95)),
        "max_abs": float(np.max(a)),
        "median": float(np.median(v)),
        "mean": float(np.mean(v)),
    }


def _ratio(num: int, den: int) -> float | None:
    return num / den if den else None


def frame_interval_s(tracks: pd.DataFrame) -> float | None:
    """Median spacing of consecutive distinct frame times in a tracks table (s); None if the
    table has fewer than two frames."""
    times = np.unique(tracks["t"].to_numpy(dtype=float))
    if len(times) < 2:
        return None
    return float(np.median(np.diff(times)))


# --- scoring ---------------------------------------------------------------------------------
@dataclass
class Comparison:
    """Everything the score is computed from, for per-ball or per-event follow-up.

    ``track_matches`` is :func:`match_frames` output joined with truth speed (mm/s) and the
    results' ``seen``; ``event_matches`` maps each event kind to a DataFrame of matched pairs with
    per-pair errors (columns listed in :func:`compare`).
    """

    frame: str
    frame_candidates: dict
    length_mm: float
    width_mm: float
    table_source: str
    frame_interval_s: float | None
    truth_tracks: pd.DataFrame
    result_tracks: pd.DataFrame
    truth_events: pd.DataFrame
    result_events: pd.DataFrame
    truth_shots: pd.DataFrame
    result_shots: pd.DataFrame
    track_matches: pd.DataFrame
    identity: dict
    event_matches: dict
    event_counts: dict


def _validate_params(gate_mm: float, window_s: float, moving_mm_s: float) -> None:
    for name, value, fix in (
        ("gate_mm", gate_mm, "e.g. one ball diameter, 57.15"),
        ("window_s", window_s, "e.g. 0.1"),
        ("moving_mm_s", moving_mm_s, "e.g. 20"),
    ):
        real = isinstance(value, numbers.Real) and not isinstance(value, bool)
        if not (real and math.isfinite(value) and value > 0):
            raise ValueError(f"{name} must be a positive number, got {value!r}; {fix}")


def compare(
    results_dir,
    truth_dir,
    gate_mm: float = DEFAULT_GATE_MM,
    window_s: float = DEFAULT_WINDOW_S,
    moving_mm_s: float = DEFAULT_MOVING_MM_S,
) -> Comparison:
    """Read both folders, choose the results' frame, and match tracks and events.

    Event match tables (one row per matched pair) have truth_row, result_row, dt_s, dt_ms,
    dt_frames (time error over the truth frame interval) and, for ``cushion``: rail (truth),
    position_mm, along_mm, along_diamonds, speed_in_pct, speed_out_pct, angle_in_deg,
    angle_out_deg, restitution. Signed errors are result - truth; along-rail errors use x on
    bottom/top and y on left/right, and diamonds come from the ``diamond`` columns; speed errors
    are percent of the truth speed.
    """
    _validate_params(gate_mm, window_s, moving_mm_s)
    results_dir, truth_dir = Path(results_dir), Path(truth_dir)
    truth_tracks = read_tracks(truth_dir / "tracks.csv")
    truth_events = read_events(truth_dir / "events.csv")
    truth_shots = read_shots(truth_dir / "shots.csv")
    res_tracks = read_tracks(results_dir / "tracks.csv")
    res_events = read_events(results_dir / "events.csv")
    res_shots = read_shots(results_dir / "shots.csv")
    length, width, table_source = read_table_size(truth_dir, results_dir)
    table = TableSpec("scored", length_mm=length, width_mm=width)

    by_frame = {
        "identity": (res_tracks, res_events),
        "rotated_180": (
            rotate_tracks_180(res_tracks, length, width),
            rotate_events_180(res_events, length, width),
        ),
    }
    chosen, candidates, all_matches = choose_frame(
        truth_tracks, {k: v[0] for k, v in by_frame.items()}, gate_mm
    )
    res_tracks, res_events = by_frame[chosen]
    matches = all_matches[chosen].copy()
    tv = truth_tracks[["vx", "vy"]].to_numpy(dtype=float)
    rv = res_tracks[["vx", "vy"]].to_numpy(dtype=float)
    trow = matches["truth_row"].to_numpy(dtype=int)
    rrow = matches["result_row"].to_numpy(dtype=int)
    matches["truth_speed_mm_s"] = np.hypot(tv[trow, 0], tv[trow, 1])
    matches["velocity_error_mm_s"] = np.hypot(*(rv[rrow] - tv[trow]).T)
    if "seen" in res_tracks.columns:
        matches["seen"] = res_tracks["seen"].to_numpy(dtype=float)[rrow]
    ident = identity_map(matches)
    dt_frame = frame_interval_s(truth_tracks)

    def mapped(track_ids: pd.Series) -> pd.Series:
        return track_ids.map(lambda r: ident.get(r))

    event_matches, event_counts = {}, {}
    res_truth_track = mapped(res_events["track"])
    for kind in ("cushion", "pocket", "start", "stop"):
        te = truth_events[truth_events["kind"] == kind]
        re_ = res_events[res_events["kind"] == kind]
        if kind == "cushion":
            t_keys = pd.Series(list(zip(te["track"], te["rail"])), index=te.index, dtype=object)
            r_keys = pd.Series(
                [(tt, rail) if tt is not None else None
                 for tt, rail in zip(res_truth_track.loc[re_.index], re_["rail"])],
                index=re_.index, dtype=object,
            )  # fmt: skip
        else:
            t_keys = te["track"].astype(object)
            r_keys = res_truth_track.loc[re_.index].astype(object)
        m = match_events(t_keys, te["t"], r_keys, re_["t"], window_s)
        event_matches[kind] = m
        event_counts[kind] = (len(te), len(re_))

    tp = collision_pairs(truth_events)
    rp = collision_pairs(res_events)
    t_keys = pd.Series(list(zip(tp["a"], tp["b"])), index=tp.index, dtype=object)
    r_list = []
    for a, b in zip(rp["a"], rp["b"]):
        ta, tb = ident.get(a), ident.get(b)
        r_list.append(None if ta is None or tb is None or ta == tb else (min(ta, tb), max(ta, tb)))
    r_keys = pd.Series(r_list, index=rp.index, dtype=object)
    event_matches["collision"] = match_events(t_keys, tp["t"], r_keys, rp["t"], window_s)
    event_counts["collision"] = (len(tp), len(rp))

    for kind, m in event_matches.items():
        m["dt_ms"] = m["dt_s"] * 1e3
        m["dt_frames"] = m["dt_s"] / dt_frame if dt_frame else np.nan

    cm = event_matches["cushion"]
    if len(cm):
        te = truth_events.loc[cm["truth_row"]].reset_index(drop=True)
        re_ = res_events.loc[cm["result_row"]].reset_index(drop=True)
        cm["rail"] = te["rail"].to_numpy()
        cm["position_mm"] = np.hypot(re_["x"] - te["x"], re_["y"] - te["y"]).to_numpy()
        long_rail = te["rail"].isin(LONG_RAILS).to_numpy()
        cm["along_mm"] = np.where(long_rail, re_["x"] - te["x"], re_["y"] - te["y"])
        cm["along_diamonds"] = (re_["diamond"] - te["diamond"]).to_numpy()
        cm["diamond_mm"] = [table.diamond_mm(r) for r in te["rail"]]
        for col in ("speed_in", "speed_out"):
            truth_speed = te[col].to_numpy(dtype=float)
            with np.errstate(divide="ignore", invalid="ignore"):
                pct = 100.0 * (re_[col].to_numpy(dtype=float) - truth_speed) / truth_speed
            cm[f"{col}_pct"] = np.where(truth_speed > 0, pct, np.nan)
        cm["angle_in_deg"] = (re_["angle_in"] - te["angle_in"]).to_numpy()
        cm["angle_out_deg"] = (re_["angle_out"] - te["angle_out"]).to_numpy()
        cm["restitution"] = (re_["restitution"] - te["restitution"]).to_numpy()
    else:
        for col in ("position_mm", "along_mm", "along_diamonds", "diamond_mm", "speed_in_pct",
                    "speed_out_pct", "angle_in_deg", "angle_out_deg", "restitution"):  # fmt: skip
            cm[col] = pd.Series(dtype=float)
        cm["rail"] = pd.Series(dtype=object)

    return Comparison(
        frame=chosen,
        frame_candidates=candidates,
        length_mm=length,
        width_mm=width,
        table_source=table_source,
        frame_interval_s=dt_frame,
        truth_tracks=truth_tracks,
        result_tracks=res_tracks,
        truth_events=truth_events,
        result_events=res_events,
        truth_shots=truth_shots,
        result_shots=res_shots,
        track_matches=matches,
        identity=ident,
        event_matches=event_matches,
        event_counts=event_counts,
    )


def _frame_time_offset_ms(truth: pd.DataFrame, results: pd.DataFrame) -> float | None:
    """Largest |t_result - t_truth| over frame indices present in both, ms (a sanity check that
    both folders count frames of the same clip)."""
    tt = truth.groupby("frame")["t"].first()
    rt = results.groupby("frame")["t"].first()
    common = tt.index.intersection(rt.index)
    if len(common) == 0:
        return None
    return float(np.max(np.abs(rt.loc[common].to_numpy() - tt.loc[common].to_numpy())) * 1e3)


def _plain(obj):
    """Nested dicts and lists with Python scalars only, NaN and infinities as None."""
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(obj) else None
    if obj is None or isinstance(obj, str):
        return obj
    raise TypeError(f"cannot serialise {type(obj).__name__} in a score")


def summarise(c: Comparison, moving_mm_s: float = DEFAULT_MOVING_MM_S) -> dict:
    """The score dict of a :class:`Comparison` (layout in :func:`score`)."""
    m = c.track_matches
    n_truth, n_res, n_match = len(c.truth_tracks), len(c.result_tracks), len(m)
    switches = count_switches(m)
    misses, fps = n_truth - n_match, n_res - n_match
    moving = m["truth_speed_mm_s"] >= moving_mm_s
    position = {
        "all": summary(m["error_mm"]),
        "moving": summary(m.loc[moving, "error_mm"]),
        "resting": summary(m.loc[~moving, "error_mm"]),
    }
    if "seen" in m.columns:
        position["seen"] = summary(m.loc[m["seen"] == 1, "error_mm"])
        position["unseen"] = summary(m.loc[m["seen"] == 0, "error_mm"])
    tracks = {
        "truth_rows": n_truth,
        "result_rows": n_res,
        "truth_tracks": int(c.truth_tracks["track"].nunique()),
        "result_tracks": int(c.result_tracks["track"].nunique()),
        "matched": n_match,
        "misses": misses,
        "false_positives": fps,
        "id_switches": switches,
        "recall": _ratio(n_match, n_truth),
        "precision": _ratio(n_match, n_res),
        "mota": 1.0 - (misses + fps + switches) / n_truth if n_truth else None,
        "motp_mm": float(m["error_mm"].mean()) if n_match else None,
        "identity_map": dict(sorted(c.identity.items())),
        "frame_time_offset_max_ms": _frame_time_offset_ms(c.truth_tracks, c.result_tracks),
    }
    events = {}
    for kind in EVENT_KINDS:
        em = c.event_matches[kind]
        n_t, n_r = c.event_counts[kind]
        entry = {
            "truth": n_t,
            "results": n_r,
            "matched": len(em),
            "recall": _ratio(len(em), n_t),
            "precision": _ratio(len(em), n_r),
            "errors": {
                "time_ms": signed_summary(em["dt_ms"]),
                "time_frames": signed_summary(em["dt_frames"]),
            },
        }
        if kind == "cushion":
            entry["errors"].update(
                {
                    "position_mm": summary(em["position_mm"]),
                    "along_mm": signed_summary(em["along_mm"]),
                    "along_diamonds": signed_summary(em["along_diamonds"]),
                    "speed_in_pct": signed_summary(em["speed_in_pct"]),
                    "speed_out_pct": signed_summary(em["speed_out_pct"]),
                    "angle_in_deg": signed_summary(em["angle_in_deg"]),
                    "angle_out_deg": signed_summary(em["angle_out_deg"]),
                    "restitution": signed_summary(em["restitution"]),
                }
            )
        events[kind] = entry
    return _plain(
        {
            "frame": {"chosen": c.frame, "candidates": c.frame_candidates},
            "table": {"length_mm": c.length_mm, "width_mm": c.width_mm, "source": c.table_source},
            "truth_frame_interval_s": c.frame_interval_s,
            "tracks": tracks,
            "position_error_mm": position,
            "velocity_error_mm_s": summary(m["velocity_error_mm_s"]),
            "events": events,
            "shots": {"truth": len(c.truth_shots), "results": len(c.result_shots)},
        }
    )


def score(
    results_dir,
    truth_dir,
    gate_mm: float = DEFAULT_GATE_MM,
    window_s: float = DEFAULT_WINDOW_S,
    moving_mm_s: float = DEFAULT_MOVING_MM_S,
) -> dict:
    """Score a results folder against a truth folder; a JSON-ready nested dict.

    Parameters: ``gate_mm`` (track match gate, mm), ``window_s`` (event time window, s),
    ``moving_mm_s`` (truth speed at or above which a ball counts as moving, mm/s).

    Layout: ``params``, ``results_dir``, ``truth_dir``; ``frame`` {chosen: "identity" or
    "rotated_180", candidates: {name: {matched, median_error_mm}}}; ``table`` {length_mm,
    width_mm, source}; ``truth_frame_interval_s``; ``tracks`` {truth_rows, result_rows,
    truth_tracks, result_tracks, matched, misses, false_positives, id_switches, recall,
    precision, mota, motp_mm, identity_map {result track: truth track},
    frame_time_offset_max_ms}; ``position_error_mm`` {all, moving, resting[, seen, unseen]} each
    :func:`summary`; ``velocity_error_mm_s`` (:func:`summary`); ``events`` {kind: {truth,
    results, matched, recall, precision, errors {time_ms, time_frames[, cushion measures]}}}
    with signed errors as :func:`signed_summary`; ``shots`` {truth, results} counts.
    Collisions are counted once per unordered pair. Missing data gives None, never NaN.
    """
    c = compare(results_dir, truth_dir, gate_mm=gate_mm, window_s=window_s,
                moving_mm_s=moving_mm_s)  # fmt: skip
    out = {
        "results_dir": str(results_dir),
        "truth_dir": str(truth_dir),
        "params": {"gate_mm": gate_mm, "window_s": window_s, "moving_mm_s": moving_mm_s},
    }
    out.update(summarise(c, moving_mm_s))
    return _plain(out)


# --- report ----------------------------------------------------------------------------------
def _f(value, digits: int = 2) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


_FRAME_TEXT = {
    "identity": "identity (results share the truth's origin)",
    "rotated_180": "rotated 180 deg (results' origin at the opposite corner)",
}

_CUSHION_ROWS = (
    ("position_mm", "position (mm)", False),
    ("along_mm", "along rail (mm)", True),
    ("along_diamonds", "along rail (diamonds)", True),
    ("time_ms", "time (ms)", True),
    ("time_frames", "time (frames)", True),
    ("speed_in_pct", "speed in (%)", True),
    ("speed_out_pct", "speed out (%)", True),
    ("angle_in_deg", "angle in (deg)", True),
    ("angle_out_deg", "angle out (deg)", True),
    ("restitution", "restitution", True),
)


def format_report(s: dict) -> str:
    """A readable multi-line text report of a :func:`score` dict."""
    tr, frame = s["tracks"], s["frame"]
    interval = s["truth_frame_interval_s"]
    lines = [
        "railtrace accuracy score",
        f"  results  {s.get('results_dir', '-')}",
        f"  truth    {s.get('truth_dir', '-')}",
        f"  table    {s['table']['length_mm']:g} x {s['table']['width_mm']:g} mm "
        f"(from {s['table']['source']} calibration.json); truth frame interval "
        f"{_f(None if interval is None else interval * 1e3, 3)} ms",
    ]
    if "params" in s:
        p = s["params"]
        lines.append(
            f"  params   gate {p['gate_mm']:g} mm, event window {p['window_s']:g} s, "
            f"moving at >= {p['moving_mm_s']:g} mm/s"
        )
    cands = ", ".join(
        f"{name}: {v['matched']} matched, median {_f(v['median_error_mm'])} mm"
        for name, v in frame["candidates"].items()
    )
    lines += [f"  frame    {_FRAME_TEXT[frame['chosen']]}", f"           [{cands}]", ""]
    lines += [
        "tracks",
        f"  ball-frames  truth {tr['truth_rows']}  results {tr['result_rows']}  matched "
        f"{tr['matched']}  misses {tr['misses']}  false positives {tr['false_positives']}",
        f"  tracks       truth {tr['truth_tracks']}  results {tr['result_tracks']}  "
        f"identity switches {tr['id_switches']}",
        f"  recall {_f(tr['recall'], 4)}  precision {_f(tr['precision'], 4)}  "
        f"MOTA {_f(tr['mota'], 4)}  MOTP {_f(tr['motp_mm'])} mm  "
        f"frame time offset max {_f(tr['frame_time_offset_max_ms'], 3)} ms",
        "",
        f"{'position error (mm)':<24}{'n':>8}{'median':>10}{'p95':>10}{'max':>10}",
    ]
    for key, stats in s["position_error_mm"].items():
        lines.append(
            f"  {key:<22}{stats['n']:>8}{_f(stats['median']):>10}{_f(stats['p95']):>10}"
            f"{_f(stats['max']):>10}"
        )
    v = s["velocity_error_mm_s"]
    lines.append(
        f"  {'velocity (mm/s)':<22}{v['n']:>8}{_f(v['median']):>10}{_f(v['p95']):>10}"
        f"{_f(v['max']):>10}"
    )
    lines += ["", f"{'events':<14}{'truth':>8}{'results':>9}{'matched':>9}{'recall':>9}"
              f"{'precision':>11}{'|dt| med ms':>13}{'|dt| max ms':>13}"]  # fmt: skip
    for kind, e in s["events"].items():
        t = e["errors"]["time_ms"]
        lines.append(
            f"  {kind:<12}{e['truth']:>8}{e['results']:>9}{e['matched']:>9}"
            f"{_f(e['recall'], 3):>9}{_f(e['precision'], 3):>11}"
            f"{_f(t['median_abs']):>13}{_f(t['max_abs']):>13}"
        )
    lines += ["", f"{'cushion errors':<24}{'n':>6}{'med |e|':>10}{'p95 |e|':>10}{'max |e|':>10}"
              f"{'median e':>10}"]  # fmt: skip
    errs = s["events"]["cushion"]["errors"]
    for key, label, signed in _CUSHION_ROWS:
        st = errs[key]
        if signed:
            cells = (st["median_abs"], st["p95_abs"], st["max_abs"], st["median"])
        else:
            cells = (st["median"], st["p95"], st["max"], None)
        digits = 3 if key in ("along_diamonds", "restitution", "time_frames") else 2
        lines.append(
            f"  {label:<22}{st['n']:>6}" + "".join(f"{_f(c, digits):>10}" for c in cells)
        )
    lines += ["", f"shots  truth {s['shots']['truth']}  results {s['shots']['results']}"]
    return "\n".join(lines)


# --- command line ----------------------------------------------------------------------------
def _positive(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive number")
    return value


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="score.py",
        description="Score a railtrace results folder against a truth folder.",
    )
    parser.add_argument("results_dir", metavar="RESULTS_DIR")
    parser.add_argument("truth_dir", metavar="TRUTH_DIR")
    parser.add_argument("--json", metavar="OUT.json", help="also write the score as JSON")
    parser.add_argument("--gate-mm", type=_positive, default=DEFAULT_GATE_MM,
                        help="track match gate, mm (default: one ball diameter, %(default)s)")
    parser.add_argument("--window-s", type=_positive, default=DEFAULT_WINDOW_S,
                        help="event match time window, s (default %(default)s)")
    parser.add_argument("--moving-mm-s", type=_positive, default=DEFAULT_MOVING_MM_S,
                        help="truth speed counted as moving, mm/s (default %(default)s)")
    return parser


def main(argv: list[str] | None = None) -> int:
    """Parse arguments, score, print the report; 2 with a one-line error on bad input."""
    args = build_parser().parse_args(argv)
    try:
        result = score(args.results_dir, args.truth_dir, gate_mm=args.gate_mm,
                       window_s=args.window_s, moving_mm_s=args.moving_mm_s)  # fmt: skip
    except ValueError as exc:
        print(f"score.py: error: {exc}", file=sys.stderr)
        return 2
    print(format_report(result))
    if args.json:
        try:
            Path(args.json).write_text(json.dumps(result, indent=2, allow_nan=False) + "\n")
        except OSError as exc:
            print(f"score.py: error: cannot write {args.json}: {exc.strerror}", file=sys.stderr)
            return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
