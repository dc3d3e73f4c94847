"""Filming a scene end to end: clip, truth folder, and the truth agreeing with the pictures."""

import json
import math

import numpy as np
import pandas as pd
import pytest

from railtrace.cli import main
from railtrace.results import EVENT_COLUMNS, SHOT_COLUMNS, TRACK_COLUMNS
from vision.calibfile import read_calibration
from vision.video import iter_frames, probe


def test_truth_folder_follows_the_results_format(small_clip):
    clip, truth = small_clip
    for name in ("tracks.csv", "events.csv", "shots.csv", "calibration.json", "scene.toml", "run.json"):
        assert (truth / name).is_file(), name
    tracks = pd.read_csv(truth / "tracks.csv")
    events = pd.read_csv(truth / "events.csv")
    shots = pd.read_csv(truth / "shots.csv")
    assert list(tracks.columns[: len(TRACK_COLUMNS)]) == TRACK_COLUMNS
    assert list(events.columns[: len(EVENT_COLUMNS)]) == EVENT_COLUMNS
    assert list(shots.columns[: len(SHOT_COLUMNS)]) == SHOT_COLUMNS
    info = probe(clip)
    # One tracks row per ball per frame; frame times are i / fps.
    assert tracks["frame"].max() + 1 == info.frame_count
    assert np.allclose(tracks["t"], tracks["frame"] / 60.0, rtol=0, atol=1e-6)  # written to 1 us
    assert set(tracks["ball"]) == {"cue", "object"}
    assert np.all(np.diff(events["t"]) >= 0) and list(events["event"]) == list(range(len(events)))
    assert set(events["kind"]) <= {"start", "collision", "cushion", "pocket", "stop"}


def test_truth_is_physically_consistent(small_clip, small_scene):
    _, truth = small_clip
    table = small_scene.table
    tracks = pd.read_csv(truth / "tracks.csv")
    R = table.radius_mm
    d = table.reversal_offset_mm
    # Centres stay inside the rectangle of reversal lines (a ball cannot pass a cushion).
    assert tracks["x"].between(d - 1e-6, table.length_mm - d + 1e-6).all()
    assert tracks["y"].between(d - 1e-6, table.width_mm - d + 1e-6).all()
    # Balls never overlap.
    for _, f in tracks.groupby("frame"):
        p = f[["x", "y"]].to_numpy()
        gaps = np.linalg.norm(p[:, None] - p[None], axis=2) + np.eye(len(p)) * 1e9
        assert gaps.min() >= 2 * R - 1e-6
    # Velocity is the derivative of position (central differences at 60 fps, smooth stretches).
    for _, g in tracks.groupby("track"):
        x = g["x"].to_numpy()
        v = (x[2:] - x[:-2]) * 30.0
        ok = np.abs(g["vx"].to_numpy()[1:-1] - v) < 20.0
        assert ok.mean() > 0.9
    events = pd.read_csv(truth / "events.csv")
    cush = events[events["kind"] == "cushion"]
    assert len(cush) >= 1
    for _, e in cush.iterrows():
        coord = e["y"] if e["rail"] in ("bottom", "top") else e["x"]
        assert coord == pytest.approx(table.reversal_line(e["rail"]), abs=1e-3)
        along = e["x"] if e["rail"] in ("bottom", "top") else e["y"]
        assert e["diamond"] == pytest.approx(table.to_diamonds(e["rail"], along), abs=1e-5)
        assert 0 < e["restitution"] <= 1.0
    coll = events[events["kind"] == "collision"]
    assert len(coll) % 2 == 0 and len(coll) >= 2


def _edge_circle_centre(img: np.ndarray, u0: float, v0: float, r_px: float) -> tuple[float, float]:
    """Centre (u, v) of the circle fitted to a ball's outline.

    The outline is where, along 90 rays from (u0, v0), the colour distance from the surrounding
    cloth falls to half its value inside the ball (sub-pixel, linear interpolation); the circle is
    an algebraic least-squares fit (Kasa 1976). Interior shading and highlights do not move it.
    """
    import cv2

    f = img.astype(np.float32)
    ring = [
        f[int(round(v0 + rr * np.sin(a))), int(round(u0 + rr * np.cos(a)))]
        for a in np.linspace(0, 2 * np.pi, 48, endpoint=False)
        for rr in (2.2 * r_px, 2.6 * r_px)
    ]
    dist = np.linalg.norm(f - np.median(np.array(ring), axis=0), axis=2).astype(np.float32)
    step = 0.1
    radii = np.arange(0.6 * r_px, 1.6 * r_px, step)
    pts = []
    for a in np.linspace(0, 2 * np.pi, 90, endpoint=False):
        us = (u0 + radii * np.cos(a)).astype(np.float32)[None]
        vs = (v0 + radii * np.sin(a)).astype(np.float32)[None]
        prof = cv2.remap(dist, us, vs, cv2.INTER_LINEAR)[0]
        level = 0.5 * np.median(prof[radii < 0.8 * r_px])
        below = np.nonzero(prof < level)[0]
        if len(below) == 0 or below[0] == 0:
            continue
        k = below[0]
        rr = radii[k - 1] + step * (prof[k - 1] - level) / (prof[k - 1] - prof[k])
        pts.append((u0 + rr * np.cos(a), v0 + rr * np.sin(a)))
    p = np.array(pts)
    A = np.column_stack([2 * p[:, 0], 2 * p[:, 1], np.ones(len(p))])
    cu, cv, _ = np.linalg.lstsq(A, (p**2).sum(axis=1), rcond=None)[0]
    return float(cu), float(cv)


def test_truth_centres_land_on_the_ball_images(small_clip):
    """Truth positions projected through the true camera land on the balls' image centres
    (issue acceptance: within 0.5 px), measured on the decoded H.264 clip by fitting each ball's
    outline in the first frame."""
    clip, truth = small_clip
    _, camera, _ = read_calibration(truth / "calibration.json")
    tracks = pd.read_csv(truth / "tracks.csv")
    img = next(iter_frames(clip))[2]
    R = 57.15 / 2
    errors = []
    for _, r in tracks[tracks["frame"] == 0].iterrows():
        centre = np.array([[r["x"], r["y"], R]])
        u, v = camera.project(centre)[0]
        # Apparent radius in pixels from the projection of a point one radius to the side.
        r_px = np.linalg.norm(camera.project(centre + [[R, 0, 0]])[0] - [u, v])
        cu, cv = _edge_circle_centre(img, u, v, r_px)
        errors.append(math.hypot(cu - u, cv - v))
    assert len(errors) == 3
    assert max(errors) < 0.5, errors


def test_calibration_json_has_the_true_camera(small_clip, small_scene):
    _, truth = small_clip
    table, camera, d = read_calibration(truth / "calibration.json")
    assert d["source"] == "truth"
    assert table.length_mm == small_scene.table.length_mm
    pts = np.array([[0.0, 0.0, 0.0], [2540.0, 1270.0, 36.0]])
    assert np.allclose(camera.project(pts), small_scene.camera.project(pts))
    run = json.loads((truth / "run.json").read_text())
    assert run["railtrace_version"]


def test_render_cli_refuses_to_overwrite_and_reports_bad_scenes(small_clip, tmp_path, capsys):
    clip, truth = small_clip
    scene = truth / "scene.toml"
    assert main(["render", str(scene), "--out", str(clip)]) == 2
    err = capsys.readouterr().err
    assert "exists already" in err and err.count("\n") == 1
    bad = tmp_path / "bad.toml"
    bad.write_text("[[ball]]\nid = 'cue'\nat = [1, 2, 3]\n")
    assert main(["render", str(bad), "--out", str(tmp_path / "x.mp4")]) == 2
    err = capsys.readouterr().err
    assert "ball[0].at" in err and err.count("\n") == 1
    assert not (tmp_path / "x.mp4").exists() and not (tmp_path / "x.truth").exists()


def test_failed_render_leaves_nothing(tmp_path, capsys):
    # A shot of a ball that has been lifted off fails during simulation: no clip, no truth.
    scene = tmp_path / "lifted.toml"
    scene.write_text(
        "[[ball]]\nid = 'cue'\nkind = 'cue'\nat = [500, 500]\n"
        "[[ball]]\nid = '1'\nat = [900, 500]\n"
        "[[shot]]\nball = '1'\nsetup = { '1' = 'off' }\naim = { heading_deg = 0 }\nspeed_mm_s = 500\n"
    )
    assert main(["render", str(scene), "--out", str(tmp_path / "c.mp4")]) == 2
    assert "not on the table" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["lifted.toml"]


def test_version_and_help(capsys):
    with pytest.raises(SystemExit) as ex:
        main(["--version"])
    assert ex.value.code == 0
    assert capsys.readouterr().out.startswith("railtrace ")
    assert main([]) == 0
    assert "render" in capsys.readouterr().out
