"""Ball-cushion impact: the model of Mathavan, Jackson & Parkin (2010).

Reference: S. Mathavan, M. R. Jackson, R. M. Parkin, "A theoretical analysis of billiard ball
dynamics under cushion impacts", Proc. IMechE Part C 224(9):1863-1873 (2010).

Geometry (table frame of ``vision/table.py``: mm, z up). The cushion nose touches the ball at the
point I, at height ``h = table.nose_height_mm`` above the cloth, i.e. at the angle ``theta`` above
the ball's equator with ``sin(theta) = (h - R) / R``; the cloth touches it at C, straight below the
centre. Both contacts carry a normal impulse and Coulomb friction: ``mu_cushion`` at I and
``mu_slide`` (ball-cloth) at C. The cloth's normal impulse is whatever keeps the ball on the cloth,
i.e. it grows with the downward component of the impulse at I.

The impact is integrated in the normal-impulse domain (Stronge, "Impact Mechanics", 2000, as used by
Mathavan et al. 2010): the cumulative normal impulse ``P`` at I is the independent variable and the
velocities change by small impulse steps, with both slip directions re-evaluated at every step and a
contact that would reverse its slip within a step sticking instead. Compression lasts until the
normal approach speed at I reaches zero; restitution lasts until the work of the normal impulse in
restitution equals ``e**2`` times its work in compression (Stronge's energetic coefficient of
restitution). The result therefore depends on the incoming speed, angle and spin.

All impulses here are per unit mass (mm/s), since the ball's mass cancels out; the moment of inertia
of the solid ball is ``2/5 M R**2``.

The coefficient ``e`` depends on the incoming normal speed (Mathavan, Jackson & Parkin 2009,
Am. J. Phys. 77(9):788-794, measured a speed ratio that peaks near 1 m/s); ``CushionParams`` holds
it as a piecewise-linear curve, with per-rail multipliers and "dead spots" over diamond spans.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vision.table import RAILS, TableSpec

# Default restitution curve e(v_n) (knots in mm/s of incoming normal speed of the ball's centre).
# Obtained once (scipy.optimize.brentq per knot; script kept out of the package) so that this
# model's speed ratio for a perpendicular impact of a rolling ball, with mu_cushion = 0.14 and
# mu_slide = 0.2 on the default 57.15 mm ball and 63.5 % nose, equals the fit
# v_out = -0.0877 v**2 + 1.131 v - 0.0953 (m/s) of Mathavan, Jackson & Parkin 2009 (measured
# 0.28-3.5 m/s) [secondary source] exactly at each knot; between knots the agreement is within
# 0.007 over 0.3-3.5 m/s (re-checked by tests/test_cushion.py). Outside the knots e is held
# constant.
DEFAULT_E_KNOTS_MM_S: tuple[float, ...] = (280.0, 400.0, 550.0, 750.0, 1000.0, 1400.0, 2000.0,
                                           2700.0, 3500.0)
DEFAULT_E_VALUES: tuple[float, ...] = (0.766087, 0.863516, 0.922654, 0.955187, 0.96633, 0.957441,
                                         0.9209, 0.86494, 0.796821)

# Number of impulse steps for the compression phase; restitution uses the same step size.
# tests/test_cushion.py checks that the outcome changes by less than 1e-3 relative when it is
# multiplied by ten.
IMPACT_STEPS = 400
# Below this incoming normal speed (mm/s) a contact is treated as a ball settling against the
# cushion (see ``cushion_impact``): it keeps repeated ever-smaller bounces from piling up events.
SETTLE_SPEED_MM_S = 1.0


@dataclass(frozen=True)
class DeadSpot:
    """A stretch of one rail whose cushion is less lively.

    ``factor`` multiplies the restitution coefficient for contacts whose position along ``rail``
    lies in ``[from_diamond, to_diamond]`` (diamond units of ``vision/table.py``).
    """

    rail: str
    from_diamond: float
    to_diamond: float
    factor: float

    def __post_init__(self) -> None:
        if self.rail not in RAILS:
            raise ValueError(f"dead spot rail {self.rail!r} unknown; use one of {RAILS}")
        if not self.from_diamond < self.to_diamond:
            raise ValueError(
                f"dead spot span {self.from_diamond}..{self.to_diamond} diamonds is empty; "
                "give from_diamond < to_diamond"
            )
        if not (0.0 < self.factor <= 1.5):
            raise ValueError(f"dead spot factor {self.factor} must lie in (0, 1.5]")


@dataclass(frozen=True)
class CushionParams:
    """Cushion parameters of the Mathavan et al. (2010) impact model.

    ``e_knots_mm_s`` (increasing, mm/s) and ``e_values`` define the restitution coefficient as a
    piecewise-linear function of the incoming normal speed of the ball's centre, held constant
    outside the knots. ``mu_cushion`` is the ball-cushion sliding friction (0.14 in Mathavan et al.
    2010). ``rail_factor`` is a tuple of ``(rail, multiplier)`` pairs on e; ``dead_spots`` multiply
    e over diamond spans. The final e is clipped to ``[0, 1]``.
    """

    e_knots_mm_s: tuple[float, ...] = DEFAULT_E_KNOTS_MM_S
    e_values: tuple[float, ...] = DEFAULT_E_VALUES
    mu_cushion: float = 0.14
    rail_factor: tuple[tuple[str, float], ...] = ()
    dead_spots: tuple[DeadSpot, ...] = ()

    def __post_init__(self) -> None:
        knots = np.asarray(self.e_knots_mm_s, dtype=float)
        values = np.asarray(self.e_values, dtype=float)
        if knots.ndim != 1 or knots.size == 0 or knots.shape != values.shape:
            raise ValueError(
                f"e_knots_mm_s ({knots.size}) and e_values ({values.size}) must be non-empty and "
                "of equal length"
            )
        if np.any(np.diff(knots) <= 0) or not np.all(np.isfinite(knots)):
            raise ValueError(f"e_knots_mm_s {self.e_knots_mm_s} must be finite and increasing")
        if np.any(values < 0) or np.any(values > 1) or not np.all(np.isfinite(values)):
            raise ValueError(f"e_values {self.e_values} must lie in [0, 1]")
        if not (math.isfinite(self.mu_cushion) and self.mu_cushion >= 0):
            raise ValueError(f"mu_cushion {self.mu_cushion} must be a non-negative number")
        for item in self.rail_factor:
            if len(item) != 2 or item[0] not in RAILS or not (0 < float(item[1]) <= 1.5):
                raise ValueError(
                    f"rail_factor entry {item!r} must be (rail, multiplier) with rail in {RAILS} "
                    "and multiplier in (0, 1.5]"
                )
        for spot in self.dead_spots:
            if not isinstance(spot, DeadSpot):
                raise ValueError(f"dead_spots entry {spot!r} must be a DeadSpot")

    def restitution(
        self, normal_speed_mm_s: float, rail: str | None = None, diamond: float | None = None
    ) -> float:
        """Restitution coefficient for an impact with this incoming normal speed (mm/s).

        ``rail`` applies that rail's multiplier; ``rail`` with ``diamond`` (position along the rail
        in diamonds) also applies any dead spot covering it. Clipped to ``[0, 1]``.
        """
        v = abs(float(normal_speed_mm_s))
        e = float(np.interp(v, self.e_knots_mm_s, self.e_values))
        if rail is not None:
            for name, factor in self.rail_factor:
                if name == rail:
                    e *= float(factor)
            if diamond is not None:
                for spot in self.dead_spots:
                    if spot.rail == rail and spot.from_diamond <= diamond <= spot.to_diamond:
                        e *= spot.factor
        return min(max(e, 0.0), 1.0)


def cushion_impact(
    vel_mm_s,
    omega_rad_s,
    normal,
    table: TableSpec,
    e: float,
    mu_cushion: float,
    mu_slide: float,
    steps: int = IMPACT_STEPS,
) -> tuple[np.ndarray, np.ndarray]:
    """Outgoing velocity and spin of a ball hitting a cushion (Mathavan et al. 2010).

    Parameters
    ----------
    vel_mm_s : (2,) incoming centre velocity (vx, vy), mm/s, table frame.
    omega_rad_s : (3,) incoming angular velocity (wx, wy, wz), rad/s, table frame.
    normal : (2,) unit normal of the cushion pointing into the playing area (for a jaw: from the
        jaw tip towards the ball's centre).
    table : gives the ball radius R and the nose height h (contact angle theta).
    e : Stronge's energetic coefficient of restitution, in [0, 1].
    mu_cushion, mu_slide : friction at the cushion contact I and at the cloth contact C.
    steps : impulse steps over the compression phase (accuracy control).

    Returns ``(vel_out (2,), omega_out (3,))`` in the same units and frame. A ball not moving into
    the cushion is returned unchanged. The ball is held on the cloth: when friction at I would lift
    it, the cloth impulse is zero and the vertical velocity is dropped (no hop is modelled).

    Below ``SETTLE_SPEED_MM_S`` of incoming normal speed the ball is taken to settle against the
    cushion instead of bouncing: its normal velocity and the spin component that would drive it
    back into the cushion are removed (an energy loss; it prevents an endless run of tiny bounces).
    """
    v2 = np.asarray(vel_mm_s, dtype=float).reshape(2)
    w3 = np.asarray(omega_rad_s, dtype=float).reshape(3)
    n2 = np.asarray(normal, dtype=float).reshape(2)
    nn = math.hypot(n2[0], n2[1])
    if not abs(nn - 1.0) < 1e-6:
        raise ValueError(f"cushion normal {n2.tolist()} must be a unit vector; divide by its norm")
    if not (0.0 <= e <= 1.0):
        raise ValueError(f"restitution e = {e} must lie in [0, 1]")
    if mu_cushion < 0 or mu_slide < 0:
        raise ValueError(f"friction coefficients must be >= 0, got {mu_cushion}, {mu_slide}")
    nx, ny = n2 / nn
    # Local frame: x along the inward normal, y = z x n along the cushion, z up (right-handed).
    tx, ty = -ny, nx
    vx = v2[0] * nx + v2[1] * ny
    vy = v2[0] * tx + v2[1] * ty
    wx = w3[0] * nx + w3[1] * ny
    wy = w3[0] * tx + w3[1] * ty
    wz = float(w3[2])
    if not vx < 0.0:
        return v2.copy(), w3.copy()
    if -vx < SETTLE_SPEED_MM_S:
        vx, wy = 0.0, 0.0
    else:
        vx, vy, wx, wy, wz = _integrate_impact(
            vx, vy, wx, wy, wz, table.radius_mm, table.contact_angle_rad, e, mu_cushion,
            mu_slide, steps,
        )
    vel = np.array([vx * nx + vy * tx, vx * ny + vy * ty])
    omega = np.array([wx * nx + wy * tx, wx * ny + wy * ty, wz])
    return vel, omega


def _integrate_impact(vx, vy, wx, wy, wz, R, theta, e, mu_i, mu_c, steps):
    """Impulse-domain integration in the local frame (x inward normal, y along cushion, z up).

    Contact I at r_I = (-R cos(theta), 0, R sin(theta)); its normal n_I = (cos, 0, -sin) points from
    the cushion into the ball; tangent basis t1 = (0, 1, 0), t2 = (sin, 0, cos). Contact C at
    r_C = (0, 0, -R). For a tangential impulse J at either contact the contact point's velocity
    changes by (1 + R^2 / k) J = 3.5 J with k = 2/5 R^2, which gives the impulse that just stops a
    slip (stick).
    """
    s, c = math.sin(theta), math.cos(theta)
    K = 2.5 / R  # spin change per unit tangential impulse: R / k
    v_in0 = c * vx  # normal speed of the contact point I along n_I, negative while approaching
    h = -v_in0 / steps

    def step(state, dp):
        vx, vy, wx, wy, wz = state
        # Slip of I in its tangent plane: v_I = v + w x r_I.
        s1 = vy - R * (c * wz + s * wx)
        s2 = s * vx + R * wy
        sn = math.hypot(s1, s2)
        lim = mu_i * dp
        if sn <= 3.5 * lim:
            b1, b2 = -s1 / 3.5, -s2 / 3.5
        else:
            b1, b2 = -lim * s1 / sn, -lim * s2 / sn
        # Impulse at I: dp n_I + b1 t1 + b2 t2; torque r_I x J = R (-s b1, b2, -c b1).
        vx += dp * c + b2 * s
        vy += b1
        wx -= K * s * b1
        wy += K * b2
        wz -= K * c * b1
        # The cloth pushes up as much as the impulse at I pushes down (z component -dp s + b2 c).
        pc = max(0.0, dp * s - b2 * c)
        # Slip of C: v_C = v + w x r_C = (vx - R wy, vy + R wx, 0).
        u1 = vx - R * wy
        u2 = vy + R * wx
        un = math.hypot(u1, u2)
        lim = mu_c * pc
        if un <= 3.5 * lim:
            f1, f2 = -u1 / 3.5, -u2 / 3.5
        else:
            f1, f2 = -lim * u1 / un, -lim * u2 / un
        # Torque r_C x (f1, f2, pc) = R (f2, -f1, 0).
        vx += f1
        vy += f2
        wx += K * f2
        wy -= K * f1
        return (vx, vy, wx, wy, wz)

    state = (vx, vy, wx, wy, wz)
    # Compression: until the normal velocity of I, c * vx, reaches zero. Work W_c = -int v_n dP.
    work_c = 0.0
    for _ in range(100 * steps):
        vn0 = c * state[0]
        nxt = step(state, h)
        vn1 = c * nxt[0]
        if vn1 >= 0.0:
            # v_n is linear in P within a step at fixed slip directions: land exactly on v_n = 0.
            dp = h * (-vn0) / (vn1 - vn0)
            nxt = step(state, dp)
            work_c += -0.5 * vn0 * dp
            state = nxt
            break
        work_c += -0.5 * (vn0 + vn1) * h
        state = nxt
    else:  # pragma: no cover - friction cannot stop compression; guard against a logic error
        raise RuntimeError("cushion impact: compression did not end")
    # Restitution: until W_r = int v_n dP equals e^2 W_c (Stronge's energetic coefficient).
    target = e * e * work_c
    work_r = 0.0
    if target <= 0.0:
        return state
    for _ in range(100 * steps):
        vn0 = c * state[0]
        nxt = step(state, h)
        vn1 = c * nxt[0]
        dw = 0.5 * (vn0 + vn1) * h
        if work_r + dw >= target:
            # W(dp) = vn0 dp + (vn1 - vn0) dp^2 / (2 h): solve W(dp) = remaining for dp in (0, h].
            rem = target - work_r
            a = 0.5 * (vn1 - vn0) / h
            if abs(a) * h < 1e-12 * max(abs(vn0), 1e-300):
                dp = rem / vn0
            else:
                disc = max(vn0 * vn0 + 4.0 * a * rem, 0.0)
                dp = 2.0 * rem / (vn0 + math.sqrt(disc))
            return step(state, min(max(dp, 0.0), h))
        work_r += dw
        state = nxt
    raise RuntimeError(  # pragma: no cover
        "cushion impact: restitution did not end; the normal velocity stopped growing"
    )
