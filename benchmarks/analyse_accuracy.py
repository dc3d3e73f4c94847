"""Whole ``railtrace analyse`` on every sample clip (or the extra rendered set), scored against each clip's truth.

For each ``sample_clips/NAME.mp4`` this runs ``railtrace.pipeline.analyse_clip`` with the truth
folder's calibration (``AnalyseConfig(calibration_path=NAME.truth/calibration.json)``, so the
figures measure detection, tracking and events, not automatic calibration) into
``OUT/NAME`` and scores the results folder with ``benchmarks/score.py`` against
``NAME.truth``. Printed per clip, from the scorer (units: mm, ms, frame intervals, %, degrees):

* tracks: truth and result track counts, identity switches (CLEAR-MOT, Bernardin &
  Stiefelhagen 2008), recall and precision of ball-frames;
* position error median and p95 (all ball-frames, and resting ones);
* cushion contacts: recall, precision, median |error| of time (frames), along-rail position,
  speed in/out, angle in/out and restitution;
* collisions: recall, precision, median and max |time error| (frames);
* pockets: truth, results, matched; starts (a resting ball set moving by the cue) and stops (a
  ball coming to rest), as ``spec/results-format.md`` defines them: truth and result counts,
  recall (missed ones lower it) and precision (spurious ones lower it), within the scorer's
  event window;
* over the ball-frames the cue and arms leave fully visible (issue 3's "at least 99.5 % of
  frames where a ball is fully visible have it detected"; ``benchmarks/visibility.py``, the
  renderer's own occluder drawn over each frame's exposure): how many there are, the share
  with a detection within a ball radius and the share the scorer matched a track to (its
  ``track recall`` above counts every ball on the table, hidden ones too), the track recall of
  the partly hidden rest, and the false detections (farther than a ball radius from every
  truth ball), with how many lie on the occluder and in a pocket's mouth;
* seconds spent in tracking and in event finding (the vision stage is timed as a whole).

``--auto-calibration`` lets ``analyse`` calibrate each clip automatically from its own frames
instead (what footage from another camera gets), so the figures include the calibration's
errors; compare them with a default run. The calibration's focal length, camera height (and
where it came from: the view, or a typical mount height for a square-on view) and stated
ball-position sd are printed beside the scores; a clip the calibration refuses is listed with
its message instead of scores.

``--reuse DIR`` skips the vision stage: it re-runs tracking and events (and holds each stay at
rest at one place, ``tracking.rests``, as ``analyse`` does) on ``DIR/NAME/detections.csv``
written by an earlier run (same clip, same calibration), which is how the
tracking and event stages are compared before and after a change while the detector stays
fixed.

``--extra`` scores the extra rendered set instead of the sample clips: the scenes in
``benchmarks/extra_scenes/*.toml`` (our own, seven short clips that together vary camera height
1.6-3.2 m, off-centre and tilted mounts, a wide phone lens with strong barrel distortion, a cheap
wide camera with stronger, and a longer nearly rectilinear lens, 540p to 1080p, 25, 30, 50, 60 and
120 fps, shutters from 1/500 s to open at 1/25 s, ball speeds up to 4 m/s with banks, kicks,
cuts, a break into a touching rack, collisions and pockets, six cloths, bright, dim, uneven and
one-lamp lighting). Each is filmed once (``railtrace.filming.film_scene``) into
``--extra-cache`` (default ``/tmp/railtrace_extra_clips``) and filmed again only when its scene
file changes; ``--clips`` then picks among the scene names. Each clip's frame rate, shutter,
camera height and k1 are printed above its scores. These clips stand in for footage from other
cameras: tune nothing to them alone.

Besides the issue's figures, the moving and resting position errors (median and p95) are
printed for the targets of issue "Find every ball to the millimetre" (resting median <= 1 mm,
p95 <= 2.5; moving at 60 fps and 1/250 s median <= 3 mm, p95 <= 8).

Run: ``.venv/bin/python benchmarks/analyse_accuracy.py [--out DIR] [--clips NAME ...]
[--extra [--extra-cache DIR]] [--auto-calibration] [--reuse DIR] [--json FILE]``. Targets (issue
"Follow every ball and time every contact") are printed beside the figures.
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from benchmarks.score import compare, summarise  # noqa: E402
from benchmarks.visibility import recall_where_visible  # noqa: E402
from railtrace.filming import film_scene  # noqa: E402
from railtrace.pipeline import AnalyseConfig, analyse_clip  # noqa: E402
from railtrace.results import write_results  # noqa: E402
from railtrace.scene import Scene, load_scene  # noqa: E402
from tracking.events import find_events_and_rests  # noqa: E402
from tracking.rests import hold_rests  # noqa: E402
from tracking.tracker import track  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402
from vision.calibrate import CalibrationError  # noqa: E402

SAMPLES = ROOT / "sample_clips"
EXTRA_SCENES = ROOT / "benchmarks" / "extra_scenes"
EXTRA_CACHE = Path("/tmp/railtrace_extra_clips")
TARGETS = ("targets: id switches 0; position median <= 3 mm; cushion recall/precision >= 0.98, "
           "time median <= 0.25 frame, along median <= 4 mm (p95 <= 12), speed <= 3 %, angle <= 1 deg, "
           "restitution <= 0.03; collision recall >= 0.95, time within 0.5 frame; all pockets; "
           "resting median <= 1 mm, p95 <= 2.5; moving (60 fps, 1/250 s) median <= 3 mm, p95 <= 8")


def clips(names: list[str] | None) -> list[str]:
    """Sample clip names (stems with both ``.mp4`` and ``.truth``), all or the chosen ones."""
    have = sorted(p.stem for p in SAMPLES.glob("*.mp4") if (SAMPLES / f"{p.stem}.truth").is_dir())
    return _chosen(names, have, "sample clip")


def extra_scenes(names: list[str] | None) -> list[str]:
    """Names of the extra rendered set (stems of ``benchmarks/extra_scenes/*.toml``), all or the
    chosen ones."""
    return _chosen(names, sorted(p.stem for p in EXTRA_SCENES.glob("*.toml")), "extra scene")


def _chosen(names: list[str] | None, have: list[str], what: str) -> list[str]:
    if not names:
        return have
    bad = [n for n in names if n not in have]
    if bad:
        raise SystemExit(f"analyse_accuracy.py: no {what} {bad}; have {have}")
    return names


def film_cached(name: str, cache: Path) -> Scene:
    """Film extra scene ``name`` into ``cache/NAME.mp4`` and ``cache/NAME.truth`` unless the
    cached truth folder holds the same scene text (the scene file is its recipe); the scene."""
    path = EXTRA_SCENES / f"{name}.toml"
    scene = load_scene(path)
    kept = cache / f"{name}.truth" / "scene.toml"
    if (cache / f"{name}.mp4").is_file() and kept.is_file() and kept.read_text(encoding="utf-8") == scene.source_text:
        return scene
    cache.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    film_scene(scene, cache / f"{name}.mp4")
    print(f"{name}: filmed in {time.perf_counter() - t0:.0f} s", flush=True)
    return scene


def scene_figures(scene: Scene) -> dict:
    """What the extra clip varies: frame rate, shutter (1/s), camera height (mm), k1, table."""
    return {
        "fps": scene.film.fps,
        "shutter 1/s": round(1 / scene.film.shutter_s),
        "camera height mm": round(float(scene.camera.centre_mm[2])),
        "k1": scene.camera.dist[0],
        "table": scene.table.name,
    }


def run_clip(name: str, folder: Path, out: Path, reuse: Path | None, auto: bool = False) -> dict:
    """Analyse ``folder/NAME.mp4`` into ``out`` (replaced if present), with the truth calibration
    of ``folder/NAME.truth`` or (``auto``) automatic calibration; seconds per stage."""
    truth = folder / f"{name}.truth"
    calib = truth / "calibration.json"
    table, _, calib_doc = read_calibration(calib)
    if out.exists():
        shutil.rmtree(out)
    timing = {}
    if reuse is None:
        t0 = time.perf_counter()
        analyse_clip(folder / f"{name}.mp4", out,
                     AnalyseConfig(table=table) if auto else AnalyseConfig(table=table, calibration_path=calib))
        timing["analyse_s"] = time.perf_counter() - t0
        det = pd.read_csv(out / "detections.csv", dtype={"colour": str, "pattern": str})
    else:
        det = pd.read_csv(reuse / name / "detections.csv",
                          dtype={"colour": str, "pattern": str})
    # Tracking and events timed on their own (again, after a full run), on the same detections.
    t0 = time.perf_counter()
    tr = track(det, table)
    timing["track_s"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    ev, sh, rests = find_events_and_rests(tr, table, det)
    tr = hold_rests(tr, rests, det)
    timing["events_s"] = time.perf_counter() - t0
    if reuse is not None:
        write_results(out, tr, ev, sh, calib_doc, overwrite=True,
                      run_info={"reused_detections": str(reuse / name)})
    return timing


def calibration_figures(results: Path, truth: Path) -> dict:
    """The automatic calibration beside the truth: focal length (px), camera height (mm, and
    where it came from), the stated ball-position sd (mm) and the largest ball-centre map error
    (mm) over an 11 x 6 grid of ball centres (height R) imaged by the true camera and
    back-projected by the found one."""
    import numpy as np

    table, got, doc = read_calibration(results / "calibration.json")
    _, true, _ = read_calibration(truth / "calibration.json")
    q = doc.get("quality", {})
    R = table.radius_mm
    gx, gy = np.meshgrid(np.linspace(R, table.length_mm - R, 11), np.linspace(R, table.width_mm - R, 6))
    P = np.column_stack([gx.ravel(), gy.ravel(), np.full(gx.size, R)])
    back = got.backproject(true.project(P), R)[:, :2]
    # The found origin may sit at the opposite corner (both right-handed); take the match.
    err = min((np.linalg.norm(b - P[:, :2], axis=1) for b in (back, [table.length_mm, table.width_mm] - back)),
              key=lambda e: float(np.median(e)))
    return {
        "calib focal px (true)": f"{got.K[0, 0]:.0f} ({true.K[0, 0]:.0f})",
        "calib height mm (true)": f"{got.centre_mm[2]:.0f} ({true.centre_mm[2]:.0f}) from {q.get('height_from', '?')}",
        "calib ball sd mm (stated)": q.get("ball_position_sd_mm"),
        "calib ball map max mm": float(err.max()),
    }


def key_figures(s: dict) -> dict:
    """The scorer's key figures (a flat dict) from a :func:`benchmarks.score.score` dict."""
    tr, pos, ev = s["tracks"], s["position_error_mm"], s["events"]
    cu, co = ev["cushion"], ev["collision"]
    ce = cu["errors"]
    return {
        "tracks truth/result": f"{tr['truth_tracks']}/{tr['result_tracks']}",
        "id switches": tr["id_switches"],
        "track recall": tr["recall"], "track precision": tr["precision"],
        "position median mm": pos["all"]["median"], "position p95 mm": pos["all"]["p95"],
        "resting median mm": pos["resting"]["median"], "resting p95 mm": pos["resting"]["p95"],
        "moving median mm": pos["moving"]["median"], "moving p95 mm": pos["moving"]["p95"],
        "cushion truth/result": f"{cu['truth']}/{cu['results']}",
        "cushion recall": cu["recall"], "cushion precision": cu["precision"],
        "cushion |t| med frames": ce["time_frames"]["median_abs"],
        "cushion along med mm": ce["along_mm"]["median_abs"],
        "cushion along p95 mm": ce["along_mm"]["p95_abs"],
        "speed_in med %": ce["speed_in_pct"]["median_abs"],
        "speed_out med %": ce["speed_out_pct"]["median_abs"],
        "angle_in med deg": ce["angle_in_deg"]["median_abs"],
        "angle_out med deg": ce["angle_out_deg"]["median_abs"],
        "restitution med": ce["restitution"]["median_abs"],
        "collision truth/result": f"{co['truth']}/{co['results']}",
        "collision recall": co["recall"], "collision precision": co["precision"],
        "collision |t| med frames": co["errors"]["time_frames"]["median_abs"],
        "collision |t| max frames": co["errors"]["time_frames"]["max_abs"],
        "pockets truth/result/matched":
            f"{ev['pocket']['truth']}/{ev['pocket']['results']}/{ev['pocket']['matched']}",
        "start truth/result": f"{ev['start']['truth']}/{ev['start']['results']}",
        "start recall": ev["start"]["recall"], "start precision": ev["start"]["precision"],
        "stop truth/result": f"{ev['stop']['truth']}/{ev['stop']['results']}",
        "stop recall": ev["stop"]["recall"], "stop precision": ev["stop"]["precision"],
    }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=None,
                    help="folder for the results folders (default: a temporary one, removed)")
    ap.add_argument("--clips", nargs="+", default=None,
                    help="sample clip names, or extra scene names with --extra (default all)")
    ap.add_argument("--extra", action="store_true",
                    help="score the extra rendered set (benchmarks/extra_scenes, filmed once and cached)")
    ap.add_argument("--extra-cache", type=Path, default=EXTRA_CACHE,
                    help="folder of the filmed extra clips (default %(default)s)")
    ap.add_argument("--reuse", type=Path, default=None,
                    help="re-run tracking and events on DIR/NAME/detections.csv")
    ap.add_argument("--auto-calibration", action="store_true",
                    help="calibrate each clip automatically instead of using its truth calibration")
    ap.add_argument("--json", type=Path, default=None, help="also write the figures as JSON")
    args = ap.parse_args(argv)
    names = extra_scenes(args.clips) if args.extra else clips(args.clips)
    folder = args.extra_cache if args.extra else SAMPLES
    tmp = None
    out_root = args.out
    if out_root is None:
        tmp = tempfile.mkdtemp(prefix="analyse_accuracy.")
        out_root = Path(tmp)
    out_root.mkdir(parents=True, exist_ok=True)
    table = {}
    try:
        for name in names:
            figs = scene_figures(film_cached(name, folder)) if args.extra else {}
            try:
                timing = run_clip(name, folder, out_root / name, args.reuse, args.auto_calibration)
            except CalibrationError as exc:
                # A refusal is a result too (footage the calibration cannot read); say so and go on.
                figs["calibration"] = "refused (message above)"
                table[name] = figs
                print(f"{name}: automatic calibration refused: {exc}", flush=True)
                continue
            c = compare(out_root / name, folder / f"{name}.truth")
            figs.update(key_figures(summarise(c)))
            dets = (args.reuse if args.reuse is not None else out_root) / name / "detections.csv"
            figs.update(recall_where_visible(folder / f"{name}.truth", dets,
                                             c.track_matches["truth_row"].to_numpy()))
            if args.auto_calibration:
                figs.update(calibration_figures(out_root / name, folder / f"{name}.truth"))
            figs.update({k: round(v, 1) for k, v in timing.items()})
            table[name] = figs
            print(f"{name}: done ({', '.join(f'{k} {v:.1f}' for k, v in timing.items())})",
                  flush=True)
    finally:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
    df = pd.DataFrame(table)
    with pd.option_context("display.max_rows", 100, "display.width", 160,
                           "display.float_format", "{:.3g}".format):
        print(df.to_string())
    print(TARGETS)
    if args.json:
        args.json.write_text(json.dumps(table, indent=2, default=str) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
