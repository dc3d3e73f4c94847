"""``railtrace calibrate CLIP``: find the camera from the clip itself and write calibration.json and
a check image.

Errors are one line on stderr with exit code 2 (raised as ValueError for ``railtrace.cli``); the
check image is still written when one could be drawn, so the user sees what went wrong; the
calibration file is written only for a calibration that passed, atomically.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from vision.atomic import write_image_atomic
from vision.calibfile import calibration_dict, write_calibration
from vision.calibrate import CalibConfig, CalibrationError, calibrate, height_words
from vision.table import parse_table


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``calibrate`` on an ``argparse`` subparsers object; returns its parser."""
    p = subparsers.add_parser(
        "calibrate",
        help="find the camera (lens, focal length, pose) from a clip of the table",
        description=(
            "Find the camera from a clip: a background from the still moments, the four cushion "
            "noses to sub-pixel, the lens distortion from their straightness, the focal length and "
            "pose from the nose rectangle and the rail sights. Writes calibration.json and a "
            "top-down check image; refuses (exit 2) when the fit cannot be trusted."
        ),
    )
    p.add_argument("clip", type=Path, help="video file from the fixed overhead camera")
    p.add_argument("--table", default="9ft", help="9ft, 8ft, 7ft or the playing area LxW in mm (default 9ft)")
    p.add_argument("--ball", type=float, default=None, metavar="MM", help="ball diameter, mm (default 57.15)")
    p.add_argument("--corners", default=None, metavar="U,V;U,V;U,V;U,V",
                   help="the four cushion-nose corners in the picture, px: origin, along the long side, far corner, along the short side (anticlockwise)")
    p.add_argument("--camera-height", type=float, default=None, metavar="MM", help="lens height above the cloth, mm, if known; pins the distance a view from straight above cannot tell")
    p.add_argument("--out", type=Path, default=Path("calibration.json"), help="calibration file to write (default calibration.json)")
    p.add_argument("--check", type=Path, default=None, help="check image to write (default: beside --out, *_check.png)")
    return p


def parse_corners(text: str) -> tuple[tuple[float, float], ...]:
    """``"u,v;u,v;u,v;u,v"`` -> four (u, v) pairs; ValueError naming the bad text."""
    try:
        pts = tuple(tuple(float(x) for x in part.split(",")) for part in text.strip().split(";"))
    except ValueError:
        pts = ()
    if len(pts) != 4 or any(len(p) != 2 for p in pts):
        raise ValueError(f"--corners {text!r} should be four pixel pairs like \"102,650;1180,655;1170,70;110,64\"")
    return pts


def run(args: argparse.Namespace) -> int:
    """Calibrate ``args.clip``; 0 on success. Bad input raises ValueError (one line)."""
    table = parse_table(args.table, args.ball)
    corners = parse_corners(args.corners) if args.corners else None
    config = CalibConfig(corners_px=corners, camera_height_mm=args.camera_height)
    out: Path = args.out
    if out.suffix.lower() != ".json":
        raise ValueError(f"--out {out} should be a .json file name")
    check: Path = args.check or out.with_name(out.stem + "_check.png")
    if check.suffix.lower() not in (".png", ".jpg", ".jpeg"):
        raise ValueError(f"--check {check} should be a .png or .jpg file name")
    for p in (out, check):
        if not p.parent.is_dir():
            raise ValueError(f"folder {str(p.parent)!r} does not exist; create it first")
    try:
        cal = calibrate(args.clip, table, config)
    except CalibrationError as exc:
        if exc.check_image is not None:
            write_image_atomic(check, exc.check_image)
            raise ValueError(f"{exc} (see {check})") from None
        raise
    source = "manual" if corners else "auto"
    doc = calibration_dict(
        table, cal.camera, source,
        camera_changes=list(cal.camera_changes) if len(cal.camera_changes) > 1 else None,
        quality=cal.quality, origin=cal.origin,
    )
    doc["corners_px"] = cal.corners_px.tolist()
    write_image_atomic(check, cal.check_image)
    write_calibration(out, doc)
    q = cal.quality
    bumps = f", camera moved {len(cal.camera_changes) - 1} time(s)" if len(cal.camera_changes) > 1 else ""
    print(f"wrote {out} and {check}: noses rms {q['nose_rms_px']:.2f} px, {q['sights_found']} sights, "
          f"f {q['focal_px']:.0f} px, k1 {q['k1']:+.3f}; {height_words(q)}{bumps}")
    return 0


def main(argv=None) -> int:
    """Stand-alone entry (the same as ``railtrace calibrate``) for tests and scripts."""
    parser = argparse.ArgumentParser(prog="railtrace")
    sub = parser.add_subparsers(dest="command")
    add_parser(sub)
    args = parser.parse_args(["calibrate", *(argv or [])])
    try:
        return run(args)
    except ValueError as exc:
        print(f"railtrace calibrate: error: {exc}", file=sys.stderr)
        return 2
