"""Ball-detection speed against plain decoding, on a 720p60 clip.

Films (once, into ``--work``) the 720p60 scene ``green_60fps_250`` of
``benchmarks/detect_accuracy.py``, then times, in the same run and alternating, (a) plain
decoding to (H, W, 3) uint8 BGR frames, what the detector consumes (``vision.video.iter_frames``)
and (b) decoding plus detection (``vision.detect.detect_clip``, no decoding thread, set up from
the truth calibration: the calibration module is not part of this measure), each ``--runs``
times; prints each run and the medians: frames per second, the ratio to real time, and the
ratio of (b) to (a), and beside them the same from processor time (``time.process_time``,
which a busy shared machine disturbs far less than wall time): processor ms per frame of (a)
and (b), frames per processor second and their ratio. (b) includes setting the detector up
(the first frame builds the background model, about half a second), which a short clip
feels. OpenCV runs on one thread (``cv2.setNumThreads(1)``); pin the whole process to one
core with ``taskset -c 0``. ``--clip FILE --calibration FILE`` times another clip instead
(e.g. ``sample_clips/bank_practice.mp4`` with its truth folder's ``calibration.json``),
``--frames N`` its first N frames only.

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
from vision.detect import BallDetector, stack_detections  # noqa: E402
from vision.video import iter_frames, probe  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", default="/tmp/railtrace_detect_bench")
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--clip", type=Path, default=None, help="clip to time (default: the filmed green_60fps_250 scene)")
    ap.add_argument("--calibration", type=Path, default=None, help="calibration.json of --clip (required with it)")
    ap.add_argument("--frames", type=int, default=None, help="time only the first N frames")
    args = ap.parse_args(argv)
    cv2.setNumThreads(1)
    if args.clip is None:
        work = Path(args.work)
        film(work, ["green_60fps_250"])
        clip = work / "green_60fps_250.mp4"
        cal = work / "green_60fps_250.truth" / "calibration.json"
    elif args.calibration is None:
        ap.error("--clip needs --calibration (a calibration.json with the camera)")
    else:
        clip, cal = args.clip, args.calibration
    table, camera, _ = read_calibration(cal)
    info = probe(clip)
    dec, full, cpu_dec, cpu = [], [], [], []
    for k in range(args.runs):
        t0, c0 = time.perf_counter(), time.process_time()
        n = sum(1 for _ in iter_frames(clip, read_ahead=0, stop=args.frames))
        dec.append(n / (time.perf_counter() - t0))
        cpu_dec.append(1000 * (time.process_time() - c0) / n)
        t0, c0 = time.perf_counter(), time.process_time()
        det = BallDetector(camera, table)
        step = getattr(det, "step_rows", None) or det.step  # so the script also times revisions before step_rows
        stack_detections([(i, t, step(i, t, img)) for i, t, img in iter_frames(clip, read_ahead=0, stop=args.frames)])
        full.append(n / (time.perf_counter() - t0))
        cpu.append(1000 * (time.process_time() - c0) / n)
        print(f"run {k}: decode {dec[-1]:7.1f} frames/s ({cpu_dec[-1]:.2f} ms of processor time per frame), "
              f"decode+detect {full[-1]:7.1f} frames/s ({cpu[-1]:.1f} ms of processor time per frame)", flush=True)
    d, f = statistics.median(dec), statistics.median(full)
    cd, cf = statistics.median(cpu_dec), statistics.median(cpu)
    print(f"clip {clip.name}: {info.width}x{info.height} at {info.fps:g} fps, {n} frames decoded to (H, W, 3) uint8 BGR")
    print(f"median wall: decode only {d:.1f} frames/s; decode+detect {f:.1f} frames/s = {f / info.fps:.2f}x real time, "
          f"{f / d:.2f} of decode-only speed")
    print(f"median processor time: decode only {cd:.2f} ms per frame ({1000 / cd:.0f} frames per processor second); "
          f"decode+detect {cf:.1f} ms per frame ({1000 / cf:.1f} frames per processor second = {1000 / cf / info.fps:.2f}x real time "
          f"on one core, {cd / cf:.2f} of decode-only)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
