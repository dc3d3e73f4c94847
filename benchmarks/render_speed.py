"""How long a 5 s 720p60 clip takes to film (simulate + render + encode) on this machine.

Target (issue: ground truth): under 60 s for a 5 s 1280x720 60 fps clip. Prints each run's
seconds and the median of ``--runs`` runs; the scene has a full rack of 16 balls, a hard break
with the occluder, and a 1/250 s shutter (motion-blur sub-samples on every moving ball).

    python benchmarks/render_speed.py [--runs 3] [--keep DIR]
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

from railtrace.filming import film_scene
from railtrace.scene import parse_scene
import tomllib

R = 57.15 / 2


def rack_scene_text(duration_hint_s: float = 5.0) -> str:
    """A 9 ft table, 15 racked object balls and a cue ball broken hard at t = 1 s."""
    lines = [
        'name = "speed benchmark"',
        "lead_s = 1.0",
        "tail_s = 0.0",
        "max_duration_s = 5.0",
        "[table]",
        'preset = "9ft"',
        "[camera]",
        "height_mm = 2600",
        "resolution = [1280, 720]",
        "fps = 60",
        "shutter_s = 0.004",
        "distortion = [-0.08, 0.01, 0, 0, 0]",
        "[look]",
        "noise = 2.0",
        "occluder = true",
        "[[ball]]",
        'id = "cue"',
        'kind = "cue"',
        "at = [635.0, 635.0]",
    ]
    k = 0
    apex_x = 1905.0
    for row in range(5):
        for j in range(row + 1):
            k += 1
            x = apex_x + row * 2 * R * 0.8661 + 0.5 * row
            y = 635.0 + (j - row / 2) * (2 * R + 0.5)
            kind = "stripe" if k > 8 else "solid"
            lines += ["[[ball]]", f'id = "{k}"', f'kind = "{kind}"', f"at = [{x:.2f}, {y:.2f}]"]
    lines += [
        "[[shot]]",
        'ball = "cue"',
        "speed_mm_s = 3000",
        f"aim = {{ point = [{apex_x:.1f}, 636.0] }}",
        "spin = { height = 0.2 }",
    ]
    return "\n".join(lines) + "\n"


def run_once(out_dir: Path) -> tuple[float, int]:
    scene = parse_scene(tomllib.loads(rack_scene_text()), source_text=rack_scene_text())
    clip = out_dir / "bench.mp4"
    frames = []
    t0 = time.perf_counter()
    film_scene(scene, clip, progress=lambda done, total: frames.append(total))
    elapsed = time.perf_counter() - t0
    return elapsed, frames[-1] if frames else 0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--keep", type=Path, default=None, help="keep the clip in this folder")
    args = parser.parse_args()
    times = []
    for i in range(args.runs):
        with tempfile.TemporaryDirectory() as tmp:
            out = args.keep or Path(tmp)
            out.mkdir(parents=True, exist_ok=True)
            elapsed, n = run_once(out)
        per5 = elapsed * (300 / n) if n else float("nan")
        times.append(per5)
        print(f"run {i + 1}: {n} frames in {elapsed:.1f} s -> {per5:.1f} s per 5 s of 720p60 ({elapsed / n * 1000:.0f} ms/frame)")
    med = statistics.median(times)
    print(f"median: {med:.1f} s per 5 s 720p60 clip; target < 60 s; ratio to target {med / 60:.2f}")


if __name__ == "__main__":
    main()
