"""A bank chart for one table: fit its cushions and cloth to a session, then say where to aim.

Fit (scipy ``least_squares``):

* **cloth**: sliding friction ``mu_slide`` and rolling resistance ``mu_roll`` shared by every
  straight leg from a ball's launch to its first cushion, each leg with its own launch speed and
  slip, on the leg's tracked speeds (slide-then-roll law of ``analysis.banks.leg_speed``);
* **cushion**: a liveliness scale ``s`` on the restitution curve of the Mathavan et al. (2010)
  model (``e(v) = s * e_default(v)``, the default curve from Mathavan et al. 2009's measured
  speed ratios [secondary]) and the cushion friction ``mu_cushion``, on every first contact's
  departure: the detected ball centres over the first quarter second after the contact against
  the model's path from the contact point (rebound, then the cloth's slide-then-roll law with the
  fitted cloth), given the arrival velocity and slip from the leg: the speed of the leg's fitted
  slide-then-roll law at the contact and the direction of the leg's chord from launch to contact.
  The events' angle out and restitution are kept as diagnostics. Contacts of balls with side spin
  stated or unknown (cue-ball kicks without a stated tip) are left out, since side spin is not a
  table property. The two cushion parameters trade off along a shallow valley with several local
  minima, so the fit is started from the lowest minima of a coarse grid and the best end point is
  kept; their standard errors treat each contact's samples as one correlated group.

Chart: for starting spots one diamond off each rail and the pockets on that rail, the sight on the
opposite rail to aim through (ball launched without spin, as an object ball struck full) so the
ball's centre reaches the pocket's mouth centre, at soft, medium and hard launch speeds, found by
Brent's method on the signed long/short miss from the fitted model; beside it the mirror rule's
sight (mirror at the reversal line) and the counting-by-sights answer (mirror at the sights). The
chart is offered only when the fit is good enough (:class:`ChartConfig`).

Units: mm, s, mm/s inside; diamonds and degrees in the outputs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from scipy.optimize import brentq, least_squares

from analysis.banks import (
    Session, _axis, angle_out_of, ball_path, counting_sight, fit_leg_slip, leg_speed,
    mirror_sight, model_rebound, spin_after, spin_with_slip, velocity_in,
)
from analysis.cushion import CushionParams
from analysis.physics import PhysicsParams
from vision.table import TableSpec


@dataclass(frozen=True)
class ChartConfig:
    """Settings of the fit and the chart.

    ``launch_speeds_mm_s``: soft, medium and hard launch speeds of the chart. ``min_contacts``,
    ``max_angle_rms_deg``, ``max_e_rms``, ``max_se``: the fit must use at least that many contacts,
    leave angle and restitution residuals (rms) within these, and give both cushion parameters a
    standard error within ``max_se``, or no chart is offered. ``spot_depth_diamonds``: how far in
    from its rail each starting spot lies; ``spot_step_diamonds``: spacing of the spots.
    ``sigma_path_mm``: the residual weight of the cushion fit (a departure sample's position);
    ``departure_skip_s`` and ``departure_window_s``: the departure samples fitted lie between
    these times after the contact (and end that long before the ball's next event);
    ``min_departure_samples``: fewer and the contact is not fitted; ``max_path_rms_mm``: the
    departures' residual (rms) allowed for a chart.
    ``start_e_scales`` x ``start_mu_cushions``: the grid of liveliness and cushion friction whose
    ``n_starts`` lowest local minima of the cost start the cushion fit (the cost has several
    minima along a valley where the two trade off).
    """

    launch_speeds_mm_s: tuple[float, float, float] = (1300.0, 2000.0, 3000.0)
    min_contacts: int = 6
    max_angle_rms_deg: float = 1.0
    max_e_rms: float = 0.05
    max_se: float = 0.05
    spot_depth_diamonds: float = 1.0
    spot_step_diamonds: float = 1.0
    sigma_path_mm: float = 1.0
    departure_skip_s: float = 0.005
    departure_window_s: float = 0.25
    min_departure_samples: int = 4
    max_path_rms_mm: float = 3.0
    start_e_scales: tuple[float, ...] = (0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2)
    start_mu_cushions: tuple[float, ...] = (0.02, 0.1, 0.2, 0.3, 0.4, 0.5)
    n_starts: int = 3

    def __post_init__(self) -> None:
        a, b, c = self.launch_speeds_mm_s
        if not 0 < a < b < c:
            raise ValueError(f"launch speeds {self.launch_speeds_mm_s} mm/s must increase (soft, medium, hard)")
        if len(self.start_e_scales) < 2 or len(self.start_mu_cushions) < 2 or self.n_starts < 1:
            raise ValueError(f"start grid {self.start_e_scales} x {self.start_mu_cushions} needs at least two "
                             f"values of each, and n_starts {self.n_starts} at least 1")
        if np.any(np.diff(self.start_e_scales) <= 0) or np.any(np.diff(self.start_mu_cushions) <= 0):
            raise ValueError(f"start grid {self.start_e_scales} x {self.start_mu_cushions} must increase")
        if not 0 <= self.departure_skip_s < self.departure_window_s or self.min_departure_samples < 2:
            raise ValueError(f"departure window {self.departure_skip_s}..{self.departure_window_s} s must be "
                             f"non-empty and min_departure_samples {self.min_departure_samples} at least 2")
        if self.min_contacts < 3:
            raise ValueError(f"min_contacts {self.min_contacts} must be at least 3 (two parameters are fitted)")


@dataclass(frozen=True)
class TableFit:
    """The fitted table: ``physics`` (fitted cloth and cushion), each parameter's standard error,
    residuals (rms angle out deg and rms restitution of the events against the fitted model;
    ``path_rms_mm``, rms of the fitted departure positions), how many contacts and shots support
    it, and ``good`` with ``reason`` when it is not good enough for a chart; ``n_set_aside``:
    contacts left out of the fit as outliers (badly measured)."""

    physics: PhysicsParams
    e_scale: float
    e_scale_se: float
    mu_cushion_se: float
    mu_slide_se: float
    mu_roll_se: float
    angle_rms_deg: float
    e_rms: float
    n_contacts: int
    n_shots: int
    n_legs: int
    good: bool
    reason: str
    n_set_aside: int = 0
    path_rms_mm: float = math.nan

    def summary(self) -> str:
        p = self.physics
        return (f"cushion liveliness x{self.e_scale:.3f} +- {self.e_scale_se:.3f}, cushion friction "
                f"{p.cushion.mu_cushion:.3f} +- {self.mu_cushion_se:.3f}, cloth sliding {p.mu_slide:.3f} +- "
                f"{self.mu_slide_se:.3f}, rolling {p.mu_roll:.4f} +- {self.mu_roll_se:.4f}; residuals "
                f"{self.path_rms_mm:.2f} mm on the departures, {self.angle_rms_deg:.2f} deg, restitution "
                f"{self.e_rms:.3f}; {self.n_contacts} contacts from {self.n_shots} shots" + (f" ({self.n_set_aside} more set aside as badly measured)"
                                                if self.n_set_aside else ""))


def _legs_and_contacts(session: Session, audit_shots: pd.DataFrame, side_known: dict[int, float | None],
                       config: ChartConfig = ChartConfig()):
    """Per bank shot: the first leg (tau (N,) s after launch, speeds (N,) mm/s), the time from launch
    to the first contact (s), that contact's event row, whether its side spin is known to be nil,
    the launch event's row, and the departure: times (K,) s after the contact and ball centres
    (K, 2) mm (table frame) from ``departure_skip_s`` to ``departure_window_s`` after it, ending
    ``departure_skip_s`` before the ball's next event; the detections themselves (``x_meas``,
    ``y_meas`` where ``seen``) when the folder has them, else the track's ``x``, ``y``."""
    out = []
    ev = session.events
    tracks = session.tracks
    raw = {"x_meas", "y_meas", "seen"} <= set(tracks.columns)
    for _, r in audit_shots.iterrows():
        shot, track = int(r["shot"]), int(r["track"])
        e = ev[(ev["shot"] == shot) & (ev["track"] == track)].sort_values("t")
        launch = e[e["kind"] == ("start" if r["kind"] == "kick" else "collision")]
        cush = e[e["kind"] == "cushion"]
        if launch.empty or cush.empty:
            continue
        l0, c0 = launch.iloc[0], cush[cush["t"] > launch.iloc[0]["t"]].iloc[0]
        mine = tracks[tracks["track"] == track]
        tr = mine[(mine["t"] > l0["t"] + 1e-6) & (mine["t"] < c0["t"] - 1e-6)]
        tau = np.r_[0.0, tr["t"].to_numpy() - l0["t"]]
        spd = np.r_[l0["speed_out"], np.hypot(tr["vx"].to_numpy(), tr["vy"].to_numpy())]
        usable = r["kind"] == "bank" or side_known.get(shot) == 0.0
        later = ev[(ev["track"] == track) & (ev["t"] > c0["t"] + 1e-6)]["t"]
        t_end = min(c0["t"] + config.departure_window_s,
                    (later.min() - config.departure_skip_s) if not later.empty else math.inf)
        dep = mine[(mine["t"] > c0["t"] + config.departure_skip_s) & (mine["t"] <= t_end)]
        if raw:
            dep = dep[(dep["seen"] == 1) & np.isfinite(dep["x_meas"]) & np.isfinite(dep["y_meas"])]
            dep_xy = dep[["x_meas", "y_meas"]].to_numpy(dtype=float)
        else:
            dep_xy = dep[["x", "y"]].to_numpy(dtype=float)
        out.append((shot, tau, spd, float(c0["t"] - l0["t"]), c0, usable, l0,
                    dep["t"].to_numpy(dtype=float) - float(c0["t"]), dep_xy))
    return out


def fit_table(session: Session, audit_shots: pd.DataFrame, config: ChartConfig = ChartConfig(),
              start: PhysicsParams = PhysicsParams(), side_known: dict[int, float | None] | None = None) -> TableFit:
    """Fit cloth and cushion to a session's banks (see the module docstring)."""
    table = session.table
    items = _legs_and_contacts(session, audit_shots, side_known or {}, config)
    legs = [(tau, spd) for _, tau, spd, *_ in items if len(tau) >= 6]
    g = start.g_mm_s2
    # Cloth: shared (mu_s, mu_r), per-leg (v0, u0).
    mu_s, mu_r, se_s, se_r = start.mu_slide, start.mu_roll, np.nan, np.nan
    if legs:
        x0 = [start.mu_slide, start.mu_roll]
        for tau, spd in legs:
            x0 += [float(spd[0]), 0.5 * float(spd[0])]

        def res_cloth(x):
            out = []
            for i, (tau, spd) in enumerate(legs):
                out.append(leg_speed(tau, x[2 + 2 * i], x[3 + 2 * i], x[0], x[1], g) - spd)
            return np.concatenate(out)

        lo = [0.02, 0.0005] + [-np.inf, -np.inf] * len(legs)
        hi = [1.0, 0.1] + [np.inf, np.inf] * len(legs)
        fit = least_squares(res_cloth, x0, bounds=(lo, hi), x_scale="jac")
        mu_s, mu_r = float(fit.x[0]), float(fit.x[1])
        cov = _cov(fit)
        se_s, se_r = float(math.sqrt(cov[0, 0])), float(math.sqrt(cov[1, 1]))
    cloth = replace(start, mu_slide=mu_s, mu_roll=mu_r)
    # Cushion: contacts with known (zero) side spin and a departure seen long enough.
    contacts = []
    for shot, tau, spd, tc, c, usable, l0, dep_t, dep_xy in items:
        if not usable or len(dep_t) < config.min_departure_samples:
            continue
        rail = str(c["rail"])
        n_in = _inward(rail)
        if len(tau) >= 3:
            v0, u0 = fit_leg_slip(tau, spd, cloth)
            # The ball arrives at the speed of the slide-then-roll law fitted to its whole leg and
            # along the leg's chord (launch to contact; a ball without side spin runs straight):
            # both rest on the leg's many samples, where the approach fit beside the contact
            # rests on a few and read the speed 0.3-1.2 % high (3 % with automatic calibration)
            # and the angle up to 0.5 deg off on a filmed session, which biased the restitution.
            speed = float(leg_speed([tc], v0, u0, mu_s, mu_r, g)[0])
            chord = np.array([c["x"] - l0["x"], c["y"] - l0["y"]], dtype=float)
            v_in = speed * chord / max(float(np.hypot(*chord)), 1e-9)
        else:
            v0, u0 = float(spd[0]), 0.0
            v_in = velocity_in(rail, float(c["speed_in"]), float(c["angle_in"]))
        slip = math.copysign(max(abs(u0) - 3.5 * mu_s * g * tc, 0.0), u0)
        # e = vn_out / vn_in with the departure's normal speed as the events read it: only a
        # diagnostic beside the fit (see res_cushion).
        vn_out = float(c["speed_out"]) * math.cos(math.radians(float(c["angle_out"])))
        e_meas = vn_out / max(-float(v_in @ n_in), 1e-9)
        contacts.append((shot, rail, float(c["diamond"]), np.array([c["x"], c["y"]], dtype=float), v_in,
                         spin_with_slip(v_in, slip, table.radius_mm), dep_t, dep_xy, float(c["angle_out"]), e_meas))

    def physics_of(x) -> PhysicsParams:
        cp = start.cushion
        vals = tuple(min(max(v * x[0], 0.0), 1.0) for v in CushionParams().e_values)
        return replace(cloth, cushion=CushionParams(CushionParams().e_knots_mm_s, vals, float(x[1]),
                                                    cp.rail_factor, cp.dead_spots))

    def rebounds(x):
        p = physics_of(x)
        return p, [model_rebound(table, p, c[1], c[2], c[4], c[5]) for c in contacts]

    def res_cushion(x):
        # The model's departure from the contact (Mathavan et al. 2010 rebound, then the cloth's
        # slide-then-roll law, analysis.banks.ball_path) against the departure's detected
        # centres, mm / sigma_path_mm, (2K,) per contact, x then y. Positions, not the events'
        # angle out and departure speed: those come from a fit beside the contact that must
        # guess where the slide after the cushion ends, and read the departure speed up to 3 %
        # high on a filmed session; and the bend of the slide, which the cushion's friction sets
        # through the spin it leaves, separates liveliness from friction where the angle and
        # the speed ratio alone trade one for the other.
        p, outs = rebounds(x)
        res = []
        for (_, _, _, pc, _, _, dep_t, dep_xy, _, _), (vo, wo) in zip(contacts, outs):
            pos, _ = ball_path(pc, vo, wo, dep_t, p, table.radius_mm)
            res.append(((dep_xy - pos) / config.sigma_path_mm).T.ravel())
        return np.concatenate(res)

    n_shots = len({c[0] for c in contacts})
    if len(contacts) < 3:
        return TableFit(physics_of([1.0, start.cushion.mu_cushion]), 1.0, np.nan, np.nan, se_s, se_r,
                        np.nan, np.nan, len(contacts), n_shots, len(legs), False,
                        f"only {len(contacts)} usable cushion contacts; film at least {config.min_contacts} banks")
    owner = np.concatenate([np.full(2 * len(c[6]), i) for i, c in enumerate(contacts)])
    kw = dict(bounds=([0.3, 0.0], [1.3, 0.6]), diff_step=1e-3, ftol=1e-12, xtol=1e-12, gtol=1e-12)
    # Liveliness and cushion friction trade off along a long, shallow valley (a livelier cushion
    # with more friction loses the same normal speed and turns the ball the same way), and a few
    # tenths of a degree of measurement noise raise local minima along it: a fit started at one
    # guess stopped in one of them (x0.98 and friction 0.40 for a table of x0.90 and 0.20 from a
    # filmed session whose global minimum lay at the truth). Every fit therefore starts from the
    # lowest local minima of the cost over a grid of both parameters (:func:`_global_fit`).
    grid = np.array([(a, b) for a in config.start_e_scales for b in config.start_mu_cushions])
    grid_res = np.array([res_cushion(x) for x in grid])
    # A contact whose departure was badly measured (a slow ball seen over a few centimetres, a
    # ball hidden by an arm) must not drag the table's parameters: a robust first fit (soft-L1
    # loss, Huber-like beyond one sigma) finds such contacts, they are set aside when their
    # residual is beyond three robust standard deviations (:func:`_inliers`), at most a quarter
    # of them, and the plain fit is redone on the rest.
    fit = _global_fit(res_cushion, grid, grid_res, np.ones(owner.size, dtype=bool), [], config,
                      dict(kw, loss="soft_l1", f_scale=1.0))
    keep = _inliers(_per_contact_rms(fit.fun, owner, len(contacts)))
    set_aside = len(contacts) - int(keep.sum())
    if not 0 < set_aside <= len(contacts) // 4:
        set_aside, keep = 0, np.ones_like(keep)
    fit = _global_fit(res_cushion, grid, grid_res, keep[owner], [fit.x], config, kw)
    se = np.sqrt(np.diag(_cluster_cov(fit.jac, fit.fun, owner[keep[owner]])))
    path_rms = float(np.sqrt(np.mean(fit.fun**2))) * config.sigma_path_mm
    # Diagnostics: the fitted model against the events' own angle out and restitution.
    p, outs = rebounds(fit.x)
    used = [(c, o) for c, o, k in zip(contacts, outs, keep) if k]
    ang_rms = float(np.sqrt(np.mean([(angle_out_of(c[1], vo) - c[8]) ** 2 for c, (vo, _) in used])))
    e_rms = float(np.sqrt(np.mean([(float(vo @ _inward(c[1])) / -float(c[4] @ _inward(c[1])) - c[9]) ** 2
                                   for c, (vo, _) in used])))
    n_used = len(used)
    n_shots = len({c[0] for c, _ in used})
    reasons = []
    if n_used < config.min_contacts:
        reasons.append(f"{n_used} contacts (need {config.min_contacts})")
    if path_rms > config.max_path_rms_mm:
        reasons.append(f"path residual {path_rms:.2f} mm (allowed {config.max_path_rms_mm})")
    if ang_rms > config.max_angle_rms_deg:
        reasons.append(f"angle residual {ang_rms:.2f} deg (allowed {config.max_angle_rms_deg})")
    if e_rms > config.max_e_rms:
        reasons.append(f"restitution residual {e_rms:.3f} (allowed {config.max_e_rms})")
    if not (np.all(np.isfinite(se)) and np.all(se <= config.max_se)):
        reasons.append(f"parameter uncertainty {np.max(se):.3f} (allowed {config.max_se})")
    return TableFit(p, float(fit.x[0]), float(se[0]), float(se[1]), se_s, se_r, ang_rms, e_rms, n_used, n_shots,
                    len(legs), not reasons, "; ".join(reasons) if reasons else "fit good enough for a chart",
                    set_aside, path_rms)


def _per_contact_rms(residuals: np.ndarray, owner: np.ndarray, n: int) -> np.ndarray:
    """(n,) rms of ``residuals`` (M,) per contact, ``owner`` (M,) naming each one's contact."""
    return np.sqrt(np.bincount(owner, residuals**2, minlength=n) / np.maximum(np.bincount(owner, minlength=n), 1))


def _cluster_cov(J: np.ndarray, r: np.ndarray, owner: np.ndarray) -> np.ndarray:
    """(P, P) covariance of least-squares parameters from the Jacobian ``J`` (M, P) and residuals
    ``r`` (M,), with the residuals of one contact (``owner`` (M,)) free to be correlated: the
    cluster-robust sandwich ``H^-1 (sum_c g_c g_c^T) H^-1 G / (G - 1)`` with ``H = J^T J``,
    ``g_c = J_c^T r_c`` over the G contacts (Liang & Zeger 1986; Cameron & Miller 2015, from
    memory). A departure's samples share that contact's errors (its contact time and point, the
    detector's bias on that ball's blur), so counting them as independent would claim far more
    certainty than the contacts give."""
    ids = np.unique(owner)
    g = np.array([J[owner == k].T @ r[owner == k] for k in ids])
    Hi = np.linalg.pinv(J.T @ J)
    G = len(ids)
    return Hi @ (g.T @ g) @ Hi * (G / max(G - 1, 1))


def _global_fit(fun, grid: np.ndarray, grid_res: np.ndarray, used: np.ndarray, extra_starts: list,
                config: ChartConfig, kw: dict):
    """The lowest-cost ``least_squares`` solution of ``fun`` started from ``extra_starts`` and from
    the ``config.n_starts`` lowest local minima of the cost over ``grid`` ((G, 2) parameter pairs
    on a rectangular lattice, liveliness-major; ``grid_res`` (G, M) their residuals, of which the
    (M,) bool ``used`` count). Multistart local optimisation (e.g. Nocedal & Wright 2006, ch. 1,
    from memory): a grid point is a start when no lattice neighbour has a lower cost."""
    z = grid_res[:, used] ** 2
    if kw.get("loss") == "soft_l1":
        z = 2.0 * (np.sqrt(1.0 + z) - 1.0)  # rho(z) of scipy's soft_l1 with f_scale = 1
    cost = z.sum(axis=1).reshape(len(config.start_e_scales), len(config.start_mu_cushions))
    lows = []
    for i in range(cost.shape[0]):
        for j in range(cost.shape[1]):
            near = cost[max(i - 1, 0):i + 2, max(j - 1, 0):j + 2]
            if cost[i, j] <= near.min():
                lows.append((cost[i, j], i * cost.shape[1] + j))
    starts = [np.asarray(x, dtype=float) for x in extra_starts]
    step = np.array([np.min(np.diff(config.start_e_scales)), np.min(np.diff(config.start_mu_cushions))])
    for _, k in sorted(lows)[:config.n_starts]:
        # A grid minimum within half a lattice step of a start already listed lies in its basin.
        if all(np.any(np.abs(grid[k] - x) > 0.5 * step) for x in starts):
            starts.append(grid[k])
    best = None
    for x0 in starts:
        fit = least_squares(lambda x: fun(x)[used], x0, **kw)
        if best is None or fit.cost < best.cost:
            best = fit
    return best


def _inliers(rms: np.ndarray) -> np.ndarray:
    """(N,) bool: contacts whose departure residual ``rms`` (N,) (in units of the stated sigma)
    lies within three robust standard deviations of the median (1.4826 x the median absolute
    deviation, Rousseeuw & Croux 1993, from memory; never less than one stated sigma, so a clean
    session sets nothing aside)."""
    scale = max(1.4826 * float(np.median(np.abs(rms - np.median(rms)))), 1.0)
    return np.abs(rms - np.median(rms)) <= 3.0 * scale


def _inward(rail: str) -> np.ndarray:
    from vision.table import rail_inward_normal

    return np.asarray(rail_inward_normal(rail))


def _cov(fit) -> np.ndarray:
    J = fit.jac
    dof = max(J.shape[0] - J.shape[1], 1)
    s2 = float(fit.fun @ fit.fun) / dof
    return np.linalg.pinv(J.T @ J) * s2


# --- prediction -------------------------------------------------------------------------------
def predict_bank(table: TableSpec, physics: PhysicsParams, start, heading_rad: float, speed_mm_s: float,
                 bank_rail: str, target_rail: str, omega0=(0.0, 0.0, 0.0)) -> dict:
    """One-rail bank from ``start`` (2,) mm launched at ``speed_mm_s`` along ``heading_rad`` with
    spin ``omega0`` (rad/s; default none, as an object ball struck full): the contact on
    ``bank_rail`` (rail coordinate mm), the speed there, and where the centre's path crosses
    ``target_rail``'s reversal line (rail coordinate mm, NaN if the ball stops first). Other
    cushions and pockets are ignored (the lines are extended)."""
    R = table.radius_mm
    p0 = np.asarray(start, dtype=float)
    d = np.array([math.cos(heading_rad), math.sin(heading_rad)])
    v0 = speed_mm_s * d
    w0 = np.asarray(omega0, dtype=float)
    _, m = _axis(bank_rail)
    c = table.reversal_line(bank_rail)
    if d[m] * (c - p0[m]) <= 0:
        return {"contact_mm": np.nan, "speed_in": np.nan, "met_mm": np.nan}
    dist = (c - p0[m]) / d[m]
    t_stop = _stop_time(v0, w0, physics, R)
    reach, _ = ball_path(p0, v0, w0, [t_stop], physics, R)
    if np.hypot(*(reach[0] - p0)) < dist:
        return {"contact_mm": np.nan, "speed_in": np.nan, "met_mm": np.nan}
    tc = brentq(lambda t: ball_path(p0, v0, w0, [t], physics, R)[0][0] @ d - p0 @ d - dist, 0.0, t_stop, xtol=1e-9)
    pc, _ = ball_path(p0, v0, w0, [tc], physics, R)
    v_in, w_in = spin_after(v0, w0, tc, physics, R)
    k, _ = _axis(bank_rail)
    along = float(pc[0][k])
    vo, wo = model_rebound(table, physics, bank_rail, table.to_diamonds(bank_rail, along), v_in, w_in)
    contact = pc[0].copy()
    contact[m] = c
    t2 = _stop_time(vo, wo, physics, R)
    times = np.linspace(0.0, t2, 2000)
    pos, _ = ball_path(contact, vo, wo, times, physics, R)
    kt, mt = _axis(target_rail)
    ct = table.reversal_line(target_rail)
    s = pos[:, mt] - ct
    cross = np.nonzero(np.sign(s[1:]) != np.sign(s[:-1]))[0]
    met = np.nan
    if cross.size:
        i = int(cross[0])
        f = s[i] / (s[i] - s[i + 1])
        met = float(pos[i, kt] + f * (pos[i + 1, kt] - pos[i, kt]))
    return {"contact_mm": along, "speed_in": float(np.hypot(*v_in)), "met_mm": met}


def _stop_time(v0, w0, physics, R) -> float:
    v0 = np.asarray(v0, dtype=float)
    u = np.array([v0[0] - R * w0[1], v0[1] + R * w0[0]])
    fs, fr = physics.mu_slide * physics.g_mm_s2, physics.mu_roll * physics.g_mm_s2
    t_r = float(np.hypot(*u)) / (3.5 * fs)
    _, v = ball_path((0, 0), v0, w0, [t_r], physics, R)
    return t_r + float(np.hypot(*v[0])) / fr


def solve_sight(table, physics, start, pocket: str, bank_rail: str, speed_mm_s: float) -> dict:
    """The sight (diamonds on ``bank_rail``) to aim through from ``start`` so the centre reaches
    ``pocket``'s mouth centre at launch speed ``speed_mm_s``; NaN when no aim within a diamond and
    a half of the mirror rule's reaches it."""
    from analysis.banks import target_line
    from analysis.drill import Target

    tgt = Target("pocket", pocket=pocket)
    trail, tcoord = target_line(table, tgt, bank_rail)
    mirror = mirror_sight(table, start, table.pocket(pocket).mouth_centre, bank_rail)
    start = np.asarray(start, dtype=float)

    def miss(sight):
        q = table.rail_point(bank_rail, sight, table.sight_setback_mm)
        h = math.atan2(q[1] - start[1], q[0] - start[0])
        r = predict_bank(table, physics, start, h, speed_mm_s, bank_rail, trail)
        return r["met_mm"] - tcoord, r

    grid = mirror + np.linspace(-1.5, 1.5, 13)
    vals = [miss(s)[0] for s in grid]
    best = None
    for a, b, fa, fb in zip(grid[:-1], grid[1:], vals[:-1], vals[1:]):
        if np.isfinite(fa) and np.isfinite(fb) and np.sign(fa) != np.sign(fb):
            root = brentq(lambda s: miss(s)[0], a, b, xtol=1e-4)
            if best is None or abs(root - mirror) < abs(best - mirror):
                best = root
    if best is None:
        return {"sight": np.nan, "speed_in": np.nan, "mirror": mirror}
    return {"sight": float(best), "speed_in": miss(best)[1]["speed_in"], "mirror": mirror}


CHART_COLUMNS = [
    "start_rail", "start_x_mm", "start_y_mm", "pocket", "bank_rail", "mirror_sight", "counting_sight",
    "soft_sight", "soft_speed_in_mm_s", "medium_sight", "medium_speed_in_mm_s", "hard_sight",
    "hard_speed_in_mm_s",
]


def chart_spots(table: TableSpec, config: ChartConfig) -> list[tuple[str, np.ndarray, str, str]]:
    """(start rail, spot (2,) mm, pocket, bank rail) for every chart entry: spots one diamond in
    from each rail, every ``spot_step_diamonds`` along it (keeping a diamond clear of the corners),
    each with the pockets on its rail, banked off the opposite rail."""
    out = []
    opposite = {"bottom": "top", "top": "bottom", "left": "right", "right": "left"}
    for rail in ("bottom", "top", "left", "right"):
        cross = "left" if rail in ("bottom", "top") else "bottom"
        depth = config.spot_depth_diamonds * table.diamond_mm(cross)
        n = 8 if rail in ("bottom", "top") else 4
        pockets = [p.name for p in table.pockets() if p.name.startswith(rail) or p.name.endswith(rail)]
        for dia in np.arange(1.0, n - 1 + 1e-9, config.spot_step_diamonds):
            spot = np.array(table.rail_point(rail, float(dia), -depth))
            for pocket in pockets:
                out.append((rail, spot, pocket, opposite[rail]))
    return out


def bank_chart(table: TableSpec, fit: TableFit, config: ChartConfig = ChartConfig(),
               spots: list | None = None) -> pd.DataFrame:
    """One row per (spot, pocket): the sights at soft/medium/hard launch speed by the fitted model,
    the mirror rule's and the counting answer (diamonds on the bank rail); see CHART_COLUMNS."""
    rows = []
    for rail, spot, pocket, bank in (spots if spots is not None else chart_spots(table, config)):
        row = {"start_rail": rail, "start_x_mm": spot[0], "start_y_mm": spot[1], "pocket": pocket,
               "bank_rail": bank,
               "mirror_sight": mirror_sight(table, spot, table.pocket(pocket).mouth_centre, bank),
               "counting_sight": counting_sight(table, spot, table.pocket(pocket).mouth_centre, bank)}
        for name, speed in zip(("soft", "medium", "hard"), config.launch_speeds_mm_s):
            r = solve_sight(table, fit.physics, spot, pocket, bank, speed)
            row[f"{name}_sight"] = r["sight"]
            row[f"{name}_speed_in_mm_s"] = r["speed_in"]
        rows.append(row)
    return pd.DataFrame(rows, columns=CHART_COLUMNS)


def chart_svg(table: TableSpec, chart: pd.DataFrame, fit: TableFit, title: str) -> str:
    """A printable chart (SVG text, A4 landscape proportions): the table with the starting spots
    numbered, then one line per entry with the sights; fit quality and shot count printed on it."""
    W, rows_h = 1120, 16
    scale = 700 / table.length_mm
    ox, oy = 40, 110
    th = table.width_mm * scale
    height = int(oy + th + 60 + rows_h * (len(chart) + 3))
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{W}" height="{height}" '
           f'viewBox="0 0 {W} {height}" font-family="sans-serif" font-size="11">',
           f'<rect width="{W}" height="{height}" fill="white"/>',
           f'<text x="40" y="30" font-size="18">{_esc(title)}</text>',
           f'<text x="40" y="52">{_esc(fit.summary())}</text>',
           f'<text x="40" y="70">Sights in diamonds on the bank rail, counted from its lower-coordinate end. '
           f'Fit quality: {_esc(fit.reason)}.</text>',
           f'<text x="40" y="88">Mirror = mirror at the reversal line; count = mirror at the sights; '
           f'soft/medium/hard = fitted table, ball launched without spin.</text>']

    def px(x, y):
        return ox + x * scale, oy + th - y * scale

    x0, y0 = px(0, table.width_mm)
    out.append(f'<rect x="{x0:.1f}" y="{y0:.1f}" width="{table.length_mm * scale:.1f}" height="{th:.1f}" '
               'fill="none" stroke="black" stroke-width="2"/>')
    for _, dia, (sx, sy) in table.sights():
        u, v = px(sx, sy)
        out.append(f'<circle cx="{u:.1f}" cy="{v:.1f}" r="2" fill="black"/>')
    for p in table.pockets():
        u, v = px(*p.mouth_centre)
        out.append(f'<circle cx="{u:.1f}" cy="{v:.1f}" r="6" fill="none" stroke="black"/>')
    spots = chart[["start_x_mm", "start_y_mm"]].drop_duplicates().reset_index(drop=True)
    for i, s in spots.iterrows():
        u, v = px(s["start_x_mm"], s["start_y_mm"])
        out.append(f'<circle cx="{u:.1f}" cy="{v:.1f}" r="4" fill="grey"/>')
        out.append(f'<text x="{u + 5:.1f}" y="{v - 5:.1f}" font-size="9">{i + 1}</text>')
    y = oy + th + 40
    head = "spot  pocket         bank   mirror  count   soft   medium  hard"
    out.append(f'<text x="40" y="{y}" font-family="monospace" font-weight="bold">{_esc(head)}</text>')
    key = {tuple(np.round(s.to_numpy(), 3)): i + 1 for i, s in spots.iterrows()}
    for _, r in chart.iterrows():
        y += rows_h
        n = key[tuple(np.round([r["start_x_mm"], r["start_y_mm"]], 3))]
        cells = [f"{n:>4}", f"{r['pocket']:<14}", f"{r['bank_rail']:<6}"] + [
            f"{r[c]:6.2f}" if np.isfinite(r[c]) else "   -  "
            for c in ("mirror_sight", "counting_sight", "soft_sight", "medium_sight", "hard_sight")]
        out.append(f'<text x="40" y="{y}" font-family="monospace">{_esc("  ".join(cells))}</text>')
    out.append("</svg>")
    return "\n".join(out) + "\n"


def _esc(s: str) -> str:
    return str(s).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
