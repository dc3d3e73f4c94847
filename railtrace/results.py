"""Writing a results folder (``../shared/spec/results-format.md``) all at once or not at all.

The folder is assembled under a temporary name beside its destination and renamed into place
when every file is written, so a reader (or a crash) never sees half a folder.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from pathlib import Path
from typing import Any

import pandas as pd

from railtrace import __version__

TRACK_COLUMNS = ["frame", "t", "track", "ball", "x", "y", "vx", "vy", "seen"]
EVENT_COLUMNS = [
    "event", "shot", "t", "kind", "track", "other", "x", "y", "rail", "diamond",
    "speed_in", "speed_out", "angle_in", "angle_out", "restitution",
]
SHOT_COLUMNS = ["shot", "t_start", "t_end", "cue_track"]


def _check_columns(df: pd.DataFrame, required: list[str], name: str) -> pd.DataFrame:
    missing = [c for c in required if c not in df.columns]
    if missing:
        raise ValueError(f"{name} lacks column(s) {', '.join(missing)}")
    extra = [c for c in df.columns if c not in required]
    return df[required + extra]


def write_results(
    out_dir: str | os.PathLike,
    tracks: pd.DataFrame,
    events: pd.DataFrame,
    shots: pd.DataFrame,
    calibration: dict[str, Any],
    *,
    extra_files: dict[str, str] | None = None,
    overwrite: bool = True,
    run_info: dict[str, Any] | None = None,
) -> Path:
    """Write tracks.csv, events.csv, shots.csv, calibration.json (and ``extra_files``, name ->
    text) into ``out_dir`` atomically. Required columns come first in the format's order; extra
    columns follow. ``run_info`` (parameters of the run) goes to ``run.json`` with the version.

    With ``overwrite`` False an existing ``out_dir`` is an error (ValueError), never replaced.
    """
    out = Path(out_dir)
    if out.exists() and not overwrite:
        raise ValueError(f"output folder {out} exists already; choose a new --out or remove it first")
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    try:
        _check_columns(tracks, TRACK_COLUMNS, "tracks").to_csv(tmp / "tracks.csv", index=False, float_format="%.6f")
        _check_columns(events, EVENT_COLUMNS, "events").to_csv(tmp / "events.csv", index=False, float_format="%.6f")
        _check_columns(shots, SHOT_COLUMNS, "shots").to_csv(tmp / "shots.csv", index=False, float_format="%.6f")
        (tmp / "calibration.json").write_text(json.dumps(calibration, indent=2, allow_nan=False) + "\n", encoding="utf-8")
        info = {"railtrace_version": __version__, **(run_info or {})}
        (tmp / "run.json").write_text(json.dumps(info, indent=2, default=str) + "\n", encoding="utf-8")
        for name, text in (extra_files or {}).items():
            (tmp / name).write_text(text, encoding="utf-8")
        if out.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old.", dir=out.parent))
            os.replace(out, old / out.name)
            os.replace(tmp, out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out
