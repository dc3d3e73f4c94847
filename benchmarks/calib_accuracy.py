"""Accuracy of automatic calibration (``vision.calibrate``) over many cameras, lenses, cloths,
lights and tables, against the renderer's true camera.

Usage::

    nice -n 10 .venv/bin/python benchmarks/calib_accuracy.py [--quick] [--clips] [--work DIR] [--json OUT]
    nice -n 10 .venv/bin/python benchmarks/calib_accuracy.py --extra [NAME ...] [--extra-cache DIR] [--reencode CRF ...]

Per case it renders the static scene (``Renderer.background()`` plus sensor noise, quantised to
8 bits), calibrates it, and prints:

* ``corner``: largest error of the four nose-rectangle corners, table mm (truth corner imaged by
  the true camera at nose height, back-projected by the recovered one at nose height);
* ``nose``: largest perpendicular error of points along the four nose lines, mm, same way;
* ``dist rms/max``: the distortion residual on the nose lines, px: the true image points of each
  nose line, undistorted by the recovered lens model, distance from their own best straight line;
* ``floor``: the same residual (rms/max, px) of the best the calibration's lens model can do on
  those lines: k1 and k2 about the image centre (``CalibConfig.fit_k2``; OpenCV's p1, p2 and k3
  held at 0) fitted by the plumb-line method (:func:`vision.calibrate.plumb_line_distortion`) to
  the true image points themselves; where the true lens has terms the model lacks, no nose locator
  can bring ``dist`` below it;
* ``reproj``: largest pixel error of the recovered camera re-imaging the nose lines;
* ``f %``, ``k1``, ``cam mm``: focal length error, recovered and true k1, camera-centre error;
* ``parallax``: ball centres on a grid over the cloth imaged by the true camera at height R and
  back-projected by the recovered camera at height R: max error, mm (and, for scale, what a
  cloth-plane mapping of the true camera would make of them: ``naive``);
* ``H sd``, ``ball sd``, ``det``: what the calibration itself says of its camera height (1 sd,
  mm), of ball positions (1 sd, worst over the table, mm) and whether the view determines the
  height (``vision.calibrate._uncertainty``); ``H/sd``: the true height error in those sds;
  ``from``: where the height came from (``view``; ``typi``cal mount height combined with the
  view's, for a square-on view; ``give``n).

``--clips`` also films two short clips with balls, the cue and arms (one with a camera bump) and
calibrates them from the video file, once automatically and once given the true camera height
(``+height``, as ``--camera-height`` would). The clips are kept in ``--work`` (default
``/tmp/railtrace_calib_accuracy``) and reused while their scene text and the renderer's source
are unchanged. The summary gives medians and worst cases. Which corner the recovered table frame
puts its origin at does not matter: the better of the two right-handed choices is compared.

``--extra`` instead calibrates the clips of the extra rendered set (``analyse_accuracy.py --extra``
films them into ``--extra-cache``; every scene of ``benchmarks/extra_scenes``, or the NAMEs given) from their video files, as
``railtrace calibrate`` does, against each ``NAME.truth/calibration.json``, and prints beside the
columns above where the error comes from:

* ``corners``: each corner's error (mm, the true table's order (0,0), (L,0), (L,W), (0,W));
* ``located``: per rail (bottom, right, top, left of the true table) the median distance of the
  located nose points from the true nose line, imaged (px, positive outward): the nose locator's
  bias on that side, before any fitting;
* a second row ``+true noses``: the same background calibrated with each located nose point
  moved onto the true nose line (imaged by the true camera): what the geometry (plumb lines, pose,
  refinement, sights, height) gives from perfect noses, so the rest of the first row's error is
  the locator's.

``--reencode CRF ...`` (with ``--extra``) adds, per clip and CRF, a row ``still crfN``: the scene's
empty table filmed by the renderer (its noise and flicker, no balls, no cue) for 40 frames,
encoded with H.264 at that constant rate factor (``vision.video.write_video``, one GOP; 0 is
lossless), decoded, and its per-pixel median calibrated like a background: how the nose locator
fares at another compression of the same view.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import vision.calibrate  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402
from benchmarks.analyse_accuracy import EXTRA_CACHE, extra_scenes  # noqa: E402
from vision.calibrate import RAIL_SIDES, CalibConfig, CalibrationError, calibrate, calibrate_background  # noqa: E402
from vision.camera import Camera  # noqa: E402
from vision.render import Lamp, Look, Renderer  # noqa: E402
from vision.table import EIGHT_FOOT, NINE_FOOT, SEVEN_FOOT, TableSpec  # noqa: E402


@dataclass(frozen=True)
class Case:
    name: str
    table: TableSpec
    height_mm: float
    size: tuple[int, int]
    dist: tuple[float, ...]
    offset_mm: tuple[float, float] = (0.0, 0.0)
    roll_deg: float = 0.0
    cloth: tuple[int, int, int] = (62, 122, 30)
    exposure: float = 1.0
    noise: float = 2.0
    vignetting: float = 0.6
    lamps: str = "default"
    aim_offset_mm: tuple[float, float] = (0.0, 0.0)


CLOTHS = {
    "green": (62, 122, 30),
    "blue": (150, 95, 30),
    "red": (35, 40, 150),
    "tan": (95, 150, 175),
    "grey": (120, 118, 115),
}


def cases(quick: bool) -> list[Case]:
    c = [
        Case("9ft green 2.4m k1-.15", NINE_FOOT, 2400, (1280, 720), (-0.15, 0.03, 0, 0, 0), (120, -90), 1.0),
        Case("9ft blue 2.0m k1-.3 wide", NINE_FOOT, 2000, (1280, 720), (-0.3, 0.08, 0, 0, 0), (-60, 40), -0.8, CLOTHS["blue"]),
        Case("9ft red 3.2m no lens", NINE_FOOT, 3200, (1920, 1080), (0, 0, 0, 0, 0), (0, 0), 0.0, CLOTHS["red"], 0.8),
        Case("8ft tan 2.6m dim", EIGHT_FOOT, 2600, (1280, 720), (-0.1, 0.0, 0, 0, 0), (250, 120), 2.5, CLOTHS["tan"], 0.6, 3.0),
        Case("7ft grey 1.8m k1-.25", SEVEN_FOOT, 1800, (1280, 720), (-0.25, 0.05, 0, 0, 0), (100, 60), -1.5, CLOTHS["grey"], 1.1),
        Case("9ft green 3.5m 1080p tilt", NINE_FOOT, 3500, (1920, 1080), (-0.08, 0.01, 0, 0, 0), (500, -350), 0.5, vignetting=0.9),
        Case("8ft blue 2.2m one lamp", EIGHT_FOOT, 2200, (1280, 720), (-0.2, 0.04, 0, 0, 0), (-150, -100), 3.0, CLOTHS["blue"], 1.2, lamps="one"),
        Case("9ft red 2.8m rolled 90", NINE_FOOT, 2800, (1280, 720), (-0.12, 0.02, 0, 0, 0), (80, 0), 88.0, CLOTHS["red"]),
        Case("7ft green 2.0m noisy", SEVEN_FOOT, 2000, (1280, 720), (-0.18, 0.03, 0, 0, 0), (0, -150), 0.0, noise=5.0, exposure=0.7),
        Case("9ft grey 2.5m 1080p", NINE_FOOT, 2500, (1920, 1080), (-0.22, 0.05, 0, 0, 0), (-200, 150), -2.0, CLOTHS["grey"]),
        Case("9ft green 2.4m 960x540", NINE_FOOT, 2400, (960, 540), (-0.15, 0.03, 0, 0, 0), (120, -90), 1.0),
        Case("7ft grey 1.8m 960x540", SEVEN_FOOT, 1800, (960, 540), (-0.25, 0.05, 0, 0, 0), (100, 60), -1.5, CLOTHS["grey"], 1.1),
    ]
    return c[:4] if quick else c


def render_background(case: Case, seed: int) -> tuple[np.ndarray, Camera]:
    cam = Camera.overhead(case.table, case.height_mm, case.size, offset_mm=case.offset_mm,
                          aim_offset_mm=case.aim_offset_mm, roll_deg=case.roll_deg, dist=case.dist)
    lamps = None
    if case.lamps == "one":
        lamps = (Lamp((case.table.length_mm * 0.4, case.table.width_mm * 0.6, 1100.0)),)
    look = Look(cloth_bgr=case.cloth, cushion_bgr=tuple(int(0.85 * v) for v in case.cloth), exposure=case.exposure,
                noise_sigma=case.noise, vignetting=case.vignetting, lamps=lamps, texture_seed=seed)
    bg = Renderer(case.table, cam, look, []).background()
    rng = np.random.default_rng(seed)
    img = np.clip(bg + rng.normal(0, case.noise, bg.shape), 0, 255).round().astype(np.uint8)
    return img, cam


def _align(table: TableSpec, xy: np.ndarray, flip: bool) -> np.ndarray:
    return np.column_stack([table.length_mm - xy[:, 0], table.width_mm - xy[:, 1]]) if flip else xy


def lens_floor(true: Camera, lines: list[np.ndarray]) -> tuple[float, float]:
    """``floor`` of the module docstring: (rms, max) px of each of ``lines`` ((N, 2) true image
    points of straight nose lines) undistorted by the calibration's lens model fitted to them
    (plumb-line method), from its own best straight line."""
    kappa = vision.calibrate.plumb_line_distortion(lines, true.image_size, CalibConfig().fit_k2)
    st = vision.calibrate._line_residuals([vision.calibrate._undistort_px(p, kappa, true.image_size) for p in lines])
    return float(np.sqrt(np.mean(st**2))), float(np.max(np.abs(st)))


def measure(table: TableSpec, true: Camera, got: Camera) -> dict:
    """Errors of ``got`` against ``true`` (see the module docstring)."""
    h, R = table.nose_height_mm, table.radius_mm
    L, W = table.length_mm, table.width_mm
    corners = table.outline()
    uv = true.project(np.column_stack([corners, np.full(4, h)]))
    back = got.backproject(uv, h)[:, :2]
    errs = [np.linalg.norm(_align(table, back, f) - corners, axis=1) for f in (False, True)]
    flip = bool(np.argmin([e.max() for e in errs]))
    out = {"corner_mm": float(errs[flip].max()), "corners_mm": [float(v) for v in errs[flip]]}
    s = np.linspace(0.0, 1.0, 60)
    nose_err, reproj, straight, lines = [], [], [], []
    for p0, p1 in zip(corners, np.roll(corners, -1, axis=0)):
        pts = p0[None] + s[:, None] * (p1 - p0)[None]
        X = np.column_stack([pts, np.full(len(s), h)])
        uv = true.project(X)
        inside = np.all((uv > 0) & (uv < np.array(true.image_size) - 1), axis=1)
        uv, pts, X = uv[inside], pts[inside], X[inside]
        lines.append(uv)
        b = _align(table, got.backproject(uv, h)[:, :2], flip)
        d = (p1 - p0) / np.linalg.norm(p1 - p0)
        nrm = np.array([-d[1], d[0]])
        nose_err.append(np.abs((b - pts) @ nrm))
        Xg = np.column_stack([_align(table, pts, flip), np.full(len(pts), h)])
        reproj.append(np.linalg.norm(got.project(Xg) - uv, axis=1))
        und = got.undistort_normalised(uv) * got.K[0, 0]
        m = und.mean(axis=0)
        _, _, vt = np.linalg.svd(und - m, full_matrices=False)
        straight.append((und - m) @ vt[1])
    out["nose_mm"] = float(np.max(np.concatenate(nose_err)))
    st = np.concatenate(straight)
    out["dist_rms_px"] = float(np.sqrt(np.mean(st**2)))
    out["dist_max_px"] = float(np.max(np.abs(st)))
    out["floor_rms_px"], out["floor_max_px"] = lens_floor(true, lines)
    out["reproj_max_px"] = float(np.max(np.concatenate(reproj)))
    out["f_err_pct"] = float(100 * (got.K[0, 0] / true.K[0, 0] - 1))
    out["k1"] = float(got.dist[0])
    out["k1_true"] = float(true.dist[0])
    cg = got.centre_mm.copy()
    if flip:
        cg[:2] = [L - cg[0], W - cg[1]]
    out["cam_mm"] = float(np.linalg.norm(cg - true.centre_mm))
    gx, gy = np.meshgrid(np.linspace(R, L - R, 25), np.linspace(R, W - R, 13))
    balls = np.column_stack([gx.ravel(), gy.ravel()])
    uvb = true.project(np.column_stack([balls, np.full(len(balls), R)]))
    ok = np.all((uvb > 0) & (uvb < np.array(true.image_size) - 1), axis=1)
    b = _align(table, got.backproject(uvb[ok], R)[:, :2], flip)
    out["parallax_max_mm"] = float(np.max(np.linalg.norm(b - balls[ok], axis=1)))
    out["parallax_rms_mm"] = float(np.sqrt(np.mean(np.sum((b - balls[ok]) ** 2, axis=1))))
    naive = true.backproject(uvb[ok], 0.0)[:, :2]
    out["naive_max_mm"] = float(np.max(np.linalg.norm(naive - balls[ok], axis=1)))
    return out


CLIP_SCENE = """
name = "calibration benchmark clip"
lead_s = 0.6
tail_s = 0.3
max_duration_s = {dur}
seed = {seed}

[table]
preset = "{table}"

[camera]
height_mm = {height}
offset_mm = [{ox}, {oy}]
roll_deg = {roll}
resolution = [960, 540]
fps = 30
distortion = [{k1}, 0.02, 0, 0, 0]
quality = 20
{bump}

[look]
cloth = "{cloth}"
noise = 2.0
occluder = true

[[ball]]
id = "cue"
kind = "cue"
at = [600, 400]

[[ball]]
id = "3"
kind = "solid"
colour = "#c02020"
at = [1500, 640]

[[ball]]
id = "8"
kind = "solid"
colour = "#111111"
at = [1700, {y8}]

[[shot]]
ball = "cue"
aim = {{ rail = "top", diamond = 5.5 }}
speed_mm_s = 1500
"""


RAILS = RAIL_SIDES  # the true table's, in the library's order


def _true_rail_offsets(table: TableSpec, true: Camera, uv: np.ndarray) -> tuple[str, np.ndarray]:
    """The true rail nearest the (N, 2) image points ``uv`` (back-projected by the true camera at
    nose height; median distance) and each point's distance from its nose line there (px at that
    point's depth, positive outward)."""
    offs = {r: vision.calibrate._nose_offsets_mm(true, uv, r, table) for r in RAILS}  # (mm, px per mm)
    rail = min(RAILS, key=lambda r: float(np.median(np.abs(offs[r][0]))))
    return rail, offs[rail][0] * offs[rail][1]


def located_offsets(table: TableSpec, true: Camera, cal) -> dict[str, float]:
    """Median offset (px, positive outward) of each rail's located nose points from the true nose
    line, per true rail (the calibration's own rail names may be the opposite ones)."""
    out = {}
    for fit in cal.noses:
        if len(fit.points_px):
            rail, px = _true_rail_offsets(table, true, fit.points_px)
            out[rail] = float(np.median(px))
    return out


def _snapped_to_truth(table: TableSpec, true: Camera, locate):
    """A stand-in for ``vision.calibrate._nose_points`` that calls ``locate`` and moves every
    point onto the true nose line of its rail (along the line's normal in the nose plane)."""
    h, L, W = table.nose_height_mm, table.length_mm, table.width_mm

    def snapped(grey, quad, tb, config, run_map=None):
        out = []
        for pts in locate(grey, quad, tb, config, run_map=run_map):
            if len(pts) == 0:
                out.append(pts)
                continue
            rail, _ = _true_rail_offsets(table, true, pts)
            X = true.backproject(pts, h)
            axis, value = {"bottom": (1, 0.0), "right": (0, L), "top": (1, W), "left": (0, 0.0)}[rail]
            X[:, axis] = value
            X[:, 2] = h
            out.append(true.project(X))
        return out

    return snapped


def _scored(table: TableSpec, true: Camera, got, case: str, seconds: float) -> dict:
    """One ``--extra`` row: :func:`measure` of calibration ``got`` against the true camera, the
    calibration's own statement, each corner's error and each rail's located-nose bias."""
    m = measure(table, true, got.camera)
    m.update(_stated(got.quality, true))
    m.update(case=case, seconds=seconds, located_px=located_offsets(table, true, got), height_mm=got.quality["camera_height_mm"],
             height_true_mm=float(true.centre_mm[2]))
    return m


def run_extra(name: str, cache: Path) -> list[dict]:
    """Calibrate extra clip ``cache/NAME.mp4`` and score it against ``cache/NAME.truth``; then its
    background again from the true nose lines. Two rows (dicts of :func:`measure` and more)."""
    from unittest import mock

    table, true, _ = read_calibration(cache / f"{name}.truth" / "calibration.json")
    rows = []
    t0 = time.perf_counter()
    cal = calibrate(cache / f"{name}.mp4", table, CalibConfig())
    secs = time.perf_counter() - t0
    for label in ("", " +true noses"):
        if label:
            # The benchmark's own probe: the library has no hook for given nose points.
            with mock.patch.object(vision.calibrate, "_nose_points", _snapped_to_truth(table, true, vision.calibrate._nose_points)):
                t0 = time.perf_counter()
                got = calibrate_background(cal.background, table, CalibConfig())
                secs = time.perf_counter() - t0
        else:
            got = cal
        rows.append(_scored(table, true, got, name + label, secs))
    return rows


def still_reencoded(name: str, cache: Path, crf: int, n_frames: int = 40) -> dict:
    """Calibrate the empty table of extra scene ``name`` (``cache/NAME.truth/scene.toml``) filmed
    ``n_frames`` frames long and encoded at H.264 ``crf`` (the median of the decoded frames) and
    score it against the truth (a :func:`measure` dict and more, as :func:`run_extra`)."""
    import tempfile
    import tomllib

    from railtrace.filming import camera_timeline
    from railtrace.scene import parse_scene
    from vision.video import iter_frames, write_video

    text = (cache / f"{name}.truth" / "scene.toml").read_text(encoding="utf-8")
    scene = parse_scene(tomllib.loads(text), source_text=text)
    true = camera_timeline(scene)[0][1]
    r = Renderer(scene.table, true, scene.look, [], seed=scene.seed)
    empty = (np.zeros((1, 0, 2)), np.zeros((1, 0, 3, 3)), np.zeros((1, 0), bool), np.zeros(1))
    with tempfile.TemporaryDirectory() as tmp:
        clip = Path(tmp) / "still.mp4"
        write_video(clip, (r.render(*empty) for _ in range(n_frames)), scene.film.fps, quality=crf)
        bg = np.median(np.stack([f for _, _, f in iter_frames(clip)]), axis=0).astype(np.uint8)
    t0 = time.perf_counter()
    got = calibrate_background(bg, scene.table, CalibConfig())
    return _scored(scene.table, true, got, f"{name} still crf{crf}", time.perf_counter() - t0)


def clip_cases() -> list[dict]:
    return [
        dict(name="clip 9ft blue k1-.2", table="9ft", height=2300, ox=100, oy=-80, roll=0.7, k1=-0.2, cloth="#1e5f96", dur=3.0, seed=5, y8=1230, bump=""),
        dict(name="clip 8ft green bump", table="8ft", height=2500, ox=-120, oy=60, roll=-1.0, k1=-0.12, cloth="#2e6b45", dur=4.0, seed=6, y8=1130,
             bump="[[camera.bump]]\nt_s = 2.5\noffset_mm = [6, -4]\nroll_deg = 0.5"),
    ]


def run_clip(spec: dict, work: Path, height_given: bool = False) -> tuple[dict, object]:
    import tomllib

    from railtrace.filming import camera_timeline, film_scene
    from railtrace.scene import parse_scene

    text = CLIP_SCENE.format(**spec)
    scene = parse_scene(tomllib.loads(text), source_text=text)
    clip = work / f"clip{spec['seed']}.mp4"
    stamp = work / f"clip{spec['seed']}.toml"
    # A clip is reused only while its scene and the renderer that filmed it are unchanged.
    import hashlib

    import vision.render

    key = text + "\n# renderer " + hashlib.sha256(Path(vision.render.__file__).read_bytes()).hexdigest() + "\n"
    if not (clip.exists() and stamp.exists() and stamp.read_text() == key):
        film_scene(scene, clip)
        stamp.write_text(key)
    truth = camera_timeline(scene)
    config = CalibConfig(camera_height_mm=float(truth[0][1].centre_mm[2])) if height_given else CalibConfig()
    t0 = time.perf_counter()
    cal = calibrate(clip, scene.table, config)
    secs = time.perf_counter() - t0
    res = measure(scene.table, truth[0][1], cal.camera)
    res.update(_stated(cal.quality, truth[0][1]))
    res["seconds"] = secs
    res["bumps_true"] = [t for t, _ in truth[1:]]
    res["bumps_found"] = [round(t, 3) for t, _ in cal.camera_changes[1:]]
    extra = []
    for (t_true, cam_true), (t_got, cam_got) in zip(truth[1:], cal.camera_changes[1:]):
        extra.append(measure(scene.table, cam_true, cam_got))
    if extra:
        res["after_bump_corner_mm"] = extra[0]["corner_mm"]
        res["after_bump_parallax_max_mm"] = extra[0]["parallax_max_mm"]
    return res, cal


def _stated(q: dict, true: Camera) -> dict:
    """The calibration's own uncertainty statement and the true height error in its sds."""
    sd = q["camera_height_sd_mm"]
    return {"height_sd_mm": sd, "ball_sd_mm": q["ball_position_sd_mm"], "height_determined": q["height_determined"],
            "height_from": q.get("height_from", "view"),
            "height_err_in_sd": (q["camera_height_mm"] - float(true.centre_mm[2])) / sd if sd > 0 else float("nan")}


def _row(name: str, m: dict, naive: str) -> str:
    return (f"{name:32s} {m['corner_mm']:6.2f} {m['nose_mm']:6.2f} {m['dist_rms_px']:5.3f}/{m['dist_max_px']:5.3f} {m['reproj_max_px']:6.2f} "
            f"{m['f_err_pct']:+6.1f} {m['k1']:+6.3f}/{m['k1_true']:+6.3f} {m['cam_mm']:7.1f} {m['parallax_max_mm']:8.2f} {naive:>6s} "
            f"{m['height_sd_mm']:6.0f} {m['height_err_in_sd']:+5.1f} {m['ball_sd_mm']:7.2f} {'yes' if m['height_determined'] else 'no':>3s} {m['height_from'][:4]:>4s} {m['seconds']:5.1f} "
            f"{m['floor_rms_px']:5.3f}/{m['floor_max_px']:5.3f}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="four static cases only")
    ap.add_argument("--clips", action="store_true", help="also film and calibrate two clips (slow)")
    ap.add_argument("--work", type=Path, default=Path("/tmp/railtrace_calib_accuracy"), help="where the filmed clips are kept and reused")
    ap.add_argument("--json", type=Path, help="write all figures here")
    ap.add_argument("--extra", nargs="*", metavar="NAME", help="only the extra rendered set's clips (every scene of benchmarks/extra_scenes, or these)")
    ap.add_argument("--extra-cache", type=Path, default=EXTRA_CACHE,
                    help="where analyse_accuracy.py --extra filmed them")
    ap.add_argument("--reencode", nargs="+", type=int, default=[], metavar="CRF",
                    help="with --extra: also each scene's empty table encoded at these H.264 rate factors")
    args = ap.parse_args(argv)
    rows = []
    hdr = (f"{'case':32s} {'corner':>6s} {'nose':>6s} {'dist rms/max':>12s} {'reproj':>6s} {'f %':>6s} {'k1 got/true':>13s} "
           f"{'cam mm':>7s} {'parallax':>8s} {'naive':>6s} {'H sd':>6s} {'H/sd':>5s} {'ball sd':>7s} {'det':>3s} {'from':>4s} {'s':>5s} {'floor rms/max':>13s}")
    print(hdr)
    if args.extra is not None:
        return _main_extra(args)
    for i, case in enumerate(cases(args.quick)):
        img, cam = render_background(case, seed=100 + i)
        t0 = time.perf_counter()
        try:
            cal = calibrate(img, case.table, CalibConfig())
        except CalibrationError as exc:
            print(f"{case.name:32s} REFUSED: {exc}")
            rows.append({"case": case.name, "refused": str(exc)})
            continue
        secs = time.perf_counter() - t0
        m = measure(case.table, cam, cal.camera)
        m.update(_stated(cal.quality, cam))
        m.update(case=case.name, seconds=secs, nose_rms_fit_px=cal.quality["nose_rms_px"], sights=cal.quality["sights_found"])
        rows.append(m)
        print(_row(case.name, m, f"{m['naive_max_mm']:6.1f}"))
    if args.clips:
        args.work.mkdir(parents=True, exist_ok=True)
        for spec in clip_cases():
            for given in (False, True):
                name = spec["name"] + (" +height" if given else "")
                try:
                    m, _ = run_clip(spec, args.work, given)
                except CalibrationError as exc:
                    print(f"{name:32s} REFUSED: {exc}")
                    rows.append({"case": name, "refused": str(exc)})
                    continue
                m["case"] = name
                rows.append(m)
                print(_row(name, m, "")
                      + f"  bumps true {m['bumps_true']} found {m['bumps_found']}"
                      + (f", after bump corner {m['after_bump_corner_mm']:.2f} mm parallax {m['after_bump_parallax_max_mm']:.2f} mm" if "after_bump_corner_mm" in m else ""))
    ok = [r for r in rows if "refused" not in r]
    if ok:
        def col(k):
            return np.array([r[k] for r in ok])
        print(f"\n{len(ok)} of {len(rows)} calibrated")
        for k in ("corner_mm", "nose_mm", "dist_rms_px", "dist_max_px", "floor_max_px", "reproj_max_px", "parallax_max_mm"):
            v = col(k)
            print(f"{k:16s} median {np.median(v):7.3f}  worst {np.max(v):7.3f}")
        v = np.abs(col("f_err_pct"))
        print(f"{'|f err| %':16s} median {np.median(v):7.3f}  worst {np.max(v):7.3f}")
        v = np.abs(col("height_err_in_sd"))
        print(f"{'|H err| / sd':16s} median {np.median(v):7.3f}  worst {np.max(v):7.3f}")
        v = col("parallax_max_mm") / col("ball_sd_mm")
        print(f"{'parallax / sd':16s} median {np.median(v):7.3f}  worst {np.max(v):7.3f}")
    if args.json:
        args.json.write_text(json.dumps(rows, indent=2))
    return 0


def _main_extra(args) -> int:
    """``--extra``: the extra set's clips, two rows each (see the module docstring)."""
    names = args.extra or extra_scenes(None)
    bad = [n for n in names if not (args.extra_cache / f"{n}.truth").is_dir()]
    if bad:
        raise SystemExit(f"calib_accuracy.py: no {bad} in {args.extra_cache}; film them with analyse_accuracy.py --extra --extra-cache DIR")
    rows = []
    for name in names:
        try:
            pair = run_extra(name, args.extra_cache)
        except CalibrationError as exc:
            print(f"{name:32s} REFUSED: {exc}")
            rows.append({"case": name, "refused": str(exc)})
            pair = []
        for crf in args.reencode:
            try:
                pair.append(still_reencoded(name, args.extra_cache, crf))
            except CalibrationError as exc:
                print(f"{name + f' still crf{crf}':32s} REFUSED: {exc}")
                rows.append({"case": f"{name} still crf{crf}", "refused": str(exc)})
        for m in pair:
            rows.append(m)
            loc = " ".join(f"{r[0]}{m['located_px'][r]:+.2f}" if r in m["located_px"] else f"{r[0]}  .  " for r in RAILS)
            print(_row(m["case"], m, "") + f"  corners {' '.join(f'{v:.2f}' for v in m['corners_mm'])} located px {loc}"
                  + f"  H {m['height_mm']:.0f}/{m['height_true_mm']:.0f}", flush=True)
    if args.json:
        args.json.write_text(json.dumps(rows, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
