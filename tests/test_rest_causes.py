"""``benchmarks/rest_causes.py``'s luma/chroma split of the codec step (:func:`mixed_frames`)
checked against the BT.601 luma and colour-difference formulas written out here (ITU-R BT.601,
the full-range form of JFIF: Y = 0.299 R + 0.587 G + 0.114 B, Cb = 0.564 (B - Y),
Cr = 0.713 (R - Y)), not against OpenCV, which the function uses."""

import numpy as np

from benchmarks.rest_causes import mixed_frames


def _ycbcr(bgr: np.ndarray) -> np.ndarray:
    """(..., 3) Y, Cb, Cr (DN, Cb and Cr about 0) of BGR colours by BT.601 (full range)."""
    b, g, r = (bgr[..., k].astype(float) for k in range(3))
    y = 0.299 * r + 0.587 * g + 0.114 * b
    return np.stack([y, 0.564 * (b - y), 0.713 * (r - y)], axis=-1)


def test_mixed_frame_takes_luma_from_one_and_chroma_from_the_other():
    rng = np.random.default_rng(3)
    # Colours kept within 100..156 so the recombined colours stay inside 0..255 (no clipping,
    # which would change both parts).
    a = rng.integers(100, 157, (40, 60, 3), dtype=np.uint8)
    b = rng.integers(100, 157, (40, 60, 3), dtype=np.uint8)
    m = mixed_frames([a], [b])[0]
    ya, yb, ym = _ycbcr(a), _ycbcr(b), _ycbcr(m)
    # Rounding to 8 bits twice (to YCrCb and back) moves each part by at most about 1.5 DN.
    assert np.abs(ym[..., 0] - ya[..., 0]).max() <= 1.5
    assert np.abs(ym[..., 1:] - yb[..., 1:]).max() <= 2.0
    # ...and the two sources differ by far more than that, so the check can fail.
    assert np.abs(ya[..., 0] - yb[..., 0]).mean() > 10
    assert np.abs(ya[..., 1:] - yb[..., 1:]).mean() > 5


def test_mixing_a_frame_with_itself_keeps_it():
    rng = np.random.default_rng(4)
    a = rng.integers(0, 256, (30, 50, 3), dtype=np.uint8)
    m = mixed_frames([a], [a])[0]
    # A BT.601 round trip in 8 bits: within 2 DN per channel (common practice).
    assert np.abs(m.astype(int) - a).max() <= 2


def test_seeded_fits_land_on_the_rendered_balls():
    from vision.camera import Camera
    from vision.detect import BallDetector
    from vision.render import BallLook, Look, Renderer
    from vision.table import NINE_FOOT

    from benchmarks.rest_causes import seeded_fits

    R = NINE_FOOT.radius_mm
    cam = Camera.overhead(NINE_FOOT, 2600.0, (960, 540), offset_mm=(100, -80), roll_deg=1.0, dist=(-0.1, 0.02, 0, 0, 0))
    balls = (BallLook("cue", "cue", (226, 234, 236)), BallLook("1", "solid", (20, 195, 235)), BallLook("12", "stripe", (105, 40, 85)))
    at = np.array([[600.0, 400.0], [1300.0, 900.0], [2300.0, 1000.0]])
    ren = Renderer(NINE_FOOT, cam, Look(noise_sigma=2.0), balls, seed=3)
    rot = np.broadcast_to(np.eye(3), (1, 3, 3, 3)).copy()
    frames = [ren.render(at[None], rot, np.ones((1, 3), bool), np.array([t])) for t in (0.0, 1 / 60)]
    det = BallDetector(cam, NINE_FOOT)
    for i, f in enumerate(frames):
        det.process(i, i / 60, f)
    fits = seeded_fits(det, frames[-1], at, R).to_numpy()
    # Against the renderer's true centres: each ball's fit within issue 3's resting p95 of
    # 2.5 mm (tests/test_detect.py holds the detector to it on frames like these), in table x, y.
    assert fits.shape == (3, 2)
    assert np.all(np.linalg.norm(fits - at, axis=1) <= 2.5), fits - at
    # A seed on empty cloth fits no ball: it is left out, not reported.
    assert len(seeded_fits(det, frames[-1], np.array([[1800.0, 600.0]]), R)) == 0


_CLIP_SCENE = """
name = "rest causes clip split"
lead_s = 0.5
tail_s = 0.2
max_duration_s = 2.0
seed = 5

[table]
preset = "9ft"

[camera]
height_mm = 2600
offset_mm = [150, -60]
resolution = [640, 360]
fps = 30
shutter_s = 0.01
quality = 20

[look]
noise = 1.5
occluder = true

[[ball]]
id = "cue"
kind = "cue"
at = [700, 400]

[[ball]]
id = "4"
kind = "solid"
colour = "#6a2a8a"
at = [1600, 850]

[[shot]]
ball = "cue"
aim = { rail = "top", diamond = 2.0 }
speed_mm_s = 1500
"""


def test_clip_frames_lay_the_scene_files_balls_where_it_puts_them(tmp_path):
    from benchmarks.rest_causes import ball_errors, clip_frames
    from railtrace.scene import load_scene

    path = tmp_path / "split.toml"
    path.write_text(_CLIP_SCENE)
    scene = load_scene(path)
    frames, cam, at, ids = clip_frames(scene, "clean", tmp_path)
    # The scene file's own ball places (the shot comes after lead_s = 0.5 s, so every ball is
    # still at rest over the opening frames).
    assert len(frames) == 3 and frames[0].shape == (360, 640, 3)
    assert ids == ["cue", "4"]
    assert np.abs(at - np.array([[700.0, 400.0], [1600.0, 850.0]])).max() < 1e-6
    err = ball_errors(scene.table, cam, frames, scene.film.fps, at)
    # Each ball found within issue 3's resting p95 of 2.5 mm of the scene file's place, on the
    # renderer's clean frames (tests/test_detect.py holds the detector to it on frames like these).
    assert np.all(np.hypot(*err.T) <= 2.5), err
    # A point on empty cloth has no detection within a ball radius: NaN, not the nearest ball.
    far = ball_errors(scene.table, cam, frames, scene.film.fps, np.array([[1200.0, 300.0]]))
    assert np.isnan(far).all()
