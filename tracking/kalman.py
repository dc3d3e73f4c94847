"""Kalman model of one ball on the cloth, and the Rauch-Tung-Striebel smoother.

State and frames
----------------
The state is ``[x, vx, y, vy]`` in the table frame of ``vision.table`` (mm and mm/s; the order
``filterpy.common.Q_discrete_white_noise(..., order_by_dim=True)`` uses for two dimensions). The
measurement is the detected ball centre ``[x, y]`` in mm.

Motion model
------------
Constant velocity with piecewise-constant white acceleration (Bar-Shalom, Li & Kirubarajan 2001,
"Estimation with Applications to Tracking and Navigation", sec. 6.3.3; filterpy's
``Q_discrete_white_noise``): between frames a ball does not move at constant velocity, the cloth
decelerates it. A sliding ball decelerates at ``mu_s g`` and a rolling one at ``mu_r g``, so the
acceleration noise is set to the larger one, ``mu_s g`` = 0.2 * 9810 = 1962 mm/s^2 with the typical
sliding friction 0.2 (Alciatore 2004, typical range 0.15 to 0.4 [secondary]; Mathavan, Jackson &
Parkin 2009 measured decelerations 1.75 to 2.40 m/s^2). Sudden velocity jumps (cue strikes,
cushions, collisions) are not acceleration noise: the tracker handles them separately.
"""

from __future__ import annotations

import math

import numpy as np
from filterpy.common import Q_discrete_white_noise
from filterpy.kalman import KalmanFilter

# Standard gravity in mm/s^2.
G_MM_S2 = 9810.0
# Typical ball-cloth sliding friction (Alciatore 2004 [secondary]; Mathavan et al. 2009 0.18-0.25).
MU_SLIDE = 0.2
# Acceleration noise default: the sliding deceleration mu_s g (mm/s^2).
SLIDING_DECEL_MM_S2 = MU_SLIDE * G_MM_S2
# Prior spread of a new ball's velocity (mm/s): it may already be moving when first seen. A firm
# shot leaves the tip at 3 to 5 m/s (common practice); 1.5 m/s covers most balls seen mid-roll
# and is quickly forgotten once two frames are in.
INITIAL_SPEED_SIGMA_MM_S = 1500.0

# Measurement matrix: the detector sees positions only; z = H s with s = [x, vx, y, vy].
_H = np.array([[1.0, 0.0, 0.0, 0.0], [0.0, 0.0, 1.0, 0.0]])


def _check_positive(name: str, value: float, unit: str, fix: str) -> float:
    value = float(value)
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"{name} = {value!r} {unit} must be a positive finite number; {fix}")
    return value


def motion_model(dt_s: float, accel_sigma_mm_s2: float) -> tuple[np.ndarray, np.ndarray]:
    """Transition ``F`` and process noise ``Q`` (both (4, 4), state ``[x, vx, y, vy]``) over dt_s.

    Per axis ``F = [[1, dt], [0, 1]]`` (x' = x + v dt, v' = v) and ``Q = sigma_a^2 [[dt^4/4,
    dt^3/2], [dt^3/2, dt^2]]``, the piecewise-constant white-acceleration model (Bar-Shalom et al.
    2001 sec. 6.3.3), built by filterpy's ``Q_discrete_white_noise``. ``dt_s`` may be 0 (F = I,
    Q = 0), for a second detection at the same instant.
    """
    dt = float(dt_s)
    if not (math.isfinite(dt) and dt >= 0):
        raise ValueError(f"frame interval {dt_s!r} s must be finite and >= 0; sort frames by time")
    _check_positive("accel_sigma_mm_s2", accel_sigma_mm_s2, "mm/s^2",
                    "use the cloth's sliding deceleration mu_s g, about 1962 mm/s^2")
    f1 = np.array([[1.0, dt], [0.0, 1.0]])
    F = np.kron(np.eye(2), f1)  # block-diagonal: x and y move independently
    if dt == 0.0:
        return F, np.zeros((4, 4))
    Q = Q_discrete_white_noise(dim=2, dt=dt, var=float(accel_sigma_mm_s2) ** 2, block_size=2)
    return F, Q


def make_ball_filter(
    dt_s: float,
    meas_sigma_mm: float,
    accel_sigma_mm_s2: float = SLIDING_DECEL_MM_S2,
    xy0_mm: tuple[float, float] = (0.0, 0.0),
    vel0_mm_s: tuple[float, float] = (0.0, 0.0),
    speed_sigma_mm_s: float = INITIAL_SPEED_SIGMA_MM_S,
) -> KalmanFilter:
    """A filterpy ``KalmanFilter`` for one ball, built from physical parameters.

    Parameters
    ----------
    dt_s : nominal frame interval, s (1/fps); the tracker passes the true interval of each step
        to ``predict(F=..., Q=...)`` via ``motion_model`` for variable-frame-rate clips.
    meas_sigma_mm : standard deviation of a detected centre, mm, per axis (``R = sigma^2 I``).
    accel_sigma_mm_s2 : white-acceleration noise, mm/s^2 (default ``mu_s g`` = 1962 mm/s^2).
    xy0_mm, vel0_mm_s : initial position (mm) and velocity (mm/s).
    speed_sigma_mm_s : prior standard deviation of each velocity component, mm/s.

    State ``x`` is (4, 1) ``[x, vx, y, vy]``; ``P`` starts as ``diag(sigma_m^2, sigma_v^2,
    sigma_m^2, sigma_v^2)`` (the first position is one detection; its velocity is unknown).
    """
    sigma_m = _check_positive("meas_sigma_mm", meas_sigma_mm, "mm",
                              "give the detector's position noise, about 1 to 3 mm")
    sigma_v = _check_positive("speed_sigma_mm_s", speed_sigma_mm_s, "mm/s",
                              "give a prior speed spread such as 1500 mm/s")
    dt = _check_positive("dt_s", dt_s, "s", "give the frame interval 1/fps, e.g. 1/60")
    kf = KalmanFilter(dim_x=4, dim_z=2)
    kf.F, kf.Q = motion_model(dt, accel_sigma_mm_s2)
    kf.H = _H.copy()
    kf.R = sigma_m**2 * np.eye(2)
    kf.x = np.array([[xy0_mm[0]], [vel0_mm_s[0]], [xy0_mm[1]], [vel0_mm_s[1]]], dtype=float)
    kf.P = np.diag([sigma_m**2, sigma_v**2, sigma_m**2, sigma_v**2])
    return kf


def rts_smooth(
    xs: np.ndarray, Ps: np.ndarray, Fs: np.ndarray, Qs: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Rauch-Tung-Striebel fixed-interval smoother (Rauch, Tung & Striebel 1965).

    Parameters
    ----------
    xs : (N, n) filtered (posterior) means, one row per step.
    Ps : (N, n, n) filtered covariances.
    Fs : (N, n, n) transitions; ``Fs[k]`` carries step ``k`` to step ``k + 1`` (filterpy's
        ``rts_smoother`` convention; the last one is unused).
    Qs : (N, n, n) process noise added over the same interval as ``Fs[k]``.

    Returns ``(xs_smoothed (N, n), Ps_smoothed (N, n, n))``; the inputs are not modified. Same
    recursion as filterpy's ``KalmanFilter.rts_smoother``; the tests hold the two equal.
    """
    xs = np.asarray(xs, dtype=float)
    Ps = np.asarray(Ps, dtype=float)
    Fs = np.asarray(Fs, dtype=float)
    Qs = np.asarray(Qs, dtype=float)
    n = xs.shape[0]
    if xs.ndim != 2 or Ps.shape != (n, xs.shape[1], xs.shape[1]) or Fs.shape != Ps.shape \
            or Qs.shape != Ps.shape:
        raise ValueError(
            f"rts_smooth needs xs (N, n) and Ps, Fs, Qs (N, n, n); got {xs.shape}, {Ps.shape}, "
            f"{Fs.shape}, {Qs.shape}"
        )
    x, P = xs.copy(), Ps.copy()
    for k in range(n - 2, -1, -1):
        Pp = Fs[k] @ P[k] @ Fs[k].T + Qs[k]  # P_{k+1|k} = F P_{k|k} F^T + Q
        C = P[k] @ Fs[k].T @ np.linalg.inv(Pp)  # smoother gain C_k = P_{k|k} F^T P_{k+1|k}^-1
        x[k] = x[k] + C @ (x[k + 1] - Fs[k] @ x[k])  # x_k^s = x_k + C (x_{k+1}^s - F x_k)
        P[k] = P[k] + C @ (P[k + 1] - Pp) @ C.T  # P_k^s = P_k + C (P_{k+1}^s - P_{k+1|k}) C^T
    return x, P
