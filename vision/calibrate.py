"""Automatic calibration of a fixed overhead camera from its own clip, and camera-bump detection.

Frames (as written down in :mod:`vision.table` and :mod:`vision.camera`):

* **table frame**: mm, ``x`` along a long cushion (0..L), ``y`` along a short one (0..W), ``z`` up
  from the cloth; the cushion noses are the lines ``y = 0``, ``x = L``, ``y = W``, ``x = 0`` at
  height ``z = table.nose_height_mm``; the sights sit on the rail top at ``rail_top_height_mm``,
  ``sight_setback_mm`` behind the nose;
* **image pixels**: ``(u, v)``, origin at the centre of pixel (0, 0), ``u`` right, ``v`` down;
  images are (H, W, 3) uint8 BGR indexed ``img[v, u]``.

How a clip becomes a :class:`~vision.camera.Camera`:

1. **Background**: frames are streamed once (a clip decoded to its luma only, each frame
   downscaled to 320 px wide; only the frames kept are converted to colour); a frame is *still*
   when its mean absolute difference from the previous frame (grey, downscaled) is small; a
   spread-out sample of still frames is kept and their per-pixel temporal median is the
   background (moving balls, arms and the cue vanish; resting balls stay and are rejected later
   as outliers).
2. **Cloth region**: the connected region around the image centre whose chromaticity matches the
   centre's (median and median absolute deviation; the tolerance widens as the light falls) and
   whose brightness stays within a factor of the cloth's own local level, found in turn with
   that level (:func:`_cloth_region`), so a low lamp's hot spot and dark far end, falloff and
   vignetting do not cut the table short; its outline gives a rough quadrilateral.
3. **Cushion noses**: along many normals to each rough side, intensity profiles are searched for
   the narrow dark band under the nose (the shadowed face below the cushion) and the step from it
   to the lit cushion top; a straight line must bend only by the lens, so candidates are kept by
   RANSAC on a quadratic curve per side; each kept profile is then resampled along the curve's
   normal and fitted with a blurred piecewise-linear model of the nose's image (cloth, the dark
   face under the nose, cushion top, each with its own level and slope, one Gaussian blur per
   side; the outer edge of the band is the nose at nose height) for a sub-pixel position
   (:func:`_nose_profile_fit`; a level-only model put the nose 0.1-0.3 px inward wherever the band
   brightens toward the nose). Where a video codec has bent the band's edges in stretches along
   a side (dim, compressed footage), the noses follow the band's centroid instead, which the
   codec keeps, offset by the edges' median offset from it, on a side where those lie clearly
   closer to a smooth curve than the edges (:func:`_fit_noses`). Profiles near pockets are
   skipped; balls, arms and shadows fail the curve test and are dropped. The bands and steps are
   judged against each profile's own contrast and noise, not fixed levels, so a dim end of the
   table still gives its nose (:func:`_min_step_dn`).
4. **Lens distortion** from the straightness of the four nose lines: the plumb-line method
   (Devernay & Faugeras, "Straight lines have to be straight", Machine Vision and Applications
   13(1), 2001) with OpenCV's radial model, principal point at the image centre.
5. **Focal length and pose** from the nose rectangle at nose height: the undistorted lines give
   the four corners, a homography (direct linear transform, Hartley & Zisserman, Multiple View
   Geometry, 2nd ed., alg. 4.2) and from it the focal length with a known principal point (Zhang,
   "A flexible new technique for camera calibration", IEEE TPAMI 22(11), 2000: the two
   constraints ``h1^T w h2 = 0`` and ``h1^T w h1 = h2^T w h2`` with ``w = K^-T K^-1``); the pose by
   ``cv2.solvePnP`` (IPPE, Collins & Bartoli 2014) on the corners.
6. **Refinement**: ``scipy.optimize.least_squares`` (trust-region, robust soft-L1 loss) over
   focal length, ``k1`` (and ``k2``) and pose, from every nose point (its distance from its nose
   line, in the plane of the noses, converted to px) and every sight found (reprojection, px);
   then once more with the sights weighted more and their setback and height free (each with a
   prior of the table's tolerance, :class:`_SightOffsets`), kept when the sights surround the
   table and the offsets are plausible (:func:`_offsets_untrusted`), else the nose-led fit stays.
   A near-overhead camera sees the cloth almost square on, so the focal length and the camera's
   height trade against each other (they are separated only by the slight tilt and the sights'
   height above the noses, which is itself known only to a few mm); the ball-centre plane lies
   within 8 mm of the nose plane, so the positions of balls depend on that trade only weakly, and
   ``camera_height_mm`` pins it if known.
7. **Uncertainty** (:func:`_uncertainty`): the linearised covariance of the fit, with the table's
   tolerances, a nose-locator bias and the serial correlation of the nose points along each rail
   (a codec errs in stretches of neighbouring profiles) counted, gives standard deviations of the camera's height
   and of ball positions; a view that does not fix the height to ``max_height_sd_rel`` is
   reported as such (``quality["height_determined"]``, the check image's banner) instead of
   passing a focal length it cannot know for a measured one.
8. **Square-on views** (height not determined, none given): the view's height and its standard
   deviation are combined with a typical mount height (``CalibConfig.typical_height_mm`` +-
   ``typical_height_sd_mm``) by inverse-variance weighting and the fit is pinned there
   (``quality["height_from"] = "typical"``, with ``height_view_mm`` and ``height_typical_mm``);
   the stated ball-position sd counts that height's uncertainty, and the calibration is refused
   only when that sd exceeds ``max_ball_position_sd_mm``. The noses (height h) anchor the
   picture's scale, so a ball centre (height R) ``d`` from the nadir moves by about
   ``(h - R) d |1/H1 - 1/H2|`` between camera heights H1 and H2 (pinhole projection; 0.6 mm for
   2.1 vs 2.5 m at 1 m), and a wide prior costs little.

The resulting camera maps a ball centre (height R) to the cloth point below it by
``camera.backproject(uv, table.radius_mm)``, the results format's ball position.

**Origin rule** (the corner of the nose rectangle that becomes (0, 0)): take the two image
directions of the table's long sides; if the long sides run more across the image than up it
(within 45 degrees of the image's rows; exactly 45 counts as across), the origin is the corner
that appears at the image's bottom-left, ``x`` to the image's right and ``y`` up the image; if the
long sides run up the image, the origin is the corner at the image's bottom-right, ``x`` up the
image and ``y`` to the image's left. ``y`` is always ``x`` turned 90 degrees anticlockwise as seen
from above (the image of a camera looking down is not mirrored). ``CalibConfig.origin_near_px``
pins the origin instead to whichever of the two corners allowed by that right-handed frame lies
nearest a given pixel (as a previous calibration.json records it), and manual corners given in
order pin it to the first one.

**Camera bumps**: every ``bump_every_s`` a downscaled gradient image of the frame is aligned to
the reference (``cv2.findTransformECC`` with a Euclidean motion, Evangelidis & Psarakis, IEEE
TPAMI 30(10), 2008); a motion of the table's outline by more than ``bump_threshold_px`` that lasts
``bump_persist`` samples and that each of the image's four quarters, aligned on its own, follows
(an arm or cue held over the table, or balls moved since the reference, pull the whole-image
alignment but leave the other quarters where they were) starts a new segment, dated to the
first frame after the last unmoved sample that shows it; each segment gets its own
background and camera (same lens, new pose). While no sample shows motion only every
``bump_persist``-th is aligned, the others only when it shows motion (:func:`_collect`), with
exactly the result of aligning every sample.
"""

from __future__ import annotations

import logging
import math
import os
from dataclasses import dataclass, field, replace
from functools import cached_property
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator

import cv2
import numpy as np
from scipy import optimize

from vision.camera import Camera, _rotation_to_rvec
from vision.table import TableSpec

log = logging.getLogger(__name__)

_SQRT_2PI = math.sqrt(2 * math.pi)



RAIL_SIDES = ("bottom", "right", "top", "left")


class CalibrationError(ValueError):
    """Calibration failed or is not trustworthy. ``check_image`` is the (H, W, 3) uint8 BGR check
    image where one could be drawn (else None), so the user can see why."""

    def __init__(self, message: str, check_image: np.ndarray | None = None):
        super().__init__(message)
        self.check_image = check_image


@dataclass(frozen=True)
class CalibConfig:
    """Everything that steers :func:`calibrate` (lengths in mm, times in s, image sizes in px).

    * background: ``still_threshold_dn`` (mean absolute grey difference from the previous frame
      below which a frame is still, DN on 0..255), ``max_still_frames`` kept for the median,
      ``min_still_frames`` needed;
    * noses: ``profiles_per_side`` normals sampled per cushion side; ``fit_k2`` also fits OpenCV's
      ``k2``; ``use_sights`` refines on the rail-top sights; ``fit_sight_offsets`` then refines
      once more with the sights' setback and rail-top height as two more unknowns
      (:class:`_SightOffsets`), each sight weighted as one measurement of sd ``sight_sd_px``
      against a side's nose points that share one locator bias of ``nose_bias_sd_px``
      (:func:`_offsets_sight_weight`; ``sight_sd_px``: the sights are blob centroids a codec
      hardly moves, 0.14 px median from the truth on the extra set's H.264 phone background,
      while it shifts whole stretches of a nose by 0.2-0.6 px), kept only when
      :func:`_offsets_untrusted` finds nothing against it;
    * known values: ``camera_height_mm`` (lens above the cloth) pins the height/focal trade;
      ``corners_px`` the four nose corners in the image, in table order (origin, then along x,
      then the far corner, then along y), for rooms where the automatic search fails;
      ``origin_near_px`` pins the origin corner (see the module's origin rule);
    * refusal thresholds: ``max_nose_rms_px`` (RMS distance of nose points from their fitted
      lines), ``max_sight_rms_px``, ``max_aspect_error`` (relative), plausible ``hfov_deg_range``
      and ``height_mm_range``;
    * how well the table is known, for the uncertainty of the camera (standard deviations; see
      :func:`_uncertainty`): ``camera_height_sd_mm`` of a given ``camera_height_mm`` (a tape
      to the lens; from memory), ``table_size_sd_mm`` of the playing area's length and width,
      ``nose_height_sd_mm`` and ``sight_setback_sd_mm`` (each uniform within its WPA tolerance,
      references.md: +-3.2 mm, 35.7-36.9 mm, +-3.2 mm, so the half-range over sqrt 3),
      ``rail_top_sd_mm`` of the sights' height above the nose (from memory: a few mm, so half the
      model's 8 mm), ``nose_bias_sd_px`` (a bias of the nose locator per side: our tests hold it
      to 0.15 px on uncompressed rendered views, but on the H.264 sample clips (crf 26) the four
      sides' median offsets from the truth reach 0.4-0.5 px, varying side to side, so 0.3 px);
      ``max_height_sd_rel``: the camera height counts as determined by the view when its
      standard deviation is at most this fraction of it;
    * a view that does not determine the height and no ``camera_height_mm``: the fit then takes
      ``typical_height_mm`` +- ``typical_height_sd_mm`` (1 sd) as a prior on the lens's height
      above the cloth (from memory: cameras hung from a ceiling or a lamp boom over a table whose
      bed is about 0.76 m above the floor sit roughly 1.5-3.5 m above the cloth), counted in the
      stated uncertainty; ``max_ball_position_sd_mm``: the calibration is refused when the
      resulting ball-position standard deviation (worst over the table) exceeds it;
    * bumps: ``detect_bumps``, ``bump_every_s``, ``bump_threshold_px`` (full-resolution motion of
      the table's outline), ``bump_persist`` samples, ``bump_quarter_share`` (share of the
      image's four quarters, each aligned on its own, that must follow the motion, see
      ``_moves_everywhere``);
    * check image: ``check_px_per_mm``.
    """

    still_threshold_dn: float = 1.5
    max_still_frames: int = 15
    min_still_frames: int = 1
    profiles_per_side: int = 90
    fit_k2: bool = True
    use_sights: bool = True
    fit_sight_offsets: bool = True
    sight_sd_px: float = 0.15
    camera_height_mm: float | None = None
    corners_px: tuple[tuple[float, float], ...] | None = None
    origin_near_px: tuple[float, float] | None = None
    max_nose_rms_px: float = 1.0
    max_sight_rms_px: float = 2.5
    max_aspect_error: float = 0.03
    hfov_deg_range: tuple[float, float] = (25.0, 150.0)
    height_mm_range: tuple[float, float] = (900.0, 6000.0)
    camera_height_sd_mm: float = 20.0
    table_size_sd_mm: float = 1.85
    nose_height_sd_mm: float = 0.35
    rail_top_sd_mm: float = 4.0
    sight_setback_sd_mm: float = 1.85
    nose_bias_sd_px: float = 0.3
    max_height_sd_rel: float = 0.05
    typical_height_mm: float = 2500.0
    typical_height_sd_mm: float = 500.0
    max_ball_position_sd_mm: float = 4.0
    detect_bumps: bool = True
    bump_every_s: float = 0.1
    bump_threshold_px: float = 1.5
    bump_persist: int = 3
    bump_quarter_share: float = 1.0
    check_px_per_mm: float = 0.4

    def __post_init__(self) -> None:
        if self.corners_px is not None:
            c = np.asarray(self.corners_px, dtype=float)
            if c.shape != (4, 2) or not np.all(np.isfinite(c)):
                raise ValueError(f"corners_px must be four (u, v) pixel pairs, got {self.corners_px!r}")
            object.__setattr__(self, "corners_px", tuple(tuple(map(float, p)) for p in c))
        if self.camera_height_mm is not None and not (300.0 <= self.camera_height_mm <= 10000.0):
            raise ValueError(f"camera height {self.camera_height_mm!r} mm is outside 300..10000 mm; give the lens's height above the cloth")
        if self.profiles_per_side < 12:
            raise ValueError(f"profiles_per_side {self.profiles_per_side} is too few; use at least 12")
        if self.max_still_frames < 1 or self.min_still_frames < 1:
            raise ValueError("max_still_frames and min_still_frames must be at least 1")
        if not (300.0 <= self.typical_height_mm <= 10000.0 and self.typical_height_sd_mm > 0):
            raise ValueError(f"typical camera height {self.typical_height_mm!r} +- {self.typical_height_sd_mm!r} mm must lie in 300..10000 mm with a positive sd")


@dataclass(frozen=True)
class NoseFit:
    """One cushion nose as seen: ``rail`` name (table frame), ``points_px`` (N, 2) sub-pixel nose
    points (u, v) used in the fit, ``residuals_px`` (N,) their signed distances from the fitted
    nose line (image px), ``offsets_mm`` (N,) their distances from the true nose line in the
    nose plane (mm, positive outward)."""

    rail: str
    points_px: np.ndarray
    residuals_px: np.ndarray
    offsets_mm: np.ndarray


@dataclass(frozen=True)
class Calibration:
    """The result of :func:`calibrate`.

    * ``camera``: the camera from the clip's start (table frame of the module's origin rule);
    * ``quality``: plain numbers (JSON-ready): ``nose_rms_px``, ``nose_max_px``, ``sight_rms_px``,
      ``sights_found``, ``aspect_measured`` (L/W the image supports), ``focal_px``,
      ``camera_height_mm``, ``hfov_deg``, ``k1``, ``k2``, ``nose_points``, ``still_frames``, and
      the uncertainty (:func:`_uncertainty`): ``camera_height_sd_mm``, ``focal_sd_pct``,
      ``ball_position_sd_mm``, ``height_determined``..., ``sight_offsets_mm`` (the sights' fitted
      setback and height offsets, mm, or None) and ``sight_offsets_note`` (why not, or None);
    * ``corners_px``: (4, 2) image positions (u, v) of the nose rectangle's corners at nose height,
      in table order (0,0), (L,0), (L,W), (0,W);
    * ``noses``: one :class:`NoseFit` per rail (bottom, right, top, left);
    * ``sights_px``: (M, 2) found sights (u, v) and ``sights_mm`` (M, 2) their table (x, y);
    * ``check_image``: (H, W, 3) uint8 BGR top-down view with the fit drawn on it, drawn by
      ``draw_check`` when first asked for (``analyse`` never asks, and drawing it took 0.27
      processor s on the 720p bank sample, all in calibration's serial stretch);
    * ``origin``: the origin corner in words;
    * ``camera_changes``: [(t_from_s, Camera)], first entry (0.0, camera); more after each bump;
    * ``background``: (H, W, 3) uint8 BGR background frame of the first segment.
    """

    camera: Camera
    quality: dict[str, Any]
    corners_px: np.ndarray
    noses: tuple[NoseFit, ...]
    sights_px: np.ndarray
    sights_mm: np.ndarray
    origin: str
    camera_changes: tuple[tuple[float, Camera], ...]
    background: np.ndarray = field(repr=False)
    draw_check: Callable[[], np.ndarray] = field(repr=False, compare=False)

    @cached_property
    def check_image(self) -> np.ndarray:
        """The (H, W, 3) uint8 BGR check image (:func:`check_image`), drawn once, when first read."""
        return self.draw_check()


# ================================================================================================
# 1. Frames in, still backgrounds out (with bump detection)
# ================================================================================================
_SMALL_WIDTH_PX = 320.0  # the whole-clip pass looks at frames at most this wide


def _small_frames(source) -> Iterator[tuple[float, np.ndarray, Callable[[], np.ndarray], float]]:
    """``(t_s, small, full, scale)`` per frame of a clip path, one frame, or an iterable of frames
    or of (t_s, frame) pairs (bare frames are taken 1/30 s apart): ``small`` the (h, w) float32
    grey image (0..255) downscaled by ``scale`` to at most ``_SMALL_WIDTH_PX`` wide (area
    averaging), ``full()`` the (H, W, 3) uint8 BGR frame. A clip is decoded to luma only
    (:func:`vision.video.iter_grey`) and a frame converted to BGR only when ``full()`` is called:
    the pass keeps a few dozen frames of thousands."""
    if isinstance(source, (str, os.PathLike)):
        from vision.video import iter_grey, probe

        scale = min(1.0, _SMALL_WIDTH_PX / max(probe(Path(source)).width, 1))
        shape = None
        for fr in iter_grey(Path(source), scale):
            if shape is not None and fr.grey.shape != shape:
                raise ValueError("frame size changed within the clip")
            shape = fr.grey.shape
            yield fr.t, fr.grey, fr.bgr, scale
        return
    if isinstance(source, np.ndarray) and source.ndim == 3:
        source = [source]
    shape = None
    for i, item in enumerate(source):
        t, frame = (float(item[0]), item[1]) if isinstance(item, tuple) else (i / 30.0, item)
        frame = _check_frame(frame, shape)
        shape = frame.shape
        scale = min(1.0, _SMALL_WIDTH_PX / shape[1])
        grey = cv2.cvtColor(frame, cv2.COLOR_BGR2GRAY)
        small = cv2.resize(grey, None, fx=scale, fy=scale, interpolation=cv2.INTER_AREA).astype(np.float32)
        yield t, small, (lambda f=frame: f), scale


def _check_frame(frame: np.ndarray, shape: tuple | None) -> np.ndarray:
    arr = np.asarray(frame)
    if arr.ndim != 3 or arr.shape[2] != 3 or arr.dtype != np.uint8:
        raise ValueError(f"frames must be (H, W, 3) uint8 BGR images, got shape {arr.shape} dtype {arr.dtype}")
    if shape is not None and arr.shape != shape:
        raise ValueError(f"frame size changed from {shape[1]}x{shape[0]} to {arr.shape[1]}x{arr.shape[0]} within the clip")
    return arr


def _edge_small(gray_small: np.ndarray) -> np.ndarray:
    """Gradient magnitude of a downscaled grey image (float32), the image compared for bumps:
    edges move with the camera, slow lighting changes do not."""
    g = cv2.GaussianBlur(gray_small, (0, 0), 1.0)
    gx = cv2.Sobel(g, cv2.CV_32F, 1, 0, ksize=3)
    gy = cv2.Sobel(g, cv2.CV_32F, 0, 1, ksize=3)
    return cv2.magnitude(gx, gy)


@dataclass
class _Segment:
    """A stretch of the clip with one camera pose: start time, still frames kept, reference."""

    t0: float
    stills: list = field(default_factory=list)
    seen_still: int = 0
    ref_edge: np.ndarray | None = None
    warp: np.ndarray | None = None  # 2x3 ECC warp from the first segment's reference (small px)


def _bump_start(ref_edge: np.ndarray, ring: list, t_unmoved: float, t_first: float, scale: float,
                config: "CalibConfig") -> float:
    """Time (s) a camera bump starts: the first small frame of ``ring`` ((t, small grey) pairs,
    oldest first) after ``t_unmoved`` (the last sample that showed no motion: a shake earlier in
    the ring, already over, is not this bump's start) and before ``t_first`` (the first sample
    that showed it) whose ECC warp against ``ref_edge`` moves at least ``bump_threshold_px``;
    ``t_first`` if none does."""
    for tt, sm in ring:
        if tt <= t_unmoved:
            continue
        if tt >= t_first:
            break
        w = _ecc(ref_edge, _edge_small(sm))
        if w is not None and _warp_motion_px(w, sm.shape, scale) >= config.bump_threshold_px:
            return tt
    return t_first


def _collect(source, config: CalibConfig) -> tuple[list[_Segment], int, float]:
    """Stream the clip once: still frames per camera segment, and the bump times.

    Returns (segments, frames read, scale of the small images). Memory is bounded by
    ``max_still_frames`` full frames per segment and a short ring of small frames.

    A bump needs ``bump_persist`` samples in a row that show motion. So while no sample shows
    motion, samples are taken in blocks of ``bump_persist`` and only a block's last one is
    aligned when it comes: if it shows no motion, no bump can lie in the block and the others
    need no alignment; if it does, the others are aligned, in order, then (with the frames they
    cover, whose still-keeping waits, and the ring of small frames as it stood at each), and
    every sample is aligned as it comes until none is pending. The segments, stills and bump
    times are exactly those of aligning every sample, with about ``1 / bump_persist`` of the
    alignments (``cv2.findTransformECC``, most of this pass's cost after decoding).
    """
    segments: list[_Segment] = []
    prev_small = None
    scale = 1.0
    n = 0
    last_t = -1e9
    t_unmoved = -1e9  # time of the last sample that showed no motion
    ring_len = int(max(8, 4 * config.bump_persist * max(1, config.bump_every_s * 60)))
    ring: list[tuple[float, np.ndarray]] = []  # (t, small grey); replaced, never changed in place
    pending: list[tuple[float, np.ndarray]] = []  # (t, warp) of samples that disagree with the reference
    waiting: list[tuple[float, bool, Callable[[], np.ndarray]]] = []  # (t, still, full) not yet kept
    deferred: list[tuple[float, np.ndarray, list]] = []  # samples not yet aligned: (t, small, ring then)
    seg = None

    def keep_until(t_end: float) -> None:
        # Still frames up to t_end go to the segment current at that time.
        while waiting and waiting[0][0] <= t_end:
            t_w, still_w, full_w = waiting.pop(0)
            if still_w:
                _keep_still(seg, t_w, full_w, config)

    def moved(small: np.ndarray) -> tuple[np.ndarray | None, np.ndarray]:
        # (warp, edge image): warp None unless the whole picture moved against the reference.
        edge = _edge_small(small)
        warp = _ecc(seg.ref_edge, edge)
        if (warp is None or _warp_motion_px(warp, small.shape, scale) < config.bump_threshold_px
                or not _moves_everywhere(seg.ref_edge, edge, warp, config.bump_quarter_share)):
            return None, edge
        return warp, edge

    def judge(t: float, small: np.ndarray, ring_then: list, known=None) -> None:
        # One sample in order, as if aligned when it came (the ring as it stood then).
        nonlocal seg, pending, t_unmoved
        keep_until(t)
        warp, edge = known if known is not None else moved(small)
        if warp is None:
            pending = []
            t_unmoved = t
            return
        pending.append((t, warp))
        if len(pending) < config.bump_persist:
            return
        # Persistent and consistent: the camera moved. Date it to the first frame showing it.
        ws = np.array([w for _, w in pending])
        if np.max(np.abs(ws - ws.mean(axis=0)), axis=0)[:, 2].max() * 1.0 / scale > 3 * config.bump_threshold_px:
            pending = pending[1:]
            return
        t_bump = _bump_start(seg.ref_edge, ring_then, t_unmoved, pending[0][0], scale, config)
        log.info("camera moved at t = %.3f s", t_bump)
        seg = _Segment(t0=t_bump)
        seg.ref_edge = edge
        segments.append(seg)
        pending = []
        t_unmoved = t
        # Frames after the bump already seen are not kept (the still sample restarts here).

    for t, small, full, scale in _small_frames(source):
        if seg is None:
            seg = _Segment(t0=0.0)
            segments.append(seg)
        n += 1
        still = prev_small is not None and float(np.mean(np.abs(small - prev_small))) < config.still_threshold_dn
        if n == 1:
            still = True  # the first frame stands in when nothing else is still
        prev_small = small
        waiting.append((t, still, full))
        if seg.ref_edge is None and still:
            keep_until(t)
            seg.ref_edge = _edge_small(small)
        if not config.detect_bumps or seg.ref_edge is None:
            keep_until(t)
            continue
        ring = (ring + [(t, small)])[-ring_len:]
        if t - last_t < config.bump_every_s:
            if not deferred:
                keep_until(t)
            continue
        last_t = t
        deferred.append((t, small, ring))
        if not pending and len(deferred) < config.bump_persist:
            continue
        if not pending:
            # Only this sample is aligned now; the waiting ones matter only if it shows motion.
            t_s, small_s, ring_s = deferred[-1]
            known = moved(small_s)
            if known[0] is None:
                deferred = []
                t_unmoved = t_s
                keep_until(t_s)
                continue
            for item in deferred[:-1]:
                judge(*item)
            # No bump can come from the waiting samples alone (fewer than bump_persist), so the
            # reference is unchanged and the alignment just made still holds.
            judge(t_s, small_s, ring_s, known=known)
        else:
            for item in deferred:
                judge(*item)
        deferred = []
        keep_until(t)
    keep_until(float("inf"))  # samples still waiting at the end cannot make a bump (fewer than bump_persist)
    if n == 0:
        raise ValueError("the clip has no frames; give a clip that shows the table")
    return segments, n, scale


def _keep_still(seg: _Segment, t: float, full: Callable[[], np.ndarray], config: CalibConfig) -> None:
    """Keep an evenly thinned sample of a segment's still frames (every 2^k-th once full);
    ``full()`` gives the (H, W, 3) uint8 BGR frame, asked for only when it is kept."""
    seg.seen_still += 1
    stride = 1
    while seg.seen_still > stride * config.max_still_frames:
        stride *= 2
    if (seg.seen_still - 1) % stride:
        return
    seg.stills.append((t, np.array(full(), copy=True), seg.seen_still - 1))
    if len(seg.stills) > config.max_still_frames:
        # stride has just doubled, so the frames on its grid are every other one kept so far.
        seg.stills = [s for s in seg.stills if s[2] % stride == 0] or seg.stills[-config.max_still_frames:]


def _ecc(ref: np.ndarray, img: np.ndarray) -> np.ndarray | None:
    """Euclidean 2x3 warp aligning ``img`` to ``ref`` (small px), or None if ECC fails."""
    warp = np.eye(2, 3, dtype=np.float32)
    crit = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 60, 1e-5)
    try:
        _, warp = cv2.findTransformECC(ref, img, warp, cv2.MOTION_EUCLIDEAN, crit, None, 3)
    except cv2.error:
        return None
    return warp


def _moves_everywhere(ref: np.ndarray, img: np.ndarray, warp: np.ndarray, min_share: float) -> bool:
    """True when at least ``min_share`` of the image's four quarters, each aligned on its own
    (:func:`_ecc`, Evangelidis & Psarakis 2008), move with ``warp`` (from :func:`_ecc`, small
    px): a quarter's own displacement at its centre lies nearer the one ``warp`` gives that
    point than no displacement. A knocked camera moves the whole picture, so every quarter
    follows; an arm or cue held over the table, or balls moved since the reference, change one or
    two quarters, which pull the whole-image alignment while the other quarters align where they
    were. (Judging each quarter by whether ``warp`` raises its correlation coefficient instead let
    a sub-pixel warp pass everywhere: the interpolation smooths the codec's noise, which alone
    raises the correlation: on phone_wide_30fps a 1.5 px pull from balls moved in one quarter
    passed all four, a false bump at 9.27 s.)"""
    h, w = ref.shape
    warp = np.asarray(warp, float)
    supported = 0
    for r0, r1 in ((0, h // 2), (h // 2, h)):
        for c0, c1 in ((0, w // 2), (w // 2, w)):
            wq = _ecc(np.ascontiguousarray(ref[r0:r1, c0:c1]), np.ascontiguousarray(img[r0:r1, c0:c1]))
            if wq is None:
                continue
            local = np.array([(c1 - c0 - 1) / 2.0, (r1 - r0 - 1) / 2.0, 1.0])
            own = np.asarray(wq, float) @ local - local[:2]  # the quarter's displacement at its centre
            whole = warp @ (local + [c0, r0, 0.0]) - (local[:2] + [c0, r0])  # warp's there
            supported += np.linalg.norm(own - whole) < np.linalg.norm(own)
    return supported >= min_share * 4


def _warp_motion_px(warp: np.ndarray, shape: tuple[int, int], scale: float) -> float:
    """Largest displacement (full-resolution px) the warp gives the small image's corners."""
    h, w = shape
    pts = np.array([[0, 0, 1], [w - 1, 0, 1], [w - 1, h - 1, 1], [0, h - 1, 1]], float)
    moved = pts @ np.asarray(warp, float).T
    return float(np.max(np.linalg.norm(moved - pts[:, :2], axis=1)) / scale)


def _median_background(stills: list) -> np.ndarray:
    """Per-pixel temporal median of the kept still frames, (H, W, 3) uint8."""
    stack = np.stack([s[1] for s in stills])
    return np.median(stack, axis=0).astype(np.uint8)


# ================================================================================================
# 2. Cloth region and rough quadrilateral
# ================================================================================================
def _cloth_region(small: np.ndarray) -> np.ndarray | None:
    """(h, w) bool mask of the cloth in a small, blurred (h, w, 3) uint8 BGR background: the
    connected region holding most of the picture's central window whose chromaticity matches the
    window's and whose brightness stays near the cloth's own local level; None when no region
    holds 30 % of the window (no uniform cloth in the middle).

    Chromaticity (each channel over the sum) does not change with the light's strength, so lamps,
    falloff and vignetting do not break the cloth up; the tolerance measured in the middle is
    widened by what rounding to code values does to a dark pixel's chromaticity. The brightness
    test (0.3 to 2.5 times the level, which keeps out pockets, shadows and a grey cloth's grey
    surroundings) is against the cloth's local level, not the middle's: a low lamp leaves the far
    end of the table at a tenth of its hot spot. That level is the cloth's own log brightness
    smoothed by normalised convolution (Knutsson & Westin, CVPR 1993) over the region found so
    far, with a Gaussian of a tenth of the picture's width; the region and the level are found in
    turn, starting from the middle's level, until the region stops growing.
    """
    f = small.astype(np.float32)
    inten = f.sum(axis=2)
    chrom = f / np.maximum(inten, 1.0)[..., None]
    sh, sw = inten.shape
    win = (slice(int(sh * 0.4), int(sh * 0.6)), slice(int(sw * 0.4), int(sw * 0.6)))
    med_c = np.median(chrom[win].reshape(-1, 3), axis=0)
    mad_c = np.median(np.abs(chrom[win].reshape(-1, 3) - med_c), axis=0) * 1.4826
    med_i = float(np.median(inten[win]))
    dist_c = np.linalg.norm(chrom - med_c, axis=2)
    tol_c = max(0.035, 5.0 * float(np.linalg.norm(mad_c)))
    # 8-bit rounding moves each channel by up to a code value, which moves the chromaticity by up
    # to sqrt(3) / sum: nothing on a lit cloth, the whole margin on a far end at a few DN.
    tol_px = tol_c + math.sqrt(3.0) / np.maximum(inten, 1.0)
    chroma_ok = dist_c < tol_px
    log_i = np.log(np.maximum(inten, 1.0))
    level = np.full(inten.shape, med_i, np.float32)
    region, size = None, -1
    for _ in range(6):
        mask = (chroma_ok & (inten > 0.3 * level) & (inten < 2.5 * level + 60)).astype(np.uint8)
        mask = cv2.morphologyEx(mask, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
        nlab, labels, _, _ = cv2.connectedComponentsWithStats(mask, connectivity=4)
        counts = np.bincount(labels[win].ravel(), minlength=nlab)
        counts[0] = 0
        k = int(np.argmax(counts))
        if counts[k] < 0.3 * labels[win].size:
            return region
        grown = labels == k
        if int(grown.sum()) <= size:
            break
        region, size = grown, int(grown.sum())
        m = region.astype(np.float32)
        # The table fills most of the picture, so this is about a tenth of its length (0.2-0.3 m):
        # wider than a ball or a pocket, which the region leaves out, narrower than a lamp's
        # falloff (inverse square and cos^3: a lamp 0.8 m up halves its light 0.6 m off).
        sig = sw / 10.0
        level = np.exp(cv2.GaussianBlur(log_i * m, (0, 0), sig) / np.maximum(cv2.GaussianBlur(m, (0, 0), sig), 1e-6))
    return region


def _rough_quad(bg: np.ndarray) -> np.ndarray:
    """(4, 2) rough corners (u, v) of the cloth region, visually anticlockwise on screen starting
    anywhere. ValueError with a one-line reason when no table is found."""
    h, w = bg.shape[:2]
    grey = cv2.cvtColor(bg, cv2.COLOR_BGR2GRAY)
    centre = grey[int(h * 0.35) : int(h * 0.65), int(w * 0.35) : int(w * 0.65)]
    if float(np.median(centre)) < 12.0:
        raise ValueError(f"the picture is too dark (median grey {float(np.median(centre)):.0f} of 255 in the middle); light the table or raise the exposure")
    s = min(1.0, 480.0 / w)
    small = cv2.resize(bg, None, fx=s, fy=s, interpolation=cv2.INTER_AREA)
    small = cv2.GaussianBlur(small, (0, 0), 1.5)
    sh, sw = small.shape[:2]
    region = _cloth_region(small)
    if region is None:
        raise ValueError("no table in view: the middle of the picture is not one uniform cloth; aim the camera at the table")
    region = cv2.morphologyEx(region.astype(np.uint8), cv2.MORPH_CLOSE, np.ones((9, 9), np.uint8))
    area_share = float(region.sum()) / region.size
    if area_share < 0.12:
        raise ValueError(f"no table in view: the cloth covers only {100 * area_share:.0f} % of the picture; aim the camera so the table fills most of it")
    contours, _ = cv2.findContours(region, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    contour = max(contours, key=cv2.contourArea).reshape(-1, 2).astype(float)
    hull = cv2.convexHull(contour.astype(np.float32)).reshape(-1, 2)
    quad = None
    peri = cv2.arcLength(hull, True)
    for eps in np.linspace(0.01, 0.12, 23):
        approx = cv2.approxPolyDP(hull, eps * peri, True).reshape(-1, 2)
        if len(approx) == 4:
            quad = approx.astype(float)
            break
    if quad is None:
        raise ValueError("the cloth's outline is not a four-sided shape; make sure the whole table is in view and nothing large covers it")
    # Touching the frame edge: the table is cut off.
    touch = (contour[:, 0] <= 1) | (contour[:, 0] >= sw - 2) | (contour[:, 1] <= 1) | (contour[:, 1] >= sh - 2)
    sides_touched = sum(bool(np.any(m)) for m in (contour[:, 0] <= 1, contour[:, 0] >= sw - 2, contour[:, 1] <= 1, contour[:, 1] >= sh - 2))
    if touch.mean() > 0.02 and sides_touched == 4:
        raise ValueError("no table in view: nothing bounds the middle region like cushions and rails; aim the camera at the table")
    if touch.mean() > 0.02:
        raise ValueError("the table is cut off by the edge of the picture; move or zoom the camera out so all four cushions are in view")
    quad = _refine_quad(quad, contour)
    quad = (quad + 0.5) / s - 0.5
    # Visually anticlockwise on screen = negative signed area in (u, v) with v down.
    area = 0.5 * np.sum(quad[:, 0] * np.roll(quad[:, 1], -1) - np.roll(quad[:, 0], -1) * quad[:, 1])
    if area > 0:
        quad = quad[::-1]
    return quad


def _refine_quad(quad: np.ndarray, contour: np.ndarray) -> np.ndarray:
    """Each side of a polygon approximation refitted to the outline points nearest it (middle 70 %
    of the side, Huber-weighted line), corners re-intersected: the approximation can cut corners."""
    lines = []
    for k in range(4):
        a, b = quad[k], quad[(k + 1) % 4]
        d = b - a
        ln = float(np.linalg.norm(d))
        t = ((contour - a) @ d) / ln**2
        dist = np.abs((contour - a) @ np.array([-d[1], d[0]]) / ln)
        near = (t > 0.15) & (t < 0.85) & (dist < 0.08 * ln + 3)
        if near.sum() < 10:
            lines.append(np.cross(np.append(a, 1.0), np.append(b, 1.0)))
            continue
        vx, vy, x0, y0 = cv2.fitLine(contour[near].astype(np.float32), cv2.DIST_HUBER, 0, 0.01, 0.01).ravel()
        lines.append(np.cross([x0, y0, 1.0], [x0 + vx, y0 + vy, 1.0]))
    out = []
    for k in range(4):
        p = np.cross(lines[(k - 1) % 4], lines[k])
        if abs(p[2]) < 1e-9:
            return quad
        out.append(p[:2] / p[2])
    return np.array(out)


# ================================================================================================
# 3. Nose points
# ================================================================================================
def _sample(grey: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Bilinear samples of a float32 image at (..., 2) points (u, v)."""
    shp = pts.shape[:-1]
    flat = pts.reshape(-1, 2).astype(np.float32)
    rows = -(-len(flat) // 4096)
    pad = np.full((rows * 4096, 2), -10.0, np.float32)
    pad[: len(flat)] = flat
    out = cv2.remap(grey, pad[:, 0].reshape(rows, 4096), pad[:, 1].reshape(rows, 4096), cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    return out.ravel()[: len(flat)].reshape(shp)


def _side_stations(a: np.ndarray, b: np.ndarray, long_side: bool, n: int, table: TableSpec, length_mm: float) -> np.ndarray:
    """Fractions (0..1) along a side from corner a to b where profiles are taken, away from the
    pockets: corner pockets take the ends, a side pocket the middle of a long side."""
    end = (table.corner_mouth_mm + 90.0) / length_mm
    fr = np.linspace(end, 1 - end, n)
    if long_side:
        mid = (table.side_mouth_mm / 2 + 80.0) / length_mm
        fr = fr[np.abs(fr - 0.5) > mid]
    return fr


def _profile_noise(prof: np.ndarray, step: float) -> float:
    """Robust standard deviation (DN) of the sample noise of profiles ``prof`` (N, M) sampled
    every ``step`` px: from second differences of samples 1 px apart (``6 sigma^2`` for white
    noise; nearer samples share pixels through the interpolation), by the median absolute
    deviation, so the few edges in a profile do not count."""
    k = max(1, int(round(1.0 / step)))
    d2 = prof[:, 2 * k :] - 2 * prof[:, k:-k] + prof[:, : -2 * k]
    return float(1.4826 * np.median(np.abs(d2)) / math.sqrt(6.0))


def _min_step_dn(noise_dn: float) -> float:
    """Smallest level difference (DN) taken for an edge in profiles with sample noise
    ``noise_dn``: four standard deviations (a chance step that large in one profile is rare, and
    the curve test across profiles removes the rest), and never less than 1.5 DN, more than one
    8-bit code value, which is all quantisation (and a video codec's flat dark blocks) leaves."""
    return max(1.5, 4.0 * noise_dn)


def _band_candidates(prof: np.ndarray, step: float, max_band_px: float, min_depth: float = 4.0) -> list[tuple[float, float]]:
    """Candidate nose positions along one outward profile: (position of the rise out of a narrow
    dark band, score). A band is a local minimum at least 20 % and ``min_depth`` DN below the
    levels on both sides within ``max_band_px``; the relative test holds under any light, the
    absolute one only sets the noise floor (:func:`_min_step_dn`)."""
    out = []
    m = len(prof)
    k = max(2, int(round(max_band_px / step)))
    d = np.gradient(prof)
    for i in range(k, m - k):
        v = prof[i]
        if v > prof[i - 1] or v > prof[i + 1]:
            continue
        left = prof[max(0, i - k) : i].max()
        right = prof[i + 1 : i + 1 + k].max()
        depth = min(left, right) - v
        if depth < 0.2 * min(left, right) or depth < min_depth:
            continue
        j = i + int(np.argmax(d[i : i + k]))
        out.append((j * step, depth / max(min(left, right), 1.0)))
    return out


def _nose_basis(s: np.ndarray, a: np.ndarray, b: np.ndarray, sig: np.ndarray) -> np.ndarray:
    """(N, M, 6) image of six unit sharp profiles under a Gaussian blur of ``sig`` px: cloth level
    and slope (s < a), band level and slope (a < s < b), cushion-top level and slope (s > b), each
    slope measured from the piece's own edge. ``s`` (M,) px along the outward normal; ``a``, ``b``,
    ``sig`` (N,).

    The blur of a linear piece ``c + g (x - x0)`` on [x1, x2] is, at s,
    ``c [Phi_1 - Phi_2] + g [(s - x0)(Phi_1 - Phi_2) + sig (phi_1 - phi_2)]`` with
    ``Phi_k = Phi((s - x_k) / sig)`` and ``phi_k = phi((s - x_k) / sig)`` the standard normal
    distribution and density (integrate the Gaussian kernel against 1 and against x; a semi-infinite
    piece has ``Phi = 1`` or ``0``, ``phi = 0`` at its open end)."""
    from scipy.special import ndtr

    sg = sig[:, None]
    za = (s[None, :] - a[:, None]) / sg
    zb = (s[None, :] - b[:, None]) / sg
    Pa, Pb = ndtr(za), ndtr(zb)
    pa, pb = np.exp(-0.5 * za * za) / _SQRT_2PI, np.exp(-0.5 * zb * zb) / _SQRT_2PI
    da = s[None, :] - a[:, None]
    db = s[None, :] - b[:, None]
    return np.stack([
        1 - Pa,                              # cloth level
        da * (1 - Pa) - sg * pa,             # cloth slope (x - a), x < a
        Pa - Pb,                             # band level
        db * (Pa - Pb) + sg * (pa - pb),     # band slope (x - b), a < x < b
        Pb,                                  # cushion-top level
        db * Pb + sg * pb,                   # cushion-top slope (x - b), x > b
    ], axis=-1)


def _nose_profile_fit(s: np.ndarray, prof: np.ndarray, a0: np.ndarray, b0: np.ndarray, sigma: float | np.ndarray | None,
                      iterations: int = 12, min_step: float = 3.0, band_depth: float = 1.0) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sub-pixel cloth->band and band->cushion-top edges of N outward profiles at once.

    The image across a cushion nose, seen from above the table, is cloth, then the narrow face
    under the nose (shadowed, a dark band whose outer edge is the nose at nose height), then the
    lit cushion top. Each piece is modelled as *linear* (light falls off toward the cushion on the
    cloth, the undercut face brightens toward its top, the cushion top is lit at a slope): a
    constant-level model of a sloping band moves the located step toward the darker side, which
    is inward here (0.1-0.3 px on rendered views). The blurred piecewise-linear profile
    (:func:`_nose_basis`) is linear in its six levels and slopes, so they are solved by linear
    least squares for given edges (variable projection, Golub & Pereyra 1973) and the edges ``a``,
    ``b`` (and the blur ``sigma`` unless given) by damped Gauss-Newton (Levenberg-Marquardt) on
    the projected residual, every profile at once. Samples further than 6 px outside the edges
    are ignored (far from the nose the pieces stop being linear).

    ``s`` (M,) px, ``prof`` (N, M), ``a0``, ``b0`` (N,) first guesses; ``sigma`` a blur to hold
    (scalar or (N,)) or None to fit it. Returns (b, a, sigma, rms) each (N,), NaN where the fit
    is not a rise of at least ``min_step`` DN from the band to the cushion top with the band at
    least ``band_depth`` DN darker than the cloth (a negative ``band_depth`` lets the band be as
    bright as the cloth within the noise: see :func:`_locate_noses`).
    """
    n = len(prof)
    fit_sig = sigma is None
    sig0 = np.full(n, 0.8) if fit_sig else np.broadcast_to(np.asarray(sigma, float), (n,)).copy()
    theta = np.column_stack([a0, b0, sig0]) if fit_sig else np.column_stack([a0, b0])
    lo, hi = s[0] + 1.0, s[-1] - 1.0
    win = (s[None, :] > a0[:, None] - 6.0) & (s[None, :] < b0[:, None] + 6.0)
    wt = win.astype(float)

    def project(th):
        a, b = th[:, 0], th[:, 1]
        sg = th[:, 2] if fit_sig else sig0
        A = _nose_basis(s, a, b, sg) * wt[..., None]
        # Ridge on the slopes only: a band narrower than the blur cannot tell its slope apart
        # from its level; the small penalty then keeps it flat instead of wild.
        ridge = np.array([0, 1, 0, 1, 0, 1.0]) * 1e-3 * np.maximum(wt.sum(axis=1), 1)[:, None]
        AtA = np.einsum("nmi,nmj->nij", A, A) + ridge[:, :, None] * np.eye(6)[None]
        Aty = np.einsum("nmi,nm->ni", A, prof * wt)
        coef = np.linalg.solve(AtA + 1e-9 * np.eye(6)[None], Aty[..., None])[..., 0]
        r = (np.einsum("nmi,ni->nm", A, coef) - prof * wt)
        return r, coef

    lam = np.full(n, 1e-2)
    r, coef = project(theta)
    cost = np.sum(r * r, axis=1)
    eps = 1e-4
    for _ in range(iterations):
        J = np.empty(r.shape + (theta.shape[1],))
        for k in range(theta.shape[1]):
            th = theta.copy()
            th[:, k] += eps
            J[..., k] = (project(th)[0] - r) / eps
        JtJ = np.einsum("nmi,nmj->nij", J, J)
        g = np.einsum("nmi,nm->ni", J, r)
        D = np.einsum("nii->ni", JtJ)
        step = -np.linalg.solve(JtJ + lam[:, None, None] * (D[:, :, None] * np.eye(theta.shape[1])[None] + 1e-9 * np.eye(theta.shape[1])[None]), g[..., None])[..., 0]
        step = np.clip(step, -1.0, 1.0)
        cand = theta + step
        cand[:, :2] = np.clip(cand[:, :2], lo, hi)
        if fit_sig:
            cand[:, 2] = np.clip(cand[:, 2], 0.25, 6.0)
        r_c, coef_c = project(cand)
        cost_c = np.sum(r_c * r_c, axis=1)
        better = cost_c < cost
        theta[better], r[better], coef[better], cost[better] = cand[better], r_c[better], coef_c[better], cost_c[better]
        lam = np.where(better, lam * 0.3, lam * 10.0)
    a, b = theta[:, 0], theta[:, 1]
    sg = theta[:, 2] if fit_sig else sig0
    rms = np.sqrt(cost / np.maximum(wt.sum(axis=1), 1))
    # Levels at the two edges: band darker than both the cloth and the cushion top beside it.
    cloth_at_a, band_at_a, band_at_b, top_at_b = coef[:, 0], coef[:, 2] + coef[:, 3] * (a - b), coef[:, 2], coef[:, 4]
    good = (a < b) & (top_at_b - band_at_b > min_step) & (cloth_at_a - band_at_a > band_depth) & np.isfinite(cost)
    nanify = lambda x: np.where(good, x, np.nan)  # noqa: E731
    return nanify(b), nanify(a), nanify(sg), nanify(rms)


def _edge_guesses(s: np.ndarray, prof: np.ndarray, s_rise: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """First guesses (a0, b0), each (N,) px, of the cloth->band and band->cushion-top edges of N
    outward profiles ``prof`` (N, M) sampled at ``s`` (M,): the darkest sample within 4 px of
    ``s_rise``, then the steepest fall within 6 px inward of it and the steepest rise outward
    (on the profile smoothed by a 0.5 px Gaussian)."""
    step = float(s[1] - s[0])
    k6 = max(2, int(round(6.0 / step)))
    near = np.nonzero(np.abs(s - s_rise) <= 4.0)[0]
    # Smoothed by 0.5 px first: on a single noisy sample the steepest step can be anywhere.
    from scipy.ndimage import gaussian_filter1d

    prof = gaussian_filter1d(np.asarray(prof, float), 0.5 / step, axis=1, mode="nearest")
    grad = np.gradient(prof, axis=1)
    a0, b0 = np.empty(len(prof)), np.empty(len(prof))
    for i, p in enumerate(prof):
        i_min = int(near[np.argmin(p[near])])
        i_rise = i_min + int(np.argmax(grad[i, i_min : i_min + k6])) if i_min < len(s) - 2 else i_min
        j0 = max(0, i_min - k6)
        i_fall = j0 + int(np.argmin(grad[i, j0 : i_min + 1]))
        a0[i], b0[i] = s[i_fall], s[max(i_rise, i_fall + 1)]
    return a0, b0


def _locate_noses(s: np.ndarray, prof: np.ndarray, min_step: float | None = None, along: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, float | None]:
    """Nose positions (N,) px along N outward profiles ``prof`` (N, M) sampled at ``s`` (M,)
    around one side's nose curve, their fit RMS (N,) and the side's blur (px, None if no profile
    fitted). Pass 1 fits each profile's blur; pass 2 holds the side's median blur (one lens, one
    focus: a shared blur steadies narrow bands, whose width and blur otherwise trade). NaN marks
    profiles without a nose (the fit's own test, with ``min_step`` DN, by default from the
    profiles' own noise: :func:`_min_step_dn`).

    The nose is the outer edge of a band darker than the cloth (1 DN at least); but where the
    light is dim (a far end of the table under one low lamp) the band's shade falls to the
    cloth's level within a code value while the rise to the lit cushion top stays. A side on
    which the band test rejects more than half of the profiles that show that rise is read by
    the rise alone (the band no brighter than the cloth beyond ``min_step``).

    ``along`` (N,): the profiles cross one nose at these positions along it (any unit); its band
    keeps its width in the table, so where the band's centroids (:func:`_band_centroids`), offset
    by the side's median offset of the fitted edges from them, lie clearly closer to a smooth
    curve in ``along`` than the edges, the noses follow the centroids (see :func:`_fit_noses`).
    The band's *image* width is not constant along a side, though: perspective changes it
    linearly and a barrel lens shrinks it toward the picture's corners, so the one offset puts
    half the change into the nose (measured on cheapwide_25fps's empty table rendered lossless,
    k1 -0.42: bottom band 4.6 px wide at the ends, 5.3 px mid-rail, a -0.22 px bow; without the
    lens 5.5 -> 6.3 px, a tilt). Following the true per-profile offset instead moved that
    room's distortion residual by at most 0.01 px and its corners by at most 0.1 mm, on its
    clip and five re-filmed draws (session 18), so the offset stays one number per side."""
    if min_step is None:
        min_step = _min_step_dn(_profile_noise(prof, float(s[1] - s[0])))
    strict = _fit_noses(s, prof, min_step, 1.0, along)
    rise = _fit_noses(s, prof, min_step, -min_step, along)
    kept = [int(np.sum(np.isfinite(r[0]))) for r in (strict, rise)]
    return strict if 2 * kept[0] >= kept[1] else rise


def _fit_noses(s: np.ndarray, prof: np.ndarray, min_step: float, band_depth: float, along: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, float | None]:
    """:func:`_locate_noses` for one band test (``min_step``, ``band_depth``: see
    :func:`_nose_profile_fit`) and ``along``."""
    a0, b0 = _edge_guesses(s, prof)
    b1, a1, sig1, _ = _nose_profile_fit(s, prof, a0, b0, None, min_step=min_step, band_depth=band_depth)
    ok1 = np.isfinite(b1) & (np.abs(np.nan_to_num(b1, nan=99.0)) <= 2.5)
    if not np.any(ok1):
        return np.full(len(prof), np.nan), np.full(len(prof), np.nan), None
    sig_side = float(np.median(sig1[ok1]))
    # Profiles pass 1 could not fit start again from their first guesses: with the blur held,
    # a narrow band is better conditioned.
    b2, a2, _, rms = _nose_profile_fit(s, prof, np.where(ok1, a1, a0), np.where(ok1, b1, b0), sig_side,
                                       min_step=min_step, band_depth=band_depth)
    # A video codec bends a dim band's edges in stretches along a side but keeps its centroid;
    # there the nose follows the centroid and the edges fix only its offset (their median over
    # the side, where the stretches partly cancel). A straight nose images as a smooth curve, so
    # the centroids are taken where they lie clearly closer to one than the edges.
    if along is not None and np.sum(np.isfinite(b2)) >= 6:
        along = np.asarray(along, float)
        c = _band_centroids(s, prof, 0.5 * (a2 + b2), 0.5 * np.nanmedian(b2 - a2) + 2.0 * sig_side)
        by_centroid = c + np.nanmedian(b2 - c)
        sc_c, sc_e = _curve_scatter(along, by_centroid), _curve_scatter(along, b2)
        log.debug("nose scatter about a smooth curve: centroid %.3f px, edges %.3f px", sc_c, sc_e)
        # Two-thirds: each robust sd from about 60 noses is itself uncertain by about 15 % (the
        # median absolute deviation's efficiency is 37 %, from memory), so a smaller ratio is
        # within the chance of the draw; the codec-bent sides of the extra set show 1.6-6.6.
        if sc_c < sc_e / 1.5:
            b2 = by_centroid
    b2 = np.where(np.abs(np.nan_to_num(b2, nan=99.0)) <= 2.5, b2, np.nan)
    return b2, rms, sig_side


def _curve_scatter(x: np.ndarray, y: np.ndarray) -> float:
    """Robust sd (1.4826 median absolute deviations, px) of ``y`` (N,) about a quadratic in ``x``
    (N,) fitted by least squares to its finite values (a straight nose bent by the lens, as the
    candidates' curve test in :func:`_nose_points`); inf with fewer than six."""
    keep = np.isfinite(y)
    if keep.sum() < 6:
        return float("inf")
    r = y[keep] - np.polyval(np.polyfit(x[keep], y[keep], 2), x[keep])
    return float(1.4826 * np.median(np.abs(r - np.median(r))))


def _band_centroids(s: np.ndarray, prof: np.ndarray, centre: np.ndarray, half: float, iterations: int = 3) -> np.ndarray:
    """Centroids (N,) px of the dark band in N outward profiles ``prof`` (N, M) sampled at ``s``
    (M,): the first moment of the band's depth below a straight baseline between the profile's
    levels just outside a window ``centre`` +- ``half`` px (1.5 px on each side), the window then
    re-centred on the centroid; NaN where ``centre`` is NaN or the window holds no band.

    The centroid of a line's profile (centre of gravity: Fisher & Naidu, "A comparison of
    algorithms for subpixel peak detection", 1996, from memory) is unmoved by any symmetric
    blur and rests on the profile's low frequencies, which a block-transform codec keeps best:
    on the dim H.264 clips (extra set, crf 26-28, band 14 DN deep on a 24 DN cloth) the fitted
    band edges bend 0.5-1 px in stretches along a side even on the median of all 721 frames, the
    centroid far less (nose RMS about the lines 0.69 -> 0.18 px on dim_540p_60fps). ``half`` is
    the band's half-width plus two blur sds (95 % of a blurred edge's spread; 1.5-3.5 px pads
    gave that clip's worst corner 2.3-3.9 mm against 8.3 mm from the edges)."""
    c = np.asarray(centre, float).copy()
    for _ in range(iterations):
        lo, hi = (c - half)[:, None], (c + half)[:, None]
        inw = (s[None, :] >= lo) & (s[None, :] <= hi)
        left = (s[None, :] < lo) & (s[None, :] >= lo - 1.5)
        right = (s[None, :] > hi) & (s[None, :] <= hi + 1.5)
        with np.errstate(invalid="ignore", divide="ignore"):
            lv = np.sum(prof * left, axis=1) / np.sum(left, axis=1)
            rv = np.sum(prof * right, axis=1) / np.sum(right, axis=1)
            base = lv[:, None] + (rv - lv)[:, None] * (s[None, :] - lo) / (hi - lo)
            depth = np.clip(base - prof, 0.0, None) * inw
            mass = depth.sum(axis=1)
            c = np.where((mass > 0) & (inw.sum(axis=1) >= 4), (depth * s[None, :]).sum(axis=1) / mass, np.nan)
    return c


def _nose_points(grey: np.ndarray, quad: np.ndarray, table: TableSpec, config: CalibConfig,
                 run_map: "Callable | None" = None) -> list[np.ndarray]:
    """Sub-pixel nose points per side of ``quad`` (visually anticlockwise), list of four (N, 2)
    arrays (u, v), side k running from quad[k] to quad[k+1]. Each side is searched on its own
    (:func:`_side_nose_points`), through ``run_map`` where given (see :func:`calibrate`)."""
    return (run_map or _run_here)(_side_nose_points, [(grey, quad, k, table, config) for k in range(4)])


def _run_here(fn: Callable, jobs: list[tuple]) -> list:
    """``[fn(*job) for job in jobs]``: the ``run_map`` of :func:`calibrate` in this process."""
    return [fn(*job) for job in jobs]


def _side_nose_points(grey: np.ndarray, quad: np.ndarray, k: int, table: TableSpec, config: CalibConfig) -> np.ndarray:
    """(N, 2) sub-pixel nose points (u, v) of side ``k`` of ``quad`` (:func:`_nose_points`),
    running from quad[k] to quad[k+1]; (0, 2) when the side shows no nose. Depends on nothing
    but its arguments (its RANSAC draws are seeded by ``k``), so any process gives the same."""
    centre = quad.mean(axis=0)
    lens = np.linalg.norm(np.roll(quad, -1, axis=0) - quad, axis=1)
    long_pair = 0 if lens[0] + lens[2] >= lens[1] + lens[3] else 1
    px_per_mm = (lens[long_pair] + lens[long_pair + 2]) / (2 * table.length_mm)
    a, b = quad[k], quad[(k + 1) % 4]
    long_side = (k % 2) == long_pair
    length_mm = table.length_mm if long_side else table.width_mm
    tang = (b - a) / np.linalg.norm(b - a)
    nrm = np.array([tang[1], -tang[0]])
    if nrm @ (a - centre) < 0:
        nrm = -nrm  # outward
    fr = _side_stations(a, b, long_side, config.profiles_per_side, table, length_mm)
    base = a[None] + fr[:, None] * (b - a)[None]
    # Coarse pass: from well inside (cushion width and more) to beyond the rough outline.
    step = 0.5
    s = np.arange(-140.0 * px_per_mm - 12, 90.0 * px_per_mm + 12, step)
    pts = base[:, None, :] + s[None, :, None] * nrm[None, None, :]
    prof = sum(_sample(grey, pts + o * tang[None, None, :]) for o in (-1.0, 0.0, 1.0)) / 3
    cands = []
    min_depth = _min_step_dn(_profile_noise(prof, step))
    for i in range(len(base)):
        for pos, score in _band_candidates(prof[i], step, max(4.0, 40.0 * px_per_mm), min_depth):
            cands.append((i, fr[i], s[0] + pos, score))
    if len(cands) < 8:
        log.debug("side %d: only %d band candidates", k, len(cands))
        return np.zeros((0, 2))
    cands = np.array(cands)
    # RANSAC: a quadratic curve s(f) through the candidates (a straight nose bent by the lens).
    rng = np.random.default_rng(k)
    best, best_score = None, -1.0
    for _ in range(400):
        pick = rng.choice(len(cands), 3, replace=False)
        f3, s3 = cands[pick, 1], cands[pick, 2]
        if np.ptp(f3) < 0.2 or np.min(np.abs(np.diff(np.sort(f3)))) < 0.03:
            continue
        coef = np.linalg.solve(np.vander(f3, 3), s3)
        res = np.abs(np.polyval(coef, cands[:, 1]) - cands[:, 2])
        inl = res < 1.5
        # One point per profile counts; strong bands count more.
        sc = 0.0
        for i in np.unique(cands[inl, 0]):
            sc += 1.0 + cands[inl & (cands[:, 0] == i), 3].max()
        if sc > best_score:
            best, best_score = coef, sc
    if best is None:
        return np.zeros((0, 2))
    res = np.abs(np.polyval(best, cands[:, 1]) - cands[:, 2])
    inl = cands[res < 1.5]
    if len(np.unique(inl[:, 0])) >= 6:
        best = np.linalg.lstsq(np.vander(inl[:, 1], 3), inl[:, 2], rcond=None)[0]
    # Fine pass: profiles along the curve's normal around it, two-edge model fit.
    fr_f = fr
    s_curve = np.polyval(best, fr_f)
    dsdf = np.polyval(np.polyder(best), fr_f)
    pts_c = a[None] + fr_f[:, None] * (b - a)[None] + s_curve[:, None] * nrm[None]
    t_vec = (b - a)[None] + dsdf[:, None] * nrm[None]
    t_vec /= np.linalg.norm(t_vec, axis=1, keepdims=True)
    n_vec = np.column_stack([t_vec[:, 1], -t_vec[:, 0]])
    n_vec *= np.sign(np.sum(n_vec * nrm[None], axis=1))[:, None]
    step_f = 0.25
    sf = np.arange(-max(10.0, 30 * px_per_mm), 8.0 + 1e-9, step_f)
    fp = pts_c[:, None, :] + sf[None, :, None] * n_vec[:, None, :]
    offs = np.linspace(-3.0, 3.0, 13)
    prof_f = sum(_sample(grey, fp + o * t_vec[:, None, :]) for o in offs) / len(offs)
    bpos, rms, sig_side = _locate_noses(sf, prof_f, along=fr_f)
    keep = np.isfinite(bpos) & (np.abs(np.nan_to_num(bpos, nan=99.0)) <= 2.5)
    if sig_side is None or sig_side > 3.5:
        keep[:] = False
    found = [(pts_c[i] + bpos[i] * n_vec[i], float(rms[i])) for i in np.nonzero(keep)[0]]
    log.debug("side %d: %d candidates, %d fine fits kept, blur %s px", k, len(cands), len(found), sig_side)
    pts_k = np.array([p for p, _ in found]) if found else np.zeros((0, 2))
    if len(found) >= 6:
        rms_all = np.array([r for _, r in found])
        keep = rms_all < np.median(rms_all) + 4 * 1.4826 * np.median(np.abs(rms_all - np.median(rms_all))) + 1e-6
        pts_k = pts_k[keep]
    return pts_k


# ================================================================================================
# 4-6. Geometry: plumb lines, homography, focal length, pose, refinement
# ================================================================================================
def _centre(size: tuple[int, int]) -> np.ndarray:
    return np.array([(size[0] - 1) / 2.0, (size[1] - 1) / 2.0])


def _undistort_px(uv: np.ndarray, kappa: tuple[float, float], size: tuple[int, int]) -> np.ndarray:
    """Undistort pixels with OpenCV's radial model written in pixel units about the image centre:
    ``u_d - c = (u - c)(1 + kappa1 r^2 + kappa2 r^4)``, r in px (so ``kappa1 = k1 / f^2``,
    ``kappa2 = k2 / f^4``); Newton's method on the radius."""
    c = _centre(size)
    d = uv - c
    rd = np.linalg.norm(d, axis=1)
    r = rd.copy()
    k1, k2 = kappa
    for _ in range(30):
        g = r * (1 + k1 * r**2 + k2 * r**4) - rd
        dg = 1 + 3 * k1 * r**2 + 5 * k2 * r**4
        r = r - g / dg
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(rd > 1e-9, r / rd, 1.0)
    return c + d * ratio[:, None]


def _line_residuals(points: list[np.ndarray]) -> np.ndarray:
    """Distances (px) of each set of points from its own total-least-squares line."""
    res = []
    for p in points:
        if len(p) < 3:
            continue
        m = p.mean(axis=0)
        _, _, vt = np.linalg.svd(p - m, full_matrices=False)
        res.append((p - m) @ vt[1])
    return np.concatenate(res) if res else np.zeros(0)


def plumb_line_distortion(points: list[np.ndarray], image_size: tuple[int, int], fit_k2: bool = True) -> tuple[float, float]:
    """Radial distortion in pixel units (kappa1, kappa2) that makes each set of (N, 2) image
    points, which lie on one straight line in space, straight again (plumb-line method, Devernay &
    Faugeras 2001), principal point at the image centre. ``k1 = kappa1 f^2``, ``k2 = kappa2 f^4``.
    Raises ValueError when fewer than two lines have points."""
    usable = [p for p in points if len(p) >= 5]
    if len(usable) < 2:
        raise ValueError(f"only {len(usable)} cushion noses were found; the lens cannot be measured (is the whole table in view?)")
    c = _centre(image_size)
    rmax = float(np.max(np.linalg.norm(np.concatenate(usable) - c, axis=1)))

    def fun(p):
        kap = (p[0] / rmax**2, (p[1] / rmax**4) if fit_k2 else 0.0)
        return _line_residuals([_undistort_px(q, kap, image_size) for q in usable])

    r = optimize.least_squares(fun, np.zeros(2), method="lm" if fit_k2 else "trf", x_scale=0.1) if fit_k2 else optimize.least_squares(lambda p: fun([p[0], 0.0]), np.zeros(1))
    x = r.x if fit_k2 else np.array([r.x[0], 0.0])
    return float(x[0] / rmax**2), float(x[1] / rmax**4) if fit_k2 else 0.0


def _intersect(l1: np.ndarray, l2: np.ndarray) -> np.ndarray:
    p = np.cross(l1, l2)
    if abs(p[2]) < 1e-12:
        raise ValueError("two cushion lines are parallel in the image; the table's outline is degenerate")
    return p[:2] / p[2]


def _tls_line(p: np.ndarray) -> np.ndarray:
    m = p.mean(axis=0)
    _, _, vt = np.linalg.svd(p - m, full_matrices=False)
    n = vt[1]
    return np.array([n[0], n[1], -n @ m])


def focal_from_homography(H: np.ndarray, principal_px: np.ndarray) -> float | None:
    """Focal length (px) from a plane-to-image homography with square pixels and a known
    principal point (Zhang 2000, the two constraints on the image of the absolute conic, solved in
    least squares for ``1/f^2``); None when the plane is too nearly square-on to tell."""
    T = np.array([[1, 0, -principal_px[0]], [0, 1, -principal_px[1]], [0, 0, 1.0]])
    Hc = T @ H
    h1, h2 = Hc[:, 0], Hc[:, 1]
    # (h1x h2x + h1y h2y) / f^2 + h1z h2z = 0 ; (|h1xy|^2 - |h2xy|^2) / f^2 + h1z^2 - h2z^2 = 0
    a = np.array([h1[0] * h2[0] + h1[1] * h2[1], h1[0] ** 2 + h1[1] ** 2 - h2[0] ** 2 - h2[1] ** 2])
    b = np.array([h1[2] * h2[2], h1[2] ** 2 - h2[2] ** 2])
    scale = np.linalg.norm(Hc[:2, :2])
    if np.linalg.norm(b) * scale**2 / max(np.linalg.norm(a), 1e-30) < 1e-9:
        return None
    inv_f2 = -(a @ b) / (a @ a)
    if not inv_f2 > 0:
        return None
    return float(1.0 / math.sqrt(inv_f2))


def dlt_homography(src: np.ndarray, dst: np.ndarray) -> np.ndarray:
    """3x3 H with ``dst ~ H src`` from (N >= 4, 2) point pairs: normalised direct linear
    transform (Hartley & Zisserman, Multiple View Geometry, 2nd ed., alg. 4.2)."""
    def norm(p):
        m = p.mean(axis=0)
        s = math.sqrt(2) / np.mean(np.linalg.norm(p - m, axis=1))
        return np.array([[s, 0, -s * m[0]], [0, s, -s * m[1]], [0, 0, 1]])

    Ts, Td = norm(src), norm(dst)
    sh = np.column_stack([src, np.ones(len(src))]) @ Ts.T
    dh = np.column_stack([dst, np.ones(len(dst))]) @ Td.T
    rows = []
    for (x, y, w), (u, v, t) in zip(sh, dh):
        rows.append([0, 0, 0, -t * x, -t * y, -t * w, v * x, v * y, v * w])
        rows.append([t * x, t * y, t * w, 0, 0, 0, -u * x, -u * y, -u * w])
    _, _, vt = np.linalg.svd(np.array(rows))
    Hn = vt[-1].reshape(3, 3)
    H = np.linalg.inv(Td) @ Hn @ Ts
    return H / H[2, 2]


def _table_order(quad_und: np.ndarray, table: TableSpec, origin_near_px: tuple[float, float] | None, quad_raw: np.ndarray) -> tuple[np.ndarray, str]:
    """Index order of the (visually anticlockwise) quad's corners that puts them in table order
    (0,0), (L,0), (L,W), (0,W), by the module's origin rule; and the rule's words."""
    lens = np.linalg.norm(np.roll(quad_und, -1, axis=0) - quad_und, axis=1)
    long_pair = 0 if lens[0] + lens[2] >= lens[1] + lens[3] else 1
    # Start candidates: corner i such that side i (i -> i+1) is long, i.e. x along it.
    starts = [long_pair, long_pair + 2]
    if origin_near_px is not None:
        p = np.asarray(origin_near_px, float)
        i0 = min(starts, key=lambda i: np.linalg.norm(quad_raw[i] - p))
        order = np.array([(i0 + j) % 4 for j in range(4)])
        return order, "pinned by the calibration file: the corner nearest the recorded origin pixel"
    d = quad_und[(long_pair + 1) % 4] - quad_und[long_pair]
    across = abs(d[0]) >= abs(d[1])
    if across:
        i0 = next(i for i in starts if (quad_und[(i + 1) % 4] - quad_und[i])[0] > 0)
        words = "bottom-left: x to the image's right, y up the image, as the camera sees it"
    else:
        i0 = next(i for i in starts if (quad_und[(i + 1) % 4] - quad_und[i])[1] < 0)
        words = "bottom-right: x up the image, y to the image's left, as the camera sees it"
    return np.array([(i0 + j) % 4 for j in range(4)]), words


def _camera(params: np.ndarray, size: tuple[int, int], fixed_intr: tuple | None = None) -> Camera:
    """Camera from the parameter vector [log f, k1, k2, rvec(3), tvec(3)] (or pose only)."""
    c = _centre(size)
    if fixed_intr is None:
        f, k1, k2 = math.exp(params[0]), params[1], params[2]
        pose = params[3:]
    else:
        f, k1, k2 = fixed_intr
        pose = params
    K = np.array([[f, 0, c[0]], [0, f, c[1]], [0, 0, 1.0]])
    return Camera(K, np.array([k1, k2, 0, 0, 0]), pose[:3], pose[3:6], size)


_RAIL_AXIS = {"bottom": (1, 0.0), "top": (1, None), "left": (0, 0.0), "right": (0, None)}


def _nose_offsets_mm(cam: Camera, pts: np.ndarray, rail: str, table: TableSpec, xy: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Distance (mm, positive outward) of each nose point's back-projection at nose height from
    its nose line, and the local image scale (px per mm) there. ``xy``: the points' ideal
    normalised coordinates (:meth:`Camera.undistort_normalised`) where already known."""
    X = cam.backproject(pts, table.nose_height_mm) if xy is None else cam.backproject_normalised(xy, table.nose_height_mm)
    L, W = table.length_mm, table.width_mm
    off = {"bottom": -X[:, 1], "top": X[:, 1] - W, "left": -X[:, 0], "right": X[:, 0] - L}[rail]
    depth = (X @ cam.R.T + cam.tvec)[:, 2]
    return off, cam.K[0, 0] / depth


def _rails_offsets_mm(cam: Camera, noses, table: TableSpec, memo: dict | None = None) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """(rail, offsets mm, scale px per mm) of :func:`_nose_offsets_mm` for each rail of
    ``noses`` ((rail, (N, 2) px) pairs) that has points, in order: the same numbers, with
    the rails' points undistorted together (:meth:`Camera.undistort_normalised_parts`).

    ``memo``: a dict kept by the caller over the calls of one fit, holding the last
    undistortion with the lens (K, distortion) and the points (their bytes) it was of. The
    undistortion depends on nothing else, so a call with the same lens and points takes it
    from there, bit for bit the same: the finite-difference Jacobians step the pose, the
    sights' offsets and the table, which leave the lens as it was (bank_practice: 2652 calls,
    1341 undistortions with the memo, all callers counted; the Newton iterations of the
    undistortion were the fit's largest cost)."""
    used = [(rail, pts) for rail, pts in noses if len(pts)]
    key = None
    if memo is not None:
        key = (cam.K.tobytes(), np.asarray(cam.dist, float).tobytes(), tuple(np.asarray(pts, float).tobytes() for _, pts in used))
    if key is not None and memo.get("key") == key:
        xys = memo["xys"]
    else:
        xys = cam.undistort_normalised_parts([pts for _, pts in used])
        if memo is not None:
            memo.update(key=key, xys=xys)
    return [(rail, *_nose_offsets_mm(cam, pts, rail, table, xy)) for (rail, pts), xy in zip(used, xys)]


@dataclass(frozen=True)
class HeightPrior:
    """What the fit knows of the camera's height (lens above the cloth, mm) beyond the picture:
    one more residual ``(H - mean_mm) / scale_mm`` whose standard deviation is
    ``sd_mm / scale_mm`` (the fit's residuals are px of nose position, so ``scale_mm`` sets how
    many mm of height count as one px; a Gaussian prior in a least-squares fit, Hartley &
    Zisserman, Multiple View Geometry, 2nd ed., sec. A6.4). ``source`` says where it came from:
    ``given`` (``camera_height_mm``) or ``typical`` (``typical_height_mm``, a square-on view
    that does not determine the height)."""

    mean_mm: float
    sd_mm: float
    scale_mm: float
    source: str

    @classmethod
    def given(cls, height_mm: float, config: "CalibConfig") -> "HeightPrior":
        # A measured height pins the fit hard (5 mm per px); its stated sd stays the tape's.
        return cls(float(height_mm), config.camera_height_sd_mm, 5.0, "given")

    @classmethod
    def typical(cls, mean_mm: float, sd_mm: float) -> "HeightPrior":
        # The view's height combined with a typical mount's: pinned like a given height.
        return cls(float(mean_mm), float(sd_mm), 5.0, "typical")

    def residual(self, cam: Camera) -> float:
        return (float(cam.centre_mm[2]) - self.mean_mm) / self.scale_mm

    @property
    def noise(self) -> float:
        return self.sd_mm / self.scale_mm


def _as_prior(height_prior, config: "CalibConfig") -> HeightPrior | None:
    """A :class:`HeightPrior` from a prior, a given height (mm) or None."""
    if height_prior is None or isinstance(height_prior, HeightPrior):
        return height_prior
    return HeightPrior.given(float(height_prior), config)


@dataclass(frozen=True)
class _SightOffsets:
    """The sights' setback and rail-top height as two more unknowns of the refinement, the last
    two entries of its parameter vector (mm, added to ``table.sight_setback_mm`` and
    ``table.rail_top_height_mm``). Real tables do not fix either exactly (WPA: setback +-3.2 mm,
    references.md; the rail top from memory a few mm), and a sight a few mm off its model pulls
    the camera as much as a biased nose does. Each has a Gaussian prior (Hartley & Zisserman,
    Multiple View Geometry, 2nd ed., sec. A6.4): one residual ``d / sd * unit_px`` with ``sd``
    the table's tolerance (:class:`CalibConfig`) and ``unit_px`` the noise of one unit-weight
    residual (the nose points' robust scatter), so a prior residual counts as one nose point's
    worth of evidence per sd. ``idx``: which of ``table.sights()`` each found sight is."""

    idx: np.ndarray
    sd_mm: tuple[float, float]
    unit_px: float

    def points(self, table: TableSpec, params: np.ndarray, d_table: np.ndarray | None = None) -> np.ndarray:
        """(M, 3) table points (mm) of the found sights for ``params``' offsets (and the table
        varied by ``d_table``, :func:`_table_varied`)."""
        d = np.zeros(5) if d_table is None else np.asarray(d_table[:5], float).copy()
        d[4] += params[-2]
        d[3] += params[-1]
        return _sight_points(_table_varied(table, d), self.idx)

    def prior(self, params: np.ndarray) -> np.ndarray:
        return np.array([params[-2] / self.sd_mm[0], params[-1] / self.sd_mm[1]]) * self.unit_px


def _sight_points(table: TableSpec, idx: np.ndarray) -> np.ndarray:
    """(M, 3) table points (mm) of ``table.sights()``' entries ``idx``, at rail-top height."""
    return np.array([[x, y, table.rail_top_height_mm] for _, _, (x, y) in table.sights()])[idx]


def _sight_index(table: TableSpec, sights_mm: np.ndarray) -> np.ndarray:
    """Which of ``table.sights()`` each (x, y[, z]) table point of ``sights_mm`` is (nearest)."""
    all_xy = np.array([xy for _, _, xy in table.sights()])
    return np.array([int(np.argmin(np.hypot(*(all_xy - s[:2]).T))) for s in sights_mm], int)


def _residuals(params, cam_of, noses, sights_px, sights_mm, table, sight_weight, height_prior: HeightPrior | None,
               nose_w: dict[str, float] | None = None, offsets: _SightOffsets | None = None, memo: dict | None = None):
    cam = cam_of(params)
    w = nose_w or {}
    out = [off * scale * w.get(rail, 1.0) for rail, off, scale in _rails_offsets_mm(cam, noses, table, memo)]
    if len(sights_px):
        pr = cam.project(sights_mm if offsets is None else offsets.points(table, params))
        out.append(((pr - sights_px) * sight_weight).ravel())
    if height_prior is not None:
        out.append(np.array([height_prior.residual(cam)]))
    if offsets is not None:
        out.append(offsets.prior(params))
    r = np.concatenate(out)
    return np.where(np.isfinite(r), r, 1e3)


def _side_weights(cam: Camera, noses, table: TableSpec) -> dict[str, float]:
    """Weight of each rail's nose residuals (rail -> 0..1): the median over the rails of their
    robust scatter about ``cam``'s nose lines (px, MAD) over the rail's own, at most 1. A nose
    seen at a code value or two of contrast (a dark end of the table) scatters several times more
    than the lit ones and would otherwise count as much per point; weighting by the inverse
    standard deviation is the weighted least-squares estimate (Hartley & Zisserman, Multiple
    View Geometry, 2nd ed., sec. A5.2) with the lit sides' scatter as the unit."""
    sd = {}
    for rail, pts in noses:
        if len(pts) >= 5:
            off, scale = _nose_offsets_mm(cam, pts, rail, table)
            r = off * scale
            sd[rail] = max(0.05, 1.4826 * float(np.median(np.abs(r - np.median(r)))))
    if not sd:
        return {}
    ref = float(np.median(list(sd.values())))
    return {rail: min(1.0, ref / v) for rail, v in sd.items()}


def _table_varied(table: TableSpec, d_mm: np.ndarray) -> TableSpec:
    """``table`` with its length, width, nose height, rail-top height and sight setback changed by
    the (5,) ``d_mm`` (mm), in that order."""
    return replace(
        table, length_mm=table.length_mm + d_mm[0], width_mm=table.width_mm + d_mm[1],
        nose_height_mm=table.nose_height_mm + d_mm[2], rail_top_height_mm=table.rail_top_height_mm + d_mm[3],
        sight_setback_mm=table.sight_setback_mm + d_mm[4],
    )


def _nose_blocks(noses, residuals: np.ndarray, sd: float) -> list[tuple[int, int, float]]:
    """Serial correlation of the nose residuals along each rail: (first index into the
    residuals, number of points, lag-one autocorrelation ``phi``) per rail with at least 8 points.

    The located noses do not err independently point by point: a video codec quantises the
    narrow dark band under the nose in transform blocks, so neighbouring profiles share their
    error (on the extra set's H.264 clips at crf 27-28 the errors against the renderer's truth
    run in stretches of 5-15 profiles of up to 1-2 px; on uncompressed renders they are nearly
    white). Counting them as independent understates the scatter's effect on the camera. Each
    rail's residuals, in their order along the rail (station order, :func:`_nose_points`),
    winsorised at 3 ``sd`` so an outlier the robust loss discounted does not count twice, are
    modelled as a first-order autoregression, correlation ``phi^l`` at lag l (Box & Jenkins, Time
    Series Analysis, 1970, ch. 3; on the extra set's dim and phone clips the rails' lag-one
    correlations are 0.4-0.8 and the next two lags follow ``phi^l`` within 0.15), with ``phi``
    their lag-one sample autocorrelation (biased estimator, so below 1), taken as 0 when
    negative. Lags count points kept, so a dropped profile shortens the gap it spans."""
    out, start = [], 0
    for _, pts in noses:
        m = len(pts)
        if m >= 8:
            e = np.clip(residuals[start : start + m], -3 * sd, 3 * sd)
            e = e - e.mean()
            g0 = float(e @ e)
            phi = max(0.0, float(e[1:] @ e[:-1]) / g0) if g0 > 0 else 0.0
            out.append((start, m, phi))
        start += m
    return out


def _scatter_cov(M: np.ndarray, noise: np.ndarray, blocks: list[tuple[int, int, float]]) -> np.ndarray:
    """``M cov(r) M^T`` for residuals ``r`` with standard deviations ``noise`` (N,), independent
    except along each rail's run of nose points in ``blocks`` (:func:`_nose_blocks`), where
    ``cov(r_i, r_j) = phi^|i - j| s_i s_j``: the sandwich form of a linear estimate's covariance
    under serial correlation (Hartley & Zisserman, Multiple View Geometry, 2nd ed., sec. 5.2.3,
    with a full measurement covariance). ``M`` (K, N)."""
    Ms = M * noise
    out = Ms @ Ms.T
    for start, m, phi in blocks:
        if phi <= 0:
            continue
        lag = np.abs(np.subtract.outer(np.arange(m), np.arange(m)))
        B = Ms[:, start : start + m]
        out += B @ (phi**lag - np.eye(m)) @ B.T
    return out


def _uncertainty(x: np.ndarray, cam_of, noses, sights_px: np.ndarray, sights_mm: np.ndarray, table: TableSpec,
                 sight_w: float, height_prior: "HeightPrior | float | None", config: CalibConfig,
                 nose_w: dict[str, float] | None = None, offsets: "_SightOffsets | None" = None) -> dict[str, Any]:
    """How well the fitted camera is determined: standard deviations of the camera's height above
    the cloth (mm), of its focal length (%) and of ball positions (mm, the largest over the table).

    Linearised error propagation for a least-squares estimate (Hartley & Zisserman, Multiple View
    Geometry, 2nd ed., sec. 5.2.3, "forward propagation of covariance"): with ``J`` the Jacobian
    of the fit's weighted residuals in its parameters ``theta`` (:func:`_residuals`, central
    differences), ``G = (J^T J)^-1 J^T`` maps a change of the residuals to a change of the
    estimate, so
    ``cov(theta) = G S G^T + (G J_nu) diag(sd_nu^2) (G J_nu)^T``: the first term from the scatter
    of the nose points and sights (``S`` their covariance: each one's robust spread ``sigma``,
    floored at 0.05 px for noses and 0.1 px for sights, independent but for the serial correlation
    of the nose points along each rail, :func:`_nose_blocks` and :func:`_scatter_cov`), the second from what the model assumes about the
    table, ``nu``: its length and width, nose height, the sights' height and setback, and a bias
    of the nose locator (one shared by all four sides, the same locator on the same cushions,
    plus one per side, each ``nose_bias_sd_px / sqrt 2``), with the standard deviations of
    :class:`CalibConfig`. A shared bias matters most: it changes the size of the nose rectangle
    against the sights, which is where a square-on view's sense of distance comes from. A given
    ``camera_height_mm`` enters as one more residual with ``camera_height_sd_mm``; so does a
    typical mount height (:class:`HeightPrior`, a float meaning a given height).

    Seen square-on, a plane does not separate the focal length from the camera's distance
    (Zhang, IEEE TPAMI 22(11), 2000): only the sights' few mm above the noses and the view's tilt
    do, so there the height's standard deviation comes out large and says so; ball positions
    depend on the height only through the radius-to-nose-height gap, so their bound stays small.
    Returns JSON-ready numbers: ``camera_height_sd_mm``, ``focal_sd_pct``, ``ball_position_sd_mm``
    (root of the trace of each ball's 2x2 covariance, worst over a 9 x 5 grid of ball centres),
    ``height_determined`` (sd at most ``max_height_sd_rel`` of the height).

    With ``offsets`` (:class:`_SightOffsets`) the sights' setback and height are parameters of
    the fit, the last two of ``x``: their tolerances then enter through their prior residuals
    (each with noise ``unit_px``) and the fitted offsets' own covariance, not as table nuisances.
    """
    height_prior = _as_prior(height_prior, config)
    sight_idx = _sight_index(table, sights_mm) if len(sights_mm) else np.zeros(0, int)
    n_off = 0 if offsets is None else 2
    memo: dict = {}  # the undistortion of the noses for the last lens (_rails_offsets_mm)

    def residuals(theta, nu):
        t = _table_varied(table, nu[:5])
        if offsets is not None:
            smm = offsets.points(table, theta, nu)
        else:
            smm = _sight_points(t, sight_idx) if len(sight_idx) else sights_mm
        cam = cam_of(theta)
        out = [(off * scale + nu[5] + nu[6 + RAIL_SIDES.index(rail)]) * (nose_w or {}).get(rail, 1.0)
               for rail, off, scale in _rails_offsets_mm(cam, noses, t, memo)]
        if len(sights_px):
            out.append(((cam.project(smm) - sights_px) * sight_w).ravel())
        if height_prior is not None:
            out.append(np.array([height_prior.residual(cam)]))  # as in _residuals
        if offsets is not None:
            out.append(offsets.prior(theta))
        return np.concatenate(out)

    def jac(fun, v, steps):
        cols = []
        for k, h in enumerate(steps):
            e = np.zeros(len(v))
            e[k] = h
            cols.append((fun(v + e) - fun(v - e)) / (2 * h))
        return np.array(cols).T

    nu0 = np.zeros(10)
    n_t = len(x)
    n_cam = n_t - n_off
    # Steps: log f and k's dimensionless, rotation in rad, translation and sight offsets in mm.
    steps_t = np.array(([1e-5, 1e-5, 1e-5] if n_cam == 9 else []) + [1e-6] * 3 + [1e-2] * 3 + [1e-2] * n_off)
    J = jac(lambda th: residuals(th, nu0), x, steps_t)
    Jn = jac(lambda v: residuals(x, v), nu0, np.array([0.1] * 5 + [0.01] * 5))
    norms = np.linalg.norm(J, axis=0)
    live = norms > 1e-12  # k2 when it is held at zero
    G = np.zeros((n_t, len(J)))
    # Pseudo-inverse of the column-scaled J itself (SVD), not of J^T J: square-on, J^T J's
    # condition number (1e13 and more) would lose the weak focal-height direction to rounding.
    G[live] = np.linalg.pinv(J[:, live] / norms[live], rcond=1e-12) / norms[live][:, None]
    # Per-residual noise, in the residuals' own (weighted) units.
    n_nose = sum(len(p) for _, p in noses)
    r0 = residuals(x, nu0)
    rn = r0[:n_nose]
    sd_nose = max(0.05, 1.4826 * float(np.median(np.abs(rn - np.median(rn))))) if n_nose else 0.05
    noise = [np.full(n_nose, sd_nose)]
    if len(sights_px):
        rs = r0[n_nose : n_nose + 2 * len(sights_px)] / sight_w
        sd_s = max(0.1, 1.4826 * float(np.median(np.abs(rs - np.median(rs))))) if len(rs) >= 8 else 0.5
        noise.append(np.full(2 * len(sights_px), sd_s * sight_w))
    if height_prior is not None:
        noise.append(np.array([height_prior.noise]))
    if offsets is not None:
        noise.append(np.full(2, offsets.unit_px))
    noise = np.concatenate(noise)
    blocks = _nose_blocks(noses, rn, sd_nose)
    # Fitted, the sights' height and setback are counted by their prior residuals instead.
    sd_top, sd_set = (0.0, 0.0) if offsets is not None else (config.rail_top_sd_mm, config.sight_setback_sd_mm)
    sd_nu = np.array([config.table_size_sd_mm] * 2 + [config.nose_height_sd_mm, sd_top, sd_set]
                     + [config.nose_bias_sd_px / math.sqrt(2)] * 5)
    A = G @ Jn  # the estimate moves by -A d_nu when the table differs by d_nu
    cov = _scatter_cov(G, noise, blocks) + (A * sd_nu**2) @ A.T

    cam = cam_of(x)
    R = table.radius_mm
    gx, gy = np.meshgrid(np.linspace(R, table.length_mm - R, 9), np.linspace(R, table.width_mm - R, 5))
    uv_balls = cam.project(np.column_stack([gx.ravel(), gy.ravel(), np.full(gx.size, R)]))

    def derived(th, nu):
        # Ball positions in the frame of the noses as they really are: a table 2 mm longer than
        # its model moves every position in mm, but not relative to the cushions, which is what
        # the results format's frame means; so they are rescaled to the varied table's size.
        c = cam_of(th)
        xy = c.backproject(uv_balls, R)[:, :2] * [table.length_mm / (table.length_mm + nu[0]), table.width_mm / (table.width_mm + nu[1])]
        return np.concatenate([[c.centre_mm[2]], xy.ravel()])

    D = jac(lambda th: derived(th, nu0), x, steps_t)
    Dn = jac(lambda v: derived(x, v), nu0, np.array([0.1] * 5 + [0.01] * 5))
    B = Dn - D @ A
    var = np.diag(_scatter_cov(D @ G, noise, blocks) + (B * sd_nu**2) @ B.T)
    h_sd = float(math.sqrt(max(var[0], 0.0)))
    ball_var = var[1:].reshape(-1, 2).sum(axis=1)
    height = float(cam.centre_mm[2])
    f_sd = float(100 * math.sqrt(max(cov[0, 0], 0.0))) if n_cam == 9 else 0.0
    return {
        "camera_height_sd_mm": h_sd,
        "focal_sd_pct": f_sd,
        "ball_position_sd_mm": float(math.sqrt(max(float(np.max(ball_var)), 0.0))),
        "height_determined": bool(h_sd <= config.max_height_sd_rel * height),
    }


# ================================================================================================
# Sights
# ================================================================================================
def _find_sights(grey: np.ndarray, cam: Camera, table: TableSpec) -> tuple[np.ndarray, np.ndarray]:
    """Sights near where ``cam`` puts them: (M, 2) found (u, v) and (M, 3) table points. A sight
    is a small blob brighter than the rail around it; its intensity-weighted centroid above the
    local rail level is taken, and kept only when compact and close to the prediction."""
    pts3 = np.array([[x, y, table.rail_top_height_mm] for _, _, (x, y) in table.sights()])
    pred = cam.project(pts3)
    # Pixel scale from a 10 mm step.
    scale = np.linalg.norm(cam.project(pts3 + [10, 0, 0]) - pred, axis=1) / 10.0
    h, w = grey.shape
    found, obj = [], []
    for p, X, s in zip(pred, pts3, scale):
        r = int(max(6, math.ceil(28 * s)))
        u0, v0 = int(round(p[0])) - r, int(round(p[1])) - r
        if u0 < 0 or v0 < 0 or u0 + 2 * r + 1 > w or v0 + 2 * r + 1 > h:
            continue
        win = grey[v0 : v0 + 2 * r + 1, u0 : u0 + 2 * r + 1].astype(float)
        bg = np.median(win)
        spread = 1.4826 * np.median(np.abs(win - bg)) + 2.0
        peak = win.max()
        # Against the window's own spread only: in a dim room the sights stand 14-30 DN above
        # the rail (the extra set's dim and phone clips), under the fixed 25 DN this once also
        # asked for, which kept 5 of 18 there.
        # How far above the spread: the largest of n pixels of Gaussian noise reaches about
        # sqrt(2 ln n) sd (extreme-value theory, from memory), so a peak above that is not the
        # window's own noise; the spread already carries a 2 DN floor. The fixed 6 spreads used
        # before missed every sight of the extra set's wide phone clip's dark short rail
        # (12-18 DN above a 10 DN rail, spread 3.5 DN), and without them the sights' fit of that
        # end's lens is extrapolated (_offsets_untrusted).
        if peak - bg < math.sqrt(2 * math.log(win.size)) * spread:
            continue
        thr = bg + 0.5 * (peak - bg)
        blob = win > thr
        from scipy import ndimage

        lab, nb = ndimage.label(blob)
        vv, uu = np.unravel_index(int(np.argmax(win)), win.shape)
        k = lab[vv, uu]
        m = lab == k
        area = int(m.sum())
        if area > 40 * (s * 25) ** 2 + 20 or area < 2:
            continue
        wts = (win - thr) * m
        cv_, cu = ndimage.center_of_mass(wts)
        c = np.array([cu + u0, cv_ + v0])
        if np.linalg.norm(c - p) > 22 * s + 2:
            continue
        found.append(c)
        obj.append(X)
    return np.array(found).reshape(-1, 2), np.array(obj).reshape(-1, 3)


# ================================================================================================
# One background -> one camera
# ================================================================================================
def _with_sight_offsets(x, sight_w, cam_of, noses, sights_px, sights_mm, table, config, nose_w, hp):
    """The refinement again with the sights' setback and height free (:class:`_SightOffsets`)
    and the sights weighted by :func:`_offsets_sight_weight`: (parameters, sight weight, offsets or
    None, note). Keeps the nose-led fit ``x`` (and ``sight_w``) unless :func:`_offsets_untrusted`
    finds nothing against the new one; the note says why it was kept."""
    r_nose = np.concatenate([off * scale for _, off, scale in _rails_offsets_mm(cam_of(x), noses, table)])
    unit = max(0.05, 1.4826 * float(np.median(np.abs(r_nose - np.median(r_nose)))))
    idx = _sight_index(table, sights_mm)
    offsets = _SightOffsets(idx, (config.sight_setback_sd_mm, config.rail_top_sd_mm), unit)
    sw = _offsets_sight_weight(noses, config)
    r = optimize.least_squares(
        _residuals, np.concatenate([x, [0.0, 0.0]]), args=(cam_of, noses, sights_px, sights_mm, table, sw, hp, nose_w, offsets, {}),
        loss="soft_l1", f_scale=0.5, method="trf", x_scale="jac", max_nfev=200,
    )
    rails = [table.sights()[k][0] for k in idx]
    note = _offsets_untrusted(r.x, rails, config)
    if note is not None:
        return x, sight_w, None, note
    return r.x, sw, offsets, None


def _offsets_sight_weight(noses, config: CalibConfig) -> float:
    """Weight of a sight's reprojection residual (px) against a nose point's (unit weight) in the
    fit with the sights' offsets free. The n nose points of a side share one locator bias of
    about ``nose_bias_sd_px`` (a codec shifts whole stretches of the band), so together they fix
    their line no better than that, and each, counted as independent at unit weight, stands for
    a measurement of sd ``nose_bias_sd_px * sqrt(n)``; a sight of sd ``sight_sd_px`` then weighs
    their ratio (inverse-sd weighting, Hartley & Zisserman, Multiple View Geometry, 2nd ed., sec.
    A5.2), n the median over the sides (60-90 points on the extra set: weights 16-19). Measured on
    the extra set's corners (dim/lamp/phone/tele/uneven) at fixed weights: 5 gave 1.36/1.19/2.75/
    0.26/0.19 mm, 10 0.82/1.03/1.35/0.16/0.18, 20 0.61/0.96/0.71/0.18/0.20."""
    n = float(np.median([len(pts) for _, pts in noses]))
    return config.nose_bias_sd_px * math.sqrt(max(n, 1.0)) / config.sight_sd_px


def _offsets_untrusted(x_off: np.ndarray, rails: list[str], config: CalibConfig) -> str | None:
    """Why the fit with the sights' offsets free (``x_off``, last two: setback, height mm) is not
    to be used, or None. Weighted :func:`_offsets_sight_weight`, the sights steer the lens and pose near
    themselves, so they must bracket the table: found on all four rails (when the sight finder still
    missed the extra set's wide phone clip's dark short rail, the lens bent to the other three,
    at sight weight 5, moved that end's corner 4.9 mm off, against 4.0 from the nose-led fit). The offsets must also lie within
    twice their tolerance (:class:`CalibConfig` sds): beyond, the sights disagree with the noses
    by more than any table would explain (a sight taken on the wrong diamond, a mis-set table)."""
    missing = sorted(set(RAIL_SIDES) - set(rails))
    if missing:
        return f"no sights found on the {', '.join(missing)} rail"
    d_set, d_top = float(x_off[-2]), float(x_off[-1])
    if abs(d_set) > 2 * config.sight_setback_sd_mm or abs(d_top) > 2 * config.rail_top_sd_mm:
        return f"the sights' fitted setback {d_set:+.1f} mm and height {d_top:+.1f} mm lie beyond twice their tolerance"
    return None


@dataclass(frozen=True)
class _Fit:
    camera: Camera
    noses: tuple[NoseFit, ...]
    sights_px: np.ndarray
    sights_mm: np.ndarray
    quality: dict
    origin: str
    corners_px: np.ndarray


def _fit_background(bg: np.ndarray, table: TableSpec, config: CalibConfig, intrinsics: tuple | None = None,
                    run_map: Callable | None = None) -> _Fit:
    h, w = bg.shape[:2]
    size = (w, h)
    grey = cv2.cvtColor(bg, cv2.COLOR_BGR2GRAY).astype(np.float32)
    if config.corners_px is not None:
        quad_table = np.asarray(config.corners_px, float)
        area = 0.5 * np.sum(quad_table[:, 0] * np.roll(quad_table[:, 1], -1) - np.roll(quad_table[:, 0], -1) * quad_table[:, 1])
        if area > 0:
            raise ValueError("--corners must go round the table anticlockwise as seen in the picture: origin, along x (the long side), the far corner, along y")
        quad = quad_table
    else:
        quad = _rough_quad(bg)
    side_pts = _nose_points(grey, quad, table, config, run_map=run_map)
    counts = [len(p) for p in side_pts]
    if sum(c >= 5 for c in counts) < 4 and config.corners_px is None:
        raise ValueError(f"found cushion noses on only {sum(c >= 5 for c in counts)} of 4 sides ({counts} points); make sure all four cushions are in view and lit, or give --corners")
    # Plumb-line distortion (pixel units), then the undistorted lines, corners and homography.
    if sum(c >= 5 for c in counts) >= 2:
        kappa = plumb_line_distortion(side_pts, size, config.fit_k2)
    else:
        kappa = (0.0, 0.0)
    if all(c >= 5 for c in counts):
        lines = [_tls_line(_undistort_px(p, kappa, size)) for p in side_pts]
        quad_und = np.array([_intersect(lines[(k - 1) % 4], lines[k]) for k in range(4)])
    else:
        quad_und = _undistort_px(quad, kappa, size)
    if config.corners_px is not None:
        order, origin = np.arange(4), "pinned by the corners given: the first corner"
    else:
        order, origin = _table_order(quad_und, table, config.origin_near_px, quad)
    # Side k of the quad runs from corner k to k+1; in table order side j runs from order[j].
    rails_of_side = {}
    for j, rail in enumerate(RAIL_SIDES):
        rails_of_side[int(order[j])] = rail
    corners_und = quad_und[order]
    obj = table.outline()
    H = dlt_homography(obj, corners_und)
    c = _centre(size)
    if intrinsics is not None:
        f0 = intrinsics[0]
    elif config.camera_height_mm is not None:
        # Square-on: px per mm = f / (H - h).
        spread = np.linalg.norm(corners_und[1] - corners_und[0]) / table.length_mm
        f0 = spread * (config.camera_height_mm - table.nose_height_mm)
    else:
        f0 = focal_from_homography(H, c)
        if f0 is None or not (0.2 * w < f0 < 5 * w):
            f0 = 0.75 * w  # a plain guess; the refinement and sights take it from here
    K0 = np.array([[f0, 0, c[0]], [0, f0, c[1]], [0, 0, 1.0]])
    ok, rv, tv = cv2.solvePnP(np.column_stack([obj, np.zeros(4)]), corners_und.reshape(-1, 1, 2), K0, None, flags=cv2.SOLVEPNP_IPPE)
    if not ok:
        raise ValueError("the table's outline gives no camera pose; check that all four cushions are in view")
    rv, tv = rv.ravel(), tv.ravel()
    Rm = cv2.Rodrigues(rv)[0]
    tv = tv - Rm[:, 2] * table.nose_height_mm  # the corners were at nose height, not on z = 0
    k1_0, k2_0 = kappa[0] * f0**2, kappa[1] * f0**4
    noses = [(rails_of_side[k], side_pts[k]) for k in range(4)]
    sight_w = 0.5
    if intrinsics is None:
        x0 = np.concatenate([[math.log(f0), k1_0, k2_0], rv, tv])

        def cam_of(p):
            q = p.copy()
            if not config.fit_k2:
                q[2] = 0.0
            return _camera(q, size)
    else:
        x0 = np.concatenate([rv, tv])

        def cam_of(p):
            return _camera(p, size, intrinsics)

    hp = _as_prior(config.camera_height_mm, config)
    nose_w = None  # per-rail weights of the nose residuals, once each side's scatter is known
    view_height = None  # [mm, sd mm] the view alone gives, where a typical height was added
    offsets = None  # the sights' setback and height as fit parameters, once trusted
    offsets_note = None

    def solve(x_start, sights_px, sights_mm, loss="soft_l1"):
        r = optimize.least_squares(
            _residuals, x_start, args=(cam_of, noses, sights_px, sights_mm, table, sight_w, hp, nose_w, offsets, {}),
            loss=loss, f_scale=0.5, method="trf", x_scale="jac", max_nfev=200,
        )
        return r.x

    empty2, empty3 = np.zeros((0, 2)), np.zeros((0, 3))
    x = solve(x0, empty2, empty3)
    sights_px, sights_mm = empty2, empty3
    # A table whose shape disagrees with the picture cannot be fitted well however long the
    # solver runs; when the first fit already shows it, stop here and let the verdict refuse.
    first_fits = tuple(NoseFit(rail, pts, np.zeros(len(pts)), np.zeros(len(pts))) for rail, pts in noses)
    aspect0 = _measured_aspect(cam_of(x), first_fits, table)
    shape_ok = aspect0 is None or abs(aspect0 / (table.length_mm / table.width_mm) - 1) <= config.max_aspect_error
    if shape_ok:
        if config.use_sights:
            sights_px, sights_mm = _find_sights(grey, cam_of(x), table)
            if len(sights_px) >= 4:
                x = solve(x, sights_px, sights_mm)
                # Drop sights the fit disagrees with (a ball, chalk, a glint), then solve again.
                res = np.linalg.norm(cam_of(x).project(sights_mm) - sights_px, axis=1)
                keep = res < max(1.5, 3 * np.median(res))
                sights_px, sights_mm = sights_px[keep], sights_mm[keep]
                x = solve(x, sights_px, sights_mm)
            else:
                sights_px, sights_mm = empty2, empty3
        # Drop nose outliers (a resting ball on the cushion, an arm) and solve once more.
        cam = cam_of(x)
        cleaned = []
        for rail, pts in noses:
            if len(pts) == 0:
                cleaned.append((rail, pts))
                continue
            off, scale = _nose_offsets_mm(cam, pts, rail, table)
            rpx = off * scale
            mad = 1.4826 * np.median(np.abs(rpx - np.median(rpx))) + 0.05
            cleaned.append((rail, pts[np.abs(rpx) < max(4 * mad, 0.5)]))
        noses = cleaned
        nose_w = _side_weights(cam_of(x), noses, table)
        x = solve(x, sights_px, sights_mm)
        if config.fit_sight_offsets and len(sights_px):
            x, sight_w, offsets, offsets_note = _with_sight_offsets(x, sight_w, cam_of, noses, sights_px, sights_mm, table, config, nose_w, hp)
        if hp is None and intrinsics is None:
            view = _uncertainty(x, cam_of, noses, sights_px, sights_mm, table, sight_w, None, config, nose_w, offsets)
            if not view["height_determined"]:
                # Square-on, the picture fixes only focal length over distance, and the height it
                # favours follows the small biases of the noses and sights (2.2 m for a true 2.6 m
                # on a sample clip) more than their scatter, so a prior inside the fit would be
                # outweighed by hundreds of nose points that share one bias. Instead the view's
                # height and its full sd (biases and table tolerances counted) are combined with
                # a typical mount height by inverse-variance weighting (the product of two
                # Gaussians), and the fit is pinned there.
                h_v, sd_v = float(cam_of(x).centre_mm[2]), max(view["camera_height_sd_mm"], 1e-6)
                h_t, sd_t = config.typical_height_mm, config.typical_height_sd_mm
                w_v, w_t = 1.0 / sd_v**2, 1.0 / sd_t**2
                hp = HeightPrior.typical((w_v * h_v + w_t * h_t) / (w_v + w_t), math.sqrt(1.0 / (w_v + w_t)))
                view_height = [h_v, float(view["camera_height_sd_mm"])]
                # The lens stays as the view measured it in pixel units (k1 / f^2, k2 / f^4, what
                # the plumb lines fix): free, k1 and k2 would bend to absorb the perspective of a
                # height that is not the view's own (0.34 px of distortion residual on a
                # rendered view pinned 20 % off).
                cam_v = cam_of(x)
                f_v = float(cam_v.K[0, 0])
                kap = (float(cam_v.dist[0]) / f_v**2, float(cam_v.dist[1]) / f_v**4)
                free_lens = cam_of

                def cam_of(p):  # noqa: F811 - the same parameter vector, lens tied to f
                    q = p.copy()
                    f_p = math.exp(q[0])
                    q[1], q[2] = kap[0] * f_p**2, kap[1] * f_p**4
                    return free_lens(q)

                x = solve(x, sights_px, sights_mm)
    cam = cam_of(x)
    fits = []
    all_res = []
    for rail, pts in noses:
        off, scale = _nose_offsets_mm(cam, pts, rail, table) if len(pts) else (np.zeros(0), np.zeros(0))
        fits.append(NoseFit(rail, pts, off * scale, off))
        all_res.append(off * scale)
    all_res = np.concatenate(all_res)
    # Straightness alone (what the lens model leaves): each side's own best line after undistortion.
    straight = _line_residuals([_undistort_to_pixels(cam, f.points_px) for f in fits if len(f.points_px) >= 3])
    if offsets is not None:
        sights_mm = offsets.points(table, x)
    sres = np.linalg.norm(cam.project(sights_mm) - sights_px, axis=1) if len(sights_px) else np.zeros(0)
    # The shape of the table the image supports: refit with the width free.
    aspect = _measured_aspect(cam, fits, table)
    f = float(cam.K[0, 0])
    unc = _uncertainty(x, cam_of, noses, sights_px, sights_mm, table, sight_w, hp, config, nose_w, offsets)
    quality = {
        "nose_rms_px": float(np.sqrt(np.mean(all_res**2))),
        "nose_max_px": float(np.max(np.abs(all_res))),
        "straightness_rms_px": float(np.sqrt(np.mean(straight**2))) if len(straight) else None,
        "straightness_max_px": float(np.max(np.abs(straight))) if len(straight) else None,
        "nose_points": int(len(all_res)),
        "nose_points_per_rail": {f.rail: int(len(f.points_px)) for f in fits},
        "sights_found": int(len(sights_px)),
        "sight_rms_px": float(np.sqrt(np.mean(sres**2))) if len(sres) else None,
        "aspect_measured": aspect,
        "aspect_table": table.length_mm / table.width_mm,
        "focal_px": f,
        "hfov_deg": math.degrees(2 * math.atan(w / 2 / f)),
        "k1": float(cam.dist[0]),
        "k2": float(cam.dist[1]),
        "camera_height_mm": float(cam.centre_mm[2]),
        "camera_centre_mm": cam.centre_mm.tolist(),
        **unc,
        # Where the height comes from: the picture itself, the height given, or a typical mount.
        "height_from": "view" if hp is None else hp.source,
        "height_typical_mm": [config.typical_height_mm, config.typical_height_sd_mm] if view_height is not None else None,
        "height_view_mm": view_height,
        # The sights' fitted setback and height offsets (mm), or why the fit kept the model's.
        "sight_offsets_mm": None if offsets is None else [float(x[-2]), float(x[-1])],
        "sight_offsets_note": offsets_note,
    }
    corners = cam.project(np.column_stack([obj, np.full(4, table.nose_height_mm)]))
    return _Fit(cam, tuple(fits), sights_px, sights_mm[:, :2] if len(sights_mm) else np.zeros((0, 2)), quality, origin, corners)


def _undistort_to_pixels(cam: Camera, uv: np.ndarray) -> np.ndarray:
    xy = cam.undistort_normalised(uv)
    return xy * cam.K[0, 0] + cam.K[:2, 2]


def _measured_aspect(cam: Camera, fits: tuple[NoseFit, ...], table: TableSpec) -> float | None:
    """Length over width of the nose rectangle as this camera sees it: the mean separation of the
    back-projected (nose-height) left/right and bottom/top nose points."""
    by = {f.rail: f for f in fits}
    if not all(len(by[r].points_px) >= 3 for r in RAIL_SIDES):
        return None
    X = {r: cam.backproject(by[r].points_px, table.nose_height_mm) for r in RAIL_SIDES}
    length = float(np.median(X["right"][:, 0]) - np.median(X["left"][:, 0]))
    width = float(np.median(X["top"][:, 1]) - np.median(X["bottom"][:, 1]))
    return length / width if width > 0 else None


# ================================================================================================
# Check image
# ================================================================================================
def check_image(bg: np.ndarray, cam: Camera | None, table: TableSpec, fit: _Fit | None, px_per_mm: float, verdict: str, quad: np.ndarray | None = None) -> np.ndarray:
    """(H, W, 3) uint8 BGR: ``bg`` rectified to a top-down view of the nose plane at ``px_per_mm``
    (table x to the right, y up), with the model's nose rectangle (green), the nose points found
    (coloured by residual: blue under 0.3 px, yellow under 1 px, red beyond), the corners, the
    sights (found: circle; expected: cross); the verdict and residuals are printed on a dark
    banner above the view (:func:`_with_banner`), so the image is taller than the view by the
    banner. Without a camera the background itself is returned with the rough outline and the
    verdict on the banner."""
    if cam is None:
        img = bg.copy()
        if quad is not None:
            cv2.polylines(img, [np.round(quad).astype(np.int32)], True, (0, 0, 255), 2)
        return _with_banner(img, [verdict])
    m = table.rail_width_mm + 60.0
    Wd = int(round((table.length_mm + 2 * m) * px_per_mm))
    Hd = int(round((table.width_mm + 2 * m) * px_per_mm))
    uu, vv = np.meshgrid(np.arange(Wd, dtype=float), np.arange(Hd, dtype=float))
    x = uu / px_per_mm - m
    y = (Hd - 1 - vv) / px_per_mm - m
    pts = np.column_stack([x.ravel(), y.ravel(), np.full(x.size, table.nose_height_mm)])
    uv = cam.project(pts).reshape(Hd, Wd, 2).astype(np.float32)
    uv = np.nan_to_num(uv, nan=-100.0)
    img = cv2.remap(bg, uv[..., 0], uv[..., 1], cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=(40, 40, 40))

    def to_img(xy):
        xy = np.asarray(xy, float).reshape(-1, 2)
        return np.column_stack([(xy[:, 0] + m) * px_per_mm, Hd - 1 - (xy[:, 1] + m) * px_per_mm])

    rect = to_img(table.outline())
    cv2.polylines(img, [np.round(rect * 16).astype(np.int32)], True, (0, 220, 0), 1, cv2.LINE_AA, 4)
    if fit is not None:
        for nf in fit.noses:
            if len(nf.points_px) == 0:
                continue
            X = cam.backproject(nf.points_px, table.nose_height_mm)[:, :2]
            for p, r in zip(to_img(X), nf.residuals_px):
                col = (255, 128, 0) if abs(r) < 0.3 else (0, 220, 255) if abs(r) < 1.0 else (0, 0, 255)
                cv2.circle(img, (int(round(p[0])), int(round(p[1]))), 1, col, -1)
        for p in rect:
            cv2.drawMarker(img, (int(round(p[0])), int(round(p[1]))), (255, 255, 255), cv2.MARKER_CROSS, 18, 1)
        exp = to_img(np.array([xy for _, _, xy in table.sights()]))
        for p in exp:
            cv2.drawMarker(img, (int(round(p[0])), int(round(p[1]))), (0, 200, 255), cv2.MARKER_TILTED_CROSS, 9, 1)
        if len(fit.sights_px):
            Xs = cam.backproject(fit.sights_px, table.rail_top_height_mm)[:, :2]
            for p in to_img(Xs):
                cv2.circle(img, (int(round(p[0])), int(round(p[1]))), 6, (255, 0, 255), 1, cv2.LINE_AA)
        q = fit.quality
        lines = [
            verdict,
            f"noses: rms {q['nose_rms_px']:.2f} px, max {q['nose_max_px']:.2f} px over {q['nose_points']} points",
            f"sights: {q['sights_found']} of 18" + (f", rms {q['sight_rms_px']:.2f} px" if q["sight_rms_px"] is not None else ""),
            f"f {q['focal_px']:.0f} px (hfov {q['hfov_deg']:.1f} deg), k1 {q['k1']:+.3f} k2 {q['k2']:+.3f}, height {q['camera_height_mm']:.0f} mm",
            height_words(q),
            f"table {table.name} L/W {q['aspect_table']:.3f}, seen {q['aspect_measured']:.3f}" if q["aspect_measured"] else f"table {table.name}",
            "origin (0,0) at the lower left of this view",
        ]
        return _with_banner(img, lines)
    return _with_banner(img, [verdict])


def height_words(q: dict) -> str:
    """One line on where the camera's height comes from and what it leaves of ball positions,
    from a :class:`Calibration`'s ``quality`` (:func:`_uncertainty`, ``height_from``): for the
    check image and the command's summary."""
    h, sd, ball = q["camera_height_mm"], q["camera_height_sd_mm"], q["ball_position_sd_mm"]
    if q.get("height_from") == "typical":
        (ht, st), (hv, sv) = q["height_typical_mm"], q["height_view_mm"]
        return (f"camera height NOT determined by this view (too square-on: {hv:.0f} +- {sv:.0f} mm); "
                f"with a typical mount height {ht:.0f} +- {st:.0f} mm assumed: {h:.0f} +- {sd:.0f} mm; ball positions "
                f"+- {ball:.1f} mm (1 sd) from the calibration; give --camera-height to pin it")
    if q.get("height_from") == "given":
        return f"camera height given: {h:.0f} +- {sd:.0f} mm; ball positions +- {ball:.1f} mm (1 sd) from the calibration"
    if q["height_determined"]:
        return f"camera height {h:.0f} +- {sd:.0f} mm; ball positions +- {ball:.1f} mm (1 sd) from the calibration"
    return (f"camera height NOT determined by this view ({h:.0f} +- {sd:.0f} mm, too square-on); ball positions "
            f"+- {ball:.1f} mm (1 sd) from it; give --camera-height to pin it")


def _with_banner(img: np.ndarray, lines: list[str]) -> np.ndarray:
    """``img`` (H, W, 3) uint8 with a dark banner added above it carrying ``lines`` in white, so
    the text never sits on the cloth or the rails; long lines are wrapped to the image's width.
    The first line (the verdict) is green when it reads OK, red otherwise."""
    h, w = img.shape[:2]
    font, fs, th = cv2.FONT_HERSHEY_SIMPLEX, 0.5, 1
    wrapped: list[tuple[str, bool]] = []
    for i, line in enumerate(lines):
        words, cur = line.split(" "), ""
        for word in words:
            trial = f"{cur} {word}".strip()
            if cur and cv2.getTextSize(trial, font, fs, th)[0][0] > w - 20:
                wrapped.append((cur, i == 0))
                cur = word
            else:
                cur = trial
        wrapped.append((cur, i == 0))
    step = 20
    banner = np.full((step * len(wrapped) + 12, w, 3), 24, np.uint8)
    ok = lines[0].startswith("OK") if lines else False
    for k, (line, first) in enumerate(wrapped):
        col = ((80, 220, 80) if ok else (80, 80, 255)) if first else (235, 235, 235)
        cv2.putText(banner, line, (10, 20 + step * k), font, fs, col, th, cv2.LINE_AA)
    return np.vstack([banner, img])


# ================================================================================================
# Public entry points
# ================================================================================================
def _verdict_problems(fit: _Fit, table: TableSpec, config: CalibConfig, size: tuple[int, int]) -> str | None:
    q = fit.quality
    if q["aspect_measured"] is not None:
        rel = q["aspect_measured"] / q["aspect_table"] - 1
        if abs(rel) > config.max_aspect_error:
            return (f"the table seen has length/width {q['aspect_measured']:.3f} but --table {table.name} has "
                    f"{q['aspect_table']:.3f} ({100 * rel:+.1f} %); give the right --table (preset or LxW in mm)")
    if q["nose_rms_px"] > config.max_nose_rms_px:
        return (f"the cushion noses fit poorly (rms {q['nose_rms_px']:.2f} px > {config.max_nose_rms_px} px); "
                "check the image for a wrong --table, a moved camera or clutter on the cushions, or give --corners")
    if q["sight_rms_px"] is not None and q["sight_rms_px"] > config.max_sight_rms_px:
        return (f"the rail sights disagree with the cushions (rms {q['sight_rms_px']:.2f} px > {config.max_sight_rms_px} px); "
                "check --table and --ball, or calibrate from a clip with the rails clear")
    if q["ball_position_sd_mm"] > config.max_ball_position_sd_mm:
        return (f"ball positions would be uncertain by +- {q['ball_position_sd_mm']:.1f} mm (1 sd) > "
                f"{config.max_ball_position_sd_mm:.1f} mm from this view; give --camera-height (lens above the cloth) "
                "or --corners, or film with the table larger in the picture")
    lo, hi = config.hfov_deg_range
    if not lo <= q["hfov_deg"] <= hi:
        return f"implausible field of view {q['hfov_deg']:.1f} deg (focal {q['focal_px']:.0f} px); give --camera-height to pin it"
    lo, hi = config.height_mm_range
    if not lo <= q["camera_height_mm"] <= hi:
        return f"implausible camera height {q['camera_height_mm']:.0f} mm above the cloth; give --camera-height to pin it"
    return None


def calibrate_background(bg: np.ndarray, table: TableSpec, config: CalibConfig = CalibConfig()) -> Calibration:
    """Calibrate from one (H, W, 3) uint8 BGR frame of the empty (or still) table; see
    :func:`calibrate`. No bump detection (one frame has one camera)."""
    return _calibrate_segments([(0.0, bg)], table, config, n_frames=1, n_stills=[1])


def calibrate(source, table: TableSpec, config: CalibConfig = CalibConfig(), run_map: Callable | None = None) -> Calibration:
    """Calibrate the camera that filmed ``source`` (a clip path, one (H, W, 3) uint8 BGR frame,
    or an iterable of frames or (t_s, frame) pairs) looking at ``table``.

    Streams the frames once (never holds the clip), builds a background per camera segment from
    still frames, finds the cushion noses and sights and fits the camera (module docstring).
    Returns a :class:`Calibration`; raises :class:`CalibrationError` (a ValueError, with the check
    image attached where one could be drawn) with a one-line message saying what is wrong and what
    to do: no table in view, too dark, table cut off, a ``table`` whose shape disagrees with the
    picture, or a fit too poor to trust.

    ``run_map(fn, jobs)``: where given, calibration hands it independent pieces of work (the
    four cushion sides' nose searches) as a top-level function and a list of argument tuples,
    and takes back ``[fn(*job) for job in jobs]``, in order; it may run them in other processes
    (:mod:`railtrace.pipeline` lends its waiting detection process), and as each piece depends
    on its arguments alone, the calibration is the same to the last bit either way.
    """
    if isinstance(source, np.ndarray) and source.ndim == 3:
        return calibrate_background(_check_frame(source, None), table, config)
    segments, n, _ = _collect(source, config)
    bgs, counts = [], []
    for seg in segments:
        if len(seg.stills) < config.min_still_frames:
            if seg is segments[0]:
                raise ValueError("no still moment in the clip to see the table clearly; calibrate from a clip with a second or two before the first shot")
            continue
        bgs.append((seg.t0, _median_background(seg.stills)))
        counts.append(len(seg.stills))
    return _calibrate_segments(bgs, table, config, n_frames=n, n_stills=counts, run_map=run_map)


def _calibrate_segments(bgs: list[tuple[float, np.ndarray]], table: TableSpec, config: CalibConfig, n_frames: int, n_stills: list[int],
                        run_map: Callable | None = None) -> Calibration:
    t0, bg = bgs[0]
    size = (bg.shape[1], bg.shape[0])
    try:
        fit = _fit_background(bg, table, config, run_map=run_map)
    except CalibrationError:
        raise
    except ValueError as exc:
        quad = None
        try:
            quad = _rough_quad(bg)
        except ValueError:
            pass
        raise CalibrationError(str(exc), check_image(bg, None, table, None, config.check_px_per_mm, f"FAILED: {exc}", quad)) from None
    problem = _verdict_problems(fit, table, config, size)
    verdict = "OK" if problem is None else f"REFUSED: {problem}"

    def draw() -> np.ndarray:
        return check_image(bg, fit.camera, table, fit, config.check_px_per_mm, verdict)

    if problem is not None:
        raise CalibrationError(problem, draw())
    changes = [(0.0, fit.camera)]
    intr = (float(fit.camera.K[0, 0]), float(fit.camera.dist[0]), float(fit.camera.dist[1]))
    # After a bump: same lens, new pose, origin pinned to the same physical corner.
    for t_k, bg_k in bgs[1:]:
        cfg = replace(config, origin_near_px=tuple(fit.corners_px[0]), corners_px=None)
        try:
            fk = _fit_background(bg_k, table, cfg, intrinsics=intr, run_map=run_map)
        except ValueError as exc:
            raise CalibrationError(f"the camera moved at t = {t_k:.2f} s and the new view could not be calibrated ({exc})", draw()) from None
        pk = _verdict_problems(fk, table, config, size)
        if pk is not None:
            raise CalibrationError(f"the camera moved at t = {t_k:.2f} s and the new view fits poorly: {pk}", draw())
        changes.append((float(t_k), fk.camera))
    quality = dict(fit.quality)
    quality["still_frames"] = int(n_stills[0])
    quality["frames_read"] = int(n_frames)
    quality["camera_changes"] = len(changes) - 1
    return Calibration(
        camera=fit.camera,
        quality=quality,
        corners_px=fit.corners_px,
        noses=fit.noses,
        sights_px=fit.sights_px,
        sights_mm=fit.sights_mm,
        draw_check=draw,
        origin=fit.origin,
        camera_changes=tuple(changes),
        background=bg,
    )
