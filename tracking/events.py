"""Events (starts, collisions, cushion contacts, pockets, stops) and shots from ball tracks.

Input: the tracks DataFrame of ``tracking.tracker`` (columns ``frame, t, track, ball, x, y, vx,
vy, seen`` of ``shared/spec/results-format.md``; mm, s, mm/s, table frame of ``vision.table``),
optionally with ``x_meas, y_meas`` (the raw detection of each seen row); or the raw detections
themselves (``frame, x, y``), matched to the tracks frame by frame. Contacts are solved from the
raw measurements where there are any, since smoothing pulls positions toward the model.

Output, following the results format exactly:

* events: ``event, shot, t, kind, track, other, x, y, rail, diamond, speed_in, speed_out,
  angle_in, angle_out, restitution`` plus the extra column ``pocket`` (pocket name for a
  ``pocket`` event, else ""). ``other`` is a nullable integer; empty fields are NaN / "".
* shots: ``shot, t_start, t_end, cue_track, balls_moved, cushions, collisions, pocketed``.

Method
------
1. Each track is cut into moving stretches by its smoothed speed (hysteresis between
   ``rest_speed_mm_s`` and ``move_speed_mm_s``).
2. Contacts are found roughly, at frame level: a cushion contact where the velocity component
   normal to a rail changes sign near that rail's reversal line (``TableSpec.reversal_line``);
   a collision where two balls' centres come within a diameter (plus a margin) and at least one
   velocity changes.
3. Each contact is then solved between frames. The path on each side is fitted by least squares
   with per-axis quadratics in time, ``p(t) = c0 + c1 t + c2 t^2`` (constant acceleration: a
   sliding ball decelerates at ``mu_s g`` along a parabola when it carries side or masse spin;
   Alciatore 2004), from the samples between the neighbouring contacts of that ball (at most
   ``fit_window_s`` each side), leaving out samples whose exposure straddles the contact.
   *Cushion*: each side's fit is intersected with the reversal line; in a rigid impact both
   meet it at the same instant, so the two crossing times are combined by inverse-variance
   weighting (the linearised least-squares time where both fits cross the line). *Collision*:
   the time where the centres are one diameter apart, ``|p1(t) - p2(t)| = D``, is solved
   (a quartic) from the approach fits and from the departure fits and the two combined the same
   way. *Start*: the first moving samples' fit extrapolated back to the rest position. *Stop*:
   the instant the fitted velocity of the last moving samples vanishes, ``argmin |p'(t)|``.
   *Pocket*: a track that ends (before the clip does) heading into a pocket mouth; the time its
   fitted path crosses the mouth line (``TableSpec.pockets()``).
4. Shots are the unions of overlapping moving stretches; ``cue_track`` is the ball of the
   shot's first ``start``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from scipy.stats import chi2

from vision.table import RAILS, TableSpec, cushion_angles, rail_inward_normal

EVENT_COLUMNS = [
    "event", "shot", "t", "kind", "track", "other", "x", "y", "rail", "diamond",
    "speed_in", "speed_out", "angle_in", "angle_out", "restitution", "pocket",
]
SHOT_COLUMNS = ["shot", "t_start", "t_end", "cue_track", "balls_moved", "cushions", "collisions",
                "pocketed"]
TRACK_INPUT_COLUMNS = ("frame", "t", "track", "x", "y", "vx", "vy", "seen")
KINDS = ("start", "collision", "cushion", "pocket", "stop")


@dataclass(frozen=True)
class EventConfig:
    """Knobs of event finding, each with its physical meaning (mm, s, mm/s).

    ``rest_speed_mm_s`` / ``move_speed_mm_s``: smoothed speeds below which a ball is at rest and
    above which it moves (hysteresis; above the speed noise of a resting track, about 20-30 mm/s
    with 1 mm detections and up to 40 mm/s at the end of a rest stretch). ``min_move_s``: shortest motion kept. ``fit_window_s``: longest
    stretch of samples fitted on each side of a contact. ``quadratic_min_samples``: fewer
    samples on a side are fitted by a straight line. ``exposure_s``: exposure time of a frame;
    samples whose exposure spans a contact are left out of its fits (None: half the frame
    interval, a 180-degree shutter, common practice). ``cushion_reach_mm``: a normal-velocity
    reversal counts as a cushion contact only with the centre this close to the reversal line
    (plus one frame's travel). ``collision_margin_mm``: centres closer than a diameter plus this
    (plus one frame's relative travel) may be touching. ``min_velocity_change_mm_s``: smallest
    velocity change that marks a contact. ``start_fit_s`` / ``stop_fit_s``: samples fitted to
    solve a start / stop. ``pocket_reach_mm`` / ``pocket_horizon_s``: a track ending within this
    of a pocket mouth whose path crosses the mouth within this time was pocketed.
    """

    rest_speed_mm_s: float = 50.0
    move_speed_mm_s: float = 150.0
    min_move_s: float = 0.05
    fit_window_s: float = 0.3
    quadratic_min_samples: int = 6
    exposure_s: float | None = None
    cushion_reach_mm: float = 30.0
    collision_margin_mm: float = 15.0
    min_velocity_change_mm_s: float = 100.0
    start_fit_s: float = 0.1
    stop_fit_s: float = 0.6
    pocket_reach_mm: float = 150.0
    pocket_horizon_s: float = 0.5
    meas_sigma_mm: float = 2.0

    def __post_init__(self) -> None:
        for name, value in self.__dict__.items():
            if name == "exposure_s" and value is None:
                continue
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise ValueError(f"EventConfig.{name} = {value!r} must be a positive number")
        if self.rest_speed_mm_s >= self.move_speed_mm_s:
            raise ValueError(f"rest_speed_mm_s {self.rest_speed_mm_s} must be below "
                             f"move_speed_mm_s {self.move_speed_mm_s}")
        if self.quadratic_min_samples < 3:
            raise ValueError(f"quadratic_min_samples {self.quadratic_min_samples} must be >= 3")


# --- path fits -------------------------------------------------------------------------------
@dataclass
class _Fit:
    """Per-axis polynomial ``p(t) = sum_k coef[k] (t - t0)^k`` fitted to (n, 2) positions (mm).

    ``coef`` (3, 2) (unused orders are 0); ``cov`` (3, 3) is ``(A^T A)^-1`` of the design matrix
    so ``var p(t) = s2 g^T cov g`` with ``g = [1, tau, tau^2]``; ``s2`` the per-axis residual
    variance (mm^2).
    """

    t0: float
    coef: np.ndarray
    cov: np.ndarray
    s2: float
    n: int
    deg: int

    def pos(self, t: float) -> np.ndarray:
        tau = t - self.t0
        return self.coef[0] + self.coef[1] * tau + self.coef[2] * tau**2

    def vel(self, t: float) -> np.ndarray:
        tau = t - self.t0
        return self.coef[1] + 2.0 * self.coef[2] * tau

    def var(self, t: float) -> float:
        tau = t - self.t0
        g = np.array([1.0, tau, tau**2])
        return float(self.s2 * g @ self.cov @ g)


def _fit(ts: np.ndarray, ps: np.ndarray, t0: float, deg: int, sigma_mm: float) -> _Fit | None:
    """Least-squares fit of degree ``deg`` (0, 1 or 2) to samples ts (n,) s, ps (n, 2) mm."""
    n = len(ts)
    deg = min(deg, n - 1)
    if n == 0 or deg < 0:
        return None
    tau = ts - t0
    A = np.vander(tau, deg + 1, increasing=True)  # columns 1, tau, tau^2
    coef, *_ = np.linalg.lstsq(A, ps, rcond=None)
    res = ps - A @ coef
    dof = 2 * (n - deg - 1)
    # The residual scatter where there are spare samples, else the nominal detection noise;
    # floored so exact (noise-free) data still gives finite weights.
    s2 = float(np.sum(res**2) / dof) if dof >= 4 else sigma_mm**2
    s2 = max(s2, 1e-8)
    cov = np.zeros((3, 3))
    cov[: deg + 1, : deg + 1] = np.linalg.pinv(A.T @ A)
    full = np.zeros((3, 2))
    full[: deg + 1] = coef
    return _Fit(t0, full, cov, s2, n, deg)


def _roots_near(coeffs_high_first, t_guess_tau: float, lo: float, hi: float) -> float | None:
    """Real root of a polynomial (numpy order) in [lo, hi] nearest ``t_guess_tau``, else None."""
    c = np.trim_zeros(np.asarray(coeffs_high_first, dtype=float), "f")
    if len(c) < 2:
        return None
    r = np.roots(c)
    r = r[np.abs(r.imag) <= 1e-9 * np.maximum(1.0, np.abs(r.real))].real
    r = r[(r >= lo) & (r <= hi)]
    if not len(r):
        return None
    return float(r[np.argmin(np.abs(r - t_guess_tau))])


# --- per-track data --------------------------------------------------------------------------
@dataclass
class _Ball:
    track: int
    t: np.ndarray  # (N,) s
    frame: np.ndarray  # (N,)
    p: np.ndarray  # (N, 2) smoothed mm
    v: np.ndarray  # (N, 2) smoothed mm/s
    raw: np.ndarray  # (N, 2) raw measurement mm, NaN where unseen
    sigma: float = 1.0  # detection noise per axis, mm, estimated from the samples
    moves: list = field(default_factory=list)  # [(i0, i1)] index ranges, inclusive
    marks: list = field(default_factory=list)  # rough event times, s

    def samples(self, t_lo: float, t_hi: float, exclude=None) -> tuple[np.ndarray, np.ndarray]:
        """Raw samples with t_lo < t < t_hi: ts (n,), ps (n, 2); ``exclude`` (t, half-width)
        drops those within half-width of t."""
        ok = (self.t > t_lo) & (self.t < t_hi) & np.isfinite(self.raw[:, 0])
        if exclude is not None:
            ok &= np.abs(self.t - exclude[0]) >= exclude[1]
        return self.t[ok], self.raw[ok]

    def bounds(self, t_event: float, guard: float) -> tuple[float, float]:
        """Neighbouring rough event times of this ball around ``t_event`` (beyond ``guard``)."""
        before = [m for m in self.marks if m < t_event - guard]
        after = [m for m in self.marks if m > t_event + guard]
        return (max(before) if before else -math.inf, min(after) if after else math.inf)


def _balls(tracks: pd.DataFrame, detections: pd.DataFrame | None, radius_mm: float) -> list[_Ball]:
    tracks = tracks.sort_values(["track", "frame"], kind="stable")
    det_by_frame = None
    if detections is not None and len(detections):
        missing = [c for c in ("frame", "x", "y") if c not in detections.columns]
        if missing:
            raise ValueError(f"detections lack column(s) {', '.join(missing)}")
        det_by_frame = {int(f): g[["x", "y"]].to_numpy(float)
                        for f, g in detections.groupby("frame")}
    out = []
    for tid, g in tracks.groupby("track", sort=True):
        p = g[["x", "y"]].to_numpy(float)
        seen = g["seen"].to_numpy() > 0
        frames = g["frame"].to_numpy(np.int64)
        if det_by_frame is not None:
            raw = np.full_like(p, np.nan)
            for k in np.flatnonzero(seen):
                cand = det_by_frame.get(int(frames[k]))
                if cand is None:
                    continue
                d = np.hypot(*(cand - p[k]).T)
                j = int(np.argmin(d))
                if d[j] < radius_mm:
                    raw[k] = cand[j]
        elif {"x_meas", "y_meas"} <= set(g.columns):
            raw = g[["x_meas", "y_meas"]].to_numpy(float).copy()
            raw[~seen] = np.nan
        else:
            raw = p.copy()
            raw[~seen] = np.nan
        out.append(_Ball(int(tid), g["t"].to_numpy(float), frames, p,
                         g[["vx", "vy"]].to_numpy(float), raw))
    return out


def _motion(ball: _Ball, cfg: EventConfig) -> None:
    """Moving stretches of ``ball`` by hysteresis on the smoothed speed."""
    speed = np.hypot(*ball.v.T)
    moving = False
    runs, i0 = [], 0
    for k, s in enumerate(speed):
        if not moving and s > cfg.move_speed_mm_s:
            moving, i0 = True, k
            # Back up over the rising edge: the motion began where the speed left rest.
            while i0 > 0 and speed[i0 - 1] > cfg.rest_speed_mm_s:
                i0 -= 1
        elif moving and s < cfg.rest_speed_mm_s:
            runs.append((i0, k - 1))
            moving = False
    if moving:
        runs.append((i0, len(speed) - 1))
    ball.moves = [(a, b) for a, b in runs if ball.t[b] - ball.t[a] >= cfg.min_move_s or b > a + 2]


def _noise_sigma(ball: _Ball, cfg: EventConfig) -> float:
    """Detection noise per axis (mm) from third differences of consecutive raw samples.

    A quadratic path has zero third difference, so for white noise of variance s^2 the third
    difference has variance 20 s^2 (binomial weights 1, 3, 3, 1); the median absolute value is
    0.674 of its standard deviation. Contacts spoil a few differences; the median ignores them.
    """
    r = ball.raw
    ok = np.isfinite(r[:, 0])
    consecutive = np.diff(ball.frame) == 1
    d3 = r[3:] - 3 * r[2:-1] + 3 * r[1:-2] - r[:-3]
    good = ok[3:] & ok[2:-1] & ok[1:-2] & ok[:-3] & consecutive[2:] & consecutive[1:-1] \
        & consecutive[:-2]
    d3 = d3[good].ravel()
    if len(d3) < 10:
        return cfg.meas_sigma_mm
    return max(float(np.median(np.abs(d3))) / 0.6745 / math.sqrt(20.0), 0.05)


# --- events ----------------------------------------------------------------------------------
def find_events(
    tracks: pd.DataFrame,
    table: TableSpec,
    detections: pd.DataFrame | None = None,
    config: EventConfig | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Events and shots of a clip from its tracks; see the module docstring.

    Returns ``(events, shots)`` with columns ``EVENT_COLUMNS`` and ``SHOT_COLUMNS``; events are in
    time order, numbered from 0. ValueError if ``tracks`` lacks a required column. Inputs are not
    modified.
    """
    cfg = config or EventConfig()
    if not isinstance(tracks, pd.DataFrame):
        raise ValueError(f"tracks must be a pandas DataFrame, got {type(tracks).__name__}")
    missing = [c for c in TRACK_INPUT_COLUMNS if c not in tracks.columns]
    if missing:
        raise ValueError(f"tracks lack column(s) {', '.join(missing)}; pass the output of "
                         "tracking.tracker.track")
    if tracks.empty:
        return empty_events(), empty_shots()
    tracks = tracks.copy()
    balls = _balls(tracks, detections, table.radius_mm)
    dts = np.diff(np.unique(tracks["t"].to_numpy(float)))
    dt = float(np.median(dts)) if len(dts) else 1.0 / 60.0
    exposure = cfg.exposure_s if cfg.exposure_s is not None else 0.5 * dt
    t_clip_end = float(tracks["t"].max())
    finder = _Finder(table, cfg, dt, exposure)
    for b in balls:
        _motion(b, cfg)
        b.sigma = _noise_sigma(b, cfg)
    rough_cushions = {b.track: finder.rough_cushions(b) for b in balls}
    rough_collisions = finder.rough_collisions(balls)
    for b in balls:
        contacts = [tg for tg, _ in rough_cushions[b.track]] + [
            tg for tg, i, j in rough_collisions if b.track in (i, j)]
        # A motion that begins or ends at a contact is bounded by the contact itself.
        ends = [b.t[i] for move in b.moves for i in move]
        ends = [m for m in ends if all(abs(m - c) > 3 * dt for c in contacts)]
        b.marks = sorted(ends + contacts)
    by_id = {b.track: b for b in balls}

    rows: list[dict] = []
    for tg, i, j in rough_collisions:
        rows += finder.collision(by_id[i], by_id[j], tg)
    collisions_by_ball: dict[int, list[float]] = {}
    for r in rows:
        collisions_by_ball.setdefault(r["track"], []).append(r["t"])
    for b in balls:
        for tg, rail in rough_cushions[b.track]:
            r = finder.cushion(b, rail, tg)
            if r is not None:
                rows.append(r)
    moves = []  # (track, t_begin, t_end)
    for b in balls:
        for i0, i1 in b.moves:
            t0 = b.t[i0]
            speed = np.hypot(*b.v[i0:i1 + 1].T)
            t_fast = b.t[i0 + int(np.argmax(speed > cfg.move_speed_mm_s))]
            hit = [tc for tc in collisions_by_ball.get(b.track, [])
                   if t0 - 3 * dt <= tc <= t_fast + 1.5 * dt]
            if hit:
                t_begin = min(hit)
            elif i0 == 0:
                t_begin = float(b.t[0])  # already moving when first seen
            else:
                r = finder.start(b, i0)
                rows.append(r)
                t_begin = r["t"]
            if i1 == len(b.t) - 1 and b.t[i1] < t_clip_end - 0.5 * dt:
                r = finder.pocket(b, i1)
                if r is not None:
                    rows.append(r)
                t_end = r["t"] if r is not None else float(b.t[i1])
            elif i1 == len(b.t) - 1:
                t_end = float(b.t[i1])  # still moving when the clip ends
            else:
                last = max([x["t"] for x in rows if x["track"] == b.track and x["t"] <= b.t[i1]
                            + dt], default=t_begin)
                r = finder.stop(b, i1, max(last, t_begin))
                rows.append(r)
                t_end = r["t"]
            moves.append((b.track, t_begin, t_end))
    return _assemble(rows, moves, dt)


class _Finder:
    def __init__(self, table: TableSpec, cfg: EventConfig, dt: float, exposure: float):
        self.table, self.cfg, self.dt, self.exposure = table, cfg, dt, exposure
        self.segments = {r: [] for r in RAILS}
        for seg in table.cushions():
            ax = 0 if seg.rail in ("bottom", "top") else 1
            self.segments[seg.rail].append(tuple(sorted((seg.start[ax], seg.end[ax]))))

    def _deg(self, n: int) -> int:
        return 2 if n >= self.cfg.quadratic_min_samples else 1

    def _grow(self, ts: np.ndarray, ps: np.ndarray, t_c: float, sigma: float, forward: bool):
        """Fit samples (sorted by time) nearest ``t_c`` first, growing the window one sample at a
        time while a quadratic still explains them to within the noise: the chi-square test
        ``RSS / sigma^2 <= chi2.ppf(0.9999, dof)`` stops it at a kink in the acceleration (e.g.
        where sliding turns to rolling) that a single parabola cannot follow."""
        if not forward:
            ts, ps = ts[::-1], ps[::-1]
        n_min = self.cfg.quadratic_min_samples
        if len(ts) < n_min:
            return _fit(ts, ps, t_c, self._deg(len(ts)), sigma) if len(ts) >= 2 else None
        best = _fit(ts[:n_min], ps[:n_min], t_c, 2, sigma)
        for n in range(n_min + 1, len(ts) + 1):
            f = _fit(ts[:n], ps[:n], t_c, 2, sigma)
            dof = 2 * (n - 3)
            if f.s2 * dof / max(sigma * sigma, 1e-12) > chi2.ppf(0.9999, dof):
                break
            best = f
        return best

    def _side_fits(self, b: _Ball, t_c: float, lo: float, hi: float, exclude: bool):
        """Approach and departure fits of ``b`` around ``t_c`` within (lo, hi)."""
        w = self.cfg.fit_window_s
        ex = (t_c, 0.5 * self.exposure) if exclude else None
        ta, pa = b.samples(max(lo, t_c - w), t_c, ex)
        td, pd_ = b.samples(t_c, min(hi, t_c + w), ex)
        return (self._grow(ta, pa, t_c, b.sigma, forward=False),
                self._grow(td, pd_, t_c, b.sigma, forward=True))

    # --- cushions ---------------------------------------------------------------------------
    def rough_cushions(self, b: _Ball) -> list[tuple[float, str]]:
        """(time, rail) where the smoothed normal velocity turns away from a rail near it."""
        out = []
        cfg = self.cfg
        for i0, i1 in b.moves:
            for rail in RAILS:
                n = np.asarray(rail_inward_normal(rail))
                c = self.table.reversal_line(rail)
                ax = 1 if rail in ("bottom", "top") else 0
                vn = b.v[i0:i1 + 1] @ n  # > 0 away from the rail
                dist = (b.p[i0:i1 + 1, ax] - c) * n[ax]  # >= 0 on the cloth side of the line
                for k in range(1, len(vn)):
                    if not (vn[k - 1] < 0 <= vn[k]):
                        continue
                    lo, hi = max(0, k - 3), min(len(vn), k + 3)
                    vmin = cfg.min_velocity_change_mm_s / 2
                    if vn[lo:hi].min() > -vmin or vn[lo:hi].max() < vmin:
                        continue
                    reach = cfg.cushion_reach_mm + np.abs(vn[lo:hi]).max() * self.dt
                    if dist[k - 1:k + 1].min() > reach:
                        continue
                    f = -vn[k - 1] / (vn[k] - vn[k - 1])
                    tg = b.t[i0 + k - 1] + f * (b.t[i0 + k] - b.t[i0 + k - 1])
                    if out and out[-1][1] == rail and tg - out[-1][0] < 3 * self.dt:
                        continue
                    out.append((float(tg), rail))
        return sorted(out)

    def cushion(self, b: _Ball, rail: str, tg: float) -> dict | None:
        """A cushion event solved from both sides' fits, or None (no fit, or a jaw contact)."""
        c = self.table.reversal_line(rail)
        ax = 1 if rail in ("bottom", "top") else 0  # normal axis
        lo, hi = b.bounds(tg, 1.5 * self.dt)
        t_c = tg
        result = None
        for it in range(3):
            fa, fd = self._side_fits(b, t_c, lo, hi, exclude=it > 0)
            crossings = []
            for f in (fa, fd):
                if f is None:
                    continue
                # Normal coordinate n(tau) = c0 + c1 tau + c2 tau^2 meets the line c.
                poly = [f.coef[2, ax], f.coef[1, ax], f.coef[0, ax] - c]
                tau = _roots_near(poly, tg - t_c, -2 * self.dt + (tg - t_c), 2 * self.dt + (tg - t_c))
                if tau is None:
                    continue
                vn = f.coef[1, ax] + 2 * f.coef[2, ax] * tau
                var_t = f.var(t_c + tau) / max(vn * vn, 1e-12)  # var(t) = var(n) / (dn/dt)^2
                crossings.append((t_c + tau, var_t))
            if not crossings:
                return None
            w = np.array([1.0 / max(v, 1e-30) for _, v in crossings])
            t_new = float(np.sum(w * np.array([t for t, _ in crossings])) / np.sum(w))
            result = (t_new, fa, fd)
            if abs(t_new - t_c) < 1e-12 and it > 0:
                break
            t_c = t_new
        t_c, fa, fd = result
        fa, fd = self._side_fits(b, t_c, lo, hi, exclude=True)
        if fa is None or fd is None:
            return None
        along = []
        for f in (fa, fd):
            along.append((f.pos(t_c)[1 - ax], max(f.var(t_c), 1e-30)))
        wa = np.array([1 / v for _, v in along])
        s = float(np.sum(wa * np.array([a for a, _ in along])) / np.sum(wa))
        if not any(lo_ <= s <= hi_ for lo_, hi_ in self.segments[rail]):
            return None  # a pocket jaw, not a cushion
        xy = [0.0, 0.0]
        xy[ax], xy[1 - ax] = c, s
        v_in, v_out = fa.vel(t_c), fd.vel(t_c)
        a_in, a_out, e = cushion_angles(rail, v_in, v_out)
        return _row(t_c, "cushion", b.track, xy, speed_in=float(np.hypot(*v_in)),
                    speed_out=float(np.hypot(*v_out)), rail=rail,
                    diamond=self.table.to_diamonds(rail, s), angle_in=a_in, angle_out=a_out,
                    restitution=e)

    # --- collisions -------------------------------------------------------------------------
    def rough_collisions(self, balls: list[_Ball]) -> list[tuple[float, int, int]]:
        """(time, track i, track j) where two balls touch and at least one velocity changes."""
        D = self.table.ball_diameter_mm
        cfg = self.cfg
        out = []
        for ia in range(len(balls)):
            for ib in range(ia + 1, len(balls)):
                a, b = balls[ia], balls[ib]
                common, ka, kb = np.intersect1d(a.frame, b.frame, return_indices=True)
                if len(common) < 3:
                    continue
                d = np.hypot(*(a.p[ka] - b.p[kb]).T)
                vrel = np.hypot(*(a.v[ka] - b.v[kb]).T)
                close = d < D + cfg.collision_margin_mm + vrel * self.dt
                k = 0
                while k < len(close):
                    if not close[k]:
                        k += 1
                        continue
                    k1 = k
                    while k1 + 1 < len(close) and close[k1 + 1]:
                        k1 += 1
                    ks = k + int(np.argmin(d[k:k1 + 1]))
                    lo, hi = max(0, ks - 3), min(len(common) - 1, ks + 3)
                    dva = np.hypot(*(a.v[ka[hi]] - a.v[ka[lo]]))
                    dvb = np.hypot(*(b.v[kb[hi]] - b.v[kb[lo]]))
                    if max(dva, dvb) >= cfg.min_velocity_change_mm_s and vrel[lo:hi + 1].max() > \
                            cfg.move_speed_mm_s:
                        out.append((float(a.t[ka[ks]]), a.track, b.track))
                    k = k1 + 1
        return sorted(out)

    def _touch_time(self, f1: _Fit, f2: _Fit, tg: float, approach: bool):
        """Time (s) and its variance where fits f1, f2 (same t0) are one diameter apart."""
        D = self.table.ball_diameter_mm
        dc = f1.coef - f2.coef  # (3, 2): relative path d(tau) = dc0 + dc1 tau + dc2 tau^2
        # |d(tau)|^2 - D^2 as a quartic, highest power first.
        px = np.polynomial.polynomial.polymul(dc[:, 0], dc[:, 0])
        py = np.polynomial.polynomial.polymul(dc[:, 1], dc[:, 1])
        q = np.zeros(5)
        q[: len(px)] += px
        q[: len(py)] += py
        q[0] -= D * D
        t0 = f1.t0
        lo, hi = (tg - t0) - 3 * self.dt, (tg - t0) + 3 * self.dt
        tau = _roots_near(q[::-1], tg - t0, lo, hi)
        if tau is None:
            return None
        d = f1.pos(t0 + tau) - f2.pos(t0 + tau)
        vrel = f1.vel(t0 + tau) - f2.vel(t0 + tau)
        rate = float(d @ vrel) / D  # d|d|/dt
        if (rate >= 0) if approach else (rate <= 0):
            return None
        var = (f1.var(t0 + tau) + f2.var(t0 + tau)) / max(rate * rate, 1e-12)
        return t0 + tau, var

    def collision(self, a: _Ball, b: _Ball, tg: float) -> list[dict]:
        guard = 1.5 * self.dt
        la, ha = a.bounds(tg, guard)
        lb, hb = b.bounds(tg, guard)
        t_c = tg
        fits = None
        for it in range(3):
            fa_in, fa_out = self._side_fits(a, t_c, la, ha, exclude=it > 0)
            fb_in, fb_out = self._side_fits(b, t_c, lb, hb, exclude=it > 0)
            sols = []
            if fa_in is not None and fb_in is not None:
                sols.append(self._touch_time(fa_in, fb_in, tg, approach=True))
            if fa_out is not None and fb_out is not None:
                sols.append(self._touch_time(fa_out, fb_out, tg, approach=False))
            sols = [s for s in sols if s is not None]
            if not sols:
                break
            w = np.array([1 / max(v, 1e-30) for _, v in sols])
            t_c = float(np.sum(w * np.array([t for t, _ in sols])) / np.sum(w))
            fits = (fa_in, fa_out, fb_in, fb_out)
        if fits is None:
            return []
        rows = []
        for me, other, fin, fout in ((a, b, fits[0], fits[1]), (b, a, fits[2], fits[3])):
            ps = [(f.pos(t_c), max(f.var(t_c), 1e-30)) for f in (fin, fout) if f is not None]
            w = np.array([1 / v for _, v in ps])
            xy = np.sum(w[:, None] * np.array([p for p, _ in ps]), axis=0) / np.sum(w)
            s_in = float(np.hypot(*fin.vel(t_c))) if fin is not None else math.nan
            s_out = float(np.hypot(*fout.vel(t_c))) if fout is not None else math.nan
            rows.append(_row(t_c, "collision", me.track, xy, speed_in=s_in, speed_out=s_out,
                             other=other.track))
        return rows

    # --- start, stop, pocket ----------------------------------------------------------------
    def start(self, b: _Ball, i0: int) -> dict:
        """The instant ``b`` leaves rest, from its first moving samples extrapolated back."""
        lo, hi = b.bounds(b.t[i0], 1.5 * self.dt)
        t_rest0 = max(lo, b.t[i0] - 0.5)
        rest_t, rest_p = b.samples(t_rest0 - 1e-9, b.t[i0] - 0.5 * self.dt)
        if not len(rest_p):
            rest_p = b.p[max(0, i0 - 1)][None]
            rest_t = b.t[max(0, i0 - 1)][None]
        p_rest = np.median(rest_p, axis=0)
        scatter = float(np.median(np.hypot(*(rest_p - p_rest).T))) if len(rest_p) > 2 else 0.0
        thr = max(3.0 * scatter, 1.0)
        # First raw sample clearly off the rest position.
        ts, ps = b.samples(b.t[max(0, i0 - 3)] - 1e-9, min(hi, b.t[i0] + self.cfg.start_fit_s
                                                          + 4 * self.dt))
        off = np.hypot(*(ps - p_rest).T) > thr
        first = int(np.argmax(off)) if off.any() else 0
        ts, ps = ts[first:], ps[first:]
        ts, ps = ts[ts <= ts[0] + self.cfg.start_fit_s], ps[ts <= ts[0] + self.cfg.start_fit_s]
        t_prev = float(rest_t[-1]) if len(rest_t) else b.t[i0] - self.dt
        if len(ts) >= 2:
            f = _fit(ts, ps, ts[0], self._deg(len(ts)), self.cfg.meas_sigma_mm)
            u = f.vel(ts[0])
            u = u / max(np.hypot(*u), 1e-12)
            # s(tau) = u . (p(tau) - p_rest) along the launch direction; the start is s = 0.
            poly = [u @ f.coef[2], u @ f.coef[1], u @ (f.coef[0] - p_rest)]
            tau = _roots_near(poly, 0.0, t_prev - ts[0] - self.dt, 0.0)
            t_s = ts[0] + (tau if tau is not None else 0.0)
            t_s = float(np.clip(t_s, t_prev, ts[0]))
            speed = float(np.hypot(*f.vel(t_s)))
        else:
            t_s, speed = float(b.t[i0]), float(np.hypot(*b.v[i0]))
        return _row(t_s, "start", b.track, p_rest, speed_in=0.0, speed_out=speed)

    def stop(self, b: _Ball, i1: int, t_last_event: float) -> dict:
        """The instant ``b`` comes to rest: where the fitted velocity of its last moving samples
        vanishes (constant deceleration, rolling resistance mu_r g)."""
        t_end = b.t[i1]
        t_lo = max(t_last_event + 0.5 * self.exposure, t_end - self.cfg.stop_fit_s)
        ts, ps = b.samples(t_lo, t_end + 1e-9)
        t_s = float(b.t[min(i1 + 1, len(b.t) - 1)])
        if len(ts) >= 3:
            f = _fit(ts, ps, t_end, 2, self.cfg.meas_sigma_mm)
            c1, c2 = f.coef[1], f.coef[2]
            if float(c2 @ c2) > 0:
                tau = -float(c1 @ c2) / (2.0 * float(c2 @ c2))  # argmin |c1 + 2 c2 tau|^2
                t_s = t_end + tau
        t_s = float(np.clip(t_s, max(t_last_event, ts[0] if len(ts) else t_end), t_end + 1.0))
        after_t, after_p = b.samples(t_s, t_s + 0.3)
        xy = np.median(after_p, axis=0) if len(after_p) else b.p[min(i1 + 1, len(b.t) - 1)]
        return _row(t_s, "stop", b.track, xy, speed_in=0.0, speed_out=0.0)

    def pocket(self, b: _Ball, i1: int) -> dict | None:
        """A pocket event if ``b``'s track ends heading into a pocket mouth, else None."""
        cfg = self.cfg
        lo, _ = b.bounds(b.t[i1], 0.5 * self.dt)
        ts, ps = b.samples(max(lo, b.t[i1] - cfg.fit_window_s), b.t[i1] + 1e-9)
        if len(ts) < 2:
            return None
        f = _fit(ts, ps, ts[-1], self._deg(len(ts)), cfg.meas_sigma_mm)
        best = None
        for pk in self.table.pockets():
            a, bb = np.asarray(pk.jaw_a), np.asarray(pk.jaw_b)
            mouth = bb - a
            if _segment_distance(ps[-1], a, bb) > cfg.pocket_reach_mm:
                continue
            nrm = np.array([-mouth[1], mouth[0]]) / np.hypot(*mouth)
            # side(tau) = nrm . (p(tau) - a): the centre crosses the mouth line where it is 0.
            poly = [nrm @ f.coef[2], nrm @ f.coef[1], nrm @ (f.coef[0] - a)]
            tau = _roots_near(poly, 0.0, ts[0] - ts[-1], cfg.pocket_horizon_s)
            if tau is None:
                continue
            p = f.pos(ts[-1] + tau)
            along = float((p - a) @ mouth) / float(mouth @ mouth)
            if not -0.25 <= along <= 1.25:
                continue
            if best is None or abs(tau) < abs(best[0]):
                best = (tau, pk.name, p, f.vel(ts[-1] + tau))
        if best is None:
            return None
        tau, name, p, v = best
        return _row(ts[-1] + tau, "pocket", b.track, p, speed_in=float(np.hypot(*v)),
                    speed_out=math.nan, pocket=name)


def _segment_distance(p: np.ndarray, a: np.ndarray, b: np.ndarray) -> float:
    ab = b - a
    s = np.clip(np.dot(p - a, ab) / np.dot(ab, ab), 0.0, 1.0)
    return float(np.hypot(*(p - (a + s * ab))))


def _row(t, kind, track, xy, *, speed_in=math.nan, speed_out=math.nan, other=None, rail="",
         diamond=math.nan, angle_in=math.nan, angle_out=math.nan, restitution=math.nan,
         pocket="") -> dict:
    return dict(t=float(t), kind=kind, track=int(track), other=other, x=float(xy[0]),
                y=float(xy[1]), rail=rail, diamond=float(diamond), speed_in=float(speed_in),
                speed_out=float(speed_out), angle_in=float(angle_in),
                angle_out=float(angle_out), restitution=float(restitution), pocket=pocket)


def _assemble(rows: list[dict], moves: list[tuple[int, float, float]], dt: float):
    """Number events and shots; a shot is a union of overlapping moving stretches."""
    if not rows:
        return empty_events(), empty_shots()
    shots = []  # [t_start, t_end, tracks set]
    for tid, t0, t1 in sorted(moves, key=lambda m: m[1]):
        if shots and t0 <= shots[-1][1] + 0.5 * dt:
            shots[-1][1] = max(shots[-1][1], t1)
            shots[-1][2].add(tid)
        else:
            shots.append([t0, t1, {tid}])
    order = {k: i for i, k in enumerate(KINDS)}
    rows = sorted(rows, key=lambda r: (r["t"], order[r["kind"]], r["track"]))
    ev = pd.DataFrame(rows)
    shot_of = []
    for t in ev["t"]:
        k = 0
        for i, (s0, _, _) in enumerate(shots):
            if t >= s0 - 2 * dt:
                k = i
        shot_of.append(k)
    ev.insert(0, "shot", np.asarray(shot_of, dtype=np.int64))
    ev.insert(0, "event", np.arange(len(ev), dtype=np.int64))
    ev["other"] = pd.array(ev["other"].tolist(), dtype="Int64")
    ev["track"] = ev["track"].astype(np.int64)
    ev = ev[EVENT_COLUMNS]
    srows = []
    for i, (t0, t1, tids) in enumerate(shots):
        e = ev[ev["shot"] == i]
        starts = e[e["kind"] == "start"]
        cue = int(starts["track"].iloc[0]) if len(starts) else min(
            tids, key=lambda tid: min(m[1] for m in moves if m[0] == tid))
        srows.append(dict(shot=i, t_start=t0, t_end=t1, cue_track=cue, balls_moved=len(tids),
                          cushions=int((e["kind"] == "cushion").sum()),
                          collisions=int((e["kind"] == "collision").sum() // 2),
                          pocketed=int((e["kind"] == "pocket").sum())))
    sh = pd.DataFrame(srows, columns=SHOT_COLUMNS)
    sh = sh.astype({"shot": "int64", "cue_track": "int64", "balls_moved": "int64",
                    "cushions": "int64", "collisions": "int64", "pocketed": "int64"})
    return ev.reset_index(drop=True), sh


def empty_events() -> pd.DataFrame:
    """An events DataFrame with no rows and the format's columns and dtypes."""
    dtypes = {"event": "int64", "shot": "int64", "t": "float64", "kind": "str", "track": "int64",
              "other": "Int64", "x": "float64", "y": "float64", "rail": "str",
              "diamond": "float64", "speed_in": "float64", "speed_out": "float64",
              "angle_in": "float64", "angle_out": "float64", "restitution": "float64",
              "pocket": "str"}
    return pd.DataFrame({c: pd.Series(dtype=dtypes[c]) for c in EVENT_COLUMNS})


def empty_shots() -> pd.DataFrame:
    """A shots DataFrame with no rows and its columns and dtypes."""
    dtypes = {"shot": "int64", "t_start": "float64", "t_end": "float64", "cue_track": "int64",
              "balls_moved": "int64", "cushions": "int64", "collisions": "int64",
              "pocketed": "int64"}
    return pd.DataFrame({c: pd.Series(dtype=dtypes[c]) for c in SHOT_COLUMNS})
