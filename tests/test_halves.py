"""`make test`'s split of the suite into two concurrent pytest processes (tests/halves.py)."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
import halves  # noqa: E402  (tests/ is not a package; the runner is a script beside the tests)

_OK = "def test_ok():\n    assert 1 + 1 == 2\n"
_BAD = "def test_bad():\n    assert 1 + 1 == 3\n"
_DIE = "import os, signal\n\ndef test_die():\n    os.kill(os.getpid(), signal.SIGKILL)\n"


def test_every_test_file_is_in_exactly_one_half():
    # The split must not drop a file: the same rule the runner applies before it starts.
    assert halves.check_split() == []
    assert set(halves.HALF_A) | set(halves.HALF_B) == {p.name for p in Path(__file__).parent.glob("test_*.py")}


def test_split_problems_are_named(tmp_path):
    for name in ("test_one.py", "test_two.py", "test_three.py"):
        (tmp_path / name).write_text(_OK)
    got = halves.check_split(("test_one.py", "test_two.py", "test_gone.py"), ("test_two.py",), folder=tmp_path)
    assert got == ["test_two.py is in both halves",
                   "test_three.py is in no half of tests/halves.py: add it to the half with less time",
                   "test_gone.py is listed in tests/halves.py but does not exist"]


def _suite(tmp_path: Path, names) -> Path:
    folder = tmp_path / "tests"
    folder.mkdir()
    text = {"test_ok.py": _OK, "test_ok2.py": _OK, "test_bad.py": _BAD, "test_die.py": _DIE}
    for name in names:
        (folder / name).write_text(text[name])
    return folder


@pytest.mark.parametrize("a,b,want", [
    # pytest's documented exit codes (docs.pytest.org, "Exit codes"): 0 all passed, 1 some
    # failed; a process killed by signal N is reported as 128 + N (POSIX shells' rule, Bash
    # Reference Manual 3.7.5 "Exit Status"), and SIGKILL is 9 (signal(7)).
    (("test_ok.py",), ("test_ok2.py",), 0),
    (("test_ok.py",), ("test_bad.py",), 1),
    (("test_die.py",), ("test_ok.py",), 128 + 9),
])
def test_the_run_fails_when_either_half_fails_or_is_killed(tmp_path, capfd, a, b, want):
    folder = _suite(tmp_path, a + b)
    code = halves.run([], halves=(a, b), folder=folder, root=tmp_path, scratch=tmp_path)
    out = capfd.readouterr().out
    assert code == want, out
    # Half b's output is printed whole after half a's, under its heading.
    heading = out.index("==== half b")
    assert out.index("1 passed" if b != ("test_bad.py",) else "1 failed", heading) > heading
    if b == ("test_bad.py",):
        assert "assert (1 + 1) == 3" in out[heading:]
