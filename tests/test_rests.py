"""A resting ball held at one place per stay at rest (``tracking.rests``), on analytic paths
(generators and their sources in ``test_tracker.py``)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.optimize import minimize

from test_tracker import D, G, TABLE, decel_path, detections, stun_roll_path
from tracking.events import find_events_and_rests
from tracking.rests import hold_rests, weighted_geometric_median
from tracking.tracker import track

FPS = 60.0


def test_weighted_geometric_median_matches_a_general_minimiser():
    """The Weiszfeld point against scipy's Nelder-Mead minimum of the same weighted sum of
    distances (scipy.optimize.minimize as the reference), on scattered points with a gross
    minority."""
    rng = np.random.default_rng(3)
    for _ in range(5):
        pts = np.vstack([rng.normal(0.0, 1.0, (12, 2)), rng.normal(9.0, 1.0, (4, 2))])
        w = rng.uniform(0.2, 2.0, len(pts))
        ours = weighted_geometric_median(pts, w)
        ref = minimize(lambda p: float(np.sum(w * np.hypot(*(pts - p).T))), pts.mean(axis=0),
                       method="Nelder-Mead", options={"xatol": 1e-7, "fatol": 1e-9}).x
        assert np.hypot(*(ours - ref)) < 1e-3


def _flipping_rest(seed: int):
    """A ball resting at (600, 400) whose detector fits it first 8 mm off (a fit on its shadow,
    stated sigma 2.5 mm), repeated for 40 frames as a carried-over fit is, then right (sigma
    1 mm) for 80 frames, then struck: a stun shot rolling to rest (Alciatore 2004 paths)."""
    t_s = 2.0 + 0.3 / FPS
    f = stun_roll_path((600.0, 400.0), 20.0, 900.0, mu_s=0.2, mu_r=0.02, t_start=t_s)
    times = np.arange(int(6.0 * FPS)) / FPS
    det = detections({"a": f}, times, np.random.default_rng(seed), noise_mm=0.3)
    early, rest = det["frame"] < 40, det["t"] < t_s
    det.loc[early, ["x", "y"]] = [608.0, 400.0]
    det.loc[rest & ~early, ["x", "y"]] = [600.3, 400.2]
    det.loc[early, "sigma_mm"] = 2.5
    det.loc[rest, "pattern"] = "cue"
    return f, times, det, t_s


def test_a_rest_read_two_ways_is_held_at_the_better_supported_place():
    """Before the strike the ball lies at its spot (truth), whatever the fits said: the held rows
    lie within 1 mm of it where the smoothed ones kept the gross fit (at least 30 frames over 5
    mm off: the case is one the tracker alone gets wrong); the rows in motion are untouched."""
    for seed in (1, 2):
        f, times, det, t_s = _flipping_rest(seed)
        tr = track(det, TABLE)
        _, _, rests = find_events_and_rests(tr, TABLE, det)
        held = hold_rests(tr, rests, det)
        truth = f(held["t"].to_numpy())
        before = (held["t"] < t_s - 0.1).to_numpy()
        err_tr = np.hypot(*(tr[["x", "y"]].to_numpy() - truth).T)
        err = np.hypot(*(held[["x", "y"]].to_numpy() - truth).T)
        assert np.sum(err_tr[before] > 5.0) >= 30
        assert err[before].max() < 1.0
        moving = (held["t"] > t_s + 0.1).to_numpy() & (held["t"] < 3.5).to_numpy()
        assert np.array_equal(held.loc[moving, ["x", "y"]].to_numpy(),
                              tr.loc[moving, ["x", "y"]].to_numpy())


def test_a_ball_passed_close_by_is_not_held_across_the_pass():
    """A resting ball pushed 4 mm aside as another rolls past within a diameter plus a few mm
    (a graze: no collision need be solved): no stay at rest spans the pass, so the rows after
    it lie within 1 mm of the new place (the first law holds only until something may touch
    the ball)."""
    t_pass = 1.5
    p0, p1 = np.array([900.0, 500.0]), np.array([904.0, 500.0])

    def still(t):
        t = np.asarray(t, float)
        return np.where((t < t_pass)[:, None], p0, p1) + 0.0 * t[:, None]
    # The roller's path passes D + 5 mm from p0 at t_pass, decelerating at mu_r g (0.02 g).
    v0, dec = 800.0, 0.02 * G
    s_pass = v0 * t_pass - 0.5 * dec * t_pass**2
    roller = decel_path((900.0 - (D + 5.0), 500.0 - s_pass), 90.0, v0, dec)
    times = np.arange(int(3.5 * FPS)) / FPS
    det = detections({"b": still, "a": roller}, times, np.random.default_rng(4), noise_mm=0.3)
    tr = track(det, TABLE)
    _, _, rests = find_events_and_rests(tr, TABLE, det)
    held = hold_rests(tr, rests, det)
    tid = int(tr.loc[(tr["t"] == 0.0) & (np.hypot(tr["x"] - 900.0, tr["y"] - 500.0) < 5), "track"].iloc[0])
    spans = rests[(rests["track"] == tid) & (rests["t_begin"] < t_pass) & (rests["t_end"] > t_pass)]
    assert spans.empty
    after = held[(held["track"] == tid) & (held["t"] > t_pass + 0.5)]
    assert np.hypot(after["x"] - p1[0], after["y"] - p1[1]).max() < 1.0


def test_no_stays_leaves_tracks_as_they_are():
    """No stay at rest, or tracks without their reads: nothing changes (a copy comes back)."""
    tr = pd.DataFrame({"frame": [0, 1], "t": [0.0, 0.1], "track": [0, 0], "x": [1.0, 2.0],
                       "y": [3.0, 4.0], "vx": [0.0, 0.0], "vy": [0.0, 0.0], "seen": [1, 1]})
    rests = pd.DataFrame({"track": [0], "t_begin": [0.0], "t_end": [0.1]})
    out = hold_rests(tr, rests)
    assert out.equals(tr) and out is not tr
