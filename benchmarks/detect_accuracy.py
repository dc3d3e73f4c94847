"""Ball-detection accuracy on varied filmed scenes, against the renderer's truth.

Films (once, into ``--work``) a set of short scenes that differ in camera height, offset, roll
and lens distortion, image size, cloth colour, lights, noise, compression, frame rate, shutter
and ball speed (up to 4 m/s); runs :func:`vision.detect.detect_clip` with the true camera from
each truth folder; matches detections to truth balls per frame (Hungarian assignment within a
gate of one ball radius); prints

* resting-ball centre error, median and p95 (mm);
* moving-ball centre error, median and p95 (mm), per frame rate and shutter;
* detection rate over the frames where a ball is fully visible (not under the cue or arms: the
  occluder's image footprint, from the scene's strokes and the renderer's own occluder model);
* false detections: all, and how many lie on the occluder or in a pocket;
* how the stated ``sigma_mm`` matches the errors, for resting balls, moving balls and balls
  within a ball's diameter of a cushion nose: the median |error / sigma| per axis and the
  shares beyond 3 and 5 sigma (a standard normal: 0.67, 0.27 %, 0.00006 %).

With ``--clip NAME`` it instead runs the detector on frames ``--frames FIRST LAST`` of the
sample clip ``sample_clips/NAME.mp4`` (true camera from ``NAME.truth``) and counts detections
farther than a ball radius from every true ball of their frame (false detections: in the sample
clips these lie on the cue, hands and arms or in pockets, as no other objects are filmed) and
true balls with no detection within a ball radius (missed; under the occluder too), and prints
the detector's time per frame (median and mean, ms).

With ``--by-ball`` the resting balls' errors are also broken down per scene and ball (frames,
median and p95 error, median x and y components, truth position, pattern, gaps to the nearest
other ball and cushion), worst first, and summed up for the balls clear of both by over 10 mm
and for the rest (touching, frozen to a cushion or nearly so): a
resting ball is detected once and carried over while nothing near it changes, so each ball is
nearly one measurement and the median over balls rests on a handful of them.

With ``--crf N`` every scene is filmed at H.264 constant rate factor N instead of its own
quality (into ``WORK/crfN``): ``--crf 0`` is lossless but keeps the 4:2:0 chroma sampling, so
the difference from the default run is what the compression costs the detector.

With ``--save DIR`` each scene's per-ball-frame table (truth ball id and position, error and its
x, y components, gaps to the nearest other ball and cushion, mm) and its detections are written
to ``DIR`` as CSV, for breakdowns.

Run: ``.venv/bin/python benchmarks/detect_accuracy.py [--work DIR] [--only NAME ...] [--save DIR]
[--by-ball] [--crf N]`` or
``.venv/bin/python benchmarks/detect_accuracy.py --clip cushion_check --frames 0 1200``.
"""

from __future__ import annotations

import argparse
import re
import sys
import time
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from benchmarks.visibility import POCKET_MM, match_frame  # noqa: E402
from railtrace.filming import film_scene, simulate_scene  # noqa: E402
from railtrace.scene import parse_scene  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402

# Scenes of our own invention. Each is short; together they vary what held-out footage varies.
SCENES = {
    "green_60fps_250": """
name = "green 60 fps 1/250 s, 4 m/s"
lead_s = 0.5
tail_s = 0.2
max_duration_s = 2.2
seed = 3
[table]
preset = "9ft"
[camera]
height_mm = 2600
offset_mm = [150, -100]
roll_deg = 1.5
resolution = [1280, 720]
fps = 60
shutter_s = 0.004
distortion = [-0.12, 0.02, 0.0004, -0.0003, 0.0]
quality = 23
[look]
noise = 2.0
occluder = true
[[ball]]
id = "cue"
kind = "cue"
at = [500, 640]
[[ball]]
id = "1"
kind = "solid"
colour = "#e0b020"
at = [1300, 300]
[[ball]]
id = "11"
kind = "stripe"
colour = "#c42a1f"
at = [2200, 1000]
[[ball]]
id = "8"
kind = "solid"
colour = "#202020"
at = [2400, 1170]
[[ball]]
id = "4"
kind = "solid"
colour = "#5b2a86"
at = [1900, 200]
[[ball]]
id = "12"
kind = "stripe"
colour = "#5b2a86"
at = [1900, 257.5]
[[shot]]
ball = "cue"
aim = { heading_deg = 8.0 }
speed_mm_s = 4000
""",
    "blue_60fps_60": """
name = "blue cloth, low wide camera, 60 fps 1/60 s"
lead_s = 0.5
tail_s = 0.2
max_duration_s = 2.2
seed = 5
[table]
preset = "9ft"
[camera]
height_mm = 1800
offset_mm = [-200, 120]
roll_deg = -4.0
resolution = [1280, 720]
fps = 60
shutter_s = 0.0166
distortion = [-0.28, 0.08, 0.0, 0.0, -0.01]
quality = 25
[look]
cloth = "#1d4f9a"
noise = 3.0
exposure = 1.2
lamps = [[700, 635, 1000], [1840, 635, 1100]]
occluder = true
[[ball]]
id = "cue"
kind = "cue"
at = [700, 400]
[[ball]]
id = "5"
kind = "solid"
colour = "#e2701c"
at = [1600, 900]
[[ball]]
id = "14"
kind = "stripe"
colour = "#1f7a3a"
at = [2000, 500]
[[ball]]
id = "2"
kind = "solid"
colour = "#1d4fb0"
at = [400, 1000]
[[ball]]
id = "9"
kind = "stripe"
colour = "#e0b020"
at = [2511, 640]
[[shot]]
ball = "cue"
aim = { heading_deg = 160.0 }
speed_mm_s = 3500
""",
    "red_30fps_1080": """
name = "red cloth, high camera, 1080p 30 fps 1/30 s"
lead_s = 0.5
tail_s = 0.3
max_duration_s = 2.4
seed = 9
[table]
preset = "9ft"
[camera]
height_mm = 3500
offset_mm = [300, 200]
roll_deg = 3.0
resolution = [1920, 1080]
fps = 30
shutter_s = 0.0333
distortion = [-0.05, 0.0, 0.0, 0.0, 0.0]
quality = 28
[look]
cloth = "#8a1e22"
noise = 2.0
exposure = 0.8
occluder = true
[[ball]]
id = "cue"
kind = "cue"
at = [1800, 300]
[[ball]]
id = "3"
kind = "solid"
colour = "#c42a1f"
at = [800, 800]
[[ball]]
id = "10"
kind = "stripe"
colour = "#1d4fb0"
at = [400, 300]
[[ball]]
id = "6"
kind = "solid"
colour = "#1f7a3a"
at = [1200, 1100]
[[shot]]
ball = "cue"
aim = { heading_deg = 200.0 }
speed_mm_s = 3000
""",
    "tan_grey_touching": """
name = "tan cloth, touching balls, dim light, 60 fps 1/250 s"
lead_s = 0.6
tail_s = 0.3
max_duration_s = 2.2
seed = 13
[table]
preset = "8ft"
[camera]
height_mm = 2200
offset_mm = [0, 0]
roll_deg = 0.0
resolution = [1280, 720]
fps = 60
shutter_s = 0.004
distortion = [-0.2, 0.05, 0.0, 0.0, 0.0]
quality = 23
[look]
cloth = "#b09a6a"
noise = 4.0
exposure = 0.7
ambient = 0.5
occluder = true
[[ball]]
id = "cue"
kind = "cue"
at = [500, 584]
[[ball]]
id = "1"
kind = "solid"
colour = "#e0b020"
at = [1500, 584]
[[ball]]
id = "9"
kind = "stripe"
colour = "#e0b020"
at = [1557.2, 584]
[[ball]]
id = "13"
kind = "stripe"
colour = "#e2701c"
at = [1528.6, 633.5]
[[ball]]
id = "7"
kind = "solid"
colour = "#7a2b1a"
at = [2000, 1139.8]
[[ball]]
id = "15"
kind = "stripe"
colour = "#7a2b1a"
at = [300, 28.6]
[[shot]]
ball = "cue"
aim = { heading_deg = 30.0 }
speed_mm_s = 2500
""",
    "grey_240fps": """
name = "grey cloth, 240 fps 1/1000 s"
lead_s = 0.3
tail_s = 0.1
max_duration_s = 1.0
seed = 21
[table]
preset = "9ft"
[camera]
height_mm = 3000
offset_mm = [0, 0]
resolution = [1280, 720]
fps = 240
shutter_s = 0.001
quality = 20
[look]
cloth = "#6e7276"
noise = 5.0
exposure = 1.4
occluder = false
[[ball]]
id = "cue"
kind = "cue"
at = [700, 635]
[[ball]]
id = "8"
kind = "solid"
colour = "#202020"
at = [1800, 635]
[[shot]]
ball = "cue"
aim = { heading_deg = 0.0 }
speed_mm_s = 4000
""",
}


def film(work: Path, names: list[str], scenes: dict = SCENES) -> None:
    """Film each named scene of ``scenes`` (name -> scene text) into ``work`` unless its clip is
    already there."""
    work.mkdir(parents=True, exist_ok=True)
    for name in names:
        clip = work / f"{name}.mp4"
        if not clip.exists():
            text = scenes[name]
            film_scene(parse_scene(tomllib.loads(text), source_text=text), clip)


def occluded(scene_text: str, table, truth: pd.DataFrame) -> np.ndarray:
    """(len(truth),) bool: the ball may be under the cue or arms in that frame: a stroke is
    active (the renderer's ``Occluder`` window, 1.2 s before to 0.6 s after the strike) and the
    ball lies within 150 mm of the cue's line behind the struck ball (cue, bridge hand and
    forearm) or within 250 mm of the struck ball."""
    scene = parse_scene(tomllib.loads(scene_text), source_text=scene_text)
    sim = simulate_scene(scene)
    out = np.zeros(len(truth), bool)
    p = truth[["x", "y"]].to_numpy()
    t = truth["t"].to_numpy()
    for r in sim.shots:
        active = (t >= r.t_strike - 1.2) & (t <= r.t_strike + 0.6)
        b = np.array(r.ball_xy_mm)
        u = np.array([np.cos(r.heading_rad), np.sin(r.heading_rad)])
        rel = p - b
        along = -(rel @ u)
        across = np.abs(rel @ np.array([-u[1], u[0]]))
        near_cue = (along > -60) & (across < 150)
        out |= active & (near_cue | (np.linalg.norm(rel, axis=1) < 250))
    return out


def evaluate(name: str, work: Path, save: Path | None = None, scenes: dict = SCENES) -> dict:
    """Detect on one filmed scene and match to its truth; returns per-ball-frame errors and
    counts. ``save``: a folder to write the per-ball-frame table (``NAME.errors.csv``: truth
    ball id and position beside the error) and the detections (``NAME.detections.csv``) to."""
    from vision.detect import detect_clip

    clip = work / f"{name}.mp4"
    truth_dir = work / f"{name}.truth"
    table, camera, _ = read_calibration(truth_dir / "calibration.json")
    t0 = time.perf_counter()
    det = detect_clip(clip, camera, table)
    elapsed = time.perf_counter() - t0
    tr = pd.read_csv(truth_dir / "tracks.csv")
    tr["hidden"] = occluded(scenes[name], table, tr)
    scene = parse_scene(tomllib.loads(scenes[name]))
    gate = table.radius_mm
    rows, false_rows = [], []
    by_frame = {f: g for f, g in det.groupby("frame")}
    for f, g in tr.groupby("frame"):
        d = by_frame.get(f)
        P = g[["x", "y"]].to_numpy()
        ball_gap, rail_gap = _gaps(P, table)
        matched_t, matched_d = set(), set()
        if d is not None and len(d):
            Q = d[["x", "y"]].to_numpy()
            for a, b in match_frame(P, Q, gate):
                matched_t.add(a)
                matched_d.add(b)
                rows.append((f, g["label"].iloc[a], float(np.hypot(g["vx"].iloc[a], g["vy"].iloc[a])), float(np.linalg.norm(P[a] - Q[b])), bool(g["hidden"].iloc[a]), d["pattern"].iloc[b], g["pattern"].iloc[a], P[a, 0], P[a, 1], Q[b, 0] - P[a, 0], Q[b, 1] - P[a, 1], d["sigma_mm"].iloc[b], ball_gap[a], rail_gap[a]))
            for b in set(range(len(Q))) - matched_d:
                false_rows.append((f, Q[b, 0], Q[b, 1], bool(g["hidden"].any())))
        for a in set(range(len(P))) - matched_t:
            rows.append((f, g["label"].iloc[a], float(np.hypot(g["vx"].iloc[a], g["vy"].iloc[a])), np.nan, bool(g["hidden"].iloc[a]), "", g["pattern"].iloc[a], P[a, 0], P[a, 1], np.nan, np.nan, np.nan, ball_gap[a], rail_gap[a]))
    E = pd.DataFrame(rows, columns=["frame", "ball", "speed", "err", "hidden", "pattern", "true_pattern", "x", "y", "dx", "dy", "sigma_mm", "ball_gap", "rail_gap"])
    # Distance (mm) of the true centre from the nearest cushion nose line.
    E["nose_mm"] = np.minimum(np.minimum(E["x"], table.length_mm - E["x"]), np.minimum(E["y"], table.width_mm - E["y"]))
    F = pd.DataFrame(false_rows, columns=["frame", "x", "y", "occluder_active"])
    pockets = np.array([p.mouth_centre for p in table.pockets()])
    if len(F):
        dp = np.linalg.norm(F[["x", "y"]].to_numpy()[:, None] - pockets[None], axis=2).min(axis=1)
        F["pocket"] = dp < POCKET_MM
    else:
        F["pocket"] = pd.Series(dtype=bool)
    if save is not None:
        save.mkdir(parents=True, exist_ok=True)
        E.to_csv(save / f"{name}.errors.csv", index=False)
        det.to_csv(save / f"{name}.detections.csv", index=False)
    return {"name": name, "radius": table.radius_mm, "errors": E, "false": F, "fps": scene.camera and scene.film.fps, "shutter": scene.film.shutter_s, "seconds": elapsed, "frames": int(tr["frame"].max()) + 1}


def _gaps(P: np.ndarray, table) -> tuple[np.ndarray, np.ndarray]:
    """For true centres (N, 2) mm of one frame: each ball's gap (mm) to the nearest other ball
    (centre distance less a diameter; inf when alone) and to the nearest cushion (its centre's
    distance in from the reversal line, where a ball frozen to the cushion rests)."""
    D = np.linalg.norm(P[:, None] - P[None], axis=2)
    np.fill_diagonal(D, np.inf)
    ball_gap = D.min(axis=1, initial=np.inf) - 2 * table.radius_mm
    nose = np.minimum.reduce([P[:, 0], table.length_mm - P[:, 0], P[:, 1], table.width_mm - P[:, 1]])
    return ball_gap, nose - table.reversal_offset_mm


def sample_clip(name: str, first: int, last: int) -> int:
    """False and missed detections on frames ``first`` .. ``last`` - 1 of a sample clip."""
    from vision.detect import BallDetector
    from vision.video import iter_frames

    root = Path(__file__).resolve().parents[1] / "sample_clips"
    table, camera, _ = read_calibration(root / f"{name}.truth" / "calibration.json")
    tr = pd.read_csv(root / f"{name}.truth" / "tracks.csv")
    truth = {f: g[["x", "y"]].to_numpy() for f, g in tr.groupby("frame")}
    det = BallDetector(camera, table)
    false, missed, balls, ms = 0, 0, 0, []
    false_frames, missed_frames = set(), []
    for i, t, img in iter_frames(root / f"{name}.mp4"):
        if i >= last:
            break
        t0 = time.perf_counter()
        out = det.process(i, t, img)
        if i < first:
            continue
        ms.append(1000 * (time.perf_counter() - t0))
        P = truth.get(i, np.zeros((0, 2)))
        Q = out[["x", "y"]].to_numpy()
        D = np.linalg.norm(Q[:, None] - P[None], axis=2) if len(P) and len(Q) else np.full((len(Q), len(P)), np.inf)
        nf = int(np.sum(D.min(axis=1, initial=np.inf) > table.radius_mm))
        false += nf
        if nf:
            false_frames.add(i)
        nm = int(np.sum(D.min(axis=0, initial=np.inf) > table.radius_mm))
        missed += nm
        if nm:
            missed_frames.append(i)
        balls += len(P)
    print(f"{name} frames {first}..{last - 1}: {false} false detections in {len(false_frames)} frames; {missed} of {balls} true ball-frames missed")
    for what, fr in (("false detections", sorted(false_frames)), ("a missed ball", missed_frames)):
        print(f"frames with {what}: {fr[:40]}{' ...' if len(fr) > 40 else ''}")
    print(f"detector time per frame: median {np.median(ms):.1f} ms, mean {np.mean(ms):.1f} ms")
    return 0


# Gap (mm) beyond which --by-ball counts a resting ball as clear of other balls and cushions:
# a few pixels at the usual 2 mm per pixel, beyond the local edge's sample bands.
_CLEAR_MM = 10.0


def sigma_calibration(E: pd.DataFrame, near_mm: float) -> None:
    """Print how the detector's stated ``sigma_mm`` matches its errors: the error per axis in
    units of sigma, z = (dx / sigma, dy / sigma), for resting balls, moving balls and balls
    whose centre lies within ``near_mm`` of a cushion nose (whether resting or moving). For an
    honest standard deviation z is about standard normal: median |z| 0.674, |z| > 3 for 0.27 %
    (analytic)."""
    print("stated sigma_mm against the error per axis (standard normal: median |z| 0.67, |z| > 3 for 0.27 %):")
    near = E["nose_mm"] < near_mm
    for what, g in (("resting", E[~near & (E["speed"] < 1.0)]), ("moving", E[~near & (E["speed"] >= 1.0)]), ("near a cushion", E[near])):
        if not len(g):
            continue
        z = np.abs(np.concatenate([g["dx"] / g["sigma_mm"], g["dy"] / g["sigma_mm"]]))
        print(f"  {what:15s} n={len(g):5d}  sigma median {g['sigma_mm'].median():5.2f} mm  median |z| {np.median(z):5.2f}  "
              f"|z| > 3: {100 * np.mean(z > 3):5.1f}%  |z| > 5: {100 * np.mean(z > 5):5.1f}%")


def _with_quality(text: str, crf: int) -> str:
    """A scene's text with its ``[camera]`` quality (H.264 constant rate factor) set to ``crf``."""
    out, n = re.subn(r"(?m)^quality = \d+$", f"quality = {crf}", text)
    if n != 1:
        raise ValueError(f"scene text holds {n} quality lines; expected one")
    return out


def _q(s: pd.Series, q: float) -> str:
    return f"{s.quantile(q):6.2f}" if len(s) else "   n/a"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", default="/tmp/railtrace_detect_bench", help="folder for the filmed clips (reused)")
    ap.add_argument("--only", nargs="*", default=None, help="scene names to run (default all)")
    ap.add_argument("--clip", default=None, help="a sample clip's name (sample_clips/NAME.mp4): count false and missed detections instead")
    ap.add_argument("--save", default=None, help="folder to write each scene's per-ball-frame errors (truth id, position, error) and detections to, as CSV")
    ap.add_argument("--by-ball", action="store_true", help="also print the resting balls' errors per scene and ball (with gaps to the nearest ball and cushion), and over the balls clear of both and the rest")
    ap.add_argument("--crf", type=int, default=None, metavar="N", help="film every scene at H.264 constant rate factor N (0: lossless, still 4:2:0 chroma) instead of its own quality, into WORK/crfN")
    ap.add_argument("--frames", nargs=2, type=int, default=(0, 300), metavar=("FIRST", "LAST"), help="with --clip: the frames to score, FIRST to LAST - 1")
    args = ap.parse_args(argv)
    if args.clip:
        return sample_clip(args.clip, *args.frames)
    names = args.only or list(SCENES)
    unknown = [n for n in names if n not in SCENES]
    if unknown:
        raise SystemExit(f"unknown scene(s) {unknown}; choose from {list(SCENES)}")
    work = Path(args.work)
    scenes = SCENES
    if args.crf is not None:
        if not 0 <= args.crf <= 51:
            raise SystemExit(f"--crf {args.crf}: libx264's constant rate factor runs 0..51")
        scenes = {k: _with_quality(v, args.crf) for k, v in SCENES.items()}
        work = work / f"crf{args.crf}"
    film(work, names, scenes)
    results = [evaluate(n, work, Path(args.save) if args.save else None, scenes) for n in names]
    print(f"{'scene':22s} {'fps':>4s} {'shutter':>8s} | rest med  p95 |  mov med  p95 | det rate | false (occl, pocket) | frames/s")
    allE = []
    for r in results:
        E = r["errors"]
        vis = E[~E["hidden"]]
        rest = vis[(vis["speed"] < 1.0) & vis["err"].notna()]["err"]
        mov = vis[(vis["speed"] >= 1.0) & vis["err"].notna()]["err"]
        rate = vis["err"].notna().mean() if len(vis) else float("nan")
        F = r["false"]
        print(
            f"{r['name']:22s} {r['fps']:4.0f} 1/{1 / r['shutter']:<6.0f} | {_q(rest, .5)} {_q(rest, .95)} | {_q(mov, .5)} {_q(mov, .95)} | "
            f"{100 * rate:7.2f}% | {len(F):5d} ({int(F['occluder_active'].sum())}, {int(F['pocket'].sum())}) | {r['frames'] / r['seconds']:7.1f}"
        )
        E = E.assign(fps=r["fps"], shutter=r["shutter"], scene=r["name"])
        allE.append(E)
    A = pd.concat(allE, ignore_index=True)
    vis = A[~A["hidden"]]
    rest = vis[(vis["speed"] < 1.0) & vis["err"].notna()]["err"]
    print(f"\nall resting balls: median {rest.median():.2f} mm, p95 {rest.quantile(.95):.2f} mm (n={len(rest)})")
    for (fps, sh), g in vis[(vis["speed"] >= 1.0)].groupby(["fps", "shutter"]):
        m = g["err"].dropna()
        print(f"moving, {fps:.0f} fps 1/{1 / sh:.0f} s: median {m.median():.2f} mm, p95 {m.quantile(.95):.2f} mm, detected {100 * g['err'].notna().mean():.2f}% (n={len(g)})")
    print(f"detection rate where fully visible: {100 * vis['err'].notna().mean():.2f}% of {len(vis)} ball-frames")
    sigma_calibration(vis[vis["err"].notna()], 2 * results[0]["radius"])
    if args.by_ball:
        still = vis[(vis["speed"] < 1.0) & vis["err"].notna()]
        table = still.groupby(["scene", "ball"]).agg(
            frames=("err", "size"), median=("err", "median"), p95=("err", lambda e: e.quantile(0.95)),
            dx=("dx", "median"), dy=("dy", "median"), x=("x", "median"), y=("y", "median"), pattern=("true_pattern", "first"),
            ball_gap=("ball_gap", "median"), rail_gap=("rail_gap", "median"))
        print("resting balls per scene and ball (mm; ball_gap, rail_gap: to the nearest ball and cushion), worst first:")
        print(table.sort_values("median", ascending=False).round(2).to_string())
        clear = (still["ball_gap"] > _CLEAR_MM) & (still["rail_gap"] > _CLEAR_MM)
        for what, sel in ((f"clear of other balls and cushions by over {_CLEAR_MM:.0f} mm", clear), ("touching or near another ball or a cushion", ~clear)):
            e = still.loc[sel, "err"]
            print(f"resting balls {what}: median {e.median():.2f} mm, p95 {e.quantile(.95):.2f} mm (n={len(e)} ball-frames of {still.loc[sel].groupby(['scene', 'ball']).ngroups} balls; a ball passed by another may count in both)")
    pat = vis[vis["err"].notna()]
    print("pattern confusion (rows truth, columns detected):")
    print(pd.crosstab(pat["true_pattern"], pat["pattern"]).to_string())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
