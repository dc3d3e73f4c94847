"""``calibration.json``: the table, the ball and the image-to-table mapping of one camera.

Layout (``../shared/spec/results-format.md``, "DIR/calibration.json"):

* ``format`` = ``"railtrace-calibration"``, ``version`` = 1, ``source`` (``truth``, ``auto`` or
  ``manual``);
* ``table``: name, ``length_mm``, ``width_mm``, ``ball_diameter_mm``, ``nose_height_mm``,
  ``sight_setback_mm``, pocket mouths, rail width and rail-top height;
* ``origin``: which corner of the camera's view the table frame's origin sits at, in words;
* ``camera``: :meth:`vision.camera.Camera.to_dict` (OpenCV conventions) where a camera model is
  known;
* ``homography_cloth`` and ``homography_ball_centre``: 3x3 matrices mapping *undistorted* pixels
  (``K @ [x/z, y/z, 1]``) to table (x, y) mm on the cloth plane and on the plane of ball centres;
* ``camera_changes``: a list of ``{"t": seconds, "camera": {...}}`` for clips where the camera
  moved (first entry is the camera from ``t`` = 0);
* ``quality``: residuals of the fit, where one was made.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path
from typing import Any

from vision.atomic import write_text_atomic
from vision.camera import Camera
from vision.table import TableSpec

FORMAT = "railtrace-calibration"
VERSION = 1


def table_dict(table: TableSpec) -> dict[str, Any]:
    """The table's dimensions as a plain dict (mm)."""
    return {
        "name": table.name,
        "length_mm": table.length_mm,
        "width_mm": table.width_mm,
        "ball_diameter_mm": table.ball_diameter_mm,
        "nose_height_mm": table.nose_height_mm,
        "sight_setback_mm": table.sight_setback_mm,
        "corner_mouth_mm": table.corner_mouth_mm,
        "side_mouth_mm": table.side_mouth_mm,
        "rail_width_mm": table.rail_width_mm,
        "rail_top_height_mm": table.rail_top_height_mm,
    }


def table_from_dict(d: dict[str, Any]) -> TableSpec:
    """Inverse of :func:`table_dict`; ValueError naming a missing key."""
    required = ("length_mm", "width_mm", "ball_diameter_mm")
    for key in required:
        if key not in d:
            raise ValueError(f"calibration table entry lacks {key!r}")
    keys = (
        "nose_height_mm", "sight_setback_mm", "corner_mouth_mm", "side_mouth_mm",
        "rail_width_mm", "rail_top_height_mm",
    )
    extra = {k: float(d[k]) for k in keys if k in d}
    return TableSpec(
        str(d.get("name", "custom")),
        length_mm=float(d["length_mm"]),
        width_mm=float(d["width_mm"]),
        ball_diameter_mm=float(d["ball_diameter_mm"]),
        **extra,
    )


def calibration_dict(
    table: TableSpec,
    camera: Camera | None,
    source: str,
    *,
    camera_changes: list[tuple[float, Camera]] | None = None,
    quality: dict[str, Any] | None = None,
    origin: str = "bottom-left: x to the image's right, y up the image, as the camera sees it",
) -> dict[str, Any]:
    """Everything calibration.json holds, as a JSON-ready dict."""
    out: dict[str, Any] = {
        "format": FORMAT,
        "version": VERSION,
        "source": source,
        "table": table_dict(table),
        "origin": origin,
    }
    if camera is not None:
        out["camera"] = camera.to_dict()
        out["homography_cloth"] = camera.cloth_homography(0.0).tolist()
        out["homography_ball_centre"] = camera.cloth_homography(table.radius_mm).tolist()
    if camera_changes:
        out["camera_changes"] = [{"t": float(t), "camera": c.to_dict()} for t, c in camera_changes]
    if quality is not None:
        out["quality"] = quality
    return out


def write_calibration(path: str | os.PathLike, calibration: dict[str, Any]) -> None:
    """Write ``calibration`` (from :func:`calibration_dict`) to ``path`` atomically."""
    text = json.dumps(calibration, indent=2, allow_nan=False, default=_jsonable)
    write_text_atomic(path, text + "\n")


def read_calibration(path: str | os.PathLike) -> tuple[TableSpec, Camera | None, dict[str, Any]]:
    """Read a calibration file: (table, camera or None, the whole dict).

    ValueError with a one-line message for a missing, unreadable or foreign file.
    """
    p = Path(path)
    if not p.is_file():
        raise ValueError(f"calibration file {p} does not exist; run 'railtrace calibrate' first or give another file")
    try:
        d = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ValueError(f"calibration file {p} is not readable JSON ({exc}); give a calibration.json written by railtrace") from None
    if not isinstance(d, dict) or d.get("format") != FORMAT:
        raise ValueError(f"{p} is not a railtrace calibration file (no \"format\": \"{FORMAT}\")")
    if d.get("version") != VERSION:
        raise ValueError(f"{p} has calibration format version {d.get('version')!r}; this railtrace reads version {VERSION}")
    if "table" not in d:
        raise ValueError(f"calibration file {p} lacks its 'table' entry")
    table = table_from_dict(d["table"])
    camera = Camera.from_dict(d["camera"]) if "camera" in d else None
    return table, camera, d


def _jsonable(obj: Any) -> Any:
    if hasattr(obj, "tolist"):
        return obj.tolist()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    raise TypeError(f"cannot write {type(obj).__name__} to calibration.json")
