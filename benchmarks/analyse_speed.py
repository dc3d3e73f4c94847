"""Whole ``railtrace analyse`` speed against plain decoding of the same clip.

Times, in the same run and alternating, ``--runs`` times each: (a) plain decoding of the clip
to (H, W, 3) uint8 BGR frames, what the detector consumes (``vision.video.iter_frames`` with
its defaults: FFmpeg's own decoding threads and, where there is a spare core, our read-ahead
thread, as calibration and single-process detection use it), and (b)
``railtrace.pipeline.analyse_clip`` into a fresh folder: automatic calibration (as
``railtrace analyse`` does without ``--calibration``; ``--calibration FILE`` skips it),
detection, tracking, events and the results folder (not the HTML report or the history).
Prints each run (with the processor seconds of this process and its workers, and each
stage's wall seconds) and the medians: frames per second, the ratio to real time (clip duration over
wall time) and the ratio of (b) to (a). ``--workers`` is ``AnalyseConfig.workers`` (0: one
detection process per core this process may use, so ``taskset`` limits it).

Run: ``.venv/bin/python benchmarks/analyse_speed.py --runs 3`` (default clip
``sample_clips/bank_practice.mp4``, 720p60, 38 s).
"""

from __future__ import annotations

import argparse
import resource
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from railtrace.pipeline import AnalyseConfig, analyse_clip  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402
from vision.table import parse_table  # noqa: E402
from vision.video import iter_frames, probe  # noqa: E402


def _cpu_s() -> float:
    """Processor seconds used so far by this process and its finished worker processes (a
    shared machine's load stretches wall time far more than this)."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--clip", type=Path, default=ROOT / "sample_clips" / "bank_practice.mp4")
    ap.add_argument("--table", default="9ft", help="table for automatic calibration (default 9ft)")
    ap.add_argument("--calibration", type=Path, default=None, help="calibration file: skip automatic calibration")
    ap.add_argument("--workers", type=int, default=0)
    ap.add_argument("--runs", type=int, default=3)
    args = ap.parse_args(argv)
    info = probe(args.clip)
    if args.calibration is not None:
        table = read_calibration(args.calibration)[0]
    else:
        table = parse_table(args.table, None)
    # workers 0 leaves the pipeline's default (so the script also times revisions before it).
    extra = {"workers": args.workers} if args.workers else {}
    config = AnalyseConfig(table=table, calibration_path=args.calibration, **extra)
    dec, full = [], []
    work = Path(tempfile.mkdtemp(prefix="analyse_speed."))
    try:
        for k in range(args.runs):
            t0 = time.perf_counter()
            n = sum(1 for _ in iter_frames(args.clip))
            dec.append(n / (time.perf_counter() - t0))
            out = work / f"run{k}"
            t0, c0 = time.perf_counter(), _cpu_s()
            summary = analyse_clip(args.clip, out, config)
            secs = time.perf_counter() - t0
            cpu = _cpu_s() - c0
            full.append(n / secs)
            shutil.rmtree(out)
            stages = ", ".join(f"{k} {v:.1f}" for k, v in getattr(summary, "stage_seconds", {}).items())
            print(f"run {k}: decode {dec[-1]:7.1f} frames/s; analyse {secs:6.1f} s = {full[-1]:6.1f} frames/s, {cpu:.1f} processor s ({stages or 'no stage times'})", flush=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    d, f = statistics.median(dec), statistics.median(full)
    print(f"clip {args.clip.name}: {info.width}x{info.height} at {info.fps:g} fps, {n} frames ({info.duration_s:.1f} s); "
          f"calibration {'from file' if args.calibration else 'automatic'}, workers {args.workers or 'one per core'}")
    print(f"median decode only {d:.1f} frames/s; analyse {f:.1f} frames/s = {f / info.fps:.2f}x real time, {f / d:.2f} of decode-only speed")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
