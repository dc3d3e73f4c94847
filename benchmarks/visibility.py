"""Which truth ball-frames of a filmed scene are fully visible: not under the cue or arms.

Issue 3 asks that at least 99.5 % of the frames where a ball is *fully visible* have it
detected, while the scorer's track recall (``benchmarks/score.py``) counts every ball on the
table, hidden or not. This module draws the occluder exactly as the renderer does
(:meth:`vision.render.Renderer.occluder_outlines`: the cue's and arms' bodies at each of the
frame's exposure sub-samples) and measures, for each truth row, the share of the ball's image
that the occluder covers: the ball's silhouette (:func:`vision.detect.sphere_outline_px`, the
exact outline of a sphere seen through the lens) swept over the same sub-samples, grown by
``grow_px`` for the anti-aliased edges. A ball-frame is fully visible where the share is 0.

``recall_where_visible`` then gives the detection and track recall over those ball-frames and
the false detections (farther than a ball radius from every truth ball of their frame), with
how many lie on the occluder or within 80 mm of a pocket's mouth (as
``benchmarks/detect_accuracy.py`` counts them).
"""

from __future__ import annotations

import math
from pathlib import Path

import cv2
import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

from railtrace.filming import _exposure_times, camera_timeline, simulate_scene
from railtrace.scene import Scene, load_scene
from vision.detect import sphere_outline_px
from vision.render import CueStroke, Occluder, Renderer

# Distance (mm) from a pocket's mouth centre within which a false detection counts as in the
# pocket (benchmarks/detect_accuracy.py's figure).
POCKET_MM = 80.0


def _masks(renderer: Renderer, times: np.ndarray, shape: tuple[int, int], grow_px: float) -> np.ndarray | None:
    """(H, W) bool union of the occluder's bodies over ``times`` (s), grown by ``grow_px``;
    None when no stroke is under way at any of them."""
    polys = [p for t in times for p in renderer.occluder_outlines(float(t))]
    if not polys:
        return None
    m = np.zeros(shape, np.uint8)
    for p in polys:
        cv2.fillConvexPoly(m, np.round(p * 16).astype(np.int32), 1, cv2.LINE_8, 4)
    k = 2 * int(math.ceil(grow_px)) + 1
    return cv2.dilate(m, np.ones((k, k), np.uint8)) > 0


def occluder_cover(scene: Scene, tracks: pd.DataFrame, grow_px: float = 1.0,
                   masks: dict[int, np.ndarray] | None = None) -> np.ndarray:
    """(len(tracks),) float: share (0..1) of each truth row's ball image that the occluder's
    body covers in its frame, both swept over the frame's exposure (filming's sub-samples).

    ``tracks``: the scene's truth ``tracks.csv`` (frame, track = the ball's index in the
    simulation, x, y mm). ``masks``: if given, filled with frame -> (H, W) bool occluder mask
    (grown by ``grow_px``) for the frames where a stroke is under way.
    """
    cover = np.zeros(len(tracks), float)
    if not scene.occluder:
        return cover
    sim = simulate_scene(scene)
    traj = sim.trajectory
    occluder = Occluder(tuple(CueStroke(r.t_strike, r.ball_xy_mm, r.heading_rad) for r in sim.shots))
    fps = scene.film.fps
    R = scene.table.radius_mm
    w, h = scene.camera.image_size
    cams = camera_timeline(scene)
    frames = np.unique(tracks["frame"].to_numpy(dtype=int))
    subs = _exposure_times(traj, frames / fps, scene.film.shutter_s, scene.table)
    renderers: dict[int, Renderer] = {}
    fr = tracks["frame"].to_numpy(dtype=int)
    ball = tracks["track"].to_numpy(dtype=int)
    for f, times in zip(frames, subs):
        # A stroke's window is whole seconds long: frames with none under way cost nothing.
        if not any(occluder.active(float(t)) for t in times):
            continue
        k = max(i for i, (t0, _) in enumerate(cams) if t0 <= f / fps)
        if k not in renderers:
            renderers.clear()
            renderers[k] = Renderer(scene.table, cams[k][1], scene.look, [], occluder, seed=0)
        cam = cams[k][1]
        occ = _masks(renderers[k], times, (h, w), grow_px)
        if occ is None:
            continue
        if masks is not None:
            masks[int(f)] = occ
        rows = np.nonzero(fr == f)[0]
        pos = traj.sample(times).pos  # (S, balls, 2) mm
        for r in rows:
            P = np.column_stack([pos[:, ball[r], 0], pos[:, ball[r], 1], np.full(len(times), R)])
            sil = np.zeros((h, w), np.uint8)
            for o in sphere_outline_px(cam, P, R):
                if np.all(np.isfinite(o)):
                    cv2.fillPoly(sil, [np.round(o * 16).astype(np.int32)], 1, cv2.LINE_8, 4)
            n = int(sil.sum())
            cover[r] = float(np.count_nonzero(sil.astype(bool) & occ)) / n if n else 0.0
    return cover


def match_frame(truth_xy: np.ndarray, det_xy: np.ndarray, gate_mm: float) -> list[tuple[int, int]]:
    """One frame's one-to-one matching of detections to truth balls: the Hungarian assignment
    (Kuhn 1955, scipy's ``linear_sum_assignment``) on centre distance (mm), pairs farther apart
    than ``gate_mm`` dropped. ``truth_xy`` (N, 2) and ``det_xy`` (M, 2) in table mm; returns
    (truth row, detection row) pairs. The one matching rule of detect_accuracy and this module."""
    if not len(truth_xy) or not len(det_xy):
        return []
    D = np.linalg.norm(np.asarray(truth_xy, float)[:, None] - np.asarray(det_xy, float)[None], axis=2)
    return [(int(a), int(b)) for a, b in zip(*linear_sum_assignment(D)) if D[a, b] < gate_mm]


def _frame_matches(truth: pd.DataFrame, det: pd.DataFrame, gate_mm: float) -> tuple[np.ndarray, list[int]]:
    """Per frame, :func:`match_frame` of detections to truth balls within ``gate_mm``:
    (len(truth),) bool matched, and the row positions in ``det`` of the detections left
    unmatched."""
    matched = np.zeros(len(truth), bool)
    unmatched: list[int] = []
    tpos = truth[["x", "y"]].to_numpy(dtype=float)
    dpos = det[["x", "y"]].to_numpy(dtype=float)
    t_by = truth.groupby("frame").indices
    for f, di in det.groupby("frame").indices.items():
        ti = t_by.get(f, np.zeros(0, int))
        pairs = match_frame(tpos[ti], dpos[di], gate_mm)
        matched[ti[[a for a, _ in pairs]]] = True
        used = {b for _, b in pairs}
        unmatched += [int(di[b]) for b in range(len(di)) if b not in used]
    return matched, unmatched


def recall_where_visible(truth_dir: Path, detections_csv: Path, track_matched_rows: np.ndarray) -> dict:
    """Figures over the truth ball-frames the occluder leaves fully visible, from a truth
    folder (with its ``scene.toml``) and the detections (``detections.csv`` of a results
    folder):

    ``visible ball-frames`` (of all), ``detection recall visible`` (a detection within a ball
    radius, one to one per frame), ``track recall visible`` (truth rows the scorer matched:
    ``track_matched_rows``, positions in the truth ``tracks.csv``), ``partly hidden
    ball-frames`` and their track recall, and ``false detections (occluder, pocket)``."""
    truth_dir = Path(truth_dir)
    scene = load_scene(truth_dir / "scene.toml")
    tr = pd.read_csv(truth_dir / "tracks.csv")
    det = pd.read_csv(detections_csv, dtype={"colour": str, "pattern": str})
    masks: dict[int, np.ndarray] = {}
    cover = occluder_cover(scene, tr, masks=masks)
    visible = cover == 0
    R = scene.table.radius_mm
    det_hit, false_rows = _frame_matches(tr, det, R)
    tracked = np.zeros(len(tr), bool)
    tracked[np.asarray(track_matched_rows, dtype=int)] = True
    on_occ = in_pocket = 0
    mouths = np.array([p.mouth_centre for p in scene.table.pockets()])
    for i in false_rows:
        f, u, v = int(det["frame"].iloc[i]), int(round(det["u"].iloc[i])), int(round(det["v"].iloc[i]))
        m = masks.get(f)
        on_occ += bool(m is not None and 0 <= v < m.shape[0] and 0 <= u < m.shape[1] and m[v, u])
        xy = det[["x", "y"]].to_numpy(dtype=float)[i]
        in_pocket += bool(np.min(np.linalg.norm(mouths - xy, axis=1)) < POCKET_MM)
    n_vis = int(visible.sum())
    return {
        "visible ball-frames": f"{n_vis}/{len(tr)}",
        "detection recall visible": float(det_hit[visible].mean()) if n_vis else None,
        "track recall visible": float(tracked[visible].mean()) if n_vis else None,
        "partly hidden track recall": float(tracked[~visible].mean()) if (~visible).any() else None,
        "false detections (occluder, pocket)": f"{len(false_rows)} ({on_occ}, {in_pocket})",
    }
