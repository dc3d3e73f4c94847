"""The empty table as the camera sees it: a background model for ball detection.

Frames are (H, W, 3) uint8 BGR (``vision.video``); models are (H, W, 3) float32 BGR on the same
0..255 scale, indexed ``img[v, u]`` in the pixel frame of ``vision.camera``.

Two problems make a plain temporal median unfit for a table: balls that never move during the
clip would be baked in as background (and never detected), and the median of the first moments
may hold a player's arm. So the model is

1. a frame (or the per-pixel median of a few frames: moving things drop out) with every compact
   blob that stands out from the *empty table* removed and filled: on the open cloth from the
   surrounding cloth by inpainting (Telea, "An image inpainting technique based on the fast
   marching method", J. Graphics Tools 9(1), 2004; ``cv2.inpaint``), along the cushions from
   the same rail further along. The open cloth is modelled as a smooth field (the lamps' pool
   of light times the cloth's colour) estimated by robust normalised convolution (Knutsson &
   Westin, "Normalized and differential convolution", CVPR 1993) with outlier rejection, so
   balls, chalk and shadows do not pull it; the band along the cushions (nose, face, the shadow
   under it) by a running median along the rail (:func:`rail_model`), so a ball frozen to a
   cushion stands out and the cushion does not. Where the smooth model cannot follow a low
   lamp's steep, clipped pool of light and the whole pool stands out as one blob of the cloth's
   colour, the cloth there is judged against its own local colour (a masked median) by what
   only a ball changes, its colour or a large change of brightness (:func:`_pool_model`,
   :func:`_pool_distance`), so the balls resting in the pool are taken out too. What reaches the zone's outer border (an arm,
   a cue, a pocket) is never filled: it is no resting ball, and filling part of it (a hand but
   not the cue) would leave a free, ball-sized blob for the detector;
2. a running average (exponential forgetting) of pixels that hold no detection, so slow lighting
   drift is followed; pixels that differ from the model but hold no detection and stay unchanged
   (a ghost left where an arm or a moved ball was when the model was made) are re-seeded from the
   current frame, cleaned as in 1, except where the cleaned frame is still not the empty table
   (what cleaning leaves as it is: an arm, hand or cue held still, or the part of a stroking
   cue whose colour does not change as it slides along itself). Such an occluder stays out of
   the model, so it stays foreground to the detector and is judged as one (taken in, its ends
   and the ghosts it left when it moved on stood out as free, ball-sized pieces). A ball that
   the cleaning of such a window removes, that the model holds and the detector does not see
   (one kept in the model with the cue lying on it at the start), is replaced there outright
   when it is all that stands out there (:func:`_hidden_balls`), and the detector is told where
   (``Background.revised``).

Only the *ball zone* matters: the pixels a ball on the table can cover (:func:`ball_zone`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from vision.camera import Camera
from vision.table import TableSpec


#: The largest cluster of balls on a table: 15 racked object balls and the cue ball (common
#: practice: the fifteen-ball games).
RACK_BALLS = 16
#: The most balls a rack puts in a row along a cushion: the side of the 15-ball triangle
#: (common practice).
RACK_SIDE_BALLS = 5


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
    pixels at that scale, at least 2). ``rail_band_balls``: how far onto the cloth, in ball
    diameters, the empty table is modelled along the rail (:func:`rail_band`) instead of by the
    cloth model: the shadow band under the cushion is narrower than this. ``weak_share``: pixels
    above this share of the blob threshold join a blob within a ball radius of it (hysteresis).
    """

    cloth_scale_balls: float = 3.0
    blob_sigmas: float = 5.0
    blob_min_dn: float = 10.0
    fill_margin_radii: float = 0.45
    # Two ball areas for each ball of the largest cluster the game has (15 racked balls and the
    # cue ball, common practice): a ball's silhouette, and its cast shadow where it lies outside
    # it (a sphere's shadow from a lamp at elevation e is an ellipse of pi R^2 / sin e centred
    # R cot e from the contact point: for lamps above 45 deg under 0.8 of the ball's area lies
    # outside its silhouette, from geometry). A 15-ball rack present in the first frame was one
    # blob of 19-22 ball areas (three rendered rooms), over the 14 used before: kept in the
    # model, never detected. An arm or cue reaches in over the rail and is never filled.
    max_blob_balls: float = 2.0 * RACK_BALLS
    # The cap in a re-seeded window (a ghost left where an arm or moved ball was): the value used
    # before for the whole model. Racks stand from the first frame, not in ghosts; 32 there too
    # changed the extra set's detections (dim_540p_60fps: 1677 -> 1702 rows) with no rack in them.
    window_blob_balls: float = 14.0
    update_rate: float = 0.1
    ghost_rate: float = 0.5
    downscale_ball_px: float = 4.0
    rail_band_balls: float = 0.5
    weak_share: float = 0.5

    def __post_init__(self) -> None:
        for name in ("cloth_scale_balls", "blob_sigmas", "max_blob_balls", "window_blob_balls", "downscale_ball_px"):
            if not getattr(self, name) > 0:
                raise ValueError(f"BackgroundConfig.{name} = {getattr(self, name)!r} must be positive")
        if not 0 < self.weak_share <= 1:
            raise ValueError(f"BackgroundConfig.weak_share = {self.weak_share!r} must lie in (0, 1]")
        if not self.rail_band_balls >= 0:
            raise ValueError(f"BackgroundConfig.rail_band_balls = {self.rail_band_balls!r} must be at least 0")
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


def max_abs_diff(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """(H, W) float32: the largest absolute per-channel difference of two (H, W, 3) images.

    ``cv2.absdiff`` and channel-wise maxima: numpy's reduction over a last axis of 3 is an
    order of magnitude slower on a full frame."""
    d = cv2.absdiff(np.asarray(a, np.float32), np.asarray(b, np.float32))
    return np.maximum(np.maximum(d[..., 0], d[..., 1]), d[..., 2])


def components_8(mask: np.ndarray) -> tuple[int, np.ndarray, np.ndarray]:
    """8-connected components of a (h, w) uint8 mask: (count with the background's label 0,
    labels (h, w) int32, stats (count, 5) int32), as ``cv2.connectedComponentsWithStats(mask,
    connectivity=8)`` gives them (labels in the same order; tests/test_background.py), by the
    block-based decision tree (Grana, Borghesani & Cucchiara, "Optimized block-based connected
    components labeling with decision trees", IEEE Trans. Image Processing 19(6), 2010;
    ``cv2.CCL_GRANA``), whose statistics pass costs a third of the default algorithm's on our
    masks (from measurement: 0.1 against 0.28 ms on a 200 x 200 box of a few balls)."""
    n, lab, stats, _ = cv2.connectedComponentsWithStatsWithAlgorithm(mask, 8, cv2.CV_32S, cv2.CCL_GRANA)
    return n, lab, stats


def _as_frame(frame: np.ndarray) -> np.ndarray:
    """A frame as given when it is 8-bit, else as float32 (H, W, 3)."""
    f = np.asarray(frame)
    return f if f.dtype == np.uint8 else f.astype(np.float32)


def noise_sigma(diff: np.ndarray, mask: np.ndarray) -> float:
    """Robust per-channel noise sigma (DN) of a difference image (H, W, 3) over ``mask``.

    1.4826 x the median absolute deviation (the normal distribution's MAD-to-sigma factor),
    recomputed three times over the samples within 3 sigmas of each channel's median: a large
    outlying share (balls, an arm: a fifth of the pixels or more) shifts the plain median and
    inflates the plain MAD, while a normal distribution clipped at 3 sigmas keeps its MAD to
    within 1 % (common practice: iterated sigma clipping). At least 0.5 DN; 2 DN for an empty
    mask.
    """
    # The strided sample of diff[mask], taken from the mask's flat indices (the same pixels in
    # the same order) without first copying every masked pixel out.
    idx = np.flatnonzero(mask)
    if idx.size == 0:
        return 2.0
    idx = idx[:: max(1, idx.size // 20000)]
    sub = diff.reshape(mask.size, -1)[idx].astype(np.float64)
    keep = np.ones(sub.shape, bool)
    sigma = np.inf
    for _ in range(4):
        cols = [sub[keep[:, k], k] for k in range(sub.shape[1])]
        med = np.array([np.median(c) if c.size else 0.0 for c in cols])
        dev = np.abs(sub - med)
        sigma = 1.4826 * float(np.median(dev[keep])) if keep.any() else 0.5
        keep = dev <= 3.0 * max(sigma, 1e-6)
    return float(max(sigma, 0.5))


def chroma_sigma(image: np.ndarray, model: np.ndarray) -> float:
    """Per-channel noise sigma (DN) that the chromaticity distortion of (N, 3) colours
    ``image`` about (N, 3) ``model`` colours shows: Horprasert et al. (1999)'s split of each
    colour into a brightness distortion ``a = I.M / M.M`` and the rest ``|I - a M|``; the rest
    of isotropic normal noise of sigma per channel lies in the plane across M, a Rayleigh
    variable of scale sigma whose median is sigma sqrt(2 ln 2) (analytic). A change of light
    that only scales the colours (a lamp shaded by a player, a camera's gain) leaves it, unlike
    the plain difference, unchanged. At least 0.5 DN; 2 DN for no samples."""
    if len(image) == 0:
        return 2.0
    I = np.asarray(image, np.float64).reshape(-1, 3)
    M = np.asarray(model, np.float64).reshape(-1, 3)
    _, cd = _brightness_chroma(I, M)
    return float(max(np.median(cd) / math.sqrt(2.0 * math.log(2.0)), 0.5))


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
    """``image`` with ball-like blobs removed: (cleaned (H, W, 3) float32, filled (H, W) bool)
    (:func:`_clean`).

    Each pixel of ``zone`` is compared with what the empty table shows there: on the open cloth
    the smooth cloth model (:func:`cloth_model`); in the *rail band* (off the cloth, and up to
    ``rail_band_balls`` ball diameters onto it: the cushion's top, nose and face and the shadow
    band under it) the same rail a little way along it (:func:`rail_model`). A blob is a
    connected set of pixels whose colour distance from that exceeds ``config.blob_sigmas``
    noise sigmas, or ``weak_share`` of that within a ball radius of such a pixel, with enclosed
    holes under a ball's area closed (a ball's highlight or number disc can match the cloth),
    from about a third of a ball's area up to
    ``config.max_blob_balls`` balls' area, and not reaching the outer border of ``zone``: what
    comes in over the rail (an arm, a cue) or opens off it (a pocket) is no resting ball. Kept
    blobs are grown by ``fill_margin_radii`` ball radii and filled: in the rail band from the
    rail model, elsewhere by Telea inpainting (``cv2.inpaint``). Where a kept blob of over three
    ball areas lies along the rail on half or more of a band pixel's rail samples (a rack's row
    frozen to a cushion, :func:`_covers_rail_median`; not a cue crossing the band), the rail
    beside it is modelled again from beyond it and the blobs are found again.
    """
    return _clean(image, zone, cloth, ball_px, config, whole=True)[:2]


def _clean(image: np.ndarray, zone: np.ndarray, cloth: np.ndarray, ball_px: float, config: BackgroundConfig = BackgroundConfig(), whole: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """:func:`clean_frame`, and two (H, W) bool masks: the blobs it leaves as they are (grown by
    ``fill_margin_radii`` ball radii: no empty table), and the pixels of ``zone`` that may stand
    out: by more than ``weak_share`` of the blob threshold, wherever they lie, or with no model
    of the rail to judge them by (what a blob may be part of). ``whole``: the frame the model is
    made from (a rack may stand in it: blobs up to ``max_blob_balls``, racks along a cushion
    modelled again); else a re-seeded window (``window_blob_balls``)."""
    img = np.asarray(image)
    f32 = img.astype(np.float32)
    model, _ = cloth_model(img, cloth, ball_px, config)
    band = rail_band(zone, cloth, ball_px, config)
    open_cloth = cloth & ~band
    noise = noise_sigma(f32 - model, open_cloth if open_cloth.any() else cloth)
    thr = max(config.blob_sigmas * noise * math.sqrt(3), config.blob_min_dn)
    rail = rail_model(f32, band, cloth, ball_px, 0.5 * thr)
    cap = config.max_blob_balls if whole else config.window_blob_balls
    dist, unknown = _distance(f32, np.where(band[..., None], rail, model))
    weak, mask, lab, stats, keep = _blobs(dist, unknown, zone, thr, ball_px, config, cap)
    pool = _light_pools(f32, model, open_cloth, lab, keep, ball_px, cap)
    if pool.any():
        # The smooth cloth model cannot follow a lamp's pool of light (steep, its brightest
        # channel clipped), and the whole pool stood out as one blob, left as it is with the
        # balls inside it (extra scene lamp_50fps: a 459-ball blob holding a resting ball,
        # missed for 4 s). There the cloth is judged against its local colour (:func:`_pool_model`)
        # by what only a ball changes (:func:`_pool_distance`), and the blobs are found again.
        grow = int(math.ceil(ball_px))
        region = cv2.dilate(pool.astype(np.uint8), cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * grow + 1, 2 * grow + 1))) > 0
        sel = region & open_cloth
        local = _pool_model(f32, model, open_cloth, region, ball_px, config)
        dist[sel] = _pool_distance(f32[sel], local[sel])
        weak, mask, lab, stats, keep = _blobs(dist, unknown, zone, thr, ball_px, config, cap)
    area_ball = math.pi * (ball_px / 2) ** 2
    # A cluster frozen to a cushion (a rack's row along it) covers most of the rail model's
    # samples beside it, whose median is then the balls, not the rail: the rows' rail halves
    # matched "the empty table" and stayed in the model. One ball, or two touching, cover at
    # most three of the seven samples, so only a larger kept blob that reaches the band makes
    # the rail be modelled again without the samples on it, from further along.
    big = keep & (stats[:, cv2.CC_STAT_AREA] > 3.0 * area_ball) & whole
    big[0] = False
    # A frozen ball's rail half lies within a ball radius of its open-cloth half (the band is
    # ``rail_band_balls`` = half a diameter deep), where pass one may have had no model; 2 px
    # more for the blob's rim. No further: beyond, the longer reach takes in the pocket jaws
    # (a rack's blob joined a side pocket's mouth at a diameter).
    d = 2 * (int(round(ball_px / 2)) + 2) + 1
    disc = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (d, d))
    # Only a blob that, so grown, holds half or more of some band pixel's seven samples takes
    # its median over (a row of four frozen balls or more); the pass is for those alone. A cue
    # crossing the band holds one or two: pass one models the rail under it already, and the
    # pass run on it anyway (cheapwide_25fps's first frame, no rack) changed the model there
    # by up to 55 DN, which the rest of the clip's detections and events then carried.
    if big.any():
        tangents = _rail_tangents(band, cloth, ball_px)
        for i in np.flatnonzero(big):
            big[i] = _covers_rail_median(cv2.dilate((lab == i).astype(np.uint8), disc) > 0, band, tangents, ball_px)
    exclude = cv2.dilate(big[lab].astype(np.uint8), disc) > 0 if big.any() else None
    if exclude is not None and (exclude & band).any():
        # Only beside the cluster: elsewhere the longer reach would take in pocket jaws and
        # corners the seven samples do not reach (a pocket's mouth joined a rack's blob).
        far = rail_model(f32, band & exclude, cloth, ball_px, 0.5 * thr, exclude=exclude, reach=RACK_SIDE_BALLS + 2.5, band_all=band)
        rail = np.where(exclude[..., None], far, rail)
        first = big[lab]
        # The rail band alone is judged anew (a pool's local judging is on the open cloth).
        dist_rail, unknown_rail = _distance(f32, np.where(band[..., None], rail, model))
        dist[band], unknown[band] = dist_rail[band], unknown_rail[band]
        weak, mask, lab, stats, keep = _blobs(dist, unknown, zone, thr, ball_px, config, cap)
        # Pass one judged these clusters: none came in over the rail. With their rail halves
        # and contact shadows they can touch the zone's outer border, or a pocket's mouth that
        # opens off it (a rendered 15-ball rack frozen to a cushion beside a side pocket was
        # kept whole as an arm), so what holds one is kept if no larger than a cluster.
        held = np.zeros(len(keep), bool)
        held[np.unique(lab[first])] = True
        keep |= held & (stats[:, cv2.CC_STAT_AREA] <= cap * area_ball)
    keep[0] = False
    fill = keep[lab].astype(np.uint8)
    if fill.any():
        grow = max(1, int(round(config.fill_margin_radii * ball_px / 2)))
        kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * grow + 1, 2 * grow + 1))
        fill = cv2.dilate(fill, kernel) & zone.astype(np.uint8)
        src = np.clip(img, 0, 255).astype(np.uint8)
        from_rail = (fill > 0) & band & np.all(np.isfinite(rail), axis=2)
        src[from_rail] = np.clip(rail[from_rail] + 0.5, 0, 255).astype(np.uint8)
        radius = max(3.0, ball_px / 6)
        out = cv2.inpaint(src, ((fill > 0) & ~from_rail).astype(np.uint8), radius, cv2.INPAINT_TELEA).astype(np.float32)
        # Keep the sub-DN precision of the input outside the filled area.
        keepers = fill == 0
        out[keepers] = f32[keepers]
    else:
        out = f32
    # What is left in the frame as it is (blobs that reach in over the rail, larger than
    # max_blob_balls or too small to be a ball), grown like the filled blobs to take its rim
    # and cast shadow with it.
    grow = max(1, int(round(config.fill_margin_radii * ball_px / 2)))
    kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * grow + 1, 2 * grow + 1))
    left = cv2.dilate(((mask > 0) & ~keep[lab]).astype(np.uint8), kernel) > 0
    return out, fill.astype(bool), left, weak


def _distance(f32: np.ndarray, ref: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Colour distance (H, W) float32 DN of ``f32`` (H, W, 3) from the empty table ``ref``
    (H, W, 3, NaN where it has no model), 0 there, and where it has none ((H, W) bool)."""
    dist = np.linalg.norm(f32 - ref, axis=2)
    # Pixels with no model (rail band round the pockets) are taken as empty table.
    unknown = np.isnan(dist)
    dist[unknown] = 0.0
    return dist, unknown


def _blobs(dist: np.ndarray, unknown: np.ndarray, zone: np.ndarray, thr: float, ball_px: float, config: BackgroundConfig, cap: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The blobs of :func:`_clean` from the colour distance ``dist`` (H, W) float32 DN from the
    empty table's model (0 where ``unknown``, (H, W) bool: no model): (weak (H, W) bool, what may stand out; mask (H, W)
    uint8, the opened blobs with small holes closed; lab (H, W) int32 their 8-connected labels;
    stats (count, 5) int32 their stats; keep (count,) bool, the blobs to fill: from 0.3 to
    ``cap`` ball areas and not reaching the outer border of ``zone``)."""
    strong = ((dist > thr) & zone).astype(np.uint8)
    # Hysteresis, bounded in reach: pixels above ``weak_share`` of the threshold within a ball
    # radius of a strong one join it. A dark ball on cloth of its own hue stands out strongly only at its
    # highlight and in a crescent of shade, a few px each; its body differs by less.
    reach = int(ball_px) | 1
    near = cv2.dilate(strong, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (reach, reach)))
    weak = (dist > config.weak_share * thr) & zone
    raw = (strong | (weak & (near > 0))).astype(np.uint8)
    # What may stand out: the weak pixels and those with no model to judge them by.
    weak |= unknown & zone
    mask = cv2.morphologyEx(raw, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
    area_ball = math.pi * (ball_px / 2) ** 2
    mask = _close_holes(mask, area_ball)
    n, lab, stats = components_8(mask)
    area = stats[:, cv2.CC_STAT_AREA]
    # The zone's outer border: 2 px of the zone next to its outside (the rails beyond the ball
    # zone, or beyond a pocket's mouth).
    border = zone & ~cv2.erode(zone.astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool)
    # Reaching is judged before the opening, with gaps of a pixel bridged: a cue a few px wide
    # joins the bridge hand on the cloth to the arm over the rail.
    n_raw, lab_raw = cv2.connectedComponents(cv2.dilate(raw, np.ones((3, 3), np.uint8)), connectivity=8)
    out_raw = np.zeros(n_raw, bool)
    out_raw[np.unique(lab_raw[border])] = True
    out_raw[0] = False
    reaches = np.zeros(n, bool)
    reaches[np.unique(lab[(mask > 0) & out_raw[lab_raw]])] = True
    keep = (area >= 0.3 * area_ball) & (area <= cap * area_ball) & ~reaches
    keep[0] = False
    return weak, mask, lab, stats, keep


# A blob too large to be balls is a pool of lamp light on the cloth, not an arm or a cue, when
# at least _POOL_SHARE of its pixels on the open cloth keep the cloth model's chromaticity in
# their unclipped channels, its distortion (Horprasert et al. 1999, over the model's brightness
# floored at 30 DN, as vision.detect.ballness) below _POOL_CHROMA: the pool of extra scene
# lamp_50fps, its red channel clipped on the plateau, had 0.94 of its pixels below 0.05 (median
# 0.019); a rendered pool on green cloth with the green channel clipped over 0.42 of it, 0.73 with
# the clipped channel counted and 0.99 without; the arms and cues left in the first frames of
# tele_120fps and bright_pocket_1080p50, 0.24 and 0.38. Not a published figure.
_POOL_CHROMA = 0.05
_POOL_SHARE = 0.8
# Window (ball diameters) of the median of the cloth's colour in a pool (:func:`_pool_model`),
# of which a ball and its shadow are a small share and a six-ball rack under half (about 9 of
# 25 square diameters with its shadows): on lamp_50fps's pool the share of the cloth standing
# out (:func:`_pool_distance`) was 1.98-2.04 % for windows of 2.25 to 5.25 diameters (what stands
# out there is the cue and the hand), so the window is chosen for the racks. Not a published figure.
_POOL_WINDOW_BALLS = 5.0
# Samples of the pool's median are the pixels within this chromaticity distortion of the cloth
# model (as _POOL_CHROMA): a coloured or white ball is far beyond it, the clipped plateau of a
# pool within it (0.031 at its 80th percentile on lamp_50fps).
_POOL_SAMPLE_CHROMA = 0.1


# The ball score's constants (vision.detect.ballness, and _pool_distance here), after Horprasert,
# Harwood & Davis (1999)'s brightness/chromaticity split: a brightness ratio above LIT_RATIO is a
# lit ball or a highlight, below DARK_RATIO darker than a cast shadow leaves the cloth (from memory,
# see ballness), weighted DARK_WEIGHT; chromaticity is scaled by the colour's norm floored at
# COLOUR_FLOOR_DN (DN) so a near-black cloth's ratio stays finite.
LIT_RATIO = 1.15
DARK_RATIO = 0.5
DARK_WEIGHT = 1.5
COLOUR_FLOOR_DN = 30.0

# A channel at or above this level (DN of 0..255) is taken as clipped by the sensor (255, less
# a codec's ringing): its share of the colour is not measured.
_CLIPPED_DN = 250.0


def _chroma_distortion(f: np.ndarray, model: np.ndarray, unclipped: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Brightness ratio ``a = I.M / M.M`` and chromaticity distortion ``|I - a M| / max(|M|, 30)``
    (Horprasert, Harwood & Davis 1999) of (..., 3) colours ``f`` against ``model``; each (...).
    ``unclipped``: over the channels of ``f`` below ``_CLIPPED_DN`` only (both vectors), so a
    pool of light that clips the cloth's brightest channel keeps the cloth's chromaticity in the
    others (a pixel with every channel clipped has none to show: 0)."""
    if unclipped:
        use = f < _CLIPPED_DN
        f, model_u = np.where(use, f, 0.0), np.where(use, model, 0.0)
    else:
        model_u = model
    a, cd = _brightness_chroma(f, model_u)
    scale = np.maximum(np.sqrt(np.einsum("...c,...c->...", model, model)), COLOUR_FLOOR_DN)
    return a, cd / scale


def _brightness_chroma(f: np.ndarray, model: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Brightness ratio ``a = I.M / max(M.M, 1)`` and the chromaticity residual ``|I - a M|``
    (DN; Horprasert, Harwood & Davis 1999) of (..., 3) colours ``f`` against ``model``; each
    (...)."""
    a = np.einsum("...c,...c->...", f, model) / np.maximum(np.einsum("...c,...c->...", model, model), 1.0)
    return a, np.linalg.norm(f - a[..., None] * model, axis=-1)


def _light_pools(f32: np.ndarray, model: np.ndarray, open_cloth: np.ndarray, lab: np.ndarray, keep: np.ndarray, ball_px: float, cap: float) -> np.ndarray:
    """(H, W) bool: the blobs of :func:`_blobs` (labels ``lab``, ``keep``) that are pools of
    lamp light the cloth model (``model``) did not follow: larger than ``cap`` balls (the
    largest blob filled) and of the cloth's chromaticity on the open cloth (``_POOL_SHARE``,
    ``_POOL_CHROMA``)."""
    area_ball = math.pi * (ball_px / 2) ** 2
    counts = np.bincount(lab.ravel(), minlength=len(keep))
    big = (counts > cap * area_ball) & ~keep
    big[0] = False
    if not big.any():
        return np.zeros(lab.shape, bool)
    on = big[lab] & open_cloth
    _, cd = _chroma_distortion(f32[on], model[on], unclipped=True)
    like = np.bincount(lab[on], weights=(cd < _POOL_CHROMA).astype(float), minlength=len(keep))
    seen = np.bincount(lab[on], minlength=len(keep))
    pool = big & (seen > 0) & (like >= _POOL_SHARE * np.maximum(seen, 1))
    return pool[lab]


def _pool_model(f32: np.ndarray, model: np.ndarray, open_cloth: np.ndarray, region: np.ndarray, ball_px: float, config: BackgroundConfig) -> np.ndarray:
    """(H, W, 3) float32: the cloth's local colour inside ``region``'s bounding box (``model``
    elsewhere): at the cloth model's working scale, each channel's median over a window of
    ``_POOL_WINDOW_BALLS`` ball diameters of the open cloth's pixels near the cloth model's
    chromaticity (``_POOL_SAMPLE_CHROMA``: balls of other colours drop out), bilinear back to
    full scale; the cloth model where a window holds no such pixel. A median follows a ramp
    exactly and a clipped plateau too, where the cloth model's Gaussian smoothing does not."""
    out = model.copy()
    x0, y0, bw, bh = cv2.boundingRect(region.astype(np.uint8))
    if bw == 0 or bh == 0:
        return out
    f = max(1.0, ball_px / config.downscale_ball_px)
    sw, sh = max(int(round(bw / f)), 1), max(int(round(bh / f)), 1)
    box = (slice(y0, y0 + bh), slice(x0, x0 + bw))
    small = cv2.resize(f32[box], (sw, sh), interpolation=cv2.INTER_AREA)
    msmall = cv2.resize(np.ascontiguousarray(model[box]), (sw, sh), interpolation=cv2.INTER_AREA)
    wt = cv2.resize(open_cloth[box].astype(np.float32), (sw, sh), interpolation=cv2.INTER_AREA) > 0.99
    valid = wt & (_chroma_distortion(small, msmall, unclipped=True)[1] < _POOL_SAMPLE_CHROMA)
    k = max(int(round(_POOL_WINDOW_BALLS * config.downscale_ball_px)) | 1, 3)
    pad = k // 2
    cnt = np.lib.stride_tricks.sliding_window_view(np.pad(valid, pad), (k, k)).sum(axis=(2, 3))
    lo_i = np.maximum((cnt - 1) // 2, 0)[..., None]
    hi_i = np.minimum(cnt // 2, k * k - 1)[..., None]
    local = msmall.copy()
    for c in range(3):
        # Masked median: invalid samples sort last (+inf) and each window's median is taken
        # among its valid ones.
        vals = np.pad(np.where(valid, small[..., c], np.inf).astype(np.float32), pad, constant_values=np.inf)
        win = np.sort(np.lib.stride_tricks.sliding_window_view(vals, (k, k)).reshape(sh, sw, k * k), axis=2)
        med = 0.5 * (np.take_along_axis(win, lo_i, axis=2)[..., 0] + np.take_along_axis(win, hi_i, axis=2)[..., 0])
        local[..., c] = np.where(cnt > 0, med, msmall[..., c])
    out[box] = cv2.resize(local, (bw, bh), interpolation=cv2.INTER_LINEAR)
    return out


def _pool_distance(f: np.ndarray, local: np.ndarray) -> np.ndarray:
    """(N,) colour distance (DN) of (N, 3) pixels ``f`` from the cloth's local colour ``local``
    that only a ball makes: vision.detect.ballness's score (chromaticity distortion, brightness
    beyond 1.15 times and darkness below half the cloth's; Horprasert et al. 1999) times the
    cloth's brightness (floored at 30 DN, as there), so it compares with the blob threshold.
    The pool's brightness misfit (a median's bias at its peak, up to a tenth) and a ball's cast
    shadow do not stand out by it; a ball's colour, a white ball's brightness and a black ball's
    darkness do."""
    a, cd = _chroma_distortion(f, local)
    score = cd + np.maximum(a - LIT_RATIO, 0.0) + DARK_WEIGHT * np.maximum(DARK_RATIO - a, 0.0)
    return score * np.maximum(np.sqrt(np.einsum("nc,nc->n", local, local)), COLOUR_FLOOR_DN)


def _sample(image: np.ndarray, u: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Bilinear samples (N, C) of ``image`` (H, W, C) at (N,) pixel coordinates, in rows of
    4096 (``cv2.remap`` takes maps under 32767 px a side)."""
    n = len(u)
    cols = 4096
    rows = max(1, -(-n // cols))
    mu = np.zeros(rows * cols, np.float32)
    mv = np.zeros(rows * cols, np.float32)
    mu[:n], mv[:n] = u, v
    got = cv2.remap(image, mu.reshape(rows, cols), mv.reshape(rows, cols), cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    return got.reshape(rows * cols, -1)[:n]


def _close_holes(mask: np.ndarray, max_area: float) -> np.ndarray:
    """``mask`` ((H, W) uint8 0/1) with its enclosed holes of at most ``max_area`` px set: the
    connected components of the complement (4-connected) that touch no image border."""
    n, lab, stats, _ = cv2.connectedComponentsWithStats((mask == 0).astype(np.uint8), connectivity=4)
    h, w = mask.shape
    x, y, bw, bh, a = stats[:, 0], stats[:, 1], stats[:, 2], stats[:, 3], stats[:, 4]
    hole = (a <= max_area) & (x > 0) & (y > 0) & (x + bw < w) & (y + bh < h)
    hole[0] = False  # label 0 is the mask itself
    out = mask.copy()
    if hole.any():
        out[hole[lab] & (mask == 0)] = 1
    return out


def rail_band(zone: np.ndarray, cloth: np.ndarray, ball_px: float, config: BackgroundConfig = BackgroundConfig()) -> np.ndarray:
    """(H, W) bool: the pixels of ``zone`` off the cloth or within ``rail_band_balls`` ball
    diameters (``ball_px`` px each) of its edge, where the empty table's look is set by the
    cushion (its nose, face and the shadow band under it) rather than by the open cloth."""
    inside = cv2.distanceTransform(cloth.astype(np.uint8), cv2.DIST_L2, 5)
    return zone & (inside <= config.rail_band_balls * ball_px)


def rail_model(image: np.ndarray, band: np.ndarray, cloth: np.ndarray, ball_px: float, max_spread_dn: float, exclude: np.ndarray | None = None, reach: float = 3.5, band_all: np.ndarray | None = None) -> np.ndarray:
    """The rail band as the empty table shows it: (H, W, 3) float32, NaN off ``band`` and where
    the rail is not uniform along itself.

    A cushion looks the same all along its rail, at a fixed distance from its nose, and the
    lamps' light changes over metres, not centimetres; so each band pixel's model is the
    per-channel median of the frame at the pixel and at 1.5, 2.5 and 3.5 ball diameters either
    way along the rail (samples off the band or the image dropped). One ball, or two touching
    ones, cover at most three of the seven samples, so the median is the rail's own colour
    (common practice: a running median along a structure that is constant along it). The
    direction along the rail is the image tangent of the cloth's border: perpendicular to the
    gradient of the signed distance from it. Where the median colour distance of the samples
    from their median exceeds ``max_spread_dn`` (the rail changes along the tangent: pocket
    jaws, corners), or fewer than five samples lie in the band, the model is NaN. With
    ``exclude`` ((H, W) bool: a cluster of balls along the rail) samples on it are dropped too,
    and ``reach`` (ball diameters) takes samples at every further 1 diameter out to it, so a
    pixel beside the cluster is modelled from the rail beyond it; ``band_all`` ((H, W) bool,
    default ``band``) is the band samples may lie on when only ``band``'s pixels are modelled.
    """
    h, w = band.shape
    out = np.full((h, w, 3), np.nan, np.float32)
    vv, uu, tx, ty = _rail_tangents(band, cloth, ball_px)
    if len(vv) == 0:
        return out
    on = band if band_all is None else band_all
    steps = _rail_steps(reach)
    samp = np.full((len(steps), len(vv), 3), np.nan, np.float32)
    for k, s in enumerate(steps):
        su, sv, ok = _rail_step(vv, uu, tx, ty, s * ball_px, on)
        if exclude is not None:
            iu, iv = np.round(su[ok]).astype(int), np.round(sv[ok]).astype(int)
            ok[ok] &= ~exclude[iv, iu]
        samp[k, ok] = _sample(image, su[ok], sv[ok])
    if exclude is not None:
        # Beside a cluster only the three nearest samples either way past it: the lamps' light
        # changes along a rail over the longer reach (a rendered bright room: the median of all
        # out to 7.5 diameters failed the spread test and left a rack's row in the model).
        for side in (slice(1, None, 2), slice(2, None, 2)):
            part = samp[side]
            got = ~np.isnan(part[:, :, 0])
            part[(np.cumsum(got, axis=0) > 3) & got] = np.nan
            samp[side] = part
    srt = np.sort(samp, axis=0)  # NaN last
    cnt = np.sum(~np.isnan(samp[:, :, 0]), axis=0)
    lo, hi = np.clip((cnt - 1) // 2, 0, None), cnt // 2
    idx = np.arange(len(vv))
    med = 0.5 * (srt[lo, idx] + srt[np.minimum(hi, len(steps) - 1), idx])
    # Where the rail is not the same along the tangent (round a pocket's jaws, at the corners)
    # or too few samples lie on it, the median is no model: NaN there.
    dev = np.linalg.norm(samp - med[None], axis=2)  # (7, N), NaN for dropped samples
    dev_srt = np.sort(dev, axis=0)
    spread = dev_srt[np.clip((cnt - 1) // 2, 0, None), idx]
    # Beside a cluster the rail may go on past it one way only (a rack's row near a corner, or
    # a strip of cushion shadow joined to its blob): three samples, a side's worth, suffice.
    valid = (cnt >= (5 if exclude is None else 3)) & (spread <= max_spread_dn)
    out[vv[valid], uu[valid]] = med[valid]
    return out


def _rail_steps(reach: float) -> tuple[float, ...]:
    """Offsets along the rail (ball diameters) of :func:`rail_model`'s samples: 0, then 1.5,
    2.5, ... either way out to ``reach``."""
    return (0.0,) + tuple(x for k in np.arange(1.5, reach + 0.01, 1.0) for x in (float(k), -float(k)))


def _rail_tangents(band: np.ndarray, cloth: np.ndarray, ball_px: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The pixels of ``band`` ((H, W) bool) as (vv, uu) int arrays (N,) and the unit image
    direction along the rail at each, (tx, ty) float32 (N,): perpendicular to the gradient of
    the signed distance from the border of ``cloth`` ((H, W) bool), smoothed over a ball
    (``ball_px`` px)."""
    vv, uu = np.nonzero(band)
    if len(vv) == 0:
        empty = np.zeros(0, np.float32)
        return vv, uu, empty, empty
    c8 = cloth.astype(np.uint8)
    signed = cv2.distanceTransform(1 - c8, cv2.DIST_L2, cv2.DIST_MASK_PRECISE) - cv2.distanceTransform(c8, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
    # The cloth's border is a staircase of pixels; the direction along it must hold to a
    # fraction of a pixel over 3.5 ball diameters, so the distance is smoothed over a ball.
    signed = cv2.GaussianBlur(signed, (0, 0), ball_px)
    gx = cv2.Sobel(signed, cv2.CV_32F, 1, 0, ksize=5)[vv, uu]
    gy = cv2.Sobel(signed, cv2.CV_32F, 0, 1, ksize=5)[vv, uu]
    norm = np.maximum(np.hypot(gx, gy), 1e-6)
    return vv, uu, -gy / norm, gx / norm


def _rail_step(vv: np.ndarray, uu: np.ndarray, tx: np.ndarray, ty: np.ndarray, step_px: float, on: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The points ``step_px`` px along the rail from the pixels (vv, uu) (N,) with tangents
    (tx, ty) (N,) (:func:`_rail_tangents`): (su, sv) float32 (N,) px and ok (N,) bool, the
    points whose nearest pixel lies in the image and on ``on`` ((H, W) bool)."""
    h, w = on.shape
    su = (uu + step_px * tx).astype(np.float32)
    sv = (vv + step_px * ty).astype(np.float32)
    iu, iv = np.round(su).astype(int), np.round(sv).astype(int)
    ok = (iu >= 0) & (iu < w) & (iv >= 0) & (iv < h)
    ok[ok] &= on[iv[ok], iu[ok]]
    return su, sv, ok


def _covers_rail_median(cluster: np.ndarray, band: np.ndarray, tangents: tuple[np.ndarray, ...], ball_px: float) -> bool:
    """Whether ``cluster`` ((H, W) bool) lies on at least half of the rail samples of some
    pixel of ``band`` ((H, W) bool) next to it: :func:`rail_model`'s seven (the pixel and 1.5,
    2.5, 3.5 ball diameters either way, those on the band), whose median is then the cluster's
    colour, not the rail's. ``tangents``: the band's pixels and directions along the rail
    (:func:`_rail_tangents`)."""
    near = band & cv2.dilate(cluster.astype(np.uint8), cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (3, 3))).astype(bool)
    if not near.any():
        return False
    vv, uu, tx, ty = tangents
    sel = near[vv, uu]
    vv, uu, tx, ty = vv[sel], uu[sel], tx[sel], ty[sel]
    on = np.zeros(len(vv), int)
    cnt = np.zeros(len(vv), int)
    for s in _rail_steps(3.5):
        su, sv, ok = _rail_step(vv, uu, tx, ty, s * ball_px, band)
        cnt += ok
        on[ok] += cluster[np.round(sv[ok]).astype(int), np.round(su[ok]).astype(int)]
    # Fewer than five samples: no model there in any case (rail_model), cluster or not.
    return bool(np.any((cnt >= 5) & (2 * on >= cnt)))


class Background:
    """The running empty-table model of one camera view.

    ``Background(frames, zone, cloth, ball_px, config)`` builds the model from one or more frames
    (per-pixel median, then :func:`clean_frame`). ``image`` is the (H, W, 3) float32 model;
    ``sigma`` the per-channel noise sigma (DN) of frames about it, ``chroma_sigma`` the same
    seen in their chromaticity distortion alone (:func:`chroma_sigma`: a change of light that
    scales the colours raises ``sigma`` only); ``updates`` counts the calls
    of :meth:`update` (what a cached copy of ``image`` is checked against); ``revised`` the
    boxes (u0, v0, u1, v1) px where the last update replaced the model outright (hidden balls
    taken out: the frame need not change there, yet they now stand out).
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
        idx = np.flatnonzero(self.cloth)
        idx = idx[:: max(1, idx.size // 20000)]
        self.chroma_sigma = chroma_sigma(stack[-1].reshape(-1, 3)[idx], self.image.reshape(-1, 3)[idx]) if idx.size else 2.0
        self._last = _as_frame(stack[-1])
        self.updates = 0
        self.revised: tuple[tuple[int, int, int, int], ...] = ()
        # Bounding box (v0, v1, u0, u1) of the ball zone grown by 2 px and clipped to the image:
        # ghosts lie in the zone, and the 3 x 3 opening of a mask that is 0 outside the zone
        # gives the same inside the box whether the rest of the frame is there or not.
        vs, us = np.nonzero(self.zone) if self.zone.any() else (np.array([0]), np.array([0]))
        h, w = self.zone.shape
        self._zone_box = (max(int(vs.min()) - 2, 0), min(int(vs.max()) + 3, h), max(int(us.min()) - 2, 0), min(int(us.max()) + 3, w))

    def update(self, frame: np.ndarray, protect: np.ndarray, fg_sigmas: float = 4.0) -> None:
        """Fold ``frame`` into the model, leaving ``protect`` ((H, W) bool, e.g. discs round the
        detected balls) untouched: pixels close to the model move toward the frame at
        ``update_rate`` (lighting drift); pixels far from it that held no detection and did not
        change since the previous update (ghosts) are re-seeded from the cleaned frame at
        ``ghost_rate``."""
        self.updates += 1
        self.revised = ()
        frame = _as_frame(frame)
        cur = frame.astype(np.float32)
        thr = fg_sigmas * self.sigma + 3.0
        # within: every channel of |cur - model| at most thr, i.e. max_abs_diff(cur, model) <= thr,
        # in one pass (cv2.inRange; its float32 bound is the largest float32 not above thr, so
        # the comparison of float32 differences is the same as against thr itself).
        t32 = np.float32(thr)
        if float(t32) > thr:
            t32 = np.nextafter(t32, np.float32(-np.inf))
        within = cv2.inRange(cv2.absdiff(cur, self.image), (0.0, 0.0, 0.0), (float(t32),) * 3) > 0
        near = within & ~protect
        cv2.accumulateWeighted(cur, self.image, self.config.update_rate, near.view(np.uint8))
        # Ghosts lie in the zone: everything about them is worked out in its box only (the
        # whole-frame masks and labels cost most of an update).
        v0, v1, u0, u1 = self._zone_box
        box = (slice(v0, v1), slice(u0, u1))
        if frame.dtype == np.uint8 and self._last.dtype == np.uint8:
            # |frame - last| of two 8-bit frames is an integer: at most thr iff at most floor(thr).
            lim = float(math.floor(thr))
            still = cv2.inRange(cv2.absdiff(frame[box], self._last[box]), (0.0, 0.0, 0.0), (lim, lim, lim)) > 0
        else:
            still = max_abs_diff(cur[box], self._last[box]) <= thr
        ghost_box = (~within[box] & ~protect[box] & still & self.zone[box]).astype(np.uint8)
        # Single noisy pixels pass a per-pixel threshold somewhere in a large frame every time;
        # a ghost is a compact patch, so isolated pixels are opened away first.
        ghost_box = cv2.morphologyEx(ghost_box, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
        patches = _patches(ghost_box, 0.25 * math.pi * (self.ball_px / 2) ** 2, self._context_px(), origin=(u0, v0), shape=self.zone.shape)
        if patches:
            ghost = np.zeros(self.zone.shape, np.uint8)
            ghost[box] = ghost_box
            for pbox in patches:
                self._reseed(frame, ghost, pbox, protect, thr)
        self._last = frame.copy()
        # The strided sample of the masked difference, formed for the sampled pixels only
        # (differencing the whole frame and then indexing it took about 19 ms, a quarter of an
        # update). The box's flat indices in order are the frame's in order, so the stride picks
        # the same pixels.
        sel = np.flatnonzero(near[box] & self.cloth[box])
        if 3 * sel.size > 1000:
            sel = sel[:: max(1, sel.size // 20000)]
            idx = (sel // (u1 - u0) + v0) * near.shape[1] + (sel % (u1 - u0) + u0)
            resid = cur.reshape(-1, 3)[idx] - self.image.reshape(-1, 3)[idx]
            s = 1.4826 * float(np.median(np.abs(resid)))
            self.sigma = 0.8 * self.sigma + 0.2 * max(s, 0.5)
            self.chroma_sigma = 0.8 * self.chroma_sigma + 0.2 * chroma_sigma(cur.reshape(-1, 3)[idx], self.image.reshape(-1, 3)[idx])

    def _context_px(self) -> int:
        """Margin (px) round a patch to be cleaned: enough cloth for the cloth model's smoothing
        (``cloth_scale_balls`` ball diameters) and for the inpainting to draw from."""
        return int(math.ceil((self.config.cloth_scale_balls + 1.0) * self.ball_px))

    def _reseed(self, cur: np.ndarray, ghost: np.ndarray, box: tuple[int, int, int, int], protect: np.ndarray, thr: float) -> None:
        """Clean the frame inside ``box`` (u0, v0, u1, v1) only (:func:`clean_frame` on the
        window: the work scales with the ghost, not with the frame) and blend it into the model
        at ``ghost_rate`` over the ghost pixels in the box that the cleaning made empty table or
        found so (not over what it left as it is: see the module's notes); the hidden balls in
        the window (:func:`_hidden_balls`, ``protect`` (H, W) bool the detected balls' discs,
        ``thr`` the update's foreground threshold in DN) are replaced by the cleaned frame. A
        ball touched by an arm or cue when the model was made is left in it with the occluder;
        the arm's ghost is re-seeded when it goes, but the ball itself still matches the model
        and would stay in it (and undetected) until it moved (extra scene dim_540p_60fps: a ball
        under the cue at the start, missed for 3 s)."""
        u0, v0, u1, v1 = box
        win = (slice(v0, v1), slice(u0, u1))
        cleaned, filled, left, weak = _clean(cur[win].astype(np.float32), self.zone[win], self.cloth[win], self.ball_px, self.config)
        model = self.image[win]
        hidden = _hidden_balls(model, cur[win], cleaned, filled, left, weak, protect[win], self.ball_px, thr)
        sub = np.ascontiguousarray(model)
        cv2.accumulateWeighted(cleaned, sub, self.config.ghost_rate, np.ascontiguousarray(ghost[win] * ~left))
        # A hidden ball is replaced outright: blended, the half of it left in the model would
        # be found by the detector, protected from then on, and stay.
        sub[hidden] = cleaned[hidden]
        self.image[win] = sub
        if hidden.any():
            bu, bv, bw, bh = cv2.boundingRect(hidden.astype(np.uint8))
            self.revised += ((u0 + bu, v0 + bv, u0 + bu + bw, v0 + bv + bh),)


def _hidden_balls(model: np.ndarray, frame: np.ndarray, cleaned: np.ndarray, filled: np.ndarray, left: np.ndarray, weak: np.ndarray, protect: np.ndarray, ball_px: float, thr: float) -> np.ndarray:
    """(h, w) bool: the pieces of a window's cleaning (:func:`_clean` of ``frame`` (h, w, 3):
    ``cleaned`` (h, w, 3) float32, masks ``filled``, ``left``, ``weak``) that are balls the model
    ``model`` (h, w, 3) holds and the detector does not see.

    A piece is an 8-connected component of ``filled`` and not ``left``. It is a hidden ball when

    - no pixel of it is in ``protect`` (the detected balls' discs): a filled blob that holds a
      detected ball is that ball with its margin, or a ball touching it, and the model is kept
      as it is there (extra scene phone_wide_30fps: the sliver of a resting ball's filled
      margin outside its disc, replaced, darkened the model beside it by 2-3 DN and lost the
      ball in 4 more frames);
    - the model holds a ball there: its largest channel difference from the cleaned frame
      exceeds ``thr``, and that from the frame is smaller, over at least a ball's image area
      (what the model holds is what the cleaning took out of the frame, not an inpainting
      from an occluder round the piece: sample clip cushion_check, a cue's tip). Else the model is the empty table
      there but for a rim or shadow, and writing the inpainting over it only adds its error
      or takes a resting ball's shadow out (extra scenes: the hidden balls of dim_540p_60fps
      and lamp_50fps held 3.0 and 2.0 balls' area; a ball the model did not hold, with 0.6 of
      a ball's area of its long shadow held, replaced, was refitted 8 mm onto its shadow
      later);
    - it has at most 6 balls' area (a ball with its shadow and the shadow's penumbra filled
      4.4 balls' area in the extra scene dim_540p_60fps; the detector seeds pieces up to 6
      balls' area as one group too) and is clear of the window's sides: a larger one, or one
      the window cuts, may be part of an arm whose way in over the rail lies outside the
      window;
    - it is not beside what the cleaning left as it is: a piece of a hand or sleeve cut off
      from its arm is filled from the arm round it, and taken in it would stay as a ghost of
      the arm's end (with a trial cloth model's lower blob threshold, the sample clip
      cushion_check gave 20 false ball-frames in 5 places without this rule and 16 in 2 with
      it; with this model, 1 either way);
    - it is all that stands out there: what is ``weak`` (or has no rail model) and joined to
      it reaches no side of the window and adds at most 0.3 of a ball's area (the smallest
      blob the cleaning fills) to it. An occluder held still stands out from a window's cloth
      model only in places, and where it lies across the rail the rail has no model; a piece
      of it that passes the blob threshold is cut out of a larger whole, and replaced it
      leaves a hole of cloth in the occluder that the detector finds as a ball (extra scene
      tele_120fps: a piece of the sleeve of an arm lying over the rail, 7 false detections).
    """
    hh, ww = filled.shape
    area_ball = math.pi * (ball_px / 2) ** 2
    n, lab, stats = components_8((filled & ~left).astype(np.uint8))
    if n <= 1:
        return np.zeros((hh, ww), bool)
    x, y, bw, bh, area = (stats[:, k] for k in range(5))
    ok = (area <= 6.0 * area_ball) & (x > 0) & (y > 0) & (x + bw < ww) & (y + bh < hh)
    near_left = cv2.dilate(left.astype(np.uint8), np.ones((5, 5), np.uint8)) > 0
    ok[np.unique(lab[near_left | protect])] = False
    ok[0] = False
    off = max_abs_diff(model, cleaned)
    held = np.bincount(lab.ravel(), weights=((off > thr) & (max_abs_diff(model, frame) < off)).ravel(), minlength=n)
    ok &= held >= area_ball
    if not ok.any():
        return np.zeros((hh, ww), bool)
    _, lab_w, stats_w = components_8((weak | (lab > 0)).astype(np.uint8))
    # Each piece lies in one component of the weak mask joined with the pieces: any of its
    # pixels names it.
    joined = np.zeros(n, np.int64)
    joined[lab.ravel()] = lab_w.ravel()
    xw, yw, bww, bhw, aw = (stats_w[joined, k] for k in range(5))
    ok &= (aw - area <= 0.3 * area_ball) & (xw > 0) & (yw > 0) & (xw + bww < ww) & (yw + bhw < hh)
    ok[0] = False
    return ok[lab]


def _may_hold_patch(mask: np.ndarray, min_area: float, cell: int = 8) -> bool:
    """Whether an 8-connected component of ``mask`` ((h, w) uint8 0/1) can have at least
    ``min_area`` pixels: False when no 8-connected group of ``cell`` x ``cell`` cells holding set
    pixels holds that many (a component's pixels lie in one such group: pixels 8-adjacent
    across a cell border lie in 8-adjacent cells). Counting the cells costs one area resize of
    the mask and a labelling of a grid ``cell``^2 times smaller, instead of labelling the mask."""
    h, w = mask.shape
    hp, wp = -(-h // cell) * cell, -(-w // cell) * cell
    m = cv2.copyMakeBorder(mask, 0, hp - h, 0, wp - w, cv2.BORDER_CONSTANT, value=0).astype(np.float32)
    # The mean of each cell's 0/1 pixels, times the cell's area: its count (exact in float32,
    # the area a power of two).
    counts = np.rint(cv2.resize(m, (wp // cell, hp // cell), interpolation=cv2.INTER_AREA) * (cell * cell))
    n, lab, _ = components_8((counts > 0).astype(np.uint8))
    held = np.bincount(lab.ravel(), weights=counts.ravel(), minlength=n)
    return bool(np.any(held[1:] >= min_area))


def _patches(mask: np.ndarray, min_area: float, margin: int, origin: tuple[int, int] = (0, 0), shape: tuple[int, int] | None = None) -> list[tuple[int, int, int, int]]:
    """Boxes (u0, v0, u1, v1) px round the connected patches of ``mask`` ((h, w) uint8) of at
    least ``min_area`` pixels, each grown by ``margin`` px and clipped to the image; boxes that
    then overlap are merged, so no pixel is cleaned twice. ``mask`` may be a window of the
    image whose pixel (0, 0) is the image's ``origin`` (u, v), the image being of ``shape``
    (H, W) (default: the mask's own); the boxes are in the image's pixels."""
    h, w = mask.shape if shape is None else shape
    if cv2.countNonZero(mask) < min_area:
        return []  # no patch can be large enough: labelling would find none (most updates)
    # Labelled within the bounding box of the mask's pixels only: the same components.
    bx0, by0, bw0, bh0 = cv2.boundingRect(mask)
    if bw0 == 0 or bh0 == 0:
        return []
    crop = np.ascontiguousarray(mask[by0 : by0 + bh0, bx0 : bx0 + bw0])
    if not _may_hold_patch(crop, min_area):
        return []  # specks scattered over the frame (most updates): nothing to label
    n, _, stats = components_8(crop)
    boxes = []
    for i in range(1, n):
        if stats[i, cv2.CC_STAT_AREA] < min_area:
            continue
        x, y, bw, bh = stats[i, :4]
        x, y = x + bx0 + origin[0], y + by0 + origin[1]
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
