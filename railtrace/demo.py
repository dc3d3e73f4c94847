"""``make demo``: analyse a bundled sample clip and show how close railtrace came to the truth.

Runs ``railtrace analyse sample_clips/bank_practice.mp4 --out demo_output/bank_practice`` (the
demo's own folder is cleared first), scores the results against the clip's truth with
``benchmarks/score.py``, and writes ``demo_output/preview.png``: four frames of the clip with the
measured ball centres (green) and the true ones (white) ringed.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import cv2
import numpy as np
import pandas as pd

from railtrace.cli import main as cli_main
from vision.calibfile import read_calibration
from vision.video import iter_frames

ROOT = Path(__file__).resolve().parent.parent
CLIP = ROOT / "sample_clips" / "bank_practice.mp4"
TRUTH = ROOT / "sample_clips" / "bank_practice.truth"
OUT = ROOT / "demo_output"


def preview(clip: Path, results: Path, truth: Path, out_png: Path, n: int = 4) -> Path:
    """Tile ``n`` frames spread over ``clip`` with measured (green) and true (white) centres."""
    _, camera, _ = read_calibration(truth / "calibration.json")
    _, measured_cam, _ = read_calibration(results / "calibration.json")
    true_tracks = pd.read_csv(truth / "tracks.csv")
    found = pd.read_csv(results / "tracks.csv")
    R = 57.15 / 2
    last = int(true_tracks["frame"].max())
    wanted = set(np.linspace(0, last, n + 2).astype(int)[1:-1].tolist())
    tiles = []
    for index, _, frame in iter_frames(clip):
        if index in wanted:
            for rows, cam, colour, radius in (
                (true_tracks, camera, (255, 255, 255), 20),
                (found, measured_cam, (60, 220, 60), 16),
            ):
                f = rows[rows["frame"] == index]
                pts = np.column_stack([f["x"], f["y"], np.full(len(f), R)])
                for u, v in cam.project(pts):
                    cv2.circle(frame, (int(round(u)), int(round(v))), radius, colour, 1, cv2.LINE_AA)
            cv2.putText(frame, f"frame {index}", (20, 40), cv2.FONT_HERSHEY_SIMPLEX, 1.0, (255, 255, 255), 2, cv2.LINE_AA)
            tiles.append(cv2.resize(frame, (frame.shape[1] // 2, frame.shape[0] // 2), interpolation=cv2.INTER_AREA))
        if index >= max(wanted):
            break
    grid = np.vstack([np.hstack(tiles[i : i + 2]) for i in range(0, len(tiles) - 1, 2)])
    cv2.imwrite(str(out_png), grid)
    return out_png


def run() -> int:
    """Analyse the demo clip, score it and write the preview; returns an exit code."""
    results = OUT / "bank_practice"
    if results.exists():
        shutil.rmtree(results)
    OUT.mkdir(exist_ok=True)
    # The demo keeps its own history database so it never mixes into a real player's history.
    code = cli_main(["analyse", str(CLIP), "--out", str(results), "--db", str(OUT / "history.sqlite")])
    if code:
        return code
    sys.path.insert(0, str(ROOT))
    from benchmarks.score import format_report, score

    report = format_report(score(results, TRUTH))
    (OUT / "score.txt").write_text(report, encoding="utf-8")
    png = preview(CLIP, results, TRUTH, OUT / "preview.png")
    print(report)
    print(f"demo: results in {results}/ (open {results / 'report.html'} in a browser), score against the truth in {OUT / 'score.txt'}, preview {png}")
    return 0


if __name__ == "__main__":
    sys.exit(run())
