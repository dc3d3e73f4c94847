"""Where a resting ball's centre error comes from: the same still scene detected clean, with the
sensor's noise, through a lossless encode, through the scene's own encode, and without the lens.

For each scene of the extra rendered set (``benchmarks/extra_scenes/*.toml``: its table, camera,
room, cloth and ball colours, not its shots) balls are laid at rest on a grid over the bed (7 x 4,
2.5 ball radii in from the noses, each nudged a few mm, the scene's balls' looks in turn, each
turned at random: a stripe's band and a solid's number discs fall anywhere), with no empty
table shown first (the detector's model fills the balls in from the cloth round them, as at the
start of a clip), and :class:`vision.detect.BallDetector` is run on a second frame with the
scene's true camera. Variants, each the one before it with one thing added:

* ``clean``: no sensor noise, no lamp flicker;
* ``noise``: the scene's noise and flicker (what the renderer writes before encoding);
* ``lossless``: that, through ``vision.video.write_video`` at H.264 constant rate factor 0 (the
  4:2:0 chroma sampling kept);
* ``codec``: through the scene's own quality, as the extra clips are filmed;
* ``no_lens``: ``codec`` with the camera's lens distortion set to zero for both the renderer
  and the detector, so any difference from ``codec`` is the lens's own;
* ``codec_luma`` and ``codec_chroma`` split the ``codec`` step in two: the ``codec`` frames' luma
  with the ``lossless`` frames' chroma, and the ``lossless`` frames' luma with the ``codec``
  frames' chroma (both decoded the same way, BT.601, and recombined in OpenCV's BT.601 YCrCb,
  whose luma and chroma subspaces are the decoder's; rounding aside). H.264 keeps chroma at half
  resolution (4:2:0) and quantises it on its own; what each half of the step costs shows here;
* ``codec_seeded``: the ``codec`` frames, each ball fitted once more after the detector has run
  (its empty-table model made) from a sharp seed at the image of its true centre, instead of
  the seed its piece of foreground gave: what is left is the outline's own error (the coarse and
  sub-pixel outline rounds drifting from the right start), and what ``codec`` adds over it comes
  from where the fit started (the piece's seed and the coarse rounds, which a shadow the codec
  has coloured like the ball pulls toward itself).

Each row gives the balls found, the median and p95 of the centre error (mm, table frame, nearest
detection within a ball radius), and the medians of its component away from the camera's nadir
(the cloth point straight below it) and across that direction. A rise from one variant to the
next is what that step costs; a bias that is the lens's shows as ``no_lens`` much below
``codec``.

``--clip SCENE.toml`` instead splits one scene's own resting balls the same way, ball by ball
(:func:`run_clip`): the scene's opening frames as ``railtrace.filming.film_scene`` forms them (its
simulation, each ball's true turn, the occluder), with the variants above and ``clip``, the
frames decoded from the clip filmed beside the scene file (``SCENE.mp4``; its encode ran over the
whole clip, so its first frame may differ from a short ``codec`` encode of the same frames), and
the luma/chroma mixes and seeded fit taken of ``clip``. Each row is a variant, each column one
resting ball's error (x, y) mm in the table frame. A sample clip's resting figure rests on a
handful of balls, each nearly one measurement, so this says which step moves which ball.

Run: ``.venv/bin/python benchmarks/rest_causes.py [NAME ...] [--seed N] [--work DIR]`` (names
are extra scene stems; default all seven; a few seconds of processor time per scene and variant),
or ``.venv/bin/python benchmarks/rest_causes.py --clip sample_clips/multi_rail_30fps.toml``.
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import tempfile
from pathlib import Path

import cv2
import numpy as np
import pandas as pd
from scipy.spatial.transform import Rotation

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from benchmarks.analyse_accuracy import EXTRA_SCENES, extra_scenes  # noqa: E402
from railtrace import filming  # noqa: E402
from railtrace.scene import Scene, load_scene  # noqa: E402
from vision.detect import BallDetector  # noqa: E402
from vision.render import BallLook, CueStroke, Occluder, Renderer  # noqa: E402
from vision.video import iter_frames, write_video  # noqa: E402

VARIANTS = ("clean", "noise", "lossless", "codec", "no_lens")
# Variants made from two rendered ones (:func:`mixed_frames`): (luma from, chroma from).
MIXED = {"codec_luma": ("codec", "lossless"), "codec_chroma": ("lossless", "codec")}
# Grid of resting balls: 7 x 4 over the bed, 2.5 radii in from the noses (clear of the cushion
# faces, whose own pull rail_bias.py measures), each nudged up to NUDGE_MM so the outlines fall
# at every phase of the pixel grid.
GRID = (7, 4)
NUDGE_MM = 20.0


def grid_positions(scene: Scene, rng: np.random.Generator) -> np.ndarray:
    """(N, 2) table points (mm) of the resting balls of ``scene``'s table."""
    t = scene.table
    R = t.radius_mm
    xs = np.linspace(2.5 * R, t.length_mm - 2.5 * R, GRID[0])
    ys = np.linspace(2.5 * R, t.width_mm - 2.5 * R, GRID[1])
    at = np.array([[x, y] for x in xs for y in ys])
    return at + rng.uniform(-NUDGE_MM, NUDGE_MM, at.shape)


def still_frames(scene: Scene, variant: str, at: np.ndarray, rot: np.ndarray, work: Path) -> tuple[list[np.ndarray], object]:
    """Two frames (BGR uint8) of the balls resting at ``at`` turned by ``rot`` (1, N, 3, 3) in
    ``scene``'s room, formed as ``variant`` says, and the camera they were formed with."""
    look = scene.look
    if variant == "clean":
        look = dataclasses.replace(look, noise_sigma=0.0, flicker=0.0)
    cam = scene.camera
    if variant == "no_lens":
        cam = dataclasses.replace(cam, dist=np.zeros(5))
    n = len(at)
    balls = tuple(BallLook(f"b{i}", scene.balls[i % len(scene.balls)].kind, scene.balls[i % len(scene.balls)].colour_bgr) for i in range(n))
    ren = Renderer(scene.table, cam, look, balls, seed=scene.seed)
    frames = [ren.render(at[None], rot, np.ones((1, n), bool), np.array([k / scene.film.fps])) for k in range(2)]
    if variant in ("lossless", "codec", "no_lens"):
        clip = work / f"{variant}.mp4"
        write_video(clip, frames, scene.film.fps, codec="h264", quality=0 if variant == "lossless" else scene.film.quality)
        frames = [f for _, _, f in iter_frames(clip)]
    return frames, cam


def mixed_frames(luma: list[np.ndarray], chroma: list[np.ndarray]) -> list[np.ndarray]:
    """Frames (BGR uint8) with the luma of ``luma``'s frames and the chroma of ``chroma``'s (the
    same scene, pixel for pixel), recombined in OpenCV's BT.601 YCrCb."""
    out = []
    for a, b in zip(luma, chroma):
        ya, yb = cv2.cvtColor(a, cv2.COLOR_BGR2YCrCb), cv2.cvtColor(b, cv2.COLOR_BGR2YCrCb)
        out.append(cv2.cvtColor(np.concatenate([ya[..., :1], yb[..., 1:]], axis=2), cv2.COLOR_YCrCb2BGR))
    return out


def errors(scene: Scene, cam, frames: list[np.ndarray], at: np.ndarray, seeded: bool = False) -> pd.DataFrame:
    """Per true ball (N rows): the error (mm) of the nearest detection of the last frame within a
    ball radius (NaN if none) and its components away from the camera's nadir and across.
    ``seeded``: each ball's detection is instead the detector's fit of the last frame from a
    sharp seed at the image of its true centre (:func:`seeded_fits`)."""
    nadir = np.asarray(cam.centre_mm[:2], float)
    rows = []
    for (x, y), d in zip(at, ball_errors(scene.table, cam, frames, scene.film.fps, at, seeded)):
        if np.isnan(d[0]):
            rows.append({"error": np.nan, "radial": np.nan, "across": np.nan})
            continue
        u = np.array([x, y]) - nadir
        u = u / max(float(np.hypot(*u)), 1e-9)
        rows.append({"error": float(np.hypot(*d)), "radial": float(d @ u), "across": float(d[1] * u[0] - d[0] * u[1])})
    return pd.DataFrame(rows)


def seeded_fits(det: BallDetector, frame: np.ndarray, at: np.ndarray, R: float) -> pd.DataFrame:
    """Fits (columns x, y, mm) of ``frame`` by ``det`` (its empty-table model already made by
    :meth:`BallDetector.process`) from a sharp seed at the image of each true centre ``at``
    ((N, 2) mm, R above the cloth); balls whose fit fails are left out."""
    uv = det.rays.project(np.column_stack([at, np.full(len(at), R)]))
    rows = []
    for p in uv:
        fit = det._fit_seed(frame, {"uv": p, "axis": np.array([1.0, 0.0]), "half_px": 0.0, "strict": False})
        if fit is not None:
            rows.append({"x": fit["x"], "y": fit["y"]})
    return pd.DataFrame(rows, columns=["x", "y"])


def run(name: str, seed: int, work: Path) -> list[dict]:
    """One row per variant of scene ``name``: balls found, error median and p95, radial and
    across medians (mm)."""
    scene = load_scene(EXTRA_SCENES / f"{name}.toml")
    rng = np.random.default_rng(seed)
    at = grid_positions(scene, rng)
    rot = Rotation.random(len(at), random_state=seed).as_matrix()[None]
    out = []
    made = {}
    for variant in VARIANTS + tuple(MIXED) + ("codec_seeded",):
        if variant in MIXED:
            frames, cam = mixed_frames(made[MIXED[variant][0]], made[MIXED[variant][1]]), scene.camera
        elif variant == "codec_seeded":
            frames, cam = made["codec"], scene.camera
        else:
            frames, cam = still_frames(scene, variant, at, rot, work)
            made[variant] = frames
        E = errors(scene, cam, frames, at, seeded=variant == "codec_seeded")
        ok = E["error"].notna()
        out.append({
            "scene": name, "variant": variant, "found": f"{int(ok.sum())}/{len(E)}",
            "median": E["error"].median(), "p95": E["error"].quantile(0.95),
            "radial_med": E["radial"].median(), "across_med": E["across"].median(),
        })
    return out


# Opening frames of a scene's clip that run_clip forms; the detector's empty-table model is made
# from the first, as at the start of a clip, and the balls are measured in the last.
CLIP_FRAMES = 3


def clip_frames(scene: Scene, variant: str, work: Path, n: int = CLIP_FRAMES) -> tuple[list[np.ndarray], object, np.ndarray, list[str]]:
    """The first ``n`` frames (BGR uint8) of ``scene``'s clip as ``railtrace.filming.film_scene``
    forms them (the simulated balls with their true turns, exposure sub-samples and occluder), with
    the look and encode ``variant`` says (as :func:`still_frames`), the camera they were formed
    with, and the true centres (N, 2) mm and ids of the balls that do not move over those frames."""
    sim = filming.simulate_scene(scene)
    traj = sim.trajectory
    fps = scene.film.fps
    look = scene.look
    if variant == "clean":
        look = dataclasses.replace(look, noise_sigma=0.0, flicker=0.0)
    cam = filming.camera_timeline(scene)[0][1]
    if variant == "no_lens":
        cam = dataclasses.replace(cam, dist=np.zeros(5))
    occluder = Occluder(tuple(CueStroke(r.t_strike, r.ball_xy_mm, r.heading_rad) for r in sim.shots)) if scene.occluder else None
    balls = [filming._ball_look(scene, b) for b in traj.ball_ids]
    ren = Renderer(scene.table, cam, look, balls, occluder, seed=scene.seed)
    subs = filming._exposure_times(traj, np.arange(n) / fps, scene.film.shutter_s, scene.table)
    all_t = np.concatenate(subs)
    s = traj.sample(all_t)
    rot = traj.rotations(all_t)
    frames, k = [], 0
    for sub in subs:
        frames.append(ren.render(s.pos[k : k + len(sub)], rot[k : k + len(sub)], s.present[k : k + len(sub)], sub))
        k += len(sub)
    if variant in ("lossless", "codec", "no_lens"):
        clip = work / f"{variant}.mp4"
        write_video(clip, frames, fps, codec="h264", quality=0 if variant == "lossless" else scene.film.quality)
        frames = [f for _, _, f in iter_frames(clip)]
    pos = s.pos[:, :, :2]
    still = np.all(s.present, axis=0) & np.all(np.abs(pos - pos[:1]).max(axis=0) < 1e-9, axis=1)
    return frames, cam, pos[-1, still], [b for b, ok in zip(traj.ball_ids, still) if ok]


def decoded_opening(path: Path, n: int = CLIP_FRAMES) -> list[np.ndarray]:
    """The first ``n`` frames (BGR uint8) decoded from the clip at ``path``."""
    out = []
    for i, _, f in iter_frames(path):
        if i >= n:
            break
        out.append(f)
    return out


def ball_errors(table, cam, frames: list[np.ndarray], fps: float, at: np.ndarray, seeded: bool = False) -> np.ndarray:
    """(N, 2) error (x, y) mm of each true centre ``at``'s nearest detection within a ball
    radius in the last of ``frames`` (NaN where none); ``seeded``: each ball's detection is
    instead the detector's fit of the last frame from a sharp seed at the image of its true
    centre (:func:`seeded_fits`)."""
    det = BallDetector(cam, table)
    out = None
    for i, f in enumerate(frames):
        out = det.process(i, i / fps, f)
    if seeded:
        out = seeded_fits(det, frames[-1], at, table.radius_mm)
    q = out[["x", "y"]].to_numpy() if len(out) else np.zeros((0, 2))
    err = np.full((len(at), 2), np.nan)
    for b, p in enumerate(at):
        if len(q):
            j = int(np.argmin(np.hypot(*(q - p).T)))
            if np.hypot(*(q[j] - p)) <= table.radius_mm:
                err[b] = q[j] - p
    return err


def run_clip(path: Path, work: Path) -> pd.DataFrame:
    """One row per variant (:func:`clip_frames`; ``clip`` and its mixes and seeded fit when the
    clip ``path.with_suffix('.mp4')`` exists), one column per resting ball: its error as
    "(dx, dy) |e|" mm."""
    scene = load_scene(path)
    made, rows = {}, {}
    at, ids = None, None
    for variant in VARIANTS:
        frames, cam, at, ids = clip_frames(scene, variant, work)
        made[variant] = (frames, cam)
    film = path.with_suffix(".mp4")
    if film.exists():
        made["clip"] = (decoded_opening(film), made["codec"][1])
        base = "clip"
    else:
        base = "codec"
    made["codec_luma"] = (mixed_frames(made[base][0], made["lossless"][0]), made[base][1])
    made["codec_chroma"] = (mixed_frames(made["lossless"][0], made[base][0]), made[base][1])
    for name, (frames, cam) in list(made.items()) + [("codec_seeded", made[base])]:
        E = ball_errors(scene.table, cam, frames, scene.film.fps, at, seeded=name == "codec_seeded")
        rows[name] = [f"({dx:+.2f},{dy:+.2f}) {np.hypot(dx, dy):.2f}" for dx, dy in E]
    return pd.DataFrame.from_dict(rows, orient="index", columns=ids)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("names", nargs="*", help="extra scene names (default: all of benchmarks/extra_scenes)")
    ap.add_argument("--seed", type=int, default=0, help="seed of the balls' nudges and orientations")
    ap.add_argument("--work", type=Path, default=None, help="folder for the encoded stills (default: a temporary one)")
    ap.add_argument("--clip", type=Path, default=None, help="a scene file (e.g. sample_clips/multi_rail_30fps.toml): split its own resting balls' errors ball by ball")
    args = ap.parse_args(argv)
    if args.clip is not None:
        with tempfile.TemporaryDirectory() as tmp:
            work = args.work or Path(tmp)
            work.mkdir(parents=True, exist_ok=True)
            table = run_clip(args.clip, work)
        with pd.option_context("display.width", 250, "display.max_columns", 50):
            print(f"{args.clip}: each resting ball's error (x, y) mm, table frame, and its length, by variant "
                  "(codec_luma, codec_chroma and codec_seeded taken of the clip's own frames when it is there)")
            print(table.to_string())
        return 0
    names = extra_scenes(args.names)
    with tempfile.TemporaryDirectory() as tmp:
        work = args.work or Path(tmp)
        work.mkdir(parents=True, exist_ok=True)
        rows = [r for n in names for r in run(n, args.seed, work)]
    with pd.option_context("display.width", 200):
        print("resting balls on a grid, centre error (mm): each variant adds one step to the one above it "
              "(codec_luma, codec_chroma: the codec step's luma or chroma alone; codec_seeded: the codec frames, "
              "each ball fitted from a seed at its true centre)")
        print(pd.DataFrame(rows).set_index(["scene", "variant"]).round(2).to_string())
    return 0


if __name__ == "__main__":
    sys.exit(main())
