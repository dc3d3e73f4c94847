"""Tests of benchmarks/visibility.py: which truth ball-frames the cue and arms hide, checked
against the rendered frames themselves (what the detector is given)."""

from __future__ import annotations

import tomllib

import cv2
import numpy as np
import pytest

from benchmarks.visibility import occluder_cover
from railtrace.filming import simulate_scene, truth_tracks
from railtrace.scene import parse_scene
from vision.detect import sphere_outline_px
from vision.render import BallLook, CueStroke, Occluder, Renderer

# A scene of our own: the cue ball struck along +x (the strike time read from the simulator);
# ball 1 lies half under the bridge hand (about 280 mm behind the cue ball's centre: the tip
# 25 mm behind its surface, the bridge 230 mm further back; the hand about 45 mm to each side,
# vision.render.Occluder), ball 2 far away.
SCENE = """
name = "visibility test"
lead_s = 1.3
tail_s = 0.2
max_duration_s = 3.0
seed = 5
[table]
preset = "7ft"
[camera]
height_mm = 1700
resolution = [640, 360]
fps = 30
shutter_s = 0.002
quality = 20
[look]
noise = 0.0
occluder = true
[[ball]]
id = "cue"
kind = "cue"
at = [600, 500]
[[ball]]
id = "1"
kind = "solid"
colour = "#1d4fb0"
at = [318, 440]
[[ball]]
id = "2"
kind = "solid"
colour = "#e0b020"
at = [1700, 800]
[[shot]]
ball = "cue"
aim = { heading_deg = 0.0 }
speed_mm_s = 800
"""


@pytest.fixture(scope="module")
def scene_truth():
    scene = parse_scene(tomllib.loads(SCENE), source_text=SCENE)
    sim = simulate_scene(scene)
    n = int(sim.duration_s * scene.film.fps) + 1
    return scene, sim, truth_tracks(scene, sim.trajectory, n)


def test_cover_matches_the_rendered_frames(scene_truth):
    scene, sim, tr = scene_truth
    cover = occluder_cover(scene, tr)
    strike = sim.shots[0].t_strike
    # The renderer's stroke window (vision.render.Occluder: 1.2 s before to 0.6 s after).
    active = (tr["t"] >= strike - 1.2) & (tr["t"] <= strike + 0.6)
    assert np.all(cover[~active.to_numpy()] == 0)
    ball1 = (tr["label"] == "1").to_numpy()
    ball2 = (tr["label"] == "2").to_numpy()
    assert np.all(cover[ball2] == 0)
    assert 0.2 < cover[ball1 & active.to_numpy()].max() < 0.9  # partly hidden
    # Against the pixels: balls at rest, one sharp instant; the stroke drawn with and without
    # its body (shadows off, so only the body changes pixels): the share of ball 1's
    # silhouette that the body changes, in frames while both rest.
    strokes = tuple(CueStroke(r.t_strike, r.ball_xy_mm, r.heading_rad) for r in sim.shots)
    looks = [BallLook(b.ball, b.kind, b.colour_bgr) for b in scene.balls]
    with_body = Renderer(scene.table, scene.camera, scene.look, looks, Occluder(strokes, shadow_strength=0.0), seed=0)
    without = with_body.with_balls(looks, occluder=None)
    R = scene.table.radius_mm
    xy = np.array([b.at_mm for b in scene.balls], float)
    rot = np.broadcast_to(np.eye(3), (len(xy), 3, 3))
    checked = 0
    for f in np.unique(tr.loc[ball1 & active.to_numpy(), "frame"]):
        t = f / scene.film.fps
        if t >= strike:
            break  # the cue ball moves from here; the scene is no longer the resting one
        row = np.nonzero(ball1 & (tr["frame"] == f).to_numpy())[0][0]
        a = with_body.render(xy[None], rot[None], np.ones((1, len(xy)), bool), np.array([t])).astype(int)
        b = without.render(xy[None], rot[None], np.ones((1, len(xy)), bool), np.array([t])).astype(int)
        sil = np.zeros(a.shape[:2], np.uint8)
        o = sphere_outline_px(scene.camera, np.array([[*xy[1], R]]), R)[0]
        cv2.fillPoly(sil, [np.round(o * 16).astype(np.int32)], 1, cv2.LINE_8, 4)
        inner = cv2.erode(sil, np.ones((3, 3), np.uint8)) > 0
        changed = (np.abs(a - b).sum(axis=2) > 6)[inner].mean()
        # The cover counts the whole silhouette against the body grown by a pixel, the pixels
        # the inner silhouette (less a pixel of anti-aliased rim): a few rim pixels apart.
        assert abs(cover[row] - changed) <= 0.05, (f, changed, cover[row])
        checked += 1
    assert checked >= 5


def test_match_frame_is_the_optimal_gated_assignment():
    # Reference: the assignment problem's optimum by exhaustive search over permutations
    # (Kuhn 1955 defines the problem; brute force is its definition, outside scipy).
    import itertools

    from benchmarks.visibility import match_frame

    rng = np.random.default_rng(3)
    for _ in range(40):
        n, m = int(rng.integers(1, 5)), int(rng.integers(1, 5))
        T = rng.uniform(0, 200, (n, 2))
        Q = np.vstack([T[: min(n, m)] + rng.normal(0, 15, (min(n, m), 2)), rng.uniform(0, 200, (m - min(n, m), 2))])
        D = np.linalg.norm(T[:, None] - Q[None], axis=2)
        k = min(n, m)
        best = min(
            sum(D[a, b] for a, b in zip(rows, cols))
            for rows in itertools.combinations(range(n), k)
            for cols in itertools.permutations(range(m), k)
        )
        pairs = match_frame(T, Q, gate_mm=28.6)
        full = match_frame(T, Q, gate_mm=np.inf)
        assert len(full) == k
        assert abs(sum(D[a, b] for a, b in full) - best) < 1e-9
        assert sorted(pairs) == sorted((a, b) for a, b in full if D[a, b] < 28.6)
    assert match_frame(np.zeros((0, 2)), np.ones((2, 2)), 10.0) == []
