"""``make demo``: film a bundled sample scene and show what was filmed.

Renders ``sample_clips/bank_practice.toml`` into ``demo_output/`` (clip, truth folder) and writes
``demo_output/preview.png``: four frames of the clip with the true ball centres marked, so a
newcomer sees at once what railtrace works from.
"""

from __future__ import annotations

import sys
from pathlib import Path

import cv2
import numpy as np
import pandas as pd

from railtrace.cli import main as cli_main
from vision.calibfile import read_calibration
from vision.video import iter_frames

ROOT = Path(__file__).resolve().parent.parent
SCENE = ROOT / "sample_clips" / "bank_practice.toml"
OUT = ROOT / "demo_output"


def preview(clip: Path, truth_dir: Path, out_png: Path, n: int = 4) -> Path:
    """Tile ``n`` frames of ``clip`` spread over its length, each with the truth centres ringed."""
    _, camera, _ = read_calibration(truth_dir / "calibration.json")
    tracks = pd.read_csv(truth_dir / "tracks.csv")
    last = int(tracks["frame"].max())
    wanted = set(np.linspace(0, last, n + 2).astype(int)[1:-1].tolist())
    tiles = []
    for index, _, frame in iter_frames(clip):
        if index in wanted:
            rows = tracks[tracks["frame"] == index]
            pts = np.column_stack([rows["x"], rows["y"], np.full(len(rows), 57.15 / 2)])
            for u, v in camera.project(pts):
                cv2.circle(frame, (int(round(u)), int(round(v))), 18, (255, 255, 255), 1, cv2.LINE_AA)
            cv2.putText(frame, f"frame {index}", (20, 40), cv2.FONT_HERSHEY_SIMPLEX, 1.0, (255, 255, 255), 2, cv2.LINE_AA)
            tiles.append(cv2.resize(frame, (frame.shape[1] // 2, frame.shape[0] // 2), interpolation=cv2.INTER_AREA))
        if index > max(wanted):
            break
    grid = np.vstack([np.hstack(tiles[i : i + 2]) for i in range(0, len(tiles) - 1, 2)])
    cv2.imwrite(str(out_png), grid)
    return out_png


def run() -> int:
    """Render the demo scene and write the preview; returns an exit code."""
    clip = OUT / "bank_practice.mp4"
    code = cli_main(["render", str(SCENE), "--out", str(clip), "--force"])
    if code:
        return code
    png = preview(clip, OUT / "bank_practice.truth", OUT / "preview.png")
    print(f"demo: clip {clip}, truth {OUT / 'bank_practice.truth'}/, preview {png}")
    return 0


if __name__ == "__main__":
    sys.exit(run())
