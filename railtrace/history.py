"""The session history: every analysed clip recorded in one SQLite database, kept over weeks.

What it holds (one row per thing, table frame units: mm, s, mm/s, degrees, as in the results
format ``../shared/spec/results-format.md``):

* ``tables`` (a physical table: name, playing area, ball), ``players``, ``calibrations`` (each
  distinct calibration.json, by content hash);
* ``clips``: one per analysed clip, keyed by the SHA-256 of the clip file's bytes, with its
  session time, table, player and calibration;
* ``shots`` and ``events``: the results folder's shots.csv and events.csv;
* ``intents``: what the player meant, where the folder's shots.csv states it (aim form, sight,
  target, set speed, cue-tip offsets);
* ``bank_results``: the bank audit's banks.csv (known columns in their own columns, the whole row
  as JSON in ``extra`` so columns added later are kept); ``cushion_results``: the cushion check's
  cushions.csv.

Recording a clip again replaces its rows (``clips.content_hash`` is unique and every child row
hangs off the clip with ``ON DELETE CASCADE``), so re-analysing never duplicates.

Safety:

* **Transactions.** A recording is one ``BEGIN IMMEDIATE ... COMMIT``; any exception rolls it
  back, and a process killed mid-write leaves the database as it was, by SQLite's atomic commit
  (write-ahead log; SQLite documentation, "Atomic Commit In SQLite" and "Write-Ahead Logging").
* **Concurrent writers.** WAL mode lets readers run beside one writer; a second writer waits on
  SQLite's busy timeout (``busy_timeout_s``) and, should that still fail, the whole transaction is
  retried with back-off (``retries``).
* **Schema version.** ``schema_version`` records each migration applied; :data:`MIGRATIONS` are
  applied in order, each in its own transaction, on opening. A database from a newer railtrace is
  refused rather than misread.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import logging
import math
import os
import sqlite3
import time
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterator

import pandas as pd

log = logging.getLogger(__name__)

# Each migration: (version it brings the database to, what it does, SQL statements).
MIGRATIONS: tuple[tuple[int, str, tuple[str, ...]], ...] = (
    (1, "tables, players, calibrations, clips, shots, events, intents, bank and cushion results", (
        """CREATE TABLE tables (
            id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE,
            length_mm REAL, width_mm REAL, ball_diameter_mm REAL)""",
        """CREATE TABLE players (id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE)""",
        """CREATE TABLE calibrations (
            id INTEGER PRIMARY KEY, content_hash TEXT NOT NULL UNIQUE,
            table_id INTEGER REFERENCES tables(id), source TEXT, json TEXT NOT NULL)""",
        """CREATE TABLE clips (
            id INTEGER PRIMARY KEY, content_hash TEXT NOT NULL UNIQUE, path TEXT, results_dir TEXT,
            session_time TEXT NOT NULL, recorded_at TEXT NOT NULL,
            table_id INTEGER REFERENCES tables(id), player_id INTEGER REFERENCES players(id),
            calibration_id INTEGER REFERENCES calibrations(id),
            duration_s REAL, railtrace_version TEXT)""",
        """CREATE TABLE shots (
            clip_id INTEGER NOT NULL REFERENCES clips(id) ON DELETE CASCADE, shot INTEGER NOT NULL,
            t_start REAL, t_end REAL, cue_track INTEGER, strike_speed_mm_s REAL,
            balls_moved INTEGER, cushions INTEGER, collisions INTEGER, pocketed INTEGER,
            PRIMARY KEY (clip_id, shot))""",
        """CREATE TABLE events (
            clip_id INTEGER NOT NULL REFERENCES clips(id) ON DELETE CASCADE, event INTEGER NOT NULL,
            shot INTEGER, t REAL, kind TEXT, track INTEGER, other INTEGER, x REAL, y REAL,
            rail TEXT, diamond REAL, speed_in REAL, speed_out REAL, angle_in REAL, angle_out REAL,
            restitution REAL, PRIMARY KEY (clip_id, event))""",
        """CREATE TABLE intents (
            clip_id INTEGER NOT NULL REFERENCES clips(id) ON DELETE CASCADE, shot INTEGER NOT NULL,
            aim_kind TEXT, aim_rail TEXT, aim_diamond REAL, aim_x REAL, aim_y REAL, aim_ball TEXT,
            target TEXT, speed_set_mm_s REAL, tip_side REAL, tip_height REAL, heading_aimed_deg REAL,
            PRIMARY KEY (clip_id, shot))""",
        """CREATE TABLE bank_results (
            clip_id INTEGER NOT NULL REFERENCES clips(id) ON DELETE CASCADE, bank INTEGER NOT NULL,
            shot INTEGER, rail TEXT, contact_diamond REAL, declared_diamond REAL,
            aim_error_diamonds REAL, mirror_diamond REAL, speed_in_mm_s REAL, band TEXT,
            long_diamonds REAL, made INTEGER, target TEXT, extra TEXT,
            PRIMARY KEY (clip_id, bank))""",
        """CREATE TABLE cushion_results (
            clip_id INTEGER NOT NULL REFERENCES clips(id) ON DELETE CASCADE, row INTEGER NOT NULL,
            measure TEXT, rail TEXT, segment TEXT, band TEXT, speed_ref_mm_s REAL, n REAL,
            value REAL, ci_low REAL, ci_high REAL, flagged INTEGER,
            PRIMARY KEY (clip_id, row))""",
    )),
    (2, "indexes for trend queries; free-text note per clip", (
        "CREATE INDEX clips_by_time ON clips(session_time)",
        "CREATE INDEX events_by_kind ON events(kind, rail)",
        "ALTER TABLE clips ADD COLUMN note TEXT",
    )),
)
SCHEMA_VERSION = MIGRATIONS[-1][0]

EVENT_COLUMNS = ("event", "shot", "t", "kind", "track", "other", "x", "y", "rail", "diamond", "speed_in",
                 "speed_out", "angle_in", "angle_out", "restitution")
INTENT_COLUMNS = ("aim_kind", "aim_rail", "aim_diamond", "aim_x", "aim_y", "aim_ball", "target", "speed_set_mm_s",
                  "tip_side", "tip_height", "heading_aimed_deg")
BANK_COLUMNS = ("shot", "rail", "contact_diamond", "declared_diamond", "aim_error_diamonds", "mirror_diamond",
                "speed_in_mm_s", "band", "long_diamonds", "made", "target")
CUSHION_COLUMNS = ("measure", "rail", "segment", "band", "speed_ref_mm_s", "n", "value", "ci_low", "ci_high", "flagged")


@dataclass(frozen=True)
class HistoryConfig:
    """Settings of the database connection.

    ``busy_timeout_s``: how long a writer waits for another writer's lock before SQLite gives up;
    ``retries`` and ``retry_wait_s``: whole-transaction retries after that (waits double each
    time).
    """

    busy_timeout_s: float = 30.0
    retries: int = 5
    retry_wait_s: float = 0.2

    def __post_init__(self) -> None:
        if self.busy_timeout_s <= 0 or self.retries < 0 or self.retry_wait_s < 0:
            raise ValueError(f"busy_timeout_s {self.busy_timeout_s}, retries {self.retries} and retry_wait_s "
                             f"{self.retry_wait_s} must be positive (retries may be 0)")


@dataclass(frozen=True)
class Recorded:
    """What :func:`record_analysis` stored: the clip's id and hash, counts, and whether an earlier
    recording of the same clip was replaced."""

    clip_id: int
    content_hash: str
    shots: int
    events: int
    banks: int
    replaced: bool


def default_db_path(environ: dict | None = None) -> Path:
    """``$XDG_DATA_HOME/railtrace/history.sqlite``, or ``~/.local/share/railtrace/history.sqlite``
    (the XDG Base Directory specification's default data folder)."""
    env = os.environ if environ is None else environ
    base = env.get("XDG_DATA_HOME") or str(Path(env.get("HOME", str(Path.home()))) / ".local" / "share")
    return Path(base) / "railtrace" / "history.sqlite"


def connect(path: str | os.PathLike, config: HistoryConfig = HistoryConfig()) -> sqlite3.Connection:
    """Open (creating if needed) the history database at ``path`` and bring its schema up to
    :data:`SCHEMA_VERSION`. Transactions are explicit (``isolation_level=None``); foreign keys on;
    WAL journal. ValueError for a file that is not a railtrace history database or is newer."""
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    try:
        conn = sqlite3.connect(str(p), timeout=config.busy_timeout_s, isolation_level=None)
        conn.execute(f"PRAGMA busy_timeout = {int(config.busy_timeout_s * 1000)}")
        conn.execute("PRAGMA foreign_keys = ON")
        mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            log.warning("%s: journal mode %s (WAL not available on this file system)", p, mode)
        # FULL with WAL: a committed recording survives a power cut as well as a crash.
        conn.execute("PRAGMA synchronous = FULL")
    except sqlite3.DatabaseError as exc:
        raise ValueError(f"{p} is not a usable SQLite database ({exc}); give another --db") from None
    try:
        migrate(conn, config)
    except BaseException:
        conn.close()
        raise
    return conn


def schema_version(conn: sqlite3.Connection) -> int:
    """The highest migration applied (0 for an empty database)."""
    have = conn.execute("SELECT name FROM sqlite_master WHERE type='table' AND name='schema_version'").fetchone()
    if not have:
        return 0
    v = conn.execute("SELECT MAX(version) FROM schema_version").fetchone()[0]
    return int(v or 0)


@contextlib.contextmanager
def transaction(conn: sqlite3.Connection) -> Iterator[sqlite3.Connection]:
    """``BEGIN IMMEDIATE`` (take the write lock now, so the transaction cannot fail half-way on a
    lock upgrade) ... ``COMMIT``; any exception rolls everything back and is re-raised."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield conn
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


def _is_busy(exc: sqlite3.OperationalError) -> bool:
    text = str(exc).lower()
    return "locked" in text or "busy" in text


def _with_retries(conn: sqlite3.Connection, config: HistoryConfig, work):
    """Run ``work(conn)`` inside :func:`transaction`, retrying the whole transaction when another
    writer holds the lock past the busy timeout."""
    for attempt in range(config.retries + 1):
        try:
            with transaction(conn):
                return work(conn)
        except sqlite3.OperationalError as exc:
            if not _is_busy(exc) or attempt == config.retries:
                raise
            wait = config.retry_wait_s * 2 ** attempt
            log.info("database busy (%s); retrying in %.1f s", exc, wait)
            time.sleep(wait)
    raise AssertionError("unreachable")  # the loop returns or raises


def migrate(conn: sqlite3.Connection, config: HistoryConfig = HistoryConfig()) -> int:
    """Apply every migration the database lacks, each in its own transaction (the version is
    re-read under the write lock, so two processes opening a new database at once apply each
    migration once). Returns the version reached."""
    for version, note, statements in MIGRATIONS:
        def apply(c: sqlite3.Connection, version=version, note=note, statements=statements) -> None:
            have = schema_version(c)
            if have >= version:
                return
            if have != version - 1:
                raise ValueError(f"history database is at schema version {have}, cannot apply {version}")
            if version == 1:
                c.execute("CREATE TABLE schema_version (version INTEGER NOT NULL PRIMARY KEY, "
                          "applied_at TEXT NOT NULL, note TEXT)")
            for sql in statements:
                c.execute(sql)
            c.execute("INSERT INTO schema_version VALUES (?, ?, ?)", (version, _now(), note))

        if schema_version(conn) < version:
            _with_retries(conn, config, apply)
    have = schema_version(conn)
    if have > SCHEMA_VERSION:
        raise ValueError(f"history database has schema version {have}, newer than this railtrace knows "
                         f"({SCHEMA_VERSION}); upgrade railtrace or give another --db")
    if have == SCHEMA_VERSION:
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        missing = {"tables", "players", "clips", "shots", "events"} - tables
        if missing:
            raise ValueError(f"database lacks table(s) {', '.join(sorted(missing))}; it is not a railtrace history")
    return have


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


# ---------------------------------------------------------------------------------------------
# Reading a results folder
# ---------------------------------------------------------------------------------------------
def clip_path_of(out_dir: str | os.PathLike) -> Path | None:
    """The clip a results folder was made from: run.json's ``clip``, or for a rendered clip's
    ``NAME.truth`` folder the ``NAME.mp4`` beside it; None when neither exists."""
    d = Path(out_dir)
    try:
        run = json.loads((d / "run.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        run = {}
    clip = run.get("clip")
    if clip and Path(clip).is_file():
        return Path(clip)
    if d.name.endswith(".truth"):
        sibling = d.with_name(d.name[: -len(".truth")] + ".mp4")
        if sibling.is_file():
            return sibling
    return None


def file_sha256(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    """SHA-256 of a file's bytes (hex), read in 1 MiB pieces."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while block := f.read(chunk):
            h.update(block)
    return h.hexdigest()


def content_hash(out_dir: str | os.PathLike) -> tuple[str, Path | None]:
    """(key, clip path) of a results folder: ``sha256:`` of the clip's bytes when the clip is
    found; otherwise ``results-sha256:`` of the folder's tracks.csv, with a warning (moving the
    clip then re-analysing would record it twice)."""
    clip = clip_path_of(out_dir)
    if clip is not None:
        return "sha256:" + file_sha256(clip), clip
    log.warning("%s: clip not found; keying the history by the results' tracks.csv instead", out_dir)
    return "results-sha256:" + file_sha256(Path(out_dir) / "tracks.csv"), None


def _val(v):
    """A DataFrame cell as a value SQLite stores: NaN -> NULL, numpy scalars -> Python."""
    if v is None:
        return None
    if hasattr(v, "item"):
        v = v.item()
    if isinstance(v, float) and math.isnan(v):
        return None
    return v


def _rows(df: pd.DataFrame, cols) -> list[tuple]:
    """Rows of ``df`` for the columns ``cols`` (missing columns give NULL)."""
    present = [c if c in df.columns else None for c in cols]
    out = []
    for rec in df.itertuples(index=False):
        d = rec._asdict()
        out.append(tuple(_val(d[c]) if c is not None else None for c in present))
    return out


def _label(v):
    """A text cell (a ball id read back from CSV may arrive as 1.0): '1', 'top', or None."""
    if v is None:
        return None
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def _made(v):
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return None
    return 1 if str(v).strip().lower() in ("1", "1.0", "true", "yes") else 0


@dataclass(frozen=True)
class _Folder:
    """A results folder read for recording."""

    shots: pd.DataFrame
    events: pd.DataFrame
    calibration_text: str
    calibration: dict
    run: dict
    banks: pd.DataFrame | None
    cushions: pd.DataFrame | None


def _read_folder(d: Path) -> _Folder:
    for name in ("events.csv", "shots.csv", "calibration.json"):
        if not (d / name).is_file():
            raise ValueError(f"{d} has no {name}; give a folder written by 'railtrace analyse --out DIR'")
    try:
        shots = pd.read_csv(d / "shots.csv")
        events = pd.read_csv(d / "events.csv")
        text = (d / "calibration.json").read_text(encoding="utf-8")
        calibration = json.loads(text)
        run = json.loads((d / "run.json").read_text(encoding="utf-8")) if (d / "run.json").is_file() else {}
    except (OSError, ValueError, UnicodeDecodeError) as exc:
        raise ValueError(f"{d} holds an unreadable results file ({type(exc).__name__}: {exc})") from None
    for df, name, cols in ((shots, "shots.csv", ("shot", "t_start", "t_end", "cue_track")),
                           (events, "events.csv", ("event", "shot", "t", "kind", "track"))):
        missing = [c for c in cols if c not in df.columns]
        if missing:
            raise ValueError(f"{d / name} lacks column(s) {', '.join(missing)}")
    if not isinstance(calibration, dict) or "table" not in calibration:
        raise ValueError(f"{d / 'calibration.json'} lacks its 'table' entry")

    def optional(name: str) -> pd.DataFrame | None:
        if not (d / name).is_file():
            return None
        try:
            return pd.read_csv(d / name)
        except (OSError, ValueError) as exc:
            log.warning("%s: %s not recorded (%s)", d, name, exc)
            return None

    return _Folder(shots, events, text, calibration, run, optional("banks.csv"), optional("cushions.csv"))


def _strike_speeds(shots: pd.DataFrame, events: pd.DataFrame) -> list:
    """Per shot row: the struck ball's speed just after the strike (mm/s) or None."""
    starts = events[events["kind"] == "start"]
    out = []
    for s, cue in zip(shots["shot"], shots["cue_track"]):
        m = starts[(starts["shot"] == s) & (starts["track"] == cue)]
        out.append(_val(m["speed_out"].iloc[0]) if len(m) and "speed_out" in m.columns else None)
    return out


def record_analysis(
    db: str | os.PathLike | sqlite3.Connection,
    out_dir: str | os.PathLike,
    *,
    player: str | None = None,
    table_name: str | None = None,
    session_time: str | None = None,
    config: HistoryConfig = HistoryConfig(),
) -> Recorded:
    """Record results folder ``out_dir`` into the history ``db`` (a path, or an open connection
    from :func:`connect`), replacing any earlier recording of the same clip, all in one
    transaction.

    ``player``: who played (None: not known); ``table_name``: which physical table (default: the
    calibration's table name and size, e.g. ``9ft 2540x1270``); ``session_time``: ISO 8601 time of
    play (default: the clip file's modification time, else now). ValueError for a folder that is
    not a results folder.
    """
    d = Path(out_dir)
    if not d.is_dir():
        raise ValueError(f"{d} is not a folder; give a folder written by 'railtrace analyse --out DIR'")
    folder = _read_folder(d)
    key, clip = content_hash(d)
    if session_time is None:
        stamp = clip.stat().st_mtime if clip is not None else time.time()
        session_time = datetime.fromtimestamp(stamp, timezone.utc).isoformat(timespec="seconds")
    else:
        try:
            session_time = datetime.fromisoformat(session_time).isoformat(timespec="seconds")
        except ValueError:
            raise ValueError(f"session time {session_time!r} is not an ISO 8601 date/time like 2026-03-14T19:30") from None
    t = folder.calibration["table"]
    tname = table_name or f"{t.get('name', 'table')} {float(t['length_mm']):g}x{float(t['width_mm']):g}"
    shots, events = folder.shots, folder.events
    shot_rows = list(zip(
        *[[_val(v) for v in shots[c]] for c in ("shot", "t_start", "t_end", "cue_track")],
        _strike_speeds(shots, events),
        *[[_val(v) for v in shots[c]] if c in shots.columns else [None] * len(shots)
          for c in ("balls_moved", "cushions", "collisions", "pocketed")],
    ))
    event_rows = _rows(events, EVENT_COLUMNS)
    intent_rows = []
    if "aim_kind" in shots.columns:
        for s, rec in zip(shots["shot"], _rows(shots, INTENT_COLUMNS)):
            if any(v is not None for v in rec):
                intent_rows.append((int(s), *(_label(v) if i in (0, 1, 5, 6) else v for i, v in enumerate(rec))))
    bank_rows = []
    if folder.banks is not None:
        extras = folder.banks.to_dict(orient="records")
        for i, (rec, extra) in enumerate(zip(_rows(folder.banks, BANK_COLUMNS), extras)):
            rec = list(rec)
            rec[9] = _made(rec[9])
            bank_rows.append((i, *rec, json.dumps({k: _val(v) for k, v in extra.items()}, default=str)))
    cushion_rows = []
    if folder.cushions is not None:
        for i, rec in enumerate(_rows(folder.cushions, CUSHION_COLUMNS)):
            rec = list(rec)
            rec[9] = _made(rec[9])
            cushion_rows.append((i, *rec))
    duration = float(shots["t_end"].max()) if len(shots) else None
    cal_hash = "sha256:" + hashlib.sha256(folder.calibration_text.encode("utf-8")).hexdigest()

    def work(c: sqlite3.Connection) -> Recorded:
        c.execute("INSERT INTO tables(name, length_mm, width_mm, ball_diameter_mm) VALUES (?, ?, ?, ?) "
                  "ON CONFLICT(name) DO NOTHING",
                  (tname, float(t["length_mm"]), float(t["width_mm"]), _val(t.get("ball_diameter_mm"))))
        table_id = c.execute("SELECT id FROM tables WHERE name = ?", (tname,)).fetchone()[0]
        player_id = None
        if player:
            c.execute("INSERT INTO players(name) VALUES (?) ON CONFLICT(name) DO NOTHING", (player,))
            player_id = c.execute("SELECT id FROM players WHERE name = ?", (player,)).fetchone()[0]
        c.execute("INSERT INTO calibrations(content_hash, table_id, source, json) VALUES (?, ?, ?, ?) "
                  "ON CONFLICT(content_hash) DO NOTHING",
                  (cal_hash, table_id, folder.calibration.get("source"), folder.calibration_text))
        cal_id = c.execute("SELECT id FROM calibrations WHERE content_hash = ?", (cal_hash,)).fetchone()[0]
        replaced = c.execute("DELETE FROM clips WHERE content_hash = ?", (key,)).rowcount > 0
        clip_id = c.execute(
            "INSERT INTO clips(content_hash, path, results_dir, session_time, recorded_at, table_id, player_id, "
            "calibration_id, duration_s, railtrace_version) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (key, str(clip) if clip else None, str(d.resolve()), session_time, _now(), table_id, player_id, cal_id,
             duration, folder.run.get("railtrace_version")),
        ).lastrowid
        _insert(c, "shots", clip_id, shot_rows, 9)
        _insert(c, "events", clip_id, event_rows, 15)
        _insert(c, "intents", clip_id, intent_rows, 12)
        _insert(c, "bank_results", clip_id, bank_rows, 13)
        _insert(c, "cushion_results", clip_id, cushion_rows, 11)
        return Recorded(int(clip_id), key, len(shot_rows), len(event_rows), len(bank_rows), replaced)

    if isinstance(db, sqlite3.Connection):
        return _with_retries(db, config, work)
    conn = connect(db, config)
    try:
        return _with_retries(conn, config, work)
    finally:
        conn.close()


def _insert(c: sqlite3.Connection, table: str, clip_id: int, rows: list[tuple], width: int) -> None:
    """Insert ``rows`` (each ``width`` values after the clip id) into ``table``."""
    if not rows:
        return
    marks = ", ".join("?" * (width + 1))
    c.executemany(f"INSERT INTO {table} VALUES ({marks})", [(clip_id, *r) for r in rows])


# ---------------------------------------------------------------------------------------------
# Reading the history
# ---------------------------------------------------------------------------------------------
EXPORTS = {
    "tables": "SELECT * FROM tables ORDER BY id",
    "players": "SELECT * FROM players ORDER BY id",
    "calibrations": "SELECT id, content_hash, table_id, source, json FROM calibrations ORDER BY id",
    "clips": ("SELECT c.id AS clip_id, c.content_hash, c.path, c.results_dir, c.session_time, c.recorded_at, "
              "t.name AS table_name, p.name AS player, c.calibration_id, c.duration_s, c.railtrace_version, c.note "
              "FROM clips c LEFT JOIN tables t ON t.id = c.table_id LEFT JOIN players p ON p.id = c.player_id "
              "ORDER BY c.session_time, c.id"),
    "sessions": None,  # built by sessions()
    "shots": "SELECT * FROM shots ORDER BY clip_id, shot",
    "events": "SELECT * FROM events ORDER BY clip_id, event",
    "intents": "SELECT * FROM intents ORDER BY clip_id, shot",
    "banks": "SELECT * FROM bank_results ORDER BY clip_id, bank",
    "cushions": "SELECT * FROM cushion_results ORDER BY clip_id, row",
}


def _filter(player: str | None, table: str | None) -> tuple[str, list]:
    where, params = [], []
    if player:
        where.append("p.name = ?")
        params.append(player)
    if table:
        where.append("t.name = ?")
        params.append(table)
    return (" WHERE " + " AND ".join(where)) if where else "", params


def sessions(conn: sqlite3.Connection, player: str | None = None, table: str | None = None) -> pd.DataFrame:
    """One row per recorded clip, in time order: ``clip_id``, ``session_time``, ``player``,
    ``table_name``, ``path``, ``shots``, ``cushions`` (contacts), ``banks``, ``banks_made``."""
    where, params = _filter(player, table)
    sql = (
        "SELECT c.id AS clip_id, c.session_time, p.name AS player, t.name AS table_name, c.path, "
        "(SELECT COUNT(*) FROM shots s WHERE s.clip_id = c.id) AS shots, "
        "(SELECT COUNT(*) FROM events e WHERE e.clip_id = c.id AND e.kind = 'cushion') AS cushions, "
        "(SELECT COUNT(*) FROM bank_results b WHERE b.clip_id = c.id) AS banks, "
        "(SELECT SUM(b.made) FROM bank_results b WHERE b.clip_id = c.id) AS banks_made "
        "FROM clips c LEFT JOIN tables t ON t.id = c.table_id LEFT JOIN players p ON p.id = c.player_id"
        f"{where} ORDER BY c.session_time, c.id"
    )
    return pd.read_sql_query(sql, conn, params=params)


def export_table(conn: sqlite3.Connection, what: str, player: str | None = None, table: str | None = None) -> pd.DataFrame:
    """Everything of one kind (:data:`EXPORTS`), optionally only the clips of ``player`` /
    ``table``. ValueError naming the valid kinds for an unknown ``what``."""
    if what not in EXPORTS:
        raise ValueError(f"--what {what!r} is not known; use one of: {', '.join(EXPORTS)}")
    if what == "sessions":
        return sessions(conn, player, table)
    df = pd.read_sql_query(EXPORTS[what], conn)
    if (player or table) and "clip_id" in df.columns:
        keep = set(sessions(conn, player, table)["clip_id"])
        df = df[df["clip_id"].isin(keep)].reset_index(drop=True)
    return df


def bank_trends(conn: sqlite3.Connection, player: str | None = None, table: str | None = None) -> pd.DataFrame:
    """Per session and speed band: ``n`` banks, ``bias_diamonds`` (mean aim error, actual minus
    declared contact) and ``make_rate`` (made / n). Empty when no bank results are recorded."""
    where, params = _filter(player, table)
    sql = ("SELECT c.id AS clip_id, c.session_time, b.band, COUNT(*) AS n, AVG(b.aim_error_diamonds) AS bias_diamonds, "
           "AVG(b.made) AS make_rate FROM bank_results b JOIN clips c ON c.id = b.clip_id "
           "LEFT JOIN tables t ON t.id = c.table_id LEFT JOIN players p ON p.id = c.player_id"
           f"{where} GROUP BY c.id, b.band ORDER BY c.session_time, c.id, b.band")
    return pd.read_sql_query(sql, conn, params=params)


def cushion_trends(conn: sqlite3.Connection, player: str | None = None, table: str | None = None,
                   band_mm_s: tuple[float, float] = (600.0, 2000.0)) -> pd.DataFrame:
    """Per session and rail: ``n`` cushion contacts whose impact speed normal to the cushion lies
    in ``band_mm_s`` and their ``median_ratio`` (outgoing over incoming normal speed, the events'
    ``restitution``). One band only, because the ratio depends on speed (Mathavan et al. 2009):
    a trend mixing speeds would show the mix, not the cushion. The default 0.6-2 m/s is the
    cushion check's medium and firm bands."""
    where, params = _filter(player, table)
    sql = ("SELECT c.id AS clip_id, c.session_time, e.rail, e.speed_in, e.angle_in, e.restitution "
           "FROM events e JOIN clips c ON c.id = e.clip_id LEFT JOIN tables t ON t.id = c.table_id "
           "LEFT JOIN players p ON p.id = c.player_id"
           f"{where}{' AND' if where else ' WHERE'} e.kind = 'cushion' AND e.restitution IS NOT NULL")
    df = pd.read_sql_query(sql, conn, params=params)
    cols = ["clip_id", "session_time", "rail", "n", "median_ratio"]
    if len(df) == 0:
        return pd.DataFrame(columns=cols)
    import numpy as np

    vn = df["speed_in"].astype(float) * np.cos(np.radians(df["angle_in"].astype(float)))
    df = df[(vn >= band_mm_s[0]) & (vn < band_mm_s[1])]
    if len(df) == 0:
        return pd.DataFrame(columns=cols)
    g = df.groupby(["clip_id", "session_time", "rail"], sort=True)["restitution"]
    out = g.agg(n="count", median_ratio="median").reset_index()
    return out.sort_values(["session_time", "clip_id", "rail"]).reset_index(drop=True)[cols]
