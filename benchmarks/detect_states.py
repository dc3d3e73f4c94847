"""Where the detector's time goes by what the balls are doing, against a clip's truth tracks.

Runs decoding plus detection (``vision.detect.BallDetector``, the calibration file's camera and
table, OpenCV on one thread) over a clip with a truth folder (``railtrace`` scenes' ``tracks.csv``:
one row per ball and frame with its true ``vx``, ``vy`` in mm/s) and charges processor time
(``time.process_time``; decoding left out) to:

- each frame, by how many truth balls move in it (speed above ``--moving-mm-s``, 1 mm/s) and
  whether the detector carried the previous frame's detections over (no cell of the change grid
  changed: it hands back the very same tuple);
- each top-level ball fit (``BallDetector._fit_seed``; its own retries counted inside it), by
  the truth ball nearest the fitted centre within ``--reach-mm`` (40 mm): ``moving``, ``resting``
  (a ball at rest refitted), ``far`` (no truth ball that near: a false or displaced fit) or
  ``rejected`` (the fit returned nothing).

It prints both tables and two ceilings for speed-ups by ball state: the time of resting balls'
refits (all that skipping a resting ball's refit could save), and, for batching the fits of one
frame together (each numpy call working on every ball's rays at once), the fit time in frames
with more than one fit less each such frame's largest fit (what a batch that cost no more than
its largest member would save; the numpy calls' own arithmetic grows with the rays, so the true
saving is a fraction of it). ``--csv PREFIX`` writes the per-frame and per-fit tables.

Run: ``taskset -c 0 .venv/bin/python benchmarks/detect_states.py --clip
sample_clips/bank_practice.mp4 --truth sample_clips/bank_practice.truth``. The machine's load
disturbs the times (a busy shared machine far less in processor than in wall time); the shares
between the states are what to read.
"""

from __future__ import annotations

import argparse
import functools
import os
import sys
import time
from pathlib import Path

import cv2
import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from vision.calibfile import read_calibration  # noqa: E402
from vision.detect import BallDetector  # noqa: E402
from vision.video import iter_frames  # noqa: E402


def fit_state(fit: dict | None, truth: pd.DataFrame | None, moving_mm_s: float, reach_mm: float) -> str:
    """The state of the truth ball a fit found: ``fit`` a detection row (``x``, ``y`` mm, table
    frame) or None, ``truth`` the frame's truth rows (``x``, ``y`` mm, ``vx``, ``vy`` mm/s) or
    None. ``rejected`` (no fit), ``far`` (no truth ball within ``reach_mm`` of the centre),
    else ``moving`` when the nearest one's speed exceeds ``moving_mm_s``, ``resting`` if not."""
    if fit is None:
        return "rejected"
    if truth is None or not len(truth):
        return "far"
    d = np.hypot(truth["x"].to_numpy() - fit["x"], truth["y"].to_numpy() - fit["y"])
    k = int(np.argmin(d))
    if d[k] >= reach_mm:
        return "far"
    speed = float(np.hypot(truth["vx"].to_numpy()[k], truth["vy"].to_numpy()[k]))
    return "moving" if speed > moving_mm_s else "resting"


def frame_kind(n_moving: int, carried: bool) -> str:
    """A frame's row in the per-frame table: carried over, or by its moving truth balls."""
    if carried:
        return "carried over"
    return "none moving" if n_moving == 0 else ("one moving" if n_moving == 1 else "two or more moving")


def batch_ceiling(fits: pd.DataFrame) -> tuple[float, float]:
    """(fit seconds in frames with two or more top-level fits, those frames' fit seconds less
    each frame's largest fit): ``fits`` has one row per fit with ``frame`` and ``cpu`` (s). The
    second is what batching a frame's fits would save if a batch cost as much as its largest
    member alone."""
    g = fits.groupby("frame")["cpu"].agg(["count", "sum", "max"])
    multi = g[g["count"] >= 2]
    return float(multi["sum"].sum()), float((multi["sum"] - multi["max"]).sum())


def run(clip: Path, calibration: Path, truth_tracks: pd.DataFrame, frames: int | None, moving_mm_s: float, reach_mm: float) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Detect ``clip`` once, timing each frame and each top-level ``_fit_seed``: (per-frame
    table: frame, cpu s, rows, carried, n_moving; per-fit table: frame, state, cpu s). The
    wrapper is removed before returning."""
    table, camera, _ = read_calibration(calibration)
    by_frame = {int(f): g for f, g in truth_tracks.groupby("frame")}
    speed = np.hypot(truth_tracks["vx"], truth_tracks["vy"])
    n_moving = (speed > moving_mm_s).groupby(truth_tracks["frame"]).sum()
    fits: list[tuple[int, str, float]] = []
    now = {"frame": 0, "depth": 0}
    original = BallDetector.__dict__["_fit_seed"]

    @functools.wraps(original)
    def timed(self, img, seed, *a, **k):
        now["depth"] += 1
        t0 = time.process_time()
        try:
            r = original(self, img, seed, *a, **k)
        finally:
            now["depth"] -= 1
        if now["depth"] == 0:  # a retry inside a fit is part of that fit
            fits.append((now["frame"], fit_state(r, by_frame.get(now["frame"]), moving_mm_s, reach_mm), time.process_time() - t0))
        return r

    BallDetector._fit_seed = timed
    per_frame = []
    try:
        det = BallDetector(camera, table)
        rows = None
        for i, t, img in iter_frames(clip, read_ahead=0, stop=frames):
            now["frame"] = int(i)
            t0 = time.process_time()
            prev, rows = rows, det.step_rows(i, t, img)
            dt = time.process_time() - t0
            per_frame.append((int(i), dt, len(rows), bool(per_frame) and rows is prev, int(n_moving.get(i, 0))))
    finally:
        BallDetector._fit_seed = original
    return (pd.DataFrame(per_frame, columns=["frame", "cpu", "rows", "carried", "n_moving"]),
            pd.DataFrame(fits, columns=["frame", "state", "cpu"]))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--clip", type=Path, required=True)
    ap.add_argument("--truth", type=Path, required=True, help="the clip's truth folder (tracks.csv; calibration.json unless --calibration)")
    ap.add_argument("--calibration", type=Path, default=None, help="calibration.json (default: the truth folder's)")
    ap.add_argument("--frames", type=int, default=None, help="only the first N frames")
    ap.add_argument("--moving-mm-s", type=float, default=1.0, help="truth speed above which a ball counts as moving (mm/s)")
    ap.add_argument("--reach-mm", type=float, default=40.0, help="farthest a fit may lie from its truth ball (mm)")
    ap.add_argument("--csv", default=None, help="write PREFIX_frames.csv and PREFIX_fits.csv")
    args = ap.parse_args(argv)
    cv2.setNumThreads(1)
    calibration = args.calibration or args.truth / "calibration.json"
    truth = pd.read_csv(args.truth / "tracks.csv")
    print(f"load averages at the start: {', '.join(f'{x:.2f}' for x in os.getloadavg())}")
    frames, fits = run(args.clip, calibration, truth, args.frames, args.moving_mm_s, args.reach_mm)
    total = frames["cpu"].sum()
    n = len(frames)
    print(f"{args.clip.name}: {n} frames, detection {total:.2f} processor s ({1000 * total / n:.2f} ms per frame, decoding left out)")
    frames["kind"] = [frame_kind(m, c) for m, c in zip(frames["n_moving"], frames["carried"])]
    fit_s = fits.groupby("frame")["cpu"].sum()
    frames["fits"] = frames["frame"].map(fit_s).fillna(0.0)
    print("frames by state: count, ms per frame (all / in top-level fits), share of the detector's time")
    for kind, g in frames.groupby("kind", sort=False):
        print(f"  {kind:20s} {len(g):6d}   {1000 * g['cpu'].mean():7.2f} / {1000 * g['fits'].mean():6.2f} ms   {100 * g['cpu'].sum() / total:5.1f} %")
    print("top-level fits by the state of the truth ball found: count, ms each, ms per frame of the clip, share")
    for state, g in fits.groupby("state"):
        print(f"  {state:10s} {len(g):6d}   {1000 * g['cpu'].mean():6.2f} ms   {1000 * g['cpu'].sum() / n:6.2f}   {100 * g['cpu'].sum() / total:5.1f} %")
    rest_s = fits.loc[fits["state"] == "resting", "cpu"].sum()
    multi_s, saving_s = batch_ceiling(fits)
    print(f"ceiling of skipping resting balls' refits: {1000 * rest_s / n:.2f} ms per frame ({100 * rest_s / total:.1f} %)")
    print(f"ceiling of batching a frame's fits: frames with two or more fits hold {1000 * multi_s / n:.2f} ms per frame of fits; "
          f"all but each one's largest fit: {1000 * saving_s / n:.2f} ms per frame ({100 * saving_s / total:.1f} %)")
    print(f"load averages at the end: {', '.join(f'{x:.2f}' for x in os.getloadavg())}")
    if args.csv:
        frames.to_csv(f"{args.csv}_frames.csv", index=False)
        fits.to_csv(f"{args.csv}_fits.csv", index=False)
    return 0


if __name__ == "__main__":
    sys.exit(main())
