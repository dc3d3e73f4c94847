"""Whole ``railtrace analyse`` speed against plain decoding of the same clip.

Times, in the same run and alternating, ``--runs`` times each: (a) plain decoding of the clip
to (H, W, 3) uint8 BGR frames, what the detector consumes (``vision.video.iter_frames`` with
its defaults: FFmpeg's own decoding threads and, where there is a spare core, our read-ahead
thread, as calibration and single-process detection use it), and (b)
``railtrace.pipeline.analyse_clip`` into a fresh folder: automatic calibration (as
``railtrace analyse`` does without ``--calibration``; ``--calibration FILE`` skips it),
detection, tracking, events and the results folder (not the HTML report or the history).
Prints each run (with the processor seconds of this process and its workers, and each
stage's wall and processor seconds) and the medians: frames per second, the ratio to real time (clip duration over
wall time) and the ratio of (b) to (a). ``--workers`` sets ``AnalyseConfig.workers`` (0: one
detection process per core this process may use, so ``taskset`` limits it; default: the
pipeline's default: one per core; revisions before it used one process). Beside wall time (which five jobs sharing two cores
stretch at will) it prints the median processor time of decoding and of the analysis: clip
duration over processor seconds is the speed on one fully used core, times ``--cores`` the
best the analysis could do with that many idle cores. Each run also prints the machine's load
(1-minute load average) as it ended, to say how far other jobs stretched its wall time.

Run: ``.venv/bin/python benchmarks/analyse_speed.py --runs 3`` (default clip
``sample_clips/bank_practice.mp4``, 720p60, 38 s).
"""

from __future__ import annotations

import argparse
import os
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
    ap.add_argument("--workers", type=int, default=None, help="AnalyseConfig.workers (default: the pipeline's own)")
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--cores", type=int, default=2, help="cores for the processor-time bound on real time (default 2)")
    args = ap.parse_args(argv)
    info = probe(args.clip)
    if args.calibration is not None:
        table = read_calibration(args.calibration)[0]
    else:
        table = parse_table(args.table, None)
    # No --workers leaves the pipeline's default (so the script also times revisions before it).
    extra = {} if args.workers is None else {"workers": args.workers}
    config = AnalyseConfig(table=table, calibration_path=args.calibration, **extra)
    dec, full, dec_cpu, proc = [], [], [], []
    work = Path(tempfile.mkdtemp(prefix="analyse_speed."))
    try:
        for k in range(args.runs):
            t0, c0 = time.perf_counter(), _cpu_s()
            n = sum(1 for _ in iter_frames(args.clip))
            dec.append(n / (time.perf_counter() - t0))
            dec_cpu.append(_cpu_s() - c0)
            out = work / f"run{k}"
            t0, c0 = time.perf_counter(), _cpu_s()
            summary = analyse_clip(args.clip, out, config)
            secs = time.perf_counter() - t0
            cpu = _cpu_s() - c0
            full.append(n / secs)
            shutil.rmtree(out)
            stages = ", ".join(f"{k} {v:.1f}" for k, v in getattr(summary, "stage_seconds", {}).items())
            cpus = ", ".join(f"{k} {v:.1f}" for k, v in getattr(summary, "stage_cpu_seconds", {}).items())
            proc.append(cpu)
            load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
            print(f"run {k}: decode {dec[-1]:7.1f} frames/s ({dec_cpu[-1]:.1f} processor s); analyse {secs:6.1f} s = {full[-1]:6.1f} frames/s, "
                  f"{cpu:.1f} processor s (wall s: {stages or 'no stage times'}; processor s: {cpus or 'not reported'}); "
                  f"machine load {load:.1f} (1-min average, {os.cpu_count()} cores)", flush=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    d, f = statistics.median(dec), statistics.median(full)
    print(f"clip {args.clip.name}: {info.width}x{info.height} at {info.fps:g} fps, {n} frames ({info.duration_s:.1f} s); "
          f"calibration {'from file' if args.calibration else 'automatic'}, workers {'default' if args.workers is None else args.workers or 'one per core'}")
    print(f"median decode only {d:.1f} frames/s; analyse {f:.1f} frames/s = {f / info.fps:.2f}x real time, {f / d:.2f} of decode-only speed")
    pc, dc = statistics.median(proc), statistics.median(dec_cpu)
    print(f"median processor time: decode only {dc:.1f} s, analyse {pc:.1f} s = {info.duration_s / pc:.2f}x real time per core "
          f"({info.duration_s / pc * args.cores:.2f}x on {args.cores} cores if all were busy), {dc / pc:.2f} of decode-only")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
