"""The bank audit: what each bank shot was meant to do, what it did, and why.

Input is a results folder (``railtrace analyse``) or a truth folder (beside a rendered clip): the
two share one format (``../shared/spec/results-format.md``). Frames and units: the table frame of
``vision/table.py`` (mm, s, mm/s; rails bottom/right/top/left; diamonds L/8 on long rails, W/4 on
short ones, counted from the rail's lower-coordinate end); degrees and diamonds only in outputs.

Geometry (plane geometry of reflection; the mirror-image construction used for banks in
Alciatore, *The Illustrated Principles of Pool and Billiards*, 2004, from memory):

* a ball's centre turns on the rail's **reversal line**, ``R cos(theta)`` inside the nose, not at
  the nose and not at the sights (``TableSpec.reversal_line``);
* the **declared contact** is where the aim line (ball centre through the sight on the rail top,
  ``sight_setback_mm`` behind the nose) meets the reversal line;
* the **mirror contact** is where the straight line from the ball's centre to the target reflected
  across the reversal line meets that line (for several rails: reflected across each in turn);
* the **counting-by-sights** answer reflects the target across the line of sights instead, as a
  player who takes the sights for the turning line does.

Measures per cushion of a bank: contact rail and diamond, speed in, angles in/out (results format
sign rule), the rebound deviation ``angle_out - angle_in`` signed so that positive is *wider* (the
ball runs further along the rail than a mirror bounce), split into the part the cushion model
(Mathavan, Jackson & Parkin 2010, ``analysis.cushion``) predicts for the measured incoming speed,
angle and slip with no side spin, and the remainder, attributed to side spin; a side-spin estimate
(rad/s) fitted to the departure path (direction and the curvature of its sliding phase, closed-form
sliding/rolling motion of ``analysis.physics``). Per shot: start, aim error (actual minus declared
contact, mm and diamonds), where the ball met the target line, signed long (+) or short (-), made
or missed, and the aim correction (sight diamonds) that would have centred it.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats
from scipy.optimize import least_squares, minimize_scalar

from analysis.cushion import cushion_impact
from analysis.drill import AimSpec, ShotIntent, Target
from analysis.physics import PhysicsParams
from vision.table import RAILS, TableSpec, rail_direction, rail_inward_normal

BAND_NAMES = ("soft", "medium", "hard")


@dataclass(frozen=True)
class BankConfig:
    """Settings of the bank audit.

    ``band_edges_mm_s``: speed at the first bank contact below the first edge is soft, from it to
    below the second medium, else hard. The defaults (600 and 1500 mm/s) sit either side of the
    cushion's liveliest speed near 1 m/s (Mathavan et al. 2009 [secondary]): a soft bank reaches
    the cushion at walking pace or less, a hard one at more than 1.5 m/s.
    ``physics``: cloth and cushion parameters for the model split (defaults, or a fitted chart's).
    ``rail_target_tol_mm``: a rail target counts as made within this distance (one ball radius).
    ``departure_window_s``: how much of the path after a contact the spin fit uses.
    ``confidence``: level of the confidence intervals.
    """

    band_edges_mm_s: tuple[float, float] = (600.0, 1500.0)
    physics: PhysicsParams = field(default_factory=PhysicsParams)
    rail_target_tol_mm: float = 28.6
    departure_window_s: float = 0.5
    confidence: float = 0.95

    def __post_init__(self) -> None:
        a, b = self.band_edges_mm_s
        if not (0 < a < b and math.isfinite(b)):
            raise ValueError(
                f"speed band edges {self.band_edges_mm_s} mm/s must be two increasing positive "
                "numbers, e.g. --bands 600,1500"
            )
        if not 0.5 <= self.confidence < 1.0:
            raise ValueError(f"confidence {self.confidence} must lie in [0.5, 1)")
        if not self.rail_target_tol_mm > 0:
            raise ValueError(f"rail_target_tol_mm {self.rail_target_tol_mm} must be positive")

    def band(self, speed_mm_s: float) -> str:
        """soft, medium or hard for a speed at contact (mm/s)."""
        a, b = self.band_edges_mm_s
        return "soft" if speed_mm_s < a else ("medium" if speed_mm_s < b else "hard")


# --- geometry ---------------------------------------------------------------------------------
def _axis(rail: str) -> tuple[int, int]:
    """(index of the rail-along coordinate, index of the normal coordinate)."""
    return (0, 1) if rail in ("bottom", "top") else (1, 0)


def line_meets_line(table: TableSpec, p, q, rail: str, offset_mm: float) -> float:
    """Rail coordinate (mm) where the line through points ``p`` and ``q`` meets the line parallel to
    ``rail`` at ``offset_mm`` outward from the nose (negative: on the cloth). NaN if parallel."""
    k, m = _axis(rail)
    c = table.rail_point(rail, 0.0, offset_mm)[m]
    dp = q[m] - p[m]
    if abs(dp) < 1e-12:
        return float("nan")
    s = (c - p[m]) / dp
    return float(p[k] + s * (q[k] - p[k]))


def reversal_meet(table: TableSpec, p, q, rail: str) -> float:
    """Rail coordinate (mm) where the line p -> q meets ``rail``'s reversal line."""
    return line_meets_line(table, p, q, rail, -table.reversal_offset_mm)


def declared_contact(table: TableSpec, start, aim: AimSpec) -> tuple[str, float]:
    """(rail, rail coordinate mm) of the contact the declared aim gives: the line through the
    ball's centre ``start`` and the sight (on the rail top) met with the reversal line."""
    if aim.kind == "sight":
        q = table.rail_point(aim.rail, aim.diamond, table.sight_setback_mm)
        return aim.rail, reversal_meet(table, start, q, aim.rail)
    rail = first_rail_hit(table, start, aim.point_mm)
    return rail, reversal_meet(table, start, aim.point_mm, rail)


def first_rail_hit(table: TableSpec, p, q) -> str:
    """The rail whose reversal line the ray from ``p`` through ``q`` meets first."""
    d = np.subtract(q, p, dtype=float)
    best, name = math.inf, None
    for rail in RAILS:
        k, m = _axis(rail)
        c = table.reversal_line(rail)
        if abs(d[m]) < 1e-12:
            continue
        s = (c - p[m]) / d[m]
        if s > 1e-9 and s < best:
            best, name = s, rail
    if name is None:
        raise ValueError(f"aim from {tuple(p)} through {tuple(q)} meets no rail; aim elsewhere")
    return name


def reflect(table: TableSpec, point, rail: str, offset_mm: float | None = None) -> np.ndarray:
    """Mirror image (2,) of ``point`` across the line parallel to ``rail`` at ``offset_mm``
    outward of the nose (default: the reversal line)."""
    off = -table.reversal_offset_mm if offset_mm is None else offset_mm
    _, m = _axis(rail)
    c = table.rail_point(rail, 0.0, off)[m]
    out = np.array(point, dtype=float)
    out[m] = 2 * c - out[m]
    return out


def mirror_contacts(table: TableSpec, start, target_xy, rails: list[str]) -> list[float]:
    """Rail coordinates (mm) of the ideal mirror path from ``start`` off ``rails`` in order to
    ``target_xy``: the target is reflected across each reversal line, last rail first, and the
    straight line to the image is unfolded again (mirror-image construction)."""
    images = [np.asarray(target_xy, dtype=float)]
    for rail in reversed(rails):
        images.append(reflect(table, images[-1], rail))
    image = images[-1]
    p = np.asarray(start, dtype=float)
    out = []
    for i, rail in enumerate(rails):
        along = reversal_meet(table, p, image, rail)
        out.append(along)
        k, m = _axis(rail)
        hit = np.zeros(2)
        hit[k], hit[m] = along, table.reversal_line(rail)
        # Unfold: the rest of the path runs from the contact to the image one reflection back.
        image = images[len(rails) - 1 - i]
        p = hit
    return out


def sight_through(table: TableSpec, start, contact_xy, rail: str) -> float:
    """Diamonds of the sight on ``rail`` that the line from ``start`` through ``contact_xy`` passes
    over (sights sit ``sight_setback_mm`` behind the nose)."""
    return table.to_diamonds(rail, line_meets_line(table, start, contact_xy, rail, table.sight_setback_mm))


def counting_sight(table: TableSpec, start, target_xy, rail: str) -> float:
    """The counting-by-sights answer (diamonds): the target reflected across the line of sights,
    as if the centre turned there."""
    image = reflect(table, target_xy, rail, table.sight_setback_mm)
    return table.to_diamonds(rail, line_meets_line(table, start, image, rail, table.sight_setback_mm))


def mirror_sight(table: TableSpec, start, target_xy, rail: str) -> float:
    """The mirror rule's answer (diamonds): aim through the sight over the mirror contact at the
    reversal line."""
    along = mirror_contacts(table, start, target_xy, [rail])[0]
    return sight_through(table, start, rail_xy(table, rail, along), rail)


def rail_xy(table: TableSpec, rail: str, along_mm: float) -> np.ndarray:
    """(2,) point on ``rail``'s reversal line at rail coordinate ``along_mm``."""
    k, m = _axis(rail)
    out = np.zeros(2)
    out[k], out[m] = along_mm, table.reversal_line(rail)
    return out


def target_point(table: TableSpec, target: Target) -> np.ndarray:
    """(2,) point the ball's centre should reach: a pocket's mouth centre, a rail point on the
    reversal line, or the given point (mm)."""
    if target.kind == "pocket":
        return np.array(table.pocket(target.pocket).mouth_centre)
    if target.kind == "rail":
        return rail_xy(table, target.rail, table.from_diamonds(target.rail, target.diamond))
    return np.array(target.point_mm, dtype=float)


def target_line(table: TableSpec, target: Target, last_rail: str) -> tuple[str, float] | None:
    """(rail, rail coordinate mm) of the line on which long/short is measured: the target rail, or
    for a pocket the rail it sits on opposite the last bank rail (else its other rail); None for a
    point target."""
    if target.kind == "rail":
        return target.rail, float(table.from_diamonds(target.rail, target.diamond))
    if target.kind == "point":
        return None
    name = target.pocket
    on = [r for r in RAILS if name.startswith(r) or name.endswith(r)]
    opposite = {"bottom": "top", "top": "bottom", "left": "right", "right": "left"}[last_rail]
    rail = opposite if opposite in on else next(r for r in on if r != last_rail) if any(r != last_rail for r in on) else on[0]
    k, _ = _axis(rail)
    return rail, float(table.pocket(name).mouth_centre[k])


# --- ball motion (closed forms of analysis.physics) -------------------------------------------
def ball_path(r0, v0, w0, times, physics: PhysicsParams, radius_mm: float) -> tuple[np.ndarray, np.ndarray]:
    """Positions (N, 2) mm and velocities (N, 2) mm/s at ``times`` (N,) s after a free start from
    centre ``r0`` (2,), velocity ``v0`` (2,) and spin ``w0`` (3,) rad/s, no cushions.

    Sliding: the cloth slip ``u = (vx - R wy, vy + R wx)`` keeps its direction and the centre
    decelerates at ``mu_slide g`` against it until ``|u0| / (3.5 mu_slide g)``; then rolling
    resistance ``mu_roll g`` along the velocity until rest (Leckie & Greenspan 2006 phases, as in
    ``analysis.physics``).
    """
    t = np.asarray(times, dtype=float).reshape(-1)
    R = radius_mm
    g = physics.g_mm_s2
    r0 = np.asarray(r0, dtype=float)
    v0 = np.asarray(v0, dtype=float)
    u = np.array([v0[0] - R * w0[1], v0[1] + R * w0[0]])
    um = float(np.hypot(*u))
    fs = physics.mu_slide * g
    if um > 1e-9:
        a_s = -fs * u / um
        t_r = um / (3.5 * fs)
    else:
        a_s, t_r = np.zeros(2), 0.0
    ts = np.minimum(t, t_r)[:, None]
    pos = r0 + v0 * ts + 0.5 * a_s * ts**2
    vel = v0 + a_s * ts
    r1 = r0 + v0 * t_r + 0.5 * a_s * t_r**2
    v1 = v0 + a_s * t_r
    sp = float(np.hypot(*v1))
    if sp > 1e-9:
        fr = physics.mu_roll * g
        d = v1 / sp
        tr = np.clip(t - t_r, 0.0, sp / fr)[:, None]
        later = (t > t_r)[:, None]
        pos = np.where(later, r1 + d * (sp * tr - 0.5 * fr * tr**2), pos)
        vel = np.where(later, d * (sp - fr * tr), vel)
    return pos, vel


def spin_after(v0, w0, tau: float, physics: PhysicsParams, radius_mm: float) -> tuple[np.ndarray, np.ndarray]:
    """(velocity (2,), spin (3,)) a time ``tau`` s after a free start, as :func:`ball_path`."""
    R, g = radius_mm, physics.g_mm_s2
    v0 = np.asarray(v0, dtype=float)
    w0 = np.asarray(w0, dtype=float)
    _, vel = ball_path((0.0, 0.0), v0, w0, [tau], physics, R)
    v = vel[0]
    u = np.array([v0[0] - R * w0[1], v0[1] + R * w0[0]])
    um = float(np.hypot(*u))
    fs = physics.mu_slide * g
    t_r = um / (3.5 * fs) if um > 1e-9 else 0.0
    if tau < t_r:
        uh = u / um
        c = 2.5 * fs / R * tau  # dw/dt = 5 mu g / (2 R) (z x u_hat)
        wx, wy = w0[0] - c * uh[1], w0[1] + c * uh[0]
    else:
        wx, wy = -v[1] / R, v[0] / R
    wz = math.copysign(max(abs(w0[2]) - physics.spin_decel_rad_s2 * tau, 0.0), w0[2])
    return v, np.array([wx, wy, wz])


def fit_leg_slip(tau, speed, physics: PhysicsParams, mu_slide: float | None = None,
                 mu_roll: float | None = None) -> tuple[float, float]:
    """Launch speed ``v0`` and slip ``u0`` (mm/s, along the velocity; positive sliding forward as
    after a stun or draw, negative for overspin) of a straight leg from its speeds ``speed`` (N,)
    at ``tau`` (N,) s after launch, by least squares on the slide-then-roll speed law
    ``v = v0 - sign(u0) mu_s g tau`` until ``|u0| / (3.5 mu_s g)``, then ``- mu_r g`` per second.
    """
    mu_s = physics.mu_slide if mu_slide is None else mu_slide
    mu_r = physics.mu_roll if mu_roll is None else mu_roll
    tau = np.asarray(tau, dtype=float)
    speed = np.asarray(speed, dtype=float)
    if tau.size < 3:
        return (float(speed[0]) if speed.size else 0.0), 0.0
    return tuple(float(x) for x in least_squares(
        lambda p: leg_speed(tau, p[0], p[1], mu_s, mu_r, physics.g_mm_s2) - speed,
        x0=[float(speed[0]), 0.5 * float(speed[0])], method="lm" if tau.size > 2 else "trf",
    ).x)


def leg_speed(tau, v0: float, u0: float, mu_s: float, mu_r: float, g: float) -> np.ndarray:
    """Speed (N,) mm/s of a straight leg at ``tau`` (N,) s: see :func:`fit_leg_slip`."""
    tau = np.asarray(tau, dtype=float)
    fs, fr = mu_s * g, mu_r * g
    t_r = abs(u0) / (3.5 * fs)
    sgn = math.copysign(1.0, u0)
    v_r = v0 - sgn * fs * t_r
    return np.where(tau < t_r, v0 - sgn * fs * tau, np.maximum(v_r - fr * (tau - t_r), 0.0))


# --- cushion model ----------------------------------------------------------------------------
def velocity_in(rail: str, speed_mm_s: float, angle_in_deg: float) -> np.ndarray:
    """(2,) incoming velocity from speed and the results format's ``angle_in``."""
    n = np.asarray(rail_inward_normal(rail))
    t = np.asarray(rail_direction(rail))
    a = math.radians(angle_in_deg)
    return speed_mm_s * (-math.cos(a) * n + math.sin(a) * t)


def angle_out_of(rail: str, vel) -> float:
    """``angle_out`` (degrees) of an outgoing velocity (2,), results format sign rule."""
    n = np.asarray(rail_inward_normal(rail))
    t = np.asarray(rail_direction(rail))
    v = np.asarray(vel, dtype=float)
    return math.degrees(math.atan2(float(v @ t), float(v @ n)))


def model_rebound(table: TableSpec, physics: PhysicsParams, rail: str, diamond: float, v_in, w_in):
    """Outgoing (velocity (2,), spin (3,)) by the Mathavan et al. (2010) cushion model with the
    restitution of ``physics.cushion`` at this incoming normal speed, rail and diamond."""
    n = np.asarray(rail_inward_normal(rail))
    vn = -float(np.asarray(v_in) @ n)
    e = physics.cushion.restitution(vn, rail, diamond)
    return cushion_impact(v_in, w_in, n, table, e, physics.cushion.mu_cushion, physics.mu_slide)


def spin_with_slip(v, slip_along: float, radius_mm: float, wz: float = 0.0) -> np.ndarray:
    """(3,) spin of a ball moving at ``v`` (2,) whose cloth slip is ``slip_along`` mm/s along the
    velocity: ``u = v + w x (-R z)``."""
    v = np.asarray(v, dtype=float)
    sp = float(np.hypot(*v))
    u = slip_along * v / sp if sp > 0 else np.zeros(2)
    return np.array([-(v[1] - u[1]) / radius_mm, (v[0] - u[0]) / radius_mm, wz])


def estimate_side_spin(table, physics, rail, diamond, v_in, w_in, contact_xy, dep_t, dep_xy,
                       angle_out_deg) -> float:
    """Side spin ``wz`` (rad/s) at the contact that makes the cushion model's outgoing path best
    match the tracked departure: positions (N, 2) mm at ``dep_t`` (N,) s after the contact (the
    direction and the curvature of the sliding phase); with fewer than 4 samples, the measured
    ``angle_out`` alone. Brent's bounded search after a coarse grid."""
    R = table.radius_mm
    sp = float(np.hypot(*v_in))
    lim = (3.0 * sp + 500.0) / R

    def cost(wz: float) -> float:
        w = np.array([w_in[0], w_in[1], wz])
        vo, wo = model_rebound(table, physics, rail, diamond, v_in, w)
        if len(dep_t) >= 4:
            pos, _ = ball_path(contact_xy, vo, wo, dep_t, physics, R)
            return float(np.mean(np.sum((pos - dep_xy) ** 2, axis=1)))
        return (angle_out_of(rail, vo) - angle_out_deg) ** 2

    grid = np.linspace(-lim, lim, 25)
    costs = [cost(w) for w in grid]
    i = int(np.argmin(costs))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    res = minimize_scalar(cost, bounds=(lo, hi), method="bounded", options={"xatol": 0.05})
    return float(res.x)


# --- reading a session ------------------------------------------------------------------------
@dataclass(frozen=True)
class Session:
    """A results or truth folder read into memory (frames as in the results format)."""

    folder: Path
    table: TableSpec
    tracks: pd.DataFrame
    events: pd.DataFrame
    shots: pd.DataFrame


def read_session(folder: str | Path) -> Session:
    """Read tracks.csv, events.csv, shots.csv and the table from calibration.json; ValueError
    naming a missing file."""
    from vision.calibfile import table_from_dict  # vision is below analysis: allowed

    d = Path(folder)
    if not d.is_dir():
        raise ValueError(f"results folder {d} does not exist; give a folder written by 'railtrace analyse' or a .truth folder")
    for name in ("tracks.csv", "events.csv", "shots.csv", "calibration.json"):
        if not (d / name).is_file():
            raise ValueError(f"{d} lacks {name}; give a folder written by 'railtrace analyse' or a .truth folder")
    cal = json.loads((d / "calibration.json").read_text(encoding="utf-8"))
    table = table_from_dict(cal["table"])
    return Session(d, table, pd.read_csv(d / "tracks.csv"), pd.read_csv(d / "events.csv"),
                   pd.read_csv(d / "shots.csv"))


def intent_from_shots_row(row: pd.Series, table: TableSpec) -> ShotIntent | None:
    """The intent a truth folder's shots.csv states (a scene's sight aim and target), if any.

    Only a sight aim of the struck ball itself names an aim line for the ball that banks (a cut's
    sight is on the object ball's line and is not recorded in shots.csv), so ``ball`` aims give a
    target only."""
    if "aim_kind" not in row or pd.isna(row.get("target")) and row.get("aim_kind") != "sight":
        return None
    target = None
    t = row.get("target")
    if isinstance(t, str) and t:
        if ":" in t:
            rail, _, dia = t.partition(":")
            target = Target("rail", rail=rail, diamond=float(dia))
        else:
            target = Target("pocket", pocket=t)
    aim = None
    ball = "object"
    if row.get("aim_kind") == "sight":
        aim = AimSpec("sight", rail=str(row["aim_rail"]), diamond=float(row["aim_diamond"]))
        ball = "cue"
    elif row.get("aim_kind") == "point":
        aim = AimSpec("point", point_mm=(float(row["aim_x"]), float(row["aim_y"])))
        ball = "cue"
    side = float(row["tip_side"]) if "tip_side" in row and not pd.isna(row["tip_side"]) else None
    height = float(row["tip_height"]) if "tip_height" in row and not pd.isna(row["tip_height"]) else None
    return ShotIntent(ball, target, aim, None, side, height, None, int(row["shot"]), "shots.csv")


# --- the audit --------------------------------------------------------------------------------
@dataclass(frozen=True)
class BankAudit:
    """Everything the audit found.

    ``shots``: one row per bank shot (see :data:`SHOT_COLUMNS`); ``cushions``: one row per cushion
    of a bank (:data:`CUSHION_COLUMNS`); ``stats``: one row per group (:data:`STAT_COLUMNS`);
    ``correction``: the fitted correction (dict); ``findings``: plain-language lines;
    ``notes``: what the audit could not do and why.
    """

    shots: pd.DataFrame
    cushions: pd.DataFrame
    stats: pd.DataFrame
    correction: dict
    findings: tuple[str, ...]
    notes: tuple[str, ...]


SHOT_COLUMNS = [
    "shot", "track", "kind", "intent", "start_x_mm", "start_y_mm", "start_region",
    "start_depth_diamonds", "rails",
    "rail", "contact_diamond", "contact_along_mm", "declared_diamond", "aim_error_mm",
    "aim_error_diamonds", "mirror_diamond", "speed_in_mm_s", "band", "band_intended",
    "rebound_dev_deg", "dev_model_deg", "dev_spin_deg", "side_spin_rad_s", "english",
    "target", "target_rail", "met_along_mm", "long_mm", "long_diamonds", "made", "ended_by",
    "correction_diamonds",
]
CUSHION_COLUMNS = [
    "shot", "cushion", "track", "rail", "diamond", "x_mm", "y_mm", "t_s", "speed_in_mm_s",
    "speed_out_mm_s", "angle_in_deg", "angle_out_deg", "restitution", "mirror_diamond",
    "rebound_dev_deg", "dev_model_deg", "dev_spin_deg", "slip_in_mm_s", "side_spin_rad_s",
    "spin_ratio", "english", "model_angle_out_deg",
]


def audit_session(session: Session, intents: list[ShotIntent | None] | None,
                  config: BankConfig = BankConfig()) -> BankAudit:
    """Audit every bank of ``session``; ``intents`` has one entry (or None) per shot, or is None
    when nothing was stated (targets are then inferred and only outcome measures are given)."""
    table = session.table
    n_shots = len(session.shots)
    if intents is not None and len(intents) != n_shots:
        raise ValueError(f"{len(intents)} intents for {n_shots} shots; give one per shot (None where unstated)")
    shot_rows, cushion_rows, notes = [], [], []
    for k in range(n_shots):
        row = session.shots.iloc[k]
        intent = intents[k] if intents is not None else None
        try:
            res = _audit_shot(session, int(row["shot"]), row, intent, config)
        except _Skip as why:
            notes.append(f"shot {int(row['shot'])}: {why}")
            continue
        shot_rows.append(res[0])
        cushion_rows.extend(res[1])
    shots = pd.DataFrame(shot_rows, columns=SHOT_COLUMNS)
    cushions = pd.DataFrame(cushion_rows, columns=CUSHION_COLUMNS)
    if intents is None or all(i is None for i in intents):
        notes.insert(0, "no intent was stated: targets were inferred from where each ball went after its "
                     "last cushion, so only outcome measures are reported (no aim error)")
    stat = session_stats(shots, config)
    corr = fit_correction(shots, config)
    findings = tuple(make_findings(shots, stat, corr, config))
    return BankAudit(shots, cushions, stat, corr, findings, tuple(notes))


class _Skip(Exception):
    """This shot is not a bank the audit can measure (the message says why)."""


def _region(table: TableSpec, x: float, y: float) -> str:
    """Start region: thirds of the length (left/centre/right) and halves of the width."""
    col = ("left", "centre", "right")[min(int(3 * x / table.length_mm), 2)]
    return f"{col}-{'bottom' if y < table.width_mm / 2 else 'top'}"


def _resolve_ball(session: Session, shot_ev: pd.DataFrame, cue_track: int, ball: str) -> int:
    if ball == "cue":
        return cue_track
    if ball == "object":
        hits = shot_ev[(shot_ev["kind"] == "collision") & (shot_ev["track"] == cue_track)]
        if hits.empty:
            raise _Skip("the cue ball struck no object ball, so there is no object ball to watch")
        return int(hits.iloc[0]["other"])
    if ball.lstrip("-").isdigit():
        return int(ball)
    if "label" in session.tracks.columns:
        m = session.tracks[session.tracks["label"].astype(str) == ball]
        if not m.empty:
            return int(m.iloc[0]["track"])
    raise _Skip(f"ball {ball!r} is neither cue, object, a track number nor a label in these results")


def _audit_shot(session: Session, shot: int, row: pd.Series, intent: ShotIntent | None, config: BankConfig):
    table, physics = session.table, config.physics
    ev = session.events[session.events["shot"] == shot].sort_values("t", kind="stable")
    cue = int(row["cue_track"])
    inferred = intent is None
    if inferred:
        first = ev[(ev["track"] == cue) & ev["kind"].isin(["cushion", "collision"])]
        ball = "cue" if (not first.empty and first.iloc[0]["kind"] == "cushion") else "object"
    else:
        ball = intent.ball
    track = _resolve_ball(session, ev, cue, ball)
    mine = ev[ev["track"] == track]
    # A ball the cue set moving (a `start` event) is kicked, whichever track the shot row calls
    # the cue ball; any other ball is launched by its first collision.
    struck = mine[mine["kind"] == "start"]
    launch = struck if not struck.empty else mine[mine["kind"] == "collision"]
    if launch.empty:
        raise _Skip(f"track {track} never set off in this shot")
    launch = launch.iloc[0]
    after = mine[mine["t"] > launch["t"]]
    start = np.array([launch["x"], launch["y"]], dtype=float)
    # The bank runs until the ball is pocketed, stops, meets another ball, or reaches the target.
    contacts, end = [], None
    target = intent.target if intent is not None else None
    # A bank takes the cushions the drill states (one by default); with nothing stated, see below.
    n_rails = (intent.rails or 1) if intent is not None and target is not None else None
    for _, e in after.iterrows():
        if e["kind"] == "cushion":
            if n_rails is not None and len(contacts) >= n_rails:
                end = e
                break
            if target is not None and target.kind == "rail" and e["rail"] == target.rail and contacts:
                end = e
                break
            contacts.append(e)
            continue
        if e["kind"] in ("pocket", "stop", "collision"):
            end = e
            break
    if not contacts:
        raise _Skip(f"track {track} met no cushion before {end['kind'] if end is not None else 'the end'}: not a bank")
    if target is None and n_rails is None:
        # Nothing says how many cushions the bank takes: the first, unless the ball dropped.
        pocketed = end is not None and end["kind"] == "pocket"
        if not pocketed:
            contacts = contacts[:1]
            end = after[after["t"] > contacts[0]["t"]].iloc[0] if (after["t"] > contacts[0]["t"]).any() else None
    tracks = session.tracks[session.tracks["track"] == track].sort_values("t")
    kind = "kick" if not struck.empty else "bank"
    # Per cushion: model split and side spin.
    cushion_rows = []
    w_next = None
    t_prev, v_prev = float(launch["t"]), float(launch["speed_out"])
    for i, c in enumerate(contacts):
        rail = str(c["rail"])
        v_in = velocity_in(rail, float(c["speed_in"]), float(c["angle_in"]))
        if i == 0:
            leg = tracks[(tracks["t"] > t_prev + 1e-6) & (tracks["t"] < float(c["t"]) - 1e-6)]
            tau = leg["t"].to_numpy() - t_prev
            spd = np.hypot(leg["vx"].to_numpy(), leg["vy"].to_numpy())
            v0, u0 = fit_leg_slip(np.r_[0.0, tau], np.r_[v_prev, spd], physics)
            tc = float(c["t"]) - t_prev
            fs = physics.mu_slide * physics.g_mm_s2
            slip = math.copysign(max(abs(u0) - 3.5 * fs * tc, 0.0), u0)
            wz0 = 0.0
            w_in = spin_with_slip(v_in, slip, table.radius_mm, wz0)
        else:
            w_in = w_next.copy()
            slip = float(np.hypot(v_in[0] - table.radius_mm * w_in[1], v_in[1] + table.radius_mm * w_in[0]))
        w0 = np.array([w_in[0], w_in[1], 0.0])
        vo0, _ = model_rebound(table, physics, rail, float(c["diamond"]), v_in, w0)
        pred0 = angle_out_of(rail, vo0)
        t_c = float(c["t"])
        nxt = after[after["t"] > t_c + 1e-9]
        t_end = float(nxt.iloc[0]["t"]) if not nxt.empty else t_c + config.departure_window_s
        dep = tracks[(tracks["t"] > t_c + 1e-6) & (tracks["t"] < min(t_end, t_c + config.departure_window_s))]
        contact_xy = np.array([c["x"], c["y"]], dtype=float)
        wz = estimate_side_spin(table, physics, rail, float(c["diamond"]), v_in, w_in, contact_xy,
                                dep["t"].to_numpy() - t_c, dep[["x", "y"]].to_numpy(),
                                float(c["angle_out"]))
        vo, wo = model_rebound(table, physics, rail, float(c["diamond"]), v_in,
                               np.array([w_in[0], w_in[1], wz]))
        if i + 1 < len(contacts):
            dt = float(contacts[i + 1]["t"]) - t_c
            _, w_next = spin_after(vo, wo, dt, physics, table.radius_mm)
        a_in, a_out = float(c["angle_in"]), float(c["angle_out"])
        sgn = 1.0 if a_in >= 0 else -1.0
        dev = (a_out - a_in) * sgn
        dev_model = (pred0 - a_in) * sgn
        dev_spin = dev - dev_model
        if not np.isfinite(dev_spin):
            english = "unseen"
        else:
            english = "running" if dev_spin > 0.5 else ("reverse" if dev_spin < -0.5 else "none")
        cushion_rows.append({
            "shot": shot, "cushion": i, "track": track, "rail": rail, "diamond": float(c["diamond"]),
            "x_mm": float(c["x"]), "y_mm": float(c["y"]), "t_s": t_c,
            "speed_in_mm_s": float(c["speed_in"]), "speed_out_mm_s": float(c["speed_out"]),
            "angle_in_deg": a_in, "angle_out_deg": a_out, "restitution": float(c["restitution"]),
            "mirror_diamond": np.nan, "rebound_dev_deg": dev, "dev_model_deg": dev_model,
            "dev_spin_deg": dev_spin, "slip_in_mm_s": slip, "side_spin_rad_s": wz,
            "spin_ratio": table.radius_mm * wz / max(float(c["speed_in"]), 1e-9),
            "english": english, "model_angle_out_deg": pred0,
        })
    rails = [str(c["rail"]) for c in contacts]
    first = contacts[0]
    k0, _ = _axis(rails[0])
    contact_along = float(first["x"] if k0 == 0 else first["y"])
    # Target: stated, or inferred from where the ball went after its last cushion.
    if target is None:
        target = _infer_target(session, table, contacts[-1], end, tracks)
    tpt = target_point(table, target)
    mirror = mirror_contacts(table, start, tpt, rails)
    for j, m in enumerate(mirror):
        cushion_rows[j]["mirror_diamond"] = table.to_diamonds(rails[j], m)
    # Aim error on the declared rail: where the launch line meets its reversal line.
    declared_along = aim_err = np.nan
    if intent is not None and intent.aim is not None:
        arail, declared_along = declared_contact(table, start, intent.aim)
        actual = contact_along if arail == rails[0] else reversal_meet(table, start, (first["x"], first["y"]), arail)
        aim_err = actual - declared_along
    else:
        arail = rails[0]
    # Long/short where the ball met the target line.
    tl = target_line(table, target, rails[-1])
    met = long_mm = long_dia = np.nan
    last = contacts[-1]
    leg_end = float(end["t"]) if end is not None else math.inf
    leg = tracks[(tracks["t"] > float(last["t"]) + 1e-6) & (tracks["t"] <= leg_end + 1e-9)]
    pts = np.vstack([[last["x"], last["y"]], leg[["x", "y"]].to_numpy()])
    # The cushion leaves the ball sliding (its roll now turns against the rebound), and a sliding
    # ball's path curves; once it rolls it runs straight (Leckie & Greenspan 2006 phases), so the
    # heading is taken from the path after the model's sliding time only.
    u_out = np.array([vo[0] - table.radius_mm * wo[1], vo[1] + table.radius_mm * wo[0]])
    t_slide = float(np.hypot(*u_out)) / (3.5 * physics.mu_slide * physics.g_mm_s2)
    rolled_from = 1 + int(np.searchsorted(leg["t"].to_numpy(), float(last["t"]) + t_slide))
    if end is not None and end["kind"] in ("pocket", "cushion", "collision", "stop"):
        pts = np.vstack([pts, [end["x"], end["y"]]])
    if tl is not None:
        met = _meet_line(table, pts, tl[0], rolled_from)
        k, _ = _axis(tl[0])
        travel = np.sign(pts[-1][k] - pts[0][k]) or 1.0
        long_mm = (met - tl[1]) * travel
        long_dia = long_mm / table.diamond_mm(tl[0])
    else:
        long_mm = _point_miss(pts, tpt, float(last["angle_out"]) - float(last["angle_in"]))
        long_dia = long_mm / table.diamond_mm(rails[-1])
    # Made?
    pocketed = ev[(ev["kind"] == "pocket") & (ev["track"] == track)]
    if target.kind == "pocket":
        made = any(_pocket_of(table, p) == target.pocket for _, p in pocketed.iterrows())
    elif target.kind == "rail":
        made = bool(abs(long_mm) <= config.rail_target_tol_mm)
    else:
        made = bool(abs(long_mm) <= table.ball_diameter_mm)
    # The aim shift (sight diamonds, + along the ball's travel on the first rail) that would have
    # centred it, given the rebound this shot had: first order, gain from the mirror unfolding.
    correction = np.nan
    if tl is not None and np.isfinite(long_mm):
        gain = _arrival_gain(table, start, contact_along, rails, tl)
        if np.isfinite(gain) and abs(gain) > 1e-6:
            d_contact = -long_mm / gain
            _, m0 = _axis(rails[0])
            depth_rev = abs(start[m0] - table.reversal_line(rails[0]))
            depth_sight = abs(start[m0] - table.rail_point(rails[0], 0.0, table.sight_setback_mm)[m0])
            correction = d_contact * depth_sight / depth_rev / table.diamond_mm(rails[0])
    speed_in = float(first["speed_in"])
    head = cushion_rows[0]
    row_out = {
        "shot": shot, "track": track, "kind": kind,
        "intent": "inferred" if inferred else ("stated" if intent.aim is not None else "target only"),
        "start_x_mm": start[0], "start_y_mm": start[1], "start_region": _region(table, *start),
        "start_depth_diamonds": abs(start[_axis(rails[0])[1]] - table.reversal_line(rails[0]))
        / table.diamond_mm("left" if rails[0] in ("bottom", "top") else "bottom"),
        "rails": "+".join(rails), "rail": rails[0], "contact_diamond": float(first["diamond"]),
        "contact_along_mm": contact_along,
        "declared_diamond": table.to_diamonds(arail, declared_along) if np.isfinite(declared_along) else np.nan,
        "aim_error_mm": aim_err, "aim_error_diamonds": aim_err / table.diamond_mm(arail) if np.isfinite(aim_err) else np.nan,
        "mirror_diamond": head["mirror_diamond"], "speed_in_mm_s": speed_in, "band": config.band(speed_in),
        "band_intended": intent.band if intent is not None else None,
        "rebound_dev_deg": head["rebound_dev_deg"], "dev_model_deg": head["dev_model_deg"],
        "dev_spin_deg": head["dev_spin_deg"], "side_spin_rad_s": head["side_spin_rad_s"],
        "english": head["english"], "target": target.label(), "target_rail": tl[0] if tl else None,
        "met_along_mm": met, "long_mm": long_mm, "long_diamonds": long_dia, "made": bool(made),
        "ended_by": end["kind"] if end is not None else "end of shot",
        "correction_diamonds": correction,
    }
    return row_out, cushion_rows


def _pocket_of(table: TableSpec, ev: pd.Series) -> str:
    if "pocket" in ev and isinstance(ev["pocket"], str) and ev["pocket"]:
        return ev["pocket"]
    xy = np.array([ev["x"], ev["y"]], dtype=float)
    return min(table.pockets(), key=lambda p: float(np.hypot(*(np.array(p.mouth_centre) - xy)))).name


def _meet_line(table: TableSpec, pts: np.ndarray, rail: str, rolled_from: int = 0) -> float:
    """Rail coordinate (mm) where the path ``pts`` (N, 2) mm crosses ``rail``'s reversal line; if
    it never does (it stopped, or met something first), where the straight line fitted to its
    rolled stretch ``pts[rolled_from:]`` (total least squares: the principal axis of the points),
    extended in the direction of travel, would.

    A line fitted to the whole rolled stretch, not the last velocity sample: a ball coming to rest
    has a velocity whose direction is all noise, and a heading error is multiplied by the distance
    still to go (a soft bank may die a metre short of its target line)."""
    k, m = _axis(rail)
    c = table.reversal_line(rail)
    s = pts[:, m] - c
    for i in range(1, len(pts)):
        if s[i - 1] != 0 and np.sign(s[i]) != np.sign(s[i - 1]):
            f = s[i - 1] / (s[i - 1] - s[i])
            return float(pts[i - 1, k] + f * (pts[i, k] - pts[i - 1, k]))
        if s[i] == 0:
            return float(pts[i, k])
    seg = pts[min(rolled_from, len(pts) - 2):]
    chord = seg[-1] - seg[0]
    if len(seg) < 3 or np.hypot(*chord) < 1e-6:
        seg, chord = pts, pts[-1] - pts[0]
    centre = seg.mean(axis=0)
    _, _, vt = np.linalg.svd(seg - centre, full_matrices=False)
    d = vt[0] if np.hypot(*chord) > 1e-6 else chord
    d = d if float(d @ chord) >= 0 else -d
    return line_meets_line(table, centre, centre + d, rail, -table.reversal_offset_mm)


def _point_miss(pts: np.ndarray, tpt: np.ndarray, dev_sign: float) -> float:
    """Signed distance (mm) of the path's closest approach to a target point: + on the side the
    rebound would reach by coming off wider."""
    d = np.hypot(*(pts - tpt).T)
    i = int(np.argmin(d))
    return float(d[i])  # sign: unknown without a target rail; reported as a distance


def _arrival_gain(table, start, contact_along, rails, tl) -> float:
    """d(arrival on the target line, mm, along the ball's travel) / d(first contact, mm, along the
    ball's travel on the first rail), by the mirror unfolding of the path, finite difference."""
    def arrival(c):
        p = np.asarray(start, dtype=float)
        q = rail_xy(table, rails[0], c)
        for rail in rails[1:]:
            d = q - p
            # Reflect the incoming direction at the previous rail and run to the next rail.
            _, m = _axis(_prev_rail_of(rails, rail))
            d2 = d.copy()
            d2[m] = -d2[m]
            nxt = line_meets_line(table, q, q + d2, rail, -table.reversal_offset_mm)
            p, q = q, rail_xy(table, rail, nxt)
        d = q - p
        _, m = _axis(rails[-1])
        d[m] = -d[m]
        return line_meets_line(table, q, q + d, tl[0], -table.reversal_offset_mm)

    h = 1.0
    k0, _ = _axis(rails[0])
    s0 = contact_along - start[k0]
    a1, a0 = arrival(contact_along + h * np.sign(s0 or 1.0)), arrival(contact_along)
    k, _ = _axis(tl[0])
    travel = np.sign(a0 - arrival(contact_along - 50 * np.sign(s0 or 1.0))) or 1.0
    return float((a1 - a0) * travel / h) if np.isfinite(a1) and np.isfinite(a0) else float("nan")


def _prev_rail_of(rails: list[str], rail: str) -> str:
    return rails[rails.index(rail) - 1]


def _infer_target(session, table, last, end, tracks) -> Target:
    """The pocket the ball dropped in; else the pocket its path after the last cushion passed
    nearest (within two ball diameters); else the rail point it reached."""
    if end is not None and end["kind"] == "pocket":
        return Target("pocket", pocket=_pocket_of(table, end))
    seg = tracks[(tracks["t"] > float(last["t"])) & (tracks["t"] <= (float(end["t"]) if end is not None else math.inf))]
    pts = np.vstack([[last["x"], last["y"]], seg[["x", "y"]].to_numpy()])
    if len(pts) >= 2:
        d = pts[-1] - pts[0]
        best, name = math.inf, None
        for p in table.pockets():
            c = np.array(p.mouth_centre)
            rel = c - pts[0]
            along = rel @ d / max(np.hypot(*d), 1e-9)
            if along <= 0:
                continue
            off = abs(rel[0] * d[1] - rel[1] * d[0]) / max(np.hypot(*d), 1e-9)
            if off < best:
                best, name = off, p.name
        if name is not None and best < 2 * table.ball_diameter_mm:
            return Target("pocket", pocket=name)
    if end is not None and end["kind"] == "cushion":
        return Target("rail", rail=str(end["rail"]), diamond=float(end["diamond"]))
    k = "bottom" if pts[-1][1] < table.width_mm / 2 else "top"
    return Target("rail", rail=k, diamond=table.to_diamonds(k, float(pts[-1][0])))


# --- session statistics -----------------------------------------------------------------------
STAT_COLUMNS = [
    "group", "value", "n", "aim_error_mean_diamonds", "aim_error_ci_lo", "aim_error_ci_hi",
    "aim_error_sd_diamonds", "long_mean_diamonds", "long_ci_lo", "long_ci_hi", "long_sd_diamonds",
    "rebound_dev_mean_deg", "dev_model_mean_deg", "dev_spin_mean_deg", "made", "make_rate",
    "make_ci_lo", "make_ci_hi",
]


def mean_ci(x, confidence: float = 0.95) -> tuple[float, float, float, float]:
    """(mean, lower, upper, sample sd) of finite values of ``x``: Student-t interval; the interval
    is NaN with fewer than two values."""
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if x.size == 0:
        return (np.nan,) * 4
    m = float(x.mean())
    if x.size < 2:
        return m, np.nan, np.nan, np.nan
    sd = float(x.std(ddof=1))
    h = float(stats.t.ppf(0.5 + confidence / 2, x.size - 1)) * sd / math.sqrt(x.size)
    return m, m - h, m + h, sd


def wilson(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a proportion k/n (Wilson 1927, J. Am. Stat. Assoc. 22:209)."""
    if n == 0:
        return np.nan, np.nan
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    p = k / n
    den = 1 + z * z / n
    c = (p + z * z / (2 * n)) / den
    h = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    return max(0.0, c - h), min(1.0, c + h)


def session_stats(shots: pd.DataFrame, config: BankConfig) -> pd.DataFrame:
    """One row per group (all, each speed band, first rail, start region, band and rail)."""
    rows = []
    if shots.empty:
        return pd.DataFrame(columns=STAT_COLUMNS)
    s = shots.copy()
    s["band_rail"] = s["band"] + " " + s["rail"]
    for group, col in (("all", None), ("band", "band"), ("rail", "rail"), ("region", "start_region"),
                       ("band_rail", "band_rail")):
        parts = [("all", s)] if col is None else list(s.groupby(col, sort=True))
        for value, g in parts:
            a = mean_ci(g["aim_error_diamonds"], config.confidence)
            lo = mean_ci(g["long_diamonds"], config.confidence)
            k, n = int(g["made"].sum()), len(g)
            w = wilson(k, n, config.confidence)
            rows.append([group, value, n, a[0], a[1], a[2], a[3], lo[0], lo[1], lo[2], lo[3],
                         float(g["rebound_dev_deg"].mean()), float(g["dev_model_deg"].mean()),
                         float(g["dev_spin_deg"].mean()), k, k / n, w[0], w[1]])
    return pd.DataFrame(rows, columns=STAT_COLUMNS)


def fit_correction(shots: pd.DataFrame, config: BankConfig) -> dict:
    """Least-squares fit (scipy ``least_squares``) of the per-shot correction (sight diamonds) as
    ``c = b0 + b1 (v - 1000) / 1000 + b2 (d - d_mean)`` with ``v`` the speed at the first contact
    (mm/s) and ``d`` the start's distance from the first rail (diamonds of the crossing rail).
    Terms are dropped while there are fewer than three shots per parameter. Parameter covariance
    ``s^2 (J^T J)^-1``; predictions per band at the mean start distance with their standard error.
    """
    ok = shots[np.isfinite(shots["correction_diamonds"].astype(float))] if not shots.empty else shots
    n = len(ok)
    out = {"n": n, "terms": [], "coef": [], "coef_se": [], "rms_diamonds": np.nan, "by_band": {}}
    if n == 0:
        return out
    y = ok["correction_diamonds"].to_numpy(float)
    v = (ok["speed_in_mm_s"].to_numpy(float) - 1000.0) / 1000.0
    d = _start_depth(ok)
    d_mean = float(d.mean())
    cols = [np.ones(n)]
    terms = ["offset"]
    if n >= 6 and np.ptp(v) > 0.2:
        cols.append(v)
        terms.append("per_m_s")
    if n >= 9 and np.ptp(d) > 0.3:
        cols.append(d - d_mean)
        terms.append("per_diamond_out")
    X = np.column_stack(cols)
    res = least_squares(lambda b: X @ b - y, x0=np.zeros(X.shape[1]), method="lm" if n > X.shape[1] else "trf")
    b = res.x
    dof = n - len(b)
    s2 = float(res.fun @ res.fun / dof) if dof > 0 else np.nan
    J = res.jac
    cov = np.linalg.pinv(J.T @ J) * s2
    out.update(terms=terms, coef=b.tolist(), coef_se=np.sqrt(np.diag(cov)).tolist(),
               rms_diamonds=float(np.sqrt(np.mean(res.fun**2))), d_mean=d_mean, cov=cov.tolist())
    a, e = config.band_edges_mm_s
    for band, speed in (("soft", 0.5 * a), ("medium", 0.5 * (a + e)), ("hard", e + 0.5 * (e - a))):
        x = np.array([1.0, (speed - 1000.0) / 1000.0, 0.0][: len(b)])
        pred = float(x @ b)
        se = float(math.sqrt(max(x @ cov @ x, 0.0))) if np.isfinite(s2) else np.nan
        out["by_band"][band] = {"speed_mm_s": speed, "correction_diamonds": pred, "se_diamonds": se}
    return out


def _start_depth(shots: pd.DataFrame) -> np.ndarray:
    """Distance of each start from its first bank rail, in diamonds of the crossing rail."""
    return shots["start_depth_diamonds"].to_numpy(float)


def make_findings(shots: pd.DataFrame, stat: pd.DataFrame, corr: dict, config: BankConfig) -> list[str]:
    """Plain-language findings generated from the numbers (no canned verdicts)."""
    out: list[str] = []
    if shots.empty:
        return ["no bank shots were found in this session"]
    k, n = int(shots["made"].sum()), len(shots)
    lo, hi = wilson(k, n, config.confidence)
    out.append(f"{n} bank shot(s): made {k} ({100 * k / n:.0f} %, {int(100 * config.confidence)} % CI "
               f"{100 * lo:.0f} to {100 * hi:.0f} %)")
    rows = stat[stat["group"].isin(["band_rail"])]
    for _, r in rows.iterrows():
        band, rail = r["value"].split(" ")
        what = f"{band}-speed {rail}-rail banks ({int(r['n'])} shot{'s' if r['n'] != 1 else ''})"
        m, a, b = r["long_mean_diamonds"], r["long_ci_lo"], r["long_ci_hi"]
        if not np.isfinite(m):
            continue
        sig = np.isfinite(a) and (a > 0 or b < 0)
        size = f"{abs(m):.2f} diamond {'long' if m > 0 else 'short'}"
        if r["n"] < 2:
            land = f"landed {size} (one shot: no interval)"
        elif sig and abs(m) >= 0.05:
            land = f"land {size} (CI {a:+.2f} to {b:+.2f})"
        else:
            land = f"land on target on average ({m:+.2f} diamond, CI {a:+.2f} to {b:+.2f})"
        am = r["aim_error_mean_diamonds"]
        if np.isfinite(am):
            aim_sig = np.isfinite(r["aim_error_ci_lo"]) and (r["aim_error_ci_lo"] > 0 or r["aim_error_ci_hi"] < 0)
            aim = ("the aim was right" if abs(am) < 0.05 or (r["n"] >= 2 and not aim_sig)
                   else f"the aim was off by {am:+.2f} diamond")
        else:
            aim = "no aim was stated"
        dev, dm, ds = r["rebound_dev_mean_deg"], r["dev_model_mean_deg"], r["dev_spin_mean_deg"]
        if not np.isfinite(dev):
            reb = "the rebound was not seen (no path after the cushion: the ball was lifted or hidden there)"
        elif abs(dev) < 0.5:
            reb = f"the rebound was mirror-true ({dev:+.1f} deg)"
        else:
            reb = (f"the rebound was not: {abs(dev):.1f} deg {'wider' if dev > 0 else 'narrower'} than the "
                   f"mirror, {dm:+.1f} deg from speed and cushion, {ds:+.1f} deg left for spin")
        out.append(f"{what} {land}; {aim}; {reb}")
    if corr.get("n", 0) >= 1 and corr.get("coef"):
        for band, p in corr["by_band"].items():
            if band in set(shots["band"]):
                se = p["se_diamonds"]
                se_txt = f" +- {se:.2f}" if np.isfinite(se) else " (too few shots for an uncertainty)"
                word = "further along" if p["correction_diamonds"] > 0 else "back"
                flat = "" if "per_m_s" in corr["terms"] else " (one value for every speed: too few shots to fit how it changes with speed)"
                out.append(f"at {band} speed, move the aim {abs(p['correction_diamonds']):.2f}{se_txt} "
                           f"diamond {word} the rail (direction of travel) to centre these banks{flat}")
    return out


def audit_to_files(audit: BankAudit, config: BankConfig) -> dict[str, str]:
    """File name -> text of every audit output (written by the caller, atomically)."""
    files = {
        "banks.csv": audit.shots.to_csv(index=False, float_format="%.4f"),
        "bank_cushions.csv": audit.cushions.to_csv(index=False, float_format="%.4f"),
        "bank_stats.csv": audit.stats.to_csv(index=False, float_format="%.4f"),
        "bank_findings.txt": "\n".join(list(audit.notes) + list(audit.findings)) + "\n",
    }
    meta = {"config": {"band_edges_mm_s": list(config.band_edges_mm_s),
                       "physics": _physics_dict(config.physics),
                       "rail_target_tol_mm": config.rail_target_tol_mm,
                       "confidence": config.confidence},
            "correction": _jsonable(audit.correction)}
    files["bank_audit.json"] = json.dumps(meta, indent=2) + "\n"
    return files


def _physics_dict(p: PhysicsParams) -> dict:
    d = asdict(p)
    return _jsonable(d)


def _jsonable(x):
    if isinstance(x, dict):
        return {k: _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, (np.floating, float)):
        return None if not math.isfinite(float(x)) else float(x)
    if isinstance(x, np.integer):
        return int(x)
    return x
