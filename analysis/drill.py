"""Stating what a bank shot was meant to do: drill files (TOML) and after-the-fact intent CSVs.

A coach says, per shot or for a repeating drill, which ball to watch, its target (a pocket, a
point on a rail in diamonds, or a table point), the aim the player takes (a sight on a rail in
diamonds, or a table point), and optionally the intended speed band, the cue-tip offsets and how
many cushions the bank takes. ``docs/drills.md`` documents the format with examples.

Frames and units: the table frame of ``vision/table.py`` (mm; rails ``bottom``/``right``/``top``/
``left``; diamonds counted from each rail's lower-coordinate end). Tip offsets are fractions of the
ball radius, as in ``railtrace/scene.py``.

Every problem is a :class:`DrillError` (a ``ValueError``) with one line naming the file, the line
and the fix; nothing here writes files.
"""

from __future__ import annotations

import csv
import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from vision.table import RAILS, TableSpec

BANDS = ("soft", "medium", "hard")
KINDS = ("bank", "kick")
# Tip offsets beyond this fraction of the radius miscue (as railtrace/scene.py checks).
MAX_TIP = 0.6


class DrillError(ValueError):
    """A drill or intents file that cannot be used; the message names the file, line and fix."""


@dataclass(frozen=True)
class Target:
    """Where the bank is meant to go. ``kind`` is ``pocket`` (``pocket`` names it), ``rail``
    (``rail`` and ``diamond``) or ``point`` (``point_mm``, table frame mm)."""

    kind: str
    pocket: str | None = None
    rail: str | None = None
    diamond: float | None = None
    point_mm: tuple[float, float] | None = None

    def label(self) -> str:
        """Short text form: ``bottom-side``, ``top:3.5`` or ``(1200,300)``."""
        if self.kind == "pocket":
            return str(self.pocket)
        if self.kind == "rail":
            return f"{self.rail}:{self.diamond:g}"
        return f"({self.point_mm[0]:.0f},{self.point_mm[1]:.0f})"


@dataclass(frozen=True)
class AimSpec:
    """The aim the player takes: ``sight`` (``rail``, ``diamond``: the sight on the rail top) or
    ``point`` (``point_mm``, a table point the ball's centre is sent through)."""

    kind: str
    rail: str | None = None
    diamond: float | None = None
    point_mm: tuple[float, float] | None = None

    def label(self) -> str:
        if self.kind == "sight":
            return f"{self.rail}:{self.diamond:g}"
        return f"({self.point_mm[0]:.0f},{self.point_mm[1]:.0f})"


@dataclass(frozen=True)
class ShotIntent:
    """What one shot was meant to do.

    ``ball``: ``object`` (the first ball the cue ball strikes), ``cue`` (a kick), a track number
    as text (``"3"``) or a ball label where the results carry one. ``rails``: cushions in the bank
    (None: as many as the ball meets before reaching the target). ``band``: intended speed band or
    None. ``tip_side``/``tip_height``: cue-tip offsets (fractions of R) or None when unstated.
    ``where``: file and line the intent came from, for messages.
    """

    ball: str = "object"
    target: Target | None = None
    aim: AimSpec | None = None
    band: str | None = None
    tip_side: float | None = None
    tip_height: float | None = None
    rails: int | None = None
    shot: int | None = None
    where: str = ""


@dataclass(frozen=True)
class Drill:
    """A drill file: who and where, and the intents (per shot, or one repeating for every shot)."""

    player: str
    table_name: str
    intents: tuple[ShotIntent, ...]
    repeat: bool
    source: str


# --- drill files -------------------------------------------------------------------------------
def load_drill(path: str | Path, table: TableSpec) -> Drill:
    """Read and check a drill file against ``table``; DrillError (one line) on any problem."""
    p = Path(path)
    if not p.is_file():
        raise DrillError(f"drill file {p} does not exist; give the path of a .toml drill file")
    text = p.read_text(encoding="utf-8")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        # tomllib puts the place at the end of its message, "(at line 2, column 22)" or "(at end
        # of document)"; it goes in front here, where every other drill error names its line.
        m = re.search(r"\s*\(at line (\d+), column (\d+)\)$", str(exc))
        line = m.group(1) if m else str(text.count("\n") + 1)
        what = str(exc)[: m.start()] if m else re.sub(r"\s*\(at end of document\)$", "", str(exc))
        col = f" at column {m.group(2)}" if m else " at the end"
        raise DrillError(f"{p}:{line}: not valid TOML: {what}{col}; check the quotes, brackets and "
                         "= signs on that line (format: docs/drills.md)") from None
    lines = _LineFinder(text)
    unknown = sorted(set(doc) - {"player", "table", "drill", "shot", "name", "notes"})
    if unknown:
        raise DrillError(
            f"{p}:{lines.key(unknown[0])}: unknown key {unknown[0]!r}; use player, table, name, "
            "notes, [drill] or [[shot]]"
        )
    player = _string(doc, "player", "", p, lines.key("player"), "")
    table_name = _string(doc, "table", "", p, lines.key("table"), "")
    has_drill = "drill" in doc
    has_shots = "shot" in doc
    if has_drill == has_shots:
        raise DrillError(
            f"{p}:1: give either one [drill] (the same intent for every shot) or [[shot]] entries "
            "(one per shot), not {}".format("both" if has_drill else "neither")
        )
    if has_drill:
        if not isinstance(doc["drill"], dict):
            raise DrillError(f"{p}:{lines.key('drill')}: drill must be a table written [drill]")
        intents = (_intent(doc["drill"], table, p, lines.section("drill", 0), None),)
    else:
        if not isinstance(doc["shot"], list) or not all(isinstance(s, dict) for s in doc["shot"]):
            raise DrillError(f"{p}:{lines.key('shot')}: shots must be written as [[shot]] tables")
        intents = tuple(
            _intent(s, table, p, lines.section("shot", i), i) for i, s in enumerate(doc["shot"])
        )
        numbers = [it.shot for it in intents]
        if len(set(numbers)) != len(numbers):
            dup = next(n for n in numbers if numbers.count(n) > 1)
            raise DrillError(f"{p}: shot {dup} is stated twice; give each shot number once")
    return Drill(player, table_name, intents, has_drill, str(p))


def _intent(d: dict[str, Any], table: TableSpec, p: Path, block: "_Block", index: int | None) -> ShotIntent:
    allowed = {"ball", "target", "aim", "band", "spin", "rails", "shot", "kind"}
    for key in d:
        if key not in allowed:
            raise DrillError(
                f"{p}:{block.line(key)}: unknown key {key!r}; use {', '.join(sorted(allowed))}"
            )
    where = f"{p}:{block.start}"
    shot = index
    if "shot" in d:
        if index is None:
            raise DrillError(f"{p}:{block.line('shot')}: a [drill] applies to every shot; remove 'shot'")
        shot = _int(d, "shot", p, block.line("shot"), 0, 100000)
    kind = d.get("kind", "bank")
    if kind not in KINDS:
        raise DrillError(f"{p}:{block.line('kind')}: kind = {kind!r}; use bank or kick")
    default_ball = "cue" if kind == "kick" else "object"
    ball = d.get("ball", default_ball)
    if isinstance(ball, bool) or not isinstance(ball, (str, int)):
        raise DrillError(f"{p}:{block.line('ball')}: ball must be \"object\", \"cue\", a label or a track number, got {ball!r}")
    target = _target(d.get("target"), table, p, block.line("target")) if "target" in d else None
    aim = _aim(d.get("aim"), table, p, block.line("aim")) if "aim" in d else None
    band = d.get("band")
    if band is not None and band not in BANDS:
        raise DrillError(f"{p}:{block.line('band')}: band = {band!r}; use soft, medium or hard")
    side = height = None
    if "spin" in d:
        spin = d["spin"]
        if not isinstance(spin, dict) or not set(spin) <= {"side", "height"}:
            raise DrillError(f"{p}:{block.line('spin')}: spin must be {{ side = 0.2, height = 0.0 }} (fractions of the radius)")
        side = _float(spin, "side", p, block.line("spin"), -MAX_TIP, MAX_TIP) if "side" in spin else 0.0
        height = _float(spin, "height", p, block.line("spin"), -MAX_TIP, MAX_TIP) if "height" in spin else 0.0
        if math.hypot(side, height) > MAX_TIP:
            raise DrillError(f"{p}:{block.line('spin')}: tip offset {math.hypot(side, height):.2f} R is a miscue; keep it within {MAX_TIP} R")
    rails = _int(d, "rails", p, block.line("rails"), 1, 6) if "rails" in d else None
    return ShotIntent(str(ball), target, aim, band, side, height, rails, shot, where)


def _target(value: Any, table: TableSpec, p: Path, line: int) -> Target:
    if isinstance(value, str):
        try:
            table.pocket(value)
        except ValueError as exc:
            raise DrillError(f"{p}:{line}: target: {exc}") from None
        return Target("pocket", pocket=value)
    if isinstance(value, dict) and set(value) == {"rail", "diamond"}:
        rail, dia = _rail_diamond(value, table, p, line, "target")
        return Target("rail", rail=rail, diamond=dia)
    if isinstance(value, dict) and set(value) == {"point"}:
        return Target("point", point_mm=_point(value["point"], table, p, line, "target.point"))
    raise DrillError(
        f"{p}:{line}: target must be a pocket name (e.g. \"bottom-side\"), {{ rail = \"top\", "
        f"diamond = 3.5 }} or {{ point = [x, y] }} in mm, got {value!r}"
    )


def _aim(value: Any, table: TableSpec, p: Path, line: int) -> AimSpec:
    if isinstance(value, dict) and set(value) == {"rail", "diamond"}:
        rail, dia = _rail_diamond(value, table, p, line, "aim")
        return AimSpec("sight", rail=rail, diamond=dia)
    if isinstance(value, dict) and set(value) == {"point"}:
        return AimSpec("point", point_mm=_point(value["point"], table, p, line, "aim.point"))
    raise DrillError(
        f"{p}:{line}: aim must be a sight {{ rail = \"top\", diamond = 3.5 }} or {{ point = [x, y] }} "
        f"in mm, got {value!r}"
    )


def _rail_diamond(value: dict, table: TableSpec, p: Path, line: int, what: str) -> tuple[str, float]:
    rail = value["rail"]
    if rail not in RAILS:
        raise DrillError(f"{p}:{line}: {what}.rail = {rail!r}; use one of {', '.join(RAILS)}")
    dia = value["diamond"]
    if isinstance(dia, bool) or not isinstance(dia, (int, float)):
        raise DrillError(f"{p}:{line}: {what}.diamond must be a number of diamonds, got {dia!r}")
    top = 8.0 if rail in ("bottom", "top") else 4.0
    if not 0.0 <= dia <= top:
        raise DrillError(
            f"{p}:{line}: {what}.diamond = {dia} is off the {rail} rail; use 0..{top:g} diamonds"
        )
    return rail, float(dia)


def _point(value: Any, table: TableSpec, p: Path, line: int, what: str) -> tuple[float, float]:
    if (not isinstance(value, list) or len(value) != 2
            or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)):
        raise DrillError(f"{p}:{line}: {what} must be [x, y] in mm, got {value!r}")
    x, y = float(value[0]), float(value[1])
    if not (0.0 <= x <= table.length_mm and 0.0 <= y <= table.width_mm):
        raise DrillError(
            f"{p}:{line}: {what} ({x:g}, {y:g}) mm is off the table; keep 0..{table.length_mm:g} "
            f"x 0..{table.width_mm:g} mm"
        )
    return x, y


def _string(d: dict, key: str, default: str, p: Path, line: int, _fix: str) -> str:
    value = d.get(key, default)
    if not isinstance(value, str):
        raise DrillError(f"{p}:{line}: {key} must be text in quotes, got {value!r}")
    return value


def _int(d: dict, key: str, p: Path, line: int, lo: int, hi: int) -> int:
    value = d[key]
    if isinstance(value, bool) or not isinstance(value, int):
        raise DrillError(f"{p}:{line}: {key} must be a whole number, got {value!r}")
    if not lo <= value <= hi:
        raise DrillError(f"{p}:{line}: {key} = {value} is outside {lo}..{hi}")
    return value


def _float(d: dict, key: str, p: Path, line: int, lo: float, hi: float) -> float:
    value = d[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise DrillError(f"{p}:{line}: {key} must be a number, got {value!r}")
    if not lo <= value <= hi:
        raise DrillError(f"{p}:{line}: {key} = {value} is outside {lo:g}..{hi:g}")
    return float(value)


@dataclass(frozen=True)
class _Block:
    start: int
    keys: dict[str, int]

    def line(self, key: str) -> int:
        return self.keys.get(key, self.start)


class _LineFinder:
    """Line numbers (from 1) of top-level keys and of keys inside ``[name]``/``[[name]]`` blocks.

    tomllib gives no positions for values it parsed, so we find them in the text: enough to point
    the user at the right line.
    """

    _HEADER = re.compile(r"^\s*\[\[?\s*([A-Za-z0-9_.-]+)\s*\]\]?\s*(#.*)?$")
    _KEY = re.compile(r"^\s*([A-Za-z0-9_-]+)\s*=")

    def __init__(self, text: str) -> None:
        self.top: dict[str, int] = {}
        self.blocks: dict[str, list[_Block]] = {}
        current = None
        for n, raw in enumerate(text.splitlines(), start=1):
            h = self._HEADER.match(raw)
            if h:
                name = h.group(1)
                current = _Block(n, {})
                self.blocks.setdefault(name, []).append(current)
                self.top.setdefault(name, n)
                continue
            k = self._KEY.match(raw)
            if k:
                if current is None:
                    self.top.setdefault(k.group(1), n)
                else:
                    current.keys.setdefault(k.group(1), n)

    def key(self, key: str) -> int:
        return self.top.get(key, 1)

    def section(self, name: str, index: int) -> _Block:
        blocks = self.blocks.get(name, [])
        return blocks[index] if index < len(blocks) else _Block(1, {})


# --- intents after the fact ------------------------------------------------------------------
INTENT_COLUMNS = ("shot", "ball", "target", "aim", "band", "tip_side", "tip_height", "rails")


def load_intents_csv(path: str | Path, table: TableSpec) -> tuple[ShotIntent, ...]:
    """Intents added after the fact: a CSV with a header and one row per shot.

    Columns: ``shot`` (required, from 0), ``target`` (pocket name, ``rail:diamond`` or
    ``x;y`` mm), ``aim`` (``rail:diamond`` for a sight or ``x;y`` mm), and optionally ``ball``,
    ``band``, ``tip_side``, ``tip_height``, ``rails``. Empty cells mean unstated.
    """
    p = Path(path)
    if not p.is_file():
        raise DrillError(f"intents file {p} does not exist; give a CSV with a header row")
    with p.open(newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        header = reader.fieldnames or []
        bad = [c for c in header if c not in INTENT_COLUMNS]
        if "shot" not in header or bad:
            raise DrillError(
                f"{p}:1: header {','.join(header)!r} must name 'shot' and only columns from "
                f"{', '.join(INTENT_COLUMNS)}"
            )
        out = []
        for i, row in enumerate(reader):
            line = i + 2
            out.append(_csv_intent(row, table, p, line))
    numbers = [it.shot for it in out]
    if len(set(numbers)) != len(numbers):
        dup = next(n for n in numbers if numbers.count(n) > 1)
        raise DrillError(f"{p}: shot {dup} appears twice; give each shot one row")
    return tuple(out)


def _csv_intent(row: dict[str, str], table: TableSpec, p: Path, line: int) -> ShotIntent:
    def cell(name: str) -> str:
        return (row.get(name) or "").strip()

    try:
        shot = int(cell("shot"))
    except ValueError:
        raise DrillError(f"{p}:{line}: shot {cell('shot')!r} must be a whole number from 0") from None
    if shot < 0:
        raise DrillError(f"{p}:{line}: shot {shot} must be 0 or more")
    target = None
    if cell("target"):
        text = cell("target")
        if ":" in text:
            rail, _, dia = text.partition(":")
            target = _target({"rail": rail, "diamond": _num(dia, p, line, "target diamond")}, table, p, line)
        elif ";" in text:
            target = _target({"point": _xy(text, p, line, "target")}, table, p, line)
        else:
            target = _target(text, table, p, line)
    aim = None
    if cell("aim"):
        text = cell("aim")
        if ":" in text:
            rail, _, dia = text.partition(":")
            aim = _aim({"rail": rail, "diamond": _num(dia, p, line, "aim diamond")}, table, p, line)
        else:
            aim = _aim({"point": _xy(text, p, line, "aim")}, table, p, line)
    band = cell("band") or None
    if band is not None and band not in BANDS:
        raise DrillError(f"{p}:{line}: band {band!r}; use soft, medium or hard")
    side = _num(cell("tip_side"), p, line, "tip_side") if cell("tip_side") else None
    height = _num(cell("tip_height"), p, line, "tip_height") if cell("tip_height") else None
    for name, v in (("tip_side", side), ("tip_height", height)):
        if v is not None and abs(v) > MAX_TIP:
            raise DrillError(f"{p}:{line}: {name} {v} is beyond {MAX_TIP} of the radius (a miscue)")
    rails = None
    if cell("rails"):
        try:
            rails = int(cell("rails"))
        except ValueError:
            raise DrillError(f"{p}:{line}: rails {cell('rails')!r} must be a whole number 1..6") from None
        if not 1 <= rails <= 6:
            raise DrillError(f"{p}:{line}: rails {rails} must be 1..6")
    return ShotIntent(cell("ball") or "object", target, aim, band, side, height, rails, shot, f"{p}:{line}")


def _num(text: str, p: Path, line: int, what: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise DrillError(f"{p}:{line}: {what} {text!r} must be a number") from None
    if not math.isfinite(v):
        raise DrillError(f"{p}:{line}: {what} {text!r} must be finite")
    return v


def _xy(text: str, p: Path, line: int, what: str) -> list[float]:
    parts = text.split(";")
    if len(parts) != 2:
        raise DrillError(f"{p}:{line}: {what} {text!r} must be a sight rail:diamond or a point x;y in mm")
    return [_num(parts[0], p, line, what), _num(parts[1], p, line, what)]


# --- matching intents to shots ---------------------------------------------------------------
def intents_for_shots(
    intents: tuple[ShotIntent, ...], repeat: bool, n_shots: int, source: str
) -> list[ShotIntent | None]:
    """One intent (or None) per shot of a session with ``n_shots`` shots.

    ``repeat``: the single intent applies to every shot. Otherwise intents carry a shot number
    (drill entries without one take their order). More intents than shots, or a shot number past
    the last shot, is a DrillError naming the line of the first one too many.
    """
    out: list[ShotIntent | None] = [None] * n_shots
    if repeat:
        return [intents[0]] * n_shots
    if len(intents) > n_shots:
        extra = intents[n_shots]
        raise DrillError(
            f"{extra.where or source}: {len(intents)} intents but the session has {n_shots} "
            f"shot(s); remove the extra ones or analyse the right session"
        )
    for it in intents:
        if it.shot is None or not 0 <= it.shot < n_shots:
            raise DrillError(
                f"{it.where or source}: shot {it.shot} does not exist (the session's shots are "
                f"0..{n_shots - 1}); fix the shot number"
            )
        out[it.shot] = it
    return out
