"""The HTML report: self-contained, one diagram per shot drawn to scale, other stages' tables
shown defensively, bad input refused with one line."""

from __future__ import annotations

import base64
import json
import math
import re
import shutil
from pathlib import Path

import cv2
import numpy as np
import pandas as pd

from analysis.report import CUE_COLOUR, ReportConfig, ball_names, png_bytes, shot_figure
from railtrace.report_cmd import main as report_main
from railtrace.report_cmd import write_report
from vision.table import parse_table

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_clips"


def _folder(tmp: Path, name: str) -> Path:
    d = tmp / name
    shutil.copytree(SAMPLES / f"{name}.truth", d)
    (d / "run.json").write_text(json.dumps({"railtrace_version": "test", "clip": str(SAMPLES / f"{name}.mp4")}))
    return d


def _pngs(text: str) -> list[np.ndarray]:
    return [cv2.imdecode(np.frombuffer(base64.b64decode(b), np.uint8), cv2.IMREAD_COLOR)
            for b in re.findall(r'src="data:image/png;base64,([^"]+)"', text)]


def test_report_has_every_shot_and_bank_columns(tmp_path):
    d = _folder(tmp_path, "bank_practice")
    ev = pd.read_csv(d / "events.csv")
    c = ev[(ev["kind"] == "cushion")].drop_duplicates("shot")
    # A banks.csv as the bank audit might write it (its columns are not final), plus a column the
    # report does not know: it must still be shown.
    pd.DataFrame({"shot": c["shot"], "track": c["track"], "rail": c["rail"], "contact_diamond": c["diamond"],
                  "declared_diamond": c["diamond"] - 0.25, "mirror_diamond": c["diamond"] + 0.1,
                  "start_x_mm": 1000.0, "start_y_mm": 400.0, "speed_in_mm_s": c["speed_in"], "band": "medium",
                  "aim_error_diamonds": 0.25, "made": [True, False] * (len(c) // 2) + [True] * (len(c) % 2),
                  "target": "bottom-side", "brand_new_measure": 7.5}).to_csv(d / "banks.csv", index=False)
    out = write_report(d)
    text = out.read_text(encoding="utf-8")
    n_shots = len(pd.read_csv(d / "shots.csv"))
    imgs = _pngs(text)
    # One diagram per shot + summary + bank plot + rail map, each a decodable PNG.
    assert len(imgs) == n_shots + 3 and all(i is not None and i.shape[1] >= 400 for i in imgs)
    assert text.count('class="shot"') == n_shots
    assert "brand_new_measure" in text
    assert "aim error (diamonds)" in text and f"{len(c)}</b><span>bank shots audited" in text
    assert not re.search(r"https?://", text) and "<script" not in text


def test_shot_diagram_is_to_scale_and_path_lies_where_the_ball_went():
    table = parse_table("9ft")
    cfg = ReportConfig()
    t = np.linspace(0, 1, 200)
    x0, y0, x1, y1 = 400.0, 300.0, 2100.0, 950.0
    tracks = pd.DataFrame({"t": t, "track": 0, "ball": "cue", "x": x0 + (x1 - x0) * t, "y": y0 + (y1 - y0) * t})
    events = pd.DataFrame(columns=["shot", "t", "kind", "track", "x", "y"])
    fig = shot_figure(table, tracks, events, ball_names(tracks), cfg)
    img = cv2.imdecode(np.frombuffer(png_bytes(fig, cfg.dpi), np.uint8), cv2.IMREAD_COLOR)
    ax = fig.axes[0]
    h = img.shape[0]
    p = ax.transData.transform([[0, 0], [table.length_mm, 0], [0, table.width_mm]])
    sx = (p[1, 0] - p[0, 0]) / table.length_mm
    sy = (p[2, 1] - p[0, 1]) / table.width_mm
    assert abs(sx / sy - 1) < 0.005  # same pixels per mm both ways: drawn to scale
    assert abs(img.shape[1] - cfg.dpi * cfg.table_fig_width_in) <= 1
    # The cue colour's pixels lie along the projected path (display y is up, image rows down).
    bgr = np.array([int(CUE_COLOUR[i:i + 2], 16) for i in (5, 3, 1)])
    rows, cols = np.nonzero(np.abs(img.astype(int) - bgr).sum(axis=2) < 30)
    a = ax.transData.transform([[x0, y0], [x1, y1]])
    a[:, 1] = h - a[:, 1]
    d = a[1] - a[0]
    n = np.array([-d[1], d[0]]) / np.hypot(*d)
    dist = np.abs((np.column_stack([cols, rows]) - a[0]) @ n)
    on_line = dist < 3.0  # px: half the 1.8 pt line plus antialiasing
    assert on_line.sum() > 0.8 * np.hypot(*d)  # the line is drawn along its whole length
    along = (np.column_stack([cols, rows])[on_line] - a[0]) @ (d / np.hypot(*d))
    assert along.min() < 0.05 * np.hypot(*d) and along.max() > 0.95 * np.hypot(*d)
    angle = math.degrees(math.atan2(-(d[1]), d[0]))
    assert abs(angle - math.degrees(math.atan2(y1 - y0, x1 - x0))) < 0.5


def test_bad_folder_is_one_line_and_writes_nothing(tmp_path, capsys):
    d = tmp_path / "empty"
    d.mkdir()
    assert report_main([str(d)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "tracks.csv" in err[0]
    assert list(d.iterdir()) == []


def test_no_shots_is_a_normal_report(tmp_path):
    d = _folder(tmp_path, "multi_rail_30fps")
    tr = pd.read_csv(d / "tracks.csv")
    tr[tr["t"] < 0.5].to_csv(d / "tracks.csv", index=False)
    pd.read_csv(d / "events.csv").head(0).to_csv(d / "events.csv", index=False)
    pd.read_csv(d / "shots.csv").head(0).to_csv(d / "shots.csv", index=False)
    text = write_report(d).read_text(encoding="utf-8")
    assert "No ball moved in this clip" in text and 'class="shot"' not in text
