"""The session history database: recording, idempotence, crash safety, concurrent writers,
migrations, trends and export.

Crash safety and concurrency rest on SQLite's atomic commit and locking (SQLite documentation,
"Atomic Commit In SQLite", "Write-Ahead Logging", "File Locking And Concurrency"); these tests
check that our transactions use them so: a failure or a kill mid-write leaves the database
exactly as it was (its whole logical dump compared), and two writers at once both land.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from railtrace import history
from railtrace.history_cmd import main as cmd_main

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_clips"


def folder_of(tmp: Path, name: str, with_banks: bool = False) -> Path:
    """A copy of a sample clip's truth folder, its run.json naming the clip (as analyse writes)."""
    d = tmp / name
    shutil.copytree(SAMPLES / f"{name}.truth", d)
    (d / "run.json").write_text(json.dumps({"railtrace_version": "test", "clip": str(SAMPLES / f"{name}.mp4")}))
    if with_banks:
        ev = pd.read_csv(d / "events.csv")
        c = ev[ev["kind"] == "cushion"].drop_duplicates("shot")
        rng = np.random.default_rng(4)
        pd.DataFrame({
            "shot": c["shot"].to_numpy(), "rail": c["rail"].to_numpy(), "contact_diamond": c["diamond"].to_numpy(),
            "declared_diamond": c["diamond"].to_numpy() - 0.1, "aim_error_diamonds": rng.normal(0.1, 0.2, len(c)),
            "speed_in_mm_s": c["speed_in"].to_numpy(), "band": np.where(c["speed_in"] < 1000, "soft", "hard"),
            "made": rng.integers(0, 2, len(c)).astype(bool), "future_column": "kept",
        }).to_csv(d / "banks.csv", index=False)
    return d


def dump(db: Path) -> list[str]:
    """The database's whole logical content (schema and every row), SQL text."""
    conn = sqlite3.connect(db)
    try:
        return list(conn.iterdump())
    finally:
        conn.close()


def counts(db: Path) -> dict[str, int]:
    conn = sqlite3.connect(db)
    try:
        return {t: conn.execute(f"SELECT COUNT(*) FROM {t}").fetchone()[0]
                for t in ("clips", "shots", "events", "intents", "bank_results")}
    finally:
        conn.close()


def test_record_matches_files_and_rerecord_replaces(tmp_path):
    d = folder_of(tmp_path, "bank_practice", with_banks=True)
    db = tmp_path / "h.sqlite"
    r1 = history.record_analysis(db, d, player="Ana")
    n_ev = len(pd.read_csv(d / "events.csv"))
    n_sh = len(pd.read_csv(d / "shots.csv"))
    n_bk = len(pd.read_csv(d / "banks.csv"))
    assert (r1.shots, r1.events, r1.banks, r1.replaced) == (n_sh, n_ev, n_bk, False)
    first = counts(db)
    assert first == {"clips": 1, "shots": n_sh, "events": n_ev, "intents": n_sh, "bank_results": n_bk}
    r2 = history.record_analysis(db, d, player="Ana")
    assert r2.replaced and counts(db) == first
    assert r2.content_hash == "sha256:" + history.file_sha256(SAMPLES / "bank_practice.mp4")
    conn = history.connect(db)
    ev = pd.read_sql_query("SELECT * FROM events ORDER BY event", conn)
    extra = json.loads(conn.execute("SELECT extra FROM bank_results LIMIT 1").fetchone()[0])
    conn.close()
    truth = pd.read_csv(d / "events.csv")
    assert np.allclose(ev["t"], truth["t"], atol=1e-12) and list(ev["kind"]) == list(truth["kind"])
    assert extra["future_column"] == "kept"  # columns the audit adds later are kept


@pytest.mark.parametrize("replacing", [False, True])
def test_exception_inside_transaction_leaves_database_unchanged(tmp_path, monkeypatch, replacing):
    db = tmp_path / "h.sqlite"
    a = folder_of(tmp_path, "cut_bank")
    history.record_analysis(db, a)
    target = a if replacing else folder_of(tmp_path, "multi_rail_30fps")
    before = dump(db)
    real = history._insert

    def failing(c, table, clip_id, rows, width):
        real(c, table, clip_id, rows, width)
        if table == "events":  # clip, shots and events are written: fail half-way
            raise RuntimeError("simulated crash mid-write")

    monkeypatch.setattr(history, "_insert", failing)
    with pytest.raises(RuntimeError, match="simulated crash"):
        history.record_analysis(db, target)
    assert dump(db) == before


WRITER = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    sys.path.insert(0, {root!r})
    from railtrace import history
    real = history._insert
    def slow(c, table, clip_id, rows, width):
        real(c, table, clip_id, rows, width)
        if table == "events":
            Path(sys.argv[3]).write_text("inside")
            time.sleep(float(sys.argv[4]))
    history._insert = slow
    go = Path(sys.argv[5])
    while not go.exists():
        time.sleep(0.01)
    r = history.record_analysis(sys.argv[1], sys.argv[2])
    print(r.clip_id, r.events)
""")


def _writer(tmp: Path, db: Path, folder: Path, marker: Path, sleep_s: float, go: Path) -> subprocess.Popen:
    script = tmp / "writer.py"
    script.write_text(WRITER.format(root=str(ROOT)))
    return subprocess.Popen([sys.executable, str(script), str(db), str(folder), str(marker), str(sleep_s), str(go)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def test_killed_writer_leaves_database_unchanged(tmp_path):
    db = tmp_path / "h.sqlite"
    a = folder_of(tmp_path, "cut_bank")
    history.record_analysis(db, a)
    before = dump(db)
    marker, go = tmp_path / "inside", tmp_path / "go"
    go.write_text("")
    proc = _writer(tmp_path, db, a, marker, 60.0, go)  # re-records the same clip (replacing)
    deadline = time.monotonic() + 30
    while not marker.exists() and time.monotonic() < deadline:
        time.sleep(0.02)
    if not marker.exists():
        proc.kill()
        pytest.fail(f"writer never got inside its transaction: {proc.communicate(timeout=10)[1][-800:]}")
    os.kill(proc.pid, signal.SIGKILL)  # mid-transaction: old rows deleted, new ones half written
    proc.communicate(timeout=10)
    assert proc.returncode == -signal.SIGKILL
    assert dump(db) == before
    conn = sqlite3.connect(db)
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    conn.close()


def test_two_writers_at_once_both_land(tmp_path):
    db = tmp_path / "h.sqlite"
    history.connect(db).close()
    folders = [folder_of(tmp_path, "cut_bank"), folder_of(tmp_path, "multi_rail_30fps")]
    go = tmp_path / "go"
    hold_s = 1.0
    procs = [_writer(tmp_path, db, f, tmp_path / f"inside{i}", hold_s, go) for i, f in enumerate(folders)]
    time.sleep(1.0)  # both started and waiting
    t0 = time.monotonic()
    go.write_text("")
    outs = [p.communicate(timeout=60) for p in procs]
    elapsed = time.monotonic() - t0
    assert [p.returncode for p in procs] == [0, 0], [o[1][-500:] for o in outs]
    # Each holds its transaction open hold_s; the second had to wait for the first.
    assert elapsed >= 2 * hold_s
    conn = history.connect(db)
    got = dict(conn.execute("SELECT c.path, COUNT(e.event) FROM clips c JOIN events e ON e.clip_id = c.id GROUP BY c.id"))
    conn.close()
    for f in folders:
        assert got[str(SAMPLES / (f.name + ".mp4"))] == len(pd.read_csv(f / "events.csv"))


def test_migration_from_version_1_keeps_rows_and_newer_is_refused(tmp_path):
    db = tmp_path / "old.sqlite"
    conn = sqlite3.connect(db)
    conn.execute("CREATE TABLE schema_version (version INTEGER NOT NULL PRIMARY KEY, applied_at TEXT NOT NULL, note TEXT)")
    for sql in history.MIGRATIONS[0][2]:
        conn.execute(sql)
    conn.execute("INSERT INTO schema_version VALUES (1, '2026-01-01T00:00:00+00:00', 'v1')")
    conn.execute("INSERT INTO clips(content_hash, session_time, recorded_at) VALUES ('sha256:x', '2026-01-01', '2026-01-01')")
    conn.commit()
    conn.close()
    c = history.connect(db)
    assert history.schema_version(c) == history.SCHEMA_VERSION == 2
    assert c.execute("SELECT content_hash, note FROM clips").fetchall() == [("sha256:x", None)]
    c.execute("INSERT INTO schema_version VALUES (99, 'later', 'from a newer railtrace')")
    c.close()
    with pytest.raises(ValueError, match="newer than this railtrace"):
        history.connect(db)


def test_trends_agree_with_the_files(tmp_path):
    db = tmp_path / "h.sqlite"
    a = folder_of(tmp_path, "bank_practice", with_banks=True)
    b = folder_of(tmp_path, "cushion_check")
    history.record_analysis(db, a, player="Ana", session_time="2026-03-01T19:00")
    history.record_analysis(db, b, player="Ben", session_time="2026-03-08T19:00")
    conn = history.connect(db)
    banks = history.bank_trends(conn)
    cush = history.cushion_trends(conn, player="Ben")
    s = history.sessions(conn, player="Ana")
    conn.close()
    assert list(s["player"]) == ["Ana"]
    # Independent computation with pandas from the CSV files.
    bk = pd.read_csv(a / "banks.csv")
    want = bk.groupby("band")["aim_error_diamonds"].mean()
    got = banks.set_index("band")["bias_diamonds"]
    assert np.allclose(got.loc[want.index], want, atol=1e-12)
    ev = pd.read_csv(b / "events.csv")
    ev = ev[ev["kind"] == "cushion"]
    vn = ev["speed_in"] * np.cos(np.radians(ev["angle_in"]))
    ev = ev[(vn >= 600) & (vn < 2000)]
    want_c = ev.groupby("rail")["restitution"].median()
    assert np.allclose(cush.set_index("rail")["median_ratio"].loc[want_c.index], want_c, atol=1e-12)


def test_history_and_export_commands(tmp_path, capsys):
    db = tmp_path / "h.sqlite"
    a = folder_of(tmp_path, "bank_practice", with_banks=True)
    plot = tmp_path / "trend.png"
    assert cmd_main(["history", "--db", str(db), "--record", str(a), "--player-name", "Ana", "--plot", str(plot)]) == 0
    out = capsys.readouterr().out
    assert "bank_practice.mp4" in out and "Banks by speed band" in out
    import cv2
    img = cv2.imread(str(plot))
    assert img is not None and img.shape[1] == 1100  # 11 in x 100 dpi
    csv = tmp_path / "shots.csv"
    assert cmd_main(["export", "--db", str(db), "--what", "shots", "--out", str(csv)]) == 0
    assert len(pd.read_csv(csv)) == len(pd.read_csv(a / "shots.csv"))
    with pytest.raises(SystemExit):  # argparse refuses an unknown kind (exit 2)
        cmd_main(["export", "--db", str(db), "--what", "nonsense"])
    capsys.readouterr()
    code = cmd_main(["export", "--db", str(db), "--what", "events", "--format", "parquet", "--out", str(tmp_path / "e.parquet")])
    err = capsys.readouterr().err
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        assert code == 2 and "pyarrow" in err and len(err.strip().splitlines()) == 1
    else:
        assert code == 0 and len(pd.read_parquet(tmp_path / "e.parquet")) == len(pd.read_csv(a / "events.csv"))
    assert cmd_main(["export", "--db", str(tmp_path / "none.sqlite"), "--what", "shots"]) == 2
    assert "no history database" in capsys.readouterr().err


def test_default_database_follows_xdg():
    assert history.default_db_path({"XDG_DATA_HOME": "/x/data", "HOME": "/h"}) == Path("/x/data/railtrace/history.sqlite")
    assert history.default_db_path({"HOME": "/h"}) == Path("/h/.local/share/railtrace/history.sqlite")
