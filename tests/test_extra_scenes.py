"""The extra rendered scenes of ``benchmarks/analyse_accuracy.py --extra`` span what issue 4 asks
of them: cameras, lenses, frame rates, shutters, speeds, contacts, cloths and lights.

The ranges are the issue's (camera 1.8-3.2 m up; 30, 60 and 120 or 50 fps; shutters 1/250 s,
1/60 s and open at 1/30 s; speeds up to 4 m/s; dim, uneven and one-lamp rooms); each scene is
simulated (not filmed) to check its length and what happens in it.
"""

from pathlib import Path

import cv2
import numpy as np
import pytest

from railtrace.filming import simulate_scene, truth_events
from railtrace.scene import load_scene

SCENES = sorted((Path(__file__).resolve().parents[1] / "benchmarks" / "extra_scenes").glob("*.toml"))


@pytest.fixture(scope="module")
def scenes():
    return [load_scene(p) for p in SCENES]


@pytest.fixture(scope="module")
def simulated(scenes):
    return [simulate_scene(s) for s in scenes]


def test_about_five_scenes():
    assert 4 <= len(SCENES) <= 8


def test_cameras_span_heights_and_mounts(scenes):
    heights = [float(s.camera.centre_mm[2]) for s in scenes]
    # Issue 4's span of camera heights, 1.8-3.2 m (common practice for overhead mounts).
    assert min(heights) <= 1850 and max(heights) >= 3150
    # Off-centre: the camera centre at least 100 mm from above the table's centre in one scene,
    # and tilted: its optical axis at least 3 degrees from vertical in another.
    off = [np.hypot(*(s.camera.centre_mm[:2] - [s.table.length_mm / 2, s.table.width_mm / 2])) for s in scenes]
    tilt = [np.degrees(np.arccos(abs(s.camera.R[2, 2]))) for s in scenes]
    assert max(off) >= 100 and max(tilt) >= 3


def _edge_shift_share(camera) -> float:
    """Share by which the lens moves the frame's corner radially, by OpenCV's undistortPoints."""
    w, h = camera.image_size
    corner = np.array([[[w - 1.0, h - 1.0]]])
    ideal = cv2.undistortPoints(corner, camera.K, np.array(camera.dist)).reshape(2)
    seen = np.linalg.solve(camera.K, [w - 1.0, h - 1.0, 1.0])[:2]
    return abs(np.hypot(*ideal) - np.hypot(*seen)) / np.hypot(*ideal)


def test_lenses_span_wide_distorting_and_long(scenes):
    shares = [_edge_shift_share(s.camera) for s in scenes]
    hfov = [np.degrees(2 * np.arctan(s.camera.image_size[0] / 2 / s.camera.K[0, 0])) for s in scenes]
    # A wide phone lens bends the frame corner by well over 10 % (from memory: phone main cameras
    # uncorrected); a longer lens, nearly rectilinear (under 2 %) with a narrower view.
    assert max(shares) > 0.10 and min(shares) < 0.02
    assert max(hfov) - min(hfov) > 20


def test_frame_rates_and_shutters(scenes):
    fps = {s.film.fps for s in scenes}
    # Issue 4: 30, 60 and 120 or 50 fps.
    assert {30.0, 60.0} <= fps and fps & {50.0, 120.0}
    # Shutters 1/250 s, about 1/60 s and open for the whole frame at 30 fps (issue 4).
    shutters = [(s.film.fps, s.film.shutter_s) for s in scenes]
    assert any(sh <= 1 / 250 + 1e-9 for _, sh in shutters)
    assert any(abs(sh - 1 / 60) < 0.001 for _, sh in shutters)
    assert any(f == 30.0 and abs(sh - 1 / 30) < 0.001 for f, sh in shutters)
    # Issue 3's moving-ball target is stated at 60 fps and 1/250 s: one scene films it.
    assert any(f == 60.0 and sh <= 1 / 250 + 1e-9 for f, sh in shutters)


def test_cloths_and_lights(scenes):
    hues = {int(cv2.cvtColor(np.uint8([[s.look.cloth_bgr]]), cv2.COLOR_BGR2HSV)[0, 0, 0]) // 15 for s in scenes}
    # At least four cloth hues apart by OpenCV's hue bins of 30 degrees.
    assert len(hues) >= 4
    # A dim room (exposure well under 1), one strong lamp alone and an uneven room (little ambient
    # light, full vignetting) in the set.
    assert any(s.look.exposure <= 0.6 for s in scenes)
    assert any(s.look.lamps is not None and len(s.look.lamps) == 1 for s in scenes)
    assert any(s.look.ambient <= 0.1 and s.look.vignetting == 1.0 for s in scenes)


def test_clips_short_and_contacts_varied(scenes, simulated):
    for sim in simulated:
        assert 8.0 <= sim.duration_s <= 15.0
    kinds, speeds = set(), []
    for scene, sim in zip(scenes, simulated):
        ev = truth_events(scene.table, sim.trajectory, sim.shots)
        ev = ev[ev["t"] <= sim.duration_s]
        # Each clip has a collision and a cushion contact; the set pockets a ball.
        assert {"collision", "cushion"} <= set(ev["kind"])
        kinds |= set(ev["kind"])
        speeds += [r.spec.speed_mm_s for r in sim.shots]
    assert "pocket" in kinds
    # Ball speeds up to 4 m/s (issue 4).
    assert max(speeds) >= 4000
