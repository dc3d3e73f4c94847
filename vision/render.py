"""Film a table scene as a fixed overhead camera would: pure image formation, no physics.

Frames, as written down in ``vision.table`` and ``vision.camera``:

* **table frame**: mm, ``x`` along a long cushion (0..L), ``y`` along a short one (0..W), ``z`` up
  from the cloth;
* **image pixels**: ``(u, v)`` with the origin at the centre of pixel (0, 0), ``u`` right, ``v``
  down; arrays index ``img[v, u]``; colour images are (H, W, 3) in OpenCV's BGR order.

How the picture is formed:

* the static scene (cloth, cushions, rails with sights, pockets, floor) is ray cast once per pixel
  through :meth:`Camera.rays`, so lens distortion and perspective are exact; the surface is a
  height field (cloth z = 0, cushion top rising from the nose at ``nose_height_mm`` to the rail
  top, wooden rail top, pocket holes, floor) found by marching each ray and refining by bisection;
  pixels on a boundary between surfaces are supersampled 3 x 3 so edges such as the cushion nose
  carry sub-pixel information;
* light: point lamps with a shade (intensity ``cos^m`` of the angle from straight down), irradiance
  ``cos(incidence) / r^2`` (Lambert's cosine law and the inverse-square law), plus an ambient term
  reduced by ambient occlusion; ``cos^4`` natural vignetting (the cos-fourth law of illumination
  falloff) scales everything;
* balls are spheres of radius R centred R above the cloth: each pixel's ray is intersected with
  the sphere (exact perspective and distortion) and shaded with Lambert diffuse plus Blinn-Phong
  specular highlights (Blinn, "Models of light reflection for computer synthesized pictures",
  SIGGRAPH 1977); edges are anti-aliased by analytic coverage (the pixel's signed angular distance
  to the silhouette cone over the pixel's angular size, a box-filter ramp);
* each lamp casts a soft shadow: the fraction of the lamp's disc hidden by the ball is the area of
  intersection of two circles (the lamp's and the ball's angular discs seen from the shaded
  point); the contact shadow is ambient occlusion by the sphere, the configuration factor from a
  differential area to a sphere, ``cos(theta) (R / d)^2`` (Howell, "A Catalog of Radiation Heat
  Transfer Configuration Factors", from memory);
* motion blur is the mean of the caller's sub-samples across the shutter interval; an optical
  point-spread function (Gaussian, ``Look.blur_px``) follows; then sensor noise (Gaussian read
  noise plus optional Poisson-like shot noise, from the renderer's own generator) and 8-bit
  quantisation;
* an optional occluder (a cue and the player's arms) is drawn through the camera at its true
  height, over the balls, with a faint shadow on the cloth.

Colours in :class:`Look` are the 8-bit values a surface shows under the light falling on the middle
of the cloth (exposure 1, no vignetting); the lamps are scaled so that the middle of the cloth
receives irradiance 1.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass
from typing import Sequence

import cv2
import numpy as np
from scipy import ndimage
from scipy.special import ndtri

from vision.camera import Camera
from vision.table import TableSpec

# From memory (WPA: playing surface 29 1/4 to 31 in above the floor): the floor is about 0.76 m
# below the cloth.
FLOOR_DEPTH_MM = 760.0
# How far a pocket hole is drawn below the cloth before it is taken as black; not a measured figure.
HOLE_DEPTH_MM = 150.0
# From memory: the rubber below the cushion nose recedes about 12 mm at cloth level (undercut), so
# that face looks down and inward and is shaded as such.
NOSE_UNDERCUT_MM = 12.0
# Pocket shelf (mouth line to the edge of the drop), from memory of the WPA table specification:
# corner 1 to 2 1/4 in, side 0 to 3/8 in; we take values inside those ranges.
CORNER_SHELF_MM = 40.0
SIDE_SHELF_MM = 5.0
# WPA (references.md): corner pocket entrance angle 142 deg, side 104 deg.
CORNER_ENTRANCE_DEG = 142.0
SIDE_ENTRANCE_DEG = 104.0
# Sight inlay half-lengths (mm) along and across the rail: a common size, from memory.
SIGHT_HALF_ALONG_MM = 11.0
SIGHT_HALF_ACROSS_MM = 6.0

# Surface labels of the static scene.
CLOTH, SHELF, CUSHION, NOSE_FACE, FACING, RAIL, SIGHT, HOLE, FLOOR, VOID = range(10)
_RAIL_NORMALS = np.array([[0.0, -1.0], [1.0, 0.0], [0.0, 1.0], [-1.0, 0.0]])  # outward, by rail


@dataclass(frozen=True)
class BallLook:
    """How one ball looks: ``kind`` is ``cue`` (plain), ``solid`` (coloured, small white number
    discs about the body z axis) or ``stripe`` (white, coloured band ``|z_body| < R/2``, number
    discs on the band about the body x axis); ``colour_bgr`` 0..255 is the body or band colour."""

    ball: str
    kind: str
    colour_bgr: tuple[int, int, int]

    def __post_init__(self) -> None:
        if self.kind not in ("cue", "solid", "stripe"):
            raise ValueError(f"ball {self.ball!r}: kind {self.kind!r} is not one of cue, solid, stripe")
        c = tuple(int(v) for v in self.colour_bgr)
        if len(c) != 3 or not all(0 <= v <= 255 for v in c):
            raise ValueError(f"ball {self.ball!r}: colour_bgr {self.colour_bgr!r} must be three 0..255 values")
        object.__setattr__(self, "colour_bgr", c)


def pool_balls() -> tuple[BallLook, ...]:
    """The usual 16 pool balls: ``cue``, solids ``1``..``8``, stripes ``9``..``15`` (common
    practice: 1/9 yellow, 2/10 blue, 3/11 red, 4/12 purple, 5/13 orange, 6/14 green, 7/15 maroon,
    8 black)."""
    colours = [
        (20, 195, 235),
        (150, 60, 20),
        (35, 30, 195),
        (105, 40, 85),
        (25, 110, 240),
        (60, 105, 25),
        (35, 35, 120),
    ]
    out = [BallLook("cue", "cue", (226, 234, 236))]
    out += [BallLook(str(k + 1), "solid", colours[k]) for k in range(7)]
    out.append(BallLook("8", "solid", (22, 22, 22)))
    out += [BallLook(str(k + 9), "stripe", colours[k]) for k in range(7)]
    return tuple(out)


@dataclass(frozen=True)
class Lamp:
    """A lamp at ``position_mm`` (table frame) of relative ``power``."""

    position_mm: tuple[float, float, float]
    power: float = 1.0

    def __post_init__(self) -> None:
        p = tuple(float(v) for v in self.position_mm)
        if len(p) != 3 or p[2] <= 0:
            raise ValueError(f"lamp position {self.position_mm!r} must be (x, y, z) mm with z above the cloth")
        if not self.power > 0:
            raise ValueError(f"lamp power {self.power!r} must be positive")
        object.__setattr__(self, "position_mm", p)


def default_lamps(table: TableSpec, height_mm: float = 1000.0) -> tuple[Lamp, ...]:
    """Three equal lamps ``height_mm`` above the cloth over the long axis, at L/6, L/2 and 5L/6."""
    L, W = table.length_mm, table.width_mm
    return tuple(Lamp((L * k / 6, W / 2, height_mm)) for k in (1, 3, 5))


@dataclass(frozen=True)
class Look:
    """Everything about the room, cloth and camera sensor (colours BGR 0..255).

    ``lamps`` None means :func:`default_lamps`. ``ambient`` is the share of the light on the middle
    of the cloth that comes from all around rather than from the lamps; ``lamp_cone`` the exponent
    m of each shade's ``cos^m`` falloff; ``exposure`` a gain; ``vignetting`` the share (0..1) of
    the cos-fourth falloff that reaches the sensor; ``shadow_softness_mm`` the radius of each
    lamp's glowing disc (sets the penumbra); ``specular`` and ``shininess`` the Blinn-Phong
    strength and exponent of the balls (``rail_specular`` of the varnished rail); ``blur_px`` the
    optical point-spread sigma (px); ``noise_sigma`` the read noise (DN); ``shot_noise`` the added
    noise variance per DN of signal; ``flicker`` the relative frame-to-frame gain jitter (lamps on
    mains power); ``cushion_width_mm`` the cloth-covered cushion top from the nose to the wood;
    ``texture_seed`` seeds the felt and wood textures (the static scene), independent of the
    renderer's noise seed.
    """

    cloth_bgr: tuple[int, int, int] = (62, 122, 30)
    cloth_texture: float = 0.05
    cushion_bgr: tuple[int, int, int] = (52, 104, 24)
    rail_bgr: tuple[int, int, int] = (38, 72, 118)
    sight_bgr: tuple[int, int, int] = (205, 222, 230)
    floor_bgr: tuple[int, int, int] = (30, 32, 36)
    pocket_bgr: tuple[int, int, int] = (14, 14, 16)
    ball_white_bgr: tuple[int, int, int] = (226, 234, 236)
    lamps: tuple[Lamp, ...] | None = None
    ambient: float = 0.3
    lamp_cone: float = 1.5
    exposure: float = 1.0
    vignetting: float = 0.6
    shadow_softness_mm: float = 150.0
    specular: float = 0.7
    shininess: float = 80.0
    rail_specular: float = 0.12
    blur_px: float = 0.6
    noise_sigma: float = 2.0
    shot_noise: float = 0.0
    flicker: float = 0.0
    cushion_width_mm: float = 50.0
    texture_seed: int = 0

    def __post_init__(self) -> None:
        checks = {
            "cloth_texture": (0.0, 0.5),
            "ambient": (0.0, 1.0),
            "lamp_cone": (0.0, 20.0),
            "vignetting": (0.0, 1.0),
            "specular": (0.0, 10.0),
            "rail_specular": (0.0, 10.0),
            "blur_px": (0.0, 10.0),
            "noise_sigma": (0.0, 100.0),
            "shot_noise": (0.0, 10.0),
            "flicker": (0.0, 0.5),
        }
        for name, (lo, hi) in checks.items():
            value = getattr(self, name)
            if not (lo <= value <= hi):
                raise ValueError(f"Look.{name} = {value!r} is outside {lo}..{hi}")
        for name in ("exposure", "shininess", "shadow_softness_mm", "cushion_width_mm"):
            if not getattr(self, name) > 0:
                raise ValueError(f"Look.{name} = {getattr(self, name)!r} must be positive")
        if self.lamps is not None and len(self.lamps) == 0:
            raise ValueError("Look.lamps is empty; give at least one Lamp or None for the default three")


@dataclass(frozen=True)
class CueStroke:
    """One stroke of the cue: the tip meets the ball at ``ball_xy_mm`` (table frame) at
    ``t_strike`` (s), moving along ``heading_rad`` (the direction the ball is sent, from +x
    anticlockwise)."""

    t_strike: float
    ball_xy_mm: tuple[float, float]
    heading_rad: float


@dataclass(frozen=True)
class Occluder:
    """A cue and the player's arms over the table for each stroke.

    The cue lies along the heading behind the ball, its tip's underside about 1 cm above the cloth
    near the ball, rising toward the butt (at least ``elevation_deg``, more if needed to clear the
    rail); the bridge hand rests on the cloth ``bridge_mm`` behind the tip, the other hand grips
    the cue near the butt, and both arms reach back out past the rail. It appears ``lead_s`` before
    each strike (sliding in, a practice stroke, back swing), strokes forward to meet the ball at
    ``t_strike``, follows through and withdraws, and is gone ``follow_s`` after.
    """

    strokes: tuple[CueStroke, ...]
    lead_s: float = 1.2
    follow_s: float = 0.6
    tip_height_mm: float = 17.0
    elevation_deg: float = 6.0
    bridge_mm: float = 230.0
    skin_bgr: tuple[int, int, int] = (120, 150, 200)
    sleeve_bgr: tuple[int, int, int] = (70, 50, 45)
    shadow_strength: float = 0.35

    def __post_init__(self) -> None:
        if self.lead_s < 0.5:
            raise ValueError(f"Occluder.lead_s = {self.lead_s} s is too short; give at least 0.5 s")
        if self.follow_s < 0.2:
            raise ValueError(f"Occluder.follow_s = {self.follow_s} s is too short; give at least 0.2 s")
        object.__setattr__(self, "strokes", tuple(self.strokes))

    def active(self, t_s: float) -> list[CueStroke]:
        """The strokes whose cue is over the table at time ``t_s``."""
        return [k for k in self.strokes if k.t_strike - self.lead_s <= t_s <= k.t_strike + self.follow_s]


# --- helpers -----------------------------------------------------------------------------------
def _smooth_noise(rng: np.random.Generator, shape: tuple[int, int], sigma: tuple[float, float]) -> np.ndarray:
    """Gaussian-filtered white noise of ``shape`` (rows, cols) with ``sigma`` (rows, cols) in
    texels, scaled to unit standard deviation, float32. Broad fields are made coarse and enlarged
    (cubic), which only changes their fine detail."""
    f = max(1, int(min(sigma) // 4))
    small = (max(shape[0] // f, 4), max(shape[1] // f, 4))
    white = rng.standard_normal(small).astype(np.float32)
    field = cv2.GaussianBlur(white, (0, 0), sigmaX=sigma[1] / f, sigmaY=sigma[0] / f, borderType=cv2.BORDER_REFLECT)
    if f > 1:
        field = cv2.resize(field, (shape[1], shape[0]), interpolation=cv2.INTER_CUBIC)
    return field / max(float(field.std()), 1e-9)


def _lens_fraction(gamma: np.ndarray, r_lamp: np.ndarray, r_ball: np.ndarray) -> np.ndarray:
    """Share of a disc of radius ``r_lamp`` covered by a disc of radius ``r_ball`` whose centre is
    ``gamma`` away (angles, small-angle plane): the area of intersection of two circles."""
    d = np.maximum(gamma, 1e-12)
    r1, r2 = r_lamp, r_ball
    c1 = np.clip((d * d + r1 * r1 - r2 * r2) / (2 * d * r1), -1.0, 1.0)
    c2 = np.clip((d * d + r2 * r2 - r1 * r1) / (2 * d * r2), -1.0, 1.0)
    k = (-d + r1 + r2) * (d + r1 - r2) * (d - r1 + r2) * (d + r1 + r2)
    area = r1 * r1 * np.arccos(c1) + r2 * r2 * np.arccos(c2) - 0.5 * np.sqrt(np.maximum(k, 0.0))
    inside = np.minimum(r1, r2) ** 2 * np.pi
    area = np.where(d <= np.abs(r1 - r2), inside, np.where(d >= r1 + r2, 0.0, area))
    return np.clip(area / (np.pi * r1 * r1), 0.0, 1.0)


class _RayGrid:
    """Undistorted normalised coordinates at any pixel position, from :meth:`Camera.undistort_normalised`
    on a grid every ``step`` px interpolated by cubic splines (error below 0.01 px, checked in the
    tests against the camera's own Newton inversion)."""

    def __init__(self, camera: Camera, step: int = 4, margin: int = 4):
        w, h = camera.image_size
        self.step, self.margin = step, margin
        gu = np.arange(-margin * step, w + (margin + 1) * step, step, dtype=float)
        gv = np.arange(-margin * step, h + (margin + 1) * step, step, dtype=float)
        uu, vv = np.meshgrid(gu, gv)
        xy = camera.undistort_normalised(np.column_stack([uu.ravel(), vv.ravel()])).reshape(len(gv), len(gu), 2)
        self._coef = [ndimage.spline_filter(xy[..., k], order=3, mode="nearest") for k in range(2)]
        self._rot = camera.R

    def normalised(self, u: np.ndarray, v: np.ndarray) -> np.ndarray:
        """(..., 2) ideal normalised (x/z, y/z) at pixel positions ``u``, ``v`` of any equal shape."""
        cu = (np.asarray(u, float) + self.margin * self.step) / self.step
        cv_ = (np.asarray(v, float) + self.margin * self.step) / self.step
        return np.stack(
            [ndimage.map_coordinates(c, [cv_, cu], order=3, mode="nearest", prefilter=False) for c in self._coef],
            axis=-1,
        )

    def directions(self, u: np.ndarray, v: np.ndarray) -> np.ndarray:
        """(..., 3) unit ray directions in the table frame (float64) at pixel positions ``u``, ``v``."""
        xy = self.normalised(u, v)
        d_cam = np.concatenate([xy, np.ones(xy.shape[:-1] + (1,))], axis=-1)
        d = d_cam @ self._rot  # R^T d_cam, row-wise
        return d / np.linalg.norm(d, axis=-1, keepdims=True)


# --- the renderer -------------------------------------------------------------------------------
class Renderer:
    """Films balls on ``table`` through ``camera``.

    ``balls`` gives the look of each ball, in the order of the ball axis of :meth:`render`'s
    arrays. ``seed`` seeds the sensor noise (``np.random.default_rng(seed)``); the static scene's
    textures come from ``look.texture_seed``.
    """

    def __init__(
        self,
        table: TableSpec,
        camera: Camera,
        look: Look,
        balls: Sequence[BallLook],
        occluder: Occluder | None = None,
        seed: int = 0,
    ):
        self.table, self.camera, self.look = table, camera, look
        self.balls = tuple(balls)
        for b in self.balls:
            if not isinstance(b, BallLook):
                raise ValueError(f"balls must be BallLook values, got {b!r}")
        self.occluder = occluder
        self._rng = np.random.default_rng(seed)
        self.width, self.height = camera.image_size
        self.R = table.radius_mm
        self.lamps = look.lamps if look.lamps is not None else default_lamps(table)
        self._lamp_pos = np.array([lp.position_mm for lp in self.lamps])  # (K, 3)
        self._lamp_power = np.array([lp.power for lp in self.lamps])
        self._C = camera.centre_mm.astype(float)
        self._grid = _RayGrid(camera)
        self._static: dict | None = None
        self._build_static()

    # --- static scene -------------------------------------------------------------------------
    def _surface(self, x: np.ndarray, y: np.ndarray, labels: bool = True):
        """Height field of the static scene at table points (x, y): z mm, and with ``labels`` also
        the surface label and the rail index (0..3 = bottom, right, top, left)."""
        t = self.table
        L, W = t.length_mm, t.width_mm
        o = np.maximum(np.maximum(-y, x - L), np.maximum(y - W, -x))  # L-infinity offset beyond the noses
        cw, rw = self.look.cushion_width_mm, t.rail_width_mm
        h, zr = t.nose_height_mm, t.rail_top_height_mm
        z = np.where(o <= 0, 0.0, np.where(o <= cw, h + (zr - h) * o / cw, np.where(o <= rw, zr, -FLOOR_DEPTH_MM)))
        if labels:
            label = np.full(x.shape, CLOTH, dtype=np.uint8)
            label[(o > 0) & (o <= cw)] = CUSHION
            top = (o > cw) & (o <= rw)
            label[top] = RAIL
            label[o > rw] = FLOOR
            if np.any(top):
                for rail_name, _, (sx, sy) in t.sights():
                    along, across = (x - sx, y - sy) if rail_name in ("bottom", "top") else (y - sy, x - sx)
                    inside = top & (np.abs(along) / SIGHT_HALF_ALONG_MM + np.abs(across) / SIGHT_HALF_ACROSS_MM <= 1)
                    label[inside] = SIGHT
        # Pockets: a throat channel between the facings, then the hole.
        for cut in self._pocket_cuts:
            (mx, my), out, perp, depth, ha, hb, (hx, hy), hr = cut
            near = (np.abs(x - hx) < depth + hr + 80) & (np.abs(y - hy) < depth + hr + 80)
            if not np.any(near):
                continue
            px, py = x - mx, y - my
            s = px * out[0] + py * out[1]  # depth behind the mouth line
            q = px * perp[0] + py * perp[1]  # position across the mouth
            throat = near & (s >= 0) & (s <= depth) & (q >= ha[0] + ha[1] * s) & (q <= hb[0] + hb[1] * s)
            hole = near & ((x - hx) ** 2 + (y - hy) ** 2 <= hr * hr)
            shelf = throat & ~hole & (o > 0)
            z = np.where(shelf, 0.0, z)
            z = np.where(hole, -HOLE_DEPTH_MM, z)
            if labels:
                label[shelf] = SHELF
                label[hole] = HOLE
        if not labels:
            return z
        offs = np.stack([-y, x - L, y - W, -x])
        return z, label, np.argmax(offs, axis=0)

    def _pocket_geometry(self) -> list:
        """Per pocket: mouth centre, outward unit, across unit, throat depth, the two facing lines
        as (offset, slope) of the across coordinate against depth, hole centre and radius."""
        t = self.table
        cuts = []
        for p in t.pockets():
            corner = p.name.endswith(("left", "right"))
            mouth = t.corner_mouth_mm if corner else t.side_mouth_mm
            shelf = CORNER_SHELF_MM if corner else SIDE_SHELF_MM
            entrance = CORNER_ENTRANCE_DEG if corner else SIDE_ENTRANCE_DEG
            a, b = np.array(p.jaw_a), np.array(p.jaw_b)
            mc = (a + b) / 2
            perp = (b - a) / np.linalg.norm(b - a)
            out = np.array([perp[1], -perp[0]])
            if out @ (np.array(p.centre) - mc) < 0:
                out = -out
                perp = -perp
                a, b = b, a
            # Facings converge by (entrance - 90 deg) for a side pocket and (entrance - 135 deg) for a
            # corner one, measured from the pocket's axis.
            conv = math.radians(entrance - (135.0 if corner else 90.0))
            tg = math.tan(conv)
            hr = (0.5 * mouth - shelf * tg) / (1 + tg)
            depth = shelf + hr
            hc = mc + out * depth
            half = np.linalg.norm(b - a) / 2
            cuts.append(((mc[0], mc[1]), out, perp, depth, (-half, tg), (half, -tg), (hc[0], hc[1]), hr))
        return cuts

    def _trace(self, d: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """March (N, 3) rays from the camera through the height field: (t mm, label, rail)."""
        C = self._C
        t = self.table
        zr = t.rail_top_height_mm
        n = len(d)
        dz = np.minimum(d[:, 2], -1e-9)
        t_top = (zr + 0.5 - C[2]) / dz
        t_bot = (-1.0 - C[2]) / dz
        t_cloth = (0.0 - C[2]) / dz
        out_t = t_cloth.copy()
        label = np.full(n, CLOTH, dtype=np.uint8)
        rail = np.zeros(n, dtype=np.int64)
        L, W, rw = t.length_mm, t.width_mm, t.rail_width_mm

        def offset(tt, idx):
            x = C[0] + tt * d[idx, 0]
            y = C[1] + tt * d[idx, 1]
            return np.maximum.reduce([-y, x - L, y - W, -x]), x, y

        allidx = np.arange(n)
        o_top, _, _ = offset(t_top, allidx)
        o_bot, xb, yb = offset(t_bot, allidx)
        # Both ends inside the (convex) nose rectangle: the ray meets the cloth, or a corner hole.
        near_pocket = np.zeros(n, bool)
        for cut in self._pocket_cuts:
            (mx, my), *_rest, (hx, hy), hr = cut
            reach = hr + 150.0
            near_pocket |= (xb - hx) ** 2 + (yb - hy) ** 2 < reach * reach
        simple_in = (o_top < 0) & (o_bot < 0) & ~near_pocket
        simple_out = (o_top > rw + 1) & (o_bot > rw + 1)
        upward = d[:, 2] >= -1e-9
        march = ~(simple_in | simple_out | upward)
        # Floor beyond the rails.
        tf = (-FLOOR_DEPTH_MM - C[2]) / dz
        out_t[simple_out] = tf[simple_out]
        label[simple_out] = FLOOR
        label[upward] = VOID
        out_t[upward] = 1e7
        idx = np.nonzero(march)[0]
        if len(idx):
            # Steps of at most a few mm across the 45 mm of height: thinner than any feature.
            steps = 16
            ts = t_top[idx, None] + (t_bot - t_top)[idx, None] * np.linspace(0, 1, steps)[None, :]
            dx, dy, dzi = d[idx, 0], d[idx, 1], d[idx, 2]
            hit = np.full(len(idx), -1)
            for k in range(steps):
                zs = self._surface(C[0] + ts[:, k] * dx, C[1] + ts[:, k] * dy, labels=False)
                below = (C[2] + ts[:, k] * dzi <= zs) & (hit < 0)
                hit[below] = k
            got = hit > 0
            lo = np.where(got, ts[np.arange(len(idx)), np.maximum(hit - 1, 0)], t_top[idx])
            hi = np.where(got, ts[np.arange(len(idx)), np.maximum(hit, 0)], t_bot[idx])
            for _ in range(13):
                mid = (lo + hi) / 2
                zs = self._surface(C[0] + mid * dx, C[1] + mid * dy, labels=False)
                below = C[2] + mid * dzi <= zs
                hi = np.where(below, mid, hi)
                lo = np.where(below, lo, mid)
            xb2 = C[0] + hi * d[idx, 0]
            yb2 = C[1] + hi * d[idx, 1]
            zs_b, lab_b, rail_b = self._surface(xb2, yb2)
            zray_b = C[2] + hi * d[idx, 2]
            xa = C[0] + lo * d[idx, 0]
            ya = C[1] + lo * d[idx, 1]
            lab_a = self._surface(xa, ya)[1]
            lab = lab_b.copy()
            # A ray ending below the surface beside it hit a vertical face. The bisection leaves
            # under 0.001 mm on a sloped top, so 0.01 mm tells them apart; a coarser threshold
            # drew the top of each face as cushion top and moved the imaged nose toward the
            # camera's nadir by that height times d / (H - h) (0.1-0.16 px on tilted views).
            wall = got & (zs_b - zray_b > 0.01)
            nose = wall & (lab_b == CUSHION) & (lab_a != SHELF) & (lab_a != HOLE)
            lab[wall] = FACING
            lab[nose] = NOSE_FACE
            # No crossing above the cloth: the ray reaches the cloth level over a hole or the floor.
            miss = ~got
            deep = miss & (lab_b == HOLE)
            floor = miss & (lab_b == FLOOR)
            tt = hi.copy()
            tt[floor] = tf[idx][floor]
            lab[floor] = FLOOR
            tt[deep] = t_bot[idx][deep]
            out_t[idx] = tt
            label[idx] = lab
            rail[idx] = rail_b
        # Simple cloth rays: label from the surface at the cloth point (holes are not possible).
        si = np.nonzero(simple_in)[0]
        label[si] = CLOTH
        return out_t, label, rail

    def _shade_static(self, d: np.ndarray, t_hit: np.ndarray, label: np.ndarray, rail: np.ndarray):
        """Albedo (N, 3) DN, irradiance (K + 1, N) (ambient first), specular (N,) and normals (N, 3)."""
        look, tab = self.look, self.table
        P = self._C + t_hit[:, None] * d
        n = np.zeros_like(P)
        n[:, 2] = 1.0
        outward = _RAIL_NORMALS[rail]
        # Cushion top rises outward: its normal leans inward.
        slope = (tab.rail_top_height_mm - tab.nose_height_mm) / look.cushion_width_mm
        m = label == CUSHION
        n[m, :2] = -outward[m] * slope
        # Face under the nose: undercut, so it looks inward and down.
        m = label == NOSE_FACE
        nf = np.array([tab.nose_height_mm, -NOSE_UNDERCUT_MM])
        nf = nf / np.linalg.norm(nf)
        n[m, :2] = -outward[m] * nf[0]
        n[m, 2] = nf[1]
        m = label == FACING
        horiz = -d[m, :2]
        n[m, :2] = horiz / np.maximum(np.linalg.norm(horiz, axis=1, keepdims=True), 1e-9)
        n[m, 2] = 0.0
        n /= np.linalg.norm(n, axis=1, keepdims=True)

        # Albedo with textures sampled in the table frame (2 mm texels).
        albedo = np.zeros_like(P)
        colours = {
            CLOTH: look.cloth_bgr,
            SHELF: look.cloth_bgr,
            CUSHION: look.cushion_bgr,
            NOSE_FACE: look.cushion_bgr,
            FACING: look.cushion_bgr,
            RAIL: look.rail_bgr,
            SIGHT: look.sight_bgr,
            HOLE: look.pocket_bgr,
            FLOOR: look.floor_bgr,
            VOID: look.floor_bgr,
        }
        for lab, col in colours.items():
            albedo[label == lab] = col
        felt = self._sample_texture(self._tex_felt, P[:, 0], P[:, 1])
        grain_x = self._sample_texture(self._tex_grain_x, P[:, 0], P[:, 1])
        grain_y = self._sample_texture(self._tex_grain_y, P[:, 0], P[:, 1])
        clothish = np.isin(label, (CLOTH, SHELF, CUSHION, NOSE_FACE, FACING))
        albedo[clothish] *= (1 + look.cloth_texture * felt[clothish])[:, None]
        wood = label == RAIL
        grain = np.where(np.isin(rail, (0, 2)), grain_x, grain_y)
        albedo[wood] *= (1 + 0.12 * grain[wood])[:, None]
        floor = label == FLOOR
        albedo[floor] *= (1 + 0.1 * felt[floor])[:, None]
        hole = label == HOLE
        # Deeper into the pocket is darker (less light reaches it).
        albedo[hole] *= np.exp(np.minimum(P[hole, 2], 0.0) / 60.0)[:, None] * 0.8 + 0.2

        E = np.zeros((len(self.lamps) + 1, len(P)))
        # Ambient, reduced near the nose by the cushion's share of the sky: the 2-D view factor of
        # a wall of height h at distance e, (1 - e / sqrt(e^2 + h^2)) / 2 (Hottel's crossed strings).
        e = np.maximum(-np.max(np.stack([-P[:, 1], P[:, 0] - tab.length_mm, P[:, 1] - tab.width_mm, -P[:, 0]]), 0), 0)
        hn = tab.nose_height_mm
        share = (1 - e / np.sqrt(e * e + hn * hn)) / 2
        amb = np.ones(len(P))
        cl = label == CLOTH
        amb[cl] = 1 - share[cl]
        amb[label == NOSE_FACE] = 0.5
        amb[label == FACING] = 0.6
        amb[hole] = 0.3
        E[0] = look.ambient * amb
        spec = np.zeros(len(P))
        V = -d
        for k in range(len(self.lamps)):
            lv = self._lamp_pos[k] - P
            r2 = np.sum(lv * lv, axis=1)
            r = np.sqrt(r2)
            lu = lv / r[:, None]
            cone = np.clip(lu[:, 2], 0, 1) ** look.lamp_cone
            ndl = np.clip(np.sum(n * lu, axis=1), 0, None)
            E[k + 1] = self._lamp_scale[k] * cone * ndl / r2
            hv = lu + V
            hv /= np.linalg.norm(hv, axis=1, keepdims=True)
            ndh = np.clip(np.sum(n * hv, axis=1), 0, None)
            spec += self._lamp_scale[k] * cone / r2 * ndh ** 30.0 * (ndl > 0)
        spec = np.where(wood, look.rail_specular * 255.0 * spec, 0.0)
        return albedo, E, spec, n

    def _sample_texture(self, tex: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Bilinear sample of a table-frame texture at (N,) points (x, y) mm."""
        n = len(x)
        cols = 4096  # remap wants maps under 32767 rows
        rows = -(-n // cols)
        u = np.zeros(rows * cols, np.float32)
        v = np.zeros(rows * cols, np.float32)
        u[:n] = (x - self._tex_origin[0]) / self._tex_step
        v[:n] = (y - self._tex_origin[1]) / self._tex_step
        out = cv2.remap(tex, u.reshape(rows, cols), v.reshape(rows, cols), cv2.INTER_LINEAR, borderMode=cv2.BORDER_REFLECT)
        return out.ravel()[:n].astype(float)

    def _build_static(self) -> None:
        look, tab = self.look, self.table
        self._pocket_cuts = self._pocket_geometry()
        # Lamp scale: irradiance 1 in total (ambient share included) at the middle of the cloth.
        mid = np.array([tab.length_mm / 2, tab.width_mm / 2, 0.0])
        lv = self._lamp_pos - mid
        r2 = np.sum(lv * lv, axis=1)
        cosz = lv[:, 2] / np.sqrt(r2)
        raw = self._lamp_power * cosz**look.lamp_cone * cosz / r2
        self._lamp_scale = self._lamp_power * (1 - look.ambient) / raw.sum()
        # Textures (table frame, 2 mm texels): felt (fine fibres, mottling, broad wear) and wood
        # grain along each rail.
        trng = np.random.default_rng(look.texture_seed)
        margin = tab.rail_width_mm + 200.0
        self._tex_step = 2.0
        self._tex_origin = (-margin, -margin)
        shape = (int((tab.width_mm + 2 * margin) / 2) + 2, int((tab.length_mm + 2 * margin) / 2) + 2)
        felt = 0.55 * _smooth_noise(trng, shape, (0.6, 0.6)) + 0.35 * _smooth_noise(trng, shape, (5, 5))
        felt += 0.4 * _smooth_noise(trng, shape, (60, 60))
        self._tex_felt = felt.astype(np.float32)
        self._tex_grain_x = (_smooth_noise(trng, shape, (0.7, 40)) + 0.5 * _smooth_noise(trng, shape, (8, 80))).astype(np.float32)
        self._tex_grain_y = (_smooth_noise(trng, shape, (40, 0.7)) + 0.5 * _smooth_noise(trng, shape, (80, 8))).astype(np.float32)

        w, h = self.width, self.height
        uu, vv = np.meshgrid(np.arange(w, dtype=float), np.arange(h, dtype=float))
        d = self._grid.directions(uu, vv).reshape(-1, 3)
        t_hit, label, rail = self._trace(d)
        albedo, E, spec, normals = self._shade_static(d, t_hit, label, rail)
        K1 = E.shape[0]
        lit = albedo * E.sum(axis=0)[:, None] + spec[:, None]
        # Supersample pixels on a boundary between surfaces (3 x 3) so edges are anti-aliased.
        lab2 = label.reshape(h, w)
        edge = np.zeros((h, w), bool)
        for dv, du in ((0, 1), (1, 0), (1, 1), (1, -1)):
            a = lab2[max(dv, 0) :, max(du, 0) : w + min(du, 0)]
            b = lab2[: h - dv, max(-du, 0) : w - max(du, 0)]
            diff = a != b
            edge[max(dv, 0) :, max(du, 0) : w + min(du, 0)] |= diff
            edge[: h - dv, max(-du, 0) : w - max(du, 0)] |= diff
        ei = np.nonzero(edge.ravel())[0]
        if len(ei):
            ns = 3
            offs = (np.arange(ns) + 0.5) / ns - 0.5
            ou, ov = np.meshgrid(offs, offs)
            su = (uu.ravel()[ei, None] + ou.ravel()[None, :]).ravel()
            sv = (vv.ravel()[ei, None] + ov.ravel()[None, :]).ravel()
            ds = self._grid.directions(su, sv)
            ts, ls, rs = self._trace(ds)
            al_s, E_s, sp_s, _ = self._shade_static(ds, ts, ls, rs)
            lit_s = al_s * E_s.sum(axis=0)[:, None] + sp_s[:, None]
            lit[ei] = lit_s.reshape(len(ei), ns * ns, 3).mean(axis=1)
            albedo[ei] = al_s.reshape(len(ei), ns * ns, 3).mean(axis=1)
            E[:, ei] = E_s.reshape(K1, len(ei), ns * ns).mean(axis=2)
        # Natural vignetting: cos^4 of the angle off the optical axis.
        cos_axis = (d @ self.camera.R[2]).reshape(h, w)
        vig = 1 - look.vignetting * (1 - cos_axis**4)
        self._gain = (look.exposure * vig).astype(np.float32)  # (H, W)
        self._dirs = d.reshape(h, w, 3).astype(np.float32)
        self._t_bg = t_hit.reshape(h, w).astype(np.float32)
        self._label = lab2
        self._normals = normals.reshape(h, w, 3).astype(np.float32)
        self._A = (albedo.reshape(h, w, 3) * self._gain[..., None]).astype(np.float32)
        self._E = E.reshape(K1, h, w).astype(np.float32)
        self._bg_sharp = (lit.reshape(h, w, 3) * self._gain[..., None]).astype(np.float32)
        self._bg = self._blur(self._bg_sharp)
        # Angular size of a pixel (rad), from neighbouring rays.
        dd = self._dirs.astype(float)
        gu = np.linalg.norm(np.diff(dd, axis=1), axis=2)
        gv = np.linalg.norm(np.diff(dd, axis=0), axis=2)
        gu = np.concatenate([gu, gu[:, -1:]], axis=1)
        gv = np.concatenate([gv, gv[-1:, :]], axis=0)
        self._ang = ((gu + gv) / 2).astype(np.float32)
        cloth = self.look.cloth_bgr
        self._bounce = np.array(cloth, float) / 255.0
        self._build_pixel_constants()

    def _build_pixel_constants(self) -> None:
        """Per-pixel constants of the per-frame shading, planar (first axis = component) float32
        so the per-ball loops read contiguous rows: the static surface point each pixel sees
        ``_Pp`` (3, H, W) mm, its normal ``_Np`` (3, H, W), and per lamp the unit vector to the
        lamp ``_lamp_u`` (K, 3, H, W), the distance ``_lamp_d`` (K, H, W) mm and the angular
        radius of the lamp's disc ``_lamp_r`` (K, H, W) rad.

        On the floor ``_lamp_d`` is 0, so no ball shadows it: a line from a lamp above the table
        through a ball on it meets the table (within 1.03 times the lamp-to-ball offset, at most
        about 40 mm past the ball) before the floor, so the table hides the lamp there first."""
        P = self._C[:, None, None] + self._t_bg[None].astype(float) * np.moveaxis(self._dirs, -1, 0).astype(float)
        self._Pp = P.astype(np.float32)
        self._Np = np.ascontiguousarray(np.moveaxis(self._normals, -1, 0))
        K = len(self.lamps)
        h, w = self.height, self.width
        self._lamp_u = np.empty((K, 3, h, w), np.float32)
        self._lamp_d = np.empty((K, h, w), np.float32)
        for k in range(K):
            lv = self._lamp_pos[k][:, None, None] - P
            dl = np.sqrt(np.sum(lv * lv, axis=0))
            self._lamp_u[k] = lv / dl
            self._lamp_d[k] = dl
        self._lamp_r = (self.look.shadow_softness_mm / self._lamp_d).astype(np.float32)
        self._lamp_d[:, self._label == FLOOR] = 0.0
        self._mid_uv = self.camera.project(np.array([[self.table.length_mm / 2, self.table.width_mm / 2, 0.0]]))[0]
        a = np.linspace(0, 2 * np.pi, 16, endpoint=False)
        self._ring = np.column_stack([np.cos(a), np.sin(a)])  # unit circle for capsule ends
        self._bg_loss0 = self._E.sum(axis=0)  # (H, W): irradiance lost if every source were hidden
        # cv2.GaussianBlur's own kernel radius for float images (4 sigma), plus one pixel: how far
        # a change spreads through the optics.
        s = self.look.blur_px
        self._blur_r = ((int(round(s * 8 + 1)) | 1) // 2 + 1) if s > 0 else 0
        # Inverse-CDF table for sensor noise: 2^16 equiprobable standard normal quantiles,
        # rescaled to unit variance (inverse transform sampling, Devroye 1986, "Non-Uniform
        # Random Variate Generation", ch. 2).
        q = ndtri((np.arange(1 << 16) + 0.5) / (1 << 16))
        self._gauss_q = (q / q.std()).astype(np.float32)

    def _blur(self, img: np.ndarray) -> np.ndarray:
        if self.look.blur_px <= 0:
            return img.copy()
        return cv2.GaussianBlur(img, (0, 0), self.look.blur_px, borderType=cv2.BORDER_REPLICATE)

    def with_balls(self, balls: Sequence[BallLook], occluder: Occluder | None = None, seed: int = 0) -> "Renderer":
        """A renderer for the same table, camera and look with other balls, occluder and noise
        seed, sharing this one's static scene (no re-tracing)."""
        other = copy.copy(self)
        other.balls = tuple(balls)
        for b in other.balls:
            if not isinstance(b, BallLook):
                raise ValueError(f"balls must be BallLook values, got {b!r}")
        other.occluder = occluder
        other._rng = np.random.default_rng(seed)
        other._static = None
        return other

    def background(self) -> np.ndarray:
        """(H, W, 3) float32 BGR 0..255: the static scene without balls, as frames show it (optical
        blur applied; no noise, no quantisation). Computed once; a copy is returned."""
        return self._bg.copy()

    @property
    def surface_labels(self) -> np.ndarray:
        """(H, W) uint8 label of the static surface each pixel centre sees (module constants
        CLOTH, SHELF, CUSHION, NOSE_FACE, FACING, RAIL, SIGHT, HOLE, FLOOR, VOID)."""
        return self._label.copy()

    # --- per frame ------------------------------------------------------------------------------
    def _pixel_box(self, pts: np.ndarray, pad: float) -> tuple[int, int, int, int] | None:
        """Integer (v0, v1, u0, u1) image box (end exclusive) holding the projections of (N, 3)
        table points, padded; None if off the image."""
        uv = self.camera.project(pts)
        uv = uv[np.all(np.isfinite(uv), axis=1)]
        if len(uv) == 0:
            return None
        u0 = int(math.floor(uv[:, 0].min() - pad))
        u1 = int(math.ceil(uv[:, 0].max() + pad)) + 1
        v0 = int(math.floor(uv[:, 1].min() - pad))
        v1 = int(math.ceil(uv[:, 1].max() + pad)) + 1
        u0, v0 = max(u0, 0), max(v0, 0)
        u1, v1 = min(u1, self.width), min(v1, self.height)
        if u1 <= u0 or v1 <= v0:
            return None
        return (v0, v1, u0, u1)

    @staticmethod
    def _box_points(xmin, xmax, ymin, ymax, zs) -> np.ndarray:
        xs = np.linspace(xmin, xmax, 3)
        ys = np.linspace(ymin, ymax, 3)
        gx, gy, gz = np.meshgrid(xs, ys, np.asarray(zs, float))
        return np.column_stack([gx.ravel(), gy.ravel(), gz.ravel()])

    def _ball_boxes(self, xy: np.ndarray):
        """Image boxes for one ball over its (M, 2) sub-sample centres: silhouette, contact
        (ambient-occlusion) region, and one shadow region per lamp. Each box holds every pixel
        the ball changes in that way (the tests compare against a full-frame render)."""
        R = self.R
        zr = self.table.rail_top_height_mm
        pad = 2.0 + 3 * self.look.blur_px
        x0, x1 = xy[:, 0].min(), xy[:, 0].max()
        y0, y1 = xy[:, 1].min(), xy[:, 1].max()
        sil = self._pixel_box(self._box_points(x0 - R, x1 + R, y0 - R, y1 + R, (0.0, 2 * R)), pad)
        # Ambient occlusion reaches 4 R from the centre, so surfaces down to 3 R below the cloth
        # (inside a pocket hole) can be darkened.
        z_lo = -3 * R if self._near_hole(x0, x1, y0, y1, 4 * R) else 0.0
        ao = self._pixel_box(self._box_points(x0 - 4 * R, x1 + 4 * R, y0 - 4 * R, y1 + 4 * R, (z_lo, zr)), pad)
        shadows = []
        for k in range(len(self.lamps)):
            lp = self._lamp_pos[k]
            lz = lp[2]
            if lz <= 2 * R:
                shadows.append(None)
                continue
            f = lz / (lz - R)
            sx = lp[0] + (xy[:, 0] - lp[0]) * f
            sy = lp[1] + (xy[:, 1] - lp[1]) * f
            sec = math.sqrt(1 + (max(np.hypot(sx - lp[0], sy - lp[1]).max(), 0.0) / lz) ** 2)
            rs = 1.3 * R * f * sec**2 + 2 * self.look.shadow_softness_mm * R / (lz - R) + 3.0
            xs = np.concatenate([sx, xy[:, 0]])
            ys = np.concatenate([sy, xy[:, 1]])
            shadows.append(
                self._pixel_box(self._box_points(xs.min() - rs, xs.max() + rs, ys.min() - rs, ys.max() + rs, (0.0, zr)), pad)
            )
        return sil, ao, shadows

    def _near_hole(self, x0, x1, y0, y1, reach) -> bool:
        """Whether the table box [x0, x1] x [y0, y1] (mm) comes within ``reach`` mm of a pocket hole."""
        for cut in self._pocket_cuts:
            (hx, hy), hr = cut[6], cut[7]
            if x0 - reach - hr < hx < x1 + reach + hr and y0 - reach - hr < hy < y1 + reach + hr:
                return True
        return False

    def _item(self, b: int, xy: np.ndarray, on: np.ndarray) -> dict | None:
        """Ball ``b`` over its sub-samples: (S, 2) centres mm with absent ones replaced by a present
        one (so no NaN reaches the arithmetic), ``on`` (S,), its boxes and their union ``region``."""
        xy = np.array(xy, dtype=float)
        xy[~on] = xy[on][0]
        sil, ao, shadows = self._ball_boxes(xy[on])
        boxes = [x for x in [sil, ao, *shadows] if x is not None]
        if not boxes:
            return None
        region = (min(x[0] for x in boxes), max(x[1] for x in boxes), min(x[2] for x in boxes), max(x[3] for x in boxes))
        return {"b": b, "xy": xy, "on": on, "sil": sil, "ao": ao, "shadows": shadows, "region": region}

    def _check(self, pos_mm, rot, present, times_s):
        pos = np.asarray(pos_mm, dtype=float)
        present = np.asarray(present, dtype=bool)
        times = np.asarray(times_s, dtype=float).reshape(-1)
        nb = len(self.balls)
        if pos.ndim != 3 or pos.shape[1:] != (nb, 2) or pos.shape[0] < 1:
            raise ValueError(f"pos_mm has shape {pos.shape}; expected (S, {nb}, 2) with S >= 1 sub-samples")
        S = pos.shape[0]
        rot = np.asarray(rot, dtype=float)
        if rot.shape != (S, nb, 3, 3):
            raise ValueError(f"rot has shape {rot.shape}; expected {(S, nb, 3, 3)} rotation matrices")
        if present.shape != (S, nb):
            raise ValueError(f"present has shape {present.shape}; expected {(S, nb)}")
        if times.shape != (S,):
            raise ValueError(f"times_s has shape {times.shape}; expected ({S},), one time per sub-sample")
        if not np.all(np.isfinite(pos[present])):
            raise ValueError("pos_mm holds non-finite positions for present balls; mark such balls not present")
        return pos, rot, present, times

    def render(self, pos_mm, rot, present, times_s) -> np.ndarray:
        """One frame: uint8 (H, W, 3) BGR.

        ``pos_mm`` (S, B, 2) ball centres (x, y) mm in the table frame at S instants across the
        shutter-open interval (the ball centre is R above the cloth); ``rot`` (S, B, 3, 3)
        body-to-table rotation matrices (``X_table = rot @ X_body``); ``present`` (S, B) bool (a
        ball off the table is not drawn); ``times_s`` (S,) the instants, s (they place the
        occluder). Ball order is that of ``balls``. The frame is the mean of the S sub-sample
        images (motion blur), blurred by the optics, plus sensor noise from the renderer's own
        generator, rounded to 8 bits.

        Only what moves is recomputed: balls at rest (same pose in every sub-sample) live in a
        static frame kept, sharp and blurred, across calls and updated where a ball comes to rest
        or starts moving; each frame re-renders, with all S sub-samples, only the boxes of moving
        balls (merged where they overlap), composed exactly with the resting balls' shadows and
        silhouettes there, and adds their optically blurred change to the blurred static frame
        (the blur is linear). :meth:`_compose_reference` is the plain full-frame computation the
        tests hold this to.
        """
        pos, rot, present, times = self._check(pos_mm, rot, present, times_s)
        return self._expose(self._compose(pos, rot, present, times))

    def _compose(self, pos, rot, present, times) -> np.ndarray:
        """(H, W, 3) float32 frame before flicker, noise and quantisation (checked inputs)."""
        S, nb = pos.shape[:2]
        rest, moving = {}, []
        for b in range(nb):
            on = present[:, b]
            if not on.any():
                continue
            if on.all() and np.all(pos[:, b] == pos[0, b]) and np.all(rot[:, b] == rot[0, b]):
                rest[b] = (pos[0, b], rot[0, b])
            else:
                moving.append(b)
        st = self._update_static(rest)
        out = st["blurred"].copy()
        items = [self._item(b, pos[:, b], present[:, b]) for b in moving]
        items = [it for it in items if it is not None]
        for members in _merge_regions(items):
            rect = _union(it["region"] for it in members)
            still = [it for it in st["items"].values() if _overlap(it["region"], rect)]
            mean = self._mean_patch(rect, members, still, rot)
            v0, v1, u0, u1 = rect
            self._add_blurred(out, rect, mean - st["sharp"][v0:v1, u0:u1])
        if self.occluder is not None:
            self._draw_occluder(out, times)
        return out

    def _expose(self, out: np.ndarray) -> np.ndarray:
        """Flicker, sensor noise and 8-bit quantisation of a (H, W, 3) float32 frame (in place)."""
        look = self.look
        if look.flicker > 0:
            out *= np.float32(1 + look.flicker * self._rng.standard_normal())
        if look.noise_sigma > 0 or look.shot_noise > 0:
            # Fresh every frame: uniform 16-bit draws through the normal quantile table (a third
            # of the cost of standard_normal here).
            idx = self._rng.integers(0, 1 << 16, out.size, dtype=np.uint16)
            noise = self._gauss_q[idx].reshape(out.shape)
            if look.shot_noise > 0:
                sigma = np.sqrt(look.noise_sigma**2 + look.shot_noise * np.clip(out, 0, None))
                out += noise * sigma
            else:
                noise *= np.float32(look.noise_sigma)
                out += noise
        np.maximum(out, 0, out=out)
        # Saturates at 255 and rounds half to even, as np.rint would.
        return cv2.convertScaleAbs(out)

    def _update_static(self, rest: dict) -> dict:
        """Bring the static frame up to date with the balls at rest: ``rest`` maps ball index to
        its ((2,) centre mm, (3, 3) rotation). Returns the state: ``items`` (resting balls, with
        their boxes), ``sharp`` and ``blurred`` (H, W, 3) float32 frames."""
        st = self._static
        if st is None:
            st = self._static = {"items": {}, "sharp": self._bg_sharp.copy(), "blurred": self._bg.copy()}
        old = st["items"]
        new = {}
        for b, (xy, r) in rest.items():
            it = old.get(b)
            if it is not None and np.array_equal(it["xy"][0], xy) and np.array_equal(it["rot"], r):
                new[b] = it
            else:
                it = self._item(b, xy[None], np.ones(1, bool))
                if it is not None:
                    it["rot"] = np.array(r)
                    new[b] = it
        changed = [it["region"] for b, it in old.items() if new.get(b) is not it]
        changed += [it["region"] for b, it in new.items() if old.get(b) is not it]
        st["items"] = new
        for members in _merge_regions([{"region": r} for r in changed]):
            rect = _union(it["region"] for it in members)
            still = [it for it in new.values() if _overlap(it["region"], rect)]
            v0, v1, u0, u1 = rect
            st["sharp"][v0:v1, u0:u1] = self._mean_patch(rect, [], still, None)
            # Re-blur from the sharp frame (no drift): the blur of a rect grown by r needs the
            # sharp frame 2 r around it.
            r = self._blur_r
            g = _grow(rect, 2 * r, self.height, self.width)
            inner = _grow(rect, r, self.height, self.width)
            if r:
                blurred = self._blur(st["sharp"][g[0] : g[1], g[2] : g[3]])
                st["blurred"][inner[0] : inner[1], inner[2] : inner[3]] = blurred[
                    inner[0] - g[0] : inner[1] - g[0], inner[2] - g[2] : inner[3] - g[2]
                ]
            else:
                st["blurred"][v0:v1, u0:u1] = st["sharp"][v0:v1, u0:u1]
        return st

    def _add_blurred(self, out: np.ndarray, rect, delta: np.ndarray) -> None:
        """Add the optical blur of ``delta`` (h, w, 3), a change confined to ``rect``, to ``out``.
        The change is zero outside ``rect``, so blurring it padded by the kernel radius with zeros
        (replicated only where the image itself ends, as the full-frame blur does) is exact."""
        v0, v1, u0, u1 = rect
        r = self._blur_r
        if r == 0:
            out[v0:v1, u0:u1] += delta
            return
        g = _grow(rect, r, self.height, self.width)
        pad = np.zeros((g[1] - g[0], g[3] - g[2], 3), np.float32)
        pad[v0 - g[0] : v1 - g[0], u0 - g[2] : u1 - g[2]] = delta
        out[g[0] : g[1], g[2] : g[3]] += self._blur(pad)

    def _mean_patch(self, rect, moving: list[dict], still: list[dict], rot) -> np.ndarray:
        """Mean over sub-samples of the sharp image inside ``rect`` (v0, v1, u0, u1) with the
        ``moving`` balls (items over all S sub-samples; ``rot`` (S, B, 3, 3)) and the ``still``
        ones (items at rest, one sub-sample); (h, w, 3) float32.

        Each light source's visibility is the product over balls of (1 - occlusion); the image is
        the sharp background less the hidden irradiance times albedo, then balls are painted
        farthest from the camera first (painter's order; exact for equal spheres that do not
        overlap)."""
        v0, v1, u0, u1 = rect
        h, w = v1 - v0, u1 - u0
        K1 = self._E.shape[0]
        vis = np.ones((1, K1, h, w), np.float32)
        for it in still:
            self._occlude(vis, rect, it)
        if moving:
            S = len(moving[0]["xy"])
            vis = np.repeat(vis, S, axis=0)
            for it in moving:
                self._occlude(vis, rect, it)
        E = self._E[:, v0:v1, u0:u1]
        loss = self._bg_loss0[v0:v1, u0:u1][None] - np.einsum("skhw,khw->shw", vis, E)
        img = self._bg_sharp[v0:v1, u0:u1][None] - loss[..., None] * self._A[v0:v1, u0:u1][None]
        order = sorted(still + moving, key=lambda it: -float(np.linalg.norm(np.append(it["xy"].mean(0), self.R) - self._C)))
        for it in order:
            box = _clip_box(it["sil"], rect)
            if box is None:
                continue
            a0, a1, b0, b1 = box
            if "rot" in it:
                col, cov = self._still_shade(it)
                s0, t0 = it["sil"][0], it["sil"][2]
                col = col[:, a0 - s0 : a1 - s0, b0 - t0 : b1 - t0]
                cov = cov[:, a0 - s0 : a1 - s0, b0 - t0 : b1 - t0]
            else:
                b = it["b"]
                col, cov = self._shade_ball(b, box, it["xy"], rot[:, b], it["on"])
            sub = img[:, a0 - v0 : a1 - v0, b0 - u0 : b1 - u0]
            sub *= 1 - cov[..., None]
            sub += col * cov[..., None]
        return img[0] if len(img) == 1 else img.mean(axis=0)

    def _still_shade(self, it: dict):
        """Colour and coverage of a resting ball over its whole silhouette box, kept with it."""
        if "shade" not in it:
            it["shade"] = self._shade_ball(it["b"], it["sil"], it["xy"], it["rot"][None], it["on"])
        return it["shade"]

    def _occlude(self, vis: np.ndarray, rect, it: dict) -> None:
        """Multiply the (S, K + 1, h, w) visibilities over ``rect`` (ambient first, then each lamp)
        by (1 - the occlusion by ball ``it``), within its boxes."""
        v0, v1, u0, u1 = rect
        R = np.float32(self.R)
        xy = it["xy"].astype(np.float32)
        on = it["on"].astype(np.float32)[:, None, None]
        bx, by = xy[:, 0, None, None], xy[:, 1, None, None]
        box = _clip_box(it["ao"], rect)
        if box is not None:
            a0, a1, b0, b1 = box
            P = self._Pp[:, a0:a1, b0:b1]
            N = self._Np[:, a0:a1, b0:b1]
            occ = _ao_occlusion(bx - P[0], by - P[1], R - P[2], N, R)
            vis[:, 0, a0 - v0 : a1 - v0, b0 - u0 : b1 - u0] *= 1 - occ * on
        for k, sb in enumerate(it["shadows"]):
            box = _clip_box(sb, rect)
            if box is None:
                continue
            a0, a1, b0, b1 = box
            P = self._Pp[:, a0:a1, b0:b1]
            occ = _shadow_occlusion(
                bx - P[0], by - P[1], R - P[2], self._lamp_u[k, :, a0:a1, b0:b1], self._lamp_d[k, a0:a1, b0:b1], self._lamp_r[k, a0:a1, b0:b1], R
            )
            vis[:, k + 1, a0 - v0 : a1 - v0, b0 - u0 : b1 - u0] *= 1 - occ * on

    def _compose_reference(self, pos, rot, present, times) -> np.ndarray:
        """The plain computation :meth:`_compose` must reproduce, for the tests: every ball over the
        whole frame at every sub-sample, the mean of the S full frames blurred as a whole, the
        occluder drawn with a separate shadow blur per lamp and sub-sample. No state is kept."""
        pos, rot, present, times = self._check(pos, rot, present, times)
        S, nb = pos.shape[:2]
        full = (0, self.height, 0, self.width)
        items = []
        for b in range(nb):
            on = present[:, b]
            if on.any():
                xy = pos[:, b].copy()
                xy[~on] = xy[on][0]
                items.append({"b": b, "xy": xy, "on": on, "sil": full, "ao": full, "shadows": [full] * len(self.lamps), "region": full})
        if items:
            mean = self._mean_patch(full, items, [], rot)
        else:
            mean = self._bg_sharp.copy()
        out = self._blur(mean)
        if self.occluder is not None:
            self._draw_occluder(out, times, blur_each=True)
        return out

    def _shade_ball(self, b, box, xy, rot, on):
        """Colour (S, h, w, 3) DN and coverage (S, h, w) of ball ``b`` in ``box``.

        Per pixel: the ray's angle to the ball centre against the silhouette cone's half-angle
        asin(R / |B - C|), divided by the pixel's angular size, gives a signed distance in pixels;
        coverage is 0.5 minus it, clipped to 0..1. The visible point is the ray's first hit on the
        sphere (the rim point for pixels outside the silhouette).
        """
        a0, a1, b0, b1 = box
        look = self.look
        R = self.R
        S = len(xy)
        D = self._dirs[a0:a1, b0:b1].astype(float)  # (h, w, 3)
        ang = self._ang[a0:a1, b0:b1].astype(float)
        C = self._C
        B = np.column_stack([xy, np.full(S, R)])  # (S, 3)
        v = B - C
        vv = np.sum(v * v, axis=1)
        vn = np.sqrt(vv)
        tca = np.einsum("hwc,sc->shw", D, v)
        cx = np.cross(D[None], v[:, None, None, :])  # |v x d| is the distance from the centre to the ray
        dist2 = np.sum(cx * cx, axis=-1)
        dist = np.sqrt(dist2)
        alpha = np.arctan2(dist, tca)
        beta = np.arcsin(R / vn)[:, None, None]
        cov = np.clip(0.5 - (alpha - beta) / ang[None], 0, 1) * on[:, None, None]
        d2c = np.minimum(dist2, R * R * (1 - 1e-9))
        t = tca - np.sqrt(R * R - d2c)
        cov = cov * (t < self._t_bg[a0:a1, b0:b1][None])
        P = C + t[..., None] * D[None]
        n = (P - B[:, None, None, :]) / R
        n /= np.linalg.norm(n, axis=-1, keepdims=True)
        nb = np.einsum("shwc,scd->shwd", n, rot)  # body-frame normal: rot^T n
        white = np.array(look.ball_white_bgr, float)
        spec_col = self.balls[b]
        colour = np.array(spec_col.colour_bgr, float)
        # Texture edges are softened over one pixel's footprint on the sphere (radians of arc).
        cosv = np.clip(-np.sum(n * D[None], axis=-1), 0.15, 1)
        foot = t * ang[None] / cosv / R
        disc = 0.33  # number disc angular radius, rad
        if spec_col.kind == "cue":
            alb = np.broadcast_to(colour, n.shape).copy()
        elif spec_col.kind == "solid":
            ang_pole = np.arccos(np.clip(np.abs(nb[..., 2]), 0, 1))
            wmix = np.clip((disc - ang_pole) / foot + 0.5, 0, 1)[..., None]
            alb = colour * (1 - wmix) + white * wmix
        else:
            lat = np.arcsin(np.clip(np.abs(nb[..., 2]), 0, 1))  # band |z| < R/2 is latitude < 30 deg
            band = np.clip((math.asin(0.5) - lat) / foot + 0.5, 0, 1)
            ang_eq = np.arccos(np.clip(np.abs(nb[..., 0]), 0, 1))
            num = np.clip((disc - ang_eq) / foot + 0.5, 0, 1)
            cmix = (band * (1 - num))[..., None]
            alb = colour * cmix + white * (1 - cmix)
        alb /= 255.0
        # Light: ambient from the upper hemisphere, green bounce from the cloth below, lamps.
        nz = n[..., 2]
        amb = look.ambient * (0.5 + 0.5 * nz)
        irr = amb[..., None] + (look.ambient + 0.5) * 0.35 * (0.5 - 0.5 * nz)[..., None] * self._bounce
        spec = np.zeros(t.shape)
        V = -D[None]
        for k in range(len(self.lamps)):
            lv = self._lamp_pos[k] - P
            r2 = np.sum(lv * lv, axis=-1)
            lu = lv / np.sqrt(r2)[..., None]
            cone = np.clip(lu[..., 2], 0, 1) ** look.lamp_cone
            ndl = np.sum(n * lu, axis=-1)
            power = self._lamp_scale[k] * cone / r2
            irr += (power * np.clip(ndl, 0, None))[..., None]
            hv = lu + V
            hv /= np.linalg.norm(hv, axis=-1, keepdims=True)
            ndh = np.clip(np.sum(n * hv, axis=-1), 0, None)
            spec += power * ndh**look.shininess * (ndl > 0)
        g = self._gain[a0:a1, b0:b1].astype(float)[None, ..., None]
        col = g * (255.0 * alb * irr + 255.0 * look.specular * spec[..., None])
        return col.astype(np.float32), cov.astype(np.float32)

    # --- occluder -----------------------------------------------------------------------------
    def _stroke_offset(self, tau: float) -> float:
        """How far (mm) the tip is behind its contact position at ``tau`` s from the strike:
        slide in, address, back swing, forward stroke (about 1.2 m/s at contact), follow through,
        withdraw."""
        occ = self.occluder
        lead, follow = occ.lead_s, occ.follow_s
        knots = [-lead, -lead + 0.25, -0.45, -0.15, 0.0, 0.12, follow]
        vals = [350.0, 25.0, 25.0, 180.0, 0.0, -80.0, 450.0]
        if -lead + 0.25 > -0.45:
            knots.pop(2)
            vals.pop(2)
        s = float(np.interp(tau, knots, vals))
        if -lead + 0.25 < tau < -0.45:
            s += 30.0 * (1 - math.cos(2 * math.pi * (tau + lead - 0.25) / 0.7)) / 2  # practice stroke
        return s

    def _occluder_parts(self, stroke: CueStroke, tau: float):
        """Capsules (p0, p1, r0, r1, colour BGR) of cue and arms, table frame, farthest-down first."""
        occ, tab = self.occluder, self.table
        R = self.R
        u = np.array([math.cos(stroke.heading_rad), math.sin(stroke.heading_rad)])
        left = np.array([-u[1], u[0]])
        bx = np.array(stroke.ball_xy_mm, float)
        tip_r = 6.5
        tip_z = occ.tip_height_mm
        # Distance from the ball back to the nose rectangle's edge along -u, to clear the rail.
        ts = []
        for k in range(2):
            if abs(u[k]) > 1e-9:
                lim = 0.0 if -u[k] < 0 else (tab.length_mm if k == 0 else tab.width_mm)
                ts.append((lim - bx[k]) / -u[k])
        back = max(min([t for t in ts if t >= 0] or [0.0]), 0.0)
        need = tab.rail_top_height_mm + 25.0 - tip_z
        elev = max(math.radians(occ.elevation_deg), math.atan2(need, back + self.look.cushion_width_mm))
        axis = np.array([-u[0] * math.cos(elev), -u[1] * math.cos(elev), math.sin(elev)])
        s = self._stroke_offset(tau)
        tip = np.array([*(bx - u * (R + 2.0 + s)), tip_z])
        cue_len = 1470.0
        parts = []
        # Bridge hand and arm: fixed while the cue strokes.
        tip0 = np.array([*(bx - u * (R + 25.0)), tip_z])
        bridge = tip0 + axis * occ.bridge_mm
        hand = np.array([bridge[0], bridge[1], 28.0])
        skin, sleeve = occ.skin_bgr, occ.sleeve_bgr
        base = np.array([*(bx - u * (R + 900.0)), 0.0])
        l_sh = base + np.array([*(left * 170.0), 430.0])
        r_sh = base + np.array([*(-left * 170.0), 460.0])
        wrist_l = hand + np.array([*(-u * 70 + left * 25), 25.0])
        elbow_l = hand + np.array([*(-u * 330 + left * 170), 180.0])
        parts.append((hand + np.array([*(left * 45), 0]), hand - np.array([*(left * 35), 0]), 30.0, 26.0, skin))
        parts.append((wrist_l, elbow_l, 32.0, 42.0, sleeve))
        parts.append((elbow_l, l_sh, 45.0, 55.0, sleeve))
        # Cue: tip, ferrule, shaft, butt.
        seg = [(0.0, 10.0, (120, 95, 60)), (10.0, 30.0, (225, 230, 232)), (30.0, 760.0, (150, 190, 215)), (760.0, cue_len - 25, (40, 45, 70)), (cue_len - 25, cue_len, (25, 25, 25))]
        for a, b_, colr in seg:
            ra = tip_r + (15.0 - tip_r) * a / cue_len
            rb = tip_r + (15.0 - tip_r) * b_ / cue_len
            parts.append((tip + axis * a, tip + axis * b_, ra, rb, colr))
        grip = tip + axis * 1150.0
        elbow_r = grip + np.array([*(-u * 60), 300.0])
        parts.append((grip - axis * 45, grip + axis * 45, 34.0, 34.0, skin))
        parts.append((grip + np.array([0, 0, 30.0]), elbow_r, 32.0, 42.0, sleeve))
        parts.append((elbow_r, r_sh, 45.0, 55.0, sleeve))
        return parts

    def occluder_outlines(self, t_s: float) -> list[np.ndarray]:
        """The image outlines (each (N, 2) px, pixel frame of ``vision.camera``) of the cue's
        and arms' bodies at time ``t_s`` (s), as :meth:`_draw_occluder` fills them (their faint
        cast shadows left out: they only dim what lies under them); empty without an occluder
        or with no stroke under way. For benchmarks that must know what the occluder hides."""
        if self.occluder is None:
            return []
        out = []
        for stroke in self.occluder.active(float(t_s)):
            for p0, p1, r0, r1, _ in self._occluder_parts(stroke, float(t_s) - stroke.t_strike):
                body = self._capsule_polys(p0, p1, r0, r1)[0]
                if np.all(np.isfinite(body)):
                    out.append(body)
        return out

    def _draw_occluder(self, out: np.ndarray, times: np.ndarray, blur_each: bool = False) -> None:
        """Draw the cue and arms over ``out`` (in place): the mean over sub-samples of their
        coverage and colour, and their faint shadows on the cloth from each lamp.

        The shadow penumbra is a Gaussian blur of each shadow mask; the blur is linear, so the
        weighted masks of all lamps and sub-samples are summed and blurred once (``blur_each``
        blurs each separately, the plain form the tests compare with)."""
        occ = self.occluder
        per_sample = []
        for tt in times:
            parts = []
            for stroke in occ.active(float(tt)):
                parts += self._occluder_parts(stroke, float(tt) - stroke.t_strike)
            per_sample.append(parts)
        if not any(per_sample):
            return
        cam = self.camera
        shade_w = occ.shadow_strength * self._lamp_scale_share
        # Polygons (image px) per sub-sample, with their bounding box.
        drawn = []
        allpts = []
        for parts in per_sample:
            polys = []
            for p0, p1, r0, r1, colr in parts:
                polys.append(("body", self._capsule_polys(p0, p1, r0, r1), colr))
                for k, lp in enumerate(self._lamp_pos):
                    # Shadow: project the capsule from the lamp onto the cloth (z = 0).
                    q = []
                    ok = True
                    for p, r in ((p0, r0), (p1, r1)):
                        if p[2] >= lp[2] - 50:
                            ok = False
                            break
                        f = lp[2] / (lp[2] - p[2])
                        q.append((np.array([lp[0] + (p[0] - lp[0]) * f, lp[1] + (p[1] - lp[1]) * f, 0.0]), r * f))
                    if ok:
                        polys.append((k, self._capsule_polys(q[0][0], q[1][0], q[0][1], q[1][1]), None))
            for _, pl, _ in polys:
                for poly in pl:
                    allpts.append(poly)
            drawn.append(polys)
        pts = np.concatenate(allpts)
        pts = pts[np.all(np.isfinite(pts), axis=1)]
        if len(pts) == 0:
            return
        u0 = max(int(pts[:, 0].min()) - 4, 0)
        u1 = min(int(pts[:, 0].max()) + 5, self.width)
        v0 = max(int(pts[:, 1].min()) - 4, 0)
        v1 = min(int(pts[:, 1].max()) + 5, self.height)
        if u1 <= u0 or v1 <= v0:
            return
        h, w = v1 - v0, u1 - u0
        K = len(self.lamps)
        alpha_sum = np.zeros((h, w), np.float32)
        col_sum = np.zeros((h, w, 3), np.float32)
        shadow_sum = np.zeros((h, w), np.float32)
        shift = 4
        scale = 1 << shift
        off = np.array([u0, v0], float)
        for polys in drawn:
            alpha = np.zeros((h, w), np.uint8)
            col = np.zeros((h, w, 3), np.uint8)
            shadows = [np.zeros((h, w), np.uint8) for _ in range(K)]
            for kind, pl, colr in polys:
                for j, poly in enumerate(pl):
                    if not np.all(np.isfinite(poly)):
                        continue
                    ip = np.round((poly - off) * scale).astype(np.int32)
                    if kind == "body":
                        # Round shading: the three polygons are the body, its lit strip and its
                        # dark strip.
                        c = np.array(colr, float) * (1.0, 1.35, 0.55)[j]
                        c = tuple(int(min(v, 255)) for v in c)
                        cv2.fillConvexPoly(col, ip, c, cv2.LINE_AA, shift)
                        if j == 0:
                            cv2.fillConvexPoly(alpha, ip, 255, cv2.LINE_AA, shift)
                    elif j == 0:
                        cv2.fillConvexPoly(shadows[kind], ip, 255, cv2.LINE_AA, shift)
            alpha_sum += alpha
            col_sum += col
            for k in range(K):
                sm = shadows[k].astype(np.float32)
                if blur_each and self.look.shadow_softness_mm > 0:
                    sm = cv2.GaussianBlur(sm, (0, 0), 2.0)
                shadow_sum += sm * np.float32(shade_w[k])
        if not blur_each and self.look.shadow_softness_mm > 0:
            shadow_sum = cv2.GaussianBlur(shadow_sum, (0, 0), 2.0)
        n = len(drawn)
        a = alpha_sum / (255.0 * n)
        region = out[v0:v1, u0:u1]
        region *= (1 - np.clip(shadow_sum / (255.0 * n), 0, 0.9))[..., None]
        gain = self._gain[v0:v1, u0:u1, None]
        region *= 1 - a[..., None]
        region += col_sum / n * gain

    @property
    def _lamp_scale_share(self) -> np.ndarray:
        mid = np.array([self.table.length_mm / 2, self.table.width_mm / 2, 0.0])
        lv = self._lamp_pos - mid
        r2 = np.sum(lv * lv, axis=1)
        cosz = lv[:, 2] / np.sqrt(r2)
        e = self._lamp_scale * cosz**self.look.lamp_cone * cosz / r2
        return e

    def _capsule_polys(self, p0, p1, r0, r1) -> list[np.ndarray]:
        """Image quads for a tapered capsule from p0 to p1 (table frame, radii mm): body, a lit
        strip and a dark strip, each (4, 2) px; the cap discs are left to the neighbouring parts."""
        cam = self.camera
        n_seg = max(1, int(np.linalg.norm(np.asarray(p1) - p0) / 120.0))
        ts = np.linspace(0, 1, n_seg + 1)
        nodes = np.asarray(p0)[None] + ts[:, None] * (np.asarray(p1) - p0)[None]
        radii = r0 + ts * (r1 - r0)
        # Projected radius: offset each node sideways (perpendicular to the axis and the view);
        # nodes and offset nodes go through the camera in one call.
        ax = np.asarray(p1, float) - p0
        view = nodes - self._C
        side = np.cross(ax, view)
        side /= np.maximum(np.linalg.norm(side, axis=1, keepdims=True), 1e-9)
        both = cam.project(np.concatenate([nodes, nodes + side * radii[:, None]]))
        uv, uv_side = both[: n_seg + 1], both[n_seg + 1 :]
        r_px = np.linalg.norm(uv_side - uv, axis=1)
        tang = np.gradient(uv, axis=0) if len(uv) > 1 else np.zeros_like(uv)
        tang /= np.maximum(np.linalg.norm(tang, axis=1, keepdims=True), 1e-9)
        nrm = np.column_stack([-tang[:, 1], tang[:, 0]])
        # Lit side faces the middle of the table (where the lamps are).
        if np.sum((self._mid_uv - uv.mean(0)) * nrm.mean(0)) < 0:
            nrm = -nrm
        polys = []
        # Each strip is the hull of its quads' corners, i.e. of its two edge polylines.
        off = nrm * r_px[:, None]
        for lo, hi in ((-1.0, 1.0), (0.15, 0.55), (-1.0, -0.6)):
            full = [uv + off * lo, uv + off * hi]
            if lo == -1.0 and hi == 1.0:
                # Round ends for the body outline.
                full += [uv[0] + self._ring * r_px[0], uv[-1] + self._ring * r_px[-1]]
            polys.append(np.concatenate(full))
        return _as_strip_polys(polys)


def _as_strip_polys(polys: list[np.ndarray]) -> list[np.ndarray]:
    """Each strip's quads were concatenated; fillConvexPoly needs each strip as one convex
    polygon, so a strip becomes the convex hull of its quads (the segments are nearly straight)."""
    out = []
    for p in polys:
        finite = p[np.all(np.isfinite(p), axis=1)]
        if len(finite) < 3:
            out.append(np.full((3, 2), np.nan))
            continue
        hull = cv2.convexHull(finite.astype(np.float32)).reshape(-1, 2).astype(float)
        out.append(hull)
    return out


def _clip_box(box, bounds):
    if box is None:
        return None
    a0, a1 = max(box[0], bounds[0]), min(box[1], bounds[1])
    b0, b1 = max(box[2], bounds[2]), min(box[3], bounds[3])
    if a1 <= a0 or b1 <= b0:
        return None
    return (a0, a1, b0, b1)


def _merge_regions(items: list[dict]) -> list[list[dict]]:
    """Group balls whose image regions overlap (transitively) so their shadows and occlusions are
    composed together."""
    groups = [[it] for it in items]
    boxes = [it["region"] for it in items]
    merged = True
    while merged:
        merged = False
        for i in range(len(groups)):
            for j in range(i + 1, len(groups)):
                a, b = boxes[i], boxes[j]
                if a[0] < b[1] and b[0] < a[1] and a[2] < b[3] and b[2] < a[3]:
                    groups[i] += groups[j]
                    boxes[i] = (min(a[0], b[0]), max(a[1], b[1]), min(a[2], b[2]), max(a[3], b[3]))
                    del groups[j], boxes[j]
                    merged = True
                    break
            if merged:
                break
    return groups


def _ao_occlusion(dx, dy, dz, n, R) -> np.ndarray:
    """(S, h, w) share of the sky hidden by a sphere of radius ``R`` from surface points with unit
    normals ``n`` (3, h, w), the sphere's centre being (dx, dy, dz) mm away (each (S, h, w) or
    broadcastable): the configuration factor from a differential area to a sphere,
    ``cos(theta) (R / d)^2`` (Howell's catalogue, from memory), faded to zero from 2.5 R to 4 R."""
    d2 = dx * dx + dy * dy + dz * dz
    d = np.sqrt(d2)
    cos = np.clip((dx * n[0] + dy * n[1] + dz * n[2]) / d, 0, 1)
    fade = np.clip((4 * R - d) / (1.5 * R), 0, 1)
    return np.clip(cos * (R * R / d2) * fade, 0, 1)


def _shadow_occlusion(dx, dy, dz, lamp_u, lamp_d, lamp_r, R) -> np.ndarray:
    """(S, h, w) share of a lamp's disc hidden by a sphere of radius ``R`` whose centre is
    (dx, dy, dz) mm from the surface points; ``lamp_u`` (3, h, w) unit vectors to the lamp,
    ``lamp_d`` (h, w) mm distances to it, ``lamp_r`` (h, w) its disc's angular radius (rad)."""
    db = np.sqrt(dx * dx + dy * dy + dz * dz)
    cosg = (dx * lamp_u[0] + dy * lamp_u[1] + dz * lamp_u[2]) / db
    gamma = np.arccos(np.clip(cosg, -1, 1))
    r_ball = np.arcsin(np.clip(R / db, 0, 1))
    r_lamp = np.broadcast_to(lamp_r, gamma.shape)
    occ = np.zeros(gamma.shape, np.float32)
    # Only where the discs meet, and only for a ball nearer than the lamp.
    m = (gamma < r_lamp + r_ball) & (db < lamp_d)
    if m.any():
        occ[m] = _lens_fraction(gamma[m], r_lamp[m], r_ball[m])
    return occ


def _grow(rect, r: int, height: int, width: int):
    """``rect`` (v0, v1, u0, u1) grown by ``r`` px on every side, clipped to the image."""
    v0, v1, u0, u1 = rect
    return (max(v0 - r, 0), min(v1 + r, height), max(u0 - r, 0), min(u1 + r, width))


def _union(boxes):
    boxes = list(boxes)
    return (min(x[0] for x in boxes), max(x[1] for x in boxes), min(x[2] for x in boxes), max(x[3] for x in boxes))


def _overlap(a, b) -> bool:
    return a[0] < b[1] and b[0] < a[1] and a[2] < b[3] and b[2] < a[3]
