"""``railtrace overlay DIR``: the original clip with each ball's path, contact markers and speeds
drawn on it, and a rectified top-down version of the same clip.

Frames (written down once in ``vision/camera.py`` and ``vision/table.py``):

* table frame: mm, x along a long cushion, y along a short one, z up from the cloth;
* image pixels: (u, v), origin at the centre of pixel (0, 0), u right, v down (OpenCV's);
* **top-down pixels** (this module's own): ``u = (x + margin) * s``, ``v = (W + margin - y) * s``
  for scale ``s`` px/mm and margin ``margin`` mm around the playing area, so x runs to the right
  and y up, as the table frame is drawn everywhere in railtrace.

Ball positions are ball centres (results format), so they are projected into the clip with the
calibration's camera at ball-centre height, ``z = R`` (``Camera.project``, OpenCV's lens model).
The top-down view resamples each clip frame on the plane ``z = R`` (``cv2.remap`` through the
same projection), so a ball's image lands on its measured centre there; the cloth and cushions,
lower than that plane, shift outward by at most ``R / camera height`` of their distance from the
point under the lens (about 1 %: 14 mm at a table's end under a 2.6 m camera).

The clip is streamed twice (once per output); frames are drawn and encoded one at a time.
"""

from __future__ import annotations

import argparse
import json
import logging
import math
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import cv2
import numpy as np
import pandas as pd

from vision.calibfile import table_from_dict
from vision.camera import Camera
from vision.table import TableSpec
from vision.video import iter_frames, probe, write_video

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class OverlayConfig:
    """How the annotated videos are drawn and encoded.

    ``scale_px_per_mm`` and ``margin_mm``: the top-down view's scale and the border of rail shown
    around the playing area. ``speed_min_mm_s``: speeds are written beside balls moving at least
    this fast. ``hold_s``: paths stay on screen this long after a shot ends. ``shot``: only this
    shot's frames (from its start to ``hold_s`` after its end), or None for the whole clip.
    ``quality`` and ``preset``: libx264 constant rate factor and speed preset.
    """

    scale_px_per_mm: float = 0.4
    margin_mm: float = 120.0
    speed_min_mm_s: float = 40.0
    hold_s: float = 1.0
    shot: int | None = None
    quality: int = 23
    preset: str = "veryfast"

    def __post_init__(self) -> None:
        if not 0.05 <= self.scale_px_per_mm <= 4.0:
            raise ValueError(f"top-down scale {self.scale_px_per_mm} px/mm is outside 0.05..4")
        if not 0 <= self.margin_mm <= 1000:
            raise ValueError(f"margin {self.margin_mm} mm is outside 0..1000")


# BGR colours (OpenCV's order): the same ball colours as the report's figures.
def _bgr(hex_colour: str) -> tuple[int, int, int]:
    h = hex_colour.lstrip("#")
    r, g, b = (int(h[i:i + 2], 16) for i in (0, 2, 4))
    return (b, g, r)


def ball_colours_bgr(tracks: pd.DataFrame) -> dict[int, tuple[int, int, int]]:
    """track -> BGR colour, as in the report (``analysis.report.ball_names``)."""
    from analysis.report import ball_names

    return {k: _bgr(c) for k, (_n, c) in ball_names(tracks).items()}


def cameras_of(calibration: dict) -> list[tuple[float, Camera]]:
    """[(from t s, Camera)] of a calibration.json dict (its ``camera_changes`` where the mount
    moved, else its one camera). ValueError when it holds no camera model."""
    if calibration.get("camera_changes"):
        return [(float(c["t"]), Camera.from_dict(c["camera"])) for c in calibration["camera_changes"]]
    if "camera" not in calibration:
        raise ValueError("calibration.json holds no camera model, so paths cannot be drawn on the clip; "
                         "analyse the clip again with automatic calibration or a file from 'railtrace calibrate'")
    return [(0.0, Camera.from_dict(calibration["camera"]))]


def camera_index(cameras: list[tuple[float, Camera]], t: np.ndarray) -> np.ndarray:
    """Index into ``cameras`` of the camera in force at each time ``t`` (s)."""
    starts = np.array([c[0] for c in cameras])
    return np.clip(np.searchsorted(starts, np.asarray(t, float), side="right") - 1, 0, len(cameras) - 1)


def project_centres(cameras: list[tuple[float, Camera]], t: np.ndarray, xy_mm: np.ndarray, z_mm: float) -> np.ndarray:
    """(N, 2) pixels (u, v) of (N, 2) table points at height ``z_mm``, each through the camera in
    force at its time ``t`` (N,)."""
    xy = np.asarray(xy_mm, float).reshape(-1, 2)
    out = np.full((len(xy), 2), np.nan)
    idx = camera_index(cameras, t)
    for k in np.unique(idx):
        m = idx == k
        pts = np.column_stack([xy[m], np.full(m.sum(), z_mm)])
        out[m] = cameras[k][1].project(pts)
    return out


def topdown_size(table: TableSpec, config: OverlayConfig) -> tuple[int, int]:
    """(width, height) px of the top-down view, rounded up to even numbers (yuv420p)."""
    s, m = config.scale_px_per_mm, config.margin_mm
    w = int(math.ceil((table.length_mm + 2 * m) * s))
    h = int(math.ceil((table.width_mm + 2 * m) * s))
    return w + w % 2, h + h % 2


def table_to_topdown(table: TableSpec, config: OverlayConfig, xy_mm: np.ndarray) -> np.ndarray:
    """(N, 2) table (x, y) mm -> (N, 2) top-down pixels (u, v) (module docstring)."""
    xy = np.asarray(xy_mm, float).reshape(-1, 2)
    s, m = config.scale_px_per_mm, config.margin_mm
    return np.column_stack([(xy[:, 0] + m) * s, (table.width_mm + m - xy[:, 1]) * s])


def topdown_maps(camera: Camera, table: TableSpec, config: OverlayConfig) -> tuple[np.ndarray, np.ndarray]:
    """``cv2.remap`` maps (float32, (H, W)) giving, for each top-down pixel, the clip pixel that
    sees the table point under it at ball-centre height."""
    w, h = topdown_size(table, config)
    s, m = config.scale_px_per_mm, config.margin_mm
    u, v = np.meshgrid(np.arange(w, dtype=float), np.arange(h, dtype=float))
    x = u / s - m  # inverse of table_to_topdown
    y = table.width_mm + m - v / s
    pts = np.column_stack([x.ravel(), y.ravel(), np.full(x.size, table.radius_mm)])
    uv = camera.project(pts)
    return uv[:, 0].reshape(h, w).astype(np.float32), uv[:, 1].reshape(h, w).astype(np.float32)


@dataclass(frozen=True)
class _Plan:
    """What to draw, prepared once: per track the rows (frame, t, x, y, speed) sorted by frame;
    the shots; the events with table positions."""

    tracks: dict[int, pd.DataFrame]
    shots: pd.DataFrame
    events: pd.DataFrame
    colours: dict[int, tuple[int, int, int]]


def _plan(tracks: pd.DataFrame, events: pd.DataFrame, shots: pd.DataFrame) -> _Plan:
    tr = tracks.copy()
    if "frame" not in tr.columns:
        raise ValueError("tracks.csv lacks the 'frame' column needed to match paths to the clip's frames")
    tr["speed"] = np.hypot(tr["vx"], tr["vy"]) if {"vx", "vy"} <= set(tr.columns) else np.nan
    per = {int(k): g.sort_values("frame").reset_index(drop=True) for k, g in tr.groupby("track")}
    return _Plan(per, shots.sort_values("t_start").reset_index(drop=True), events.sort_values("t").reset_index(drop=True),
                 ball_colours_bgr(tracks))


def _shot_at(plan: _Plan, t: float, hold_s: float) -> pd.Series | None:
    """The shot being played (or ended at most ``hold_s`` ago) at time ``t``."""
    s = plan.shots
    m = (s["t_start"] <= t + 1e-9) & (t <= s["t_end"] + hold_s)
    return s[m].iloc[-1] if m.any() else None


def _draw(img: np.ndarray, plan: _Plan, frame: int, t: float, to_px, radius_px: float, config: OverlayConfig,
          font_scale: float) -> np.ndarray:
    """Draw paths, rings, speeds and contact markers for clip frame ``frame`` at time ``t`` onto
    ``img`` (BGR, modified and returned). ``to_px(t_array, xy_mm) -> (N, 2)`` maps table points
    into ``img``."""
    shot = _shot_at(plan, t, config.hold_s)
    thick = max(1, int(round(radius_px / 6)))
    lt = cv2.LINE_AA
    for k, g in plan.tracks.items():
        colour = plan.colours.get(k, (200, 200, 200))
        upto = g[g["frame"] <= frame]
        if len(upto) == 0 or int(upto["frame"].iloc[-1]) < frame - 2:
            continue  # not on the table now (pocketed, caught, not yet seen)
        if shot is not None:
            trail = upto[upto["t"] >= shot["t_start"] - 1e-9]
            if len(trail) >= 2:
                px = to_px(trail["t"].to_numpy(), trail[["x", "y"]].to_numpy())
                px = px[np.all(np.isfinite(px), axis=1)]
                pts = np.round(px * 16).astype(np.int32).reshape(-1, 1, 2)  # 4 fractional bits
                cv2.polylines(img, [pts], False, (20, 20, 20), thick + 2, lt, shift=4)
                cv2.polylines(img, [pts], False, colour, thick, lt, shift=4)
        last = upto.iloc[-1]
        c = to_px(np.array([last["t"]]), np.array([[last["x"], last["y"]]]))[0]
        if not np.all(np.isfinite(c)):
            continue
        centre = (int(round(c[0] * 16)), int(round(c[1] * 16)))
        r = int(round(radius_px * 1.45 * 16))
        cv2.circle(img, centre, r, (20, 20, 20), thick + 2, lt, shift=4)
        cv2.circle(img, centre, r, colour, thick, lt, shift=4)
        if math.isfinite(last["speed"]) and last["speed"] >= config.speed_min_mm_s:
            text = f"{last['speed'] / 1000:.2f} m/s"
            org = (int(c[0] + radius_px * 1.8), int(c[1] - radius_px * 1.2))
            cv2.putText(img, text, org, cv2.FONT_HERSHEY_SIMPLEX, font_scale, (20, 20, 20), 3, lt)
            cv2.putText(img, text, org, cv2.FONT_HERSHEY_SIMPLEX, font_scale, (255, 255, 255), 1, lt)
    if shot is not None:
        ev = plan.events
        ev = ev[(ev["shot"] == shot["shot"]) & (ev["t"] <= t + 1e-9)]
        markers = {"cushion": cv2.MARKER_DIAMOND, "collision": cv2.MARKER_STAR, "pocket": cv2.MARKER_TILTED_CROSS}
        ev = ev[ev["kind"].isin(list(markers))]
        if len(ev):
            px = to_px(ev["t"].to_numpy(), ev[["x", "y"]].to_numpy(float))
            size = max(8, int(round(radius_px * 1.6)))
            for (kind, p) in zip(ev["kind"], px):
                if np.all(np.isfinite(p)):
                    q = (int(round(p[0])), int(round(p[1])))
                    cv2.drawMarker(img, q, (20, 20, 20), markers[kind], size, thick + 2, lt)
                    cv2.drawMarker(img, q, (255, 255, 255), markers[kind], size, thick, lt)
        label = f"shot {int(shot['shot'])}   {t:6.2f} s"
    else:
        label = f"{t:6.2f} s"
    (tw, th), _ = cv2.getTextSize(label, cv2.FONT_HERSHEY_SIMPLEX, font_scale * 1.2, 1)
    cv2.rectangle(img, (6, 6), (18 + tw, 18 + th + 6), (34, 30, 26), -1)
    cv2.putText(img, label, (12, 14 + th), cv2.FONT_HERSHEY_SIMPLEX, font_scale * 1.2, (240, 244, 246), 1, lt)
    return img


def _window(plan: _Plan, config: OverlayConfig) -> tuple[float, float]:
    """Times (s) of the clip to write: the whole clip, or one shot and its hold."""
    if config.shot is None:
        return -math.inf, math.inf
    s = plan.shots[plan.shots["shot"] == config.shot]
    if len(s) == 0:
        raise ValueError(f"shot {config.shot} is not in this folder (shots {', '.join(str(int(x)) for x in plan.shots['shot'])})")
    return float(s["t_start"].iloc[0]) - 0.2, float(s["t_end"].iloc[0]) + config.hold_s


def annotated_frames(clip: Path, plan: _Plan, table: TableSpec, cameras, config: OverlayConfig) -> Iterator[np.ndarray]:
    """The clip's frames with paths, rings, speeds and contact markers drawn on (BGR)."""
    lo, hi = _window(plan, config)
    R = table.radius_mm
    # Ball radius in pixels near the table's centre: a ring drawn at 1.45 R clears the ball.
    cam = cameras[0][1]
    mid = np.array([[table.length_mm / 2, table.width_mm / 2, R], [table.length_mm / 2 + R, table.width_mm / 2, R]])
    uv = cam.project(mid)
    radius_px = float(np.hypot(*(uv[1] - uv[0])))
    font = max(0.4, cam.image_size[1] / 1500)

    def to_px(t, xy):
        return project_centres(cameras, t, xy, R)

    for index, t, img in iter_frames(clip):
        if t > hi:
            break  # past the chosen shot: no need to decode the rest
        if lo <= t:
            yield _draw(img, plan, index, t, to_px, radius_px, config, font)


def topdown_frames(clip: Path, plan: _Plan, table: TableSpec, cameras, config: OverlayConfig) -> Iterator[np.ndarray]:
    """Each frame resampled onto the table plane at ball-centre height (top-down pixels of the
    module docstring), with the same drawing."""
    lo, hi = _window(plan, config)
    maps = [topdown_maps(c, table, config) for _t, c in cameras]
    radius_px = table.radius_mm * config.scale_px_per_mm

    def to_px(t, xy):
        return table_to_topdown(table, config, xy)

    for index, t, img in iter_frames(clip):
        if t > hi:
            break
        if lo <= t:
            mx, my = maps[int(camera_index(cameras, np.array([t]))[0])]
            flat = cv2.remap(img, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=(40, 40, 40))
            yield _draw(flat, plan, index, t, to_px, radius_px, config, 0.45)


def load_folder(folder: str | Path) -> tuple[TableSpec, list[tuple[float, Camera]], pd.DataFrame, pd.DataFrame, pd.DataFrame, dict]:
    """(table, cameras, tracks, events, shots, run.json) of a results folder; ValueError (one line)
    for a missing or unreadable file."""
    d = Path(folder)
    if not d.is_dir():
        raise ValueError(f"{d} is not a folder; give a folder written by 'railtrace analyse --out DIR'")
    for name in ("tracks.csv", "events.csv", "shots.csv", "calibration.json"):
        if not (d / name).is_file():
            raise ValueError(f"{d} has no {name}; give a folder written by 'railtrace analyse --out DIR'")
    try:
        calibration = json.loads((d / "calibration.json").read_text(encoding="utf-8"))
        tracks = pd.read_csv(d / "tracks.csv")
        events = pd.read_csv(d / "events.csv")
        shots = pd.read_csv(d / "shots.csv")
        run = json.loads((d / "run.json").read_text(encoding="utf-8")) if (d / "run.json").is_file() else {}
    except (OSError, ValueError, UnicodeDecodeError) as exc:
        raise ValueError(f"{d} holds an unreadable results file ({type(exc).__name__}: {exc})") from None
    if "table" not in calibration:
        raise ValueError(f"{d / 'calibration.json'} lacks its 'table' entry")
    return table_from_dict(calibration["table"]), cameras_of(calibration), tracks, events, shots, run


def find_clip(folder: Path, run: dict, clip: Path | None) -> Path:
    """The clip to draw on: ``clip`` if given, else run.json's ``clip``, else for a ``NAME.truth``
    folder the ``NAME.mp4`` beside it. ValueError saying to pass --clip otherwise."""
    if clip is not None:
        if not Path(clip).is_file():
            raise ValueError(f"clip {clip} does not exist")
        return Path(clip)
    recorded = run.get("clip")
    if recorded and Path(recorded).is_file():
        return Path(recorded)
    if folder.name.endswith(".truth"):
        sibling = folder.with_name(folder.name[: -len(".truth")] + ".mp4")
        if sibling.is_file():
            return sibling
    where = f"recorded clip {recorded} is not there" if recorded else "run.json names no clip"
    raise ValueError(f"{where}; give the clip with --clip FILE")


def write_overlay(folder: str | Path, clip: str | Path | None = None, out: str | Path | None = None,
                  config: OverlayConfig = OverlayConfig(), topdown: bool = True) -> list[Path]:
    """Write the annotated clip (default ``DIR/overlay.mp4``) and, with ``topdown``, the rectified
    top-down one (``..._topdown`` beside it); each atomically (``vision.video.write_video``).
    Returns the paths written."""
    d = Path(folder)
    table, cameras, tracks, events, shots, run = load_folder(d)
    clip = find_clip(d, run, Path(clip) if clip is not None else None)
    info = probe(clip)
    if (info.width, info.height) != tuple(cameras[0][1].image_size):
        raise ValueError(f"clip {clip} is {info.width}x{info.height} px but the calibration's camera saw "
                         f"{cameras[0][1].image_size[0]}x{cameras[0][1].image_size[1]}; is it the right clip?")
    plan = _plan(tracks, events, shots)
    target = Path(out) if out is not None else d / "overlay.mp4"
    fps = info.fps if info.fps > 0 else 30.0
    paths = []
    write_video(target, annotated_frames(clip, plan, table, cameras, config), fps, quality=config.quality, preset=config.preset)
    paths.append(target)
    if topdown:
        td = target.with_name(target.stem + "_topdown" + (target.suffix or ".mp4"))
        write_video(td, topdown_frames(clip, plan, table, cameras, config), fps, quality=config.quality, preset=config.preset)
        paths.append(td)
    return paths


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``overlay`` on an ``argparse`` subparsers object; returns its parser."""
    p = subparsers.add_parser(
        "overlay",
        help="draw each ball's path, contacts and speed on the clip, and a top-down version",
        description=(
            "Write DIR/overlay.mp4: the original clip (DIR/run.json's 'clip', or --clip) with each "
            "ball's path during the shot, a ring round each ball with its speed, and markers where "
            "balls met cushions (diamond), each other (star) or a pocket (cross); and "
            "DIR/overlay_topdown.mp4: the same seen straight from above, to scale."
        ),
    )
    p.add_argument("folder", type=Path, metavar="DIR", help="folder written by 'railtrace analyse --out DIR'")
    p.add_argument("--clip", type=Path, default=None, help="the clip (default: the one DIR/run.json names)")
    p.add_argument("--out", type=Path, default=None, metavar="FILE",
                   help="annotated clip to write (default DIR/overlay.mp4; the top-down one gets _topdown)")
    p.add_argument("--shot", type=int, default=None, help="only this shot (from its start to a second after its end)")
    p.add_argument("--scale", type=float, default=0.4, metavar="PX_PER_MM", help="top-down view scale (default 0.4)")
    p.add_argument("--no-topdown", action="store_true", help="do not write the top-down version")
    return p


def run(args: argparse.Namespace) -> int:
    """Write the annotated videos; 0 on success. Bad input raises ValueError (one line)."""
    if args.out is not None and args.out.suffix.lower() not in (".mp4", ".mkv", ".mov", ".avi"):
        raise ValueError(f"--out {args.out} should be a video file name ending in .mp4")
    config = OverlayConfig(scale_px_per_mm=float(args.scale), shot=args.shot)
    paths = write_overlay(args.folder, args.clip, args.out, config, topdown=not args.no_topdown)
    print("wrote " + " and ".join(str(p) for p in paths))
    return 0


def main(argv=None) -> int:
    """Stand-alone entry (the same as ``railtrace overlay``) for tests and scripts."""
    parser = argparse.ArgumentParser(prog="railtrace")
    sub = parser.add_subparsers(dest="command")
    add_parser(sub)
    args = parser.parse_args(["overlay", *(argv or [])])
    try:
        return run(args)
    except ValueError as exc:
        print(f"railtrace overlay: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
