"""Equipment model and the table frame.

The table frame (``../shared/spec/results-format.md``) is written down here, once:

* units are millimetres; ``z`` is height above the cloth;
* the playing area is the rectangle bounded by the cushion noses, ``0 <= x <= L`` along a long
  cushion and ``0 <= y <= W`` along a short one, right-handed with ``z`` up;
* rails are named by the side they bound: ``bottom`` (y = 0), ``right`` (x = L), ``top`` (y = W),
  ``left`` (x = 0);
* one diamond is L/8 along the long rails and W/4 along the short rails, counted from the rail's
  lower-coordinate end (x = 0 for bottom/top, y = 0 for left/right).

A ball's centre can never reach the nose line: the cushion nose touches the ball above its equator,
so the centre turns on the *reversal line*, ``R cos(theta)`` in from the nose, where
``sin(theta) = (h - R) / R`` for nose height ``h`` and ball radius ``R`` (geometry of a sphere
touching a horizontal edge at height h; ``../shared/spec/references.md``).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

RAILS = ("bottom", "right", "top", "left")

# WPA Tournament Table & Equipment Specifications: ball 2 1/4 in.
POOL_BALL_DIAMETER_MM = 57.15
# WPA: cushion nose at 62.5 to 64.5 % of the ball diameter [secondary]; we take the middle.
NOSE_HEIGHT_FRACTION = 0.635
# WPA: sight centres 3 11/16 in (93.7 mm) back from the cushion nose.
SIGHT_SETBACK_MM = 93.7
# WPA: corner pocket mouth 4.5 to 4.625 in (114.3 to 117.5 mm); middle of the range.
CORNER_MOUTH_MM = 115.9
# WPA: side pocket mouth 5 to 5.125 in (127 to 130.2 mm); middle of the range.
SIDE_MOUTH_MM = 128.6
# From memory, not a published figure: the wooden rail top stands a few mm above the nose and
# the rail (cushion rubber plus wooden cap) is about 5 1/2 in wide from nose to outer edge.
RAIL_TOP_ABOVE_NOSE_MM = 8.0
RAIL_WIDTH_MM = 140.0


@dataclass(frozen=True)
class Pocket:
    """A pocket's mouth in the table frame (mm).

    ``jaw_a`` and ``jaw_b`` are the two cushion-nose points where the mouth opens (the ends of the
    cushion segments); ``centre`` is a point behind the mouth, off the playing area, used for
    drawing; ``name`` is e.g. ``bottom-left`` or ``bottom-side``.
    """

    name: str
    jaw_a: tuple[float, float]
    jaw_b: tuple[float, float]
    centre: tuple[float, float]

    @property
    def mouth_mm(self) -> float:
        """Nose-to-nose width of the mouth, mm."""
        return float(np.hypot(self.jaw_a[0] - self.jaw_b[0], self.jaw_a[1] - self.jaw_b[1]))

    @property
    def mouth_centre(self) -> tuple[float, float]:
        """Midpoint of the mouth line, mm."""
        return ((self.jaw_a[0] + self.jaw_b[0]) / 2, (self.jaw_a[1] + self.jaw_b[1]) / 2)


@dataclass(frozen=True)
class CushionSegment:
    """A straight stretch of cushion nose between two pocket jaws (mm, table frame).

    ``normal`` is the unit inward normal (pointing into the playing area).
    """

    rail: str
    start: tuple[float, float]
    end: tuple[float, float]
    normal: tuple[float, float]


@dataclass(frozen=True)
class TableSpec:
    """Dimensions of a table and its balls, all in mm.

    ``length_mm`` x ``width_mm`` is the playing area between cushion noses.
    """

    name: str
    length_mm: float
    width_mm: float
    ball_diameter_mm: float = POOL_BALL_DIAMETER_MM
    nose_height_mm: float = NOSE_HEIGHT_FRACTION * POOL_BALL_DIAMETER_MM
    sight_setback_mm: float = SIGHT_SETBACK_MM
    corner_mouth_mm: float = CORNER_MOUTH_MM
    side_mouth_mm: float = SIDE_MOUTH_MM
    rail_width_mm: float = RAIL_WIDTH_MM
    rail_top_height_mm: float = field(default=float("nan"))

    def __post_init__(self) -> None:
        for attr in ("length_mm", "width_mm", "ball_diameter_mm", "nose_height_mm"):
            value = getattr(self, attr)
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"table {attr} must be a positive number of mm, got {value!r}")
        if self.width_mm > self.length_mm:
            raise ValueError(
                f"table width {self.width_mm} mm exceeds its length {self.length_mm} mm; "
                "give the long side first, e.g. --table 2540x1270"
            )
        if not self.radius_mm < self.nose_height_mm < self.ball_diameter_mm:
            raise ValueError(
                f"cushion nose height {self.nose_height_mm:.1f} mm must lie between the ball's "
                f"radius and diameter ({self.radius_mm:.1f}..{self.ball_diameter_mm:.1f} mm)"
            )
        if math.isnan(self.rail_top_height_mm):
            object.__setattr__(
                self, "rail_top_height_mm", self.nose_height_mm + RAIL_TOP_ABOVE_NOSE_MM
            )

    # --- ball and cushion geometry -------------------------------------------------------
    @property
    def radius_mm(self) -> float:
        """Ball radius R, mm."""
        return self.ball_diameter_mm / 2

    @property
    def contact_angle_rad(self) -> float:
        """Angle theta of the cushion contact above the ball's equator: sin(theta) = (h - R) / R."""
        return math.asin((self.nose_height_mm - self.radius_mm) / self.radius_mm)

    @property
    def reversal_offset_mm(self) -> float:
        """Distance from the nose line to the line where a ball's centre turns: R cos(theta)."""
        return self.radius_mm * math.cos(self.contact_angle_rad)

    def reversal_line(self, rail: str) -> float:
        """Coordinate of ``rail``'s reversal line: y for bottom/top, x for left/right (mm)."""
        d = self.reversal_offset_mm
        return {
            "bottom": d,
            "top": self.width_mm - d,
            "left": d,
            "right": self.length_mm - d,
        }[_check_rail(rail)]

    # --- diamonds -------------------------------------------------------------------------
    def diamond_mm(self, rail: str) -> float:
        """Length of one diamond along ``rail``: L/8 on long rails, W/4 on short rails (mm)."""
        return self.length_mm / 8 if _check_rail(rail) in ("bottom", "top") else self.width_mm / 4

    def to_diamonds(self, rail: str, along_mm):
        """Position along ``rail`` in mm (x for bottom/top, y for left/right) -> diamonds.

        Scalars give a float, arrays an array of the same shape.
        """
        out = np.asarray(along_mm, dtype=float) / self.diamond_mm(rail)
        return float(out) if out.ndim == 0 else out

    def from_diamonds(self, rail: str, diamonds):
        """Position along ``rail`` in diamonds -> mm along that rail (float or array)."""
        out = np.asarray(diamonds, dtype=float) * self.diamond_mm(rail)
        return float(out) if out.ndim == 0 else out

    def along(self, rail: str, xy_mm: np.ndarray) -> np.ndarray:
        """The rail coordinate (x for bottom/top, y for left/right) of (N, 2) points, mm."""
        xy = np.asarray(xy_mm, dtype=float).reshape(-1, 2)
        return xy[:, 0] if _check_rail(rail) in ("bottom", "top") else xy[:, 1]

    def rail_point(self, rail: str, diamonds: float, offset_mm: float = 0.0) -> tuple[float, float]:
        """Point at ``diamonds`` along ``rail``, ``offset_mm`` outward from the nose line (mm).

        A positive offset lies behind the nose (off the cloth): the sights are at
        ``offset_mm = sight_setback_mm``; a negative one lies on the cloth, e.g. the reversal line
        at ``-reversal_offset_mm``.
        """
        s = float(self.from_diamonds(rail, diamonds))
        return {
            "bottom": (s, -offset_mm),
            "top": (s, self.width_mm + offset_mm),
            "left": (-offset_mm, s),
            "right": (self.length_mm + offset_mm, s),
        }[_check_rail(rail)]

    def sights(self) -> list[tuple[str, float, tuple[float, float]]]:
        """The 18 sights as (rail, diamonds, (x, y) mm); they sit on the rail top.

        Long rails carry sights at diamonds 1, 2, 3, 5, 6, 7 (the side pocket takes 4), short
        rails at 1, 2, 3 (WPA specification: 18 sights).
        """
        out = []
        for rail in RAILS:
            count = (1, 2, 3, 5, 6, 7) if rail in ("bottom", "top") else (1, 2, 3)
            for k in count:
                out.append((rail, float(k), self.rail_point(rail, k, self.sight_setback_mm)))
        return out

    # --- pockets and cushions ---------------------------------------------------------------
    def pockets(self) -> list[Pocket]:
        """The six pockets, named ``bottom-left``, ``bottom-side``, ``bottom-right``,
        ``top-right``, ``top-side``, ``top-left``.

        Corner jaws sit ``mouth / sqrt(2)`` from the corner along each nose line, so the mouth
        measured nose to nose across the corner is the specified width; side jaws sit half a mouth
        either side of the middle of the long rail.
        """
        L, W = self.length_mm, self.width_mm
        a = self.corner_mouth_mm / math.sqrt(2)
        s = self.side_mouth_mm / 2
        back = self.radius_mm
        return [
            Pocket("bottom-left", (a, 0.0), (0.0, a), (-back / 2, -back / 2)),
            Pocket("bottom-side", (L / 2 - s, 0.0), (L / 2 + s, 0.0), (L / 2, -back)),
            Pocket("bottom-right", (L, a), (L - a, 0.0), (L + back / 2, -back / 2)),
            Pocket("top-right", (L - a, W), (L, W - a), (L + back / 2, W + back / 2)),
            Pocket("top-side", (L / 2 + s, W), (L / 2 - s, W), (L / 2, W + back)),
            Pocket("top-left", (0.0, W - a), (a, W), (-back / 2, W + back / 2)),
        ]

    def pocket(self, name: str) -> Pocket:
        """The pocket called ``name``; ValueError listing the valid names otherwise."""
        for p in self.pockets():
            if p.name == name:
                return p
        names = ", ".join(p.name for p in self.pockets())
        raise ValueError(f"unknown pocket {name!r}; use one of: {names}")

    def cushions(self) -> list[CushionSegment]:
        """The six straight cushion noses between pocket jaws, with inward normals."""
        L, W = self.length_mm, self.width_mm
        a = self.corner_mouth_mm / math.sqrt(2)
        s = self.side_mouth_mm / 2
        return [
            CushionSegment("bottom", (a, 0.0), (L / 2 - s, 0.0), (0.0, 1.0)),
            CushionSegment("bottom", (L / 2 + s, 0.0), (L - a, 0.0), (0.0, 1.0)),
            CushionSegment("right", (L, a), (L, W - a), (-1.0, 0.0)),
            CushionSegment("top", (L - a, W), (L / 2 + s, W), (0.0, -1.0)),
            CushionSegment("top", (L / 2 - s, W), (a, W), (0.0, -1.0)),
            CushionSegment("left", (0.0, W - a), (0.0, a), (1.0, 0.0)),
        ]

    def outline(self) -> np.ndarray:
        """(4, 2) nose-rectangle corners (x, y) mm, anticlockwise from the origin."""
        L, W = self.length_mm, self.width_mm
        return np.array([[0.0, 0.0], [L, 0.0], [L, W], [0.0, W]])


def _check_rail(rail: str) -> str:
    if rail not in RAILS:
        raise ValueError(f"unknown rail {rail!r}; use one of: {', '.join(RAILS)}")
    return rail


# WPA Tournament Table & Equipment Specifications: 9 ft playing surface 100 x 50 in.
NINE_FOOT = TableSpec("9ft", length_mm=2540.0, width_mm=1270.0)
# WPA: 8 ft playing surface 92 x 46 in (2336.8 x 1168.4 mm).
EIGHT_FOOT = TableSpec("8ft", length_mm=2336.8, width_mm=1168.4)
# Common practice, no published standard: bar tables sold as "7 ft" vary by maker (76 x 38 in and
# 78 x 39 in both occur); we take 78 x 39 in. Users with another size give --table LxW.
SEVEN_FOOT = TableSpec("7ft", length_mm=1981.2, width_mm=990.6)

PRESETS = {t.name: t for t in (NINE_FOOT, EIGHT_FOOT, SEVEN_FOOT)}

_SIZE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*[xX]\s*(\d+(?:\.\d+)?)\s*$")


def parse_table(text: str, ball_mm: float | None = None) -> TableSpec:
    """A table from a preset name (``9ft``, ``8ft``, ``7ft``) or a size ``LxW`` in mm.

    ``ball_mm`` overrides the ball diameter; the nose height then follows the WPA fraction.
    Raises ValueError naming the bad text and the accepted forms.
    """
    text = str(text).strip()
    if text in PRESETS:
        base = PRESETS[text]
    else:
        m = _SIZE.match(text)
        if not m:
            raise ValueError(
                f"table {text!r} is neither a preset ({', '.join(PRESETS)}) nor a size in mm "
                "like 2540x1270"
            )
        length, width = float(m.group(1)), float(m.group(2))
        if not (500 <= length <= 5000 and 250 <= width <= 2500):
            raise ValueError(
                f"table size {length:g}x{width:g} mm is outside 500..5000 x 250..2500 mm; "
                "give the playing area between cushion noses in millimetres"
            )
        base = TableSpec(f"{length:g}x{width:g}", length_mm=length, width_mm=width)
    if ball_mm is None:
        return base
    if not (20.0 <= ball_mm <= 100.0):
        raise ValueError(f"ball diameter {ball_mm:g} mm is outside 20..100 mm")
    return TableSpec(
        base.name,
        length_mm=base.length_mm,
        width_mm=base.width_mm,
        ball_diameter_mm=ball_mm,
        nose_height_mm=NOSE_HEIGHT_FRACTION * ball_mm,
        sight_setback_mm=base.sight_setback_mm,
        corner_mouth_mm=base.corner_mouth_mm,
        side_mouth_mm=base.side_mouth_mm,
        rail_width_mm=base.rail_width_mm,
    )


def rail_inward_normal(rail: str) -> tuple[float, float]:
    """Unit normal of ``rail`` pointing into the playing area (table frame)."""
    return {"bottom": (0.0, 1.0), "top": (0.0, -1.0), "left": (1.0, 0.0), "right": (-1.0, 0.0)}[
        _check_rail(rail)
    ]


def rail_direction(rail: str) -> tuple[float, float]:
    """Unit vector along ``rail`` toward increasing rail coordinate (x for bottom/top, y else)."""
    return (1.0, 0.0) if _check_rail(rail) in ("bottom", "top") else (0.0, 1.0)


def cushion_angles(
    rail: str, vel_in: np.ndarray, vel_out: np.ndarray
) -> tuple[float, float, float]:
    """Angles in and out (degrees) and restitution of a cushion contact, by the results format.

    ``angle_in`` is the angle between the incoming velocity and the normal into the cushion, 0
    square into the rail, positive when the velocity's component along the rail points toward
    increasing rail coordinate; ``angle_out`` is measured from the outward normal with the same
    sign rule (a mirror bounce has ``angle_out == angle_in``). ``restitution`` is the outgoing over
    the incoming velocity component normal to the cushion.
    """
    n_in = np.asarray(rail_inward_normal(rail))
    along = np.asarray(rail_direction(rail))
    vi = np.asarray(vel_in, dtype=float)
    vo = np.asarray(vel_out, dtype=float)
    into_in = -float(vi @ n_in)  # normal speed into the cushion
    away_out = float(vo @ n_in)  # normal speed away from it
    angle_in = math.degrees(math.atan2(float(vi @ along), into_in))
    angle_out = math.degrees(math.atan2(float(vo @ along), away_out))
    restitution = away_out / into_in if into_in > 0 else float("nan")
    return angle_in, angle_out, restitution
