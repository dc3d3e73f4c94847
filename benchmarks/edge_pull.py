"""How much the local edge pulls a resting ball's fit back: the share of a start error it keeps.

The detector's local rounds (``BallDetector._fit_seed``) each find the outline near the previous
fit's predicted silhouette (``BallDetector._edges_local``) and fit the sphere again. Near its
end point one round acts on the centre as ``e' = keep * e + b``: ``b`` (px) is where one round
puts the centre when it starts exactly at the truth, and ``keep`` the share of a start error it
keeps. Rounds run to their end point stop at ``b / (1 - keep)`` (the fixed point of the
iteration), so a ``keep`` near 1 multiplies a small bias of the edge into a large one of the
centre. On a sharp step the half-coverage edge lies where the image puts it whatever the
prediction (``keep`` near 0); where the rim's profile falls over more than the sample bands'
2 x 2.75 px (the limb's shading, blur, an encoder's smoothing) the rim and surround colours are
sampled on the fall itself and the crossing follows the prediction (``keep`` near 1).

For every resting ball of the chosen frames (clear of other balls by ``--gap`` mm), with the
truth camera: ``b`` (one round started at the true silhouette; centre by the algebraic circle
fit of Kasa 1976 to the outline points, in px of the image), ``keep`` (mean over eight
directions of the share of a 1 px start error one round keeps), ``b / (1 - keep)`` and the
detector's own error on that frame (a fresh detector per frame; px and mm). Prints each
clip's medians.

Run: ``.venv/bin/python benchmarks/edge_pull.py [NAME ...] [--extra-cache DIR] [--frames N]``
(the extra set's clips as ``analyse_accuracy.py --extra`` films them; ``N`` frames spread over
each clip, default 3).
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from vision.calibfile import read_calibration  # noqa: E402
from vision.detect import _RAY_DIRS, BallDetector, _ray_polygon  # noqa: E402
from vision.video import iter_frames  # noqa: E402

# A resting ball in the truth: under 1 mm/s (as benchmarks/rail_bias.py).
REST_MM_S = 1.0
# Size (px) of the start error whose share one round keeps: about the local edge's end-point
# errors on encoded clips (0.5-1 px), within its 3 px reach.
PROBE_PX = 1.0


def circle_centre(pts: np.ndarray) -> np.ndarray:
    """(2,) px centre of the circle fitted to the finite rows of ``pts`` (K, 2) px by the
    algebraic least squares of Kasa (1976): ``x^2 + y^2 = 2 a x + 2 b y + c``, linear in a, b, c."""
    p = pts[np.isfinite(pts).all(axis=1)]
    if len(p) < 3:
        return np.array([np.nan, np.nan])
    A = np.column_stack([2 * p, np.ones(len(p))])
    sol = np.linalg.lstsq(A, np.sum(p * p, axis=1), rcond=None)[0]
    return sol[:2]


def one_round(det: BallDetector, img: np.ndarray, centre_px: np.ndarray, outline_px: np.ndarray) -> np.ndarray:
    """(2,) px centre after one local round started at a prediction centred on ``centre_px``
    with silhouette polygon ``outline_px`` (M, 2) px."""
    rho = _ray_polygon(centre_px, _RAY_DIRS, outline_px)
    return circle_centre(det._edges_local(img, centre_px, rho, _RAY_DIRS))


def pull(det: BallDetector, img: np.ndarray, x_mm: float, y_mm: float, probe_px: float = PROBE_PX) -> tuple[float, float]:
    """``(b, keep)`` for the ball resting at table point (``x_mm``, ``y_mm``): ``b`` the length
    (px) of one round's centre error from the true silhouette, ``keep`` the mean share of a
    ``probe_px`` start error in eight directions that one round keeps."""
    R = det.R
    truth = det.rays.project(np.array([[x_mm, y_mm, R]]))[0]
    poly = det.rays.sphere_outline(x_mm, y_mm, R)
    c0 = one_round(det, img, truth, poly)
    kept = []
    for a in np.arange(8) * (np.pi / 4):
        d = np.array([math.cos(a), math.sin(a)])
        c = one_round(det, img, truth + probe_px * d, poly + probe_px * d)
        kept.append(float((c - c0) @ d) / probe_px)
    return float(np.hypot(*(c0 - truth))), float(np.mean(kept))


def clip_rows(name: str, cache: Path, n_frames: int, gap_mm: float) -> list[dict]:
    """One row per resting ball and chosen frame of clip ``name`` (see the module docstring)."""
    truth = cache / f"{name}.truth"
    table, cam, _ = read_calibration(truth / "calibration.json")
    if cam is None:
        raise ValueError(f"{truth / 'calibration.json'} has no camera; film the clip with analyse_accuracy.py --extra")
    R = table.radius_mm
    tt = pd.read_csv(truth / "tracks.csv")
    frames = np.unique(np.linspace(0, int(tt.frame.max()), n_frames).round().astype(int))
    rows = []
    for f in frames:
        img = next(fr for _, _, fr in iter_frames(cache / f"{name}.mp4", start=int(f), stop=int(f) + 1))
        det = BallDetector(cam, table)
        found = det.process(int(f), 0.0, img)
        here = tt[tt.frame == f]
        for _, b in here[np.hypot(here.vx, here.vy) < REST_MM_S].iterrows():
            others = here[here.track != b.track]
            if len(others) and np.min(np.hypot(others.x - b.x, others.y - b.y)) - 2 * R < gap_mm:
                continue
            b_px, keep = pull(det, img, float(b.x), float(b.y))
            ct = cam.project(np.array([[b.x, b.y, R]]))[0]
            err_mm = np.hypot(found.x - b.x, found.y - b.y).to_numpy() if len(found) else np.array([np.inf])
            i = int(np.argmin(err_mm))
            hit = err_mm[i] < R
            err_px = float(np.hypot(found.u.iloc[i] - ct[0], found.v.iloc[i] - ct[1])) if hit else np.nan
            rows.append(dict(clip=name, frame=int(f), ball=str(b.label), b_px=b_px, keep=keep,
                             predicted_px=b_px / max(1.0 - keep, 0.05), found_px=err_px, found_mm=float(err_mm[i]) if hit else np.nan))
    return rows


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("names", nargs="*", help="extra clips (default: every clip in the cache)")
    ap.add_argument("--extra-cache", type=Path, default=Path("/tmp/railtrace_extra_clips"))
    ap.add_argument("--frames", type=int, default=3, help="frames spread over each clip")
    ap.add_argument("--gap", type=float, default=5.0, help="least gap (mm) to another ball")
    ap.add_argument("--csv", type=Path, help="write every row here")
    a = ap.parse_args(argv)
    names = a.names or sorted(p.name[: -len(".truth")] for p in a.extra_cache.glob("*.truth"))
    if not names:
        raise SystemExit(f"no clips in {a.extra_cache}; film them with analyse_accuracy.py --extra")
    df = pd.DataFrame([r for n in names for r in clip_rows(n, a.extra_cache, a.frames, a.gap)])
    if a.csv:
        df.to_csv(a.csv, index=False)
    g = df.groupby("clip").agg(balls=("ball", "size"), b_px=("b_px", "median"), keep=("keep", "median"),
                               predicted_px=("predicted_px", "median"), found_px=("found_px", "median"),
                               found_mm=("found_mm", "median"), lost=("found_mm", lambda s: int(s.isna().sum())))
    print(g.round(2).to_string())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
