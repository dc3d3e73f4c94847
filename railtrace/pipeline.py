"""``railtrace analyse``: one clip in, a results folder out.

frames -> calibrated table coordinates (``vision.calibrate`` or a calibration file) ->
detections (``vision.detect``) -> tracks (``tracking.tracker``) -> events and shots
(``tracking.events``) -> ``tracks.csv``, ``events.csv``, ``shots.csv``, ``calibration.json``,
``detections.csv`` and ``run.json`` (``railtrace.results``), written all at once or not at all.

The clip is streamed: frames are decoded, detected and dropped one at a time.
"""

from __future__ import annotations

import logging
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable

import pandas as pd

from railtrace.results import write_results
from tracking.events import EventConfig, find_events
from tracking.tracker import TrackerConfig, track
from vision.calibfile import calibration_dict, read_calibration
from vision.calibrate import CalibConfig, calibrate
from vision.camera import Camera
from vision.detect import BallDetector, DetectConfig, empty_detections
from vision.table import TableSpec
from vision.video import iter_frames, probe

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class AnalyseConfig:
    """Everything that steers one analysis: the table, an optional calibration file, and each
    stage's own configuration."""

    table: TableSpec
    calibration_path: Path | None = None
    calib: CalibConfig = field(default_factory=CalibConfig)
    detect: DetectConfig = field(default_factory=DetectConfig)
    tracker: TrackerConfig = field(default_factory=TrackerConfig)
    events: EventConfig = field(default_factory=EventConfig)


@dataclass(frozen=True)
class AnalyseSummary:
    """What one analysis found, for the closing summary line (times in s)."""

    out_dir: Path
    frames: int
    duration_s: float
    shots: int
    cushions: int
    collisions: int
    pocketed: int
    balls: int
    calibration_source: str
    calibration_quality: dict
    seconds: float

    def text(self) -> str:
        """A short human summary."""
        q = self.calibration_quality
        quality = f"noses rms {q['nose_rms_px']:.2f} px" if "nose_rms_px" in q else "from file"
        return (
            f"{self.frames} frames ({self.duration_s:.1f} s) in {self.seconds:.1f} s: "
            f"{self.balls} balls, {self.shots} shots, {self.cushions} cushion contacts, "
            f"{self.collisions} collisions, {self.pocketed} pocketed; calibration "
            f"{self.calibration_source} ({quality}); results in {self.out_dir}/"
        )


def analyse_clip(
    clip: str | Path,
    out_dir: str | Path,
    config: AnalyseConfig,
    progress: Callable[[int, int], None] | None = None,
) -> AnalyseSummary:
    """Analyse ``clip`` into ``out_dir`` (which must not exist). ValueError with a one-line
    message for bad input; nothing is written unless the whole analysis succeeds."""
    t0 = time.perf_counter()
    clip, out = Path(clip), Path(out_dir)
    if out.exists():
        raise ValueError(f"output folder {out} exists already; choose a new --out or remove it first")
    info = probe(clip)
    table, cameras, source, quality, calib_doc = _calibration(clip, config)
    detections = _detect(clip, table, cameras, config.detect, info.frame_count, progress)
    tracks = track(detections, table, config.tracker)
    events, shots = find_events(tracks, table, detections, config.events)
    run_info = {
        "clip": str(clip),
        "frames": int(detections["frame"].max() + 1) if len(detections) else info.frame_count,
        "config": _jsonable(asdict(config)),
    }
    write_results(
        out, tracks, events, shots, calib_doc, overwrite=False, run_info=run_info,
        extra_files={"detections.csv": detections.to_csv(index=False, float_format="%.4f")},
    )
    counts = events["kind"].value_counts() if len(events) else pd.Series(dtype=int)
    return AnalyseSummary(
        out_dir=out,
        frames=info.frame_count,
        duration_s=info.duration_s,
        shots=len(shots),
        cushions=int(counts.get("cushion", 0)),
        collisions=int(counts.get("collision", 0)) // 2,
        pocketed=int(counts.get("pocket", 0)),
        balls=int(tracks["track"].nunique()) if len(tracks) else 0,
        calibration_source=source,
        calibration_quality=quality,
        seconds=time.perf_counter() - t0,
    )


def _calibration(clip: Path, config: AnalyseConfig):
    """(table, [(t_from_s, Camera)], source, quality dict, calibration.json dict)."""
    if config.calibration_path is not None:
        table, camera, doc = read_calibration(config.calibration_path)
        if camera is None:
            raise ValueError(f"{config.calibration_path} holds no camera model; run 'railtrace calibrate' on a clip from this camera")
        changes = [(float(c["t"]), Camera.from_dict(c["camera"])) for c in doc.get("camera_changes", [])]
        return table, changes or [(0.0, camera)], "file", doc.get("quality", {}), doc
    cal = calibrate(clip, config.table, config.calib)
    changes = list(cal.camera_changes) or [(0.0, cal.camera)]
    doc = calibration_dict(
        config.table, cal.camera, "auto",
        camera_changes=changes if len(changes) > 1 else None,
        quality=cal.quality, origin=cal.origin,
    )
    return config.table, changes, "auto", cal.quality, doc


def _detect(clip, table, cameras, detect_config, n_frames, progress) -> pd.DataFrame:
    """Stream the clip through a detector, switching to a new one where the camera moved."""
    parts = []
    k, detector = -1, None
    try:
        for index, t, img in iter_frames(clip):
            while k + 1 < len(cameras) and cameras[k + 1][0] <= t + 1e-9:
                k += 1
                detector = BallDetector(cameras[k][1], table, detect_config)
            part = detector.process(index, t, img)
            if len(part):
                parts.append(part)
            if progress is not None:
                progress(index + 1, n_frames)
    except ValueError:
        raise
    except Exception as exc:  # a decoder error part-way through: the file is damaged
        raise ValueError(f"{clip} could not be decoded to the end ({type(exc).__name__}: {exc}); the file may be truncated") from None
    if not parts:
        return empty_detections()
    return pd.concat(parts, ignore_index=True)


def _jsonable(obj):
    if isinstance(obj, dict):
        return {k: _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (str, int, float, bool)) or obj is None:
        return obj
    return str(obj)
