"""The empty table as the camera sees it: a background model for ball detection.

Frames are (H, W, 3) uint8 BGR (``vision.video``); models are (H, W, 3) float32 BGR on the same
0..255 scale, indexed ``img[v, u]`` in the pixel frame of ``vision.camera``.

Two problems make a plain temporal median unfit for a table: balls that never move during the
clip would be baked in as background (and never detected), and the median of the first moments
may hold a player's arm. So the model is

1. a frame (or the per-pixel median of a few frames: moving things drop out) with every compact
   blob that stands out from the *cloth* removed and filled from the surrounding cloth by
   inpainting (Telea, "An image inpainting technique based on the fast marching method", J.
   Graphics Tools 9(1), 2004; ``cv2.inpaint``). The cloth is modelled as a smooth field (the
   lamps' pool of light times the cloth's colour) estimated by robust normalised convolution
   (Knutsson & Westin, "Normalized and differential convolution", CVPR 1993) with outlier
   rejection, so balls, chalk and shadows do not pull it;
2. a running average (exponential forgetting) of pixels that hold no detection, so slow lighting
   drift is followed; pixels that differ from the model but hold no detection and stay unchanged
   (a ghost left where an arm or a moved ball was when the model was made) are re-seeded from the
   current frame, cleaned as in 1.

Only the *ball zone* matters: the pixels a ball on the table can cover (:func:`ball_zone`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from vision.camera import Camera
from vision.table import TableSpec


@dataclass(frozen=True)
class BackgroundConfig:
    """Knobs of the empty-table model.

    ``cloth_scale_balls``: sigma of the cloth model's smoothing, in ball diameters (the lamps'
    light varies over a much longer scale than a ball). ``blob_sigmas``: a pixel stands out from
    the cloth when its colour distance from the cloth model exceeds this many noise sigmas (and
    ``blob_min_dn`` DN). ``fill_margin_radii``: blobs are grown by this many ball radii before
    filling, to take the contact shadow with them. ``max_blob_balls``: blobs larger than this many
    ball areas are not filled (an arm is no ball; the running update clears it once it leaves).
    ``update_rate``: weight of the current frame in each running update (drift), ``ghost_rate``
    the same for ghost pixels. ``downscale``: working scale of the cloth model (ball diameter in
    pixels at that scale, at least 2).
    """

    cloth_scale_balls: float = 3.0
    blob_sigmas: float = 5.0
    blob_min_dn: float = 10.0
    fill_margin_radii: float = 0.45
    max_blob_balls: float = 14.0
    update_rate: float = 0.1
    ghost_rate: float = 0.5
    downscale_ball_px: float = 4.0

    def __post_init__(self) -> None:
        for name in ("cloth_scale_balls", "blob_sigmas", "max_blob_balls", "downscale_ball_px"):
            if not getattr(self, name) > 0:
                raise ValueError(f"BackgroundConfig.{name} = {getattr(self, name)!r} must be positive")
        for name in ("update_rate", "ghost_rate"):
            if not 0 < getattr(self, name) <= 1:
                raise ValueError(f"BackgroundConfig.{name} = {getattr(self, name)!r} must lie in (0, 1]")


def ball_zone(camera: Camera, table: TableSpec, margin_mm: float | None = None) -> np.ndarray:
    """(H, W) bool: pixels whose ray crosses the plane of ball centres (z = R) inside the nose
    rectangle grown by ``margin_mm`` (default 1.4 R: a ball's silhouette, seen obliquely, reaches
    about R / cos(view angle) past its centre in that plane; the cushion top is inside, the
    wooden rail and its sights are not)."""
    R = table.radius_mm
    margin = 1.4 * R if margin_mm is None else float(margin_mm)
    w, h = camera.image_size
    step = 4
    gu = np.arange(0, w + step, step, dtype=float)
    gv = np.arange(0, h + step, step, dtype=float)
    uu, vv = np.meshgrid(gu, gv)
    xyz = camera.backproject(np.column_stack([uu.ravel(), vv.ravel()]), R).reshape(len(gv), len(gu), 3)
    # Distance outside the rectangle (negative inside), sampled coarsely and interpolated.
    out = np.maximum.reduce([-xyz[..., 0], xyz[..., 0] - table.length_mm, -xyz[..., 1], xyz[..., 1] - table.width_mm])
    out = np.nan_to_num(out, nan=1e6).astype(np.float32)
    full = cv2.resize(out, None, fx=step, fy=step, interpolation=cv2.INTER_LINEAR)[:h, :w]
    # Rays that meet the plane behind the camera are not on the table.
    return full <= margin


def cloth_zone(camera: Camera, table: TableSpec, inset_mm: float = 5.0) -> np.ndarray:
    """(H, W) bool: pixels that see the cloth (z = 0) at least ``inset_mm`` inside the noses."""
    w, h = camera.image_size
    step = 4
    gu = np.arange(0, w + step, step, dtype=float)
    gv = np.arange(0, h + step, step, dtype=float)
    uu, vv = np.meshgrid(gu, gv)
    xyz = camera.backproject(np.column_stack([uu.ravel(), vv.ravel()]), 0.0).reshape(len(gv), len(gu), 3)
    out = np.maximum.reduce([-xyz[..., 0], xyz[..., 0] - table.length_mm, -xyz[..., 1], xyz[..., 1] - table.width_mm])
    out = np.nan_to_num(out, nan=1e6).astype(np.float32)
    full = cv2.resize(out, None, fx=step, fy=step, interpolation=cv2.INTER_LINEAR)[:h, :w]
    return full <= -inset_mm


def noise_sigma(diff: np.ndarray, mask: np.ndarray) -> float:
    """Robust per-channel noise sigma (DN) of a difference image (H, W, 3) over ``mask``.

    1.4826 x the median absolute deviation (the normal distribution's MAD-to-sigma factor),
    recomputed three times over the samples within 3 sigmas of each channel's median: a large
    outlying share (balls, an arm: a fifth of the pixels or more) shifts the plain median and
    inflates the plain MAD, while a normal distribution clipped at 3 sigmas keeps its MAD to
    within 1 % (common practice: iterated sigma clipping). At least 0.5 DN; 2 DN for an empty
    mask.
    """
    d = diff[mask]
    if d.size == 0:
        return 2.0
    sub = d[:: max(1, len(d) // 20000)].reshape(len(d[:: max(1, len(d) // 20000)]), -1).astype(np.float64)
    keep = np.ones(sub.shape, bool)
    sigma = np.inf
    for _ in range(4):
        cols = [sub[keep[:, k], k] for k in range(sub.shape[1])]
        med = np.array([np.median(c) if c.size else 0.0 for c in cols])
        dev = np.abs(sub - med)
        sigma = 1.4826 * float(np.median(dev[keep])) if keep.any() else 0.5
        keep = dev <= 3.0 * max(sigma, 1e-6)
    return float(max(sigma, 0.5))


def cloth_model(image: np.ndarray, cloth: np.ndarray, ball_px: float, config: BackgroundConfig = BackgroundConfig()) -> tuple[np.ndarray, float]:
    """Smooth cloth estimate (H, W, 3) float32 and the residual noise sigma (DN).

    Robust normalised convolution on a downscaled copy (ball diameter ``config.downscale_ball_px``
    px): the Gaussian-weighted mean of the pixels in ``cloth`` (H, W) bool, recomputed three times
    with pixels far from the previous estimate (balls, shadows, chalk) given weight zero.
    ``ball_px`` is the ball's diameter in image pixels.
    """
    h, w = image.shape[:2]
    f = max(1.0, ball_px / config.downscale_ball_px)
    sw, sh = max(int(round(w / f)), 8), max(int(round(h / f)), 8)
    small = cv2.resize(image.astype(np.float32), (sw, sh), interpolation=cv2.INTER_AREA)
    wt = cv2.resize(cloth.astype(np.float32), (sw, sh), interpolation=cv2.INTER_AREA)
    wt = (wt > 0.99).astype(np.float32)
    sigma = config.cloth_scale_balls * config.downscale_ball_px
    weight = wt.copy()
    est = small
    sig = 4.0
    for _ in range(3):
        num = cv2.GaussianBlur(small * weight[..., None], (0, 0), sigma)
        den = cv2.GaussianBlur(weight, (0, 0), sigma)
        est = num / np.maximum(den, 1e-6)[..., None]
        res = np.linalg.norm(small - est, axis=2)
        inside = wt > 0
        if inside.any():
            r = res[inside]
            sig = float(max(1.4826 * np.median(r), 0.5))
        weight = wt * (res < 3.0 * sig + 2.0)
    full = cv2.resize(est, (w, h), interpolation=cv2.INTER_LINEAR)
    return full, sig


def clean_frame(image: np.ndarray, zone: np.ndarray, cloth: np.ndarray, ball_px: float, config: BackgroundConfig = BackgroundConfig()) -> tuple[np.ndarray, np.ndarray]:
    """``image`` with ball-like blobs removed: (cleaned (H, W, 3) float32, filled (H, W) bool).

    A blob is a connected set of pixels in ``zone`` whose colour distance from the cloth model
    (:func:`cloth_model`) exceeds ``config.blob_sigmas`` sigmas, from about a third of a ball's
    area up to ``config.max_blob_balls`` balls' area (counted without thin strips off the cloth);
    its part that survives an opening by a disc half a ball across (not the cushion's nose line)
    is grown by ``fill_margin_radii`` ball radii and filled: off the cloth from the same rail
    further along (:func:`_fill_along_rails`), on it by Telea inpainting (``cv2.inpaint``).
    """
    img = np.asarray(image)
    model, _ = cloth_model(img, cloth, ball_px, config)
    dist = np.linalg.norm(img.astype(np.float32) - model, axis=2)
    noise = noise_sigma((img.astype(np.float32) - model), cloth)
    thr = max(config.blob_sigmas * noise * math.sqrt(3), config.blob_min_dn)
    mask = ((dist > thr) & zone).astype(np.uint8)
    mask = cv2.morphologyEx(mask, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
    # Opening by a disc half a ball across keeps balls (and groups of them) whole but removes
    # thin structures: the cushion nose, its face and the shadow band under it stand out from
    # the cloth model along every rail, in narrow strips, and are part of the empty table.
    k = max(3, int(round(0.5 * ball_px)) | 1)
    core = cv2.morphologyEx(mask, cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (k, k)))
    # The size test is on the whole connected blob (an arm with its cue is no ball however it
    # is opened), counting the cloth and the core but not the thin strips off the cloth, so a
    # ball frozen against a cushion is not joined to the whole rail's nose line.
    n, lab = cv2.connectedComponents(mask, connectivity=8)
    area = np.bincount(lab[(cloth | (core > 0)) & (mask > 0)], minlength=n)
    area_ball = math.pi * (ball_px / 2) ** 2
    keep = (area >= 0.3 * area_ball) & (area <= config.max_blob_balls * area_ball)
    keep[0] = False
    fill = (keep[lab] & (core > 0)).astype(np.uint8)
    if fill.any():
        grow = max(1, int(round(config.fill_margin_radii * ball_px / 2)))
        kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * grow + 1, 2 * grow + 1))
        fill = cv2.dilate(fill, kernel)
        radius = max(3.0, ball_px / 6)
        src = np.clip(img, 0, 255).astype(np.uint8)
        along, got = _fill_along_rails(src, fill.astype(bool), zone, cloth, ball_px)
        src[got] = along[got]
        out = cv2.inpaint(src, (fill.astype(bool) & ~got).astype(np.uint8), radius, cv2.INPAINT_TELEA).astype(np.float32)
        # Keep the sub-DN precision of the input outside the filled area.
        keepers = fill == 0
        out[keepers] = img.astype(np.float32)[keepers]
    else:
        out = img.astype(np.float32)
    return out, fill.astype(bool)


def _fill_along_rails(img: np.ndarray, fill: np.ndarray, zone: np.ndarray, cloth: np.ndarray, ball_px: float) -> tuple[np.ndarray, np.ndarray]:
    """Fill the pixels of ``fill`` that lie off the cloth (the cushion top, nose and the shadow
    band under it) from the same rail a little way along it: (filled (H, W, 3) uint8, done (H, W)
    bool).

    The cushion looks the same all along a rail, so the view of it beside a ball that rests
    against it is the best guess of what the ball hides; inpainting from the surroundings would
    instead smear the cloth over the nose line. The direction along the rail is the image
    tangent of the cloth mask's border (perpendicular to the gradient of the distance from the
    cloth), which keeps the distance from the nose; samples 1.5 and 2.5 ball diameters either
    way that are themselves outside ``fill`` and in ``zone`` are averaged. Pixels with no such
    sample (pocket mouths, image borders) are left to the inpainting.
    """
    h, w = fill.shape
    todo = fill & ~cloth & zone
    done = np.zeros((h, w), bool)
    out = img.copy()
    if not todo.any():
        return out, done
    dist = cv2.distanceTransform((~cloth).astype(np.uint8), cv2.DIST_L2, 5)
    gx = cv2.Sobel(dist, cv2.CV_32F, 1, 0, ksize=5)
    gy = cv2.Sobel(dist, cv2.CV_32F, 0, 1, ksize=5)
    vv, uu = np.nonzero(todo)
    nx, ny = gx[vv, uu], gy[vv, uu]
    norm = np.hypot(nx, ny)
    ok = norm > 1e-6
    tx, ty = np.where(ok, -ny / np.maximum(norm, 1e-6), 0.0), np.where(ok, nx / np.maximum(norm, 1e-6), 0.0)
    acc = np.zeros((len(vv), 3), np.float32)
    cnt = np.zeros(len(vv), np.float32)
    for step in (1.5, -1.5, 2.5, -2.5):
        su = uu + step * ball_px * tx
        sv = vv + step * ball_px * ty
        iu, iv = np.round(su).astype(int), np.round(sv).astype(int)
        valid = ok & (iu >= 0) & (iu < w) & (iv >= 0) & (iv < h)
        iu, iv = np.clip(iu, 0, w - 1), np.clip(iv, 0, h - 1)
        valid &= ~fill[iv, iu] & zone[iv, iu] & ~cloth[iv, iu]
        # The nearer pair is enough where it is clear; the farther one only fills what it left.
        valid &= (cnt == 0) | (abs(step) < 2.0)
        samp = cv2.remap(img, su.astype(np.float32)[None], sv.astype(np.float32)[None], cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)[0]
        acc[valid] += samp[valid].astype(np.float32)
        cnt[valid] += 1
    have = cnt > 0
    out[vv[have], uu[have]] = np.clip(acc[have] / cnt[have, None] + 0.5, 0, 255).astype(np.uint8)
    done[vv[have], uu[have]] = True
    return out, done


class Background:
    """The running empty-table model of one camera view.

    ``Background(frames, zone, cloth, ball_px, config)`` builds the model from one or more frames
    (per-pixel median, then :func:`clean_frame`). ``image`` is the (H, W, 3) float32 model;
    ``sigma`` the per-channel noise sigma (DN) of frames about it.
    """

    def __init__(self, frames, zone: np.ndarray, cloth: np.ndarray, ball_px: float, config: BackgroundConfig = BackgroundConfig()):
        stack = [np.asarray(f) for f in frames]
        if not stack:
            raise ValueError("Background needs at least one frame; pass the clip's first frame")
        shape = stack[0].shape
        if len(shape) != 3 or shape[2] != 3 or any(f.shape != shape for f in stack):
            raise ValueError(f"frames must all be (H, W, 3) BGR of one size, got {[f.shape for f in stack]}")
        if zone.shape != shape[:2] or cloth.shape != shape[:2]:
            raise ValueError(f"zone {zone.shape} and cloth {cloth.shape} masks must match the frames' size {shape[:2]}")
        self.config = config
        self.zone = zone.copy()
        self.cloth = cloth.copy()
        self.ball_px = float(ball_px)
        base = stack[0].astype(np.float32) if len(stack) == 1 else np.median(np.stack(stack), axis=0).astype(np.float32)
        self.image, _ = clean_frame(base, self.zone, self.cloth, self.ball_px, config)
        self.sigma = noise_sigma(stack[-1].astype(np.float32) - self.image, self.cloth)
        self._last = stack[-1].astype(np.float32)

    def update(self, frame: np.ndarray, protect: np.ndarray, fg_sigmas: float = 4.0) -> None:
        """Fold ``frame`` into the model, leaving ``protect`` ((H, W) bool, e.g. discs round the
        detected balls) untouched: pixels close to the model move toward the frame at
        ``update_rate`` (lighting drift); pixels far from it that held no detection and did not
        change since the previous update (ghosts) are re-seeded from the cleaned frame at
        ``ghost_rate``."""
        cur = frame.astype(np.float32)
        diff = np.abs(cur - self.image).max(axis=2)
        thr = fg_sigmas * self.sigma + 3.0
        free = ~protect
        near = (diff <= thr) & free
        cv2.accumulateWeighted(cur, self.image, self.config.update_rate, near.astype(np.uint8))
        still = np.abs(cur - self._last).max(axis=2) <= thr
        ghost = ((diff > thr) & free & still & self.zone).astype(np.uint8)
        # Single noisy pixels pass a per-pixel threshold somewhere in a large frame every time;
        # a ghost is a compact patch, so isolated pixels are opened away first.
        ghost = cv2.morphologyEx(ghost, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
        for box in _patches(ghost, 0.25 * math.pi * (self.ball_px / 2) ** 2, self._context_px()):
            self._reseed(cur, ghost, box)
        self._last = cur
        resid = (cur - self.image)[near & self.cloth]
        if resid.size > 1000:
            s = 1.4826 * float(np.median(np.abs(resid[:: max(1, len(resid) // 20000)])))
            self.sigma = 0.8 * self.sigma + 0.2 * max(s, 0.5)

    def _context_px(self) -> int:
        """Margin (px) round a patch to be cleaned: enough cloth for the cloth model's smoothing
        (``cloth_scale_balls`` ball diameters) and for the inpainting to draw from."""
        return int(math.ceil((self.config.cloth_scale_balls + 1.0) * self.ball_px))

    def _reseed(self, cur: np.ndarray, ghost: np.ndarray, box: tuple[int, int, int, int]) -> None:
        """Clean the frame inside ``box`` (u0, v0, u1, v1) only (:func:`clean_frame` on the
        window: the work scales with the ghost, not with the frame) and blend it into the model
        at ``ghost_rate`` over the ghost pixels in the box."""
        u0, v0, u1, v1 = box
        win = (slice(v0, v1), slice(u0, u1))
        cleaned, _ = clean_frame(cur[win], self.zone[win], self.cloth[win], self.ball_px, self.config)
        sub = np.ascontiguousarray(self.image[win])
        cv2.accumulateWeighted(cleaned, sub, self.config.ghost_rate, np.ascontiguousarray(ghost[win]))
        self.image[win] = sub


def _patches(mask: np.ndarray, min_area: float, margin: int) -> list[tuple[int, int, int, int]]:
    """Boxes (u0, v0, u1, v1) px round the connected patches of ``mask`` ((H, W) uint8) of at
    least ``min_area`` pixels, each grown by ``margin`` px and clipped to the image; boxes that
    then overlap are merged, so no pixel is cleaned twice."""
    h, w = mask.shape
    n, _, stats, _ = cv2.connectedComponentsWithStats(mask, connectivity=8)
    boxes = []
    for i in range(1, n):
        if stats[i, cv2.CC_STAT_AREA] < min_area:
            continue
        x, y, bw, bh = stats[i, :4]
        boxes.append([max(x - margin, 0), max(y - margin, 0), min(x + bw + margin, w), min(y + bh + margin, h)])
    merged = True
    while merged and len(boxes) > 1:
        merged = False
        for i in range(len(boxes)):
            for j in range(i + 1, len(boxes)):
                a, b = boxes[i], boxes[j]
                if a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]:
                    boxes[i] = [min(a[0], b[0]), min(a[1], b[1]), max(a[2], b[2]), max(a[3], b[3])]
                    del boxes[j]
                    merged = True
                    break
            if merged:
                break
    return [tuple(int(v) for v in b) for b in boxes]
