"""The ball filter factory and the RTS smoother, checked against filterpy (the reference)."""

from __future__ import annotations

import numpy as np
import pytest
from filterpy.common import Q_discrete_white_noise
from filterpy.kalman import KalmanFilter, rts_smoother

from tracking.kalman import SLIDING_DECEL_MM_S2, make_ball_filter, motion_model, rts_smooth


@pytest.mark.parametrize("fps", [30.0, 60.0, 120.0])
def test_factory_matrices_follow_physical_parameters(fps):
    dt, sigma_m, sigma_a = 1.0 / fps, 1.5, SLIDING_DECEL_MM_S2
    kf = make_ball_filter(dt, sigma_m, sigma_a)
    # State order [x, vx, y, vy]: one step of constant velocity moves x by vx dt, y by vy dt.
    s = np.array([100.0, 600.0, 200.0, -300.0])
    np.testing.assert_allclose(kf.F @ s, [100 + 600 * dt, 600, 200 - 300 * dt, -300], rtol=1e-15)
    np.testing.assert_array_equal(kf.H, [[1, 0, 0, 0], [0, 0, 1, 0]])
    np.testing.assert_allclose(kf.R, sigma_m**2 * np.eye(2), rtol=1e-15)
    # Reference: filterpy's Q_discrete_white_noise (piecewise white acceleration).
    ref = Q_discrete_white_noise(dim=2, dt=dt, var=sigma_a**2, block_size=2)
    np.testing.assert_allclose(kf.Q, ref, rtol=1e-14, atol=0)
    # Analytic entries (Bar-Shalom, Li & Kirubarajan 2001, sec. 6.3.3): var of a velocity step is
    # sigma_a^2 dt^2, of a position step sigma_a^2 dt^4 / 4, and x and y are uncorrelated.
    assert kf.Q[1, 1] == pytest.approx(sigma_a**2 * dt**2, rel=1e-14)
    assert kf.Q[0, 0] == pytest.approx(sigma_a**2 * dt**4 / 4, rel=1e-14)
    assert np.all(kf.Q[:2, 2:] == 0)
    # mu_s g with mu_s = 0.2 and g = 9810 mm/s^2 (Alciatore 2004 typical sliding friction).
    assert SLIDING_DECEL_MM_S2 == pytest.approx(1962.0)


def test_motion_model_zero_interval_is_identity():
    F, Q = motion_model(0.0, 1000.0)
    np.testing.assert_array_equal(F, np.eye(4))
    np.testing.assert_array_equal(Q, np.zeros((4, 4)))


@pytest.mark.parametrize("kwargs, word", [
    (dict(dt_s=0.0, meas_sigma_mm=1.0), "dt_s"),
    (dict(dt_s=1 / 60, meas_sigma_mm=-1.0), "meas_sigma_mm"),
    (dict(dt_s=1 / 60, meas_sigma_mm=1.0, accel_sigma_mm_s2=float("nan")), "accel_sigma"),
])
def test_factory_rejects_bad_parameters(kwargs, word):
    with pytest.raises(ValueError, match=word):
        make_ball_filter(**kwargs)


def _filtered_run(rng, dts):
    """Forward filter over a decelerating path with varying frame intervals (one per step)."""
    kf = make_ball_filter(1 / 60, 2.0, SLIDING_DECEL_MM_S2, xy0_mm=(500.0, 300.0))
    t = np.concatenate([[0.0], np.cumsum(dts)])
    truth = np.stack([500 + 1200 * t - 0.5 * 900 * t**2, 300 + 400 * t], axis=1)
    zs = truth + rng.normal(0, 2.0, truth.shape)
    xs, Ps, Fs, Qs = [kf.x.reshape(4).copy()], [kf.P.copy()], [], []
    for k in range(1, len(t)):
        F, Q = motion_model(t[k] - t[k - 1], SLIDING_DECEL_MM_S2)
        kf.predict(F=F, Q=Q)
        kf.update(zs[k].reshape(2, 1))
        Fs.append(F)
        Qs.append(Q)
        xs.append(kf.x.reshape(4).copy())
        Ps.append(kf.P.copy())
    Fs.append(np.eye(4))  # filterpy convention: Fs[k] carries k -> k + 1; the last is unused
    Qs.append(np.zeros((4, 4)))
    return kf, truth, np.array(xs), np.array(Ps), np.array(Fs), np.array(Qs)


def test_rts_smooth_equals_filterpy_rts_smoother():
    rng = np.random.default_rng(7)
    dts = rng.uniform(0.012, 0.02, 80)  # variable frame rate, so every Fs[k] differs
    kf, truth, xs, Ps, Fs, Qs = _filtered_run(rng, dts)
    xs_before, Ps_before = xs.copy(), Ps.copy()
    ours_x, ours_P = rts_smooth(xs, Ps, Fs, Qs)
    # Reference 1: filterpy's module function rts_smoother (same Fs[k]: k -> k + 1 convention).
    ref_x, ref_P, _, _ = rts_smoother(xs.reshape(-1, 4, 1), Ps, Fs, Qs)
    np.testing.assert_allclose(ours_x, ref_x.reshape(-1, 4), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(ours_P, ref_P, rtol=1e-12, atol=1e-12)
    # Reference 2: filterpy's KalmanFilter.rts_smoother method, whose Fs[k] carries k - 1 -> k
    # (the batch_filter convention), so the same transitions are passed shifted by one.
    Fs_b = np.concatenate([np.eye(4)[None], Fs[:-1]])
    Qs_b = np.concatenate([np.zeros((1, 4, 4)), Qs[:-1]])
    ref_x, ref_P, _, _ = kf.rts_smoother(xs.reshape(-1, 4, 1), Ps, Fs_b, Qs_b)
    np.testing.assert_allclose(ours_x, ref_x.reshape(-1, 4), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(ours_P, ref_P, rtol=1e-12, atol=1e-12)
    # And the smoother does its job: closer to the truth than the forward filter (common
    # practice: a fixed-interval smoother uses both sides of every sample).
    err_f = np.median(np.hypot(xs[:, 0] - truth[:, 0], xs[:, 2] - truth[:, 1]))
    err_s = np.median(np.hypot(ours_x[:, 0] - truth[:, 0], ours_x[:, 2] - truth[:, 1]))
    assert err_s < 0.8 * err_f
    # Inputs unchanged (we copy, never mutate).
    assert np.array_equal(xs, xs_before) and np.array_equal(Ps, Ps_before)


def test_rts_smooth_rejects_mismatched_shapes():
    with pytest.raises(ValueError, match=r"\(N, n\)"):
        rts_smooth(np.zeros((5, 4)), np.zeros((4, 4, 4)), np.zeros((5, 4, 4)), np.zeros((5, 4, 4)))


def test_filterpy_reference_is_used_as_documented():
    # filterpy's own KalmanFilter built by hand agrees with the factory on one predict/update.
    dt = 1 / 60
    ours = make_ball_filter(dt, 1.0, 1000.0, xy0_mm=(10.0, 20.0), vel0_mm_s=(300.0, 0.0),
                            speed_sigma_mm_s=500.0)
    ref = KalmanFilter(dim_x=4, dim_z=2)
    ref.F = np.array([[1, dt, 0, 0], [0, 1, 0, 0], [0, 0, 1, dt], [0, 0, 0, 1]], dtype=float)
    ref.Q = Q_discrete_white_noise(dim=2, dt=dt, var=1000.0**2, block_size=2)
    ref.H = np.array([[1.0, 0, 0, 0], [0, 0, 1.0, 0]])
    ref.R = np.eye(2)
    ref.x = np.array([[10.0], [300.0], [20.0], [0.0]])
    ref.P = np.diag([1.0, 500.0**2, 1.0, 500.0**2])
    for kf in (ours, ref):
        kf.predict()
        kf.update(np.array([[16.0], [20.5]]))
    np.testing.assert_allclose(ours.x, ref.x, rtol=1e-13)
    np.testing.assert_allclose(ours.P, ref.P, rtol=1e-13)
