"""`make test`: the whole suite as two pytest processes at once, one per core of a 2-core machine.

Every test file belongs to exactly one half below; the runner refuses to start when a file in
``tests/`` is in neither or both, or a listed file is gone, so no test is left out by the split.
The halves are balanced by measured time (seconds in the comments: each file's tests, setup and
teardown included, from one ``--junitxml`` run of the whole suite), and a file that uses a
session fixture of ``conftest.py`` (a clip filmed once per session) shares its half with the
other files that use it, since each process films its own copy. ``python -m pytest -q`` alone
still runs the whole suite in one process.

Each half runs with its own ``--basetemp`` (pytest's maintainers: concurrent pytest processes
must not share one) and without the cache plugin (two processes would overwrite each other's
last-failed list). Half a prints as it runs; half b's output is kept and printed whole after
it, under a heading. The exit status is 0 only when both halves exit 0; a half killed by a
signal counts as failed.

``python tests/halves.py --times REPORT.xml`` prints each half's files with their seconds from a
pytest ``--junitxml`` report and each half's total, for rebalancing.
"""

from __future__ import annotations

import argparse
import shutil
import signal
import subprocess
import sys
import tempfile
import time
import xml.etree.ElementTree as ET
from pathlib import Path

# Balanced on measured seconds: one fresh-clone run of these halves on a quiet machine
# (session 21, both halves at once, --junitxml, then --times): half a 580 s (test_detect.py 447,
# test_render.py 52, test_pipeline.py 37), half b 551 s (test_events.py 226, test_bank_chart.py
# 88, test_events_collisions.py 63, test_calibrate.py 62, test_background.py 56); the whole
# `make test` 621 s wall, install included (the next fresh clone, quiet: 528 s). Re-measure with --junitxml and --times
# (DEVELOPERS.md, "Tests") and move files until the totals agree.
HALF_A = (
    "test_detect.py",
    "test_tracker.py",
    "test_pipeline.py",  # with test_filming.py: both use conftest's small_clip
    "test_filming.py",
    "test_render.py",
    "test_visibility.py",
    "test_browser.py",
    "test_rest_causes.py",
    "test_edge_pull.py",
    "test_share.py",
    "test_kalman.py",
    "test_camera.py",
    "test_table.py",
    "test_scene.py",
    "test_halves.py",
)
HALF_B = (
    "test_events.py",
    "test_background.py",
    "test_calibrate.py",
    "test_events_collisions.py",
    "test_cushions.py",
    "test_bank_chart.py",
    "test_banks.py",
    "test_physics.py",
    "test_score.py",
    "test_history.py",
    "test_video.py",
    "test_cushion.py",
    "test_drill.py",
    "test_extra_scenes.py",
    "test_event_causes.py",
    "test_overlay.py",
    "test_report.py",
    "test_rests.py",
    "test_detect_states.py",
)

TESTS = Path(__file__).resolve().parent
ROOT = TESTS.parent


def check_split(a=HALF_A, b=HALF_B, folder: Path = TESTS) -> list[str]:
    """Problems with the split (empty when every ``test_*.py`` in ``folder`` is in exactly one
    half and every listed file exists)."""
    present = {p.name for p in folder.glob("test_*.py")}
    problems = [f"{name} is in both halves" for name in sorted(set(a) & set(b))]
    problems += [f"{name} is listed twice in one half" for half in (a, b) for name in sorted({n for n in half if half.count(n) > 1})]
    listed = set(a) | set(b)
    problems += [f"{name} is in no half of tests/halves.py: add it to the half with less time" for name in sorted(present - listed)]
    problems += [f"{name} is listed in tests/halves.py but does not exist" for name in sorted(listed - present)]
    return problems


def file_seconds(reports: list[Path]) -> dict[str, float]:
    """Seconds per test file (setup, call and teardown of each of its tests) from pytest
    ``--junitxml`` reports."""
    seconds: dict[str, float] = {}
    for case in (c for r in reports for c in ET.parse(r).iter("testcase")):
        module = case.get("classname", "").split(".")
        name = next((m for m in module if m.startswith("test_")), None)
        if name is not None:
            seconds[name + ".py"] = seconds.get(name + ".py", 0.0) + float(case.get("time", 0.0))
    return seconds


def print_times(reports: list[Path]) -> None:
    """Each half's files with their seconds from ``reports`` and each half's total."""
    seconds = file_seconds(reports)
    for label, half in (("a", HALF_A), ("b", HALF_B)):
        print(f"half {label}:")
        for name in sorted(half, key=lambda n: -seconds.get(n, 0.0)):
            print(f"  {seconds.get(name, 0.0):8.1f}  {name}")
        print(f"  {sum(seconds.get(n, 0.0) for n in half):8.1f}  total")


def _status(code: int) -> str:
    """A half's exit code in words (pytest's exit codes; negative: killed by that signal)."""
    if code < 0:
        return f"killed by signal {signal.Signals(-code).name}"
    return {0: "passed", 1: "tests failed", 2: "interrupted", 3: "internal error", 4: "usage error",
            5: "no tests collected"}.get(code, f"exit code {code}")


def run(extra: list[str], halves=(HALF_A, HALF_B), folder: Path = TESTS, root: Path = ROOT, scratch: Path | None = None) -> int:
    """Run the two ``halves`` of ``folder``'s test files at once from ``root``, with pytest's
    ``extra`` arguments; 0 only when both pass, else the first failing half's pytest exit code
    (128 + the signal's number for a half killed by one, as POSIX shells report it). The
    halves' temporary folders go in a new folder in ``scratch`` (the system's temporary folder
    by default), removed when both pass."""
    problems = check_split(*halves, folder=folder)
    if problems:
        for p in problems:
            print(f"tests/halves.py: {p}", file=sys.stderr)
        return 2
    base = Path(tempfile.mkdtemp(prefix="railtrace-tests-", dir=scratch))
    log_b = base / "half_b.log"
    cmd = [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider"]
    where = folder.relative_to(root)
    args = [cmd + [f"--basetemp={base / label}", *(a.replace("{half}", label) for a in extra), *(str(where / n) for n in half)]
            for label, half in zip("ab", halves)]
    print(f"==================== half a ({len(halves[0])} files) runs here; half b ({len(halves[1])} files) at the same time, printed after it", flush=True)
    start = time.monotonic()
    procs, stopped = [], []
    with open(log_b, "wb") as out_b:
        procs.append(subprocess.Popen(args[1], cwd=root, stdout=out_b, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL))
        procs.insert(0, subprocess.Popen(args[0], cwd=root, stdin=subprocess.DEVNULL))

        def stop(signum, _frame):
            # A CI timeout or ^C stops both halves, not only this process; what they printed
            # is still shown below.
            stopped.append(signum)
            for p in procs:
                if p.poll() is None:
                    p.send_signal(signum)

        old = {s: signal.signal(s, stop) for s in (signal.SIGTERM, signal.SIGINT)}
        try:
            # Each half's own end, whichever ends first (waiting on a then b would give b a's time).
            took: list[float | None] = [None, None]
            while None in took:
                for i, p in enumerate(procs):
                    if took[i] is None and p.poll() is not None:
                        took[i] = time.monotonic() - start
                time.sleep(0.2)
            codes = [p.returncode for p in procs]
        finally:
            for s, handler in old.items():
                signal.signal(s, handler)
    print(f"\n==================== half b ({len(halves[1])} files) ====================", flush=True)
    sys.stdout.buffer.write(log_b.read_bytes())
    sys.stdout.flush()
    print(f"\nhalf a: {_status(codes[0])} ({took[0]:.0f} s); half b: {_status(codes[1])} ({took[1]:.0f} s)", flush=True)
    if all(c == 0 for c in codes):
        shutil.rmtree(base, ignore_errors=True)
        return 0
    print(f"temporary folders kept for a look: {base}", flush=True)
    if stopped:
        return 128 + stopped[0]
    return next(c if c > 0 else 128 - c for c in codes if c != 0)


def main(argv: list[str] | None = None) -> int:
    """Command line: run the halves, or ``--times REPORT.xml`` to print their measured times."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0], allow_abbrev=False)
    parser.add_argument("--times", type=Path, nargs="+", metavar="REPORT.xml", help="print each half's seconds from pytest --junitxml reports and exit")
    known, extra = parser.parse_known_args(argv)
    if known.times is not None:
        print_times(known.times)
        return 0
    return run(extra)


if __name__ == "__main__":
    sys.exit(main())
