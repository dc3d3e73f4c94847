"""Tracking speed on cached detections: ``tracking.tracker.track`` alone, no decoding or detection.

Reads a ``detections.csv`` written by ``railtrace analyse`` (or ``benchmarks/analyse_accuracy.py``)
and the calibration file the table comes from, runs ``track`` ``--runs`` times and prints each
run's wall and processor seconds, then the medians, the detections and frames per processor
second, and the ratio of the clip's duration to the median processor time (how many times
faster than real time tracking runs on one fully used core). Processor time is the figure to
compare: five jobs sharing two cores stretch wall time at will.

Run: ``.venv/bin/python benchmarks/track_speed.py DIR/detections.csv --calibration
sample_clips/bank_practice.truth/calibration.json --runs 5`` (``DIR`` from an earlier
``analyse_accuracy.py --out DIR`` run, e.g. its ``bank_practice`` folder).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tracking.tracker import track  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("detections", type=Path, help="detections.csv of a results folder")
    ap.add_argument("--calibration", type=Path, required=True,
                    help="calibration.json giving the table (e.g. the clip's truth folder's)")
    ap.add_argument("--runs", type=int, default=5)
    args = ap.parse_args(argv)
    if args.runs < 1:
        raise SystemExit(f"track_speed.py: --runs {args.runs} must be at least 1")
    table, _, _ = read_calibration(args.calibration)
    det = pd.read_csv(args.detections, dtype={"colour": str, "pattern": str})
    n_frames = int(det["frame"].max() - det["frame"].min() + 1) if len(det) else 0
    duration_s = float(det["t"].max() - det["t"].min()) if len(det) else 0.0
    walls, cpus = [], []
    for run in range(args.runs):
        w0, c0 = time.perf_counter(), time.process_time()
        tracks = track(det, table)
        wall, cpu = time.perf_counter() - w0, time.process_time() - c0
        walls.append(wall)
        cpus.append(cpu)
        print(f"run {run + 1}: wall {wall:.2f} s, processor {cpu:.2f} s, "
              f"{tracks['track'].nunique()} tracks, {len(tracks)} rows", flush=True)
    cpu = statistics.median(cpus)
    print(f"median: wall {statistics.median(walls):.2f} s, processor {cpu:.2f} s for "
          f"{len(det)} detections in {n_frames} frames ({duration_s:.1f} s of clip): "
          f"{len(det) / cpu:.0f} detections and {n_frames / cpu:.0f} frames per processor "
          f"second, {duration_s / cpu:.1f} x real time on one core")
    return 0


if __name__ == "__main__":
    sys.exit(main())
