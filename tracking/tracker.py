"""Multi-ball tracking: detections per frame -> one smoothed track per ball.

Input: a tidy detections DataFrame, one row per detected ball per frame, in the table frame of
``vision.table`` (mm, s):

=========== =========================================================================== ========
column      meaning                                                                     required
=========== =========================================================================== ========
frame       frame index (int)                                                           yes
t           presentation time of the frame, s                                           yes
x, y        ball centre, mm                                                             yes
sigma_mm    standard deviation of the centre per axis, mm (NaN/absent: ``meas_sigma_mm``) no
quality     detector confidence 0..1 (else 1); below ``birth_min_quality`` a detection no
            can feed a track along its path but never start one nor turn it (a jump)
colour      colour label, "" unknown                                                    no
pattern     ``cue``, ``solid``, ``stripe`` or ``unknown``                               no
=========== =========================================================================== ========

Other columns (``u``, ``v``, ``blur_x``, ``blur_y``) are accepted and ignored.

Output (``Tracker.result`` / ``track``): one row per confirmed ball per frame from its first to its
last detection, columns ``frame, t, track, ball, x, y, vx, vy, seen`` of
``shared/spec/results-format.md`` (``x, y`` mm and ``vx, vy`` mm/s smoothed; ``seen`` 1 where the
ball was detected, 0 where it was coasted), then the extra columns ``colour`` and ``pattern`` (the
ball's majority labels over its sure detections, "" / "unknown" when none; white / cue for the
cue ball: ``Tracker._sure_labels``) and ``x_meas, y_meas`` (the detection assigned
in that frame, NaN when unseen), so later stages can fit raw measurements.

Method
------
* One constant-velocity Kalman filter per ball (``tracking.kalman``); per frame every track is
  predicted to the frame's time and detections are assigned by the Hungarian method
  (``scipy.optimize.linear_sum_assignment``) on a cost built from three motion hypotheses:

  - *predicted*: squared Mahalanobis distance of the innovation, ``d2 = y^T S^-1 y`` with
    ``y = z - H x_pred`` and ``S = H P H^T + R``, accepted inside the chi-square gate
    ``chi2.ppf(gate_prob, 2)`` (Bar-Shalom, Li & Kirubarajan 2001, sec. 7.3 "validation
    region"), and costing the innovation's negative log-likelihood ``d2 + ln|S|`` (less a
    constant; Bar-Shalom & Fortmann 1988), so a prediction spread wide, as after a velocity
    restart, pays for its width and does not take the detection of a ball beside it;
  - *bounce*: the same to the prediction reflected off a rail's reversal line (the
    normal component scaled by a nominal restitution), offered when the plain prediction has
    crossed that line along a cushion (not in a pocket mouth); the hypothesis of smaller
    ``d2`` is kept. A track coasting unseen is reflected the same way (a ball missed at its
    cushion contact comes back off the cushion: the normal velocity reversed and scaled by
    the coefficient of restitution, Newton's law of restitution; Marlow 1995, "The Physics of
    Pocket Billiards", from memory);
  - *jump*: a detection within ``max_speed_mm_s * dt`` of the ball's previous position, for the
    velocity jumps of cue strikes and collisions, if it is sure enough to start a track
    (``birth_min_quality``; for a ball struck from rest at its last detection and unseen since,
    within what ``max_speed_mm_s`` covers from that detection in the time since, read as its
    own labels but not surely): a doubtful one off the ball's path (the dark of a pocket mouth
    beside a ball dropping in) would turn the ball there. It costs at least the gate
    ``g``, more than a gated prediction of a ball followed closely, and grows with the distance
    from the previous position, so at a collision each ball keeps the detection nearest to
    where it was (balls cannot pass through each other). A ball at rest with another rolling
    at it, not yet within contact of it nor of any other ball, has no jump: it has not been
    struck yet (Newton's first law), so a detection off its spot is the detector's error
    (``Tracker._awaits_striker``).

  A detection inside one ball's gate (plain or bounce) and nearer to where that ball was than
  to where another was is never the other's, by any hypothesis: the other could reach it only
  through or past the first, and balls cannot pass through each other.

  The assignment runs as a matching cascade (Wojke, Bewley & Paulus 2017, "Simple online and
  realtime tracking with a deep association metric"): confirmed tracks seen in the previous
  frame first, then balls hidden at rest (below), then confirmed tracks coasting unseen, then
  tentative tracks, each on the detections the earlier ones left, so a coasting track's
  spreading prediction never out-bids a ball followed frame by frame, nor takes what is seen
  where a hidden ball rests.
* A ball at rest (its last detections within a quarter radius of their median,
  ``Tracker._rest_spot``, and its filtered speed below ``respot_rest_speed_mm_s``) that goes
  unseen (covered by the streak of a ball passing by, an arm, the cue, or its detections too
  doubtful) stays where and as it was last seen, its prediction neither moved nor spread by
  the acceleration noise, until something may have touched it: a moving track whose course
  heads toward its spot and passes within a diameter of it plus that track's gate
  (``Tracker._touch_rest_spots``; Newton's first law). Until then it takes, before any coasting
  track, a detection seen within a radius of its spot that is sure enough to start a track,
  whatever its labels read (two balls cannot lie within a radius of one spot;
  ``Tracker._claim_rest_spots``), and it is seen again at rest: a detection beyond the gate of
  its resting state moves its position there and keeps its velocity, the detector's error
  having moved, not the ball.

  Colour and pattern mismatches add to the cost of a ball followed frame by frame, whatever the
  detection's quality: its own motion says which detection is it, and the detector's cue/object
  label, sure as it may state it, is wrong on a blurred or dimly lit cue ball often enough (read
  as a stripe in a quarter to half of its detections on the extra rendered clips of
  ``benchmarks/analyse_accuracy.py --extra``) that forbidding the pair lost the ball for as long
  as the misreading lasted, or handed it to another ball at a collision. A track unseen for
  longer than its gate
  takes to outgrow a ball (``sqrt(2 d / (sqrt(chi2) sigma_a))`` for diameter ``d``, about
  0.12 s) is found again only by a detection whose labels confirm it: sure (quality at least
  ``label_min_quality``, or the lower quartile of the ball's own detections' where that is
  lower), of its kind (``cue`` for the cue ball, its solid or stripe for an
  object ball) and not of another known colour (Wojke et al. 2017: motion associates over short
  gaps, appearance recovers an identity after a long one); what else appears where a lifted
  ball was is as likely the hand that took it. A ball whose unseen course turned off a cushion
  (its coasted prediction reflected, as a bounce), not yet seen in two frames in a row since,
  is the exception: it was lost at the contact, not lifted, and a detection in its reflected
  gate may be it whatever its labels read (a mismatch still costs as for a ball followed
  frame by frame). Unassigned tracks and detections compete through dummy rows and columns
  (the usual square augmentation), so a track may stay unassigned.
* A detection's noise is the scatter of the track's own recent detections about a smooth
  path (third differences, ``_Track.noise_mm``, at most ``meas_sigma_mm``), the detector's
  ``sigma_mm`` only until that is measured: the detector states a detection's whole error,
  slowly varying biases (shading, shadows, a cushion's face) included, while the filter's
  measurement noise is what varies from frame to frame; a filter told too little reads every
  wobble as a velocity jump.
* A detection matched through a bounce or jump, or with a predicted ``d2`` above
  ``chi2.ppf(maneuver_prob, 2)``, marks a velocity breakpoint: the filter's velocity is restarted
  there (a crude version of the maneuver detection in Bar-Shalom et al. 2001, ch. 11).
* Tracks start tentative and are confirmed after ``confirm_hits`` detections within
  ``confirm_window`` frames; an unconfirmed track that misses ``tentative_max_misses`` frames in a
  row is dropped, so one-off false detections never make a track. A confirmed track coasts (rows
  with ``seen = 0``) while undetected and ends after ``coast_s`` without a detection; its coasted
  tail is dropped, and its end is classed ``pocket`` (last seen near a pocket mouth) or ``lifted``.
* A confirmed track whose velocity restarts, other than by turning off a cushion (running into
  a rail, then out of it), at more than ``max_break_share`` of its detections (at least
  ``min_breaks`` times) is not a ball but a hand, arm or cue the detector took for one: a ball's
  velocity changes only at contacts (Alciatore 2004: between them it decelerates smoothly).
  Such tracks are left out of ``result`` and ``endings``. These restarts are counted on the
  track's filter run a second time on the detector's stated noise alone, as the noise a hand
  scatters its detections by would loosen the track's own filter until it no longer restarts.
  A track too short for that count is judged by where it came from and went: first seen moving
  with no ball near that could have struck it, taking or giving no other piece's id, and lost
  while moving before the clip ends, it is no ball when its course restarts at more than
  ``max_break_share`` of the detections from its third on (``Tracker._from_nowhere``).
* A ball put down by hand (re-spotted between shots, or taken out of a pocket and spotted) is
  the ball it was: a new track confirmed at rest, on sure labels, while every established ball
  rests takes back the id of an ended (or unseen, coasting) track with the same identity labels,
  when exactly one such id exists; the cue ball is one ball, so any earlier cue-ball id, or,
  where no ball was ever read as the cue ball (a dim room's unnamed white ball), the one lifted
  id never read as an object ball (``Tracker._respotted``, ``Tracker._unread_cue``). A ball
  put down reading white or colourless (a shaded white ball), and a lifted id whose sure
  detections mostly read so whatever its doubtful ones say, are the white ball: the new track
  takes that id when exactly one is off the table (``Tracker._white``).
  That id's rows then have a gap or a jump between the two pieces.
* A ball hidden at rest (under an arm, in a dark corner) and seen again resting within a radius
  of where it rested is the same ball whatever its labels read and whatever else is moving: a
  ball at rest stays put until struck, and two balls cannot share a spot; its new track takes
  back the old id (``Tracker._rested_here``).
* Offline, a ball lost while moving (seen with more doubt moving than at rest, so that its
  next detections after a gap start a new track) keeps its id when the new track
  appears within ``coast_s``, within what the old ball's speed covers in the gap plus a
  diameter, at any speed (a ball only slows between contacts), with
  the same known identity, and no other lost ball qualifies (``Tracker._resumed_ids``); hands
  and cues are left out before that test. The frames it was lost for get estimated rows
  (seen 0) along the chord between its ends (``Tracker._resumed_gap``).
* Offline, each track is cut at its breakpoints and the Rauch-Tung-Striebel smoother
  (``tracking.kalman.rts_smooth``) runs within each piece, so smoothing never blurs a contact.
"""

from __future__ import annotations

import logging
import math
from collections import Counter, deque
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment
from scipy.stats import chi2

from tracking.kalman import (
    INITIAL_SPEED_SIGMA_MM_S,
    SLIDING_DECEL_MM_S2,
    make_ball_filter,
    motion_model,
    rts_smooth,
)
from vision.table import RAILS, TableSpec

log = logging.getLogger(__name__)

REQUIRED_COLUMNS = ("frame", "t", "x", "y")
TRACK_COLUMNS = ["frame", "t", "track", "ball", "x", "y", "vx", "vy", "seen"]
EXTRA_COLUMNS = ["colour", "pattern", "x_meas", "y_meas"]
PATTERNS = ("cue", "solid", "stripe", "unknown")

# Cost of an impossible pairing in the assignment matrix (any value far above every real cost).
_INFEASIBLE = 1e9
# Read-only placeholders for a history row's transition until the next row replaces them.
_EYE4 = np.eye(4)
_EYE4.flags.writeable = False
_ZERO4 = np.zeros((4, 4))
_ZERO4.flags.writeable = False
# Hypothesis codes in `Tracker._assign` besides a prediction's index in its list (0 the plain
# one, then the bounces): none, a velocity jump.
_NO_HYP, _JUMP = -1, -2


# A ball lost at rest and found again moving was struck in between when its found speed is at
# least this many times its speed at the last sighting (a strike takes a ball from rest to
# metres per second; a resting track's velocity noise and the strike's first millimetres in
# the last sighting give it tens to a couple of hundred mm/s) ...
_STRIKE_GAIN = 4.0
# ... and its found heading lies within this angle of the line from that sighting: a struck
# ball runs straight from its spot until its first contact (common practice); a ball turned by
# a contact in the gap does not. Not a measured figure: wider than the heading's noise one
# frame into a run (a few degrees at 1 mm detections over 50 mm steps).
_STRIKE_AIM_DEG = 10.0


@dataclass(frozen=True)
class TrackerConfig:
    """Knobs of the tracker, each with its physical meaning (mm, s, mm/s).

    ``meas_sigma_mm``: position noise of a detection lacking ``sigma_mm`` (the detector gives
    about 1 mm at rest, 3 mm moving). ``accel_sigma_mm_s2``: white-acceleration noise of the
    motion model, the sliding deceleration ``mu_s g`` (``tracking.kalman``).
    ``initial_speed_sigma_mm_s``: prior velocity spread of a new track and of a restarted
    velocity. ``max_speed_mm_s``: fastest ball considered, bounds a velocity jump per frame (a
    hard break reaches 8 to 10 m/s; from memory). ``gate_prob``: chi-square probability of the
    Mahalanobis gate; ``maneuver_prob``: innovations beyond this probability restart the
    velocity and cut the smoother. ``bounce_restitution`` / ``bounce_restitution_sigma``:
    nominal cushion speed ratio of the reflected prediction and its spread (Alciatore 2004
    ball-cushion restitution 0.6 to 0.9 [secondary]). ``colour_cost`` / ``pattern_cost``:
    assignment cost (chi-square units) of a colour or solid/stripe mismatch. ``coast_s``: longest
    gap a track survives undetected. ``confirm_hits`` in ``confirm_window`` frames confirm a new
    track; ``tentative_max_misses`` consecutive misses drop an unconfirmed one.
    ``birth_min_quality``: lowest detector quality that may start a track or turn one (a
    jump; a ball rolling faster than ``respot_rest_speed_mm_s`` and missed in the last frame
    needs ``label_min_quality``, as ``Tracker._sure_quality`` lowers it). ``pocket_reach_mm``:
    a track last seen within this of a pocket mouth ended in the pocket.
    ``rest_speed_mm_s``: filtered speed below which a ball coasting unseen lies still where it
    was, so that a detection on its spot is a duplicate of it and starts no track (above the
    speed noise of a resting track, 20-30 mm/s with 1 mm detections and up to 40 mm/s at the
    end of a rest stretch: the events' ``EventConfig.rest_speed_mm_s``); one rolling unseen
    holds no spot (``Tracker.step``).
    ``respot_rest_speed_mm_s``: a new track confirmed while it and every ball seen in that frame
    are slower than this (filtered speed) is a ball put down by hand, and may take back the id
    of the ball it was (see ``Tracker``); the events' ``move_speed_mm_s`` scale, above the
    velocity noise of a resting track. ``respot_settle_s``: age below which a track is not
    yet taken for a ball in that test (common practice: a hand hovers for well under a second).
    ``label_min_quality``: the quality a
    detection needs to find a ball again after a long gap, and a put-down ball's detections to
    take back its id (``Tracker._respotted``), unless the ball's own detections were mostly
    less sure (``Tracker._sure_quality``); after a long gap, a ball mostly read without a
    pattern is found again by a read without one as well as by its own kind.
    ``max_break_share`` / ``min_breaks``: a confirmed track with velocity breakpoints other
    than turns off a cushion at more than this share of its detections, and at least
    ``min_breaks`` of them, is not a ball and is left out of the result (``Tracker.result``):
    a ball's velocity changes only at contacts (a cue strike from rest, a cushion, another
    ball), a few per shot, so nearly every detection of a ball continues its motion (at most
    7 % of a sample clip ball's detections are breakpoints of any kind), while a hand, arm or
    cue moved by a player changes course anywhere, all the time, and restarts the filter at
    40-80 % of its detections.
    ``noise_window``: frames over which a track measures the scatter of its own detections
    (``_Track.noise_mm``); a detection's noise is taken as that scatter once measured (at
    least ``min_meas_sigma_mm``, the detector's least stated sigma), else its ``sigma_mm``: the detector's figure is the detection's whole error, biases that drift
    slowly along a path included, which the filter must not read as frame-to-frame noise, and
    a filter told too small a noise follows every wobble, reads each as a velocity jump (a
    maneuver) and cuts the smoother at it. The scatter counts up to ``meas_sigma_mm`` (a moving ball's
    detection noise, above): beyond that it is not a ball's noise but the erratic course of a
    hand or cue, which the filter need not smooth into a ball's. Which tracks are hands is
    still judged at the stated noise (``Tracker._stated_update``).
    """

    meas_sigma_mm: float = 2.0
    min_meas_sigma_mm: float = 0.15
    accel_sigma_mm_s2: float = SLIDING_DECEL_MM_S2
    initial_speed_sigma_mm_s: float = INITIAL_SPEED_SIGMA_MM_S
    max_speed_mm_s: float = 8000.0
    gate_prob: float = 0.9999
    maneuver_prob: float = 0.999
    bounce_restitution: float = 0.75
    bounce_restitution_sigma: float = 0.2
    colour_cost: float = 6.0
    pattern_cost: float = 6.0
    coast_s: float = 0.5
    confirm_hits: int = 3
    confirm_window: int = 5
    tentative_max_misses: int = 2
    birth_min_quality: float = 0.3
    pocket_reach_mm: float = 120.0
    rest_speed_mm_s: float = 50.0
    respot_rest_speed_mm_s: float = 150.0
    respot_settle_s: float = 1.0
    label_min_quality: float = 0.5
    max_break_share: float = 0.25
    min_breaks: int = 3
    noise_window: int = 15

    def __post_init__(self) -> None:
        for name in ("meas_sigma_mm", "min_meas_sigma_mm", "accel_sigma_mm_s2", "initial_speed_sigma_mm_s",
                     "max_speed_mm_s", "coast_s", "pocket_reach_mm", "rest_speed_mm_s",
                     "respot_rest_speed_mm_s",
                     "respot_settle_s"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"TrackerConfig.{name} = {value!r} must be a positive number")
        for name in ("gate_prob", "maneuver_prob"):
            value = getattr(self, name)
            if not 0.5 < value < 1.0:
                raise ValueError(f"TrackerConfig.{name} = {value!r} must lie in (0.5, 1), "
                                 "e.g. 0.9999")
        if self.maneuver_prob > self.gate_prob:
            raise ValueError(f"maneuver_prob {self.maneuver_prob} must not exceed gate_prob "
                             f"{self.gate_prob}: a restart must happen inside the gate")
        if not 0.0 < self.bounce_restitution <= 1.0:
            raise ValueError(f"bounce_restitution {self.bounce_restitution} must lie in (0, 1]")
        if not 1 <= self.confirm_hits <= self.confirm_window:
            raise ValueError(f"confirm_hits {self.confirm_hits} must lie in 1..confirm_window "
                             f"({self.confirm_window})")
        if not 0.0 <= self.label_min_quality <= 1.0:
            raise ValueError(f"label_min_quality {self.label_min_quality} must lie in [0, 1]")
        if not 0.0 < self.max_break_share <= 1.0:
            raise ValueError(f"max_break_share {self.max_break_share} must lie in (0, 1]")
        if self.min_breaks < 1:
            raise ValueError(f"min_breaks {self.min_breaks} must be >= 1")
        if self.tentative_max_misses < 1:
            raise ValueError(f"tentative_max_misses {self.tentative_max_misses} must be >= 1")
        if self.noise_window < 4:
            raise ValueError(f"noise_window {self.noise_window} must be >= 4 frames (a third "
                             "difference spans four)")


class _Track:
    """Forward-pass state and history of one ball (internal)."""

    def __init__(self, key: int, kf, frame: int, t: float):
        self.key = key  # creation order, internal
        self.kf = kf  # the ball's filterpy KalmanFilter; its update step is the measurement update
        x, P = kf.x.reshape(4).copy(), kf.P.copy()
        self.track_id: int | None = None  # output id, set on confirmation
        self.x = x  # (4,) posterior [x, vx, y, vy], mm and mm/s
        self.P = P  # (4, 4) its covariance
        # The same filter run on the detector's stated noise alone, whose restarts tell a hand
        # from a ball (``Tracker._moves_like_a_ball``): state (4,) and covariance (4, 4).
        self.sx, self.sP = x.copy(), P.copy()
        self.t_last = t
        self.birth_frame = frame
        self.hits = 0
        self.qualities: list[float] = []  # detector quality of each detection taken
        # Each detection's labels (colour, pattern), beside its quality, so the ball's own
        # labels can be drawn from its sure detections alone (``Tracker._sure_labels``,
        # ``Tracker._white``).
        self.reads: list[tuple[str, str]] = []
        self.misses = 0  # consecutive
        # Whether the prediction, coasted unseen, turned off a cushion (``Tracker._coast``) and
        # no two detections in a row have followed it since: the ball was lost at the contact,
        # not lifted (``Tracker._assign``).
        self.turned_unseen = False
        # Where the ball rested when it was last seen, while it is hidden and nothing moving
        # has come near enough to touch it (``Tracker._resting_at``), else None: (2,) mm.
        self.rest_spot: np.ndarray | None = None
        self.last_seen_t = t
        self.ended: str | None = None
        self.colours: Counter = Counter()
        self.patterns: Counter = Counter()
        # History, one entry per processed frame since birth. Fs[k], Qs[k] carry k -> k + 1.
        self.frames: list[int] = []
        self.times: list[float] = []
        self.xs: list[np.ndarray] = []
        self.Ps: list[np.ndarray] = []
        self.Fs: list[np.ndarray] = []
        self.Qs: list[np.ndarray] = []
        self.seen: list[int] = []
        self.breaks: list[bool] = []
        # Restarts and states of the filter on the stated noise (``Tracker._stated_update``).
        self.odd: list[bool] = []
        self.sxs: list[np.ndarray] = []
        self.zs: list[tuple[float, float]] = []
        # |third differences| (mm) of the latest runs of four consecutive detections, both
        # axes, at most 2 noise_window of them (``noise_mm``).
        self.d3: deque = deque()
        self.scatter = 0.0  # mm, from d3 once enough are in (``noise_mm``)

    @property
    def confirmed(self) -> bool:
        return self.track_id is not None

    @property
    def last_seen_frame(self) -> int:
        """Frame index of the track's last detection (a track has one from its birth)."""
        return next(f for f, s in zip(reversed(self.frames), reversed(self.seen)) if s)

    def take_read(self, colour: str, pattern: str, quality: float) -> None:
        """Count one detection's labels and detector quality (0..1) into the track."""
        self.colours[colour] += 1
        self.patterns[pattern] += 1
        self.qualities.append(float(quality))
        self.reads.append((colour, pattern))

    def kind(self) -> str:
        """``cue``, ``object`` or ``unknown`` from the patterns of its detections so far."""
        return _kind_of(self.patterns)

    def label(self, counter: Counter, unknown: str) -> str:
        """The most frequent known label of ``counter`` (ties by name), else ``unknown``."""
        return _majority(counter, unknown)

    def record(self, frame, t, F, Q, seen, brk, z, odd=None):
        """Append the current posterior as this frame's row; ``F, Q`` carried the previous row
        here."""
        if self.Fs:
            self.Fs[-1], self.Qs[-1] = F, Q
        self.frames.append(frame)
        self.times.append(t)
        self.xs.append(self.x.copy())
        self.Ps.append(self.P.copy())
        self.Fs.append(_EYE4)
        self.Qs.append(_ZERO4)
        self.seen.append(int(seen))
        self.breaks.append(bool(brk))
        self.odd.append(bool(brk if odd is None else odd))
        self.sxs.append(self.sx.copy())
        self.zs.append(z)
        self.t_last = t

    def note_scatter(self, window: int) -> None:
        """After a detection: the third difference of the last four detections, when they are
        of consecutive frames, joins the track's recent ones (at most ``window`` frames')."""
        f, seen = self.frames, self.seen
        if len(f) < 4 or f[-1] - f[-4] != 3 or not all(seen[-4:]):
            return
        z0, z1, z2, z3 = self.zs[-4:]
        # Third difference z3 - 3 z2 + 3 z1 - z0 per axis: zero along any quadratic path.
        # Taken as differences of the steps, so repeated detections give exactly 0: summed
        # as written, rounding of 3 z left 1e-13 mm or nothing depending on the coordinates'
        # last bits, and the track's noise (``_update``: stated when 0) with it (extra clip
        # uneven_60fps, frame 48: 0.5 um rounding of a resting ball's detections turned its
        # filter's spread 0.51 -> 1.6 mm and an assignment with it).
        for ax in (0, 1):
            s1, s2, s3 = z1[ax] - z0[ax], z2[ax] - z1[ax], z3[ax] - z2[ax]
            self.d3.append(abs((s3 - s2) - (s2 - s1)))
        while len(self.d3) > 2 * window:
            self.d3.popleft()
        n = len(self.d3)
        if n >= window:
            v = sorted(self.d3)  # a few dozen numbers: plain Python beats numpy's overhead
            self.scatter = 0.5 * (v[n // 2] + v[(n - 1) // 2]) / 0.6745 / math.sqrt(20.0)

    def noise_mm(self, cap_mm: float) -> float:
        """The scatter (mm, per axis) of this track's own recent detections, at most ``cap_mm``;
        0 until half a window of them has been measured.

        The variate-difference method (Tintner 1940; from memory): white noise of variance
        s^2 gives third differences of variance 20 s^2 (binomial weights 1, 3, 3, 1), whose
        median absolute value is 0.6745 of their standard deviation; the median ignores the
        few differences a contact spoils. A resting ball, whose detections the detector
        repeats, gives 0 (the detector's own figure then stands)."""
        # Computed as each detection comes in (``note_scatter``).
        return min(self.scatter, cap_mm)

    def trim_unseen_tail(self) -> None:
        while self.seen and not self.seen[-1]:
            for lst in (self.frames, self.times, self.xs, self.Ps, self.Fs, self.Qs, self.seen,
                        self.breaks, self.odd, self.sxs, self.zs):
                lst.pop()


class Tracker:
    """Frame-by-frame multi-ball tracker; see the module docstring for the method.

    ``step`` takes the detections of one frame (columns as in the module docstring); frames must
    come in increasing time. ``result`` smooths every confirmed track and returns the tracks
    DataFrame; ``endings`` says how each ended track left the table.
    """

    def __init__(self, config: TrackerConfig | None = None, table: TableSpec | None = None):
        if table is None:
            raise ValueError("Tracker needs the TableSpec of the clip, e.g. vision.table.NINE_FOOT")
        self.config = config or TrackerConfig()
        self.table = table
        self._tracks: list[_Track] = []
        self._live: list[_Track] = []  # tracks not ended, in creation order
        self._models: dict[float, tuple[np.ndarray, np.ndarray]] = {}  # dt -> (F, Q)
        self._next_key = 0
        self._next_id = 0
        self._frame: int | None = None
        self._t: float | None = None
        self._frame_times: dict[int, float] = {}  # every processed frame's time, s
        self._gate = float(chi2.ppf(self.config.gate_prob, 2))
        self._maneuver = float(chi2.ppf(self.config.maneuver_prob, 2))
        # Unseen this long, a ball's gate is wider than a ball: the white-acceleration spread
        # of the position, sigma_a tau^2 / 2 per axis (Bar-Shalom et al. 2001 sec. 6.3.3),
        # times the gate's sqrt(chi2) reaches a diameter. Past it, position no longer says which
        # object in the gate is the ball, so only a detection whose labels say so may be it.
        # Longest step (in per-axis noise sigmas) between two detections of a ball at rest: the
        # difference of two positions each of sigma per axis has sigma sqrt 2 per axis, its
        # squared length over 2 sigma^2 is chi-square with 2 degrees of freedom, whose 99.73 %
        # point (the 3-sigma share) is chi2.ppf(0.9973, 2) = 11.8 (analytic).
        self._still_step = math.sqrt(2.0 * float(chi2.ppf(0.9973, 2)))
        self._reid_s = math.sqrt(2.0 * table.ball_diameter_mm
                                 / (math.sqrt(self._gate) * self.config.accel_sigma_mm_s2))
        # Per rail: the state block of its normal coordinate (0 x, 1 y), its reversal line (mm)
        # and the sign of the inward normal.
        self._lines = [(rail, 1 if rail in ("bottom", "top") else 0, table.reversal_line(rail),
                        1.0 if rail in ("bottom", "left") else -1.0) for rail in RAILS]
        self._segments = {r: [] for r in RAILS}
        for seg in table.cushions():
            ax = 0 if seg.rail in ("bottom", "top") else 1
            lo, hi = sorted((seg.start[ax], seg.end[ax]))
            self._segments[seg.rail].append((lo, hi))

    # --- public API ---------------------------------------------------------------------------
    def step(self, frame_detections: pd.DataFrame, frame: int | None = None,
             t: float | None = None) -> None:
        """Process one frame's detections (a DataFrame with the columns of the module docstring).

        ``frame`` and ``t`` are taken from the detections; give them explicitly for a frame with
        no detections (every track then coasts). Raises ValueError on missing columns, several
        frames in one call, or a time not after the previous frame's.
        """
        det = _checked(frame_detections, self.config)
        if len(det):
            frames = det["frame"].unique()
            times = det["t"].unique()
            if len(frames) != 1 or len(times) != 1:
                raise ValueError(f"step() takes one frame at a time; got frames {list(frames)[:5]}"
                                 " and times " f"{list(times)[:5]}; use track() for a whole clip")
            frame, t = int(frames[0]), float(times[0])
        elif frame is None or t is None:
            raise ValueError("an empty frame needs its frame index and time: step(df, frame=, t=)")
        self._step(int(frame), float(t), det[["x", "y"]].to_numpy(float).reshape(-1, 2),
                   det["sigma_mm"].to_numpy(float), det["colour"].tolist(),
                   det["pattern"].tolist(), det["quality"].to_numpy(float))

    def _step(self, frame: int, t: float, Z: np.ndarray, sig: np.ndarray, colours: list[str],
              patterns: list[str], quality: np.ndarray) -> None:
        """``step`` on checked arrays: Z (D, 2) mm, sig (D,) mm, colours and patterns D labels,
        quality (D,)."""
        if self._t is not None and not t > self._t:
            raise ValueError(f"frame {frame} at t = {t} s is not after the previous frame "
                             f"(t = {self._t} s); feed frames in time order")
        self._frame, self._t = frame, t
        self._frame_times[frame] = t

        live = self._live
        preds = {tr.key: self._predict(tr, t) for tr in live}
        colour_arr = np.array(colours, dtype=object).reshape(-1)
        pattern_arr = np.array(patterns, dtype=object).reshape(-1)
        free = np.ones(len(Z), dtype=bool)
        assigned: dict[int, tuple[int, str]] = {}
        # A matching cascade (Wojke, Bewley & Paulus 2017): balls seen in the last frame choose
        # first, then those coasting unseen, then tentative tracks. A coasting track's prediction
        # spreads with every missed frame, so on its own gate it would out-bid a ball followed
        # frame by frame for that ball's detection (a false track from a hand, coasting on at
        # the hand's speed, taking over a ball it crosses).
        # Between the balls followed frame by frame and those coasting, balls hidden at rest
        # claim what is seen where they rest (`_claim_rest_spots`): no other ball can be there.
        confirmed = [tr for tr in live if tr.confirmed]
        resting = [tr for tr in confirmed if tr.misses and tr.rest_spot is not None]
        groups = ([tr for tr in confirmed if tr.misses == 0], resting,
                  [tr for tr in confirmed if tr.misses], [tr for tr in live if not tr.confirmed])
        for n, group in enumerate(groups):
            group = [tr for tr in group if tr.key not in assigned]
            idx = np.flatnonzero(free)
            if not group or not len(idx):
                continue
            if n == 1:
                pairs = self._claim_rest_spots(group, Z[idx], quality[idx])
            else:
                pairs = self._assign(group, preds, Z[idx], sig[idx], colour_arr[idx],
                                     pattern_arr[idx], quality[idx])
            for gi, dj, hyp in pairs:
                assigned[group[gi].key] = (int(idx[dj]), hyp)
                free[idx[dj]] = False

        newly = []
        for tr in live:
            pred = preds[tr.key]
            if tr.key in assigned:
                j, hyp = assigned[tr.key]
                self._update(tr, pred, hyp, Z[j], sig[j], frame, t)
                tr.hits += 1
                tr.take_read(colours[j], patterns[j], quality[j])
                tr.misses = 0
                tr.rest_spot = None
                tr.last_seen_t = t
                if not tr.confirmed and tr.hits >= self.config.confirm_hits:
                    newly.append(tr)
            else:
                if tr.misses == 0 and tr.confirmed:
                    tr.rest_spot = self._resting_at(tr)
                    if tr.rest_spot is not None:
                        pred = self._predict(tr, t)  # hidden at rest: it stays put
                self._coast(tr, pred, frame, t)
                tr.misses += 1
                self._maybe_end(tr, t)
        self._touch_rest_spots(live, preds)
        # Ids are given once every track has this frame's row, so a ball put back by hand is
        # told from one that is merely seen again.
        for tr in newly:
            self._confirm(tr, frame)
        self._live = live = [tr for tr in live if tr.ended is None]

        # New tentative tracks from detections no track took, unless they sit on a ball seen
        # in this frame or lying still unseen (a duplicate detection of it). A ball coasting
        # unseen while it rolls does not hold its predicted spot: a detection there that it
        # could not take (too doubtful after a gap, ``_assign``) is as likely that ball found
        # again, which, as a track of its own, keeps its id offline (``_resumed_ids``).
        occupied = np.array([tr.xs[-1][0::2] for tr in live if self._holds_spot(tr, frame)])
        order = sorted(np.flatnonzero(free), key=lambda j: (Z[j, 0], Z[j, 1]))
        for j in order:
            if quality[j] < self.config.birth_min_quality:
                continue
            if len(occupied) and np.min(np.hypot(*(occupied - Z[j]).T)) < self.table.radius_mm:
                continue
            self._birth(Z[j], sig[j], colours[j], patterns[j], quality[j], frame, t)
            occupied = np.vstack([occupied.reshape(-1, 2), Z[j]])

    def result(self) -> pd.DataFrame:
        """The smoothed tracks DataFrame (columns ``TRACK_COLUMNS + EXTRA_COLUMNS``), sorted by
        frame then track. Tracks still on the table lose their undetected tail, as ended ones do.
        A ball lost while moving and found again along its way keeps its id
        (:meth:`_resumed_ids`).
        """
        kept, same = self._ball_tracks()
        pieces: dict[int, list[_Track]] = {}
        for tr, _ in kept:
            pieces.setdefault(same.get(tr.track_id, tr.track_id), []).append(tr)
        labels = self._sure_labels(pieces)
        rows = [g for g in (self._resumed_gap(tr, xs, kept, same, labels) for tr, xs in kept
                            if tr.track_id in same) if len(g)]
        for tr, xs in kept:
            n = len(tr.frames)
            z = np.array([zz for zz in tr.zs], dtype=float)
            tid = same.get(tr.track_id, tr.track_id)
            ball, colour, pattern = labels[tid]
            rows.append(pd.DataFrame({
                "frame": np.asarray(tr.frames, dtype=np.int64),
                "t": np.asarray(tr.times, dtype=float),
                "track": np.full(n, tid, dtype=np.int64),
                "ball": ball,
                "x": xs[:, 0], "y": xs[:, 2], "vx": xs[:, 1], "vy": xs[:, 3],
                "seen": np.asarray(tr.seen, dtype=np.int64),
                "colour": colour, "pattern": pattern,
                "x_meas": z[:, 0], "y_meas": z[:, 1],
            }))
        if not rows:
            return empty_tracks()
        out = pd.concat(rows, ignore_index=True)
        return out.sort_values(["frame", "track"], kind="stable").reset_index(drop=True)

    def endings(self) -> pd.DataFrame:
        """Ended tracks: columns ``track, frame, t, x, y, reason`` (``pocket`` or ``lifted``) at
        the last detection (ids as in :meth:`result`)."""
        kept, same = self._ball_tracks()
        rows = [dict(track=same.get(tr.track_id, tr.track_id), frame=tr.frames[-1],
                     t=tr.times[-1], x=tr.xs[-1][0], y=tr.xs[-1][2], reason=tr.ended)
                for tr, _ in kept if tr.ended]
        cols = ["track", "frame", "t", "x", "y", "reason"]
        if not rows:
            return pd.DataFrame({c: pd.Series(dtype=d) for c, d in zip(
                cols, ["int64", "int64", "float64", "float64", "float64", "str"])})
        return pd.DataFrame(rows, columns=cols)

    def _ball_tracks(self) -> tuple[list[tuple[_Track, np.ndarray]], dict[int, int]]:
        """The confirmed tracks that are balls, each with its smoothed states (N, 4) ``[x, vx,
        y, vy]`` (unseen tails trimmed), and the ids of balls found again after being lost
        while moving ({new id: old id}, :meth:`_resumed_ids`). Left out: tracks that do not
        move like a ball (:meth:`_moves_like_a_ball`) and those that come from nowhere and go
        nowhere (:meth:`_from_nowhere`)."""
        kept = []
        for tr in self._tracks:
            if not tr.confirmed:
                continue
            tr.trim_unseen_tail()
            if tr.frames and self._moves_like_a_ball(tr):
                kept.append((tr, self._smooth(tr)))
        same = self._resumed_ids(kept)
        balls = [(tr, xs) for tr, xs in kept if not self._from_nowhere(tr, xs, kept, same)]
        if len(balls) < len(kept):
            same = self._resumed_ids(balls)  # a dropped track may have stood in a resume's way
        return balls, same

    def _resumed_gap(self, tr: _Track, xs: np.ndarray, kept: list[tuple[_Track, np.ndarray]],
                     same: dict[int, int], labels: dict[int, tuple[str, str, str]]) -> pd.DataFrame:
        """Rows (``TRACK_COLUMNS + EXTRA_COLUMNS``, ``seen`` 0) for the processed frames between
        the ball's last detection under its old id and the first of ``tr``, the track that
        resumes it (:meth:`_resumed_ids`); ``xs`` (N, 4) ``tr``'s smoothed states, ``kept`` the
        tracks of :meth:`result` (unseen tails trimmed) with theirs, ``labels`` each output id's
        (ball, colour, pattern) (:meth:`_sure_labels`).

        The ball is on the table all along, so the results format wants a row for each of
        those frames (``shared/spec/results-format.md``: a position only estimated has seen 0),
        as the tracker gives any ball it coasts across a miss; and the event finder must not
        take the gap for a ball lifted off the table (``tracking.events._respots``). Positions
        run along the chord between the two smoothed ends at its mean velocity: a ball is
        often lost at a contact (a collision's blur and a second ball beside it), where its
        path turns a corner, and the chord stays within the corner's sagitta of it, while a
        cubic matched to both ends' velocities swings outside the corner (a 60 degree turn
        at 900 mm/s lost for six frames at 30 fps, ``tests/test_tracker.py``, noise seeds
        7-9: 19.9-21.6 mm off at most, against 7.7-8.5 mm for the chord).
        """
        new_id = same[tr.track_id]
        f1, t1 = tr.frames[0], tr.times[0]
        before = [(otr, oxs) for otr, oxs in kept if otr is not tr
                  and same.get(otr.track_id, otr.track_id) == new_id and otr.frames[-1] < f1]
        otr, oxs = max(before, key=lambda p: p[0].frames[-1])
        f0, t0 = otr.frames[-1], otr.times[-1]
        frames = [f for f in range(f0 + 1, f1) if f in self._frame_times]
        ts = np.array([self._frame_times[f] for f in frames], dtype=float)
        p0, p1 = oxs[-1, [0, 2]], xs[0, [0, 2]]
        vel = (p1 - p0) / (t1 - t0)
        pos = p0 + (ts - t0)[:, None] * vel
        n = len(frames)
        return pd.DataFrame({
            "frame": np.asarray(frames, dtype=np.int64), "t": ts,
            "track": np.full(n, new_id, dtype=np.int64),
            "ball": labels[new_id][0],
            "x": pos[:, 0], "y": pos[:, 1], "vx": np.full(n, vel[0]), "vy": np.full(n, vel[1]),
            "seen": np.zeros(n, dtype=np.int64), "colour": labels[new_id][1],
            "pattern": labels[new_id][2],
            "x_meas": np.full(n, np.nan), "y_meas": np.full(n, np.nan)})

    def _resumed_ids(self, kept: list[tuple[_Track, np.ndarray]]) -> dict[int, int]:
        """Ids of balls lost while moving and found again along their way: {new id: old id}.

        ``kept``: the tracks that move like balls (:meth:`_moves_like_a_ball`; hands, arms and
        cues are already left out), each with its smoothed states (N, 4) ``[x, vx, y, vy]``.
        While a ball is unseen the tracker finds it again only by a detection inside its gate,
        and after a gap longer than the gate takes to outgrow a ball only by a sure one
        (``_assign``): a ball seen with more doubt moving than at rest (dim, streaked by an
        open shutter) is not sure again after a gap, so its next detections start a new track
        (phone_wide_30fps of ``benchmarks/analyse_accuracy.py --extra``: a blue ball missed
        for five frames after a collision, found again at quality 0.21-0.36 against 0.57 at
        rest). The new track
        is that ball (one ball, one id: ``shared/spec/results-format.md``) when its own motion
        and labels say so: it appears, at any speed, within ``coast_s`` (the longest a track
        coasts unseen) of the old id's last detection, at which the old ball was not at a
        pocket, no farther from that detection than the old ball's speed there covers in the
        gap plus
        a diameter (on the cloth a ball only slows between contacts, Alciatore 2004; a
        collision turns it without speeding it up unless the other ball was the faster, a case
        left to a new id; the diameter is the slack a strike from rest gets in
        ``tracking.events._respots``; a ball lost rolling slowly is found slower still, or at
        rest where it stopped, so neither speed is bounded below: cheapwide_25fps of
        ``benchmarks/analyse_accuracy.py --extra``, the 14 stripe lost at 0.1 m/s for six
        frames and found again at 72 mm/s, quality 0.37-0.39 under its sure 0.45, was two ids;
        a ball lost at rest is found within the diameter, where no other ball can be), and
        with the same known
        identity (the cue ball; or an object ball of the same pattern, solid or stripe, and the
        same colour), of which exactly one old id qualifies (Wojke, Bewley & Paulus 2017:
        appearance recovers an identity after a gap). A hand cannot take an id so: it does not
        move like a ball and is left out before this test.
        """
        cfg = self.config
        pieces: dict[int, list[tuple[_Track, np.ndarray]]] = {}
        for tr, xs in kept:
            pieces.setdefault(tr.track_id, []).append((tr, xs))
        first = {tid: min(ps, key=lambda p: p[0].times[0]) for tid, ps in pieces.items()}
        last = {tid: max(ps, key=lambda p: p[0].last_seen_frame) for tid, ps in pieces.items()}

        def identity(tr: _Track) -> tuple[str, str, str] | None:
            kind = tr.kind()
            if kind == "cue":
                return ("cue", "", "")
            colour, pattern = tr.label(tr.colours, ""), tr.label(tr.patterns, "unknown")
            if kind != "object" or not colour or pattern == "unknown":
                return None
            return (kind, pattern, colour)

        out: dict[int, int] = {}
        taken: set[int] = set()
        for tid in sorted(pieces, key=lambda i: first[i][0].times[0]):
            tr, xs = first[tid]
            who = identity(tr)
            if who is None:
                continue
            t_new, z_new = tr.times[0], np.asarray(tr.zs[0], dtype=float)
            cands = []
            for old, (otr, oxs) in last.items():
                k = len(otr.seen) - 1 - otr.seen[::-1].index(1)  # its last detection
                gap = t_new - otr.times[k]
                if old == tid or old in taken or not 0.0 < gap <= cfg.coast_s \
                        or otr.ended == "pocket" or identity(otr) != who:
                    continue
                v_old = float(np.hypot(oxs[k, 1], oxs[k, 3]))
                z_old = np.asarray(otr.zs[k], dtype=float)
                if float(np.hypot(*(z_new - z_old))) <= v_old * gap + self.table.ball_diameter_mm:
                    cands.append(old)
            if len(cands) == 1:
                out[tid] = out.get(cands[0], cands[0])
                taken.add(cands[0])
                log.debug("track %s continues track %s (lost while moving)", tid, cands[0])
        return out

    # --- internals ----------------------------------------------------------------------------
    def _moves_like_a_ball(self, tr: _Track) -> bool:
        """False for a track whose velocity restarts too often where nothing could have struck
        a ball: more than ``max_break_share`` of its detections, and at least ``min_breaks``
        times, past the track's first three frames (whose velocity is still settling), other
        than turns off a cushion (:meth:`_course_breaks`). No ball changes course so; a
        player's hand, arm or cue does (``TrackerConfig``). Restarts at a cue strike or next
        to another ball are counted too: a ball is struck or meets another a few times a shot
        at most, far from a quarter of its detections."""
        cfg = self.config
        n_breaks = self._course_breaks(tr, 3)
        return n_breaks < cfg.min_breaks or n_breaks <= cfg.max_break_share * sum(tr.seen)

    def _course_breaks(self, tr: _Track, k0: int) -> int:
        """How often the track's course restarts at a detection from its row ``k0`` on, other
        than in a turn off a cushion: a restart within a diameter plus two frames' travel of a
        rail's reversal line at which the ball was running into that rail and, then or a frame
        later, runs out of it (a hand moving about beside a rail restarts in any direction).
        Restarts and velocities are those of the track's filter run on the noise the detector
        states (``_stated_update``): a hand's erratic course raises the scatter the track's own
        filter measures until that one no longer restarts."""
        n = len(tr.frames)
        n_breaks = 0
        for k in range(max(k0, 1), n):
            if not (tr.odd[k] and tr.seen[k]):
                continue
            x_prev = tr.sxs[k - 1]
            v = float(np.hypot(x_prev[1], x_prev[3]))
            p = tr.sxs[k][0::2]
            reach = self.table.ball_diameter_mm + 2.0 * v * (tr.times[k] - tr.times[k - 1])
            after = tr.sxs[k:min(k + 2, n)]
            # Normal velocity, positive away from the rail: v_n = inward * v[axis].
            if any(abs(p[ax] - c) < reach and inward * x_prev[2 * ax + 1] < 0
                   and any(inward * xa[2 * ax + 1] > 0 for xa in after)
                   for _, ax, c, inward in self._lines):
                continue
            n_breaks += 1
        return n_breaks

    def _from_nowhere(self, tr: _Track, xs: np.ndarray, kept: list[tuple[_Track, np.ndarray]],
                      same: dict[int, int]) -> bool:
        """Whether ``tr`` (smoothed states ``xs`` (N, 4)) is a ball's look on something else:
        nothing explains where it came from nor where it went, and its course restarts.

        A ball on the cloth is set moving only from rest (a cue strike; a ball put down by
        hand rests first) or by another ball's contact, and moving it only slows, turns at a
        contact, comes to rest, drops into a pocket or goes on past a gap (Alciatore 2004).
        So a track with a ball's look that is first seen moving (smoothed speed at least
        ``respot_rest_speed_mm_s``) with no ball of ``kept`` within a diameter plus two frames'
        travel of it there (none could have struck it), that takes no other piece's id (a
        ball found again, :meth:`_resumed_ids`, or put back by hand) and gives none, and that
        is lost while still moving (ended unseen for ``coast_s`` before the clip ends), has
        neither a ball's beginning nor a
        ball's end. If, besides, its course restarts (other than in a turn off a cushion,
        :meth:`_course_breaks`) at more than ``max_break_share`` of the detections from its
        third on, the first a prediction from two detections can test, it is not a ball: a
        hand or arm reaching over a
        corner during a stroke, seen for a few frames at low quality (tele_120fps of
        ``benchmarks/analyse_accuracy.py --extra --auto-calibration``: frames 99-103, quality
        0.24-0.41, jumping 20-60 mm a frame at 120 fps). The restart count of
        :meth:`_moves_like_a_ball` cannot judge so short a track (it needs ``min_breaks``
        restarts past the first three frames)."""
        cfg = self.config
        tid = tr.track_id
        if tid in same or tid in same.values() \
                or any(o is not tr and o.track_id == tid for o, _ in kept):
            return False
        if min(np.hypot(xs[0, 1], xs[0, 3]), np.hypot(xs[-1, 1], xs[-1, 3])) \
                < cfg.respot_rest_speed_mm_s:
            return False  # rests at one end: put down by hand, or comes to rest
        if tr.ended is None:
            return False  # not lost for ``coast_s`` before the clip ends
        f0, z0 = tr.frames[0], xs[0, 0::2]
        dt = tr.times[1] - tr.times[0] if len(tr.times) > 1 else 0.0
        reach = self.table.ball_diameter_mm + 2.0 * float(np.hypot(xs[0, 1], xs[0, 3])) * dt
        for o, oxs in kept:
            if o is tr or not o.frames[0] <= f0 <= o.frames[-1]:
                continue
            k = int(np.searchsorted(o.frames, f0))
            if o.frames[k] == f0 and float(np.hypot(*(oxs[k, 0::2] - z0))) < reach:
                return False  # a ball beside it could have struck it
        n_breaks = self._course_breaks(tr, 2)
        return n_breaks >= 1 and n_breaks > cfg.max_break_share * sum(tr.seen[2:])

    def _predict(self, tr: _Track, t: float) -> dict:
        """Prior of ``tr`` at ``t``: {'x' (4,), 'P' (4, 4), 'F', 'Q', 'dt', 'prev' (2,) mm}.

        A ball hidden at rest, nothing having touched it (``_Track.rest_spot``), stays where and
        as it was last seen (``F = I``, ``Q = 0``): a ball at rest does not move until something
        strikes it (Newton's first law), so its hidden frames add no acceleration noise."""
        dt = t - tr.t_last
        pinned = tr.rest_spot is not None
        F, Q = (_EYE4, _ZERO4) if pinned else self._model(dt)
        x = F @ tr.x  # x_pred = F x
        P = F @ tr.P @ F.T + Q  # P_pred = F P F^T + Q
        return {"x": x, "P": P, "F": F, "Q": Q, "dt": dt, "prev": tr.x[0::2],
                "unseen_s": t - tr.last_seen_t,
                "prev_P": tr.P[0::2, 0::2], "bounces": [] if pinned else self._bounces(x, P)}

    def _model(self, dt: float) -> tuple[np.ndarray, np.ndarray]:
        """``tracking.kalman.motion_model(dt)``, built once per distinct interval (a clip has a
        handful: its frame interval and the gaps of dropped frames)."""
        model = self._models.get(dt)
        if model is None:
            if len(self._models) > 4096:  # variable frame rate: keep the cache bounded
                self._models.clear()
            F, Q = motion_model(dt, self.config.accel_sigma_mm_s2)
            F.flags.writeable = False
            Q.flags.writeable = False
            model = self._models[dt] = (F, Q)
        return model

    def _on_cushion(self, rail: str, along_mm: float) -> bool:
        return any(lo <= along_mm <= hi for lo, hi in self._segments[rail])

    def _bounces(self, x: np.ndarray, P: np.ndarray) -> list[tuple[str, np.ndarray, np.ndarray]]:
        """Predictions reflected off each reversal line the plain prediction has crossed.

        A crossing in a pocket mouth is not reflected. The normal coordinate ``p`` becomes
        ``c - e (p - c)`` and the normal velocity ``-e v`` for line ``c`` and nominal restitution
        ``e``; ``P' = J P J^T`` plus the spread of ``e`` on both.
        """
        out = []
        cfg = self.config
        e, se = cfg.bounce_restitution, cfg.bounce_restitution_sigma
        for rail, ax, c, inward in self._lines:
            depth = inward * (x[2 * ax] - c)  # < 0: the centre is past the reversal line
            if depth >= 0 or inward * x[2 * ax + 1] >= 0:
                continue
            along = x[2 * (1 - ax)]
            if not self._on_cushion(rail, along):
                continue
            J = np.eye(4)
            J[2 * ax, 2 * ax] = J[2 * ax + 1, 2 * ax + 1] = -e
            xr = J @ x
            xr[2 * ax] += (1 + e) * c  # p' = c (1 + e) - e p
            Pr = J @ P @ J.T
            Pr[2 * ax, 2 * ax] += (se * depth) ** 2
            Pr[2 * ax + 1, 2 * ax + 1] += (se * x[2 * ax + 1]) ** 2
            out.append((rail, xr, Pr))
        return out

    def _assign(self, group, preds, Z, sig, colours, patterns,
                quality) -> list[tuple[int, int, str]]:
        """Hungarian assignment of ``group`` tracks to detections Z (D, 2) mm.

        Returns (track index, detection index, hypothesis) triples; hypothesis is ``predict``,
        ``bounce:<rail>`` or ``jump``.
        """
        cfg = self.config
        T, D = len(group), len(Z)
        cost = np.full((T, D), _INFEASIBLE)
        hyps = np.full((T, D), _NO_HYP, dtype=np.int64)
        names: list[list[str]] = []
        g = self._gate
        patterns = np.asarray(patterns, dtype=object)
        colours = np.asarray(colours, dtype=object)
        is_cue = patterns == "cue"
        is_obj = (patterns == "solid") | (patterns == "stripe")
        known_colour = colours != ""
        idents: list[np.ndarray] = []  # per track (D,): identity cost of each detection

        def own_reads(tr: _Track, kind: str, tp: str, colour: str, clash: np.ndarray) -> np.ndarray:
            """(D,) bool: detections read as ``tr``'s own labels (cue ball; object ball of its
            pattern or unread; a ball of unknown kind: any but the other kind's), its colour
            where both are known."""
            own = (is_cue if kind == "cue" else is_obj & ((patterns == tp) | (tp == "unknown"))
                   if kind == "object" else ~clash)
            if 2 * tr.patterns["unknown"] > tr.hits:
                # A ball the detector mostly cannot read is known again by a read like
                # most of its own, as by a quality like its own (`_sure_quality`).
                own = own | (patterns == "unknown")
            if colour:
                own = own & (~known_colour | (colours == colour))
            return own

        jumps: list[tuple[np.ndarray, float, bool]] = []  # per track: jump distances (D,) mm, interval s, struck
        for i, tr in enumerate(group):
            pr = preds[tr.key]
            kind = tr.kind()
            colour = tr.label(tr.colours, "")
            tp = tr.label(tr.patterns, "unknown")
            # A label of the other kind only costs like a solid/stripe mismatch while the ball is
            # followed: its motion decides, and a sure-looking label can be wrong (a blurred or
            # dim cue ball read as a stripe), where forbidding the pair left the ball coasting
            # beside its own detections until it ended. A ball unseen for longer than `_reid_s`
            # is found again by its labels, not by position: its gate has spread past a ball,
            # and what shows up in it is as likely the hand that lifted it or puts it down as the
            # ball itself (Wojke et al. 2017: motion for short-term association, appearance to
            # recover an identity after a long occlusion).
            clash = is_cue if kind == "object" else is_obj if kind == "cue" else np.zeros(D, bool)
            forbid = np.zeros(D, bool)
            if kind != "unknown" and pr["unseen_s"] > self._reid_s:
                forbid = ~(own_reads(tr, kind, tp, colour, clash) & (quality >= self._sure_quality([tr])))
            ident = cfg.pattern_cost * clash
            if colour:
                ident += cfg.colour_cost * (known_colour & (colours != colour))
            if tp in ("solid", "stripe"):
                ident += cfg.pattern_cost * (patterns == ("stripe" if tp == "solid" else "solid"))
            # Each motion hypothesis is gated on its squared Mahalanobis distance and the pair
            # costs the innovation's negative log-likelihood (`_innovation_nll`): a prediction
            # spread wide (a velocity just restarted) pays for its width, else it takes a
            # neighbour's detection out in its wide gate from the neighbour just struck, whose
            # own prediction it has left (the extra clip "uneven": 4 identity switches).
            # Which of a ball's own hypotheses a detection fits is still judged on d2: a bounce's
            # extra spread is the restitution's, not a loose fit, and with no prior of bouncing
            # against rolling on, judging it on the likelihood too turned fewer balls at the
            # cushion (benchmarks/event_accuracy.py --fps 60 30 --seed 1, 30 fps: speed-out p95
            # 0.100 -> 0.117, restitution p95 0.131 -> 0.142).
            names.append(["predict"] + [f"bounce:{rail}" for rail, _, _ in pr["bounces"]])
            cands = [(pr["x"], pr["P"])] + [(xr, Pr) for _, xr, Pr in pr["bounces"]]
            best = np.full(D, np.inf)
            for h, (x, P) in enumerate(cands):
                d2, width = _innovation_nll(Z, x[0::2], P[0::2, 0::2], sig, cfg.meas_sigma_mm)
                ok = (d2 <= g) & (d2 < best)
                best[ok] = d2[ok]
                cost[i, ok] = d2[ok] + width[ok]
                hyps[i, ok] = h
            # A ball whose unseen course turns off a cushion was lost at the contact, pressed
            # against the cushion's face and in its shadow where the detector misses it, not
            # lifted: no player touches a ball in motion (touching a moving ball is a foul;
            # common practice). What its reflected gate holds is the ball coming back off the
            # cushion, whatever its labels read there (phone_wide_30fps, dim blue ball 2 at
            # 8.04 s: unseen 0.17 s, read blue / unknown against its usual black / solid, d2 1.3
            # in the gate, left unassigned; on the automatic calibration's detections it was
            # found once at 8.13 s, lost again for five frames and read black / solid or blue /
            # unknown when seen again: `turned_unseen` lasts until two detections in a row). A
            # jump still needs the labels.
            forbid &= ~((hyps[i] >= 1) | ((hyps[i] == 0) & tr.turned_unseen))
            # A ball struck from rest at its last detection (its two detections before it within
            # `_still_step` times the track's scatter of each other, and that detection off the
            # one before by more) and unseen since: the strike blurred it past what the detector
            # finds, and its speed is unknown. It may have gone anywhere a ball reaches from
            # that detection since, read as its own labels (as a ball found again after a long
            # gap, above) but not surely (extra clip lamp_50fps: the cue ball seen 4 mm off in
            # the strike frame, missed five frames at 3.2 m/s, found 370 mm on at quality 0.38
            # and read black later: a new track, 2 id switches).
            k = len(tr.seen) - 1 - tr.seen[::-1].index(1) if 1 in tr.seen else None
            struck = False
            if tr.misses > 0 and k is not None and k > 1 and tr.seen[k - 1] and tr.seen[k - 2]:
                lim = self._still_step * max(tr.noise_mm(cfg.meas_sigma_mm), cfg.min_meas_sigma_mm)
                shift = np.subtract(tr.zs[k], tr.zs[k - 1])
                struck = math.hypot(*np.subtract(tr.zs[k - 1], tr.zs[k - 2])) <= lim < math.hypot(*shift)
            if struck:
                forbid = ~own_reads(tr, kind, tp, colour, clash) & (hyps[i] < 1)
            ident[forbid] = _INFEASIBLE
            # Velocity jump: anywhere a ball could reach from its previous position this frame
            # (a struck ball: from its last detection, in the time since).
            prev, dt_j = (np.asarray(tr.zs[k], float), pr["unseen_s"]) if struck else (pr["prev"], pr["dt"])
            dist = np.hypot(*(Z - prev).T)
            if struck:
                # ...and on along the line of its first shift: a ball runs straight from the
                # cue until a contact (Alciatore 2004); within 45 degrees, for the shift's own
                # noise and a swerve (a guess, not a measured figure).
                along = (Z - prev) @ shift / max(math.hypot(*shift), 1e-9)
                forbid = forbid | ((hyps[i] < 1) & (along < math.cos(math.pi / 4) * dist))
                ident[forbid] = _INFEASIBLE
            idents.append(ident)
            jumps.append((dist, dt_j, struck))
        # A detection inside another ball's gate and nearer to where that ball was than to
        # where this one was is the other ball's: this ball could reach it only through or
        # past the other (balls cannot pass through each other), so it is neither a jump nor a
        # prediction of this one. A gate that holds it on position alone counts, labels aside:
        # the other ball is there whatever the detector reads. On phone_wide_30fps with
        # chromadepth's rim colour (benchmarks/analyse_accuracy.py --extra --reuse): at frame
        # 223 a ball just touched at rest jumped 50 mm onto the detection of the ball that
        # touched it (8.5 mm from it, in its gate), whose doubtful read's colour matched the
        # resting ball's better; at frame 232 the cue ball, coasting 0.5 s after a cushion
        # with a prediction spread over 82 mm, took a resting ball's detection 250 mm from
        # its prediction and 6 mm from the resting ball.
        prevs = np.array([preds[tr.key]["prev"] for tr in group]).reshape(T, 2)
        dists = np.hypot(Z[None, :, 0] - prevs[:, None, 0], Z[None, :, 1] - prevs[:, None, 1])
        gated = hyps >= 0
        for i, tr in enumerate(group):
            pr = preds[tr.key]
            dist, dt_j, struck = jumps[i]
            reach = cfg.max_speed_mm_s * dt_j + 3.0 * (
                math.sqrt(np.trace(pr["prev_P"])) + sig)
            passed = np.any(gated & (dists < dists[i][None, :]), axis=0)
            cost[i, passed & gated[i]] = _INFEASIBLE
            hyps[i, passed & gated[i]] = _NO_HYP
            # Nearer is cheaper. On the likelihood scale of the predictions, a detection spread
            # evenly over the reach disk costs 2 ln(reach^2 / (2 meas_sigma^2)) (about 13, 16 and
            # 18 at 120, 60 and 30 fps), close to g: the same scale.
            cj = g + g * (dist / reach) ** 2
            # A turn needs a detection as sure as one that may start a track: a doubtful one
            # off the path (a pocket's dark mouth beside a ball dropping in) would turn the
            # ball's velocity there and the next detection turn it back. A rolling ball missed
            # in the last frame turns only on a sure one (`_sure_quality`): it turns only at a
            # contact, and what the detector finds beside a ball it is losing in dim light is as
            # likely a piece of it (extra clip lamp_50fps, automatic calibration: cue ball
            # frames 145 and 152, unseen three frames, a read black / solid, quality 0.39, one
            # radius beside it, turned it to 1.3 m/s and lost it: 2 id switches). A ball at rest
            # keeps the lower bar: a cue strike hides it in the strike frame and blurs it after
            # (sample multi_rail_30fps, frame 31: quality 0.43, 121 mm from where it rested).
            # So does a ball just struck from rest (above): its speed is not yet measured.
            moving = math.hypot(pr["x"][1], pr["x"][3]) > cfg.respot_rest_speed_mm_s and not struck
            sure = self._sure_quality([tr]) if tr.misses and moving else cfg.birth_min_quality
            ok = (dist <= reach) & (hyps[i] == _NO_HYP) & (quality >= sure) & ~passed
            # A ball at rest with a ball rolling at it, not yet there, has not been struck: it
            # cannot jump yet (`_awaits_striker`; asked only where a jump is open, as it looks
            # at every live track).
            if ok.any() and self._awaits_striker(tr, preds):
                ok[:] = False
            cost[i, ok] = cj[ok]
            hyps[i, ok] = _JUMP
            cost[i] += idents[i]
        # Square augmentation: leaving a track or a detection unassigned costs `miss` each, so a
        # feasible pair (at most 2 g, or g plus the width term, plus identity terms) is
        # preferred to leaving both while the width term stays under about g (a prediction
        # spread by some 300 mm per axis, only after a gap past `_reid_s`).
        miss = g + 1.0 + max(cfg.colour_cost, cfg.pattern_cost)
        big = np.full((T + D, T + D), _INFEASIBLE)
        big[:T, :D] = cost
        big[:T, D:] = np.where(np.eye(T) > 0, miss, _INFEASIBLE)
        big[T:, :D] = np.where(np.eye(D) > 0, miss, _INFEASIBLE)
        big[T:, D:] = 0.0
        rows, cols = linear_sum_assignment(big)
        return [(int(r), int(c), "jump" if hyps[r, c] == _JUMP else names[r][hyps[r, c]])
                for r, c in zip(rows, cols) if r < T and c < D and cost[r, c] < _INFEASIBLE / 2]

    def _awaits_striker(self, tr: _Track, preds: dict) -> bool:
        """Whether ``tr``, at rest (predicted speed below ``respot_rest_speed_mm_s``), has a ball
        rolling at it that has not reached it by this frame: another confirmed track seen in the
        last frame, at least that fast, whose straight course (its prediction's position and
        velocity, table mm and mm/s) passes within contact of ``tr``'s predicted centre ahead of
        it while that centre is still beyond contact now. Contact is a ball diameter (centres
        at contact) plus the gate, ``sqrt(chi2)`` times both predictions' largest position
        standard deviations combined. A rolling ball already within contact of any other ball
        does not count: the blow may reach ``tr`` through balls frozen to it (a break into a
        rack).

        Such a ball has not been struck yet, so it has not moved (Newton's first law), and no
        cue strikes it meanwhile (shooting while balls are in motion is a foul; common
        practice): a detection off its spot is the detector's error, not a velocity jump. On the
        extra clip uneven_60fps (automatic calibration) the red ball of a touching cluster, read
        22.7 mm off its spot toward the cue ball rolling at it at 3.2 m/s and 119 mm away (frame
        48), took that read as a jump to 1.36 m/s toward the cue ball; the cluster unseen in the
        next frame, its real departure was then judged against that false strike's direction
        (``struck`` in ``_assign``) and started a new track: 1 identity switch, collision
        recall 1 -> 0.2."""
        vmin = self.config.respot_rest_speed_mm_s
        pr = preds[tr.key]
        if math.hypot(pr["x"][1], pr["x"][3]) >= vmin:
            return False
        others = [o for o in self._live if o is not tr and o.key in preds]
        strikers = [o for o in others if o.confirmed and not o.misses
                    and math.hypot(preds[o.key]["x"][1], preds[o.key]["x"][3]) >= vmin]
        if not strikers:
            return False
        spread = {o.key: float(np.linalg.eigvalsh(preds[o.key]["P"][0::2, 0::2])[-1])
                  for o in others + [tr]}

        def contact(a: _Track, b: _Track) -> float:
            return self.table.ball_diameter_mm + math.sqrt(self._gate * (spread[a.key] + spread[b.key]))

        p = pr["x"][0::2]
        for o in strikers:
            po = preds[o.key]
            v = po["x"][1::2]
            speed = math.hypot(*v)
            rel = p - po["x"][0::2]
            ahead = float(rel @ v) / speed  # mm along its course to abreast of the ball
            aside = abs(float(rel[0] * v[1] - rel[1] * v[0])) / speed  # mm off its course
            if not (ahead > 0.0 and aside < contact(tr, o) < math.hypot(*rel)):
                continue
            # A ball it has met may pass the blow on through balls frozen to it (a break into
            # a rack: extra clip bright_pocket_1080p50, 6 identity switches without this).
            if not any(math.hypot(*(preds[q.key]["x"][0::2] - po["x"][0::2])) <= contact(o, q)
                       for q in others if q is not o):
                return True
        return False

    def _holds_spot(self, tr: _Track, frame: int) -> bool:
        """Whether ``tr``'s row of ``frame`` (x, y of its last state) bars a new track within a
        radius of it: a ball seen in that frame, or one lying still unseen, which needs both its
        filtered speed below ``rest_speed_mm_s`` and its reads to show it at rest (a tentative
        track, whose reads are too few to, or a confirmed one with its ``rest_spot``). A slow
        filtered speed alone is no rest: a restart on two reads a millimetre apart (the
        detector's error moving, ``_update``) leaves a ball still rolling at 100 mm/s coasting at
        37 mm/s, and holding its own continuation off for ``coast_s`` then gave it a new id
        (cheapwide_25fps of ``benchmarks/analyse_accuracy.py --extra``, the 14 stripe, frames
        185-197)."""
        if tr.frames[-1] != frame:
            return False
        if tr.seen[-1]:
            return True
        slow = math.hypot(tr.xs[-1][1], tr.xs[-1][3]) < self.config.rest_speed_mm_s
        return slow and (not tr.confirmed or tr.rest_spot is not None)

    def _resting_at(self, tr: _Track) -> np.ndarray | None:
        """Where ``tr``, seen in the last frame and missed in this one, rests: its rest spot
        (:meth:`_rest_spot`, (2,) mm) when its filtered speed is also below
        ``respot_rest_speed_mm_s`` (the tracker's scale of a ball at rest), else None."""
        if float(np.hypot(tr.x[1], tr.x[3])) >= self.config.respot_rest_speed_mm_s:
            return None
        return self._rest_spot(tr)

    def _touch_rest_spots(self, live: list[_Track], preds: dict) -> None:
        """Forget the rest spot of every hidden ball that something moving may have touched
        over the interval up to this frame, ``live`` tracks' states already updated to it
        (their priors, before the update, in ``preds``).

        A ball at rest stays put until something strikes it (Newton's first law). A moving
        track (speed at least ``respot_rest_speed_mm_s`` before or after the interval) may
        have struck it if its course, the segment from its state before the interval to its
        state now, passes within a diameter of the spot (centres a diameter apart at contact)
        plus its gate, ``sqrt(chi2)`` times its largest position standard deviation now (a
        track coasting on a velocity it barely knows reaches far: the ball may then have been
        knocked away), heading toward the spot. Tracks at rest do not count (a ball frozen
        against another is not struck by it), nor one moving away (the ball that has just
        struck it and leaves: that contact came before the ball was last seen at rest). The
        course is judged on the state after this frame's detection, as the prediction of a
        ball whose velocity was just restarted spreads over a ball's width or more."""
        spots = [tr for tr in live if tr.rest_spot is not None]
        if not spots:
            return
        vmin = self.config.respot_rest_speed_mm_s
        reach = []
        for o in live:
            pr = preds[o.key]
            if max(math.hypot(pr["x"][1], pr["x"][3]), math.hypot(o.x[1], o.x[3])) < vmin:
                continue
            sd = math.sqrt(float(np.linalg.eigvalsh(o.P[0::2, 0::2])[-1]))
            reach.append((o, pr["prev"], o.x[0::2],
                          self.table.ball_diameter_mm + math.sqrt(self._gate) * sd))
        for tr in spots:
            if any(o is not tr and np.dot(tr.rest_spot - a, b - a) > 0.0
                   and _segment_distance(tr.rest_spot, a, b) <= r for o, a, b, r in reach):
                tr.rest_spot = None

    def _claim_rest_spots(self, group: list[_Track], Z: np.ndarray,
                          quality: np.ndarray) -> list[tuple[int, int, str]]:
        """Balls hidden at rest and untouched (``group``, each with its ``rest_spot``) take the
        detections Z (D, 2) mm seen within a radius of their spots: (track index, detection
        index, ``rest``) triples, nearest first (Hungarian method on the distance).

        Two balls cannot lie closer than a diameter (centres), so what is seen within a radius
        of where a ball rests, nothing having touched it, is that ball, whatever its labels
        read (the test :meth:`_rested_here` makes of a new track); a moving ball's prediction,
        spread wide while it coasts unseen, must not take it (it could reach there only
        through the resting ball). The detection must be sure enough to start a track
        (``birth_min_quality``), as a new track there would have to be."""
        T, D = len(group), len(Z)
        dist = np.array([np.hypot(*(Z - tr.rest_spot).T) for tr in group]).reshape(T, D)
        ok = (dist <= self.table.radius_mm) & (quality >= self.config.birth_min_quality)[None, :]
        if not ok.any():
            return []
        cost = np.where(ok, dist, _INFEASIBLE)
        rows, cols = linear_sum_assignment(cost)
        return [(int(r), int(c), "rest") for r, c in zip(rows, cols) if ok[r, c]]

    def _restart_velocity(self, tr: _Track, pred: dict, z: np.ndarray, R: np.ndarray) -> None:
        """Position from the detection, velocity from the last two positions, wide velocity
        prior: the velocity changed at an unknown instant of the last interval."""
        dt = max(pred["dt"], 1e-9)
        v = (z - pred["prev"]) / dt  # finite difference; later frames refine it
        tr.x, tr.P = _restarted(z, v, R[0, 0], self.config.initial_speed_sigma_mm_s)

    def _update(self, tr: _Track, pred: dict, hyp: str, z, sigma, frame, t) -> None:
        stated = float(sigma)
        scatter = tr.noise_mm(self.config.meas_sigma_mm)
        sigma = max(scatter, self.config.min_meas_sigma_mm) if scatter > 0 else stated
        R = sigma**2 * np.eye(2)
        z = np.asarray(z, dtype=float)
        brk = False
        # Seen again where it rested, by the rest stage or in its resting gate (`_predict`).
        at_rest = tr.rest_spot is not None and hyp in ("rest", "predict")
        if (pred["unseen_s"] > self._reid_s
                and math.hypot(z[0] - pred["x"][0], z[1] - pred["x"][2]) > self.table.ball_diameter_mm):
            # Found again by its labels after a long gap (``_assign``) and not where it would
            # have rolled to (lifted and put down elsewhere): a difference or an update from
            # where it was coasted to would give it a speed it never had. It starts again
            # where it is seen, its velocity unknown, as a new track does. A ball seen again
            # near its prediction (out from under a cue) keeps the filter's velocity.
            tr.x, tr.P = _restarted(z, np.zeros(2), R[0, 0], self.config.initial_speed_sigma_mm_s)
            brk = True
        elif at_rest:
            # Seen again where it rested (`_claim_rest_spots`): it has lain still all along, so
            # its prior is the state it was last seen in (`_predict`). A detection beyond that
            # state's maneuver gate is the detector's error moving (a shadow, or a blur beside
            # it while it was hidden), not the ball: the position starts again there and the
            # velocity stays what it was, rather than take the offset for a speed it never had.
            x, P = pred["x"], pred["P"]
            if float(_mahalanobis2(z[None], x[0::2], P[0::2, 0::2], np.array([sigma]))[0]) \
                    <= self._maneuver:
                tr.x, tr.P = _kalman_update(tr.kf, x, P, z, R)
            else:
                tr.x, tr.P = _moved_to(x, P, z, R[0, 0])
                brk = True
        elif hyp == "jump":
            self._restart_velocity(tr, pred, z, R)
            brk = True
        else:
            if hyp.startswith("bounce:"):
                rail = hyp.split(":", 1)[1]
                _, x, P = next(b for b in pred["bounces"] if b[0] == rail)
                brk = True
            else:
                x, P = pred["x"], pred["P"]
                d2 = float(_mahalanobis2(z[None], x[0::2], P[0::2, 0::2], np.array([sigma]))[0])
                brk = d2 > self._maneuver and len(tr.frames) > 0
            if brk and hyp == "predict":
                self._restart_velocity(tr, pred, z, R)
            else:
                tr.x, tr.P = _kalman_update(tr.kf, x, P, z, R)
        # The restart of a ball seen again where it rested is the detector's, not a turn of
        # the ball's course: the hand test (`_course_breaks`) must not count it.
        odd = self._stated_update(tr, pred, z, stated, brk) and not at_rest
        # One detection off the cushion places the ball but does not measure its new velocity;
        # two in a row do, and from then on the ball is followed, not lost at the contact.
        if tr.misses == 0:
            tr.turned_unseen = False
        tr.record(frame, t, pred["F"], pred["Q"], True, brk, (z[0], z[1]), odd)
        tr.note_scatter(self.config.noise_window)

    def _stated_update(self, tr: _Track, pred: dict, z: np.ndarray, stated: float,
                       brk: bool) -> bool:
        """Step the track's filter on the detector's stated noise (``_Track.sx``) to the
        detection ``z`` (2,) mm of noise ``stated`` mm and say whether it restarts there.

        After a restart of the track's own filter (``brk``) it starts again from that filter's
        state (and says so);
        else it predicts, and restarts where the innovation lies beyond the maneuver gate
        (``maneuver_prob``) of the stated noise, as the track's own filter did when it took the
        detector at its word. A hand's erratic course raises the scatter the track's own
        filter measures (``_Track.noise_mm``) until it no longer restarts; judged at the stated
        noise it still does, as no ball's course does."""
        if brk:
            tr.sx, tr.sP = tr.x.copy(), tr.P.copy()
            return True
        F, Q = pred["F"], pred["Q"]
        x = F @ tr.sx  # x_pred = F x
        P = F @ tr.sP @ F.T + Q  # P_pred = F P F^T + Q
        r2 = stated * stated
        d2 = float(_mahalanobis2(z[None], x[0::2], P[0::2, 0::2], np.array([stated]))[0])
        if d2 > self._maneuver:
            v = (z - tr.sx[0::2]) / max(pred["dt"], 1e-9)
            tr.sx, tr.sP = _restarted(z, v, r2, self.config.initial_speed_sigma_mm_s)
            return True
        tr.sx, tr.sP = _kalman_update(tr.kf, x, P, z, r2 * np.eye(2))
        return False

    def _coast(self, tr: _Track, pred: dict, frame, t) -> None:
        x, P = pred["x"], pred["P"]
        if pred["bounces"]:  # an unseen ball still turns at the cushion
            _, x, P = pred["bounces"][0]
            tr.sx, tr.sP = x.copy(), P.copy()
            tr.turned_unseen = True
        else:
            F, Q = pred["F"], pred["Q"]
            tr.sx, tr.sP = F @ tr.sx, F @ tr.sP @ F.T + Q
        tr.x, tr.P = x.copy(), P.copy()
        tr.record(frame, t, pred["F"], pred["Q"], False, bool(pred["bounces"]),
                  (math.nan, math.nan))

    def _maybe_end(self, tr: _Track, t: float) -> None:
        cfg = self.config
        if not tr.confirmed:
            since_birth = (self._frame or 0) - tr.birth_frame + 1
            if tr.misses >= cfg.tentative_max_misses or since_birth >= cfg.confirm_window:
                tr.ended = "dropped"
            return
        if t - tr.last_seen_t > cfg.coast_s:
            self._end(tr)

    def _end(self, tr: _Track) -> None:
        """End a confirmed track at its last detection: ``pocket`` if last seen near a pocket
        mouth, else ``lifted``."""
        tr.trim_unseen_tail()
        last = np.array([tr.xs[-1][0], tr.xs[-1][2]])
        near = min(_segment_distance(last, p.jaw_a, p.jaw_b) for p in self.table.pockets())
        tr.ended = "pocket" if near <= self.config.pocket_reach_mm else "lifted"
        log.debug("track %s ended (%s) at t = %.3f s", tr.track_id, tr.ended, tr.times[-1])

    def _birth(self, z, sigma, colour, pattern, quality, frame, t) -> None:
        cfg = self.config
        dt_nominal = 1.0 / 60.0  # replaced by the true interval at every predict
        kf = make_ball_filter(dt_nominal, float(sigma), cfg.accel_sigma_mm_s2,
                              xy0_mm=(float(z[0]), float(z[1])),
                              speed_sigma_mm_s=cfg.initial_speed_sigma_mm_s)
        tr = _Track(self._next_key, kf, frame, t)
        self._next_key += 1
        tr.hits = 1
        tr.take_read(colour, pattern, quality)
        tr.record(frame, t, _EYE4, _ZERO4, True, True, (float(z[0]), float(z[1])))
        self._tracks.append(tr)
        self._live.append(tr)
        if cfg.confirm_hits <= 1:
            self._confirm(tr, frame)

    def _confirm(self, tr: _Track, frame: int) -> None:
        """Give a newly confirmed track its id: the id of the ball it was, when it is a ball
        put back by hand (``_respotted``), else the next new id."""
        donor = self._respotted(tr, frame)
        if donor is None:
            tr.track_id = self._next_id
            self._next_id += 1
            return
        tr.track_id = donor
        # The same ball cannot also be coasting where it was: end those tracks now, at their
        # last detection, so the two pieces of the id never share a frame.
        for old in self._tracks:
            if old is not tr and old.track_id == donor and old.ended is None:
                self._end(old)
        log.debug("track %s taken back at frame %s (ball put down by hand)", donor, frame)

    def _respotted(self, tr: _Track, frame: int) -> int | None:
        """The id a new track ``tr`` takes back, or None for a new ball.

        Between shots a player lifts balls and puts them down elsewhere, or takes a pocketed ball
        out and spots it: the ball is the same, so its id must be too (a track is one ball for the
        whole clip, ``shared/spec/results-format.md``). A new track qualifies when it is confirmed
        at rest (filtered speed below ``respot_rest_speed_mm_s``) by detections whose labels the
        detector is sure of (quality at least ``_sure_quality`` of the ball it would be, the test a
        ball found again after a long gap passes in ``_assign``), while every ball seen in this
        frame rests too; tracks younger than ``respot_settle_s`` do not count as balls here (the
        hand and arm that place a ball come and go as short false tracks), and a new cue ball need
        only rest itself (there is one cue ball). The candidates are ids whose tracks have all ended
        (lifted or pocketed) or are coasting unseen, last seen before ``tr`` was born, with ``tr``'s
        identity labels. The cue ball is one ball, so a cue ball takes the first cue-ball id among
        them, else the one id off the table that is white by its sure labels (``_white``); a
        ball read neither cue nor object but white or colourless (``_white``) takes the one
        cue-ball or white id off the table, when exactly one exists. An object ball must carry
        the same pattern (solid or stripe) and the same known colour, and takes the id only when
        exactly one candidate remains (the labels then say which ball it is); else it is a new
        ball. Before all that, a new track resting where a ball was
        last seen resting is that ball (:meth:`_rested_here`), labels and other balls aside.
        """
        vmax = self.config.respot_rest_speed_mm_s
        kind = tr.kind()
        colour = tr.label(tr.colours, "")
        pattern = tr.label(tr.patterns, "unknown")
        if float(np.hypot(tr.x[1], tr.x[3])) >= vmax:
            return None
        here = self._rested_here(tr, frame)
        if here is not None:
            return here
        # A ball read neither cue nor object, but white or colourless in most of its
        # detections, may be the cue ball in light too dim to name it (``_white``).
        white = kind == "cue" or (kind == "unknown" and self._white([tr], 0.0))
        if (kind == "unknown" and not white) or \
                (kind == "object" and (not colour or pattern == "unknown")):
            return None
        held: set[int] = set()
        ids: dict[int, list[_Track]] = {}
        for old in self._tracks:
            if old is tr or not old.confirmed or not old.frames:
                continue
            seen_now = old.ended is None and old.frames[-1] == frame and old.seen[-1]
            if seen_now:
                settled = old.times[-1] - old.times[0] >= self.config.respot_settle_s
                # A shot is running: not a ball put down between shots. The cue ball is
                # exempt: there is one, so a resting cue ball is it whatever else moves
                # (hands and arms make long false tracks while the player sets it down).
                if kind != "cue" and settled and \
                        float(np.hypot(old.x[1], old.x[3])) >= vmax:
                    return None
                held.add(old.track_id)
            ids.setdefault(old.track_id, []).append(old)
        cands, pale = [], []
        for tid, olds in ids.items():
            if tid in held:
                continue
            if max(o.last_seen_frame for o in olds) >= tr.birth_frame:
                continue
            ref = olds[-1]
            if white:
                ok = ref.kind() == "cue"
                if not ok and self._white(olds, self._sure_quality(olds)):
                    pale.append(tid)
            else:
                ok = (ref.kind() == "object" and ref.label(ref.patterns, "unknown") == pattern
                      and ref.label(ref.colours, "") == colour)
            if ok:
                cands.append(tid)
        if kind == "cue":
            # Any earlier cue-ball id is this ball; else the one white ball off the table.
            donor = min(cands) if cands else pale[0] if len(pale) == 1 else \
                self._unread_cue(ids, held, tr.birth_frame)
        elif white:
            # Read colourless only, it is the cue ball when exactly one white ball is off the
            # table (a colourless read may also be a stripe turned band-down: so no guess
            # between two).
            both = cands + pale
            donor = both[0] if len(both) == 1 else None
        else:
            donor = cands[0] if len(cands) == 1 else None
        # Labels name a ball only when the detector is as sure of them as it was of that ball,
        # the test a ball found again after a long gap passes (`_assign`): the hand that puts
        # a ball down is seen beside it, labelled at random and with doubt.
        if donor is None or min(tr.qualities) < self._sure_quality(ids[donor]):
            return None
        return donor

    @staticmethod
    def _white(pieces: list[_Track], min_quality: float) -> bool:
        """Whether the ball whose track pieces are ``pieces`` is white by its labels: more of
        its detections at quality at least ``min_quality`` read white or colourless
        (``_pale_read``) than read anything else.

        The majority, as a track's labels are its majority labels (``_Track.label``): the cue
        ball in a one-lamp room is read colourless in most sure detections and, now and then,
        solid black or stripe where its shaded limb fills the disc (lamp_50fps of
        ``benchmarks/analyse_accuracy.py --extra``: 107 of its 111 sure detections pale, so
        ``_Track.kind`` calls it an object ball on 25 doubtful reads), while an object ball read
        colourless only moving (a blur capsule is not labelled) names its colour at rest
        (the orange stripe there: 3 of 207 pale)."""
        n_pale = n_other = 0
        for o in pieces:
            for q, read in zip(o.qualities, o.reads):
                if q >= min_quality:
                    p = _pale_read(*read)
                    n_pale += p
                    n_other += not p
        return n_pale > n_other

    @staticmethod
    def _unread_cue(ids: dict[int, list[_Track]], held: set[int], birth_frame: int) -> int | None:
        """The id a cue ball put down takes when no earlier id was ever read as the cue ball:
        the one id (``ids``: id -> its track pieces) not seen now (``held``), last seen before
        ``birth_frame``, none of whose detections was read as an object ball (solid or stripe)
        or as any colour but white, when exactly one such id exists; else None. There is one
        cue ball, and a white ball the detector could not name (in dim light, its labels read
        ``unknown`` all along) was it if no ball was ever named so."""
        if any(o.kind() == "cue" for olds in ids.values() for o in olds):
            return None
        cands = []
        for tid, olds in ids.items():
            if tid in held:
                continue
            if max(o.last_seen_frame for o in olds) >= birth_frame:
                continue
            if any(o.patterns.get("solid", 0) + o.patterns.get("stripe", 0) > 0
                   or any(c not in ("", "white") and n > 0 for c, n in o.colours.items())
                   for o in olds):
                continue
            cands.append(tid)
        return cands[0] if len(cands) == 1 else None

    def _rested_here(self, tr: _Track, frame: int) -> int | None:
        """The id of the ball that was last seen resting where the new track ``tr`` rests, or
        None.

        A ball at rest stays where it is until something strikes it (Newton's first law; on
        cloth it then runs on, decelerating, never to the same spot by chance), and two balls
        cannot lie closer than a diameter apart. So a ball hidden for a while (under an arm or
        the cue, in a dark corner, its detections too doubtful to keep its track alive) and
        seen again resting within a radius of where it rested is that ball, whatever its labels
        read now (a dim ball's colour and pattern labels wander) and whatever else is moving:
        position identifies it, as labels do after a lift (Wojke et al. 2017). Candidates are
        ids not seen in this frame, last seen before ``tr`` was born, whose last detections
        rested (:meth:`_rest_spot`) within a radius of ``tr``'s, of no other kind (cue or
        object, when both are known); the most recently seen one is taken.
        """
        spot = self._rest_spot(tr)
        if spot is None:
            return None
        kind = tr.kind()
        best, best_seen = None, -1
        held = {o.track_id for o in self._tracks if o is not tr and o.confirmed and o.ended is None
                and o.frames and o.frames[-1] == frame and o.seen[-1]}
        for old in self._tracks:
            if old is tr or not old.confirmed or old.track_id in held or not any(old.seen):
                continue
            last = old.last_seen_frame
            if last >= tr.birth_frame or last <= best_seen:
                continue
            there = self._rest_spot(old)
            if there is None or math.hypot(*(there - spot)) > self.table.radius_mm:
                continue
            if "unknown" not in (kind, old.kind()) and kind != old.kind():
                continue
            best, best_seen = old.track_id, last
        return best

    def _rest_spot(self, tr: _Track, n: int = 5) -> np.ndarray | None:
        """Where ``tr`` rested when last seen: the median (2,) mm of its last ``n`` detections
        when they are at least 3 and all lie within a quarter radius of it (a ball at rest, or
        all but stopped: rolling at 50 mm/s it has under 13 mm to go, v^2 / (2 mu_r g) with
        Alciatore's mu_r of 0.01), else None."""
        z = np.array([zz for zz, s in zip(tr.zs, tr.seen) if s][-n:], dtype=float).reshape(-1, 2)
        if len(z) < 3:
            return None
        mid = np.median(z, axis=0)
        if np.max(np.hypot(*(z - mid).T)) > 0.25 * self.table.radius_mm:
            return None
        return mid

    def _sure_quality(self, pieces: list[_Track]) -> float:
        """Detector quality at which a detection's labels name the ball whose track pieces are
        ``pieces``: ``label_min_quality``, or the lower quartile of the quality of that ball's
        own detections where lower (a ball the detector only ever sees with doubt, in dim
        light or on a cloth of its colour, is known again by detections like its own)."""
        q = np.concatenate([np.asarray(o.qualities, dtype=float) for o in pieces])
        return min(self.config.label_min_quality, float(np.percentile(q, 25)))

    def _sure_labels(self, pieces: dict[int, list[_Track]]) -> dict[int, tuple[str, str, str]]:
        """The ``ball`` (``cue``/``object``), ``colour`` and ``pattern`` of the results format
        for each ball, {output id: its track pieces} -> {output id: labels}, from each ball's
        sure detections alone (quality at least ``_sure_quality``, the bar a detection's labels
        must pass to find the ball again after a gap or to take back its id when it is put
        down; at most the lower quartile of the ball's own qualities, so three quarters count).

        A doubtful detection's labels are not the ball's: the cue ball in a one-lamp room is
        read solid black where its shaded limb fills the disc at quality 0.36 or so
        (lamp_50fps of ``benchmarks/analyse_accuracy.py --extra --reuse``: 21 of its 29
        doubtful reads), and counting every read named it an object ball. Its sure reads are
        183 colourless, 4 solid black and 2 cue of 190, still an object ball by count; so where
        no ball's sure reads name the cue ball, the one ball whose sure reads are mostly white
        or colourless (``_white``) and read the cue ball at least once is it (there is one cue
        ball). A colourless read alone does not make the cue ball: a stripe in dim light reads
        colourless all along (dim_540p_60fps: 669 of 669). A ball named neither is an object
        ball, as the format has no third value."""
        sure: dict[int, tuple[Counter, Counter]] = {}
        for tid, ps in pieces.items():
            bar = self._sure_quality(ps)
            colours: Counter = Counter()
            patterns: Counter = Counter()
            for o in ps:
                for (c, p), q in zip(o.reads, o.qualities):
                    if q >= bar:
                        colours[c] += 1
                        patterns[p] += 1
            sure[tid] = (colours, patterns)
        kinds = {tid: _kind_of(pat) for tid, (_, pat) in sure.items()}
        if "cue" not in kinds.values():
            pale = [tid for tid, (col, pat) in sure.items()
                    if (col["white"] or pat["cue"])
                    and self._white(pieces[tid], self._sure_quality(pieces[tid]))]
            if len(pale) == 1:
                kinds[pale[0]] = "cue"
        # The cue ball's colour and pattern are white and cue, whatever its shaded reads named.
        return {tid: ("cue", "white", "cue") if kinds[tid] == "cue" else
                ("object", _majority(col, ""), _majority(pat, "unknown"))
                for tid, (col, pat) in sure.items()}

    def _smooth(self, tr: _Track) -> np.ndarray:
        """RTS-smoothed states (N, 4) of ``tr``, run separately between breakpoints."""
        xs = np.array(tr.xs)
        Ps = np.array(tr.Ps)
        Fs = np.array(tr.Fs)
        Qs = np.array(tr.Qs)
        starts = [k for k, b in enumerate(tr.breaks) if b or k == 0] + [len(xs)]
        out = np.empty_like(xs)
        for a, b in zip(starts[:-1], starts[1:]):
            out[a:b], _ = rts_smooth(xs[a:b], Ps[a:b], Fs[a:b], Qs[a:b])
        self._struck_from_rest(tr, out)
        return out

    def _struck_from_rest(self, tr: _Track, xs: np.ndarray) -> None:
        """Re-estimate, in place in the smoothed states ``xs`` (N, 4) of ``tr``, the frames a
        ball at rest went unseen before it was found again moving, its velocity restarted
        there (a break): struck from rest (a cue's strike, or a moving ball's), lost in the
        frames of the strike (the cue beside it, its first streak) and coasted on its spot
        meanwhile, so those rows lay where it no longer was.

        A struck ball leaves its spot at once at about the speed it is found with: its speed
        falls by the sliding friction's deceleration, mu g = 0.2 x 9.81 m/s^2 (DEVELOPERS.md's
        cloth figure), about 0.2 m/s over the 0.1 s of a few lost frames, a few per cent of a
        strike's metres per second, and its path is straight until its first contact (common
        practice). So the rows run back from the first sighting along the line to the rest
        spot at the found speed; the strike is where that line meets the spot, and the rows
        before it keep the spot (at rest). Taken for such a strike: a gap ended by a break
        whose found speed exceeds ``respot_rest_speed_mm_s`` (the events' move-speed scale)
        and ``_STRIKE_GAIN`` times the speed at the last sighting (which may hold the strike's
        first millimetres already: 83 mm/s on lamp_50fps's break, 220 mm/s in
        tests/test_tracker.py), heading within ``_STRIKE_AIM_DEG`` of the line from that
        sighting (a straight run from the spot; a ball turned by a contact in the gap heads
        elsewhere). Other gaps keep the coasting."""
        seen, brk, times = tr.seen, tr.breaks, tr.times
        rest = self.config.respot_rest_speed_mm_s
        aim = math.cos(math.radians(_STRIKE_AIM_DEG))
        for k in range(1, len(xs)):
            if not (brk[k] and seen[k]) or seen[k - 1]:
                continue
            j = k - 1
            while j >= 0 and not seen[j]:
                j -= 1
            if j < 0:
                continue
            p0, p1 = xs[j, [0, 2]], xs[k, [0, 2]]
            speed = math.hypot(xs[k, 1], xs[k, 3])
            d = float(np.hypot(*(p1 - p0)))
            if speed < max(rest, _STRIKE_GAIN * math.hypot(xs[j, 1], xs[j, 3])) or d <= 0.0:
                continue
            u = (p1 - p0) / d
            if (xs[k, 1] * u[0] + xs[k, 3] * u[1]) < aim * speed:
                continue
            # No earlier than the last sighting at rest: a slower ball than its found speed
            # says (one that slowed in between) left then.
            t_strike = max(times[k] - d / speed, times[j])
            speed = d / (times[k] - t_strike)
            for m in range(j + 1, k):
                if times[m] <= t_strike:
                    xs[m] = (p0[0], 0.0, p0[1], 0.0)
                else:
                    p = p0 + u * speed * (times[m] - t_strike)
                    xs[m] = (p[0], u[0] * speed, p[1], u[1] * speed)

    # Tracks are also reachable for tests and callers that want the raw forward estimates.
    def filtered(self) -> pd.DataFrame:
        """Forward-filter estimates (no smoothing): columns ``frame, t, track, x, y, vx, vy,
        seen, brk`` for confirmed tracks (``brk`` marks velocity breakpoints)."""
        rows = []
        for tr in self._tracks:
            if not tr.confirmed or not tr.frames:
                continue
            xs = np.array(tr.xs)
            rows.append(pd.DataFrame({
                "frame": np.asarray(tr.frames, dtype=np.int64), "t": tr.times,
                "track": tr.track_id, "x": xs[:, 0], "y": xs[:, 2], "vx": xs[:, 1],
                "vy": xs[:, 3], "seen": np.asarray(tr.seen, dtype=np.int64),
                "brk": np.asarray(tr.breaks, dtype=bool)}))
        if not rows:
            return pd.DataFrame({c: pd.Series(dtype=d) for c, d in [
                ("frame", "int64"), ("t", "float64"), ("track", "int64"), ("x", "float64"),
                ("y", "float64"), ("vx", "float64"), ("vy", "float64"), ("seen", "int64"),
                ("brk", "bool")]})
        return pd.concat(rows, ignore_index=True).sort_values(["frame", "track"]).reset_index(
            drop=True)


def _restarted(z: np.ndarray, v: np.ndarray, r_var: float, min_speed_sigma: float) -> tuple[np.ndarray, np.ndarray]:
    """A filter state started again at the position ``z`` (2,) mm of variance ``r_var`` mm^2 per
    axis with the velocity ``v`` (2,) mm/s, whose spread is at least ``min_speed_sigma`` mm/s
    and at least the speed itself (it changed at an unknown instant): ``x`` (4,) [x, vx, y, vy]
    and ``P`` (4, 4)."""
    sv = max(min_speed_sigma, float(np.hypot(*v)))
    return np.array([z[0], v[0], z[1], v[1]]), np.diag([r_var, sv**2, r_var, sv**2])


def _moved_to(x: np.ndarray, P: np.ndarray, z: np.ndarray,
              r_var: float) -> tuple[np.ndarray, np.ndarray]:
    """The state ``x`` (4,) [x, vx, y, vy], covariance ``P`` (4, 4), with its position moved
    to ``z`` (2,) mm of variance ``r_var`` mm^2 per axis and its velocity kept, no longer
    correlated with the position."""
    x = x.copy()
    x[0::2] = z
    P = P.copy()
    P[0::2, :] = 0.0
    P[:, 0::2] = 0.0
    P[0, 0] = P[2, 2] = r_var
    return x, P


def _kalman_update(kf, x: np.ndarray, P: np.ndarray, z: np.ndarray,
                   R: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Kalman measurement update of the prior ``x`` (4,), ``P`` (4, 4) by a position ``z`` (2,)
    mm with noise ``R`` (2, 2), made by the ball's own filterpy ``KalmanFilter`` ``kf``
    (Joseph form of the covariance, which stays symmetric and positive definite; Bar-Shalom et
    al. 2001 sec. 5.2.3). The prior comes from the tracker's own predict, which chooses between
    rolling on and a cushion bounce, so it is set on the filter before the update."""
    kf.x = x.reshape(4, 1)
    kf.P = P
    # z given as the column and H passed: filterpy then skips its reshape of z. Its update
    # binds new arrays to x and P (nothing is changed in place), so they are returned as they
    # are, not copied again.
    kf.update(z.reshape(2, 1), R=R, H=kf.H)
    return kf.x.reshape(4), kf.P


def _mahalanobis2(Z: np.ndarray, mean: np.ndarray, Ppos: np.ndarray, sig: np.ndarray) -> np.ndarray:
    """Squared Mahalanobis distances (D,) of detections Z (D, 2) from a predicted position.

    ``S_j = H P H^T + sigma_j^2 I``; ``d2 = y^T S^-1 y`` with the closed-form 2x2 inverse.
    """
    y = Z - mean
    a = Ppos[0, 0] + sig**2
    d = Ppos[1, 1] + sig**2
    b = Ppos[0, 1]
    det = a * d - b * b
    return (d * y[:, 0] ** 2 - 2 * b * y[:, 0] * y[:, 1] + a * y[:, 1] ** 2) / det


def _innovation_nll(Z: np.ndarray, mean: np.ndarray, Ppos: np.ndarray, sig: np.ndarray,
                    ref_sigma: float) -> tuple[np.ndarray, np.ndarray]:
    """Twice the negative log-likelihood of detections Z (D, 2) mm under a predicted position
    ``mean`` (2,) mm of covariance ``Ppos`` (2, 2) mm^2, as ``(d2, width)`` arrays (D,).

    ``-2 ln N(y; 0, S) = y^T S^-1 y + ln|S| + 2 ln(2 pi)`` with ``S_j = Ppos + sigma_j^2 I``
    (the assignment cost of Bar-Shalom & Fortmann 1988, "Tracking and Data Association", and
    Blackman & Popoli 1999: a wide prediction fits any detection loosely, so it is charged
    ``ln|S|``). ``d2`` is the squared Mahalanobis distance (what the chi-square gate tests);
    ``width = ln(|S| / ref_sigma^4)``: the constant taken out, one reference ``S`` of
    ``ref_sigma`` (mm) per axis, is the same for every pair, so it moves no choice between
    pairs, only their balance against leaving a track or detection unassigned. With
    ``ref_sigma`` a moving ball's detection noise (``meas_sigma_mm``, 2 mm) a ball followed
    frame by frame pays little: -2.3 at rest (prediction 0.5 mm, detection 1 mm per axis), +2.4
    moving (2 and 3 mm), against 10 for a prediction spread 25 mm (a restarted velocity).
    """
    s2 = sig**2
    det = (Ppos[0, 0] + s2) * (Ppos[1, 1] + s2) - Ppos[0, 1] ** 2
    return _mahalanobis2(Z, mean, Ppos, sig), np.log(det / ref_sigma**4)


def _kind_of(patterns: Counter) -> str:
    """``cue``, ``object`` or ``unknown`` from a count of pattern labels: the kind read at least
    twice and more often than the other."""
    cue = patterns.get("cue", 0)
    obj = patterns.get("solid", 0) + patterns.get("stripe", 0)
    if cue >= 2 and cue > obj:
        return "cue"
    if obj >= 2 and obj > cue:
        return "object"
    return "unknown"


def _majority(counter: Counter, unknown: str) -> str:
    """The most frequent label of ``counter`` other than "" and ``unknown`` (ties by name), else
    ``unknown``."""
    known = [(n, lab) for lab, n in counter.items() if lab not in ("", "unknown")]
    if not known:
        return unknown
    known.sort(key=lambda p: (-p[0], p[1]))
    return known[0][1]


def _pale_read(colour: str, pattern: str) -> bool:
    """Whether a detection's labels read a white ball: ``white``/``cue``, or no colour and no
    pattern at all (``vision.detect``'s identity finds no coloured pixels on a white ball
    shaded toward its limb in dim or one-sided light, and reads it so)."""
    return colour in ("", "white") and pattern in ("cue", "unknown")


def _segment_distance(p: np.ndarray, a, b) -> float:
    """Distance (mm) from point p (2,) to the segment a-b."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    ab = b - a
    s = np.clip(np.dot(p - a, ab) / np.dot(ab, ab), 0.0, 1.0)
    return float(np.hypot(*(p - (a + s * ab))))


def _checked(detections: pd.DataFrame, config: TrackerConfig) -> pd.DataFrame:
    """A validated copy of ``detections`` with every optional column filled in."""
    if not isinstance(detections, pd.DataFrame):
        raise ValueError(f"detections must be a pandas DataFrame, got {type(detections).__name__}")
    missing = [c for c in REQUIRED_COLUMNS if c not in detections.columns]
    if missing:
        raise ValueError(f"detections lack column(s) {', '.join(missing)}; the detector must give "
                         f"at least {', '.join(REQUIRED_COLUMNS)} (frame, s, mm)")
    det = detections.copy()
    n = len(det)
    # Missing or NaN noise and quality fall back to the configured noise and full confidence.
    for col, fill in (("sigma_mm", config.meas_sigma_mm), ("quality", 1.0)):
        det[col] = det[col].astype(float).fillna(fill) if col in det else fill
    for col, fill in (("colour", ""), ("pattern", "unknown")):
        if col not in det:
            det[col] = [fill] * n
        else:
            det[col] = [fill if (v is None or (isinstance(v, float) and math.isnan(v))) else str(v)
                        for v in det[col]]
    if n:
        num = det[["t", "x", "y", "sigma_mm"]].to_numpy(float)
        if not np.all(np.isfinite(num)):
            raise ValueError("detections hold non-finite t, x, y or sigma_mm; drop those rows")
        if np.any(det["sigma_mm"].to_numpy(float) <= 0):
            raise ValueError("detections hold sigma_mm <= 0; give each position's std in mm (> 0)")
        bad = sorted(set(det["pattern"]) - set(PATTERNS))
        if bad:
            raise ValueError(f"unknown pattern label(s) {bad}; use one of {', '.join(PATTERNS)}")
    return det


def empty_tracks() -> pd.DataFrame:
    """A tracks DataFrame with no rows and the output columns and dtypes."""
    dtypes = {"frame": "int64", "t": "float64", "track": "int64", "ball": "str", "x": "float64",
              "y": "float64", "vx": "float64", "vy": "float64", "seen": "int64", "colour": "str",
              "pattern": "str", "x_meas": "float64", "y_meas": "float64"}
    return pd.DataFrame({c: pd.Series(dtype=d) for c, d in dtypes.items()})


def track(detections: pd.DataFrame, table: TableSpec,
          config: TrackerConfig | None = None) -> pd.DataFrame:
    """Track every ball of a clip: detections DataFrame -> tracks DataFrame.

    Columns in and out as in the module docstring. Frames missing from ``detections`` between its
    first and last frame are processed as frames without detections, their times interpolated
    linearly in frame index from the frames present. The input is not modified.
    """
    feed = TrackFeed(table, config)
    feed.add(detections)
    return feed.result()


class TrackFeed:
    """:func:`track` on detections given in consecutive parts, each part's frames all after the
    last part's (a clip's detections as they come from its parts in time): ``add`` each part,
    then ``result``; the tracks are those :func:`track` gives the parts joined, to the bit.

    Each part's frames are stepped through the tracker at once, except the frames without
    detections after its last one: their times are interpolated between the frames with
    detections either side (as :func:`track` does), so they wait for the next part's first."""

    def __init__(self, table: TableSpec, config: TrackerConfig | None = None):
        self.config = config or TrackerConfig()
        self.tracker = Tracker(self.config, table)
        self.last: tuple[int, float] | None = None  # (frame, t) of the last frame with detections stepped

    def add(self, detections: pd.DataFrame) -> None:
        """Step the tracker through the frames of ``detections`` (ValueError as :func:`track`,
        also for a frame not after the last part's)."""
        det = _checked(detections, self.config)
        if det.empty:
            return
        det["frame"] = det["frame"].astype(np.int64)
        det = det.sort_values(["frame"], kind="stable")
        per_frame = det.groupby("frame")["t"].agg(["first", "nunique"])
        if (per_frame["nunique"] > 1).any():
            bad = per_frame.index[per_frame["nunique"] > 1][0]
            raise ValueError(f"frame {bad} carries several times t; one frame has one presentation time")
        known_f = per_frame.index.to_numpy(np.int64)
        known_t = per_frame["first"].to_numpy(float)
        if self.last is not None:
            if known_f[0] <= self.last[0]:
                raise ValueError(f"frame {known_f[0]} comes after frame {self.last[0]}; give the parts in frame order")
            # The frames between the parts are interpolated between their two neighbours, as
            # np.interp does on the whole (each value from its own interval's end points).
            known_f = np.concatenate([[self.last[0]], known_f])
            known_t = np.concatenate([[self.last[1]], known_t])
        if np.any(np.diff(known_t) <= 0):
            raise ValueError("frame times t must increase with the frame index; check the timestamps")
        all_f = np.arange(known_f[0] if self.last is None else known_f[0] + 1, known_f[-1] + 1)
        all_t = np.interp(all_f, known_f, known_t)
        # Columns as arrays once, each frame a slice of them (frames are sorted, each frame's rows
        # in their input order).
        frames = det["frame"].to_numpy(np.int64)
        Z = det[["x", "y"]].to_numpy(float)
        sig = det["sigma_mm"].to_numpy(float)
        quality = det["quality"].to_numpy(float)
        colours = det["colour"].tolist()
        patterns = det["pattern"].tolist()
        lo = np.searchsorted(frames, all_f, "left")
        hi = np.searchsorted(frames, all_f, "right")
        t_det = det["t"].to_numpy(float)
        for f, t, a, b in zip(all_f.tolist(), all_t.tolist(), lo.tolist(), hi.tolist()):
            self.tracker._step(f, float(t_det[a]) if b > a else t, Z[a:b], sig[a:b], colours[a:b],
                               patterns[a:b], quality[a:b])
        self.last = (int(known_f[-1]), float(known_t[-1]))

    def result(self) -> pd.DataFrame:
        """The tracks DataFrame of every part added (:meth:`Tracker.result`)."""
        return self.tracker.result()
