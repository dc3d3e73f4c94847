"""Tests of the truth-as-detections input of benchmarks/event_causes.py."""

from __future__ import annotations

import numpy as np
import pandas as pd

from benchmarks.event_causes import truth_detections
from vision.detect import COLUMNS


def _truth(n_frames: int = 400) -> pd.DataFrame:
    """Two balls 300 mm apart across the table, one rolling along x at 50 mm/s and one at rest,
    60 frames/s; the rolling ball unseen (hidden) every tenth frame, as a truth folder's
    ``seen`` column marks it."""
    rows = []
    for f in range(n_frames):
        t = f / 60.0
        rows.append((f, t, "0", 100.0 + 50.0 * t, 300.0, 50.0, 0.0, int(f % 10 != 0)))
        rows.append((f, t, "1", 1200.0, 600.0, 0.0, 0.0, 1))
    return pd.DataFrame(rows, columns=["frame", "t", "track", "x", "y", "vx", "vy", "seen"])


def test_noise_free_detections_are_the_seen_true_centres():
    truth = _truth()
    det = truth_detections(truth, 0.0, seed=0)
    # The detector's columns, so the tracker reads them as it reads analyse's detections.
    assert list(det.columns) == COLUMNS
    seen = truth[truth["seen"] == 1]
    assert len(det) == len(seen)
    det = det.assign(track=np.where(det["y"] < 450.0, "0", "1"))
    paired = det.merge(seen, on=["frame", "track"], suffixes=("", "_true"))
    # Every detection at a seen true centre, none at an unseen one; written to micrometres
    # as analyse writes detections.csv, so within half a micrometre.
    assert len(paired) == len(seen)
    assert np.all(np.abs(paired["x"] - paired["x_true"]) <= 0.5e-6 + 1e-12)
    assert np.all(np.abs(paired["y"] - paired["y_true"]) <= 0.5e-6 + 1e-12)
    # The tracker's least noise (TrackerConfig.min_meas_sigma_mm) as the stated sigma.
    assert np.all(det["sigma_mm"] == 0.15)


def test_noise_has_the_stated_sd_per_axis():
    truth = _truth(3000)
    sd = 2.0
    det = truth_detections(truth, sd, seed=3)
    seen = truth[truth["seen"] == 1]
    # Each detection's ball by its y: the balls run 300 mm apart across (150 sigmas).
    det = det.assign(track=np.where(det["y"] < 450.0, "0", "1"))
    paired = det.merge(seen, on=["frame", "track"], suffixes=("", "_true"))
    assert len(paired) == len(seen) == len(det)
    err = paired[["x", "y"]].to_numpy() - paired[["x_true", "y_true"]].to_numpy()
    n = len(err)
    # Large-sample theory of the Gaussian: the sample sd has sd about sigma / sqrt(2 n) (textbook
    # result, from memory); 5 of them.
    tol = 5 * sd / np.sqrt(2 * n)
    assert abs(err[:, 0].std() - sd) < tol and abs(err[:, 1].std() - sd) < tol
    # Zero mean within 5 standard errors sigma / sqrt(n).
    assert np.all(np.abs(err.mean(axis=0)) < 5 * sd / np.sqrt(n))
    assert np.all(det["sigma_mm"] == sd)
