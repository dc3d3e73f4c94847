"""The renderer films balls where the true camera puts them, with blur, noise, edges and occluder.

Ground truth is the renderer's own input (ball centres in the table frame) projected through the
same :class:`Camera`; the acceptance criterion is the issue's: truth positions projected through
the true camera land on the balls' image centres within 0.5 px.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest
from scipy import ndimage

from vision.camera import Camera
from vision.render import BallLook, CueStroke, Look, Occluder, Renderer, _RayGrid, pool_balls
from vision.table import EIGHT_FOOT, NINE_FOOT, SEVEN_FOOT

# Balls that are bright in the red channel, so they stand out from green cloth and dark shadow.
BALLS = (
    BallLook("cue", "cue", (226, 234, 236)),
    BallLook("1", "solid", (20, 195, 235)),
    BallLook("3", "solid", (35, 30, 195)),
    BallLook("11", "stripe", (35, 30, 195)),
    BallLook("9", "stripe", (20, 195, 235)),
)
STROKE = CueStroke(t_strike=1.0, ball_xy_mm=(700.0, 420.0), heading_rad=0.4)


def _frame(renderer, xy, t=10.0, rot=None, present=None):
    """Render one sharp instant (S = 1) with the balls at (B, 2) ``xy``."""
    xy = np.asarray(xy, float)
    B = len(xy)
    if rot is None:
        rng = np.random.default_rng(3)
        q = rng.normal(size=(B, 3, 3))
        rot = np.stack([np.linalg.qr(m)[0] for m in q])
        rot *= np.sign(np.linalg.det(rot))[:, None, None]
    if present is None:
        present = np.ones(B, bool)
    return renderer.render(xy[None], rot[None], present[None], np.array([t]))


def _blobs(frame, bg, uv_list, r_px, thresh=40.0):
    """Binary centroid (u, v) of the bright-in-red blob nearest each expected position."""
    diff = frame[..., 2].astype(float) - bg[..., 2]
    out = []
    for (u, v), r in zip(uv_list, r_px):
        w = int(math.ceil(2.5 * r))
        u0, v0 = int(round(u)) - w, int(round(v)) - w
        win = diff[v0 : v0 + 2 * w + 1, u0 : u0 + 2 * w + 1] > thresh
        lab, n = ndimage.label(win)
        sizes = ndimage.sum(win, lab, range(1, n + 1))
        keep = lab == 1 + int(np.argmax(sizes))
        vv, uu = np.nonzero(keep)
        out.append((uu.mean() + u0, vv.mean() + v0))
    return np.array(out)


def _radius_px(cam, table, xy):
    centre = np.column_stack([xy, np.full(len(xy), table.radius_mm)])
    side = centre + [table.radius_mm, 0, 0]
    return np.linalg.norm(cam.project(side) - cam.project(centre), axis=1)


@pytest.fixture(scope="module")
def cam720():
    return Camera.overhead(
        NINE_FOOT,
        2000.0,
        (1280, 720),
        offset_mm=(250.0, -150.0),
        aim_offset_mm=(-100.0, 60.0),
        roll_deg=3.0,
        dist=(-0.28, 0.09, 0.001, -0.001, 0.0),
    )


@pytest.fixture(scope="module")
def r720(cam720):
    look = Look(noise_sigma=0.0)
    return Renderer(NINE_FOOT, cam720, look, BALLS, occluder=Occluder((STROKE,)), seed=0)


@pytest.fixture(scope="module")
def r1080():
    cam = Camera.overhead(
        EIGHT_FOOT, 3000.0, (1920, 1080), offset_mm=(-200.0, 120.0), roll_deg=-2.0, dist=(-0.2, 0.05, 0.0, 0.0, 0.0)
    )
    return Renderer(EIGHT_FOOT, cam, Look(noise_sigma=0.0), BALLS, seed=0)


# Near corners, rails and the middle, so distortion and perspective both matter.
XY9 = np.array([[120.0, 110.0], [2400.0, 1150.0], [1270.0, 635.0], [2430.0, 90.0], [400.0, 1160.0]])
XY8 = np.array([[110.0, 1060.0], [2230.0, 100.0], [1168.0, 584.0], [600.0, 200.0], [2200.0, 1080.0]])


def _matte_centres(renderer, xy, truth, r_px):
    """Image centres of plain balls: the binary centroid of the pixels that change when every ball
    turns from white to black (same light, same shadows), near each expected position."""
    white = renderer.with_balls([BallLook(b.ball, "cue", (255, 255, 255)) for b in renderer.balls])
    black = renderer.with_balls([BallLook(b.ball, "cue", (0, 0, 0)) for b in renderer.balls])
    rot = np.broadcast_to(np.eye(3), (len(xy), 3, 3))
    d = np.abs(_frame(white, xy, rot=rot).astype(int) - _frame(black, xy, rot=rot)).sum(axis=2)
    out = []
    for (u, v), r in zip(truth, r_px):
        w = int(math.ceil(3 * r))
        u0, v0 = int(round(u)) - w, int(round(v)) - w
        vv, uu = np.nonzero(d[v0 : v0 + 2 * w + 1, u0 : u0 + 2 * w + 1] > 3)
        out.append((uu.mean() + u0, vv.mean() + v0))
    return np.array(out)


@pytest.mark.parametrize("which", ["720", "1080"])
def test_ball_image_centres_match_projected_truth(which, r720, r1080):
    renderer, xy = (r720, XY9) if which == "720" else (r1080, XY8)
    table, cam = renderer.table, renderer.camera
    truth = cam.project(np.column_stack([xy, np.full(len(xy), table.radius_mm)]))
    r_px = _radius_px(cam, table, xy)
    found = _matte_centres(renderer, xy, truth, r_px)
    err = np.linalg.norm(found - truth, axis=1)
    # Acceptance criterion of the issue: within 0.5 px.
    assert err.max() < 0.5, f"centroid errors {np.round(err, 3)} px"
    # The textured, shaded balls themselves (threshold on the red channel) land within 1 px even
    # with shading, highlights and shadows biasing a plain threshold.
    shaded = _blobs(_frame(renderer, xy), renderer.background(), truth, 1.3 * r_px, thresh=20.0)
    assert np.linalg.norm(shaded - truth, axis=1).max() < 1.0


def test_shifted_truth_is_caught(r720):
    """The check above can fail: a 2 mm shift of the truth (about 0.8 px here) is caught."""
    table, cam = r720.table, r720.camera
    truth = cam.project(np.column_stack([XY9, np.full(len(XY9), table.radius_mm)]))
    shifted = cam.project(np.column_stack([XY9 + [2.0, 0.0], np.full(len(XY9), table.radius_mm)]))
    found = _matte_centres(r720, XY9, truth, _radius_px(cam, table, XY9))
    assert np.linalg.norm(found - shifted, axis=1).max() > 0.5


def test_stripe_band_turns_with_the_ball(r720):
    """Rotating a stripe about a horizontal axis moves its band: the image changes."""
    xy = np.array([[1270.0, 635.0]])
    look_one = r720
    rot_a = np.eye(3)[None]
    rot_b = np.array([[[1, 0, 0], [0, 0, -1], [0, 1, 0]]], float)
    fa = _frame(look_one, np.repeat(xy, 5, 0) + np.arange(5)[:, None] * [0, 0], rot=np.repeat(rot_a, 5, 0), present=np.eye(5, dtype=bool)[3])
    fb = _frame(look_one, np.repeat(xy, 5, 0), rot=np.repeat(rot_b, 5, 0), present=np.eye(5, dtype=bool)[3])
    assert np.abs(fa.astype(int) - fb.astype(int)).sum() > 2000


def test_motion_blur_streak_length(r720):
    """A ball moving 80 mm during the exposure leaves a streak as long as its projected path plus
    its diameter (within 2 px) and centred on the path's midpoint (within 1 px: the brightness
    weighting leans toward the ball's lit side)."""
    table, cam = r720.table, r720.camera
    S = 16
    start, end = np.array([900.0, 500.0]), np.array([980.0, 530.0])
    path = start + np.linspace(0, 1, S)[:, None] * (end - start)
    pos = np.zeros((S, 5, 2))
    pos[:, 0] = path
    present = np.zeros((S, 5), bool)
    present[:, 0] = True
    rot = np.broadcast_to(np.eye(3), (S, 5, 3, 3))
    frame = r720.render(pos, rot, present, np.full(S, 10.0))
    diff = frame[..., 2].astype(float) - r720.background()[..., 2]
    ends = cam.project(np.column_stack([[start, end], [[table.radius_mm]] * 2]))
    mid = ends.mean(axis=0)
    r_px = _radius_px(cam, table, np.array([start, end])).mean()
    w = int(np.linalg.norm(ends[1] - ends[0]) / 2 + 3 * r_px)
    u0, v0 = int(mid[0]) - w, int(mid[1]) - w
    win = diff[v0 : v0 + 2 * w, u0 : u0 + 2 * w]
    # Low threshold: the streak's ends are seen by few sub-samples.
    vv, uu = np.nonzero(win > 0.06 * win.max())
    d = (ends[1] - ends[0]) / np.linalg.norm(ends[1] - ends[0])
    along = (uu + u0 - mid[0]) * d[0] + (vv + v0 - mid[1]) * d[1]
    length = along.max() - along.min() + 1
    expected = np.linalg.norm(ends[1] - ends[0]) + 2 * r_px
    assert abs(length - expected) < 2.0, (length, expected)
    weights = win[vv, uu]
    centroid = np.array([(weights * (uu + u0)).sum(), (weights * (vv + v0)).sum()]) / weights.sum()
    assert np.linalg.norm(centroid - mid) < 1.0, (centroid, mid)


def test_cushion_nose_edge_where_camera_projects_it(r720):
    """Across each rail the strongest dark-to-bright step going outward (the face under the nose
    to the cushion top) lies within 1 px of the projected nose line."""
    table, cam = r720.table, r720.camera
    bg = r720.background().sum(axis=2)
    L, W, h = table.length_mm, table.width_mm, table.nose_height_mm
    points = []
    for k in (1, 2, 3, 5, 6, 7):
        points += [((L * k / 8, 0.0), (0.0, -1.0)), ((L * k / 8, W), (0.0, 1.0))]
    for k in (1, 2, 3):
        points += [((0.0, W * k / 4), (-1.0, 0.0)), ((L, W * k / 4), (1.0, 0.0))]
    errors = []
    for (x, y), (ox, oy) in points:
        p0 = cam.project(np.array([[x, y, h]]))[0]
        p1 = cam.project(np.array([[x + 5 * ox, y + 5 * oy, h]]))[0]
        n = (p1 - p0) / np.linalg.norm(p1 - p0)
        s = np.arange(-6.0, 6.0, 0.05)
        uv = p0[None] + s[:, None] * n[None]
        prof = ndimage.map_coordinates(bg, [uv[:, 1], uv[:, 0]], order=1)
        grad = np.gradient(prof, s)
        errors.append(s[int(np.argmax(grad))])
    errors = np.abs(errors)
    assert errors.max() < 1.0, np.round(errors, 2)


def test_occluder_only_while_a_stroke_is_active(r720):
    xy = XY9
    rest = _frame(r720, xy, t=10.0)
    changed = {}
    for t in (-0.3, -0.19, 0.2, 0.8, 1.0, 1.3, 1.59, 1.7, 3.0):
        f = _frame(r720, xy, t=t)
        changed[t] = int(np.sum(np.abs(f.astype(int) - rest.astype(int)).sum(axis=2) > 6))
    # Window: lead_s = 1.2 before the strike at 1.0 s, follow_s = 0.6 after.
    for t, n in changed.items():
        active = -0.2 <= t <= 1.6
        if active:
            assert n > 2000, (t, n)
        else:
            assert n == 0, (t, n)
    # At the strike the tip is near the ball, drawn at its height: pixels change there.
    tip = np.array([[*(np.array(STROKE.ball_xy_mm) - 40 * np.array([math.cos(0.4), math.sin(0.4)])), 17.0]])
    u, v = np.round(r720.camera.project(tip)[0]).astype(int)
    f = _frame(r720, xy, t=1.0)
    assert np.abs(f[v - 3 : v + 4, u - 3 : u + 4].astype(int) - rest[v - 3 : v + 4, u - 3 : u + 4]).max() > 30


def test_sensor_noise_matches_sigma():
    cam = Camera.overhead(SEVEN_FOOT, 1800.0, (480, 270))
    look = Look(noise_sigma=3.0)
    a = Renderer(SEVEN_FOOT, cam, look, (), seed=1)
    b = Renderer(SEVEN_FOOT, cam, look, (), seed=2)
    empty = (np.zeros((1, 0, 2)), np.zeros((1, 0, 3, 3)), np.zeros((1, 0), bool), np.zeros(1))
    fa1, fa2, fb = a.render(*empty), a.render(*empty), b.render(*empty)
    patch = np.s_[120:150, 220:260]
    std = (fa1[patch].astype(float) - fb[patch]).std()
    # Difference of two independent noises: sqrt(2) sigma (rounding adds 1/12 DN^2 each).
    assert std == pytest.approx(math.sqrt(2) * 3.0, rel=0.15)
    assert not np.array_equal(fa1, fa2)  # fresh noise every frame
    assert np.array_equal(fa1, Renderer(SEVEN_FOOT, cam, look, (), seed=1).render(*empty))


def test_a_renderer_with_other_balls_films_what_a_new_one_does():
    # Renderer.with_balls shares the static scene of a renderer of the same table, camera and
    # look (tests reuse one to skip its ray cast): its frames must be those of a new Renderer
    # of those balls, occluder and seed to the bit (the reference is the new renderer itself,
    # noise and flicker drawn), whatever the first renderer filmed before (resting balls
    # cached in its static frame, its own noise), and deriving it must not change the first
    # renderer's frames either.
    cam = Camera.overhead(SEVEN_FOOT, 1800.0, (480, 270), offset_mm=(60.0, -40.0), roll_deg=1.0, dist=(-0.1, 0.02, 0.0, 0.0, 0.0))
    look = Look(noise_sigma=2.0, shot_noise=0.5, flicker=0.02)
    occ = Occluder((CueStroke(t_strike=1.0, ball_xy_mm=(700.0, 420.0), heading_rad=0.4),))
    rest = np.array([[700.0, 420.0], [1200.0, 700.0], [300.0, 300.0]])
    rot = np.broadcast_to(np.eye(3), (2, 3, 3, 3))
    moving = rest.copy()
    moving[0] += [60.0, 20.0]
    clip = [(np.repeat(rest[None], 2, axis=0), 0.2), (np.repeat(rest[None], 2, axis=0), 0.9),
            (np.stack([rest, moving]), 1.02)]

    def film(ren):
        return [ren.render(pos, rot, np.ones((2, 3), bool), np.array([t - 0.002, t + 0.002])) for pos, t in clip]

    first = Renderer(SEVEN_FOOT, cam, look, BALLS[:3], seed=9)
    before = film(first)
    other = first.with_balls(BALLS[2:], occluder=occ, seed=5)
    got = film(other)
    want = film(Renderer(SEVEN_FOOT, cam, look, BALLS[2:], occluder=occ, seed=5))
    assert all(np.array_equal(g, w) for g, w in zip(got, want))
    # ...and the frames differ from the first renderer's (other balls, the cue over the table).
    assert not any(np.array_equal(g, b) for g, b in zip(got, before))
    again = Renderer(SEVEN_FOOT, cam, look, BALLS[:3], seed=9)
    assert all(np.array_equal(a, b) for a, b in zip(film(again) + film(again), before + film(first)))


def test_ray_grid_matches_camera_inversion(cam720):
    grid = _RayGrid(cam720)
    rng = np.random.default_rng(0)
    uv = rng.uniform([-0.5, -0.5], [1279.5, 719.5], (5000, 2))
    exact = cam720.undistort_normalised(uv)
    got = grid.normalised(uv[:, 0], uv[:, 1])
    assert np.abs(got - exact).max() * cam720.K[0, 0] < 0.01


def test_bad_input_raises(r720):
    with pytest.raises(ValueError, match="pos_mm"):
        r720.render(np.zeros((1, 3, 2)), np.zeros((1, 3, 3, 3)), np.ones((1, 3), bool), np.zeros(1))
    with pytest.raises(ValueError, match="kind"):
        BallLook("x", "spotted", (1, 2, 3))
    with pytest.raises(ValueError, match="noise_sigma"):
        Look(noise_sigma=-1)
    assert len(pool_balls()) == 16


@pytest.fixture(scope="module")
def r_small():
    cam = Camera.overhead(
        SEVEN_FOOT, 1900.0, (640, 360), offset_mm=(80.0, -60.0), roll_deg=2.0, dist=(-0.2, 0.05, 0.0, 0.0, 0.0)
    )
    stroke = CueStroke(t_strike=1.0, ball_xy_mm=(500.0, 500.0), heading_rad=0.3)
    return Renderer(SEVEN_FOOT, cam, Look(noise_sigma=0.0), BALLS, occluder=Occluder((stroke,)), seed=0)


def test_fast_path_matches_full_recompute(r_small):
    """Frame after frame (balls at rest, starting, moving past resting ones, leaving the table
    mid-exposure, coming to rest, the cue over the table), the cached, per-box renderer equals
    the plain full-frame computation (every ball, whole frame, every sub-sample, one blur of the
    whole mean) within 0.25 DN before noise; the frames themselves differ by tens of DN."""
    r = r_small.with_balls(r_small.balls, r_small.occluder)
    table = r.table
    S = 4
    # Ball 1 touches ball 2 (shadows and contact shadows overlap); ball 4 sits by a corner pocket.
    rest = np.array([[600.0, 420.0], [1000.0, 500.0], [1000.0 + 2 * table.radius_mm, 500.0], [1500.0, 300.0], [60.0, 60.0]])
    rots = np.stack([np.linalg.qr(m)[0] for m in np.random.default_rng(5).normal(size=(5, 3, 3))])
    path = np.array([940.0, 420.0]) + np.linspace(0, 1, S)[:, None] * [40.0, 20.0]

    def frame(moving: dict, t=10.0, gone=None):
        pos = np.repeat(rest[None], S, axis=0)
        rot = np.repeat(rots[None], S, axis=0)
        present = np.ones((S, 5), bool)
        for b, p in moving.items():
            pos[:, b] = p
            rot[:, b] = [rots[b] @ np.array([[math.cos(a), -math.sin(a), 0], [math.sin(a), math.cos(a), 0], [0, 0, 1]]) for a in np.linspace(0, 0.5, S)]
        if gone is not None:
            present[S // 2 :, gone] = False
            pos[S // 2 :, gone] = np.nan
        return pos, rot, present, np.linspace(t - 0.002, t + 0.002, S)

    frames = [
        frame({}),
        frame({0: path}),
        frame({0: path + [40.0, 20.0], 3: path[::-1] + [500.0, -100.0]}),
        frame({0: path + [80.0, 40.0], 3: path + [520.0, -120.0]}, gone=3),
        frame({}, t=0.9),
        frame({0: path - [300.0, 0.0]}, t=1.0),
        frame({}),
    ]
    previous = None
    for k, args in enumerate(frames):
        if k == 6:
            rest[0] = path[-1] - [300.0, 0.0]
            args = frame({})
        pos, rot, present, times = args
        fast = r._compose(*r._check(pos, rot, present, times))
        ref = r._compose_reference(pos, rot, present, times)
        err = np.abs(fast - ref).max()
        assert err < 0.25, (k, err)
        if previous is not None:
            assert np.abs(ref - previous).max() > 20, k
        previous = ref
    # The public frame is the same picture, clipped to 0..255 and rounded.
    pos, rot, present, times = frame({0: path})
    got = r.render(pos, rot, present, times).astype(float)
    ref = np.clip(r._compose_reference(pos, rot, present, times), 0, 255)
    assert np.abs(got - ref).max() <= 0.5 + 0.25


def test_occluder_outlines_are_what_is_drawn(r720):
    # The outlines benchmarks/visibility.py judges visibility by, against the rendered frame
    # itself: inside them (less 2 px of anti-aliased edge) the cue and arms replace the
    # table's colours; outside them (beyond 2 px) the stroke can only dim the table by its
    # cast shadows, never brighten it (a shadow takes light away; common practice).
    xy = XY9
    rest = _frame(r720, xy, t=10.0).astype(int)
    for t in (0.1, 0.7, 1.0, 1.3):
        f = _frame(r720, xy, t=t).astype(int)
        mask = np.zeros(rest.shape[:2], np.uint8)
        outlines = r720.occluder_outlines(t)
        assert outlines, t
        for poly in outlines:
            cv2.fillConvexPoly(mask, np.round(poly * 16).astype(np.int32), 1, cv2.LINE_8, 4)
        inside = cv2.erode(mask, np.ones((5, 5), np.uint8)) > 0
        outside = cv2.dilate(mask, np.ones((5, 5), np.uint8)) == 0
        changed = np.abs(f - rest).sum(axis=2) > 6
        assert changed[inside].mean() > 0.9, (t, changed[inside].mean())
        assert (f - rest)[outside].max() <= 1, t
    assert r720.occluder_outlines(10.0) == []
