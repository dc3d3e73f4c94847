"""Scene files: a table, a camera, a room, the balls and the shots, written in TOML.

A scene file says everything needed to film a practice session that never happened: which
table, where the camera hangs and what lens it has, the cloth and lights, where the balls start,
and each shot (which ball, where it is aimed, how hard, where the cue tip meets it). Every
rendered clip keeps a copy of its scene beside it so it can be filmed again.

Lengths are mm, times s, speeds mm/s, angles degrees, colours ``"#rrggbb"``. ``docs`` in the
README shows a complete example; :func:`load_scene` reports the first problem as a one-line
``ValueError`` naming the file and the key.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from analysis.cushion import CushionParams, DeadSpot
from analysis.physics import PhysicsParams
from vision.camera import Camera
from vision.render import Lamp, Look
from vision.table import RAILS, TableSpec, parse_table

# Our own palette for object balls when a scene gives no colour (BGR order for OpenCV).
DEFAULT_OBJECT_COLOURS = (
    "#e0b020", "#1d4fb0", "#c42a1f", "#5b2a86", "#e2701c", "#1f7a3a", "#7a2b1a", "#202020",
)
BALL_KINDS = ("cue", "solid", "stripe")


class SceneError(ValueError):
    """A scene file that cannot be filmed; the message names the file and the key."""


@dataclass(frozen=True)
class BallSpec:
    """One ball of the scene: its id, kind (cue/solid/stripe), colour BGR and starting spot mm."""

    ball: str
    kind: str
    colour_bgr: tuple[int, int, int]
    at_mm: tuple[float, float] | None


@dataclass(frozen=True)
class Aim:
    """Where a shot is aimed. Exactly one form is used (``kind``):

    * ``point``: through the table point ``point_mm``;
    * ``sight``: through the sight at ``diamond`` on ``rail`` (on the rail top, set back from the
      nose, as a player sights it);
    * ``heading``: along ``heading_deg``, anticlockwise from +x;
    * ``ball``: a cut that sends object ball ``ball`` toward ``send_to_mm`` (ghost-ball aim);
      ``send_to`` may be a point, a pocket name, or ``{rail, diamond}`` for a sight.
    """

    kind: str
    point_mm: tuple[float, float] | None = None
    rail: str | None = None
    diamond: float | None = None
    heading_deg: float | None = None
    ball: str | None = None
    send_to_mm: tuple[float, float] | None = None


@dataclass(frozen=True)
class ShotSpec:
    """One shot: the struck ball, its aim, speed (mm/s) and cue-tip offsets (fractions of R).

    ``aim_error_deg`` turns the actual cue line away from the stated aim (anticlockwise
    positive) so a scene can film a player who misses the aim; ``target`` is the intended
    pocket name or ``(rail, diamond)``; ``setup`` re-spots balls (id -> (x, y) mm, or None to lift
    one off) before the shot; ``lift_after_s`` has a hand catch the struck ball that long after
    the strike (room staff checking cushions do, once the ball has come off the cushion).
    """

    ball: str
    aim: Aim
    speed_mm_s: float
    tip_side: float = 0.0
    tip_height: float = 0.0
    aim_error_deg: float = 0.0
    pause_s: float = 1.0
    setup: tuple[tuple[str, tuple[float, float] | None], ...] = ()
    target: str | tuple[str, float] | None = None
    lift_after_s: float | None = None


@dataclass(frozen=True)
class CameraBump:
    """The camera mount is knocked at ``t_s``: the camera moves by ``offset_mm`` and rolls by
    ``roll_deg`` from then on."""

    t_s: float
    offset_mm: tuple[float, float, float]
    roll_deg: float


@dataclass(frozen=True)
class FilmSettings:
    """Frame rate, shutter (s), codec and quality of the filmed clip."""

    fps: float = 60.0
    shutter_s: float = 1 / 250
    codec: str = "h264"
    quality: int = 23


@dataclass(frozen=True)
class Scene:
    """A whole scene, ready to simulate and film."""

    name: str
    table: TableSpec
    camera: Camera
    film: FilmSettings
    look: Look
    occluder: bool
    physics: PhysicsParams
    balls: tuple[BallSpec, ...]
    shots: tuple[ShotSpec, ...]
    bumps: tuple[CameraBump, ...] = ()
    lead_s: float = 1.0
    tail_s: float = 1.0
    max_duration_s: float | None = None
    seed: int = 0
    source_text: str = field(default="", repr=False)


def load_scene(path: str | Path) -> Scene:
    """Read and check a scene file. Raises :class:`SceneError` with a one-line message."""
    p = Path(path)
    if not p.is_file():
        raise SceneError(f"scene file {p} does not exist")
    text = p.read_text(encoding="utf-8")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SceneError(f"{p}: not valid TOML ({exc})") from None
    try:
        return parse_scene(doc, source_text=text, default_name=p.stem)
    except SceneError as exc:
        raise SceneError(f"{p}: {exc}") from None


def parse_scene(doc: dict[str, Any], source_text: str = "", default_name: str = "scene") -> Scene:
    """Build a :class:`Scene` from a parsed TOML document (see :func:`load_scene`)."""
    r = _Reader(doc)
    table = _table(r.section("table"))
    film_r = r.section("camera")
    film = FilmSettings(
        fps=film_r.number("fps", 60.0, 10.0, 480.0),
        shutter_s=film_r.number("shutter_s", 1 / 250, 1e-5, 1.0),
        codec=film_r.choice("codec", "h264", ("h264", "mpeg4")),
        quality=int(film_r.number("quality", 23, 0, 51)),
    )
    if film.shutter_s > 1 / film.fps + 1e-12:
        raise SceneError(f"camera.shutter_s {film.shutter_s} is longer than one frame (1/{film.fps:g} s)")
    camera = _camera(film_r, table)
    look_r = r.section("look")
    look = _look(look_r)
    occluder = look_r.boolean("occluder", True)
    physics = _physics(r.section("physics"))
    balls = tuple(_ball(b, i) for i, b in enumerate(r.table_list("ball")))
    if not balls:
        raise SceneError("a scene needs at least one [[ball]]")
    ids = [b.ball for b in balls]
    if len(set(ids)) != len(ids):
        raise SceneError(f"ball ids repeat: {ids}")
    if sum(b.kind == "cue" for b in balls) > 1:
        raise SceneError("more than one ball has kind = \"cue\"")
    shots = tuple(_shot(s, i, set(ids), table) for i, s in enumerate(r.table_list("shot")))
    bumps = tuple(_bump(b, i) for i, b in enumerate(film_r.table_list("bump")))
    return Scene(
        name=r.string("name", default_name),
        table=table,
        camera=camera,
        film=film,
        look=look,
        occluder=occluder,
        physics=physics,
        balls=balls,
        shots=shots,
        bumps=bumps,
        lead_s=r.number("lead_s", 1.0, 0.0, 60.0),
        tail_s=r.number("tail_s", 1.0, 0.0, 60.0),
        max_duration_s=r.number("max_duration_s", 0.0, 0.1, 36000.0) if r.get("max_duration_s") is not None else None,
        seed=int(r.number("seed", 0, 0, 2**31)),
        source_text=source_text,
    )


# --- sections ----------------------------------------------------------------------------------
def _table(r: "_Reader") -> TableSpec:
    ball = r.get("ball_mm")
    spec = r.string("preset", "") or r.string("size", "") or "9ft"
    try:
        return parse_table(spec, None if ball is None else r.number("ball_mm", 57.15, 20, 100))
    except ValueError as exc:
        raise SceneError(f"[table]: {exc}") from None


def _camera(r: "_Reader", table: TableSpec) -> Camera:
    res = r.pair("resolution", (1280, 720))
    if res not in ((1280, 720), (1920, 1080), (640, 360), (960, 540)):
        raise SceneError(f"camera.resolution {list(res)} is not one of 1280x720, 1920x1080, 960x540, 640x360")
    dist = r.numbers("distortion", (0.0,) * 5)
    if len(dist) > 5:
        raise SceneError("camera.distortion takes at most 5 numbers (k1, k2, p1, p2, k3)")
    hfov = r.get("hfov_deg")
    try:
        return Camera.overhead(
            table,
            height_mm=r.number("height_mm", 2600.0, 800.0, 6000.0),
            image_size=(int(res[0]), int(res[1])),
            hfov_deg=None if hfov is None else r.number("hfov_deg", 60.0, 10.0, 150.0),
            offset_mm=r.pair("offset_mm", (0.0, 0.0)),
            aim_offset_mm=r.pair("aim_offset_mm", (0.0, 0.0)),
            roll_deg=r.number("roll_deg", 0.0, -180.0, 180.0),
            dist=tuple(dist),
        )
    except ValueError as exc:
        raise SceneError(f"[camera]: {exc}") from None


def _look(r: "_Reader") -> Look:
    kwargs: dict[str, Any] = {}
    for key, attr in (
        ("cloth", "cloth_bgr"), ("cushion", "cushion_bgr"), ("rail", "rail_bgr"), ("floor", "floor_bgr"),
    ):
        if r.get(key) is not None:
            kwargs[attr] = r.colour(key)
    if "cloth_bgr" in kwargs and "cushion_bgr" not in kwargs:
        # Cushions are covered in the bed's cloth; their sloped top reads a little darker.
        kwargs["cushion_bgr"] = tuple(int(round(0.84 * c)) for c in kwargs["cloth_bgr"])
    for key, attr, lo, hi in (
        ("noise", "noise_sigma", 0.0, 40.0),
        ("exposure", "exposure", 0.05, 5.0),
        ("ambient", "ambient", 0.0, 2.0),
        ("cloth_texture", "cloth_texture", 0.0, 1.0),
        ("vignetting", "vignetting", 0.0, 1.0),
        ("specular", "specular", 0.0, 10.0),
        ("blur_px", "blur_px", 0.0, 10.0),
        ("flicker", "flicker", 0.0, 0.5),
    ):
        if r.get(key) is not None:
            kwargs[attr] = r.number(key, 0.0, lo, hi)
    lamps = r.get("lamps")
    if lamps is not None:
        if not isinstance(lamps, list) or not all(
            isinstance(l, list) and len(l) == 3 and all(isinstance(v, (int, float)) for v in l) for l in lamps
        ):
            raise SceneError("look.lamps must be a list of [x, y, z] positions in mm")
        kwargs["lamps"] = tuple(Lamp((float(a), float(b), float(c))) for a, b, c in lamps)
    kwargs["texture_seed"] = int(r.number("texture_seed", 0, 0, 2**31))
    return Look(**kwargs)


def _physics(r: "_Reader") -> PhysicsParams:
    defaults = PhysicsParams()
    cushion_defaults = defaults.cushion
    knots = r.get("cushion_e")
    e_knots, e_values = cushion_defaults.e_knots_mm_s, cushion_defaults.e_values
    if knots is not None:
        if not isinstance(knots, list) or not knots or not all(
            isinstance(k, list) and len(k) == 2 and all(isinstance(v, (int, float)) for v in k) for k in knots
        ):
            raise SceneError("physics.cushion_e must be a list of [normal speed mm/s, restitution] pairs")
        e_knots = tuple(float(k[0]) for k in knots)
        e_values = tuple(float(k[1]) for k in knots)
        if any(b <= a for a, b in zip(e_knots, e_knots[1:])) or not all(0 < e <= 1 for e in e_values):
            raise SceneError("physics.cushion_e speeds must increase and restitutions lie in (0, 1]")
    rail_factor = r.get("rail_factor") or {}
    if not isinstance(rail_factor, dict) or any(k not in RAILS for k in rail_factor):
        raise SceneError(f"physics.rail_factor keys must be rails ({', '.join(RAILS)})")
    spots = []
    for i, d in enumerate(r.table_list("dead_spot")):
        rail = d.choice("rail", None, RAILS)
        lo = d.number("from_diamond", None, 0.0, 8.0)
        hi = d.number("to_diamond", None, 0.0, 8.0)
        if hi <= lo:
            raise SceneError(f"physics.dead_spot[{i}]: to_diamond must exceed from_diamond")
        spots.append(DeadSpot(rail, lo, hi, d.number("factor", None, 0.05, 1.0)))
    cushion = CushionParams(
        e_knots_mm_s=e_knots,
        e_values=e_values,
        mu_cushion=r.number("mu_cushion", cushion_defaults.mu_cushion, 0.0, 1.0),
        rail_factor=tuple((k, float(v)) for k, v in rail_factor.items()),
        dead_spots=tuple(spots),
    )
    return PhysicsParams(
        mu_slide=r.number("mu_slide", defaults.mu_slide, 0.01, 1.0),
        mu_roll=r.number("mu_roll", defaults.mu_roll, 0.0005, 0.1),
        spin_decel_rad_s2=r.number("spin_decel_rad_s2", defaults.spin_decel_rad_s2, 0.1, 100.0),
        ball_restitution=r.number("ball_restitution", defaults.ball_restitution, 0.5, 1.0),
        ball_friction=r.number("ball_friction", defaults.ball_friction, 0.0, 0.5),
        cushion=cushion,
    )


def _ball(d: "_Reader", i: int) -> BallSpec:
    ball = d.string("id", None)
    kind = d.choice("kind", "solid", BALL_KINDS)
    if kind == "cue":
        colour = d.colour("colour") if d.get("colour") is not None else (236, 240, 242)
    elif d.get("colour") is not None:
        colour = d.colour("colour")
    else:
        colour = _hex_to_bgr(DEFAULT_OBJECT_COLOURS[i % len(DEFAULT_OBJECT_COLOURS)])
    at = d.pair("at", None) if d.get("at") is not None else None
    return BallSpec(ball, kind, colour, at)


def _shot(d: "_Reader", i: int, ids: set[str], table: TableSpec) -> ShotSpec:
    ball = d.string("ball", None)
    if ball not in ids:
        raise SceneError(f"shot[{i}].ball {ball!r} is not a [[ball]] id ({', '.join(sorted(ids))})")
    a = d.section("aim")
    forms = [k for k in ("point", "rail", "heading_deg", "ball") if a.get(k) is not None]
    if len(forms) != 1:
        raise SceneError(f"shot[{i}].aim needs exactly one of point, rail+diamond, heading_deg, ball+send_to")
    form = forms[0]
    if form == "point":
        aim = Aim("point", point_mm=a.pair("point", None))
    elif form == "rail":
        aim = Aim("sight", rail=a.choice("rail", None, RAILS), diamond=a.number("diamond", None, 0.0, 8.0))
    elif form == "heading_deg":
        aim = Aim("heading", heading_deg=a.number("heading_deg", None, -360.0, 360.0))
    else:
        other = a.string("ball", None)
        if other not in ids or other == ball:
            raise SceneError(f"shot[{i}].aim.ball {other!r} must be another ball's id")
        aim = Aim("ball", ball=other, send_to_mm=_point_or_place(a, "send_to", table, f"shot[{i}].aim.send_to"))
    spin = d.section("spin")
    side = spin.number("side", 0.0, -0.6, 0.6)
    height = spin.number("height", 0.0, -0.6, 0.6)
    if math.hypot(side, height) > 0.6:
        raise SceneError(f"shot[{i}].spin offset {math.hypot(side, height):.2f} R is a miscue; keep it within 0.6 R")
    setup = []
    for key, value in (d.get("setup") or {}).items():
        if key not in ids:
            raise SceneError(f"shot[{i}].setup names unknown ball {key!r}")
        if value == "off":
            setup.append((key, None))
        else:
            setup.append((key, d.section("setup").pair(key, None)))
    target = d.get("target")
    if target is not None:
        if isinstance(target, str):
            try:
                table.pocket(target)
            except ValueError as exc:
                raise SceneError(f"shot[{i}].target: {exc}") from None
        else:
            t = d.section("target")
            target = (t.choice("rail", None, RAILS), t.number("diamond", None, 0.0, 8.0))
    return ShotSpec(
        ball=ball,
        aim=aim,
        speed_mm_s=d.number("speed_mm_s", None, 10.0, 12000.0),
        tip_side=side,
        tip_height=height,
        aim_error_deg=d.number("aim_error_deg", 0.0, -30.0, 30.0),
        pause_s=d.number("pause_s", 1.0, 0.1, 60.0),
        setup=tuple(setup),
        target=target,
        lift_after_s=d.number("lift_after_s", 0.0, 0.05, 60.0) if d.get("lift_after_s") is not None else None,
    )


def _bump(d: "_Reader", i: int) -> CameraBump:
    off = d.numbers("offset_mm", (0.0, 0.0, 0.0))
    if len(off) not in (2, 3):
        raise SceneError(f"camera.bump[{i}].offset_mm takes [dx, dy] or [dx, dy, dz]")
    off3 = (off[0], off[1], off[2] if len(off) == 3 else 0.0)
    return CameraBump(d.number("t_s", None, 0.0, 3600.0), off3, d.number("roll_deg", 0.0, -20.0, 20.0))


def _point_or_place(r: "_Reader", key: str, table: TableSpec, where: str) -> tuple[float, float]:
    value = r.get(key)
    if isinstance(value, list):
        return r.pair(key, None)
    if isinstance(value, str):
        try:
            return table.pocket(value).mouth_centre
        except ValueError as exc:
            raise SceneError(f"{where}: {exc}") from None
    if isinstance(value, dict):
        # A rail place means that rail's sight, as a player sights a bank through the diamonds.
        s = r.section(key)
        rail = s.choice("rail", None, RAILS)
        return table.rail_point(rail, s.number("diamond", None, 0.0, 8.0), table.sight_setback_mm)
    raise SceneError(f"{where} must be [x, y], a pocket name or {{rail, diamond}}")


def _hex_to_bgr(text: str) -> tuple[int, int, int]:
    v = int(text[1:], 16)
    return (v & 255, (v >> 8) & 255, (v >> 16) & 255)


class _Reader:
    """Typed access to one TOML table with key paths in error messages."""

    def __init__(self, doc: dict[str, Any], where: str = "") -> None:
        if not isinstance(doc, dict):
            raise SceneError(f"{where or 'scene'} must be a table")
        self.doc = doc
        self.where = where

    def _key(self, key: str) -> str:
        return f"{self.where}.{key}" if self.where else key

    def get(self, key: str) -> Any:
        return self.doc.get(key)

    def _missing(self, key: str, default: Any) -> Any:
        if default is None:
            raise SceneError(f"{self._key(key)} is missing")
        return default

    def section(self, key: str) -> "_Reader":
        value = self.doc.get(key, {})
        if not isinstance(value, dict):
            raise SceneError(f"{self._key(key)} must be a table ({{ ... }} or [{key}])")
        return _Reader(value, self._key(key))

    def table_list(self, key: str) -> list["_Reader"]:
        value = self.doc.get(key, [])
        if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
            raise SceneError(f"{self._key(key)} must be written as [[{key}]] tables")
        return [_Reader(v, f"{self._key(key)}[{i}]") for i, v in enumerate(value)]

    def number(self, key: str, default: float | None, lo: float, hi: float) -> float:
        value = self.doc.get(key)
        if value is None:
            return float(self._missing(key, default))
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise SceneError(f"{self._key(key)} must be a number, got {value!r}")
        if not lo <= value <= hi:
            raise SceneError(f"{self._key(key)} = {value} is outside {lo:g}..{hi:g}")
        return float(value)

    def numbers(self, key: str, default: tuple[float, ...]) -> tuple[float, ...]:
        value = self.doc.get(key)
        if value is None:
            return default
        if not isinstance(value, list) or not all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in value
        ):
            raise SceneError(f"{self._key(key)} must be a list of numbers, got {value!r}")
        return tuple(float(v) for v in value)

    def pair(self, key: str, default: tuple[float, float] | None) -> tuple[float, float]:
        value = self.doc.get(key)
        if value is None:
            return self._missing(key, default)
        nums = self.numbers(key, ())
        if len(nums) != 2:
            raise SceneError(f"{self._key(key)} must be two numbers [a, b], got {value!r}")
        return (nums[0], nums[1])

    def string(self, key: str, default: str | None) -> str:
        value = self.doc.get(key)
        if value is None:
            return self._missing(key, default)
        if not isinstance(value, str):
            raise SceneError(f"{self._key(key)} must be a string, got {value!r}")
        return value

    def choice(self, key: str, default: str | None, options: tuple[str, ...]) -> str:
        value = self.string(key, default)
        if value not in options:
            raise SceneError(f"{self._key(key)} = {value!r}; use one of: {', '.join(options)}")
        return value

    def boolean(self, key: str, default: bool) -> bool:
        value = self.doc.get(key, default)
        if not isinstance(value, bool):
            raise SceneError(f"{self._key(key)} must be true or false, got {value!r}")
        return value

    def colour(self, key: str) -> tuple[int, int, int]:
        value = self.string(key, None)
        if len(value) != 7 or value[0] != "#" or any(c not in "0123456789abcdefABCDEF" for c in value[1:]):
            raise SceneError(f"{self._key(key)} = {value!r} is not a colour like \"#2f6e3b\"")
        return _hex_to_bgr(value)
