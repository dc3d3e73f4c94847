"""Ball detection: frames of a fixed overhead camera -> ball centres in the table frame.

Frames are (H, W, 3) uint8 BGR; pixels follow ``vision.camera`` (origin at the centre of pixel
(0, 0), u right, v down, ``img[v, u]``); positions follow ``vision.table`` (mm). A ball's position
is its centre projected straight down: the centre is R above the cloth.

Output (:data:`COLUMNS`), one row per detected ball per frame:

========= ===================================================================================
frame     frame index from 0
t         presentation time, s
x, y      ball centre, mm, table frame (at mid-exposure for a blurred ball)
u, v      image of the ball centre, px
quality   0..1: share of the outline found times how well it fits the sphere model
colour    ``white``, ``yellow``, ``blue``, ``red``, ``purple``, ``orange``, ``green``,
          ``maroon``, ``black``, or ``""`` when unsure (our own coarse hue bands)
pattern   ``cue``, ``solid``, ``stripe`` or ``unknown``
blur_x,   travel of the centre during the exposure, mm (table frame), from the streak's
blur_y    length and direction; 0 when the streak is no longer than a ball (see Limits)
sigma_mm  estimated standard deviation of x and y, mm: the whole error, biases included
          (:func:`_stated_sigma`)
========= ===================================================================================

Method
------
1. *Background*: ``vision.background``: the empty table, with resting balls kept out, updated
   for lighting drift.
2. *Where to look*: a 1/8-scale copy of each frame is compared with the copy at the last
   processing (frame differencing); only cells that changed, grown by a ball, are processed, and
   detections elsewhere are carried over, as is a sharp ball inside a processed region whose own
   cells did not change (its silhouette is taken out of that region's foreground; it is refitted
   only beside a ball found there, step 5). A frame where nothing changed costs one resize and,
   per sharp ball, one Lucas-Kanade step (Lucas & Kanade 1981) against its image patch when
   it was last fitted: a ball nudged by less than a cell's mean shows (0.5 mm) is refitted.
3. *Candidates*: pixels of the ball zone whose colour distance from the background exceeds a
   noise-scaled threshold (the running model's noise, or where a change of light that only scales
   the colours inflates it beyond ``_LIGHT_CHANGE_RATIO`` times the noise of the chromaticity
   distortion, that bound: :attr:`BallDetector._score_thr`); 8-connected components (:func:`vision.background.components_8`). A
   compact, convex component seeds one ball (a disc, or a capsule along its principal axis from
   its second moments when elongated by blur); a larger one (touching balls) seeds one ball per
   peak of its distance transform at least ~0.7 ball radius deep; one that reaches the edge of
   the ball zone (an arm or cue coming in over the rail) seeds only deep, isolated peaks and
   its fits must pass stricter outline tests, among them a ring round the ball mostly free (as
   round a whole ball touching the arm, not a hand or knuckle continued by it; a seed whose ring
   is already covered well beyond that is not fitted at all: most are the arm's own), and the
   outline itself stepping from ball to surround over as much of its length (not where a cue
   runs on or a shadow's edge stands for the rim: :meth:`BallDetector._rim_share`). Whether a
   component cut off by the side of its box reaches the zone's edge is judged on the whole
   frame (at half scale), so a moving hand at the end of a still arm is not taken for a free
   ball, and such a piece is seeded whole (the component within two ball diameters), so a ball
   half inside its box is not half a ball. A free piece of which the balls fitted in it
   leave more than a ball's area unexplained (after the remainder's own seeds below: an arm,
   hand or cue whose sleeve ends over the cloth), or in which two fitted balls that do not touch
   are joined by foreground (the two ends of a bridge hand), or two that overlap are joined
   without the waist touching spheres pinch to (a hand fitted as two balls;
   :meth:`BallDetector._bridged`), or which comes within the ring test's reach of a piece
   reaching in over the rail (a hand's end cut off from the rest by a sliver of cloth colour:
   a ball there touches the occluder, :meth:`BallDetector._mark_beside`), is
   an occluder too, and its balls are fitted again under the
   same stricter tests (:meth:`BallDetector._free_occluders`). A free ball whose outline fits
   poorly, whose ring something crosses and whose outline does not step from ball to surround
   is the rounded end of something else (:meth:`BallDetector._joined_no_rim`: a stroking cue's
   shaft-to-butt colour step against a model that holds the cue); it stands while its box's
   pieces are explained and is dropped at the end, unless its piece holds a ball's lit
   pixels whose own fit is no such end and what it held beside that ball is the ball's cast
   shadow (a dim ball and its long shadow fitted as one: :meth:`BallDetector._joined_casters`).
   A sharp fit whose disc runs on into a straight body narrower than a ball, at least two
   ball diameters long, and is itself no wider across it than that body is the rounded end of
   a cue (its butt beyond the grip hand, or its tip), not a ball, which is a whole free disc
   whatever touches it (:meth:`BallDetector._cue_end`, measured on the frame's foreground).
   Once a free piece's seeds are
   fitted, what the fitted balls' silhouettes leave of it is seeded again (a triangle of touching balls is
   deepest between them). A free piece of more than 2.5 balls that its fits do not explain
   (a rack of touching balls, one solid piece whose distance transform peaks between balls, so
   its fits straddle them) is seeded again as a cluster, by a circle Hough transform of the
   frame's colour edges at the ball's image radius (every ball's rim votes for its centre,
   against the cloth or a neighbour), then ball by ball in what those fits leave, however many
   balls it holds, then where those fits leave room for a ball (a ball whose fit failed among
   its neighbours leaves its whole disc, touching balls only creases) a ball placed touching its
   fitted neighbours, as racked balls lie, when its disc stands out and is no cast shadow; those
   fits replace the first where they explain the piece (the tests above), and the piece is
   judged as before where they do not (:meth:`BallDetector._cluster_retry`). A piece whose first
   fits explain it is seeded so too where they leave room for a ball, or take a ball off the
   cloth's hue for its neighbours' shadow (:meth:`BallDetector._settled`). Small holes in a component (a highlight or mark of
   the cloth's colour) are filled before its distance transform. A piece narrower across than a ball's radius (a cue, a finger) seeds no streak, and a
   fitted streak must fade in and out along its motion over about a ball's length at both ends,
   as a swept ball does (:meth:`BallDetector._soft_ends`); a still hand, ball-wide and rounded,
   or a codec's faded trace of one just lifted, ends sharply at one end at least.
4. *Outline*: along 48 rays from the predicted image centre, the outline is the strongest colour
   step (sub-pixel, parabolic peak interpolation) within a window round the predicted silhouette,
   counted only where the colour moves toward the background going outward (so interior
   stripes, number discs and highlights are mostly rejected, and a shadow's soft edge loses to
   the ball's sharp one). Samples beyond the predicted outline that only dim the empty table
   (the model's own hue, no brighter; the hue judged as the foreground test judges it, so a
   deep shadow tinted by room light and the dark crease where the ball meets the cloth count),
   in a run out to the cloth, are cast shadow and measured by :func:`ballness`, so a dark rim that fades into its shadow does not hand the outline to
   the shadow's far edge; a seed that fails so is tried once without, where the discount lowered
   a sample (elsewhere the retry would repeat the first try). A ball of the cloth's own
   hue and brightness (blue on blue, red on red: :func:`_plain_body`) has no colour step at its
   outline, only the ramp of its shading into its shadow; its outline is the inner flank of
   the dark ring round it instead (the limb darkened by Lambert's law meeting the cloth the
   ball shades, :func:`_dark_ring`), and the coarse fit stands for it (step 6 has no colour
   step to place either). Such a ball passes the colour test only at its crown and highlight,
   too small a piece to seed a ball: small bright pieces seed it (:meth:`BallDetector._crown_seeds`),
   kept only when the fitted ball is of the cloth's hue and nothing reaching in over the rail
   or larger than a few balls lies within a ball's diameter (a glint on a cue or knuckle), and its disc counts as filled (the
   fit's last test) when it is shaded like a lit sphere, a bright crown over a darker ring
   (:func:`_shaded_share`). A dark ball (its disc's median brightness under ``_DARK_BODY`` of
   the cloth's round it: a black ball, :meth:`BallDetector._dark_body`) is outlined in every
   round by where the brightness rises from its darkest limb to the surround, coming in from
   outside (:meth:`BallDetector._dark_edges`): its white number disc or highlight, the
   strongest colour step on its ray and off the hue of both limb and cloth, is never reached.
5. *Sphere fit*: each outline point is a ray (``Camera.rays``) that must graze the ball: its
   distance from the ball centre (R above the cloth) equals R (a ray tangent to a sphere). For a
   blurred ball the centre sweeps a segment during the exposure and the outline is that of the
   swept sphere: the ray's distance from the *segment* equals R. Unknowns (x, y) or (x, y, half
   length, heading) are solved by Levenberg-Marquardt (Marquardt 1963) with Tukey biweight
   iteratively reweighted least squares (Holland & Welsch 1977) so touching neighbours, shadows
   and the cue tip's edges drop out; the Jacobian is analytic. This is exact under perspective and lens distortion (the
   silhouette of a sphere seen off-axis is not a circle centred on the centre's image), uses
   the known ball size, and needs only part of the outline. Two rounds: the second searches a
   narrower window round the first fit's predicted silhouette. Balls fitted within 2.4 R of
   each other are refitted with the rays toward their neighbours left out of the local edge
   (step 6), whose sample bands there would hold the other ball's rim.
   A compact blob elongated to about two ball diameters is split in two when its width across
   the principal axis pinches at the middle (two touching balls have a waist; a blur streak is
   widest at its middle); a fitted streak shorter than 0.3 R each way is refitted as a sharp
   ball (shading and shadow stretch a resting outline by a few mm).
   A sharp fit whose disc is the cloth darkened with its own hue kept and nothing brighter than
   the cloth in it (no highlight, no lit side: :func:`_cast_shadow`) is a lamp's cast shadow,
   not a ball, when another ball lies within 3 R to cast it; with none there, the piece's
   pixels off the cloth's hue or brighter than it seed the casting ball instead
   (:meth:`BallDetector._drop_cast_shadows`), and so they do where a fit's disc is dark and,
   less that ball's pixels, has no light of its own (a fit settled on its own ball's shadow,
   the ball's lit rim in its disc). Where a ball and its shadow make one piece fitted as two
   overlapping balls, the shadow (dark, no highlight once the lit balls' pixels are left out:
   :func:`_unlit`) is no ball end of a hand (:meth:`BallDetector._casters_only`); it goes and
   its caster is refitted with the rays toward it left out of every round (its dark limb runs
   into the shadow with no rim to find).
6. *Sub-pixel outline* (sharp balls): up to six further rounds place each outline point by
   :meth:`BallDetector._edges_local`, refitting the sphere each round until the centre moves
   less than 0.05 mm; if that fit agrees worse with the sphere than the coarse one, the coarse
   fit stands. Where the rim's colour differs in hue from the surface just outside on most of
   the outline, each point is where the colour's part off the surround's colour direction
   (zero for the cloth lit, in shadow or in the crease, as a shadow only scales it) falls to
   half its value at the rim (:func:`_off_hue_edges`); else by a two-colour mixing model (ball
   rim colour just inside, cloth or cast shadow just outside, crossing of half coverage).
7. *Identity*: pixels inside 0.88 of the fitted outline, in HSV: near-white, coloured (not of
   the cloth's hue) and dark shares decide cue (almost all white, nothing tinted or dark),
   stripe (a white share with colour), solid (colour, little white); the coloured pixels'
   hue picks the colour label. A ball of the cloth's own hue and brightness counts its
   cloth-like pixels as colour (it is a solid, not ``unknown``).

Limits (named honestly): streaks shorter than R of centre travel each way are found as a disc at
the right mid-exposure centre but report ``blur_x = blur_y = 0``; the travel reported for long
streaks is not yet right (the faint ends are found inside the swept outline); a ball whose dark
rim fades into its own cast shadow with no change of hue (a black ball, a dark band of the
cloth's hue) can still be placed a few mm off; a ball of the cloth's own hue and brightness is seeded from its crown or highlight, so
one whose highlight does not stand out is missed, and one right under a lamp, whose disc
matches the cloth's brightness over half its area, fails the filled-disc test and is missed
(2 of 6 blue balls on blue cloth of nearly their albedo in the tests); a ball of the cloth's
hue much brighter or darker than it keeps the colour-step outline; a dark ball
pressed into a touching triangle can still be about 4 mm off; balls inside a touching rack keep
their coarse fit (every ray of the local edge meets a neighbour), 0.1-3 mm off and a few up to
13 mm (tests/test_detect.py, strict xfail), and a ball placed in the room its fitted neighbours
leave (:meth:`BallDetector._room_ball`) rests on their fits; a rack all of whose balls are fitted
can still be dropped as an arm where two fits a few mm toward each other (centres under 2 R
apart) have the creases beside them, wider than a hand's waist test allows, left between them
(:meth:`BallDetector._bridged`; 2 of 30 scenes of the session-14 rack study); a rack holding a ball of the cloth's own hue (a
green ball on green cloth, a blue one on blue), or a black ball on grey cloth, is not explained
and is lost until the break spreads it; a rack present from the clip's first frame is taken
out of the empty-table model up to 16 balls with their shadows (``BackgroundConfig.max_blob_balls``),
but a ball at the end of a row frozen to a cushion can stay in it (tests/test_detect.py); a
ball merged with an arm or cue in the
image is reported only when its outline is clearly separate and at most about a quarter of the
ring round it is covered (a ball pressed against a sleeve, or partly under the bridge hand, is
lost for those frames); the end of an arm exactly a ball wide and still is not told from a ball
by its ring; a ball seen by its crown alone (of the cloth's own hue) under a cue lying across
its middle would read as the cue's end (:meth:`BallDetector._cue_end`; reasoned, not seen in
the renders); a dark ball of the cloth's hue, or a black ball on grey cloth, with no highlight
within 0.7 of its radius and another ball within 3 R is taken for a cast shadow and missed, and
a ball whose long shadow from a low lamp joins it in one piece can be placed on the shadow
(about 25 mm off on blue and grey cloth in tests/test_detect.py); in a dark, vignetted corner
a dim ball whose shaded side meets its shadow can be placed 8-12 mm toward the shadow, its
outline run out along the shadow on that side and in along its highlight's edge on the other
(two blue balls in tests/test_detect.py, strict xfail); a dark ball (a black one, outlined by
:meth:`BallDetector._dark_edges`) there is placed about 1-3 mm off, up to about 6 mm where its
underside's and a lamp's shadows lie on different sides (tests/test_detect.py); colour labels are coarse; the speed is far below the issue's target (see the
benchmarks). A resting ball's error on compressed video is set mostly by the codec, not by a
bias of the method: on the benchmark scenes the resting median is 1.25 mm at their own H.264
crf 20-28 and 0.73 mm lossless with 4:2:0 chroma kept (``benchmarks/detect_accuracy.py
--crf 0``); it hardly changes from frame to frame (sd 0.01-0.08 mm over eight fresh fits spread
over 50 frames of green_60fps_250: the codec keeps static content), so refitting and averaging a resting ball
over frames would not remove it. The limb's shading is uneven round a lit ball (the side toward
the camera's nadir lies below the equator, facing down), which on uncompressed renders places
bright balls up to about 1 mm away from the nadir at 1-1.4 m from it (tests/test_detect.py,
the xfail off the right cushion).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field

import cv2
import numpy as np
import pandas as pd

from vision.background import (COLOUR_FLOOR_DN, DARK_RATIO, DARK_WEIGHT, LIT_RATIO, Background, BackgroundConfig, ball_zone,
                               cloth_zone, components_8, max_abs_diff)
from vision.camera import Camera
from vision.table import TableSpec
from vision.video import area_down, iter_frames

log = logging.getLogger(__name__)

COLUMNS = ["frame", "t", "x", "y", "u", "v", "quality", "colour", "pattern", "blur_x", "blur_y", "sigma_mm"]
PATTERNS = ("cue", "solid", "stripe", "unknown")
COLOURS = ("white", "yellow", "blue", "red", "purple", "orange", "green", "maroon", "black", "")

_N_RAYS = 48
# The outline rays' angles (rad) and unit directions (48, 2) in the pixel frame, made once
# (read only).
_RAY_ANG = np.linspace(0, 2 * np.pi, _N_RAYS, endpoint=False)
_RAY_DIRS = np.column_stack([np.cos(_RAY_ANG), np.sin(_RAY_ANG)])
# Their angles as _ray_polygon_convex measures them (arctan2 of the directions, not _RAY_ANG).
_RAY_DIRS_ATAN2 = np.arctan2(_RAY_DIRS[:, 1], _RAY_DIRS[:, 0])
_RAY_ANG.flags.writeable = False
_RAY_DIRS.flags.writeable = False
_RAY_DIRS_ATAN2.flags.writeable = False
# Prior spread of the outline's inward shift from limb darkening (mm): about a pixel at the
# usual scale of 2 mm per pixel; not a measured figure.
_BIAS_SIGMA_MM = 2.0
# The stated sigma_mm (:func:`_stated_sigma`). The outline's ray errors are not independent:
# a shadow side, a lit side, a blurred trailing side, a cushion face or a compression block
# misplace whole arcs of rays together, so 48 rays carry the centre's information of a few. The
# least-squares variance (independent rays) is scaled by the length in rays over which their
# errors stay correlated, here a third of the outline (the variance of a mean of correlated
# samples grows by 1 + 2 sum of their autocorrelations, Bartlett 1946, from memory); the
# fitted radius bias (the found outline's mean inward shift) adds half of itself, as an
# uneven shift of that size moves the centre by a share of it, and so does the distance to a
# local fit the coarse fit was kept over; a local edge still moving when its rounds ran out
# adds five of its last steps. Checked on the rendered bench scenes
# (benchmarks/detect_accuracy.py, sigma calibration), not derived.
_RAY_CORR = 16.0
_BIAS_SHARE = 0.5
_WALK_ROUNDS = 5.0
_STEP_PX = 0.25
# Reach (px) of the local two-colour edge either side of the predicted outline: the sample
# bands sit 1.75..2.75 px either side, beyond a blurred edge's half-width (about 1.5 px for an
# optical blur of 0.6 px plus the pixel's own box).
_LOCAL_REACH_PX = 3.0


def _band(off: np.ndarray, lo: float, hi: float) -> slice:
    """The slice of the increasing offsets ``off`` (px) lying in [lo, hi]: a band of samples
    taken as a view, not copied out by a boolean mask."""
    k = np.flatnonzero((off >= lo) & (off <= hi))
    return slice(int(k[0]), int(k[-1]) + 1)


# The local edge's sample offsets (px, outward) about the predicted outline, made once (read
# only), and its bands: the rim colour 1.75..2.75 px inside, the surround's as far outside
# (:meth:`BallDetector._edges_local`) and the off-hue rim band 1.25..2 px inside
# (:func:`_off_hue_edges`).
_LOCAL_OFF = np.arange(-_LOCAL_REACH_PX, _LOCAL_REACH_PX + 1e-9, _STEP_PX)
_LOCAL_OFF.flags.writeable = False
_LOCAL_INNER = _band(_LOCAL_OFF, -2.75, -1.75)
_LOCAL_OUTER = _band(_LOCAL_OFF, 1.75, 2.75)
_HUE_BAND = _band(_LOCAL_OFF, -2.0, -1.25)

# A fitted half streak shorter than this share of R is refitted as a sharp ball. The outline
# found is the half-coverage contour of the blurred image; for a sphere swept h <= R each way it
# lies R from the mid-exposure centre along the motion (a point there is covered for half the
# exposure) and within 0.87 R across it, i.e. it is the sphere's outline, while the capsule
# model would put it at R + h. A free streak also absorbs a resting ball's shadow and shading,
# which moved centres 5-13 mm (mostly next to the cushions, where shadows stretch outlines).
_MIN_HALF_STREAK_R = 1.0
# Least fall (75 % to 25 % of the plateau, in R) of either end of a fitted streak
# (:meth:`BallDetector._soft_ends`). A swept sphere's ends fall over R; on the rendered bench
# and sample streaks each end fell over 0.5-0.93 R (21 streaks at 30 fps, shutters open),
# a still hand's or a codec's faded trace of one over 0.04-0.21 R (cushion_check frames 1184
# and 3985): a third of the way from the one to the other, not a published figure.
_SHARP_END_R = 0.3
# Least width of a piece of foreground across the middle of two overlapping fitted balls, in
# ball image diameters, that makes it something else (:meth:`BallDetector._bridged`): touching
# spheres' silhouettes meet at a point, and the foreground there holds only the crease and
# shadow between them (0 to 0.4 on the rendered bench's touching balls; about 0.65 estimated
# for a pair lined up with the view 40 degrees off the camera's axis, whose silhouettes are
# ellipses 1.3 times longer that way); the middle of a bridge hand fitted as two balls
# measured 1.09 (cushion_check frame 544).
_JOIN_WIDTH = 0.8
# A ball's body is taken as of the cloth's own hue and brightness (:func:`_plain_body`) when its
# median chromaticity distortion (Horprasert et al. 1999) is below sin 7.5 degrees and its
# median brightness within a factor 1.5 of the cloth's. In our renders, red on red and blue on
# blue read 0.06..0.12 and 1.1..1.3, every other ball 0.15 or more (a white ball on tan
# cloth) or a brightness ratio beyond 1.5 (white or black on grey); not a published figure.
_SAME_HUE = 0.13
_SAME_BRIGHT = 1.5
# Most rounds of the local edge; each starts from the previous fit, and the rounds stop once
# the centre moves less than 0.05 mm (a coarse start several px off takes a few).
_LOCAL_ROUNDS = 6
# A step this share of the strongest on its ray, lying farther out, is taken as the silhouette.
_OUTER_SHARE = 0.5
# Ring round a candidate inside an arm or cue component, in ball radii, and the least share of
# it that must be free of foreground: what a whole ball touching a straight edge leaves free
# (the edge, R from the centre, hides 2 acos(1 / 1.4) of the ring), less one of 64 samples.
_RING_R = 1.4
_ISOLATED_SHARE = 1.0 - math.acos(1.0 / _RING_R) / math.pi - 1.0 / 64
# A free sharp fit whose outline rms exceeds this (mm) must not look joined to something with
# no rim step (:meth:`BallDetector._joined_no_rim`). Measured on the five extra clips (single-
# process detector, every sharp fit within 15 mm of a ball): median rms 0.64-1.02 mm per clip,
# 95th percentile 0.87-1.74 mm; the false fits on a stroking cue near the rail 1.36-1.99 mm.
_JOINED_RMS_MM = 1.2
# ...and whose ring (:meth:`BallDetector._ring_share`) is below this: something lies across at
# least 4 of its 64 samples (the fits on the cue: at most 0.91).
_JOINED_RING = 0.95
# ...and, where the ring is covered beyond _ISOLATED_SHARE, whose rim share is below this: on
# the five extra clips the sharp fits on balls with rms over _JOINED_RMS_MM and so covered a
# ring (a moving ball's own streak and shadow) stepped over 0.854 or more of their outline,
# the fits on the cue over 0.77 or less (a 0.45 s re-film of tele_120fps): 39 of 48 rays.
_COVERED_RIM = 39 / 48
# A sharp fit is the rounded end of a cue, not a ball (:meth:`BallDetector._cue_end`), when its
# disc runs on into a straight body at least _BODY_R image radii long (from the fit's centre),
# narrower than _BODY_D of a ball's image diameter all along, and the disc is no wider across
# that body than _END_D of the diameter. A cue is narrowest at its tip (about 13 mm) and widest
# at its butt, about 30 mm (0.53 of a 57.15 mm ball; common practice, from memory; the
# renderer draws 13-30 mm); a forearm or hand is wider than a ball. A ball's own foreground
# across its centre is its diameter: the cue ball at the strike on lamp_50fps (frame 25, the
# shaft running off it 0.33-0.37 wide) measured 1.17; of 170 fits within 30 mm of a true ball
# in the first 70 frames of uneven_60fps and lamp_50fps (the player down on the shot) no other
# had a body 4 radii long; the 165 fits on the arms and hands there with one had discs
# 0.92-1.51 wide (a hand or sleeve, not a cue's end: left to the other tests). The butt cap of
# cushion_check frame 3978 measured 0.60 with its body 0.58-0.68 over 2-3.5 radii, running on
# past 8 radii. Not published figures.
_BODY_R = 4.0
_BODY_D = 0.75
_END_D = 0.8
# Least share of the ring a strict seed (inside an arm or cue component) must leave free
# before it is fitted, below _ISOLATED_SHARE: seven of its 64 samples, a fit's move of several
# pixels. Measured on bank_practice (all) and cushion_check (first 1200 frames): the 34 strict
# seeds whose fits passed moved at most 1.6 px and all had at least this share free at the
# seed, and 4,700 of 5,300 strict seeds (all failing) did not.
_SEED_RING_SLACK = 7 / 64
# Balls closer than this many radii (centre to centre) are refitted with the rays toward each
# other left out of the local edge; a ray is left out where its outline point lies within
# _AVOID_R radii of the neighbour's centre (+-27 degrees round the contact of touching balls);
# the local edge needs at least _MIN_FREE_RAYS rays left (a quarter of the outline).
_NEAR_R = 2.4
# Least centre distance, in radii, of two overlapping sharp fits that
# :func:`_held_apart_fits` moves apart: uneven_60fps's rack fits overlapped down to 1.54 R;
# lamp_50fps's cue ball and a false fit on the cue tip beside it lay 1.24 R apart.
_HELD_APART_MIN_R = 1.5
# Share of a sharp fit's own contrast against the empty table (mean over its disc) that
# changed since the previous frame, above which the fit is of a ball in motion
# (:meth:`BallDetector._at_rest`): measured mean change / contrast, balls at rest 0.00-0.08
# (uneven_60fps's rack, even in the break's frame), fast balls 0.79-1.17 (multi_rail_30fps's
# cue ball at 1.2-2 m/s under an open 1/30 s shutter, split into two sharp fits; uneven's at
# 3.4 m/s), a cue ball rolling 250 mm/s at 30 fps 0.22 (counted at rest: held apart from a
# real neighbour it is still a solid ball).
_MOVED_SHARE = 0.35
# Least centre distance, in radii, of two sharp fits whose refits :meth:`BallDetector._refit_starts`
# starts a ball's image diameter apart: closer, they are one ball fitted twice (the distance
# under which :meth:`BallDetector._dedupe` keeps one of two rows). uneven_60fps's touching 3
# and 7 were first fitted 1.37 R apart.
_SPREAD_MIN_R = 1.2
_AVOID_R = 1.2
_MIN_FREE_RAYS = 12
# Half side, in largest ball image radii, of the square patch round a sharp ball's centre
# whose shift since its fit (:meth:`BallDetector._nudged`) is measured: the whole rim and a
# little cloth beyond it, where a translation changes the pixels.
_NUDGE_PATCH_R = 1.3
# Rounds of seeding what the fitted balls leave unexplained in a piece of foreground.
_REMAINDER_ROUNDS = 2
# A sharp fit of a piece elongated beyond one ball (a ball with its cast shadow, or a slow
# streak) is fitted again from each end of the piece's long axis (:meth:`BallDetector._ends`);
# an end's fit replaces it where it lies more than _END_MOVE_MM away (a different answer, not
# the same one moved by noise), more of its disc is lit (luma above the empty table's, a share
# at least _END_LIT_GAIN higher: a cast shadow is never brighter than the cloth) and its fitted
# radius bias is at least _END_BIAS_GAIN_MM larger (an outline straddling ball and shadow takes
# the shadow-side terminator inside the limb: too small a circle). Chosen on
# benchmarks/rest_causes.py's stills (7 rooms x seeds 0, 1, codec and lossless, session 17):
# of the 86 end fits lying over 5 mm from the first fit, those rules took 22, every one nearer
# the truth (by 0.3-17.9 mm, 20 of them by over 4 mm). The lit share alone took 24, none over
# 2 mm worse; the radius bias alone 47, 18 of them 3-24 mm worse; a higher fit quality 54, 28
# worse: the bias gain is a second guard, not the test.
_END_MOVE_MM = 5.0
_END_LIT_GAIN = 0.05
_END_BIAS_GAIN_MM = 0.3
# A free piece of foreground holding more than this many ball images (at its centroid's scale),
# no streak, that its first fits do not explain is seeded again by a circle Hough transform
# (:meth:`BallDetector._cluster_retry`): in a touching cluster the foreground is one solid piece
# deepest between the balls (a rack: a filled triangle, whose distance transform peaks at its
# middle), while two touching balls (2 images) keep the waist split. Three touching balls
# cover about 3 images, less the limbs the foreground test misses: 2.5.
_CLUSTER_BALLS = 2.5
# Least vote of a Hough peak, as a share of the piece's strongest: on rendered 6-, 9- and
# 15-ball racks on electric-blue, blue, tan, grey and red cloth (balls upright and turned at
# random; scratch study of session 13, the racks of tests/test_detect.py among them) every
# ball's peak held 0.19 or more of the strongest but for a ball of the cloth's own hue (no
# outline against the cloth), and the peaks between balls (votes of the neighbours' rims) 0.07
# or less: between the two.
_CLUSTER_VOTE_SHARE = 0.12
# A room for a ball no fit took in a touching cluster (:meth:`BallDetector._rooms`): the
# leftover's distance transform at least this share of the image radius deep. Geometry of
# touching circles: the creases between three leave a hole of inscribed radius 0.155 r, a fit
# 3 mm off (0.1 R, the racked balls' usual error, tests/test_detect.py) a crescent 0.1 r wide;
# a ball no fit took leaves its disc less a pixel, or, where its shaded limb falls below the
# foreground threshold on dark cloth, its lit part, over half its radius deep.
_ROOM_DEPTH = 0.5
# A room ball is placed touching the fitted balls within this many radii of the room's point
# (touching neighbours lie 2 R from its centre; the room's deepest point can lie up to about
# half a radius off it where part of the disc is not foreground) ...
_ROOM_REACH = 2.6
# ... and stands when at least two of them touch it within this share of R (5.7 mm: two
# neighbours each off by the racked balls' usual 0.1-3 mm error, tests/test_detect.py).
_ROOM_TOUCH = 0.2
# A ball is outlined as dark (:meth:`BallDetector._dark_body`) when the median brightness
# ratio of its disc is below this share of the cloth round it: a black ball (albedo about 0.1
# against green cloth's 0.3-0.4, a = 0.3 lit alike) and its shaded limb; the darkest coloured
# balls and a cast shadow (at least half the cloth's light, :func:`ballness`) lie above.
# Not a published figure (see the measured ratios in the commit).
_DARK_BODY = 0.35
# The local edge places the outline by the colour off the surround's hue
# (:func:`_off_hue_edges`) where the rim's colour lies at least this sine (about 14 degrees)
# off the surround's, twice the cloth's texture and a dark rim's noise (not a measured
# figure); every ray so when they are at least _HUE_RAYS as many as the mixing model's rays,
# else those rays so and the rest by the two-colour mixing.
_HUE_STEP = 0.25
_HUE_RAYS = 0.75
# A cast shadow is told from a ball only beside the ball casting it: its disc lies within this
# many radii (centre to centre) of a ball found in the same frame. A ball's shadow from a lamp
# e above the cloth is an ellipse centred R / tan e from the ball's centre, R / sin e long
# each way along the light; a sphere fitted inside it lies about that far (R / tan e is 1.2 R at
# e = 39 degrees; 1.65..1.9 R measured on the extra set's lamp_50fps, e about 39 degrees) and
# within 3 R for lamps 30 degrees or more above the ball. Farther, a dark ball of the cloth's
# hue whose fit has slid half onto its own shadow is kept rather than taken for a neighbour's
# shadow.
_CASTER_R = 3.0
# Two fits of one ball (centres within a radius: a fit astride the ball and its own shadow, and
# the fit of the ball's lit pixels, :meth:`BallDetector._caster_of`) are told apart by the
# outline evidence of each (:meth:`BallDetector._hue_step`): the lit pixels' fit is taken where
# its outline's hue step beats the other's by at least this much (a sine; the two fits of
# uneven_60fps's maroon 7 differ by 0.04-0.16 where the lit pixels' fit is the nearer the
# truth by 5-14 mm; not a tuned figure beyond that clip).
_STEP_GAIN = 0.03
# The outline evidence's bands: from 0.5 to 1.5 px either side of a fit's predicted outline
# (the blurred rim's half-width about the edge; the local edge's own bands start at 1.75 px).
_STEP_BAND_PX = (0.5, 1.0, 1.5)
# The evidence's compass search (:meth:`BallDetector._hue_climb`): its step sizes (mm, about
# 1.6, 0.8, 0.4 and 0.2 px at uneven_60fps's 2.5 mm/px) and at most _CLIMB_MOVES moves.
_CLIMB_STEPS_MM = (4.0, 2.0, 1.0, 0.5)
_CLIMB_MOVES = 20
_COMPASS = np.array([[1.0, 0.0], [-1.0, 0.0], [0.0, 1.0], [0.0, -1.0], [0.7071, 0.7071], [0.7071, -0.7071], [-0.7071, 0.7071], [-0.7071, -0.7071]])
_COMPASS.flags.writeable = False
# A dim ball's outline RMS is accepted up to this many times the spread the image noise alone
# gives its outline (:meth:`BallDetector._outline_noise_mm`) where that exceeds ``max_rms_mm``
# (the model's own misfit on a clean rim): the larger of the two, not their quadrature sum,
# so a rim whose noise spread is well under the budget keeps the budget exactly (the sum
# raised every limit a little: an arm's fit at 2.01 mm passed 2.02 on tele_120fps, session 10).
# The 48 rays' errors are correlated over about _RAY_CORR rays (a third of the outline), so
# their RMS holds about three independent errors: sqrt(chi2_0.99(3) / 3) = sqrt(11.34 / 3) =
# 1.94 is its 99th percentile for normal errors (chi-square table).
_RMS_NOISE_Z = 1.94
# Largest outline noise (px) that still marks a rim: on bare cloth the slope of noise alone
# gives about 1.2 px (0.8 noise sigmas per px: rendered cloth of noise sigma 2 in
# tests/test_detect.py), so a rim that leaves 0.5 px has a slope 2.5 times what noise alone
# gives. A fit whose outline is noisier (a pocket's dark mouth, bare cloth) found no rim, and its
# limit is not widened (2.2-3.7 px measured on a pocket of phone_wide_30fps, 0.36-0.53 px on
# the dim blue ball in the dark corner beside it). Not a published figure.
_MAX_NOISE_PX = 0.5
# Least share of agreeing rays for that allowance: noise scatters a dim rim's points all round
# but leaves them on it, while a fit that half the rays disagree with has lost part of its rim
# (to a shadow, a shaded limb, a streak's faint end), and its RMS over the rest tells nothing
# of the sphere. On phone_wide_30fps the dim blue ball's fits refused at 2.1-3.2 mm agreed on
# 0.77-0.96 of the rays in most frames and were 0.7-6 mm off; those the quadrature allowance
# let in that were 7-12 mm off along their streak agreed on 0.46-0.69 (session 10's branch
# shadow). A three-quarter share lies between; not a published figure.
_NOISY_MIN_SHARE = 0.75
# The foreground threshold's noise sigma is the model's whole colour difference's, but at most
# this many times its chromaticity distortion's (:attr:`vision.background.Background.
# chroma_sigma`), which a change of light that only scales the colours leaves alone: in steady
# light the ratio of the two running estimates stayed at 1.00-1.15 (lamp_50fps), 1.29-1.76
# (dim_540p_60fps) and 1.24-2.64 (phone_wide_30fps; a codec's noise lies mostly along the
# brightness), every 10th frame of each clip; a player's shadow over the cheap camera's table
# (cheapwide_25fps) raised it to 5.6 (median) and 6.9, and the threshold with it from 0.12 to
# 0.48, losing a dark red ball for the rest of the clip. 3 lies between; not a published figure.
_LIGHT_CHANGE_RATIO = 3.0


@dataclass(frozen=True)
class DetectConfig:
    """Knobs of the detector (px, mm, noise sigmas).

    ``fg_sigmas`` / ``fg_min_score``: a pixel is foreground when its :func:`ballness` exceeds
    this many noise sigmas and this score. ``cell_px``: side of the change-detection
    cells; ``change_dn``: mean change of a cell that marks it changed. ``min_inlier_share``:
    least share of the 48 outline rays that must agree with the sphere; ``max_rms_mm``: largest
    RMS distance of the agreeing rays from the model for a sharp ball (doubled for a blurred one),
    raised for a dim rim to the spread the image noise alone gives its outline where that is
    larger (:meth:`BallDetector._outline_noise_mm`, ``_RMS_NOISE_Z``; only for fits most rays
    agree with, ``_NOISY_MIN_SHARE``).
    ``max_half_travel_mm``: longest half streak accepted (4 m/s for 1/30 s is 67 mm).
    ``local_min_sigmas``: least rim contrast, in noise sigmas of a colour
    difference, for a ray of the local sub-pixel edge. ``nudge_mm``: a sharp ball whose cells of
    the change grid did not change is still refitted when its image patch has shifted by more
    than this (mm on the table, by a Lucas-Kanade step against its patch when last fitted:
    :meth:`BallDetector._nudged`). ``update_every_s``: interval of the background's running update. ``background``: the
    background model's own knobs.
    """

    fg_sigmas: float = 5.0
    fg_min_score: float = 0.12
    cell_px: int = 8
    change_dn: float = 5.0
    min_inlier_share: float = 0.45
    max_rms_mm: float = 2.0
    local_min_sigmas: float = 6.0
    # Measured: a rendered 0.5 mm nudge reads 0.50-0.64 mm, the renderer's sensor noise alone
    # under 0.06 mm (tests/test_detect.py's setups); balls at rest (truth) in the encoded clips,
    # against their patch when last fitted, read at most 0.27 mm (bank_practice, first 900
    # frames), 0.23 (uneven_60fps), 0.46 (lamp_50fps), 0.61 (phone_wide_30fps) and 1.2
    # (dim_540p_60fps: 49 of 622 checks above 0.35 mm, each one refit more than needed).
    nudge_mm: float = 0.35
    max_half_travel_mm: float = 200.0
    update_every_s: float = 0.25
    background: BackgroundConfig = field(default_factory=BackgroundConfig)

    def __post_init__(self) -> None:
        for name in ("fg_sigmas", "fg_min_score", "change_dn", "max_rms_mm", "max_half_travel_mm", "update_every_s", "nudge_mm"):
            if not getattr(self, name) > 0:
                raise ValueError(f"DetectConfig.{name} = {getattr(self, name)!r} must be positive")
        if int(self.cell_px) < 2:
            raise ValueError(f"DetectConfig.cell_px = {self.cell_px!r} must be at least 2 px")
        if not 0 < self.min_inlier_share <= 1:
            raise ValueError(f"DetectConfig.min_inlier_share = {self.min_inlier_share!r} must lie in (0, 1]")


def empty_detections() -> pd.DataFrame:
    """A correctly typed detections frame with no rows."""
    return pd.DataFrame(
        {
            "frame": pd.Series(dtype="int64"),
            "t": pd.Series(dtype="float64"),
            **{c: pd.Series(dtype="float64") for c in ("x", "y", "u", "v", "quality")},
            "colour": pd.Series(dtype="object"),
            "pattern": pd.Series(dtype="object"),
            **{c: pd.Series(dtype="float64") for c in ("blur_x", "blur_y", "sigma_mm")},
        }
    )


def ballness(image: np.ndarray, background: np.ndarray) -> np.ndarray:
    """How unlike the background, *other than by shade*, each pixel is: (...) float32 >= 0.

    After Horprasert, Harwood & Davis ("A statistical approach for real-time robust background
    subtraction and shadow detection", ICCV Frame-Rate Workshop 1999): a pixel's colour I against
    the background B splits into a brightness distortion ``a = I.B / B.B`` and a chromaticity
    distortion ``|I - a B|``. A shadow only dims the cloth (a < 1, small chromaticity change);
    a ball changes the chromaticity (coloured and white balls on coloured cloth), or is brighter
    than the cloth (white on grey), or darker than any cast shadow (black). So the score is the
    chromaticity distortion over ``|B|`` (floored at 30 DN) plus the brightness beyond 1.15 plus
    1.5 x the darkness below a = 0.5 (from memory: a lamp's cast shadow leaves at least half
    the light on the cloth under several lamps and room light; not a measured figure).
    ``image`` and ``background`` are (..., 3) arrays of the same shape.
    """
    B = np.asarray(background, np.float32)
    return _ballness(np.asarray(image, np.float32), B, *_background_terms(B))


def _background_terms(B: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The parts of :func:`ballness` that depend on the background alone, for (..., 3) float32
    ``B``: ``B.B``, ``max(B.B, 1)`` and ``max(|B|, 30)``, each (...) float32. A model that
    stays the same over many frames has them made once (:meth:`BallDetector._reaching`)."""
    bb = _dot3_f32(B, B)
    return bb, np.maximum(bb, 1.0), np.maximum(np.sqrt(bb), COLOUR_FLOOR_DN)


def _ballness(I: np.ndarray, B: np.ndarray, bb: np.ndarray, bb1: np.ndarray, bn: np.ndarray) -> np.ndarray:
    """:func:`ballness` of (..., 3) float32 ``I`` against ``B`` with the background's terms of
    :func:`_background_terms` given: the same float32 operations in the same order, written
    in place (each temporary of a full frame costs as much as the arithmetic)."""
    ib = _dot3_f32(I, B)
    return _ballness_of(ib, ib / bb1, _dot3_f32(I, I), bb, bn)


def _ballness_of(ib: np.ndarray, a: np.ndarray, s: np.ndarray, bb: np.ndarray, bn: np.ndarray) -> np.ndarray:
    """:func:`_ballness` from its dot products, each (...) float32: ``ib`` = I.B, ``a`` =
    I.B / max(B.B, 1), ``s`` = I.I (overwritten with the result), ``bb`` = B.B, ``bn`` =
    max(|B|, 30); for a caller that has them already (:meth:`BallDetector._edges`)."""
    # |I - a B|^2 = I.I - 2 a I.B + a^2 B.B: three dot products instead of a (..., 3) temporary
    # (float32 rounding of the difference is below 0.1 DN here, far under any threshold).
    t = 2.0 * a
    t *= ib
    s -= t
    np.multiply(a, a, out=t)
    t *= bb
    s += t
    np.maximum(s, 0.0, out=s)
    np.sqrt(s, out=s)
    s /= bn
    np.subtract(a, LIT_RATIO, out=t)
    np.maximum(t, 0.0, out=t)
    s += t
    np.subtract(DARK_RATIO, a, out=t)
    np.maximum(t, 0.0, out=t)
    t *= DARK_WEIGHT
    s += t
    return s


# One row of ones: OpenCV's channel sum as a 1 x 3 colour transform (read only).
_ONES_1X3 = np.ones((1, 3), np.float32)
_ONES_1X3.flags.writeable = False


def _dot3_f32(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """(...) float32 dot products over the last axis (length 3) of two float32 arrays of one
    shape: ``np.einsum("...c,...c->...", a, b)`` to the last bit (each product rounded to
    float32, the three summed in channel order; tests/test_detect.py) by OpenCV's per-element
    multiply and a 1 x 3 colour transform, about twice as fast on an image."""
    shape = a.shape[:-1]
    if a.size == 0:
        return np.zeros(shape, np.float32)
    if a.ndim != 3:
        a, b = a.reshape(-1, 1, 3), b.reshape(-1, 1, 3)
    return cv2.transform(cv2.multiply(a, b), _ONES_1X3).reshape(shape)


# --- geometry --------------------------------------------------------------------------------
def sphere_outline_px(camera: Camera, centres_mm: np.ndarray, radius_mm: float, n: int = 32, rays: RayMap | None = None) -> np.ndarray:
    """(N, n, 2) pixels of the silhouettes of spheres centred at (N, 3) table points (mm).

    The silhouette is the image of the tangency circle: centre ``X - v R^2 / |v|^2`` and radius
    ``R sqrt(1 - R^2 / |v|^2)`` in the plane normal to ``v = X - C`` (C the camera centre).
    ``rays``: the camera's :class:`RayMap`, whose projection (the camera's, without its
    generality) is used when given.
    """
    X = np.asarray(centres_mm, float).reshape(-1, 3)
    v = X - camera.centre_mm
    d2 = np.sum(v * v, axis=1, keepdims=True)
    q = X - v * radius_mm**2 / d2
    rho = radius_mm * np.sqrt(1 - radius_mm**2 / d2)
    vh = v / np.sqrt(d2)
    a = np.where(np.abs(vh[:, 2:3]) < 0.9, np.array([[0.0, 0.0, 1.0]]), np.array([[1.0, 0.0, 0.0]]))
    e1 = _cross(vh, a)
    e1 /= np.sqrt(np.sum(e1 * e1, axis=1, keepdims=True))
    e2 = _cross(vh, e1)
    ang = np.linspace(0, 2 * np.pi, n, endpoint=False)
    pts = q[:, None] + rho[:, None] * (np.cos(ang)[None, :, None] * e1[:, None] + np.sin(ang)[None, :, None] * e2[:, None])
    return (camera if rays is None else rays).project(pts.reshape(-1, 3)).reshape(len(X), n, 2)


def _cross(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise cross product of (N, 3) arrays, written out (``np.cross`` costs tens of us of
    argument handling per call, more than the arithmetic on a few rows)."""
    return np.column_stack(
        [a[:, 1] * b[:, 2] - a[:, 2] * b[:, 1], a[:, 2] * b[:, 0] - a[:, 0] * b[:, 2], a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]]
    )


def _dot3(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Dot products over a last axis of length 3, (...): channel by channel, in the order
    ``np.sum`` adds three values (numpy's reduction over a short last axis costs several times
    the arithmetic)."""
    return a[..., 0] * b[..., 0] + a[..., 1] * b[..., 1] + a[..., 2] * b[..., 2]


def _norm3(a: np.ndarray) -> np.ndarray:
    """Euclidean norms over a last axis of length 3, (...); as ``np.linalg.norm(a, axis=-1)``."""
    return np.sqrt(_dot3(a, a))


def _median(x: np.ndarray) -> float:
    """Median of a short 1-D array by ``np.partition`` (``np.median``'s generic reduction
    machinery dominates its cost on 48 values)."""
    n = len(x)
    h = n // 2
    # A copy partitioned in place: np.partition's own steps without its dispatch wrappers.
    q = x.copy()
    if n % 2:
        q.partition(h)
        return float(q[h])
    q.partition((h - 1, h))
    return 0.5 * float(q[h - 1] + q[h])


def _percentile_linear(x: np.ndarray, q: float) -> float:
    """The ``q``-th percentile (0..100) of a non-empty 1-D float64 array without NaN by linear
    interpolation between the order statistics at ``(n - 1) q / 100`` (Hyndman & Fan 1996,
    definition 7): ``float(np.percentile(x, q))`` to the last bit (the same virtual index,
    partition and interpolation arithmetic, numpy's ``_lerp`` included), without its argument
    handling and generic reduction machinery, which cost several times the partition on the
    few hundred pixels of a ball's disc (tests/test_detect.py)."""
    n = len(x)
    v = (n - 1) * (q / 100)
    if v >= n - 1:
        return float(np.max(x))
    i = math.floor(v)
    t = v - i
    s = x.copy()
    s.partition((i, i + 1))
    a, b = float(s[i]), float(s[i + 1])
    d = b - a
    # numpy's _lerp: from the nearer end, so t = 1 gives b exactly.
    return b - d * (1 - t) if t >= 0.5 else a + d * t


def _share(mask: np.ndarray) -> float:
    """Share of True in a non-empty bool array: ``float(np.mean(mask))`` to the last bit (the
    float64 count over the size, both exact), without ``np.mean``'s argument handling, which
    costs several times the count on the few dozen to few hundred samples asked per fit."""
    return np.count_nonzero(mask) / mask.size


def _mean1(x: np.ndarray) -> float:
    """Mean of a non-empty 1-D float64 array: ``float(np.mean(x))`` to the last bit (the same
    pairwise ``np.add.reduce`` over the same elements, divided by their count)."""
    return float(np.add.reduce(x) / len(x))


def _swept_outline_px(camera: Camera, x: float, y: float, half: float, heading: float, R: float, rays: RayMap | None = None) -> np.ndarray:
    """Convex hull (M, 2) px of the silhouette of a sphere swept along a segment (table frame).
    ``rays``: the camera's :class:`RayMap`, whose lean single-sphere outline
    (:meth:`RayMap.sphere_outline`) serves a sharp ball."""
    if half <= 0 and rays is not None:
        return rays.sphere_outline(x, y, R)
    k = 1 + 2 * int(math.ceil(half / (0.5 * R)))
    s = np.linspace(-half, half, k)
    cen = np.column_stack([x + s * math.cos(heading), y + s * math.sin(heading), np.full(k, R)])
    pts = sphere_outline_px(camera, cen, R, 32).reshape(-1, 2)
    if k == 1:
        return pts
    return cv2.convexHull(pts.astype(np.float32)).reshape(-1, 2).astype(float)


def _ray_polygon(c: np.ndarray, dirs: np.ndarray, poly: np.ndarray) -> np.ndarray:
    """Distance from ``c`` along each (K, 2) unit direction to the boundary of the convex (or
    star-shaped about c) polygon (M, 2); the farthest crossing, NaN if none.

    The outlines here are convex and hold ``c``, so each ray leaves through the one edge whose
    ends' angles about ``c`` bracket its own (:func:`_ray_polygon_convex`, with the same
    arithmetic for that edge); the search of every edge (:func:`_ray_polygon_all`) stands
    where that does not give a crossing ahead of ``c`` on every ray."""
    t = _ray_polygon_convex(c, dirs, poly)
    if (t > 0).all():  # False for NaN
        return t
    return _ray_polygon_all(c, dirs, poly)


def _ray_polygon_convex(c: np.ndarray, dirs: np.ndarray, poly: np.ndarray) -> np.ndarray:
    """:func:`_ray_polygon` for a convex polygon (M, 2), either orientation, holding ``c``:
    the crossing of each (K, 2) unit direction with the edge whose end vertices' angles about
    ``c`` bracket the direction's angle (K,); whether ``c`` is inside is not checked (see
    :func:`_ray_polygon`)."""
    m = len(poly)
    rel = poly - c
    phi = np.arctan2(rel[:, 1], rel[:, 0])
    order = np.argsort(phi)
    ang = _RAY_DIRS_ATAN2 if dirs is _RAY_DIRS else np.arctan2(dirs[:, 1], dirs[:, 0])
    pos = np.searchsorted(phi[order], ang)
    hi, lo = order[pos % m], order[(pos - 1) % m]
    # The edge runs from the earlier vertex of the pair in the polygon's own order.
    a = np.where((hi - lo) % m == 1, lo, hi)
    p0 = poly[a]
    e = poly[(a + 1) % m] - p0
    wx, wy = p0[:, 0] - c[0], p0[:, 1] - c[1]
    ex, ey = e[:, 0], e[:, 1]
    # c + t d = p0 + s e, as in _ray_polygon_all; a ray along its edge (|d x e| = 0, only
    # when c is not inside) gives NaN.
    den = dirs[:, 0] * ey - dirs[:, 1] * ex
    return (wx * ey - wy * ex) / np.where(den == 0, np.nan, den)


def _ray_polygon_all(c: np.ndarray, dirs: np.ndarray, poly: np.ndarray) -> np.ndarray:
    """:func:`_ray_polygon` by crossing every ray with every edge."""
    p0 = poly
    e = np.empty_like(poly)  # (M, 2) edges p[i + 1] - p[i], the last closing the polygon
    e[:-1] = poly[1:] - poly[:-1]
    e[-1] = poly[0] - poly[-1]
    wx, wy = p0[:, 0] - c[0], p0[:, 1] - c[1]
    ex, ey = e[:, 0], e[:, 1]
    dx, dy = dirs[:, 0:1], dirs[:, 1:2]
    # Solve c + t d = p0 + s e for t, s: cross products in 2-D; parallel edges (|d x e| below
    # 1e-12) cross nowhere.
    den = dx * ey[None] - dy * ex[None]  # d x e, (K, M)
    flat = np.abs(den) < 1e-12
    den = np.where(flat, 1.0, den)
    t = (wx * ey - wy * ex)[None] / den
    sv = (wx[None] * dy - wy[None] * dx) / den
    ok = (sv >= -1e-9) & (sv <= 1 + 1e-9) & (t > 0) & ~flat
    out = np.max(np.where(ok, t, -np.inf), axis=1)
    out[~np.isfinite(out)] = np.nan
    return out


def _residuals(P: np.ndarray, C: np.ndarray, d: np.ndarray, R: float, capsule: bool) -> np.ndarray:
    """Distance (mm) of each grazing ray (origin C, unit directions d (K, 3)) from the ball's
    centre (R above the cloth), or from the segment it swept, minus the outline radius
    ``R - bias``: zero when the ray is tangent. ``P`` is (M, 3) rows (x, y, bias) or (M, 5) rows
    (x, y, bias, half length, heading), evaluated together (the Jacobian's finite differences
    are one call); ``bias`` (mm) absorbs the inward shift of the found outline where the
    sphere's shading darkens toward its limb (symmetric, so it does not move the centre). A last
    residual per row holds the bias to its prior, N(0, ``_BIAS_SIGMA_MM``). Returns (M, K + 1).
    """
    P = np.atleast_2d(np.asarray(P, float))
    wx = (P[:, 0] - C[0])[:, None]
    wy = (P[:, 1] - C[1])[:, None]
    wz = R - C[2]
    dx, dy, dz = d[None, :, 0], d[None, :, 1], d[None, :, 2]
    # n = w x d for every row and ray, (M, K) per component (stacking costs more than the
    # arithmetic on a few hundred values).
    nx = wy * dz - wz * dy
    ny = wz * dx - wx * dz
    nz = wx * dy - wy * dx
    if capsule:
        half = np.maximum(P[:, 3], 0.0)[:, None]
        ex, ey = np.cos(P[:, 4])[:, None], np.sin(P[:, 4])[:, None]
        # a = e x d with e = (ex, ey, 0); s the point of the segment nearest the ray.
        ax, ay, az = ey * dz, -ex * dz, ex * dy - ey * dx
        den = np.maximum(ax * ax + ay * ay + az * az, 1e-12)
        s = np.clip(-(nx * ax + ny * ay + nz * az) / den, -half, half)
        nx, ny, nz = nx + s * ax, ny + s * ay, nz + s * az
    dist = np.sqrt(nx * nx + ny * ny + nz * nz)
    return np.concatenate([dist - (R - P[:, 2:3]), P[:, 2:3] / _BIAS_SIGMA_MM], axis=1)


def _residuals_jacobian(p: np.ndarray, C: np.ndarray, d: np.ndarray, R: float, capsule: bool) -> tuple[np.ndarray, np.ndarray]:
    """Residuals (K + 1,) of :func:`_residuals` for one parameter row ``p`` and their Jacobian
    (K + 1, len(p)), analytic.

    With ``n = w x d + s (e x d)`` (``s`` the point of the segment nearest the ray, clipped to
    the half length) and ``dist = |n|``: ``d dist / d q = n . (d n / d q) / dist``, holding
    ``s`` fixed where it is inside the segment (there ``d dist / d s = 0``: the envelope
    theorem) and moving it with the half length where it is clipped. ``d n / d x = e_x x d``,
    ``d n / d y = e_y x d``, ``d n / d heading = s (e' x d)`` with ``e' = d e / d heading``;
    the bias enters as ``+1`` (the outline radius is ``R - bias``), and its prior row as
    ``1 / _BIAS_SIGMA_MM``.
    """
    K = len(d)
    dx, dy, dz = d[:, 0], d[:, 1], d[:, 2]
    wx, wy, wz = p[0] - C[0], p[1] - C[1], R - C[2]
    # n = w x d, written out.
    nx = wy * dz - wz * dy
    ny = wz * dx - wx * dz
    nz = wx * dy - wy * dx
    J = np.zeros((K + 1, len(p)))
    if capsule:
        half = max(float(p[3]), 0.0)
        ex, ey = math.cos(p[4]), math.sin(p[4])
        # e x d with e = (ex, ey, 0).
        ax, ay, az = ey * dz, -ex * dz, ex * dy - ey * dx
        den = np.maximum(ax * ax + ay * ay + az * az, 1e-12)
        s_free = -(nx * ax + ny * ay + nz * az) / den
        s = np.clip(s_free, -half, half)
        nx, ny, nz = nx + s * ax, ny + s * ay, nz + s * az
    dist = np.sqrt(nx * nx + ny * ny + nz * nz)
    inv = 1.0 / np.maximum(dist, 1e-12)
    # e_x x d = (0, -dz, dy); e_y x d = (dz, 0, -dx).
    J[:K, 0] = (-ny * dz + nz * dy) * inv
    J[:K, 1] = (nx * dz - nz * dx) * inv
    J[:K, 2] = 1.0
    J[K, 2] = 1.0 / _BIAS_SIGMA_MM
    if capsule:
        clipped = (np.abs(s_free) > half) & (p[3] > 0)
        J[:K, 3] = np.where(clipped, np.sign(s_free) * (nx * ax + ny * ay + nz * az) * inv, 0.0)
        # e' x d with e' = (-sin, cos, 0).
        bx, by, bz = ex * dz, ey * dz, -ey * dy - ex * dx
        J[:K, 4] = s * (nx * bx + ny * by + nz * bz) * inv
    r = np.empty(K + 1)
    r[:K] = dist - (R - p[2])
    r[K] = p[2] / _BIAS_SIGMA_MM
    return r, J


def _spread_seeds(uv: np.ndarray, diam_px: np.ndarray, sweeps: int = 20, pairs: np.ndarray | None = None) -> np.ndarray:
    """Seeds ``uv`` (N, 2) px of one foreground piece moved apart until no two are closer
    than their balls' mean image diameter (``diam_px`` (N,) px each; only the pairs ``pairs``
    marks, (N, N) bool, when given), by Gauss-Seidel
    projection of the pairwise distance constraints (Jakobsen 2001), each pair's shortfall
    shared evenly. Two balls cannot overlap, but a piece of touching balls is deepest
    between them (a rack is a filled triangle), so its distance-transform peaks lie inward
    of the true centres and closer together than a diameter (uneven_60fps's touching 3 and 7
    started 3-4 px inward and were fitted 9-10 mm into the rack). Returns (N, 2) px."""
    p = np.array(uv, float)
    n = len(p)
    for _ in range(sweeps):
        moved = False
        for i in range(n):
            for j in range(i + 1, n):
                if pairs is not None and not pairs[i, j]:
                    continue
                d = p[j] - p[i]
                dist = math.hypot(d[0], d[1])
                need = 0.5 * (diam_px[i] + diam_px[j])
                if dist >= need - 1e-3 or dist < 1e-6:
                    continue
                step = 0.5 * (need - dist) * d / dist
                p[i] -= step
                p[j] += step
                moved = True
        if not moved:
            break
    return p


def _held_apart_fits(rows: list[dict], R: float, camera: Camera, sweeps: int = 50, still=None) -> list[dict]:
    """Detection rows with the centres of sharp fits that overlap (closer than a diameter
    ``2 R`` mm, table frame, but more than ``_HELD_APART_MIN_R`` radii apart: two balls
    biased toward each other, not one fitted twice nor a ball and a false fit on the cue's tip
    beside it, lamp_50fps's 1.24 R, whose push moved the struck cue ball 4.4 mm a frame
    before its start and timed the start 57 ms early) moved apart to a diameter: the least
    change in the fits' own least-squares cost (the Mahalanobis distance by each centre's
    covariance ``cov_xy``, (2, 2) mm^2) that keeps every such pair a diameter apart. Solved
    by projected Gauss-Seidel on the pairs' Lagrange multipliers (Jakobsen 2001's relaxation
    of distance constraints, weighted), the centres at each step placed where the first-order
    conditions put them for the multipliers so far (``c_i = c0_i - sum_j lambda_ij C_i n_ij``,
    ``n_ij`` the unit vector from i to j). Two solid balls cannot overlap; a fit pulled into
    its touching neighbours (a dark ball whose limb is taken for its shadow on one side while
    its neighbours' rays are left out on the other, uneven_60fps's rack) does. A fit whose
    outline leaves it free along the line (a one-sided outline, where the radius bias and
    the centre trade off) moves most. The rows moved get ``sigma_mm`` at least the move and
    their image centre (u, v) projected anew at ball-centre height by ``camera``. Returns new
    row dicts (the others as they were).

    ``still`` (a row -> bool, :meth:`BallDetector._at_rest`; None: every row) picks the
    fits taken part: only balls at rest. A fast ball's streak that the seeds split into two
    sharp fits 1.5 R apart (multi_rail_30fps's cue ball under an open shutter) is no pair of
    balls, and a moving ball's fit beside its own shadow's neither; pushing them a diameter
    apart moved the cue ball's reads 8-16 mm."""
    idx = [k for k, r in enumerate(rows) if not (r["blur_x"] or r["blur_y"]) and "cov_xy" in r]
    if len(idx) < 2:
        return rows
    c0 = np.array([[rows[k]["x"], rows[k]["y"]] for k in idx], float)
    d0 = np.linalg.norm(c0[:, None] - c0[None], axis=2)
    close = (d0 > _HELD_APART_MIN_R * R) & (d0 < 2 * R)
    if not close.any():
        return rows
    if still is not None:
        # Asked only of fits in an overlapping pair (each costs a disc's pixels).
        keep = [m for m in range(len(idx)) if not close[m].any() or still(rows[idx[m]])]
        idx = [idx[m] for m in keep]
        c0, d0 = c0[keep], d0[np.ix_(keep, keep)]
    n = len(idx)
    pairs = [(i, j) for i in range(n) for j in range(i + 1, n) if _HELD_APART_MIN_R * R < d0[i, j] < 3 * R]
    if not any(d0[i, j] < 2 * R for i, j in pairs):
        return rows
    # The least-squares covariance gives the shape (which way the outline leaves the centre
    # free); its size is the stated sigma's, which adds what the rays' scatter does not show
    # (radius bias, a coarse fit kept over the local one, an unsettled edge).
    cov = []
    for k in idx:
        C = np.asarray(rows[k]["cov_xy"], float)
        cov.append(C * float(rows[k]["sigma_mm"]) ** 2 / max(float(np.trace(C)) / 2, 1e-9))
    lam = {q: 0.0 for q in pairs}
    unit = {(i, j): (c0[j] - c0[i]) / d0[i, j] for i, j in pairs}

    def placed() -> np.ndarray:
        c = c0.copy()
        for (i, j), lv in lam.items():
            if lv > 0:
                c[i] -= lv * (cov[i] @ unit[(i, j)])
                c[j] += lv * (cov[j] @ unit[(i, j)])
        return c

    c = c0
    for _ in range(sweeps):
        worst = 0.0
        for i, j in pairs:
            c = placed()
            d = c[j] - c[i]
            dist = math.hypot(d[0], d[1])
            u = d / max(dist, 1e-9)
            unit[(i, j)] = u
            c = placed()
            dist = math.hypot(*(c[j] - c[i]))
            g = 2 * R - dist
            step = g / max(float(u @ (cov[i] + cov[j]) @ u), 1e-9)
            new = max(lam[(i, j)] + step, 0.0)
            if new > 0 or lam[(i, j)] > 0:
                worst = max(worst, abs(g))
            lam[(i, j)] = new
        if worst < 1e-4:
            break
    c = placed()
    out = list(rows)
    for m, k in enumerate(idx):
        step = math.hypot(*(c[m] - c0[m]))
        if step > 1e-6:
            uv = camera.project(np.array([[c[m, 0], c[m, 1], R]]))[0]
            out[k] = dict(rows[k], x=float(c[m, 0]), y=float(c[m, 1]), u=float(uv[0]), v=float(uv[1]),
                          sigma_mm=max(float(rows[k]["sigma_mm"]), step))
    return out


def _robust_fit(p0: np.ndarray, C: np.ndarray, d: np.ndarray, R: float, capsule: bool, iters: int = 10):
    """:func:`_robust_fit_general`, by :func:`_robust_fit_sharp` for a sharp ball and
    :func:`_robust_fit_streak` for a streak."""
    if not capsule:
        return _robust_fit_sharp(p0, C, d, R, iters)
    return _robust_fit_streak(p0, C, d, R, iters)


def _robust_fit_general(p0: np.ndarray, C: np.ndarray, d: np.ndarray, R: float, capsule: bool, iters: int = 10):
    """Levenberg-Marquardt (Marquardt 1963) with Tukey biweight weights (Holland & Welsch 1977,
    tuning constant 4.685 robust sigmas) on the ray residuals; the bias prior keeps weight 1.
    The Jacobian is analytic (:func:`_residuals_jacobian`); each iteration tries a ladder of
    four damping values in order and takes the first that lowers the cost.
    Returns (params, ray residuals (K,), ray weights (K,), covariance of x, y): the last a
    function returning the (2, 2) mm^2 matrix, evaluated only for the fit that is kept (most
    rounds' fits are starting points for the next)."""
    p = np.array(p0, float)
    n = len(p)
    lam = 1e-3
    K = len(d)
    lams = (1.0, 8.0, 64.0, 512.0)

    def clamp(q):
        q[2] = min(max(q[2], -0.3 * R), 0.3 * R)
        if capsule:
            q[3] = min(max(q[3], 0.0), 400.0)
        return q

    r, J = _residuals_jacobian(p, C, d, R, capsule)
    wts = np.ones(K + 1)
    for _ in range(iters):
        scale = max(1.4826 * _median(np.abs(r[:K])), 0.2)
        u = r[:K] / (4.685 * scale)
        wts[:K] = np.where(np.abs(u) < 1, (1 - u * u) ** 2, 0.0)
        JW = J * wts[:, None]
        A = JW.T @ J
        g = JW.T @ r
        cost = float(np.sum(wts * r * r))
        # (A + lambda diag(A)) delta = -g (Marquardt's scaling) for a ladder of damping values,
        # tried in order until one lowers the cost (most iterations take the first).
        damp = np.diag(A) + 1e-6
        for k in range(4):
            delta = np.linalg.solve(A + np.diag(lam * lams[k] * damp), -g)
            q = clamp(p + delta)
            rq = _residuals(q, C, d, R, capsule)[0]
            if float(np.sum(wts * rq * rq)) <= cost:
                break
        else:
            break
        p = q
        lam = max(lam * lams[k] / 5, 1e-6)
        r, J = _residuals_jacobian(p, C, d, R, capsule)
        if max(abs(delta[0]), abs(delta[1])) < 0.005:
            break
    A = (J * wts[:, None]).T @ J
    good = wts[:K] > 0
    dof = max(int(good.sum()) - n, 1)
    s2 = float(np.sum(wts[:K] * r[:K] ** 2)) / dof
    return p, r[:K], wts[:K], lambda: np.linalg.pinv(A)[:2, :2] * max(s2, 0.05**2)


def _robust_fit_sharp(p0: np.ndarray, C: np.ndarray, d: np.ndarray, R: float, iters: int = 10):
    """:func:`_robust_fit_general` for a sharp ball, parameters (x, y, bias) (mm, table frame;
    ``C`` (3,) the camera centre, ``d`` (K, 3) unit rays): the same Levenberg-Marquardt
    (Marquardt 1963) with Tukey biweight reweighting (Holland & Welsch 1977), step for step,
    written for three parameters: ``|w x d|^2`` is a quadratic in (x, y) whose per-ray
    coefficients are made once, so each evaluation of the residuals or the Jacobian is one
    small matrix product, the damped 3 x 3 normal equations are solved by their adjugate in plain floats, and
    the damping ladder is tried in order, stopping at the first value that lowers the cost (the
    one the batched ladder picks). The general form's broadcasting, stacking and batched LAPACK
    call cost several times its arithmetic on 48 rays. Agrees with :func:`_robust_fit_general`
    to rounding (tests/test_detect.py). Returns what it returns."""
    p = np.array(p0, float)
    K = len(d)
    dx, dy, dz = (np.ascontiguousarray(d[:, k]) for k in range(3))
    wz = R - C[2]
    # n = w x d = n0 + wx (e_x x d) + wy (e_y x d), e_x x d = (0, -dz, dy), e_y x d = (dz, 0, -dx),
    # n0 = (-wz dy, wz dx, 0); so |n|^2 is a quadratic in (wx, wy) with per-ray coefficients
    # made once: |n|^2 = [1, wx, wy, wx^2, wx wy, wy^2] Q (Q (6, K)), and the gradient's
    # numerators n . (d n / d wx), n . (d n / d wy) are [Q1 / 2 + wx Q3 + wy Q4 / 2,
    # Q2 / 2 + wx Q4 / 2 + wy Q5]: one small matrix product each instead of a dozen array
    # operations per evaluation (their cost, not the arithmetic, is what counts on 48 rays).
    dxx, dyy, dzz = dx * dx, dy * dy, dz * dz
    Q = np.empty((6, K))
    Q[0] = wz * wz * (dxx + dyy)
    Q[1] = -2.0 * wz * dx * dz
    Q[2] = -2.0 * wz * dy * dz
    Q[3] = dyy + dzz
    Q[4] = -2.0 * dx * dy
    Q[5] = dxx + dzz
    inv_sig = 1.0 / _BIAS_SIGMA_MM
    lams = (1.0, 8.0, 64.0, 512.0)
    C0, C1 = float(C[0]), float(C[1])

    def res_jac(px, py, pb):
        # Jacobian and residuals as one (4, K) array at (px, py, pb) (rows d/dx, d/dy, d/dbias,
        # residual), a new array each call: a trial step's are kept when the step is taken
        # (not worked out again from its parameters). |n|^2 and its two gradient numerators
        # come from one product with Q.
        wx, wy = px - C0, py - C1
        V = np.array([[1.0, wx, wy, wx * wx, wx * wy, wy * wy], [0.0, 0.5, 0.0, wx, 0.5 * wy, 0.0], [0.0, 0.0, 0.5, 0.0, 0.5 * wx, wy]]) @ Q
        dist = np.sqrt(np.maximum(V[0], 0.0))
        N = np.empty((4, K))
        N[:2] = V[1:] / np.maximum(dist, 1e-12)
        N[2] = 1.0
        N[3] = dist - (R - pb)
        return N

    lam = 1e-3
    px, py, pb = p.tolist()
    N = res_jac(px, py, pb)
    wts = np.ones(K)
    lo_b, hi_b = -0.3 * R, 0.3 * R
    for _ in range(iters):
        r = N[3]
        scale = max(1.4826 * _median(np.abs(r)), 0.2)
        u = r / (4.685 * scale)
        wts = np.maximum(1 - u * u, 0.0)  # Tukey: (1 - u^2)^2 inside |u| < 1, else 0
        wts *= wts
        # The normal matrix, the gradient and the cost from one product: [M; r] W [M; r]^T.
        (a0, b, c, g0), (_, e0, f, g1), (_, _, i0, g2), (_, _, _, rr) = ((N * wts) @ N.T).tolist()
        i0 += inv_sig * inv_sig  # the bias prior's row, weight 1
        g2 += inv_sig * (pb * inv_sig)
        cost = rr + (pb * inv_sig) ** 2
        # (A + lambda diag(A)) delta = -g (Marquardt's scaling) for a ladder of damping values,
        # tried in order until one lowers the cost (the first of the ladder that would);
        # a symmetric 3 x 3 system solved by its adjugate, delta = -adj(B) g / det B.
        for k in range(4):
            ll = lam * lams[k]
            a, e, i3 = a0 + ll * (a0 + 1e-6), e0 + ll * (e0 + 1e-6), i0 + ll * (i0 + 1e-6)
            c00, c01, c02 = e * i3 - f * f, c * f - b * i3, b * f - c * e
            c11, c12, c22 = a * i3 - c * c, b * c - a * f, a * e - b * b
            det = a * c00 + b * c01 + c * c02
            d0 = -(c00 * g0 + c01 * g1 + c02 * g2) / det
            d1 = -(c01 * g0 + c11 * g1 + c12 * g2) / det
            d2 = -(c02 * g0 + c12 * g1 + c22 * g2) / det
            qx, qy, qb = px + d0, py + d1, min(max(pb + d2, lo_b), hi_b)
            Nq = res_jac(qx, qy, qb)
            rq = Nq[3]
            if float(wts @ (rq * rq)) + (qb * inv_sig) ** 2 <= cost:
                break
        else:
            break
        px, py, pb = qx, qy, qb
        lam = max(ll / 5, 1e-6)
        N = Nq
        if max(abs(d0), abs(d1)) < 0.005:
            break
    p = np.array([px, py, pb])
    M, r = N[:3], N[3]
    A = (M * wts) @ M.T
    A[2, 2] += inv_sig * inv_sig
    dof = max(int(np.count_nonzero(wts > 0)) - 3, 1)
    s2 = float(wts @ (r * r)) / dof
    return p, r, wts, lambda: np.linalg.pinv(A)[:2, :2] * max(s2, 0.05**2)


def _streak_res_jac(p: list, dx: np.ndarray, dy: np.ndarray, dz: np.ndarray, C0: float, C1: float, wz: float, R: float) -> np.ndarray:
    """The Jacobian transposed (rows 0-4) and the ray residuals (row 5) of a streak, (6, K), at
    parameters ``p`` (x, y, bias, half length, heading; mm, rad, table frame), for rays ``d`` given by their
    components (K,) each, from a camera centre (C0, C1, R - wz): :func:`_residuals_jacobian`'s
    arithmetic, operation for operation, without the bias prior's row (added by the caller)."""
    px, py, pb, ph, pt = p
    wx, wy = px - C0, py - C1
    nx = wy * dz - wz * dy
    ny = wz * dx - wx * dz
    nz = wx * dy - wy * dx
    half = max(ph, 0.0)
    ex, ey = math.cos(pt), math.sin(pt)
    # e x d with e = (ex, ey, 0); s the point of the segment nearest the ray.
    ax, ay, az = ey * dz, -ex * dz, ex * dy - ey * dx
    den = np.maximum(ax * ax + ay * ay + az * az, 1e-12)
    s_free = -(nx * ax + ny * ay + nz * az) / den
    s = np.minimum(np.maximum(s_free, -half), half)  # np.clip's arithmetic without its wrappers
    nx, ny, nz = nx + s * ax, ny + s * ay, nz + s * az
    dist = np.sqrt(nx * nx + ny * ny + nz * nz)
    inv = 1.0 / np.maximum(dist, 1e-12)
    N = np.empty((6, len(dx)))
    N[0] = (-ny * dz + nz * dy) * inv
    N[1] = (nx * dz - nz * dx) * inv
    N[2] = 1.0
    if ph > 0:
        N[3] = np.where(np.abs(s_free) > half, np.sign(s_free) * (nx * ax + ny * ay + nz * az) * inv, 0.0)
    else:
        N[3] = 0.0
    # e' x d with e' = d e / d heading = (-sin, cos, 0).
    bx, by, bz = ex * dz, ey * dz, -ey * dy - ex * dx
    N[4] = s * (nx * bx + ny * by + nz * bz) * inv
    N[5] = dist - (R - pb)
    return N


def _robust_fit_streak(p0: np.ndarray, C: np.ndarray, d: np.ndarray, R: float, iters: int = 10):
    """:func:`_robust_fit_general` for a streak, parameters (x, y, bias, half length, heading)
    (mm, rad, table frame; ``C`` (3,) the camera centre, ``d`` (K, 3) unit rays): the same
    Levenberg-Marquardt (Marquardt 1963) with Tukey biweight reweighting (Holland & Welsch
    1977), step for step, as :func:`_robust_fit_sharp` is for a sharp ball: the residuals and
    Jacobian of a trial step are worked out together (:func:`_streak_res_jac`) and kept when the
    step is taken, the bias prior's row is added to the normal equations as a number, and the
    parameters are plain floats between steps. Agrees with :func:`_robust_fit_general` to
    rounding (tests/test_detect.py). Returns what it returns."""
    K = len(d)
    dx, dy, dz = (np.ascontiguousarray(d[:, k]) for k in range(3))
    C0, C1, wz = float(C[0]), float(C[1]), R - float(C[2])
    inv_sig = 1.0 / _BIAS_SIGMA_MM
    prior = np.zeros(5)
    lams = (1.0, 8.0, 64.0, 512.0)
    lo_b, hi_b = -0.3 * R, 0.3 * R
    p = [float(v) for v in p0]
    N = _streak_res_jac(p, dx, dy, dz, C0, C1, wz, R)
    wts = np.ones(K)
    lam = 1e-3
    for _ in range(iters):
        r = N[5]
        scale = max(1.4826 * _median(np.abs(r)), 0.2)
        u = r / (4.685 * scale)
        wts = np.where(np.abs(u) < 1, (1 - u * u) ** 2, 0.0)
        # The normal matrix, the gradient and the cost from one product: [M; r] W [M; r]^T.
        H = (N * wts) @ N.T
        A = H[:5, :5]
        A[2, 2] += inv_sig * inv_sig  # the bias prior's row, weight 1
        g = H[:5, 5]
        prior[2] = inv_sig * (p[2] * inv_sig)
        g += prior
        cost = float(H[5, 5]) + (p[2] * inv_sig) ** 2
        # (A + lambda diag(A)) delta = -g (Marquardt's scaling) for a ladder of damping values,
        # tried in order until one lowers the cost.
        damp = A.diagonal() + 1e-6
        for k in range(4):
            B = A.copy()
            B.flat[::6] += lam * lams[k] * damp
            delta = np.linalg.solve(B, -g)
            q = [a + b for a, b in zip(p, delta.tolist())]
            q[2] = min(max(q[2], lo_b), hi_b)
            q[3] = min(max(q[3], 0.0), 400.0)
            Nq = _streak_res_jac(q, dx, dy, dz, C0, C1, wz, R)
            rq = Nq[5]
            if float(wts @ (rq * rq)) + (q[2] * inv_sig) ** 2 <= cost:
                break
        else:
            break
        p, N = q, Nq
        lam = max(lam * lams[k] / 5, 1e-6)
        if max(abs(delta[0]), abs(delta[1])) < 0.005:
            break
    M, r = N[:5], N[5]
    A = (M * wts) @ M.T
    A[2, 2] += inv_sig * inv_sig
    dof = max(int(np.count_nonzero(wts > 0)) - 5, 1)
    s2 = float(wts @ (r * r)) / dof
    return np.array(p), r, wts, lambda: np.linalg.pinv(A)[:2, :2] * max(s2, 0.05**2)


def _shift_terms(ref: np.ndarray) -> tuple[np.ndarray, np.ndarray, tuple[float, float, float] | None]:
    """Gradients of a (h, w, 3) float32 patch along u and v (px^-1: the 3 x 3 Sobel operator
    divided by 8) and the inverse (a, b, c of the symmetric 2 x 2) of their normal matrix
    ``G^T G`` summed over pixels and channels, None where it is singular (a flat patch), for
    :func:`_patch_shift`."""
    gx = cv2.Sobel(ref, cv2.CV_32F, 1, 0, ksize=3) * np.float32(0.125)
    gy = cv2.Sobel(ref, cv2.CV_32F, 0, 1, ksize=3) * np.float32(0.125)
    a, b, c = float(np.sum(gx * gx)), float(np.sum(gx * gy)), float(np.sum(gy * gy))
    det = a * c - b * b
    return gx, gy, (None if det <= 1e-9 * max(a * c, 1.0) else (c / det, -b / det, a / det))


def _patch_shift(terms: tuple, ref: np.ndarray, now: np.ndarray) -> tuple[float, float]:
    """Translation (du, dv) px of the image content from patch ``ref`` to patch ``now`` (both
    (h, w, 3), pixel frame of ``vision.camera``) by one Lucas-Kanade step (Lucas & Kanade 1981):
    the least-squares d with ``now(x) = ref(x - d)`` to first order, ``d = (G^T G)^-1 G^T (ref -
    now)``, G the gradients of ``ref`` (``terms`` of :func:`_shift_terms`, which must not be
    singular). One linearised step reads a sharp rim's sub-pixel shift 8-13 % longer than
    OpenCV's iterated Lucas-Kanade does (tests/test_detect.py): it errs toward a refit."""
    gx, gy, (ia, ib, ic) = terms
    diff = ref - now
    bx, by = float(np.sum(gx * diff)), float(np.sum(gy * diff))
    return ia * bx + ib * by, ib * bx + ic * by


def _stated_sigma(cov_xy: np.ndarray, bias_mm: float, walk_mm: float, disagree_mm: float, half_mm: float) -> float:
    """Standard deviation (mm, per axis of the table frame) stated for a fitted centre: the
    least-squares covariance of x, y (``cov_xy`` (2, 2) mm^2, from independent rays) scaled by
    ``_RAY_CORR``, with ``_BIAS_SHARE`` of the fitted radius bias ``bias_mm`` and of the
    distance ``disagree_mm`` to a local fit the coarse one was kept over, ``_WALK_ROUNDS`` of
    the local edge's last move ``walk_mm`` (0 once it converged) and a tenth of a streak's
    half travel ``half_mm`` added, in quadrature but the last (see ``_RAY_CORR``); at least
    0.15 mm."""
    ls2 = max(float(np.trace(cov_xy)) / 2, 0.0)
    s2 = _RAY_CORR * ls2 + (_BIAS_SHARE * bias_mm) ** 2 + (_BIAS_SHARE * disagree_mm) ** 2 + (_WALK_ROUNDS * walk_mm) ** 2
    return max(math.sqrt(s2), 0.15) + 0.1 * half_mm


def _fit_rms(result) -> float:
    """RMS (mm) of the agreeing rays' residuals (Tukey weight above 0.2) of a fit result."""
    res, wts = result[1], result[2]
    inl = wts > 0.2
    return math.sqrt(_mean1(res[inl] ** 2)) if inl.any() else np.inf


def _chroma_off(I: np.ndarray, B: np.ndarray, a: np.ndarray) -> np.ndarray:
    """(...) chromaticity distortion of colours ``I`` (..., 3) against the empty table ``B``
    (..., 3) with brightness ratios ``a`` (...) = I.B / B.B: ``|I - a B|`` over the frame's own
    brightness ``|I|`` (floored at 20 DN), i.e. the sine of the angle between the two colours
    (Horprasert, Harwood & Davis 1999)."""
    return _norm3(I - a[..., None] * B) / np.maximum(_norm3(I), 20.0)


def _plain_body(chroma: np.ndarray, a: np.ndarray) -> bool:
    """Whether a ball's body is of the cloth's own hue and brightness, from its samples'
    chromaticity distortions ``chroma`` (N,) (:func:`_chroma_off`) and brightness ratios ``a``
    (N,) = I.B / B.B against the empty table: the median distortion is below ``_SAME_HUE`` and
    the median ratio within a factor ``_SAME_BRIGHT`` of 1. A white or black ball on grey
    cloth shares the cloth's (absent) hue but not its brightness, and keeps the colour step."""
    am = _median(a)
    return _median(chroma) < _SAME_HUE and 1.0 / _SAME_BRIGHT < am < _SAME_BRIGHT


def _dark_ring(a: np.ndarray, rho: np.ndarray, rho_pred: np.ndarray, half_win: float) -> tuple[np.ndarray, np.ndarray]:
    """Outline radius (K,) px and whether found (K,) bool of a ball of the cloth's own hue,
    from its brightness ratio to the empty table ``a`` (K, S) (Horprasert et al. 1999) sampled
    at radii ``rho`` (K, S) px from the centre's image, ``_STEP_PX`` apart.

    Seen from above, a sphere lit from above darkens toward its limb (Lambert's cosine law: the
    surface turns away from the lamps), and the cloth just outside its outline is the darkest
    of its shadow (the ball hides most of the lamps and the room from it), so the brightness
    along a ray falls to its least at about the outline and recovers beyond; a cast shadow
    only widens the trough outward. The outline is taken at the innermost sample within 0.02
    of the least brightness (after a 3-sample running mean, against noise) within ``half_win``
    px of the prediction ``rho_pred`` (K,): the trough's inner flank is the ball's own limb,
    the same all round, so what is left of the trough's offset is nearly symmetric and goes into
    the sphere fit's outline-bias term. A ray counts only when the trough is dark (below 0.92)
    and at least 0.1 darker than the ball inside it (the crown or body lit by the lamps).
    """
    K, n = a.shape
    sm = a.copy()
    sm[:, 1:-1] = (a[:, :-2] + a[:, 1:-1] + a[:, 2:]) / 3.0
    win = np.abs(rho - rho_pred[:, None]) <= half_win
    masked = np.where(win, sm, np.inf)
    low = masked.min(axis=1)
    first = np.argmax(win & (sm <= low[:, None] + 0.02), axis=1)
    rows = np.arange(K)
    inside = np.where(np.arange(n)[None, :] < first[:, None], sm, -np.inf).max(axis=1)
    ok = np.isfinite(low) & (low < 0.92) & (inside > low + 0.1) & (first > 0)
    return rho[rows, first], ok


def _shaded_share(I: np.ndarray, B: np.ndarray, r2: np.ndarray, stands_out: np.ndarray) -> float:
    """Share of a disc's pixels that differ from the empty table when the disc is shaded like a
    lit sphere, else 0: ``I``, ``B`` (N, 3) the frame and the empty table at the disc's pixels,
    ``r2`` (N,) their squared distance from the centre over the squared disc radius (0.7 of the
    ball's image radius), ``stands_out`` (N,) bool their colour test (:func:`ballness`).

    A ball of the cloth's own colour differs from the cloth by its shading only (Lambert's
    cosine law: brightest toward the lamps, falling toward the limb, plus the specular
    highlight), while a cast shadow or a ghost of a cue in the model is flat or dim: the
    brightness ratio ``a = I.B / B.B`` (Horprasert et al. 1999) must reach 1.1 somewhere (a
    crown or highlight brighter than the lit cloth, which no shadow is) and the inner 0.45 of
    the disc must be brighter than its outer ring (0.6..1) by 0.15 on average. Then a pixel
    counts when its colour stands out or its brightness is off the cloth's by 10 % (from
    memory: twice the cloth's texture and more than a noise sigma; not a measured figure).
    """
    a = np.einsum("nc,nc->n", I.astype(np.float32), B) / np.maximum(np.einsum("nc,nc->n", B, B), 1.0)
    core, ring = r2 <= 0.45**2, r2 >= 0.6**2
    if not core.any() or not ring.any():
        return 0.0
    if np.percentile(a, 95) < 1.1 or a[core].mean() - a[ring].mean() < 0.15:
        return 0.0
    return float(np.mean(stands_out | (np.abs(a - 1.0) > 0.1)))


def _run_through(row: np.ndarray, mid: int, reach: int) -> int:
    """Length (samples) of the run of True in the 1-D bool ``row`` that holds the True sample
    nearest ``mid`` within ``reach`` samples of it; 0 when there is none."""
    lo, hi = max(mid - reach, 0), min(mid + reach + 1, len(row))
    near = np.nonzero(row[lo:hi])[0]
    if len(near) == 0:
        return 0
    c = lo + int(near[np.argmin(np.abs(near + lo - mid))])
    off = np.nonzero(~row[c:])[0]
    end = c + (int(off[0]) if len(off) else len(row) - c)
    off = np.nonzero(~row[: c + 1][::-1])[0]
    start = c + 1 - (int(off[0]) if len(off) else c + 1)
    return end - start


def _free_pieces(seeds: list[dict], fits: list[dict | None] | None = None) -> dict[int, tuple[np.ndarray, tuple[int, int], list[int]]]:
    """The free pieces of foreground the seeds came from (seeds with ``piece``), by the piece's
    id: (component, origin px, indices of its seeds), with ``fits`` only the seeds fitted."""
    pieces: dict[int, tuple[np.ndarray, tuple[int, int], list[int]]] = {}
    for k, s in enumerate(seeds):
        if "piece" in s and (fits is None or fits[k] is not None):
            comp, origin = s["piece"]
            pieces.setdefault(id(comp), (comp, origin, []))[2].append(k)
    return pieces


def _cast_shadow(I: np.ndarray, B: np.ndarray) -> bool:
    """Whether a disc's pixels ``I`` (N, 3) over the empty table ``B`` (N, 3) are the cloth in
    a cast shadow rather than a ball: the mean colour is the mean empty table's scaled down
    (a shadow takes a lamp's share of the light away and leaves the cloth's own hue: Horprasert,
    Harwood & Davis 1999), by more than a factor ``_SAME_BRIGHT`` (brightness ratio of the means
    below its inverse) and with a chromaticity distortion of the means (:func:`_chroma_off`)
    below ``_HUE_STEP``, and no pixel brighter than the empty table by :func:`ballness`'s
    bound 1.15. A ball is raised and glossy: a lamp that lights it shows as a highlight (Blinn
    1977) or a lit side, which no shadow has, and a black or coloured ball on cloth of another
    hue is off the cloth's colour direction whatever its light. What is left alike is a dark
    ball of the cloth's hue, or a neutral one on grey cloth, with no lamp's highlight within
    0.7 of its radius: the caller also asks for the ball casting the shadow beside it
    (:meth:`BallDetector._drop_cast_shadows`)."""
    if len(I) == 0:
        return False
    I = np.asarray(I, np.float32)
    B = np.asarray(B, np.float32)
    a = _dot3(I, B) / np.maximum(_dot3(B, B), 1.0)
    if float(a.max()) > LIT_RATIO:
        return False
    am, same_hue = _mean_brightness_hue(I, B)
    return am < 1.0 / _SAME_BRIGHT and same_hue


def _mean_brightness_hue(I: np.ndarray, B: np.ndarray) -> tuple[float, bool]:
    """(brightness ratio, hue kept) of the mean of pixels ``I`` (N, 3, N >= 1) over the mean
    empty table ``B`` (N, 3) under them: the brightness distortion of the means and whether
    their chromaticity distortion (:func:`_chroma_off`) lies below ``_HUE_STEP`` (Horprasert,
    Harwood & Davis 1999)."""
    Im, Bm = np.asarray(I, np.float32).mean(axis=0), np.asarray(B, np.float32).mean(axis=0)
    am = float(Im @ Bm) / max(float(Bm @ Bm), 1.0)
    return am, float(_chroma_off(Im[None], Bm[None], np.array([am]))[0]) < _HUE_STEP


def _unlit(I: np.ndarray, B: np.ndarray) -> bool:
    """Whether a disc's pixels ``I`` (N, 3) over the empty table ``B`` (N, 3), those of the lit
    balls beside it left out, are a ball's cast shadow: dark (brightness ratio of the means,
    I.B / B.B, below 1 / ``_SAME_BRIGHT``) with no pixel brighter than the empty table by
    :func:`ballness`'s bound 1.15 (no highlight and no lit side of its own; Blinn 1977). The
    hue is not asked for, unlike :func:`_cast_shadow`: a shadow too deep for its own hue to be
    measured (its light is the room's and the cloth's bounce, and noise is a large share of
    its few DN) leaves the cloth's colour direction, as :meth:`BallDetector._edges` allows for
    deep shade; its caster beside it, found first, is what tells it from a dark ball. False
    for no pixels."""
    if len(I) == 0:
        return False
    I = np.asarray(I, np.float32)
    B = np.asarray(B, np.float32)
    a = _dot3(I, B) / np.maximum(_dot3(B, B), 1.0)
    Im, Bm = I.mean(axis=0), B.mean(axis=0)
    return float(a.max()) <= LIT_RATIO and float(Im @ Bm) / max(float(Bm @ Bm), 1.0) < 1.0 / _SAME_BRIGHT


def _off_white_cloth(I: np.ndarray, W: np.ndarray, C: np.ndarray) -> np.ndarray:
    """(N,) sine of the angle between colours ``I`` (N, 3) and the nearest non-negative mix
    ``a W + b C`` of a white ``W`` (3,) and the empty table ``C`` (N, 3) at the same pixels: the
    residual's length over ``|I|`` (floored at 20 DN, as :func:`_chroma_off`). Every pixel of a
    white ball is such a mix whatever its shading (Lambert's cosine law scales ``a``), the bounce
    light from the cloth or motion blur and the rim's mixing with the cloth (``b``): a two-term
    non-negative least squares (Lawson & Hanson 1974), the better single term where the
    unconstrained solution has a negative coefficient."""
    I = I.astype(np.float32)
    C = C.astype(np.float32)
    W = np.broadcast_to(np.asarray(W, np.float32), C.shape)
    ww, cc, wc = _dot3(W, W), _dot3(C, C), _dot3(W, C)
    wi, ci = _dot3(W, I), _dot3(C, I)
    det = np.maximum(ww * cc - wc * wc, 1e-6 * ww * cc + 1e-9)
    a, b = (cc * wi - wc * ci) / det, (ww * ci - wc * wi) / det
    fit = a[:, None] * W + b[:, None] * C
    one = (a < 0) | (b < 0)
    if one.any():
        fw = np.maximum(wi / np.maximum(ww, 1e-9), 0.0)[:, None] * W
        fc = np.maximum(ci / np.maximum(cc, 1e-9), 0.0)[:, None] * C
        best = np.where((_norm3(I - fw) <= _norm3(I - fc))[:, None], fw, fc)
        fit = np.where(one[:, None], best, fit)
    return _norm3(I - fit) / np.maximum(_norm3(I), 20.0)


def _off_hue_edges(prof: np.ndarray, off: np.ndarray, S: np.ndarray, min_step: float) -> tuple[np.ndarray, np.ndarray]:
    """Outline offsets (K,) px along rays and whether found (K,) bool, from the part of the
    colour off the surround's own colour direction: ``prof`` (3, K, N) float32 colours, channel
    by channel (:func:`_planar_profiles`), sampled at offsets ``off`` (N,) px (outward) round a
    predicted outline, ``S`` (K, 3) the surround's colour just outside it
    (:meth:`BallDetector._edges_local`).

    A shadow only scales the colour of the surface it falls on (Horprasert, Harwood & Davis
    1999), and so does a lit sphere's shading, darkest towards its limb (Lambert's cosine law):
    so the component ``beta = I . e`` of each colour along ``e``, the rim's colour ``P`` (the
    frame 1.25..2 px inside) with its part along ``S`` removed and normalised, is zero for the
    cloth at any brightness (lit, in its cast shadow, in the dark crease where the ball meets
    it) and, across the outline, rises with the ball's coverage of the pixel times the
    shaded ball's own brightness there. The outline is where ``beta`` crosses half its value
    at the rim band (common practice: the half-coverage point of a blurred step), linearly
    interpolated, nearest the prediction. So neither a shadow running into a dark rim nor the
    crease is taken for the ball, which the two-colour mixing model cannot tell from a rim of
    the surround's hue. The band lies nearer the outline than the mixing model's, so less of
    the limb's darkening lies between it and the outline (the crossing is still about half a
    pixel inside, nearly the same all round, where it goes into the fit's radius bias);
    1.75..2.75 px let a stripe's white cap into the band and the rounds drift along it, in
    the rendered scenes of ``benchmarks/detect_accuracy.py``. A ray counts when ``P`` lies at
    least ``_HUE_STEP`` (the sine of the angle between the two colours) off the surround's
    direction and its off-hue part exceeds ``min_step`` DN.
    """
    P = _band_mean_planar(prof, _HUE_BAND if off is _LOCAL_OFF else _band(off, -2.0, -1.25)).T
    Sh = S / np.maximum(_norm3(S), 1.0)[:, None]
    e = P - _dot3(P, Sh)[:, None] * Sh
    en = _norm3(e)
    e = e / np.maximum(en, 1e-6)[:, None]
    # _dot3 of each sample with its ray's e, channel by channel.
    beta = (prof[0] * e[:, 0:1] + prof[1] * e[:, 1:2] + prof[2] * e[:, 2:3]) / np.maximum(en, 1e-6)[:, None]  # 1 at the rim band's colour
    b0, b1 = beta[:, :-1], beta[:, 1:]
    cross = (b0 >= 0.5) & (b1 < 0.5)
    pos = off[None, :-1] + _STEP_PX * (b0 - 0.5) / np.where(cross, b0 - b1, 1.0)
    pos = np.where(cross, pos, np.inf)
    edge = pos[np.arange(len(pos)), np.argmin(np.abs(pos), axis=1)]
    ok = np.isfinite(edge) & (en > min_step) & (en > _HUE_STEP * _norm3(P))
    return edge, ok


def _band_mean(prof: np.ndarray, band: slice) -> np.ndarray:
    """(K, 3) mean colour of the samples ``band`` of each ray of ``prof`` (K, N, 3) float32:
    ``prof[:, band].mean(axis=1)`` to the last bit (a float32 sum along the band in order,
    divided by its length), without ``np.mean``'s argument handling."""
    return np.add.reduce(prof[:, band], axis=1) / np.float32(band.stop - band.start)


def _planar_profiles(samples: np.ndarray) -> np.ndarray:
    """(3, K, N) float32 channel planes of (K, N, 3) colour samples (uint8 or float32): each
    channel's values contiguous, so the per-channel arithmetic on a few dozen rays runs over
    plain rows, where the interleaved layout's strided views and broadcasts over a last axis
    of three cost several times the arithmetic (the same float32 values either way)."""
    return np.ascontiguousarray(samples.transpose(2, 0, 1), dtype=np.float32)


def _band_mean_planar(prof: np.ndarray, band: slice) -> np.ndarray:
    """(3, K) mean colour of the samples ``band`` (at least two) of each ray of channel-planar
    ``prof`` (3, K, N) float32: :func:`_band_mean`'s values to the last bit (the samples added
    one by one in order, as numpy's reduction over a middle axis adds them, then divided by the
    band's length)."""
    s = prof[:, :, band.start] + prof[:, :, band.start + 1]
    for j in range(band.start + 2, band.stop):
        s += prof[:, :, j]
    return s / np.float32(band.stop - band.start)


def _fill_small_holes(mask: np.ndarray, max_area: float) -> np.ndarray:
    """(h, w) uint8 0/1 mask with its holes (background regions, 4-connected, that do not
    reach the mask's edge) of at most ``max_area`` px filled."""
    inv = np.pad(1 - mask, 1, constant_values=1).astype(np.uint8)
    n, lab, stats, _ = cv2.connectedComponentsWithStats(inv, connectivity=4)
    if n <= 2:
        return mask
    outer = lab[0, 0]
    small = (stats[:, cv2.CC_STAT_AREA] <= max_area) & (np.arange(n) != outer)
    small[0] = False
    out = mask.copy()
    out[small[lab[1:-1, 1:-1]]] = 1
    return out


def _row_median(a: np.ndarray) -> np.ndarray:
    """Median of each row of a 2-D array ignoring NaN (NaN for an all-NaN row); sorting puts
    NaN last, so the median is read at half each row's count without ``np.nanmedian``'s loop."""
    srt = np.sort(a, axis=1)
    cnt = np.sum(~np.isnan(a), axis=1)
    top = a.shape[1] - 1
    lo = np.minimum(np.maximum((cnt - 1) // 2, 0), top)
    hi = np.minimum(cnt // 2, top)  # cnt >= 0
    rows = np.arange(len(a))
    out = 0.5 * (srt[rows, lo] + srt[rows, hi])
    out[cnt == 0] = np.nan
    return out


class RayMap:
    """Back-projection through a lens-correction table built once per camera: ``rays`` and
    ``backproject`` agree with :meth:`Camera.rays` / :meth:`Camera.backproject` without the
    per-call Newton iterations (to 0.011 mm at ball-centre height over a 720p image of a strongly
    distorted lens, k1 = -0.3, with the default 2 px grid: a fiftieth of the position targets).

    The table holds, on a grid every ``step_px`` pixels over the image (pixel frame of
    ``vision.camera``), the lens correction ``undistort(u, v) - pinhole(u, v)`` in normalised
    coordinates: a smooth, slowly varying field, so bilinear interpolation (in float64; OpenCV's
    remap quantises its weights to 1/32 px) of it is accurate where interpolating the
    coordinates themselves would not be. Pixels off the grid fall back to :class:`Camera`.
    """

    def __init__(self, camera: Camera, step_px: int = 2):
        self.camera = camera
        w, h = camera.image_size
        self.step = int(step_px)
        gu = np.arange(0, w + self.step, self.step, dtype=float)
        gv = np.arange(0, h + self.step, self.step, dtype=float)
        uu, vv = np.meshgrid(gu, gv)
        uv = np.column_stack([uu.ravel(), vv.ravel()])
        self.shape = (len(gv), len(gu))
        self.table = (camera.undistort_normalised(uv) - self._pinhole(uv)).reshape(*self.shape, 2)
        self._flat = np.ascontiguousarray(self.table.reshape(-1, 2))
        # Flat offsets of a grid cell's four corners, in the order u0 v0, u1 v0, u0 v1, u1 v1.
        self._corners = np.array([[0, 1, self.shape[1], self.shape[1] + 1]], np.intp)
        # The camera's numbers as plain floats and arrays, read once.
        self._RT = np.ascontiguousarray(camera.R.T)
        self._centre = [float(v) for v in camera.centre_mm]
        self._dist = [float(v) for v in camera.dist]
        K = camera.K
        self._k = (float(K[0, 0]), float(K[0, 1]), float(K[0, 2]), float(K[1, 1]), float(K[1, 2]))
        # A lens of radial terms k1, k2 alone and no skew (what automatic calibration fits):
        # the tangential, k3 and skew terms then add exact zeros, so :meth:`project` leaves
        # them out and gives the same pixels.
        self._radial_only = self._dist[2] == 0.0 and self._dist[3] == 0.0 and self._dist[4] == 0.0 and self._k[1] == 0.0
        ang = np.linspace(0, 2 * np.pi, 32, endpoint=False)
        self._cos32, self._sin32 = np.cos(ang), np.sin(ang)
        ang = np.linspace(0, 2 * np.pi, 16, endpoint=False)
        self._cos16, self._sin16 = np.cos(ang)[:, None], np.sin(ang)[:, None]

    def _pinhole(self, uv: np.ndarray) -> np.ndarray:
        """(N, 2) pixels -> (N, 2) normalised coordinates ignoring the lens: K^-1 (u, v, 1)."""
        K = self.camera.K
        y = (uv[:, 1] - K[1, 2]) / K[1, 1]
        return np.column_stack([(uv[:, 0] - K[0, 2] - K[0, 1] * y) / K[0, 0], y])

    def undistort_normalised(self, uv_px: np.ndarray) -> np.ndarray:
        """(N, 2) pixels -> (N, 2) ideal normalised coordinates (see :meth:`Camera.undistort_normalised`)."""
        uv = np.asarray(uv_px, dtype=float).reshape(-1, 2)
        g = uv / self.step
        i0 = np.floor(g)
        nv, nu = self.shape
        # Every point on the grid (the usual case) is told from the corner cells alone; NaN
        # fails every comparison, as it does per point below.
        if len(i0):
            lo, hi = i0.min(axis=0), i0.max(axis=0)
            every = bool(lo[0] >= 0 and hi[0] < nu - 1 and lo[1] >= 0 and hi[1] < nv - 1)
        else:
            every = True
        inside = None if every else (i0[:, 0] >= 0) & (i0[:, 0] < nu - 1) & (i0[:, 1] >= 0) & (i0[:, 1] < nv - 1)
        out = np.empty_like(uv)
        if every or inside.any():
            gi, ii, uvi = (g, i0, uv) if every else (g[inside], i0[inside], uv[inside])
            n = len(gi)
            a = gi - ii
            # Bilinear weights of the four grid neighbours (u0 v0, u1 v0, u0 v1, u1 v1) as one
            # outer product, and the neighbours' corrections gathered in one take from the flat
            # table: a handful of numpy calls instead of a few dozen (each costs about a
            # microsecond on a few dozen points, more than its arithmetic). Products and the
            # sum over the four run in the order of the written-out form, to the last bit.
            b = 1 - a
            wu = np.empty((n, 2))
            wu[:, 0], wu[:, 1] = b[:, 0], a[:, 0]
            wv = np.empty((n, 2))
            wv[:, 0], wv[:, 1] = b[:, 1], a[:, 1]
            w = (wu[:, None, :] * wv[:, :, None]).reshape(n, 4, 1)
            k = (ii[:, 1] * nu + ii[:, 0]).astype(np.intp)
            corr = (np.take(self._flat, k[:, None] + self._corners, axis=0) * w).sum(axis=1)
            k00, k01, k02, k11, k12 = self._k
            y = (uvi[:, 1] - k12) / k11
            out_i = corr
            out_i[:, 0] += (uvi[:, 0] - k02 - k01 * y) / k00
            out_i[:, 1] += y
            if every:
                out = out_i
            else:
                out[inside] = out_i
        if not every:
            out[~inside] = self.camera.undistort_normalised(uv[~inside])
        return out

    def rays(self, uv_px: np.ndarray) -> np.ndarray:
        """(N, 2) pixels -> (N, 3) unit ray directions in the table frame from ``camera.centre_mm``."""
        xy = self.undistort_normalised(uv_px)
        d_cam = np.empty((len(xy), 3))
        d_cam[:, :2] = xy
        d_cam[:, 2] = 1.0
        d = d_cam @ self.camera.R  # R^T d_cam, row-wise
        return d / np.sqrt(_dot3(d, d))[:, None]

    def project(self, points_mm: np.ndarray) -> np.ndarray:
        """(N, 3) table points (mm) -> (N, 2) pixels: :meth:`Camera.project`'s model and
        arithmetic, without its generality (points behind the camera give NaN)."""
        cam = np.asarray(points_mm, float).reshape(-1, 3) @ self._RT + self.camera.tvec
        if len(cam) == 1:
            return self._project_one(*cam[0].tolist())
        z = np.where(cam[:, 2] > 0, cam[:, 2], np.nan)
        x, y = cam[:, 0] / z, cam[:, 1] / z
        k1, k2, p1, p2, k3 = self._dist
        r2 = x * x + y * y
        out = np.empty((len(cam), 2))
        k00, k01, k02, k11, k12 = self._k
        if self._radial_only:
            radial = 1 + r2 * (k1 + r2 * k2)
            out[:, 0] = k00 * (x * radial) + k02
            out[:, 1] = k11 * (y * radial) + k12
            return out
        radial = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
        xd = x * radial + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
        yd = y * radial + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
        out[:, 0] = k00 * xd + k01 * yd + k02
        out[:, 1] = k11 * yd + k12
        return out

    def _project_one(self, cx: float, cy: float, cz: float) -> np.ndarray:
        """(1, 2) pixel of one point in the camera frame (mm): :meth:`project`'s arithmetic,
        operation for operation, in plain floats (a ball centre's image is taken every round of
        a fit, where two dozen numpy calls on one point cost far more than the arithmetic)."""
        z = cz if cz > 0 else math.nan
        x, y = cx / z, cy / z
        k1, k2, p1, p2, k3 = self._dist
        r2 = x * x + y * y
        radial = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
        xd = x * radial + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
        yd = y * radial + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
        k00, k01, k02, k11, k12 = self._k
        return np.array([[k00 * xd + k01 * yd + k02, k11 * yd + k12]])

    def project_point(self, x_mm: float, y_mm: float, z_mm: float) -> np.ndarray:
        """(2,) pixel of one table point (mm): :meth:`Camera.project`'s value to the last bit.
        The rotation is the camera's own product with its transposed ``R`` (the BLAS kernel for
        that layout rounds differently from :meth:`project`'s contiguous copy in about one
        point in six), the rest :meth:`_project_one`'s plain floats, operation for operation
        :meth:`Camera.project`'s (tests/test_detect.py), without its array bookkeeping (a
        fitted ball's centre image is asked once per fit)."""
        cam = np.array([[x_mm, y_mm, z_mm]]) @ self.camera.R.T + self.camera.tvec
        return self._project_one(*cam[0].tolist())[0]

    def sphere_outline(self, x_mm: float, y_mm: float, radius_mm: float) -> np.ndarray:
        """(32, 2) pixels of the silhouette of the sphere of radius ``radius_mm`` centred
        ``radius_mm`` above the table point (``x_mm``, ``y_mm``): :func:`sphere_outline_px`
        for one sphere, in plain floats."""
        R = float(radius_mm)
        C = self._centre
        vx, vy, vz = x_mm - C[0], y_mm - C[1], R - C[2]
        d2 = vx * vx + vy * vy + vz * vz
        f = R**2 / d2
        q = np.array([x_mm - vx * f, y_mm - vy * f, R - vz * f])
        rho = R * math.sqrt(1 - f)
        n = math.sqrt(d2)
        hx, hy, hz = vx / n, vy / n, vz / n
        ax, ay, az = (0.0, 0.0, 1.0) if abs(hz) < 0.9 else (1.0, 0.0, 0.0)
        e1x, e1y, e1z = hy * az - hz * ay, hz * ax - hx * az, hx * ay - hy * ax
        m = math.sqrt(e1x * e1x + e1y * e1y + e1z * e1z)
        e1x, e1y, e1z = e1x / m, e1y / m, e1z / m
        e2 = np.array([hy * e1z - hz * e1y, hz * e1x - hx * e1z, hx * e1y - hy * e1x])
        e1 = np.array([e1x, e1y, e1z])
        pts = q[None] + rho * (self._cos32[:, None] * e1[None] + self._sin32[:, None] * e2[None])
        return self.project(pts)

    def backproject_one(self, u: float, v: float, z_mm: float) -> tuple[float, float, float]:
        """:meth:`backproject` of one pixel (``u``, ``v``) as a table point (mm), operation for
        operation in plain floats (the grid's bilinear correction summed in the order numpy's
        sum over the four corners takes), so to the last bit; the rotation stays numpy's
        product. Off the grid it falls back to :meth:`backproject`."""
        gu, gv = u / self.step, v / self.step
        nv, nu = self.shape
        if not (0 <= gu < nu - 1 and 0 <= gv < nv - 1):  # off the grid (NaN too): as numpy's floor tells it
            return tuple(self.backproject(np.array([[u, v]]), z_mm)[0].tolist())
        iu, iv = math.floor(gu), math.floor(gv)
        au, av = gu - iu, gv - iv
        bu, bv = 1 - au, 1 - av
        k = iv * nu + iu
        f = self._flat
        c00, c10, c01, c11 = f[k].tolist(), f[k + 1].tolist(), f[k + nu].tolist(), f[k + nu + 1].tolist()
        w00, w10, w01, w11 = bu * bv, au * bv, bu * av, au * av
        cx = c00[0] * w00 + c10[0] * w10 + c01[0] * w01 + c11[0] * w11
        cy = c00[1] * w00 + c10[1] * w10 + c01[1] * w01 + c11[1] * w11
        k00, k01, k02, k11, k12 = self._k
        y = (v - k12) / k11
        d = np.array([[cx + (u - k02 - k01 * y) / k00, cy + y, 1.0]]) @ self.camera.R
        dx, dy, dz = d[0].tolist()
        n = math.sqrt(dx * dx + dy * dy + dz * dz)
        dx, dy, dz = dx / n, dy / n, dz / n
        c = self._centre
        s = (float(z_mm) - c[2]) / dz
        return c[0] + s * dx, c[1] + s * dy, c[2] + s * dz

    def backproject_point(self, uv_px, z_mm: float) -> np.ndarray:
        """(3,) table point (mm) where the ray of one pixel ``uv_px`` (2,) meets ``z = z_mm``:
        :meth:`backproject_one` as an array, to the last bit :meth:`backproject`'s."""
        return np.array(self.backproject_one(float(uv_px[0]), float(uv_px[1]), z_mm))

    def image_radius(self, u: float, v: float, radius_mm: float) -> float:
        """Mean distance (px) from the projection of the centre of the sphere of radius
        ``radius_mm`` whose centre's image is (``u``, ``v``) px (at ``z = radius_mm``) to 16
        points of its silhouette: what ``BallDetector._image_radius_px`` asked of
        :meth:`backproject`, :func:`sphere_outline_px` (16 points) and :meth:`project`,
        with the same arithmetic in plain floats to the last bit (a ball's image size is
        asked several times per fitted ball, where the numpy calls on one point cost far
        more than their arithmetic)."""
        R = float(radius_mm)
        X0, X1, X2 = self.backproject_one(u, v, R)
        C = self._centre
        vx, vy, vz = X0 - C[0], X1 - C[1], X2 - C[2]
        d2 = vx * vx + vy * vy + vz * vz
        R2 = R**2
        q = np.array([X0 - vx * R2 / d2, X1 - vy * R2 / d2, X2 - vz * R2 / d2])
        rho = R * math.sqrt(1 - R2 / d2)
        n = math.sqrt(d2)
        hx, hy, hz = vx / n, vy / n, vz / n
        ax, ay, az = (0.0, 0.0, 1.0) if abs(hz) < 0.9 else (1.0, 0.0, 0.0)
        e1x, e1y, e1z = hy * az - hz * ay, hz * ax - hx * az, hx * ay - hy * ax
        m = math.sqrt(e1x * e1x + e1y * e1y + e1z * e1z)
        e1x, e1y, e1z = e1x / m, e1y / m, e1z / m
        e2 = np.array([hy * e1z - hz * e1y, hz * e1x - hx * e1z, hx * e1y - hy * e1x])
        e1 = np.array([e1x, e1y, e1z])
        pts = q[None] + rho * (self._cos16 * e1[None] + self._sin16 * e2[None])
        rel = self.project(pts) - self.project(np.array([[X0, X1, X2]]))[0]
        return _mean1(np.sqrt(rel[:, 0] * rel[:, 0] + rel[:, 1] * rel[:, 1]))

    def backproject(self, uv_px: np.ndarray, z_mm: float = 0.0) -> np.ndarray:
        """(N, 2) pixels -> (N, 3) table points where their rays meet the plane ``z = z_mm``."""
        d = self.rays(uv_px)
        c = self.camera.centre_mm
        s = (float(z_mm) - c[2]) / d[:, 2]
        return c + s[:, None] * d


# --- the detector ----------------------------------------------------------------------------
class BallDetector:
    """Streaming ball detector for one clip from one fixed camera.

    ``process(frame_index, t_s, image)`` takes the frames in order and returns that frame's
    detections (:data:`COLUMNS`); the first frame also builds the background. ``step`` and
    ``step_rows`` are the same frame loop without the per-frame copy (a DataFrame, or a tuple of
    row dicts, shared with the previous frame when nothing changed) for whole clips
    (:func:`stack_detections`). Configuration is one frozen :class:`DetectConfig`; the detector
    holds the background, the previous detections and each sharp one's image patch from the
    frame it was fitted in as its only state.
    """

    def __init__(self, camera: Camera, table: TableSpec, config: DetectConfig = DetectConfig()):
        self.camera, self.table, self.config = camera, table, config
        w, h = camera.image_size
        self.size = (w, h)
        self.R = table.radius_mm
        self.zone = ball_zone(camera, table)
        self.rays = RayMap(camera)
        self.cloth = cloth_zone(camera, table)
        # Distance (px) from each pixel to the nearest pixel off the cloth zone (which sees the
        # bed at least 5 mm inside the noses): a disc of smaller radius round a pixel sees only
        # the bed (:meth:`_surround_off_bed`).
        self._bed_px = cv2.distanceTransform(self.cloth.astype(np.uint8), cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
        if not self.zone.any():
            raise ValueError("the table is nowhere in the camera's view; check the calibration (camera pose)")
        # Ball diameter in pixels at the middle of the table, for scales.
        mid = np.array([[table.length_mm / 2, table.width_mm / 2, self.R]])
        out = sphere_outline_px(camera, mid, self.R)[0]
        self.ball_px = float(2 * np.mean(np.linalg.norm(out - camera.project(mid)[0], axis=1)))
        # Smallest apparent radius over the table, for the distance-transform seeds.
        corners = np.array([[0, 0, self.R], [table.length_mm, 0, self.R], [table.length_mm, table.width_mm, self.R], [0, table.width_mm, self.R], mid[0]])
        outs = sphere_outline_px(camera, corners, self.R)
        cen = camera.project(corners)
        rad = np.linalg.norm(outs - cen[:, None], axis=2)
        self.r_min_px = float(rad.min())
        self.r_max_px = float(rad.max())
        self.background: Background | None = None
        self._ref_small: np.ndarray | None = None
        self._prev: tuple[dict, ...] = ()
        # Per sharp detection row (by identity): the row, its patch box and the frame's patch as
        # it was when the row was fitted, and (filled in when first needed) the patch's
        # gradients and the inverse of their normal matrix (:meth:`_nudged`).
        self._patches: dict[int, list] = {}
        # The last step's rows and their DataFrame (:meth:`step`), so a still stretch builds none.
        self._table: tuple[tuple[dict, ...], pd.DataFrame] | None = None
        # Per frame: which foreground of the whole frame reaches the zone's border (built on
        # demand by :meth:`_reaching`), keyed by the frame's identity.
        self._reach: tuple[np.ndarray, np.ndarray] | None = None
        self._since_update = 0.0
        # Boxes (u0, v0, u1, v1) px where the last background update replaced the model
        # outright (:attr:`vision.background.Background.revised`), for the next frame.
        self._revisit: tuple[tuple[int, int, int, int], ...] = ()
        self._last_t: float | None = None
        # The previous frame (:meth:`_at_rest`); None before the first.
        self._last_img: np.ndarray | None = None
        self._white_v: float | None = None
        cs = int(config.cell_px)
        self._small_size = (max(w // cs, 1), max(h // cs, 1))
        self._zone_small = cv2.resize(self.zone.astype(np.uint8), self._small_size, interpolation=cv2.INTER_NEAREST) > 0
        # Cells of the change grid that can matter (the zone's), as a box (j0, j1, i0, i1) of
        # cells: only that part of the frame is reduced. INTER_AREA at a whole factor is a
        # mean over each cell's pixels, the same for a crop on cell boundaries; for a frame not
        # a whole number of cells the whole frame is reduced.
        if w % cs == 0 and h % cs == 0 and self._zone_small.any():
            js, is_ = np.nonzero(self._zone_small)
            self._cells = (int(js.min()), int(js.max()) + 1, int(is_.min()), int(is_.max()) + 1)
        else:
            self._cells = (0, self._small_size[1], 0, self._small_size[0])
        # Zone border: pixels of the zone next to its outside (where arms and cues come in).
        self._zone_edge = self.zone & ~cv2.erode(self.zone.astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool)
        # The same at half scale, for the whole-frame reach test.
        self._half_size = (max(w // 2, 1), max(h // 2, 1))
        zone_h = cv2.resize(self.zone.astype(np.uint8), self._half_size, interpolation=cv2.INTER_NEAREST)
        self._zone_half = zone_h > 0
        self._zone_edge_half = self._zone_half & ~cv2.erode(zone_h, np.ones((3, 3), np.uint8)).astype(bool)
        ys, xs = np.nonzero(self._zone_half)
        self._zone_half_box = (int(xs.min()), int(ys.min()), int(xs.max()) + 1, int(ys.max()) + 1)
        self._bg_half: tuple[int, np.ndarray, tuple[np.ndarray, np.ndarray, np.ndarray]] | None = None
        # Whether a coarse outline (:meth:`_edges`) lowered a sample by the cast-shadow discount
        # since :meth:`_fit_either` last cleared it.
        self._discounted = False
        # The ring of :meth:`_ring_share` (64 angles), and its shares already read in the last
        # frame asked (the frame itself, and a dict by centre); emptied every frame.
        a = np.linspace(0, 2 * np.pi, 64, endpoint=False)
        self._ring_cos, self._ring_sin = np.cos(a), np.sin(a)
        self._ring_memo: tuple[np.ndarray | None, dict] = (None, {})

    # -- per frame --
    def process(self, frame_index: int, t_s: float, image: np.ndarray) -> pd.DataFrame:
        """Detections in one frame (a new DataFrame; the image is not modified)."""
        out = self.step(frame_index, t_s, image).copy()
        out["frame"] = np.int64(frame_index)
        out["t"] = float(t_s)
        return out[COLUMNS].reset_index(drop=True)

    def step(self, frame_index: int, t_s: float, image: np.ndarray) -> pd.DataFrame:
        """:meth:`process` without the per-frame copy: this frame's detections with ``frame``
        and ``t`` not filled in. When nothing changed it is the very frame returned for the
        previous frame, so it must not be modified; :func:`stack_detections` turns a clip's
        steps into one table."""
        rows = self.step_rows(frame_index, t_s, image)
        if self._table is None or self._table[0] is not rows:
            table = pd.DataFrame(list(rows), columns=COLUMNS) if rows else empty_detections()
            self._table = (rows, table)
        return self._table[1]

    def step_rows(self, frame_index: int, t_s: float, image: np.ndarray) -> tuple[dict, ...]:
        """The frame loop: this frame's detections as a tuple of row dicts (:data:`COLUMNS`,
        ``frame`` and ``t`` left at 0), the very tuple of the previous frame when nothing
        changed (so it must not be modified). The clip's table is built once, at the end, by
        :func:`stack_detections`; a pandas frame per frame cost more than finding the balls
        that moved."""
        img = np.asarray(image)
        self._ring_memo = (None, {})
        w, h = self.size
        if img.shape != (h, w, 3) or img.dtype != np.uint8:
            raise ValueError(f"frame {frame_index} is {img.shape} {img.dtype}; the camera expects ({h}, {w}, 3) uint8 BGR")
        j0, j1, i0, i1 = self._cells
        cs = int(self.config.cell_px)
        if (j1 - j0, i1 - i0) == self._zone_small.shape and (w % cs or h % cs):
            small = cv2.resize(img, self._small_size, interpolation=cv2.INTER_AREA).astype(np.float32)
        else:
            # Halving three times (vision.video.area_down) took a third of one resize by 8;
            # a cell's mean may differ from that resize's by a level or two, far under
            # change_dn, and the frames compared are reduced alike.
            small = area_down(img[j0 * cs : j1 * cs, i0 * cs : i1 * cs], 1.0 / cs).astype(np.float32)
        zone_cells = self._zone_small[j0:j1, i0:i1]
        if self.background is None:
            self.background = Background([img], self.zone, self.cloth, self.ball_px, self.config.background)
            norm = np.linalg.norm(self.background.image[self.cloth], axis=1)
            self._b_norm = float(np.median(norm)) if norm.size else 100.0
            cell_changed = zone_cells.copy()
            self._ref_small = small
        else:
            diff = max_abs_diff(small, self._ref_small)
            cell_changed = (diff > self.config.change_dn) & zone_cells
        changed = np.zeros(self._zone_small.shape, bool)
        changed[j0:j1, i0:i1] = cell_changed
        # Where the last update took a hidden ball out of the background the frame need not
        # have changed, yet the ball now stands out: those cells are looked at again.
        for u0, v0, u1, v1 in self._revisit:
            cells = (slice(v0 // cs, -(-v1 // cs)), slice(u0 // cs, -(-u1 // cs)))
            changed[cells] |= self._zone_small[cells]
        self._revisit = ()
        # A ball nudged by less than the grid sees (a cell's mean moves by a few levels) is
        # looked at again too.
        for j0n, j1n, i0n, i1n in self._nudged(img, changed):
            changed[j0n:j1n, i0n:i1n] |= self._zone_small[j0n:j1n, i0n:i1n]
        dt = 0.0 if self._last_t is None else max(t_s - self._last_t, 0.0)
        self._last_t = t_s
        if changed.any():
            det = self._process_changed(img, changed)
            self._ref_small[cell_changed] = small[cell_changed]
        else:
            det = self._prev
        self._ring_memo = (None, {})  # the model may change below
        self._since_update += dt
        if self._since_update >= self.config.update_every_s:
            self._since_update = 0.0
            self.background.update(img, self._protect_mask(det))
            self._revisit = self.background.revised
        self._prev = det
        self._keep_patches(img, det)
        self._last_img = img
        return det

    def _ball_cells(self, row: dict) -> tuple[int, int, int, int]:
        """Cells (j0, j1, i0, i1) of the change grid that :meth:`_unchanged` reads for a row:
        the square of half side 1.5 of the largest ball image radius round its centre's image."""
        cs = int(self.config.cell_px)
        rad = 1.5 * self.r_max_px
        j0, j1 = max(int((row["v"] - rad) // cs), 0), int((row["v"] + rad) // cs) + 1
        i0, i1 = max(int((row["u"] - rad) // cs), 0), int((row["u"] + rad) // cs) + 1
        return j0, j1, i0, i1

    def _keep_patches(self, img: np.ndarray, det: tuple[dict, ...]) -> None:
        """Keep, for each sharp row of ``det``, the frame's patch round it from the frame it was
        fitted in: a row carried over keeps its old patch, so a ball creeping by less than
        :meth:`_nudged` sees per frame is measured against where it was fitted."""
        h, w = img.shape[:2]
        half = int(math.ceil(_NUDGE_PATCH_R * self.r_max_px))
        keep = {}
        for r in det:
            if r["blur_x"] or r["blur_y"]:
                continue
            old = self._patches.get(id(r))
            if old is not None and old[0] is r:
                keep[id(r)] = old
                continue
            u, v = int(round(r["u"])), int(round(r["v"]))
            box = (max(v - half, 0), min(v + half + 1, h), max(u - half, 0), min(u + half + 1, w))
            if box[1] - box[0] < 3 or box[3] - box[2] < 3:
                continue
            keep[id(r)] = [r, box, img[box[0] : box[1], box[2] : box[3]].astype(np.float32), None]
        self._patches = keep

    def _nudged(self, img: np.ndarray, changed: np.ndarray) -> list[tuple[int, int, int, int]]:
        """Cells (j0, j1, i0, i1) of the change grid round each sharp ball of the last frame that
        :meth:`_unchanged` would carry over although its image patch (:meth:`_keep_patches`) has
        shifted by more than ``config.nudge_mm`` since it was fitted.

        The shift is one Lucas-Kanade step (Lucas & Kanade 1981, :func:`_patch_shift`): the
        least-squares translation that explains the patch's change by its gradients, over the
        three colour channels. A ball nudged 0.5 mm (a quarter pixel at about 2 mm per px) moves
        a cell's mean by a few levels, under the grid's ``change_dn`` (it was carried over,
        tests/test_detect.py); the step sees it in the hundreds of rim pixels' gradients, while
        a change of light that scales the patch sums to little over a closed outline's
        gradients. Scaled to mm by the ball's image size at mid-table. The limit's margin over
        the codec's noise was measured (``config.nudge_mm``)."""
        out = []
        px_mm = self.ball_px / (2 * self.R)
        limit = self.config.nudge_mm * px_mm
        for r in self._prev:
            entry = self._patches.get(id(r))
            if entry is None or entry[0] is not r:
                continue
            cells = self._ball_cells(r)
            j0, j1, i0, i1 = cells
            if changed[j0:j1, i0:i1].any():
                continue  # refitted or searched anyway
            _, (v0, v1, u0, u1), ref, terms = entry
            if terms is None:
                entry[3] = terms = _shift_terms(ref)
            if terms[2] is None:
                continue  # a flat patch: nothing to measure a shift by
            dx, dy = _patch_shift(terms, ref, img[v0:v1, u0:u1])
            if math.hypot(dx, dy) > limit:
                out.append(cells)
        return out

    @property
    def _score_thr(self) -> float:
        """Ball-score threshold: ``fg_sigmas`` noise sigmas of the chromaticity distortion
        (sigma x sqrt(2) over the cloth's brightness), at least ``fg_min_score``. The sigma is
        the model's whole colour difference's, at most ``_LIGHT_CHANGE_RATIO`` times its
        chromaticity distortion's (:class:`vision.background.Background`): the first counts a
        change of light that only scales the colours, which :func:`ballness` discounts (a
        player's shadow dimmed the cheap camera's cloth by up to 17 DN and the model lagged:
        its sigma rose from 1.3 to 7.2 DN, the chromaticity's stayed 0.8-1.1, extra clip
        cheapwide_25fps)."""
        sigma = min(self.background.sigma, _LIGHT_CHANGE_RATIO * self.background.chroma_sigma)
        return max(self.config.fg_sigmas * sigma * math.sqrt(2) / max(self._b_norm, COLOUR_FLOOR_DN), self.config.fg_min_score)

    def _protect_mask(self, det: tuple[dict, ...]) -> np.ndarray:
        w, h = self.size
        m = np.zeros((h, w), np.uint8)
        bu, bv, bx, by = (np.array([r[c] for r in det], float) for c in ("u", "v", "blur_x", "blur_y"))
        rads = np.ceil(1.6 * self.r_max_px + np.hypot(bx, by) * self.ball_px / (2 * self.R)).astype(int)
        for u, v, rad in zip(np.round(bu).astype(int), np.round(bv).astype(int), rads):
            cv2.circle(m, (int(u), int(v)), int(rad), 1, -1)
        return m.astype(bool)

    def _process_changed(self, img: np.ndarray, changed: np.ndarray) -> tuple[dict, ...]:
        cs = int(self.config.cell_px)
        grow = int(math.ceil(1.5 * self.r_max_px / cs)) + 1
        k = cv2.getStructuringElement(cv2.MORPH_RECT, (2 * grow + 1, 2 * grow + 1))
        region_small = cv2.dilate(changed.astype(np.uint8), k)
        n, lab, stats = components_8(region_small)
        w, h = self.size
        boxes = []
        for i in range(1, n):
            x0, y0, bw, bh = stats[i, :4]
            boxes.append((max(x0 * cs, 0), max(y0 * cs, 0), min((x0 + bw) * cs, w), min((y0 + bh) * cs, h)))
        # Earlier detections outside the processed boxes are carried over, and so are sharp
        # balls inside a box whose own cells did not change (a ball at rest beside a moving
        # one or under the cue's tip): they are left out of the box's foreground instead of
        # being found and fitted again.
        prev = self._prev
        inside = np.zeros((len(prev), len(boxes)), bool)
        if len(prev) and boxes:
            bx = np.array(boxes, float)  # (nb, 4) u0, v0, u1, v1
            u = np.array([r["u"] for r in prev], float)[:, None]
            v = np.array([r["v"] for r in prev], float)[:, None]
            inside = (bx[None, :, 0] <= u) & (u < bx[None, :, 2]) & (bx[None, :, 1] <= v) & (v < bx[None, :, 3])
        rows = [r for r, hit in zip(prev, inside) if not hit.any()]
        still = [self._unchanged(r, changed) for r in prev]
        for k, b in enumerate(boxes):
            rows += self._detect_box(img, b, [r for r, hit, st in zip(prev, inside[:, k], still) if hit and st])
        return tuple(self._one_cue(img, self._dedupe(rows)))

    def _one_cue(self, img: np.ndarray, rows: list[dict]) -> list[dict]:
        """A frame's detection rows with at most one read as the cue ball: a table holds one
        (the rules of pool; common practice), while a stripe whose band is of the cloth's hue
        can look all white and cloth to :meth:`_identity` (tan cloth, a yellow or orange
        stripe). Of several, the one least saturated over its disc (HSV saturation, mean
        within 0.88 of the ball's image radius, as :meth:`_identity` looks) keeps the label:
        the cue ball is white all over, the band is not. The others' pattern is left unknown
        and their colour empty (new dicts: the rows may be the previous frame's)."""
        cues = [k for k, r in enumerate(rows) if r["pattern"] == "cue"]
        if len(cues) < 2:
            return rows
        sat = []
        for k in cues:
            pix, _, _ = self._disc_pixels(img, np.array([rows[k]["u"], rows[k]["v"]]), 0.44 * self.ball_px)
            hsv = cv2.cvtColor(pix[None].astype(np.uint8), cv2.COLOR_BGR2HSV)[0] if len(pix) else np.full((1, 3), 255)
            sat.append(float(hsv[:, 1].mean()))
        keep = cues[int(np.argmin(sat))]
        return [dict(r, pattern="unknown", colour="") if k in cues and k != keep else r for k, r in enumerate(rows)]

    def _unchanged(self, row: dict, changed: np.ndarray) -> bool:
        """Whether a detection row is of a sharp ball none of whose change-grid cells
        (``changed``, (H / cell, W / cell) bool) changed: the square of half side 1.5 of the
        largest ball image radius round its centre's image, as far as the coarse outline
        searches (the ball's outline and the cloth or shadow just outside it)."""
        if row["blur_x"] or row["blur_y"]:
            return False
        j0, j1, i0, i1 = self._ball_cells(row)
        return not changed[j0:j1, i0:i1].any()

    def _dedupe(self, rows: list[dict]) -> list[dict]:
        rows = sorted(rows, key=lambda r: -r["quality"])
        out = []
        for r in rows:
            if all(math.hypot(r["x"] - o["x"], r["y"] - o["y"]) > 1.2 * self.R for o in out):
                out.append(r)
        return out

    # -- candidates in a box --
    def _components(self, img: np.ndarray, box, known: list[dict] = ()) -> tuple[int, np.ndarray, np.ndarray]:
        """Foreground of the ball zone inside ``box`` = (u0, v0, u1, v1) px: ballness above the
        threshold, less the silhouettes of the ``known`` balls (detection rows carried over,
        grown by 2 px for the blurred rim), opened by a 3 x 3 square, split into 8-connected
        components; (count, labels (v1 - v0, u1 - u0) int32, stats as
        ``cv2.connectedComponentsWithStats``)."""
        u0, v0, u1, v1 = box
        score = ballness(img[v0:v1, u0:u1], self.background.image[v0:v1, u0:u1])
        fg = ((score > self._score_thr) & self.zone[v0:v1, u0:u1]).astype(np.uint8)
        if known:
            gone = np.zeros_like(fg)
            for r in known:
                c = np.array([r["u"], r["v"]])
                out = self.rays.sphere_outline(r["x"], r["y"], self.R) - c
                out *= (1.0 + 2.0 / np.maximum(np.hypot(out[:, 0], out[:, 1]), 1.0))[:, None]
                cv2.fillPoly(gone, [np.round(out + c - np.array([u0, v0])).astype(np.int32)], 1)
            fg[gone > 0] = 0
        fg = cv2.morphologyEx(fg, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
        n, lab, stats = components_8(fg)
        return n, lab, stats

    def _detect_box(self, img: np.ndarray, box, known: list[dict] = ()) -> list[dict]:
        """Detection rows of the balls in ``box`` = (u0, v0, u1, v1) px, with the ``known``
        balls (rows carried over, :meth:`_unchanged`) left out of its foreground and returned
        among them: as they were, or refitted with their neighbours' rays left out where a
        ball found in the box lies within ``_NEAR_R`` radii (:meth:`_refit_touching`)."""
        u0, v0, u1, v1 = box
        n, lab, stats = self._components(img, box, known)
        edge = self._zone_edge[v0:v1, u0:u1]
        h, w = img.shape[:2]
        seeds = []
        small = []
        free: list[tuple[int, list[dict]]] = []  # free pieces' labels and seeds
        reaching: list[int] = []  # labels of pieces reaching in over the rail
        area_min = math.pi * self.r_min_px**2
        for i in range(1, n):
            a = stats[i, cv2.CC_STAT_AREA]
            if a < 0.3 * area_min:
                small.append(i)
                continue
            bx, by, bw, bh = stats[i, :4]
            comp = (lab[by : by + bh, bx : bx + bw] == i).astype(np.uint8)
            occluder = bool(np.any(edge[by : by + bh, bx : bx + bw] & (comp > 0)))
            ys, xs = np.nonzero(comp)
            cut = (bx == 0 and u0 > 0) or (by == 0 and v0 > 0) or (bx + bw == u1 - u0 and u1 < w) or (by + bh == v1 - v0 and v1 < h)
            origin = (bx + u0, by + v0)
            if cut:
                # The box holds only what changed: a still arm over the rail with a moving
                # bridge hand is cut at the box's side, and the hand alone looks like a free
                # ball; a ball half in the box looks like half a ball. Whether the piece belongs
                # to something reaching in over the rail is judged on the whole frame, and its
                # seeds are taken from the piece made whole within two ball diameters.
                if not occluder:
                    occluder = bool(np.any(self._reaching(img)[(ys + by + v0) // 2, (xs + bx + u0) // 2]))
                comp, origin, at_edge = self._whole_piece(img, xs + bx + u0, ys + by + v0, known)
                occluder |= at_edge
                ys, xs = np.nonzero(comp)
            pts = np.column_stack([xs + origin[0], ys + origin[1]]).astype(float)
            found = self._seeds_of(comp, pts, origin, occluder)
            if cut:
                # What lies outside the box has not changed: its detections are carried over.
                m = self.r_max_px
                found = [q for q in found if u0 - m <= q["uv"][0] < u1 + m and v0 - m <= q["uv"][1] < v1 + m]
            if not occluder:
                for q in found:
                    q["piece"] = (comp, origin)
                free.append((i, found))
            else:
                reaching.append(i)
            seeds += found
        blocked = self._blocked(lab, stats, reaching)
        self._mark_beside(lab, blocked, free)
        fits = [self._fit_one(img, s) if self._worth_fitting(img, s) else None for s in seeds]
        self._fit_remainder(img, seeds, fits)
        seeds, fits = self._cluster_retry(img, seeds, fits)
        fits = self._free_occluders(img, seeds, fits)
        tested: dict[int, tuple[dict, bool]] = {}  # rows' shadow tests, for the second pass
        fits = self._drop_cast_shadows(img, fits, known, seeds, tested)
        fits = self._joined_casters(img, seeds, fits, known)
        crowns = self._crown_seeds(img, box, lab, stats, small, fits + list(known), blocked)
        seeds += crowns
        fits += [self._fit_crown(img, s) for s in crowns]
        # A known ball beside a ball found here is refitted with it, as when both were found
        # here (the local edge of each holds the other's rim); the others stand as they were.
        found = np.array([[r["x"], r["y"]] for r in fits if r is not None and not (r["blur_x"] or r["blur_y"])]).reshape(-1, 2)
        kept = []
        for r in known:
            if len(found) and np.min(np.hypot(found[:, 0] - r["x"], found[:, 1] - r["y"])) < _NEAR_R * self.R:
                seeds.append({"uv": np.array([r["u"], r["v"]]), "axis": np.array([1.0, 0.0]), "half_px": 0.0, "strict": False})
                fits.append(r)
            else:
                kept.append(r)
        # Refitted with its neighbours' rays left out, a fit that had straddled a ball and its
        # shadow can slide onto the shadow: the shadow test again on what stands.
        rows = kept + _held_apart_fits(self._refit_touching(img, seeds, fits), self.R, self.camera, still=lambda r: self._at_rest(img, r))
        return [r for r in self._drop_cast_shadows(img, rows, tested=tested) if r is not None and not r.get("joined")]

    def _worth_fitting(self, img: np.ndarray, s: dict) -> bool:
        """Whether a seed can pass the fit's last tests: a seed inside an arm or cue component
        (strict) whose ring (:meth:`_ring_share`) is already covered beyond the share
        :meth:`_isolated` allows, less ``_SEED_RING_SLACK``, is not fitted. The fitted centre
        of such a seed lies within about a pixel of it (the deepest point of the ball's disc),
        and a pixel moves the ring's crossings of the occluder's edge by about one of its 64
        samples; most strict seeds are pieces of the arm or hand, whose fits all fail."""
        return not s["strict"] or self._ring_share(img, s["uv"]) >= _ISOLATED_SHARE - _SEED_RING_SLACK

    def _blocked(self, lab: np.ndarray, stats: np.ndarray, reaching: list[int]) -> tuple[np.ndarray, np.ndarray] | None:
        """Masks (box frame, bool, as ``lab`` of :meth:`_components`) of the pieces reaching in
        over the rail (labels ``reaching``), and of those together with the free pieces larger
        than six of the largest balls' images (an arm, hand or cue lying free of the rail, as
        :meth:`_unexplained_seeds` takes them); None when there are neither."""
        big = [i for i in range(1, len(stats)) if stats[i, cv2.CC_STAT_AREA] > 6 * math.pi * self.r_max_px**2 and i not in reaching]
        if not reaching and not big:
            return None
        reach = np.isin(lab, reaching) if reaching else np.zeros(lab.shape, bool)
        return reach, reach | np.isin(lab, big) if big else reach

    def _mark_beside(self, lab: np.ndarray, blocked: tuple[np.ndarray, np.ndarray] | None, free: list[tuple[int, list[dict]]]) -> None:
        """Mark (``beside``) the seeds of each free piece (label, seeds) that comes within the
        occluder test's ring of a piece reaching in over the rail (``blocked[0]``): within
        ``_RING_R - 1`` of the largest ball image radius of it. A ball there has its ring
        crossed by the occluder as a ball touching it has, and is judged as one
        (:meth:`_free_occluders`); the end of a hand or sleeve cut off from the rest of it by a
        sliver of the cloth's colour (a shadow's edge, a crease of the skin, a part of the hand
        taken into the empty-table model) is such a piece."""
        if blocked is None or not free or not blocked[0].any():
            return
        dist = cv2.distanceTransform((~blocked[0]).astype(np.uint8), cv2.DIST_L2, 3)
        reach = (_RING_R - 1.0) * self.r_max_px
        for i, found in free:
            if float(dist[lab == i].min()) <= reach:
                for q in found:
                    q["beside"] = True

    def _crown_seeds(self, img: np.ndarray, box, lab: np.ndarray, stats: np.ndarray, small: list[int], fits: list[dict | None], blocked: tuple[np.ndarray, np.ndarray] | None = None) -> list[dict]:
        """Seeds (as :meth:`_seeds_of`) for balls of the cloth's own hue and brightness: the
        components of ``box`` (``lab`` and ``stats`` of :meth:`_components`) too small to be a
        ball (indices ``small``) but of at least 3 % of the smallest ball's image area, brighter
        than the empty table on average (brightness ratio above 1.15, :func:`ballness`'s
        brightness term), farther than a ball's image diameter from every fitted ball
        (``fits``) and from each other, and surrounded by the cloth's hue and brightness
        (:meth:`_same_hue` round the piece: the highlight lies within about half a radius of
        the centre's image, so the band sampled is still on the ball's body or the cloth), with
        nothing reaching in over the rail (:meth:`_reaching`), nor any of the box's pieces in
        ``blocked[1]`` (:meth:`_blocked`: reaching in, or larger than a few balls), within a
        ball's diameter. Such a ball passes the colour test only at its crown and
        specular highlight (Blinn-Phong: toward the lamps, within about half a radius of the
        centre's image for lamps above the table), so its piece of foreground is small; the fit
        searches from there (:meth:`_fit_crown`)."""
        if not small:
            return []
        u0, v0 = box[0], box[1]
        area_min = math.pi * self.r_min_px**2
        done = np.array([[r["u"], r["v"]] for r in fits if r is not None]).reshape(-1, 2)
        out: list[dict] = []
        for i in small:
            if stats[i, cv2.CC_STAT_AREA] < 0.03 * area_min:
                continue
            bx, by, bw, bh = stats[i, :4]
            ys, xs = np.nonzero(lab[by : by + bh, bx : bx + bw] == i)
            us, vs = xs + bx + u0, ys + by + v0
            I = img[vs, us].astype(np.float32)
            B = self.background.image[vs, us]
            if np.mean(_dot3(I, B) / np.maximum(_dot3(B, B), 1.0)) < LIT_RATIO:
                continue
            uv = np.array([us.mean(), vs.mean()])
            if len(done) and np.min(np.hypot(done[:, 0] - uv[0], done[:, 1] - uv[1])) < self.ball_px:
                continue
            if any(np.hypot(*(uv - q["uv"])) < self.ball_px for q in out):
                continue
            if not self._same_hue(img, uv):
                # What surrounds the bright piece is not of the cloth's hue and brightness (a
                # hand, a ball of another colour): no fit is spent on it.
                continue
            reach = self._reaching(img)
            hu, hv, g = int(uv[0]) // 2, int(uv[1]) // 2, int(math.ceil(self.ball_px / 2))
            if reach[max(hv - g, 0) : hv + g + 1, max(hu - g, 0) : hu + g + 1].any():
                # A glint on a cue, a ferrule or a knuckle: something reaching in over the rail
                # lies within a ball's diameter.
                continue
            lu, lv, g = int(uv[0]) - u0, int(uv[1]) - v0, int(math.ceil(self.ball_px))
            if blocked is not None and blocked[1][max(lv - g, 0) : lv + g + 1, max(lu - g, 0) : lu + g + 1].any():
                # The same of an arm, hand or cue lying free of the rail (a piece larger than
                # a few balls) or reaching in within the box.
                continue
            out.append({"uv": uv, "axis": np.array([1.0, 0.0]), "half_px": 0.0, "strict": False})
        return out

    def _fit_crown(self, img: np.ndarray, s: dict) -> dict | None:
        """:meth:`_fit_one` of a crown seed (:meth:`_crown_seeds`), kept only when the fitted
        ball is of the cloth's own hue and brightness (:meth:`_same_hue`): a ball of any other
        colour stands out as a whole piece and was seeded so, and a highlight on a hand, a cue or
        a rail is no such ball."""
        r = self._fit_one(img, s)
        if r is None or not self._same_hue(img, np.array([r["u"], r["v"]])):
            return None
        return r

    def _fit_one(self, img: np.ndarray, s: dict) -> dict | None:
        """:meth:`_fit_seed` with the fallbacks: a second try without the shadow test, and the
        streak's fade test (:meth:`_soft_ends`)."""
        r = self._fit_either(img, s)
        if r is not None and (r["blur_x"] or r["blur_y"]) and not self._soft_ends(img, r):
            r = None
        if r is not None and not (r["blur_x"] or r["blur_y"]) and s["half_px"] > 0 and not s["strict"]:
            r = self._ends(img, s, r)
        return r

    def _ends(self, img: np.ndarray, s: dict, r: dict) -> dict:
        """The sharp fit ``r`` of an elongated seed ``s`` (``half_px`` > 0: its piece is longer
        than one ball), or a fit from one end of the seed's streak instead. A resting ball's
        piece of foreground can take in its cast shadow where the codec has coloured the shadow
        like the ball (H.264's 4:2:0 chroma at half resolution; block blur): the seed then lies
        at the middle of ball and shadow, and the coarse outline started there can settle
        astride both (rest_causes.py's ``codec_seeded`` row: the same fits from the true centre
        halve uneven's median). The ends (``half_px`` along ``axis`` either side) are where the
        ball and the shadow each lie alone; an end whose disc is more lit than ``r``'s is
        fitted as a sharp seed, and its fit is taken (the largest fitted radius bias of those that qualify) where it lies over
        ``_END_MOVE_MM`` from ``r``, its disc's lit share (:meth:`_lit_share`) beats ``r``'s
        by ``_END_LIT_GAIN`` and its radius bias ``r``'s by ``_END_BIAS_GAIN_MM``."""
        lit0 = self._lit_share(img, r)
        # Only an end whose own disc is the more lit is fitted (the shadow's end never is):
        # most elongated pieces are a slow ball's short streak, whose ends are as lit as its
        # middle, and two more fits for each would cost about a third of the detector's time
        # (uneven_60fps, first 150 frames: 30 of 280 pieces have such an end, and every fit
        # that replaced the first one came from them).
        ends = [s["uv"] + sign * s["half_px"] * s["axis"] for sign in (1.0, -1.0)]
        ends = [uv for uv in ends if self._lit_share(img, {"u": uv[0], "v": uv[1]}) >= lit0 + _END_LIT_GAIN]
        if not ends or self._disc_cast_shadow(img, r) or self._disc_brightness(img, r) < 1.0 / _SAME_BRIGHT:
            # No lit end, or a fit on the shadow (its disc dark, the caster's lit rim in it or
            # not): the cast-shadow tests downstream find its caster (:meth:`_drop_cast_shadows`,
            # :meth:`_off_own_shadow`) and refit it with the shadow's rays left out.
            return r
        best = r
        for uv in ends:
            f = self._fit_either(img, {"uv": uv, "axis": s["axis"], "half_px": 0.0, "strict": False})
            if (f is None or f["blur_x"] or f["blur_y"]
                    or math.hypot(f["x"] - r["x"], f["y"] - r["y"]) <= _END_MOVE_MM
                    or f["bias_mm"] < r["bias_mm"] + _END_BIAS_GAIN_MM
                    or f["bias_mm"] <= best["bias_mm"] and best is not r
                    or self._lit_share(img, f) < lit0 + _END_LIT_GAIN):
                continue
            best = f
        return best

    def _lit_share(self, img: np.ndarray, row: dict) -> float:
        """Share of the pixels within the image radius of detection ``row``'s centre image
        whose luma (ITU-R BT.601 weights) exceeds the empty table's there: the ball's lit
        surface and highlight; a shadow on the cloth has none (it only dims the table)."""
        I, B, _ = self._disc_pixels(img, np.array([row["u"], row["v"]]), self._image_radius_px(np.array([row["u"], row["v"]])))
        if len(I) == 0:
            return 0.0
        w = np.array([0.114, 0.587, 0.299], np.float32)  # BT.601 luma of B, G, R
        return _share(I.astype(np.float32) @ w > B.astype(np.float32) @ w)

    def _fit_either(self, img: np.ndarray, s: dict, avoid: np.ndarray | None = None) -> dict | None:
        """:meth:`_fit_seed` with the coarse outline's cast-shadow discount, and, for a seed
        that is not strict and fails so, once more without it (the shadow test can eat a dark
        rim between touching balls). The second try is made only where the first one's
        discount lowered a sample somewhere (:meth:`_edges`): otherwise it would repeat the
        first one's arithmetic to the bit and fail alike."""
        self._discounted = False
        r = self._fit_seed(img, s, avoid=avoid)
        if r is None and not s["strict"] and self._discounted:
            r = self._fit_seed(img, s, shadows=False, avoid=avoid)
        return r

    def _fit_remainder(self, img: np.ndarray, seeds: list[dict], fits: list[dict | None], cluster: bool = False) -> None:
        """Extend ``seeds`` and ``fits`` (parallel lists, in place) by up to
        ``_REMAINDER_ROUNDS`` rounds of seeds where the fits leave their piece unexplained
        (:meth:`_unexplained_seeds`, ``cluster`` passed on) and those seeds' fits."""
        for _ in range(_REMAINDER_ROUNDS):
            more = self._unexplained_seeds(seeds, fits, cluster=cluster)
            if not more:
                break
            seeds += more
            fits += [self._fit_one(img, q) for q in more]

    def _unexplained_seeds(self, seeds: list[dict], fits: list[dict | None], cluster: bool = False) -> list[dict]:
        """New seeds where a free piece of foreground (not reaching in over the rail) is not
        explained by the balls fitted in it: the piece less the fitted balls' silhouettes (grown
        by a pixel for the blurred rim), opened by a 3 x 3 square, seeds one ball at each peak of
        its distance transform at least 0.65 of the smallest ball radius deep (as
        :meth:`_seeds_of`), at most ``_REMAINDER_ROUNDS`` times. A cluster of three touching
        balls is deepest between them, so its first seeds can fall between balls and the fits
        leave a ball unexplained; this explains the foreground away ball by ball, after the
        matching-pursuit idea of fitting the strongest part and searching the residual (Mallat
        & Zhang 1993). Pieces holding a streak are left alone (its swept outline is not drawn),
        and so are pieces where nothing fitted (the same seeds would come again) and pieces
        larger than six balls (a cue or hand lying free of the rail), or with ``cluster`` (seeds
        of :meth:`_cluster_seeds`) pieces that leave more than six balls unexplained (a rack of
        touching balls is mostly explained by its first fits, however many balls it holds);
        points within half a radius of a seed already tried (with ``cluster``, a pixel and a
        half) are not seeded again. Returns the new seeds (:meth:`_seeds_of`'s keys plus ``piece``)."""
        pieces: dict[int, tuple[np.ndarray, tuple[int, int], list[dict], list[np.ndarray]]] = {}
        for s, r in zip(seeds, fits):
            if "piece" not in s:
                continue
            comp, origin = s["piece"]
            entry = pieces.setdefault(id(comp), (comp, origin, [], []))
            entry[3].append(s["uv"])
            if r is not None:
                entry[2].append(r)
        out = []
        area_min = math.pi * self.r_min_px**2
        area_max = math.pi * self.r_max_px**2
        for comp, origin, rows, tried in pieces.values():
            if not rows or (not cluster and comp.sum() > 6 * area_max):
                # Nothing fitted (the same seeds would come again), or more than a small
                # cluster's worth of foreground (a cue or hand lying free of the rail).
                continue
            rest = comp.copy()
            sharp = [r for r in rows if not (r["blur_x"] or r["blur_y"])]
            if len(sharp) < len(rows):
                continue  # a streak's swept outline is not drawn here
            cen = np.array([[r["x"], r["y"], self.R] for r in sharp])
            outl = sphere_outline_px(self.camera, cen, self.R, 32, self.rays) - np.array(origin, float)
            mask = np.zeros_like(rest)
            cv2.fillPoly(mask, [np.round(o).astype(np.int32) for o in outl], 1)
            rest[cv2.dilate(mask, np.ones((3, 3), np.uint8)) > 0] = 0
            rest = cv2.morphologyEx(rest, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
            if rest.sum() < 0.5 * area_min or rest.sum() > 6 * area_max:
                continue
            dtm = cv2.distanceTransform(rest, cv2.DIST_L2, 5)
            floor = 0.65 * self.r_min_px
            # A cluster's seeds are Hough peaks, which can lie a few pixels off a ball's centre
            # where its rim is weak (a dark ball among bright ones): the remainder's peak, on
            # the ball's middle, is tried unless it is that seed within a pixel and a half.
            near = 1.5 if cluster else 0.5 * self.r_min_px
            peaks = (dtm >= floor) & (dtm >= cv2.dilate(dtm, np.ones((3, 3), np.uint8)) - 1e-3)
            ys, xs = np.nonzero(peaks)
            chosen: list[np.ndarray] = []
            for j in np.argsort(-dtm[ys, xs]):
                p = np.array([xs[j] + origin[0], ys[j] + origin[1]], float)
                if all(np.hypot(*(p - q)) > 1.1 * self.r_min_px for q in chosen) and all(np.hypot(*(p - q)) > near for q in tried):
                    chosen.append(p)
            out += [{"uv": p, "axis": np.array([1.0, 0.0]), "half_px": 0.0, "strict": False, "piece": (comp, origin)} for p in chosen]
        return out

    def _free_occluders(self, img: np.ndarray, seeds: list[dict], fits: list[dict | None]) -> list[dict | None]:
        """Fits (as ``fits``) with the balls of free pieces that hold something else refitted
        as strict seeds (:meth:`_seeds_of`): a piece of foreground not reaching in over the rail
        (seeds with ``piece``) of which what the fitted balls' outlines (sharp or swept, grown
        by a pixel for the blurred rim, then opened by a 3 x 3 square) leave is more than the
        largest ball's image area holds foreground no ball explains, after the remainder's own
        seeds (:meth:`_unexplained_seeds`) have had their turn: an arm, hand or cue lying free
        of the rail (its elbow or shoulder not in the zone's foreground). Its rounded ends (a
        bridge hand, the cue's butt, a bend of the sleeve) fit a sphere's outline over half a
        turn, as a ball touching an arm that reaches in does, and must pass the same stricter
        tests (a ring round the ball mostly free, a shorter gap in the outline). Balls of a
        cluster leave only rims of their piece; a ball touching a free arm leaves the arm and
        is refitted, as it would be were the arm reaching in over the rail. A cluster holding
        a ball that no fit explains (one of the limits below) is refitted so too, and so is a
        piece in which two fitted balls that do not touch are joined by foreground
        (:meth:`_bridged`: a hand's two rounded ends)."""
        pieces = _free_pieces(seeds, fits)
        if not pieces:
            return fits
        out = list(fits)
        for comp, origin, ks in pieces.values():
            beside = any(s.get("beside") and s["piece"][0] is comp for s in seeds if "piece" in s)
            cluster = any(seeds[k].get("cluster") for k in ks)
            explained, shadows = self._explained(img, comp, origin, [fits[k] for k in ks], cluster)
            if explained and not beside:
                # A shadow fitted beside its caster has done its part (its outline explains
                # its foreground) and goes; the caster is refitted with the rays toward it left
                # out of every round, as the ball's dark limb runs into its own shadow there
                # with no rim to find (the coarse outline takes the terminator instead, inside
                # the outline, and the fit leans away from the shadow).
                gone = [k for k in ks if any(fits[k] is g for g in shadows)]
                for k in gone:
                    out[k] = None
                shade = np.array([[fits[k]["x"], fits[k]["y"]] for k in gone]).reshape(-1, 2)
                for k in ks:
                    r = fits[k]
                    if k in gone or r["blur_x"] or r["blur_y"]:
                        continue
                    own = shade[np.hypot(shade[:, 0] - r["x"], shade[:, 1] - r["y"]) < _CASTER_R * self.R]
                    if len(own):
                        again = self._fit_seed(img, dict(seeds[k], uv=np.array([r["u"], r["v"]]), half_px=0.0), avoid=own, avoid_coarse=True)
                        if again is not None:
                            out[k] = again
                continue
            for k in ks:
                out[k] = self._fit_one(img, dict(seeds[k], strict=True))
        return out

    def _explained(self, img: np.ndarray, comp: np.ndarray, origin, rows: list[dict], cluster: bool = False) -> tuple[bool, list[dict]]:
        """Whether the detection rows fitted in a free piece (``comp``, (h, w) uint8 at
        ``origin`` px) explain it (:meth:`_free_occluders`): what their outlines (sharp or
        swept, grown by a pixel for the blurred rim, then opened by a 3 x 3 square) leave of it
        is at most the largest ball's image area, and no two of the balls among them
        (:meth:`_casters_only`) are bridged (:meth:`_bridged`); and the rows that are the balls'
        cast shadows (:meth:`_casters_only`, asking for the cloth's hue with ``cluster``)."""
        rest, mask = self._leftover(comp, origin, rows)
        balls = self._casters_only(img, rows, hue=cluster)
        shadows = [r for r in rows if not any(r is b for b in balls)]
        explained = float(rest.sum()) <= math.pi * self.r_max_px**2 and not self._bridged(comp, origin, mask, balls, shadows)
        return explained, shadows

    def _settled(self, img: np.ndarray, comp: np.ndarray, origin, rows: list[dict]) -> bool:
        """Whether the first fits ``rows`` of a free piece larger than ``_CLUSTER_BALLS`` ball
        images (``comp`` at ``origin`` px) need no second look as a touching cluster
        (:meth:`_cluster_retry`): they explain it (:meth:`_explained`), leave no room for
        another ball touching them in it (:meth:`_rooms`, :meth:`_room_ball`: less than a
        ball's area left over can still be most of a ball, the limb of a dark ball not standing
        out; a room in the shadow beside them is no ball's), and every row they take for a
        ball's cast shadow keeps the cloth's hue (a dark ball of another hue in a rack lies
        beside lit balls as their shadow would, :meth:`_casters_only`)."""
        explained, shadows = self._explained(img, comp, origin, rows)
        if not explained:
            return False
        balls = [r for r in rows if not any(r is s for s in shadows)]
        if any(self._room_ball(img, uv, balls) is not None for uv in self._rooms(comp, origin, rows)):
            return False
        return len(shadows) == len(self._explained(img, comp, origin, rows, cluster=True)[1]) if shadows else True

    def _leftover(self, comp: np.ndarray, origin, rows: list[dict]) -> tuple[np.ndarray, np.ndarray]:
        """(rest, mask) of a free piece (``comp``, (h, w) uint8 at ``origin`` px) and the
        detection rows fitted in it: ``mask`` their outlines (sharp or swept) filled in the
        piece's frame, ``rest`` the piece less the mask grown by a pixel (the blurred rim),
        opened by a 3 x 3 square (the thin rims a fit a pixel off leaves)."""
        mask = self._silhouettes(comp, origin, rows)
        rest = comp.copy()
        rest[cv2.dilate(mask, np.ones((3, 3), np.uint8)) > 0] = 0
        rest = cv2.morphologyEx(rest, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
        return rest, mask

    def _silhouettes(self, comp: np.ndarray, origin, rows: list[dict]) -> np.ndarray:
        """(h, w) uint8 in the frame of the piece ``comp`` (at ``origin`` px): the outlines
        (sharp or swept) of the detection rows ``rows`` filled with 1."""
        mask = np.zeros_like(comp)
        for r in rows:
            travel = math.hypot(r["blur_x"], r["blur_y"])
            # blur_* is the streak's whole travel plus a diameter (:meth:`_fit_seed`).
            half = max(0.5 * travel - self.R, 0.0)
            outl = _swept_outline_px(self.camera, r["x"], r["y"], half, math.atan2(r["blur_y"], r["blur_x"]), self.R, self.rays)
            cv2.fillPoly(mask, [np.round(outl - np.array(origin, float)).astype(np.int32)], 1)
        return mask

    def _rooms(self, comp: np.ndarray, origin, rows: list[dict]) -> list[np.ndarray]:
        """Image points (2,) px, deepest first, where what the sharp balls ``rows`` fitted in a
        free piece (``comp``, (h, w) uint8 at ``origin`` px) leave of it (:meth:`_leftover`)
        has room for another ball: peaks of its distance transform at least ``_ROOM_DEPTH`` of
        the image radius there deep, more than 1.1 radii apart. Touching balls leave only the
        creases between them (three touching circles of radius r leave a hole whose inscribed
        circle has radius (2 / sqrt(3) - 1) r = 0.155 r) and the crescents of fits a few mm off
        (a few tenths of r wide); a ball no fit took leaves its whole disc, less a pixel."""
        rest, _ = self._leftover(comp, origin, rows)
        if not rest.any():
            return []
        dtm = cv2.distanceTransform(rest, cv2.DIST_L2, 5)
        peaks = (dtm >= _ROOM_DEPTH * self.r_min_px) & (dtm >= cv2.dilate(dtm, np.ones((3, 3), np.uint8)) - 1e-3)
        ys, xs = np.nonzero(peaks)
        out: list[np.ndarray] = []
        for j in np.argsort(-dtm[ys, xs]):
            p = np.array([xs[j] + origin[0], ys[j] + origin[1]], float)
            if all(np.hypot(*(p - q)) > 1.1 * self.r_min_px for q in out) and dtm[ys[j], xs[j]] >= _ROOM_DEPTH * self._image_radius_px(p):
                out.append(p)
        return out

    def _fill_rooms(self, img: np.ndarray, comp: np.ndarray, origin, seeds: list[dict], fits: list[dict | None]) -> None:
        """Extend ``seeds`` and ``fits`` (parallel lists of a touching cluster's piece
        ``comp`` at ``origin`` px, in place) by the balls its fits leave room for
        (:meth:`_rooms`, :meth:`_room_ball`), one room at a time, the rooms sought again after
        each ball placed (at most one per ball image of the piece)."""
        most = int(comp.sum() / (math.pi * self.r_min_px**2)) + 1
        for _ in range(most):
            rows = [r for r in fits if r is not None]
            if not rows or self._leftover(comp, origin, rows)[0].sum() > 6 * math.pi * self.r_max_px**2:
                return  # more than six balls unexplained: no cluster (as _unexplained_seeds)
            for uv in self._rooms(comp, origin, rows):
                ball = self._room_ball(img, uv, rows)
                if ball is not None:
                    seeds.append({"uv": np.array([ball["u"], ball["v"]]), "axis": np.array([1.0, 0.0]), "half_px": 0.0, "strict": False, "piece": (comp, origin)})
                    fits.append(ball)
                    break
            else:
                return

    def _room_ball(self, img: np.ndarray, uv: np.ndarray, rows: list[dict]) -> dict | None:
        """A detection row for the ball of a touching cluster that no fit took, lying in a room
        of its piece (:meth:`_rooms`, image point ``uv`` px) among the sharp balls ``rows``
        fitted there: placed touching its neighbours (Gauss-Newton on |c - n_i| = 2 R, table
        frame at ball-centre height, over the rows within ``_ROOM_REACH`` radii of the room's
        point), as balls in a rack lie. It stands when at least two neighbours touch it so
        (each |c - n_i| within ``_ROOM_TOUCH`` R of 2 R, no other row nearer than 2 R less that),
        its disc stands out from the empty table over as much as a fitted ball's must
        (:meth:`_filled_share`) and, less its neighbours' pixels, is no cast shadow (the cloth
        darkened with its hue kept and no highlight, :func:`_cast_shadow`). None otherwise.
        The stated sigma is the touching residuals' RMS with the neighbours' own sigmas."""
        R = self.R
        sharp = [r for r in rows if not (r["blur_x"] or r["blur_y"])]
        if len(sharp) < 2:
            return None
        xy = np.array([[r["x"], r["y"]] for r in sharp])
        c = self.rays.backproject_point(uv, R)[:2]
        near = np.hypot(*(xy - c).T) < _ROOM_REACH * R
        if near.sum() < 2:
            return None
        n = xy[near]
        for _ in range(10):
            d = np.maximum(np.hypot(*(c - n).T), 1e-6)
            J = (c - n) / d[:, None]  # d|c - n_i| / dc
            step = np.linalg.lstsq(J, 2 * R - d, rcond=None)[0]
            c = c + step
            if math.hypot(*step) < 0.01:
                break
        d_all = np.hypot(*(xy - c).T)
        touch = np.abs(d_all - 2 * R) <= _ROOM_TOUCH * R
        if touch.sum() < 2 or np.any(d_all < (2 - _ROOM_TOUCH) * R) or not self._on_table(c[0], c[1]):
            return None
        uv_c = self.rays.project(np.array([[c[0], c[1], R]]))[0]
        r_loc = self._image_radius_px(uv_c)
        if self._filled_share(img, uv_c, r_loc) < 0.6:
            return None
        row = {"frame": 0, "t": 0.0, "x": float(c[0]), "y": float(c[1]), "u": float(uv_c[0]), "v": float(uv_c[1]),
               "blur_x": 0.0, "blur_y": 0.0, "joined": False}
        if self._disc_cast_shadow(img, row, sharp):
            return None
        colour, pattern = self._identity(img, uv_c, r_loc)
        res = d_all[touch] - 2 * R
        sig = math.sqrt(float(np.mean(res**2)) + float(np.mean([sharp[k]["sigma_mm"] ** 2 for k in np.nonzero(touch)[0]])))
        # Quality as a fit's (share of agreeing rays times exp(-rms / limit)), with the share
        # of the ball's outline it shares with its touching neighbours instead: a room ball's
        # position rests on theirs.
        quality = float(np.clip(min(touch.sum(), 6) / 6 * math.exp(-math.sqrt(float(np.mean(res**2))) / self.config.max_rms_mm), 0.0, 1.0))
        row.update(quality=quality, colour=colour, pattern=pattern, sigma_mm=max(sig, 0.15))
        return row

    def _cluster_retry(self, img: np.ndarray, seeds: list[dict], fits: list[dict | None]) -> tuple[list[dict], list[dict | None]]:
        """Seeds and fits (parallel lists, as in :meth:`_detect_box`) with each free piece that
        its fits do not explain (:meth:`_explained`) and that holds more than
        ``_CLUSTER_BALLS`` ball images and no streak seeded again as a cluster of touching
        balls: by :meth:`_cluster_seeds`, then ball by ball in what those fits leave
        (:meth:`_unexplained_seeds` with ``cluster``); the piece's seeds and fits are replaced
        by these where they explain it, and kept otherwise (an arm, hand or cue lying free of
        the rail: :meth:`_free_occluders` judges it as before). A touching cluster is one solid
        piece of foreground deepest between the balls (a rack is a filled triangle whose
        distance transform peaks at its middle), so its distance-transform seeds fall between
        balls and fit circles straddling two or three of them, which leave parts of those
        unexplained and overlap the balls fitted beside them."""
        drop: set[int] = set()
        new_seeds: list[dict] = []
        new_fits: list[dict | None] = []
        for comp, origin, ks in _free_pieces(seeds).values():
            rows = [fits[k] for k in ks if fits[k] is not None]
            if any(seeds[k]["half_px"] > 0 for k in ks) or any(r["blur_x"] or r["blur_y"] for r in rows):
                continue  # a streak: no cluster of resting balls
            if any(seeds[k].get("beside") for k in ks):
                continue  # within reach of an arm coming in over the rail: judged as touching it
            ys, xs = np.nonzero(comp)
            r_loc = self._image_radius_px(np.array([xs.mean() + origin[0], ys.mean() + origin[1]]))
            if len(xs) <= _CLUSTER_BALLS * math.pi * r_loc**2 or (rows and self._settled(img, comp, origin, rows)):
                continue
            new = [dict(q, piece=(comp, origin)) for q in self._cluster_seeds(img, comp, origin, r_loc)]
            got = [self._fit_one(img, q) for q in new]
            self._fit_remainder(img, new, got, cluster=True)
            self._fill_rooms(img, comp, origin, new, got)
            found = [r for r in got if r is not None]
            if found and self._explained(img, comp, origin, found, cluster=True)[0] and self._cluster_rims(img, found):
                # The balls of an explained cluster have their rings crossed by their
                # neighbours, not by something joined to them (_joined_no_rim).
                for q in new:
                    q["cluster"] = True
                for r in found:
                    r["joined"] = False
                # Replaced after the loop: the other pieces' indices point into these lists.
                drop.update(ks)
                new_seeds += new
                new_fits += got
        if not drop:
            return seeds, fits
        seeds = [q for k, q in enumerate(seeds) if k not in drop] + new_seeds
        fits = [r for k, r in enumerate(fits) if k not in drop] + new_fits
        return seeds, fits

    def _casters_only(self, img: np.ndarray, rows: list[dict], hue: bool = False) -> list[dict]:
        """``rows`` (detection rows fitted in one piece) less the sharp ones that are a cast
        shadow (:func:`_unlit`, without the lit balls' pixels) with another of the rows, no
        such shadow, within ``_CASTER_R`` radii to cast it. A lamp's shadow starts under the ball casting it, so
        seen from above ball and shadow make one piece with no waist between them, as wide
        across their join as the ball: fitted as two overlapping balls they would pass for the
        two rounded ends of a hand (:meth:`_bridged`). A fast ball's streak, whose ends carry
        no lit crown to tell it by the waist alone, is so lost with its shadow. With ``hue``
        (the rows of a cluster of touching balls, :meth:`_cluster_retry`) a shadow must also
        keep the cloth's hue (the chromaticity distortion of its disc's mean below
        ``_HUE_STEP``, as :func:`_cast_shadow` asks): a dark ball in a rack lies beside lit
        balls as a shadow does, dark and, on bright cloth, with no pixel brighter than it by
        the bound, while off the cloth's hue (a dark ball of the cloth's own hue there stays a
        limit)."""
        if len(rows) < 2:
            return rows
        # Judged without the pixels of the lit balls: the shadow's disc reaches into its
        # caster's lit side, which is no highlight of its own, while two touching balls'
        # shadows fitted as balls would hide each other. Brightest first, a row is lit when its
        # disc, less the lit rows' silhouettes, is no darker than the cloth beside a shadow
        # (mean brightness ratio at least 1 / _SAME_BRIGHT); a streak counts as lit.
        lit = [r for r in rows if r["blur_x"] or r["blur_y"]]
        sharp = [r for r in rows if not (r["blur_x"] or r["blur_y"])]
        for r in sorted(sharp, key=lambda r: -self._disc_brightness(img, r)):
            if self._disc_brightness(img, r, lit) >= 1.0 / _SAME_BRIGHT:
                lit.append(r)
        # Two balls cannot overlap: a fit whose disc the lit balls' silhouettes half cover is
        # no ball beside them, and what is left of its disc is judged, however little.
        shade = [not any(r is o for o in lit) and _unlit(*self._disc_own_pixels(img, r, lit, 0.0)) for r in rows]
        if hue:
            shade = [sh and self._cloth_hue(*self._disc_own_pixels(img, r, lit, 0.0)) for r, sh in zip(rows, shade)]
        if not any(shade):
            return rows
        casters = np.array([[r["x"], r["y"]] for r, s in zip(rows, shade) if not s]).reshape(-1, 2)
        return [r for r, s in zip(rows, shade)
                if not (s and len(casters) and np.min(np.hypot(casters[:, 0] - r["x"], casters[:, 1] - r["y"])) < _CASTER_R * self.R)]

    @staticmethod
    def _cloth_hue(I: np.ndarray, B: np.ndarray) -> bool:
        """Whether the mean of pixels ``I`` (N, 3) keeps the hue of the mean empty table ``B``
        (N, 3) under them: chromaticity distortion (:func:`_chroma_off`) below ``_HUE_STEP``."""
        return len(I) > 0 and _mean_brightness_hue(I, B)[1]

    def _drop_cast_shadows(self, img: np.ndarray, fits: list[dict | None], known: list[dict] = (), seeds: list[dict] | None = None,
                           tested: dict[int, tuple[dict, bool]] | None = None) -> list[dict | None]:
        """``fits`` with the sharp balls that are a cast shadow set to None: the disc within 0.7
        of the image radius is the cloth darkened with its hue kept and no highlight
        (:func:`_cast_shadow`), and another ball (a fit that is no such shadow, sharp or a
        streak, or a ``known`` ball) lies within ``_CASTER_R`` radii to cast it. A lamp's
        shadow of a ball starts under the ball (seen from above, it joins the ball's image), so
        a shadow alone is no ball's; a dark ball alone keeps its detection whatever its light.
        Where no ball casts it and its seed's piece of foreground (``seeds``, as
        :meth:`_seeds_of`) holds the casting ball's pixels, the fit is replaced by that ball's
        (:meth:`_caster_of`): a ball and its long shadow make one piece, seeded once, and the
        fit can take the shadow's end. Run after :meth:`_free_occluders`, which counts the
        shadow's fit as explaining its foreground (dropped before, the shadow would be a
        ball's area of foreground left unexplained beside the ball casting it, and the pair
        taken for an occluder). ``tested`` (row id -> (row, result)), kept by the caller over
        the passes on one frame, holds each row's :meth:`_disc_cast_shadow` so a row that
        stands unchanged is not tested again."""
        sharp = [k for k, r in enumerate(fits) if r is not None and not (r["blur_x"] or r["blur_y"])]
        if not sharp:
            return fits
        if tested is None:
            tested = {}
        for k in sharp:
            got = tested.get(id(fits[k]))
            if got is None or got[0] is not fits[k]:
                tested[id(fits[k])] = (fits[k], self._disc_cast_shadow(img, fits[k]))
        shade = {k for k in sharp if tested[id(fits[k])][1]}
        out = list(fits)
        if seeds is not None:
            for k in sharp:
                if k not in shade and "piece" in seeds[k]:
                    out[k] = self._off_own_shadow(img, fits[k], seeds[k], [r for r in fits if r is not None] + list(known))
        if not shade:
            return out
        casters = np.array([[r["x"], r["y"]] for k, r in enumerate(fits) if r is not None and k not in shade] + [[r["x"], r["y"]] for r in known]).reshape(-1, 2)
        for k in shade:
            r = fits[k]
            if len(casters) and np.min(np.hypot(casters[:, 0] - r["x"], casters[:, 1] - r["y"])) < _CASTER_R * self.R:
                out[k] = None
            elif seeds is not None and "piece" in seeds[k]:
                ball = self._caster_of(img, r, seeds[k])
                if ball is not None:
                    out[k] = ball
        return out

    def _joined_casters(self, img: np.ndarray, seeds: list[dict], fits: list[dict | None], known: list[dict] = ()) -> list[dict | None]:
        """``fits`` with each fit marked joined (:meth:`_joined_no_rim`, dropped at the end)
        in a free piece replaced by the ball whose lit pixels the piece holds
        (:meth:`_caster_of`), where that ball's own fit is not joined and no other fit or
        ``known`` ball is already there. A dim ball under a low lamp makes one piece with its
        long shadow; seeded once near the piece's middle (or as a streak along it), its fit
        straddles ball and shadow, its outline half on the shadow's soft end with no rim step
        there, and is marked joined (lamp_50fps's cue ball 900-1000 mm from its one lamp, 22 mm
        onto its shadow); the rounded end of a cue or hand it is marked for has lit pixels too,
        but their fit is joined again, or what the joined fit held beside them is no cast shadow
        (:func:`_cast_shadow` of its disc less the ball's silhouette: a stroking cue's shaft fitted
        from its lit pixels beside the butt, which is of the cue's own colour)."""
        out = list(fits)
        for k, r in enumerate(fits):
            if r is None or not r.get("joined") or "piece" not in seeds[k]:
                continue
            others = [f for f in out if f is not None and f is not r] + list(known)
            ball = self._caster_of(img, r, seeds[k], others)
            if ball is None or ball.get("joined") or any(math.hypot(f["x"] - ball["x"], f["y"] - ball["y"]) < 2 * self.R for f in others):
                continue
            # What the joined fit held beside the ball must be that ball's cast shadow: the
            # cloth darkened with its own hue, nothing lit (Horprasert et al. 1999's split of
            # shade from colour). The rounded end of a cue or hand is of its own colour.
            I, B = self._disc_own_pixels(img, r, [ball], least=0.2)
            if not _cast_shadow(I, B):
                continue
            out[k] = ball
        return out

    def _off_own_shadow(self, img: np.ndarray, row: dict, seed: dict, found: list[dict]) -> dict:
        """``row`` (a sharp fit of ``seed``, :meth:`_seeds_of`), or the ball casting it where it
        is a fit on that ball's own shadow: the piece's lit pixels seed a ball beside it
        (:meth:`_caster_of`) that no fit of ``found`` (detection rows) already is, and judged
        without that ball's pixels the disc is a shadow (:func:`_unlit`). A ball and its long
        shadow make one piece, seeded once near its middle; the fit can settle on the shadow
        with the ball's lit rim inside its disc, which the shadow test (:func:`_cast_shadow`)
        then takes for the fit's own highlight."""
        if self._disc_brightness(img, row) >= 1.0 / _SAME_BRIGHT:
            return row
        ball = self._caster_of(img, row, seed, found)
        if ball is None or any(math.hypot(f["x"] - ball["x"], f["y"] - ball["y"]) < self.R for f in found if f is not row):
            return row
        gap = math.hypot(ball["x"] - row["x"], ball["y"] - row["y"])
        # A dark ball's hue is noise (the chromaticity of a few DN), and a touching neighbour's
        # rim lies in the outline's outer band: no evidence there.
        alone = (math.hypot(f["x"] - row["x"], f["y"] - row["y"]) >= _NEAR_R * self.R for f in found if f is not row)
        if gap < self.R and all(alone) and not self._dark_body(img, np.array([ball["u"], ball["v"]])):
            pick = self._by_outline(img, row, ball)
            if pick is not row:
                return pick
        # Two balls cannot overlap: a caster nearer than 2 R is the only ball there, and
        # whatever of the disc its silhouette leaves is judged, however little.
        return ball if _unlit(*self._disc_own_pixels(img, row, [ball], 0.0 if gap < 2 * self.R else 0.5)) else row

    def _by_outline(self, img: np.ndarray, row: dict, ball: dict) -> dict:
        """Of two sharp fits of one ball (``row``, astride the ball and its own shadow, and
        ``ball``, the fit of its lit pixels, :meth:`_caster_of`), ``ball`` where its outline
        evidence (:meth:`_hue_step`) beats ``row``'s by at least ``_STEP_GAIN``, else ``row``;
        or a third fit started where the evidence is highest (:meth:`_hue_climb` from the
        chosen one), taken when its evidence beats the chosen one's by as much. A fit astride
        a coloured ball and its own shadow puts one side of its outline inside the ball's lit
        limb (the ball's hue on both sides) and the other on the shadow's outer edge (the
        cloth's hue on both sides); the codec's chroma spill makes that shadow look as
        coloured as the ball near the limb, so the disc tests (:func:`_unlit`) keep it, while
        the hue still steps at the true outline on both sides. Both fits' local rounds can
        walk onto the shadow from a start beyond the local edge's reach (the edge's bands then
        straddle the lit limb on one side and the shadow's outer edge on the other), so a
        start by the evidence gives the rounds a start within it."""
        e_ball, e_row = self._hue_step(img, ball), self._hue_step(img, row)
        best, e_best = (ball, e_ball) if e_ball >= e_row + _STEP_GAIN else (row, e_row)
        xy, e = self._hue_climb(img, best, e_best)
        if e >= e_best + _STEP_GAIN:
            moved = {"x": float(xy[0]), "y": float(xy[1])}
            step = math.hypot(moved["x"] - best["x"], moved["y"] - best["y"])
            uv = self.rays.project_point(moved["x"], moved["y"], self.R)
            best = dict(best, **moved, u=float(uv[0]), v=float(uv[1]), sigma_mm=max(float(best["sigma_mm"]), step))
        return best

    def _hue_climb(self, img: np.ndarray, row: dict, e: float) -> tuple[np.ndarray, float]:
        """Centre (x, y) mm, table frame, near the sharp fit ``row`` (whose outline evidence
        :meth:`_hue_step` is ``e``) where that evidence is highest, and the evidence there: a
        compass search (Hooke & Jeeves 1961's exploratory moves along the axes and diagonals)
        from ``row``'s centre in steps of ``_CLIMB_STEPS_MM``, each step tried until no move
        raises the evidence, at most ``_CLIMB_MOVES`` moves in all."""
        xy = np.array([float(row["x"]), float(row["y"])])
        moves = 0
        for step in _CLIMB_STEPS_MM:
            while moves < _CLIMB_MOVES:
                tries = [xy + step * d for d in _COMPASS]
                es = [self._hue_step(img, {"x": q[0], "y": q[1]}) for q in tries]
                k = int(np.argmax(es))
                if not es[k] > e:
                    break
                xy, e = tries[k], es[k]
                moves += 1
        return xy, e

    def _hue_step(self, img: np.ndarray, row: dict) -> float:
        """Outline evidence of the sharp fit ``row`` (a detection row): the median over
        ``_N_RAYS`` rays from its centre's image of the chromaticity distortion against the
        empty table (:func:`_chroma_off`, Horprasert, Harwood & Davis 1999: the sine of the
        angle between the two colours, which a shadow only scales) averaged ``_STEP_BAND_PX``
        inside the predicted outline at ball-centre height, less that averaged as far outside.
        A ball whose hue differs from the cloth's steps from its own hue to the cloth's (or
        to the cloth's shadow, of the cloth's hue) across its true outline on every ray;
        -inf where the outline does not project."""
        x, y, R = float(row["x"]), float(row["y"]), self.R
        c = self.rays.project(np.array([[x, y, R]]))[0]
        if not (math.isfinite(c[0]) and math.isfinite(c[1])):
            return -math.inf
        rho = _ray_polygon(c, _RAY_DIRS, _swept_outline_px(self.camera, x, y, 0.0, 0.0, R, self.rays))
        if not np.isfinite(rho).all():
            return -math.inf
        band = np.asarray(_STEP_BAND_PX, np.float32)
        off = np.concatenate([-band[::-1], band])
        r = np.maximum(rho[:, None] + off[None, :], 0.0)
        mx = (c[0] + r * _RAY_DIRS[:, 0:1]).astype(np.float32)
        my = (c[1] + r * _RAY_DIRS[:, 1:2]).astype(np.float32)
        I, B = self._frame_and_empty(img, mx, my)
        B = B.astype(np.float32)
        ch = _chroma_off(I, B, _dot3_f32(I, B) / np.maximum(_dot3_f32(B, B), 1.0))
        n = len(band)
        return _median(ch[:, :n].mean(axis=1) - ch[:, n:].mean(axis=1))

    def _inside_any(self, us: np.ndarray, vs: np.ndarray, rows: list[dict]) -> np.ndarray:
        """(N,) bool: whether pixels ``us``, ``vs`` (int arrays, px) lie inside the silhouette
        of any of ``rows`` (detection rows, sharp or swept), grown by 2 px for the blurred rim
        as :meth:`_components` grows them."""
        u0, v0 = int(us.min()), int(vs.min())
        mask = np.zeros((int(vs.max()) - v0 + 1, int(us.max()) - u0 + 1), np.uint8)
        for o in rows:
            half = max(0.5 * math.hypot(o["blur_x"], o["blur_y"]) - self.R, 0.0)
            c = np.array([o["u"], o["v"]])
            out = _swept_outline_px(self.camera, o["x"], o["y"], half, math.atan2(o["blur_y"], o["blur_x"]), self.R, self.rays) - c
            out *= (1.0 + 2.0 / np.maximum(np.hypot(out[:, 0], out[:, 1]), 1.0))[:, None]
            cv2.fillPoly(mask, [np.round(out + c - np.array([u0, v0])).astype(np.int32)], 1)
        return mask[vs - v0, us - u0] > 0

    def _caster_of(self, img: np.ndarray, shadow: dict, seed: dict, found: list[dict] = ()) -> dict | None:
        """The ball casting the shadow fitted as ``shadow`` (a detection row), from the rest of
        its seed's piece of foreground (``seed["piece"]``): the piece's pixels off the empty
        table's hue (the chromaticity distortion of :func:`_cast_shadow`, per pixel, at least
        ``_HUE_STEP``) or brighter than it by 1.15 (a lit side or highlight), outside the
        silhouettes of the balls ``found`` (other detection rows: a ball beside the pair, in
        the same piece, is no caster of it) and within ``_CASTER_R`` + 1 image radii of the
        shadow's centre, at least a third of the smallest ball's image area of them, seed a
        ball at their centroid; its fit (:meth:`_fit_one`) stands when it is no shadow itself
        and lies within ``_CASTER_R`` radii of the shadow's (its pixels so within one image
        radius more). None otherwise (a black ball on grey cloth has no such pixels: its
        shadow's fit stands as it was)."""
        comp, origin = seed["piece"]
        ys, xs = np.nonzero(comp)
        us, vs = xs + origin[0], ys + origin[1]
        I = img[vs, us].astype(np.float32)
        B = self.background.image[vs, us]
        a = _dot3(I, B) / np.maximum(_dot3(B, B), 1.0)
        lit = (_chroma_off(I, B, a) >= _HUE_STEP) | (a > LIT_RATIO)
        others = [r for r in found if r is not shadow]
        if others:
            lit &= ~self._inside_any(us, vs, others)
        reach = (_CASTER_R + 1.0) * self.r_max_px
        lit &= np.hypot(us - shadow["u"], vs - shadow["v"]) <= reach
        if lit.sum() < 0.3 * math.pi * self.r_min_px**2:
            return None
        uv = np.array([us[lit].mean(), vs[lit].mean()])
        r = self._fit_one(img, dict(seed, uv=uv, half_px=0.0))
        if r is None or (r["blur_x"] or r["blur_y"]) or self._disc_cast_shadow(img, r):
            return None
        if math.hypot(r["x"] - shadow["x"], r["y"] - shadow["y"]) >= _CASTER_R * self.R:
            return None
        return r

    def _disc_cast_shadow(self, img: np.ndarray, row: dict, others: list[dict] = ()) -> bool:
        """:func:`_cast_shadow` of the pixels within 0.7 of the image radius round the centre's
        image of the sharp ball of detection ``row`` (the disc of :meth:`_filled_share`), less
        those inside the silhouette of any of the ``others`` (:meth:`_disc_own_pixels`)."""
        I, B = self._disc_own_pixels(img, row, others)
        return _cast_shadow(I, B)

    def _disc_brightness(self, img: np.ndarray, row: dict, others: list[dict] = ()) -> float:
        """Brightness ratio of the mean frame colour to the mean empty table's (I.B / B.B,
        Horprasert et al. 1999) over the disc within 0.7 of the image radius round the
        centre's image of the sharp ball of detection ``row``, less the silhouettes of
        ``others`` (:meth:`_disc_own_pixels`, judged on whatever is left)."""
        I, B = self._disc_own_pixels(img, row, [o for o in others if o is not row], 0.0)
        if len(I) == 0:
            return 0.0  # wholly inside lit balls: no light of its own
        Im, Bm = I.astype(np.float32).mean(axis=0), B.astype(np.float32).mean(axis=0)
        return float(Im @ Bm) / max(float(Bm @ Bm), 1.0)

    def _disc_own_pixels(self, img: np.ndarray, row: dict, others: list[dict] = (), least: float = 0.5) -> tuple[np.ndarray, np.ndarray]:
        """Frame and empty-table colours ((N, 3), (N, 3)) of the pixels within 0.7 of the image
        radius round the centre's image of the sharp ball of detection ``row``, less those
        inside the silhouette of any of the ``others`` (detection rows, sharp or swept; grown
        by 2 px for the blurred rim, as :meth:`_components` grows them); none when less than
        the share ``least`` of the disc is left (too little of it to judge). A lamp's shadow
        starts under the ball casting it, so a fit on the shadow lies about R / tan(elevation) from
        that ball (1.2-1.9 R, see ``_CASTER_R``) and its disc reaches into the ball's lit side:
        those pixels are the caster's, and their brightness is no highlight of the fitted
        "ball"."""
        uv = np.array([row["u"], row["v"]])
        r = 0.7 * float(np.mean(np.hypot(*(self.rays.sphere_outline(row["x"], row["y"], self.R) - uv).T)))
        px_mm = self.ball_px / (2 * self.R)
        near = [o for o in others if math.hypot(o["u"] - uv[0], o["v"] - uv[1]) < r + self.r_max_px + 2.0 + 0.5 * math.hypot(o["blur_x"], o["blur_y"]) * px_mm]
        if not near:
            I, B, _ = self._disc_pixels(img, uv, r)
            return I, B
        none = np.zeros((0, 3), np.float32)
        h, w = img.shape[:2]
        u0, v0 = max(int(math.floor(uv[0] - r)), 0), max(int(math.floor(uv[1] - r)), 0)
        u1, v1 = min(int(math.ceil(uv[0] + r)) + 1, w), min(int(math.ceil(uv[1] + r)) + 1, h)
        if u1 <= u0 or v1 <= v0:
            return none, none
        yy, xx = np.mgrid[v0:v1, u0:u1]
        inside = (xx - uv[0]) ** 2 + (yy - uv[1]) ** 2 <= r * r
        keep = inside.copy()
        keep[inside] = ~self._inside_any(xx[inside], yy[inside], near)
        if keep.sum() < least * inside.sum() or not keep.any():
            return none, none
        return img[v0:v1, u0:u1][keep], self.background.image[v0:v1, u0:u1][keep]

    def _bridged(self, comp: np.ndarray, origin, mask: np.ndarray, rows: list[dict], shadows: list[dict] = ()) -> bool:
        """Whether two sharp balls fitted in one free piece (``comp``, (h, w) uint8 at
        ``origin`` px; ``mask`` their outlines filled in its frame) that do not touch (centres
        more than 2.25 R apart, table frame: a gap of a quarter radius, well beyond the fits'
        errors) are joined by foreground all along the line between their centres' images,
        outside both outlines (grown by a pixel), or held apart by something a ball wide
        (:meth:`_held_apart`). Spheres that do not touch meet only through
        something else lying between them: the two ends of a hand or of a forearm fitted as
        two balls, whose middle the outlines leave less than a ball's area of. Two fitted
        spheres that overlap (centres 1.2 to 2 R apart: nearer, they are one ball fitted twice,
        :meth:`_dedupe`) are joined so too when the piece is as wide across the line between
        them, at its middle, as ``_JOIN_WIDTH`` of a ball's image (:meth:`_join_width`): balls
        cannot overlap, and touching ones pinch to a waist there (their silhouettes meet at a
        point), while the middle of a hand or forearm fitted as two overlapping balls is as
        wide as the hand. ``shadows``: fits on the balls' cast shadows in the piece
        (:meth:`_casters_only`), no balls to pair but left out of the width like the other
        balls: two touching balls' shadows fill the waist between them."""
        sharp = [r for r in rows if not (r["blur_x"] or r["blur_y"])]
        grown = cv2.dilate(mask, np.ones((3, 3), np.uint8))
        h, w = comp.shape
        # Chains of touching balls (centres within 2.25 R): labels of the graph's components.
        chain = list(range(len(sharp)))
        for i in range(len(sharp)):
            for j in range(i):
                if math.hypot(sharp[i]["x"] - sharp[j]["x"], sharp[i]["y"] - sharp[j]["y"]) <= 2.25 * self.R:
                    old_, new_ = chain[i], chain[j]
                    chain = [new_ if c == old_ else c for c in chain]
        for i in range(len(sharp)):
            for j in range(i + 1, len(sharp)):
                a, b = sharp[i], sharp[j]
                d = math.hypot(a["x"] - b["x"], a["y"] - b["y"])
                if 1.2 * self.R < d < 2 * self.R and self._join_width(comp, origin, a, b, [r for r in rows if r is not a and r is not b] + list(shadows)) >= _JOIN_WIDTH:
                    return True
                if d <= 2.25 * self.R or chain[i] == chain[j]:
                    # Touching, or joined by a chain of touching balls (two balls of a rack):
                    # the foreground between them is the chain's balls' and the creases
                    # between those.
                    continue
                p, q = np.array([a["u"], a["v"]]) - origin, np.array([b["u"], b["v"]]) - origin
                n = int(math.ceil(2 * math.hypot(*(q - p)))) + 1
                t = np.linspace(0.0, 1.0, n)[:, None]
                uv = np.round(p + t * (q - p)).astype(int)
                ok = (uv[:, 0] >= 0) & (uv[:, 0] < w) & (uv[:, 1] >= 0) & (uv[:, 1] < h)
                uv = uv[ok]
                gap = grown[uv[:, 1], uv[:, 0]] == 0
                if gap.any() and np.all(comp[uv[gap, 1], uv[gap, 0]] > 0):
                    return True
                if self._held_apart(comp, origin, a, b, [r for r in rows if r is not a and r is not b] + list(shadows)):
                    return True
        return False

    def _held_apart(self, comp: np.ndarray, origin, a: dict, b: dict, others: list[dict]) -> bool:
        """Whether two fitted balls ``a`` and ``b`` of a free piece (``comp`` at ``origin`` px)
        that do not touch are held apart by something as wide as a ball between them: the piece
        is at least ``_JOIN_WIDTH`` of a ball's image wide across the line between their
        centres' images at its middle (:meth:`_join_width`). Between two balls that do not touch
        lies the cloth, or their shadows (which only dim it); the two rounded ends of a bridge
        hand fitted as two balls a few mm more than a diameter apart have the hand's middle
        there, whose foreground the outer gap test of :meth:`_bridged` misses when the two
        outlines, grown by a pixel, close the line between the centres (rendered extra clip
        dim_540p_60fps frame 214: centres 2.49 R apart, a gap of one or two pixels at 540p)."""
        return self._join_width(comp, origin, a, b, others) >= _JOIN_WIDTH

    def _join_width(self, comp: np.ndarray, origin, a: dict, b: dict, others: list[dict]) -> float:
        """Width of the piece ``comp`` ((h, w) uint8 at ``origin`` px), less the silhouettes of
        the ``others`` fitted in it (grown by a pixel: a third ball touching both, as in a
        triangle, lies across the join), across the line between the centres' images of
        detection rows ``a`` and ``b``, at its middle: the run of foreground holding the middle
        point along the perpendicular (half-pixel steps), in units of a ball's image diameter
        there (0 when the middle point is not foreground)."""
        if others:
            gone = self._silhouettes(comp, origin, others)
            comp = comp.copy()
            comp[cv2.dilate(gone, np.ones((3, 3), np.uint8)) > 0] = 0
        p, q = np.array([a["u"], a["v"]], float), np.array([b["u"], b["v"]], float)
        m = 0.5 * (p + q)
        e = (q - p) / max(math.hypot(*(q - p)), 1e-9)
        mid = self.rays.backproject_point(m, self.R)
        r_px = float(np.mean(np.hypot(*(self.rays.sphere_outline(mid[0], mid[1], self.R) - m).T)))
        s = np.arange(-2.0 * r_px, 2.0 * r_px + 0.25, 0.5)
        uv = np.round(m[None] - np.array(origin, float) + s[:, None] * np.array([-e[1], e[0]])).astype(int)
        h, w = comp.shape
        ok = (uv[:, 0] >= 0) & (uv[:, 0] < w) & (uv[:, 1] >= 0) & (uv[:, 1] < h)
        fg = np.zeros(len(s), bool)
        fg[ok] = comp[uv[ok, 1], uv[ok, 0]] > 0
        k = int(np.argmin(np.abs(s)))
        if not fg[k]:
            return 0.0
        gaps = np.nonzero(~fg)[0]
        lo = gaps[gaps < k].max() + 1 if np.any(gaps < k) else 0
        hi = gaps[gaps > k].min() - 1 if np.any(gaps > k) else len(s) - 1
        return (hi - lo + 1) * 0.5 / (2.0 * r_px)

    def _refit_touching(self, img: np.ndarray, seeds: list[dict], fits: list[dict | None]) -> list[dict]:
        """Refit each sharp ball that has another sharp ball within ``_NEAR_R`` radii (centre to
        centre, table frame) with the rays toward its neighbours left out of the local edge
        (:meth:`_fit_seed`'s ``avoid``), starting from its first fit; the refit stands whenever
        it passes the same tests, the first fit only when it does not (too little outline left,
        or a test failed). Where two balls touch, the local edge's sample bands round the
        contact hold the other ball's rim, so those rays see a ball-to-ball step instead of
        ball-to-cloth, on one side of the sphere only, and bias the centre by a few mm even
        under the Tukey weights (several such rays in a row are not outliers to the
        biweight). The two fits' qualities are not comparable: the first fit's share of
        agreeing rays and their RMS are measured partly on the neighbour's rim, where a fit
        pulled towards it agrees best. Returns the detection rows (None fits dropped)."""
        sharp = [(i, r) for i, r in enumerate(fits) if r is not None and not (r["blur_x"] or r["blur_y"])]
        if len(sharp) < 2:
            return [r for r in fits if r is not None]
        xy = np.array([[r["x"], r["y"]] for _, r in sharp])
        starts = self._refit_starts(img, [r for _, r in sharp])
        out = list(fits)
        for k, (i, r) in enumerate(sharp):
            d = np.hypot(xy[:, 0] - xy[k, 0], xy[:, 1] - xy[k, 1])
            near = (d < _NEAR_R * self.R) & (np.arange(len(sharp)) != k)
            if not near.any():
                continue
            start = dict(seeds[i], uv=starts[k], half_px=0.0)
            again = self._fit_either(img, start, avoid=xy[near])
            if again is not None:
                out[i] = again
        return [r for r in out if r is not None]

    def _refit_starts(self, img: np.ndarray, sharp: list[dict]) -> np.ndarray:
        """Image centres (N, 2) px from which :meth:`_refit_touching` refits the sharp rows
        ``sharp``: their own, spread so that no two balls at rest (:meth:`_at_rest`) whose
        fits overlap (``_SPREAD_MIN_R`` to 2 radii apart, table frame) are closer than a ball
        image's diameter (:func:`_spread_seeds`).
        Only balls at rest: the two sharp fits a fast ball's streak was split into lie 1.5 R
        apart and are one ball (multi_rail_30fps's cue ball, moved 8 mm when spread); and not
        one ball fitted twice (multi_rail_30fps frame 234, 0.01 R apart)."""
        uv = np.array([[r["u"], r["v"]] for r in sharp], float)
        xy = np.array([[r["x"], r["y"]] for r in sharp], float)
        d = np.linalg.norm(xy[:, None] - xy[None], axis=2)
        pairs = (d > _SPREAD_MIN_R * self.R) & (d < 2 * self.R)
        if not pairs.any():
            return uv
        rest = np.array([bool(pairs[k].any()) and self._at_rest(img, r) for k, r in enumerate(sharp)], bool)
        pairs &= rest[:, None] & rest[None]
        if not pairs.any():
            return uv
        diam = np.array([2 * self._image_radius_px(q) for q in uv])
        return _spread_seeds(uv, diam, pairs=pairs)

    def _at_rest(self, img: np.ndarray, row: dict) -> bool:
        """Whether the sharp detection row ``row`` is of a ball that did not move since the
        previous frame: over its disc (0.8 of its image radius), the frame's mean change from
        the previous frame (largest of the three channels' absolute differences, DN) is under
        ``_MOVED_SHARE`` of its mean difference from the empty table (its contrast; at least
        four noise sigmas). A ball at rest changes by the noise and the codec's flicker; one
        that moved by a good part of its width changes by about its contrast. With no previous
        frame (the first one) nothing is known to move: at rest. Frame differencing (Jain &
        Nagel 1979)."""
        prev = self._last_img
        if prev is None or prev.shape != img.shape:
            return True
        uv = np.array([row["u"], row["v"]], float)
        r = 0.8 * self._image_radius_px(uv)
        now, empty, _ = self._disc_pixels(img, uv, r)
        if len(now) == 0:
            return True
        before, _, _ = self._disc_pixels(prev, uv, r)
        now = now.astype(np.float32)
        moved = float(np.abs(now - before).max(axis=1).mean())
        contrast = float(np.abs(now - empty).max(axis=1).mean())
        return moved < _MOVED_SHARE * max(contrast, 4.0 * self.background.sigma)

    def _soft_ends(self, img: np.ndarray, row: dict) -> bool:
        """Whether a fitted streak (a detection row with a nonzero blur vector) fades in and out
        along its motion as a swept ball does.

        A sphere whose centre sweeps ``[-h, h]`` at an even pace during the exposure covers a
        point of the axis at ``s`` for ``|[s - R, s + R] & [-h, h]| / 2h`` of it: for h >= R (every
        streak fitted as one, see ``_MIN_HALF_STREAK_R``) a plateau that falls linearly to 0 over
        ``2R`` at each end, so the colour's departure from the empty table, linear in the
        coverage, falls from 75 % to 25 % of the plateau over R. Something still and ball-wide but
        elongated (a hand, a forearm's end, or the faded trace a codec leaves of one just
        lifted) ends sharply, within the optics' blur (a pixel or two), at one end at least.
        The profile is sampled along the fitted axis at ball-centre height (mean of three lines
        0.3 R apart across it); the softer end must fall over at least half of R, and the
        sharper over at least ``_SHARP_END_R`` of R, as the sweep is the same at both; an end
        still above 25 % where the profile ends (h + 2R from the middle, R beyond the swept
        sphere's reach) runs into something else (a ball it meets, the cue) and is not judged
        so.
        """
        R = self.R
        bx, by = float(row["blur_x"]), float(row["blur_y"])
        h = max(math.hypot(bx, by) / 2 - R, R)
        e = np.array([bx, by]) / max(math.hypot(bx, by), 1e-9)
        n = np.array([-e[1], e[0]])
        step = 0.5 * 2 * R / self.ball_px  # half a pixel, mm
        s = np.arange(-(h + 2 * R), h + 2 * R + 1e-9, step)
        c = np.array([row["x"], row["y"]])
        xy = c[None, None] + s[None, :, None] * e + np.array([-0.3 * R, 0.0, 0.3 * R])[:, None, None] * n
        pts = self.camera.project(np.column_stack([xy.reshape(-1, 2), np.full(xy.shape[0] * xy.shape[1], R)]))
        mx = pts[:, 0].astype(np.float32).reshape(xy.shape[:2])
        my = pts[:, 1].astype(np.float32).reshape(xy.shape[:2])
        f, b = self._frame_and_empty(img, mx, my)
        # |I - B| is linear in the coverage for a ball of one colour (I = c P + (1 - c) B).
        D = (np.linalg.norm(f - b, axis=2) / np.maximum(np.linalg.norm(b, axis=2), COLOUR_FLOOR_DN)).mean(axis=0)
        D = np.convolve(D, np.ones(3) / 3, mode="same")
        plateau = float(np.percentile(D[np.abs(s) <= h], 90))
        if plateau <= 0:
            return False
        widths = []
        sharp = False
        for side in (1, -1):
            out = side * s > 0
            ss, dd = side * s[out], D[out]
            order = np.argsort(ss)
            ss, dd = ss[order], dd[order]
            hi = ss[dd >= 0.75 * plateau]
            lo = ss[dd >= 0.25 * plateau]
            if len(hi) == 0 or len(lo) == 0:
                continue
            widths.append(float(lo.max() - hi.max()))
            sharp |= lo.max() < ss[-1] and widths[-1] < _SHARP_END_R * R
        return bool(widths) and max(widths) >= 0.5 * R and not sharp

    def _whole_piece(self, img: np.ndarray, us: np.ndarray, vs: np.ndarray, known: list[dict] = ()) -> tuple[np.ndarray, tuple[int, int], bool]:
        """The foreground component (as in :meth:`_detect_box`, ``known`` balls left out)
        holding the pixels ``us``, ``vs`` (int arrays, px) of a piece cut by its box, found in a
        window grown round the piece by two ball diameters: (mask (h, w) uint8 cropped to the
        component, its origin (u, v) px, whether it touches the ball zone's border)."""
        H, W = img.shape[:2]
        g = int(math.ceil(2 * self.ball_px))
        wu0, wv0 = max(int(us.min()) - g, 0), max(int(vs.min()) - g, 0)
        wu1, wv1 = min(int(us.max()) + g + 1, W), min(int(vs.max()) + g + 1, H)
        n, lab, stats = self._components(img, (wu0, wv0, wu1, wv1), known)
        hit = lab[vs - wv0, us - wu0]
        hit = hit[hit > 0]
        if len(hit) == 0:  # cannot happen (same pixels, same test), but keep the piece then
            u_, v_ = int(us.min()), int(vs.min())
            comp = np.zeros((int(vs.max()) - v_ + 1, int(us.max()) - u_ + 1), np.uint8)
            comp[vs - v_, us - u_] = 1
            return comp, (u_, v_), bool(np.any(self._zone_edge[vs, us]))
        k = int(np.bincount(hit).argmax())
        bx, by, bw, bh = stats[k, :4]
        comp = (lab[by : by + bh, bx : bx + bw] == k).astype(np.uint8)
        edge = self._zone_edge[wv0 + by : wv0 + by + bh, wu0 + bx : wu0 + bx + bw]
        return comp, (wu0 + int(bx), wv0 + int(by)), bool(np.any(edge & (comp > 0)))

    def _reaching(self, img: np.ndarray) -> np.ndarray:
        """(H/2, W/2) bool at half scale (pixel (v, u) of the frame is ``[v // 2, u // 2]``):
        foreground of the whole frame whose connected component (8-connected) reaches the ball
        zone's border, i.e. enters over the rail like an arm or cue. Built once per frame, on
        demand; half scale keeps a cue (about 6 px wide at 2 mm per px) connected at a quarter
        of the cost of the full frame."""
        if self._reach is not None and self._reach[0] is img:
            return self._reach[1]
        bg = self.background
        a0, b0, a1, b1 = self._zone_half_box
        if self._bg_half is None or self._bg_half[0] != bg.updates:
            # The half-scale model of the zone's box and its own terms of the score, made once
            # per update of the model (the frames between updates share them).
            half = np.ascontiguousarray(self._half_box(bg.image))
            self._bg_half = (bg.updates, half, _background_terms(half))
        small = self._half_box(img)
        zone = self._zone_half[b0:b1, a0:a1]
        score = _ballness(small.astype(np.float32), self._bg_half[1], *self._bg_half[2])
        fg = ((score > self._score_thr) & zone).astype(np.uint8)
        n, lab = cv2.connectedComponents(fg, connectivity=8)
        hit = np.zeros(n, bool)
        hit[lab[self._zone_edge_half[b0:b1, a0:a1] & (fg > 0)]] = True
        hit[0] = False
        out = np.zeros(self._zone_half.shape, bool)
        out[b0:b1, a0:a1] = hit[lab]
        self._reach = (img, out)
        return out

    def _half_box(self, img: np.ndarray) -> np.ndarray:
        """The zone's half-scale box (``_zone_half_box``) of ``cv2.resize(img, _half_size,
        INTER_AREA)`` for an (H, W, ...) image. Where H and W are even each half-scale pixel is
        the mean of its own 2 x 2 block (OpenCV's area resize by exactly two), so the box is
        reduced alone: the same pixels for a fraction of the frame's work."""
        a0, b0, a1, b1 = self._zone_half_box
        h, w = img.shape[:2]
        if h % 2 or w % 2:
            return cv2.resize(img, self._half_size, interpolation=cv2.INTER_AREA)[b0:b1, a0:a1]
        return cv2.resize(img[2 * b0 : 2 * b1, 2 * a0 : 2 * a1], (a1 - a0, b1 - b0), interpolation=cv2.INTER_AREA)

    def _image_radius_px(self, uv: np.ndarray) -> float:
        """Mean radius (px) of the image of a ball whose centre's image is ``uv`` (2,) px: its
        silhouette (:func:`sphere_outline_px`, 16 rays) about its centre's projection."""
        return self.rays.image_radius(float(uv[0]), float(uv[1]), self.R)

    def _seeds_of(self, comp: np.ndarray, pts: np.ndarray, origin, occluder: bool) -> list[dict]:
        """Seeds (image centre, half streak px along a unit axis, strict flag) of one component."""
        a = len(pts)
        cen = pts.mean(axis=0)
        r_loc = self._image_radius_px(cen)
        area_ball = math.pi * r_loc**2
        if not occluder and a <= 6 * area_ball:
            cov = np.cov((pts - cen).T) if a > 2 else np.eye(2)
            evals, evecs = np.linalg.eigh(cov)
            axis = evecs[:, 1]
            proj = (pts - cen) @ axis
            perp = (pts - cen) @ evecs[:, 0]
            half_len = (proj.max() - proj.min() + 1) / 2
            half_wid = (perp.max() - perp.min() + 1) / 2
            hull = cv2.convexHull(pts.astype(np.float32))
            solidity = a / max(cv2.contourArea(hull), 1.0)
            # A ball, sharp or swept along its motion, is a ball's width across: at lateral
            # offset y the swept sphere's chord is 2 sqrt(R^2 - y^2), so a streak's foreground
            # narrows below R only where its middle barely clears the threshold (coverage at
            # 0.5 R off the axis is still 87 % of the middle's). A thinner piece is a cue, a
            # finger or an edge, not a ball.
            if 0.5 * r_loc <= half_wid <= 1.35 * r_loc and solidity >= 0.9:
                if half_len > 1.5 * r_loc and half_len < 2.6 * r_loc:
                    # Two touching balls or one blurred ball? A sphere swept along a segment
                    # is widest at the middle of its streak (every point there is covered
                    # longest); two spheres pinch to a waist where they touch. Width profile
                    # across the principal axis, in 1 px bins along it.
                    bins = np.round(proj - proj.min()).astype(int)
                    width = np.bincount(bins).astype(float)
                    mid = int(round(-proj.min()))
                    waist = width[max(mid - 1, 0) : mid + 2].mean()
                    if waist < 0.8 * width.max():
                        off = (half_len - r_loc) * axis
                        return [
                            {"uv": cen - off, "axis": axis, "half_px": 0.0, "strict": False},
                            {"uv": cen + off, "axis": axis, "half_px": 0.0, "strict": False},
                        ]
                return [{"uv": cen, "axis": axis, "half_px": max(half_len - r_loc, 0.0), "strict": False}]
        # Distance-transform peaks: one per ball of a touching group. A ball's image is a whole
        # disc: holes in it smaller than half a ball (a highlight or mark that happens to match
        # the cloth) are filled first, or a one-pixel hole at its middle would halve its depth.
        dtm = cv2.distanceTransform(_fill_small_holes(comp, 0.5 * area_ball), cv2.DIST_L2, 5)
        floor = (0.8 if occluder else 0.65) * self.r_min_px
        peaks = (dtm >= floor) & (dtm >= cv2.dilate(dtm, np.ones((3, 3), np.uint8)) - 1e-3)
        ys, xs = np.nonzero(peaks)
        order = np.argsort(-dtm[ys, xs])
        chosen = []
        for j in order:
            p = np.array([xs[j] + origin[0], ys[j] + origin[1]], float)
            if all(np.hypot(*(p - q)) > 1.1 * self.r_min_px for q in chosen):
                chosen.append(p)
        return [{"uv": p, "axis": np.array([1.0, 0.0]), "half_px": 0.0, "strict": occluder} for p in chosen]

    def _cluster_seeds(self, img: np.ndarray, comp: np.ndarray, origin, r_px: float) -> list[dict]:
        """Seeds of a free piece of foreground (``comp``, (h, w) uint8 at ``origin`` px) that may
        hold touching balls: the peaks of a circle Hough transform of the frame's colour edges at
        the ball's image radius ``r_px`` (the piece's centroid's), strongest first, as
        :meth:`_seeds_of`'s dicts.

        Each pixel of the piece (grown by 2 px for its rim) votes, weighted by its edge
        strength, for the points ``r_px`` either way along its edge normal (the gradient
        direction of the colour image, Di Zenzo 1986's structure tensor of the three channels,
        after a Gaussian smoothing of 1 px): the circle Hough transform with the gradient's
        direction (Kimme, Ballard & Sabin 1975; Ballard 1981). Both ways, as a ball's rim may be
        darker or brighter than what lies beyond it (cloth, shadow, or a neighbour). Every
        ball's rim, against the cloth or against a touching neighbour, so votes for its centre,
        wherever the piece's distance transform peaks; a ball's marks, highlight and stripe
        edges vote in rings round themselves, not for one point. Votes are smoothed by a
        Gaussian of a tenth of the radius (at least a pixel) and kept inside the piece (a ball's
        centre lies on its own disc); peaks are local maxima of at least
        ``_CLUSTER_VOTE_SHARE`` of the strongest, more than 1.2 radii apart, at most two per
        ball image of the piece's area (the fits judge them)."""
        h, w = comp.shape
        H, W = img.shape[:2]
        m = int(math.ceil(r_px)) + 3
        a0, b0 = max(origin[0] - m, 0), max(origin[1] - m, 0)
        a1, b1 = min(origin[0] + w + m, W), min(origin[1] + h + m, H)
        crop = cv2.GaussianBlur(img[b0:b1, a0:a1].astype(np.float32), (0, 0), 1.0)
        gx = cv2.Sobel(crop, cv2.CV_32F, 1, 0, ksize=3) / 8.0
        gy = cv2.Sobel(crop, cv2.CV_32F, 0, 1, ksize=3) / 8.0
        jxx, jyy, jxy = (gx * gx).sum(axis=2), (gy * gy).sum(axis=2), (gx * gy).sum(axis=2)
        # Largest eigenvalue of the 2 x 2 colour structure tensor and its direction.
        mag = np.sqrt(0.5 * (jxx + jyy + np.sqrt((jxx - jyy) ** 2 + 4.0 * jxy**2)))
        theta = 0.5 * np.arctan2(2.0 * jxy, jxx - jyy)
        piece = np.zeros(crop.shape[:2], np.uint8)
        piece[origin[1] - b0 : origin[1] - b0 + h, origin[0] - a0 : origin[0] - a0 + w] = comp
        # Edge pixels: the piece grown by 2 px, stronger than a few noise sigmas of the smoothed
        # frame (noise alone gives under one sigma of gradient after the smoothing and Sobel).
        vote_from = (cv2.dilate(piece, np.ones((5, 5), np.uint8)) > 0) & (mag > 4.0 * max(self.background.sigma, 0.5))
        ys, xs = np.nonzero(vote_from)
        wgt = mag[ys, xs]
        c, s = np.cos(theta[ys, xs]), np.sin(theta[ys, xs])
        acc = np.zeros(crop.shape[:2], np.float32)
        for sign in (1.0, -1.0):
            cx = np.round(xs + sign * r_px * c).astype(int)
            cy = np.round(ys + sign * r_px * s).astype(int)
            ok = (cx >= 0) & (cx < acc.shape[1]) & (cy >= 0) & (cy < acc.shape[0])
            np.add.at(acc, (cy[ok], cx[ok]), wgt[ok])
        acc = cv2.GaussianBlur(acc, (0, 0), max(0.1 * r_px, 1.0))
        acc[piece == 0] = 0.0
        top = float(acc.max())
        if top <= 0:
            return []
        peaks = (acc >= cv2.dilate(acc, np.ones((3, 3), np.uint8)) - 1e-6) & (acc >= _CLUSTER_VOTE_SHARE * top)
        py, px = np.nonzero(peaks)
        most = int(2 * comp.sum() / (math.pi * r_px**2)) + 1
        chosen: list[np.ndarray] = []
        for j in np.argsort(-acc[py, px]):
            p = np.array([px[j] + a0, py[j] + b0], float)
            if all(np.hypot(*(p - q)) > 1.2 * r_px for q in chosen):
                chosen.append(p)
                if len(chosen) >= most:
                    break
        return [{"uv": p, "axis": np.array([1.0, 0.0]), "half_px": 0.0, "strict": False} for p in chosen]

    # -- outline and fit --
    def _edges(self, img: np.ndarray, c: np.ndarray, rho_pred: np.ndarray, half_win: float, dirs: np.ndarray, shadows: bool = True):
        """Outline points (K, 2) px (NaN where none) along rays from ``c``.

        Along each ray the colour distance D = |I - I_out| / |B| from the colour I_out just outside
        the predicted outline (the frame's own cloth or shadow there) is sampled from
        half the predicted outline radius outward; the outline is where D first falls below half
        its median over 0.5..0.8 of that radius (the half-coverage level of a blurred step, as an
        anti-aliased and optically blurred edge of any contrast crosses it at the true edge),
        linearly interpolated. Cast shadows (dimmed cloth) stay below the half level of a ball.
        """
        K = len(dirs)
        lo = 0.5 * rho_pred
        hi = rho_pred + half_win
        nstep = int(math.ceil(float(np.max(hi - lo)) / _STEP_PX)) + 1
        t = np.arange(nstep) * _STEP_PX
        rho = lo[:, None] + t[None, :]
        mx = (c[0] + rho * dirs[:, 0:1]).astype(np.float32)
        my = (c[1] + rho * dirs[:, 1:2]).astype(np.float32)
        prof, bprof = self._frame_and_empty(img, mx, my)
        # Reference colour: the frame itself just outside the predicted outline (the last
        # samples of each ray), so an imperfect background under a resting ball does not matter.
        ref = np.sort(prof[:, -5:], axis=1)[:, 2]  # the median of five
        # The dot products below serve D, the shade test and :func:`ballness` alike (the same
        # float32 values as each computing its own: tests/test_detect.py).
        # prof and bprof are float32 (K, n, 3): their dot products by _dot3_f32, the same
        # values as _dot3's in about half the time.
        bb_raw = _dot3_f32(bprof, bprof)
        bn = np.maximum(np.sqrt(bb_raw), COLOUR_FLOOR_DN)
        dref = prof - ref[:, None]
        D = np.sqrt(_dot3_f32(dref, dref)) / bn
        # A cast shadow differs from the cloth just beyond it but only dims the empty table: a
        # sample no brighter than the model and within ~4.6 degrees of its colour's direction
        # (sin 0.08: the cloth's texture and noise; a stripe's band or a black ball lie tens of
        # degrees off) is measured by :func:`ballness` too (Horprasert et al.'s split of shading
        # from colour) and the smaller value counts, so the shadow's outer edge is not taken
        # for the ball's while a ghost in the model, unlike the frame just outside, still does
        # not count.
        bb = np.maximum(bb_raw, 1.0)
        ib = _dot3_f32(prof, bprof)
        a = ib / bb
        ii = _dot3_f32(prof, prof)
        dres = prof - a[..., None] * bprof
        dev = np.sqrt(_dot3_f32(dres, dres))
        off_hue = dev / np.maximum(np.sqrt(ii), 20.0)  # _chroma_off
        # A shadow's light is not the lamps' (room light, the cloth's own bounce), so a deep
        # one can turn its colour further than the sine bound above, above all on dim pale
        # cloth where noise is a larger share of the dark value: dimmed samples whose colour
        # the foreground test itself calls the cloth's (its chromaticity term, Horprasert et
        # al. 1999, under the same noise-scaled threshold) are shade too, however dark: the
        # crease where the ball meets the cloth, out of the room's light as well as the lamps',
        # is darker than the half-light floor of :func:`ballness`.
        cd = dev / bn  # max(sqrt(max(B.B, 1)), 30) is max(|B|, 30)
        shade = (a < 1.03) & ((off_hue < 0.08) | (cd <= self._score_thr))
        # Only shade that reaches out to the cloth along the ray, beyond the predicted outline,
        # is a cast shadow: a pixel mixing a white cap with a dark band inside the ball can
        # match the cloth's hue too. ``shadows`` False skips the test.
        shade = np.logical_and.accumulate(shade[:, ::-1], axis=1)[:, ::-1] & (rho >= rho_pred[:, None])
        if shadows and shade.any():
            lower = np.minimum(D, _ballness_of(ib, a, ii, bb_raw, bn))
            self._discounted |= bool(np.any(shade & (lower != D)))  # NaN counts as lowered
            D = np.where(shade, lower, D)
        inner_sel = rho <= 0.8 * rho_pred[:, None]
        inner = _row_median(np.where(inner_sel, D, np.nan))
        inner[np.isnan(inner)] = 0.0  # D is finite or NaN, so this is np.nan_to_num's result
        # Coming in from outside, the first sample clearly on the ball (40 % of the inner level:
        # above a cast shadow's dimming) marks the outline; its level is half the ball's value
        # 1.5 px further in, so a stripe's band at the rim sets its own level.
        idx = np.arange(nstep)
        start = rho >= (rho_pred - half_win)[:, None]
        on = (D > 0.4 * inner[:, None]) & start
        has = on.any(axis=1)
        k_out = nstep - 1 - np.argmax(on[:, ::-1], axis=1)
        back = int(round(1.5 / _STEP_PX))
        lo_k = np.maximum(k_out - back, 0)  # k_out <= nstep - 1
        local = np.max(np.where((idx[None, :] >= lo_k[:, None]) & (idx[None, :] <= k_out[:, None]), D, 0.0), axis=1)
        level = 0.5 * local
        after = (idx[None, :] >= lo_k[:, None]) & (D < level[:, None])
        has &= after.any(axis=1)
        j = np.argmax(after, axis=1)
        jj = np.minimum(np.maximum(j, 1), nstep - 1)  # np.clip's arithmetic
        d0 = D[np.arange(K), jj - 1]
        d1 = D[np.arange(K), jj]
        frac = np.minimum(np.maximum((d0 - level) / np.maximum(d0 - d1, 1e-6), 0.0), 1.0)  # np.clip's arithmetic
        r_edge = rho[np.arange(K), jj - 1] + frac * _STEP_PX
        ok = has & (j > 0) & (inner > 2 * self._score_thr) & (d0 >= level) & (k_out < nstep - 3)
        # A ball of the cloth's own hue (blue on blue, red on red) differs from the cloth by its
        # shading only: no colour step marks its outline, and the half level above falls
        # anywhere on the ramp of its shading into its shadow. Its rim is found as the dark
        # ring instead (:func:`_dark_ring`).
        if _plain_body(off_hue[inner_sel], a[inner_sel]):
            r_edge, ok = _dark_ring(a, rho, rho_pred, half_win)
        pts = c[None] + r_edge[:, None] * dirs
        pts[~ok] = np.nan
        return pts

    def _edges_local(self, img: np.ndarray, c: np.ndarray, rho_pred: np.ndarray, dirs: np.ndarray) -> np.ndarray:
        """Sub-pixel outline points (K, 2) px (NaN where none) near a predicted silhouette.

        Along each ray, within ``_LOCAL_REACH_PX`` of the predicted outline radius ``rho_pred``
        (K,), the frame's colour is taken as a mixture of the ball's rim colour P (the mean of
        the frame 1.75..2.75 px inside) and the surface just outside S (1.75..2.75 px outside,
        cloth or the ball's own cast shadow, so a shadow sets the reference instead of biasing
        the edge): the mixing share ``alpha = (I - S).(P - S) / |P - S|^2`` is the ball's
        coverage of each sample, linear in it for a box-filtered edge, and the outline is where
        it crosses 1/2 (common practice: the half-coverage point of a blurred step is the edge
        for any symmetric point-spread function), linearly interpolated, nearest the
        prediction. Rays whose rim contrast |P - S| is below ``local_min_sigmas`` noise sigmas
        (a dark band against shadow) give NaN. Because P and S are local, the white cap and the
        coloured band of a striped ball each set their own level.

        Where most rays' rim colour differs in hue from the surround's, the points are instead
        placed by :func:`_off_hue_edges` (the colour's part off the surround's direction, which
        shadows and shading only scale), on every ray where it can; the mixing model above
        takes a shadow that runs into a dark rim, or the crease, for part of the ball, and its
        rim colour sampled 2 px in is brighter than the limb at the outline (Lambert's cosine
        law), both on one side of a ball lit from one side.
        """
        off = _LOCAL_OFF
        rho = np.maximum(rho_pred[:, None] + off[None, :], 0.0)
        mx = (c[0] + rho * dirs[:, 0:1]).astype(np.float32)
        my = (c[1] + rho * dirs[:, 1:2]).astype(np.float32)
        prof = _planar_profiles(cv2.remap(img, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE))
        P = _band_mean_planar(prof, _LOCAL_INNER)
        S = _band_mean_planar(prof, _LOCAL_OUTER)
        ps = P - S  # (3, K), as P and S
        sq = ps * ps
        n2 = sq[0] + sq[1] + sq[2]  # np.sum's order over three
        alpha = ((prof[0] - S[0][:, None]) * ps[0][:, None] + (prof[1] - S[1][:, None]) * ps[1][:, None]
                 + (prof[2] - S[2][:, None]) * ps[2][:, None]) / np.maximum(n2, 1e-6)[:, None]
        a0, a1 = alpha[:, :-1], alpha[:, 1:]
        cross = (a0 >= 0.5) & (a1 < 0.5)
        pos = off[None, :-1] + _STEP_PX * (a0 - 0.5) / np.where(cross, a0 - a1, 1.0)
        pos = np.where(cross, pos, np.inf)
        j = np.argmin(np.abs(pos), axis=1)
        edge = pos[np.arange(len(pos)), j]
        noise = max(self.background.sigma, 0.5) * math.sqrt(3)
        ok = np.isfinite(edge) & (np.sqrt(n2) > self.config.local_min_sigmas * noise)
        hue_edge, hue_ok = _off_hue_edges(prof, off, S.T, self.config.local_min_sigmas * noise)
        if hue_ok.sum() >= _HUE_RAYS * ok.sum():
            # Most of the outline shows the ball's hue against the surround's: every ray is
            # placed so (one rule all round, so its small inward bias is the same all round
            # and goes into the fit's radius bias instead of the centre).
            edge, ok = hue_edge, hue_ok
        else:
            # Part of the rim is of the surround's hue (a white cap on grey cloth): those rays
            # keep the mixing model, the others are placed by the hue.
            edge, ok = np.where(hue_ok, hue_edge, edge), ok | hue_ok
        pts = c[None] + (rho_pred + np.where(ok, edge, 0.0))[:, None] * dirs
        pts[~ok] = np.nan
        return pts

    def _dark_body(self, img: np.ndarray, uv: np.ndarray) -> bool:
        """Whether the ball whose centre's image is near ``uv`` (px) is dark: the median
        brightness ratio to the empty table (``a = I.B / B.B``, Horprasert et al. 1999) of the
        frame within 0.7 of the ball's image radius is below ``_DARK_BODY`` times that of the
        ring 1.3..1.6 radii out (the cloth round it in the frame's own light, so a ball under a
        player's shadow is judged against the shadowed cloth). A black ball's outline is found
        by :meth:`_dark_edges`."""
        r = 0.5 * self.ball_px
        I, B, _ = self._disc_pixels(img, uv, 0.7 * r)
        if len(I) == 0:
            return False
        a_in = _median(_dot3_f32(I.astype(np.float32), B) / np.maximum(_dot3_f32(B, B), 1.0))
        rr = r * np.array([1.3, 1.45, 1.6])
        # _RAY_DIRS holds the cosines and sines of the same 48 angles (_RAY_ANG).
        mx = (uv[0] + rr[None, :] * _RAY_DIRS[:, 0:1]).astype(np.float32)
        my = (uv[1] + rr[None, :] * _RAY_DIRS[:, 1:2]).astype(np.float32)
        f, b = self._frame_and_empty(img, mx, my)
        a_out = _median((_dot3_f32(f, b) / np.maximum(_dot3_f32(b, b), 1.0)).ravel())
        return a_in < _DARK_BODY * a_out

    def _dark_edges(self, img: np.ndarray, c: np.ndarray, rho_pred: np.ndarray, dirs: np.ndarray, half_win: float | None) -> np.ndarray:
        """Outline points (K, 2) px (NaN where none) of a dark ball (:meth:`_dark_body`) along
        rays ``dirs`` (K, 2) from ``c`` near its predicted outline radius ``rho_pred`` (K,):
        the coarse search (``half_win`` px: from half the radius out to that far beyond it,
        the surround taken as the median of the last five samples, as :meth:`_edges`) or the
        local one (``half_win`` None: within ``_LOCAL_REACH_PX``, the surround the outer band
        of :meth:`_edges_local`).

        Along each ray the brightness ratio to the empty table ``a = I.B / B.B`` (Horprasert
        et al. 1999) rises from the ball's dark limb to the surround; the outline is where,
        coming in from outside, it first falls below half-way between the surround's level and
        the darkest of the limb (the least of a 3-sample running mean inside the prediction),
        linearly interpolated (common practice: the half-coverage point of a blurred step).
        Coming in from outside, a bright number disc or highlight inside the limb is never
        reached, where the colour steps of :meth:`_edges` and :meth:`_edges_local` stop at its
        edge (a white mark on a black ball is the strongest step on its ray, and its hue is
        off the dark limb's as well as the cloth's). A ray counts where the rise exceeds
        ``local_min_sigmas`` noise sigmas of a colour difference. Where the ball's unlit
        underside meets the cloth it shades (toward the camera's nadir) or a lamp's shadow
        lies beyond its rim, the rise is a ramp several pixels long and the crossing lies out
        on it; such sides face each other across the ball, so most of that goes into the
        fit's radius bias. The hue helps nowhere here: the shadow's deep end and the limb are
        both a few DN of the cloth's green (the codec bleeds its chroma into the limb), and
        a rule keeping only the upper half's rays (tried) lost that balance to the lamps'
        shadows beyond the far rim, 6-7 mm away from the nadir in the phone's room."""
        if half_win is None:
            rho = np.maximum(rho_pred[:, None] + _LOCAL_OFF[None, :], 0.0)
            inside = np.broadcast_to((_LOCAL_OFF < 0.0)[None, :], rho.shape)
        else:
            lo = 0.5 * rho_pred
            nstep = int(math.ceil(float(np.max(rho_pred + half_win - lo)) / _STEP_PX)) + 1
            rho = lo[:, None] + np.arange(nstep)[None, :] * _STEP_PX
            inside = rho <= rho_pred[:, None]
        mx = (c[0] + rho * dirs[:, 0:1]).astype(np.float32)
        my = (c[1] + rho * dirs[:, 1:2]).astype(np.float32)
        prof, bprof = self._frame_and_empty(img, mx, my)
        bb = np.maximum(_dot3_f32(bprof, bprof), 1.0)
        a = _dot3_f32(prof, bprof) / bb
        if half_win is None:
            a_out = _band_mean(a[..., None], _LOCAL_OUTER)[:, 0]
            b_out = _band_mean(np.sqrt(bb)[..., None], _LOCAL_OUTER)[:, 0]
        else:
            # Medians of five (np.median's values: the third of each row's five, finite here),
            # by one partition each instead of np.median's generic reduction.
            a_out = np.partition(a[:, -5:], 2, axis=1)[:, 2]
            b_out = np.partition(np.sqrt(bb[:, -5:]), 2, axis=1)[:, 2]
        K, n = a.shape
        rows = np.arange(K)
        sm = a.copy()
        sm[:, 1:-1] = (a[:, :-2] + a[:, 1:-1] + a[:, 2:]) / 3.0
        a_in = np.min(np.where(inside, sm, np.inf), axis=1)
        level = 0.5 * (a_in + a_out)
        below = sm < level[:, None]
        k = n - 1 - np.argmax(below[:, ::-1], axis=1)  # the outermost sample below the level
        k1 = np.minimum(k + 1, n - 1)
        s0, s1 = sm[rows, k], sm[rows, k1]
        frac = np.minimum(np.maximum((level - s0) / np.maximum(s1 - s0, 1e-6), 0.0), 1.0)
        r_edge = rho[rows, k] + frac * _STEP_PX
        noise = max(self.background.sigma, 0.5) * math.sqrt(3)
        ok = below.any(axis=1) & (k < n - 1) & ((a_out - a_in) * b_out > self.config.local_min_sigmas * noise)
        pts = c[None] + r_edge[:, None] * dirs
        pts[~ok] = np.nan
        return pts

    def _surround_off_bed(self, c: np.ndarray, rho_pred: np.ndarray, dirs: np.ndarray) -> np.ndarray:
        """(K,) bool: rays whose local edge's outer band (out to ``_LOCAL_REACH_PX`` beyond the
        predicted outline ``rho_pred`` (K,) px from ``c`` along ``dirs`` (K, 2)) does not see the
        bed cloth, because its line of sight meets the bed plane (z = 0) beyond a cushion nose
        line: it ends on the cushion's face or under its overhang instead.

        The half-coverage edge of :meth:`_edges_local` sits inside the true outline by an amount
        set by the rim's shading (a lit sphere darkens towards its silhouette, Lambert's cosine
        law) and by the surround's brightness: against the bed it is nearly the same all round
        and is taken up by the fit's radius bias, but against the darker cushion face it lies
        farther out, which pulls the centre towards the cushion by a third of a pixel (about
        1 mm in the rendered cut_bank clip, for balls within 40 mm of the rail far from the
        camera). Such rays are left out of the local rounds like a neighbour's rim.
        """
        h, w = self._bed_px.shape
        iu, iv = int(round(float(c[0]))), int(round(float(c[1])))
        # Every sample lies within the largest reach of the centre's image: a ball that far
        # inside the cloth zone (a pixel of margin for the rounding of c and the zone's own
        # interpolation) sees only the bed, as the back-projection would find.
        if 0 <= iu < w and 0 <= iv < h and self._bed_px[iv, iu] > float(np.max(rho_pred)) + _LOCAL_REACH_PX + 2.0:
            return np.zeros(len(dirs), bool)
        t = self.table
        uv = c[None] + (rho_pred + _LOCAL_REACH_PX)[:, None] * dirs
        q = self.rays.backproject(uv, 0.0)
        return ~((q[:, 0] >= 0.0) & (q[:, 0] <= t.length_mm) & (q[:, 1] >= 0.0) & (q[:, 1] <= t.width_mm))

    def _fit_seed(self, img: np.ndarray, seed: dict, shadows: bool = True, avoid: np.ndarray | None = None, off_bed: bool = True, resume: tuple | None = None, avoid_coarse: bool = False) -> dict | None:
        """Fit one seed (:meth:`_seeds_of`): a detection row (:data:`COLUMNS`, frame and time
        left at 0) or None. ``shadows``: whether the coarse outline discounts cast shadows
        (:meth:`_edges`). ``avoid``: (M, 2) mm centres (table frame) of neighbouring balls;
        rays whose predicted outline point (at ball-centre height) lies within ``_AVOID_R``
        radii of one are left out of every round, and the share of agreeing rays is counted
        over the rays left in (at least ``_MIN_FREE_RAYS`` of them). ``off_bed``: whether the
        local rounds leave out rays that look past a cushion nose (:meth:`_surround_off_bed`);
        a fit that fails its checks with them left out is tried again with every ray (a ball
        frozen against the cushion, whose rim meets the nose itself), from the state its own
        coarse rounds ended in (``resume``: they do not depend on ``off_bed``, so they are not
        done twice). ``avoid_coarse``: ``avoid`` leaves its rays out of the coarse rounds too
        (a ball beside its own cast shadow, whose dark limb the coarse outline cannot tell from
        the shadow on that side, so it takes the terminator there instead, inside the outline,
        and pulls the centre away from the shadow)."""
        cam, R = self.camera, self.R
        X = self.rays.backproject_point(seed["uv"], R)
        half_mm, heading = 0.0, 0.0
        if seed["half_px"] > 0:
            tip = self.rays.backproject_point(seed["uv"] + seed["axis"] * max(seed["half_px"], 1.0), R)
            heading = math.atan2(tip[1] - X[1], tip[0] - X[0])
            px_mm = math.hypot(tip[0] - X[0], tip[1] - X[1]) / max(seed["half_px"], 1.0)
            half_mm = seed["half_px"] * px_mm
        capsule = half_mm > 0.15 * R
        p = np.array([X[0], X[1], 0.0, half_mm, heading]) if capsule else np.array([X[0], X[1], 0.0])
        ang, dirs = _RAY_ANG, _RAY_DIRS
        r_px = self.ball_px / 2
        result = None
        # Two rounds of the coarse outline, then (for a sharp ball) two of the local two-colour
        # edge, each round searching round the previous fit's predicted silhouette.
        prev_xy = None
        coarse = None
        same_hue = None  # :meth:`_same_hue`, looked up once a sharp ball reaches the local rounds
        dropped = False
        rounds = (0.45, 0.25) + (None,) * _LOCAL_ROUNDS
        # A dark ball (:meth:`_dark_body`) is outlined by :meth:`_dark_edges` while it is
        # fitted as a sharp ball; asked when first needed (None: not yet), as a streak's fit
        # or one refused before its outline never needs it.
        dark = None if resume is None else resume[6]
        if resume is not None:
            p, capsule, result, coarse, same_hue, r_loc = resume[:6]
            p = p.copy()
            rounds = (None,) * _LOCAL_ROUNDS
        local_start = None  # the state at the first local round, for a retry with every ray
        for win in rounds:
            if win is None and not capsule and same_hue is None:
                same_hue = self._same_hue(img, seed["uv"])
            if win is None and (capsule or same_hue):
                break
            if win is None and local_start is None:
                local_start = (p.copy(), capsule, result, coarse, same_hue, r_loc, dark)
            if win is None and prev_xy is not None and math.hypot(p[0] - prev_xy[0], p[1] - prev_xy[1]) < 0.05:
                break  # the local edge has converged
            prev_xy = (p[0], p[1]) if win is None else None
            half = p[3] if capsule else 0.0
            hd = p[4] if capsule else 0.0
            poly = _swept_outline_px(cam, p[0], p[1], half, hd, R, self.rays)
            c = self.rays.project(np.array([[p[0], p[1], R]]))[0]
            if not (math.isfinite(c[0]) and math.isfinite(c[1])):
                return None
            rho = _ray_polygon(c, dirs, poly)
            if not np.isfinite(rho).all():
                return None
            r_loc = _median(rho) if not capsule else r_px
            if not capsule and dark is None:
                dark = self._dark_body(img, seed["uv"])
            if dark and not capsule:
                pts = self._dark_edges(img, c, rho, dirs, None if win is None else win * r_loc)
            elif win is None:
                pts = self._edges_local(img, c, rho, dirs)
            else:
                pts = self._edges(img, c, rho, win * r_loc, dirs, shadows=shadows)
            masked = avoid is not None and (win is None or avoid_coarse)
            if win is None and off_bed:
                # Rays whose outer band looks past the cushion nose onto the cushion (see
                # _surround_off_bed) carry a different rim bias from the rest: left out.
                # A ball at the nose would lose half its outline, where the radius bias and
                # the centre trade off worse than the bias they cause: beyond a third of the
                # rays every ray is kept.
                free = ~self._surround_off_bed(c, rho, dirs)
                if (~free).sum() > _N_RAYS // 3:
                    free[:] = True
                masked = masked or not free.all()
                dropped = dropped or not free.all()
            elif win is None or avoid_coarse:
                free = np.ones(_N_RAYS, bool)
            if avoid is not None and (win is None or avoid_coarse):
                # A touching neighbour's rim lies within the local edge's sample bands where
                # the outline point is within R + 5 mm (2.75 px at about 2 mm/px) of the
                # neighbour's centre: |R e_a - 2R e_b| = R sqrt(5 - 4 cos(a - b)) < 1.17 R
                # within 25 degrees of the contact; _AVOID_R (27 degrees) leaves a little margin.
                # With part of the outline gone the outline's inward bias and the centre trade
                # off, so the mask is kept narrow (1.35 R and 1.5 R placed touching balls worse
                # in rendered trials), and the coarse rounds keep every ray (masking them too
                # left the coarse outline's outliers in the majority on some balls).
                q = self.rays.backproject(c[None] + rho[:, None] * dirs, R)
                dn = np.min(np.hypot(q[:, None, 0] - avoid[None, :, 0], q[:, None, 1] - avoid[None, :, 1]), axis=1)
                clear = dn >= _AVOID_R * R
                # The neighbour's mask comes first: with both, more than a third of the outline
                # gone loses balls frozen together against a cushion.
                free = free & clear if (~(free & clear)).sum() <= _N_RAYS // 3 else clear
                if free.sum() < _MIN_FREE_RAYS:
                    break  # too little outline left: the coarse fit stands
            if masked:
                pts[~free] = np.nan
            n_rays = int(free.sum()) if masked else _N_RAYS
            good = np.isfinite(pts).all(axis=1)
            if good.sum() < self.config.min_inlier_share * n_rays:
                if win is None and result is not None:
                    break  # keep the coarse fit: the rim is too faint for the local edge
                return None
            d = self.rays.rays(pts[good])
            p, res, wts, cov = _robust_fit(p, cam.centre_mm, d, R, capsule)
            if capsule and p[3] < _MIN_HALF_STREAK_R * R:
                capsule = False
                p = p[:3]
                p, res, wts, cov = _robust_fit(p, cam.centre_mm, d, R, capsule)
            result = (p, res, wts, cov, good, capsule, n_rays)
            if win is not None:
                coarse = result
        if result is None:
            return None  # the coarse rounds, with ``avoid_coarse``, had too little outline
        # How unsettled the fit that stands is (for its stated sigma): where the local edge
        # stands, its last move (its rounds ran out still moving: a soft rim it follows
        # outward; under 0.05 mm once converged); where the coarse fit is kept over it, the
        # distance between the two (``disagree``).
        unsettled = math.hypot(p[0] - prev_xy[0], p[1] - prev_xy[1]) if prev_xy is not None else 0.0
        if result is not coarse and _fit_rms(result) > max(1.5 * _fit_rms(coarse), 1.0):
            # The local edge disagrees with the sphere (a rim that fades into its own shadow):
            # keep the coarse outline's fit.
            result = coarse
        disagree = 0.0
        if result is coarse:
            unsettled = 0.0
            disagree = math.hypot(p[0] - coarse[0][0], p[1] - coarse[0][1])
        p, res, wts, cov, good, capsule, n_rays = result
        inl = wts > 0.2
        share = inl.sum() / n_rays
        rms = math.sqrt(_mean1(res[inl] ** 2)) if inl.any() else np.inf
        max_rms = self.config.max_rms_mm * (2.0 if capsule else 1.0)
        if rms > max_rms and share >= _NOISY_MIN_SHARE:
            # A dim ball's outline is noisier, not worse: the limit is what the image noise
            # alone would give its outline where that is more (:meth:`_outline_noise_mm`).
            noise_mm = self._outline_noise_mm(img, p, capsule, dirs[good][inl])
            max_rms = max(max_rms, _RMS_NOISE_Z * noise_mm)
            log.debug("outline noise %.2f mm: limit %.2f mm", noise_mm, max_rms)
        log.debug("fit at %.1f, %.1f: share %.2f rms %.2f mm bias %.2f mm", p[0], p[1], share, rms, p[2])
        # Angular coverage: the largest gap between agreeing rays.
        angs = ang[good][inl]
        gaps = np.diff(np.sort(np.append(angs, angs.min() + 2 * np.pi))) if inl.any() else np.array([np.inf])
        if (share < self.config.min_inlier_share or rms > max_rms
                or gaps.max() > (math.radians(150) if seed["strict"] else math.radians(200))):
            return self._fit_seed(img, seed, shadows, avoid, off_bed=False, resume=local_start, avoid_coarse=avoid_coarse) if dropped else None
        half = float(p[3]) if capsule else 0.0
        if half > self.config.max_half_travel_mm:
            return None
        x, y = float(p[0]), float(p[1])
        if not self._on_table(x, y):
            return None
        uv = self.rays.project_point(x, y, R)
        if seed["strict"] and not self._isolated(img, uv):
            return None
        if not capsule and self._filled_share(img, uv, r_loc) < 0.6:
            return None
        if not capsule and self._cue_end(img, uv):
            return None
        hd = float(p[4]) if capsule else 0.0
        travel = 2 * half + 2 * R if capsule else 0.0
        colour, pattern = ("", "unknown") if capsule else self._identity(img, uv, r_loc)
        cov_xy = cov()
        sig = _stated_sigma(cov_xy, float(p[2]), unsettled, disagree, half)
        quality = float(min(max(share * math.exp(-rms / max_rms), 0.0), 1.0))  # np.clip's value, without its wrappers
        # Marked, not refused: the fit stands while the box's pieces are explained (a fit
        # straddling two colliding balls seeds the search that finds both, and is dropped then).
        joined = not capsule and not seed["strict"] and not seed.get("cluster") and self._joined_mark(img, uv, rms)
        return {
            "frame": 0,
            "t": 0.0,
            "x": x,
            "y": y,
            "u": float(uv[0]),
            "v": float(uv[1]),
            "quality": quality,
            "colour": colour,
            "pattern": pattern,
            "blur_x": travel * math.cos(hd),
            "blur_y": travel * math.sin(hd),
            "sigma_mm": sig,
            "joined": joined,
            "bias_mm": float(p[2]),
            "cov_xy": cov_xy,
        }

    def _outline_noise_mm(self, img: np.ndarray, p: np.ndarray, capsule: bool, dirs: np.ndarray) -> float:
        """Standard deviation (mm, across the outline) that the image noise alone gives each
        outline point of the ball fitted as ``p`` (:func:`_residuals`' parameters; a streak when
        ``capsule``): a level crossing on an edge of slope ``g`` moves by ``noise / g`` (common
        practice: the localisation error of a blurred step, e.g. Canny 1986's localisation
        criterion), with ``noise`` the background's per-channel sigma (the noise along the
        edge's colour direction) and ``g`` the median over the rays ``dirs`` (K, 2) (the fit's
        agreeing rays) of the colour's slope (DN per px, central difference over 1.5 px) across
        the found outline (at ``R - bias``);
        px to mm at the ball's scale (its diameter over its image's). A bright rim against the
        cloth gives a few hundredths of a mm; a dim ball in a dark corner half a mm or more.
        0 where the noise exceeds ``_MAX_NOISE_PX`` (no rim was found to be noisy)."""
        R = self.R
        half, hd = (float(p[3]), float(p[4])) if capsule else (0.0, 0.0)
        poly = _swept_outline_px(self.camera, float(p[0]), float(p[1]), half, hd, R, self.rays)
        c = self.rays.project(np.array([[p[0], p[1], R]]))[0]
        if len(dirs) == 0 or not np.all(np.isfinite(c)):
            return 0.0
        rho = _ray_polygon(c, dirs, poly)
        if not np.all(np.isfinite(rho)):
            return 0.0
        rho_out = rho * (R - float(p[2])) / R
        r = np.maximum(rho_out[:, None] + np.array([-0.75, 0.75])[None, :], 0.0)
        mx = (c[0] + r * dirs[:, 0:1]).astype(np.float32)
        my = (c[1] + r * dirs[:, 1:2]).astype(np.float32)
        prof = cv2.remap(img, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE).astype(np.float32)
        g = _median(_norm3(prof[:, 0] - prof[:, 1]) / 1.5)
        noise_px = max(self.background.sigma, 0.5) / max(g, 1e-6)
        log.debug("outline noise %.3f px (slope %.2f DN/px, sigma %.2f)", noise_px, g, self.background.sigma)
        if noise_px > _MAX_NOISE_PX:
            return 0.0
        return noise_px * R / max(_median(rho), 1e-6)

    def _on_table(self, x: float, y: float) -> bool:
        """A centre can lie no farther out than the reversal line (a few mm of calibration slack),
        except in a pocket's mouth, where a dropping ball may reach half a ball past the nose."""
        t = self.table
        slack = 12.0
        d = t.reversal_offset_mm - slack
        if d <= x <= t.length_mm - d and d <= y <= t.width_mm - d:
            return True
        for pk in t.pockets():
            mx, my = pk.mouth_centre
            if math.hypot(x - mx, y - my) < 0.5 * pk.mouth_mm:
                out = max(-x, x - t.length_mm, -y, y - t.width_mm)
                return out < 0.5 * self.R
        return False

    def _filled_share(self, img: np.ndarray, uv: np.ndarray, r_px: float) -> float:
        """Share of the pixels within 0.7 of a sharp ball's image radius ``r_px`` round ``uv``
        that stand out from the empty table (:func:`ballness` above the threshold). A ball covers
        its whole disc (the least seen on balls here is 0.75, a red ball on red cloth, whose
        shaded body is of the cloth's own hue); an outline fitted to a thin cue, or to the ghost of
        one left in the model, encloses mostly cloth (about 0.45)."""
        r = 0.7 * r_px
        I, B, r2 = self._disc_pixels(img, uv, r)
        if len(I) == 0:
            return 0.0
        out = ballness(I, B) > self._score_thr
        share = _share(out)
        if share < 0.6:
            share = max(share, _shaded_share(I, B, r2 / (r * r), out))
        return share

    def _disc_pixels(self, img: np.ndarray, uv: np.ndarray, r: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The frame's pixels (N, 3) within ``r`` px of ``uv`` (px), the empty table's there
        (N, 3) and their squared distances from ``uv`` (N,) px^2; all empty where the disc
        lies off the frame."""
        h, w = img.shape[:2]
        u0, v0 = max(int(math.floor(uv[0] - r)), 0), max(int(math.floor(uv[1] - r)), 0)
        u1, v1 = min(int(math.ceil(uv[0] + r)) + 1, w), min(int(math.ceil(uv[1] + r)) + 1, h)
        if u1 <= u0 or v1 <= v0:
            return np.zeros((0, 3), img.dtype), np.zeros((0, 3), np.float32), np.zeros(0)
        # Open grids (the row and column indices, as np.ogrid's) broadcast to the same squared
        # distances as full ones, without building them; np.arange skips ogrid's index machinery.
        yy, xx = np.arange(v0, v1)[:, None], np.arange(u0, u1)[None, :]
        d2 = (xx - uv[0]) ** 2 + (yy - uv[1]) ** 2
        inside = d2 <= r * r
        return img[v0:v1, u0:u1][inside], self.background.image[v0:v1, u0:u1][inside], d2[inside]

    def _same_hue(self, img: np.ndarray, uv: np.ndarray) -> bool:
        """Whether the ball whose centre's image is near ``uv`` (px) is of the cloth's own hue
        and hardly stands out from it (:func:`_plain_body` of the frame at 0.55 and 0.75 of the
        ball's image radius on 48 rays, inside the band :meth:`_edges` takes as the body). Its
        outline is then the dark ring of :func:`_dark_ring`; the local
        two-colour edge (a rim colour against the surface outside) has no colour step to
        find there and follows the ramp of the shading instead, so the coarse fit stands."""
        r = 0.5 * self.ball_px * np.array([0.55, 0.75])
        # _RAY_DIRS holds the cosines and sines of the same 48 angles (_RAY_ANG).
        mx = (uv[0] + r[None, :] * _RAY_DIRS[:, 0:1]).astype(np.float32)
        my = (uv[1] + r[None, :] * _RAY_DIRS[:, 1:2]).astype(np.float32)
        f, b = self._frame_and_empty(img, mx, my)
        a = _dot3(f, b) / np.maximum(_dot3(b, b), 1.0)
        return _plain_body(_chroma_off(f, b, a).ravel(), a.ravel())

    def _isolated(self, img: np.ndarray, uv: np.ndarray) -> bool:
        """For seeds inside an arm or cue component: a ring ``_RING_R`` ball radii from the
        centre (64 samples) must be background (:func:`ballness` below the threshold) on at
        least ``_ISOLATED_SHARE`` of its length.

        A whole ball lying against an arm, hand or cue touches its (straight or convex) edge at
        one point, R from the centre, and the ring is hidden only beyond that edge: an arc of
        ``2 acos(1 / _RING_R)`` (89 degrees), a quarter of the ring; one more sample is allowed
        for sampling. A piece of the occluder itself (a hand between the wrist and the cue, a
        knuckle) is continued by the rest of the occluder and usually hides more; the bare
        rounded end of something exactly a ball wide hides 2 asin(1 / 1.4) (91 degrees) and is
        not told apart by this test. The ball's own outline must also step from the ball to
        what lies outside it on at least the same share of its length (:meth:`_rim_share`):
        a ball shows that step all round, against an arm it touches too, so the bound only
        leaves room for a quarter of its outline hidden under something lying over it."""
        return self._ring_share(img, uv) >= _ISOLATED_SHARE and self._rim_share(img, uv) >= _ISOLATED_SHARE

    def _joined_no_rim(self, img: np.ndarray, uv: np.ndarray) -> bool:
        """Whether a free ball's fit round ``uv`` (px), whose outline already fits poorly, is
        the rounded end of something else: foreground joins its disc (its ring,
        :meth:`_ring_share`, not all free: below ``_JOINED_RING``) and its outline does not
        step from ball to surround over :meth:`_isolated`'s share of its length
        (:meth:`_rim_share`). The colour step where a stroking cue's light shaft meets its
        dark butt, against an empty-table model that holds the cue a few mm away, leaves such
        a piece near the rail (rendered tele_120fps frames 22-50 and 100-103: ring 0.55-0.91,
        rim 0.50-0.71, outline rms 1.36-1.99 mm). A ball touching a cue or another ball keeps
        its rim step all round; a moving ball whose soft rim fails the rim bound has a free
        ring (rim 0.50-0.73 with ring 1.0 on the extra set's uneven_60fps). Where the ring is
        covered beyond what :meth:`_isolated` allows a whole ball touching a straight edge,
        the rim must step over ``_COVERED_RIM`` of the outline."""
        ring = self._ring_share(img, uv)
        if ring >= _JOINED_RING:
            return False
        rim = self._rim_share(img, uv)
        return rim < _ISOLATED_SHARE or (ring < _ISOLATED_SHARE and rim < _COVERED_RIM)

    def _joined_mark(self, img: np.ndarray, uv: np.ndarray, rms: float) -> bool:
        """Whether a free ball's fit round ``uv`` (px) with outline rms ``rms`` (mm) is marked
        joined: :meth:`_joined_no_rim` where the outline fits worse than ``_JOINED_RMS_MM``, or
        :meth:`_neither_ring_nor_rim`. The same tests, with the ring (:meth:`_ring_share`) and
        the rim (:meth:`_rim_share`) each sampled at most once, and the rim only when a test
        reads it (the two tests asked for both again when the first failed)."""
        ring = self._ring_share(img, uv)
        rim = None
        if rms > _JOINED_RMS_MM and ring < _JOINED_RING:
            rim = self._rim_share(img, uv)
            if rim < _ISOLATED_SHARE or (ring < _ISOLATED_SHARE and rim < _COVERED_RIM):
                return True
        if ring >= _ISOLATED_SHARE:
            return False
        if rim is None:
            rim = self._rim_share(img, uv)
        return rim < _ISOLATED_SHARE

    def _neither_ring_nor_rim(self, img: np.ndarray, uv: np.ndarray) -> bool:
        """Whether a free ball's fit round ``uv`` (px), however well its outline fits, fails
        both halves of :meth:`_isolated`: its ring (:meth:`_ring_share`) is covered beyond what
        a whole ball touching a straight edge allows, and its outline steps from ball to
        surround (:meth:`_rim_share`) over less than the same share. A ball touching something
        keeps its rim step all round, and a moving ball whose soft rim fails the rim bound has
        a free ring; a circle fitted to a short piece of a stroking cue that the empty-table
        model holds a few mm away (its shaft-to-butt step) fails both with a tight outline
        (rendered extra clip tele_120fps frame 43: ring 0.59, rim 0.48, outline rms under
        :data:`_JOINED_RMS_MM`). Measured on every sharp fit of tele_120fps (frames 0-199),
        dim_540p_60fps (0-299) and uneven_60fps (all): none within a ball radius of a true
        ball fails both (those have ring 0.77 or more), 131 fits on cues, arms and hands do. On
        lamp_50fps (low lamp, long shadows) it drops two fits 23-26 mm off the moving cue ball,
        on its shadow side (frames 145 and 164: ring 0.56, rim 0.54-0.58): at 145 a fit 0.4 mm
        off takes its place, at 164 the ball goes unseen for that frame."""
        return self._ring_share(img, uv) < _ISOLATED_SHARE and self._rim_share(img, uv) < _ISOLATED_SHARE

    def _rim_share(self, img: np.ndarray, uv: np.ndarray) -> float:
        """Share of the 48 rays of the outline of the ball whose centre's image is ``uv`` (px)
        along which the frame steps at the outline from a ball to what lies outside it: the
        mean colour P 1.25..2 px inside the predicted silhouette against S 1.75..2.75 px
        outside it (the bands of :meth:`_edges_local`) is no step when P is S, or S only dimmed
        or brightened a little (brightness ratio ``P.S / S.S`` in 0.5..1.15 and chromaticity
        distortion below sin 0.08, :func:`ballness`'s and :meth:`_edges`' bounds of shading
        after Horprasert, Harwood & Davis 1999). A ball's rim stands out against the cloth,
        its shadow or an arm it touches all round; an outline fitted to the end of a cue and
        the edge of its cast shadow has no step where the cue runs on and where the shadow's
        edge stands for the rim."""
        X = self.rays.backproject_point(uv, self.R)
        rho = _ray_polygon(np.asarray(uv, float), _RAY_DIRS, self.rays.sphere_outline(X[0], X[1], self.R))
        if np.any(~np.isfinite(rho)):
            return 0.0
        off = np.array([-2.0, -1.75, -1.5, -1.25, 1.75, 2.0, 2.25, 2.5, 2.75])
        r = np.maximum(rho[:, None] + off[None, :], 0.0)
        mx = (uv[0] + r * _RAY_DIRS[:, 0:1]).astype(np.float32)
        my = (uv[1] + r * _RAY_DIRS[:, 1:2]).astype(np.float32)
        prof = cv2.remap(img, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE).astype(np.float32)
        P, S = prof[:, :4].mean(axis=1), prof[:, 4:].mean(axis=1)
        a = _dot3(P, S) / np.maximum(_dot3(S, S), 1.0)
        shade = (a >= DARK_RATIO) & (a <= LIT_RATIO) & (_chroma_off(P, S, a) < 0.08)
        return _share(~shade)

    def _frame_and_empty(self, img: np.ndarray, mx: np.ndarray, my: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The frame (as float32) and the empty table (the background model's image) at the
        sub-pixel points ``mx``, ``my`` (float32 arrays of one shape, px; bilinear, replicated at
        the border): two arrays of that shape by 3 channels."""
        f = cv2.remap(img, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE).astype(np.float32)
        b = cv2.remap(self.background.image, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
        return f, b

    def _ballness_at(self, img: np.ndarray, mx: np.ndarray, my: np.ndarray) -> np.ndarray:
        """:func:`ballness` of the frame against the empty table at the sub-pixel points ``mx``,
        ``my`` (float32 arrays of one shape, px; bilinear, replicated at the border)."""
        return ballness(*self._frame_and_empty(img, mx, my))

    def _fg_samples(self, img: np.ndarray, mx: np.ndarray, my: np.ndarray) -> np.ndarray:
        """Foreground (:meth:`_ballness_at` above the threshold) at the sub-pixel points ``mx``,
        ``my`` (px)."""
        return self._ballness_at(img, mx, my) > self._score_thr

    def _cue_end(self, img: np.ndarray, uv: np.ndarray) -> bool:
        """Whether a sharp fit round ``uv`` (px) is the rounded end of a cue (its butt or tip)
        rather than a ball: measured on the frame's foreground (:meth:`_body_across`), the
        fit's disc continues along some direction into a straight body at least ``_BODY_R``
        image radii long (leading to the grip hand or off the table), narrower than ``_BODY_D``
        of a ball's image at every station along it, and the disc itself is no wider across
        that body than ``_END_D`` of a ball. A ball is a free disc: its foreground across its
        centre is its whole diameter, whatever touches it (a cue tip at the strike, a hand), so
        the end of something narrower than a ball is no ball however round its outline. Only
        a fit whose ring (:meth:`_ring_share`) something crosses is measured: a body leaving
        the disc crosses it."""
        if self._ring_share(img, uv) >= 1.0:
            return False
        got = self._body_across(img, uv)
        if got is None:
            return False
        disc, body = got
        return bool(body.min() > 0 and body.max() < _BODY_D and disc < _END_D)

    def _body_across(self, img: np.ndarray, uv: np.ndarray) -> tuple[float, np.ndarray] | None:
        """The widths, in ball image diameters, of the frame's foreground across the longest
        body leaving the disc of a ball fitted round ``uv`` (px): (the disc's, the body's at 2,
        2.5, 3 and 3.5 image radii out (4,)); None when no run of foreground leaves the disc
        for ``_BODY_R`` radii.

        The body's direction is the one, of 90 from the centre, along which the foreground runs
        on farthest from 0.8 of the image radius outward; a width is the run of foreground
        across it through the axis (from the foreground sample nearest the axis, within a
        pixel of it), the disc's the widest such run within half a radius of the centre."""
        r = self._image_radius_px(uv)
        ang = np.linspace(0, 2 * np.pi, 90, endpoint=False)
        rad = np.arange(0.8 * r, (_BODY_R + 1.0) * r, 0.5)
        fg = self._fg_samples(img, (uv[0] + rad[None] * np.cos(ang)[:, None]).astype(np.float32),
                              (uv[1] + rad[None] * np.sin(ang)[:, None]).astype(np.float32))
        # Length of the run of foreground from the disc's edge outward, per direction.
        run = np.where(fg.all(axis=1), len(rad), np.argmin(fg, axis=1))
        j = int(np.argmax(run))
        if rad[0] + 0.5 * run[j] < _BODY_R * r:
            return None
        ax = np.array([math.cos(ang[j]), math.sin(ang[j])])
        pe = np.array([-ax[1], ax[0]])
        s = np.array([-0.5, -0.25, 0.0, 0.25, 0.5, 2.0, 2.5, 3.0, 3.5]) * r
        t = np.arange(-1.5 * r, 1.5 * r + 0.125, 0.25)
        pts = uv[None, None] + s[:, None, None] * ax + t[None, :, None] * pe
        g = self._fg_samples(img, pts[..., 0].astype(np.float32), pts[..., 1].astype(np.float32))
        width = np.array([_run_through(row, len(t) // 2, 4) for row in g]) * 0.25 / (2 * r)
        return float(width[:5].max()), width[5:]

    def _cluster_rims(self, img: np.ndarray, rows: list[dict]) -> bool:
        """Whether the balls fitted as a touching cluster (``rows``, :meth:`_cluster_retry`)
        are balls by their rims: the median over the sharp ones of :meth:`_rim_share` is at
        least ``_ISOLATED_SHARE``. Every ball of a rack steps from ball to what lies outside
        its outline nearly all round, against the cloth and against its neighbours alike (a
        lit sphere's limb darkens toward its contour; Lambert's cosine law, common practice);
        circles fitted inside a sleeve, a hand or a cue, which run on past the outline in the
        same colour, do not (tests/test_detect.py's racks: 0.77-1.0, median 1.0; rendered
        extra clip lamp_50fps frames 18-44, a bridge hand, sleeve and cue explained as a
        cluster of 5-6 balls: 0.19-0.52). The median keeps a rack whose one ball of the
        cloth's hue steps weakly."""
        sharp = [r for r in rows if not (r["blur_x"] or r["blur_y"])]
        if not sharp:
            return True
        rims = [self._rim_share(img, np.array([r["u"], r["v"]])) for r in sharp]
        return float(np.median(rims)) >= _ISOLATED_SHARE

    def _ring_share(self, img: np.ndarray, uv: np.ndarray) -> float:
        """Share of the ring of :meth:`_isolated` round ``uv`` (px) that is background.

        Kept per frame and centre (``_ring_memo``: the frame it was read from, and the shares
        by ``uv``): a sharp fit asks it of one centre twice (:meth:`_cue_end`, then
        :meth:`_joined_mark`), and neither the frame nor the empty-table model changes
        between (the model is updated after the frame's detections, :meth:`step_rows`)."""
        if self._ring_memo[0] is not img:
            self._ring_memo = (img, {})
        key = (float(uv[0]), float(uv[1]))
        got = self._ring_memo[1].get(key)
        if got is None:
            r = _RING_R * self.ball_px / 2
            mx = (uv[0] + r * self._ring_cos).astype(np.float32)[None]
            my = (uv[1] + r * self._ring_sin).astype(np.float32)[None]
            got = self._ring_memo[1][key] = _share(self._ballness_at(img, mx, my)[0] < self._score_thr)
        return got

    def _band_seen(self, I: np.ndarray, B: np.ndarray, white: np.ndarray, S: np.ndarray, V: np.ndarray, cloth_s: float) -> bool:
        """Whether a ball's pixels ``I`` (N, 3) BGR over the empty table ``B`` (N, 3), with their
        white mask, HSV saturation ``S`` and value ``V`` (N,) (OpenCV's 0..255) and the cloth's
        saturation ``cloth_s``, show a stripe's band: at least 3 % of them (the share the cue
        test allows for colour) off every mix of the ball's white and the cloth
        (:func:`_off_white_cloth` above the detector's colour threshold) or more saturated than
        the cloth (no mix of white with the cloth is). The saturation test leaves out pixels
        below 45 of 255, where a few DN of noise swing it (a shadow's edge, a shaded limb); the
        mix test's sine is floored in brightness and keeps them (a dark band)."""
        if not white.any():
            return True
        W = I[white].astype(np.float32).mean(axis=0)
        off = (_off_white_cloth(I, W, B) > self._score_thr) & ~white
        sat = (S >= max(50.0, cloth_s + 20.0)) & (V >= 45) & ~white
        return bool(off.mean() >= 0.03 or sat.mean() >= 0.03)

    def _identity(self, img: np.ndarray, uv: np.ndarray, r_px: float) -> tuple[str, str]:
        """Colour label and pattern from the pixels inside 0.88 of the ball's image radius
        ``r_px`` (the outer rim is kept: seen from above, a stripe's band lies round the rim).

        In HSV, pixels are white (low saturation, bright against the ball's brightest), dark,
        or coloured (saturated and not of the cloth's own hue: rim pixels mixed with the cloth
        do not count). Shares decide: ``cue`` almost all white and no colour; ``stripe`` a
        white share and a coloured share together, or a white share and, with no colour, pixels
        neither the ball's white nor the cloth (:meth:`_band_seen`); ``solid`` colour (or black)
        with little white (the number disc); else ``unknown``. The coloured pixels' median hue
        picks the label from our own coarse hue bands. A ball with little colour or white that is of the
        cloth's own hue and brightness (:meth:`_same_hue`) has its cloth-like pixels counted as
        colour.
        """
        r = 0.88 * r_px
        u0, v0 = int(math.floor(uv[0] - r)), int(math.floor(uv[1] - r))
        u1, v1 = int(math.ceil(uv[0] + r)) + 1, int(math.ceil(uv[1] + r)) + 1
        h, w = img.shape[:2]
        if u0 < 0 or v0 < 0 or u1 > w or v1 > h:
            return "", "unknown"
        patch = img[v0:v1, u0:u1]
        yy, xx = np.arange(v0, v1)[:, None], np.arange(u0, u1)[None, :]
        inside = (xx - uv[0]) ** 2 + (yy - uv[1]) ** 2 <= r * r
        hsv = cv2.cvtColor(patch, cv2.COLOR_BGR2HSV)[inside].astype(float)
        if len(hsv) < 12:
            return "", "unknown"
        cloth = self.background.image[int(round(uv[1])), int(round(uv[0]))]
        ch, cs, _ = cv2.cvtColor(np.minimum(np.maximum(cloth, 0), 255).astype(np.uint8)[None, None], cv2.COLOR_BGR2HSV)[0, 0].astype(float)
        H, S, V = hsv[:, 0], hsv[:, 1], hsv[:, 2]
        # Order statistics by _percentile_linear and _median: np.percentile's and np.median's
        # values, at a fraction of their cost on a disc of pixels.
        v_hi = _percentile_linear(V, 95)
        white = (S < 70) & (V > 0.55 * v_hi) & (V > 70)
        dark = (V < 0.35 * max(v_hi, 1.0)) | (V < 45)
        # Hue distance on OpenCV's 0..180 circle.
        # Cloth-like: of the cloth's hue and no more saturated than it (plus 20 of 255 for noise
        # and compression). A yellow ball on tan cloth shares the hue but is far more saturated;
        # rim pixels mixed with the cloth, a white ball or a cast shadow are not.
        near_cloth = (cs >= 60) & (np.minimum(np.abs(H - ch), 180 - np.abs(H - ch)) < 10) & (S < cs + 20)
        coloured = (S >= 90) & ~dark & ~white & ~near_cloth
        # Tinted: any visible saturation off the cloth's hue (a dark band at the rim, shaded
        # toward the limb, keeps only part of its saturation).
        tinted = (S >= 50) & ~white & ~near_cloth
        fw, fc, fd, ft = _share(white), _share(coloured), _share(dark), _share(tinted)
        if fw > 0.85 and ft < 0.03 and fd < 0.03:
            self._white_v = _median(V[white])
            return "white", "cue"
        if fd > 0.55 and fc < 0.25:
            return "black", "solid"
        if fc < 0.3 and fw < 0.25 and self._same_hue(img, uv):
            # A ball of the cloth's own hue and brightness: its body, left out as cloth-like
            # above, is its colour, and so is its limb, shaded dark toward the cloth's level.
            coloured = (S >= 90) & ~white
            fc = _share(coloured)
        if fc < 0.04:
            # No colour inside 0.88 of the radius: a stripe whose band lies round the limb, or a
            # white ball shaded toward its limb (dim or one-sided light) or smeared with the cloth
            # by motion blur. Only a band can show a colour that is neither the ball's white nor
            # the cloth's, so without one the pattern is left unknown.
            band = fw >= 0.5 and self._band_seen(patch[inside], self.background.image[v0:v1, u0:u1][inside], white, S, V, cs)
            return "", ("stripe" if band else "unknown")
        hue = _median(H[coloured])
        # Red wraps round 0/180 in OpenCV's half-degree hue: take the circular median's side.
        if _share((H[coloured] >= 160) | (H[coloured] < 8)) > 0.5:
            hue = 0.0
        vcol = _median(V[coloured])
        if hue < 8 or hue >= 160:
            ref = self._white_v if self._white_v else None
            colour = "" if ref is None else ("maroon" if vcol < 0.6 * ref else "red")
        elif hue < 17:
            colour = "orange"
        elif hue < 35:
            colour = "yellow"
        elif hue < 90:
            colour = "green"
        elif hue < 128:
            colour = "blue"
        else:
            colour = "purple"
        if fw >= 0.25:
            pattern = "stripe"
        elif fc >= 0.3:
            pattern = "solid"
        else:
            pattern = "unknown"
        return colour, pattern


def detect_clip(path, camera: Camera, table: TableSpec, config: DetectConfig = DetectConfig(), read_ahead: int | None = None) -> pd.DataFrame:
    """Detections (:data:`COLUMNS`) in every frame of the clip at ``path``, streamed (the clip is
    never held in memory); frame times are the container's presentation times. ``read_ahead``:
    frames decoded ahead in a background thread (:func:`vision.video.iter_frames`; None: its
    default, a thread where there is a spare core)."""
    det = BallDetector(camera, table, config)
    return stack_detections([(i, t, det.step_rows(i, t, img)) for i, t, img in iter_frames(path, read_ahead=read_ahead)])


def stack_detections(steps) -> pd.DataFrame:
    """One detections table (:data:`COLUMNS`, rows in frame order) from a clip's
    ``(frame index, t s, detections)`` triples, each frame's detections either
    :meth:`BallDetector.step`'s DataFrame or :meth:`BallDetector.step_rows`'s tuple of row
    dicts; the same as concatenating :meth:`BallDetector.process`'s frames. A frame repeated
    from the previous one (nothing changed) is turned into arrays once, so a still stretch
    costs a few array copies."""
    cols = [c for c in COLUMNS if c not in ("frame", "t")]
    arrays: dict[int, list[np.ndarray]] = {}
    data: list[list[np.ndarray]] = [[] for _ in COLUMNS]
    for frame_index, t_s, det in steps:
        n = len(det)
        if n == 0:
            continue
        # ``steps`` holds every frame alive, so an object's id is not reused meanwhile.
        got = arrays.get(id(det))
        if got is None:
            if isinstance(det, pd.DataFrame):
                got = [det[c].to_numpy() for c in cols]
            else:
                got = [np.array([r[c] for r in det], dtype=object if c in ("colour", "pattern") else float) for c in cols]
            arrays[id(det)] = got
        data[0].append(np.full(n, frame_index, np.int64))
        data[1].append(np.full(n, float(t_s)))
        for k, a in enumerate(got):
            data[2 + k].append(a)
    if not data[0]:
        return empty_detections()
    out = pd.DataFrame({c: np.concatenate(v) for c, v in zip(COLUMNS, data)}, columns=COLUMNS)
    return out.astype(empty_detections().dtypes.to_dict())
