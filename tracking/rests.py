"""One place per stay at rest: a resting ball's rows moved onto the robust centre of its reads.

Input: the tracks of ``tracking.tracker`` (columns ``frame, t, track, x, y, vx, vy, seen``
and ``x_meas, y_meas``, the detection taken in each seen row; mm, s, mm/s, table frame of
``vision.table``), the stays at rest found by ``tracking.events.find_events_and_rests``
(``track, t_begin, t_end``) and optionally the detections (``frame, x, y, sigma_mm``).

Why: the detector carries a resting ball's fit over unchanged while nothing near it changes,
and fits it afresh only when something does (a ball rolling by, the cue, an arm); those fits
can differ by several millimetres (a fit that took in the ball's shadow or a dark limb, or
was made while an arm still covered part of the ball), and each is repeated until the next.
The smoother, whose motion model lets a ball accelerate, follows each fit in turn and so
keeps every gross fit for as long as it was repeated. A ball at rest does not move until
something touches it (Newton's first law), and the event finder has already said when
nothing did, so over such a stay the ball has one place.

Method: that place is the weighted geometric median of the stay's reads (Weiszfeld 1937, with
weights; the point minimising the weighted sum of distances), each read weighted by the
inverse square of the detector's stated ``sigma_mm`` (its whole error, biases included:
a fit it doubts counts less); the median, unlike the weighted mean, is not dragged by a
minority of gross fits. Every row of the stay, seen or coasted, is set there with zero
velocity. A stay with fewer than ``MIN_READS`` reads is left as smoothed.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

# Fewest reads that make a stay's place: a median of fewer is a single fit.
MIN_READS = 3
# Weiszfeld iterations and the step (mm) below which they stop; a floor (mm) on each read's
# distance keeps a read that lies on the estimate from dividing by zero.
_ITERS = 50
_TOL_MM = 1e-4
_FLOOR_MM = 1e-3


def weighted_geometric_median(points: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """The point (2,) minimising ``sum w_i |p - points_i|`` over ``points`` (n, 2) mm with
    ``weights`` (n,) > 0, by Weiszfeld's iteration (Weiszfeld 1937; weighted form as in
    Kuhn 1973), started from the weighted mean."""
    w = np.asarray(weights, dtype=float)
    p = np.asarray(points, dtype=float)
    est = (w[:, None] * p).sum(axis=0) / w.sum()
    for _ in range(_ITERS):
        d = np.maximum(np.hypot(*(p - est).T), _FLOOR_MM)
        k = w / d
        new = (k[:, None] * p).sum(axis=0) / k.sum()
        if float(np.hypot(*(new - est))) < _TOL_MM:
            return new
        est = new
    return est


def _by_frame(detections: pd.DataFrame | None) -> tuple[np.ndarray, ...] | None:
    """``detections``' ``frame, x, y, sigma_mm`` as arrays sorted by frame (a stable sort, so
    each frame keeps its rows' order), for :func:`_read_sigmas`; None without ``sigma_mm``."""
    if detections is None or "sigma_mm" not in detections.columns:
        return None
    order = np.argsort(detections["frame"].to_numpy(), kind="stable")
    return tuple(detections[c].to_numpy()[order] for c in ("frame", "x", "y", "sigma_mm"))


def _read_sigmas(rows: pd.DataFrame, by_frame: tuple[np.ndarray, ...] | None) -> np.ndarray:
    """The detector's ``sigma_mm`` (n,) of each seen row's read (``x_meas, y_meas``) of
    ``rows``: the nearest detection of its frame in ``by_frame`` (:func:`_by_frame`; the first
    of equally near ones), taken when it lies on the read; 1 where there is none to find."""
    sig = np.ones(len(rows))
    if by_frame is None or not len(rows):
        return sig
    frame, dx, dy, ds = by_frame
    rf = rows["frame"].to_numpy()
    lo = np.searchsorted(frame, rf, side="left")
    hi = np.searchsorted(frame, rf, side="right")
    rx = rows["x_meas"].to_numpy(float)
    ry = rows["y_meas"].to_numpy(float)
    for i in np.flatnonzero(hi > lo):
        a, b = lo[i], hi[i]
        d = np.hypot(dx[a:b].astype(float) - rx[i], dy[a:b].astype(float) - ry[i])
        j = int(np.argmin(d))
        s = float(ds[a + j])
        if d[j] < 1e-3 and np.isfinite(s) and s > 0:
            sig[i] = s
    return sig


def hold_rests(tracks: pd.DataFrame, rests: pd.DataFrame,
               detections: pd.DataFrame | None = None) -> pd.DataFrame:
    """A copy of ``tracks`` with the rows of each stay of ``rests`` (``track, t_begin, t_end``,
    s, inclusive) set to the stay's place (:func:`weighted_geometric_median` of its seen rows'
    reads, weights ``1 / sigma_mm^2`` from ``detections``) and zero velocity. Stays with fewer
    than ``MIN_READS`` reads, and tracks without ``x_meas, y_meas``, are left as they are."""
    out = tracks.copy()
    if not len(rests) or not {"x_meas", "y_meas"} <= set(tracks.columns):
        return out
    by_frame = _by_frame(detections)
    tid = out["track"].to_numpy()
    t = out["t"].to_numpy(float)
    for r in rests.itertuples(index=False):
        idx = np.flatnonzero((tid == r.track) & (t >= r.t_begin) & (t <= r.t_end))
        rows = out.iloc[idx]
        seen = (rows["seen"].to_numpy() > 0) & np.isfinite(rows["x_meas"].to_numpy(float))
        if seen.sum() < MIN_READS:
            continue
        reads = rows[seen]
        sig = _read_sigmas(reads, by_frame)
        spot = weighted_geometric_median(reads[["x_meas", "y_meas"]].to_numpy(float), 1.0 / sig**2)
        cols = [out.columns.get_loc(c) for c in ("x", "y", "vx", "vy")]
        out.iloc[idx, cols[0]] = spot[0]
        out.iloc[idx, cols[1]] = spot[1]
        out.iloc[idx, cols[2]] = 0.0
        out.iloc[idx, cols[3]] = 0.0
    return out
