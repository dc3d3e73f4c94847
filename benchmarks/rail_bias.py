"""Detection error near the cushions, against the renderer's truth: is a ball pulled toward a rail?

For every detection of a rendered clip matched to a true ball of its frame (Hungarian assignment
within a ball radius, as ``benchmarks/detect_accuracy.py`` matches), the error (detected minus
true centre, mm, table frame) is split into its component along the normal of the nearest
cushion nose line (positive toward that rail) and along the rail, and into its component
along the line from the camera's nadir (the point of the cloth straight below the camera
centre) through the true centre (positive away from the nadir). Rows are grouped by clip, by
state (resting; moving, by the centre's travel during the exposure, speed times shutter) and
by the gap between the ball and the nose (the centre's distance from the nose line less R),
and by clip, state and distance from the nadir; each group gives its count and medians.

A bias toward the rails that is one toward the cushions themselves shows in the normal
component of the groups next to the noses only; one that comes from where the ball lies under
the camera shows in the nadir component, growing with the distance from the nadir wherever the
ball lies.

Inputs: ``RESULTS`` holds ``NAME/detections.csv`` (a folder of ``analyse_accuracy.py --out`` or
``--reuse``) or ``NAME.detections.csv`` (``detect_accuracy.py --save``); ``TRUTH`` holds
``NAME.truth/`` (tracks.csv at each frame's mid-exposure, calibration.json, scene.toml).

Run: ``.venv/bin/python benchmarks/rail_bias.py RESULTS TRUTH [NAME ...] [--csv OUT]``, e.g.
``benchmarks/rail_bias.py /work/base10/extra /tmp/railtrace_extra_clips`` or
``benchmarks/rail_bias.py OUT sample_clips bank_practice cut_bank``.
"""

from __future__ import annotations

import argparse
import sys
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from vision.atomic import atomic_path  # noqa: E402
from vision.calibfile import read_calibration  # noqa: E402
from vision.table import rail_direction, rail_inward_normal  # noqa: E402

GAP_EDGES_MM = [-np.inf, 2.0, 10.0, 30.0, 100.0, np.inf]
GAP_LABELS = ["<2", "2-10", "10-30", "30-100", ">100"]
NADIR_EDGES_MM = [0.0, 300.0, 600.0, 900.0, 1200.0, np.inf]
# Resting below 1 mm/s (the truth's rolling balls are faster than that until they stop).
# Bands of the centre's travel during the exposure, for reading: under 5 mm the smear is a
# pixel or two at the rendered cameras' 1.5-3 mm per pixel; over 20 mm it is most of a ball
# radius (28.6 mm) long.
REST_MM_S = 1.0
BLUR_BANDS_MM = (5.0, 20.0)


def _detections_file(results: Path, name: str) -> Path | None:
    """A clip's detections file in either layout of ``results``, or None."""
    for p in (results / name / "detections.csv", results / f"{name}.detections.csv"):
        if p.is_file():
            return p
    return None


def _detections(results: Path, name: str) -> pd.DataFrame:
    """A clip's detections (``vision.detect.COLUMNS``) from either layout of ``results``."""
    p = _detections_file(results, name)
    if p is not None:
        return pd.read_csv(p)
    raise ValueError(f"no detections of {name!r} in {results}; give a folder of analyse_accuracy.py --out or detect_accuracy.py --save")


def clip_errors(name: str, results: Path, truth_root: Path) -> pd.DataFrame:
    """One row per matched detection of clip ``name``: frame, true centre ``x``, ``y`` (mm),
    ``rail`` (nearest nose line), ``gap`` (mm, centre to that nose less R), ``normal`` (error
    toward that rail, mm), ``along`` (error along it, toward increasing rail coordinate),
    ``nadir`` (mm, true centre from the camera's nadir), ``radial`` (error away from the
    nadir, mm), ``speed`` (mm/s) and ``blur`` (mm, speed times the scene's shutter)."""
    tdir = truth_root / f"{name}.truth"
    table, camera, _ = read_calibration(tdir / "calibration.json")
    if camera is None:
        raise ValueError(f"{tdir / 'calibration.json'} holds no camera; the truth folder of a rendered clip does")
    shutter = float(tomllib.loads((tdir / "scene.toml").read_text())["camera"].get("shutter_s", 0.0))
    det = _detections(results, name)
    truth = pd.read_csv(tdir / "tracks.csv")
    L, W, R = table.length_mm, table.width_mm, table.radius_mm
    nadir = camera.centre_mm[:2]
    by_frame = {f: g for f, g in det.groupby("frame")}
    rows = []
    for f, g in truth.groupby("frame"):
        d = by_frame.get(f)
        if d is None or not len(d):
            continue
        P, Q = g[["x", "y"]].to_numpy(), d[["x", "y"]].to_numpy()
        D = np.linalg.norm(P[:, None] - Q[None], axis=2)
        for a, b in zip(*linear_sum_assignment(D)):
            if D[a, b] >= R:
                continue
            x, y = P[a]
            to_nose = {"bottom": y, "top": W - y, "left": x, "right": L - x}
            rail = min(to_nose, key=to_nose.get)
            e = Q[b] - P[a]
            r = P[a] - nadir
            rho = float(np.hypot(*r))
            speed = float(np.hypot(g["vx"].iloc[a], g["vy"].iloc[a]))
            rows.append((name, f, x, y, rail, to_nose[rail] - R, -float(e @ rail_inward_normal(rail)), float(e @ rail_direction(rail)),
                         rho, float(e @ r) / rho if rho > 0 else np.nan, speed, speed * shutter))
    return pd.DataFrame(rows, columns=["clip", "frame", "x", "y", "rail", "gap", "normal", "along", "nadir", "radial", "speed", "blur"])


def summarise(E: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(by clip, state and gap to the nose; by clip, state and distance from the nadir):
    counts and medians (mm) of the error components of :func:`clip_errors`'s rows."""
    lo, hi = BLUR_BANDS_MM
    state = np.select([E["speed"] < REST_MM_S, E["blur"] < lo, E["blur"] < hi], ["rest", f"blur<{lo:g}", f"blur{lo:g}-{hi:g}"], f"blur>{hi:g}")
    E = E.assign(state=state, gapbin=pd.cut(E["gap"], GAP_EDGES_MM, labels=GAP_LABELS), nadirbin=pd.cut(E["nadir"], NADIR_EDGES_MM))
    by_gap = E.groupby(["clip", "state", "gapbin"], observed=True).agg(
        n=("normal", "size"), normal_med=("normal", "median"), along_med=("along", "median"), radial_med=("radial", "median"))
    by_nadir = E.groupby(["clip", "state", "nadirbin"], observed=True).agg(
        n=("radial", "size"), radial_med=("radial", "median"), normal_med=("normal", "median"))
    return by_gap, by_nadir


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("results", type=Path, help="folder of NAME/detections.csv or NAME.detections.csv")
    ap.add_argument("truth", type=Path, help="folder of NAME.truth/ (rendered clips' truth)")
    ap.add_argument("names", nargs="*", help="clip names (default: every NAME.truth in TRUTH with detections in RESULTS)")
    ap.add_argument("--csv", type=Path, default=None, help="also write the per-detection rows here")
    args = ap.parse_args(argv)
    names = args.names or sorted(n for n in (p.name[: -len(".truth")] for p in args.truth.glob("*.truth"))
                                 if _detections_file(args.results, n) is not None)
    if not names:
        print(f"no clip has both a truth folder in {args.truth} and detections in {args.results}", file=sys.stderr)
        return 2
    try:
        E = pd.concat([clip_errors(n, args.results, args.truth) for n in names], ignore_index=True)
    except (ValueError, OSError) as exc:
        print(f"rail_bias: {exc}", file=sys.stderr)
        return 2
    if args.csv is not None:
        with atomic_path(args.csv) as tmp:
            E.to_csv(tmp, index=False)
    by_gap, by_nadir = summarise(E)
    with pd.option_context("display.width", 200, "display.max_rows", 1000):
        print("error by gap to the nearest cushion nose (mm; normal: toward that rail; radial: away from the camera's nadir)")
        print(by_gap.round(2).to_string())
        print("\nerror by distance from the camera's nadir (mm)")
        print(by_nadir.round(2).to_string())
    return 0


if __name__ == "__main__":
    sys.exit(main())
