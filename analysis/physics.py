"""Event-based ball-physics simulator: the ground truth clips are rendered from.

Method: the event-based approach of Leckie & Greenspan, "An event-based pool physics simulator",
Advances in Computer Games 11 (2006). Between events every ball follows a closed-form motion, so its
state at any time is exact and the events (collisions, cushion contacts, phase changes) are found as
roots of polynomials in time rather than by time stepping.

Frames and units
----------------
Table frame of ``vision/table.py`` and ``shared/spec/results-format.md``: millimetres, seconds,
origin at a corner of the nose rectangle, x along a long cushion, y along a short one, z up
(right-handed). A ball's state is its centre (x, y) mm projected onto the cloth, its velocity
(vx, vy) mm/s and its angular velocity (wx, wy, wz) rad/s in the table frame. Mass cancels out:
impulses are per unit mass (mm/s); the moment of inertia is ``2/5 M R**2``.

Motion phases (rigid ball on a plane with Coulomb friction; see also Alciatore, *The Illustrated
Principles of Pool and Billiards*, 2004, technical proofs)
---------------------------------------------------------------------------------------------
* **sliding**: the contact point's slip ``u = v + w x (-R z) = (vx - R wy, vy + R wx)`` is opposed
  by kinetic friction ``mu_slide g``; then ``dv/dt = -mu_slide g u_hat`` and
  ``dw/dt = 5 mu_slide g / (2 R) (z x u_hat)``, so ``du/dt = -7/2 mu_slide g u_hat``: the slip keeps
  its direction and vanishes after ``2 |u0| / (7 mu_slide g)``;
* **rolling**: ``u = 0``; rolling resistance decelerates the ball at ``mu_roll g`` along its
  velocity until it stops, the horizontal spin following ``w = (-vy, vx) / R``;
* **spinning**: ``wz`` decays at the constant ``spin_decel_rad_s2`` until zero, independently of
  the other two phases.

Within a phase the position is quadratic in time and velocity and spin are linear, so the times of
contact are roots of polynomials of degree at most four. Phase changes are events (``rolling``,
``stop``, ``spin_stop``).

Impacts are instantaneous: cue strikes (``Strike``), ball-ball collisions (restitution along the
line of centres plus Coulomb friction at the contact, which produces throw), cushion and jaw
impacts (``analysis.cushion``: Mathavan, Jackson & Parkin 2010) and pockets.

Simplifications, stated here once: a ball is pocketed the moment its centre crosses the pocket's
mouth line (jaw to jaw) outwards; pocket facings and the pocket's inside are not modelled, nor are
jumps (vertical velocity from an impact is dropped), cue squirt or swerve.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq

from analysis.cushion import CushionParams, cushion_impact
from vision.table import TableSpec

EVENT_KINDS = (
    "start", "collision", "cushion", "jaw", "pocket", "stop", "rolling", "spin_stop", "place",
    "remove",
)

# Speeds (mm/s) and spins (rad/s) below these are exactly zero: far below anything a camera sees,
# and they keep rounding from spawning phase changes microseconds apart.
_V_EPS = 1e-6
_W_EPS = 1e-9
# A contact found already touching counts as an impact only when closing faster than this (mm/s);
# slower, the pair or cushion is taken as resting in contact.
_APPROACH_EPS = 1e-6
# Gaps (mm) smaller than this count as touching when predicting the next contact: rounding noise.
_TOUCH_MM = 1e-8
# Ball-ball impacts closing slower than this (mm/s) are elastic: the velocity form of the TC
# model of Luding & McNamara, "How to handle the inelastic collapse of a dissipative hard-sphere
# gas with the TC model", Granular Matter 1:113-128 (1998). Without it a ball pressed against
# another by friction would bounce ever faster and smaller, an endless run of events.
_V_TC = 1.0
# Overlap (mm) at which pressed balls are made to part (see _first_contact).
_DEPTH_MM = 1e-4
# Positions within this of a boundary (mm) count as on it when checking user placements.
_PLACE_TOL_MM = 1e-6
# Guard against a runaway chain of events (e.g. a ball trapped between two others).
_MAX_EVENTS = 200_000
# Largest rotation sub-step (s) in Trajectory.rotations.
_ROT_STEP_S = 1e-3


@dataclass(frozen=True)
class PhysicsParams:
    """Physical constants of the simulator (SI-like units in mm).

    Defaults lie in the typical ranges given by Alciatore (2004) [secondary, see
    ``shared/spec/references.md``]: sliding friction 0.2, rolling resistance 0.01, spin
    deceleration 10 rad/s^2, ball-ball restitution 0.95 and friction 0.06.
    """

    g_mm_s2: float = 9810.0
    mu_slide: float = 0.2
    mu_roll: float = 0.01
    spin_decel_rad_s2: float = 10.0
    ball_restitution: float = 0.95
    ball_friction: float = 0.06
    cushion: CushionParams = field(default_factory=CushionParams)

    def __post_init__(self) -> None:
        for name in ("g_mm_s2", "mu_slide", "mu_roll", "spin_decel_rad_s2"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"{name} = {value!r} must be a positive number")
        if not (0.0 <= self.ball_restitution <= 1.0):
            raise ValueError(f"ball_restitution {self.ball_restitution} must lie in [0, 1]")
        if not (math.isfinite(self.ball_friction) and self.ball_friction >= 0):
            raise ValueError(f"ball_friction {self.ball_friction} must be >= 0")
        if not isinstance(self.cushion, CushionParams):
            raise ValueError(f"cushion must be a CushionParams, got {type(self.cushion).__name__}")


@dataclass(frozen=True)
class Strike:
    """A cue strike: a horizontal impulse along ``heading_rad`` (anticlockwise from +x).

    It adds ``speed_mm_s`` to the ball's velocity along the heading. The tip meets the ball
    ``tip_side * R`` to the right of centre (as the shooter, looking along the heading, sees it)
    and ``tip_height * R`` above centre; ``hypot(tip_side, tip_height)`` must not exceed 0.6.
    The spin is ``w = (r x J) / I`` with ``r`` the contact point relative to the centre, so
    ``tip_height = 0.4`` (the tip at 7R/5 above the cloth) gives pure rolling at once (Alciatore
    2004, technical proofs) and ``tip_height = 0`` a stun. Cue squirt is not modelled.
    """

    ball: str
    speed_mm_s: float
    heading_rad: float
    tip_side: float = 0.0
    tip_height: float = 0.0

    def __post_init__(self) -> None:
        if not (math.isfinite(self.speed_mm_s) and self.speed_mm_s >= 0):
            raise ValueError(f"strike speed {self.speed_mm_s!r} mm/s must be finite and >= 0")
        if not math.isfinite(self.heading_rad):
            raise ValueError(f"strike heading {self.heading_rad!r} rad must be finite")
        off = math.hypot(self.tip_side, self.tip_height)
        if not off <= 0.6:
            raise ValueError(
                f"tip offset ({self.tip_side}, {self.tip_height}) is {off:.3f} R from centre; "
                "keep hypot(tip_side, tip_height) <= 0.6 (beyond that the cue miscues)"
            )


@dataclass(frozen=True)
class SimEvent:
    """One event of a simulation (table frame, mm, s, rad/s).

    ``kind`` is one of ``EVENT_KINDS``. A collision gives one event per ball (``other`` = the other
    ball). ``pos`` is the ball's centre at the event; for ``cushion`` it lies on the reversal line.
    ``rail`` is set for ``cushion`` and ``jaw`` (the rail whose cushion ends at that jaw),
    ``pocket`` for ``jaw`` and ``pocket``. ``stop`` means the translation came to rest.
    """

    t: float
    kind: str
    ball: str
    other: str | None
    rail: str | None
    pocket: str | None
    pos: tuple[float, float]
    vel_in: tuple[float, float]
    vel_out: tuple[float, float]
    omega_in: tuple[float, float, float]
    omega_out: tuple[float, float, float]


@dataclass(frozen=True)
class Samples:
    """States sampled at times ``t`` (T,) s for balls ``ball_ids`` (B,).

    ``pos`` (T, B, 2) mm, ``vel`` (T, B, 2) mm/s, ``omega`` (T, B, 3) rad/s, all NaN where the ball
    is absent; ``present`` (T, B) bool.
    """

    pos: np.ndarray
    vel: np.ndarray
    omega: np.ndarray
    present: np.ndarray
    t: np.ndarray | None = None
    ball_ids: tuple[str, ...] = ()


class _Seg:
    """One closed-form piece of a ball's motion, valid from ``t0`` until the next piece.

    ``r``, ``v``, ``a`` are (x, y) tuples (mm, mm/s, mm/s^2); ``w``, ``al`` (wx, wy, wz) tuples
    (rad/s, rad/s^2). ``t_trans`` / ``t_spin`` are the absolute times the translation phase and the
    z spin end (inf when they do not).
    """

    __slots__ = ("t0", "present", "r", "v", "w", "a", "al", "phase", "t_trans", "t_spin", "bbox")

    def state(self, t: float):
        tau = t - self.t0
        r, v, w, a, al = self.r, self.v, self.w, self.a, self.al
        h = 0.5 * tau * tau
        return (
            (r[0] + v[0] * tau + a[0] * h, r[1] + v[1] * tau + a[1] * h),
            (v[0] + a[0] * tau, v[1] + a[1] * tau),
            (w[0] + al[0] * tau, w[1] + al[1] * tau, w[2] + al[2] * tau),
        )

    @property
    def t_end(self) -> float:
        return min(self.t_trans, self.t_spin)


def ball_energy(vel, omega, radius_mm: float):
    """Kinetic energy per unit mass, mm^2/s^2: |v|^2 / 2 + (1/2)(2/5 R^2)|w|^2.

    ``vel`` (..., 2) and ``omega`` (..., 3) arrays; returns an array of shape (...).
    """
    v = np.asarray(vel, dtype=float)
    w = np.asarray(omega, dtype=float)
    return 0.5 * np.sum(v * v, axis=-1) + 0.2 * radius_mm**2 * np.sum(w * w, axis=-1)


class Simulator:
    """Event-based simulation of balls on one table (Leckie & Greenspan 2006).

    ``balls`` maps ball ids to resting centre positions (x, y) mm. Call ``strike``, ``place`` and
    ``run_until_rest`` with non-decreasing times, then ``trajectory()``. ValueError on overlapping
    balls, a ball off the cloth, or a time earlier than the simulation clock.
    """

    def __init__(
        self,
        table: TableSpec,
        params: PhysicsParams,
        balls: dict[str, tuple[float, float]],
        t0: float = 0.0,
    ) -> None:
        if not math.isfinite(t0):
            raise ValueError(f"t0 = {t0!r} must be a finite time in seconds")
        self.table = table
        self.params = params
        self._R = table.radius_mm
        self._t = float(t0)
        self._t_start = float(t0)
        self._ids: list[str] = []
        self._seg: dict[str, _Seg] = {}
        self._hist: dict[str, list[_Seg]] = {}
        self._events: list[SimEvent] = []
        self._pairs: dict[tuple[str, str], float] = {}
        self._bound: dict[str, tuple[float, str, object]] = {}
        self._build_geometry()
        for bid, xy in balls.items():
            self._check_placement(bid, xy, set(balls) - {bid}, balls)
        for bid, xy in balls.items():
            self._set_seg(bid, self._make_seg(self._t, (float(xy[0]), float(xy[1])),
                                              (0.0, 0.0), (0.0, 0.0, 0.0)))

    # --- geometry ---------------------------------------------------------------------------
    def _build_geometry(self) -> None:
        tab = self.table
        d = tab.reversal_offset_mm
        self._d = d
        # Reversal lines: s(r) = n . r - c >= 0 on the cloth side.
        self._lines = []
        for rail, n in (("bottom", (0.0, 1.0)), ("right", (-1.0, 0.0)), ("top", (0.0, -1.0)),
                        ("left", (1.0, 0.0))):
            value = tab.reversal_line(rail)
            c = n[0] * value if rail in ("left", "right") else n[1] * value
            spans = []
            for seg in tab.cushions():
                if seg.rail == rail:
                    k = 0 if rail in ("bottom", "top") else 1
                    lo, hi = sorted((seg.start[k], seg.end[k]))
                    spans.append((lo, hi))
            self._lines.append((rail, n, c, 0 if rail in ("bottom", "top") else 1, spans))
        # Jaw tips: each is the end of one cushion segment (which gives its rail) and one pocket.
        self._jaws = []
        for pocket in tab.pockets():
            for jaw in (pocket.jaw_a, pocket.jaw_b):
                rail = None
                for seg in tab.cushions():
                    if _close(seg.start, jaw) or _close(seg.end, jaw):
                        rail = seg.rail
                self._jaws.append((jaw, rail, pocket.name))
        # Mouth lines: s(r) = -m . (r - jaw_a) >= 0 on the cloth side; m points into the pocket.
        self._mouths = []
        for pocket in tab.pockets():
            ax, ay = pocket.jaw_a
            bx, by = pocket.jaw_b
            length = math.hypot(bx - ax, by - ay)
            tx, ty = (bx - ax) / length, (by - ay) / length
            mx, my = ty, -tx
            cx, cy = pocket.centre
            mcx, mcy = pocket.mouth_centre
            if mx * (cx - mcx) + my * (cy - mcy) < 0:
                mx, my = -mx, -my
            self._mouths.append((pocket.name, (ax, ay), (tx, ty), length, (mx, my)))

    def _on_cloth(self, xy) -> bool:
        x, y = xy
        for _rail, n, c, _k, _spans in self._lines:
            if n[0] * x + n[1] * y - c < -_PLACE_TOL_MM:
                return False
        for _name, a, _t, _length, m in self._mouths:
            if -(m[0] * (x - a[0]) + m[1] * (y - a[1])) < -_PLACE_TOL_MM:
                return False
        for jaw, _rail, _name in self._jaws:
            if math.hypot(x - jaw[0], y - jaw[1]) < self._d - _PLACE_TOL_MM:
                return False
        return True

    def _check_placement(self, bid, xy, others, positions) -> None:
        if not isinstance(bid, str) or not bid:
            raise ValueError(f"ball id {bid!r} must be a non-empty string")
        try:
            x, y = float(xy[0]), float(xy[1])
        except (TypeError, IndexError, ValueError):
            raise ValueError(f"ball {bid!r}: position {xy!r} must be (x, y) in mm") from None
        if not (math.isfinite(x) and math.isfinite(y)) or not self._on_cloth((x, y)):
            raise ValueError(
                f"ball {bid!r} at ({x:.1f}, {y:.1f}) mm is off the cloth: its centre must stay at "
                f"least {self._d:.1f} mm (the reversal offset) inside the cushion noses of the "
                f"{self.table.length_mm:g} x {self.table.width_mm:g} mm table and off the pockets"
            )
        for other in others:
            ox, oy = positions[other]
            gap = math.hypot(x - ox, y - oy)
            if gap < 2 * self._R - _PLACE_TOL_MM:
                raise ValueError(
                    f"ball {bid!r} at ({x:.1f}, {y:.1f}) overlaps ball {other!r} at "
                    f"({ox:.1f}, {oy:.1f}): centres {gap:.2f} mm apart, need at least "
                    f"{2 * self._R:.2f} mm"
                )

    # --- public actions ----------------------------------------------------------------------
    @property
    def t(self) -> float:
        """The simulation clock, s."""
        return self._t

    def place(self, t: float, ball: str, xy: tuple[float, float] | None) -> None:
        """Place ``ball`` at ``xy`` (mm) at time ``t``, or remove it when ``xy`` is None.

        A new id adds a ball. Every ball must be at rest (translation and spin) at ``t``.
        """
        self._advance_to(t)
        moving = [b for b in self._present() if self._seg[b].phase != "rest"
                  or self._seg[b].t_spin != math.inf]
        if moving:
            raise ValueError(
                f"cannot place or remove balls at t = {t} s: {moving} still moving; call "
                "run_until_rest() first and place at or after the time it returns"
            )
        if xy is None:
            if ball not in self._seg or not self._seg[ball].present:
                raise ValueError(f"cannot remove ball {ball!r}: it is not on the table")
            r, v, w = self._seg[ball].state(self._t)
            self._set_seg(ball, self._absent_seg(self._t))
            self._emit("remove", ball, r, v, v, w, w)
            return
        positions = {b: self._seg[b].state(self._t)[0] for b in self._present() if b != ball}
        self._check_placement(ball, xy, positions.keys(), positions)
        r = (float(xy[0]), float(xy[1]))
        self._set_seg(ball, self._make_seg(self._t, r, (0.0, 0.0), (0.0, 0.0, 0.0)))
        zero = (0.0, 0.0)
        self._emit("place", ball, r, zero, zero, (0.0, 0.0, 0.0), (0.0, 0.0, 0.0))

    def lift(self, t: float, ball: str) -> None:
        """Take ``ball`` off the table at time ``t`` (s) even while it moves, as a hand catching it
        (room staff checking cushions catch the ball once it has come off). Emits ``remove``."""
        self._advance_to(t)
        if ball not in self._seg or not self._seg[ball].present:
            raise ValueError(f"cannot lift ball {ball!r} at t = {t} s: it is not on the table")
        r, v, w = self._seg[ball].state(self._t)
        self._set_seg(ball, self._absent_seg(self._t))
        self._emit("remove", ball, r, v, (0.0, 0.0), w, (0.0, 0.0, 0.0))

    def strike(self, t: float, strike: Strike) -> None:
        """Apply the cue ``strike`` at time ``t`` (s); balls may be moving."""
        if not isinstance(strike, Strike):
            raise ValueError(f"strike must be a Strike, got {type(strike).__name__}")
        self._advance_to(t)
        bid = strike.ball
        if bid not in self._seg or not self._seg[bid].present:
            raise ValueError(f"cannot strike ball {bid!r}: it is not on the table")
        R = self._R
        r, v, w = self._seg[bid].state(self._t)
        dx, dy = math.cos(strike.heading_rad), math.sin(strike.heading_rad)
        # Contact point relative to the centre: behind the centre along the heading, tip_side*R to
        # the shooter's right (heading x z) and tip_height*R up.
        a, b = strike.tip_side * R, strike.tip_height * R
        back = math.sqrt(max(R * R - a * a - b * b, 0.0))
        rc = (-back * dx + a * dy, -back * dy - a * dx, b)
        J = (strike.speed_mm_s * dx, strike.speed_mm_s * dy, 0.0)
        tq = _cross(rc, J)
        k = 0.4 * R * R  # I / M
        v2 = (v[0] + J[0], v[1] + J[1])
        w2 = (w[0] + tq[0] / k, w[1] + tq[1] / k, w[2] + tq[2] / k)
        self._set_seg(bid, self._make_seg(self._t, r, v2, w2))
        self._emit("start", bid, r, v, self._seg[bid].v, w, self._seg[bid].w)

    def run_until_rest(self, t_max: float = 120.0) -> float:
        """Simulate until every ball is at rest (translation and spin); return that time (s).

        RuntimeError when balls still move ``t_max`` seconds after the current clock.
        """
        limit = self._t + float(t_max)
        count = 0
        while True:
            t_ev, action = self._next_event()
            if action is None:
                return self._t
            if t_ev > limit:
                raise RuntimeError(
                    f"balls still moving at t = {limit:.3f} s (t_max = {t_max} s after the "
                    "start of this run); raise t_max"
                )
            self._do(t_ev, action)
            count += 1
            if count > _MAX_EVENTS:
                raise RuntimeError(f"more than {_MAX_EVENTS} events without coming to rest")

    def trajectory(self) -> Trajectory:
        """Everything simulated so far, up to the current clock."""
        segs = {b: list(self._hist[b]) + [self._seg[b]] for b in self._ids}
        return Trajectory(tuple(self._ids), tuple(self._events), self._t, segs, self._R,
                          self._t_start)

    # --- event loop --------------------------------------------------------------------------
    def _present(self) -> list[str]:
        return [b for b in self._ids if self._seg[b].present]

    def _advance_to(self, t: float) -> None:
        t = float(t)
        if not math.isfinite(t) or t < self._t:
            raise ValueError(
                f"time {t!r} s is before the simulation clock {self._t} s; actions must come in "
                "non-decreasing time order"
            )
        count = 0
        while True:
            t_ev, action = self._next_event()
            if action is None or t_ev > t:
                break
            self._do(t_ev, action)
            count += 1
            if count > _MAX_EVENTS:
                raise RuntimeError(f"more than {_MAX_EVENTS} events before t = {t} s")
        self._t = t

    def _next_event(self):
        best_t, best = math.inf, None
        for b in self._ids:
            seg = self._seg[b]
            if not seg.present:
                continue
            if seg.t_end < best_t:
                best_t, best = seg.t_end, ("phase", b)
            bnd = self._bound.get(b)
            if bnd is not None and bnd[0] < best_t:
                best_t, best = bnd[0], ("bound", b)
        for key, tc in self._pairs.items():
            if tc < best_t:
                best_t, best = tc, ("pair", key)
        return best_t, best

    def _do(self, t: float, action) -> None:
        self._t = max(self._t, t)
        t = self._t
        kind = action[0]
        if kind == "phase":
            self._do_phase(t, action[1])
        elif kind == "bound":
            self._do_boundary(t, action[1])
        else:
            self._do_collision(t, *action[1])

    def _do_phase(self, t: float, b: str) -> None:
        seg = self._seg[b]
        r, v, w = seg.state(t)
        kinds = []
        if seg.t_trans <= t:
            if seg.phase == "slide":
                w = (-v[1] / self._R, v[0] / self._R, w[2])  # the slip has just vanished
                if math.hypot(*v) <= _V_EPS:
                    v, w = (0.0, 0.0), (0.0, 0.0, w[2])
                kinds.append("rolling" if math.hypot(*v) > _V_EPS else "stop")
            else:
                v, w = (0.0, 0.0), (0.0, 0.0, w[2])
                kinds.append("stop")
        if seg.t_spin <= t:
            w = (w[0], w[1], 0.0)
            kinds.append("spin_stop")
        new = self._make_seg(t, r, v, w)
        self._set_seg(b, new)
        for k in kinds:
            self._emit(k, b, r, v, new.v, seg.state(t)[2], new.w)

    def _do_boundary(self, t: float, b: str) -> None:
        _tb, kind, info = self._bound[b]
        seg = self._seg[b]
        r, v, w = seg.state(t)
        p = self.params
        if kind == "pocket":
            self._set_seg(b, self._absent_seg(t))
            self._emit("pocket", b, r, v, v, w, w, pocket=info)
            return
        if kind == "cushion":
            rail, n, c, k = info
            # Put the centre exactly on the reversal line (it is there to rounding already).
            gap = n[0] * r[0] + n[1] * r[1] - c
            r = (r[0] - gap * n[0], r[1] - gap * n[1])
            normal = n
            diamond = self.table.to_diamonds(rail, r[k])
            pocket = None
        else:  # jaw
            jaw, rail, pocket = info
            dx, dy = r[0] - jaw[0], r[1] - jaw[1]
            dist = math.hypot(dx, dy)
            normal = (dx / dist, dy / dist)
            k = 0 if rail in ("bottom", "top") else 1
            diamond = self.table.to_diamonds(rail, jaw[k])
        vn = -(v[0] * normal[0] + v[1] * normal[1])
        e = p.cushion.restitution(vn, rail, diamond)
        v2, w2 = cushion_impact(v, w, normal, self.table, e, p.cushion.mu_cushion, p.mu_slide)
        new = self._make_seg(t, r, (float(v2[0]), float(v2[1])),
                             (float(w2[0]), float(w2[1]), float(w2[2])))
        self._set_seg(b, new)
        self._emit(kind, b, r, v, new.v, w, new.w, rail=rail, pocket=pocket)
        if new.phase == "rest" and seg.phase != "rest":
            self._emit("stop", b, r, new.v, new.v, new.w, new.w)

    def _do_collision(self, t: float, i: str, j: str) -> None:
        """Ball-ball impact: normal impulse with restitution, then Coulomb friction (throw).

        Equal masses; per unit mass the normal impulse is P = (1 + e)/2 * closing speed (e = 1
        below ``_V_TC``, the TC model of Luding & McNamara 1998). The
        friction impulse at the contact is ``min(mu P, |g_t| / 7)`` against the tangential slip
        ``g_t`` of the contact points: a tangential impulse J changes each ball's contact-point
        velocity by 3.5 J (1 + R^2 / k with k = 2/5 R^2), so |g_t| / 7 just stops the slip and
        friction never reverses it.
        """
        p, R, k = self.params, self._R, 0.4 * self._R ** 2
        si, sj = self._seg[i], self._seg[j]
        ri, vi, wi = si.state(t)
        rj, vj, wj = sj.state(t)
        dx, dy = rj[0] - ri[0], rj[1] - ri[1]
        dist = math.hypot(dx, dy)
        nx, ny = dx / dist, dy / dist
        if dist < 2 * R - _TOUCH_MM:
            # Pressed balls overlapping by up to _DEPTH_MM (see _first_contact): set them back to
            # touching, half each, so that impacts slower than the overlap can resolve stay rare.
            half = 0.5 * (2 * R - dist)
            ri = (ri[0] - half * nx, ri[1] - half * ny)
            rj = (rj[0] + half * nx, rj[1] + half * ny)
        closing = (vi[0] - vj[0]) * nx + (vi[1] - vj[1]) * ny
        e = p.ball_restitution if closing >= _V_TC else 1.0  # TC model, see _V_TC
        P = 0.5 * (1.0 + e) * max(closing, 0.0)
        vi2 = [vi[0] - P * nx, vi[1] - P * ny, 0.0]
        vj2 = [vj[0] + P * nx, vj[1] + P * ny, 0.0]
        wi2, wj2 = list(wi), list(wj)
        n3 = (nx, ny, 0.0)
        ci = _add(vi2, _cross(wi, (R * nx, R * ny, 0.0)))
        cj = _add(vj2, _cross(wj, (-R * nx, -R * ny, 0.0)))
        g = (ci[0] - cj[0], ci[1] - cj[1], ci[2] - cj[2])
        gn = g[0] * nx + g[1] * ny
        gt = (g[0] - gn * nx, g[1] - gn * ny, g[2])
        gmag = math.sqrt(gt[0] ** 2 + gt[1] ** 2 + gt[2] ** 2)
        if gmag > 0.0 and p.ball_friction > 0.0:
            F = min(p.ball_friction * P, gmag / 7.0)
            J = (-F * gt[0] / gmag, -F * gt[1] / gmag, -F * gt[2] / gmag)  # on i, at +R n
            tq = _cross((R * n3[0], R * n3[1], 0.0), J)  # equal for j: (-R n) x (-J)
            for q in range(3):
                vi2[q] += J[q]
                vj2[q] -= J[q]
                wi2[q] += tq[q] / k
                wj2[q] += tq[q] / k
        # The vertical part of the friction impulse is taken by the cloth (or would be a hop):
        # the balls stay on the cloth.
        newi = self._make_seg(t, ri, (vi2[0], vi2[1]), tuple(wi2))
        newj = self._make_seg(t, rj, (vj2[0], vj2[1]), tuple(wj2))
        self._set_seg(i, newi)
        self._set_seg(j, newj)
        self._emit("collision", i, ri, vi, newi.v, wi, newi.w, other=j)
        self._emit("collision", j, rj, vj, newj.v, wj, newj.w, other=i)
        for b, old, new, r in ((i, si, newi, ri), (j, sj, newj, rj)):
            if new.phase == "rest" and old.phase != "rest":
                self._emit("stop", b, r, new.v, new.v, new.w, new.w)

    def _emit(self, kind, ball, r, v_in, v_out, w_in, w_out, other=None, rail=None, pocket=None):
        self._events.append(SimEvent(
            t=self._t, kind=kind, ball=ball, other=other, rail=rail, pocket=pocket,
            pos=(float(r[0]), float(r[1])), vel_in=(float(v_in[0]), float(v_in[1])),
            vel_out=(float(v_out[0]), float(v_out[1])),
            omega_in=(float(w_in[0]), float(w_in[1]), float(w_in[2])),
            omega_out=(float(w_out[0]), float(w_out[1]), float(w_out[2])),
        ))

    # --- segments ----------------------------------------------------------------------------
    def _absent_seg(self, t: float) -> _Seg:
        s = _Seg()
        nan = math.nan
        s.t0, s.present, s.phase = t, False, "rest"
        s.r, s.v, s.w = (nan, nan), (nan, nan), (nan, nan, nan)
        s.a, s.al = (0.0, 0.0), (0.0, 0.0, 0.0)
        s.t_trans = s.t_spin = math.inf
        s.bbox = None
        return s

    def _make_seg(self, t, r, v, w) -> _Seg:
        """The closed-form phase that starts from state (r, v, w) at time t."""
        p, R = self.params, self._R
        s = _Seg()
        s.t0, s.present = t, True
        vx, vy = float(v[0]), float(v[1])
        wx, wy, wz = float(w[0]), float(w[1]), float(w[2])
        ux, uy = vx - R * wy, vy + R * wx  # slip of the cloth contact, u = v + w x (-R z)
        um = math.hypot(ux, uy)
        if um > _V_EPS:
            f = p.mu_slide * p.g_mm_s2
            hx, hy = ux / um, uy / um
            s.phase = "slide"
            s.a = (-f * hx, -f * hy)
            c = 2.5 * f / R  # dw/dt = 5 mu g / (2 R) (z x u_hat)
            s.al = (-c * hy, c * hx, 0.0)
            s.t_trans = t + um / (3.5 * f)  # slip shrinks at 7/2 mu g
        elif math.hypot(vx, vy) > _V_EPS:
            f = p.mu_roll * p.g_mm_s2
            sp = math.hypot(vx, vy)
            wx, wy = -vy / R, vx / R  # rolling: u = 0 exactly
            s.phase = "roll"
            s.a = (-f * vx / sp, -f * vy / sp)
            s.al = (-s.a[1] / R, s.a[0] / R, 0.0)
            s.t_trans = t + sp / f
        else:
            vx = vy = wx = wy = 0.0
            s.phase = "rest"
            s.a, s.al = (0.0, 0.0), (0.0, 0.0, 0.0)
            s.t_trans = math.inf
        if abs(wz) > _W_EPS:
            s.al = (s.al[0], s.al[1], -math.copysign(p.spin_decel_rad_s2, wz))
            s.t_spin = t + abs(wz) / p.spin_decel_rad_s2
        else:
            wz = 0.0
            s.t_spin = math.inf
        s.r = (float(r[0]), float(r[1]))
        s.v, s.w = (vx, vy), (wx, wy, wz)
        s.bbox = _path_bbox(s, t, s.t_trans) if s.phase != "rest" else (
            s.r[0], s.r[0], s.r[1], s.r[1])
        return s

    def _set_seg(self, b: str, seg: _Seg) -> None:
        if b in self._seg:
            self._hist[b].append(self._seg[b])
        else:
            self._ids.append(b)
            self._hist[b] = []
        self._seg[b] = seg
        self._update_predictions(b)

    # --- predictions -------------------------------------------------------------------------
    def _update_predictions(self, b: str) -> None:
        t = self._t
        seg = self._seg[b]
        for key in [key for key in self._pairs if b in key]:
            del self._pairs[key]
        self._bound.pop(b, None)
        if not seg.present:
            return
        if seg.phase != "rest":
            bnd = self._predict_boundary(b, seg, t)
            if bnd is not None:
                self._bound[b] = bnd
        for o in self._ids:
            if o == b:
                continue
            so = self._seg[o]
            if not so.present or (seg.phase == "rest" and so.phase == "rest"):
                continue
            tc = self._predict_pair(seg, so, t)
            if tc < math.inf:
                self._pairs[(b, o)] = tc

    def _predict_pair(self, s1: _Seg, s2: _Seg, t: float) -> float:
        """Earliest time the two centres close to 2R apart (quartic in time), or inf."""
        R2 = 2 * self._R
        b1, b2 = s1.bbox, s2.bbox
        if (b1[0] - R2 > b2[1] or b2[0] - R2 > b1[1] or b1[2] - R2 > b2[3]
                or b2[2] - R2 > b1[3]):
            return math.inf
        h = min(s1.t_trans, s2.t_trans) - t
        if h <= 0:
            h = 0.0
        r1, v1, _ = s1.state(t)
        r2, v2, _ = s2.state(t)
        C = (r2[0] - r1[0], r2[1] - r1[1])
        B = (v2[0] - v1[0], v2[1] - v1[1])
        A = (0.5 * (s2.a[0] - s1.a[0]), 0.5 * (s2.a[1] - s1.a[1]))
        coeffs = (
            A[0] * A[0] + A[1] * A[1],
            2 * (A[0] * B[0] + A[1] * B[1]),
            B[0] * B[0] + B[1] * B[1] + 2 * (A[0] * C[0] + A[1] * C[1]),
            2 * (B[0] * C[0] + B[1] * C[1]),
            C[0] * C[0] + C[1] * C[1] - R2 * R2,
        )

        def f(tau):
            x = C[0] + tau * (B[0] + tau * A[0])
            y = C[1] + tau * (B[1] + tau * A[1])
            return x * x + y * y - R2 * R2

        tau = _first_contact(coeffs, f, h, R2)
        return t + tau if tau < math.inf else math.inf

    def _predict_boundary(self, b: str, seg: _Seg, t: float):
        """Earliest cushion, jaw or pocket event of a moving ball before its phase ends."""
        h = seg.t_trans - t
        r, v, _ = seg.state(t)
        a = seg.a
        best = (math.inf, None, None)
        near_pocket = False
        for rail, n, c, k, spans in self._lines:
            c2 = 0.5 * (n[0] * a[0] + n[1] * a[1])
            c1 = n[0] * v[0] + n[1] * v[1]
            c0 = n[0] * r[0] + n[1] * r[1] - c
            if c0 < 0:
                near_pocket = True  # already beyond this reversal line: in a pocket's mouth
            for tau in _quad_down_crossings(c2, c1, c0, h):
                if tau >= best[0]:
                    break
                along = r[k] + v[k] * tau + 0.5 * a[k] * tau * tau
                if any(lo <= along <= hi for lo, hi in spans):
                    best = (tau, "cushion", (rail, n, c, k))
                    break
                near_pocket = True
        for name, ja, tang, length, m in self._mouths:
            c2 = -0.5 * (m[0] * a[0] + m[1] * a[1])
            c1 = -(m[0] * v[0] + m[1] * v[1])
            c0 = -(m[0] * (r[0] - ja[0]) + m[1] * (r[1] - ja[1]))
            for tau in _quad_down_crossings(c2, c1, c0, h):
                if tau >= best[0]:
                    break
                px = r[0] + v[0] * tau + 0.5 * a[0] * tau * tau - ja[0]
                py = r[1] + v[1] * tau + 0.5 * a[1] * tau * tau - ja[1]
                if 0.0 <= px * tang[0] + py * tang[1] <= length:
                    best = (tau, "pocket", name)
                    break
        if near_pocket:
            # A jaw tip is reached only from beyond a reversal line outside every cushion span.
            d2 = self._d ** 2
            for jaw, rail, pname in self._jaws:
                C = (r[0] - jaw[0], r[1] - jaw[1])
                B, A = v, (0.5 * a[0], 0.5 * a[1])
                coeffs = (
                    A[0] * A[0] + A[1] * A[1],
                    2 * (A[0] * B[0] + A[1] * B[1]),
                    B[0] * B[0] + B[1] * B[1] + 2 * (A[0] * C[0] + A[1] * C[1]),
                    2 * (B[0] * C[0] + B[1] * C[1]),
                    C[0] * C[0] + C[1] * C[1] - d2,
                )

                def f(tau, C=C, B=B, A=A):
                    x = C[0] + tau * (B[0] + tau * A[0])
                    y = C[1] + tau * (B[1] + tau * A[1])
                    return x * x + y * y - d2

                tau = _first_contact(coeffs, f, min(h, best[0]), self._d)
                if tau < best[0]:
                    best = (tau, "jaw", (jaw, rail, pname))
        if best[1] is None:
            return None
        return (t + best[0], best[1], best[2])


class Trajectory:
    """The outcome of a simulation: closed-form motion pieces of every ball and the events.

    ``ball_ids`` (B,) gives the ball order of all arrays (every ball that was ever on the table, in
    order of first appearance); ``events`` are time-ordered; ``t_end`` is the simulation clock when
    the trajectory was taken. States after ``t_end`` are held at their value at ``t_end``.
    """

    def __init__(self, ball_ids, events, t_end, segments, radius_mm, t_start):
        self.ball_ids: tuple[str, ...] = tuple(ball_ids)
        self.events: tuple[SimEvent, ...] = tuple(events)
        self.t_end: float = float(t_end)
        self.t_start: float = float(t_start)
        self.radius_mm = float(radius_mm)
        self._arr = []
        for b in self.ball_ids:
            segs = segments[b]
            self._arr.append({
                "t0": np.array([s.t0 for s in segs]),
                "present": np.array([s.present for s in segs]),
                "r": np.array([s.r for s in segs]),
                "v": np.array([s.v for s in segs]),
                "w": np.array([s.w for s in segs]),
                "a": np.array([s.a for s in segs]),
                "al": np.array([s.al for s in segs]),
            })

    def _pieces(self, k: int, times: np.ndarray):
        arr = self._arr[k]
        idx = np.searchsorted(arr["t0"], times, side="right") - 1
        ok = idx >= 0
        idx = np.clip(idx, 0, None)
        present = ok & arr["present"][idx]
        tau = (times - arr["t0"][idx])[:, None]
        return arr, idx, present, tau

    def sample(self, times) -> Samples:
        """States at ``times`` (T,) sorted seconds; see ``Samples`` for shapes."""
        times = np.asarray(times, dtype=float).reshape(-1)
        if times.size and np.any(np.diff(times) < 0):
            raise ValueError("sample times must be sorted in increasing order; sort them first")
        tc = np.minimum(times, self.t_end)
        T, B = times.size, len(self.ball_ids)
        pos = np.full((T, B, 2), np.nan)
        vel = np.full((T, B, 2), np.nan)
        omega = np.full((T, B, 3), np.nan)
        present = np.zeros((T, B), dtype=bool)
        for k in range(B):
            arr, idx, pr, tau = self._pieces(k, tc)
            with np.errstate(invalid="ignore"):
                p = arr["r"][idx] + arr["v"][idx] * tau + 0.5 * arr["a"][idx] * tau**2
                v = arr["v"][idx] + arr["a"][idx] * tau
                w = arr["w"][idx] + arr["al"][idx] * tau
            pos[pr, k] = p[pr]
            vel[pr, k] = v[pr]
            omega[pr, k] = w[pr]
            present[:, k] = pr
        return Samples(pos, vel, omega, present, times.copy(), self.ball_ids)

    def rotations(self, times, start: tuple[float, np.ndarray] | None = None) -> np.ndarray:
        """Body-to-table rotation matrices (T, B, 3, 3) at sorted ``times`` (T,) s.

        ``start`` = (t0, (B, 3, 3) rotations at t0) continues an earlier integration from t0
        instead of from the start of the simulation, so a clip can be sampled chunk by chunk in
        linear time; ``times`` must then all be at or after t0.

        Identity at the start of the simulation (and before a ball first appears); integrated from
        the table-frame angular velocity, which is linear in time within each motion piece, by
        sub-steps of at most 1 ms using the second-order Magnus expansion
        ``Omega = int w dt - (dt^3 / 12) w0 x alpha`` (exact for linear w up to O(dt^4)) and
        Rodrigues' formula. A removed or pocketed ball keeps its last orientation; after ``t_end``
        orientations are held.
        """
        times = np.asarray(times, dtype=float).reshape(-1)
        if times.size and np.any(np.diff(times) < 0):
            raise ValueError("rotation times must be sorted in increasing order; sort them first")
        B = len(self.ball_ids)
        t_from, cur0 = self.t_start, np.broadcast_to(np.eye(3), (B, 3, 3))
        if start is not None:
            t_from, cur0 = max(float(start[0]), self.t_start), np.asarray(start[1], dtype=float)
            if cur0.shape != (B, 3, 3):
                raise ValueError(f"start rotations must have shape ({B}, 3, 3), got {cur0.shape}")
            if times.size and times[0] < float(start[0]) - 1e-12:
                raise ValueError("rotation times must not precede the start time")
        out = np.empty((times.size, B, 3, 3))
        out[:] = cur0
        if times.size == 0 or B == 0:
            return out
        t_stop = min(float(times[-1]), self.t_end)
        if t_stop <= t_from:
            return out
        knots = [t_from, t_stop]
        for arr in self._arr:
            knots.extend(arr["t0"].tolist())
        knots.extend(times.tolist())
        knots = np.unique(np.clip(np.asarray(knots), t_from, t_stop))
        steps = []
        for a, b in zip(knots[:-1], knots[1:]):
            m = max(1, int(math.ceil((b - a) / _ROT_STEP_S - 1e-9)))
            steps.append(a + (b - a) * np.arange(m) / m)
        starts = np.concatenate(steps)
        ends = np.append(starts[1:], t_stop)
        dt = (ends - starts)[:, None]
        S = starts.size
        Om = np.zeros((S, B, 3))
        for k in range(B):
            arr, idx, pr, tau = self._pieces(k, starts)
            w0 = arr["w"][idx] + arr["al"][idx] * tau
            al = arr["al"][idx]
            om = w0 * dt + 0.5 * al * dt**2 - (dt**3 / 12.0) * np.cross(w0, al)
            om[~pr] = 0.0
            Om[:, k] = om
        D = _rodrigues(Om)
        # Sample k is reached after the steps whose end is <= its time.
        n_done = np.searchsorted(ends, np.minimum(times, t_stop), side="right")
        n_done[times <= t_from] = 0
        cur = np.array(cur0, dtype=float)
        q = 0
        while q < times.size and n_done[q] == 0:
            q += 1
        for s in range(S):
            cur = D[s] @ cur
            while q < times.size and n_done[q] == s + 1:
                out[q] = cur
                q += 1
        return out


# --- small helpers ----------------------------------------------------------------------------
def _close(p, q, tol=1e-9) -> bool:
    return abs(p[0] - q[0]) < tol and abs(p[1] - q[1]) < tol


def _cross(a, b):
    return (a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0])


def _add(a, b):
    return (a[0] + b[0], a[1] + b[1], a[2] + b[2])


def _rodrigues(om: np.ndarray) -> np.ndarray:
    """Rotation matrices (..., 3, 3) for rotation vectors ``om`` (..., 3), rad."""
    theta = np.linalg.norm(om, axis=-1)[..., None, None]
    K = np.zeros(om.shape[:-1] + (3, 3))
    K[..., 0, 1], K[..., 0, 2] = -om[..., 2], om[..., 1]
    K[..., 1, 0], K[..., 1, 2] = om[..., 2], -om[..., 0]
    K[..., 2, 0], K[..., 2, 1] = -om[..., 1], om[..., 0]
    small = theta < 1e-6
    safe = np.where(small, 1.0, theta)
    a = np.where(small, 1.0 - theta**2 / 6.0, np.sin(safe) / safe)
    b = np.where(small, 0.5 - theta**2 / 24.0, (1.0 - np.cos(safe)) / safe**2)
    return np.eye(3) + a * K + b * (K @ K)


def _path_bbox(seg: _Seg, t0: float, t1: float):
    """Axis-aligned box (xmin, xmax, ymin, ymax) mm of the centre's path over [t0, t1]."""
    r, v, a = seg.r, seg.v, seg.a
    h = t1 - t0
    out = []
    for k in range(2):
        cand = [r[k], r[k] + v[k] * h + 0.5 * a[k] * h * h]
        if a[k] != 0.0:
            tv = -v[k] / a[k]
            if 0.0 < tv < h:
                cand.append(r[k] + v[k] * tv + 0.5 * a[k] * tv * tv)
        out.extend((min(cand), max(cand)))
    return tuple(out)


def _quad_down_crossings(c2: float, c1: float, c0: float, h: float) -> list[float]:
    """Times tau in [0, h] where s = c2 tau^2 + c1 tau + c0 falls through zero, ascending.

    A function already at or below zero and still falling at tau = 0 counts as crossing now.
    """
    out = []
    if c0 <= 0.0:
        if c1 < -_APPROACH_EPS:
            out.append(0.0)
    if c2 == 0.0:
        if c1 < 0.0 and c0 > 0.0:
            tau = -c0 / c1
            if tau <= h:
                out.append(tau)
        return out
    disc = c1 * c1 - 4.0 * c2 * c0
    if disc < 0.0:
        return out
    sq = math.sqrt(disc)
    q = -0.5 * (c1 + math.copysign(sq, c1))
    roots = []
    if q != 0.0:
        roots.extend((q / c2, c0 / q))
    else:
        roots.append(0.0)
    for tau in sorted(roots):
        if 0.0 < tau <= h and 2.0 * c2 * tau + c1 < 0.0:
            out.append(tau)
    return out


def _first_contact(coeffs, f, h: float, scale: float) -> float:
    """Earliest tau in [0, h] at which a contact p(tau) = |gap vector|^2 - scale^2 must be resolved.

    ``coeffs`` are the quartic's coefficients (highest power first) and ``f`` evaluates it
    directly (better conditioned); ``scale`` is the contact distance (2R for two balls, the
    reversal offset for a jaw tip). Returns inf when there is none before ``h``.

    * Apart now: the first time p falls through zero (the impact).
    * Touching and closing at ``_V_TC`` or more, or overlapping by ``_DEPTH_MM`` and closing: now.
    * Otherwise (just parted, or resting contact pressed together by friction): the earliest of
      touching again after parting by more than ``_TOUCH_MM``, closing at ``_V_TC`` while in
      contact, or the overlap deepening past ``_DEPTH_MM``; the impact then parts them (see
      ``Simulator._do_collision``). This bounds the
      overlap of pressed balls to about ``_V_TC**2 / (2 a)`` and ``_DEPTH_MM``: nanometres.
    """
    if not h > 0.0:
        return math.inf
    tol = 2.0 * scale * _TOUCH_MM
    f0 = f(0.0)
    d0 = coeffs[-2]
    closing = -d0 / (2.0 * scale)
    if f0 > tol:
        return _scan(coeffs, f, h, f0)
    deep = -2.0 * scale * _DEPTH_MM
    if closing >= _V_TC or (f0 <= deep and closing > _APPROACH_EPS):
        return 0.0
    best = _scan(coeffs, lambda tau: f(tau) - tol, h, f0 - tol)
    deg = len(coeffs) - 1
    dc = [coeffs[i] * (deg - i) for i in range(deg)]
    dc[-1] += 2.0 * scale * _V_TC
    t1 = _scan(dc, lambda tau: _horner(dc, tau), h, dc[-1])
    if t1 < best and f(t1) <= tol:
        best = t1
    level = min(f0, deep) - tol
    t2 = _scan(coeffs, lambda tau: f(tau) - level, h, f0 - level)
    return min(best, t2)


def _horner(coeffs, x: float) -> float:
    acc = 0.0
    for c in coeffs:
        acc = acc * x + c
    return acc


def _scan(coeffs, f, h: float, f0: float) -> float:
    """First tau in (0, h] where f goes from > 0 to <= 0; f is a polynomial with these coefficients
    (up to a constant). The interval is cut at the real roots of the derivative, so each piece is
    monotone and a crossing in it is bracketed and refined by Brent's method to 1e-13 s."""
    deg = len(coeffs) - 1
    der = [coeffs[i] * (deg - i) for i in range(deg)]
    while der and der[0] == 0.0:
        der.pop(0)
    crit = []
    if len(der) == 2:
        crit = [-der[1] / der[0]]
    elif len(der) > 2:
        crit = [z.real for z in np.roots(der) if abs(z.imag) <= 1e-9 * (1.0 + abs(z))]
    pts = [0.0] + sorted(c for c in crit if 0.0 < c < h) + [h]
    fa = f0
    for a, b in zip(pts[:-1], pts[1:]):
        fb = f(b)
        if fa > 0.0 and fb <= 0.0:
            if fb == 0.0:
                return b
            return brentq(f, a, b, xtol=1e-13, rtol=4 * np.finfo(float).eps)
        fa = fb
    return math.inf
