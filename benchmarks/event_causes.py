"""Where each contact's error comes from: the detections, or the event finder itself.

For every truth cushion contact and collision of a clip (rendered, with a truth folder), this
prints one row with

* the results' errors as ``benchmarks/score.py`` matches them (time in frame intervals, along
  the rail mm, speed in/out %, angle in/out degrees, restitution; a collision: found or not,
  time error);
* the detections around the contact: how many of the frames within ``--around`` seconds of it
  have a detection on the ball's track (``seen``, 0..1: a ball the detector loses near a contact
  leaves its fits a few samples), and the median and largest distance of those detections
  (``x_meas, y_meas`` of ``tracks.csv``) from the true centres (``det med``, ``det max``, mm);
* the same errors when the tracker and event finder run on the *true* positions of the ball at
  every frame the truth sees it, with Gaussian noise of ``--sd`` mm per axis added (stated as
  each detection's ``sigma_mm``), median of the absolute errors over ``--seeds``
  (``truth+noise``): what the finder does with detections as good as that.

A contact whose error is small on the true positions with noise and large on the detections is
the detector's (look at ``seen`` and ``det``); one whose error stays on the true positions is the
finder's or its thresholds' (a collision missed on noise-free truth is below what the finder
looks for). The noise is white, so correlated detection biases (a ball pulled toward its shadow
for a whole stretch) show as the detector's.

Inputs: ``--results DIR`` holds ``NAME/`` results folders with ``tracks.csv`` (``x_meas``,
``y_meas``) and ``events.csv`` (``benchmarks/analyse_accuracy.py --out``); ``--truth DIR`` holds
``NAME.truth/`` (the extra set's cache, or ``sample_clips``).

Run: ``.venv/bin/python benchmarks/event_causes.py NAME [NAME ...] --results DIR --truth DIR
[--sd 1.0] [--seeds 0 1 2] [--csv OUT]``, e.g. ``benchmarks/event_causes.py phone_wide_30fps
--results /work/base15/f --truth /tmp/railtrace_extra_clips``.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from benchmarks.score import collision_pairs, compare  # noqa: E402
from railtrace.results import write_results  # noqa: E402
from tracking.events import find_events  # noqa: E402
from tracking.tracker import track  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402

CUSHION_ERRORS = ("dt_frames", "along_mm", "speed_in_pct", "speed_out_pct", "angle_in_deg",
                  "angle_out_deg", "restitution")  # fmt: skip


def truth_detections(truth_tracks: pd.DataFrame, sd_mm: float, seed: int) -> pd.DataFrame:
    """Detections (``vision.detect.COLUMNS``) at the true centres of every seen truth row, with
    Gaussian noise of ``sd_mm`` per axis (``np.random.default_rng(seed)``) and that sd as
    ``sigma_mm`` (at least 0.15 mm, the tracker's least noise); written to micrometres, as
    ``analyse`` writes detections."""
    t = truth_tracks[truth_tracks["seen"] == 1].sort_values(["frame", "track"])
    rng = np.random.default_rng(seed)
    noise = rng.normal(0.0, sd_mm, (len(t), 2)) if sd_mm > 0 else np.zeros((len(t), 2))
    return pd.DataFrame({
        "frame": t["frame"].to_numpy(), "t": t["t"].to_numpy(),
        "x": np.round(t["x"].to_numpy() + noise[:, 0], 6),
        "y": np.round(t["y"].to_numpy() + noise[:, 1], 6),
        "u": 0.0, "v": 0.0, "quality": 1.0, "colour": "", "pattern": "unknown",
        "blur_x": 0.0, "blur_y": 0.0, "sigma_mm": max(sd_mm, 0.15),
    })


def _events_on(det: pd.DataFrame, truth: Path, out: Path) -> Path:
    """Tracker and event finder on ``det`` with the truth calibration, written to ``out``."""
    table, _, doc = read_calibration(truth / "calibration.json")
    tr = track(det, table)
    ev, sh = find_events(tr, table, det)
    write_results(out, tr, ev, sh, doc, overwrite=True)
    return out


def _collision_rows(c) -> dict[tuple, float]:
    """Each truth collision (row index of its first row) -> matched result's time error in
    frame intervals, or NaN when unmatched."""
    m = c.event_matches["collision"]
    found = dict(zip(m["truth_row"], m["dt_frames"]))
    return {int(r): float(found.get(r, np.nan)) for r in collision_pairs(c.truth_events).index}


def _cushion_rows(c) -> dict[int, dict]:
    """Each matched truth cushion contact (its row) -> its errors (:data:`CUSHION_ERRORS`)."""
    m = c.event_matches["cushion"]
    return {int(r): {k: float(m[k].iloc[i]) for k in CUSHION_ERRORS}
            for i, r in enumerate(m["truth_row"])}


def _around(c, truth_track: str, t: float, around_s: float) -> tuple[float, float, float]:
    """(share of the truth ball's frames within ``around_s`` of ``t`` with a detection on its
    matched result track, median and max detection error mm) from the results' ``x_meas``."""
    tt = c.truth_tracks
    rows = tt.index[(tt["track"] == truth_track) & (np.abs(tt["t"] - t) <= around_s)]
    if not len(rows) or "x_meas" not in c.result_tracks.columns:
        return np.nan, np.nan, np.nan
    m = c.track_matches.set_index("truth_row")
    m = m.loc[m.index.intersection(rows)]
    rt = c.result_tracks.loc[m["result_row"].to_numpy()]
    xm, ym = rt["x_meas"].to_numpy(float), rt["y_meas"].to_numpy(float)
    if c.frame == "rotated_180":  # the scorer turned x, y but not the raw detections
        xm, ym = c.length_mm - xm, c.width_mm - ym
    seen = np.isfinite(xm)
    err = np.hypot(xm - tt.loc[m.index, "x"].to_numpy(), ym - tt.loc[m.index, "y"].to_numpy())[seen]
    if not len(err):
        return 0.0, np.nan, np.nan
    return float(seen.sum()) / len(rows), float(np.median(err)), float(err.max())


def causes(name: str, results: Path, truth_root: Path, sd_mm: float, seeds: list[int],
           around_s: float) -> pd.DataFrame:
    """One row per truth cushion contact and collision of clip ``name`` (columns in the module
    docstring)."""
    truth = truth_root / f"{name}.truth"
    c = compare(results / name, truth)
    base_cu, base_co = _cushion_rows(c), _collision_rows(c)
    noisy_cu: list[dict] = []
    noisy_co: list[dict] = []
    tt = c.truth_tracks
    with tempfile.TemporaryDirectory(prefix="event_causes.") as tmp:
        for seed in seeds:
            out = _events_on(truth_detections(tt, sd_mm, seed), truth, Path(tmp) / f"s{seed}")
            cn = compare(out, truth)
            noisy_cu.append(_cushion_rows(cn))
            noisy_co.append(_collision_rows(cn))
    te = c.truth_events
    rows = []
    for r, errs in sorted(base_cu.items()) + [(r, None) for r in te.index
                                                 if te.loc[r, "kind"] == "cushion" and r not in base_cu]:
        e = te.loc[r]
        seen, med, mx = _around(c, e["track"], float(e["t"]), around_s)
        row = {"clip": name, "t": float(e["t"]), "kind": "cushion", "balls": e["track"],
               "rail": e["rail"], "speed_in": float(e["speed_in"]), "found": errs is not None,
               "seen": seen, "det med": med, "det max": mx}
        for k in CUSHION_ERRORS:
            row[k] = np.nan if errs is None else errs[k]
            vals = [abs(n[r][k]) for n in noisy_cu if r in n]
            row[f"{k} t+n"] = float(np.median(vals)) if vals else np.nan
        row["found t+n"] = sum(r in n for n in noisy_cu)
        rows.append(row)
    pairs = collision_pairs(te)
    for r, dt in base_co.items():
        a, b = pairs.loc[r, "a"], pairs.loc[r, "b"]
        t = float(pairs.loc[r, "t"])
        per_ball = [_around(c, ball, t, around_s) for ball in (a, b)]
        row = {"clip": name, "t": t, "kind": "collision", "balls": f"{a}-{b}", "rail": "",
               "speed_in": np.nan, "found": bool(np.isfinite(dt)),
               "seen": min(p[0] for p in per_ball),
               "det med": max(p[1] for p in per_ball), "det max": max(p[2] for p in per_ball),
               "dt_frames": dt}
        vals = [abs(n[r]) for n in noisy_co if np.isfinite(n.get(r, np.nan))]
        row["dt_frames t+n"] = float(np.median(vals)) if vals else np.nan
        row["found t+n"] = len(vals)
        rows.append(row)
    return pd.DataFrame(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("names", nargs="+", metavar="NAME")
    ap.add_argument("--results", type=Path, required=True, help="folder of NAME/ results folders")
    ap.add_argument("--truth", type=Path, required=True, help="folder of NAME.truth/ folders")
    ap.add_argument("--sd", type=float, default=1.0, help="noise added to the true centres, mm")
    ap.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2])
    ap.add_argument("--around", type=float, default=0.3,
                    help="seconds each side of a contact over which detections are counted")
    ap.add_argument("--csv", type=Path, default=None, help="also write the rows as CSV")
    args = ap.parse_args(argv)
    if not (args.sd >= 0 and args.around > 0):
        raise SystemExit("event_causes.py: --sd must be >= 0 and --around > 0")
    df = pd.concat([causes(n, args.results, args.truth, args.sd, args.seeds, args.around)
                    for n in args.names], ignore_index=True)
    with pd.option_context("display.width", 250, "display.max_columns", 40,
                           "display.float_format", "{:.3g}".format):
        print(f"truth+noise (t+n): true centres with {args.sd:g} mm noise, median |error| over "
              f"seeds {args.seeds}; found t+n: in how many of them the event was matched")
        print(df.to_string(index=False))
    if args.csv:
        df.to_csv(args.csv, index=False)
    return 0


if __name__ == "__main__":
    sys.exit(main())
