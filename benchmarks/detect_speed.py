"""Calibration plus ball detection against plain decoding, on a 720p60 clip.

Films (once, into ``--work``) the 720p60 scene ``green_60fps_250`` of
``benchmarks/detect_accuracy.py``, or takes ``--clip FILE --calibration FILE`` (e.g.
``sample_clips/bank_practice.mp4`` and its truth folder's ``calibration.json``, whose table is
used), and times, in the same run and alternating, each ``--runs`` times: (a) plain decoding to
(H, W, 3) uint8 BGR frames, what the detector consumes (``vision.video.iter_frames``); (b)
automatic calibration of the clip (``vision.calibrate.calibrate``: its own decoding pass, still
frames, bumps, the camera fit), as ``railtrace analyse`` does first; (c) decoding plus detection
(``vision.detect.BallDetector``, no decoding thread) with the camera (b) found, as ``analyse``
then does (``--truth-camera``: with the calibration file's camera instead). It prints each run
and the medians: frames per second of (b) + (c), its ratio to real time and to (a), in wall
time and in processor time (``time.process_time``, which a busy shared machine disturbs far
less than wall time), and the same for (c) alone. (c) includes setting the detector up (the
first frame builds the background model, about half a second), which a short clip feels.
OpenCV runs on one thread (``cv2.setNumThreads(1)``); pin the whole process to one core with
``taskset -c 0`` (the decoder's threads then share that core too). ``--frames N`` times the
first N frames only, without calibration (which reads the whole clip), with the calibration
file's camera. ``--stages`` adds one
more run of decoding plus detection that charges processor time to the detector's stages (each
stage's own time, its sub-stages' taken out: decoding, the change grid, the background model
and its update, candidates, the coarse and local outlines, the sphere fits, look-ups of rays
and projections, labels) and prints them in ms per frame with their call counts; the timers
themselves add about a tenth; it also splits the frame loop's processor time (decoding left out)
between the frames detected and those carried over because no cell of the table area changed
(nothing moved: the detector hands back the previous frame's detections), with the count and
the cost of each kind. The machine's load averages (1, 5 and 15 minutes) are printed at
the start and the end: the timings mean little on a machine busy with other jobs. Each run of the
whole clip also decodes it to downscaled luma alone, as calibration's own pass does
(``vision.video.iter_grey``), and the medians are printed with the bound the two decoding passes
set on calibration plus detection: decode-only over both passes' processor time.

Run: ``taskset -c 0 .venv/bin/python benchmarks/detect_speed.py --runs 3`` and
``taskset -c 0 .venv/bin/python benchmarks/detect_speed.py --runs 3 --clip
sample_clips/bank_practice.mp4 --calibration sample_clips/bank_practice.truth/calibration.json``.
"""

from __future__ import annotations

import argparse
import collections
import functools
import os
import statistics
import sys
import time
from pathlib import Path

import cv2

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from detect_accuracy import film  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402
from vision.calibrate import calibrate  # noqa: E402
import vision.background  # noqa: E402
import vision.detect  # noqa: E402
from vision.detect import BallDetector, stack_detections  # noqa: E402
from vision.video import iter_frames, iter_grey, probe  # noqa: E402
from vision.calibrate import _SMALL_WIDTH_PX  # noqa: E402

# (owner, attribute) of the timed stages, grouped under a name each.
STAGES = {
    "decode to BGR": [],  # timed round the frame iterator itself
    "frame loop (change grid, carry-over)": [(BallDetector, "step_rows"), (BallDetector, "_process_changed"), (BallDetector, "_dedupe"), (BallDetector, "_protect_mask"), (BallDetector, "_unchanged")],
    "background model (first frame)": [(vision.background.Background, "__init__")],
    "background update": [(vision.background.Background, "update")],
    "candidates and seeds": [(BallDetector, n) for n in ("_detect_box", "_components", "_seeds_of", "_whole_piece", "_reaching", "_unexplained_seeds", "_crown_seeds", "_refit_touching")],
    "fit flow (rounds, tests)": [(BallDetector, n) for n in ("_fit_one", "_fit_seed", "_fit_crown", "_on_table", "_isolated", "_soft_ends")],
    "coarse outline (_edges)": [(BallDetector, "_edges")],
    "local outline (_edges_local, _surround_off_bed)": [(BallDetector, "_edges_local"), (BallDetector, "_surround_off_bed")],
    "sphere fits (LM)": [(vision.detect, "_robust_fit")],
    "rays, projections, outlines": [(vision.detect.RayMap, n) for n in ("rays", "backproject", "project", "sphere_outline")]
    + [(vision.detect, "_swept_outline_px"), (vision.detect, "_ray_polygon")],
    "labels and fill tests": [(BallDetector, n) for n in ("_identity", "_filled_share", "_same_hue")],
}


def stage_times(clip, camera, table, frames) -> tuple[int, dict, dict]:
    """One run of decoding plus detection with each stage of :data:`STAGES` charged its own
    processor time (time in timed sub-stages taken out): (frames, seconds by stage, calls by
    stage). The wrappers are removed again before returning."""
    secs: collections.Counter = collections.Counter()
    calls: collections.Counter = collections.Counter()
    stack: list[float] = []

    def timed(f, name):
        @functools.wraps(f)
        def g(*a, **k):
            t0 = time.process_time()
            stack.append(0.0)
            try:
                return f(*a, **k)
            finally:
                inner = stack.pop()
                dt = time.process_time() - t0
                secs[name] += dt - inner
                calls[name] += 1
                if stack:
                    stack[-1] += dt
        return g

    saved = []
    for name, parts in STAGES.items():
        for owner, attr in parts:
            f = owner.__dict__[attr]
            saved.append((owner, attr, f))
            setattr(owner, attr, timed(f, name))
    try:
        det = BallDetector(camera, table)
        it = iter_frames(clip, read_ahead=0, stop=frames)
        n = 0
        rows = None
        while True:
            t0 = time.process_time()
            item = next(it, None)
            secs["decode to BGR"] += time.process_time() - t0
            if item is None:
                break
            calls["decode to BGR"] += 1
            t0 = time.process_time()
            prev, rows = rows, det.step_rows(*item)
            # The detector hands back the previous frame's very tuple when no cell of the table
            # area changed (nothing moved): such a frame was carried over, not detected.
            kind = "carried over" if n and rows is prev else "processed"
            secs[kind] += time.process_time() - t0
            calls[kind] += 1
            n += 1
    finally:
        for owner, attr, f in saved:
            setattr(owner, attr, f)
    return n, secs, calls


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", default="/tmp/railtrace_detect_bench")
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--clip", type=Path, default=None, help="clip to time (default: the filmed green_60fps_250 scene)")
    ap.add_argument("--calibration", type=Path, default=None, help="calibration.json of --clip (required with it): its table, and its camera with --truth-camera")
    ap.add_argument("--frames", type=int, default=None, help="time only the first N frames")
    ap.add_argument("--stages", action="store_true", help="add a run that charges processor time to the detector's stages")
    ap.add_argument("--truth-camera", action="store_true", help="detect with the calibration file's camera instead of the automatically calibrated one")
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
    table, truth_camera, _ = read_calibration(cal)
    info = probe(clip)
    whole = args.frames is None or args.frames >= info.frame_count
    print("load averages at the start: " + ", ".join(f"{v:.2f}" for v in os.getloadavg()), flush=True)
    dec, cal_t, det_t, cpu_dec, cpu_cal, cpu_det, cpu_luma = [], [], [], [], [], [], []
    # Calibration's own pass decodes the clip to downscaled luma (vision.calibrate._small_frames).
    luma_scale = min(1.0, _SMALL_WIDTH_PX / max(info.width, 1))
    camera = truth_camera
    for k in range(args.runs):
        t0, c0 = time.perf_counter(), time.process_time()
        n = sum(1 for _ in iter_frames(clip, read_ahead=0, stop=args.frames))
        dec.append(time.perf_counter() - t0)
        cpu_dec.append(time.process_time() - c0)
        t0, c0 = time.perf_counter(), time.process_time()
        found = calibrate(clip, table).camera if whole else truth_camera
        cal_t.append(time.perf_counter() - t0)
        cpu_cal.append(time.process_time() - c0)
        if whole:
            c0 = time.process_time()
            for _ in iter_grey(clip, luma_scale, read_ahead=0):
                pass
            cpu_luma.append(time.process_time() - c0)
        camera = truth_camera if args.truth_camera else found
        t0, c0 = time.perf_counter(), time.process_time()
        det = BallDetector(camera, table)
        step = getattr(det, "step_rows", None) or det.step  # so the script also times revisions before step_rows
        stack_detections([(i, t, step(i, t, img)) for i, t, img in iter_frames(clip, read_ahead=0, stop=args.frames)])
        det_t.append(time.perf_counter() - t0)
        cpu_det.append(time.process_time() - c0)
        print(f"run {k}: decode {n / dec[-1]:6.1f} frames/s ({1000 * cpu_dec[-1] / n:.2f} processor ms per frame); "
              + (f"calibration {cal_t[-1]:.2f} s ({cpu_cal[-1]:.2f} processor s); " if whole else "")
              + f"decode+detect {n / det_t[-1]:6.1f} frames/s ({1000 * cpu_det[-1] / n:.2f} processor ms per frame)", flush=True)
    med = statistics.median
    fps = info.fps
    print(f"clip {clip.name}: {info.width}x{info.height} at {fps:g} fps, {n} frames decoded to (H, W, 3) uint8 BGR; "
          f"detection with the {'automatically calibrated' if whole and not args.truth_camera else 'calibration file'} camera")
    for what, secs in (("wall", (dec, cal_t, det_t)), ("processor", (cpu_dec, cpu_cal, cpu_det))):
        d, c, f = (med(x) for x in secs)
        print(f"median {what} time: decode only {n / d:.1f} frames/s ({1000 * d / n:.2f} ms per frame); "
              + (f"calibration {c:.2f} s ({1000 * c / n:.2f} ms per frame); " if whole else "")
              + f"decode+detect {n / f:.1f} frames/s ({1000 * f / n:.2f} ms per frame) = {n / f / fps:.2f}x real time, {d / f:.2f} of decode-only")
        if whole:
            both = med([x + y for x, y in zip(*secs[1:])])
            print(f"  calibration+detection ({what}): {n / both:.1f} frames/s ({1000 * both / n:.2f} ms per frame) = "
                  f"{n / both / fps:.2f}x real time on one core, {d / both:.2f} of decode-only speed")
            if what == "processor":
                # Calibration decodes the clip once more, to luma: with no other work at all,
                # calibration plus detection would still cost both passes.
                luma = med(cpu_luma)
                print(f"  calibration's decoding to downscaled luma alone: {1000 * luma / n:.2f} processor ms per frame; "
                      f"the two passes' decoding bounds calibration+detection at {d / (d + luma):.2f} of decode-only speed")
    if args.stages:
        n, secs, calls = stage_times(clip, camera, table, args.frames)
        total = sum(v for k, v in secs.items() if k in STAGES)
        print(f"processor time by stage (one timed run, {n} frames, {1000 * total / n:.1f} ms per frame with the timers):")
        for name in STAGES:
            print(f"  {name:50s} {1000 * secs[name] / n:6.2f} ms per frame  {calls[name] / n:7.2f} calls per frame")
        # The frame loop's time (decoding left out) by whether the frame was detected or carried
        # over unchanged; a background update falls on either kind.
        for kind in ("processed", "carried over"):
            k = calls[kind]
            print(f"  frames {kind + ':':14s} {k:6d} of {n} ({100 * k / max(n, 1):5.1f} %), "
                  f"{1000 * secs[kind] / max(k, 1):7.2f} ms each, {100 * secs[kind] / max(total, 1e-9):5.1f} % of the timed run's processor time")
    print("load averages at the end: " + ", ".join(f"{v:.2f}" for v in os.getloadavg()))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
