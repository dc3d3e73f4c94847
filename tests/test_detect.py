"""Ball detection against the renderer's truth: small frames rendered once per module, under
two quite different cameras and looks (non-square images so swapped axes fail)."""

import math

import cv2

import numpy as np
import pandas as pd
import pytest

from vision.camera import Camera
from vision.detect import COLUMNS, BallDetector, DetectConfig, empty_detections
from vision.render import BallLook, CueStroke, Lamp, Look, Occluder, Renderer
from vision.table import EIGHT_FOOT, NINE_FOOT, SEVEN_FOOT

R = NINE_FOOT.radius_mm
BALLS = (
    BallLook("cue", "cue", (226, 234, 236)),
    BallLook("1", "solid", (20, 195, 235)),
    BallLook("8", "solid", (22, 22, 22)),
    BallLook("12", "stripe", (105, 40, 85)),
    BallLook("5", "solid", (25, 110, 240)),
    BallLook("13", "stripe", (25, 110, 240)),
)
# Balls 5 and 13 touch (centres 2R apart); the others stand alone.
AT = np.array([[600.0, 400.0], [1300.0, 900.0], [2000.0, 300.0], [2300.0, 1000.0], [1000.0, 300.0], [1000.0 + 2 * R, 300.0]])

SETUPS = {
    "green_high": dict(
        camera=Camera.overhead(NINE_FOOT, 2600.0, (960, 540), offset_mm=(100, -80), roll_deg=1.0, dist=(-0.1, 0.02, 0, 0, 0)),
        look=Look(noise_sigma=2.0),
    ),
    "blue_low_wide": dict(
        camera=Camera.overhead(NINE_FOOT, 1900.0, (960, 540), offset_mm=(-150, 100), roll_deg=-4.0, dist=(-0.3, 0.08, 0, 0, 0)),
        look=Look(cloth_bgr=(150, 72, 28), cushion_bgr=(130, 62, 24), exposure=1.2, noise_sigma=3.0, specular=1.0),
    ),
}


def _rot(n):
    return np.broadcast_to(np.eye(3), (1, n, 3, 3)).copy()


def _match(det: pd.DataFrame, truth: np.ndarray, gate: float = R):
    """For each truth ball (N, 2) mm, the distance to the nearest detection (inf if none within
    ``gate``), and the index of that detection."""
    if len(det) == 0:
        return np.full(len(truth), np.inf), np.full(len(truth), -1)
    q = det[["x", "y"]].to_numpy()
    d = np.linalg.norm(truth[:, None] - q[None], axis=2)
    j = d.argmin(axis=1)
    e = d[np.arange(len(truth)), j]
    return np.where(e < gate, e, np.inf), j


@pytest.fixture(scope="module")
def stage():
    """``stage(s)``: a Renderer of set-up ``s``'s camera and look on the 9 ft table (one of
    SETUPS or RACKS), its static scene traced once per module, the costly part of a Renderer
    (about 2.5 processor seconds at 960 x 540); ``.with_balls(balls, occluder, seed)`` of it
    films what a new Renderer of those gives, to the bit (tests/test_render.py)."""
    done = {}

    def get(s):
        if id(s) not in done:
            done[id(s)] = (s, Renderer(NINE_FOOT, s["camera"], s["look"], ()))
        return done[id(s)][1]

    return get


@pytest.fixture(scope="module", params=list(SETUPS))
def resting(request, stage):
    s = SETUPS[request.param]
    ren = stage(s).with_balls(BALLS, seed=3)
    n = len(BALLS)
    frames = [ren.render(AT[None], _rot(n), np.ones((1, n), bool), np.array([t])) for t in (0.0, 1 / 60)]
    det = BallDetector(s["camera"], NINE_FOOT)
    out = [det.process(i, i / 60, f) for i, f in enumerate(frames)]
    return request.param, s, out


def test_output_columns_and_empty_frames():
    cam = SETUPS["green_high"]["camera"]
    ren = Renderer(NINE_FOOT, cam, Look(noise_sigma=2.0), BALLS[:1], seed=1)
    empty = ren.render(np.zeros((1, 1, 2)), _rot(1), np.zeros((1, 1), bool), np.zeros(1))
    det = BallDetector(cam, NINE_FOOT)
    out = det.process(0, 0.0, empty)
    # Issue acceptance: an empty table gives a correctly columned, empty result (no pockets,
    # sights or cushions taken for balls).
    assert list(out.columns) == COLUMNS and len(out) == 0
    assert list(empty_detections().columns) == COLUMNS
    with pytest.raises(ValueError, match="uint8 BGR"):
        det.process(1, 0.1, empty[:, :-2])


def test_resting_balls_found_and_placed(resting):
    name, s, out = resting
    for det in out:
        assert list(det.columns) == COLUMNS
        err, _ = _match(det, AT)
        # Every ball found, none twice, nothing else (issue acceptance).
        assert np.all(np.isfinite(err)), (name, err)
        assert len(det) == len(AT), (name, len(det))
        # sigma_mm is a plausible position spread, quality in 0..1.
        assert det["quality"].between(0, 1).all() and (det["sigma_mm"] > 0).all()
        # Image of the centre agrees with the table position through the camera (0.5 px).
        uv = s["camera"].project(np.column_stack([det["x"], det["y"], np.full(len(det), R)]))
        assert np.abs(uv - det[["u", "v"]].to_numpy()).max() < 0.5


def test_resting_ball_accuracy_meets_acceptance(resting):
    name, s, out = resting
    err = np.concatenate([_match(d, AT)[0] for d in out])
    # Issue acceptance: resting balls median centre error <= 1 mm, p95 <= 2.5 mm.
    assert np.median(err) <= 1.0 and np.percentile(err, 95) <= 2.5, (name, err)


def test_resting_balls_within_a_few_mm(resting):
    name, s, out = resting
    err = np.concatenate([_match(d, AT)[0] for d in out])
    # What the detector achieves today (not the acceptance figure): every ball within 5 mm
    # (a fifth of a ball's radius), median within 2.5 mm.
    assert np.max(err) <= 5.0 and np.median(err) <= 2.5, (name, err)


def test_touching_balls_are_split(resting):
    name, s, out = resting
    err, j = _match(out[0], AT[4:6])
    assert np.all(np.isfinite(err)) and j[0] != j[1], (name, err)


def test_cue_stripe_and_solid_told_apart(resting):
    name, s, out = resting
    det = out[0]
    _, j = _match(det, AT)
    pats = det["pattern"].to_numpy()[j]
    # Common practice: the cue ball is plain white; a solid shows at most a small white disc.
    assert pats[0] == "cue", (name, pats)
    assert det["colour"].to_numpy()[j][0] == "white"
    assert pats[2] == "solid", (name, pats)  # the 8: black
    # No object ball is called the cue ball.
    assert "cue" not in set(pats[1:]), (name, pats)


@pytest.fixture(scope="module")
def moving(stage):
    """A ball crossing at 4 m/s, 60 fps, 1/250 s shutter (16 mm of blur), and one at 1/60 s
    (67 mm: a streak longer than the ball)."""
    s = SETUPS["green_high"]
    ren = stage(s).with_balls(BALLS[:2], seed=5)
    out = {}
    for shutter in (1 / 250, 1 / 60):
        det = BallDetector(s["camera"], NINE_FOOT)
        rows, truth = [], []
        for i in range(5):
            t = i / 60
            sub = t + shutter * ((np.arange(24) + 0.5) / 24 - 0.5)
            x = 700.0 + 4000.0 * sub
            pos = np.stack([np.column_stack([x, np.full(24, 500.0)]), np.tile([[1300.0, 900.0]], (24, 1))], axis=1)
            frame = ren.render(pos, np.broadcast_to(np.eye(3), (24, 2, 3, 3)), np.ones((24, 2), bool), sub)
            rows.append(det.process(i, t, frame))
            truth.append([700.0 + 4000.0 * t, 500.0])
        out[shutter] = (rows, np.array(truth))
    return out


@pytest.mark.parametrize("shutter,median_mm,p95_mm", [(1 / 250, 3.0, 8.0), (1 / 60, 3.0, 8.0)])
def test_moving_ball_at_mid_exposure(moving, shutter, median_mm, p95_mm):
    rows, truth = moving[shutter]
    err = np.array([_match(d, truth[i : i + 1])[0][0] for i, d in enumerate(rows)])
    # Issue acceptance (stated for 1/250 s; we hold 1/60 s to the same): median <= 3 mm,
    # p95 <= 8 mm, found in every frame.
    assert np.all(np.isfinite(err)), err
    assert np.median(err) <= median_mm and np.percentile(err, 95) <= p95_mm, err


@pytest.mark.xfail(strict=True, reason="streak length from the swept-sphere fit is not yet right: the faint ends of a long streak are found inside the swept outline")
def test_long_streak_reports_its_travel(moving):
    rows, truth = moving[1 / 60]
    travel = 4000.0 / 60
    got = []
    for i, d in enumerate(rows[1:], start=1):
        _, j = _match(d, truth[i : i + 1])
        got.append(np.hypot(d["blur_x"].iloc[j[0]], d["blur_y"].iloc[j[0]]))
    # The streak vector's length is the travel during the exposure (67 mm), within 15 mm.
    assert np.all(np.abs(np.array(got) - travel) < 15.0), got


def test_arm_and_cue_are_not_detected(stage):
    s = SETUPS["green_high"]
    balls = BALLS[:1]
    occ = Occluder((CueStroke(1.0, (1270.0, 635.0), math.radians(30.0)),))
    ren = stage(s).with_balls(balls, occluder=occ, seed=2)
    det = BallDetector(s["camera"], NINE_FOOT)
    pos = np.array([[[1270.0, 635.0]]])
    frames = [ren.render(pos, _rot(1), np.ones((1, 1), bool), np.array([t])) for t in (0.0, 0.4, 0.6, 0.85)]
    # Frame 0 is before the cue comes in (lead 1.2 s before the strike at 1 s: it is over the
    # table from t = -0.2 s): the cue and arms are in every frame here.
    for i, f in enumerate(frames):
        out = det.process(i, i / 60, f)
        err, _ = _match(out, pos[0])
        extra = len(out) - int(np.isfinite(err).sum())
        assert extra == 0, out


def _film_stroke(cam, ren, at: np.ndarray, t0: float, t1: float) -> tuple[list[int], list[int]]:
    """Per frame, the extra and the missed detections of the two balls ``at`` (2, 2) mm filmed
    by ``ren``: first an empty table (the model), then 60 fps from ``t0`` to ``t1`` s about a
    strike at 1.5 s (the player appears 1.2 s before the strike and has slid in 0.95 s before)."""
    det = BallDetector(cam, NINE_FOOT)
    times = [0.0] + list(1.5 + np.arange(t0, t1, 1 / 60))
    extra, missed = [], []
    for i, t in enumerate(times):
        out = det.process(i, t, ren.render(at[None], _rot(2), np.ones((1, 2), bool), np.array([t])))
        err, _ = _match(out, at)
        missed.append(int(np.sum(~np.isfinite(err))))
        extra.append(len(out) - int(np.isfinite(err).sum()))
    return extra, missed


@pytest.mark.parametrize("phase,t0,t1", [("sliding in", -1.2, -0.9), ("settled, practice stroke", -0.9, -0.45)])
def test_arm_and_hand_over_blue_cloth_give_no_ball(phase, t0, t1):
    # A blue cloth and a skin-coloured hand, as in the cushion check. Sliding in, the bridge
    # hand (ball-wide, rounded, a ball's height above the cloth) crosses the table apart from
    # the dark sleeve and looks like a blurred ball. Settled, only the cue moves (practice
    # strokes): frames differ only round the cue, so the boxes the detector looks in cut the
    # bridge hand and arm off from where they come in over the rail. Issue acceptance: no
    # detections from the occluder, every ball found.
    cam = Camera.overhead(NINE_FOOT, 2700.0, (1120, 630), offset_mm=(-60, 40), roll_deg=-0.8, dist=(-0.05, 0.0, 0, 0, 0))
    look = Look(cloth_bgr=(140, 90, 36), cushion_bgr=(120, 78, 30), noise_sigma=1.5)
    at = np.array([[1200.0, 500.0], [600.0, 900.0]])
    occ = Occluder((CueStroke(1.5, (1200.0, 500.0), math.radians(-60.0)),))
    balls = (BALLS[0], BallLook("3", "solid", (30, 40, 200)))
    ren = Renderer(NINE_FOOT, cam, look, balls, occluder=occ, seed=4)
    extra, missed = _film_stroke(cam, ren, at, t0, t1)
    assert sum(extra) == 0, (phase, extra)
    assert sum(missed) == 0, (phase, missed)


def test_small_holes_are_filled_and_large_ones_kept():
    from vision.detect import _fill_small_holes

    # Analytic masks: a disc of radius 12 px with a 2 x 2 px hole at its middle, and a ring
    # (radii 12 and 30 px) round a hole of about 450 px; holes up to 100 px are filled.
    yy, xx = np.mgrid[:80, :100]
    r = np.hypot(xx - 40.0, yy - 40.0)
    disc = (r <= 12).astype(np.uint8)
    disc[39:41, 39:41] = 0
    ring = ((r <= 30) & (r > 12)).astype(np.uint8)
    assert _fill_small_holes(disc, 100.0)[39:41, 39:41].all()
    assert int(_fill_small_holes(disc, 100.0).sum()) == int(disc.sum()) + 4
    np.testing.assert_array_equal(_fill_small_holes(ring, 100.0), ring)
    # Background that reaches the mask's edge is no hole, however small.
    edge = np.ones((10, 10), np.uint8)
    edge[0, 4] = 0
    np.testing.assert_array_equal(_fill_small_holes(edge, 100.0), edge)


CUSHION_SCENE = """
name = "cushion contacts: a ball rolled into the bottom rail and back, two balls frozen to rails"
lead_s = 0.1
tail_s = 0.1
max_duration_s = 1.3
seed = 17
[table]
preset = "9ft"
[camera]
height_mm = 2300
offset_mm = [-90, 140]
roll_deg = -1.5
resolution = [960, 540]
fps = 60
shutter_s = 0.002
distortion = [-0.18, 0.03, 0.0, 0.0, 0.0]
quality = 20
[look]
cloth = "#2f7a4a"
noise = 2.5
occluder = false
[[ball]]
id = "cue"
kind = "cue"
at = [800, 260]
[[ball]]
id = "7"
kind = "solid"
colour = "#7a2b1a"
at = [1700, 1241.0]
[[ball]]
id = "10"
kind = "stripe"
colour = "#1d4fb0"
at = [2300, 29.0]
[[shot]]
ball = "cue"
aim = { heading_deg = -84.0 }
speed_mm_s = 1500
"""


@pytest.fixture(scope="module")
def cushion_clip(tmp_path_factory):
    """Detections and truth of a filmed clip: the cue ball rolled nearly square into the bottom
    cushion (contact at about 1.1 m/s) and back; a dark solid frozen against the top cushion and
    a stripe against the bottom one (their centres on the reversal line, within a mm)."""
    import tomllib

    from railtrace.filming import film_scene
    from railtrace.scene import parse_scene
    from vision.calibfile import read_calibration
    from vision.detect import detect_clip

    clip = tmp_path_factory.mktemp("cushion") / "cushion.mp4"
    truth_dir = film_scene(parse_scene(tomllib.loads(CUSHION_SCENE), source_text=CUSHION_SCENE), clip)
    table, camera, _ = read_calibration(truth_dir / "calibration.json")
    return detect_clip(clip, camera, table), pd.read_csv(truth_dir / "tracks.csv")


def _errors_by_frame(det: pd.DataFrame, truth: pd.DataFrame, label: str) -> pd.DataFrame:
    rows = []
    for f, g in truth[truth["label"] == label].groupby("frame"):
        d = det[det["frame"] == f]
        err, _ = _match(d, g[["x", "y"]].to_numpy())
        rows.append((f, float(g["y"].iloc[0]), float(np.hypot(g["vx"].iloc[0], g["vy"].iloc[0])), err[0]))
    return pd.DataFrame(rows, columns=["frame", "y", "speed", "err"])


def test_ball_into_a_cushion_and_back_is_measured_in_every_frame(cushion_clip):
    det, truth = cushion_clip
    E = _errors_by_frame(det, truth, "cue")
    moving = E[E["speed"] > 1.0]
    near = moving[moving["y"] < 3 * R]  # within a ball and a half of the nose: the contact frames
    assert len(near) >= 3, near
    # Issue acceptance for moving balls (median <= 3 mm, p95 <= 8 mm), held here to every single
    # frame round the contact: one frame off by 8 mm hides the reversal from the event solver.
    assert np.all(np.isfinite(moving["err"])), moving
    assert moving["err"].max() <= 8.0 and moving["err"].median() <= 3.0, moving
    assert near["err"].max() <= 3.0, near


@pytest.mark.parametrize("label", ["7", "10"])
def test_balls_frozen_against_a_cushion_are_found(cushion_clip, label):
    det, truth = cushion_clip
    E = _errors_by_frame(det, truth, label)
    # Found in every frame, within a fifth of a ball's radius (5 mm), as balls in the open are
    # (test_resting_balls_within_a_few_mm); no streak is reported for a ball at rest.
    assert np.all(np.isfinite(E["err"])) and E["err"].max() <= 5.0, E.describe()


def test_no_false_detections_along_the_cushions(cushion_clip):
    det, truth = cushion_clip
    extra = 0
    for f, d in det.groupby("frame"):
        g = truth[truth["frame"] == f]
        q = d[["x", "y"]].to_numpy()
        dist = np.linalg.norm(q[:, None] - g[["x", "y"]].to_numpy()[None], axis=2).min(axis=1)
        extra += int(np.sum(dist > R))
    assert extra == 0, extra


def test_ray_map_agrees_with_the_camera():
    from vision.detect import RayMap

    cam = SETUPS["blue_low_wide"]["camera"]  # the strongest lens here, k1 = -0.3
    rng = np.random.default_rng(4)
    w, h = cam.image_size
    uv = rng.uniform([0.0, 0.0], [w - 1.0, h - 1.0], (4000, 2))
    # Reference: Camera.backproject (Newton's method on the lens model). Cross-check, two
    # implementations of one mapping: within 0.02 mm at ball-centre height.
    got = RayMap(cam).backproject(uv, R)
    ref = cam.backproject(uv, R)
    assert np.abs(got - ref).max() < 0.02


def test_arm_over_the_table_from_the_first_frame_gives_no_ball():
    # The player is down on the shot when the clip starts (0.5 s before the strike), so the
    # first frame, which builds the empty-table model, holds the arm, bridge hand and cue; then
    # they stroke and withdraw. Neither the occluder nor what it leaves in the model may give a
    # ball (issue acceptance: no false detections on the occluder).
    cam = Camera.overhead(NINE_FOOT, 2600.0, (1280, 720), offset_mm=(150, -100), roll_deg=1.5, dist=(-0.12, 0.02, 0.0004, -0.0003, 0.0))
    occ = Occluder((CueStroke(0.5, (500.0, 640.0), math.radians(8.0)),))
    ren = Renderer(NINE_FOOT, cam, Look(noise_sigma=2.0), BALLS[:2], occluder=occ, seed=7)
    at = np.array([[500.0, 640.0], [1300.0, 300.0]])
    det = BallDetector(cam, NINE_FOOT)
    extra = []
    for i, t in enumerate((0.0, 1 / 60, 0.1, 0.2, 0.3, 0.4, 0.45)):
        frame = ren.render(at[None], _rot(2), np.ones((1, 2), bool), np.array([t]))
        out = det.process(i, t, frame)
        err, _ = _match(out, at)
        extra.append(len(out) - int(np.isfinite(err).sum()))
    assert sum(extra) == 0, extra


@pytest.fixture(scope="module")
def on_tan():
    """A cue ball, a yellow stripe and a yellow solid on tan cloth: the object balls share the
    cloth's hue (far more saturated)."""
    cam = Camera.overhead(NINE_FOOT, 2300.0, (960, 540), offset_mm=(60, -40), roll_deg=0.5, dist=(-0.2, 0.05, 0, 0, 0))
    look = Look(cloth_bgr=(106, 154, 176), noise_sigma=3.0, exposure=0.8)
    balls = (BallLook("cue", "cue", (226, 234, 236)), BallLook("9", "stripe", (32, 176, 224)), BallLook("1", "solid", (32, 176, 224)))
    at = np.array([[600.0, 500.0], [1500.0, 800.0], [2000.0, 400.0]])
    ren = Renderer(NINE_FOOT, cam, look, balls, seed=11)
    frame = ren.render(at[None], _rot(3), np.ones((1, 3), bool), np.zeros(1))
    out = BallDetector(cam, NINE_FOOT).process(0, 0.0, frame)
    err, j = _match(out, at)
    assert np.all(np.isfinite(err)), err
    return out["pattern"].to_numpy()[j]


def test_solid_of_the_cloths_hue_is_a_solid(on_tan):
    # Common practice: a solid is coloured all over but for a small white number disc; its
    # colour is not the cloth's for being of the cloth's hue.
    assert on_tan[0] == "cue" and on_tan[2] == "solid", on_tan


def test_one_cue_ball_per_frame(on_tan):
    # Common practice (the rules of pool): a table holds one cue ball. The yellow stripe on
    # tan cloth, whose band is of the cloth's hue, looks all white and cloth; of the two read
    # as the cue, the cue ball (white all over) keeps the label.
    assert on_tan[0] == "cue" and on_tan[1] != "cue", on_tan


@pytest.mark.xfail(strict=True, reason="a stripe whose band (of the cloth's hue) shows only as a thin ring at the rim is taken for the cue ball")
def test_stripe_of_the_cloths_hue_is_no_cue_ball(on_tan):
    assert on_tan[1] == "stripe", on_tan


def test_off_white_cloth_matches_scipy_nnls():
    from scipy.optimize import nnls

    from vision.detect import _off_white_cloth

    rng = np.random.default_rng(4)
    W = np.array([200.0, 210.0, 205.0])
    C = rng.uniform(10, 200, (300, 3))
    # Mixes of the white and the cloth, shades of either alone, and colours of neither.
    I = np.concatenate([
        rng.uniform(0, 1, (100, 1)) * W + rng.uniform(0, 1, (100, 1)) * C[:100],
        rng.uniform(0, 1, (100, 1)) * C[100:200],
        rng.uniform(0, 255, (100, 3)),
    ])
    got = _off_white_cloth(I, W, C)
    want = []
    for i in range(len(I)):
        _, res = nnls(np.column_stack([W, C[i]]), I[i])
        want.append(res / max(np.linalg.norm(I[i]), 20.0))
    # Reference library: scipy's non-negative least squares (Lawson & Hanson 1974).
    np.testing.assert_allclose(got, want, atol=2e-4)
    assert np.all(got[:200] < 1e-3) and np.median(got[200:]) > 0.05


def test_dim_blurred_cue_ball_is_never_a_stripe():
    """The cue ball in a dim room (exposure 0.4) on grey-blue cloth under a low, wide, rolled
    camera, at rest and then rolling at 1.5 m/s under a 1/60 s shutter (25 mm of smear): its
    limb, shaded toward the cloth's level and mixed with the cloth by the blur, is no white by
    the bright-white test, and was taken for a stripe's band in 6 of the 8 frames."""
    cam = Camera.overhead(NINE_FOOT, 2100.0, (960, 540), offset_mm=(-250, 60), roll_deg=2.0, dist=(-0.18, 0.03, 0, 0, 0))
    look = Look(cloth_bgr=(120, 90, 61), exposure=0.4, ambient=0.25, noise_sigma=2.5)
    ren = Renderer(NINE_FOOT, cam, look, BALLS[:1], seed=7)
    det = BallDetector(cam, NINE_FOOT)
    n_sub, shutter, fps = 16, 1 / 60, 60.0
    pats = []
    for i in range(8):
        t = i / fps
        sub = t + shutter * ((np.arange(n_sub) + 0.5) / n_sub - 0.5)
        x = 800.0 + 1500.0 * np.maximum(sub - 2 / fps, 0.0)
        pos = np.column_stack([x, np.full(n_sub, 600.0)])[:, None]
        out = det.process(i, t, ren.render(pos, np.broadcast_to(np.eye(3), (n_sub, 1, 3, 3)), np.ones((n_sub, 1), bool), sub))
        err, j = _match(out, np.array([[800.0 + 1500.0 * max(t - 2 / fps, 0.0), 600.0]]))
        assert np.isfinite(err[0]), (i, out)
        pats.append(out["pattern"].to_numpy()[j[0]])
    # Common practice: the cue ball is plain white, with no band and no colour; where white is
    # not certain the pattern may be unknown, never an object ball's.
    assert not {"stripe", "solid"} & set(pats), pats


# Three balls each touching the other two (a triangle, as in a rack or after a cluster
# settles) and a touching pair at an angle: solids and stripes of one colour, and the cue ball.
CLUSTER = (
    BallLook("4", "solid", (134, 42, 91)),
    BallLook("12", "stripe", (134, 42, 91)),
    BallLook("cue", "cue", (226, 234, 236)),
    BallLook("8", "solid", (22, 22, 22)),
    BallLook("11", "stripe", (31, 42, 196)),
)
CLUSTER_AT = np.array(
    [
        [1500.0, 500.0],
        [1500.0 + 2 * R, 500.0],
        [1500.0 + R, 500.0 + math.sqrt(3) * R],  # analytic geometry: touching both, 2R from each
        [900.0, 800.0],
        [900.0 + 2 * R * math.cos(0.5), 800.0 + 2 * R * math.sin(0.5)],
    ]
)


@pytest.fixture(scope="module")
def cluster(stage):
    """Detections of the cluster in two frames, per setup name, rendered once per module."""
    done = {}

    def run(name):
        if name not in done:
            s = SETUPS[name]
            ren = stage(s).with_balls(CLUSTER, seed=8)
            n = len(CLUSTER)
            det = BallDetector(s["camera"], NINE_FOOT)
            frames = [ren.render(CLUSTER_AT[None], _rot(n), np.ones((1, n), bool), np.array([t])) for t in (0.0, 1 / 60)]
            done[name] = [det.process(i, i / 60, f) for i, f in enumerate(frames)]
        return done[name]

    return run


@pytest.mark.parametrize("name", list(SETUPS))
def test_every_ball_of_a_touching_cluster_is_found(cluster, name):
    # A triangle of touching balls is deepest (in its distance transform) between the balls, so
    # the first seeds can fall between two of them; what the fitted balls leave of the
    # foreground must seed the rest. Issue acceptance: every visible ball found (here in every
    # frame), each by its own detection, and no false detections.
    for i, det in enumerate(cluster(name)):
        err, j = _match(det, CLUSTER_AT)
        assert np.all(np.isfinite(err)), (name, i, err)
        assert len(set(j.tolist())) == len(CLUSTER_AT) and len(det) == len(CLUSTER_AT), (name, i, det)


@pytest.mark.parametrize("name", ["green_high", "blue_low_wide"])
def test_touching_balls_are_placed_without_their_neighbours_rims(cluster, name):
    # Half a touching ball's outline window can hold its neighbour's rim; fitted with the rays
    # toward its neighbours left out, the cluster's balls meet the issue's acceptance for
    # resting balls: median <= 1 mm, p95 <= 2.5 mm.
    err = np.concatenate([_match(d, CLUSTER_AT)[0] for d in cluster(name)])
    assert np.median(err) <= 1.0 and np.percentile(err, 95) <= 2.5, (name, err)


def test_spread_seeds_leave_no_two_closer_than_a_diameter():
    from vision.detect import _spread_seeds

    # Three seeds of a rack's distance transform, inward of a touching triangle (as uneven_60fps's
    # were, 16-23 px apart for a 23 px ball image), and one far away. Analytic geometry: the
    # pushes are equal and opposite, so the seeds' centroid stays; every pair ends at least
    # a diameter apart, and a seed clear of the others does not move.
    uv = np.array([[868.0, 342.0], [855.0, 352.0], [873.0, 364.0], [700.0, 200.0]])
    diam = np.full(4, 23.1)
    out = _spread_seeds(uv, diam)
    d = np.linalg.norm(out[:, None] - out[None], axis=2)[np.triu_indices(4, 1)]
    assert d.min() >= 23.1 - 0.01, d
    np.testing.assert_allclose(out.mean(axis=0), uv.mean(axis=0), atol=1e-9)
    np.testing.assert_array_equal(out[3], uv[3])


@pytest.mark.parametrize("cov_b", [np.diag([0.1, 0.1]), np.array([[0.9, 0.3], [0.3, 0.2]]), np.diag([0.02, 1.5])])
def test_held_apart_fits_match_scipy_constrained_least_squares(cov_b):
    from scipy.optimize import minimize

    from vision.detect import _held_apart_fits

    # Two sharp fits 1.7 R apart (overlapping) with their centres' covariances (the sigma
    # stated is the root of half the trace, so the covariances are used as given). Reference:
    # scipy's SLSQP (Kraft 1988) minimum of the fits' Mahalanobis cost under the constraint
    # |a - b| >= 2 R; a third fit far away must stay where it was.
    cam = Camera.overhead(NINE_FOOT, 2600.0, (960, 540))
    cov_a = np.array([[0.2, -0.05], [-0.05, 0.1]])
    xy = np.array([[1000.0, 600.0], [1000.0 + 1.7 * R * 0.8, 600.0 + 1.7 * R * 0.6], [300.0, 300.0]])
    rows = []
    for (x, y), C in zip(xy, (cov_a, cov_b, np.eye(2))):
        rows.append(dict(x=x, y=y, u=0.0, v=0.0, blur_x=0.0, blur_y=0.0, cov_xy=C, sigma_mm=math.sqrt(np.trace(C) / 2)))
    out = _held_apart_fits(rows, R, cam)
    Wa, Wb = np.linalg.inv(cov_a), np.linalg.inv(cov_b)

    def cost(z):
        da, db = z[:2] - xy[0], z[2:] - xy[1]
        return da @ Wa @ da + db @ Wb @ db

    ref = minimize(cost, xy[:2].ravel(), method="SLSQP", constraints=[{"type": "ineq", "fun": lambda z: np.hypot(*(z[:2] - z[2:])) - 2 * R}],
                   options=dict(ftol=1e-12, maxiter=200)).x
    got = np.array([out[0]["x"], out[0]["y"], out[1]["x"], out[1]["y"]])
    assert np.hypot(*(got[:2] - got[2:])) >= 2 * R - 0.01
    np.testing.assert_allclose(got, ref, atol=0.05)
    assert out[2] is rows[2]
    # The image centre follows the move (the camera's own projection at ball-centre height).
    uv = cam.project(np.array([[out[0]["x"], out[0]["y"], R]]))[0]
    np.testing.assert_allclose([out[0]["u"], out[0]["v"]], uv, atol=1e-9)


# A touching triangle of a red, a yellow-striped and a dark red ball (colours of the extra set's
# uneven rack) beside a cue ball, rendered under three lamps.
RACK = (BallLook("3", "solid", (31, 42, 196)), BallLook("9", "stripe", (32, 176, 224)), BallLook("7", "solid", (26, 43, 122)), BallLook("cue", "cue", (226, 234, 236)))
RACK_AT = np.array(
    [
        [1800.0, 635.0],
        [1800.0 + math.sqrt(3) * R, 635.0 - R],  # analytic geometry: each 2R from the other two
        [1800.0 + math.sqrt(3) * R, 635.0 + R],
        [700.0, 640.0],
    ]
)


@pytest.mark.parametrize("seed", [0, 1])
def test_touching_rack_balls_placed_apart_and_on_their_centres(seed):
    cam = SETUPS["green_high"]["camera"]
    ren = Renderer(NINE_FOOT, cam, Look(noise_sigma=2.0), RACK, seed=seed)
    n = len(RACK)
    det = BallDetector(cam, NINE_FOOT)
    frames = [ren.render(RACK_AT[None], _rot(n), np.ones((1, n), bool), np.array([t])) for t in (0.0, 1 / 60)]
    for i, f in enumerate(frames):
        d = det.process(i, i / 60, f)
        err, j = _match(d, RACK_AT)
        # Issue 3's resting acceptance (p95 <= 2.5 mm) for every ball, each by its own detection.
        assert np.all(err <= 2.5) and len(set(j.tolist())) == n, (seed, i, err)
        # Solid balls cannot overlap: no two detections closer than a diameter (less 0.1 mm of
        # arithmetic slack; common practice: a racked triangle touches, centres 2R apart).
        q = d[["x", "y"]].to_numpy()
        gaps = np.linalg.norm(q[:, None] - q[None], axis=2)[np.triu_indices(len(q), 1)]
        assert gaps.min() >= 2 * R - 0.1, (seed, i, gaps)


def test_fast_ball_is_not_at_rest_and_its_split_fits_are_not_held_apart():
    # A cue ball crossing at 2 m/s under an open 1/30 s shutter at 30 fps (67 mm of smear, as
    # multi_rail_30fps's cue ball whose streak the seeds split into two sharp fits 1.5 R
    # apart) beside a touching pair at rest, rendered twice (renderer's truth: the moving
    # ball's mid-exposure centre). The moving ball is not at rest, the resting pair is; two
    # fits of the streak's halves (centre +- 0.75 R along its motion) are left where they are,
    # two fits of the touching pair drawn 1.7 R apart are moved a diameter apart (common
    # practice: solid balls cannot overlap).
    from vision.detect import _held_apart_fits

    s = SETUPS["green_high"]
    cam = s["camera"]
    balls = (BallLook("cue", "cue", (226, 234, 236)), BallLook("3", "solid", (31, 42, 196)), BallLook("7", "solid", (26, 43, 122)))
    ren = Renderer(NINE_FOOT, cam, s["look"], balls, seed=9)
    pair = np.array([[1700.0, 800.0], [1700.0 + 2 * R, 800.0]])
    e = np.array([math.cos(0.4), math.sin(0.4)])
    fps, shutter, n_sub, v = 30.0, 1 / 30, 24, 2000.0
    det = BallDetector(cam, NINE_FOOT)
    for i in range(2):
        t = i / fps
        sub = t + shutter * ((np.arange(n_sub) + 0.5) / n_sub - 0.5)
        cue = np.array([700.0, 400.0]) + v * sub[:, None] * e
        pos = np.concatenate([cue[:, None], np.broadcast_to(pair, (n_sub, 2, 2))], axis=1)
        img = ren.render(pos, np.broadcast_to(np.eye(3), (n_sub, 3, 3, 3)), np.ones((n_sub, 3), bool), sub)
        if i == 0:
            det.step_rows(0, 0.0, img)
    mid = np.array([700.0, 400.0]) + v * (1 / fps) * e

    def row(xy, sigma=1.0):
        uv = cam.project(np.array([[xy[0], xy[1], R]]))[0]
        return dict(x=float(xy[0]), y=float(xy[1]), u=float(uv[0]), v=float(uv[1]), blur_x=0.0, blur_y=0.0,
                    cov_xy=np.eye(2) * sigma**2, sigma_mm=sigma, colour="", pattern="unknown", quality=0.7)

    halves = [row(mid - 0.75 * R * e), row(mid + 0.75 * R * e)]
    mid_pair = pair.mean(axis=0)
    resting = [row(mid_pair - [0.85 * R, 0.0]), row(mid_pair + [0.85 * R, 0.0])]
    still = lambda r: det._at_rest(img, r)
    assert not any(still(r) for r in halves)
    assert all(still(r) for r in resting)
    out = _held_apart_fits(halves + resting, R, cam, still=still)
    assert out[0] is halves[0] and out[1] is halves[1]
    gap = math.hypot(out[2]["x"] - out[3]["x"], out[2]["y"] - out[3]["y"])
    # Equal covariances: each moved half the shortfall, along the line (analytic).
    assert abs(gap - 2 * R) < 0.01 and abs(out[2]["x"] - pair[0, 0]) < 0.01, (gap, out[2])


def test_fast_ball_split_in_two_on_the_sample_clip_is_not_held_apart():
    # multi_rail_30fps (rendered; truth from the renderer): at frame 49 the cue ball, at
    # about 2 m/s under an open 1/30 s shutter, is split by the seeds into two sharp fits
    # 1.5 R apart (its foreground's waist). Holding them a diameter apart as two balls moved
    # one read 31 mm from the truth (the fits' own: 19 and 24 mm, the streak's error, not
    # this step's): no two reads within two radii of the ball may be set a diameter apart
    # (the step places its pairs at 2 R exactly; one ball is no pair).
    from pathlib import Path

    from vision.calibfile import read_calibration
    from vision.video import iter_frames

    root = Path(__file__).resolve().parents[1] / "sample_clips"
    table, cam, _ = read_calibration(root / "multi_rail_30fps.truth" / "calibration.json")
    tr = pd.read_csv(root / "multi_rail_30fps.truth" / "tracks.csv")
    det = BallDetector(cam, table)
    for i, t, img in iter_frames(root / "multi_rail_30fps.mp4"):
        rows = det.step_rows(i, t, img)
        if i == 49:
            break
    cue = tr[(tr.frame == 49) & (tr.track == 0)][["x", "y"]].to_numpy()[0]
    near = np.array([[r["x"], r["y"]] for r in rows if math.hypot(r["x"] - cue[0], r["y"] - cue[1]) < 2 * R])
    assert len(near) >= 1
    gaps = np.linalg.norm(near[:, None] - near[None], axis=2)[np.triu_indices(len(near), 1)]
    assert np.all(gaps < 2 * R - 0.5), gaps


def _grazing_rays(cam: Camera, centre_xy, n: int = 48, outliers: int = 0, seed: int = 0):
    """Unit rays (n, 3) from the camera centre tangent to the ball of radius R resting at
    ``centre_xy`` (through its image outline, :func:`sphere_outline_px`), ``outliers`` of them
    (every eighth) pushed 3 px outward (stray edges: a mark, a highlight), 0.05 px noise."""
    from vision.detect import sphere_outline_px

    X = np.array([[centre_xy[0], centre_xy[1], R]])
    uv = sphere_outline_px(cam, X, R, n)[0]
    c = cam.project(X)[0]
    out = uv - c
    bad = np.arange(0, n, 8)[:outliers]
    uv[bad] += 3.0 * out[bad] / np.linalg.norm(out[bad], axis=1, keepdims=True)
    uv += np.random.default_rng(seed).normal(0, 0.05, uv.shape)
    return cam.rays(uv)


def _same_fit(general, special):
    """Assert two fits' (params, ray residuals, ray weights, covariance function) agree to
    rounding; returns the second."""
    (p1, r1, w1, c1), (p2, r2, w2, c2) = general, special
    assert np.max(np.abs(p1 - p2)) < 1e-9
    assert np.max(np.abs(r1 - r2)) < 1e-9 and np.max(np.abs(w1 - w2)) < 1e-9
    assert np.max(np.abs(c1() - c2())) < 1e-12
    return special


@pytest.mark.parametrize("setup", list(SETUPS))
def test_three_parameter_fit_agrees_with_the_general_fit(setup):
    # Two implementations of one Levenberg-Marquardt with Tukey reweighting must agree to
    # rounding (cross-check of two forms, as filterpy's procedure-form tests do; common
    # practice), and the tangent rays of a known sphere must give back its centre (analytic:
    # every ray grazing the sphere has residual 0 at the true centre).
    from vision.detect import _robust_fit_general, _robust_fit_sharp

    cam = SETUPS[setup]["camera"]
    for k, (xy, n_out) in enumerate([((600.0, 400.0), 0), ((2300.0, 1000.0), 6), ((150.0, 1100.0), 3)]):
        d = _grazing_rays(cam, xy, outliers=n_out, seed=k)
        start = np.array([xy[0] + 9.0, xy[1] - 6.0, 0.0])  # a third of a radius off
        p2, _, w2, _ = _same_fit(_robust_fit_general(start, cam.centre_mm, d, R, False), _robust_fit_sharp(start, cam.centre_mm, d, R))
        # 0.05 px of outline noise at about 2 mm per px moves a 48-ray centre by well under 0.1 mm.
        assert math.hypot(p2[0] - xy[0], p2[1] - xy[1]) < 0.1
        if n_out:
            assert np.all(w2[np.arange(0, 48, 8)[:n_out]] < 0.2)  # the pushed rays are outliers to the biweight


@pytest.mark.parametrize("setup", list(SETUPS))
def test_streak_fit_agrees_with_the_general_fit(setup):
    # Two implementations of one Levenberg-Marquardt with Tukey reweighting on the swept-sphere
    # (streak) model must agree to rounding (cross-check of two forms, as filterpy's
    # procedure-form tests do; common practice); the rays grazing a known swept sphere (its
    # outline from OpenCV's projectPoints through sphere_outline_px) must give back its centre,
    # half length and heading (analytic: every grazing ray has residual 0 there).
    from vision.detect import _robust_fit_general, _robust_fit_streak, _swept_outline_px

    cam = SETUPS[setup]["camera"]
    rng = np.random.default_rng(3)
    for k, (xy, half, heading) in enumerate([((600.0, 400.0), 40.0, 0.3), ((2300.0, 1000.0), 90.0, 2.5), ((150.0, 1100.0), 25.0, -1.2)]):
        poly = _swept_outline_px(cam, xy[0], xy[1], half, heading, R)
        idx = np.linspace(0, len(poly), 48, endpoint=False).astype(int)
        uv = poly[idx] + rng.normal(0, 0.05, (48, 2))
        uv[::9] += 4.0  # stray edges
        d = cam.rays(uv)
        start = np.array([xy[0] + 9.0, xy[1] - 6.0, 0.0, 0.7 * half, heading + 0.1])
        p2 = _same_fit(_robust_fit_general(start, cam.centre_mm, d, R, True), _robust_fit_streak(start, cam.centre_mm, d, R))[0]
        # The hull of 32-point outlines is a polygon whose chords lie inside the true envelope,
        # and 0.05 px noise: within 0.3 mm, 0.5 mm and 0.01 rad (0.14 mm, 0.13 mm, 0.002 seen).
        assert math.hypot(p2[0] - xy[0], p2[1] - xy[1]) < 0.3
        assert abs(p2[3] - half) < 0.5 and abs(p2[4] - heading) < 0.01


@pytest.mark.parametrize("setup", list(SETUPS))
def test_ray_map_projection_and_outline_match_opencv(setup):
    # RayMap.project must agree with OpenCV's projectPoints (reference library) and its
    # one-sphere outline with sphere_outline_px, whose points are again OpenCV projections.
    import cv2

    from vision.detect import RayMap, sphere_outline_px

    cam = SETUPS[setup]["camera"]
    rm = RayMap(cam)
    rng = np.random.default_rng(5)
    P = np.column_stack([rng.uniform(0, NINE_FOOT.length_mm, 50), rng.uniform(0, NINE_FOOT.width_mm, 50), rng.uniform(0, 60, 50)])
    ref, _ = cv2.projectPoints(P, cam.rvec, cam.tvec, cam.K, cam.dist)
    assert np.max(np.abs(rm.project(P) - ref.reshape(-1, 2))) < 1e-6
    # One point at a time (the plain-float path for a single point), and one behind the camera.
    one = np.vstack([rm.project(q[None]) for q in P])
    assert np.max(np.abs(one - ref.reshape(-1, 2))) < 1e-6
    assert np.all(np.isnan(rm.project(np.array([[0.0, 0.0, cam.centre_mm[2] + 500.0]]))))
    for x, y in P[:10, :2]:
        want = sphere_outline_px(cam, np.array([[x, y, R]]), R, 32)[0]
        assert np.max(np.abs(rm.sphere_outline(x, y, R) - want)) < 1e-9


def test_ray_map_image_radius_matches_opencv_and_the_array_path():
    # RayMap.image_radius (the ball's image radius, in plain floats) against OpenCV's
    # projectPoints (reference library) of the analytic silhouette: the image of the tangency
    # circle, centre X - v R^2/|v|^2 and radius R sqrt(1 - R^2/|v|^2) normal to v = X - C
    # (textbook cone-sphere tangency; Hartley & Zisserman 2003 on the image of a quadric's
    # contour generator). And backproject_one / image_radius must equal the array path they
    # replace (RayMap.backproject, sphere_outline_px, RayMap.project) to the last bit, on both
    # lens forms and on pixels off the correction grid.
    import cv2

    from vision.detect import RayMap, sphere_outline_px

    rng = np.random.default_rng(9)
    for dist in ((-0.3, 0.09, 0.0, 0.0, 0.0), (-0.42, 0.16, -0.0008, 0.0005, -0.025)):
        cam = Camera.overhead(NINE_FOOT, 1700.0, (1280, 720), offset_mm=(-250, 150), roll_deg=3.0, dist=dist)
        rm = RayMap(cam)
        w, h = cam.image_size
        uv = rng.uniform([-3.0, -3.0], [w + 3.0, h + 3.0], (300, 2))
        uv[:3] = [[0.0, 0.0], [w - 1.0, h - 1.0], [w + 1.0, 10.0]]
        for u, v in uv:
            X = rm.backproject(np.array([[u, v]]), R)[0]
            assert np.array_equal(np.array(rm.backproject_one(u, v, R)), X, equal_nan=True)
            old = float(np.mean(np.linalg.norm(sphere_outline_px(cam, X[None], R, 16, rm)[0] - rm.project(X[None])[0], axis=1)))
            got = rm.image_radius(u, v, R)
            # Both NaN where the lens model gives no ray (a pixel past the image's edge).
            assert got == old or (math.isnan(got) and math.isnan(old))
        # Against OpenCV where the lens model maps the pixel to a ray (the strong lenses' far
        # corners fold back, where neither gives a usable point).
        for u, v in rng.uniform([0.2 * w, 0.2 * h], [0.8 * w, 0.8 * h], (40, 2)):
            X = rm.backproject(np.array([[u, v]]), R)[0]
            vv = X - cam.centre_mm
            d2 = float(vv @ vv)
            q = X - vv * R**2 / d2
            rho = R * math.sqrt(1 - R**2 / d2)
            e1 = np.cross(vv, [0.0, 0.0, 1.0])
            e1 /= np.linalg.norm(e1)
            e2 = np.cross(vv / math.sqrt(d2), e1)
            a = np.linspace(0, 2 * np.pi, 16, endpoint=False)[:, None]
            ring = q + rho * (np.cos(a) * e1 + np.sin(a) * e2)
            pts, _ = cv2.projectPoints(np.vstack([ring, X[None]]), cam.rvec, cam.tvec, cam.K, cam.dist)
            pts = pts.reshape(-1, 2)
            ref = float(np.mean(np.linalg.norm(pts[:16] - pts[16], axis=1)))
            assert abs(rm.image_radius(u, v, R) - ref) < 1e-6


def test_ray_map_projection_of_both_lens_forms_matches_opencv():
    # RayMap.project takes a shorter path for a lens of k1, k2 alone (the SETUPS cameras and
    # automatic calibration's); both it and the full radial-tangential path must agree with
    # OpenCV's projectPoints (reference library), and the radial path must equal the full
    # formula to the last bit (its left-out terms are exact zeros).
    import cv2

    from vision.detect import RayMap

    rng = np.random.default_rng(8)
    P = np.column_stack([rng.uniform(0, NINE_FOOT.length_mm, 200), rng.uniform(0, NINE_FOOT.width_mm, 200), rng.uniform(0, 60, 200)])
    for dist in ((-0.3, 0.09, 0.0, 0.0, 0.0), (-0.42, 0.16, -0.0008, 0.0005, -0.025)):
        cam = Camera.overhead(NINE_FOOT, 1700.0, (1280, 720), offset_mm=(-250, 150), roll_deg=3.0, dist=dist)
        rm = RayMap(cam)
        assert rm._radial_only == (dist[2:] == (0.0, 0.0, 0.0))
        ref, _ = cv2.projectPoints(P, cam.rvec, cam.tvec, cam.K, cam.dist)
        got = rm.project(P)
        assert np.max(np.abs(got - ref.reshape(-1, 2))) < 1e-6
        if rm._radial_only:
            rm._radial_only = False  # the full formula on the same camera
            assert np.array_equal(rm.project(P), got)


def test_sphere_fit_places_an_off_axis_ball_from_its_projected_silhouette():
    # Under a pinhole camera the outline of a sphere is a conic whose centre is not the image of
    # the sphere's centre (Hartley & Zisserman, Multiple View Geometry, 2nd ed., the outline of
    # a quadric), and lens distortion bends it further. The silhouette is built here without
    # the detector's formula: a dense cloud of points on the sphere projected by OpenCV's
    # projectPoints (reference library), its convex hull the outline. The fit, whose rays must
    # graze the sphere, must place the ball from that outline to within the hull's own chord
    # error (0.0003 mm seen), and a uniform inward shift of the outline by one pixel (the
    # blurred edge of a shaded ball read inside its silhouette, alike all round) must go into
    # the fit's radius bias and not move the centre (geometry: a shift alike all round has no
    # first harmonic; 0.02 mm seen at the far corner, where the hull's area centroid lies
    # 0.011 px, 0.06 mm on the cloth, from the centre's image).
    import cv2

    from vision.detect import _robust_fit

    cam = Camera.overhead(NINE_FOOT, 1500.0, (1280, 720), offset_mm=(-250, 150), roll_deg=3.0, dist=(-0.3, 0.09, 0.001, -0.001, -0.01))
    rng = np.random.default_rng(4)
    u = rng.normal(size=(40000, 3))
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    for x, y in [(2350.0, 1150.0), (200.0, 120.0), (1270.0, 640.0)]:
        X = np.array([x, y, R])
        uv, _ = cv2.projectPoints(X + R * u, cam.rvec, cam.tvec, cam.K, cam.dist)
        hull = cv2.convexHull(uv.reshape(-1, 2).astype(np.float32)).reshape(-1, 2).astype(float)
        c = cam.project(X[None])[0]
        rho = np.linalg.norm(hull - c, axis=1)
        for shift_px, tol_mm in ((0.0, 0.05), (1.0, 0.05)):
            pts = hull - shift_px * (hull - c) / rho[:, None]
            start = np.array([x + 8.0, y - 5.0, 0.0])
            p = _robust_fit(start, cam.centre_mm, cam.rays(pts), R, False)[0]
            assert math.hypot(p[0] - x, p[1] - y) < tol_mm, (x, y, shift_px, p)


def test_ray_polygon_crossing_of_a_circle():
    # Rays from inside a circle of radius a (drawn as a 2000-gon) cross it at
    # t = -(w.d) + sqrt((w.d)^2 - |w|^2 + a^2), w = start - centre (analytic); from outside,
    # rays that miss it give NaN.
    from vision.detect import _ray_polygon

    a, c0 = 17.0, np.array([300.0, 200.0])
    th = np.linspace(0, 2 * np.pi, 2000, endpoint=False)
    poly = c0 + a * np.column_stack([np.cos(th), np.sin(th)])
    ang = np.linspace(0, 2 * np.pi, 48, endpoint=False)
    dirs = np.column_stack([np.cos(ang), np.sin(ang)])
    start = c0 + np.array([4.0, -3.0])
    w = start - c0
    wd = dirs @ w
    want = -wd + np.sqrt(wd**2 - w @ w + a**2)
    # The polygon lies inside the circle by at most a (1 - cos(pi / 2000)) = 2e-5 px.
    assert np.max(np.abs(_ray_polygon(start, dirs, poly) - want)) < 3e-5
    outside = _ray_polygon(c0 + np.array([100.0, 0.0]), dirs, poly)
    assert np.isnan(outside[0]) and np.isfinite(outside[24])  # pointing away / back at it


@pytest.mark.parametrize("setup", list(SETUPS))
def test_convex_ray_polygon_agrees_with_the_search_of_every_edge(setup):
    # Two forms of one crossing (cross-check of two implementations; common practice): on the
    # convex silhouettes of balls over the whole table, seen through each camera, the bracketing
    # edge's crossing must equal the farthest crossing over all edges, for centres jittered by
    # a pixel (the fit's predicted centres are never exactly the outline's own).
    from vision.detect import RayMap, _RAY_DIRS, _ray_polygon, _ray_polygon_all, _swept_outline_px

    cam = SETUPS[setup]["camera"]
    rm = RayMap(cam)
    rng = np.random.default_rng(5)
    for _ in range(200):
        x, y = rng.uniform(40, NINE_FOOT.length_mm - 40), rng.uniform(40, NINE_FOOT.width_mm - 40)
        half, heading = (0.0, 0.0) if rng.uniform() < 0.5 else (rng.uniform(10, 80), rng.uniform(-np.pi, np.pi))
        poly = _swept_outline_px(cam, x, y, half, heading, R, rm)
        c = rm.project(np.array([[x, y, R]]))[0] + rng.normal(0, 1.0, 2)
        assert np.max(np.abs(_ray_polygon(c, _RAY_DIRS, poly) - _ray_polygon_all(c, _RAY_DIRS, poly))) < 1e-9


# Balls of the cloth's own hue (a red solid on red cloth, a blue one on blue cloth): they
# differ from the cloth by their shading (a bright crown and highlight, darkening toward the
# limb, a shadow round them), hardly by colour. Six places over the table, so the lamps light
# them from overhead and from the side; the first frame is the empty table (how the background
# model treats balls present from the start is the background's own matter). The looks vary
# the lamps (three or one, soft or hard shadows), camera height, lens, exposure and image size.
SAME_HUE_AT = np.array([[600.0, 400.0], [1300.0, 900.0], [2000.0, 300.0], [2300.0, 1100.0], [1000.0, 635.0], [1800.0, 635.0]])
SAME_HUE = {
    "red_three_lamps": dict(
        camera=Camera.overhead(NINE_FOOT, 2200.0, (1280, 720), offset_mm=(100, -80), roll_deg=1.0, dist=(-0.1, 0.02, 0, 0, 0)),
        cloth=(34, 30, 138),
        ball=(31, 42, 196),
        look=dict(exposure=1.0),
    ),
    "red_one_lamp_hard": dict(
        camera=Camera.overhead(NINE_FOOT, 2800.0, (960, 540), offset_mm=(-120, 60), roll_deg=-2.0, dist=(-0.2, 0.05, 0, 0, 0)),
        cloth=(40, 36, 150),
        ball=(31, 42, 196),
        look=dict(exposure=0.75, lamps=(Lamp((1270.0, 500.0, 1400.0)),), shadow_softness_mm=40.0, ambient=0.4),
    ),
    "blue_three_lamps": dict(
        camera=Camera.overhead(NINE_FOOT, 2200.0, (1280, 720), offset_mm=(100, -80), roll_deg=1.0, dist=(-0.1, 0.02, 0, 0, 0)),
        cloth=(154, 79, 29),
        ball=(176, 79, 29),
        look=dict(exposure=1.0),
    ),
}


@pytest.fixture(scope="module")
def same_hue():
    """Detections of the balls of the cloth's own hue, per look, rendered once per module."""
    done = {}

    def run(name):
        if name not in done:
            done[name] = _same_hue_detections(name)
        return done[name]

    return run


def _same_hue_detections(name):
    s = SAME_HUE[name]
    look = Look(cloth_bgr=s["cloth"], cushion_bgr=tuple(int(0.85 * c) for c in s["cloth"]), noise_sigma=2.5, **s["look"])
    n = len(SAME_HUE_AT)
    balls = tuple(BallLook(str(i + 1), "solid", s["ball"]) for i in range(n))
    ren = Renderer(NINE_FOOT, s["camera"], look, balls, seed=1)
    det = BallDetector(s["camera"], NINE_FOOT)
    det.process(0, 0.0, ren.render(SAME_HUE_AT[None], _rot(n), np.zeros((1, n), bool), np.zeros(1)))
    return det.process(1, 1 / 60, ren.render(SAME_HUE_AT[None], _rot(n), np.ones((1, n), bool), np.array([1 / 60])))


@pytest.mark.parametrize("name", ["red_three_lamps", "red_one_lamp_hard"])
def test_balls_of_the_cloths_hue_are_found_and_placed(same_hue, name):
    det = same_hue(name)
    err, j = _match(det, SAME_HUE_AT)
    # Issue acceptance: every visible ball found, each by its own detection, nothing else; resting
    # balls median centre error <= 1 mm, p95 <= 2.5 mm.
    assert np.all(np.isfinite(err)), (name, err)
    assert len(set(j.tolist())) == len(SAME_HUE_AT) and len(det) == len(SAME_HUE_AT), (name, det)
    assert np.median(err) <= 1.0 and np.percentile(err, 95) <= 2.5, (name, err)


@pytest.mark.xfail(strict=True, reason="a blue ball on blue cloth of nearly its albedo, right under a lamp, matches the cloth's brightness over half its disc and fails the fit's filled-disc test (4 of the 6 are found)")
def test_blue_balls_on_blue_cloth_are_found_and_placed(same_hue):
    det = same_hue("blue_three_lamps")
    err, _ = _match(det, SAME_HUE_AT)
    # Issue acceptance, as above.
    assert np.all(np.isfinite(err)), err
    assert np.median(err) <= 1.0 and np.percentile(err, 95) <= 2.5, err


@pytest.mark.parametrize("name", ["red_three_lamps", "red_one_lamp_hard"])
def test_solid_of_the_cloths_own_colour_is_a_solid(same_hue, name):
    det = same_hue(name)
    err, j = _match(det, SAME_HUE_AT)
    # Common practice: a solid is coloured all over but for a small white number disc; one of
    # the cloth's own colour is still a solid.
    assert np.all(np.isfinite(err)), err
    assert set(det["pattern"].to_numpy()[j]) == {"solid"}, det


# Balls leaving a cushion: a camera to the left of the table's middle, so the right cushion is
# seen obliquely and the line of sight past a ball's rail-side rim passes under the nose.
RAIL_CAM = Camera.overhead(NINE_FOOT, 2150.0, (960, 540), offset_mm=(-300, 100), dist=(-0.2, 0.05, 0, 0, 0))
RAIL_GAPS = (2.0, 10.0, 20.0)  # mm between the ball's centre and the right rail's reversal line


def test_rays_looking_past_the_nose_are_the_rail_side_ones():
    from vision.detect import _N_RAYS

    det = BallDetector(RAIL_CAM, NINE_FOOT)
    ang = np.linspace(0, 2 * np.pi, _N_RAYS, endpoint=False)
    dirs = np.column_stack([np.cos(ang), np.sin(ang)])
    L = NINE_FOOT.length_mm

    def flagged(x, y):
        c = RAIL_CAM.project(np.array([[x, y, R]]))[0]
        rho = np.full(_N_RAYS, float(np.linalg.norm(RAIL_CAM.project(np.array([[x + R, y, R]]))[0] - c)))
        return det._surround_off_bed(c, rho, dirs), c

    # Geometry (analytic): from mid-table no line of sight a few px past a ball's rim reaches a
    # cushion; next to the right cushion, far from the camera, only rays pointing towards the
    # rail (image direction of +x in the table frame) do, the one along it among them.
    mid, _ = flagged(L / 2, NINE_FOOT.width_mm / 2)
    assert not mid.any()
    near, c = flagged(L - NINE_FOOT.reversal_offset_mm - 2.0, 600.0)
    ex = RAIL_CAM.project(np.array([[L, 600.0, R]]))[0] - c
    towards = dirs @ (ex / np.linalg.norm(ex))
    assert near.any() and np.all(towards[near] > 0.0)
    assert near[np.argmax(towards)]


@pytest.mark.parametrize("cam", [RAIL_CAM, Camera.overhead(NINE_FOOT, 2100.0, (960, 540), offset_mm=(-150, 90), roll_deg=-3.0, dist=(-0.28, 0.07, 0, 0, 0))])
def test_rays_looking_past_the_nose_agree_with_the_cameras_back_projection(cam):
    # Reference: Camera.backproject (its own Newton undistortion, not the detector's RayMap or
    # its distance map): for ball centres over the whole table, from the cushions' noses
    # inwards, the rays flagged are exactly those whose outer band meets the bed plane outside
    # the nose rectangle.
    from vision.detect import _LOCAL_REACH_PX, _N_RAYS, sphere_outline_px

    det = BallDetector(cam, NINE_FOOT)
    ang = np.linspace(0, 2 * np.pi, _N_RAYS, endpoint=False)
    dirs = np.column_stack([np.cos(ang), np.sin(ang)])
    L, W = NINE_FOOT.length_mm, NINE_FOOT.width_mm
    flagged_any = 0
    for x in np.linspace(R, L - R, 23):
        for y in np.linspace(R, W - R, 13):
            c = cam.project(np.array([[x, y, R]]))[0]
            rho = np.linalg.norm(sphere_outline_px(cam, np.array([[x, y, R]]), R, _N_RAYS)[0] - c, axis=1)
            q = cam.backproject(c[None] + (rho + _LOCAL_REACH_PX)[:, None] * dirs, 0.0)
            off = ~((q[:, 0] >= 0) & (q[:, 0] <= L) & (q[:, 1] >= 0) & (q[:, 1] <= W))
            got = det._surround_off_bed(c, rho, dirs)
            assert np.array_equal(got, off), (x, y)
            flagged_any += bool(off.any())
    assert flagged_any >= 20  # the rows and columns next to the cushions


@pytest.fixture(scope="module")
def off_the_rail():
    """Detections of balls resting just off the right cushion, and their true centres (N, 2) mm."""
    L = NINE_FOOT.length_mm
    at = np.array([[L - NINE_FOOT.reversal_offset_mm - g, 200.0 + 3.5 * R * i] for i, g in enumerate(RAIL_GAPS)])
    n = len(at)
    balls = tuple(BALLS[i % 2] for i in range(n))
    ren = Renderer(NINE_FOOT, RAIL_CAM, Look(noise_sigma=2.0), balls, seed=5)
    empty = ren.render(at[None], _rot(n), np.zeros((1, n), bool), np.array([0.0]))
    full = ren.render(at[None], _rot(n), np.ones((1, n), bool), np.array([1 / 60]))
    det = BallDetector(RAIL_CAM, NINE_FOOT)
    det.process(0, 0.0, empty)
    return det.process(1, 1 / 60, full), at


@pytest.mark.xfail(strict=True, reason="rim shading bias: balls are placed away from the camera's "
                   "nadir, here towards the right cushion by 0.6-0.9 mm (as much 400 mm in from it; "
                   "the other way with the camera beyond the balls), see issue 4")
def test_ball_just_off_a_cushion_is_not_pulled_towards_it(off_the_rail):
    det, at = off_the_rail
    err, j = _match(det, at)
    assert np.all(np.isfinite(err)), err
    towards = det["x"].to_numpy()[j] - at[:, 0]
    # Issue 4 target, speed out of a cushion within 3 %: a ball leaving at 230 mm/s moves about
    # 40 mm in the ten frames the speed is measured over, so a bias that changes by more than
    # 0.5 mm across them costs over 1.2 % by itself; held here as the bias itself.
    assert np.abs(towards).max() <= 0.5, towards


# Green striped balls on blue cloth under a low wide camera and two lamps, the first frame
# already holding them (so the empty table is filled in round them): the band's dark rim runs
# into the dark crease where the ball meets the cloth, out of the lamps' and the room's light.
STRIPE_CAM = Camera.overhead(NINE_FOOT, 1800.0, (1280, 720), offset_mm=(-200, 120), roll_deg=-4.0, dist=(-0.28, 0.08, 0, 0, -0.01))
STRIPE_AT = np.array([[2000.0, 500.0], [1700.0, 300.0], [2200.0, 900.0], [1300.0, 450.0], [900.0, 850.0], [500.0, 300.0], [2300.0, 300.0], [1500.0, 1000.0]])


@pytest.mark.parametrize("spin_seed", [0, 2])
def test_striped_balls_whose_band_meets_the_crease_are_found_and_placed(spin_seed):
    from scipy.spatial.transform import Rotation

    look = Look(cloth_bgr=(154, 79, 29), cushion_bgr=(131, 67, 25), noise_sigma=3.0, exposure=1.2, lamps=(Lamp((700.0, 635.0, 1000.0)), Lamp((1840.0, 635.0, 1100.0))))
    n = len(STRIPE_AT)
    rot = Rotation.random(n, random_state=np.random.default_rng(spin_seed)).as_matrix()[None]
    balls = tuple(BallLook(str(9 + i), "stripe", (58, 122, 31)) for i in range(n))
    ren = Renderer(NINE_FOOT, STRIPE_CAM, look, balls, seed=2)
    det = BallDetector(STRIPE_CAM, NINE_FOOT)
    for i in range(2):
        out = det.process(i, i / 60, ren.render(STRIPE_AT[None], rot, np.ones((1, n), bool), np.array([i / 60])))
    err, j = _match(out, STRIPE_AT)
    # Issue acceptance: at least 99.5 % of fully visible balls detected (here every one of
    # the eight, each by its own detection, within a ball radius as the benchmark counts).
    assert np.all(np.isfinite(err)) and len(set(j.tolist())) == n, (spin_seed, err)
    # Issue acceptance: resting balls median centre error <= 1 mm, p95 <= 2.5 mm.
    assert np.median(err) <= 1.0 and np.percentile(err, 95) <= 2.5, (spin_seed, err)


def test_one_point_projection_matches_the_cameras():
    # A fitted centre's image (RayMap.project_point) must be Camera.project's to the last bit,
    # for a radial lens and one with tangential and k3 terms, and OpenCV's projectPoints
    # (reference) within 1e-6 px.
    from vision.detect import RayMap

    rng = np.random.default_rng(9)
    for dist in ((-0.3, 0.1, 0.0, 0.0, 0.0), (-0.42, 0.16, -0.0008, 0.0005, -0.025)):
        cam = Camera.overhead(NINE_FOOT, 2500.0, (1280, 720), offset_mm=(120, -70), roll_deg=1.2, dist=dist)
        rays = RayMap(cam)
        for _ in range(2000):
            p = np.array([[rng.uniform(-50, NINE_FOOT.length_mm + 50), rng.uniform(-50, NINE_FOOT.width_mm + 50), NINE_FOOT.radius_mm]])
            got = rays.project_point(*p[0].tolist())
            assert got.shape == (2,) and got.tobytes() == cam.project(p)[0].tobytes()
        ref, _ = cv2.projectPoints(p, cv2.Rodrigues(cam.R)[0], cam.tvec, cam.K, np.array(dist))
        assert np.allclose(got, ref.reshape(2), atol=1e-6)


def test_percentile_and_median_of_a_disc_match_numpy():
    # The ball identity's order statistics (the 95th percentile of the brightness, medians of
    # hue and brightness) must be numpy's own (reference: np.percentile's default "linear"
    # method, Hyndman & Fan 1996 definition 7, and np.median) to the last bit, on the 0..255
    # integer values of HSV pixels and on fractional values, for every length a disc gives.
    from vision.detect import _median, _percentile_linear

    rng = np.random.default_rng(5)
    for n in list(range(1, 300)) + [517, 1024, 2049]:
        for x in (rng.integers(0, 256, n).astype(float), rng.uniform(0.0, 255.0, n)):
            for q in (95, 50, 5, 99, 100, 0):
                assert np.float64(_percentile_linear(x, q)).tobytes() == np.float64(np.percentile(x, q)).tobytes(), (n, q)
            assert np.float64(_median(x)).tobytes() == np.float64(np.median(x)).tobytes(), n
    # A worked value (Hyndman & Fan 1996, definition 7): 1..10 at 95 % lies at index 8.55,
    # 9 + 0.55 (10 - 9).
    assert _percentile_linear(np.arange(1.0, 11.0), 95) == pytest.approx(9.55, abs=1e-12)


def test_planar_band_means_match_numpys_mean_of_interleaved_samples():
    # The local edge keeps its samples channel by channel (3, K, N); its band means must be
    # numpy's own mean over the band of the interleaved (K, N, 3) samples (reference: np.mean)
    # to the last bit, for 8-bit samples as cv2.remap gives them and for fractional ones.
    from vision.detect import _LOCAL_INNER, _LOCAL_OFF, _LOCAL_OUTER, _HUE_BAND, _band_mean_planar, _planar_profiles

    rng = np.random.default_rng(3)
    n = len(_LOCAL_OFF)
    for x in (rng.integers(0, 256, (48, n, 3)).astype(np.uint8), rng.uniform(0, 255, (17, n, 3)).astype(np.float32)):
        planes = _planar_profiles(x)
        assert planes.dtype == np.float32 and planes.flags.c_contiguous and planes.shape == (3,) + x.shape[:2]
        for band in (_LOCAL_INNER, _LOCAL_OUTER, _HUE_BAND):
            want = x[:, band].astype(np.float32).mean(axis=1)
            got = _band_mean_planar(planes, band)
            assert got.shape == (3, len(x)) and np.array_equal(got.T, want), band


def test_ballness_by_opencv_matches_the_written_out_score():
    # The score's OpenCV dot products and in-place arithmetic must give Horprasert et al.'s
    # (1999) brightness and chromaticity distortions as written out in numpy (reference: numpy's
    # einsum and plain float32 expressions), to the last bit for images and for sample arrays,
    # and known colours their known scores (analytic: a shadow at half light scores 0, a pixel
    # of the background's colour at twice its brightness scores 2 - 1.15).
    # The plain-numpy dot products (_dot3) give the same float32 values, so the coarse outline
    # shares them with the score.
    from vision.detect import _dot3, _dot3_f32, ballness

    rng = np.random.default_rng(11)
    for shape in [(37, 53, 3), (48, 30, 3), (200, 3), (5, 7, 9, 3), (0, 3)]:
        I = rng.integers(0, 256, shape).astype(np.float32)
        B = rng.uniform(0, 255, shape).astype(np.float32)
        ib = np.einsum("...c,...c->...", I, B)
        assert _dot3_f32(I, B).shape == ib.shape and np.array_equal(_dot3_f32(I, B), ib)
        Iq = I + rng.uniform(0, 1, shape).astype(np.float32)  # fractional, as interpolated samples
        assert np.array_equal(_dot3(Iq, B), np.einsum("...c,...c->...", Iq, B))
        bb = np.einsum("...c,...c->...", B, B)
        ii = np.einsum("...c,...c->...", I, I)
        a = ib / np.maximum(bb, 1.0)
        cd = np.sqrt(np.maximum(ii - 2.0 * a * ib + a * a * bb, 0.0)) / np.maximum(np.sqrt(bb), 30.0)
        want = cd + np.maximum(a - 1.15, 0.0) + 1.5 * np.maximum(0.5 - a, 0.0)
        got = ballness(I.astype(np.uint8), B)
        assert got.dtype == np.float32 and np.array_equal(got, want)
    cloth = np.array([[[40.0, 120.0, 60.0]]], np.float32)
    assert ballness(0.5 * cloth, cloth)[0, 0] == pytest.approx(0.0, abs=1e-6)
    assert ballness(2.0 * cloth, cloth)[0, 0] == pytest.approx(2.0 - 1.15, abs=1e-6)


@pytest.mark.parametrize("beside_mm", [12 * R, 2 * R + 1.0])
def test_ball_at_rest_in_a_box_is_carried_or_refitted_beside_a_new_ball(beside_mm, monkeypatch):
    # A ball at rest whose own change-grid cells did not change is carried over as it was
    # (no seed, no fit spent on it) when a box is searched round a ball that moved in beside
    # it; one touching the new ball is refitted with it, and both stay on the renderer's
    # truth (resting acceptance of the issue: within 2.5 mm, the p95 target).
    s = SETUPS["green_high"]
    cam = s["camera"]
    ren = Renderer(NINE_FOOT, cam, s["look"], BALLS[:2], seed=7)
    rest, new = np.array([1000.0, 500.0]), np.array([1000.0 + beside_mm, 500.0])
    off = np.array([2000.0, 1000.0])  # the second ball before it moved in
    frames = [ren.render(np.array([[rest, p]]), _rot(2), np.ones((1, 2), bool), np.array([t])) for p, t in ((off, 0.0), (new, 1 / 60))]
    det = BallDetector(cam, NINE_FOOT)
    first = det.step_rows(0, 0.0, frames[0])
    known = [r for r in first if math.hypot(r["x"] - rest[0], r["y"] - rest[1]) < R]
    assert len(known) == 1 and math.hypot(known[0]["x"] - rest[0], known[0]["y"] - rest[1]) < 2.5
    seeds = []
    real = det._fit_one
    monkeypatch.setattr(det, "_fit_one", lambda img, sd: seeds.append(sd["uv"]) or real(img, sd))
    uv_rest, uv_new = cam.project(np.array([[*rest, R], [*new, R]]))
    lo, hi = np.minimum(uv_rest, uv_new) - 2 * det.r_max_px, np.maximum(uv_rest, uv_new) + 2 * det.r_max_px
    box = (int(lo[0]), int(lo[1]), int(hi[0]), int(hi[1]))
    rows = det._detect_box(frames[1], box, known)
    assert len(rows) == 2, rows
    for want in (rest, new):
        assert min(math.hypot(r["x"] - want[0], r["y"] - want[1]) for r in rows) < 2.5
    near_rest = [uv for uv in seeds if np.hypot(*(uv - uv_rest)) < det.r_max_px]
    from vision.detect import _NEAR_R

    if beside_mm > _NEAR_R * R:
        assert any(r is known[0] for r in rows)  # carried over as it was
        assert not near_rest  # and never seeded: its silhouette is out of the foreground
    else:
        assert not any(r is known[0] for r in rows)  # refitted beside the touching ball


def test_unchanged_looks_at_the_cells_round_a_sharp_ball():
    # The carried-over test reads the change grid's cells within 1.5 of the largest ball image
    # radius of the centre's image: a changed cell there (and only there) makes it refit, and a
    # streak is never carried (it moved during the exposure).
    s = SETUPS["green_high"]
    det = BallDetector(s["camera"], NINE_FOOT)
    cs = det.config.cell_px
    grid = np.zeros((540 // cs, 960 // cs), bool)
    row = {"u": 400.0, "v": 300.0, "blur_x": 0.0, "blur_y": 0.0}
    assert det._unchanged(row, grid)
    reach = 1.5 * det.r_max_px
    near = grid.copy()
    near[int((300.0 + 0.9 * reach) // cs), int(400.0 // cs)] = True
    assert not det._unchanged(row, near)
    far = grid.copy()
    far[int((300.0 + reach) // cs) + 2, int(400.0 // cs)] = True
    assert det._unchanged(row, far)
    assert not det._unchanged(dict(row, blur_x=30.0), grid)


def _one_ball_seen(cam, look, ball, at: np.ndarray):
    """A detector that has seen one rendered frame of ``ball`` resting at ``at`` (2,) mm, that
    frame, the image (u, v) px of the ball's centre and the detector's ball image radius px."""
    ren = Renderer(NINE_FOOT, cam, look, (ball,), seed=9)
    frame0 = ren.render(at[None, None], _rot(1), np.ones((1, 1), bool), np.array([0.0]))
    det = BallDetector(cam, NINE_FOOT)
    det.step_rows(0, 0.0, frame0)
    u, v = cam.project(np.array([[*at, R]]))[0]
    return det, frame0, u, v, det.ball_px / 2


def test_ball_against_an_arm_is_found_and_the_arm_not_fitted(monkeypatch):
    # A ball lying against an arm that comes in over the rail (a skin-coloured bar 1.6 ball
    # diameters wide, drawn into a rendered frame) is found on the renderer's truth (within the
    # issue's 2.5 mm resting p95), while the seeds of the merged piece that lie on the arm are
    # not fitted at all: their ring is covered far beyond what the occluder test allows, which
    # no fit of a pixel or two could undo (:meth:`BallDetector._worth_fitting`).
    import cv2

    s = SETUPS["green_high"]
    at = np.array([600.0, 700.0])
    det, frame0, u, v, r_px = _one_ball_seen(s["camera"], s["look"], BALLS[0], at)
    # The arm: from the image's left edge to above the ball's centre, its lower side touching
    # the top of the ball's silhouette (it hides about 44 degrees of the occluder test's ring).
    frame1 = frame0.copy()
    top = int(round(v - r_px))
    cv2.rectangle(frame1, (0, top - int(round(3.2 * r_px))), (int(round(u)), top), (120, 150, 200), -1)
    fitted = []
    real = det._fit_one
    monkeypatch.setattr(det, "_fit_one", lambda img, sd: fitted.append((sd["strict"], sd["uv"])) or real(img, sd))
    out = det.process(1, 1 / 60, frame1)
    err, _ = _match(out, at[None])
    assert np.isfinite(err[0]) and err[0] < 2.5, out
    assert len(out) == 1, out  # nothing on the arm
    on_arm = [uv for strict, uv in fitted if strict and np.hypot(uv[0] - u, uv[1] - v) > r_px]
    assert not on_arm, on_arm
    assert any(strict for strict, _ in fitted), (fitted, u, v, r_px)  # the ball itself came as a seed of the arm's piece


@pytest.mark.parametrize("phase,t0,t1", [("sliding in", -1.2, -0.95), ("settled", -0.75, -0.5)])
def test_arm_lying_free_of_the_rail_gives_no_ball(phase, t0, t1):
    # A stroke from mid-table on blue cloth, as in the cushion check: the sleeves end over the
    # cloth, so the arm, hand and cue make a piece of foreground that does not reach in over the
    # rail, and their rounded ends (the bridge hand, the cue's butt, the bend of a sleeve) fit a
    # sphere's outline over half a turn. A ball touching the cue's tip and one apart are filmed
    # too. Issue acceptance: no detections from the occluder, every ball found.
    cam = Camera.overhead(NINE_FOOT, 2800.0, (1280, 720), offset_mm=(-40, 30), roll_deg=-0.5, dist=(-0.03, 0.0, 0, 0, 0))
    look = Look(cloth_bgr=(140, 90, 36), cushion_bgr=(120, 78, 30), noise_sigma=1.2)
    at = np.array([[2132.5, 711.7], [600.0, 300.0]])
    occ = Occluder((CueStroke(1.5, (2132.5, 711.7), math.radians(20.0)),))
    balls = (BALLS[0], BallLook("3", "solid", (30, 40, 200)))
    ren = Renderer(NINE_FOOT, cam, look, balls, occluder=occ, seed=6)
    extra, missed = _film_stroke(cam, ren, at, t0, t1)
    assert sum(extra) == 0, (phase, extra)
    assert sum(missed) == 0, (phase, missed)


def _z_scores(det: pd.DataFrame, truth: np.ndarray) -> np.ndarray:
    """Each truth ball's (N, 2) mm error per axis in units of its detection's stated sigma_mm
    (2N,); a ball not found counts as infinitely far."""
    err, j = _match(det, truth)
    if not np.all(np.isfinite(err)):
        return np.full(2 * len(truth), np.inf)
    d = det[["x", "y"]].to_numpy()[j] - truth
    return (d / det["sigma_mm"].to_numpy()[j][:, None]).ravel()


@pytest.fixture(scope="module")
def stated_sigma_z(resting, moving, cushion_clip, off_the_rail):
    """Errors in units of the stated sigma_mm, by kind of ball: resting in the open (this
    module's setup, both frames), moving (4 m/s at two shutters; the cue ball of the filmed
    cushion clip away from the rail), near a cushion (resting just off the right cushion; the
    filmed clip's cue ball within a ball and a half of the nose and its two frozen balls)."""
    _, _, out = resting
    z = {"resting": np.concatenate([_z_scores(d, AT) for d in out])}
    mov = [_z_scores(d, truth[i : i + 1]) for rows, truth in moving.values() for i, d in enumerate(rows)]
    near = [_z_scores(*off_the_rail)]
    det, truth = cushion_clip
    for f, g in truth.groupby("frame"):
        d = det[det["frame"] == f]
        for _, b in g.iterrows():
            zb = _z_scores(d, np.array([[b["x"], b["y"]]]))
            if min(b["y"], NINE_FOOT.width_mm - b["y"]) < 3 * R:
                near.append(zb)
            elif np.hypot(b["vx"], b["vy"]) > 1.0:
                mov.append(zb)
    z["moving"] = np.concatenate(mov)
    z["near a cushion"] = np.concatenate(near)
    return z


@pytest.mark.parametrize("kind", ["resting", "moving", "near a cushion"])
def test_stated_sigma_covers_the_error(stated_sigma_z, kind):
    z = np.abs(stated_sigma_z[kind])
    # An honest standard deviation makes the error per axis roughly standard normal: |z| > 3
    # for 0.27 % of samples, median |z| 0.674 (analytic). Held loosely (a few dozen to a few
    # hundred samples, errors that are biases more than noise): at most 5 % beyond 3 sigma and
    # a median |z| of at most 1, and at least 0.15 (a sigma inflated beyond use fails too).
    assert np.mean(z > 3.0) <= 0.05 and 0.15 <= np.median(z) <= 1.0, (kind, np.round(np.sort(z), 2))


def _butt_scene():
    """The cushion check's camera and blue cloth (sample_clips/cushion_check.toml) and a stroke
    like its 44th (cue ball at (407.5, 798.2) mm sent at 165 degrees, struck at 1.5 s here),
    whose cue slides in with its butt lying over the cloth beyond the grip hand; a second
    ball apart. (camera, renderer, stroke, ball positions (2, 2) mm)."""
    cam = Camera.overhead(NINE_FOOT, 2800.0, (1280, 720), offset_mm=(-40, 30), roll_deg=-0.5, dist=(-0.03, 0.0, 0, 0, 0))
    look = Look(cloth_bgr=(140, 90, 36), cushion_bgr=(120, 78, 30), noise_sigma=1.2)
    at = np.array([[407.5, 798.2], [1600.0, 300.0]])
    stroke = CueStroke(1.5, tuple(at[0]), math.radians(165.0))
    balls = (BALLS[0], BallLook("3", "solid", (30, 40, 200)))
    return cam, Renderer(NINE_FOOT, cam, look, balls, occluder=Occluder((stroke,)), seed=6), stroke, at


def test_cue_butt_over_the_cloth_is_a_cue_end_and_a_ball_at_the_tip_is_not():
    # The renderer's own cue (vision.render.Renderer._occluder_parts: its last part is the
    # butt cap, 30 mm across, its far end the butt's end) lies over the cloth beyond the grip
    # hand while the cue slides in (1 s before the strike). Where a ball fitted round the butt's
    # rounded end would lie, the frame's foreground runs on into a straight body narrower than
    # a ball and the disc is no wider than it: a cue's end (BallDetector._cue_end), the
    # cushion check's frame 3978 false ball. At the strike the cue tip touches the cue ball
    # (the renderer leaves 2 mm): the shaft runs off the ball as a body too, but the ball's
    # disc is its whole diameter across it (analytic: a disc's chord through its centre), so
    # it is no cue end. Bare cloth has no body at all.
    cam, ren, stroke, at = _butt_scene()
    det = BallDetector(cam, NINE_FOOT)
    empty = ren.render(at[None], _rot(2), np.ones((1, 2), bool), np.array([0.0]))
    det.process(0, 0.0, empty)
    tau = -1.0
    frame = ren.render(at[None], _rot(2), np.ones((1, 2), bool), np.array([stroke.t_strike + tau]))
    cap = ren._occluder_parts(stroke, tau)[7]
    assert cap[2] == pytest.approx(15.0, abs=0.5) and cap[4] == (25, 25, 25), cap  # the butt cap, 30 mm across
    axis = (cap[1] - cap[0]) / np.linalg.norm(cap[1] - cap[0])
    # A fit round the rounded end sits about a ball radius in from the end along the cue; try
    # the points from the end's own radius to a ball's.
    for back in (15.0, R, 1.5 * R):
        uv = cam.project((cap[1] - back * axis)[None])[0]
        assert det._cue_end(frame, uv), (back, det._body_across(frame, uv))
    at_strike = ren.render(at[None], _rot(2), np.ones((1, 2), bool), np.array([stroke.t_strike]))
    for k in range(2):
        uv = cam.project(np.array([[*at[k], R]]))[0]
        assert not det._cue_end(at_strike, uv), (k, det._body_across(at_strike, uv))
    assert det._body_across(frame, cam.project(np.array([[1800.0, 1100.0, R]]))[0]) is None


def test_arm_held_still_through_the_stroke_gives_no_ball():
    # Green cloth, a low camera with a wide lens: the player settles on the shot, the bridge
    # hand and arms stay still through the practice strokes while only the cue moves, and the
    # cue then withdraws along itself. Held still, the arm and the inside of the sliding cue
    # (whose colour does not change as it moves along itself) must not be taken into the
    # empty-table model: taken in, the cue's butt and the ghosts it leaves stood out as free,
    # ball-sized pieces during the withdrawal. Issue acceptance: no detections from the
    # occluder, every ball found.
    cam = Camera.overhead(NINE_FOOT, 2300.0, (1280, 720), offset_mm=(160, -110), roll_deg=-1.5, dist=(-0.18, 0.04, 0, 0, 0))
    look = Look(cloth_bgr=(60, 110, 70), cushion_bgr=(50, 95, 60), noise_sigma=1.8)
    at = np.array([[700.0, 350.0], [1500.0, 900.0]])
    occ = Occluder((CueStroke(1.5, (700.0, 350.0), math.radians(25.0)),))
    balls = (BALLS[0], BallLook("3", "solid", (30, 40, 200)))
    ren = Renderer(NINE_FOOT, cam, look, balls, occluder=occ, seed=8)
    extra, missed = _film_stroke(cam, ren, at, -1.2, 0.6)
    assert sum(extra) == 0, extra
    assert sum(missed) == 0, missed


def test_bridge_hand_is_not_taken_for_two_balls():
    # Blue cloth, the player's bridge hand resting on the cloth apart from the sleeve: the hand
    # is about a ball wide and rounded at both ends, and its two ends fit two spheres apart
    # whose outlines leave little of the piece unexplained; balls that do not touch have cloth
    # between them (:meth:`BallDetector._bridged`), so the piece is an occluder and its fits
    # must pass the occluder's tests. Issue acceptance: no detections from the occluder, every
    # ball found.
    cam = Camera.overhead(NINE_FOOT, 2600.0, (1280, 720), offset_mm=(90, -50), roll_deg=1.2, dist=(-0.08, 0.01, 0, 0, 0))
    look = Look(cloth_bgr=(150, 85, 40), cushion_bgr=(125, 72, 34), noise_sigma=1.5)
    at = np.array([[1900.0, 420.0], [600.0, 900.0]])
    occ = Occluder((CueStroke(1.5, (1900.0, 420.0), math.radians(-100.0)),))
    balls = (BALLS[0], BallLook("3", "solid", (30, 40, 200)))
    ren = Renderer(NINE_FOOT, cam, look, balls, occluder=occ, seed=8)
    extra, missed = _film_stroke(cam, ren, at, -1.2, 0.6)
    assert sum(extra) == 0, extra
    assert sum(missed) == 0, missed


def _seen_once(resting, shown: bool, stage):
    """(scene name, camera, frame, detector) for the ``resting`` scene: its balls at ``AT``
    rendered (seed 3), or the empty table where not ``shown``, and a detector that has
    processed that one frame."""
    name, s, _ = resting
    cam = s["camera"]
    ren = stage(s).with_balls(BALLS, seed=3)
    vis = np.full((1, len(BALLS)), shown, dtype=bool)
    frame = ren.render(AT[None], _rot(len(BALLS)), vis, np.array([0.0]))
    det = BallDetector(cam, NINE_FOOT)
    det.process(0, 0.0, frame)
    return name, cam, frame, det


def test_rim_steps_all_round_a_ball_and_nowhere_on_cloth_or_an_arm(resting, stage):
    # A sphere's silhouette steps from the ball to the cloth (or its own shadow) all round, so
    # the occluder test's rim share of each rendered ball standing alone is near 1; a sphere's
    # outline laid on bare cloth, or inside a bar wider than a ball (an arm), crosses no step
    # anywhere (analytic: the colour is the same either side of it).
    import cv2

    name, cam, frame, det = _seen_once(resting, True, stage)
    alone = AT[:4]  # balls 5 and 13 touch each other
    uv = cam.project(np.column_stack([alone, np.full(len(alone), R)]))
    shares = [det._rim_share(frame, p) for p in uv]
    assert min(shares) >= 0.9, (name, shares)
    bare = cam.project(np.array([[1600.0, 600.0, R]]))[0]
    assert det._rim_share(frame, bare) == 0.0, name
    arm = frame.copy()
    r_px = det.ball_px / 2
    cv2.rectangle(arm, (int(bare[0] - 4 * r_px), int(bare[1] - 2 * r_px)), (int(bare[0] + 4 * r_px), int(bare[1] + 2 * r_px)), (120, 150, 200), -1)
    assert det._rim_share(arm, bare) == 0.0, name


def test_a_ball_against_an_arm_keeps_ring_or_rim_and_a_circle_on_a_cue_keeps_neither(resting, stage):
    # A free fit is joined to something whatever its outline's rms (_neither_ring_nor_rim) when
    # it fails both halves of the occluder test. A rendered ball standing alone, and the same
    # ball with a sleeve-coloured bar (the renderer's Occluder sleeve) laid against it, keep
    # their rim step all round (a ball's silhouette steps to whatever lies outside it); a circle
    # a ball wide centred on a cue-coloured bar 0.7 of a ball wide running on past the ring
    # on both sides has its ring crossed twice (2 x 0.7 D over 2 pi 1.4 R: 32 % covered,
    # analytic) and the same colour either side of its outline everywhere (analytic).
    import cv2

    name, cam, frame, det = _seen_once(resting, True, stage)
    r_px = det.ball_px / 2
    ball = cam.project(np.array([[AT[0, 0], AT[0, 1], R]]))[0]
    assert not det._neither_ring_nor_rim(frame, ball), name
    arm = frame.copy()
    x0 = int(round(ball[0] + r_px + 1))
    cv2.rectangle(arm, (x0, int(ball[1] - 3 * r_px)), (x0 + int(4 * r_px), int(ball[1] + 3 * r_px)), Occluder(()).sleeve_bgr, -1)
    assert not det._neither_ring_nor_rim(arm, ball), name
    bare = cam.project(np.array([[1600.0, 600.0, R]]))[0]
    cue = frame.copy()
    ends = [(int(round(bare[0] + k * 5 * r_px)), int(round(bare[1]))) for k in (-1, 1)]
    cv2.line(cue, ends[0], ends[1], (40, 60, 90), int(round(1.4 * r_px)))
    assert det._neither_ring_nor_rim(cue, bare), name
    # The fit's joined mark (_joined_mark, ring and rim sampled once) is the two tests' verdict:
    # _neither_ring_nor_rim alone for an outline within _JOINED_RMS_MM, either of the two beyond.
    from vision.detect import _JOINED_RMS_MM

    for img, uv in ((frame, ball), (arm, ball), (cue, bare)):
        assert det._joined_mark(img, uv, 0.5 * _JOINED_RMS_MM) == det._neither_ring_nor_rim(img, uv), name
        both = det._joined_no_rim(img, uv) or det._neither_ring_nor_rim(img, uv)
        assert det._joined_mark(img, uv, 2.0 * _JOINED_RMS_MM) == both, name


def test_two_balls_apart_are_not_held_apart_and_a_hands_two_ends_are(resting, stage):
    # _held_apart: two balls whose centres lie 2.5 R apart (not touching) have cloth between
    # them (analytic: the gap is half a radius wide), while the two rounded ends of a
    # hand-shaped bar a ball wide (the renderer's Occluder skin colour) fitted as balls at the
    # same centres have the bar's full width between them (analytic: 1 ball >= _JOIN_WIDTH).
    import cv2

    from vision.detect import ballness

    name, cam, empty, det = _seen_once(resting, False, stage)
    xy = np.array([[1500.0, 600.0], [1500.0 + 2.5 * R, 600.0]])
    uv = cam.project(np.column_stack([xy, np.full(2, R)]))
    rows = [{"x": p[0], "y": p[1], "u": q[0], "v": q[1], "blur_x": 0.0, "blur_y": 0.0} for p, q in zip(xy, uv)]
    r_px = det.ball_px / 2
    skin = Occluder(()).skin_bgr
    pieces = []
    for join in (False, True):
        img = empty.copy()
        for q in uv:
            cv2.circle(img, tuple(int(round(c)) for c in q), int(round(r_px)), skin, -1)
        if join:
            cv2.line(img, tuple(int(round(c)) for c in uv[0]), tuple(int(round(c)) for c in uv[1]), skin, int(round(2 * r_px)))
        u0, v0 = int(uv[:, 0].min() - 3 * r_px), int(uv[:, 1].min() - 3 * r_px)
        u1, v1 = int(uv[:, 0].max() + 3 * r_px), int(uv[:, 1].max() + 3 * r_px)
        comp = (ballness(img[v0:v1, u0:u1], det.background.image[v0:v1, u0:u1]) > det._score_thr).astype(np.uint8)
        pieces.append(det._held_apart(comp, (u0, v0), rows[0], rows[1], []))
    assert pieces == [False, True], (name, pieces)


@pytest.mark.parametrize("side", ["above", "at the arm's end"])
def test_ball_just_clear_of_an_arm_is_found(side):
    # A ball a pixel or two clear of an arm that comes in over the rail (a skin-coloured bar
    # drawn into a rendered frame on red cloth, beside the ball or ending just short of it):
    # its piece of foreground lies within the occluder test's ring of the arm, so it is judged
    # as a ball touching the arm (BallDetector._mark_beside), and a whole ball passes those
    # tests. Found once, on the renderer's truth within the issue's 2.5 mm resting p95.
    import cv2

    cam = Camera.overhead(NINE_FOOT, 2500.0, (1280, 720), offset_mm=(70, 60), roll_deg=0.7, dist=(-0.06, 0.0, 0, 0, 0))
    look = Look(cloth_bgr=(40, 40, 150), cushion_bgr=(34, 34, 125), noise_sigma=1.5)
    at = np.array([700.0, 650.0])
    det, frame0, u, v, r_px = _one_ball_seen(cam, look, BALLS[1], at)
    frame1 = frame0.copy()
    if side == "above":
        top = int(round(v - r_px)) - 2
        cv2.rectangle(frame1, (0, top - int(round(3.2 * r_px))), (int(round(u)), top), (120, 150, 200), -1)
    else:
        cv2.rectangle(frame1, (0, int(round(v - 1.6 * r_px))), (int(round(u - r_px)) - 2, int(round(v + 1.6 * r_px))), (120, 150, 200), -1)
    out = det.process(1, 1 / 60, frame1)
    err, _ = _match(out, at[None])
    assert len(out) == 1 and err[0] < 2.5, out


@pytest.mark.parametrize("start,first,last", [(1000, 1130, 1186), (3830, 3830, 3992)])
def test_still_bridge_hand_and_its_faded_trace_give_no_streak(start, first, last):
    # The cushion-check sample clip (our renderer's occluder on blue cloth). Frames 1130-1185:
    # the bridge hand settles on the cloth, the cue strokes, and the hand is lifted between
    # frames 1183 and 1184; the encoder leaves a faded trace of it for a frame, ball-wide,
    # rounded and elongated, which fitted a streak with one end as sharp as the hand's edge.
    # Frames 3980-3991: a bridge hand held still by the top rail fitted a streak, its one end
    # sharp and the other running into the arm. A swept sphere fades alike at both ends
    # (BallDetector._soft_ends). The detector starts on the empty table before each stroke
    # (``start``); from there the cue sliding in (frame 1122) is fitted as a ball, which the
    # whole clip's run does not do and this test leaves out. From frame 3830 every frame
    # counts, the butt cap beyond the grip hand at frame 3978 among them (the whole clip's
    # run, whose second part's detector starts at frame 2391, fitted a ball round its rounded
    # end: test_cue_butt_over_the_cloth_is_a_cue_end_and_a_ball_at_the_tip_is_not). Issue
    # acceptance: no detections from the occluder, every ball found.
    from pathlib import Path

    from vision.calibfile import read_calibration
    from vision.video import iter_frames

    root = Path(__file__).resolve().parents[1] / "sample_clips"
    table, cam, _ = read_calibration(root / "cushion_check.truth" / "calibration.json")
    tr = pd.read_csv(root / "cushion_check.truth" / "tracks.csv")
    truth = {f: g[["x", "y"]].to_numpy() for f, g in tr.groupby("frame")}
    det = BallDetector(cam, table)
    extra, missed = {}, {}
    for i, t, img in iter_frames(root / "cushion_check.mp4"):
        if i >= last:
            break
        if i < start:
            continue
        out = det.process(i, t, img)
        if i < first:
            continue
        at = truth.get(i, np.zeros((0, 2)))
        err, _ = _match(out, at) if len(at) else (np.zeros(0), None)
        extra[i] = len(out) - int(np.isfinite(err).sum())
        missed[i] = int(np.sum(~np.isfinite(err)))
    assert sum(extra.values()) == 0, {k: v for k, v in extra.items() if v}
    assert sum(missed.values()) == 0, {k: v for k, v in missed.items() if v}


def test_identical_frame_gives_identical_rows_and_a_nudged_ball_is_refitted(monkeypatch, stage):
    # A frame identical to the last one changes no cell of the change grid: its rows are the
    # previous frame's very rows, and nothing is fitted. A ball nudged by about one pixel
    # changes its cells (its rim moves a pixel against the cloth): it is refitted and found
    # moved by the nudge (renderer's truth, within 0.5 mm: common practice for a sub-pixel
    # edge at about 2 mm per px), while the ball far from it is carried over untouched.
    s = SETUPS["green_high"]
    cam = s["camera"]
    ren = stage(s).with_balls(BALLS[:2], seed=11)
    a, b = np.array([900.0, 450.0]), np.array([1900.0, 800.0])
    # One pixel at ball a, in mm on the plane of ball centres, along x.
    uv = cam.project(np.array([[*a, R]]))[0]
    mm_per_px = float(np.linalg.norm(np.diff(cam.backproject(np.array([uv, uv + [1.0, 0.0]]), R)[:, :2], axis=0)))
    nudge = np.array([mm_per_px, 0.0])
    render = lambda p: ren.render(np.array([[p, b]]), _rot(2), np.ones((1, 2), bool), np.array([0.0]))
    still, nudged = render(a), render(a + nudge)
    det = BallDetector(cam, NINE_FOOT)
    first = det.step_rows(0, 0.0, still)
    fits = []
    real = det._fit_seed
    monkeypatch.setattr(det, "_fit_seed", lambda *args, **kw: fits.append(1) or real(*args, **kw))
    again = det.step_rows(1, 1 / 60, still.copy())
    assert again is first and not fits
    moved = det.step_rows(2, 2 / 60, nudged)
    assert fits
    row_a = min(moved, key=lambda r: math.hypot(r["x"] - a[0], r["y"] - a[1]))
    row_b = min(moved, key=lambda r: math.hypot(r["x"] - b[0], r["y"] - b[1]))
    old_a = min(first, key=lambda r: math.hypot(r["x"] - a[0], r["y"] - a[1]))
    assert row_b is min(first, key=lambda r: math.hypot(r["x"] - b[0], r["y"] - b[1]))
    assert row_a is not old_a
    assert abs((row_a["x"] - old_a["x"]) - nudge[0]) < 0.5 and abs(row_a["y"] - old_a["y"]) < 0.5



@pytest.mark.parametrize("setup", list(SETUPS))
@pytest.mark.parametrize("ball", [0, 2, 3])  # the cue ball, the black 8, the dark striped 12
def test_ball_nudged_half_a_millimetre_is_refitted_and_sensor_noise_alone_is_not(setup, ball, monkeypatch, stage):
    # The brief of issue 3's speed point: skip work where nothing moves, but never hide a ball
    # that moved. A 0.5 mm nudge moves the rim a quarter pixel or less (about 2-3 mm per px
    # here): too little for the change grid's cell means (which carried such a ball over
    # before), seen by the patch's Lucas-Kanade shift. A frame that differs only by the
    # renderer's fresh sensor noise changes nothing: no fit at all, the very rows again. After
    # the nudge the ball is refitted and lies within the issue's resting p95 target (2.5 mm) of
    # the renderer's truth, and the ball far from it is carried over untouched.
    s = SETUPS[setup]
    cam = s["camera"]
    ren = stage(s).with_balls((BALLS[ball], BALLS[4]), seed=21)
    a, b = np.array([900.0, 450.0]), np.array([1900.0, 800.0])
    render = lambda p: ren.render(np.array([[p, b]]), _rot(2), np.ones((1, 2), bool), np.array([0.0]))
    nudge = np.array([0.5 * math.cos(0.4), 0.5 * math.sin(0.4)])
    still, noise_only, nudged = render(a), render(a), render(a + nudge)
    det = BallDetector(cam, NINE_FOOT)
    first = det.step_rows(0, 0.0, still)
    fits = []
    real = det._fit_seed
    monkeypatch.setattr(det, "_fit_seed", lambda *args, **kw: fits.append(1) or real(*args, **kw))
    assert det.step_rows(1, 1 / 60, noise_only) is first and not fits
    moved = det.step_rows(2, 2 / 60, nudged)
    assert fits
    near = lambda rows, p: min(rows, key=lambda r: math.hypot(r["x"] - p[0], r["y"] - p[1]))
    assert near(moved, a) is not near(first, a)
    assert math.hypot(near(moved, a)["x"] - a[0] - nudge[0], near(moved, a)["y"] - a[1] - nudge[1]) < 2.5
    assert near(moved, b) is near(first, b)


def test_patch_shift_agrees_with_opencvs_lucas_kanade(stage):
    # The nudge test's shift of a ball's patch (one Lucas-Kanade step, Lucas & Kanade 1981)
    # against OpenCV's own Lucas-Kanade (cv2.calcOpticalFlowPyrLK, one level, iterated to
    # convergence) on the same patch, for sub-pixel translations (cv2.warpAffine, bicubic) of a
    # rendered ball: the same direction, and the size within 15 % (+ 0.01 px) of OpenCV's,
    # never below 0.95 of it. One linearised step measures a sharp rim's shift a little long
    # (measured 8-13 % here; a 0.5 mm nudge read 0.50-0.64 mm): it errs toward a refit.
    from vision.detect import _patch_shift, _shift_terms

    for setup, bl in (("green_high", 3), ("blue_low_wide", 2)):
        cam = SETUPS[setup]["camera"]
        ren = stage(SETUPS[setup]).with_balls(BALLS[bl : bl + 1], seed=3)
        img = ren.render(np.array([[[1200.0, 600.0]]]), _rot(1), np.ones((1, 1), bool), np.array([0.0]))
        u, v = (int(round(c)) for c in cam.project(np.array([[1200.0, 600.0, R]]))[0])
        half = 16
        box = (slice(v - half, v + half + 1), slice(u - half, u + half + 1))
        ref = img[box].astype(np.float32)
        terms = _shift_terms(ref)
        grey = cv2.cvtColor(img, cv2.COLOR_BGR2GRAY)
        for du, dv in ((0.3, 0.0), (0.0, -0.25), (0.35, 0.35), (-0.5, 0.1), (0.1, 0.0)):
            moved = cv2.warpAffine(img, np.array([[1.0, 0.0, du], [0.0, 1.0, dv]]), img.shape[1::-1], flags=cv2.INTER_CUBIC)
            got = np.array(_patch_shift(terms, ref, moved[box].astype(np.float32)))
            p0 = np.array([[[u, v]]], np.float32)
            p1, st, _ = cv2.calcOpticalFlowPyrLK(grey, cv2.cvtColor(moved, cv2.COLOR_BGR2GRAY), p0, None, winSize=(2 * half + 1, 2 * half + 1), maxLevel=0,
                                                 criteria=(cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 50, 1e-4))
            assert st[0, 0] == 1
            want = (p1[0, 0] - p0[0, 0]).astype(float)
            assert np.linalg.norm(got - want) <= 0.15 * np.linalg.norm(want) + 0.01, (setup, du, dv, got, want)
            assert np.linalg.norm(got) >= 0.95 * np.linalg.norm(want), (setup, du, dv, got, want)


# One low lamp and little room light, as over a table in a dark room: each ball casts a long,
# dark shadow on the cloth (the lamp's light gone, only the room's left), darker than half the
# lit cloth. A ball rests in the open with its shadow free on the cloth, and a black 8 rests
# behind a stripe, half in the stripe's shadow and far from the lamp (in shade). Three rooms:
# burgundy, blue and grey cloth, other tables, cameras and lenses, the lamp at either end; the
# balls turned at random (number discs not up). The first frame is the empty table.
# name: table, camera, cloth, room light (ambient share) and exposure, lamp (x, y, z) mm, the
# free ball's colour, and where the free ball and the stripe rest (x, y) mm.
LOW_LAMP = {
    "burgundy_8ft": (EIGHT_FOOT, Camera.overhead(EIGHT_FOOT, 2400.0, (960, 540), offset_mm=(200, 100), roll_deg=-2.5, dist=(-0.15, 0.03, 0, 0, 0)), (43, 31, 122), 0.12, 1.3, (600.0, 500.0, 800.0), (134, 42, 91), ((1500.0, 800.0), (1987.0, 868.0))),
    "blue_9ft": (NINE_FOOT, Camera.overhead(NINE_FOOT, 2000.0, (1280, 720), offset_mm=(-150, 80), roll_deg=1.5, dist=(-0.25, 0.06, 0, 0, 0)), (150, 72, 28), 0.15, 1.4, (1900.0, 700.0, 900.0), (28, 112, 226), ((1000.0, 400.0), (2190.0, 970.0))),
    "grey_9ft": (NINE_FOOT, Camera.overhead(NINE_FOOT, 2800.0, (1280, 720), offset_mm=(100, -60), roll_deg=-1.0, dist=(-0.1, 0.02, 0, 0, 0)), (110, 114, 118), 0.15, 1.2, (800.0, 600.0, 850.0), (20, 195, 235), ((1700.0, 300.0), (2190.0, 970.0))),
}


@pytest.mark.parametrize("name", list(LOW_LAMP))
def test_a_low_lamps_shadows_are_no_balls_and_the_black_ball_in_shade_is_found(name):
    from scipy.spatial.transform import Rotation

    table, cam, cloth, ambient, exposure, lamp, colour, rest = LOW_LAMP[name]
    look = Look(cloth_bgr=cloth, cushion_bgr=tuple(int(0.85 * c) for c in cloth), ambient=ambient, exposure=exposure, noise_sigma=2.0, lamps=(Lamp(lamp),))
    lamp = np.array(lamp)
    free, stripe = (np.array(p) for p in rest)
    away = (stripe - lamp[:2]) / np.linalg.norm(stripe - lamp[:2])
    # The 8 touches the stripe on the side away from the lamp: its near half in the stripe's shadow.
    at = np.array([free, stripe, stripe + 2.05 * R * away])
    balls = (BallLook("5", "solid", colour), BallLook("12", "stripe", (134, 42, 91)), BallLook("8", "solid", (22, 22, 22)))
    ren = Renderer(table, cam, look, balls, seed=7)
    rot = Rotation.random(3, random_state=3).as_matrix()[None]
    det = BallDetector(cam, table)
    det.process(0, 0.0, ren.render(at[None], rot, np.zeros((1, 3), bool), np.zeros(1)))
    out = det.process(1, 1 / 60, ren.render(at[None], rot, np.ones((1, 3), bool), np.array([1 / 60])))
    err, _ = _match(out, at)
    # Nothing is reported away from the balls: a cast shadow is the cloth darkened with its hue
    # kept and no highlight, no ball (issue acceptance: no false detections).
    q = out[["x", "y"]].to_numpy()
    off = np.min(np.linalg.norm(q[:, None] - at[None], axis=2), axis=1)
    assert np.all(off < R), (name, out)
    # Every ball is found (a detection within a ball radius); the black 8 in shade within 5 mm,
    # a fifth of its radius (what the detector achieves on resting balls today, as
    # test_resting_balls_within_a_few_mm). The ball whose long shadow joins it on the cloth is
    # held to the gate only: on blue and grey cloth its outline slides onto the shadow by about
    # 25 mm, an open limit of the outline fit.
    assert np.all(np.isfinite(err)) and err[2] <= 5.0, (name, err)


@pytest.mark.parametrize("seed", [0, 1])
def test_resting_balls_under_a_low_lamp_are_not_fitted_astride_their_shadows(seed, tmp_path):
    # benchmarks/rest_causes.py's grid of 28 resting balls in the extra set's one-lamp room (a
    # lamp 0.8 m over an 8 ft table's end: shadows up to a ball long), through a lossless H.264
    # encode (its 4:2:0 chroma kept). Renderer's truth. A ball whose piece of foreground takes in
    # its shadow was seeded between the two and fitted astride them, 10.8-13.6 mm off (4 balls
    # of 56, measured at c71451f); fitted from the piece's ends as well, the lit end's fit is
    # taken (BallDetector._ends) and every ball lies within a fifth of its radius (5.7 mm; the
    # bound of the low-lamp test above). Measured after: at most 3.3 mm.
    from scipy.spatial.transform import Rotation

    from benchmarks.analyse_accuracy import EXTRA_SCENES
    from benchmarks.rest_causes import errors, grid_positions, still_frames
    from railtrace.scene import load_scene

    scene = load_scene(EXTRA_SCENES / "lamp_50fps.toml")
    at = grid_positions(scene, np.random.default_rng(seed))
    rot = Rotation.random(len(at), random_state=seed).as_matrix()[None]
    frames, cam = still_frames(scene, "lossless", at, rot, tmp_path)
    err = errors(scene, cam, frames, at)["error"].to_numpy()
    found = err[np.isfinite(err)]
    assert len(found) >= 27 and found.max() <= scene.table.radius_mm / 5, np.round(err, 2)


def test_lit_share_counts_pixels_brighter_than_the_empty_table_in_opencvs_luma():
    cam = SETUPS["green_high"]["camera"]
    empty = Renderer(NINE_FOOT, cam, Look(noise_sigma=0.0), BALLS[:1], seed=1).render(AT[None, :1], _rot(1), np.zeros((1, 1), bool), np.zeros(1))
    det = BallDetector(cam, NINE_FOOT)
    det.process(0, 0.0, empty)
    uv = cam.project(np.array([[1200.0, 700.0, R]]))[0]
    row = {"u": float(uv[0]), "v": float(uv[1])}
    img = det.background.image.astype(np.int16).copy()
    rng = np.random.default_rng(5)
    pick = rng.integers(0, 3, img.shape[:2])
    # Three kinds of pixel: +20 DN green (brighter), +60 blue -30 red (darker in BT.601 luma,
    # 0.114 * 60 < 0.299 * 30, but brighter were blue and red swapped) and unchanged.
    img[pick == 0, 1] += 20
    img[pick == 1, 0] += 60
    img[pick == 1, 2] -= 30
    img = np.clip(img, 0, 255).astype(np.uint8)
    # Reference: OpenCV's BT.601 luma (the Y of COLOR_BGR2YCrCb) of both images over the disc of
    # the ball's image radius round its centre's image.
    y = cv2.cvtColor(img, cv2.COLOR_BGR2YCrCb)[..., 0].astype(int)
    yb = cv2.cvtColor(np.clip(np.round(det.background.image), 0, 255).astype(np.uint8), cv2.COLOR_BGR2YCrCb)[..., 0].astype(int)
    r = det._image_radius_px(uv)
    vv, uu = np.mgrid[: img.shape[0], : img.shape[1]]
    disc = (uu - uv[0]) ** 2 + (vv - uv[1]) ** 2 <= r * r
    want = float(np.mean(y[disc] > yb[disc]))
    assert 0.2 < want < 0.5  # about a third of the disc, so the check can fail either way
    assert abs(det._lit_share(img, row) - want) <= 0.02


def test_ball_under_the_cue_in_the_first_frame_is_found_once_the_arm_has_gone():
    # The player is down on a shot when the clip starts, the cue lying over a resting ball 12
    # balls' radii behind its tip: the first frame, which builds the empty-table model, holds
    # the ball in one piece with the cue and arm that reach in over the rail, so the model
    # keeps all three. Once the arm has gone the re-seeding of its ghost takes the ball out of
    # the model, and the ball must then be found although no pixel of it changed since (the
    # frames after the arm has gone are all alike, noise aside). Renderer's truth; the gate is a
    # ball radius (issue acceptance: every ball found), and the ball is placed within the
    # resting target's 2.5 mm (p95) once found.
    cam = Camera.overhead(NINE_FOOT, 2400.0, (1120, 630), offset_mm=(80, -60), roll_deg=1.0, dist=(-0.08, 0.01, 0, 0, 0))
    heading = math.radians(15.0)
    tip = np.array([1500.0, 600.0])
    hidden = tip - 12 * R * np.array([math.cos(heading), math.sin(heading)])
    occ = Occluder((CueStroke(1.0, tuple(tip), heading),))
    ren = Renderer(NINE_FOOT, cam, Look(noise_sigma=2.0), (BALLS[1],), occluder=occ, seed=5)
    det = BallDetector(cam, NINE_FOOT)
    at = hidden[None]
    first = det.process(0, 0.0, ren.render(at[None], _rot(1), np.ones((1, 1), bool), np.array([0.5])))
    assert not np.isfinite(_match(first, at)[0]).any()  # in the model with the cue and arm
    # After the stroke the occluder withdraws and is gone 0.6 s after it (Occluder.follow_s).
    times = 1.7 + np.arange(0.0, 2.0, 1 / 30)
    found = []
    for i, t in enumerate(times):
        out = det.process(i + 1, t, ren.render(at[None], _rot(1), np.ones((1, 1), bool), np.array([t])))
        found.append(float(_match(out, at)[0][0]))
    seen = np.isfinite(found)
    # The model is updated every DetectConfig.update_every_s (0.25 s); the ghost of the arm is
    # re-seeded once it has stayed still between two updates, so the ball is out of the model
    # within 0.75 s of the arm's going, and must be seen from then on.
    assert seen[int(round(0.75 * 30)) :].all(), found
    assert np.nanmax(np.where(seen, found, np.nan)) < 2.5, found


# Coloured solids (red, yellow, purple, maroon) resting on green cloth, each a further
# (0.37, 0.53) mm along, so their outlines fall at every phase of the 2-pixel chroma grid.
CHROMA_CAM = Camera.overhead(NINE_FOOT, 2600.0, (1280, 720), offset_mm=(100, -80), roll_deg=1.0, dist=(-0.1, 0.02, 0, 0, 0))
CHROMA_COLOURS = ((35, 30, 195), (20, 195, 235), (105, 40, 85), (40, 30, 120))


@pytest.mark.xfail(strict=True, reason="issue 3: the outline is placed by colour, which H.264's 4:2:0 "
                   "sampling keeps at half resolution: these solids' median error is 0.50 mm after a "
                   "lossless encode, 0.20 mm on the same frame unencoded; no luma-placed outline tried "
                   "so far (session 9) beat the colour's on the bench scenes")
def test_coloured_balls_are_placed_through_the_codecs_half_resolution_colour(tmp_path):
    from vision.video import iter_frames, write_video

    L, W = NINE_FOOT.length_mm, NINE_FOOT.width_mm
    k = np.arange(16)
    at = np.column_stack([300 + (k % 4) * (L - 600) / 3 + 0.37 * k, 250 + (k // 4) * (W - 500) / 3 + 0.53 * k])
    balls = tuple(BallLook(str(i + 1), "solid", CHROMA_COLOURS[i % 4]) for i in range(16))
    frame = Renderer(NINE_FOOT, CHROMA_CAM, Look(noise_sigma=2.0), balls, seed=4).render(at[None], _rot(16), np.ones((1, 16), bool), np.zeros(1))
    clip = tmp_path / "chroma.mp4"
    write_video(clip, [frame, frame], 60, codec="h264", quality=0)  # lossless but for the 4:2:0 chroma
    img = next(iter(iter_frames(clip)))[2]
    err, _ = _match(BallDetector(CHROMA_CAM, NINE_FOOT).process(0, 0.0, img), at)
    # Renderer's truth. On the unencoded frame these balls' median error is 0.20 mm (measured,
    # session 9; 0.50 after this encode, 1.29 at crf 23); 0.35 mm allows the codec 0.15 mm, a
    # sixteenth of a pixel at about 2.4 mm per pixel here, for the rounding of the colour
    # conversion (a judgment, not a published figure): the luma keeps full resolution, so a
    # lossless encode need cost the outline little more.
    assert np.all(np.isfinite(err)) and np.median(err) <= 0.35, err


# A phone's encode in a dim room: a wide lens low over a 7 ft table, low exposure, little ambient
# light, strong vignetting, a noisy sensor, H.264 with 4:2:0 chroma, on three cloths; cue balls,
# stripes and solids of colours off every cloth's hue, each turned at random so a stripe's band
# falls anywhere. Lossless (crf 0: only the chroma's half resolution) and at crf 28 (what a
# phone or a streaming app writes at a modest bitrate).
PHONE_CAM = Camera.overhead(SEVEN_FOOT, 1700.0, (1280, 720), offset_mm=(120, 90), roll_deg=1.5, dist=(-0.28, 0.09, 0, 0, 0))
PHONE_CLOTHS = {"green": (58, 106, 46), "blue": (140, 78, 31), "teal": (104, 100, 24)}
PHONE_COLOURS = ((31, 42, 196), (96, 32, 128), (40, 30, 120))
PHONE_CODEC_LIMIT = pytest.mark.xfail(strict=True, reason="issue 4: through crf 28 a coloured ball's rim, a step of "
                                      "colour more than of brightness, survives only as blocks of half-resolution "
                                      "chroma: medians 1.15/1.18/1.63 mm here (stripes and solids up to 2.9 mm), "
                                      "0.47-0.51 after a lossless encode; no outline placed by the luma, by chroma "
                                      "rebuilt from the luma (guided filter) or by the rays where both agree did "
                                      "better; the rim colour sampled deeper where the chroma is smeared gave "
                                      "1.22/0.94/1.03 mm but cost other clips (session 13)")


def _phone_errors(cloth: str, crf: int, folder) -> np.ndarray:
    """(12,) centre errors (mm, inf where missed) of the resting balls of the phone's room on
    ``cloth``, detected in the second frame of a two-frame clip encoded at ``crf`` in ``folder``."""
    from scipy.spatial.transform import Rotation

    from vision.video import iter_frames, write_video

    L, W = SEVEN_FOOT.length_mm, SEVEN_FOOT.width_mm
    rng = np.random.default_rng(13)
    gx, gy = np.meshgrid(np.linspace(3 * R, L - 3 * R, 4), np.linspace(3 * R, W - 3 * R, 3))
    at = np.column_stack([gx.ravel(), gy.ravel()]) + rng.uniform(-20, 20, (12, 2))
    kinds = ("cue", "stripe", "solid") * 4
    balls = tuple(BallLook(str(i), k, (226, 234, 236) if k == "cue" else PHONE_COLOURS[i % 3]) for i, k in enumerate(kinds))
    look = Look(cloth_bgr=PHONE_CLOTHS[cloth], cushion_bgr=PHONE_CLOTHS[cloth], exposure=0.6, ambient=0.15, vignetting=1.0, noise_sigma=3.0)
    rot = Rotation.random(12, random_state=np.random.default_rng(7)).as_matrix()[None]
    ren = Renderer(SEVEN_FOOT, PHONE_CAM, look, balls, seed=11)
    frames = [ren.render(at[None], rot, np.ones((1, 12), bool), np.array([t])) for t in (0.0, 1 / 30)]
    clip = folder / f"{cloth}_{crf}.mp4"
    write_video(clip, frames, 30, codec="h264", quality=crf)
    det = BallDetector(PHONE_CAM, SEVEN_FOOT)
    out = [det.process(i, i / 30, f) for i, (_, _, f) in enumerate(iter_frames(clip))]
    return _match(out[-1], at)[0]


@pytest.mark.parametrize("cloth", list(PHONE_CLOTHS))
def test_balls_are_placed_through_a_lossless_phone_encode(cloth, tmp_path):
    # Renderer's truth; issue 3's resting target, median centre error at most 1 mm (a missed
    # ball counts as infinite): the luma keeps full resolution, and half-resolution chroma
    # alone must not cost the outline that.
    err = _phone_errors(cloth, 0, tmp_path)
    assert np.median(err) <= 1.0, (cloth, err)


@PHONE_CODEC_LIMIT
@pytest.mark.parametrize("cloth", list(PHONE_CLOTHS))
def test_balls_are_placed_through_a_phones_heavy_encode(cloth, tmp_path):
    # Renderer's truth; issue 3's resting target, median centre error at most 1 mm (a missed
    # ball counts as infinite).
    err = _phone_errors(cloth, 28, tmp_path)
    assert np.median(err) <= 1.0, (cloth, err)


def _disc_cover(det: BallDetector, x: float, y: float) -> np.ndarray:
    """(H, W) share of each pixel the silhouette of a ball at (x, y) mm covers, drawn at 8x and
    area-averaged, then blurred by a Gaussian of sigma 1 px (an optical blur)."""
    import cv2

    w, h = det.camera.image_size
    up = 8
    mask = np.zeros((h * up, w * up), np.uint8)
    poly = det.rays.sphere_outline(x, y, R)
    cv2.fillPoly(mask, [np.round((poly + 0.5) * up - 0.5).astype(np.int32)], 1)
    return cv2.GaussianBlur(cv2.resize(mask.astype(np.float32), (w, h), interpolation=cv2.INTER_AREA), (0, 0), 1.0)


def test_outline_noise_is_the_noise_over_the_rims_slope():
    # A ball's rim as a step of known contrast C, blurred by a Gaussian of sigma 1 px (plus the
    # pixel's box, variance 1/12 px^2), over an empty table whose noise sigma the model measured:
    # a level crossing on an edge of slope g moves by sigma / g (common practice: the
    # localisation error of a blurred step, Canny 1986). The slope by central difference over
    # 1.5 px of an erf step is C (Phi(0.75 / s) - Phi(-0.75 / s)) / 1.5 (analytic).
    from scipy.stats import norm

    from vision.detect import _RAY_DIRS

    s = SETUPS["green_high"]
    cam, look = s["camera"], s["look"]
    w, h = cam.image_size
    cloth = np.array(look.cloth_bgr, float)
    rng = np.random.default_rng(4)
    det = BallDetector(cam, NINE_FOOT)
    empty = np.clip(cloth + rng.normal(0.0, 2.0, (h, w, 3)), 0, 255).astype(np.uint8)
    det.process(0, 0.0, empty)
    # A model made from one frame holds that frame's noise and measures its floor (0.5 DN); the
    # running model of a clip measures the frames' own noise, here 2 DN.
    det.background.sigma = sigma = 2.0
    x, y = 1400.0, 620.0
    poly = det.rays.sphere_outline(x, y, R)
    cover = _disc_cover(det, x, y)
    for contrast_dn in (20.0, 40.0):
        ball = cloth + contrast_dn * np.array([1.0, -0.5, -0.5]) / math.sqrt(1.5)
        img = cloth + cover[..., None] * (ball - cloth)
        img = np.clip(np.round(img), 0, 255).astype(np.uint8)
        got = det._outline_noise_mm(img, np.array([x, y, 0.0]), False, _RAY_DIRS)
        sb = math.sqrt(1.0 + 1.0 / 12.0)
        g = contrast_dn * (norm.cdf(0.75 / sb) - norm.cdf(-0.75 / sb)) / 1.5
        c = det.rays.project(np.array([[x, y, R]]))[0]
        r_px = float(np.median(np.hypot(*(poly - c).T)))
        want = max(sigma, 0.5) / g * R / r_px
        assert got == pytest.approx(want, rel=0.15), (contrast_dn, got, want)
    # An outline with no rim (bare noisy cloth: the slope of noise alone) gets no allowance.
    assert det._outline_noise_mm(empty, np.array([x, y, 0.0]), False, _RAY_DIRS) == 0.0


def test_a_dim_rim_is_allowed_the_spread_its_noise_gives_it():
    # A ball whose rim stands only 40 DN from the cloth in 2 DN of noise: its outline points
    # scatter by about half a millimetre from the noise alone (_outline_noise_mm), more than a
    # model budget of 0.3 mm, which a clean bright rim meets (rms 0.16 mm at 80 DN here). Its
    # outline's RMS (0.32-0.39 mm measured) is what the noise explains, so the ball is found,
    # and where the noise put it: within 0.5 mm of the drawn centre (a quarter of a pixel at
    # about 2.4 mm per pixel; the drawn disc is the truth, analytic). Main refused all six.
    s = SETUPS["green_high"]
    cam, look = s["camera"], s["look"]
    w, h = cam.image_size
    cloth = np.array(look.cloth_bgr, float)
    errs = []
    for seed in range(6):
        rng = np.random.default_rng(seed)
        det = BallDetector(cam, NINE_FOOT, DetectConfig(max_rms_mm=0.3))
        det.process(0, 0.0, np.clip(cloth + rng.normal(0.0, 2.0, (h, w, 3)), 0, 255).astype(np.uint8))
        det.background.sigma = det.background.chroma_sigma = 2.0  # the running model's measure of the frames' noise
        x, y = 1400.0 + 7.0 * seed, 620.0
        cover = _disc_cover(det, x, y)
        ball = cloth + 40.0 * np.array([1.0, -0.5, -0.5]) / math.sqrt(1.5)
        img = cloth + cover[..., None] * (ball - cloth) + rng.normal(0.0, 2.0, (h, w, 3))
        out = det.process(1, 1 / 30, np.clip(np.round(img), 0, 255).astype(np.uint8))
        errs.append(float(_match(out, np.array([[x, y]]))[0][0]))
    assert np.all(np.array(errs) <= 0.5), errs


@pytest.mark.xfail(strict=True, reason="issue 3: in a dark, vignetted corner a dim ball is placed 11.8 and "
                   "7.7 mm off (median): the first ball's outline runs out along its shadow on one side "
                   "and in along its highlight's edge on the other once the coarse fit has slid toward "
                   "the shadow, as the phone clip's black ball's (session 11; the second not looked into)")
def test_dim_balls_rolling_in_a_dark_corner_are_placed_within_the_moving_target():
    # A wide phone lens low over a 7 ft table in a dim room (exposure 0.6, ambient 0.15, full
    # vignetting, 3 DN of noise), 30 fps with the shutter open: two blue balls rolling at 280 mm/s
    # near the bottom and right rails, where the vignetting is deepest. Renderer's truth at
    # mid-exposure; the bound is issue 3's moving median (3 mm).

    r = SEVEN_FOOT.radius_mm
    cam = Camera.overhead(SEVEN_FOOT, 1800.0, (1280, 720), offset_mm=(-160, -140), roll_deg=-1.0,
                          dist=(-0.32, 0.11, 0.0006, -0.0004, -0.015))
    look = Look(cloth_bgr=(58, 106, 46), cushion_bgr=(49, 90, 39), exposure=0.6, ambient=0.15, vignetting=1.0, noise_sigma=3.0)
    balls = (BallLook("2", "solid", (176, 79, 29)), BallLook("3", "solid", (176, 79, 29)))
    start = np.array([[1500.0, 60.0], [1880.0, 420.0]])
    vel = np.array([[280.0, 0.0], [0.0, -280.0]])
    ren = Renderer(SEVEN_FOOT, cam, look, balls, seed=11)
    det = BallDetector(cam, SEVEN_FOOT)
    n_sub, fps = 8, 30.0
    errs = []
    for i in range(16):
        t = i / fps
        sub = t + (1 / fps) * ((np.arange(n_sub) + 0.5) / n_sub - 0.5)
        pos = start[None] + vel[None] * sub[:, None, None]
        out = det.process(i, t, ren.render(pos, np.broadcast_to(np.eye(3), (n_sub, 2, 3, 3)).copy(), np.ones((n_sub, 2), bool), sub))
        if i >= 4:  # the model's noise measure settles over its first updates
            errs.append(_match(out, start + vel * t, gate=r)[0])
    errs = np.array(errs)
    assert np.all(np.isfinite(errs)) and np.all(np.median(errs, axis=0) <= 3.0), np.median(errs, axis=0)


# Dark balls resting toward the corners of a dim room (exposure 0.6, room light 0.15 of the
# light, full vignetting, 3 DN of noise) filmed through H.264 at constant rate factor 28, as the
# extra set's phone clip is: three black balls and a dark maroon one. Seen from the side, a
# ball's unlit underside meets the cloth it shades on the side toward the camera's nadir, and
# the codec bleeds the cloth's hue into the black limb, so no colour step marks the rim there
# (issues 3 and 4: the phone clip's black ball is placed about 10 mm toward that side and its
# collision is missed). Rooms: (table, camera, cloth BGR, lamps (None: the renderer's three)).
DARK_ROOMS = {
    "green_7ft_phone": (SEVEN_FOOT, Camera.overhead(SEVEN_FOOT, 1800.0, (1280, 720), offset_mm=(-160, -140), roll_deg=-1.0, dist=(-0.32, 0.11, 0.0006, -0.0004, -0.015)), (58, 106, 46), None),
    "blue_9ft": (NINE_FOOT, Camera.overhead(NINE_FOOT, 2000.0, (1280, 720), offset_mm=(-150, 80), roll_deg=1.5, dist=(-0.25, 0.06, 0, 0, 0)), (150, 72, 28), None),
    "grey_9ft_two_low_lamps": (NINE_FOOT, Camera.overhead(NINE_FOOT, 2400.0, (1280, 720), offset_mm=(100, -60), roll_deg=-1.0, dist=(-0.1, 0.02, 0, 0, 0)), (110, 114, 118), (Lamp((800.0, 600.0, 900.0)), Lamp((2000.0, 400.0, 1100.0)))),
}


@pytest.mark.xfail(strict=True, reason="issues 3 and 4: a dark ball's unlit limb meeting the cloth it shades has no "
                   "colour step; a56ae1e placed the four balls 2.9/5.6/10.8/2.3 mm (green), 4.6/1.3/10.3/1.3 (blue) "
                   "and 5.4/5.6/2.6/4.3 (grey) off, 6856aeb 2.95/5.55/10.84/2.32, 4.61/1.30/10.25/missed, "
                   "5.36/5.61/2.60/4.26; the dark balls' brightness-rise outline (session 20, _dark_edges) "
                   "2.14/5.45/0.67/1.22, 4.45/3.33/4.80/missed, 5.41/5.63/2.60/4.39 (the blue room's fourth ball "
                   "is fitted 1.5 mm off and dropped later, as on 6856aeb); a lit-side refit tried in session 13 "
                   "(not adopted) gave 2.9/5.6/8.9/7.8, 4.6/1.3/3.8/1.3 and 5.4/5.4/2.6/5.9")
@pytest.mark.parametrize("name", list(DARK_ROOMS))
def test_dark_balls_toward_the_corners_of_a_dim_room_are_placed_within_the_resting_target(name, tmp_path):
    from scipy.spatial.transform import Rotation

    from vision.video import iter_frames, write_video

    table, cam, cloth, lamps = DARK_ROOMS[name]
    L, W = table.length_mm, table.width_mm
    at = np.array([[0.86 * L, 0.83 * W], [0.15 * L, 0.2 * W], [0.8 * L, 0.15 * W], [0.2 * L, 0.8 * W]])
    balls = tuple(BallLook(str(8 + i), "solid", c) for i, c in enumerate(((24, 24, 24), (24, 24, 24), (30, 20, 60), (24, 24, 24))))
    look = Look(cloth_bgr=cloth, cushion_bgr=tuple(int(0.85 * c) for c in cloth), exposure=0.6, ambient=0.15, vignetting=1.0, noise_sigma=3.0, lamps=lamps)
    ren = Renderer(table, cam, look, balls, seed=7)
    rot = Rotation.random(len(at), random_state=3).as_matrix()[None]
    empty = ren.render(at[None], rot, np.zeros((1, len(at)), bool), np.zeros(1))
    seen = ren.render(at[None], rot, np.ones((1, len(at)), bool), np.array([1 / 30]))
    clip = tmp_path / "dark.mp4"
    write_video(clip, [empty, seen], 30, codec="h264", quality=28)
    det = BallDetector(cam, table)
    outs = [det.process(i, t, img) for i, t, img in iter_frames(clip)]
    err, _ = _match(outs[-1], at)
    # Renderer's truth; every ball within the resting target's p95 (2.5 mm, README: issue 3).
    assert np.all(err <= 2.5), (name, err)


def _phone_room_black_balls(folder) -> tuple[np.ndarray, pd.DataFrame]:
    """Truth (4, 2) mm and the detections of the second frame of a two-frame clip of the extra
    set's phone room (benchmarks/extra_scenes/phone_wide_30fps.toml: its table, camera, wide
    lens, lamps, dim look and crf 28) with four black balls resting toward its corners from the
    first frame on, as the clip's 8 ball is: the first at the 8's own spot, upright, so its
    white number disc faces up and, seen from the camera's side, lies against the far rim."""
    from pathlib import Path

    from scipy.spatial.transform import Rotation

    from railtrace.scene import load_scene
    from vision.video import iter_frames, write_video

    scene = load_scene(Path(__file__).resolve().parents[1] / "benchmarks" / "extra_scenes" / "phone_wide_30fps.toml")
    at = np.array([[1700.0, 820.0], [300.0, 180.0], [1650.0, 150.0], [330.0, 800.0]])
    balls = tuple(BallLook(str(8 + i), "solid", (24, 24, 24)) for i in range(len(at)))
    rot = np.concatenate([np.eye(3)[None], Rotation.random(len(at) - 1, random_state=5).as_matrix()])[None]
    ren = Renderer(scene.table, scene.camera, scene.look, balls, seed=7)
    frames = [ren.render(at[None], rot, np.ones((1, len(at)), bool), np.array([t])) for t in (0.0, 1 / 30)]
    clip = folder / "black.mp4"
    write_video(clip, frames, 30, codec="h264", quality=scene.film.quality)
    det = BallDetector(scene.camera, scene.table)
    outs = [det.process(i, t, img) for i, t, img in iter_frames(clip)]
    return at, outs[-1]


def test_black_balls_resting_in_the_phone_rooms_dark_corners_are_placed_past_their_number_disc(tmp_path):
    # Issues 3 and 4: the phone clip's 8 ball was read 7-10 mm toward the camera's nadir (its
    # collision with the 2 untimed): its colour-step outline stopped at the edge of its number
    # disc on the far rim and ran out along the cloth it shades on the near side. A dark ball
    # is outlined where the brightness rises from its limb to the surround, coming in from
    # outside (vision.detect.BallDetector._dark_edges). Renderer's truth; issue 3's resting
    # p95 bound (2.5 mm, README) for the upright ball at the 8's spot, every ball found.
    # Measured: main at 6856aeb 10.30, 3.05, 6.46, 2.14 mm; with _dark_edges 2.07, 3.05, 5.71,
    # 1.89 (the others are not held to the bound: their median is 2.56 mm).
    at, out = _phone_room_black_balls(tmp_path)
    err, _ = _match(out, at)
    assert np.all(np.isfinite(err)) and err[0] <= 2.5, err


# The extra set's one-lamp room (benchmarks/extra_scenes: a low lamp at one end of an 8 ft
# table, little room light, burgundy cloth, a 2.4 m camera off-centre, 50 fps with a 1/60 s
# shutter, H.264 at constant rate factor 26): far from the lamp each ball's shadow is long and
# deep and joins it in one piece of foreground. Cases: (ball, centre (x, y) mm at mid-exposure,
# velocity (vx, vy) mm/s, tolerance mm).
ONE_LAMP_CAM = Camera.overhead(EIGHT_FOOT, 2400.0, (1280, 720), offset_mm=(220, 110), roll_deg=-2.5, dist=(-0.15, 0.03, 0, 0, 0))
ONE_LAMP = {
    # The cue ball resting: one piece with its shadow, seeded once near its middle, was fitted
    # on the shadow 25 mm off with its own lit rim inside the disc, which the shadow test took
    # for a highlight (main, session 11). The resting target's p95 (2.5 mm, README).
    "resting_cue": (BallLook("cue", "cue", (226, 234, 236)), (1500.0, 800.0), (0.0, 0.0), 2.5),
    # The cue ball at 2.3 m/s, its 38 mm streak and its shadow fitted as two overlapping balls
    # that passed for a hand's two ends (no waist between them), so both were dropped (main,
    # session 11). The moving target's p95 (8 mm, README).
    "fast_cue": (BallLook("cue", "cue", (226, 234, 236)), (1571.0, 1068.0), (1550.0, -1650.0), 8.0),
    # The cue ball rolling slowly far from the lamp (lamp_50fps frames 133-174, 1.2-1.3 m
    # from the lamp at 190-270 mm/s; here its state at frame 150): one piece with its
    # shadow, seeded as a streak along it, its fit straddled ball and shadow 22 mm onto the
    # shadow, its outline there with no rim step, and was dropped as the rounded end of
    # something else (main at 14e80e7: 23 of those 42 frames missed, now 2). The moving target's
    # median (3 mm, README).
    "slow_cue_far": (BallLook("cue", "cue", (226, 234, 236)), (1800.5, 217.4), (-87.7, 218.8), 3.0),
}


@pytest.mark.parametrize("name", list(ONE_LAMP))
def test_a_ball_beside_its_own_long_shadow_is_found_on_itself(name, tmp_path):
    from scipy.spatial.transform import Rotation

    from vision.video import iter_frames, write_video

    ball, at, v, tol = ONE_LAMP[name]
    cloth = (43, 31, 122)
    look = Look(cloth_bgr=cloth, cushion_bgr=tuple(int(0.85 * c) for c in cloth), ambient=0.12, exposure=1.3, noise_sigma=2.0, lamps=(Lamp((600.0, 500.0, 800.0)),))
    ts = np.linspace(0.0, 1 / 60, 12)  # sub-samples across the open shutter
    pos = np.array(at)[None, None] + (ts - ts.mean())[:, None, None] * np.array(v)[None, None]
    rot = np.repeat(Rotation.random(1, random_state=3).as_matrix()[None], len(ts), axis=0)
    ren = Renderer(EIGHT_FOOT, ONE_LAMP_CAM, look, (ball,), seed=7)
    empty = ren.render(pos[:1], rot[:1], np.zeros((1, 1), bool), np.zeros(1))
    seen = ren.render(pos, rot, np.ones((len(ts), 1), bool), 0.02 + ts)
    clip = tmp_path / "one_lamp.mp4"
    write_video(clip, [empty, seen], 50, codec="h264", quality=26)
    det = BallDetector(ONE_LAMP_CAM, EIGHT_FOOT)
    outs = [det.process(i, t, img) for i, t, img in iter_frames(clip)]
    truth = np.array([at])
    err, _ = _match(outs[1], truth, EIGHT_FOOT.radius_mm)
    # Renderer's truth (the centre at mid-exposure); one detection, on the ball, none on its
    # shadow (issue 3: no false balls from shadows).
    assert len(outs[1]) == 1 and err[0] <= tol, (name, outs[1], err)


STROKE_SCENE = """
# A high camera (3.2 m, 120 fps, 1/250 s) with a long, nearly rectilinear lens hung off the
# table's centre, teal cloth: the player is down on a hard cut when the clip starts and makes
# the practice and back strokes. Scenario invented for railtrace.
name = "cue held from the first frame"
lead_s = 0.5
tail_s = 0.5
max_duration_s = 0.45
seed = 511

[table]
preset = "9ft"

[camera]
height_mm = 3200
offset_mm = [140, -90]
roll_deg = 1.5
resolution = [1280, 720]
fps = 120
shutter_s = 0.004
distortion = [-0.02, 0.0, 0.0, 0.0, 0.0]
quality = 25

[look]
cloth = "#1f6f5c"
noise = 1.2
occluder = true

[[ball]]
id = "cue"
kind = "cue"
at = [900, 500]

[[ball]]
id = "1"
kind = "solid"
colour = "#e0b020"
at = [1900, 900]

[[ball]]
id = "5"
kind = "solid"
colour = "#e2701c"
at = [1500, 350]

[[ball]]
id = "12"
kind = "stripe"
colour = "#5b2a86"
at = [380, 1020]

[[shot]]
ball = "cue"
aim = { ball = "1", send_to = "top-right" }
speed_mm_s = 4000
spin = { height = -0.2 }
target = "top-right"
"""


def test_stroking_cue_held_in_the_first_frame_gives_no_ball_near_the_rail(tmp_path):
    # The empty-table model is built from a first frame that holds the cue, so as the cue
    # strokes along itself the colour step where its light shaft meets its dark butt, just
    # inside the end rail, changes a compact, ball-sized piece whose rounded ends fit a sphere's
    # outline within the limits (21 such detections before :meth:`BallDetector._joined_no_rim`).
    # Such a fit is joined to the cue (its ring crossed) and its outline does not step from
    # ball to surround. Issue acceptance: no detections from the occluder, every ball found.
    import tomllib

    from railtrace.filming import film_scene
    from railtrace.scene import parse_scene
    from vision.calibfile import read_calibration
    from vision.detect import detect_clip

    clip = tmp_path / "stroke.mp4"
    truth_dir = film_scene(parse_scene(tomllib.loads(STROKE_SCENE), source_text=STROKE_SCENE), clip)
    table, camera, _ = read_calibration(truth_dir / "calibration.json")
    det = detect_clip(clip, camera, table)
    truth = pd.read_csv(truth_dir / "tracks.csv")
    extra, missed = [], []
    for f, tr in truth.groupby("frame"):
        err, _ = _match(det[det.frame == f], tr[["x", "y"]].to_numpy())
        missed.append(int(np.sum(~np.isfinite(err))))
        extra.append(int((det.frame == f).sum()) - int(np.isfinite(err).sum()))
    assert len(missed) > 50  # the whole stroke, 0.45 s at 120 fps
    assert sum(extra) == 0, [(f, n) for f, n in enumerate(extra) if n]
    assert sum(missed) == 0, missed


def _rack(first: np.ndarray, rows: tuple[int, ...], along: float) -> np.ndarray:
    """(N, 2) mm centres of touching balls in rows (``rows`` balls each) laid across the
    direction ``along`` (rad), the first row's middle at ``first``: analytic geometry of touching
    spheres (rows 2R apart across, sqrt(3) R apart along; a row one ball longer or shorter than
    the last sits in its gaps)."""
    e = np.array([math.cos(along), math.sin(along)])
    n = np.array([-e[1], e[0]])
    return np.array([first + k * math.sqrt(3) * R * e + (j - (m - 1) / 2) * 2 * R * n for k, m in enumerate(rows) for j in range(m)])


# Touching racks in rooms of our own (cloths none of whose balls share the cloth's hue: a ball of
# the cloth's own hue is seeded from its crown, see the module's limits), every ball turned at
# random so stripes show their bands: the 15-ball triangle (cue ball, solids, the black and
# stripes), the 9-ball diamond, and a 15-ball triangle whose five-ball row is frozen to a cushion.
RACKS = {
    "triangle15 electric cloth": dict(
        camera=Camera.overhead(NINE_FOOT, 2600.0, (960, 540), offset_mm=(100, -80), roll_deg=1.0, dist=(-0.1, 0.02, 0, 0, 0)),
        look=Look(cloth_bgr=(190, 130, 40), cushion_bgr=(165, 112, 34), noise_sigma=2.0, exposure=1.1),
        at=_rack(np.array([1700.0, 500.0]), (1, 2, 3, 4, 5), 0.7),
        balls=slice(0, 15),
    ),
    "diamond9 blue cloth, low wide lens": dict(
        camera=Camera.overhead(NINE_FOOT, 1900.0, (960, 540), offset_mm=(-150, 100), roll_deg=-4.0, dist=(-0.3, 0.08, 0, 0, 0)),
        look=Look(cloth_bgr=(150, 72, 28), cushion_bgr=(130, 62, 24), exposure=1.2, noise_sigma=3.0, specular=1.0),
        at=_rack(np.array([1000.0, 800.0]), (1, 2, 3, 2, 1), -0.5),
        balls=(0, 1, 3, 4, 5, 6, 7, 8, 11),
    ),
    "triangle15 frozen to a cushion, tan cloth, bright": dict(
        camera=Camera.overhead(NINE_FOOT, 2700.0, (1280, 720), offset_mm=(60, 40), roll_deg=-0.8, dist=(-0.05, 0.0, 0, 0, 0)),
        look=Look(cloth_bgr=(85, 138, 176), cushion_bgr=(75, 120, 155), noise_sigma=1.5, exposure=1.4, ambient=0.6),
        at=_rack(np.array([900.0, R]), (5, 4, 3, 2, 1), math.pi / 2),
        balls=slice(0, 15),
    ),
}


def _rack_renderer(name, stage):
    """(renderer, truth centres (N, 2) mm, rotations (1, N, 3, 3)) of the rack ``name`` (RACKS),
    every ball turned at random."""
    from scipy.spatial.transform import Rotation

    from vision.render import pool_balls

    s = RACKS[name]
    pool = pool_balls()
    balls = pool[s["balls"]] if isinstance(s["balls"], slice) else tuple(pool[k] for k in s["balls"])
    at = s["at"]
    rot = Rotation.random(len(at), random_state=np.random.default_rng(5)).as_matrix()[None]
    return stage(s).with_balls(balls, seed=5), at, rot


@pytest.fixture(scope="module")
def racks(stage):
    """Detections of each rack (RACKS) in the frame after an empty table's, and the truth."""
    done = {}

    def run(name):
        if name not in done:
            ren, at, rot = _rack_renderer(name, stage)
            n = len(at)
            det = BallDetector(RACKS[name]["camera"], NINE_FOOT)
            det.process(0, 0.0, ren.render(at[None], rot, np.zeros((1, n), bool), np.array([0.0])))
            done[name] = (det.process(1, 1 / 60, ren.render(at[None], rot, np.ones((1, n), bool), np.array([1 / 60]))), at)
        return done[name]

    return run


@pytest.mark.parametrize("name", list(RACKS))
def test_every_ball_of_a_touching_rack_is_found(racks, name):
    # A rack is one solid piece of foreground deepest between its balls, larger than a few
    # balls (taken for an arm before): every ball must be found, each by its own detection,
    # within a ball radius (the benchmark's match gate, benchmarks/detect_accuracy.py), with no
    # false detection (issue acceptance: every visible ball, no false balls).
    det, at = racks(name)
    err, j = _match(det, at)
    assert np.all(np.isfinite(err)), (name, err)
    assert len(set(j.tolist())) == len(at) and len(det) == len(at), (name, det)


@pytest.mark.parametrize("name", list(RACKS))
def test_racked_balls_are_placed_within_the_resting_p95(racks, name):
    # Placement of racked balls: the median within the issue's resting p95 (2.5 mm). Balls
    # surrounded by neighbours keep their coarse fit (every ray of the local edge meets a
    # neighbour's rim, _refit_touching), so the resting median target of 1 mm is not met
    # here (see the strict xfail below).
    det, at = racks(name)
    err, _ = _match(det, at)
    assert np.median(err) <= 2.5, (name, err)


def test_a_racks_balls_step_at_their_rims_and_circles_along_a_sleeve_do_not(stage):
    # The touching-cluster explanation of a free piece must be of balls (_cluster_rims): each
    # rendered racked ball's silhouette steps from the ball to the cloth or to its neighbour's
    # darkened limb (a lit sphere's shading falls toward its contour: Lambert's cosine law,
    # common practice), so the median rim share over the rack's true centres is near 1; three
    # touching circles laid along a sleeve-coloured bar 1.6 balls wide (the renderer's
    # Occluder sleeve colour) have the same colour either side of every outline point (analytic),
    # as circles fitted into the player's sleeve and hand of the rendered extra clip lamp_50fps
    # had (rim shares 0.19-0.58 there).
    import cv2

    from vision.render import pool_balls

    name = "triangle15 electric cloth"
    s = RACKS[name]
    cam, at = s["camera"], s["at"]
    n = len(at)
    ren = stage(s).with_balls(pool_balls()[s["balls"]], seed=5)
    det = BallDetector(cam, NINE_FOOT)
    empty = ren.render(at[None], _rot(n), np.zeros((1, n), bool), np.array([0.0]))
    det.process(0, 0.0, empty)
    frame = ren.render(at[None], _rot(n), np.ones((1, n), bool), np.array([0.0]))
    uv = cam.project(np.column_stack([at, np.full(n, R)]))
    rows = [{"u": p[0], "v": p[1], "blur_x": 0.0, "blur_y": 0.0} for p in uv]
    assert det._cluster_rims(frame, rows), name
    # The bar and its circles on the empty table, clear of the rack (mid-table, toward the foot).
    chain = np.array([[800.0 + 2 * R * k, 700.0, R] for k in range(3)])
    cuv = cam.project(chain)
    r_px = det.ball_px / 2
    sleeve = empty.copy()
    p0, p1 = cuv[0] - np.array([3 * r_px, 0.0]), cuv[-1] + np.array([3 * r_px, 0.0])
    cv2.line(sleeve, tuple(int(round(c)) for c in p0), tuple(int(round(c)) for c in p1), Occluder(()).sleeve_bgr, int(round(3.2 * r_px)))
    circles = [{"u": p[0], "v": p[1], "blur_x": 0.0, "blur_y": 0.0} for p in cuv]
    assert not det._cluster_rims(sleeve, circles), name


@pytest.fixture(scope="module")
def racks_from_start(stage):
    """Detections of each rack (RACKS) standing from the clip's first frame (the empty-table
    model is made from that frame: real break footage starts so), and the truth."""
    done = {}

    def run(name):
        if name not in done:
            ren, at, rot = _rack_renderer(name, stage)
            det = BallDetector(RACKS[name]["camera"], NINE_FOOT)
            done[name] = (det.process(0, 0.0, ren.render(at[None], rot, np.ones((1, len(at)), bool), np.array([0.0]))), at)
        return done[name]

    return run


FROZEN_END = "an end ball of a row frozen to a cushion stays in the empty-table model (its rail half is not modelled)"


@pytest.mark.parametrize("name", [pytest.param(n, marks=pytest.mark.xfail(strict=True, reason=FROZEN_END)) if "frozen" in n else n for n in RACKS])
def test_a_rack_standing_from_the_first_frame_is_found(racks_from_start, name):
    # The empty-table model is made from the first frame and must not keep the rack (a 15-ball
    # rack is one blob of about 20 ball areas; frozen to a cushion, its row covers the rail
    # model's samples): every ball found by its own detection within a ball radius (the
    # benchmark's match gate), no false one, the median within the resting p95 (2.5 mm), as
    # for the same racks after an empty frame above.
    det, at = racks_from_start(name)
    err, j = _match(det, at)
    assert np.all(np.isfinite(err)), (name, err)
    assert len(set(j.tolist())) == len(at) and len(det) == len(at), (name, det)
    assert np.median(err) <= 2.5, (name, err)


@pytest.mark.xfail(strict=True, reason="racked balls keep their coarse fit: 0.1-3 mm off, a few up to 13 mm (module limits)")
def test_racked_balls_meet_the_resting_target(racks):
    # Issue acceptance for resting balls: median <= 1 mm, p95 <= 2.5 mm, over all racks.
    err = np.concatenate([_match(*racks(name))[0] for name in RACKS])
    assert np.median(err) <= 1.0 and np.percentile(err, 95) <= 2.5, err


# Racks in other rooms, under other cameras (scenes of the widened rack study of session 14,
# scratch harness: random cloth, height, lens, placement and look), in which main's detector
# lost balls: a ball whose fit failed among fitted neighbours left its room unexplained and the
# whole rack was dropped as an arm (grey six, electric diamond frozen to a cushion; the red
# triangle so in the harness, found whole by main with these balls' turns), or a dark green
# ball on grey cloth was taken for its neighbours' cast shadow and a purple one left as less
# than a ball's area (grey diamond). Balls whose
# colour lies within the detector's hue step of the cloth are left out (a ball of the cloth's
# own hue is a stated limit of the module).
WIDE_RACKS = {
    "six on grey cloth, high": dict(
        camera=Camera.overhead(NINE_FOOT, 2950.0, (1280, 720), offset_mm=(-173, -33), roll_deg=0.9, dist=(-0.14, 0.006, 0, 0, 0)),
        look=Look(cloth_bgr=(120, 118, 112), cushion_bgr=(104, 102, 96), noise_sigma=2.2, exposure=1.02, ambient=0.26, specular=0.64),
        at=_rack(np.array([944.0, 820.7]), (1, 2, 3), 1.918),
        balls=(11, 5, 2, 15, 14, 12),
    ),
    "diamond9 frozen to a cushion, electric cloth, low wide lens": dict(
        camera=Camera.overhead(NINE_FOOT, 1913.0, (1280, 720), offset_mm=(-130, 181), roll_deg=1.6, dist=(-0.31, 0.029, 0, 0, 0)),
        look=Look(cloth_bgr=(190, 130, 40), cushion_bgr=(165, 112, 34), noise_sigma=2.4, exposure=1.10, ambient=0.50, specular=1.03),
        at=_rack(np.array([NINE_FOOT.length_mm - R, 1089.9]), (1, 2, 3, 2, 1), math.pi),
        balls=(9, 3, 12, 14, 4, 6, 13, 15, 8),
    ),
    "triangle15 on red cloth, noisy": dict(
        camera=Camera.overhead(NINE_FOOT, 2162.0, (1280, 720), offset_mm=(49, -183), roll_deg=3.1, dist=(-0.04, 0.0, 0, 0, 0)),
        look=Look(cloth_bgr=(40, 38, 150), cushion_bgr=(34, 32, 130), noise_sigma=3.0, exposure=1.28, ambient=0.29, specular=1.07),
        at=_rack(np.array([1201.4, 639.3]), (1, 2, 3, 4, 5), 3.053),
        balls=(14, 9, 8, 6, 10, 4, 1, 12, 2, 0, 14, 9, 8, 6, 10),
    ),
    "diamond9 on grey cloth, low, 1080p": dict(
        camera=Camera.overhead(NINE_FOOT, 1822.0, (1920, 1080), offset_mm=(-170, -120), roll_deg=1.0, dist=(-0.05, 0.001, 0, 0, 0)),
        look=Look(cloth_bgr=(120, 118, 112), cushion_bgr=(104, 102, 96), noise_sigma=1.2, exposure=0.91, ambient=0.27, specular=0.51),
        at=_rack(np.array([855.5, 631.1]), (1, 2, 3, 2, 1), 1.666),
        balls=(15, 6, 10, 12, 7, 2, 9, 4, 14),
    ),
}


@pytest.mark.parametrize("name", list(WIDE_RACKS))
def test_every_ball_of_a_rack_in_other_rooms_is_found(name):
    # Issue acceptance (every visible ball, no false balls): each ball found within a ball
    # radius (the benchmark's match gate, benchmarks/detect_accuracy.py) by its own detection,
    # nothing else; against the renderer's truth.
    from scipy.spatial.transform import Rotation

    from vision.render import pool_balls

    s = WIDE_RACKS[name]
    pool = pool_balls()
    at = s["at"]
    n = len(at)
    rot = Rotation.random(n, random_state=np.random.default_rng(5)).as_matrix()[None]
    ren = Renderer(NINE_FOOT, s["camera"], s["look"], tuple(pool[k] for k in s["balls"]), seed=5)
    det = BallDetector(s["camera"], NINE_FOOT)
    det.process(0, 0.0, ren.render(at[None], rot, np.zeros((1, n), bool), np.array([0.0])))
    out = det.process(1, 1 / 60, ren.render(at[None], rot, np.ones((1, n), bool), np.array([1 / 60])))
    err, j = _match(out, at)
    assert np.all(np.isfinite(err)), (name, err)
    assert len(set(j.tolist())) == n and len(out) == n, (name, out[["x", "y"]].to_numpy())


@pytest.mark.parametrize("heading_deg,bridge_mm", [(180.0, 230.0), (200.0, 150.0)])
def test_arm_over_or_beside_a_rack_gives_no_ball(heading_deg, bridge_mm, stage):
    # A stroke on a ball lying just in front of a touching 15-ball triangle, sent away from
    # it: the cue, the bridge hand and the arms lie back over the rack or beside it, joining it
    # in one piece of foreground with it (racked balls under or against the hand may be lost
    # for those frames, a stated limit). Issue acceptance: no detections from the occluder.
    from vision.render import pool_balls

    s = RACKS["triangle15 electric cloth"]
    at = np.vstack([s["at"], s["at"][0] - np.array([math.cos(0.7), math.sin(0.7)]) * 2.6 * R])
    balls = pool_balls()[1:16] + (pool_balls()[0],)
    n = len(at)
    occ = Occluder((CueStroke(1.5, tuple(at[-1]), math.radians(heading_deg)),), bridge_mm=bridge_mm)
    ren = stage(s).with_balls(balls, occluder=occ, seed=7)
    det = BallDetector(s["camera"], NINE_FOOT)
    extra = []
    # The empty-table model from a frame with the balls and no player, then 60 fps while the
    # player slides in and settles (strike at 1.5 s, player in from 0.3 s).
    for i, t in enumerate([0.0] + list(np.arange(0.35, 0.75, 1 / 60))):
        out = det.process(i, t, ren.render(at[None], _rot(n), np.ones((1, n), bool), np.array([t])))
        err, _ = _match(out, at)
        extra.append(len(out) - int(np.isfinite(err).sum()))
    assert sum(extra) == 0, extra


@pytest.mark.parametrize("cloth_bgr, ball_bgr, noise", [
    ((128, 90, 61), (43, 31, 122), 1.0),  # blue-grey cloth, dark red ball (main missed it)
    ((40, 120, 30), (110, 40, 20), 1.0),  # green cloth, dark blue ball (main found it too)
    pytest.param((128, 90, 61), (58, 122, 31), 1.5, marks=pytest.mark.xfail(
        strict=True, reason="issue 3: a dark green ball on blue-grey cloth in 1.5 DN of noise: "
        "the threshold, bounded at 3 times the chromaticity's noise (0.26), still passes too few "
        "of the coarse outline's rays")),
])
def test_a_dark_ball_is_found_after_a_shadow_dims_the_whole_table(cloth_bgr, ball_bgr, noise):
    # A player leaning over the table shades the lamps: the whole cloth dims 20 % within a
    # second and the running model lags it, so the model's whole colour difference (its noise
    # sigma) grows several times while the frames' noise, about 1 DN on compressed footage
    # (the cheap camera's clip, cheapwide_25fps: 1.05 DN over 4-8 px), does not. A dark ball
    # put down in the shade must still be found where it was drawn: within 1 mm (the
    # renderer's pose is the truth; about half a pixel at this scale). Main, whose threshold
    # followed that sigma (0.12 -> 0.43 in the first case), missed the first and the xfailed one.
    cam = SETUPS["green_high"]["camera"]
    balls = (BallLook("7", "solid", ball_bgr),)
    at = np.array([[900.0, 500.0]])
    det = BallDetector(cam, NINE_FOOT)
    t = 0.0
    # One static scene per exposure, each frame with its own noise seed (Renderer.with_balls
    # gives what a new Renderer of that seed gives without tracing the scene again).
    scenes = {}
    for k, gain in enumerate((1.0, 1.0, 1.0, 0.93, 0.86, 0.8, 0.8, 0.8, 0.8, 0.8)):
        if gain not in scenes:
            scenes[gain] = Renderer(NINE_FOOT, cam, Look(cloth_bgr=cloth_bgr, exposure=gain, noise_sigma=noise), balls, seed=k)
        ren = scenes[gain].with_balls(balls, seed=k)
        present = np.array([[k >= 7]])
        out = det.process(k, t, ren.render(at[None], _rot(1), present, np.array([t])))
        t += det.config.update_every_s
    # The scene is the one meant: the whole difference's sigma well above the chromaticity's.
    assert det.background.sigma > 2.0 * det.background.chroma_sigma
    err, _ = _match(out, at)
    assert err[0] <= 1.0, (err, out[["x", "y", "quality"]].to_numpy())



@pytest.fixture(scope="module")
def uneven_room():
    """The extra set's uneven room (benchmarks/extra_scenes/uneven_60fps.toml: two lamps, the
    far one 1.5 m over (2100, 800) mm, almost no room light, tan-grey cloth, 60 fps at 1/250 s,
    H.264 at its constant rate factor) with its maroon 7: the scene and a Renderer of the ball,
    its static scene traced once."""
    from benchmarks.analyse_accuracy import EXTRA_SCENES
    from railtrace.scene import load_scene

    scene = load_scene(EXTRA_SCENES / "uneven_60fps.toml")
    ball = BallLook("7", "solid", (26, 43, 122))  # the scene's "#7a2b1a" as BGR
    return scene, ball, Renderer(scene.table, scene.camera, scene.look, (ball,), seed=5)


@pytest.mark.parametrize("rot_seed", [3, 4])
def test_a_coloured_ball_beside_its_own_shadow_is_placed_by_its_outlines_hue_step(uneven_room, rot_seed, tmp_path):
    # Issue 3: uneven_60fps's maroon 7 rolling away from the far lamp (its state at frame 272:
    # 147 mm/s) was read 13-15 mm onto its own shadow in most of frames 216-349, the clip's
    # moving p95 (13.39 mm) by itself: its fit astride ball and shadow has a dark disc, and
    # the fit of its lit pixels (BallDetector._caster_of) was never taken, the shadow beside
    # it being tinted like the ball by the codec's chroma spill. Of the two fits of one ball
    # the one whose outline has the larger hue step is taken, or the centre where that step
    # is highest (BallDetector._by_outline). Renderer's truth (the centre at mid-exposure);
    # issue 3's moving p95 bound (8 mm). Measured here: main at dd2e5a1 9.45 / 12.65 mm
    # (rotations 3 / 4), branch seven 5.46 / 4.73.
    from scipy.spatial.transform import Rotation

    from vision.video import iter_frames, write_video

    scene, ball, ren = uneven_room
    at, v = np.array([1701.5, 1004.6]), np.array([-136.4, -55.1])
    ts = np.linspace(0.0, scene.film.shutter_s, 8)  # sub-samples across the shutter
    pos = at[None, None] + (ts - ts.mean())[:, None, None] * v[None, None]
    rot = np.repeat(Rotation.random(1, random_state=rot_seed).as_matrix()[None], len(ts), axis=0)
    empty = ren.render(pos[:1], rot[:1], np.zeros((1, 1), bool), np.zeros(1))
    seen = ren.render(pos, rot, np.ones((len(ts), 1), bool), 1 / 60 + ts)
    clip = tmp_path / "uneven_7.mp4"
    write_video(clip, [empty, seen], scene.film.fps, codec="h264", quality=scene.film.quality)
    det = BallDetector(scene.camera, scene.table)
    outs = [det.process(i, t, img) for i, t, img in iter_frames(clip)]
    err, _ = _match(outs[1], at[None], scene.table.radius_mm)
    assert len(outs[1]) == 1 and err[0] <= 8.0, (outs[1], err)


@pytest.mark.xfail(strict=True, reason="an upright stripe whose band shows at one side of the rim only is outlined by two rules "
                   "(the band's rays by the hue step, the white cap's by the two-colour mixing model, which lies about 1 px "
                   "further in), so the centre moves toward the band: 1.6-1.7 mm on clean renders")
@pytest.mark.parametrize("band_bgr", [(58, 122, 31), (176, 79, 29)], ids=["green", "blue"])
def test_upright_stripes_resting_off_the_nadir_are_placed_within_a_millimetre(band_bgr):
    # Issue 3 (resting median <= 1 mm): cut_bank's resting 14, an upright green stripe 0.7 m
    # from the camera's nadir, is its resting p95 (clip 3.39 mm; 2.14 mm rendered without noise
    # or encode). Seen off the nadir, an upright stripe's band (|z_body| < R/2, vision.render)
    # meets the silhouette on the side away from the nadir only; there the local edge places the
    # outline by the hue step (0.2-0.35 px inside on the rendered 14), round the white cap by
    # the mixing model (1.0-1.7 px inside: its rim band 1.75-2.75 px in is brighter than the
    # limb at the outline, Lambert's cosine law, and its surround band lies beyond the darker
    # crease), and the two biases differ, so the centre moves toward the band. Renderer's truth,
    # no sensor noise, no encode, the sample clip's camera and tan cloth. Measured on main
    # (8005e7d): medians 1.74 / 1.57 mm (green / blue, eight places each); the outline placed by
    # the hue step on every ray (its sine bound lowered to 0.15) gives 0.23 / 0.45 mm, but on
    # H.264 4:2:0 encodes of the extra scenes' rooms that choice raises other balls' errors
    # (chroma at half resolution), so it is not made.
    import dataclasses
    from pathlib import Path

    from railtrace.scene import load_scene

    scene = load_scene(Path(__file__).resolve().parents[1] / "sample_clips" / "cut_bank.toml")
    look = dataclasses.replace(scene.look, noise_sigma=0.0, flicker=0.0)
    at = np.array([[740.0, 250.0], [400.0, 300.0], [1800.0, 250.0], [2000.0, 900.0],
                   [500.0, 950.0], [1500.0, 1000.0], [300.0, 600.0], [2100.0, 600.0]])
    n = len(at)
    ren = Renderer(scene.table, scene.camera, look, tuple(BallLook(f"s{i}", "stripe", band_bgr) for i in range(n)), seed=1)
    frames = [ren.render(at[None], _rot(n), np.ones((1, n), bool), np.array([t])) for t in (0.0, 1 / 60)]
    det = BallDetector(scene.camera, scene.table)
    out = [det.process(i, i / 60, f) for i, f in enumerate(frames)][-1]
    err, _ = _match(out, at, scene.table.radius_mm)
    assert np.all(np.isfinite(err)), err  # every ball found
    assert np.median(err) <= 1.0, err
