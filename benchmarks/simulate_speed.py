"""Simulator speed: a 16-ball rack struck a dozen times, each shot run to rest.

The brief asks that such a scene simulates in well under a second. Times
``tests.test_physics.play_dozen_shots`` (the same scene the test checks for correctness)
``--runs`` times and prints each run and the median.

Run: ``.venv/bin/python benchmarks/simulate_speed.py --runs 5``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.test_physics import play_dozen_shots  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=5)
    args = ap.parse_args(argv)
    times = []
    for k in range(args.runs):
        t0 = time.perf_counter()
        n = play_dozen_shots()
        times.append(time.perf_counter() - t0)
        print(f"run {k}: {times[-1]:.3f} s, {n} events")
    print(f"median {statistics.median(times):.3f} s for 16 balls and 12 shots (target: well under 1 s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
