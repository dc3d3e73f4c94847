"""Cushion check: how lively and how even each cushion of one table is, from analysed folders.

Input is one or several folders in the results format (``../shared/spec/results-format.md``):
``events.csv`` (cushion rows with rail, diamond, speeds, angles and restitution), ``tracks.csv``
(positions and velocities) and ``calibration.json`` (the table). A results folder written by
``railtrace analyse`` and a truth folder written beside a rendered clip have the same format, so
both can be checked.

Frame and units: the table frame of ``vision/table.py`` (mm, s, mm/s; rails ``bottom``, ``right``,
``top``, ``left``; diamonds L/8 on long rails and W/4 on short rails). Angles are degrees, as in
the files. The *normal speed* of a contact is ``speed_in * cos(angle_in)`` (mm/s), its *speed
ratio* the outgoing over the incoming velocity component normal to the cushion (the format's
``restitution``).

What is measured, and how
-------------------------
* **Arrival state.** The speed ratio of a cushion depends on the ball's spin as it arrives: in the
  project's impact model (Mathavan, Jackson & Parkin 2010) a ball arriving without spin comes off
  about 0.07 slower than one arriving rolling. Spin is not seen, but a sliding ball decelerates at
  about ``mu_slide g`` (~2 m/s^2) and a rolling one at ``mu_roll g`` (~0.1 m/s^2) (Mathavan,
  Jackson & Parkin 2009). Each contact's approach deceleration is the magnitude of the
  least-squares slope of (vx, vy) over the last ``approach_window_s`` before it (at least
  ``min_approach_samples`` frames); below
  ``rolling_decel_max_mm_s2`` the ball arrived *rolling*. Liveliness is measured on rolling
  arrivals only, the condition of Mathavan et al. 2009's measured curve; other contacts are listed
  but not fitted.
* **Speed-ratio curve.** Mathavan et al. 2009 fitted ``v_out = a v^2 + b v + c`` to perpendicular
  rolling impacts, i.e. a ratio ``a v + b + c / v``. Per rail we fit
  ``ratio = b0 + b1 (v / 1 m/s) + b2 (1 m/s / v)`` by least squares when the rail has at least
  ``min_contacts_own_curve`` rolling contacts spanning a speed range of at least two to one;
  rails with fewer share the shape (b1, b2) of all such rails pooled and get their own level
  b0. The curve is reported per speed band (``band_edges_mm_s``, normal speed) at the band's
  median contact speed, with percentile bootstrap confidence intervals (Efron 1979) from
  resampling contacts within each rail.
* **Rebound angle.** Per rail and band, the least-squares slope through the origin of
  ``angle_out`` on ``angle_in`` (1 is a mirror bounce; above 1 the ball comes off wider), for
  contacts with ``|angle_in| >= min_angle_for_gain_deg``; bootstrap intervals as above.
* **Dead spots.** The rail is cut into segments between sights (diamonds 0-1, 1-2, ...; the
  side pocket at 4 splits 3-5 on long rails). For each segment with enough contacts, the curve is
  refitted without it; its contacts' residuals are compared with those of the rest of the rail by
  the one-sided Mann-Whitney U test (segment lower), and the p-values of all segments tested are
  adjusted by Benjamini-Hochberg (false discovery rate ``fdr``). A segment is flagged when its
  adjusted p-value is below ``fdr`` *and* its Hodges-Lehmann shift (median of all pairwise
  differences segment minus rest) is at least ``min_shortfall`` below: a difference too small to
  matter is not called a dead spot however many contacts show it. Flagged segments are left out
  of the rail's curve.
* **Cloth.** Between consecutive events of a ball (with ``event_margin_s`` cut at both ends), its
  velocity (vx, vy) is fitted by least squares as continuous and piecewise linear in time with at
  most one break (slide, then roll), the break chosen by least squares and kept only when the
  Bayesian information criterion prefers it. A piece decelerating faster than
  ``rolling_decel_max_mm_s2`` is sliding, else rolling. The table's rolling and sliding
  decelerations are the medians over pieces, ``mu = a / g``.
* **Table lengths.** The distance a firm centre-ball shot from the head spot through the foot spot
  travels, in table lengths: measured directly on any shot that starts within ``spot_tol_mm`` of
  a spot, heads along the table within ``heading_tol_deg`` and runs to rest with no other ball
  touched (path through the tracked positions and the cushion contact points); predicted from the
  fit with the project's simulator (``analysis.physics``, impact model of Mathavan et al. 2010)
  driven by the measured cloth decelerations and a restitution curve solved so that a
  perpendicular rolling impact reproduces the short rails' fitted speed ratio. Reference: at
  least 4 to 4.5 table lengths (``../shared/spec/references.md``, liveliness figure [secondary;
  also memory]).
* **Two dates** (:func:`compare_checks`): per rail and band, the residuals of both dates from one
  curve fitted to both are compared by Welch's t-test, Benjamini-Hochberg over all comparisons;
  the size is the difference of the two dates' fitted ratios at the same speed, with a bootstrap
  interval.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats
from scipy.optimize import brentq

from analysis.cushion import CushionParams, cushion_impact
from analysis.physics import PhysicsParams, Simulator, Strike
from vision.calibfile import read_calibration
from vision.table import RAILS, TableSpec

log = logging.getLogger(__name__)

INF = math.inf


@dataclass(frozen=True)
class CushionCheckConfig:
    """Every setting of the cushion check (mm, s, mm/s, mm/s^2, degrees).

    ``band_edges_mm_s``: normal-speed band edges, default soft < 600, medium 600-1200, firm
    1200-2000, hard >= 2000 mm/s (spanning Mathavan et al. 2009's measured 0.28-3.5 m/s, with the
    ratio's peak near 1 m/s inside the medium band). ``n_boot`` bootstrap resamples and
    ``ci_level`` their two-sided coverage. ``firm_speed_mm_s`` is the cue-ball speed taken for the
    predicted "firm" centre-ball shot: the reference figure gives no speed, so this is our choice
    (3 m/s, a hard but ordinary stroke) and is printed beside the result.
    """

    band_edges_mm_s: tuple[float, ...] = (0.0, 600.0, 1200.0, 2000.0, INF)
    band_names: tuple[str, ...] = ("soft", "medium", "firm", "hard")
    n_boot: int = 1000
    ci_level: float = 0.95
    fdr: float = 0.05
    min_shortfall: float = 0.03
    min_segment_contacts: int = 3
    min_rest_contacts: int = 5
    min_contacts_own_curve: int = 12
    rolling_decel_max_mm_s2: float = 600.0
    approach_window_s: float = 0.12
    event_margin_s: float = 0.025
    min_approach_samples: int = 4
    max_angle_deg: float = 60.0
    min_normal_speed_mm_s: float = 150.0
    ratio_range: tuple[float, float] = (0.2, 1.2)
    min_angle_for_gain_deg: float = 5.0
    min_piece_samples: int = 6
    g_mm_s2: float = 9810.0
    firm_speed_mm_s: float = 3000.0
    spot_tol_mm: float = 60.0
    heading_tol_deg: float = 3.0
    reference_table_lengths: tuple[float, float] = (4.0, 4.5)

    def __post_init__(self) -> None:
        edges = np.asarray(self.band_edges_mm_s, dtype=float)
        if edges.size < 2 or np.any(np.diff(edges) <= 0) or edges[0] < 0:
            raise ValueError(
                f"band_edges_mm_s {self.band_edges_mm_s} must be increasing from >= 0 mm/s, "
                "e.g. (0, 600, 1200, 2000, inf)"
            )
        if len(self.band_names) != edges.size - 1:
            raise ValueError(
                f"band_names {self.band_names} must name each of the {edges.size - 1} bands"
            )
        if self.n_boot < 100:
            raise ValueError(f"n_boot {self.n_boot} is too few for a 95 % interval; use >= 100")
        if not 0.5 < self.ci_level < 1:
            raise ValueError(f"ci_level {self.ci_level} must lie in (0.5, 1), e.g. 0.95")
        if not 0 < self.fdr < 0.5:
            raise ValueError(f"fdr {self.fdr} must lie in (0, 0.5), e.g. 0.05")
        if self.min_segment_contacts < 2 or self.min_rest_contacts < 2:
            raise ValueError("min_segment_contacts and min_rest_contacts must be at least 2")


# ---------------------------------------------------------------------------------------------
# Loading
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Session:
    """Analysed folders of one table, read and joined.

    ``contacts``: one row per cushion contact, columns ``folder``, ``shot``, ``track``, ``t_s``,
    ``rail``, ``diamond``, ``segment`` (e.g. ``"5-6"``), ``x_mm``, ``y_mm``, ``speed_in_mm_s``,
    ``speed_out_mm_s``, ``angle_in_deg``, ``angle_out_deg``, ``normal_speed_mm_s``, ``ratio``,
    ``approach_decel_mm_s2`` (NaN when too few samples), ``arrival`` (``rolling``, ``sliding`` or
    ``unknown``), ``band`` (name or empty) and ``usable`` (rolling arrival within the angle, speed
    and ratio limits). ``tracks`` and ``events`` hold every folder's rows with a ``folder``
    column added.
    """

    table: TableSpec
    folders: tuple[str, ...]
    contacts: pd.DataFrame
    tracks: pd.DataFrame
    events: pd.DataFrame


def load_session(folders, config: CushionCheckConfig) -> Session:
    """Read ``folders`` (paths of results or truth folders of one table) into a :class:`Session`.

    ValueError naming the folder when a file is missing or the folders are of different tables.
    """
    folders = [Path(f) for f in folders]
    if not folders:
        raise ValueError("no folders given; pass one or more analysed folders (railtrace analyse --out DIR)")
    table = None
    all_tracks, all_events, all_contacts = [], [], []
    for folder in folders:
        for name in ("events.csv", "tracks.csv", "calibration.json"):
            if not (folder / name).is_file():
                raise ValueError(
                    f"{folder} has no {name}; give folders written by 'railtrace analyse' or a "
                    "clip's .truth folder"
                )
        t, _cam, _doc = read_calibration(folder / "calibration.json")
        if table is None:
            table = t
        elif abs(t.length_mm - table.length_mm) > 5 or abs(t.width_mm - table.width_mm) > 5:
            raise ValueError(
                f"{folder} is of a {t.length_mm:g} x {t.width_mm:g} mm table but {folders[0]} of "
                f"{table.length_mm:g} x {table.width_mm:g} mm; check one table at a time"
            )
        events = pd.read_csv(folder / "events.csv")
        tracks = pd.read_csv(folder / "tracks.csv")
        for df, name, cols in (
            (events, "events.csv", ("shot", "t", "kind", "track", "x", "y", "rail", "diamond",
                                    "speed_in", "speed_out", "angle_in", "angle_out",
                                    "restitution")),
            (tracks, "tracks.csv", ("t", "track", "x", "y", "vx", "vy")),
        ):
            missing = [c for c in cols if c not in df.columns]
            if missing:
                raise ValueError(f"{folder / name} lacks column(s) {', '.join(missing)}")
        events = events.assign(folder=str(folder))
        tracks = tracks.assign(folder=str(folder))
        all_events.append(events)
        all_tracks.append(tracks)
        all_contacts.append(_contacts(events, tracks, table, config, str(folder)))
    contacts = pd.concat(all_contacts, ignore_index=True)
    return Session(
        table=table,
        folders=tuple(str(f) for f in folders),
        contacts=contacts,
        tracks=pd.concat(all_tracks, ignore_index=True),
        events=pd.concat(all_events, ignore_index=True),
    )


def segment_edges(table: TableSpec, rail: str) -> np.ndarray:
    """Segment edges along ``rail`` in diamonds: the sights, the ends and (long rails) the side
    pocket at 4."""
    return np.arange(0.0, 9.0) if rail in ("bottom", "top") else np.arange(0.0, 5.0)


def segment_label(table: TableSpec, rail: str, diamond: float) -> str:
    """``"k-(k+1)"`` for the segment between sights holding ``diamond`` (clipped to the rail)."""
    edges = segment_edges(table, rail)
    k = int(np.clip(np.floor(diamond), 0, edges.size - 2))
    return f"{edges[k]:g}-{edges[k + 1]:g}"


def band_of(speed_mm_s, config: CushionCheckConfig) -> np.ndarray:
    """Band names (object array) of normal speeds (mm/s); empty string outside every band."""
    v = np.asarray(speed_mm_s, dtype=float).reshape(-1)
    idx = np.searchsorted(np.asarray(config.band_edges_mm_s), v, side="right") - 1
    names = np.array(list(config.band_names) + [""], dtype=object)
    idx = np.where((idx < 0) | (idx >= len(config.band_names)) | ~np.isfinite(v), -1, idx)
    return names[idx]


def _contacts(events, tracks, table, config, folder) -> pd.DataFrame:
    c = events[events["kind"] == "cushion"].copy()
    c = c[c["rail"].isin(RAILS)]
    out = pd.DataFrame({
        "folder": folder,
        "shot": c["shot"].to_numpy(),
        "track": c["track"].to_numpy(),
        "t_s": c["t"].to_numpy(dtype=float),
        "rail": c["rail"].to_numpy(dtype=object),
        "diamond": c["diamond"].to_numpy(dtype=float),
        "x_mm": c["x"].to_numpy(dtype=float),
        "y_mm": c["y"].to_numpy(dtype=float),
        "speed_in_mm_s": c["speed_in"].to_numpy(dtype=float),
        "speed_out_mm_s": c["speed_out"].to_numpy(dtype=float),
        "angle_in_deg": c["angle_in"].to_numpy(dtype=float),
        "angle_out_deg": c["angle_out"].to_numpy(dtype=float),
        "ratio": c["restitution"].to_numpy(dtype=float),
    })
    out["segment"] = [segment_label(table, r, d) for r, d in zip(out["rail"], out["diamond"])]
    # Normal speed into the cushion: the velocity component along the inward normal.
    out["normal_speed_mm_s"] = out["speed_in_mm_s"] * np.cos(np.radians(out["angle_in_deg"]))
    out["approach_decel_mm_s2"] = _approach_decel(out, events, tracks, config)
    arrival = np.where(out["approach_decel_mm_s2"] <= config.rolling_decel_max_mm_s2, "rolling", "sliding")
    out["arrival"] = np.where(out["approach_decel_mm_s2"].isna(), "unknown", arrival)
    out["band"] = band_of(out["normal_speed_mm_s"], config)
    lo, hi = config.ratio_range
    out["usable"] = (
        (out["arrival"] == "rolling")
        & (out["angle_in_deg"].abs() <= config.max_angle_deg)
        & (out["normal_speed_mm_s"] >= config.min_normal_speed_mm_s)
        & out["ratio"].between(lo, hi)
        & (out["band"] != "")
    )
    return out


def _approach_decel(contacts, events, tracks, config) -> np.ndarray:
    """|d(vx, vy)/dt| (mm/s^2) by least squares over the last ``approach_window_s`` before each
    contact (lengthened to hold ``min_approach_samples`` frames at the clip's frame interval, so
    30 fps clips are measured too), after the ball's previous event plus ``event_margin_s``; NaN
    with too few samples."""
    out = np.full(len(contacts), np.nan)
    by_track = {k: g.sort_values("t") for k, g in tracks.groupby("track")}
    ev_times = {k: np.sort(g["t"].to_numpy(dtype=float)) for k, g in events.groupby("track")}
    steps = np.diff(np.sort(tracks["t"].unique())) if len(tracks) else np.array([])
    frame_s = float(np.median(steps)) if steps.size else 0.0
    window = max(config.approach_window_s, config.event_margin_s + (config.min_approach_samples + 0.5) * frame_s)
    for i, (track, t_c) in enumerate(zip(contacts["track"], contacts["t_s"])):
        g = by_track.get(track)
        if g is None:
            continue
        times = ev_times.get(track, np.array([]))
        prev = times[times < t_c - 1e-9]
        t_lo = max(t_c - window, (prev[-1] if prev.size else -INF) + config.event_margin_s)
        t_hi = t_c - config.event_margin_s
        t = g["t"].to_numpy(dtype=float)
        m = (t >= t_lo) & (t <= t_hi)
        if m.sum() < config.min_approach_samples:
            continue
        out[i] = _slope_norm(t[m], g["vx"].to_numpy(dtype=float)[m], g["vy"].to_numpy(dtype=float)[m])
    return out


def _slope_norm(t, vx, vy) -> float:
    """Magnitude of the least-squares slope of (vx, vy) against t (mm/s^2)."""
    tc = t - t.mean()
    d = float(tc @ tc)
    if d <= 0:
        return math.nan
    return math.hypot(float(tc @ vx) / d, float(tc @ vy) / d)


# ---------------------------------------------------------------------------------------------
# Speed-ratio curves
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RatioCurves:
    """Fitted speed-ratio curves ``ratio = b0 + b1 s + b2 / s``, ``s`` = normal speed in m/s.

    ``coef`` maps rail -> (b0, b1, b2); ``own`` is the set of rails with their own shape (the
    others share the pooled shape); ``speed_range_mm_s`` maps rail -> (min, max) fitted speed.
    """

    coef: dict
    own: frozenset
    speed_range_mm_s: dict

    def predict(self, rail: str, speed_mm_s) -> np.ndarray:
        """Fitted ratio at normal speeds (mm/s) on ``rail``; NaN for a rail without a fit."""
        v = np.asarray(speed_mm_s, dtype=float) / 1000.0
        if rail not in self.coef:
            return np.full(v.shape, np.nan)
        b0, b1, b2 = self.coef[rail]
        return b0 + b1 * v + b2 / v


def fit_curves(contacts: pd.DataFrame, config: CushionCheckConfig) -> RatioCurves:
    """Least-squares speed-ratio curves per rail (see the module docstring) from ``contacts``
    (columns ``rail``, ``normal_speed_mm_s``, ``ratio``; every row is used)."""
    return _fit_arrays(contacts["rail"].to_numpy(dtype=object),
                       contacts["normal_speed_mm_s"].to_numpy(dtype=float),
                       contacts["ratio"].to_numpy(dtype=float), config)


def _fit_arrays(rail: np.ndarray, v: np.ndarray, y: np.ndarray, config: CushionCheckConfig) -> RatioCurves:
    """:func:`fit_curves` on arrays: rail names (N,), normal speeds (N,) mm/s, ratios (N,)."""
    rails = [r for r in RAILS if (rail == r).any()]
    if not rails:
        return RatioCurves({}, frozenset(), {})
    s = v / 1000.0
    masks = {r: rail == r for r in rails}
    own, pooled = [], []
    for r in rails:
        m = masks[r]
        if m.sum() >= config.min_contacts_own_curve and v[m].max() >= 2 * v[m].min():
            own.append(r)
        else:
            pooled.append(r)
    pm = np.isin(rail, pooled)
    # The pooled rails share a shape only when their speeds can carry it; else each is a level.
    shared_shape = bool(pooled) and pm.sum() >= len(pooled) + 3 and s[pm].max() >= 1.5 * s[pm].min()
    cols, names = [], []
    for r in rails:
        m = masks[r].astype(float)
        cols.append(m)
        names.append((r, 0))
        if r in own:
            cols += [m * s, m / s]
            names += [(r, 1), (r, 2)]
    if shared_shape:
        cols += [pm * s, pm / s]
        names += [("*", 1), ("*", 2)]
    X = np.column_stack(cols)
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    coef = {}
    shared = {k: b for (r, k), b in zip(names, beta) if r == "*"}
    for r in rails:
        b = {k: bb for (rr, k), bb in zip(names, beta) if rr == r}
        if r in own:
            coef[r] = (b[0], b[1], b[2])
        else:
            coef[r] = (b[0], shared.get(1, 0.0), shared.get(2, 0.0))
    ranges = {r: (float(v[masks[r]].min()), float(v[masks[r]].max())) for r in rails}
    return RatioCurves(coef, frozenset(own), ranges)


def _residuals(contacts: pd.DataFrame, curves: RatioCurves) -> np.ndarray:
    out = np.full(len(contacts), np.nan)
    for r in RAILS:
        m = (contacts["rail"] == r).to_numpy()
        if m.any():
            out[m] = contacts["ratio"].to_numpy(dtype=float)[m] - curves.predict(
                r, contacts["normal_speed_mm_s"].to_numpy(dtype=float)[m])
    return out


def _boot_indices(rail: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One bootstrap resample (Efron 1979) of row positions of rail names ``rail`` (N,), drawn
    with replacement within each rail so every rail keeps its number of contacts."""
    parts = []
    for r in RAILS:
        idx = np.flatnonzero(rail == r)
        if idx.size:
            parts.append(rng.choice(idx, size=idx.size, replace=True))
    return np.concatenate(parts) if parts else np.array([], dtype=int)


# ---------------------------------------------------------------------------------------------
# Dead spots
# ---------------------------------------------------------------------------------------------
def segment_tests(contacts: pd.DataFrame, config: CushionCheckConfig, rng: np.random.Generator) -> pd.DataFrame:
    """Test every segment with enough usable contacts against the rest of its rail.

    ``contacts``: usable contacts only. Returns one row per segment tested, columns ``rail``,
    ``segment``, ``n_segment``, ``n_rest``, ``shortfall`` (Hodges-Lehmann shift of the segment's
    residuals minus the rest's; negative = less lively), ``shortfall_ci_low`` / ``_high``
    (bootstrap), ``segment_median_ratio``, ``p_value`` (one-sided Mann-Whitney U, scipy.stats),
    ``p_adjusted`` (Benjamini-Hochberg over all rows) and ``flagged``.
    """
    rows = []
    for (r, seg), g in contacts.groupby(["rail", "segment"], sort=True):
        rest_mask = (contacts["rail"] == r) & (contacts["segment"] != seg)
        n_seg, n_rest = len(g), int(rest_mask.sum())
        if n_seg < config.min_segment_contacts or n_rest < config.min_rest_contacts:
            continue
        # Leave the segment out of the curve, so a dead stretch cannot drag its own yardstick down.
        others = contacts.drop(index=g.index)
        curves = fit_curves(others, config)
        res_seg = g["ratio"].to_numpy(dtype=float) - curves.predict(r, g["normal_speed_mm_s"].to_numpy(dtype=float))
        rest = contacts[rest_mask]
        res_rest = rest["ratio"].to_numpy(dtype=float) - curves.predict(r, rest["normal_speed_mm_s"].to_numpy(dtype=float))
        p = float(stats.mannwhitneyu(res_seg, res_rest, alternative="less", method="auto").pvalue)
        shift = _hodges_lehmann(res_seg, res_rest)
        boot = np.array([
            _hodges_lehmann(rng.choice(res_seg, res_seg.size), rng.choice(res_rest, res_rest.size))
            for _ in range(config.n_boot)
        ])
        lo, hi = _percentiles(boot, config.ci_level)
        rows.append({
            "rail": r, "segment": seg, "n_segment": n_seg, "n_rest": n_rest,
            "shortfall": shift, "shortfall_ci_low": lo, "shortfall_ci_high": hi,
            "segment_median_ratio": float(np.median(g["ratio"])), "p_value": p,
        })
    cols = ["rail", "segment", "n_segment", "n_rest", "shortfall", "shortfall_ci_low",
            "shortfall_ci_high", "segment_median_ratio", "p_value", "p_adjusted", "flagged"]
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=object if c in ("rail", "segment") else float) for c in cols}).astype(
            {"flagged": bool, "n_segment": int, "n_rest": int})
    out = pd.DataFrame(rows)
    # Benjamini & Hochberg (1995), scipy.stats.false_discovery_control.
    out["p_adjusted"] = stats.false_discovery_control(out["p_value"].to_numpy(), method="bh")
    out["flagged"] = (out["p_adjusted"] < config.fdr) & (out["shortfall"] <= -config.min_shortfall)
    return out[cols]


def _hodges_lehmann(a: np.ndarray, b: np.ndarray) -> float:
    """Hodges-Lehmann shift: median of all pairwise differences a_i - b_j."""
    return float(np.median(np.subtract.outer(np.asarray(a), np.asarray(b))))


def _percentiles(values: np.ndarray, level: float) -> tuple[float, float]:
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return math.nan, math.nan
    a = 100 * (1 - level) / 2
    lo, hi = np.percentile(v, [a, 100 - a])
    return float(lo), float(hi)


# ---------------------------------------------------------------------------------------------
# Cloth
# ---------------------------------------------------------------------------------------------
def cloth_pieces(tracks: pd.DataFrame, events: pd.DataFrame, config: CushionCheckConfig) -> pd.DataFrame:
    """Constant-acceleration pieces of every ball's motion between events.

    Returns one row per piece: ``folder``, ``track``, ``t_from_s``, ``t_to_s``, ``n_samples``,
    ``decel_mm_s2`` (|a|), ``speed_mean_mm_s``, ``phase`` (``sliding`` / ``rolling``).
    Method in the module docstring (one break at most, kept by BIC).
    """
    rows = []
    for (folder, track), g in tracks.groupby(["folder", "track"], sort=False):
        g = g.sort_values("t")
        t = g["t"].to_numpy(dtype=float)
        vx = g["vx"].to_numpy(dtype=float)
        vy = g["vy"].to_numpy(dtype=float)
        ev = events[(events["folder"] == folder) & (events["track"] == track)]
        times = np.sort(ev["t"].to_numpy(dtype=float))
        for a, b in zip(times[:-1], times[1:]):
            m = (t > a + config.event_margin_s) & (t < b - config.event_margin_s)
            if m.sum() < config.min_piece_samples:
                continue
            tt, xx, yy = t[m], vx[m], vy[m]
            if np.hypot(xx, yy).min() < 20.0:
                continue  # resting or creeping: no deceleration to read
            for t0, t1, acc, n, sp in _split_fit(tt, xx, yy, config.min_piece_samples // 2):
                rows.append({"folder": folder, "track": track, "t_from_s": t0, "t_to_s": t1,
                             "n_samples": n, "decel_mm_s2": acc, "speed_mean_mm_s": sp})
    cols = ["folder", "track", "t_from_s", "t_to_s", "n_samples", "decel_mm_s2", "speed_mean_mm_s", "phase"]
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=float) for c in cols})
    out = pd.DataFrame(rows)
    out["phase"] = np.where(out["decel_mm_s2"] > config.rolling_decel_max_mm_s2, "sliding", "rolling")
    return out[cols]


def _split_fit(t, vx, vy, min_side: int):
    """Continuous piecewise-linear fit of (vx, vy) on t with at most one break, chosen by least
    squares over sample times and kept when BIC prefers it. Yields (t0, t1, |a|, n, mean speed)."""
    n = t.size
    V = np.column_stack([vx, vy])

    def sse_for(X):
        beta, *_ = np.linalg.lstsq(X, V, rcond=None)
        r = V - X @ beta
        return float(np.sum(r * r)), beta

    tc = t - t[0]
    X1 = np.column_stack([np.ones(n), tc])
    sse1, beta1 = sse_for(X1)
    best = (math.inf, None, None)
    for k in range(min_side, n - min_side):
        tb = tc[k]
        X2 = np.column_stack([np.ones(n), np.minimum(tc, tb), np.maximum(tc - tb, 0.0)])
        sse2, beta2 = sse_for(X2)
        if sse2 < best[0]:
            best = (sse2, k, beta2)
    # BIC per coordinate pair: n*2 observations, 4 (one line) or 6 (+ break; the break time itself
    # counts as one more) parameters; Gaussian errors of unknown variance.
    m = 2 * n
    floor = 1e-9 * max(float(np.sum(V * V)), 1.0)

    def bic(sse, k):
        return m * math.log(max(sse, floor) / m) + k * math.log(m)

    if best[1] is not None and bic(best[0], 7) < bic(sse1, 4):
        k = best[1]
        a1 = float(np.hypot(*best[2][1]))
        a2 = float(np.hypot(*best[2][2]))
        sp = np.hypot(vx, vy)
        yield (float(t[0]), float(t[k]), a1, k + 1, float(sp[: k + 1].mean()))
        yield (float(t[k]), float(t[-1]), a2, n - k, float(sp[k:].mean()))
    else:
        yield (float(t[0]), float(t[-1]), float(np.hypot(*beta1[1])), n, float(np.hypot(vx, vy).mean()))


def cloth_summary(pieces: pd.DataFrame, config: CushionCheckConfig, rng: np.random.Generator) -> pd.DataFrame:
    """Rolling and sliding deceleration (mm/s^2) and friction (a / g), medians over pieces with
    bootstrap intervals. Columns ``phase``, ``n_pieces``, ``decel_mm_s2``, ``ci_low``,
    ``ci_high``, ``mu``."""
    rows = []
    for phase in ("rolling", "sliding"):
        a = pieces.loc[pieces["phase"] == phase, "decel_mm_s2"].to_numpy(dtype=float)
        if a.size == 0:
            rows.append({"phase": phase, "n_pieces": 0, "decel_mm_s2": math.nan, "ci_low": math.nan,
                         "ci_high": math.nan, "mu": math.nan})
            continue
        boot = np.median(rng.choice(a, size=(config.n_boot, a.size), replace=True), axis=1)
        lo, hi = _percentiles(boot, config.ci_level)
        med = float(np.median(a))
        rows.append({"phase": phase, "n_pieces": int(a.size), "decel_mm_s2": med, "ci_low": lo,
                     "ci_high": hi, "mu": med / config.g_mm_s2})
    return pd.DataFrame(rows)


# ---------------------------------------------------------------------------------------------
# Table lengths
# ---------------------------------------------------------------------------------------------
def spots(table: TableSpec) -> dict[str, tuple[float, float]]:
    """Head and foot spots (mm): on the long axis, a quarter of the length from each short rail
    (the head and foot strings cross the table at the second diamond from each end)."""
    return {"head": (table.length_mm / 4, table.width_mm / 2), "foot": (3 * table.length_mm / 4, table.width_mm / 2)}


def measured_table_lengths(session: Session, config: CushionCheckConfig) -> pd.DataFrame:
    """Shots that are a spot-to-spot liveliness shot, with the distance they ran.

    One row per such shot: ``folder``, ``shot``, ``track``, ``start_speed_mm_s``, ``distance_mm``,
    ``table_lengths``, ``cushions``, ``start_decel_mm_s2`` (about mu_slide g for a centre-ball
    strike; a rolling start shows mu_roll g). Empty when no clip has one.
    """
    table = session.table
    sp = spots(table)
    rows = []
    ev_all, tr_all = session.events, session.tracks
    for (folder, shot), ev in ev_all[ev_all["kind"] == "start"].groupby(["folder", "shot"]):
        for _, st in ev.iterrows():
            track = st["track"]
            x0, y0 = float(st["x"]), float(st["y"])
            which = [k for k, (sx, sy) in sp.items() if math.hypot(x0 - sx, y0 - sy) <= config.spot_tol_mm]
            if not which:
                continue
            shot_ev = ev_all[(ev_all["folder"] == folder) & (ev_all["shot"] == shot) & (ev_all["track"] == track)]
            if (shot_ev["kind"] == "collision").any() or not (shot_ev["kind"] == "stop").any():
                continue
            t0 = float(st["t"])
            t_stop = float(shot_ev.loc[shot_ev["kind"] == "stop", "t"].min())
            tr = tr_all[(tr_all["folder"] == folder) & (tr_all["track"] == track)
                        & (tr_all["t"] > t0) & (tr_all["t"] < t_stop)].sort_values("t")
            if len(tr) < 5:
                continue
            head = tr.iloc[: max(3, min(6, len(tr)))]
            heading = math.degrees(math.atan2(head["vy"].mean(), head["vx"].mean()))
            toward = 0.0 if which[0] == "head" else 180.0
            if abs((heading - toward + 180) % 360 - 180) > config.heading_tol_deg:
                continue
            cush = shot_ev[(shot_ev["kind"] == "cushion") & (shot_ev["t"] < t_stop)]
            pts = pd.concat([
                pd.DataFrame({"t": [t0], "x": [x0], "y": [y0]}),
                tr[["t", "x", "y"]],
                cush[["t", "x", "y"]],
                shot_ev.loc[shot_ev["kind"] == "stop", ["t", "x", "y"]].iloc[:1],
            ], ignore_index=True).sort_values("t", kind="stable")
            d = float(np.sum(np.hypot(np.diff(pts["x"].to_numpy(dtype=float)), np.diff(pts["y"].to_numpy(dtype=float)))))
            early = tr[tr["t"] <= t0 + 0.1]
            dec = _slope_norm(early["t"].to_numpy(dtype=float), early["vx"].to_numpy(dtype=float),
                              early["vy"].to_numpy(dtype=float)) if len(early) >= 3 else math.nan
            rows.append({"folder": folder, "shot": int(shot), "track": track,
                         "start_speed_mm_s": float(st["speed_out"]), "distance_mm": d,
                         "table_lengths": d / table.length_mm, "cushions": int(len(cush)),
                         "start_decel_mm_s2": dec})
    cols = ["folder", "shot", "track", "start_speed_mm_s", "distance_mm", "table_lengths", "cushions", "start_decel_mm_s2"]
    return pd.DataFrame(rows, columns=cols)


def perpendicular_rolling_ratio(table: TableSpec, e: float, speed_mm_s: float, mu_cushion: float = 0.14,
                                mu_slide: float = 0.2) -> float:
    """Speed ratio of a rolling ball square into a cushion at ``speed_mm_s`` in the impact model of
    Mathavan, Jackson & Parkin (2010) (``analysis.cushion.cushion_impact``) with coefficient ``e``."""
    R = table.radius_mm
    vel = np.array([0.0, -speed_mm_s])
    omega = np.array([-vel[1] / R, vel[0] / R, 0.0])  # rolling: w = z x v / R
    vo, _ = cushion_impact(vel, omega, (0.0, 1.0), table, e, mu_cushion, mu_slide)
    return float(vo[1] / speed_mm_s)


def cushion_params_for(table: TableSpec, ratio_of_speed, speed_range_mm_s, mu_slide: float,
                       knots_mm_s=(280.0, 400.0, 550.0, 750.0, 1000.0, 1400.0, 2000.0, 2700.0, 3500.0)) -> CushionParams:
    """Impact-model parameters whose perpendicular rolling speed ratio equals ``ratio_of_speed(v)``
    at each knot (v clipped to ``speed_range_mm_s``, where the fit holds), solved per knot by
    Brent's method (scipy.optimize.brentq) on the model's coefficient e in [0.01, 1]."""
    lo, hi = speed_range_mm_s
    values = []
    for v in knots_mm_s:
        target = float(ratio_of_speed(min(max(v, lo), hi)))

        def f(e, v=v, target=target):
            return perpendicular_rolling_ratio(table, e, v, mu_slide=mu_slide) - target

        f_lo, f_hi = f(0.01), f(1.0)
        if f_hi <= 0:
            values.append(1.0)
        elif f_lo >= 0:
            values.append(0.01)
        else:
            values.append(float(brentq(f, 0.01, 1.0, xtol=1e-5)))
    return CushionParams(e_knots_mm_s=tuple(knots_mm_s), e_values=tuple(values))


def simulate_spot_shot(table: TableSpec, physics: PhysicsParams, speed_mm_s: float) -> float:
    """Distance (mm) a centre-ball (stun) strike at ``speed_mm_s`` from the head spot through the
    foot spot runs before it stops, by the project's simulator; sampled every 2 ms."""
    sp = spots(table)
    sim = Simulator(table, physics, {"cue": sp["head"]})
    sim.strike(0.0, Strike("cue", speed_mm_s, 0.0, 0.0, 0.0))
    t_end = sim.run_until_rest(t_max=600.0)
    traj = sim.trajectory()
    times = np.arange(0.0, t_end + 0.002, 0.002)
    pos = traj.sample(times).pos[:, 0, :]
    # Chords cut the corners at the cushions; add the exact turning points from the events.
    ev = [e for e in traj.events if e.kind == "cushion"]
    pts = np.vstack([np.column_stack([times, pos]), np.array([[e.t, *e.pos] for e in ev]).reshape(-1, 3)])
    pts = pts[np.argsort(pts[:, 0], kind="stable")]
    return float(np.sum(np.hypot(np.diff(pts[:, 1]), np.diff(pts[:, 2]))))


def predicted_table_lengths(table: TableSpec, curves: RatioCurves, cloth: pd.DataFrame,
                            config: CushionCheckConfig) -> dict:
    """Table lengths of the firm centre-ball spot shot predicted from the fit (see module
    docstring). Returns ``{"table_lengths", "speed_mm_s", "mu_roll", "mu_slide", "rails"}``, with
    NaN table lengths when the short rails or the cloth could not be measured."""
    short = [r for r in ("left", "right") if r in curves.coef]
    roll = cloth.set_index("phase")["decel_mm_s2"].get("rolling", math.nan)
    slide = cloth.set_index("phase")["decel_mm_s2"].get("sliding", math.nan)
    out = {"table_lengths": math.nan, "speed_mm_s": config.firm_speed_mm_s, "mu_roll": roll / config.g_mm_s2,
           "mu_slide": slide / config.g_mm_s2, "rails": "+".join(short)}
    if not short or not (np.isfinite(roll) and np.isfinite(slide)):
        return out
    lo = min(curves.speed_range_mm_s[r][0] for r in short)
    hi = max(curves.speed_range_mm_s[r][1] for r in short)

    def ratio(v):
        return float(np.mean([curves.predict(r, v) for r in short]))

    mu_slide = slide / config.g_mm_s2
    cushion = cushion_params_for(table, ratio, (lo, hi), mu_slide)
    physics = PhysicsParams(mu_slide=mu_slide, mu_roll=roll / config.g_mm_s2, cushion=cushion)
    out["table_lengths"] = simulate_spot_shot(table, physics, config.firm_speed_mm_s) / table.length_mm
    return out


# ---------------------------------------------------------------------------------------------
# The whole check
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class CushionCheck:
    """Everything the cushion check found for one session (see :func:`cushion_check`).

    ``bands``: one row per rail and band with a fit: ``rail``, ``band``, ``speed_lo_mm_s``,
    ``speed_hi_mm_s``, ``n_contacts``, ``speed_ref_mm_s`` (median normal speed of the band's
    contacts), ``ratio_fit`` (curve at speed_ref), ``ci_low``, ``ci_high``, ``ratio_median``
    (observed), ``curve`` (``own`` or ``shared shape``), ``angle_gain``, ``angle_gain_ci_low``,
    ``angle_gain_ci_high``, ``n_angle``. ``segments``: :func:`segment_tests`. ``contacts``: every
    cushion contact with ``segment``, ``usable``, ``fitted`` (used by the final curve) and
    ``residual``. ``cloth``: :func:`cloth_summary`. ``lengths_measured``:
    :func:`measured_table_lengths`; ``lengths_predicted``: :func:`predicted_table_lengths`.
    """

    table: TableSpec
    folders: tuple[str, ...]
    config: CushionCheckConfig
    curves: RatioCurves
    bands: pd.DataFrame
    segments: pd.DataFrame
    contacts: pd.DataFrame
    cloth: pd.DataFrame
    cloth_pieces: pd.DataFrame
    lengths_measured: pd.DataFrame
    lengths_predicted: dict = field(default_factory=dict)


def cushion_check(folders, config: CushionCheckConfig, rng: np.random.Generator,
                  predict_lengths: bool = True) -> CushionCheck:
    """Run the cushion check over analysed ``folders`` of one table (module docstring)."""
    session = load_session(folders, config)
    return check_session(session, config, rng, predict_lengths=predict_lengths)


def check_session(session: Session, config: CushionCheckConfig, rng: np.random.Generator,
                  predict_lengths: bool = True) -> CushionCheck:
    """The cushion check of a loaded :class:`Session`."""
    contacts = session.contacts.copy()
    usable = contacts[contacts["usable"]]
    segments = segment_tests(usable, config, rng)
    dead = {(r, s) for r, s, f in zip(segments["rail"], segments["segment"], segments["flagged"]) if f}
    in_dead = np.array([(r, s) in dead for r, s in zip(contacts["rail"], contacts["segment"])], dtype=bool)
    contacts["fitted"] = contacts["usable"].to_numpy() & ~in_dead
    fitted = contacts[contacts["fitted"]]
    curves = fit_curves(fitted, config)
    contacts["residual"] = _residuals(contacts, curves)
    bands = _band_table(fitted, curves, config, rng)
    pieces = cloth_pieces(session.tracks, session.events, config)
    cloth = cloth_summary(pieces, config, rng)
    measured = measured_table_lengths(session, config)
    predicted = predicted_table_lengths(session.table, curves, cloth, config) if predict_lengths else {}
    return CushionCheck(session.table, session.folders, config, curves, bands, segments, contacts,
                        cloth, pieces, measured, predicted)


def _band_table(fitted: pd.DataFrame, curves: RatioCurves, config: CushionCheckConfig,
                rng: np.random.Generator) -> pd.DataFrame:
    """Per rail and band: fitted ratio at the band's median speed and rebound-angle gain, with
    bootstrap intervals from resampling contacts within rails and refitting."""
    cells = []
    for r in RAILS:
        for k, band in enumerate(config.band_names):
            g = fitted[(fitted["rail"] == r) & (fitted["band"] == band)]
            if len(g) == 0 or r not in curves.coef:
                continue
            cells.append((r, band, k, float(np.median(g["normal_speed_mm_s"])), g))
    if not cells:
        return pd.DataFrame(columns=["rail", "band", "speed_lo_mm_s", "speed_hi_mm_s", "n_contacts",
                                     "speed_ref_mm_s", "ratio_fit", "ci_low", "ci_high", "ratio_median",
                                     "curve", "angle_gain", "angle_gain_ci_low", "angle_gain_ci_high", "n_angle"])
    rail = fitted["rail"].to_numpy(dtype=object)
    bands = fitted["band"].to_numpy(dtype=object)
    v = fitted["normal_speed_mm_s"].to_numpy(dtype=float)
    y = fitted["ratio"].to_numpy(dtype=float)
    a_in = fitted["angle_in_deg"].to_numpy(dtype=float)
    a_out = fitted["angle_out_deg"].to_numpy(dtype=float)
    boot_ratio = np.full((config.n_boot, len(cells)), np.nan)
    boot_gain = np.full((config.n_boot, len(cells)), np.nan)
    for b in range(config.n_boot):
        idx = _boot_indices(rail, rng)
        cb = _fit_arrays(rail[idx], v[idx], y[idx], config)
        for j, (r, band, _k, vref, _g) in enumerate(cells):
            boot_ratio[b, j] = cb.predict(r, vref)
            m = idx[(rail[idx] == r) & (bands[idx] == band)]
            boot_gain[b, j] = _gain(a_in[m], a_out[m], config)
    rows = []
    edges = config.band_edges_mm_s
    for j, (r, band, k, vref, g) in enumerate(cells):
        lo, hi = _percentiles(boot_ratio[:, j], config.ci_level)
        glo, ghi = _percentiles(boot_gain[:, j], config.ci_level)
        rows.append({
            "rail": r, "band": band, "speed_lo_mm_s": edges[k], "speed_hi_mm_s": edges[k + 1],
            "n_contacts": len(g), "speed_ref_mm_s": vref, "ratio_fit": float(curves.predict(r, vref)),
            "ci_low": lo, "ci_high": hi, "ratio_median": float(np.median(g["ratio"])),
            "curve": "own" if r in curves.own else "shared shape",
            "angle_gain": _angle_gain(g, config), "angle_gain_ci_low": glo, "angle_gain_ci_high": ghi,
            "n_angle": int((g["angle_in_deg"].abs() >= config.min_angle_for_gain_deg).sum()),
        })
    return pd.DataFrame(rows)


def _angle_gain(g: pd.DataFrame, config: CushionCheckConfig) -> float:
    """Least-squares slope through the origin of angle_out on angle_in (contacts with
    |angle_in| >= min_angle_for_gain_deg); NaN with none."""
    return _gain(g["angle_in_deg"].to_numpy(dtype=float), g["angle_out_deg"].to_numpy(dtype=float), config)


def _gain(a: np.ndarray, b: np.ndarray, config: CushionCheckConfig) -> float:
    m = np.abs(a) >= config.min_angle_for_gain_deg
    if not m.any():
        return math.nan
    return float(a[m] @ b[m] / (a[m] @ a[m]))


# ---------------------------------------------------------------------------------------------
# Two dates
# ---------------------------------------------------------------------------------------------
def compare_checks(before: CushionCheck, after: CushionCheck, config: CushionCheckConfig,
                   rng: np.random.Generator) -> pd.DataFrame:
    """What changed between two checks of one table, per rail and band, plus the cloth.

    Speed ratio: both dates' fitted contacts share one curve per rail (fitted to both); the
    residuals of each date in the band are compared by Welch's t-test (scipy.stats.ttest_ind,
    ``equal_var=False``). Size: after minus before of each date's own curve at the band's median
    speed over both dates, with a bootstrap interval (each date resampled within rails).
    Cloth: Welch's t-test on the pieces' decelerations, size the difference of medians.
    Benjamini-Hochberg over every row. Columns ``measure``, ``rail``, ``band``, ``speed_ref_mm_s``,
    ``n_before``, ``n_after``, ``before``, ``after``, ``change``, ``ci_low``, ``ci_high``,
    ``p_value``, ``p_adjusted``, ``significant``, ``unit``.
    """
    if abs(before.table.length_mm - after.table.length_mm) > 5 or abs(before.table.width_mm - after.table.width_mm) > 5:
        raise ValueError("--before folders are of another table size than the folders checked; compare one table")
    fb = before.contacts[before.contacts["fitted"]].reset_index(drop=True)
    fa = after.contacts[after.contacts["fitted"]].reset_index(drop=True)
    both = pd.concat([fb.assign(date="before"), fa.assign(date="after")], ignore_index=True)
    pooled = fit_curves(both, config)
    both["pooled_residual"] = _residuals(both, pooled)
    cells = []
    for r in RAILS:
        for band in config.band_names:
            gb = both[(both["rail"] == r) & (both["band"] == band) & (both["date"] == "before")]
            ga = both[(both["rail"] == r) & (both["band"] == band) & (both["date"] == "after")]
            if len(gb) >= 2 and len(ga) >= 2 and r in before.curves.coef and r in after.curves.coef:
                vref = float(np.median(np.concatenate([gb["normal_speed_mm_s"], ga["normal_speed_mm_s"]])))
                cells.append((r, band, vref, gb, ga))
    boot = np.full((config.n_boot, len(cells)), np.nan)
    if cells:
        arrays = [(d["rail"].to_numpy(dtype=object), d["normal_speed_mm_s"].to_numpy(dtype=float),
                   d["ratio"].to_numpy(dtype=float)) for d in (fb, fa)]
        for b in range(config.n_boot):
            ib = _boot_indices(arrays[0][0], rng)
            ia = _boot_indices(arrays[1][0], rng)
            cb = _fit_arrays(*(x[ib] for x in arrays[0]), config)
            ca = _fit_arrays(*(x[ia] for x in arrays[1]), config)
            for j, (r, _band, vref, _gb, _ga) in enumerate(cells):
                boot[b, j] = ca.predict(r, vref) - cb.predict(r, vref)
    rows = []
    for j, (r, band, vref, gb, ga) in enumerate(cells):
        p = float(stats.ttest_ind(ga["pooled_residual"], gb["pooled_residual"], equal_var=False).pvalue)
        vb, va = float(before.curves.predict(r, vref)), float(after.curves.predict(r, vref))
        lo, hi = _percentiles(boot[:, j], config.ci_level)
        rows.append({"measure": "speed_ratio", "rail": r, "band": band, "speed_ref_mm_s": vref,
                     "n_before": len(gb), "n_after": len(ga), "before": vb, "after": va,
                     "change": va - vb, "ci_low": lo, "ci_high": hi, "p_value": p, "unit": "1"})
    for phase in ("rolling", "sliding"):
        pb = before.cloth_pieces.loc[before.cloth_pieces["phase"] == phase, "decel_mm_s2"].to_numpy(dtype=float)
        pa = after.cloth_pieces.loc[after.cloth_pieces["phase"] == phase, "decel_mm_s2"].to_numpy(dtype=float)
        if pb.size < 2 or pa.size < 2:
            continue
        p = float(stats.ttest_ind(pa, pb, equal_var=False).pvalue)
        bb = np.median(rng.choice(pa, (config.n_boot, pa.size)), axis=1) - np.median(rng.choice(pb, (config.n_boot, pb.size)), axis=1)
        lo, hi = _percentiles(bb, config.ci_level)
        rows.append({"measure": f"{phase}_deceleration", "rail": "", "band": "", "speed_ref_mm_s": math.nan,
                     "n_before": int(pb.size), "n_after": int(pa.size), "before": float(np.median(pb)),
                     "after": float(np.median(pa)), "change": float(np.median(pa) - np.median(pb)),
                     "ci_low": lo, "ci_high": hi, "p_value": p, "unit": "mm/s^2"})
    cols = ["measure", "rail", "band", "speed_ref_mm_s", "n_before", "n_after", "before", "after", "change",
            "ci_low", "ci_high", "p_value", "p_adjusted", "significant", "unit"]
    out = pd.DataFrame(rows, columns=cols)
    if len(out):
        out["p_adjusted"] = stats.false_discovery_control(out["p_value"].to_numpy(dtype=float), method="bh")
        out["significant"] = out["p_adjusted"] < config.fdr
    # Dead spots that appeared or went: each date's own segment test decides (its BH-adjusted p).
    sb = before.segments.set_index(["rail", "segment"])
    sa = after.segments.set_index(["rail", "segment"])
    dead_rows = []
    for key in sorted(set(sb.index[sb["flagged"]]) | set(sa.index[sa["flagged"]])):
        fb_, fa_ = key in sb.index and bool(sb.loc[key, "flagged"]), key in sa.index and bool(sa.loc[key, "flagged"])
        if fb_ == fa_:
            measure = "dead_spot_still"
        else:
            measure = "dead_spot_new" if fa_ else "dead_spot_gone"
        vb = float(sb.loc[key, "shortfall"]) if key in sb.index else math.nan
        va = float(sa.loc[key, "shortfall"]) if key in sa.index else math.nan
        dead_rows.append({"measure": measure, "rail": key[0], "band": key[1], "speed_ref_mm_s": math.nan,
                          "n_before": int(sb.loc[key, "n_segment"]) if key in sb.index else 0,
                          "n_after": int(sa.loc[key, "n_segment"]) if key in sa.index else 0,
                          "before": vb, "after": va, "change": va - vb, "ci_low": math.nan, "ci_high": math.nan,
                          "p_value": math.nan,
                          "p_adjusted": float(sa.loc[key, "p_adjusted"]) if fa_ else float(sb.loc[key, "p_adjusted"]),
                          "significant": fb_ != fa_, "unit": "1"})
    if dead_rows:
        out = pd.concat([out, pd.DataFrame(dead_rows, columns=cols)], ignore_index=True) if len(out) else pd.DataFrame(dead_rows, columns=cols)
    return out


# ---------------------------------------------------------------------------------------------
# Outputs: tidy CSV, terminal table, rail map
# ---------------------------------------------------------------------------------------------
CSV_COLUMNS = ["measure", "rail", "segment", "band", "speed_lo_mm_s", "speed_hi_mm_s", "speed_ref_mm_s",
               "n", "value", "ci_low", "ci_high", "unit", "test", "p_value", "p_adjusted", "flagged", "note"]


def results_table(check: CushionCheck, changes: pd.DataFrame | None = None) -> pd.DataFrame:
    """Every result as one tidy table (``CSV_COLUMNS``, one row per measured quantity), the
    content of ``cushions.csv``."""
    cfg = check.config
    ci = f"{cfg.ci_level:.0%} percentile bootstrap (Efron 1979), {cfg.n_boot} resamples"
    rows = []
    for _, b in check.bands.iterrows():
        base = {"rail": b["rail"], "segment": "", "band": b["band"], "speed_lo_mm_s": b["speed_lo_mm_s"],
                "speed_hi_mm_s": b["speed_hi_mm_s"], "speed_ref_mm_s": b["speed_ref_mm_s"], "n": b["n_contacts"],
                "test": "", "p_value": math.nan, "p_adjusted": math.nan, "flagged": False}
        rows.append({**base, "measure": "speed_ratio", "value": b["ratio_fit"], "ci_low": b["ci_low"],
                     "ci_high": b["ci_high"], "unit": "1",
                     "note": f"least-squares curve b0 + b1 v + b2/v ({b['curve']}) at the band's median normal speed; {ci}"})
        rows.append({**base, "measure": "speed_ratio_observed_median", "value": b["ratio_median"],
                     "ci_low": math.nan, "ci_high": math.nan, "unit": "1", "note": "median of the band's rolling contacts"})
        rows.append({**base, "measure": "rebound_angle_gain", "n": b["n_angle"], "value": b["angle_gain"],
                     "ci_low": b["angle_gain_ci_low"], "ci_high": b["angle_gain_ci_high"], "unit": "1",
                     "note": f"least-squares slope of angle_out on angle_in through 0, |angle_in| >= {cfg.min_angle_for_gain_deg:g} deg; 1 = mirror; {ci}"})
    for _, s in check.segments.iterrows():
        rows.append({"measure": "segment_shortfall", "rail": s["rail"], "segment": s["segment"], "band": "",
                     "speed_lo_mm_s": math.nan, "speed_hi_mm_s": math.nan, "speed_ref_mm_s": math.nan,
                     "n": s["n_segment"], "value": s["shortfall"], "ci_low": s["shortfall_ci_low"],
                     "ci_high": s["shortfall_ci_high"], "unit": "1",
                     "test": "Mann-Whitney U one-sided (segment below rest of rail), Benjamini-Hochberg",
                     "p_value": s["p_value"], "p_adjusted": s["p_adjusted"], "flagged": bool(s["flagged"]),
                     "note": f"Hodges-Lehmann shift of speed-ratio residuals vs {s['n_rest']} contacts on the rest of the rail; flagged when p_adjusted < {cfg.fdr:g} and shift <= -{cfg.min_shortfall:g}"})
    for _, c in check.cloth.iterrows():
        for measure, value, lo, hi, unit in (
            (f"{c['phase']}_deceleration", c["decel_mm_s2"], c["ci_low"], c["ci_high"], "mm/s^2"),
            (f"mu_{'roll' if c['phase'] == 'rolling' else 'slide'}", c["mu"], c["ci_low"] / cfg.g_mm_s2,
             c["ci_high"] / cfg.g_mm_s2, "1"),
        ):
            rows.append({"measure": measure, "rail": "", "segment": "", "band": "", "speed_lo_mm_s": math.nan,
                         "speed_hi_mm_s": math.nan, "speed_ref_mm_s": math.nan, "n": c["n_pieces"], "value": value,
                         "ci_low": lo, "ci_high": hi, "unit": unit, "test": "", "p_value": math.nan,
                         "p_adjusted": math.nan, "flagged": False,
                         "note": "median over constant-acceleration pieces of tracked velocity; reference Mathavan et al. 2009: rolling ~125 mm/s^2, sliding 1750-2400 mm/s^2 [secondary]"})
    ref = cfg.reference_table_lengths
    ref_note = f"reference: at least {ref[0]:g} to {ref[1]:g} table lengths (shared/spec/references.md, liveliness [secondary; also memory])"
    for _, m in check.lengths_measured.iterrows():
        rows.append({"measure": "table_lengths_measured", "rail": "", "segment": "", "band": "",
                     "speed_lo_mm_s": math.nan, "speed_hi_mm_s": math.nan, "speed_ref_mm_s": m["start_speed_mm_s"],
                     "n": m["cushions"], "value": m["table_lengths"], "ci_low": math.nan, "ci_high": math.nan,
                     "unit": "table lengths", "test": "", "p_value": math.nan, "p_adjusted": math.nan, "flagged": False,
                     "note": f"{m['folder']} shot {m['shot']}: spot-to-spot shot, start speed in speed_ref_mm_s, cushions in n; {ref_note}"})
    if check.lengths_predicted:
        p = check.lengths_predicted
        rows.append({"measure": "table_lengths_predicted", "rail": p["rails"], "segment": "", "band": "",
                     "speed_lo_mm_s": math.nan, "speed_hi_mm_s": math.nan, "speed_ref_mm_s": p["speed_mm_s"],
                     "n": math.nan, "value": p["table_lengths"], "ci_low": math.nan, "ci_high": math.nan,
                     "unit": "table lengths", "test": "", "p_value": math.nan, "p_adjusted": math.nan, "flagged": False,
                     "note": f"simulated centre-ball shot head spot through foot spot at speed_ref_mm_s with the fitted short-rail curve and cloth; {ref_note}"})
    if changes is not None:
        for _, c in changes.iterrows():
            rows.append({"measure": f"change_{c['measure']}", "rail": c["rail"], "segment": "", "band": c["band"],
                         "speed_lo_mm_s": math.nan, "speed_hi_mm_s": math.nan, "speed_ref_mm_s": c["speed_ref_mm_s"],
                         "n": c["n_after"], "value": c["change"], "ci_low": c["ci_low"], "ci_high": c["ci_high"],
                         "unit": c["unit"], "test": "Welch's t-test, Benjamini-Hochberg", "p_value": c["p_value"],
                         "p_adjusted": c["p_adjusted"], "flagged": bool(c["significant"]),
                         "note": f"after minus before (before {c['before']:.4g}, after {c['after']:.4g}, n before {c['n_before']})"})
    return pd.DataFrame(rows, columns=CSV_COLUMNS)


def format_report(check: CushionCheck, changes: pd.DataFrame | None = None) -> str:
    """The terminal table: speed ratio per rail and band, dead spots, cloth, table lengths and,
    with ``changes``, what changed."""
    cfg = check.config
    lines = []
    c = check.contacts
    lines.append(f"Cushion check of a {check.table.length_mm:g} x {check.table.width_mm:g} mm table, "
                 f"{len(check.folders)} folder(s): {len(c)} cushion contacts, {int(c['usable'].sum())} arrived rolling "
                 f"and were measured ({int(c['fitted'].sum())} fitted).")
    edges = cfg.band_edges_mm_s
    heads = []
    for k, name in enumerate(cfg.band_names):
        hi = "up" if not math.isfinite(edges[k + 1]) else f"{edges[k + 1] / 1000:g}"
        heads.append(f"{name} {edges[k] / 1000:g}-{hi} m/s")
    lines.append("")
    lines.append(f"Speed ratio normal to the cushion (rolling arrivals; fit [{cfg.ci_level:.0%} bootstrap interval] n):")
    w = 27
    lines.append("  " + "rail".ljust(8) + "".join(h.ljust(w) for h in heads))
    for r in RAILS:
        cells = []
        for name in cfg.band_names:
            b = check.bands[(check.bands["rail"] == r) & (check.bands["band"] == name)]
            if len(b) == 0:
                cells.append("-".ljust(w))
            else:
                b = b.iloc[0]
                cells.append(f"{b['ratio_fit']:.3f} [{b['ci_low']:.3f},{b['ci_high']:.3f}] {int(b['n_contacts'])}".ljust(w))
        lines.append("  " + r.ljust(8) + "".join(cells))
    lines.append("  (curve ratio = b0 + b1 v + b2/v per rail, after Mathavan et al. 2009; shown at each band's median speed)")
    lines.append("")
    lines.append("Rebound angle / incoming angle (1 = mirror bounce, above 1 comes off wider):")
    for r in RAILS:
        b = check.bands[check.bands["rail"] == r]
        parts = [f"{x['band']} {x['angle_gain']:.2f} [{x['angle_gain_ci_low']:.2f},{x['angle_gain_ci_high']:.2f}]"
                 for _, x in b.iterrows() if np.isfinite(x["angle_gain"])]
        lines.append(f"  {r.ljust(8)}{'; '.join(parts) if parts else '-'}")
    lines.append("")
    s = check.segments
    flagged = s[s["flagged"]]
    lines.append(f"Dead spots (Mann-Whitney U, one-sided, Benjamini-Hochberg at {cfg.fdr:g}; at least "
                 f"{cfg.min_shortfall:g} below the rest of the rail): {len(s)} segment(s) tested, {len(flagged)} flagged")
    for _, x in flagged.iterrows():
        lines.append(f"  DEAD  {x['rail']} diamonds {x['segment']}: ratio {x['shortfall']:+.3f} vs rest of rail "
                     f"[{x['shortfall_ci_low']:+.3f},{x['shortfall_ci_high']:+.3f}], p adj {x['p_adjusted']:.2g}, n {int(x['n_segment'])}")
    if len(s) < sum(len(segment_edges(check.table, r)) - 1 for r in RAILS):
        lines.append(f"  (segments with fewer than {cfg.min_segment_contacts} rolling contacts are not tested)")
    lines.append("")
    cl = check.cloth.set_index("phase")
    lines.append("Cloth (medians over tracked pieces, Mathavan et al. 2009 for comparison: rolling ~125, sliding 1750-2400 mm/s^2):")
    for phase, mu in (("rolling", "mu_roll"), ("sliding", "mu_slide")):
        x = cl.loc[phase]
        if x["n_pieces"] == 0:
            lines.append(f"  {phase}: not measured")
        else:
            lines.append(f"  {phase} deceleration {x['decel_mm_s2']:.0f} mm/s^2 [{x['ci_low']:.0f},{x['ci_high']:.0f}], "
                         f"{mu} {x['mu']:.4f}, {int(x['n_pieces'])} pieces")
    roll = cl.loc["rolling", "decel_mm_s2"]
    if np.isfinite(roll):
        lines.append(f"  a ball rolling at 1 m/s runs {1e6 / (2 * roll) / 1000:.2f} m before it stops (v^2 / 2a)")
    lines.append("")
    ref = cfg.reference_table_lengths
    lines.append(f"Table lengths, firm centre-ball shot head spot through foot spot (reference: at least {ref[0]:g} to "
                 f"{ref[1]:g}; shared/spec/references.md [secondary]):")
    for _, m in check.lengths_measured.iterrows():
        lines.append(f"  measured {m['table_lengths']:.2f} ({Path(m['folder']).name} shot {m['shot']}, "
                     f"{m['start_speed_mm_s'] / 1000:.2f} m/s, {int(m['cushions'])} cushions)")
    p = check.lengths_predicted
    if p:
        if np.isfinite(p["table_lengths"]):
            verdict = ("at or above" if p["table_lengths"] >= ref[1] else
                       ("within" if p["table_lengths"] >= ref[0] else "below"))
            lines.append(f"  predicted {p['table_lengths']:.2f} at {p['speed_mm_s'] / 1000:g} m/s from the {p['rails']} "
                         f"curve(s) and the cloth: {verdict} the reference range (which states no speed; "
                         "--firm-speed sets ours)")
        else:
            lines.append("  predicted: not possible (no short-rail curve or no cloth measurement)")
    if changes is not None:
        lines.append("")
        lines.append(f"Changes since --before (after minus before; Welch's t-test, Benjamini-Hochberg at {cfg.fdr:g}):")
        if len(changes) == 0:
            lines.append("  nothing comparable (too few contacts in common rails and bands)")
        for _, x in changes.iterrows():
            unit = "" if x["unit"] == "1" else f" {x['unit']}"
            if x["measure"].startswith("dead_spot"):
                state = {"dead_spot_new": "NEW DEAD SPOT", "dead_spot_gone": "dead spot gone",
                         "dead_spot_still": "still dead"}[x["measure"]]
                lines.append(f"  {state}: {x['rail']} diamonds {x['band']}, shortfall {x['before']:+.3f} -> "
                             f"{x['after']:+.3f} (p adj {x['p_adjusted']:.2g} where flagged)")
                continue
            where = f"{x['rail']} {x['band']}" if x["rail"] else x["measure"].replace("_", " ")
            mark = "CHANGED" if x["significant"] else "same   "
            lines.append(f"  {mark} {where.ljust(22)} {x['before']:.4g} -> {x['after']:.4g} ({x['change']:+.3g} "
                         f"[{x['ci_low']:+.3g},{x['ci_high']:+.3g}]{unit}), p adj {x['p_adjusted']:.2g}")
    return "\n".join(lines)


# Our own colours for the rail map (BGR for OpenCV): slate cloth, pale rails, a ramp from warm
# sand (even) to brick red (least lively).
_MAP_BG = (246, 244, 240)
_MAP_CLOTH = (92, 84, 62)
_MAP_RAIL = (214, 222, 226)
_MAP_EVEN = (170, 214, 236)
_MAP_DEAD = (40, 50, 176)
_MAP_INK = (40, 36, 30)


def draw_rail_map(check: CushionCheck, scale_px_per_mm: float = 0.36) -> np.ndarray:
    """The rail map (BGR image, uint8, drawn with OpenCV): the table to scale, every segment
    between sights coloured by its median speed-ratio residual against its rail's curve (sand =
    even, brick red = 0.15 or more below), flagged dead spots outlined and labelled, each rail's
    fitted ratio per band written beside it, and the contacts as dots."""
    import cv2

    t = check.table
    m, band_px = 170, 28
    Wpx = int(round(t.length_mm * scale_px_per_mm)) + 2 * m
    Hpx = int(round(t.width_mm * scale_px_per_mm)) + 2 * m + 60
    img = np.full((Hpx, Wpx, 3), _MAP_BG, np.uint8)

    def P(x, y):  # table mm -> pixel (x right, y up the image)
        return (int(round(m + x * scale_px_per_mm)), int(round(m + t.width_mm * scale_px_per_mm - y * scale_px_per_mm)))

    cv2.rectangle(img, P(-band_px / scale_px_per_mm, t.width_mm + band_px / scale_px_per_mm),
                  P(t.length_mm + band_px / scale_px_per_mm, -band_px / scale_px_per_mm), _MAP_RAIL, -1)
    cv2.rectangle(img, P(0, t.width_mm), P(t.length_mm, 0), _MAP_CLOTH, -1)
    c = check.contacts
    flagged = {(r, s) for r, s, f in zip(check.segments["rail"], check.segments["segment"], check.segments["flagged"]) if f}
    off = band_px / scale_px_per_mm
    for rail in RAILS:
        edges = segment_edges(t, rail)
        for lo, hi in zip(edges[:-1], edges[1:]):
            seg = f"{lo:g}-{hi:g}"
            g = c[(c["rail"] == rail) & (c["segment"] == seg) & c["usable"]]
            a0, a1 = t.from_diamonds(rail, lo), t.from_diamonds(rail, hi)
            if rail == "bottom":
                p0, p1 = P(a0, 0), P(a1, -off)
            elif rail == "top":
                p0, p1 = P(a0, t.width_mm + off), P(a1, t.width_mm)
            elif rail == "left":
                p0, p1 = P(-off, a0), P(0, a1)
            else:
                p0, p1 = P(t.length_mm, a0), P(t.length_mm + off, a1)
            if len(g):
                res = float(np.nanmedian(g["residual"])) if g["residual"].notna().any() else 0.0
                f = float(np.clip(-res / 0.15, 0.0, 1.0))
                colour = tuple(int(round(e + f * (d - e))) for e, d in zip(_MAP_EVEN, _MAP_DEAD))
                cv2.rectangle(img, p0, p1, colour, -1)
            cv2.rectangle(img, p0, p1, _MAP_INK, 3 if (rail, seg) in flagged else 1)
            if (rail, seg) in flagged:
                s = check.segments[(check.segments["rail"] == rail) & (check.segments["segment"] == seg)].iloc[0]
                label = f"DEAD {s['shortfall']:+.2f}"
                cx, cy = (p0[0] + p1[0]) // 2, (p0[1] + p1[1]) // 2
                dy = {"bottom": 30, "top": -34, "left": 0, "right": 0}[rail]
                dx = {"left": -150, "right": 40}.get(rail, -40)
                cv2.putText(img, label, (cx + dx, cy + dy + (6 if rail in ("left", "right") else 0) + (18 if rail == "bottom" else 0)),
                            cv2.FONT_HERSHEY_SIMPLEX, 0.5, _MAP_DEAD, 1, cv2.LINE_AA)
    for _rail, _k, (sx, sy) in t.sights():
        # Sights sit behind the nose; draw them on the rail band's outer half.
        cv2.circle(img, P(sx, sy), 3, _MAP_INK, -1, cv2.LINE_AA)
    for _, row in c.iterrows():
        col = (235, 235, 235) if row["usable"] else (150, 150, 150)
        cv2.circle(img, P(row["x_mm"], row["y_mm"]), 3, col, -1, cv2.LINE_AA)
    font = cv2.FONT_HERSHEY_SIMPLEX
    for rail in RAILS:
        b = check.bands[check.bands["rail"] == rail]
        text = [f"{rail}:"] + [f"{x['band']} {x['ratio_fit']:.2f}" for _, x in b.iterrows()]
        if rail == "bottom":
            org = [(m, Hpx - 60 - m + band_px + 40)]
            txt = ["  ".join(text)]
        elif rail == "top":
            org = [(m, m - band_px - 14)]
            txt = ["  ".join(text)]
        elif rail == "left":
            org = [(8, m + 20 + 18 * i) for i in range(len(text))]
            txt = text
        else:
            org = [(Wpx - m + band_px + 8, m + 20 + 18 * i) for i in range(len(text))]
            txt = text
        for o, s_ in zip(org, txt):
            cv2.putText(img, s_, o, font, 0.48, _MAP_INK, 1, cv2.LINE_AA)
    cv2.putText(img, "Cushion speed ratio by segment between sights (rolling arrivals)", (m, 30), font, 0.6, _MAP_INK, 1, cv2.LINE_AA)
    if not c["usable"].any():
        # An empty map reads as "every cushion even"; say plainly that nothing was measured.
        cx, cy = P(t.length_mm / 2, t.width_mm / 2)
        for k, line in enumerate(("No contact in these clips arrived rolling, so no stretch",
                                  "was measured. Roll balls into the cushions to check them.")):
            size = cv2.getTextSize(line, font, 0.7, 1)[0]
            cv2.putText(img, line, (cx - size[0] // 2, cy - 10 + 30 * k), font, 0.7, (235, 235, 235), 1, cv2.LINE_AA)
    # Legend: the colour ramp.
    x0, y0 = m, Hpx - 40
    for i in range(200):
        f = i / 199
        colour = tuple(int(round(e + f * (d - e))) for e, d in zip(_MAP_EVEN, _MAP_DEAD))
        cv2.line(img, (x0 + i, y0), (x0 + i, y0 + 14), colour, 1)
    cv2.putText(img, "even", (x0 - 45, y0 + 12), font, 0.45, _MAP_INK, 1, cv2.LINE_AA)
    cv2.putText(img, "0.15 below rail curve; thick outline = flagged dead spot; grey dots = not measured (sliding arrival)",
                (x0 + 208, y0 + 12), font, 0.42, _MAP_INK, 1, cv2.LINE_AA)
    return img


def write_check(check: CushionCheck, out_dir, changes: pd.DataFrame | None = None,
                run_info: dict | None = None) -> dict[str, Path]:
    """Write ``cushions.csv`` (:func:`results_table`), ``cushion_contacts.csv`` (every contact),
    ``cushion_report.txt`` (:func:`format_report`), ``rail_map.png`` (:func:`draw_rail_map`) and
    ``cushion_run.json`` (settings and folders) into ``out_dir``, each file atomically
    (``vision.atomic``). Returns name -> path."""
    import json
    from dataclasses import asdict

    from vision.atomic import write_image_atomic, write_text_atomic

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = {name: out / name for name in ("cushions.csv", "cushion_contacts.csv", "cushion_report.txt",
                                           "rail_map.png", "cushion_run.json")}
    write_text_atomic(paths["cushions.csv"], results_table(check, changes).to_csv(index=False, float_format="%.6g"))
    write_text_atomic(paths["cushion_contacts.csv"], check.contacts.to_csv(index=False, float_format="%.6g"))
    write_text_atomic(paths["cushion_report.txt"], format_report(check, changes) + "\n")
    write_image_atomic(paths["rail_map.png"], draw_rail_map(check))
    cfg = {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(check.config).items()}
    cfg["band_edges_mm_s"] = [e if math.isfinite(e) else "inf" for e in check.config.band_edges_mm_s]
    info = {"folders": list(check.folders), "config": cfg, **(run_info or {})}
    write_text_atomic(paths["cushion_run.json"], json.dumps(info, indent=2, default=str) + "\n")
    return paths
