"""Tests of benchmarks/detect_states.py's bookkeeping: which truth ball a fit found and the
batching ceiling, on cases worked by hand (the distances are 3-4-5 right triangles)."""

from __future__ import annotations

import pandas as pd
import pytest

from benchmarks.detect_states import batch_ceiling, fit_state, frame_kind

# Two truth balls: one at rest at (0, 0), one rolling at 3 mm/s (vx 0, vy 3) at (100, 0).
TRUTH = pd.DataFrame({"x": [0.0, 100.0], "y": [0.0, 0.0], "vx": [0.0, 0.0], "vy": [0.0, 3.0]})


@pytest.mark.parametrize("fit, expected", [
    (None, "rejected"),
    ({"x": 3.0, "y": 4.0}, "resting"),      # 5 mm from the resting ball (3-4-5 triangle)
    ({"x": 97.0, "y": -4.0}, "moving"),     # 5 mm from the rolling one, 3 mm/s > 1 mm/s
    ({"x": 30.0, "y": 40.0}, "far"),        # 50 mm from the nearest, beyond the 40 mm reach
])
def test_fit_state_takes_the_nearest_truth_ball(fit, expected):
    # Distances and speeds worked by hand (Pythagoras).
    assert fit_state(fit, TRUTH, moving_mm_s=1.0, reach_mm=40.0) == expected


def test_fit_state_threshold_and_missing_truth():
    # The rolling ball's 3 mm/s is below a 5 mm/s threshold (worked by hand); a frame the
    # truth does not list has no ball to match.
    assert fit_state({"x": 100.0, "y": 0.0}, TRUTH, moving_mm_s=5.0, reach_mm=40.0) == "resting"
    assert fit_state({"x": 0.0, "y": 0.0}, None, moving_mm_s=1.0, reach_mm=40.0) == "far"


def test_frame_kind():
    # A carried-over frame is one whatever moves in the truth (the detector did nothing).
    assert frame_kind(2, True) == "carried over"
    assert [frame_kind(n, False) for n in (0, 1, 2, 5)] == ["none moving", "one moving", "two or more moving", "two or more moving"]


def test_batch_ceiling_by_hand():
    # Frame 0: one fit (no batch); frame 1: fits of 2, 3 and 5 ms (10 ms, largest 5: 5 ms to
    # save); frame 2: two of 4 ms (8 ms, 4 to save). Sums worked by hand: 18 ms and 9 ms.
    fits = pd.DataFrame({"frame": [0, 1, 1, 1, 2, 2], "cpu": [0.007, 0.002, 0.003, 0.005, 0.004, 0.004]})
    multi, saving = batch_ceiling(fits)
    assert multi == pytest.approx(0.018, abs=1e-12)
    assert saving == pytest.approx(0.009, abs=1e-12)
