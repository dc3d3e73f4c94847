"""Seconds to write the report and record the history for a 100-shot session. Target: under 30 s.

The session is the bundled bank_practice truth folder (6 shots, 60 fps) repeated end to end in
time until it holds ``--shots`` shots: tracks, events and shots shifted in time and renumbered,
so each shot has the real number of positions and events of a 60 fps clip. The cushion check is
computed by the report (no cushions.csv in the folder), as it would be after ``analyse``.

    .venv/bin/python benchmarks/report_speed.py [--shots 100] [--runs 3]
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from railtrace.history import record_analysis  # noqa: E402
from railtrace.report_cmd import write_report  # noqa: E402


def make_session(out: Path, n_shots: int) -> Path:
    """A results folder of ``n_shots`` shots built from bank_practice.truth (see module doc)."""
    src = ROOT / "sample_clips" / "bank_practice.truth"
    tr, ev, sh = (pd.read_csv(src / n) for n in ("tracks.csv", "events.csv", "shots.csv"))
    span = float(tr["t"].max()) + 1.0
    frames = int(tr["frame"].max()) + 1
    reps = -(-n_shots // len(sh))
    T, E, S = [], [], []
    for k in range(reps):
        T.append(tr.assign(t=tr["t"] + k * span, frame=tr["frame"] + k * frames))
        E.append(ev.assign(t=ev["t"] + k * span, shot=ev["shot"] + k * len(sh)))
        S.append(sh.assign(t_start=sh["t_start"] + k * span, t_end=sh["t_end"] + k * span, shot=sh["shot"] + k * len(sh)))
    tracks = pd.concat(T, ignore_index=True)
    shots = pd.concat(S, ignore_index=True).head(n_shots)
    events = pd.concat(E, ignore_index=True)
    events = events[events["shot"] < n_shots].reset_index(drop=True).assign(event=lambda d: range(len(d)))
    tracks = tracks[tracks["t"] <= shots["t_end"].max() + 0.5]
    out.mkdir(parents=True)
    tracks.to_csv(out / "tracks.csv", index=False, float_format="%.6f")
    events.to_csv(out / "events.csv", index=False, float_format="%.6f")
    shots.to_csv(out / "shots.csv", index=False, float_format="%.6f")
    shutil.copyfile(src / "calibration.json", out / "calibration.json")
    (out / "run.json").write_text(json.dumps({"railtrace_version": "bench", "clip": str(ROOT / "sample_clips" / "bank_practice.mp4")}))
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--shots", type=int, default=100)
    ap.add_argument("--runs", type=int, default=3)
    args = ap.parse_args()
    totals = []
    with tempfile.TemporaryDirectory() as tmp:
        folder = make_session(Path(tmp) / "session", args.shots)
        n_tracks = len((folder / "tracks.csv").read_text().splitlines()) - 1
        print(f"session: {args.shots} shots, {n_tracks} track rows")
        for r in range(args.runs):
            (folder / "report.html").unlink(missing_ok=True)
            t0 = time.perf_counter()
            path = write_report(folder)
            t1 = time.perf_counter()
            rec = record_analysis(Path(tmp) / f"h{r}.sqlite", folder, player="bench")
            t2 = time.perf_counter()
            totals.append(t2 - t0)
            print(f"run {r + 1}: report {t1 - t0:.1f} s ({path.stat().st_size / 1e6:.1f} MB), "
                  f"history {t2 - t1:.2f} s ({rec.shots} shots, {rec.events} events); total {t2 - t0:.1f} s")
    med = statistics.median(totals)
    print(f"median total {med:.1f} s (target under 30 s): {'ok' if med < 30 else 'TOO SLOW'}")
    return 0 if med < 30 else 1


if __name__ == "__main__":
    sys.exit(main())
