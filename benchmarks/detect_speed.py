"""Ball-detection speed against plain decoding, on a 720p60 clip.

Films (once, into ``--work``) the 720p60 scene ``green_60fps_250`` of
``benchmarks/detect_accuracy.py``, then times, in the same run and alternating, (a) plain
decoding to (H, W, 3) uint8 BGR frames, what the detector consumes (``vision.video.iter_frames``)
and (b) decoding plus detection (``vision.detect.detect_clip``, no decoding thread, set up from
the truth calibration: the calibration module is not part of this measure), each ``--runs``
times; prints each run and the medians: frames per second, the ratio to real time, and the
ratio of (b) to (a), and the processor seconds per frame of (b) (``time.process_time``, which a
busy shared machine disturbs less than wall time). OpenCV runs on one thread
(``cv2.setNumThreads(1)``); pin the whole process to one core with ``taskset -c 0``.

Run: ``taskset -c 0 .venv/bin/python benchmarks/detect_speed.py --runs 3``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import cv2

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from detect_accuracy import film  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402
from vision.detect import detect_clip  # noqa: E402
from vision.video import iter_frames, probe  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", default="/tmp/railtrace_detect_bench")
    ap.add_argument("--runs", type=int, default=3)
    args = ap.parse_args(argv)
    cv2.setNumThreads(1)
    work = Path(args.work)
    film(work, ["green_60fps_250"])
    clip = work / "green_60fps_250.mp4"
    table, camera, _ = read_calibration(work / "green_60fps_250.truth" / "calibration.json")
    info = probe(clip)
    dec, full, cpu = [], [], []
    for k in range(args.runs):
        t0 = time.perf_counter()
        n = sum(1 for _ in iter_frames(clip, read_ahead=0))
        dec.append(n / (time.perf_counter() - t0))
        t0, c0 = time.perf_counter(), time.process_time()
        detect_clip(clip, camera, table, read_ahead=0)
        full.append(n / (time.perf_counter() - t0))
        cpu.append(1000 * (time.process_time() - c0) / n)
        print(f"run {k}: decode {dec[-1]:7.1f} frames/s, decode+detect {full[-1]:7.1f} frames/s ({cpu[-1]:.1f} ms of processor time per frame)")
    d, f = statistics.median(dec), statistics.median(full)
    print(f"clip {clip.name}: {info.width}x{info.height} at {info.fps:g} fps, {n} frames")
    print(f"median decode only {d:.1f} frames/s; decode+detect {f:.1f} frames/s = {f / info.fps:.2f}x real time, "
          f"{f / d:.2f} of decode-only speed; {statistics.median(cpu):.1f} ms of processor time per frame")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
