"""The annotated videos: paths drawn where the balls are, a top-down view to scale, both written.

Ground truth is a sample clip and its truth folder (our renderer and simulator: ball centres and
the true camera known). OpenCV's ``projectPoints`` is the reference projection.
"""

from __future__ import annotations

import itertools
import json
import shutil
from pathlib import Path

import cv2
import numpy as np
import pandas as pd
import pytest

from railtrace.overlay import (
    OverlayConfig, _plan, annotated_frames, cameras_of, load_folder, table_to_topdown, topdown_maps, topdown_size,
)
from railtrace.overlay import main as overlay_main
from vision.video import iter_frames, probe, write_video

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_clips"


@pytest.fixture(scope="module")
def cut_bank():
    folder = SAMPLES / "cut_bank.truth"
    table, cameras, tracks, events, shots, _run = load_folder(folder)
    first = next(iter_frames(SAMPLES / "cut_bank.mp4"))
    return folder, table, cameras, tracks, events, shots, first


def test_topdown_map_round_trip(cut_bank):
    _f, table, cameras, *_ = cut_bank
    cfg = OverlayConfig()
    cam = cameras[0][1]
    mx, my = topdown_maps(cam, table, cfg)
    w, h = topdown_size(table, cfg)
    assert mx.shape == (h, w) and w % 2 == 0 and h % 2 == 0
    rng = np.random.default_rng(1)
    u, v = rng.integers(0, w, 200), rng.integers(0, h, 200)
    uv = np.column_stack([mx[v, u], my[v, u]]).astype(float)
    # Back through the camera's own inverse (Newton undistortion, ray-plane intersection).
    back = cam.backproject(uv, table.radius_mm)[:, :2]
    want = np.column_stack([u / cfg.scale_px_per_mm - cfg.margin_mm, table.width_mm + cfg.margin_mm - v / cfg.scale_px_per_mm])
    assert np.max(np.abs(back - want)) < 0.05  # mm; float32 maps hold ~1e-4 px at 1280 px
    assert np.allclose(table_to_topdown(table, cfg, want), np.column_stack([u, v]), atol=1e-9)


def test_rings_centred_on_true_balls_in_the_clip(cut_bank):
    folder, table, cameras, tracks, events, shots, (_i, _t, raw) = cut_bank
    plan = _plan(tracks, events, shots)
    cfg = OverlayConfig()
    drawn = next(annotated_frames(SAMPLES / "cut_bank.mp4", plan, table, cameras, cfg))
    changed = np.abs(drawn.astype(int) - raw.astype(int)).sum(axis=2) > 40
    changed[:60, :300] = False  # the time label
    cam = cameras[0][1]
    at0 = tracks[tracks["frame"] == 0]
    ref, _ = cv2.projectPoints(np.column_stack([at0[["x", "y"]].to_numpy(), np.full(len(at0), table.radius_mm)]),
                               cam.rvec, cam.tvec, cam.K, cam.dist)
    ref = ref.reshape(-1, 2)
    errors = []
    for c in ref:
        ys, xs = np.nonzero(changed[int(c[1]) - 40:int(c[1]) + 41, int(c[0]) - 40:int(c[0]) + 41])
        assert len(xs) > 50  # a ring was drawn here
        errors.append(np.hypot(xs.mean() - 40 + int(c[0]) - c[0], ys.mean() - 40 + int(c[1]) - c[1]))
    # Ring centroid on OpenCV's projection of the true centre; 0.6 px allows the rounding of
    # each ring to 1/16 px and the antialiased edge.
    assert max(errors) < 0.6, errors


def test_topdown_pixels_show_what_opencv_projects_there(cut_bank):
    """Each top-down pixel holds the clip's colour at OpenCV's projection of its table point at
    ball-centre height: checked at every true ball centre of frame 0 and 300 random points."""
    folder, table, cameras, tracks, events, shots, (_i, _t, raw) = cut_bank
    cfg = OverlayConfig(scale_px_per_mm=1.0)
    cam = cameras[0][1]
    mx, my = topdown_maps(cam, table, cfg)
    flat = cv2.remap(raw, mx, my, cv2.INTER_LINEAR)
    rng = np.random.default_rng(2)
    w, h = topdown_size(table, cfg)
    u = np.concatenate([table_to_topdown(table, cfg, tracks[tracks["frame"] == 0][["x", "y"]].to_numpy())[:, 0].round(),
                        rng.integers(0, w, 300)]).astype(int)
    v = np.concatenate([table_to_topdown(table, cfg, tracks[tracks["frame"] == 0][["x", "y"]].to_numpy())[:, 1].round(),
                        rng.integers(0, h, 300)]).astype(int)
    xy = np.column_stack([u / cfg.scale_px_per_mm - cfg.margin_mm, table.width_mm + cfg.margin_mm - v / cfg.scale_px_per_mm])
    ref, _ = cv2.projectPoints(np.column_stack([xy, np.full(len(xy), table.radius_mm)]), cam.rvec, cam.tvec, cam.K, cam.dist)
    ref = ref.reshape(-1, 2).astype(np.float32)
    inside = (ref[:, 0] >= 1) & (ref[:, 0] < raw.shape[1] - 2) & (ref[:, 1] >= 1) & (ref[:, 1] < raw.shape[0] - 2)
    want = cv2.remap(raw, ref[inside, 0].reshape(-1, 1), ref[inside, 1].reshape(-1, 1), cv2.INTER_LINEAR).reshape(-1, 3)
    got = flat[v[inside], u[inside]]
    assert inside.sum() > 200
    # Grey levels: both sample the same frame bilinearly at points that agree to ~1e-3 px.
    assert np.max(np.abs(got.astype(int) - want.astype(int))) <= 2


def test_overlay_command_writes_both_videos(tmp_path, capsys):
    d = tmp_path / "cut_bank"
    shutil.copytree(SAMPLES / "cut_bank.truth", d)
    short = tmp_path / "short.mp4"
    n = 40
    write_video(short, (img for _i, _t, img in itertools.islice(iter_frames(SAMPLES / "cut_bank.mp4"), n)),
                probe(SAMPLES / "cut_bank.mp4").fps, preset="ultrafast")
    (d / "run.json").write_text(json.dumps({"clip": str(short)}))
    assert overlay_main([str(d)]) == 0
    a, b = d / "overlay.mp4", d / "overlay_topdown.mp4"
    ia, ib = probe(a), probe(b)
    assert (ia.width, ia.height) == (1280, 720)
    assert (ib.width, ib.height) == topdown_size(load_folder(d)[0], OverlayConfig())
    assert sum(1 for _ in iter_frames(a)) == n and sum(1 for _ in iter_frames(b)) == n
    (d / "run.json").write_text(json.dumps({"clip": str(tmp_path / "gone.mp4")}))
    assert overlay_main([str(d), "--out", str(tmp_path / "x.mp4")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--clip" in err[0]
    assert not (tmp_path / "x.mp4").exists()
