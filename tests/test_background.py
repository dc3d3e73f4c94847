"""The empty-table model: resting balls kept out, lighting drift followed, ball zone sane."""

import numpy as np
import pytest

from vision.background import Background, ball_zone, cloth_zone, noise_sigma
from vision.camera import Camera
from vision.render import BallLook, Look, Renderer
from vision.table import NINE_FOOT

R = NINE_FOOT.radius_mm


@pytest.fixture(scope="module")
def scene():
    cam = Camera.overhead(NINE_FOOT, 2400.0, (640, 360), offset_mm=(80, -60), roll_deg=2.0, dist=(-0.2, 0.04, 0, 0, 0))
    look = Look(cloth_bgr=(150, 70, 25), noise_sigma=2.0)  # blue cloth
    balls = (BallLook("cue", "cue", (226, 234, 236)), BallLook("3", "solid", (35, 30, 195)), BallLook("11", "stripe", (35, 30, 195)))
    ren = Renderer(NINE_FOOT, cam, look, balls, seed=1)
    pos = np.array([[[600.0, 400.0], [1500.0, 800.0], [2200.0, 300.0]]])
    rot = np.broadcast_to(np.eye(3), (1, 3, 3, 3))
    frame = ren.render(pos, rot, np.ones((1, 3), bool), np.zeros(1))
    return cam, ren, frame, pos[0]


def test_resting_balls_are_not_baked_into_the_background(scene):
    cam, ren, frame, pos = scene
    zone, cloth = ball_zone(cam, NINE_FOOT), cloth_zone(cam, NINE_FOOT)
    ball_px = 2 * R * cam.K[0, 0] / 2400.0
    bg = Background([frame], zone, cloth, ball_px)
    truth = ren.background()  # the renderer's own empty table, the reference
    uv = cam.project(np.column_stack([pos, np.full(len(pos), R)]))
    for u, v in uv:
        vv, uu = np.mgrid[int(v) - 3 : int(v) + 4, int(u) - 3 : int(u) + 4]
        err = np.abs(bg.image[vv, uu] - truth[vv, uu]).mean()
        seen = np.abs(frame[vv, uu].astype(float) - truth[vv, uu]).mean()
        # Where a ball rests the model must show cloth (within 12 DN of the true empty table),
        # while the frame itself differs from it by far more.
        assert err < 12.0 and seen > 40.0, (err, seen)
    # Away from the balls the model is the frame (noise sigma 2 DN: mean abs error about 1.6).
    far = zone.copy()
    for u, v in uv:
        far[max(int(v) - 25, 0) : int(v) + 25, max(int(u) - 25, 0) : int(u) + 25] = False
    assert np.abs(bg.image[far] - truth[far]).mean() < 3.0


def test_running_update_follows_lighting_drift(scene):
    cam, ren, frame, pos = scene
    zone, cloth = ball_zone(cam, NINE_FOOT), cloth_zone(cam, NINE_FOOT)
    ball_px = 2 * R * cam.K[0, 0] / 2400.0
    bg = Background([frame], zone, cloth, ball_px)
    dim = np.clip(frame.astype(float) * 0.9, 0, 255).astype(np.uint8)  # lamps 10 % dimmer
    protect = np.zeros(zone.shape, bool)
    for _ in range(30):
        bg.update(dim, protect)
    assert np.abs(bg.image[cloth] - dim[cloth].astype(float)).mean() < 1.5


def test_ball_zone_holds_the_cloth_and_not_the_rails():
    cam = Camera.overhead(NINE_FOOT, 2600.0, (1280, 720))
    zone = ball_zone(cam, NINE_FOOT)
    inside = cam.project(np.array([[10.0, 10.0, 0.0], [2530.0, 1260.0, 0.0], [1270.0, 635.0, 0.0]]))
    sights = cam.project(np.array([s[2] + (NINE_FOOT.rail_top_height_mm,) for s in NINE_FOOT.sights()]))
    assert all(zone[int(round(v)), int(round(u))] for u, v in inside)
    assert not any(zone[int(round(v)), int(round(u))] for u, v in sights)


def test_noise_sigma_is_robust_to_outliers():
    rng = np.random.default_rng(0)
    d = rng.normal(0, 3.0, (200, 200, 3)).astype(np.float32)
    d[:40] = 200.0  # a fifth of the image is a ball: the MAD ignores it
    s = noise_sigma(d, np.ones((200, 200), bool))
    assert s == pytest.approx(3.0, rel=0.35)


def test_background_refuses_mismatched_input():
    with pytest.raises(ValueError, match="at least one frame"):
        Background([], np.ones((4, 4), bool), np.ones((4, 4), bool), 10.0)
