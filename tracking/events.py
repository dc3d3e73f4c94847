"""Events (starts, collisions, cushion contacts, pockets, stops) and shots from ball tracks.

Input: the tracks DataFrame of ``tracking.tracker`` (columns ``frame, t, track, ball, x, y, vx,
vy, seen`` of ``shared/spec/results-format.md``; mm, s, mm/s, table frame of ``vision.table``),
optionally with ``x_meas, y_meas`` (the raw detection of each seen row); or the raw detections
themselves (``frame, x, y``, optionally ``sigma_mm``), matched to the tracks frame by frame.
Contacts are solved from the raw measurements where there are any, since smoothing pulls
positions toward the model.

Output, following the results format exactly:

* events: ``event, shot, t, kind, track, other, x, y, rail, diamond, speed_in, speed_out,
  angle_in, angle_out, restitution`` plus the extra column ``pocket`` (pocket name for a
  ``pocket`` event, else ""). ``other`` is a nullable integer; empty fields are NaN / "".
* shots: ``shot, t_start, t_end, cue_track, balls_moved, cushions, collisions, pocketed``.
* (``find_events_and_rests`` only) each ball's stays at rest, ``track, t_begin, t_end``: its
  rows clear of its motions, of its events and of another ball moving within touching reach
  (``_rests``), for ``tracking.rests.hold_rests``.

Method
------
1. Each track is cut into moving stretches by its smoothed speed (hysteresis between
   ``rest_speed_mm_s`` and ``move_speed_mm_s``); a stretch counts only if the ball travels
   ``min_travel_mm``. A motion then runs on from such a stretch until the ball lies still for
   ``min_rest_s`` (its raw samples' fitted velocity zero within their noise, ``_resting``): a
   rolling ball slows at mu_r g only, and under the rest speed still rolls for about half a
   second and a centimetre, its smoothed speed dipping and rising with the noise. Stretches
   with no such rest between them are one motion (a ball nearly halting and running on has
   not stopped). Where a track leaves out frames or jumps (a ball pocketed or lifted and put
   back under the same id, ``tracking.tracker``), its path is never fitted across the gap, a
   motion never runs across it, and a motion running into the gap ends in a pocket event or
   in none. A motion of a ball seen moving and never seen resting before it since it came
   onto the table (put down by hand, a track picked up mid-roll) has no start. The contacts
   (below) are found on the fast stretches as before, and their fits bounded by the motion's
   ends (a fast stretch's end inside a motion is the smoothed speed dipping, not the ball
   stopping); the noise estimate never reaches into a slow tail. A stay on the table that
   never exceeds the move speed but begins with the ball rolling (its first rest window's
   velocity beyond its noise) and ends at rest is a motion too, when it begins during
   another ball's motion (a rack ball nudged by a break and first seen parted from the
   rack) or within reach of where a track
   vanished rolling (a slow ball lost and found again under a new id; its motion then counts
   from the loss, so the shot runs on to its stop; ``_add_found_rolling``): it has a stop and
   no start; a ball put down by hand between shots gets neither. A ball a solved collision
   sets going that never reaches the move speed or ``min_travel_mm`` (the far ball of a
   cluster, left creeping a few centimetres) has a motion too, from the collision to its
   first rest (``_add_struck_slow``): a stop and no start. A jump onto a seen row from rows
   the tracker only coasted that the seen row's path traced back explains is a strike the
   detector missed, not a put-down (``_breaks``). A stretch begins where the ball left its
   rest for good: reads off the spot that come back to it, or back onto such an off read,
   before the ball has travelled ``min_travel_mm`` are the detector flicking, not a start
   (``_left_for_good``; a ball struck from rest never returns before its next contact).
2. Contacts are found roughly, at frame level: a cushion contact where the velocity component
   normal to a rail changes sign near that rail's reversal line (``TableSpec.reversal_line``);
   a collision where two balls' centres come within a diameter (plus a margin) and at least one
   velocity changes. A slow contact or a graze, whose smoothed normal velocity stays within
   ``min_velocity_change_mm_s / 2`` of zero on a side (or whose raw samples' straight line
   does, over ``fit_window_s`` on a side, ``_Finder._raw_slow``: the tracker may have turned
   a creeping ball's smoothed velocity sharply on its noise, and ended its motion, by the
   rest speed, before it touched; its samples up to its next motion then count), counts
   where straight-line fits of the raw normal coordinate over each leg (``fit_window_s``, at
   least three samples) head into the rail and away from it and their slopes differ by more
   than ``turn_sigmas`` standard
   errors of the difference (``_Finder._turn_sigmas``; the legs split at the row, within
   four of the smoothed velocity's sign change, where they part most significantly, and the
   turn's rough time where their lines meet, since a smoother blurs a slow turn's sign change
   by frames), the most significant such turn within a leg's reach; its contact time is then
   where the two sides' paths come nearest the line when neither fit reaches it. Every rough
   cushion contact, a fast one too, must show such a turn beyond ``turn_sigmas`` in its raw
   legs bounded by the ball's neighbouring rough contacts, or have a leg too short to say
   (``_Finder.reverses``, ``_real_turns``): a tracker that follows a few reads pulled toward
   the rail swings its smoothed normal velocity through zero and back while the ball runs on
   away from it, and the false contact's rough time would also cut the true one's departure
   short. A ball last
   seen (then not for ``fit_window_s``: lifted or hidden) within reach of a rail's line and
   running into it faster than ``min_velocity_change_mm_s / 2`` touched that cushion; it is
   solved from its approach alone (``_Finder._arrival``: speed and angle out and restitution
   left empty).
3. Each contact is then solved between frames. Each side's path is fitted by least squares
   from the raw samples between the neighbouring contacts of that ball (at most
   ``fit_window_s`` each side; a strike from rest bounds them however soon the contact follows
   it: within three frames of a contact, half an exposure after the solved start, else the
   motion's first row, ``_strikes``), leaving out samples whose
   exposure straddles the contact, each
   weighted by the detector's ``sigma_mm`` relative to the track's typical one where the
   detections carry it (weighted least squares; a detection the detector itself doubts, such
   as a ball half in a cushion's shadow, counts less), with
   the physics of Alciatore 2004: a ball slides, decelerating at ``mu_s g`` along a constant slip
   direction, until it rolls, then decelerates at ``mu_r g`` along its velocity; after a cushion,
   a collision or a stun strike it slides first. ``_piecewise_fit`` chooses by the Bayesian
   information criterion between a rolling piece (acceleration with the prior ``mu_r g`` against
   the velocity), a free quadratic (in the pinned fits below, whose measures are reported, held
   like any slide to a deceleration about ``mu_s g``), and a sliding piece joined to a rolling
   one at a kink time
   scanned on a sub-frame grid (linear in the coefficients for a given kink; sliding deceleration
   with a loose prior about ``mu_s g``). The cloth's sliding deceleration is then estimated once
   for the clip, pooled over all its slides with the typical cloth as the prior
   (``_cloth_slide_decel``: one cloth; each slide weighs by its own profile likelihood), and
   held fixed in the departure fits through the contact after a cushion, which leaves only the
   slip direction and the slide's duration free (``_piecewise_fit`` with ``slide_decel``); a
   clip without a measured slide has the prior's typical cloth there, while its rough,
   unpinned departure fits keep the loose prior. After a cushion a ball always slides (its
   spin still carries it toward the rail), so a departure through the contact is fitted as a
   slide (of any length from none on), and the slide of a ball that arrived rolling gets a prior
   on its direction, the rail's normal turned a few degrees toward the ball's along-rail travel
   by the cushion's friction (``_slide_direction``, Mathavan, Jackson & Parkin 2010), and on its
   duration from the clip's other cushion contacts
   (``_cushion_slide_ratio``: the normal speed lost sliding is about a fixed fraction of the
   normal speed arriving). A striped ball, whose reads err with its roll, has its departure
   fitted over two of its turns where one window holds less (``_Finder._depart_reach``).
   *Cushion*: each side's fit is intersected with the reversal line; in a rigid impact both
   meet it at the same instant, so the two crossing times are combined by inverse-variance
   weighting (the linearised least-squares time where both fits cross the line). The line is the
   rail's reversal line moved by the rail's offset measured once for the clip: the apexes where
   each contact's approach and departure fits meet, pooled over all of that rail's contacts and
   weighed against the calibration's line (``_rail_offsets``; a calibration off by a millimetre
   would otherwise bend every contact pinned to it), known to a standard deviation from the
   same apexes (their pooled estimate's and their spread from contact to contact). Then both
   sides are refitted through one contact point at a trial contact time, scanned between the
   samples nearest the contact: the point's normal coordinate is the line as far as the line
   is known and where the sides' own paths put the ball beyond that, the line's Gaussian prior
   added to the criterion (``_Finder._pinned_contact``); each side's fit is the average of its
   models and slide durations weighted by their BIC (Bayesian model averaging), so the result
   moves smoothly with the line, and a slow departure, which a slide stretched back to an exact
   line would turn by degrees per tenth of a millimetre, rests on its own path. The time with
   the least summed criterion gives the contact, and the pinned fits give the speeds, angles
   and restitution. A contact
   whose samples scatter about the fits by more than a ball's radius, that leaves the line
   faster than it came (a cushion's speed ratio is below 1), or whose approach heads away from
   the rail as it reaches the line, is not a ball's bounce (a hand, a false track, or a ball
   running along the rail) and is dropped. A contact too soon after the ball's previous event
   (a strike or another ball a frame or two before, at 30 fps) to fit its approach is solved
   from its departure, the approach velocity the chord from the last sample before it to the
   contact point (``_Finder._departure``). *Collision*:
   the time where the centres are one diameter apart, ``|p1(t) - p2(t)| = D``, is solved
   (a quartic; of its roots, the one where the paths close in for the approach and draw apart
   for the departure) from the approach fits and from the departure fits and the two combined
   the same way, from plain quadratic fits grown outward from the contact (``_Finder._grow``); a
   touch
   whose two velocity changes do not balance (equal masses exchange equal and opposite
   momentum; ``EventConfig.collision_min_balance``), or neither of whose paths goes on after it
   or comes before it, is two false tracks or a ball set moving beside another, and is dropped;
   so is one whose relative velocity along the line of centres does not jump apart beyond its
   noise (the impulse acts along that line, ``_impulse_sigmas``): two balls passing a few
   millimetres apart. Three or more balls whose rough contacts share balls within three frames
   (a ball driven into touching balls, a rack) meet within a fraction of a millisecond, so
   each ball's samples show only the sum of its impulses. The contacts are the impacts of a
   model of the wave that runs through the cluster, one impact at a time in the order the
   balls' paths bring them together (a ball pushed on, caught up again, some pairs meeting
   twice), its resting centres fitted within their detection error to every ball's velocity
   change (``_Finder._wave_rows``, ``_fit_wave``, ``_wave``); a pair meeting again is timed by
   the departure paths too. Where that model leaves most balls unexplained, the pairs are
   found by splitting each ball's velocity change into non-negative impulses along the lines
   of centres of the balls in contact at the driven ball's first touch (``_Finder.cluster``),
   and a driven ball touching one ball of the cluster that leaves it slower along their line
   of centres than that ball came (which one impact never does) was struck back by it: that
   pair's second contact is reported where their departure paths touch
   (``_Finder._kiss_back``).
   *Nudge*: a rolling ball that glances off a ball at rest changes both velocities by far
   less than ``min_velocity_change_mm_s`` (a 170 mm/s ball grazing a resting one leaves it
   40 mm/s and a few millimetres of travel), so no rough collision marks it, or the balance
   and impulse tests above drop it. Where a moving ball's centre passes within a diameter
   plus ``collision_margin_mm`` of a ball at rest and no collision of the pair was solved
   there (``_nudge_candidates``), the moving ball's samples on both sides (those within
   ``nudge_halo_mm`` of the other's surface left out), the resting ball's reads of its spot
   before and after, and the touch are fitted at once with the impulse along the line of
   centres (``_nudge``). It is a collision where the moving ball bends along that line beyond
   its noise (a near miss bends nothing) and the resting ball's reads agree with its spot and
   the travel that impulse gives it; its time is where the centres are one diameter apart.
   *Start*:
   the first moving samples' fit extrapolated back to the rest position; a motion that begins
   at a collision has none, unless the ball left rest at an earlier frame than the ball it
   met (struck by the cue a frame or two before meeting it, ``_set_moving``). Nor has one
   that seems to begin frames before a collision with a ball already moving and then within
   ``nudge_halo_mm`` of its surface, where it leaves along their line of centres: the two
   balls' one blob pushed its reads (``_met_at_rest``). *Stop*:
   a ball comes to rest rolling, so the samples of its last rolling piece (from the end of
   the slide after its last contact into the start of its rest) are fitted by a path
   decelerating uniformly along a straight line to rest at the stop, at the median of its
   reads at rest (``_Finder.stop``): the stop's time is where that path's speed reaches zero
   (never before the ball's last contact), its place the mean of the samples at rest after it. A ball that leaves the table
   or the clip before it has lain still for ``min_rest_s`` (caught, or still rolling at the
   clip's end) gets no stop.
   *Pocket*: a track that ends (before the clip does, or before a gap) heading into a pocket
   mouth; the time its fitted path crosses the mouth line (``TableSpec.pockets()``).
4. Shots are the unions of overlapping moving stretches; ``cue_track`` is the ball of the
   shot's first ``start``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from scipy.optimize import LinearConstraint, least_squares, minimize, minimize_scalar, nnls
from scipy.stats import chi2, truncnorm

from tracking.share import Shared
from vision.table import RAILS, TableSpec, cushion_angles, rail_inward_normal

EVENT_COLUMNS = [
    "event", "shot", "t", "kind", "track", "other", "x", "y", "rail", "diamond",
    "speed_in", "speed_out", "angle_in", "angle_out", "restitution", "pocket",
]
SHOT_COLUMNS = ["shot", "t_start", "t_end", "cue_track", "balls_moved", "cushions", "collisions",
                "pocketed"]
TRACK_INPUT_COLUMNS = ("frame", "t", "track", "x", "y", "vx", "vy", "seen")
KINDS = ("start", "collision", "cushion", "pocket", "stop")
# Rough collisions sharing a ball this many frame intervals apart or less may be one instant:
# a rough time (``_Finder.rough_collisions``) comes from the smoothed tracks, which a contact's
# velocity jump pulls a frame or two off (three balls meeting at one instant in a rendered clip
# got rough times 0.783, 0.800 and 0.817 s at 60 fps; a simulated cluster, 1.033 and 1.067 s).
_CLUSTER_FRAMES = 3.0
# A ball lies still over a window when its samples' fitted velocity is zero within the 99th
# percentile of chi-squared with 2 degrees of freedom (``_resting``).
_REST_CHI2 = float(chi2.ppf(0.99, 2))
# Starts of a nudge's touch time across its halo (``_lowest_fit``), besides the closest approach.
_NUDGE_STARTS = 5


@dataclass(frozen=True)
class EventConfig:
    """Knobs of event finding, each with its physical meaning (mm, s, mm/s).

    ``rest_speed_mm_s`` / ``move_speed_mm_s``: smoothed speeds below which a ball is at rest and
    above which it moves (hysteresis; above the speed noise of a resting track, about 20-30 mm/s
    with 1 mm detections and up to 40 mm/s at the end of a rest stretch). ``min_move_s``: shortest
    motion kept. ``min_rest_s``: shortest rest between two motions of a ball (shorter dips are one
    motion), the window over which a ball must lie still to be at rest (``_resting``), and how
    long a ball must stay on the table at rest after its motion for a ``stop`` (a ball that
    vanishes sooner was caught or lifted, common practice). ``min_travel_mm``: least distance
    a ball must travel in a motion (default a pool ball's radius: far beyond a resting ball's
    position noise, and less than any stroke moves a ball). ``fit_window_s``: longest stretch of
    samples fitted on each side of a contact, stretched at low frame rates to hold
    ``fit_min_samples`` frame intervals: a side's velocity is known to a variance proportional
    to ``sigma^2 / (rate T^3)`` over a window T (least-squares slope of evenly spaced samples),
    and a contact's angles and speed ratio rest on it, so a 30 fps side needs about
    ``0.3 * 2^(1/3) = 0.38 s`` to match a 60 fps side over 0.3 s; 12 intervals (0.4 s at 30 fps,
    0.3 s kept from 40 fps up) meet that (``benchmarks/event_accuracy.py --fps 30`` seeds 1-3:
    angle_in 0.93, 0.72, 1.09 -> 0.63, 0.49, 0.62 degrees, angle_out 1.08, 0.95, 1.24 -> 0.93,
    0.87, 1.003). Collision fits keep ``fit_window_s`` (stretched, they lost one of 32
    collisions at 30 fps, seed 1). ``quadratic_min_samples``: fewer samples on a side
    are fitted by a straight line. ``exposure_s``: exposure time of a frame; samples whose exposure
    spans a contact are left out of its fits (None: half the frame interval, a 180-degree shutter,
    common practice). ``cushion_reach_mm``: a normal-velocity reversal counts as a cushion contact
    only with the centre this close to the reversal line (plus one frame's travel).
    ``turn_sigmas``: a normal-velocity reversal slower than that counts as a cushion contact
    only if the legs' normal slopes differ by more than this many standard errors of their
    difference (``_Finder._turn_sigmas``; one-sided Gaussian tail 3e-7 at 5).
    ``collision_margin_mm``: centres closer than a diameter plus this (plus one frame's relative
    travel) may be touching. ``min_velocity_change_mm_s``: smallest velocity change that marks a
    contact. ``collision_min_balance``: a touch is a collision only if the smaller of the two
    balls' velocity changes (departure minus approach fit at the contact) is at least this share
    of the larger: balls of equal mass exchange equal and opposite momentum (conservation of
    linear momentum; the cloth's impulse over a contact of a fraction of a millisecond is
    negligible, common practice), while a ball set moving beside a resting one, or a hand's
    piece beside a ball, changes on one side only. Measured share 0.53-1.0 over the collisions
    of ``benchmarks/event_accuracy.py`` (60, 30, 120 fps) and 0.47-0.88 over those of the
    bank_practice and cut_bank samples; 0.003 for a hand's piece set moving beside another.
    ``collision_impulse_sigmas``: a touch is a collision only if the balls' relative velocity
    along the line of centres jumps apart by more than this many standard errors
    (``_impulse_sigmas``; one-sided Gaussian tail 0.023 at 2: a near miss that the velocity
    change and balance tests let through passes about once in 40). Measured over the 108
    collisions of ``benchmarks/event_accuracy.py`` seeds 1-3 at 30 and 60 fps: 2.8 to 112
    (median 30; the lowest, 2.8 at 30 fps, a ball meeting a cushion two frames after), and
    -0.02 for the near miss (3 mm apart) that seed 2 at 30 fps took for one.
    ``start_fit_s`` / ``stop_fit_s``: samples fitted to solve a start / stop (for a stop, that
    long after the start of the rest, and before it the whole last rolling piece, but at most
    ``stop_back_s``, ``_Finder.stop``: at mu_r g a ball covers only 18 mm in its last 0.6 s,
    where a crawling ball's reads can be off by several mm together, and about 200 mm in its
    last 2 s; a slide ends within ``2 v / (7 mu_s g)``, 0.22 s from 1.5 m/s, so a spin left
    over after a contact that the roll's start takes too short (bank_practice's cue ball at
    12.33 s, its stop lost when fitted over 4 s) is out of the window).
    ``pocket_reach_mm`` / ``pocket_horizon_s``: a track ending within this of a pocket mouth whose
    path crosses the mouth within this time was pocketed. ``meas_sigma_mm``: detection noise
    assumed where it cannot be estimated.

    Path model of each side of a contact (``_piecewise_fit``; Alciatore 2004 sliding then
    rolling): ``kink_step_frames`` grid step of the slide-to-roll time, in frame intervals;
    ``kink_min_samples`` fewest samples on the piece next to the contact; ``kink_params``
    free parameters the criterion charges a kink beyond a rolling piece (its time and the slip
    direction: the prior fixes the deceleration's size); ``roll_decel_mm_s2`` /
    ``roll_decel_sigma_mm_s2`` prior of the rolling deceleration ``mu_r g`` (Alciatore 2004
    mu_r 0.005-0.015, typical 0.01 [secondary]); ``roll_lateral_sigma_mm_s2`` sd of a rolling
    piece's acceleration across its heading, for the departures of striped balls
    (``_lateral_prior``: a rolling ball's path is straight, and a table out of level by 0.42 mm
    per metre turns it at 2.9 mm/s^2); ``slide_decel_mm_s2`` /
    ``slide_decel_sigma_mm_s2`` prior of the sliding deceleration ``mu_s g`` (Alciatore 2004
    typical 0.2, range 0.15-0.4 [secondary]; Mathavan et al. 2009: 1.75-2.40 m/s^2);
    ``slide_decel_min_mm_s2`` / ``slide_decel_max_mm_s2`` hard bounds (0.05 g and 0.6 g).
    ``slide_min_samples``: fewest samples on a sliding piece for it to count as well seen, so
    that its duration measures the clip's slide ratio after a cushion (``_cushion_slide_ratio``).
    ``cloth_slide_min_samples``: fewest samples on a sliding piece for it to count as a
    measurement of the cloth's sliding deceleration (``_cloth_slide_decel``): three, the fewest
    that give a constant-acceleration piece a curvature of its own; each slide weighs by its
    own profile there, so a short one counts little but not nothing (at 30 fps the slide after
    a cushion lasts 2-5 frames; requiring five samples left 103 of 366 contacts of
    ``benchmarks/event_accuracy.py --fps 30`` seeds 1-3 on the typical cloth's prior alone).
    ``slide_dir_sigma_deg``: sd of the prior on the direction of the slide after a cushion
    (``_Finder.cushion``; in the impact
    model of Mathavan, Jackson & Parkin 2010 as ``analysis.cushion`` implements it, a ball
    arriving rolling slides within 2.9 degrees of the normal at any angle up to 85 degrees off
    square, 0.1 to 3 m/s, with side spin up to its rolling spin, ``tests/test_events.py``; the
    sd spans that range, and twice it leaves room for real cushions). The samples hardly fix
    that direction: the slide lasts a few frames, and beyond it the along-rail pull is a
    change of velocity that the rolling piece's own position and velocity absorb, so only the
    bend within the slide's few samples, tenths of a millimetre, measures it, and a detection
    bias drifting by that much near the cushion turns it to the prior's edge; at 5 degrees
    the slip turned 5 degrees and angle_out 1.8 degrees on a sample clip's contact
    (``benchmarks/analyse_accuracy.py`` cut_bank, 3.42 s), at 10 degrees 9 and 3.
    ``cushion_friction``: ball-cushion sliding friction of the impact model (Mathavan, Jackson &
    Parkin 2010: 0.14), which turns the prior's mean slide direction (``_slide_direction``).
    ``slide_ratio_sigma``: sd of the prior on the fraction of its normal speed a ball arriving
    rolling loses sliding after a cushion (``_cushion_slide_ratio``; 0.28 to 0.43 in that model
    over normal speeds of 0.1 to 3.1 m/s arriving), and ``slide_ratio_min_contacts`` the fewest well-seen slides
    that measure the clip's fraction. ``slide_ratio_prior``: that fraction where the clip has
    fewer well-seen slides (the middle of the model's 0.28-0.43; a clip of a few shots, whose
    slides after a cushion last only a few frames, would otherwise fit them unconstrained).
    ``outlier_sigmas`` / ``outlier_max``: a sample a contact's side fit leaves more than this
    many noise sigmas off (studentised: over ``sqrt(1 - leverage)``, ``_leverage``) is struck,
    at most this many per fit (``_Finder._robust_fit``).
    ``slide_fit_s``: longest stretch fitted to measure one slide (a stun at 3 m/s on a 0.2
    cloth slides 0.44 s, Alciatore 2004: 2 v0 / (7 mu_s g)).
    ``reversal_line_sd_mm``: standard deviation of where the calibration puts each rail's
    reversal line (mm), the prior of the rail's offset measured from the clip's contacts
    (``_rail_offsets``); an automatic calibration on compressed footage places a cushion nose
    to about 0.3 px, about 1 mm on a table filling a 720p frame (``benchmarks/calib_accuracy.py``).

    A cluster's contact wave (``_Finder._wave_rows``, ``_fit_wave``): ``ball_restitution`` and
    ``ball_friction`` of the impacts (Alciatore 2004 ranges 0.92-0.98 and 0.03-0.08, typical
    0.95 and 0.06 [secondary]; as ``analysis.physics``). ``wave_position_sd_mm``: sd of the
    prior on each resting ball's centre, which the fit may move: resting balls' detection
    error, median 0.54-3.14 mm on the extra rendered set and 1.25 mm on
    ``benchmarks/detect_accuracy.py`` (session 13), far above a rack's gaps.
    ``wave_model_share``: the model's own error in a velocity change, as a share of it: the
    restitution range moves ``(1 + e) / 2`` by 1.5 % and the friction range the tangential
    impulse by 2.5 % of the normal one. ``wave_misfit_sigmas``: scale of the robust misfit, and
    the misfit beyond which a ball is not explained. ``wave_search_rounds``: most rounds of
    the coordinate search (20 instead changes nothing on the rack-break harness of session
    14).
    ``wave_max_outlier_share``: the wave is used where it explains all balls but at most this
    share; in that harness (3-, 6- and 9-ball racks at 50-120 fps) up to 5 of 10 balls lay
    beyond 3 sigmas where the wave still found more contacts and fewer false pairs than the
    pair-impulse solution (each ball's departure fit may hold a later contact).

    A resting ball nudged by a moving one (``_nudge``): ``nudge_halo_mm``: the moving ball's
    detections within this gap of the resting ball's surface are left out of the fit (two
    balls that near make one blob for the detector: phone_wide_30fps's blue 2 read 3-5 mm
    toward the black 8 at gaps of 5-16 mm, 5 mm away from it once touching; one ball radius).
    The resting ball's spot before the touch and after it is read from its whole stay at rest
    on each side, each distinct read once (``_stay_spots``); each spot carries the resting
    detection error ``wave_position_sd_mm``.
    ``nudge_reach_s``: the moving ball's samples reach this far from the halo on each side
    (within its neighbouring events and past the slide after the one before,
    ``_nudge_windows``), its rolling deceleration fitted once for both sides under the prior
    ``roll_decel_mm_s2`` / ``roll_decel_sigma_mm_s2`` (``_rolling_past``). Measured (simulator,
    the phone clip's thin nudge: 30 fps, 168 mm/s in, 75 deg cut, 24 seeds): within half a frame
    12 -> 16 of 24, median error 0.49 -> 0.35 frame (max 1.26 -> 1.38, worse); with the cloth's
    mu_r 0.007 against the assumed 0.01, found 4 -> 12 of 12 (9 within half a frame).

    A striped ball's cushion departure (``_Finder._depart_reach``) is fitted past
    ``fit_window_s`` to ``depart_roll_turns`` turns of the ball (``2 pi R / v`` each, at the
    speed it leaves with), at most ``depart_max_s`` and never past its next event, so its read
    error, which repeats with its roll, averages out instead of passing for velocity.
    ``depart_max_s`` bounds the reach of a ball slow enough to stop within it. Measured
    (session 19): rendered through the cheapwide_25fps camera, room and codec, a rolling
    stripe's read runs ahead of its centre along the heading by up to 4-6 mm for three or four
    frames and drops back, twice per turn (second harmonic of the roll angle 1.4-2.9 mm, by the
    band's tilt); a solid's number discs give one too (band tilted 60 deg: 3.9 mm across, first
    harmonic; not tried as a gate). On slow striped top-rail banks read with that error
    (tests/test_events.py ``_striped_top_bank``, 23 contacts at 25 fps) one window gave
    restitution 0.057, angle out 0.60 deg, speed out 4.2 %; two turns 0.027, 0.63 deg, 5.5 %
    (worse); at 30 fps (15 contacts) 0.043, 0.80 deg, 5.6 % and 0.028, 0.82 deg, 5.2 %. Only
    striped balls (the tracker's ``pattern`` label): a longer rolling leg makes a plain ball's
    slow contact lean harder on its line (tests/test_events.py, a slow departure moved with the
    line: angle_out spread 2.8 deg over +-0.5 mm, 1.8 allowed), and the earlier gate on a
    drifting noise estimate (``_Ball.sigma_fit`` over ``_Ball.sigma``) opened on
    phone_wide_30fps's and lamp_50fps's cue balls (ratios 3.5, 2.2) and missed their stripes
    (1.5, 1.6) and most simulated stripes (1.2-1.8, white noise alone 1.0-1.5).
    On the extra rendered set (``benchmarks/analyse_accuracy.py --extra --reuse``, against one
    window): cheapwide_25fps speed out 3.64 -> 1.98 %, restitution 0.045 -> 0.028, angle out
    1.39 -> 1.01 deg; phone_wide_30fps angle out 2.12 -> 1.38; uneven_60fps angle out 0.93 ->
    0.91, restitution 0.023 -> 0.022; but bright_pocket_1080p50 angle out 0.41 -> 0.51,
    restitution 0.002 -> 0.004, speed in 0.49 -> 0.66 % (all within target). Over so long a
    leg the rolling piece's acceleration is held to its heading (``roll_lateral_sigma_mm_s2``,
    ``_lateral_prior``): with the same sd both ways (50 mm/s^2) cheapwide's 14 fitted a curve
    of 9.8 mm/s^2 across its 1.46 s departure out of its read error, 7 mm/s across at the
    contact, angle out 1.1 deg off (session 20; held straight: 0.16 deg; the clip's angle out
    1.01 -> 0.52 deg; bright_pocket_1080p50 angle out 0.51 -> 0.42, speed out 0.68 -> 0.36 %;
    the simulated striped banks above, 23 contacts: angle out 0.63 -> 0.32 deg, speed out
    5.5 -> 4.9 %, restitution 0.027 unchanged).
    ``workers``: processes that share the independent fits (``tracking.share``): the profile
    over the cloth's sliding deceleration (``_cloth_slide_decel``) and the balls' cushion
    contacts (``_cushion_rows``); 0, the default, is one per core this process may run on, 1
    none forked. The events are the same to the bit for any count; only the time differs.
    """

    rest_speed_mm_s: float = 50.0
    move_speed_mm_s: float = 150.0
    min_move_s: float = 0.05
    min_rest_s: float = 0.3
    min_travel_mm: float = 28.575
    fit_window_s: float = 0.3
    fit_min_samples: int = 12
    quadratic_min_samples: int = 6
    exposure_s: float | None = None
    cushion_reach_mm: float = 30.0
    collision_margin_mm: float = 15.0
    min_velocity_change_mm_s: float = 100.0
    collision_min_balance: float = 0.25
    collision_impulse_sigmas: float = 2.0
    turn_sigmas: float = 5.0
    start_fit_s: float = 0.1
    stop_fit_s: float = 0.6
    stop_back_s: float = 1.5
    pocket_reach_mm: float = 150.0
    pocket_horizon_s: float = 0.5
    meas_sigma_mm: float = 2.0
    kink_step_frames: float = 0.25
    kink_min_samples: int = 2
    slide_decel_min_mm_s2: float = 490.0
    slide_decel_max_mm_s2: float = 5900.0
    roll_decel_mm_s2: float = 98.1
    kink_params: int = 2
    slide_decel_mm_s2: float = 1962.0
    slide_decel_sigma_mm_s2: float = 600.0
    roll_decel_sigma_mm_s2: float = 50.0
    roll_lateral_sigma_mm_s2: float = 3.0
    slide_min_samples: int = 5
    cloth_slide_min_samples: int = 3
    slide_dir_sigma_deg: float = 3.0
    cushion_friction: float = 0.14
    slide_fit_s: float = 0.8
    slide_ratio_sigma: float = 0.05
    slide_ratio_min_contacts: int = 3
    slide_ratio_prior: float = 0.355
    outlier_sigmas: float = 5.0
    outlier_max: int = 2
    reversal_line_sd_mm: float = 1.0
    ball_restitution: float = 0.95
    ball_friction: float = 0.06
    wave_position_sd_mm: float = 1.0
    wave_model_share: float = 0.03
    wave_misfit_sigmas: float = 3.0
    wave_search_rounds: int = 5
    wave_max_outlier_share: float = 0.5
    nudge_halo_mm: float = 28.575
    nudge_reach_s: float = 1.5
    depart_roll_turns: float = 2.0
    depart_max_s: float = 1.5
    workers: int = 0

    def __post_init__(self) -> None:
        for name, value in self.__dict__.items():
            if name == "exposure_s" and value is None:
                continue
            if name == "workers":
                if not (isinstance(value, int) and value >= 0):
                    raise ValueError(f"EventConfig.workers = {value!r} must be 0 (one process per core) or a positive count")
                continue
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise ValueError(f"EventConfig.{name} = {value!r} must be a positive number")
        if self.rest_speed_mm_s >= self.move_speed_mm_s:
            raise ValueError(f"rest_speed_mm_s {self.rest_speed_mm_s} must be below "
                             f"move_speed_mm_s {self.move_speed_mm_s}")
        if not 0.0 < self.collision_min_balance <= 1.0:
            raise ValueError(f"EventConfig.collision_min_balance = {self.collision_min_balance!r} "
                             "must be a share in (0, 1], e.g. 0.25")
        if self.quadratic_min_samples < 3:
            raise ValueError(f"quadratic_min_samples {self.quadratic_min_samples} must be >= 3")


# --- path fits -------------------------------------------------------------------------------
@dataclass
class _Fit:
    """A fitted path ``p(t)`` (mm) of one side of a contact, per axis, about ``t0`` (s).

    Near ``t0`` it is the quadratic ``p = c0 + c1 tau + c2 tau^2`` with ``tau = t - t0`` and
    ``coef = [c0, c1, c2]`` (3, 2) (unused orders 0). A piecewise fit (``_piecewise_fit``) has a
    kink at ``tau = tk``: beyond it (``|tau| > |tk|``, same sign) the acceleration changes to
    ``2 far`` (``far`` (2,) mm/s^2 / 2) with position and velocity continuous. ``cov`` (3, 3) is
    the block of ``(A^T A)^-1`` of the design matrix belonging to ``c0, c1, c2``, so near ``t0``
    ``var p(t) = s2 g^T cov g`` with ``g = [1, tau, tau^2]``; ``s2`` the per-axis residual
    variance (mm^2): the samples' own scatter about the fit where it has spare samples (at least
    4 residual degrees of freedom over both axes, ``s2_measured``), else the nominal detection
    noise it was given.
    """

    t0: float
    coef: np.ndarray
    cov: np.ndarray
    s2: float
    n: int
    deg: int
    tk: float | None = None
    far: np.ndarray | None = None
    k: int = 6  # free parameters of the fit (both axes)
    bic: float = math.nan  # Bayesian information criterion of the chosen model
    rss: float = math.nan  # weighted residual sum of squares of the chosen model, mm^2
    slid: bool = False  # the chosen model slides straight into t0 (``straight``), not rolling
    s2_measured: bool = False  # s2 is the residual scatter, not the nominal noise

    def _split(self, tau: float) -> tuple[float, float]:
        """(m, r): the part of tau before the kink and the part beyond it."""
        if self.tk is None or abs(tau) <= abs(self.tk) or tau * self.tk <= 0:
            return tau, 0.0
        return self.tk, tau - self.tk

    def pos(self, t: float) -> np.ndarray:
        m, r = self._split(t - self.t0)
        # p = c0 + c1 (m + r) + c2 (m^2 + 2 m r) + far r^2: continuous in p and p' at the kink
        out = self.coef[0] + self.coef[1] * (m + r) + self.coef[2] * (m * m + 2 * m * r)
        return out + self.far * r * r if r else out

    def vel(self, t: float) -> np.ndarray:
        m, r = self._split(t - self.t0)
        out = self.coef[1] + 2.0 * self.coef[2] * m
        return out + 2.0 * self.far * r if r else out

    def var(self, t: float) -> float:
        tau = t - self.t0
        g = np.array([1.0, tau, tau**2])
        return float(self.s2 * g @ self.cov @ g)

    def vel_var(self, t: float) -> float:
        """Variance of the velocity per axis at ``t`` near ``t0`` (mm^2/s^2): ``s2 h^T cov h``
        with ``h = [0, 1, 2 tau]``, the derivative of ``g`` in ``var``."""
        tau = t - self.t0
        h = np.array([0.0, 1.0, 2.0 * tau])
        return float(self.s2 * h @ self.cov @ h)


def _fit(ts: np.ndarray, ps: np.ndarray, t0: float, deg: int, sigma_mm: float) -> _Fit | None:
    """Least-squares fit of degree ``deg`` (0, 1 or 2) to samples ts (n,) s, ps (n, 2) mm."""
    n = len(ts)
    deg = min(deg, n - 1)
    if n == 0 or deg < 0:
        return None
    tau = ts - t0
    A = np.vander(tau, deg + 1, increasing=True)  # columns 1, tau, tau^2
    coef, *_ = np.linalg.lstsq(A, ps, rcond=None)
    res = ps - A @ coef
    dof = 2 * (n - deg - 1)
    # The residual scatter where there are spare samples, else the nominal detection noise;
    # floored so exact (noise-free) data still gives finite weights.
    measured = dof >= 4
    s2 = float(np.sum(res**2) / dof) if measured else sigma_mm**2
    s2 = max(s2, 1e-8)
    cov = np.zeros((3, 3))
    cov[: deg + 1, : deg + 1] = np.linalg.pinv(A.T @ A)
    full = np.zeros((3, 2))
    full[: deg + 1] = coef
    return _Fit(t0, full, cov, s2, n, deg, s2_measured=measured)


def _batch_inv(N: np.ndarray) -> np.ndarray:
    """Inverses of the stack N (G, q, q); a singular member gets its pseudo-inverse instead of
    failing the whole stack. (A kink grid time on the first sample leaves the far piece's
    columns dependent for that one grid time only; an exact zero pivot there, which rounding
    decides, must not drop every other kink time with it.)"""
    try:
        return np.linalg.inv(N)
    except np.linalg.LinAlgError:
        return np.linalg.pinv(N)


def _ridge_weight(sigma_mm: float, sd_mm_s2: float) -> float:
    """Weight of a ridge prior of sd ``sd_mm_s2`` (mm/s^2) on an acceleration, for a path
    coefficient ``c`` (half the acceleration) fitted to samples of noise ``sigma_mm`` (mm, at
    least 0.05): ``(sigma / sd of c)^2``, the sd of c being half the acceleration's."""
    return (2.0 * max(sigma_mm, 0.05) / sd_mm_s2) ** 2


def _lateral_prior(v: np.ndarray, sigma_mm: float, cfg: "EventConfig") -> tuple[np.ndarray, float]:
    """The rolling piece's prior across its heading: (unit vector (2,) across the velocity
    ``v`` (2,) mm/s, extra ridge weight k >= 0), so that the prior on a rolling piece's
    coefficient ``c`` (half its acceleration, mm/s^2) is ``lam |c - c_prior|^2 + k (n . c)^2``
    (``_piecewise_fit``), i.e. sd ``roll_decel_sigma_mm_s2`` along the heading and
    ``roll_lateral_sigma_mm_s2`` across it (in units of the sample noise ``sigma_mm``, as
    ``lam``). k is 0 for a ball without a heading.

    A rolling ball's path is straight: the cloth's rolling resistance acts against the velocity
    and a spin about the vertical moves no point of the cloth contact, so no force turns it
    (Alciatore 2004 [secondary]: a rolling ball keeps a straight line; only a sliding ball,
    whose slip is not along its velocity, curves). What is left across the heading is a table
    out of level: a rolling solid sphere on a slope of angle b accelerates at (5/7) g sin b
    (rolling without slipping down an incline, e.g. Halliday, Resnick & Walker, Fundamentals
    of Physics, ch. 11, from memory), 2.9 mm/s^2 for 0.42 mm per metre (0.005 in per foot,
    the first graduation of a machinist's precision level: common practice). An isotropic
    prior with the along-heading sd (50 mm/s^2, the spread of mu_r g) let a striped ball's
    read error, which swings across the heading with its roll, and a detector bias that
    changes across the table pass for a curve: cheapwide_25fps's green 14 after its top-rail
    contact fitted 9.8 mm/s^2 across its 1.46 s departure, 7 mm/s at the contact, angle out
    1.1 degrees off."""
    speed = float(np.hypot(*v))
    if not speed > 0:
        return np.zeros(2), 0.0
    lam_along = _ridge_weight(sigma_mm, cfg.roll_decel_sigma_mm_s2)
    lam_across = _ridge_weight(sigma_mm, cfg.roll_lateral_sigma_mm_s2)
    return np.array([-v[1], v[0]]) / speed, max(lam_across - lam_along, 0.0)


def _far_heading(tau: np.ndarray, P: np.ndarray) -> np.ndarray:
    """Velocity (2,) mm/s of a straight line fitted to the half of a departure's samples
    furthest from the contact (``tau`` (n,) s sorted by ``|tau|``, ``P`` (n, 2) mm): the
    rolling piece's heading, clear of the slide next to the contact, whose direction differs
    (the slide takes normal speed, not along-rail speed)."""
    far = slice(len(tau) // 2, None)
    A = np.stack([np.ones(len(tau[far])), tau[far]], axis=1)
    return np.linalg.lstsq(A, P[far], rcond=None)[0][1]


def _straighten(systems: list, roll: list[int], n_hat: np.ndarray, k: float) -> list:
    """Per-axis least-squares solutions joined by the prior ``k (n_hat . c_roll)^2`` on the
    rolling coefficients of both axes (``_lateral_prior``).

    ``systems``: per axis (x then y) ``(c (G, q), Ai (G, q, q))``, the solution and inverse
    normal matrix of that axis alone; ``roll``: the rolling coefficient's index in each. The
    joint normal matrix is block-diagonal plus ``k u u^T`` (u: ``n_hat`` at the two rolling
    coefficients), and the prior, centred on no acceleration across the heading, adds nothing
    to the right-hand side; so by the Sherman-Morrison formula (Sherman & Morrison 1950) the
    joint solution is ``c - k Ai u (u^T c) / (1 + k u^T Ai u)`` and the diagonal blocks of the
    joint inverse ``Ai - k Ai u u^T Ai / (1 + k u^T Ai u)``. Returns the list of corrected
    ``(c, Ai)``."""
    cols = [Ai[:, :, r] for (_, Ai), r in zip(systems, roll)]  # Ai u per axis, up to n_hat
    s = sum(n_hat[ax] ** 2 * cols[ax][:, r] for ax, r in enumerate(roll))
    d = sum(n_hat[ax] * c[:, r] for ax, ((c, _), r) in enumerate(zip(systems, roll)))
    f = k / (1.0 + k * s)  # (G,)
    out = []
    for ax, (c, Ai) in enumerate(systems):
        col = cols[ax]
        out.append((c - (f * n_hat[ax] * d)[:, None] * col,
                    Ai - (f * n_hat[ax] ** 2)[:, None, None] * col[:, :, None] * col[:, None, :]))
    return out


def _straight_slide_terms(parts: list, roll: list[int], n_hat: np.ndarray, k: float) -> tuple:
    """``_straighten`` for the fits whose slide coefficients x (per axis) are held to a circle
    (``_piecewise_fit``'s ``solve_fixed``): per axis the other coefficients b minimise
    ``b^T N_bb b - 2 b^T (h_b - N_bx x)``, and the prior ``k (n_hat . b_roll)^2`` joins the
    axes' N_bb by ``k u u^T``. By the Sherman-Morrison formula the minimum over b gains
    ``kappa (W0 - sum_ax m_ax x_ax)^2`` with ``kappa = k / (1 + k u^T D u)``, ``D`` the per-axis
    inverses ``N_bb^-1``, ``W0 = u^T D h_b`` and ``m_ax = n_ax (D N_bx)[roll]``, and each axis'
    b moves by ``-kappa n_ax D u (W0 - sum m x)``.

    ``parts``: per axis ``(N_bb^-1 (G, q, q), N_bx (G, q), h_b (G, q))``; ``roll``: the rolling
    coefficient's index among b. Returns (kappa (G,), W0 (G,), m (2, G), columns ``D u`` per
    axis (G, q) up to ``n_hat``)."""
    cols = [Di[:, :, r] for (Di, _, _), r in zip(parts, roll)]
    s = sum(n_hat[ax] ** 2 * cols[ax][:, r] for ax, r in enumerate(roll))
    w0 = sum(n_hat[ax] * np.einsum("gj,gj->g", cols[ax], hb) for ax, (_, _, hb) in enumerate(parts))
    m = np.stack([n_hat[ax] * np.einsum("gj,gj->g", cols[ax], nbx)
                  for ax, (_, nbx, _) in enumerate(parts)])
    return k / (1.0 + k * s), w0, m, cols


def _piecewise_fit(ts: np.ndarray, ps: np.ndarray, t0: float, sigma_mm: float, step_s: float,
                   cfg: "EventConfig", pin: np.ndarray | None = None,
                   slide_decel: float | None = None,
                   slide_dir: np.ndarray | None = None,
                   slide_tk: tuple[float, float] | None = None,
                   weight: np.ndarray | None = None, average: bool = False,
                   penalised: bool = False, cache: dict | None = None,
                   held: bool = False,
                   straight: tuple[float, float] | None = None,
                   lateral: bool = False) -> _Fit | None:
    """Fit one side of a contact: samples ts (n,) s, ps (n, 2) mm, all before or all after t0.

    Physics (Alciatore 2004): a sliding ball decelerates at ``mu_s g`` along a constant slip
    direction (a constant acceleration vector) until it rolls; a rolling ball decelerates at
    ``mu_r g`` along its velocity. After a cushion, a collision or a stun strike the ball slides
    first, so one side of a contact is at most two constant-acceleration pieces, sliding then
    rolling (forward in time), joined with continuous position and velocity at ``tau = tk``:

        p(tau) = c0 + c1 tau + c2 (m^2 + 2 m r) + c3 r^2,  m = tau clipped to [0, tk], r = tau - m

    (``2 c2`` the acceleration between t0 and the kink, ``2 c3`` beyond it; ``tau = t - t0``),
    linear in (c0..c3) for a given tk. Candidates, per axis by least squares:

    * *rolling*: one piece whose acceleration has the Gaussian prior ``-mu_r g v_hat``, sd
      ``roll_decel_sigma_mm_s2`` (``roll_decel_mm_s2`` = mu_r g; v_hat from a straight-line fit),
      added as ridge rows, so it costs no free parameter;
    * *sliding*: one free quadratic; with ``held``, held to a slide's deceleration like the
      kinked path's sliding piece below (bounds and prior on its size);
    * *slide then roll*: tk scanned over a grid of ``step_s`` between the samples (at least
      ``kink_min_samples`` on the near piece, three on the far one), the rolling piece with the
      same prior and the sliding one free but rejected unless ``|a|`` lies within
      ``slide_decel_min_mm_s2 .. slide_decel_max_mm_s2`` and with a Gaussian prior on its size,
      ``slide_decel_mm_s2`` sd ``slide_decel_sigma_mm_s2`` (loosely about mu_s g: the cloth's
      mu_s is not known), added to the residual sum in units of the residual variance.

    ``slide_decel`` (mm/s^2, departure side only) is the cloth's sliding deceleration ``mu_s g``
    when it is known (``_cloth_slide_decel``: one cloth, one value per clip). Then the sliding
    piece's acceleration has exactly that size and only its direction is free (one parameter,
    the angle of the constant slip direction): for a given tk the least-squares problem with
    ``|2 c2| = slide_decel`` is reduced to the two slide coefficients (the others eliminated by
    their normal equations, a Schur complement) and minimised over the angle to 0.5 degree.
    The candidates are then sliding (no kink in the window) and slide then roll, both of 6
    parameters: a slide through the window is the slide-then-roll path with its kink beyond the
    last sample, its duration bounded below, not a model without one (charged a parameter less,
    it was the better criterion at any mu_s g low enough for a slide to outlast the window, so
    the profile over mu_s g leaned low: a simulated 30 fps cushion session on a 1962 mm/s^2
    cloth pooled 1132 +- 119, ``tests/test_events.py``), the kink from the first sample on (from half a grid step after ``t0`` when ``pin`` is
    given: through the pinned contact a slide ending before the first sample is still fixed);
    neither rolling from the contact nor the free quadratic is offered, since after a cushion
    physics leaves no other path (the ball slides first, ``_Finder.cushion``). The returned
    ``rss`` is then the chosen model's penalised residual sum (the rolling piece's ridge
    prior included), so a "rolling" piece decelerating like a slide shows in it; with
    ``penalised`` the models are also chosen by it (the profile over mu_s g,
    ``_cloth_slide_decel``, whose criterion must rise where a slide is mistaken for rolling),
    else by the residuals alone (the contact fits: on the slow departures of
    ``tests/test_events.py`` the penalised choice turned angle_out by a further 0.05 degree
    in the median). ``slide_dir`` (2,) unit vector, with ``slide_decel``: the
    expected direction of the sliding acceleration, a Gaussian prior on the angle with sd
    ``slide_dir_sigma_deg`` added to the residual sum in units of the measurement variance (the
    larger of ``sigma_mm^2`` and the residual variance of the fit without the prior).
    ``slide_tk`` (mean, sd) s, with ``slide_decel``: a Gaussian prior on the slide's duration,
    added to the criterion like the prior on ``mu_s g`` (a slide through the whole window is
    charged only if the mean is shorter than the window).

    ``straight`` (mu_s g, its sd) mm/s^2, approach side only, where the ball left rest within
    the window (``_Finder._slid_from_rest``) and the samples are fewer than
    ``quadratic_min_samples``: one more candidate, *sliding straight*: one piece like rolling
    but with the Gaussian prior ``-mu_s g v_hat`` on its acceleration (4 parameters), for a
    ball set moving from rest slips along its velocity; the fit then says so (``_Fit.slid``),
    and the contact does not take it for a ball arriving rolling (``_Finder.cushion``).

    ``weight`` (n,): relative weight of each sample (typical detection sigma over its own; rows
    of the least squares scaled by it), None for equal weights.

    ``held``: the free quadratic is a slide (Alciatore 2004: a constant acceleration of size
    mu_s g), so its deceleration gets the sliding piece's bounds and prior. Unbounded, it took
    detection errors drifting along a rolling ball's path for the ball speeding up into the
    rail (``benchmarks/analyse_accuracy.py --extra``, dim_540p_60fps at 5.46 s: +255 mm/s^2,
    speed_in 5.3 % high, restitution 0.044 low). The pinned contact fits, whose speeds, angles
    and restitution are reported, hold it (``_Finder._pinned_contact``); the rough fits that
    only locate a contact do not: held there too, the crossing iteration of a creeping contact
    settled further off (``tests/test_events.py``, the creeping ball at 30 fps: 2 of 8 draws
    0.5 and 1 frame further, 2.07 and 2.12 frames off; over 40 draws 13 % beyond 2 frames
    against 8 %).

    ``cache``: an empty dict passed to every call on the same samples, pin, weights and priors
    that differ only in ``slide_decel`` (the profile over mu_s g, ``_cloth_slide_decel``); the
    normal equations, which do not depend on it, are then solved once.

    ``pin`` (2,) mm fixes ``c0`` (the contact point when both sides are refitted through it).
    The best candidate has the least Bayesian information criterion (Schwarz 1978) for Gaussian
    residuals of unknown variance, ``BIC = m ln(RSS / m) + k ln m`` over the m = 2 n coordinates
    with k free parameters (rolling 4, sliding 6, slide-then-roll ``4 + kink_params``; one fewer
    per pinned axis). Returns None for fewer than two samples.

    ``average``: instead of the one least-criterion candidate (and, for a kink, the one least
    grid time), the path near ``t0`` (``c0..c2``, the far piece and the kink time) is their
    average weighted by ``exp(-BIC / 2)``, an approximation of each model's posterior
    probability (Bayesian model averaging with BIC weights: Raftery 1995, Burnham & Anderson
    2002): first over the kink grid within the slide-then-roll model (its posterior over the
    kink time, a flat prior on the grid), then over the models. The returned ``bic`` is then
    ``-2 ln sum exp(-BIC_i / 2)`` over the models, smooth where the choice between them would
    jump; ``cov``, ``s2`` and ``k`` stay the best model's. A least-squares solve whose pin or
    contact time moves by a hair then moves the fit by a hair (``_Finder._pinned_contact``).
    """
    n = len(ts)
    if n < 2:
        return None
    tau = ts - t0
    order = np.argsort(np.abs(tau), kind="stable")
    tau, P = tau[order], ps[order].astype(float)
    wt = np.ones(n) if weight is None else np.asarray(weight, float)[order]
    after = bool(tau[-1] > 0)  # departure side: the near piece is the earlier one (sliding)
    pin = np.full(2, np.nan) if pin is None else np.asarray(pin, float)
    free0 = np.isnan(pin)  # per axis: c0 fitted (True) or fixed at pin
    n_pinned = int((~free0).sum())
    m_obs = 2 * n
    floor = m_obs * 1e-18  # exact data (1e-9 mm rounding): the penalty alone decides

    def bic(rss, k):
        return m_obs * np.log(np.maximum(rss, floor) / m_obs) + k * math.log(m_obs)

    def on_grid(sc, coef, tk_grid):
        """The kink candidate from criterion values sc (G,) over the grid: (score, coef (4, 2),
        best index, tk); with ``average``, coef and tk are means weighted by exp(-sc / 2)."""
        g = int(np.argmin(sc))
        if not average:
            return float(sc[g]), coef[g], g, float(tk_grid[g])
        w = np.exp(-0.5 * (sc - sc[g]))  # inf scores weigh 0
        w /= np.sum(w)
        return float(sc[g]), np.einsum("g,gij->ij", w, coef), g, float(w @ tk_grid)

    # Direction of travel for the rolling prior: a straight-line fit's velocity.
    lc, *_ = np.linalg.lstsq(np.stack([np.ones(n), tau], axis=1), P, rcond=None)
    speed = float(np.hypot(*lc[1]))
    c_prior = -0.5 * cfg.roll_decel_mm_s2 * lc[1] / speed if speed > 0 else np.zeros(2)
    lam = _ridge_weight(sigma_mm, cfg.roll_decel_sigma_mm_s2)
    n_hat, k_lat = np.zeros(2), 0.0
    if lateral and after:
        n_hat, k_lat = _lateral_prior(_far_heading(tau, P), sigma_mm, cfg)

    def normal_equations(A, ax, roll_col, prior=None):
        """Per axis ``ax``: (j0, A without a pinned c0, pin-shifted y, N = A^T A, h = A^T y),
        with the ridge prior ``lam (c - c_prior)^2`` on ``roll_col`` added to N and h
        (``prior``: another (c_prior, lam) in their place)."""
        cp, lm = (c_prior, lam) if prior is None else prior
        j0 = 0 if free0[ax] else 1
        Aa = A[:, :, j0:] * wt[None, :, None]  # weighted rows: sigma_i / sigma_typical
        y = (P[:, ax] - (0.0 if free0[ax] else pin[ax])) * wt
        N = np.einsum("gni,gnj->gij", Aa, Aa)
        h = np.einsum("gni,n->gi", Aa, y)
        if roll_col is not None:
            N[:, roll_col - j0, roll_col - j0] += lm
            h[:, roll_col - j0] += lm * cp[ax]
        return j0, Aa, y, N, h

    def solve(A, roll_col, prior=None):
        """A (G, n, q) columns c0..c{q-1}; per axis least squares with c0 pinned where asked
        and the ridge prior on ``roll_col`` (``prior`` as in ``normal_equations``). Returns
        coef (G, q, 2), rss (G,), inverse normal matrices (G, 2, q, q) (zero rows/columns for
        a pinned c0)."""
        G, _, q = A.shape
        coef = np.zeros((G, q, 2))
        inv = np.zeros((G, 2, q, q))
        rss = np.zeros(G)
        eqs = [normal_equations(A, ax, roll_col, prior) for ax in range(2)]
        systems = []
        for j0, Aa, y, AtA, Atb in eqs:
            Ai = _batch_inv(AtA)
            systems.append((np.einsum("gij,gj->gi", Ai, Atb), Ai))
        if roll_col is not None and prior is None and k_lat > 0:
            # The rolling piece held straight (``_lateral_prior``): the axes' solves joined.
            systems = _straighten(systems, [roll_col - e[0] for e in eqs], n_hat, k_lat)
        for ax, ((j0, Aa, y, _, _), (c, Ai)) in enumerate(zip(eqs, systems)):
            rss += np.sum((y[None] - np.einsum("gni,gi->gn", Aa, c)) ** 2, axis=1)
            coef[:, j0:, ax] = c
            if not free0[ax]:
                coef[:, 0, ax] = pin[ax]
            inv[:, ax, j0:, j0:] = Ai
        return coef, rss, inv

    theta = np.radians(np.arange(0.0, 360.0, 10.0))
    fine_offsets = np.radians(np.arange(-10.0, 10.25, 0.5))

    def solve_fixed(A, slide_col, roll_col, r, key):
        """As ``solve``, with the slide coefficients held to the circle ``|c_slide| = r``
        (mm/s^2 / 2). Per axis the other coefficients b minimise ``J = c^T N c - 2 h^T c`` for a
        given slide coefficient x, ``b = N_bb^-1 (h_b - N_bx x)``, which leaves
        ``J(x) = alpha x^2 - 2 beta x + const`` (alpha the Schur complement of N_bb); the two
        axes' x = r (cos th, sin th) are then chosen by the angle th. The normal equations and
        their reductions do not depend on r: with ``cache`` they are kept under ``key``."""
        G, _, q = A.shape
        coef = np.zeros((G, q, 2))
        if cache is None or key not in cache:
            inv = np.zeros((G, 2, q, q))
            parts = []
            for ax in range(2):
                j0, Aa, y, N, h = normal_equations(A, ax, roll_col)
                sc = slide_col - j0
                o = [i for i in range(N.shape[1]) if i != sc]
                Nbb_i = _batch_inv(N[:, o][:, :, o])
                inv[:, ax, j0:, j0:] = _batch_inv(N)
                Nbx, hb = N[:, o, sc], h[:, o]
                alpha = N[:, sc, sc] - np.einsum("gi,gij,gj->g", Nbx, Nbb_i, Nbx)
                beta = h[:, sc] - np.einsum("gi,gij,gj->g", Nbx, Nbb_i, hb)
                parts.append((j0, o, sc, Aa, y, Nbb_i, Nbx, hb, alpha, beta))
            lat = None
            if roll_col is not None and k_lat > 0:
                # The rolling piece held straight (``_lateral_prior``): the axes joined.
                roll = [p[1].index(roll_col - p[0]) for p in parts]
                lat = (_straight_slide_terms([p[5:8] for p in parts], roll, n_hat, k_lat),)
                full = [(np.zeros((G, q)), inv[:, ax]) for ax in range(2)]
                for ax, (_, Ai) in enumerate(_straighten(full, [roll_col] * 2, n_hat, k_lat)):
                    inv[:, ax] = Ai
            if cache is not None:
                cache[key] = (parts, inv, lat)
        else:
            parts, inv, lat = cache[key]
        (ax_, ay_) = parts

        def J(th, w):  # th (G, K) angles, w (G,) prior weight mm^2 -> J (G, K) up to a constant
            c, s_ = np.cos(th), np.sin(th)
            out = r * r * (ax_[8][:, None] * c**2 + ay_[8][:, None] * s_**2) \
                - 2.0 * r * (ax_[9][:, None] * c + ay_[9][:, None] * s_)
            if lat is not None:
                kappa, w0, m, _ = lat[0]
                out = out + kappa[:, None] * (w0[:, None] - r * (m[0][:, None] * c
                                                                 + m[1][:, None] * s_)) ** 2
            if dir_prior is not None:
                d = np.angle(np.exp(1j * (th - dir_prior)))  # wrapped to (-pi, pi]
                out = out + w[:, None] * (d / math.radians(cfg.slide_dir_sigma_deg)) ** 2
            return out

        def pick(w):
            """Best angle (G,) for prior weight w, then coef and rss there."""
            # A 10-degree grid, then 0.5 degree within 10 degrees of its best (J has at most
            # two minima on the circle: its stationary points solve a quartic).
            coarse = np.broadcast_to(theta, (G, len(theta)))
            th0 = coarse[np.arange(G), np.argmin(J(coarse, w), axis=1)]
            fine = th0[:, None] + fine_offsets[None, :]
            th = fine[np.arange(G), np.argmin(J(fine, w), axis=1)]
            rss = np.zeros(G)
            if lat is not None:
                kappa, w0, m, cols = lat[0]
                shift = kappa * (w0 - r * (m[0] * np.cos(th) + m[1] * np.sin(th)))  # (G,)
            for ax, (j0, o, sc, Aa, y, Nbb_i, Nbx, hb, _, _) in enumerate(parts):
                x = r * (np.cos(th) if ax == 0 else np.sin(th))  # (G,)
                b = np.einsum("gij,gj->gi", Nbb_i, hb - Nbx * x[:, None])
                if lat is not None:
                    b = b - (shift * n_hat[ax])[:, None] * cols[ax]
                c = np.zeros((G, Aa.shape[2]))
                c[:, o] = b
                c[:, sc] = x
                rss += np.sum((y[None] - np.einsum("gni,gi->gn", Aa, c)) ** 2, axis=1)
                coef[:, j0:, ax] = c
                if not free0[ax]:
                    coef[:, 0, ax] = pin[ax]
            return rss

        rss = pick(np.zeros(G))
        if dir_prior is not None:
            # The prior counts in units of the measurement variance: the larger of the nominal
            # one and what the samples scatter about the fit (real detections carry errors
            # that third differences miss, e.g. a bias that drifts along the path).
            rss = pick(np.maximum(sigma_mm**2, rss / m_obs))
        return coef, rss, inv

    fixed = slide_decel is not None and after

    def tk_prior(tk: np.ndarray, at_least: bool = False) -> np.ndarray:
        """Gaussian prior on the slide's duration (chi-square units, ``slide_tk`` = (mean,
        sd) s); ``at_least``: the duration is tk or longer, so only a shorter mean costs."""
        if slide_tk is None:
            return np.zeros(len(tk))
        d = slide_tk[0] - tk
        if at_least:
            d = np.minimum(d, 0.0)
        return (d / slide_tk[1]) ** 2

    def slide_score(c_slide, rss, k):
        """Criterion (G,) of fits whose sliding piece has coefficients c_slide (G, 2) (half
        its acceleration, mm/s^2): BIC with a soft prior on the deceleration's size, mu_s g
        (Alciatore 2004 typical 0.2, range 0.15-0.4; Mathavan et al. 2009 measured
        1.75-2.40 m/s^2), as a Gaussian term in chi-square units (residual variance of the
        fit) added to the residual sum; inf outside ``slide_decel_min_mm_s2 ..
        slide_decel_max_mm_s2`` (a sliding ball's friction is mu_s m g whatever its speed)."""
        a_slide = 2 * np.hypot(*c_slide.T)
        ok = (a_slide >= cfg.slide_decel_min_mm_s2) & (a_slide <= cfg.slide_decel_max_mm_s2)
        s2_hat = np.maximum(rss, floor) / m_obs
        prior = ((a_slide - cfg.slide_decel_mm_s2) / cfg.slide_decel_sigma_mm_s2) ** 2
        return np.where(ok, bic(rss + prior * s2_hat, k), np.inf)
    dir_prior = None if slide_dir is None else math.atan2(slide_dir[1], slide_dir[0])
    cands = []  # (score, coef (4, 2), inv (2, q, q), rss, k, tk)
    straight_cand = None  # the straight slide's entry, where offered
    one = np.stack([np.ones(n), tau, tau * tau], axis=1)[None]  # (1, n, 3)
    if fixed and n >= 4:
        out = solve_fixed(one, 2, None, 0.5 * slide_decel, "one")
        if out is not None:
            coef, rss, inv = out
            k = 6 - n_pinned  # c0, c1 per axis, the slip angle and the kink beyond the window
            c4 = np.zeros((4, 2))
            c4[:3] = coef[0]
            # Sliding through the window: the slide lasts at least to the last sample.
            pen = tk_prior(np.array([abs(tau[-1])]), at_least=True) * np.maximum(rss, floor) / m_obs
            cands.append((float(bic(rss + pen, k)[0]), c4, inv[0], float(rss[0]), k, None))
    if straight is not None and not after and 3 <= n < cfg.quadratic_min_samples \
            and not fixed and speed > 0:
        # Sliding straight along the path at mu_s g where the samples are too few for the free
        # quadratic: like rolling, with that deceleration's size and its own sd (Laplace,
        # ``_cloth_slide_decel``) as the ridge prior. (Offered at any count, it was chosen on
        # 120 fps approaches it did not fit: tele_120fps restitution 0.015 -> 0.038.) The sd
        # is floored at 1 mm/s^2 (0.05 % of mu_s g) only so a clip whose slides agree exactly
        # (2 mm/s^2 on true centres) gives a finite weight.
        out = solve(one, 2, (-0.5 * straight[0] * lc[1] / speed,
                             _ridge_weight(sigma_mm, max(straight[1], 1.0))))
        coef, rss, inv = out
        c4 = np.zeros((4, 2))
        c4[:3] = coef[0]
        cands.append((float(bic(rss, 4 - n_pinned)[0]), c4, inv[0], float(rss[0]),
                      4 - n_pinned, None))
        straight_cand = cands[-1]
    for roll, k in ((True, 4), (False, 6)):
        if n < (3 if roll else cfg.quadratic_min_samples) or fixed:
            continue
        out = solve(one, 2 if roll else None)
        if out is not None:
            coef, rss, inv = out
            k -= n_pinned
            c4 = np.zeros((4, 2))
            c4[:3] = coef[0]
            score = float((bic(rss, k) if roll or not held
                           else slide_score(coef[:, 2, :], rss, k))[0])
            if math.isfinite(score):
                cands.append((score, c4, inv[0], float(rss[0]), k, None))
    k_near = 1 if fixed else max(cfg.kink_min_samples, 1)
    tk_lo = abs(tau[k_near - 1])
    if fixed and n_pinned:
        # Through a pinned contact the slide may end before the first sample (a slow contact's
        # slide lasts 2 (1 + e) vn / (7 mu_s g), a few ms; Alciatore 2004): its piece is then
        # fixed by the pin and the rolling leg, and a slide of no length is the rolling limit.
        tk_lo = min(tk_lo, 0.5 * step_s)
    if n >= max(k_near + 3, cfg.quadratic_min_samples) and abs(tau[n - 4]) > tk_lo:
        grid = np.arange(tk_lo, abs(tau[n - 4]), step_s)
        tk = (1.0 if after else -1.0) * grid
        mm = np.where(np.abs(tau)[None, :] <= grid[:, None], tau[None, :], tk[:, None])
        r = tau[None, :] - mm
        A = np.stack([np.ones_like(mm), np.broadcast_to(tau, mm.shape), mm * mm + 2 * mm * r,
                      r * r], axis=-1)
        roll_col, slide_col = (3, 2) if after else (2, 3)
        if fixed:
            out = solve_fixed(A, slide_col, roll_col, 0.5 * slide_decel, "kink")
            if out is not None:
                coef, rss, inv = out
                k = 6 - n_pinned  # c0, c1 per axis, the slip angle and tk
                # The penalised least-squares objective the fit minimised, the rolling piece's
                # ridge prior included: a "rolling" piece that decelerates like a slide, which
                # a weak ridge against a long piece lets through, shows in it.
                rss_p = rss + lam * np.sum((coef[:, roll_col, :] - c_prior[None, :]) ** 2,
                                           axis=1) + k_lat * (coef[:, roll_col, :] @ n_hat) ** 2
                r_sc = rss_p if penalised else rss
                sc = bic(r_sc + tk_prior(grid) * np.maximum(r_sc, floor) / m_obs, k)
                score, cg, g, tkg = on_grid(sc, coef, tk)
                cands.append((score, cg, inv[g], float(rss[g]), k, tkg, float(rss_p[g])))
            out = None
        else:
            out = solve(A, roll_col)
        if out is not None:
            coef, rss, inv = out
            k = 4 + cfg.kink_params - n_pinned
            sc = slide_score(coef[:, slide_col, :], rss, k)
            if np.isfinite(sc).any():
                score, cg, g, tkg = on_grid(sc, coef, tk)
                cands.append((score, cg, inv[g], float(rss[g]), k, tkg))
    if not cands:
        return _fit(ts, ps, t0, 1, sigma_mm) if n_pinned == 0 else None
    best = min(cands, key=lambda c: c[0])
    score, c4, inv, rss, k, tk, *pen = best
    slid = straight_cand is not None and best is straight_cand
    rss_pen = pen[0] if pen else rss
    if average and len(cands) > 1:
        sc = np.array([c[0] for c in cands])
        w = np.exp(-0.5 * (sc - score))
        c4 = np.zeros((4, 2))
        for wi, c in zip(w / np.sum(w), cands):
            # Beyond a kink the far piece's acceleration; a model without one keeps its own.
            c4 += wi * (c[1] if c[5] is not None else np.vstack([c[1][:3], c[1][2:3]]))
        kinked = [(wi, c[5]) for wi, c in zip(w / np.sum(w), cands) if c[5] is not None]
        w_k = sum(wi for wi, _ in kinked)
        tk = sum(wi * t for wi, t in kinked) / w_k if w_k >= 0.5 else None
        score = score - 2.0 * math.log(float(np.sum(w)))
    dof = m_obs - k
    measured = dof >= 4
    s2 = max(rss / dof if measured else sigma_mm**2, 1e-8)
    # var p(t) per axis differs when one axis is pinned; keep the larger (free) axis' matrix.
    cov = inv[int(np.argmax([np.trace(inv[0, :3, :3]), np.trace(inv[1, :3, :3])])), :3, :3]
    return _Fit(t0, c4[:3].copy(), cov.copy(), s2, n, 2, tk=tk,
                far=c4[3].copy() if tk is not None else None, k=k, bic=score, rss=rss_pen,
                slid=slid, s2_measured=measured)


def _leverage(ts: np.ndarray, f: _Fit, sigma_mm: float, cfg: "EventConfig",
              weight: np.ndarray | None = None, slide_decel: float | None = None) -> np.ndarray:
    """Leverage (n,) of each sample ts (n,) s on the fit ``f`` of one side of a contact
    (``_piecewise_fit``, unpinned): the mean over the two axes of the hat matrix's diagonal
    ``h = diag(X (X^T X + L)^-1 X^T)`` of the chosen model linearised at its kink time, rows
    weighted by ``weight`` as the fit weighs them.

    The model's columns, per axis: ``1, tau`` and the acceleration pieces (``_piecewise_fit``:
    one quadratic, or sliding and rolling pieces joined at ``f.tk``); ``L`` the rolling piece's
    ridge prior (``_ridge_weight``; a model of four parameters, rolling or sliding straight,
    has its one piece held so, a six-parameter one's is free). With the cloth's ``slide_decel``
    held on a departure, the slide's two coefficients are one parameter, its direction: the
    column is the derivative of the slide term along the circle, shared by both axes
    (Gauss-Newton linearisation). The kink time itself is left out (a profile over a grid).

    A sample's residual has variance ``sigma^2 (1 - h)`` in a linear least-squares fit, so one
    the fit leans on (``h`` near 1, as a departure's first sample is on its short slide) shows
    little residual however far off it lies, while it pulls its neighbours' residuals up:
    the internally studentised residual ``r / sqrt(1 - h)`` puts every sample on one scale
    (Cook & Weisberg 1982, Residuals and Influence in Regression, ch. 2; Belsley, Kuh & Welsch
    1980), and for one gross error in otherwise exact samples it is largest at that sample
    (``I - H`` is a projection, so ``h_ij^2 <= (1 - h_ii)(1 - h_jj)``)."""
    n = len(ts)
    tau = ts - f.t0
    after = bool(np.max(tau) > 0)
    wt = np.ones(n) if weight is None else np.asarray(weight, float)
    if f.tk is not None:
        m = np.where(np.abs(tau) <= abs(f.tk), tau, f.tk)
        r = tau - m
        cols = [np.ones(n), tau, m * m + 2 * m * r, r * r]
        roll_col, slide_col = (3, 2) if after else (2, 3)
    else:
        cols = [np.ones(n), tau, tau * tau][: f.deg + 1]
        roll_col = 2 if f.deg == 2 and f.k <= 4 else None
        slide_col = 2 if f.deg == 2 and f.k > 4 else None
    X = np.stack(cols, axis=1) * wt[:, None]  # (n, q) per axis
    q = X.shape[1]
    fixed = slide_decel is not None and after and slide_col is not None
    own = [j for j in range(q) if not (fixed and j == slide_col)]
    # Joint design over both axes (2n rows: x then y): each axis' own columns, and with the
    # slide held to its circle one shared column for its direction.
    blocks = [np.kron(np.eye(2)[:, [ax]], X[:, own]) for ax in range(2)]
    J = np.concatenate(blocks, axis=1)
    ridge = np.zeros(J.shape[1])
    if roll_col is not None:
        lam = _ridge_weight(sigma_mm, cfg.roll_decel_sigma_mm_s2)
        k = own.index(roll_col)
        ridge[[k, len(own) + k]] = lam
    if fixed:
        c = f.coef[slide_col] if slide_col < 3 else f.far
        d = np.array([-c[1], c[0]])  # d(c)/d(angle) along the circle
        J = np.concatenate([J, np.concatenate([X[:, slide_col] * d[0],
                                               X[:, slide_col] * d[1]])[:, None]], axis=1)
        ridge = np.append(ridge, 0.0)
    N = J.T @ J + np.diag(ridge)
    h = np.einsum("ij,ji->i", J, np.linalg.pinv(N) @ J.T)
    return 0.5 * (h[:n] + h[n:])


def _real_roots(coeffs_high_first, lo: float, hi: float) -> np.ndarray:
    """Real roots (k,) of a polynomial (numpy order) in [lo, hi]."""
    c = np.trim_zeros(np.asarray(coeffs_high_first, dtype=float), "f")
    if len(c) < 2:
        return np.zeros(0)
    r = np.roots(c)
    r = r[np.abs(r.imag) <= 1e-9 * np.maximum(1.0, np.abs(r.real))].real
    return r[(r >= lo) & (r <= hi)]


def _roots_near(coeffs_high_first, t_guess_tau: float, lo: float, hi: float) -> float | None:
    """Real root of a polynomial (numpy order) in [lo, hi] nearest ``t_guess_tau``, else None."""
    r = _real_roots(coeffs_high_first, lo, hi)
    if not len(r):
        return None
    return float(r[np.argmin(np.abs(r - t_guess_tau))])


# --- per-track data --------------------------------------------------------------------------
@dataclass
class _Ball:
    track: int
    t: np.ndarray  # (N,) s
    frame: np.ndarray  # (N,)
    p: np.ndarray  # (N, 2) smoothed mm
    v: np.ndarray  # (N, 2) smoothed mm/s
    raw: np.ndarray  # (N, 2) raw measurement mm, NaN where unseen
    sigma: float = 1.0  # detection noise per axis, mm, estimated from the samples
    sigma_fit: float = 1.0  # the same at the scale of a contact's fits (drift included), mm
    moves: list = field(default_factory=list)  # [(i0, i1)] index ranges, inclusive
    marks: list = field(default_factory=list)  # rough event times, s
    respots: list = field(default_factory=list)  # times the ball was put down elsewhere, s
    strikes: list = field(default_factory=list)  # first instants past a strike from rest, s
    begun: dict = field(default_factory=dict)  # first row -> s a found-rolling motion began
    struck: dict = field(default_factory=dict)  # first row -> s of the collision that set a slow motion going
    firsts: tuple = (0,)  # first row of each stay on the table (``_motion``)
    fast: list = field(default_factory=list)  # [(i0, i1)] stretches above the rest speed
    weight: np.ndarray | None = None  # (N,) typical detection sigma over each sample's, or None
    striped: bool = False  # the tracker's pattern label is ``stripe`` (``_Finder._depart_reach``)

    def weights(self, ts: np.ndarray) -> np.ndarray | None:
        """Relative weights (n,) of the samples at times ts (from ``samples``), or None."""
        if self.weight is None:
            return None
        return self.weight[np.searchsorted(self.t, ts)]

    def samples(self, t_lo: float, t_hi: float, exclude=None) -> tuple[np.ndarray, np.ndarray]:
        """Raw samples with t_lo < t < t_hi: ts (n,), ps (n, 2); ``exclude`` (t, half-width)
        drops those within half-width of t."""
        ok = (self.t > t_lo) & (self.t < t_hi) & np.isfinite(self.raw[:, 0])
        if exclude is not None:
            ok &= np.abs(self.t - exclude[0]) >= exclude[1]
        return self.t[ok], self.raw[ok]

    def bounds(self, t_event: float, guard: float) -> tuple[float, float]:
        """Neighbouring rough event times of this ball around ``t_event`` (beyond ``guard``).

        A strike from rest (``strikes``) bounds what follows it however soon: a contact a frame
        or two after it must not be fitted through the rest before it."""
        before = [m for m in self.marks if m < t_event - guard] + \
            [m for m in self.strikes if m < t_event]
        after = [m for m in self.marks + self.strikes if m > t_event + guard]
        return (max(before) if before else -math.inf, min(after) if after else math.inf)


def _balls(tracks: pd.DataFrame, detections: pd.DataFrame | None, radius_mm: float) -> list[_Ball]:
    tracks = tracks.sort_values(["track", "frame"], kind="stable")
    det_by_frame = None
    if detections is not None and len(detections):
        missing = [c for c in ("frame", "x", "y") if c not in detections.columns]
        if missing:
            raise ValueError(f"detections lack column(s) {', '.join(missing)}")
        # Split by frame with numpy: a pandas groupby per frame costs more than the fits.
        f_all = detections["frame"].to_numpy(np.int64)
        order = np.argsort(f_all, kind="stable")
        xy_all = detections[["x", "y"]].to_numpy(float)[order]
        sig_all = (detections["sigma_mm"].to_numpy(float)[order] if "sigma_mm" in detections
                   else np.full(len(order), np.nan))
        uniq, first = np.unique(f_all[order], return_index=True)
        det_by_frame = dict(zip(uniq.tolist(), zip(np.split(xy_all, first[1:]),
                                                   np.split(sig_all, first[1:]))))
    out = []
    for tid, g in tracks.groupby("track", sort=True):
        p = g[["x", "y"]].to_numpy(float)
        seen = g["seen"].to_numpy() > 0
        frames = g["frame"].to_numpy(np.int64)
        weight = None
        if det_by_frame is not None:
            raw = np.full_like(p, np.nan)
            sig = np.full(len(p), np.nan)
            for k in np.flatnonzero(seen):
                cand, cs = det_by_frame.get(int(frames[k]), (None, None))
                if cand is None:
                    continue
                d = np.hypot(*(cand - p[k]).T)
                j = int(np.argmin(d))
                if d[j] < radius_mm:
                    raw[k] = cand[j]
                    sig[k] = cs[j]
            ok = np.isfinite(sig) & (sig > 0)
            if ok.any():
                # Each sample weighs by the detector's own noise estimate relative to the
                # track's typical one (weighted least squares; the scale stays the residuals').
                weight = np.ones(len(p))
                weight[ok] = np.median(sig[ok]) / sig[ok]
        elif {"x_meas", "y_meas"} <= set(g.columns):
            raw = g[["x_meas", "y_meas"]].to_numpy(float).copy()
            raw[~seen] = np.nan
        else:
            raw = p.copy()
            raw[~seen] = np.nan
        out.append(_Ball(int(tid), g["t"].to_numpy(float), frames, p,
                         g[["vx", "vy"]].to_numpy(float), raw, weight=weight,
                         striped=_striped(g)))
    return out


def _striped(g: pd.DataFrame) -> bool:
    """Whether one track's rows ``g`` are mostly labelled ``stripe`` (the tracker's
    ``pattern`` column, from the detector's labels); False without the column."""
    if "pattern" not in g.columns or not len(g):
        return False
    return bool(np.mean(g["pattern"].to_numpy() == "stripe") > 0.5)


def _breaks(ball: _Ball, diameter_mm: float) -> np.ndarray:
    """Rows (k,) after which the track leaves frames out (the ball was off the table) or jumps
    between consecutive rows further than its smoothed speeds allow: a ball lifted and put down
    elsewhere keeps its id (``tracking.tracker``) but is not one stay on the table. Allowed: a
    diameter (a strike from rest within one frame) plus twice the distance the faster of the
    two rows' speeds covers in the interval.

    A jump onto a seen row from rows the tracker only coasted (unseen: its prediction, not the
    ball) is no break where it is a strike the detector missed: the seen row's path, traced
    back along its velocity, passes within a diameter of the last seen place, no farther back
    than a diameter plus twice its speed times the time unseen (a ball only slows after a
    strike, so it covered at most that), and that speed carries it over a diameter in that
    time (it is moving when seen again). lamp_50fps: the cue ball struck from rest, unseen for
    five frames at 3.3 m/s and coasted at its resting velocity, was found 269 mm from the
    coasted place, 8 mm off that traced-back line; the break cost the shot its start. A ball
    put down by hand lies still when seen again, so its jump stays a break (cushion_check: the
    cue ball lost rolling and put down 51 mm from where it was last seen, 0.37 s later)."""
    if len(ball.t) < 2:
        return np.zeros(0, dtype=int)
    step = np.hypot(*np.diff(ball.p, axis=0).T)
    sp = np.hypot(*ball.v.T)
    allow = diameter_mm + 2.0 * np.maximum(sp[:-1], sp[1:]) * np.diff(ball.t)
    seen = np.isfinite(ball.raw[:, 0])
    out = []
    for j in np.flatnonzero((step > allow) | (np.diff(ball.frame) > 1)):
        m = j + 1
        prev = np.flatnonzero(seen[:m])
        if ball.frame[m] - ball.frame[j] == 1 and seen[m] and len(prev) and prev[-1] < j \
                and np.all(np.diff(ball.frame[prev[-1]:m + 1]) == 1) and sp[m] > 0:
            k = int(prev[-1])
            back = ball.p[k] - ball.p[m]
            u = ball.v[m] / sp[m]
            s_back = -float(back @ u)
            perp = float(np.hypot(*(back + s_back * u)))
            reach = sp[m] * (ball.t[m] - ball.t[k])
            if reach > diameter_mm and perp <= diameter_mm and \
                    0.0 <= s_back <= diameter_mm + 2.0 * reach:
                continue  # a strike unseen, not a put-down
        out.append(int(j))
    return np.asarray(out, dtype=int)


def _respots(ball: _Ball, diameter_mm: float) -> list[float]:
    """Times (s, midway) between the rows of ``_breaks``: the ball's path must not be fitted
    across them."""
    return [float(0.5 * (ball.t[i] + ball.t[i + 1])) for i in _breaks(ball, diameter_mm)]


def _resting(ball: _Ball, sigma_mm: float, window_s: float,
             ends: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Whether ``ball`` lies still over ``window_s`` from each row on, and whether that could
    be tested there: two (N,) bool arrays (a resting row is a tested one).

    Row k rests when the raw samples of rows k..m (``t_m <= t_k + window_s``, all within the
    stay on the table that ends at row ``ends[k]``, the window covered to within half a frame)
    fit a straight line whose velocity is zero within its noise: ``|v|^2 / se^2`` below the
    99th percentile of chi-squared with 2 degrees of freedom (a resting ball is taken for a
    moving one in one window of a hundred, which delays a motion's end by a row), ``v`` the
    least-squares slope of each axis and ``se^2 = sigma_mm^2 / sum (t - t_mean)^2`` (the
    window's own scatter is no scale: a resting detection the detector carries over unchanged
    has none, and a stray detection of something else inflates it until a ball still rolling
    passes for resting; a window holding one is called moving instead, and the rest begins
    past it). A velocity test rather than a speed threshold:
    over 0.3 s at 60 fps with 1 mm noise the slope is known to about 3 mm/s, while a ball
    rolling at mu_r g (Alciatore 2004, about 0.1 m/s^2) still moves at 50 mm/s half a second
    and 12 mm before it stops. Untested: fewer than three seen samples in the window, or the
    window not covered (the stay ends within it).
    """
    n = len(ball.t)
    if n == 0:
        return np.zeros(0, bool), np.zeros(0, bool)
    ok = np.isfinite(ball.raw[:, 0])
    ref = np.nanmean(ball.raw, axis=0) if ok.any() else np.zeros(2)
    t = ball.t - ball.t[0]
    z = np.where(ok[:, None], ball.raw - ref, 0.0)
    w = ok.astype(float)
    tw = np.where(ok, t, 0.0)

    def csum(a):
        return np.concatenate([np.zeros((1,) + a.shape[1:]), np.cumsum(a, axis=0)])
    S = [csum(a) for a in (w, tw, tw * t, z, z * tw[:, None])]
    m = np.searchsorted(ball.t, ball.t + window_s + 1e-9, side="right") - 1
    full = (ball.t[m] >= ball.t + window_s - 0.5 * (ball.t[1] - ball.t[0] if n > 1 else 0.0)) \
        & (m <= ends)
    k = np.arange(n)
    cnt, st, stt, sz, stz = (s[m + 1] - s[k] for s in S)
    with np.errstate(invalid="ignore", divide="ignore"):
        sxx = stt - st * st / cnt
        sxy = stz - (st / cnt)[:, None] * sz
        slope = sxy / sxx[:, None]
        z2 = np.sum(slope**2, axis=1) * sxx / sigma_mm**2
    tested = full & (cnt >= 3) & (sxx > 0)
    return tested & (z2 < _REST_CHI2), tested


def _d3_sigma(ball: _Ball, rows: np.ndarray) -> float | None:
    """White detection noise per axis (mm) from third differences of four seen samples in
    consecutive frames, the first and last in ``rows`` (N,) bool: a quadratic path has zero
    third difference, so for white noise of variance s^2 it has variance 20 s^2 (binomial
    weights 1, 3, 3, 1), and the median absolute value is 0.674 of its standard deviation.
    None with fewer than ten differences."""
    r = ball.raw
    ok = np.isfinite(r[:, 0])
    consecutive = np.diff(ball.frame) == 1
    good = ok[3:] & ok[2:-1] & ok[1:-2] & ok[:-3] & consecutive[2:] & consecutive[1:-1] \
        & consecutive[:-2] & rows[3:] & rows[:-3]
    d3 = (r[3:] - 3 * r[2:-1] + 3 * r[1:-2] - r[:-3])[good].ravel()
    if len(d3) < 10:
        return None
    return float(np.median(np.abs(d3))) / 0.6745 / math.sqrt(20.0)


def _still_sigma(ball: _Ball, fast: list[tuple[int, int]]) -> float:
    """Detection noise per axis (mm) of ``ball`` off its fast stretches (rows outside
    ``fast``, ``_d3_sigma``; 0 where too few). A resting ball's detection carried over
    unchanged (``vision.detect``) gives zero, a slow tail almost zero (a quadratic path has
    none), while a resting ball's jitter on other footage (a flickering light, a noisy
    sensor) may exceed the moving samples' noise, and the rest test must not call such a ball
    moving."""
    off = np.ones(len(ball.t), bool)
    for i0, i1 in fast:
        off[i0:i1 + 1] = False
    return _d3_sigma(ball, off) or 0.0


def _stays(ball: _Ball, diameter_mm: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The ball's stays on the table between the track's breaks (``_breaks``): each stay's
    first and last row, (S,) each, and each row's stay's last row (N,)."""
    n = len(ball.t)
    brk = _breaks(ball, diameter_mm)
    firsts = np.concatenate([[0], brk + 1]).astype(int)
    lasts = np.concatenate([brk, [n - 1]]).astype(int)
    return firsts, lasts, np.repeat(lasts, np.diff(np.append(firsts, n)))


def _motion(ball: _Ball, cfg: EventConfig, diameter_mm: float) -> None:
    """Moving stretches of ``ball``: from where its smoothed speed rises (hysteresis between
    ``rest_speed_mm_s`` and ``move_speed_mm_s``) until it really lies still (``_resting``).

    A rolling ball slows at mu_r g only (Alciatore 2004): under the rest speed it still rolls
    for half a second and a centimetre, its smoothed speed dipping and rising with the noise.
    So a stretch ends at the first row from which the ball rests for ``min_rest_s``; stretches
    with no rest between them are one motion (a ball at rest stays at rest until something
    strikes it, and a player needs far longer than ``min_rest_s`` to strike again). A motion
    never runs across a break in the track (``_breaks``: off the table, or put down
    elsewhere). One whose ball is seen moving before it within its stay (no rest window
    between the stay's first row and the motion) began before the stay was seen: it starts
    at the stay's first row (a ball put down by hand, or a track picked up mid-roll).

    Sets ``ball.moves`` (the motions), ``ball.firsts`` (each stay's first row), ``ball.fast``
    (the stretches above the rest speed, merged across dips shorter than ``min_rest_s``: the
    contacts are found on these; their fits are bounded by the motions, ``find_events``) and
    ``ball.sigma, ball.sigma_fit`` (``_noise_sigma`` over the fast stretches; the rest test's
    scale is the larger of that and the noise off them, ``_still_sigma``).
    """
    n = len(ball.t)
    speed = np.hypot(*ball.v.T)
    firsts, lasts, piece_end = _stays(ball, diameter_mm)
    ball.firsts = tuple(int(f) for f in firsts)
    runs = []
    for p0, p1 in zip(firsts, lasts):
        moving, i0 = False, p0
        for k in range(p0, p1 + 1):
            s = speed[k]
            if not moving and s > cfg.move_speed_mm_s:
                moving, i0 = True, k
                # Back up over the rising edge: the motion began where the speed left rest.
                while i0 > p0 and speed[i0 - 1] > cfg.rest_speed_mm_s:
                    i0 -= 1
            elif moving and s < cfg.rest_speed_mm_s:
                runs.append((i0, k - 1))
                moving = False
        if moving:
            runs.append((i0, p1))
    # A motion is real only if the ball travels: a resting ball's jittery detections, a new
    # track's first velocity estimates or a flickering false detection can lift the smoothed
    # speed over the threshold in place.
    # Nor does it begin before the ball has left its spot for good (``_left_for_good``).
    stay_of = [int(firsts[np.searchsorted(firsts, a, side="right") - 1]) for a, _ in runs]
    dt = float(np.median(np.diff(ball.t))) if len(ball.t) > 1 else 0.0
    runs = [r for r in (_left_for_good(ball, a, b, cfg, p0, dt) for (a, b), p0 in zip(runs, stay_of))
            if r is not None]
    runs = [(a, b) for a, b in runs
            if (ball.t[b] - ball.t[a] >= cfg.min_move_s or b > a + 2)
            and np.max(np.hypot(*(ball.p[a:b + 1] - ball.p[a]).T)) >= cfg.min_travel_mm]
    if not runs:
        ball.moves = ball.fast = []
        ball.sigma, ball.sigma_fit = _noise_sigma(ball, cfg)
        return
    # The detection noise is measured on the fast stretches, merged where they dip under the
    # rest speed for less than ``min_rest_s`` (``_noise_sigma``): it scales the rest test
    # below and every contact's fits.
    fast: list[tuple[int, int]] = []
    for a, b in runs:
        if fast and ball.t[a] - ball.t[fast[-1][1]] < cfg.min_rest_s:
            fast[-1] = (fast[-1][0], b)
        else:
            fast.append((a, b))
    ball.moves = ball.fast = fast
    ball.sigma, ball.sigma_fit = _noise_sigma(ball, cfg)
    rest, tested = _rest_windows(ball, cfg, piece_end)
    # Last row of each row's rest window.
    w_end = np.searchsorted(ball.t, ball.t + cfg.min_rest_s + 1e-9, side="right") - 1
    merged: list[tuple[int, int]] = []
    for a, b in runs:
        if merged and piece_end[merged[-1][1]] == piece_end[a] and (
                merged[-1][1] >= a - 1 or ball.t[a] - ball.t[merged[-1][1]] < cfg.min_rest_s):
            a0, b0 = merged.pop()  # never at rest in between
            a, b = a0, max(b, b0)
        elif not merged or piece_end[merged[-1][1]] != piece_end[a]:
            # Seen moving, and never seen resting, before the motion within its stay.
            p0 = int(firsts[np.searchsorted(firsts, a, side="right") - 1])
            before = np.arange(p0, a)[w_end[p0:a] < a]
            if len(before) and tested[before].any() and not rest[before].any():
                a = p0
        # The motion runs on until the ball rests (or its stay on the table ends).
        still = np.flatnonzero(rest[b + 1:piece_end[b] + 1])
        b = b + int(still[0]) if len(still) else int(piece_end[b])
        merged.append((a, max(a, b)))
    ball.moves = merged


def _rest_position(b: _Ball, i0: int, lo: float, dt: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Where ``b`` rests before row ``i0``: the median (2,) mm of its raw samples over the half
    second before that row (after ``lo``, s), their times (n,) s, and the distance (mm) beyond
    which a sample is clearly off that place (three times the samples' median scatter about it,
    at least 1 mm)."""
    rest_t, rest_p = b.samples(max(lo, b.t[i0] - 0.5) - 1e-9, b.t[i0] - 0.5 * dt)
    if not len(rest_p):
        rest_p = b.p[max(0, i0 - 1)][None]
        rest_t = b.t[max(0, i0 - 1)][None]
    p_rest = np.median(rest_p, axis=0)
    scatter = float(np.median(np.hypot(*(rest_p - p_rest).T))) if len(rest_p) > 2 else 0.0
    return p_rest, rest_t, max(3.0 * scatter, 1.0)


def _rest_point(ps: np.ndarray) -> np.ndarray | None:
    """Where a ball lies through a stay at rest (2,) mm: the median of each coordinate of its
    raw reads ps (n, 2) mm in time order, robust to the crawl's last reads and a stray
    read; None under three distinct reads (too few to outvote one). Unweighted: a read carried
    over unchanged frames keeps its stated sd, and weighted it would hardly count; counted once
    (consecutive identical reads are one), since once per frame it would outvote the rest
    (phone_wide_30fps's nudged 8: one read carried seven times pulled its stop 0.19 s late)."""
    if len(ps) > 1:
        # A read carried over unchanged frames is one read, however many frames repeat it.
        ps = ps[np.r_[True, np.any(ps[1:] != ps[:-1], axis=1)]]
    if len(ps) < 3:
        return None
    return np.median(ps, axis=0)


def _returned(raw: np.ndarray, p_rest: np.ndarray, thr: float, reach_mm: float) -> int | None:
    """Index into ``raw`` (n, 2) mm (NaN where unseen), samples from a ball's rest at
    ``p_rest`` (2,) mm on, of the last seen sample that is back where the ball has lain
    since, after one clearly off it (beyond ``thr`` mm), or None. Back where it has lain:
    within ``thr`` of the rest position, or of a sample off it that the reads came back from
    (the detector flicking between the ball and its error). Scanned until a sample lies
    ``reach_mm`` from the rest position (the ball has then travelled)."""
    places = [np.asarray(p_rest, float)]
    offs: list[np.ndarray] = []
    last = None
    for k, z in enumerate(raw):
        if not np.isfinite(z[0]):
            continue
        if math.hypot(*(z - p_rest)) > reach_mm:
            break
        if min(math.hypot(*(z - q)) for q in places) <= thr:
            if offs or last is not None:
                last = k
            places.extend(offs)
            offs = []
        else:
            offs.append(z)
    return last


def _left_for_good(ball: _Ball, a: int, b: int, cfg: EventConfig, p0: int, dt: float) -> tuple[int, int] | None:
    """The moving stretch rows ``a..b`` of ``ball`` (stay beginning at row ``p0``; ``dt`` s its
    frame interval) begun where the ball left its rest position for good, or None when nothing
    of it is left.

    A ball struck from rest runs away from its spot until its next contact (it only slows;
    Alciatore 2004): it never comes back to where it lay, nor to a place it has been, before
    it has travelled. So raw samples back on the rest position (``_rest_position``) after
    samples off it, or back on such an off sample, show that the ball had not left yet: the
    detector was flicking between the ball and an error. The stretch begins after the last
    such return, found before the ball is ``min_travel_mm`` from its spot (``_returned``).
    Extra clip uneven_60fps (automatic calibration): ball 15, resting, read 4.2 mm off its spot
    toward the cue ball rolling at it in frames 595, 596, 598 and 599 and back on it in 597
    (stated sigma 0.6-0.9 mm, a carried-over read's scatter 0), was struck at frame 599.1;
    the tracker's velocity restarts lifted its smoothed speed over the move speed from frame
    597, so its stretch began at frame 594, the collision came too late after it to count as
    what set it going (``_set_moving``) and a start at 9.917 s (23 mm/s) was reported."""
    p_rest, _, thr = _rest_position(ball, a, float(ball.t[p0]) - 1e-9, dt)
    r = _returned(ball.raw[a:b + 1], p_rest, thr, cfg.min_travel_mm)
    if r is None:
        return a, b
    return (a + r + 1, b) if a + r + 1 <= b else None


def _rest_windows(ball: _Ball, cfg: EventConfig, piece_end: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``_resting`` of ``ball`` once ``_motion`` has set its noise and fast stretches: windows of
    ``min_rest_s`` within each stay (``piece_end``, each row's stay's last row), tested against
    the larger of the ball's noise and its still scatter (``_still_sigma``)."""
    return _resting(ball, max(ball.sigma, _still_sigma(ball, ball.fast)), cfg.min_rest_s, piece_end)


def _found_rolling(ball: _Ball, cfg: EventConfig, diameter_mm: float) -> list[tuple[int, int]]:
    """Stays of ``ball`` with no motion (``_motion``) that begin with the ball rolling and end
    at rest: (first row, row before the rest) index ranges. Such a stay's first tested rest
    window (``_resting``, starting within ``min_rest_s`` of the stay) finds a velocity beyond its
    noise and a later one finds none: a ball first seen rolling slower than
    ``move_speed_mm_s`` (a rack ball nudged by a break and not seen before it was parted from
    the rack, or a slow ball lost and found again under a new id) that comes to rest, which
    the speed hysteresis never counts as moving."""
    if len(ball.t) < 2:
        return []
    firsts, lasts, piece_end = _stays(ball, diameter_mm)
    rest, tested = _rest_windows(ball, cfg, piece_end)
    out = []
    for p0, p1 in zip(firsts, lasts):
        if any(p0 <= i0 <= p1 for i0, _ in ball.moves):
            continue
        first = p0 + np.flatnonzero(tested[p0:p1 + 1])
        if not len(first) or ball.t[first[0]] > ball.t[p0] + cfg.min_rest_s or rest[first[0]]:
            continue
        still = np.flatnonzero(rest[first[0]:p1 + 1])
        if len(still):
            out.append((int(p0), int(first[0] + still[0] - 1)))
    return out


def _add_found_rolling(balls: list[_Ball], cfg: EventConfig, diameter_mm: float) -> None:
    """Add to each ball's motions the stays it was first seen rolling in (``_found_rolling``)
    that begin while another ball is in motion or within ``min_rest_s`` of one ending (a ball
    rolls only when something struck it during a shot; a ball put down by hand between shots
    is not rolling), or no farther from where another track vanished rolling than that ball
    could have rolled since (the same ball lost and found again; ``_Ball.begun`` then holds
    the loss's time, where the motion counts from for its shot): so their stops are found.
    They come after every contact is measured, so they change no fit; they have no start
    (first seen moving)."""
    spans = [(b.track, float(b.t[i0]), float(b.t[i1])) for b in balls for i0, i1 in b.moves]
    # Motions cut short by their track's end before the clip's (a ball lost while rolling):
    # (track, last time s, last position mm, last speed mm/s).
    t_clip = max(float(b.t[-1]) for b in balls)
    lost = [(b.track, float(b.t[i1]), b.p[i1], float(np.hypot(*b.v[i1])))
            for b in balls for _, i1 in b.moves if i1 == len(b.t) - 1 and b.t[i1] < t_clip]

    def begun(b: _Ball, a: int) -> float | None:
        """When (s) the motion first seen at row ``a`` was under way, None if in no shot."""
        t_a = float(b.t[a])
        if any(tr != b.track and t0 <= t_a <= t1 + cfg.min_rest_s for tr, t0, t1 in spans):
            return t_a
        # Or the same ball lost while rolling and found again: no farther than it could have
        # rolled at its last speed (a rolling ball only slows), give or take a diameter; its
        # motion, for the shot, runs from where it was lost.
        return next((t_e for tr, t_e, p_e, v_e in lost if tr != b.track and 0.0 <= t_a - t_e
                     and np.hypot(*(b.p[a] - p_e)) <= v_e * (t_a - t_e) + diameter_mm), None)

    for b in balls:
        for a, e in _found_rolling(b, cfg, diameter_mm):
            t_b = begun(b, a)
            if t_b is not None:
                b.moves = sorted(b.moves + [(a, e)])
                b.begun[a] = t_b


def _add_struck_slow(balls: list[_Ball], collisions: dict[int, list[tuple[float, int]]],
                     cfg: EventConfig, dt: float, diameter_mm: float) -> None:
    """Add to each ball's motions those a collision sets going that the speed hysteresis never
    counts (``_motion``): a ball struck thinly or at the far end of a cluster (a rack, a ball
    driven through touching balls) leaves at a few centimetres per second and rolls to rest
    within ``min_travel_mm`` without its smoothed speed reaching ``move_speed_mm_s``. It has
    moved all the same (a collision is a velocity change of both balls: equal masses exchange
    equal and opposite momentum, common practice), so it has a stop. The motion runs from the
    first row at or after the collision (``collisions``: track -> [(time s, other track)], the
    solved collision rows) to the row before the ball's first rest window from there on
    (``_resting``), within its stay on the table; a collision within an existing motion (from
    three frames before its first row to one frame after its last, as ``_set_moving`` and the
    stop's last contact count them) adds none, nor one after which the ball never rests on
    the table (pocketed, lifted, or still rolling at the clip's end). ``_Ball.struck`` holds
    each added motion's collision time, where the motion begins (no start: the collision set
    it going)."""
    for b in balls:
        times = sorted(t for t, _ in collisions.get(b.track, []))
        if not times or len(b.t) < 2:
            continue
        _, _, piece_end = _stays(b, diameter_mm)
        rest, _ = _rest_windows(b, cfg, piece_end)
        for tc in times:
            if any(b.t[i0] - 3 * dt <= tc <= b.t[i1] + dt for i0, i1 in b.moves):
                continue
            i0 = int(np.searchsorted(b.t, tc))
            if i0 >= len(b.t):
                continue
            still = np.flatnonzero(rest[i0:piece_end[i0] + 1])
            if not len(still):
                continue
            b.moves = sorted(b.moves + [(i0, max(i0, i0 + int(still[0]) - 1))])
            b.struck[i0] = float(tc)


def _noise_sigma(ball: _Ball, cfg: EventConfig) -> tuple[float, float]:
    """Detection noise per axis (mm), (white, at the fits' scale).

    *White*: from third differences of consecutive raw samples of the ball's motions
    (``_d3_sigma``). Contacts spoil a few differences; the median ignores them.
    Samples at rest are left out: the detector carries a resting ball's detection over
    unchanged from frame to frame (``vision.detect``, step 2), so their differences are zero
    and, on a track resting longer than it moves, would put the noise of the moving samples
    the fits use at nothing (a blue ball resting 6 s, then moving 4 s with its detections
    missing every few frames in a dim corner at 30 fps: 0.07 mm, against 1.3 mm from its
    moving samples alone; ``benchmarks/analyse_accuracy.py --extra``, phone_wide_30fps).

    *At the fits' scale*: real detection errors also drift slowly along a path (a blur streak's
    or a shadow's bias changing with position and speed), which third differences of
    neighbouring frames cancel but a fit over ``fit_window_s`` does not. So the moving samples
    are also cut into runs of ``2 quadratic_min_samples`` consecutive frames, each run fitted by
    a quadratic per axis, and ``s^2 = RSS / (2 (W - 3))`` taken per run (unbiased for white
    noise, so both estimates agree there); the median over at least three runs (a run holding a
    contact or a slide's end is an outlier the median ignores), and never below the white one.
    Runs are those seen whole; where there are fewer than three, those with at least half their
    frames seen (``_run_s2``), so a ball the detector misses every few frames is not left
    with the white estimate alone.
    The cushion fits test their models against the second; the collision fits, grown sample by
    sample from the contact to find where a parabola stops explaining the path
    (``_Finder._grow``), against the first, since there the next frames matter, not the drift.
    """
    moving = _moving_rows(ball)
    white = _d3_sigma(ball, moving)
    if white is None:
        return cfg.meas_sigma_mm, cfg.meas_sigma_mm
    white = max(white, 0.05)
    w = 2 * cfg.quadratic_min_samples
    s2 = _run_s2(ball, w, w)
    if len(s2) < 3:
        # A track the detector misses every few frames (cheapwide_25fps extra clip's
        # green-stripe 14 at crf 32: 1 run of 12 frames seen throughout in 80 moving frames)
        # has too few whole runs, and its third differences see only the white part of an
        # error that drifts over the fits' span (there 0.92 mm white, 2.9 mm over runs with
        # gaps, against the detector's own 2.4-3.1 mm and true errors of 4.4 mm median):
        # runs with half their frames seen stand in.
        s2 = _run_s2(ball, w, cfg.quadratic_min_samples)
    if len(s2) < 3:
        return white, white
    return white, max(white, math.sqrt(float(np.median(s2))))


def _run_s2(ball: _Ball, w: int, min_seen: int) -> list[float]:
    """Per-axis residual variances (mm^2) of a quadratic fitted per axis to each run of ``w``
    consecutive frames of ``ball``'s motions holding at least ``min_seen`` seen samples (RSS
    over ``2 (n - 3)``, unbiased for white noise; runs taken one after another, a run that
    fails the count moving on by one frame)."""
    ok = np.isfinite(ball.raw[:, 0])
    s2 = []
    for i0, i1 in ball.moves:
        k = i0
        while k + w <= i1 + 1:
            sl = slice(k, k + w)
            seen = ok[sl]
            if seen.sum() >= min_seen and np.all(np.diff(ball.frame[sl]) == 1):
                tau = ball.t[sl][seen] - ball.t[k]
                A = np.vander(tau, 3, increasing=True)
                _, rss, *_ = np.linalg.lstsq(A, ball.raw[sl][seen], rcond=None)
                s2.append(float(np.sum(rss)) / (2 * (int(seen.sum()) - 3)))
                k += w
            else:
                k += 1
    return s2


# --- events ----------------------------------------------------------------------------------
def find_events(
    tracks: pd.DataFrame,
    table: TableSpec,
    detections: pd.DataFrame | None = None,
    config: EventConfig | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Events and shots of a clip from its tracks; see the module docstring.

    Returns ``(events, shots)`` with columns ``EVENT_COLUMNS`` and ``SHOT_COLUMNS``; events are in
    time order, numbered from 0. ValueError if ``tracks`` lacks a required column. Inputs are not
    modified.
    """
    events, shots, _ = find_events_and_rests(tracks, table, detections, config)
    return events, shots


def find_events_and_rests(
    tracks: pd.DataFrame,
    table: TableSpec,
    detections: pd.DataFrame | None = None,
    config: EventConfig | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """:func:`find_events`, and beside its events and shots each ball's stays at rest: a
    DataFrame ``track, t_begin, t_end`` (s, the first and last row of the stay), one row per
    stretch of a track that no motion, event of that ball or gap in its frames reaches
    (:func:`_rests`), for ``tracking.rests.hold_rests``."""
    cfg = config or EventConfig()
    if not isinstance(tracks, pd.DataFrame):
        raise ValueError(f"tracks must be a pandas DataFrame, got {type(tracks).__name__}")
    missing = [c for c in TRACK_INPUT_COLUMNS if c not in tracks.columns]
    if missing:
        raise ValueError(f"tracks lack column(s) {', '.join(missing)}; pass the output of "
                         "tracking.tracker.track")
    if tracks.empty:
        return empty_events(), empty_shots(), empty_rests()
    tracks = tracks.copy()
    balls = _balls(tracks, detections, table.radius_mm)
    dts = np.diff(np.unique(tracks["t"].to_numpy(float)))
    dt = float(np.median(dts)) if len(dts) else 1.0 / 60.0
    # At a low frame rate the window stretches to hold enough samples (EventConfig); not for
    # collisions, whose fits grow from the contact only while one parabola explains them.
    collision_window_s = cfg.fit_window_s
    cfg = replace(cfg, fit_window_s=max(cfg.fit_window_s, cfg.fit_min_samples * dt))
    exposure = cfg.exposure_s if cfg.exposure_s is not None else 0.5 * dt
    t_clip_end = float(tracks["t"].max())
    finder = _Finder(table, cfg, dt, exposure, collision_window_s)
    finder.t_end = t_clip_end
    for b in balls:
        _motion(b, cfg, table.ball_diameter_mm)
    rough_cushions = {b.track: finder.rough_cushions(b) for b in balls}
    rough_collisions = finder.rough_collisions(balls)
    rough_cushions = _real_turns(finder, balls, rough_cushions, rough_collisions)
    for b in balls:
        contacts = [tg for tg, _ in rough_cushions[b.track]] + [
            tg for tg, i, j in rough_collisions if b.track in (i, j)]
        # A motion that begins or ends at a contact is bounded by the contact itself. The
        # motion's own ends bound the fits, not its fast stretches': within a motion a
        # stretch ends only where the smoothed speed dips under the rest speed, which a few
        # reads a few frames after a slow contact can make it do while the ball rolls on
        # (uneven_60fps extra clip, ball 1 at 2.98 s: 30-39 mm/s smoothed, 83 true; the
        # contact 0.11 s before had its departure cut to 5-6 samples).
        ends = [b.t[i] for move in b.moves for i in move]
        ends = [m for m in ends if all(abs(m - c) > 3 * dt for c in contacts)]
        b.respots = _respots(b, table.ball_diameter_mm)
        b.marks = sorted(ends + contacts + b.respots)
    by_id = {b.track: b for b in balls}
    starts = _strikes(finder, balls, by_id, rough_collisions)
    finder.slide_decel, finder.slide_decel_sd = _cloth_slide_decel(finder, balls, rough_cushions,
                                                                   rough_collisions)
    finder.slide_measured = finder.slide_decel_sd < cfg.slide_decel_sigma_mm_s2

    rows = _collision_rows(finder, rough_collisions, by_id)
    rows += _nudges(finder, balls, [(r["t"], r["track"], r["other"]) for r in rows])
    collisions_by_ball: dict[int, list[tuple[float, int]]] = {}
    for r in rows:
        # (time, the ball whose leaving rest is compared in ``_set_moving``)
        collisions_by_ball.setdefault(r["track"], []).append((r["t"], r.get("driver", r["other"])))
    # Each rail's contact line from the apexes of all its contacts (``_rail_offsets``): the
    # calibration's reversal line may be off by a millimetre, and every contact is pinned to it.
    rows += _cushion_rows(finder, balls, rough_cushions)
    _add_found_rolling(balls, cfg, table.ball_diameter_mm)
    _add_struck_slow(balls, collisions_by_ball, cfg, dt, table.ball_diameter_mm)
    moves = []  # (track, t_begin, t_end)
    for b in balls:
        # Last row of each stay on the table: before a gap in the frames or a jump.
        pieces = sorted(int(np.searchsorted(b.t, t)) - 1 for t in b.respots)
        for i0, i1 in b.moves:
            hit = [tc for tc, o in collisions_by_ball.get(b.track, [])
                   if _set_moving(finder, b, (i0, i1), by_id[o], tc)]
            if hit:
                t_begin = min(hit)
            elif i0 in b.struck:
                t_begin = b.struck[i0]
            elif i0 in b.firsts:
                t_begin = b.begun.get(i0, float(b.t[i0]))  # already moving when first seen
            else:
                r = starts.get((b.track, i0)) or finder.start(b, i0)
                rows.append(r)
                t_begin = r["t"]
            # The ball's stay on the table that this motion belongs to ends at ``last``: the
            # track's end, or where it left and came back (a pocketed ball spotted again, a ball
            # lifted and put down elsewhere, under the same id).
            last = int(next((e for e in pieces if e >= i1), len(b.t) - 1))
            gone = b.t[last] < t_clip_end - 0.5 * dt or last < len(b.t) - 1
            if i1 == last and gone:
                r = finder.pocket(b, i1)
                if r is not None:
                    rows.append(r)
                t_end = r["t"] if r is not None else float(b.t[i1])
            elif i1 == last:
                t_end = float(b.t[i1])  # still moving when the clip ends
            elif b.t[last] - b.t[i1] < cfg.min_rest_s and gone:
                t_end = float(b.t[i1])  # gone soon after slowing down: caught, not stopped
            else:
                # A cushion contact of a ball creeping on below the rest speed may follow its
                # motion's last row (``_Finder._raw_slow``); the ball stops after it, not before.
                # (A collision after that row sets the ball's next motion going.)
                t_next = next((b.t[m0] for m0, _ in b.moves if m0 > i1), math.inf)
                t_rest_end = min(t_next, float(b.t[last]))
                last = max([x["t"] for x in rows if x["track"] == b.track and (
                    x["t"] <= b.t[i1] + dt or (x["kind"] == "cushion" and x["t"] < t_next))],
                    default=t_begin)
                r = finder.stop(b, i1, max(last, t_begin), t_rest_end)
                rows.append(r)
                t_end = r["t"]
            moves.append((b.track, t_begin, t_end))
    events, shots = _assemble(rows, moves, dt)
    reach = table.ball_diameter_mm + cfg.collision_margin_mm
    return events, shots, _rests(balls, moves, rows, dt, reach, cfg.rest_speed_mm_s)


def _cushion_rows(finder: "_Finder", balls: list[_Ball], rough_cushions: dict) -> list[dict]:
    """The cushion events of every ball's rough contacts (``rough_cushions``: track -> [(rough
    time s, rail)]), in ball and contact order; sets the finder's rail lines and slide ratio on
    the way and leaves each ball's samples with the contact fits' outliers struck.

    Three passes: the unpinned apexes of every contact (each ball's samples put back after it),
    which fix each rail's contact line (``_rail_offsets``); every contact solved, which
    measures the slides (``finder.slides``) for the clip's ratio (``_cushion_slide_ratio``);
    and, that ratio known, every contact solved again with it. A contact's solve reads and
    strikes only its ball's samples within its reach (``_contact_units``) and reads the
    finder's clip-wide values, so runs of contacts whose reaches do not meet are shared among
    ``cfg.workers`` processes (``tracking.share``), each run's calls in one process in their
    serial order, and their answers (rows, slides, struck samples) gathered in order."""
    cfg = finder.cfg
    units = _contact_units(finder, balls, rough_cushions)

    def solve(unit: tuple, step: tuple) -> tuple:
        """One pass over a unit's contacts: ``("apex", None)``, ``("first", (rail offsets,
        line sds))`` or ``("again", slide ratio)``."""
        b, contacts, i0, i1 = unit
        kind, value = step
        if kind == "apex":
            raw = b.raw.copy()  # the side fits strike outliers; the contacts strike their own
            out = [(rail, finder.cushion(b, rail, tg, apex_only=True)) for tg, rail in contacts]
            b.raw = raw
            return out
        if kind == "first":
            finder.rail_offset, finder.rail_line_sd = value
        else:
            finder.slide_ratio = value
        n0 = len(finder.slides)
        out = [finder.cushion(b, rail, tg) for tg, rail in contacts]
        return out, finder.slides[n0:], b.raw[i0:i1].copy()

    def gather(answers: list, slides0: list) -> list:
        """Rows of a solving pass in order; the slides and struck samples taken over."""
        finder.slides = list(slides0)
        out = []
        for (b, _, i0, i1), (found, slides, raw) in zip(units, answers):
            b.raw[i0:i1] = raw
            finder.slides += slides
            out += found
        return out

    # Each contact costs about alike (three solves of two side fits, some 50 ms); a fork
    # costs 30-80 ms (measured on the loaded 2-core machine).
    with Shared(solve, units, [len(u[1]) for u in units], cfg.workers, min_cost=4) as pool:
        apexes: dict[str, list[tuple[float, float]]] = {r: [] for r in RAILS}
        for found in pool.map(("apex", None)):
            for rail, a in found:
                if a is not None:
                    apexes[rail].append(a)
        finder.rail_offset, finder.rail_line_sd = _rail_offsets(apexes, cfg.reversal_line_sd_mm)
        # The first solve measures each slide (``finder.slides``) for the clip's ratio.
        slides0 = list(finder.slides)  # before this process's own solves add theirs
        first = gather(pool.map(("first", (finder.rail_offset, finder.rail_line_sd))), slides0)
        finder.slide_ratio = _cushion_slide_ratio(finder)
        if finder.slide_ratio is not None:
            # Every departure of a ball arriving rolling is solved again with the slide's
            # duration prior, a well-seen one too (five samples of slide or more; before, only
            # the others): where its samples fix the slide they outweigh the prior, and where
            # they do not the prior holds it (event_accuracy.py --fps 30 seeds 1/2/3
            # restitution 0.0303/0.0289/0.0257 -> 0.0296/0.0289/0.0249, 60 fps
            # 0.0268/0.0224/0.0209 -> 0.0241/0.0215/0.0185).
            slides0 = list(finder.slides)
            first = gather(pool.map(("again", finder.slide_ratio)), slides0)
    return [r for r in first if r is not None]


def _contact_units(finder: "_Finder", balls: list[_Ball], rough_cushions: dict) -> list[tuple]:
    """Each ball's rough cushion contacts cut into runs that can be solved apart: a list of
    ``(ball, [(rough time s, rail)], i0, i1)`` in ball and contact order, rows ``i0:i1`` of the
    ball's samples holding every sample the run's solves can read or strike.

    A contact's solve (``_Finder.cushion``) fits the samples within ``fit_window_s`` of its
    time, which lies within two frame intervals of the rough time (the crossings it looks for),
    and strikes outliers among them only: its reach is the rough time plus or minus the window
    and three intervals. Two consecutive contacts of a ball start a new run where their
    reaches do not meet and a sample lies between them (so the last sample before the later
    one, which a departure-only solve reads, is outside the earlier one's reach); a ball whose
    contacts are not in time order stays one run. A striped ball's departure may reach on to
    ``depart_max_s`` (``_Finder._depart_reach``), so its reach after a contact is that long."""
    reach = finder.cfg.fit_window_s + 3.0 * finder.dt
    units = []
    for b in balls:
        contacts = list(rough_cushions[b.track])
        if not contacts:
            continue
        after = reach + max(finder.cfg.depart_max_s - finder.cfg.fit_window_s, 0.0) * b.striped
        times = [tg for tg, _ in contacts]
        seen = b.t[np.isfinite(b.raw[:, 0])]
        runs = [[contacts[0]]]
        for prev, cur in zip(contacts[:-1], contacts[1:]):
            lo, hi = prev[0] + after, cur[0] - reach
            if times == sorted(times) and lo < hi and np.any((seen > lo) & (seen < hi)):
                runs.append([cur])
            else:
                runs[-1].append(cur)
        for run in runs:
            i0 = int(np.searchsorted(b.t, run[0][0] - reach, "left"))
            i1 = int(np.searchsorted(b.t, run[-1][0] + after, "right"))
            units.append((b, run, i0, i1))
    return units


def _rests(balls: list[_Ball], moves: list[tuple[int, float, float]], rows: list[dict],
           dt: float, reach_mm: float, rest_speed_mm_s: float) -> pd.DataFrame:
    """Each ball's stays at rest (columns of :func:`empty_rests`): maximal runs of its rows
    more than a frame interval ``dt`` (s) clear of each of its motions ``moves`` (track,
    t_begin, t_end s), of every event row of ``rows`` that names it, and of every row in which
    another ball moving faster than ``rest_speed_mm_s`` (smoothed) lies within ``reach_mm`` of
    it (a graze or a nudge the event finder did not solve may still have moved it: the phone
    clip's 8, pushed 4 mm by the 11 with no collision found), and not across a gap or jump in
    its rows (``_respots``: put down elsewhere). A ball at rest does not move until something
    touches it (Newton's first law), so each such run is one place."""
    out = []
    for b in balls:
        busy = np.zeros(len(b.t), bool)
        for tid, t0, t1 in moves:
            if tid == b.track:
                busy |= (b.t >= t0 - dt) & (b.t <= t1 + dt)
        for r in rows:
            if b.track in (r["track"], r.get("other")):
                busy |= np.abs(b.t - r["t"]) <= dt
        for o in balls:
            if o is not b:
                busy |= _passed_by(b, o, reach_mm, rest_speed_mm_s)
        cut = np.zeros(len(b.t), bool)
        for t in b.respots:
            cut[min(int(np.searchsorted(b.t, t)), len(b.t) - 1)] = True
        k = 0
        while k < len(b.t):
            if busy[k]:
                k += 1
                continue
            m = k
            while m + 1 < len(b.t) and not busy[m + 1] and not cut[m + 1]:
                m += 1
            out.append((b.track, float(b.t[k]), float(b.t[m])))
            k = m + 1
    if not out:
        return empty_rests()
    return pd.DataFrame(out, columns=["track", "t_begin", "t_end"]).astype(
        {"track": "int64", "t_begin": "float64", "t_end": "float64"})


def _passed_by(b: _Ball, o: _Ball, reach_mm: float, speed_mm_s: float) -> np.ndarray:
    """(N,) bool over ``b``'s rows: ``o`` is seen in the same frame within ``reach_mm`` of
    ``b`` (smoothed centres) and moving faster than ``speed_mm_s``."""
    out = np.zeros(len(b.t), bool)
    _, ib, io = np.intersect1d(b.frame, o.frame, assume_unique=True, return_indices=True)
    if len(ib):
        near = np.hypot(*(b.p[ib] - o.p[io]).T) < reach_mm
        out[ib] = near & (np.hypot(*o.v[io].T) > speed_mm_s)
    return out


def empty_rests() -> pd.DataFrame:
    """The stays-at-rest table with no rows: ``track`` (int64), ``t_begin, t_end`` (s)."""
    return pd.DataFrame({"track": pd.Series(dtype="int64"), "t_begin": pd.Series(dtype="float64"),
                         "t_end": pd.Series(dtype="float64")})


def _real_turns(finder: "_Finder", balls: list[_Ball], rough_cushions: dict,
                rough_collisions: list[tuple[float, int, int]]) -> dict:
    """``rough_cushions`` (track -> [(s, rail)]) without the contacts whose raw path does
    not turn away from the rail beyond its noise (``_Finder.reverses``), the legs bounded by
    the ball's other rough contacts; a ball last seen at the rail (``_Finder._arrival``) has
    no departure to test and is kept."""
    out = {}
    for b in balls:
        found = rough_cushions[b.track]
        others = [tg for tg, _ in found] + [tg for tg, i, j in rough_collisions
                                            if b.track in (i, j)]
        out[b.track] = [(tg, rail) for tg, rail in found
                        if tg in finder.arrivals.get(b.track, ())
                        or finder.reverses(b, tg, rail, [t for t in others if t != tg])]
    return out


def _velocity_change(b: _Ball, rows: np.ndarray) -> np.ndarray:
    """|v(row + 3) - v(row - 3)| (mm/s) of ``b``'s smoothed track at ``rows`` (n,), over its own
    rows (clipped at its ends), not only the frames a partner shares: a ball first seen as it
    leaves a contact (unseen at rest before) still shows its partner's velocity change."""
    n = len(b.t)
    return np.hypot(*(b.v[np.minimum(rows + 3, n - 1)] - b.v[np.maximum(rows - 3, 0)]).T)


def _collision_rows(finder: "_Finder", rough: list[tuple[float, int, int]],
                    by_id: dict[int, _Ball]) -> list[dict]:
    """Collision rows from the rough collisions (time s, track i, track j).

    Rough collisions that share a ball within ``_CLUSTER_FRAMES`` frame intervals are one
    group. A group of two balls is one pair contact (``_Finder.collision``). A group of three
    or more balls is a cluster (a ball driven into touching balls, a rack): its contacts come
    within a fraction of a millisecond of each other, far below a frame interval, so no
    ball's samples fall between them and each ball shows only the sum of its impulses
    (``_Finder.cluster``). Pairs of the group that were not in contact at the cluster's instant
    are solved as pair contacts after it (``_Finder.collision`` bounded by the instant).
    """
    dt = finder.dt
    parent = list(range(len(rough)))

    def root(k: int) -> int:
        while parent[k] != k:
            parent[k] = parent[parent[k]]
            k = parent[k]
        return k
    for a in range(len(rough)):
        for b in range(a + 1, len(rough)):
            if set(rough[a][1:]) & set(rough[b][1:]) and \
                    abs(rough[a][0] - rough[b][0]) <= _CLUSTER_FRAMES * dt + 1e-9:
                parent[root(b)] = root(a)
    groups: dict[int, list[tuple[float, int, int]]] = {}
    for k, r in enumerate(rough):
        groups.setdefault(root(k), []).append(r)
    rows: list[dict] = []
    for group in groups.values():
        tracks = sorted({x for _, i, j in group for x in (i, j)})
        found = finder.cluster([by_id[x] for x in tracks], group) if len(tracks) >= 3 else None
        if found is None:
            for tg, i, j in group:
                rows += finder.collision(by_id[i], by_id[j], tg)
            continue
        t_c, cluster_rows, touching = found
        rows += cluster_rows
        bound = t_c + 0.5 * finder.exposure
        hit = {r["track"] for r in cluster_rows}
        for x in hit:  # no later fit may reach back across the cluster's contact
            by_id[x].strikes.append(bound)
        for tg, i, j in group:
            if (min(i, j), max(i, j)) in touching:
                continue
            rows += finder.collision(by_id[i], by_id[j], max(tg, t_c + 1.5 * dt))
    return rows


def _moving_rows(ball: _Ball) -> np.ndarray:
    """(n,) bool over ``ball``'s rows: True within its motions (``ball.moves``, inclusive)."""
    moving = np.zeros(len(ball.t), bool)
    for i0, i1 in ball.moves:
        moving[i0:i1 + 1] = True
    return moving


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) index of each run of True in the boolean array ``mask`` (n,)."""
    k = np.flatnonzero(np.diff(np.r_[0, mask.astype(np.int8), 0]))
    return [(int(a), int(b) - 1) for a, b in zip(k[::2], k[1::2])]


def _rolling_line(ts: np.ndarray, ps: np.ndarray, t0: float, sigma_mm: float,
                  decel_mm_s2: float) -> tuple[np.ndarray, np.ndarray] | None:
    """A rolling ball's path through samples ts (n,) s, ps (n, 2) mm: a straight line slowing at
    ``decel_mm_s2`` (mu_r g) along its own heading (Alciatore 2004), fitted by least squares
    about ``t0``. Returns (position (2,) mm, velocity (2,) mm/s) at ``t0``, or None with fewer
    than three samples. The heading comes from a first straight-line fit."""
    if len(ts) < 3:
        return None
    f = _fit(ts, ps, t0, 1, sigma_mm)
    v = f.coef[1]
    h = v / max(float(np.hypot(*v)), 1e-9)
    tau = ts - t0
    g = _fit(ts, ps + 0.5 * decel_mm_s2 * h[None, :] * tau[:, None] ** 2, t0, 1, sigma_mm)
    return g.coef[0].copy(), g.coef[1].copy()


def _nudge_candidates(finder: "_Finder", balls: list[_Ball],
                      rough: list[tuple[float, int, int]]) -> list[tuple[float, _Ball, _Ball, int, int]]:
    """Where a moving ball's centre passes within a diameter plus ``collision_margin_mm`` of a
    ball at rest (no motion of its own there, ``_motion``) with no rough collision of the pair
    within three frames (``rough_collisions`` wants a velocity change of
    ``min_velocity_change_mm_s``, which a glancing touch on a slow ball never gives the ball it
    nudges). Returns (time s of the closest approach, moving ball, resting ball, first and last
    row of the moving ball within ``nudge_halo_mm`` of the resting one's surface)."""
    D, cfg, dt = finder.table.ball_diameter_mm, finder.cfg, finder.dt
    out = []
    moving = {id(b): _moving_rows(b) for b in balls}
    for r in balls:
        for m in balls:
            if m is r or not m.moves:
                continue
            common, km, kr = np.intersect1d(m.frame, r.frame, return_indices=True)
            if len(common) < 3:
                continue
            d = np.hypot(*(m.p[km] - r.p[kr]).T)
            close = (d < D + cfg.collision_margin_mm) & moving[id(m)][km] & ~moving[id(r)][kr] & (
                np.hypot(*m.v[km].T) > cfg.rest_speed_mm_s)
            halo = d < D + cfg.nudge_halo_mm
            for k, k1 in _runs(close):
                ks = k + int(np.argmin(d[k:k1 + 1]))
                t_s = float(m.t[km[ks]])
                if any(abs(t - t_s) <= _CLUSTER_FRAMES * dt and {i, j} == {m.track, r.track}
                       for t, i, j in rough):
                    continue
                x0 = x1 = ks
                while x0 > 0 and halo[x0 - 1]:
                    x0 -= 1
                while x1 + 1 < len(halo) and halo[x1 + 1]:
                    x1 += 1
                out.append((t_s, m, r, int(km[x0]), int(km[x1])))
    return out


def _nudge_windows(m: _Ball, t_in: float, t_out: float, lo: float, hi: float, reach: float,
                   mu_s_g: float) -> tuple[float, float]:
    """The span (s) of the moving ball ``m``'s samples a nudge fits: from ``reach`` before the
    halo's first row ``t_in`` and to ``reach`` after its last ``t_out``, within ``m``'s
    neighbouring events ``lo`` and ``hi`` and, before, past the slide the event at ``lo`` may
    have left: a stunned ball slides ``2 v / (7 mu_s g)`` before it rolls (Alciatore 2004), at
    most its largest speed ``v`` (smoothed) on the way in, ``mu_s_g`` in mm/s^2.

    Why reach: the touch's time rests on where the approach line passes the resting ball, and a
    thin touch (phone_wide_30fps's 11 meets the 8 75 deg from head-on, closing at 42 of its
    168 mm/s: one frame is 1.4 mm across) needs that line to a millimetre; a line fitted over
    0.65 s and carried 0.25 s past its end is not (1.2 mm sd at 1.6 mm noise). A rolling ball
    runs straight until its next event (Alciatore 2004), so all of that stretch may be used."""
    way_in = (m.t > max(lo, t_in - reach)) & (m.t < t_in)
    v = float(np.max(np.hypot(*m.v[way_in].T))) if way_in.any() else 0.0
    start = max(lo + 2.0 * v / (7.0 * mu_s_g), t_in - reach) if math.isfinite(lo) else t_in - reach
    return start, min(hi, t_out + reach)


def _rolling_past(ts: np.ndarray, ps: np.ndarray, t0: float, sigma_mm: float, decel_mm_s2: float,
                  decel_sd_mm_s2: float) -> float:
    """Sum of squared residuals (in units of ``sigma_mm``) of samples ts (n,) s, ps (n, 2) mm
    about a rolling ball's straight path (Alciatore 2004): a line slowing along its heading at a
    deceleration fitted under the prior ``decel_mm_s2`` with sd ``decel_sd_mm_s2`` (the prior's
    own squared residual included), heading from a first straight-line fit; linear least
    squares in (position, velocity, deceleration) about ``t0``."""
    h = _fit(ts, ps, t0, 1, sigma_mm).coef[1]
    h = h / max(float(np.hypot(*h)), 1e-9)
    tau = ts - t0
    n = len(ts)
    A = np.zeros((2 * n + 1, 5))
    A[:n, 0] = A[n:2 * n, 1] = 1.0
    A[:n, 2] = A[n:2 * n, 3] = tau
    A[:n, 4] = -0.5 * h[0] * tau ** 2
    A[n:2 * n, 4] = -0.5 * h[1] * tau ** 2
    A[:2 * n] /= sigma_mm
    A[2 * n, 4] = 1.0 / decel_sd_mm_s2
    y = np.r_[ps[:, 0] / sigma_mm, ps[:, 1] / sigma_mm, decel_mm_s2 / decel_sd_mm_s2]
    coef, *_ = np.linalg.lstsq(A, y, rcond=None)
    r = A @ coef - y
    return float(r @ r)


def _lowest_fit(res, x0: np.ndarray, k: int, starts: np.ndarray, x_scale: np.ndarray):
    """``scipy.optimize.least_squares`` of the residual function ``res`` from ``x0`` with its
    parameter ``k`` started at each of ``starts`` in turn; the solution of least cost, or None
    where every start fails. A nudge's touch time has more than one local minimum a few frames
    apart (the kink and the touch can each be met on either side of the closest approach:
    tests/test_events.py's gap -3 mm seed 0 at 30 fps, 2.5 mm noise, solved at 2.659 s from the
    closest approach with cost 61.45, at 2.394 s from an earlier start with 61.32; the touch at
    2.360 s)."""
    best = None
    for t in starts:
        x = np.array(x0, float)
        x[k] = t
        try:
            sol = least_squares(res, x, x_scale=x_scale)
        except ValueError:
            continue
        if best is None or sol.cost < best.cost:
            best = sol
    return best


def _nudge(finder: "_Finder", m: _Ball, r: _Ball, t_s: float, x0: int, x1: int) -> list[dict]:
    """Collision rows of a moving ball ``m`` nudging a resting ball ``r`` about ``t_s`` (s), or
    [] where the samples do not show one; rows x0..x1 of ``m`` lie within ``nudge_halo_mm``
    of ``r``'s surface (their detections, of two balls nearly touching, are left out).

    Model (a smooth ball-ball impact of equal masses, e.g. Meriam & Kraige, Engineering
    Mechanics: Dynamics, ch. 3, oblique central impact, from memory; Alciatore 2004 for the
    cloth): ``m`` rolls in on a straight line slowing at mu_r g (one deceleration for both
    sides, fitted under its prior: the cloth's mu_r spans 0.005-0.015, and a wrong one bends
    the long reach of ``_nudge_windows``); at ``t_c``, where its centre
    is one diameter from ``r``'s, the impulse along the line of centres ``n`` (from ``m`` to
    ``r``) takes ``w`` of ``m``'s velocity along ``n`` (what its departure shows once its
    slide is over) and gives it to ``r``, which departs along ``n`` (the struck ball of
    Newton's cradle: no tangential impulse but friction's few percent) and rolls to rest
    ``travel(w)`` further on. ``r``'s rest position before the touch and after it
    (``_stay_spots``: its distinct reads over its whole stay at rest on each side) each read
    its spot with the resting detection error ``wave_position_sd_mm``. All of ``m``'s samples
    on both sides, both rest reads and the touch are fitted at once
    (``scipy.optimize.least_squares``: path, ``t_c``, ``w``, ``r``'s spot, the deceleration).
    It is a collision where that beats ``m`` rolling straight
    past (``w = 0``, ``_rolling_past``) on ``m``'s own samples by more than chi-squared with
    two degrees of freedom at the tail ``collision_impulse_sigmas`` gives one-sided, with ``w`` positive beyond
    ``collision_impulse_sigmas`` of its standard error (a near miss bends nothing), where
    ``r``'s reads moved on along ``n`` by as many standard errors of their difference (a ball
    at rest moves only when struck, Newton's first law: the struck ball must show it too), and
    where those reads agree with one spot and ``travel(w)`` within chi-squared's 99th
    percentile (``_REST_CHI2``; else the detector misplaces the resting ball by more than its
    resting error, and its spot, which times the touch, is not known).
    """
    cfg, D, dt = finder.cfg, finder.table.ball_diameter_mm, finder.dt
    a_r, sd_a = cfg.roll_decel_mm_s2, cfg.roll_decel_sigma_mm_s2
    sb = cfg.wave_position_sd_mm
    W = finder.collision_window_s + (m.t[x1] - m.t[x0]) / 2  # reach t_s from the halo's edge
    t_in, t_out = float(m.t[x0]), float(m.t[x1])
    # Bounded by m's other events; a rough mark within the halo is this touch's own (found by
    # ``rough_collisions`` and dropped by ``collision``).
    lo, hi = _times_around(m.marks + m.strikes, t_in, t_out, _CLUSTER_FRAMES * dt)
    # A ball that crawls on within the halo until its next event (it stops beside the one it
    # nudged) keeps its samples from a frame and a half past the closest approach.
    if len(m.samples(t_out, hi)[0]) < 3:
        t_out = min(t_out, t_s + 1.5 * dt)
    if len(m.samples(lo, t_in)[0]) < 3:
        t_in = max(t_in, t_s - 1.5 * dt)
    mu_s_g = finder.slide_decel or cfg.slide_decel_mm_s2
    t_from, t_to = _nudge_windows(m, t_in, t_out, lo, hi, max(W, cfg.nudge_reach_s), mu_s_g)
    ti, pi_ = m.samples(t_from, t_in)
    to, po = m.samples(t_out, t_to)
    pb, pa = _stay_spots(r, float(m.t[x0]), float(m.t[x1]), _CLUSTER_FRAMES * dt)
    if len(ti) < 3 or len(to) < 3 or pb is None or pa is None:
        return []
    sm = max(m.sigma, 1e-3)
    u_slip = 7.0 / 5.0  # a stunned ball's speed over its rolling speed (Alciatore 2004)

    def travel(w: float) -> float:
        # Slide from u0 to 5 u0 / 7 at mu_s g, then roll to rest at mu_r g (Alciatore 2004).
        u0 = u_slip * max(w, 0.0)
        return 12.0 * u0 * u0 / (49.0 * mu_s_g) + 25.0 * u0 * u0 / (98.0 * a_r)

    p0, v0 = _rolling_line(ti, pi_, t_s, sm, a_r)
    h0 = v0 / max(float(np.hypot(*v0)), 1e-9)

    def path(x, t):
        tau = np.asarray(t, float) - t_s
        return x[0:2] + x[2:4] * tau[..., None] - 0.5 * x[8] * h0 * tau[..., None] ** 2

    def after(x, t_c, w, n):
        # From the touch on, rolling again along its new heading once its slide is over.
        v1 = x[2:4] - x[8] * h0 * (t_c - t_s) - w * n
        h1 = v1 / max(float(np.hypot(*v1)), 1e-9)
        tau = to - t_c
        return path(x, t_c) + v1 * tau[:, None] - 0.5 * x[8] * h1 * tau[:, None] ** 2

    def parts(x):
        t_c, w, pr = x[4], x[5], x[6:8]
        dn = pr - path(x, t_c)
        L = max(float(np.hypot(*dn)), 1e-9)
        n = dn / L
        res_m = np.r_[((path(x, ti) - pi_) / sm).ravel(), ((after(x, t_c, w, n) - po) / sm).ravel()]
        res_r = np.r_[(pb - pr) / sb, (pa - pr - travel(w) * n) / sb]
        return res_m, res_r, (L - D) / (0.01 * sb)

    def res(x):
        res_m, res_r, touch = parts(x)
        return np.r_[res_m, res_r, touch, (x[8] - a_r) / sd_a]

    x0_ = np.r_[p0, v0, t_s, 0.0, pb, a_r]
    starts = np.r_[t_s, np.linspace(m.t[x0], m.t[x1], _NUDGE_STARTS)]
    sol = _lowest_fit(res, x0_, 4, starts, np.r_[sm, sm, 10 * sm, 10 * sm, dt, 10.0, sb, sb, 10.0])
    if sol is None:
        return []
    x = sol.x
    t_c, w, pr = float(x[4]), float(x[5]), x[6:8]
    if not (m.t[x0] - dt <= t_c <= m.t[x1] + dt):
        return []
    J = sol.jac
    cov = np.linalg.pinv(J.T @ J)
    sd_w = math.sqrt(max(cov[5, 5], 1e-12))
    res_m, res_r, _ = parts(x)
    # m rolling straight past on its own samples (w = 0): one line through both sides, its
    # deceleration as free as the touch's (prior terms on both sides of the comparison).
    rss0 = _rolling_past(np.r_[ti, to], np.r_[pi_, po], t_s, sm, a_r, sd_a)
    tail = float(1.0 - 0.5 * math.erfc(-cfg.collision_impulse_sigmas / math.sqrt(2.0)))
    gain = rss0 - float(res_m @ res_m) - ((x[8] - a_r) / sd_a) ** 2
    n = (pr - path(x, t_c)) / D
    if gain < chi2.ppf(1.0 - tail, 2) or w < cfg.collision_impulse_sigmas * sd_w:
        return []
    # The struck ball's own reads must show it moved on along n (two reads, each sb).
    if float((pa - pb) @ n) < cfg.collision_impulse_sigmas * math.sqrt(2.0) * sb:
        return []
    if float(res_r @ res_r) > _REST_CHI2:
        return []
    # Just after the impact, before either slide: r leaves at u0 = 7 w / 5 along n, and m has
    # lost as much (equal and opposite impulses).
    u0 = u_slip * w
    v_in = x[2:4] - x[8] * h0 * (t_c - t_s)
    return [
        _row(t_c, "collision", m.track, path(x, t_c), speed_in=float(np.hypot(*v_in)),
             speed_out=float(np.hypot(*(v_in - u0 * n))), other=r.track),
        _row(t_c, "collision", r.track, pr, speed_in=0.0, speed_out=u0, other=m.track),
    ]


def _times_around(times: list[float], t_in: float, t_out: float, guard: float
                  ) -> tuple[float, float]:
    """The last of ``times`` (s) before ``t_in - guard`` and the first after ``t_out + guard``
    (-inf, inf where none): what bounds a stretch's fits between a ball's other events."""
    return (max([t for t in times if t < t_in - guard], default=-math.inf),
            min([t for t in times if t > t_out + guard], default=math.inf))


def _stay_spots(r: _Ball, t_in: float, t_out: float, guard: float
                ) -> tuple[np.ndarray | None, np.ndarray | None]:
    """Where the resting ball ``r`` lay (2,) mm before ``t_in`` (s) and after ``t_out``: the
    ``_rest_point`` of its reads over its whole stay at rest on each side (its rows outside its
    motions, bounded by its events beyond ``guard`` s of the touch), or None under three
    distinct reads. A ball at rest stays where it lies until struck (Newton's first law), so
    every read of the stay measures the same spot, and a read carried over unchanged frames is
    one read: over the second before its nudge phone_wide_30fps's black 8 had six distinct reads,
    one 1.8 mm toward the 11 carried over twelve frames (the median's) and two 5 mm toward the
    camera's nadir; its 32 distinct reads since the clip began put it 0.7 mm off."""
    lo, hi = _times_around(r.marks + r.strikes, t_in, t_out, guard)
    still = ~_moving_rows(r) & np.isfinite(r.raw[:, 0])
    before = still & (r.t > lo) & (r.t < t_in)
    after = still & (r.t > t_out) & (r.t < hi)
    return _rest_point(r.raw[before]), _rest_point(r.raw[after])


def _nudges(finder: "_Finder", balls: list[_Ball],
            rough: list[tuple[float, int, int]]) -> list[dict]:
    """Collision rows of resting balls nudged by moving ones (``_nudge_candidates``,
    ``_nudge``): a ball at rest stays at rest until the cue or another ball strikes it
    (Newton's first law), so a moving ball that passes within contact of it, bends along the
    line of centres there and leaves it a few millimetres on has struck it, however little
    its speed changed."""
    rows: list[dict] = []
    for t_s, m, r, x0, x1 in _nudge_candidates(finder, balls, rough):
        # One touch per pair: both balls moving by turns make two candidates of one touch.
        if not any(x["track"] in (m.track, r.track) and x["other"] in (m.track, r.track)
                   and abs(x["t"] - t_s) <= m.t[x1] - m.t[x0] + _CLUSTER_FRAMES * finder.dt
                   for x in rows):
            rows += _nudge(finder, m, r, t_s, x0, x1)
    return rows


def _left_rest(finder: "_Finder", b: _Ball, t: float) -> float:
    """When (s) ``b`` was first seen off its rest position in the motion under way at ``t``
    (begun by one and a half frames after it): -inf for a ball moving when first seen, inf
    for one at rest at ``t``."""
    dt = finder.dt
    moves = [m for m in b.moves if b.t[m[0]] <= t + 1.5 * dt and b.t[m[1]] >= t - 3 * dt]
    if not moves:
        return math.inf
    i0 = moves[-1][0]
    if i0 in b.firsts:
        return -math.inf
    _, _, ts, _ = finder._leaving(b, i0)
    return float(ts[0]) if len(ts) else float(b.t[i0])


def _set_moving(finder: "_Finder", b: _Ball, move: tuple[int, int], other: _Ball,
                tc: float) -> bool:
    """Whether the collision with ``other`` at ``tc`` (s) set ``b``'s motion ``move`` (rows
    i0, i1) going: it comes between three frames before the motion's first row and one and a
    half frames after its first row above ``move_speed_mm_s``, and ``b`` did not leave rest
    at an earlier frame than ``other`` did (a ball struck by the cue a frame or two before it
    meets another was moving first; the one it meets was set moving by it). A collision
    later than that still set it going where ``other`` met it at rest and its reads were
    pushed before (``_met_at_rest``)."""
    i0, i1 = move
    dt = finder.dt
    speed = np.hypot(*b.v[i0:i1 + 1].T)
    t_fast = b.t[i0 + int(np.argmax(speed > finder.cfg.move_speed_mm_s))]
    if not b.t[i0] - 3 * dt <= tc:
        return False
    if tc > t_fast + 1.5 * dt and not _met_at_rest(finder, b, i0, other, tc):
        return False
    return not _left_rest(finder, b, tc) < _left_rest(finder, other, tc) - 0.5 * dt


def _met_at_rest(finder: "_Finder", b: _Ball, i0: int, other: _Ball, tc: float) -> bool:
    """Whether ``other`` struck ``b`` at rest at the contact about ``tc`` (s) although ``b``'s
    motion seems to begin at row ``i0``, frames before it: ``other`` was already moving then,
    within ``nudge_halo_mm`` of ``b``'s surface, and ``b`` leaves its rest position along the
    line of centres from where ``other`` comes one diameter from it.

    Two balls that near make one blob for the detector, and the resting ball's reads are
    pulled by millimetres (cut_bank sample: ball 2, at rest, read 2-8 mm off its spot in the
    four frames before the 1-2 ball met it at 3.590 s, 16 mm apart and closing; the tracker's
    velocity on them 340-570 mm/s): the motion's first row then lies before the contact. A
    cue strike that moment is out of play (a ball arriving within a radius of the struck
    one), and a ball at rest struck by another leaves along their line of centres, turned
    from it by the impact's friction only, by at most atan(mu) (the tangential impulse is at
    most mu times the normal one, Coulomb; Alciatore 2004 for mu 0.03-0.08). A ball already
    moving when met leaves along its own velocity plus the impulse. The angle is tested
    against atan(``ball_friction``) plus three standard errors of the departure's direction
    (its fit over ``start_fit_s``) and of the line of centres (both balls' noise over a
    diameter)."""
    cfg, dt = finder.cfg, finder.dt
    D = finder.table.ball_diameter_mm
    if not _left_rest(finder, other, tc) < b.t[i0] - 0.5 * dt:
        return False
    p_rest = finder._leaving(b, i0)[0]
    k = np.flatnonzero((other.t >= b.t[i0] - dt) & (other.t <= tc + 2 * dt))
    if len(k) < 2:
        return False
    d = np.hypot(*(other.p[k] - p_rest).T)
    onset = np.interp(b.t[i0], other.t[k], d)
    if not onset < D + cfg.nudge_halo_mm:
        return False
    inside = np.flatnonzero(d <= D)
    if len(inside) and inside[0] > 0:
        # Where the arriving centre comes one diameter from the rest position, between rows.
        j = int(inside[0])
        w = (d[j - 1] - D) / (d[j - 1] - d[j])
        t_x = float(other.t[k[j - 1]] + w * (other.t[k[j]] - other.t[k[j - 1]]))
        q = other.p[k[j - 1]] + w * (other.p[k[j]] - other.p[k[j - 1]])
    else:
        j = int(inside[0]) if len(inside) else int(np.argmin(d))
        if d[j] > D + cfg.collision_margin_mm:
            return False
        t_x, q = float(other.t[k[j]]), other.p[k[j]]
    t0 = t_x + 0.5 * finder.exposure
    ts, ps = b.samples(t0, t0 + max(cfg.start_fit_s, 2.5 * dt))
    f = _fit(ts, ps, t0, 1, b.sigma_fit) if len(ts) >= 2 else None
    if f is None:
        return False
    v = f.vel(t0)
    s = float(np.hypot(*v))
    n = p_rest - q
    n = n / max(float(np.hypot(*n)), 1e-12)
    cos = float(v @ n) / max(s, 1e-12)
    sd = math.sqrt(f.vel_var(t0) / max(s * s, 1e-12) + (b.sigma ** 2 + other.sigma ** 2) / D ** 2)
    return math.acos(min(1.0, max(-1.0, cos))) <= math.atan(cfg.ball_friction) + 3.0 * sd


def _strikes(finder: "_Finder", balls: list[_Ball], by_id: dict[int, _Ball],
             rough_collisions: list[tuple[float, int, int]]) -> dict[tuple[int, int], dict]:
    """Start events {(track, first row of the motion): row} of the motions that begin from
    rest other than at a collision (``_set_moving`` on the rough collisions). Where the
    motion's first row lost its mark for lying within three frames of a contact, the start
    becomes a bound of the ball's later contacts instead (``_Ball.strikes``): half an exposure
    past it, so no sample that saw the ball at rest enters their fits, however soon after the
    strike they come (at 30 fps a ball struck into a near cushion or ball meets it within one
    or two frames). Elsewhere the first row stays the only bound, as before: bounding at the
    start there too (the first row can lie a frame before the strike) moved 60 fps angles and
    restitution both ways (``benchmarks/event_accuracy.py`` seeds 1 and 2)."""
    out = {}
    for b in balls:
        for i0, i1 in b.moves:
            if i0 in b.firsts or any(
                    _set_moving(finder, b, (i0, i1), by_id[j if i == b.track else i], tg)
                    for tg, i, j in rough_collisions if b.track in (i, j)):
                continue
            out[(b.track, i0)] = finder.start(b, i0)
    for (track, i0), r in out.items():
        b = by_id[track]
        if b.t[i0] not in b.marks:  # dropped beside a contact (``find_events``)
            b.strikes.append(r["t"] + 0.5 * finder.exposure)
    return out


def _cloth_slide_decel(finder: "_Finder", balls: list[_Ball], rough_cushions: dict,
                       rough_collisions: list) -> tuple[float, float]:
    """The cloth's sliding deceleration ``mu_s g`` (mm/s^2) for the clip and its standard
    deviation, pooled over all of the clip's slides with the typical cloth as the prior.

    One cloth covers the table, so every slide of the clip (Alciatore 2004: after a cushion, a
    collision or a stun strike the ball slides at ``mu_s g`` in a fixed direction until it
    rolls) decelerates alike. Each departure (after a rough cushion contact, a rough collision
    or the start of a motion) is first fitted on its own by ``_piecewise_fit`` with the sliding
    deceleration free; one whose piece next to the contact spans at least
    ``cloth_slide_min_samples`` samples and decelerates within
    ``slide_decel_min_mm_s2 .. slide_decel_max_mm_s2`` is a measurement, whichever model was
    chosen (a slide through the whole window can pass for the one-piece rolling model, whose
    prior on mu_r g is weak against many samples). Its information about ``mu_s g`` is its
    profile criterion: the
    departure refitted with the deceleration held at a trial value r (``_piecewise_fit`` with
    ``slide_decel = r``: slip direction, speed and the slide's duration profiled out),
    ``chi2_i(r) = m_i ln(RSS_i(r) / m_i) + k_i(r) ln m_i`` over its ``m_i`` coordinates, the
    criterion of ``_piecewise_fit`` (Gaussian residuals of unknown variance; ``RSS_i`` the
    penalised residual sum, the rolling piece's prior included), so each departure weighs by
    its own residual scatter (one its model fits poorly counts less), a short slide, whose
    duration trades against r, has a shallow curve and a long one a steep curve. The clip's
    estimate minimises
    ``sum_i chi2_i(r) + ((r - mu0) / sd0)^2``, the prior ``mu0, sd0`` the typical cloth
    (``slide_decel_mm_s2`` and ``slide_decel_sigma_mm_s2``: Alciatore 2004 typical 0.2, range
    0.15-0.4 [secondary]; Mathavan et al. 2009: 1.75-2.40 m/s^2), a joint maximum a posteriori
    estimate of the shared parameter with every departure's own parameters profiled out
    (Gelman et al., Bayesian Data Analysis, ch. 4 normal approximation); its sd is the Laplace
    approximation, ``sd^2 = 2 / (d^2/dr^2 of that sum)`` at the minimum. The minimum is found
    on a log-spaced grid between ``slide_decel_min_mm_s2`` and ``slide_decel_max_mm_s2``, then
    by Brent's bounded method between the best grid point's neighbours. Without any slide the
    prior alone stands: a departure is never fitted as rolling from the contact.
    """
    cfg = finder.cfg
    dt = finder.dt
    step = cfg.kink_step_frames * dt
    mu0, sd0 = cfg.slide_decel_mm_s2, cfg.slide_decel_sigma_mm_s2
    found = []  # (ts, ps, t0, sigma, weight, cache) of each measured slide
    for b in balls:
        t_dep = [tg for tg, _ in rough_cushions[b.track]]
        t_dep += [tg for tg, i, j in rough_collisions if b.track in (i, j)]
        t_dep += [float(b.t[i0]) for i0, _ in b.moves if i0 > 0]
        for tg in t_dep:
            _, hi = b.bounds(tg, 1.5 * dt)
            # From a frame past the rough time: the contact lies within a frame of it.
            ts, ps = b.samples(tg + dt + 0.5 * finder.exposure,
                               min(hi, tg + cfg.slide_fit_s))
            if len(ts) < max(cfg.quadratic_min_samples, cfg.cloth_slide_min_samples + 3):
                continue
            wt = b.weights(ts)
            f = _piecewise_fit(ts, ps, tg, b.sigma_fit, step, cfg, weight=wt)
            if f is None:
                continue
            # A slide is told by its deceleration, not by which model won: the one-piece
            # "rolling" fit, whose prior on mu_r g is weak against many samples, can take a
            # slide through the whole window with two parameters fewer.
            n_slide = len(ts) if f.tk is None else int(np.sum(ts - tg <= f.tk))
            if n_slide < cfg.cloth_slide_min_samples:
                continue
            a = 2.0 * float(np.hypot(*f.coef[2]))
            if not cfg.slide_decel_min_mm_s2 <= a <= cfg.slide_decel_max_mm_s2:
                continue
            found.append((ts, ps, tg, b.sigma_fit, wt, {}))
    if not found:
        return mu0, sd0

    def term(item: tuple, r: float) -> float | None:
        """One departure's criterion at the trial deceleration r, or None (no fit)."""
        ts, ps, tg, sigma, wt, cache = item
        f = _piecewise_fit(ts, ps, tg, sigma, step, cfg, slide_decel=r, weight=wt,
                           penalised=True, cache=cache)
        if f is None:
            return None
        m = 2 * f.n
        return m * math.log(max(f.rss, m * 1e-18) / m) + f.k * math.log(m)

    # The departures are shared among processes (``tracking.share``), each keeping its own
    # fits' caches; the terms are summed here in the departures' order, as one process would.
    # A fork costs some 30-80 ms (tracking/share.py), the 30-odd criterion values about 20 ms
    # of processor time per departure.
    with Shared(term, found, [1.0] * len(found), cfg.workers, min_cost=4) as pool:
        return _slide_decel_minimum(lambda r: _summed(((r - mu0) / sd0) ** 2, pool.map(r)),
                                    cfg, len(found))


def _summed(first: float, terms: list) -> float:
    """``first`` plus each term that is not None, added in order."""
    out = first
    for x in terms:
        if x is not None:
            out += x
    return out


def _slide_decel_minimum(total, cfg: "EventConfig", n_found: int) -> tuple[float, float]:
    """The minimum of the criterion ``total(r)`` over the cloth's sliding deceleration r
    (mm/s^2) and its Laplace standard deviation (``_cloth_slide_decel``), with ``n_found``
    measured departures."""
    sd0 = cfg.slide_decel_sigma_mm_s2
    lo, hi = cfg.slide_decel_min_mm_s2, cfg.slide_decel_max_mm_s2
    grid = np.geomspace(lo, hi, 9)  # steps of 35 %
    vals = [total(float(r)) for r in grid]
    g = int(np.argmin(vals))
    # Offsets from the best grid value, so the optimiser's relative tolerance (sqrt(eps) |x|)
    # does not stop it at ~1e-5 mm/s^2 of a value of thousands.
    rg = float(grid[g])
    res = minimize_scalar(lambda u: total(rg + float(u)), method="bounded",
                          bounds=(grid[max(g - 1, 0)] - rg, grid[min(g + 1, len(grid) - 1)] - rg),
                          options={"xatol": 1e-6})
    r = rg + float(res.x) if res.fun <= vals[g] else rg
    # Second difference over a step that the criterion's own scale sets (the prior's curvature
    # bounds the posterior sd by sd0, so a step of a few percent of it resolves the curve).
    h = max(0.05 * sd0 * min(1.0, 1.0 / math.sqrt(n_found)), 1.0)
    h = min(h, r - lo, hi - r) if lo < r < hi else h
    f0 = total(r)
    curv = (total(r + h) - 2.0 * f0 + total(r - h)) / (h * h)
    sd = math.sqrt(2.0 / curv) if curv > 2.0 / sd0**2 else sd0
    return r, min(sd, sd0)


def _cushion_slide_ratio(finder: "_Finder") -> float | None:
    """Normal speed a ball loses sliding after a cushion, over its normal speed arriving
    (rolling), measured once for the clip from its well-seen slides, or None.

    A rolling ball's spin carries it toward the rail after the impact has reversed its normal
    velocity, so it slides with the slip along the rail's normal, friction ``mu_s g`` pulling it
    back toward the rail until it rolls (Alciatore 2004; the cushion impulse above the centre
    takes part of the spin, Mathavan, Jackson & Parkin 2010). In the impact model the normal
    speed lost by then is close to a fixed fraction of the normal speed arriving (that fraction
    depends on the cushion: its nose height, friction and restitution), so, like the cloth's
    ``mu_s g``, it is measured once per clip: the median over the contacts whose slide spans at
    least ``slide_min_samples`` samples of ``mu_s g * slide / vn_in``. Every departure of a ball
    arriving rolling then gets it as a prior (``_Finder.cushion``, ``find_events``), which
    counts most where few samples fix the slide (short slides of slow balls, 30 fps).
    With fewer than ``slide_ratio_min_contacts`` such slides the impact model's typical fraction
    ``slide_ratio_prior`` stands in (None only while the cloth's ``mu_s g`` is unknown).
    """
    if finder.slide_decel is None:
        return None
    r = [finder.slide_decel * tk / vn for vn, tk, n in finder.slides
         if n >= finder.cfg.slide_min_samples and vn > 0]
    if len(r) < finder.cfg.slide_ratio_min_contacts:
        return finder.cfg.slide_ratio_prior
    return float(np.median(r))


def _slide_direction(v_in: np.ndarray, n_in: np.ndarray, theta: float, mu: float) -> np.ndarray:
    """Unit vector (2,) of the cloth's friction on a ball that arrived rolling (no side spin) at
    velocity ``v_in`` (2,) mm/s into a cushion of inward normal ``n_in`` (2,), while it slides
    away after the impact: the mean of the prior on the slide's direction (``_Finder.cushion``).

    In the impact model of Mathavan, Jackson & Parkin (2010) the cushion's nose touches the ball
    at ``theta`` above its equator (``TableSpec.contact_angle_rad``) and the normal impulse P
    there passes through the centre, so only friction (coefficient ``mu``) turns the ball. Of
    a rolling ball arriving at ``alpha`` from the normal, the nose contact slips along
    ``(sin alpha, cos alpha)`` (along the rail, up the nose); taking that slip to keep its
    direction through the impact, the nose's friction impulse is ``mu P`` against it, and the
    slip of the cloth contact (solid sphere, ``I = 2/5 M R^2``: a tangential impulse J at
    either contact changes the spin by ``5 J / (2 R)``) changes along the rail by
    ``-mu P sin(alpha) (1 - 5/2 sin(theta))`` and along the outward normal by
    ``P (cos(theta) - mu cos(alpha) (5/2 - sin(theta)))``; the cloth's own friction during the
    impact only shrinks that slip. Friction opposes the slip (Alciatore 2004), so the slide
    decelerates toward the rail, turned toward the ball's along-rail travel by
    ``atan(mu sin(alpha) (1 - 5/2 sin(theta)) / (cos(theta) - mu cos(alpha) (5/2 - sin(theta))))``:
    0 square on, 2.7 degrees at a graze with the paper's ``mu`` 0.14 and the nose at 63.5 % of
    the ball's height, within 0.51 degree of the model's own integration
    (``analysis.cushion.cushion_impact``, ``tests/test_events.py``).
    """
    n_in = np.asarray(n_in, float)
    v = np.asarray(v_in, float)
    vn = -float(v @ n_in)
    along = v + vn * n_in  # the velocity's along-rail part, mm/s
    speed = math.hypot(*v)
    if speed <= 0.0 or vn <= 0.0:
        return -n_in
    sin_a, cos_a = math.hypot(*along) / speed, vn / speed
    s, c = math.sin(theta), math.cos(theta)
    turn = math.atan2(mu * sin_a * (1.0 - 2.5 * s), c - mu * cos_a * (2.5 - s))
    u = along / max(math.hypot(*along), 1e-12)
    return math.cos(turn) * (-n_in) + math.sin(turn) * u


def _apex(fa: _Fit, fd: _Fit, ax: int, t_c: float, reach_s: float) -> tuple[float, float] | None:
    """Where the approach and departure paths meet: (normal coordinate mm, its variance mm^2).

    Both fits are about ``t_c``; their normal coordinates ``n_a(t)``, ``n_d(t)`` (axis ``ax``)
    are equal at the apex time t*, the root of ``n_a - n_d`` nearest ``t_c`` within
    ``reach_s``. In a rigid impact (Mathavan, Jackson & Parkin 2010) the centre turns there on
    the contact line. Linearising each side about t* (``n = n* + v (t - t*) + e``) gives
    ``n* = n* + (v_a e_d - v_d e_a) / (v_a - v_d)``, so
    ``var n* = (v_d^2 var_a + v_a^2 var_d) / (v_a - v_d)^2``. None if the paths do not meet
    near ``t_c`` or meet without turning.
    """
    poly = [fa.coef[2, ax] - fd.coef[2, ax], fa.coef[1, ax] - fd.coef[1, ax],
            fa.coef[0, ax] - fd.coef[0, ax]]
    tau = _roots_near(poly, 0.0, -reach_s, reach_s)
    if tau is None:
        return None
    t = t_c + tau
    va, vd = float(fa.vel(t)[ax]), float(fd.vel(t)[ax])
    if va * vd >= 0:
        return None
    var = (vd * vd * fa.var(t) + va * va * fd.var(t)) / (va - vd) ** 2
    return float(fa.pos(t)[ax]), float(var)


def _rail_offsets(apexes: dict[str, list[tuple[float, float]]], sd_mm: float
                  ) -> tuple[dict[str, float], dict[str, float]]:
    """Each rail's contact line relative to its reversal line (mm), from the clip's contacts,
    and how well one contact's line is known (sd, mm).

    ``apexes``: per rail, (apex minus reversal line, variance) of each contact (``_apex``).
    The calibration places the reversal line to about ``sd_mm`` (an automatic calibration on
    compressed footage, about 1 mm), and pinning contacts to a line off by a millimetre costs
    slow contacts a tenth of their speed out, while any one contact's apex is fixed poorly by
    its short departure. All of a rail's contacts share its line, so their apexes are pooled:
    contacts further than 3 sd (their own, or the rail's robust scatter, 1.4826 MAD, whichever is
    larger) from the median are left out (a contact off the rigid-impact path, e.g. a ball
    arriving with a kink inside the excluded frames), and the rest are combined by inverse
    variance, their variances scaled up by the reduced chi-square where the apexes scatter more
    than their variances say. Two hypotheses are weighed: the line is right (offset 0) or off
    with the Gaussian prior N(0, sd_mm^2) (then the posterior mean; Gelman et al., Bayesian
    Data Analysis, normal model with known variance); the offset is their average by posterior
    probability (Hoeting et al. 1999, Bayesian model averaging). A rail without contacts keeps
    offset 0.

    The sd is what one contact's line is known to: the model-averaged posterior variance of the
    offset (Hoeting et al. 1999, eq. 2: ``sum_k p_k (var_k + mean_k^2) - mean^2``) plus the
    spread of the contact line from contact to contact that the apexes show beyond their own
    variances (a cushion that gives more to a faster ball, a detection pulled by the rail near
    the contact), estimated as the between-study variance of a random-effects model
    (DerSimonian & Laird 1986: ``tau^2 = max(0, (Q - (n - 1)) / (S1 - S2 / S1))``, ``Q`` the
    weighted squared deviations, ``S1``, ``S2`` the sums of weights and squared weights). A rail
    without contacts gets ``sd_mm``.
    """
    out, sds = {}, {}
    for rail, obs in apexes.items():
        if not obs:
            out[rail], sds[rail] = 0.0, sd_mm
            continue
        d = np.array([o[0] for o in obs])
        v = np.maximum(np.array([o[1] for o in obs]), 1e-6)
        med = float(np.median(d))
        mad = 1.4826 * float(np.median(np.abs(d - med))) if len(d) >= 3 else 0.0
        keep = np.abs(d - med) <= 3.0 * np.maximum(np.sqrt(v), mad)
        d, v = d[keep], v[keep]
        if not len(d):
            out[rail], sds[rail] = 0.0, sd_mm
            continue
        w = 1.0 / v
        mean = float(np.sum(w * d) / np.sum(w))
        tau2 = 0.0
        if len(d) >= 2:
            q = float(np.sum(w * (d - mean) ** 2))
            chi2_red = q / (len(d) - 1)
            s1 = float(np.sum(w))
            tau2 = max(0.0, (q - (len(d) - 1)) / (s1 - float(np.sum(w * w)) / s1))
            w = w / max(chi2_red, 1.0)
        # The apexes' mean and its variance; under "the line is off" (offset ~ N(0, sd_mm^2))
        # the posterior mean shrinks it by sd_mm^2 / (sd_mm^2 + s2); under "the line is
        # right" the offset is 0. The two are averaged by their posterior probabilities (even
        # prior odds; Bayes factor of the mean, N(m; 0, sd_mm^2 + s2) / N(m; 0, s2)), so one
        # or two poorly fixed apexes move the line little while many agreeing ones move it to
        # where they meet (Bayesian model averaging, Hoeting et al. 1999).
        s2 = 1.0 / float(np.sum(w))
        m = mean  # the weights' common rescaling leaves their mean as it was
        v1 = sd_mm**2 + s2
        log_bf = 0.5 * math.log(s2 / v1) + 0.5 * m * m * (1.0 / s2 - 1.0 / v1)
        p_off = 1.0 / (1.0 + math.exp(-min(log_bf, 700.0)))
        mean_off, var_off = m * sd_mm**2 / v1, s2 * sd_mm**2 / v1
        out[rail] = p_off * mean_off
        var = p_off * (var_off + mean_off**2) - out[rail] ** 2  # the other model: 0 and 0
        sds[rail] = math.sqrt(max(var, 0.0) + tau2)
    return out, sds


class _Finder:
    def __init__(self, table: TableSpec, cfg: EventConfig, dt: float, exposure: float,
                 collision_window_s: float | None = None):
        self.table, self.cfg, self.dt, self.exposure = table, cfg, dt, exposure
        # The cloth's sliding deceleration mu_s g (mm/s^2), once measured (find_events).
        self.slide_decel: float | None = None
        self.slide_decel_sd: float | None = None  # its standard deviation, mm/s^2
        self.slide_measured = False  # whether any slide of the clip measured it
        # Normal speed lost in the slide after a cushion over the normal speed arriving
        # (``find_events``), once measured; and the measurements (vn_in, slide s, samples).
        self.slide_ratio: float | None = None
        self.slides: list[tuple[float, float, int]] = []
        # Each rail's contact line relative to ``TableSpec.reversal_line`` (mm, along the
        # table axis normal to the rail), once measured (``_rail_offsets``).
        self.rail_offset = {r: 0.0 for r in RAILS}
        # How well one contact's line is known (mm, sd), once measured (``_rail_offsets``).
        self.rail_line_sd = {r: 0.0 for r in RAILS}
        # The clip's last frame time (s): a ball unseen after it is not known to have gone.
        self.t_end = math.inf
        # Longest stretch fitted on each side of a collision (s): ``fit_window_s`` as configured,
        # not stretched at low frame rates (``find_events``); ``cfg``'s own where not given.
        self.collision_window_s = cfg.fit_window_s if collision_window_s is None else collision_window_s
        # Rough times (s) of the contacts of balls last seen at a rail, per track (``_arrival``).
        self.arrivals: dict[int, set[float]] = {}
        self.segments = {r: [] for r in RAILS}
        for seg in table.cushions():
            ax = 0 if seg.rail in ("bottom", "top") else 1
            self.segments[seg.rail].append(tuple(sorted((seg.start[ax], seg.end[ax]))))

    def _deg(self, n: int) -> int:
        return 2 if n >= self.cfg.quadratic_min_samples else 1

    def _side_fits(self, b: _Ball, t_c: float, lo: float, hi: float, exclude: bool):
        """Approach and departure fits of ``b`` around ``t_c`` within (lo, hi). A detection the
        chosen fit leaves far off (``_side``) is struck from ``b.raw`` for every later fit."""
        w = self.cfg.fit_window_s
        ex = (t_c, 0.5 * self.exposure) if exclude else None
        ta, pa = b.samples(max(lo, t_c - w), t_c, ex)
        td, pd_ = b.samples(t_c, min(hi, t_c + self._depart_reach(b, t_c, hi)), ex)
        step = self.cfg.kink_step_frames * self.dt
        fa, bad_a = self._side(ta, pa, t_c, b.sigma_fit, step, weight=b.weights(ta),
                               straight=self._slid_from_rest(b, lo, t_c))
        # mu_s g from the prior alone is not held here: a slide forced to last to the first
        # sample would pull a slow contact's rough time by frames (``_cloth_slide_decel``).
        decel = self.slide_decel if self.slide_measured else None
        fd, bad_d = self._side(td, pd_, t_c, b.sigma_fit, step, decel, b.weights(td),
                               lateral=b.striped)
        for t_bad in bad_a + bad_d:
            b.raw[np.searchsorted(b.t, t_bad)] = np.nan
        return fa, fd

    def _depart_reach(self, b: _Ball, t_c: float, hi: float) -> float:
        """How far (s) past a cushion contact at ``t_c`` its departure fits reach: at least
        ``fit_window_s``, and at least ``depart_roll_turns`` turns of the ball, ``2 pi R / v``
        at the speed ``v`` it leaves with (the chord over ``fit_window_s``), within its next
        event ``hi``.

        A striped ball's reads err by its orientation (the outline fit rides the band, whose
        top moves at twice the centre's speed, then drops back: cheapwide_25fps's green-stripe
        14, off by up to 8 mm along its path; the same rendered, EventConfig), and a rolling
        ball turns once every ``2 pi R`` it travels (rolling without slipping, omega = v / R:
        Marlow 1995, from memory), so that error repeats with period ``2 pi R / v`` and its
        halves. Over less than one period it is a drift that a least-squares path takes for
        velocity; over whole periods it averages out (the least-squares slope of
        ``A sin(w t + phi)`` over a window T of whole periods is ``-12 A cos(phi) / (w T^2)``,
        integrating by parts: it falls as the square of the periods held). A slow departure's
        period outlasts the usual window (0.82 s at 220 mm/s against 0.48 s at 25 fps), a fast
        one's does not, so the window grows only for slow balls; the rolling piece of the path,
        a straight line slowing at mu_r g (Alciatore 2004), holds over it until the next event.
        """
        w = self.cfg.fit_window_s
        ts, ps = b.samples(t_c, min(hi, t_c + w))
        # Only striped balls, whose error was measured: a longer rolling leg makes any slow
        # contact lean harder on its line (EventConfig).
        if not b.striped or len(ts) < 2 or ts[-1] <= ts[0]:
            return w
        v = float(np.hypot(*(ps[-1] - ps[0]))) / float(ts[-1] - ts[0])
        turn = 2.0 * math.pi * self.table.radius_mm / max(v, 1e-9)
        return max(w, min(self.cfg.depart_roll_turns * turn, self.cfg.depart_max_s))

    def _slid_from_rest(self, b: _Ball, lo: float, t_c: float) -> tuple[float, float] | None:
        """(mu_s g, its sd) mm/s^2 where the approach to a contact at ``t_c`` may slide
        straight: its window (``fit_window_s``) reaches back to ``lo``, the ball's leaving rest
        (a strike or a ball hitting it), else None.

        A ball set moving from rest slips along its velocity: a cue struck without elevation
        spins it about the horizontal axis across its heading (side spin, about the vertical,
        moves no point of the cloth contact), a ball hit by another gets its velocity along the
        line of centres and no spin. Friction opposes the slip, so it slides in a straight
        line at ``mu_s g`` until it rolls, ``2 |slip| / (7 mu_s g)`` later (Alciatore 2004):
        0.32 s for a stun at 2.2 m/s on a 0.2 cloth, ten frames at 30 fps. A contact that soon
        after has an approach too short for the free quadratic's curvature
        (``quadratic_min_samples``), and rolling, its only model there before, read the speed
        in a tenth high (phone_wide_30fps extra clip, 0.73 s, on the true positions).
        """
        if not self.slide_measured or lo <= t_c - self.cfg.fit_window_s:
            return None
        # ``lo`` is one of the ball's marks (``_Ball.bounds``): these very values, so equal.
        starts = b.strikes + [float(b.t[i0]) for i0, _ in b.moves if i0 not in b.firsts]
        return (self.slide_decel, self.slide_decel_sd) if lo in starts else None

    def _quadratic_fits(self, b: _Ball, t_c: float, lo: float, hi: float, exclude: bool,
                        strike: bool = False):
        """Approach and departure fits of ``b`` around ``t_c`` within (lo, hi) by ``_grow``,
        over at most ``collision_window_s`` each side; ``strike``: gross outliers struck first
        (``_strike_outliers``)."""
        w = self.collision_window_s
        ex = (t_c, 0.5 * self.exposure) if exclude else None
        ta, pa = b.samples(max(lo, t_c - w), t_c, ex)
        td, pd_ = b.samples(t_c, min(hi, t_c + w), ex)
        if strike:
            ta, pa = self._strike_outliers(ta, pa, t_c, b.sigma)
            td, pd_ = self._strike_outliers(td, pd_, t_c, b.sigma)
        return (self._grow(ta, pa, t_c, b.sigma, forward=False),
                self._grow(td, pd_, t_c, b.sigma, forward=True))

    def _strike_outliers(self, ts: np.ndarray, ps: np.ndarray, t_c: float, sigma: float):
        """Samples ts (n,) s, ps (n, 2) mm of one side of a contact with gross outliers struck,
        as in ``_robust_fit``: the sample one parabola over the whole side leaves furthest off,
        if beyond ``outlier_sigmas`` times the noise ``sigma`` (or the residuals' robust
        scatter), is dropped, at most ``outlier_max`` times. The whole side, not the few
        samples ``_grow`` keeps, over which a parabola bends to the outlier and hides it. Used
        for collisions: a ball resting where another closes in can be placed on the two of them
        (rendered clips of our own, 60 fps: 14 mm off in a rack, 7 mm off beside a lone ball,
        the frame before the contact; that collision came half a frame late, now 0.475)."""
        for _ in range(self.cfg.outlier_max):
            if len(ts) <= self.cfg.quadratic_min_samples:
                break
            f = _fit(ts, ps, t_c, 2, sigma)
            res = np.hypot(*(ps - np.array([f.pos(t) for t in ts])).T)
            j = int(np.argmax(res))
            # The median 2-D residual of Gaussian noise is 1.177 sigma (``_robust_fit``).
            if res[j] <= self.cfg.outlier_sigmas * max(sigma, float(np.median(res)) / 1.177):
                break
            keep = np.arange(len(ts)) != j
            ts, ps = ts[keep], ps[keep]
        return ts, ps

    def _grow(self, ts: np.ndarray, ps: np.ndarray, t_c: float, sigma: float, forward: bool):
        """Plain quadratic fit of the samples nearest ``t_c``, grown one sample at a time while
        a quadratic still explains them within the noise (chi-square test ``RSS / sigma^2 <=
        chi2.ppf(0.9999, dof)``), so it stops at a kink (sliding turning to rolling) that one
        parabola cannot follow. Used for collisions: right at the contact the short pieces
        of a slide-then-roll fit are less steady than one parabola over the samples nearest
        the contact (event_accuracy.py at 30 fps)."""
        if not forward:
            ts, ps = ts[::-1], ps[::-1]
        n_min = self.cfg.quadratic_min_samples
        if len(ts) < n_min:
            return _fit(ts, ps, t_c, self._deg(len(ts)), sigma) if len(ts) >= 2 else None
        best = _fit(ts[:n_min], ps[:n_min], t_c, 2, sigma)
        for n in range(n_min + 1, len(ts) + 1):
            f = _fit(ts[:n], ps[:n], t_c, 2, sigma)
            dof = 2 * (n - 3)
            if f.s2 * dof / max(sigma * sigma, 1e-12) > chi2.ppf(0.9999, dof):
                break
            best = f
        return best

    def _robust_fit(self, ts: np.ndarray, ps: np.ndarray, t0: float, sigma: float, step: float,
                    slide_decel: float | None = None, weight: np.ndarray | None = None,
                    straight: tuple[float, float] | None = None, lateral: bool = False):
        """``_piecewise_fit`` of samples ts (n,) s, ps (n, 2) mm with gross outliers struck.

        A sample whose studentised residual exceeds ``outlier_sigmas`` noise sigmas (2-D
        distance times the sample's weight, so in units of its own stated noise where the
        detections state one, over ``sqrt(1 - leverage)``: the root of how far the residual sum
        falls without it, refitted without it for the samples nearest the contact; for
        Gaussian noise a chance of exp(-s^2 / 2), 4e-6 at 5; the noise ``sigma`` or the
        residuals' robust scatter, whichever is larger) is not this ball's centre (a detection
        pulled by the cushion's shadow or a hand next to the ball, which the detector need not
        flag): the worst such sample is dropped and the samples refitted, at most
        ``outlier_max`` times (common practice: iterative rejection of gross outliers before
        least squares). Not used for the cloth's ``mu_s g`` (``_cloth_slide_decel``): there,
        striking samples let a hand's erratic path pass for a slide (measured on a rendered
        session with hands over the table: ``mu_s g`` 3.6 instead of 2.1 m/s^2). Returns (fit or None, ts, ps, weight of the samples kept, times struck).
        """
        struck: list[float] = []

        def fit(keep: np.ndarray | None = None) -> _Fit | None:
            sel = slice(None) if keep is None else keep
            return _piecewise_fit(ts[sel], ps[sel], t0, sigma, step, self.cfg,
                                  slide_decel=slide_decel,
                                  weight=None if weight is None else weight[sel],
                                  straight=straight, lateral=lateral)

        f = fit()
        while True:
            if f is None or len(struck) >= self.cfg.outlier_max \
                    or len(ts) <= self.cfg.quadratic_min_samples:
                return f, ts, ps, weight, struck
            res = np.hypot(*(ps - np.array([f.pos(t) for t in ts])).T)
            if weight is not None:
                # In units of each read's own stated noise, as the weighted fit holds it: a read
                # the detector trusts more than its neighbours pulls the fit toward itself, so
                # its plain residual stays small however far it lies from the path they trace
                # (uneven_60fps ball 1, 2.75 s: one read weighed 2.5 among reads weighed
                # 0.6-1.0 lay 5-8 mm from them along the rail and turned the approach of its
                # slow contact 29 degrees, speed_in 30 % high).
                res = res * weight
            # How far the residual sum falls when a read is left out (mm^2, weighted): in a
            # linear fit r^2 / (1 - h) (``_leverage``), the square of its studentised residual,
            # the likelihood-ratio test of one read shifted off the path (Cook & Weisberg
            # 1982, ch. 2.2). The read next to the contact, which the short slide there
            # follows, otherwise shows the least residual however far off it lies, and the
            # good reads the bent path then misses are struck in its place.
            fall = res**2 / np.maximum(1.0 - _leverage(ts, f, sigma, self.cfg, weight,
                                                       slide_decel), 1e-6)
            # The median 2-D residual of Gaussian noise is sigma sqrt(2 ln 2) = 1.177 sigma,
            # and one outlier hardly moves it.
            scale = max(sigma, float(np.median(np.sqrt(fall))) / 1.177)
            # The reads nearest the contact are refitted without, each: there the slide's
            # kink and direction move with one read, which the linearisation at the chosen
            # kink misjudges (a mirror bounce's first read 5 mm off: a kink 0.05 s out fitted
            # to it, its linearised fall 1.0 against 8.8 mm^2 refitted, a good read's 3.0).
            refits = {}
            if math.isfinite(f.rss):
                for j in np.argsort(np.abs(ts - t0), kind="stable")[:self.cfg.kink_min_samples + 1]:
                    g = fit(np.arange(len(ts)) != j)
                    if g is not None and math.isfinite(g.rss):
                        fall[j], refits[int(j)] = max(f.rss - g.rss, 0.0), g
            j = int(np.argmax(fall))
            if math.sqrt(fall[j]) <= self.cfg.outlier_sigmas * scale:
                return f, ts, ps, weight, struck
            struck.append(float(ts[j]))
            keep = np.arange(len(ts)) != j
            f = refits[j] if j in refits else fit(keep)
            ts, ps = ts[keep], ps[keep]
            weight = None if weight is None else weight[keep]

    def _side(self, ts: np.ndarray, ps: np.ndarray, t_c: float, sigma: float, step: float,
              slide_decel: float | None = None, weight: np.ndarray | None = None,
              straight: tuple[float, float] | None = None, lateral: bool = False):
        """Piecewise (slide then roll) fit of one side's samples with gross outliers struck
        (``_robust_fit``); returns (fit, times of the samples struck). A path the chosen model
        still cannot explain within the noise (chi-square test ``RSS / sigma^2 >
        chi2.ppf(0.9999, dof)``, e.g. an unmarked third piece) is refitted on the half of the
        window nearest the contact, at most twice."""
        struck: list[float] = []
        for halved in range(3):
            f, ts, ps, weight, bad = self._robust_fit(ts, ps, t_c, sigma, step, slide_decel,
                                                      weight, straight, lateral)
            struck += bad
            if f is None or halved == 2 or len(ts) < 2 * self.cfg.quadratic_min_samples:
                return f, struck
            dof = 2 * f.n - f.k
            if dof <= 0 or f.s2 * dof / max(sigma * sigma, 1e-12) <= chi2.ppf(0.9999, dof):
                return f, struck
            keep = np.abs(ts - t_c) <= np.median(np.abs(ts - t_c))
            ts, ps = ts[keep], ps[keep]
            weight = None if weight is None else weight[keep]
        return f, struck

    def _pinned_contact(self, b: _Ball, ax: int, c: float, t_c: float, lo: float, hi: float,
                        fa0: _Fit, fd0: _Fit, slide_dir: np.ndarray | None = None,
                        slide_tk: tuple[float, float] | None = None, line_sd: float = 0.0):
        """Refine a cushion contact by fitting both sides through one contact point.

        In a rigid impact the centre is on the contact line at the contact instant, the same
        point on both sides, so for a trial time t both sides' fits (``_piecewise_fit``, model
        averaged) have their normal coordinate pinned, ``p_ax(t) = c_t``; the along-rail
        coordinate stays free. Pinning ties the short sliding piece after the impact to the
        contact point, which the samples of that piece alone fix poorly. The line ``c`` (normal
        axis ``ax``) is known only to ``line_sd`` (mm; ``_rail_offsets``), so ``c_t`` is the
        inverse-variance mean of the line and of where each side's unpinned fit (``fa0``,
        ``fd0``) puts the ball at t (the approach, well observed, mostly), and the line's
        Gaussian prior ``((c_t - c) / line_sd)^2`` is added to the criterion: the contact time
        then rests on the line as far as the line is known and on the departure path (its slide
        and the slide's priors) beyond that, so a slow departure, whose slide-back to the line
        stretches every tenth of a millimetre of line into a large change of its speed out, is
        not swung by a line error its own path contradicts. With ``line_sd`` 0, ``c_t = c``.
        t is scanned between the last approach sample and the first departure sample whose
        exposures do not straddle it (the samples nearest the contact on each side that the
        unpinned fits used; with ``slide_tk``, the departure at least out to the prior's slide
        and three samples beyond, so the slide it expects fits in), and the t
        with the least sum of both sides' criterion (plus the line's prior) is kept. Returns
        (t, approach fit, departure fit, c_t) or None.
        """
        n_a, n_d = fa0.n, fd0.n
        w = self.cfg.fit_window_s
        ex = (t_c, 0.5 * self.exposure)
        ta, pa = b.samples(max(lo, t_c - w), t_c, ex)
        td, pd_ = b.samples(t_c, min(hi, t_c + self._depart_reach(b, t_c, hi)), ex)
        if len(ta) < 3 or len(td) < 3:
            return None
        if slide_tk is not None:
            # The slide-then-roll fit puts its kink three samples or more before its window's
            # end (the rolling piece's fewest), so a departure that ``_side`` cut to the half
            # nearest the contact could not hold the slide the prior expects: at 30 fps six
            # samples, the first 0.017 s after the contact, end any slide by 0.084 s, while a
            # ball arriving at 0.68 m/s normal speed on a 1.9 m/s^2 cloth slides about 0.126 s
            # (``_cushion_slide_ratio``: 0.355 vn / mu_s g; multi_rail_30fps at 3.55 s, fitted
            # 0.077 s against 0.116 s true); the slide then came out short and the speed out
            # low whatever the prior said. Kept: the samples out to the prior's slide (mean
            # plus two sd) and three beyond, within the window. (Three beyond the first sample
            # past it, which lets the kink reach the limit itself, turned the 60 fps cut_bank
            # clip's restitution 0.0219 -> 0.0247 and angle out 0.405 -> 0.430 degrees.)
            n_d = max(n_d, int(np.sum(td - t_c <= slide_tk[0] + 2.0 * slide_tk[1])) + 3)
        ta, pa = ta[-n_a:], pa[-n_a:]
        td, pd_ = td[:n_d], pd_[:n_d]
        t_lo, t_hi = ta[-1] + 0.5 * self.exposure, td[0] - 0.5 * self.exposure
        if not t_hi > t_lo:
            return None
        step = self.cfg.kink_step_frames * self.dt
        pin = np.full(2, np.nan)
        pin[ax] = c

        wa, wd = b.weights(ta), b.weights(td)
        straight = self._slid_from_rest(b, lo, t_c)

        def fits(t: float):
            line = 0.0
            if line_sd > 0:
                # c_t = (c / sd^2 + n_a / var_a + n_d / var_d) / (1 / sd^2 + 1 / var_a + 1 / var_d)
                est = [(c, line_sd**2)] + [(float(f.pos(t)[ax]), max(f.var(t), 1e-12))
                                           for f in (fa0, fd0)]
                wt = np.array([1.0 / v for _, v in est])
                pin[ax] = float(wt @ np.array([e for e, _ in est]) / np.sum(wt))
                line = ((pin[ax] - c) / line_sd) ** 2
            fa = _piecewise_fit(ta, pa, t, b.sigma_fit, step, self.cfg, pin, weight=wa,
                                average=True, held=True, straight=straight)
            fd = _piecewise_fit(td, pd_, t, b.sigma_fit, step, self.cfg, pin, self.slide_decel,
                                slide_dir, slide_tk, weight=wd, average=True, held=True,
                                lateral=b.striped)
            if fa is None or fd is None:
                return math.inf, fa, fd
            return fa.bic + fd.bic + line, fa, fd

        # Grid of 1/5 frame, then Brent's bounded minimisation within a grid step of the best.
        grid = np.linspace(t_lo, t_hi, max(3, int(math.ceil((t_hi - t_lo) / (0.2 * self.dt)))
                                           + 1))
        # The unpinned fits' crossing time is a grid point too: with little noise the criterion
        # has a narrow well there that a grid of 1/5 frame can step over.
        grid = np.unique(np.append(grid, np.clip(t_c, t_lo, t_hi)))
        scores = [fits(float(t))[0] for t in grid]
        g = int(np.argmin(scores))
        if not math.isfinite(scores[g]):
            return None
        # Offsets u from the best grid time, so the optimiser's relative tolerance (sqrt(eps)
        # times |u|) does not limit it to ~1e-8 s of the clip time.
        tg = float(grid[g])
        a, z = grid[max(g - 1, 0)] - tg, grid[min(g + 1, len(grid) - 1)] - tg
        res = minimize_scalar(lambda u: fits(tg + float(u))[0], bounds=(a, z), method="bounded",
                              options={"xatol": 1e-9})
        t_best = tg + float(res.x) if res.fun <= scores[g] else tg
        _, fa, fd = fits(t_best)
        return t_best, fa, fd, float(pin[ax])

    # --- cushions ---------------------------------------------------------------------------
    def rough_cushions(self, b: _Ball) -> list[tuple[float, str]]:
        """(time, rail) where the smoothed normal velocity turns away from a rail near it."""
        out = []
        slow_turns = []  # (turn in standard errors, time, rail) below the speed threshold
        cfg = self.cfg
        vmin = cfg.min_velocity_change_mm_s / 2
        # Rows after which the ball is not seen for ``fit_window_s`` (lifted, hidden, gone).
        seen = np.flatnonzero(np.isfinite(b.raw[:, 0]))
        gone = seen[(np.append(b.t[seen[1:]], np.inf) - b.t[seen] >= cfg.fit_window_s)
                    & (b.t[seen] + cfg.fit_window_s <= self.t_end)]
        # Per rail: inward normal, normal axis and reversal line (mm).
        lines = [(rail, np.asarray(rail_inward_normal(rail)), 1 if rail in ("bottom", "top") else 0,
                  self.table.reversal_line(rail)) for rail in RAILS]
        for i0, i1 in b.fast:
            # A ball last seen running into a rail at its reversal line touched it there
            # (``cushion`` then solves it from the approach alone, ``_arrival``).
            for j in gone[(gone >= i0) & (gone <= i1)]:
                for rail, n, ax, c in lines:
                    vn = float(b.v[j] @ n)
                    dist = (b.p[j, ax] - c) * n[ax]
                    if vn < -vmin and dist <= cfg.cushion_reach_mm - vn * self.dt:
                        out.append((float(b.t[j]), rail))
                        self.arrivals.setdefault(b.track, set()).add(float(b.t[j]))
            for rail, n, ax, c in lines:
                vn = b.v[i0:i1 + 1] @ n  # > 0 away from the rail
                dist = (b.p[i0:i1 + 1, ax] - c) * n[ax]  # >= 0 on the cloth side of the line
                for k in range(1, len(vn)):
                    if not (vn[k - 1] < 0 <= vn[k]):
                        continue
                    lo, hi = max(0, k - 3), min(len(vn), k + 3)
                    slow = vn[lo:hi].min() > -vmin or vn[lo:hi].max() < vmin
                    raw_slow = not slow and self._raw_slow(b, i0, i0 + k, ax, n[ax], vmin)
                    reach = cfg.cushion_reach_mm + np.abs(vn[lo:hi]).max() * self.dt
                    if dist[k - 1:k + 1].min() > reach:
                        continue
                    f = -vn[k - 1] / (vn[k] - vn[k - 1])
                    tg = b.t[i0 + k - 1] + f * (b.t[i0 + k] - b.t[i0 + k - 1])
                    if slow or raw_slow:
                        # The smoothed velocity's sign change lags or leads a slow turn by a
                        # few frames; the legs are split where they part most significantly,
                        # and the turn timed where their lines meet. Where only the raw
                        # samples call the turn slow, the smoothed speed may have fallen below
                        # the rest speed with the ball still creeping on into the rail: its
                        # samples up to its next motion count too.
                        i_end = i1 if slow else next(
                            (m0 - 1 for m0, _ in b.fast if m0 > i1), len(b.t) - 1)
                        z, t_turn = max(self._turn_sigmas(b, i0, i_end, kk, ax, n[ax])
                                        for kk in range(max(i0 + 1, i0 + k - 4),
                                                        min(i_end, i0 + k + 4) + 1))
                        if z > cfg.turn_sigmas:
                            slow_turns.append((z, t_turn, rail))
                        continue
                    if any(r == rail and abs(tg - t) < 3 * self.dt for t, r in out):
                        continue
                    out.append((float(tg), rail))
        # A slow turn's smoothed normal velocity flips sign with the noise several times
        # within one leg's reach; the turn is where the two legs part most significantly
        # (non-maximum suppression within ``fit_window_s`` on the same rail, and none
        # within reach of a contact the speed threshold found).
        for z, tg, rail in sorted(slow_turns, reverse=True):
            if all(r != rail or abs(t - tg) >= cfg.fit_window_s for t, r in out):
                out.append((tg, rail))
        return sorted(out)

    def _leg_line(self, b: _Ball, ok: np.ndarray, ax: int, sign: float):
        """Straight-line least-squares fit of the raw normal coordinate ``sign * raw[:, ax]``
        (mm; increasing away from the rail) over the seen rows where ``ok`` (bool per row):
        ``(slope mm/s, its se^2, mean time s, mean coordinate mm)``, or None under three
        samples (a line with no residual). The slope's standard error is ``s / sqrt(sum (t -
        t_mean)^2)`` (ordinary least squares), ``s`` the larger of the track's noise at the
        fits' scale (``_noise_sigma``) and the leg's residual scatter (so a leg that curves is
        not trusted beyond its fit)."""
        ok = ok & np.isfinite(b.raw[:, 0])
        ts, ys = b.t[ok], sign * b.raw[ok, ax]
        if len(ts) < 3:
            return None
        tm = ts - ts.mean()
        sxx = float(tm @ tm)
        slope = float(tm @ (ys - ys.mean())) / sxx
        res = ys - ys.mean() - slope * tm
        s = max(b.sigma_fit, math.sqrt(float(res @ res) / (len(ts) - 2)))
        return slope, s * s / sxx, float(ts.mean()), float(ys.mean())

    def _raw_slow(self, b: _Ball, i0: int, k: int, ax: int, sign: float, vmin: float) -> bool:
        """Whether the raw path turns slowly at row k although the smoothed velocity says
        otherwise: the straight line through the raw normal coordinate over ``fit_window_s``
        before row k (within the motion begun at row i0) heads into the rail, or the one from
        row k on (the ball's own samples, at rest or not) leaves it, slower than ``vmin`` mm/s
        by more than two standard errors of its slope (``_leg_line``).

        The tracker restarts a ball's velocity where it takes a detection past a rail's line
        for a bounce (``tracking.tracker``); a ball creeping into the rail at a few tens of
        mm/s, its detections scattering by millimetres, can be taken as bouncing frames before
        it touches, and its smoothed velocity then swings to a fast reversal there that its raw
        samples do not show (``benchmarks/event_accuracy.py --fps 30 --seed 2``: 163 mm/s into
        the rail, then 74 out, smoothed, against 57 and 54 in truth, 0.12 s before the contact).
        """
        rows = np.arange(len(b.t))
        w = self.cfg.fit_window_s
        ahead = self._leg_line(b, (b.t > b.t[k] - w) & (rows >= i0) & (rows < k), ax, sign)
        after = self._leg_line(b, (b.t < b.t[k] + w) & (rows >= k), ax, sign)
        # The smoothed velocity stands unless a leg is slower than vmin beyond two of its
        # standard errors (one-sided Gaussian tail 0.023): a leg of a few frames, as where the
        # clip ends or the ball is pocketed soon after, is too loose to overrule it.
        return any(leg is not None and z * leg[0] + 2.0 * math.sqrt(leg[1]) < vmin
                   for z, leg in ((-1.0, ahead), (1.0, after)))

    def _turn_sigmas(self, b: _Ball, i0: int, i1: int, k: int, ax: int,
                     sign: float) -> tuple[float, float]:
        """How far (in standard errors) the raw path turns away from a rail at row k: a slow contact
        or a graze, whose normal speeds (tens of mm/s) the smoothed velocity's fixed threshold
        (``min_velocity_change_mm_s``) misses, or a contact whose departure is too short for the
        smoothed velocity to settle (a ball pocketed a few frames after the cushion).

        Each leg, the raw samples of the motion (rows i0..i1) within ``fit_window_s`` before row
        k and from row k on, is fitted by a straight line in the normal coordinate
        (``_leg_line``; axis ``ax``, ``sign`` +1 where the inward normal points along it).
        Returned: the change of normal slope
        between the legs, departure's minus approach's (positive away from the rail), in the
        standard error of that difference, ``(s_d - s_a) / sqrt(se_a^2 + se_d^2)`` (the usual
        two-sample test of equal slopes); 0 when a leg heads the wrong way (the approach away
        from the rail or the departure into it) or has fewer than three samples (a line with
        no residual). A turn counts beyond ``turn_sigmas`` (a one-sided Gaussian test,
        ``rough_cushions``): the threshold falls with longer legs and cleaner detections rather
        than standing at a fixed speed, a well-seen approach carries a departure seen only a
        few frames, and a ball running along a rail has legs of the same normal slope.

        Also returned: the time (s) where the two legs' lines meet, the apex of the turn,
        within the interval between rows k - 1 and k (its ends where the lines meet beyond).
        """
        cfg = self.cfg
        rows = np.arange(len(b.t))
        ok_a = (b.t > b.t[k] - cfg.fit_window_s) & (rows >= i0) & (rows < k)
        ok_d = (b.t < b.t[k] + cfg.fit_window_s) & (rows >= k) & (rows <= i1)
        z, lines = self._legs_turn(b, ok_a, ok_d, ax, sign)
        if lines is None or z <= 0.0 or k < 1:
            return 0.0, float(b.t[k])
        (ta, ya, s_a), (td, yd, s_d) = lines
        # y_a + s_a (t - t_a) = y_d + s_d (t - t_d)
        t_apex = (yd - ya + s_a * ta - s_d * td) / (s_a - s_d)
        return z, float(np.clip(t_apex, b.t[k - 1], b.t[k]))

    def _legs_turn(self, b: _Ball, ok_a: np.ndarray, ok_d: np.ndarray, ax: int, sign: float):
        """(z, legs): the turn away from a rail between the approach leg (rows where ``ok_a``)
        and the departure leg (``ok_d``), each a straight line of the raw normal coordinate
        (``_leg_line``), as ``(s_d - s_a) / sqrt(se_a^2 + se_d^2)`` (the two-sample test of
        equal slopes), 0 when a leg heads the wrong way (the approach away from the rail or the
        departure into it); legs ``((t_mean, y_mean, slope) approach, (...) departure)``, or
        None (and z 0) when a leg has fewer than three samples."""
        legs, var = [], 0.0
        for ok in (ok_a, ok_d):
            leg = self._leg_line(b, ok, ax, sign)
            if leg is None:
                return 0.0, None
            slope, var_slope, t_mean, y_mean = leg
            legs.append((t_mean, y_mean, slope))
            var += var_slope
        s_a, s_d = legs[0][2], legs[1][2]
        return ((s_d - s_a) / math.sqrt(var) if s_a < 0.0 < s_d else 0.0), legs

    def reverses(self, b: _Ball, tg: float, rail: str, others: list[float]) -> bool:
        """Whether the raw path of ``b`` turns away from ``rail`` at the rough contact time
        ``tg`` (s) beyond its noise: legs (``_legs_turn``) of the raw samples within
        ``fit_window_s`` before and after ``tg``, each bounded by the ball's neighbouring rough
        contacts ``others`` (s) and its motion, must part by more than ``turn_sigmas``
        standard errors, or a leg have fewer than ``quadratic_min_samples`` samples: a contact
        a frame or two after a strike or a collision keeps what the smoothed velocity found
        (its approach line runs back to the rest before the strike, 30 fps struck-near shots
        of ``tests/test_events.py``).

        A smoothed velocity that reverses near a rail is no contact when the raw samples
        between the neighbouring contacts do not turn: a tracker that follows a few reads
        pulled millimetres toward the rail (a ball's own shadow on the cushion, a read jumping
        by 9 mm for 4 frames) swings its velocity through zero and back while the ball runs on
        away from the rail (``benchmarks/analyse_accuracy.py --extra`` uneven_60fps on better
        detections: a false contact 0.14 s after a true slow one, ``restitution`` 1.31)."""
        ax = 1 if rail in ("bottom", "top") else 0
        sign = float(rail_inward_normal(rail)[ax])
        guard = 1.5 * self.dt
        lo, hi = _times_around(others, tg, tg, guard)
        i = int(np.clip(np.searchsorted(b.t, tg), 0, len(b.t) - 1))
        move = next(((i0, i1) for i0, i1 in b.moves if i0 <= i <= i1), (0, len(b.t) - 1))
        inside = (b.t >= b.t[move[0]]) & (b.t <= b.t[move[1]])
        w = self.cfg.fit_window_s
        ok_a = inside & (b.t > max(lo, tg - w)) & (b.t < tg)
        ok_d = inside & (b.t > tg) & (b.t < min(hi, tg + w))
        n_min = self.cfg.quadratic_min_samples
        seen = np.isfinite(b.raw[:, 0])
        if min(int(np.sum(ok_a & seen)), int(np.sum(ok_d & seen))) < n_min:
            return True
        z, legs = self._legs_turn(b, ok_a, ok_d, ax, sign)
        return legs is None or z > self.cfg.turn_sigmas

    def cushion(self, b: _Ball, rail: str, tg: float, apex_only: bool = False):
        """A cushion event solved from both sides' fits, or None (no fit, or a jaw contact).

        The contact line is the rail's reversal line moved by the rail's measured offset
        (``rail_offset``). ``apex_only``: return only the apex of the unpinned fits
        (``_apex``: normal coordinate minus the contact line, and its variance, mm and mm^2), or
        None, without the pinned solve.
        """
        c = self.table.reversal_line(rail) + self.rail_offset[rail]
        ax = 1 if rail in ("bottom", "top") else 0  # normal axis
        lo, hi = b.bounds(tg, 1.5 * self.dt)
        t_c = tg
        result = None
        for it in range(3):
            fa, fd = self._side_fits(b, t_c, lo, hi, exclude=it > 0)
            crossings = []
            for f in (fa, fd):
                if f is None:
                    continue
                # Normal coordinate n(tau) = c0 + c1 tau + c2 tau^2 meets the line c.
                poly = [f.coef[2, ax], f.coef[1, ax], f.coef[0, ax] - c]
                tau = _roots_near(poly, tg - t_c, -2 * self.dt + (tg - t_c), 2 * self.dt + (tg - t_c))
                if tau is None:
                    continue
                vn = f.coef[1, ax] + 2 * f.coef[2, ax] * tau
                var_t = f.var(t_c + tau) / max(vn * vn, 1e-12)  # var(t) = var(n) / (dn/dt)^2
                crossings.append((t_c + tau, var_t))
            if not crossings and fa is not None and fd is not None:
                # A graze (``_turn_sigmas``): at tens of mm/s of normal speed neither side's fit
                # need reach the line, known to a millimetre, within two frames; the contact is
                # then where the two sides' path comes nearest the line.
                taus = (tg - t_c) + np.linspace(-2 * self.dt, 2 * self.dt, 81)
                gap = [abs(fa.pos(t_c + u)[ax] - c) + abs(fd.pos(t_c + u)[ax] - c) for u in taus]
                crossings.append((t_c + float(taus[int(np.argmin(gap))]), 1.0))
            if not crossings:
                return None
            w = np.array([1.0 / max(v, 1e-30) for _, v in crossings])
            t_new = float(np.sum(w * np.array([t for t, _ in crossings])) / np.sum(w))
            result = (t_new, fa, fd)
            if abs(t_new - t_c) < 1e-12 and it > 0:
                break
            t_c = t_new
        t_c, fa, fd = result
        fa, fd = self._side_fits(b, t_c, lo, hi, exclude=True)
        if tg in self.arrivals.get(b.track, ()) or fd is None:
            # Found as a ball last seen at the rail, or seen leaving it no more: what follows
            # its crossing is no departure (if anything, the ball still running in).
            return None if apex_only or fa is None else self._arrival(b, rail, fa, t_c, c, ax)
        if fa is None:
            # Too few samples since the ball's last event (a strike or another ball a frame or
            # two before): the contact rests on its departure.
            return None if apex_only else self._departure(b, rail, fd, t_c, c, ax, lo)
        if apex_only:
            apex = _apex(fa, fd, ax, t_c, 2 * self.dt)
            return None if apex is None else (apex[0] - c, apex[1])
        # Direction the ball slides after the impact. Arriving rolling (the approach's piece at
        # the contact is rolling), its spin matches its velocity. The cushion reverses the
        # normal velocity but not the spin about the rail's axis, so just after the impact the
        # ball's bottom slips along the rail's normal and friction pulls it back toward the rail
        # (Alciatore 2004: friction opposes the slip). Along the rail, the cushion's friction
        # slows the velocity and the matching spin together (Mathavan, Jackson & Parkin 2010),
        # so the along-rail slip stays small: the prior is within a few degrees of the rail's
        # outward normal (``_slide_direction``), sd ``slide_dir_sigma_deg``. How long the
        # slide lasts scales with the normal speed arriving (``_cushion_slide_ratio``), a prior
        # once the clip has measured it.
        slide_dir = slide_tk = None
        rolling_in = self.slide_decel is not None and not fa.slid \
            and (fa.tk is not None or fa.k <= 4)
        n_in = np.asarray(rail_inward_normal(rail), dtype=float)
        if rolling_in:
            slide_dir = _slide_direction(fa.vel(t_c), n_in, self.table.contact_angle_rad,
                                         self.cfg.cushion_friction)
            vn_in = max(-float(fa.vel(t_c) @ n_in), 0.0)
            if self.slide_ratio is not None:
                tk = self.slide_ratio * vn_in / self.slide_decel
                slide_tk = (tk, max(self.cfg.slide_ratio_sigma * vn_in / self.slide_decel,
                                    0.25 * self.dt))
        pinned = self._pinned_contact(b, ax, c, t_c, lo, hi, fa, fd, slide_dir, slide_tk,
                                      self.rail_line_sd[rail])
        if pinned is not None:
            t_c, fa, fd, c = pinned
            if rolling_in and fd.tk is not None:
                n_slide = int(np.sum((b.t > t_c) & (b.t <= t_c + fd.tk)
                                     & np.isfinite(b.raw[:, 0])))
                self.slides.append((vn_in, fd.tk, n_slide))
        along = []
        for f in (fa, fd):
            along.append((f.pos(t_c)[1 - ax], max(f.var(t_c), 1e-30)))
        wa = np.array([1 / v for _, v in along])
        s = float(np.sum(wa * np.array([a for a, _ in along])) / np.sum(wa))
        if not any(lo_ <= s <= hi_ for lo_, hi_ in self.segments[rail]):
            return None  # a pocket jaw, not a cushion
        xy = [0.0, 0.0]
        xy[ax], xy[1 - ax] = c, s
        v_in, v_out = fa.vel(t_c), fd.vel(t_c)
        # Not a ball bouncing (a hand or a false track sweeping past the rail): samples that
        # scatter about the fits by more than a ball's radius (rms; no detection of that ball
        # is so far off, while one poor detection among many moves the rms far less), or a
        # path leaving the line much faster than it came (beyond three standard deviations of
        # the two fitted speeds), since a cushion gives back less normal speed than it took
        # (speed ratio below 1; Mathavan et al. 2009 measured at most about 0.95). Nor is a
        # path that, reaching the line, heads away from the rail: a ball strikes a cushion
        # only running into it, and a ball running along the rail, its normal velocity within
        # the noise of zero, turns that way and back in the smoothed velocity (a second, false
        # contact a few frames after a slow one).
        # Only a fit with spare samples (``s2_measured``) measures its scatter; one without has
        # the ball's noise estimate as its s2, which a track of short motions, each holding a
        # contact, can put far above the detections' scatter (``_noise_sigma``: 44 mm on true
        # centres with 0.3 mm of noise at 30 fps, tests/test_events.py's struck-near shots,
        # where 14 of 24 contacts were refused on three-sample approaches).
        if max([f.s2 for f in (fa, fd) if f.s2_measured], default=0.0) \
                > self.table.radius_mm ** 2:
            return None
        vn_in, vn_out = -float(v_in @ n_in), float(v_out @ n_in)
        if vn_in <= 0:
            return None
        sd = math.sqrt(fa.s2 * fa.cov[1, 1] + fd.s2 * fd.cov[1, 1])
        if vn_out - vn_in > 3.0 * sd:
            return None
        a_in, a_out, e = cushion_angles(rail, v_in, v_out)
        return _row(t_c, "cushion", b.track, xy, speed_in=float(np.hypot(*v_in)),
                    speed_out=float(np.hypot(*v_out)), rail=rail,
                    diamond=self.table.to_diamonds(rail, s), angle_in=a_in, angle_out=a_out,
                    restitution=e)

    def _departure(self, b: _Ball, rail: str, fd: _Fit, t_c: float, c: float, ax: int,
                   lo: float):
        """A cushion contact too soon after the ball's previous event (``lo``, s: a strike
        from rest or another ball one or two frames earlier, as at 30 fps) for an approach fit,
        solved from its departure ``fd``, or None.

        The time is where the departure crosses the contact line ``c`` (normal axis ``ax``),
        the point its position there, the speed and angle out its velocity. In a rigid impact
        the centre reaches that point at that instant (as ``_pinned_contact`` assumes), so the
        approach velocity is the chord from the last sample before the contact whose exposure
        does not reach it to that point (over less than two frames a sliding ball's velocity
        changes by ``mu_s g dt``, about 2 % at 2 m/s and 30 fps; Alciatore 2004); with no such
        sample since ``lo`` the speed and angle in and the restitution stay empty (NaN). None
        within a pocket mouth, for a departure that scatters beyond a ball's radius or does not
        leave the rail at ``min_velocity_change_mm_s / 2`` or more, or one that leaves faster
        than the chord came in (beyond three standard deviations; ``cushion``).
        """
        n_in = np.asarray(rail_inward_normal(rail), dtype=float)
        v_out = fd.vel(t_c)
        vn_out = float(v_out @ n_in)
        s = float(fd.pos(t_c)[1 - ax])
        if fd.s2 > self.table.radius_mm ** 2 or vn_out < 0.5 * self.cfg.min_velocity_change_mm_s \
                or not any(lo_ <= s <= hi_ for lo_, hi_ in self.segments[rail]):
            return None
        xy = np.zeros(2)
        xy[ax], xy[1 - ax] = c, s
        v_in = np.full(2, math.nan)
        ts, ps = b.samples(lo, t_c - 0.5 * self.exposure)
        if len(ts):
            gap = t_c - ts[-1]
            chord = (xy - ps[-1]) / gap
            # Variance of the chord's normal component: the sample's noise over the gap, and
            # the departure's own velocity variance beside it.
            sd = math.sqrt(2.0 * b.sigma_fit ** 2 / gap ** 2 + fd.s2 * fd.cov[1, 1])
            vn_in = -float(chord @ n_in)
            if vn_out - vn_in > 3.0 * sd:
                return None
            if vn_in > 0:
                v_in = chord
        a_in, a_out, e = cushion_angles(rail, v_in, v_out)
        return _row(t_c, "cushion", b.track, xy, speed_in=float(np.hypot(*v_in)),
                    speed_out=float(np.hypot(*v_out)), rail=rail,
                    diamond=self.table.to_diamonds(rail, s), angle_in=a_in, angle_out=a_out,
                    restitution=e)

    def _arrival(self, b: _Ball, rail: str, fa: _Fit, t_c: float, c: float, ax: int):
        """A cushion contact of a ball last seen as it reached the rail (lifted or hidden by a
        hand or body right at the contact), from its approach alone, or None.

        A ball running into a cushion cannot pass it, so when the approach fit ``fa`` meets the
        contact line ``c`` (normal axis ``ax``) at ``t_c`` within 1.5 frames of the last
        detection (before or after it), heading in at ``min_velocity_change_mm_s / 2`` or more, and the ball is not
        seen again within ``fit_window_s``, it touched the cushion there. The time, point,
        speed and angle in are the approach's; speed and angle out and restitution stay empty
        (NaN), nothing having been seen of them. None within a pocket mouth, for an approach
        that scatters beyond a ball's radius (not a ball), or if the ball was seen afterwards
        (then the departure's absence has another cause).
        """
        seen = np.isfinite(b.raw[:, 0])
        reach = 1.5 * self.dt
        last = b.t[seen & (b.t <= t_c + reach)]
        if np.any(seen & (b.t > t_c + reach) & (b.t < t_c + self.cfg.fit_window_s)) \
                or not len(last) or t_c - last[-1] > reach or fa.s2 > self.table.radius_mm ** 2:
            return None
        v_in = fa.vel(t_c)
        if -float(v_in @ np.asarray(rail_inward_normal(rail), float)) \
                < 0.5 * self.cfg.min_velocity_change_mm_s:
            return None
        s = float(fa.pos(t_c)[1 - ax])
        if not any(lo_ <= s <= hi_ for lo_, hi_ in self.segments[rail]):
            return None
        xy = [0.0, 0.0]
        xy[ax], xy[1 - ax] = c, s
        a_in, _, _ = cushion_angles(rail, v_in, v_in)
        return _row(t_c, "cushion", b.track, xy, speed_in=float(np.hypot(*v_in)), rail=rail,
                    diamond=self.table.to_diamonds(rail, s), angle_in=a_in)

    # --- collisions -------------------------------------------------------------------------
    def rough_collisions(self, balls: list[_Ball]) -> list[tuple[float, int, int]]:
        """(time, track i, track j) where two balls touch and at least one velocity changes."""
        D = self.table.ball_diameter_mm
        cfg = self.cfg
        out = []
        for ia in range(len(balls)):
            for ib in range(ia + 1, len(balls)):
                a, b = balls[ia], balls[ib]
                common, ka, kb = np.intersect1d(a.frame, b.frame, return_indices=True)
                if len(common) < 3:
                    continue
                d = np.hypot(*(a.p[ka] - b.p[kb]).T)
                vrel = np.hypot(*(a.v[ka] - b.v[kb]).T)
                # Where a track begins or ends (a ball first seen as it leaves a contact, unseen
                # at rest before), its partner's smoothed velocity there may still be the one
                # before the contact: allow each ball's own travel in a frame instead.
                edge = np.zeros(len(common), bool)
                edge[:2] |= ka[:2] < 2
                edge[:2] |= kb[:2] < 2
                edge[-2:] |= ka[-2:] >= len(a.t) - 2
                edge[-2:] |= kb[-2:] >= len(b.t) - 2
                reach = np.where(edge, np.hypot(*a.v[ka].T) + np.hypot(*b.v[kb].T), vrel)
                close = d < D + cfg.collision_margin_mm + reach * self.dt
                for k, k1 in _runs(close):
                    # The closest approach; else, for balls that rested touching (a rack, a
                    # frozen pair) and whose closest approach is wherever their noise put it,
                    # the moment in the stretch where the velocities change most: the middle
                    # of the peak of the change over six frames (above half its top).
                    m = np.arange(k, k1 + 1)
                    change = np.maximum(_velocity_change(a, ka[m]), _velocity_change(b, kb[m]))
                    top = int(np.argmax(change))
                    p0 = p1 = top
                    while p0 > 0 and change[p0 - 1] >= 0.5 * change[top]:
                        p0 -= 1
                    while p1 + 1 < len(change) and change[p1 + 1] >= 0.5 * change[top]:
                        p1 += 1
                    # Where the two are over three frames apart (outside each other's
                    # window), the one whose velocities change more: a resting track's noise
                    # can pass the test at its closest approach. The second only where the
                    # two touch then (within ``collision_margin_mm``), not for a ball turned
                    # by a cushion as it passes another.
                    ks_d, ks_c = k + int(np.argmin(d[k:k1 + 1])), k + (p0 + p1) // 2
                    kick = {}
                    for ks in {ks_d, ks_c} if d[ks_c] < D + cfg.collision_margin_mm else {ks_d}:
                        lo, hi = max(0, ks - 3), min(len(common) - 1, ks + 3)
                        dv = max(_velocity_change(a, ka[[ks]])[0],
                                 _velocity_change(b, kb[[ks]])[0])
                        if dv >= cfg.min_velocity_change_mm_s and \
                                vrel[lo:hi + 1].max() > cfg.move_speed_mm_s:
                            kick[ks] = dv
                    if ks_d in kick and (abs(ks_c - ks_d) <= 3 or kick[ks_d] >= kick.get(ks_c, 0)):
                        out.append((float(a.t[ka[ks_d]]), a.track, b.track))
                    elif ks_c in kick:
                        out.append((float(a.t[ka[ks_c]]), a.track, b.track))
        return sorted(out)

    def _touch_time(self, f1: _Fit, f2: _Fit, tg: float, approach: bool):
        """Time (s) and its variance where fits f1, f2 (same t0) are one diameter apart."""
        D = self.table.ball_diameter_mm
        dc = f1.coef - f2.coef  # (3, 2): relative path d(tau) = dc0 + dc1 tau + dc2 tau^2
        # |d(tau)|^2 - D^2 as a quartic, highest power first.
        px = np.polynomial.polynomial.polymul(dc[:, 0], dc[:, 0])
        py = np.polynomial.polynomial.polymul(dc[:, 1], dc[:, 1])
        q = np.zeros(5)
        q[: len(px)] += px
        q[: len(py)] += py
        q[0] -= D * D
        t0 = f1.t0
        lo, hi = (tg - t0) - 3 * self.dt, (tg - t0) + 3 * self.dt
        # The paths, extrapolated, pass one diameter apart twice around a touch: closing in
        # and drawing apart. The approach touches where they close in, the departure where
        # they draw apart; the other root is no touch, however near the rough time it lies (a
        # rough time a frame off, when the contact comes a frame after a strike).
        best = None
        for tau in _real_roots(q[::-1], lo, hi):
            d = f1.pos(t0 + tau) - f2.pos(t0 + tau)
            vrel = f1.vel(t0 + tau) - f2.vel(t0 + tau)
            rate = float(d @ vrel) / D  # d|d|/dt
            if ((rate < 0) if approach else (rate > 0)) and (
                    best is None or abs(tau - (tg - t0)) < abs(best[0] - (tg - t0))):
                best = (float(tau), rate)
        if best is None:
            return None
        tau, rate = best
        var = (f1.var(t0 + tau) + f2.var(t0 + tau)) / max(rate * rate, 1e-12)
        return t0 + tau, var

    def collision(self, a: _Ball, b: _Ball, tg: float) -> list[dict]:
        guard = 1.5 * self.dt
        la, ha = a.bounds(tg, guard)
        lb, hb = b.bounds(tg, guard)
        t_c = tg
        fits = None
        for it in range(3):
            fa_in, fa_out = self._quadratic_fits(a, t_c, la, ha, exclude=it > 0, strike=True)
            fb_in, fb_out = self._quadratic_fits(b, t_c, lb, hb, exclude=it > 0, strike=True)
            sols = []
            if fa_in is not None and fb_in is not None:
                sols.append(self._touch_time(fa_in, fb_in, tg, approach=True))
            if fa_out is not None and fb_out is not None:
                sols.append(self._touch_time(fa_out, fb_out, tg, approach=False))
            sols = [s for s in sols if s is not None]
            if not sols:
                break
            w = np.array([1 / max(v, 1e-30) for _, v in sols])
            t_c = float(np.sum(w * np.array([t for t, _ in sols])) / np.sum(w))
            fits = (fa_in, fa_out, fb_in, fb_out)
        if fits is None:
            return []
        if (fits[1] is None and fits[3] is None) or (fits[0] is None and fits[2] is None):
            # Neither path goes on after the touch (or neither comes before it): two balls cannot
            # both leave the table, or both come onto it, at a mid-table contact, so these are
            # two false tracks (a hand's parts) ending or starting together.
            return []
        if None not in fits:
            # Equal masses: the two velocity changes are equal and opposite (EventConfig).
            dv = sorted(float(np.hypot(*(fout.vel(t_c) - fin.vel(t_c))))
                        for fin, fout in ((fits[0], fits[1]), (fits[2], fits[3])))
            if dv[0] < self.cfg.collision_min_balance * dv[1]:
                return []
            if _impulse_sigmas(fits, t_c) < self.cfg.collision_impulse_sigmas:
                return []
        rows = []
        for me, other, fin, fout in ((a, b, fits[0], fits[1]), (b, a, fits[2], fits[3])):
            ps = [(f.pos(t_c), max(f.var(t_c), 1e-30)) for f in (fin, fout) if f is not None]
            w = np.array([1 / v for _, v in ps])
            xy = np.sum(w[:, None] * np.array([p for p, _ in ps]), axis=0) / np.sum(w)
            s_in = float(np.hypot(*fin.vel(t_c))) if fin is not None else math.nan
            s_out = float(np.hypot(*fout.vel(t_c))) if fout is not None else math.nan
            rows.append(_row(t_c, "collision", me.track, xy, speed_in=s_in, speed_out=s_out,
                             other=other.track))
        return rows

    def cluster(self, balls: list[_Ball], group: list[tuple[float, int, int]]):
        """The contacts of a cluster of three or more balls meeting at one instant.

        Method: the instant ``t_c`` is the first touch of the driven ball's approach path (the
        ball of the cluster that left rest first) with another's (``_touch_time`` on the
        approach fits with gross outliers struck, iterated as in ``collision``). Each ball's
        velocity change ``dv_k`` at ``t_c`` (departure minus approach fit) is the sum of the
        impulses (per unit mass) of its contacts, each along its line of centres: smooth equal
        spheres exchange
        equal and opposite impulses along the line of centres (Newton's third law; the
        friction impulse is at most the ball-ball friction 0.03-0.08 of it, Alciatore 2004
        [secondary]). So ``dv_k = sum_e J_e s_ke n_e`` over the pairs e in contact at ``t_c``
        (centres within a diameter plus ``collision_margin_mm`` on the approach fits), with
        ``J_e >= 0`` and ``s_ke = +1 / -1`` for the pair's first / second ball. Within one
        frame a wave of contacts runs through a rack: a ball is pushed by one neighbour, pushes
        the next, is caught up again, and meets some pairs twice. So the contacts are first
        taken from the impacts of a sequential-impulse model of that wave fitted to the
        ``dv_k`` (``_wave_rows``, ``_fit_wave``), each at its own time in the wave. Where that
        model leaves more than ``wave_max_outlier_share`` of the balls unexplained, the
        ``J_e`` are solved by non-negative least squares (Lawson & Hanson 1974,
        ``scipy.optimize.nnls``) with each ball's equations weighted by the standard error of
        its ``dv``, each bounded by the impulse that can reach its pair (``_cradle_bound``: a
        later contact's impulse in a ball's departure fit otherwise goes to a touching
        neighbour it never pushed). A pair is a collision where its impulse exceeds
        ``min_velocity_change_mm_s`` and ``collision_impulse_sigmas`` standard errors (from
        the active pairs' normal equations). Its time is the pair's own approach touch, else
        ``t_c`` (the departure fits show every contact's sum, so they time none).

        ``group`` is the rough collisions (time s, track i, track j). Returns (t_c, rows, pairs
        (i, j) with i < j in contact at ``t_c``), or None where some ball lacks a fit on either
        side or the driven ball no timed touch (the group is then solved pair by pair).
        """
        D = self.table.ball_diameter_mm
        guard = 1.5 * self.dt
        t_lo, t_hi = min(g[0] for g in group), max(g[0] for g in group)
        ids = [b.track for b in balls]
        lims = {}
        for b in balls:  # the group's own rough times bound nothing
            lo, _ = b.bounds(t_lo, guard)
            _, hi = b.bounds(t_hi, guard)
            lims[b.track] = (lo, hi)
        # The impulse comes from the ball driven in, the first to leave rest: every ball it
        # passes on to was set moving by it (``_set_moving``), though a touching ball's
        # detections may shift as the driven ball closes in on it (rendered rack, 60 fps).
        left = {b.track: _left_rest(self, b, t_lo) for b in balls}
        driver = min(ids, key=lambda k: left[k])
        # Searched from the driven ball's own first rough contact: touching resting balls'
        # noise may join the group frames before it arrives (a six-ball rack's rough times
        # from 0.50 s for a break at 0.554 s, 50 fps), and a fit from there holds too little.
        t_c = min((g[0] for g in group if driver in g[1:]), default=t_lo)
        fits = None
        for it in range(3):
            fits = {b.track: self._quadratic_fits(b, t_c, *lims[b.track], exclude=it > 0,
                                                  strike=True)
                    for b in balls}
            if any(f[0] is None or f[1] is None for f in fits.values()):
                return None
            # The cluster's instant: the driven ball's first touch. Only a touch timed to
            # within a frame interval: a resting ball's fit that noise bends crosses one
            # diameter from another anywhere.
            touches = [s[0] for k in ids if k != driver
                       for s in [self._touch_time(fits[driver][0], fits[k][0], t_c, True)]
                       if s is not None and s[1] < self.dt * self.dt]
            if not touches:
                return None
            t_c = min(touches)
        pos = {k: f[0].pos(t_c) for k, f in fits.items()}
        dv = {k: f[1].vel(t_c) - f[0].vel(t_c) for k, f in fits.items()}
        sd = {k: math.sqrt(max(f[0].vel_var(t_c) + f[1].vel_var(t_c), 1e-12))
              for k, f in fits.items()}
        pairs = [(ids[ia], ids[ib]) for ia in range(len(ids)) for ib in range(ia + 1, len(ids))
                 if np.hypot(*(pos[ids[ia]] - pos[ids[ib]])) <= D + self.cfg.collision_margin_mm]
        touching = {(min(p), max(p)) for p in pairs}
        if not pairs:
            return t_c, [], touching
        wave = self._wave_rows(ids, driver, fits, pos, dv, sd, t_c)
        if wave is not None:
            return t_c, wave, touching
        # A (2 x balls, pairs) design: column e holds +n_e / sd on its first ball's rows and
        # -n_e / sd on its second's, n_e the unit vector from the second centre to the first.
        row_of = {k: 2 * r for r, k in enumerate(ids)}
        A = np.zeros((2 * len(ids), len(pairs)))
        y = np.concatenate([dv[k] / sd[k] for k in ids])
        for e, (i, j) in enumerate(pairs):
            n = pos[i] - pos[j]
            n = n / max(float(np.hypot(*n)), 1e-12)
            A[row_of[i]:row_of[i] + 2, e] = n / sd[i]
            A[row_of[j]:row_of[j] + 2, e] = -n / sd[j]
        J, _ = nnls(A, y)
        J = _cradle_bound(J, A, y, driver, fits[driver][0].vel(t_c), pairs, pos, sd)
        active = J > 0
        se = np.full(len(pairs), np.inf)
        if active.any():
            Aa = A[:, active]
            se[active] = np.sqrt(np.diag(np.linalg.pinv(Aa.T @ Aa)))
        rows = []
        for e, (i, j) in enumerate(pairs):
            if not (J[e] >= self.cfg.min_velocity_change_mm_s
                    and J[e] >= self.cfg.collision_impulse_sigmas * se[e]):
                continue
            s = self._touch_time(fits[i][0], fits[j][0], t_c, approach=True)
            t_e = s[0] if s is not None and s[1] < self.dt * self.dt \
                and abs(s[0] - t_c) <= 0.5 * self.dt else t_c
            for me, other in ((i, j), (j, i)):
                fin, fout = fits[me]
                r = _row(t_e, "collision", me, fin.pos(t_e),
                         speed_in=float(np.hypot(*fin.vel(t_e))),
                         speed_out=float(np.hypot(*fout.vel(t_e))), other=other)
                r["driver"] = driver if me != driver else other
                rows.append(r)
        if rows:
            rows += self._kiss_back(driver, pairs, fits, pos, t_c)
        return t_c, rows, touching

    def _wave_rows(self, ids: list[int], driver: int, fits: dict, pos: dict, dv: dict,
                   sd: dict, t_c: float) -> list[dict] | None:
        """Rows of a cluster's contacts from its fitted contact wave (``_fit_wave``), where the
        wave explains every ball's measured velocity change but at most a share
        ``wave_max_outlier_share`` of the balls (beyond ``wave_misfit_sigmas``); None otherwise
        (the cluster's impulses are then solved pair by pair, ``cluster``).

        The wave runs for half a frame interval from ``t_c``: a ball's departure fit begins at
        the first frame after the contact, on average that much later, so its velocity change
        holds the contacts until then (run for a whole frame interval, the rack-break harness
        of session 14 found one contact more and one false pair more). Each impact is reported
        at ``t_c`` plus its time in the wave, with the wave's speeds before and after it and
        its centres there (a repeat timed by the departure fits, at their centres then).

        Not met: a frozen rack (no gaps), whose balls our simulator presses apart at one
        instant; the fitted gaps of a millimetre or so make the wave meet some pairs twice or
        across (the rack-break harness with no gaps: 28 false pairs against 22 without the
        wave, 119 of 135 contacts found against 122)."""
        P = np.array([pos[k] for k in ids])
        V = np.zeros_like(P)
        fixed = ids.index(driver)
        V[fixed] = fits[driver][0].vel(t_c)
        M = np.array([dv[k] for k in ids])
        S = np.array([sd[k] for k in ids])
        contacts, r, s, _ = _fit_wave(P, V, M, S, fixed, self.table.ball_diameter_mm,
                                      self.cfg, 0.5 * self.dt)
        if np.mean(r > self.cfg.wave_misfit_sigmas) > self.cfg.wave_max_outlier_share:
            return None
        # A contact is kept at ``min_velocity_change_mm_s`` as any other, or below it where its
        # impulse exceeds ``collision_impulse_sigmas`` standard errors of both balls' measured
        # changes: a slow late meeting in the wave (bright_pocket_1080p50 of the extra set:
        # about 40 mm/s, 0.83 frame after the break) that the measurements can tell.
        kept = [c for c in contacts if c[3] >= min(
            self.cfg.min_velocity_change_mm_s,
            self.cfg.collision_impulse_sigmas * math.hypot(s[c[1]], s[c[2]]))]
        rows = []
        for n_c, (tau, i, j, imp, vi0, vj0, vi1, vj1, pi, pj) in enumerate(kept):
            t_e = t_c + tau
            earlier = [c[0] for c in kept[:n_c] if {c[1], c[2]} == {i, j}]
            if earlier and not any({i, j} & {c[1], c[2]} for c in kept[n_c + 1:]):
                # A pair meeting again, for the last time for both: their departure fits hold
                # their paths from it and time it too (``_repeat_time``). The wave's clock runs
                # on gaps it knows only to the centres' prior: its time is uncertain by about
                # hypot(sd_p, sd_p) over the closing speed 2 J / (1 + e).
                w = 2.0 * imp / (1.0 + self.cfg.ball_restitution)
                sd_w = math.sqrt(2.0) * self.cfg.wave_position_sd_mm / max(w, 1e-9)
                t_r = self._repeat_time(fits[ids[i]][1], fits[ids[j]][1], t_c + earlier[-1],
                                        t_c + earlier[-1] + self.dt, (t_e, sd_w))
                if t_r is not None:
                    t_e, pi, pj = t_r, fits[ids[i]][1].pos(t_r), fits[ids[j]][1].pos(t_r)
            for me, other, v0, v1, pm in ((i, j, vi0, vi1, pi), (j, i, vj0, vj1, pj)):
                r_ = _row(t_e, "collision", ids[me], pm, speed_in=float(np.hypot(*v0)),
                          speed_out=float(np.hypot(*v1)), other=ids[other])
                r_["driver"] = driver if ids[me] != driver else ids[other]
                rows.append(r_)
        return rows or None

    def _repeat_time(self, f_i: _Fit, f_j: _Fit, lo: float, hi: float,
                     prior: tuple[float, float] | None = None) -> float | None:
        """Time (s) of two balls' last contact from their departure fits ``f_i``, ``f_j``: where
        those paths are one diameter apart, drawing apart (``_touch_time``), known to a few
        milliseconds; combined with ``prior`` (time s, sd s; inverse-variance weights) where
        given, and restricted to where the contact can lie, ``lo`` to ``hi`` (s): the mean of
        that Gaussian estimate truncated there (common practice; see ``_kiss_back``). None
        where the paths give no such touch."""
        s = self._touch_time(f_i, f_j, lo, approach=False)
        if s is None:
            return None
        mu, var = s[0], max(s[1], 1e-18)
        if prior is not None:
            w0, w1 = 1.0 / var, 1.0 / max(prior[1] ** 2, 1e-18)
            mu, var = (w0 * mu + w1 * prior[0]) / (w0 + w1), 1.0 / (w0 + w1)
        sd_t = math.sqrt(var)
        return float(truncnorm.mean((lo - mu) / sd_t, (hi - mu) / sd_t, loc=mu, scale=sd_t))

    def _kiss_back(self, driver: int, pairs: list[tuple[int, int]], fits: dict, pos: dict,
                   t_c: float) -> list[dict]:
        """Rows of a second contact between the driven ball and the one ball it touches in a
        cluster (``cluster``), where that ball came back into it; none where it did not.

        Method: in one impact of equal smooth spheres with restitution e <= 1 the striker's
        velocity along the line of centres u (unit, striker to struck) becomes
        ``v_d' . u = v_p . u + (1 - e) / 2 (v_d - v_p) . u`` (Newton's law of restitution with
        conservation of momentum; Alciatore 2004), so it never falls below the struck ball's
        before the impact. The driven ball touches no other ball of the cluster, so its
        departure (``fits[driver][1]``) below its partner's approach along u, beyond
        ``collision_impulse_sigmas`` standard errors, can only come of a second impulse from
        that partner: the partner, driven into balls that outweigh it along the line (two
        touching balls at 30 degrees either side of it weigh 1.5 balls along it), bounced back
        into the striker (uneven_60fps of ``benchmarks/analyse_accuracy.py --extra``: the cue
        ball driven at 3.2 m/s into a three-ball cluster is struck back 2.3 ms after the first
        contact, leaving backward at 230 mm/s). The second contact is the pair's last, so
        their departure paths are one diameter apart there (``_touch_time`` on the departure
        fits), known to a few milliseconds (about a quarter of a frame at 60 fps) and then
        often before ``t_c`` itself, which a detection bias of a millimetre or two moves by
        as much: the time reported is that touch's estimate restricted to after ``t_c`` and
        within the frame interval after it (the mean of the truncated normal distribution),
        for a touch within three frame intervals of ``t_c`` (where ``_touch_time`` looks); the
        speed before it (held for a fraction of a frame) is left empty.
        """
        mine = [p for p in pairs if driver in p]
        if len(mine) != 1:
            return []
        partner = mine[0][0] if mine[0][1] == driver else mine[0][1]
        (_, d_out), (p_in, p_out) = fits[driver], fits[partner]
        u = pos[partner] - pos[driver]
        u = u / max(float(np.hypot(*u)), 1e-12)
        gap = float((p_in.vel(t_c) - d_out.vel(t_c)) @ u)  # > 0: driver slower than one impact
        sd = math.sqrt(max(d_out.vel_var(t_c) + p_in.vel_var(t_c), 1e-12))
        if gap < self.cfg.collision_impulse_sigmas * sd:
            return []
        t_k = self._repeat_time(d_out, p_out, t_c, t_c + self.dt)
        if t_k is None:
            return []
        rows = []
        for me, other, fout in ((driver, partner, d_out), (partner, driver, p_out)):
            r = _row(t_k, "collision", me, fout.pos(t_k),
                     speed_out=float(np.hypot(*fout.vel(t_k))), other=other)
            r["driver"] = driver if me != driver else other
            rows.append(r)
        return rows

    # --- start, stop, pocket ----------------------------------------------------------------
    def _leaving(self, b: _Ball, i0: int):
        """How ``b`` leaves rest at the motion beginning at row ``i0``: its rest position (2,)
        mm, the raw samples at rest before it (times (n,) s) and the raw samples from the first
        one clearly off the rest position on (more than three times the rest samples' median
        scatter, at least 1 mm; times (m,) s, positions (m, 2) mm)."""
        lo, hi = b.bounds(b.t[i0], 1.5 * self.dt)
        p_rest, rest_t, thr = _rest_position(b, i0, lo, self.dt)
        ts, ps = b.samples(b.t[max(0, i0 - 3)] - 1e-9, min(hi, b.t[i0] + self.cfg.start_fit_s
                                                          + 4 * self.dt))
        # Reads off the spot that come back by the motion's first row are not its leaving
        # (``_left_for_good``).
        bt, bp = b.samples(max(lo, b.t[i0] - 0.5) - 1e-9, b.t[i0] + 1e-9)
        back = _returned(bp, p_rest, thr, self.cfg.min_travel_mm)
        off = np.hypot(*(ps - p_rest).T) > thr
        if back is not None:
            off &= ts > bt[back]
        first = int(np.argmax(off)) if off.any() else 0
        return p_rest, rest_t, ts[first:], ps[first:]

    def start(self, b: _Ball, i0: int) -> dict:
        """The instant ``b`` leaves rest, from its first moving samples extrapolated back."""
        p_rest, rest_t, ts, ps = self._leaving(b, i0)
        if len(ts):  # none where the ball was unseen all along (coasted under an arm)
            # Two samples at least, the fewest a line needs: a ball struck from rest may go
            # unseen for frames while its streak is missed, and the sample after that gap
            # still fixes its launch better than the motion's first row (a frame early).
            keep = ts <= max(ts[0] + self.cfg.start_fit_s, ts[min(1, len(ts) - 1)])
            ts, ps = ts[keep], ps[keep]
        t_prev = float(rest_t[-1]) if len(rest_t) else b.t[i0] - self.dt
        if len(ts) >= 2:
            f = _fit(ts, ps, ts[0], self._deg(len(ts)), self.cfg.meas_sigma_mm)
            u = f.vel(ts[0])
            u = u / max(np.hypot(*u), 1e-12)
            # s(tau) = u . (p(tau) - p_rest) along the launch direction; the start is s = 0.
            poly = [u @ f.coef[2], u @ f.coef[1], u @ (f.coef[0] - p_rest)]
            tau = _roots_near(poly, 0.0, t_prev - ts[0] - self.dt, 0.0)
            t_s = ts[0] + (tau if tau is not None else 0.0)
            t_s = float(np.clip(t_s, t_prev, ts[0]))
            speed = float(np.hypot(*f.vel(t_s)))
        else:
            t_s, speed = float(b.t[i0]), float(np.hypot(*b.v[i0]))
        return _row(t_s, "start", b.track, p_rest, speed_in=0.0, speed_out=speed)

    def stop(self, b: _Ball, i1: int, t_last_event: float, t_rest_end: float) -> dict:
        """The instant ``b`` comes to rest and where, after the motion ending at row ``i1`` (the
        last before it rests, ``_motion``), its last contact at ``t_last_event`` and its rest
        lasting until ``t_rest_end`` (s).

        A ball comes to rest rolling: its last stretch decelerates at mu_r g along a straight
        line (Alciatore 2004, technical proofs: a rolling ball stops after v^2 / (2 mu_r g)), so
        with the stop at ``t_s`` and the rest point ``p_s`` its centre is
        ``p(t) = p_s - (a / 2) u (t_s - t)^2`` before ``t_s`` and ``p_s`` after, for the
        deceleration ``a`` along the travel direction ``u`` (uniformly accelerated rectilinear
        motion). The raw samples of the whole last rolling piece (from the last contact's
        slide on, ``_roll_start``, at most ``stop_back_s`` before the rest's start) to
        ``stop_fit_s`` after it (never past
        ``t_rest_end``) are fitted by weighted least squares, linear in ``p_s, a`` for a given
        ``t_s`` (``_stop_fit``) with the prior ``roll_decel_mm_s2 +- roll_decel_sigma_mm_s2``
        on ``a``, ``u`` the chord from the first samples to the last; ``t_s`` is scanned from
        the last contact on (``_stop_scan``). That first fit's stop starts the stay at rest,
        whose median read (``_rest_point``) then pins ``p_s``, and ``t_s`` and ``a`` are
        fitted again, and once more without the samples left over ``outlier_sigmas`` noise
        sigmas off. A ball that a contact stops dead gets ``t_s`` at
        the contact: running on beyond it must beat lying still from it by more than the
        Bayesian information criterion's penalty of its two parameters. The stop's position
        is the mean of the raw samples after ``t_s`` in the rest (``p_s`` where there are
        none).

        Why the whole piece and a pinned rest point: the last stretch alone fixes the stop
        by where its reads reach the rest point, and lamp_50fps's crawling 4 ball (extra set)
        is read 3-7 mm ahead in its last 0.4 s, up to 5 mm past where it comes to lie, while
        its stay's reads (one read carried over unchanged frames, stated sd 5 mm) hardly
        weigh: its stop came 0.155 s early (0.6 s each side of the rest's start). The
        piece's earlier reads fix its deceleration, and the stay's median its end."""
        cfg = self.cfg
        t_rest = float(b.t[min(i1 + 1, len(b.t) - 1)])
        t_lo = t_last_event + 0.5 * self.exposure
        ts, ps = b.samples(max(self._roll_start(b, t_lo), t_rest - cfg.stop_back_s) - 1e-9,
                           min(t_rest_end, t_rest + cfg.stop_fit_s) + 1e-9)
        t_s = t_rest
        p_s = b.p[min(i1 + 1, len(b.t) - 1)]
        if len(ts) >= 3:
            wt = b.weights(ts)
            w = np.ones(len(ts)) if wt is None else wt**2
            # The travel direction: the weighted chord from the first samples to the last.
            q = max(1, len(ts) // 4)
            chord = np.average(ps[-q:], axis=0, weights=w[-q:]) - np.average(
                ps[:q], axis=0, weights=w[:q])
            u = chord / max(float(np.hypot(*chord)), 1e-9)
            lo_s = max(t_last_event, ts[0] - self.dt)
            t_s, _, _ = self._stop_scan(ts, ps, w, u, b.sigma_fit, lo_s)
            rest = _rest_point(b.samples(t_s, t_rest_end + 1e-9)[1])
            for _ in range(2):
                # Once more without the samples the first fit leaves over ``outlier_sigmas``
                # noise sigmas off: detections of something else beside a dim ball.
                t_s, p_s, keep = self._stop_scan(ts, ps, w, u, b.sigma_fit, lo_s, rest)
                if keep.all() or keep.sum() < 3:
                    break
                ts, ps, w = ts[keep], ps[keep], w[keep]
        t_s = max(t_s, t_last_event)
        after_t, after_p = b.samples(t_s, t_rest_end + 1e-9)
        xy = np.mean(after_p, axis=0) if len(after_p) else p_s
        return _row(t_s, "stop", b.track, xy, speed_in=0.0, speed_out=0.0)

    def _roll_start(self, b: _Ball, t_lo: float) -> float:
        """Time (s) from which ``b``'s motion after its last contact (``t_lo``, half an
        exposure past it) rolls: after the slide, ``2 |slip| / (7 mu_s g)`` (Alciatore 2004),
        taken with the slip at the ball's smoothed speed just after the contact (a ball hit by
        another leaves with no spin, so its slip is its speed) and ``mu_s g`` the clip's
        measured sliding deceleration or ``slide_decel_mm_s2``. The slide's samples would
        bend the rolling fit at its start."""
        k = min(int(np.searchsorted(b.t, t_lo)) + 1, len(b.t) - 1)
        decel = self.slide_decel if self.slide_measured else self.cfg.slide_decel_mm_s2
        return t_lo + 2.0 * float(np.hypot(*b.v[k])) / (7.0 * decel)

    def _stop_scan(self, ts: np.ndarray, ps: np.ndarray, w: np.ndarray, u: np.ndarray,
                   sigma_mm: float, lo_s: float,
                   rest: np.ndarray | None = None) -> tuple[float, np.ndarray, np.ndarray]:
        """Best stop time (s) from ``lo_s`` on and its rest point (2,) mm (``_stop_fit`` on a
        grid of ``kink_step_frames`` frame intervals, then Brent's bounded method between the
        best grid point's neighbours), and which samples (n,) bool lie within
        ``outlier_sigmas`` noise sigmas of that path; ``rest`` (2,) mm pins the rest point."""
        step = self.cfg.kink_step_frames * self.dt
        grid = np.arange(lo_s, max(float(ts[-1]), lo_s) + 0.5 * step, step)
        cost = [self._stop_fit(tg, ts, ps, w, u, sigma_mm, rest)[0] for tg in grid]
        k = int(np.argmin(cost))
        a, c = grid[max(k - 1, 0)], grid[min(k + 1, len(grid) - 1)]
        t_s = float(grid[k])
        if c > a:
            res = minimize_scalar(lambda tg: self._stop_fit(tg, ts, ps, w, u, sigma_mm, rest)[0],
                                  bounds=(a, c), method="bounded", options={"xatol": 1e-4})
            if res.fun <= cost[k]:
                t_s = float(res.x)
        # Stopped at ``lo_s`` (every sample after it at rest) unless running on until ``t_s``
        # explains the samples better by more than the Bayesian information criterion's
        # penalty of its two parameters (``t_s``, ``a``), 2 ln n, in units of the resting
        # model's own residual variance: a ball stopped dead by a contact lies still, and a
        # path fitted to its noise must not run it on.
        rss_lo = self._stop_fit(lo_s, ts, ps, w, u, sigma_mm, rest)[0]
        s2_lo = rss_lo / max(2 * len(ts) - 2, 1)
        if s2_lo > 0 and (rss_lo - min(cost)) / s2_lo < 2.0 * math.log(len(ts)):
            t_s = lo_s
        _, p_s, pred = self._stop_fit(t_s, ts, ps, w, u, sigma_mm, rest)
        keep = np.hypot(*(ps - pred).T) <= self.cfg.outlier_sigmas * sigma_mm
        return t_s, p_s, keep

    def _stop_fit(self, t_s: float, ts: np.ndarray, ps: np.ndarray, w: np.ndarray,
                  u: np.ndarray, sigma_mm: float,
                  rest: np.ndarray | None = None) -> tuple[float, np.ndarray, np.ndarray]:
        """Criterion, rest point (2,) mm and fitted path (n, 2) mm of the stop model of
        ``stop`` at trial ``t_s`` (s): ``p(t) = p_s - (a / 2) u max(t_s - t, 0)^2``.

        Samples ts (n,) s, ps (n, 2) mm, weights w (n,); travel direction u (2,) (a straight
        path: nothing across it for the noise to fit). Unknowns ``[px, py, a]``, linear, or
        ``a`` alone where ``rest`` (2,) mm gives ``p_s``; criterion the weighted RSS /
        sigma^2 plus the prior ``((a - a0) / sd)^2``."""
        cfg = self.cfg
        qq = -0.5 * np.clip(t_s - ts, 0.0, None) ** 2
        n = len(ts)
        A = np.zeros((2 * n, 3))
        A[:n, 0] = 1.0
        A[n:, 1] = 1.0
        A[:n, 2] = u[0] * qq
        A[n:, 2] = u[1] * qq
        y = np.concatenate([ps[:, 0], ps[:, 1]])
        ww = np.concatenate([w, w]) / sigma_mm**2
        prior_w = 1.0 / cfg.roll_decel_sigma_mm_s2**2
        N = (A * ww[:, None]).T @ A
        N[2, 2] += prior_w
        rhs = (A * ww[:, None]).T @ y
        rhs[2] += prior_w * cfg.roll_decel_mm_s2
        if rest is not None:
            # p_s known: a's normal equation alone, with the rest point's columns moved over.
            th = np.array([rest[0], rest[1], 0.0])
            th[2] = (rhs[2] - N[2, :2] @ th[:2]) / N[2, 2]
        else:
            th = np.linalg.solve(N, rhs)
        r = y - A @ th
        cost = float(ww @ r**2) + prior_w * float(th[2] - cfg.roll_decel_mm_s2) ** 2
        return cost, th[:2], np.column_stack([r[:n], r[n:]]) * -1.0 + ps

    def pocket(self, b: _Ball, i1: int) -> dict | None:
        """A pocket event if ``b``'s track ends heading into a pocket mouth, else None."""
        cfg = self.cfg
        lo, _ = b.bounds(b.t[i1], 0.5 * self.dt)
        ts, ps = b.samples(max(lo, b.t[i1] - cfg.fit_window_s), b.t[i1] + 1e-9)
        if len(ts) < 2:
            return None
        f = _fit(ts, ps, ts[-1], self._deg(len(ts)), cfg.meas_sigma_mm)
        best = None
        for pk in self.table.pockets():
            a, bb = np.asarray(pk.jaw_a), np.asarray(pk.jaw_b)
            mouth = bb - a
            if _segment_distance(ps[-1], a, bb) > cfg.pocket_reach_mm:
                continue
            nrm = np.array([-mouth[1], mouth[0]]) / np.hypot(*mouth)
            # side(tau) = nrm . (p(tau) - a): the centre crosses the mouth line where it is 0.
            poly = [nrm @ f.coef[2], nrm @ f.coef[1], nrm @ (f.coef[0] - a)]
            tau = _roots_near(poly, 0.0, ts[0] - ts[-1], cfg.pocket_horizon_s)
            if tau is None:
                continue
            p = f.pos(ts[-1] + tau)
            along = float((p - a) @ mouth) / float(mouth @ mouth)
            if not -0.25 <= along <= 1.25:
                continue
            if best is None or abs(tau) < abs(best[0]):
                best = (tau, pk.name, p, f.vel(ts[-1] + tau))
        if best is None:
            return None
        tau, name, p, v = best
        return _row(ts[-1] + tau, "pocket", b.track, p, speed_in=float(np.hypot(*v)),
                    speed_out=math.nan, pocket=name)


def _cradle_bound(J0: np.ndarray, A: np.ndarray, y: np.ndarray, driver: int,
                  v_driver: np.ndarray, pairs: list[tuple[int, int]], pos: dict, sd: dict
                  ) -> np.ndarray:
    """The cluster's pair impulses (E,) mm/s, least squares ``|A J - y|`` with each bounded by
    what can reach the pair: ``J_ij <= P_i(j) + P_j(i) + sqrt(sd_i^2 + sd_j^2)``.

    Method: an impact of equal smooth spheres closing at w along their line of centres
    exchanges (1 + e) / 2 w <= w per unit mass (Newton's restitution law with momentum
    conservation; Alciatore 2004). Every ball but the driven one starts at rest and is pushed
    only along the lines of its contacts, so its speed toward a neighbour j is at most
    ``P_i(j) = sum_m max(0, n_(m->i) . n_(i->j)) J_mi`` (plus the driven ball's approach
    speed toward j): impulse travels through a touching chain only as far as it is passed on,
    as in a row of touching balls struck at one end (Newton's cradle; Herrmann & Schmaelzle
    1981, Am. J. Phys. 49, 761, from memory). ``sd`` (mm/s, each ball's velocity-change
    standard error) is the slack for the measured impulses. ``J0``: the unbounded solution
    (``nnls``), returned where it keeps every bound.
    """
    E = len(pairs)
    idx = {p: e for e, p in enumerate(pairs)}

    def unit(a: int, b: int) -> np.ndarray:  # a -> b
        u = pos[b] - pos[a]
        return u / max(float(np.hypot(*u)), 1e-12)
    G = np.zeros((E, E))  # bound_e = G[e] @ J + c[e]
    c = np.zeros(E)
    for e, (i, j) in enumerate(pairs):
        c[e] = math.hypot(sd[i], sd[j])
        for a, b in ((i, j), (j, i)):
            n_ab = unit(a, b)
            if a == driver:
                c[e] += max(0.0, float(np.asarray(v_driver, float) @ n_ab))
            for f, (k, m) in enumerate(pairs):
                if f == e or a not in (k, m):
                    continue
                other = m if k == a else k
                G[e, f] += max(0.0, float(unit(other, a) @ n_ab))
    M = np.eye(E) - G  # M J <= c
    if np.all(M @ J0 <= c + 1e-9):
        return J0
    res = minimize(lambda J: float(np.sum((A @ J - y) ** 2)), J0 * 0.0,
                   jac=lambda J: 2.0 * A.T @ (A @ J - y), method="SLSQP",
                   bounds=[(0.0, None)] * E,
                   constraints=[LinearConstraint(M, -np.inf, c)])
    return np.maximum(res.x, 0.0) if res.success else J0


def _wave(pos: np.ndarray, vel: np.ndarray, spin: np.ndarray, D: float, e: float, mu: float,
          horizon_s: float, max_events: int = 400):
    """The contacts of equal smooth-sided spheres on a plane, one impact at a time, in the order
    the balls' straight paths bring them together, up to ``horizon_s`` (s) after the start.

    ``pos`` (N, 2) centres (mm), ``vel`` (N, 2) velocities (mm/s), ``spin`` (N, 3) angular
    velocities (rad/s), table frame; D the ball diameter (mm), e the ball-ball restitution, mu
    the ball-ball friction. Method: event-driven hard-sphere dynamics (Alder & Wainwright 1959,
    from memory): the next contact is the earliest time two approaching centres come one
    diameter apart (balls already within a diameter and approaching meet at once, the faster
    closing pair first); the impact is the one ``analysis.physics`` applies, a normal impulse
    ``(1 + e) / 2`` times the closing speed per unit mass (Newton's restitution law with
    momentum conservation) and a Coulomb friction impulse ``min(mu P, |g_t| / 7)`` against the
    contact points' tangential slip (Alciatore 2004 [secondary]). A row of touching balls struck
    at one end passes the impulse on ball by ball (Newton's cradle as a sequence of binary
    collisions; Herrmann & Seitz 1982, Am. J. Phys. 50, 977, from memory), and so does a rack
    whose balls stand a fraction of a millimetre apart: which pairs meet, how often and in what
    order follows from the gaps. Over a few milliseconds the cloth's friction (mu_s g, about
    2 m/s^2) changes a velocity by a few mm/s, so the paths between impacts are straight.

    Returns (contacts, final velocities (N, 2)): contacts a list of (time s from the start, i,
    j, normal impulse mm/s, velocity of i before, of j before, of i after, of j after (2,),
    centre of i, of j at the contact (2,)). ``max_events`` only bounds the loop (a six-ball
    break's wave has eight to ten impacts; at e < 1 balls pressed together could exchange ever
    smaller impulses, the inelastic collapse of McNamara & Young 1992, from memory).
    """
    p = np.array(pos, float)
    v = np.array(vel, float)
    w = np.array(spin, float)
    n = len(p)
    R, k = 0.5 * D, 0.1 * D * D  # radius; k = 2/5 R^2 (solid sphere)
    I, J = np.triu_indices(n, 1)
    # Centres given closer than a diameter (their errors exceed the gaps) are taken as touching
    # there: each pair meets at the smaller of D and its given distance.
    D2 = np.minimum(D * D, np.einsum("ij,ij->i", p[J] - p[I], p[J] - p[I]))
    t, out = 0.0, []
    for _ in range(max_events):
        dp, dv = p[J] - p[I], v[J] - v[I]
        b = np.einsum("ij,ij->i", dp, dv)
        c = np.einsum("ij,ij->i", dp, dp) - D2
        a = np.einsum("ij,ij->i", dv, dv)
        disc = b * b - a * c
        ok = (b < 0) & ((c <= 0) | (disc >= 0))
        if not ok.any():
            break
        with np.errstate(invalid="ignore", divide="ignore"):
            tau = np.where(c <= 0, 0.0,
                           (-b - np.sqrt(np.maximum(disc, 0.0))) / np.maximum(a, 1e-30))
        cand = np.flatnonzero(ok)
        t_next = tau[cand].min()
        if t + t_next > horizon_s:
            break
        first = cand[tau[cand] <= t_next]
        m = first[np.argmax(-b[first] / np.sqrt(np.maximum(c[first] + D2[first], 1e-12)))]
        p += v * t_next
        t += float(t_next)
        i, j = int(I[m]), int(J[m])
        dx, dy = p[j] - p[i]
        h = max(math.hypot(dx, dy), 1e-12)
        nx, ny = dx / h, dy / h
        vi0, vj0 = v[i].copy(), v[j].copy()
        P = 0.5 * (1.0 + e) * max((vi0[0] - vj0[0]) * nx + (vi0[1] - vj0[1]) * ny, 0.0)
        v[i] -= (P * nx, P * ny)
        v[j] += (P * nx, P * ny)
        # Slip of the contact points, v + w x r with r = +R n on i and -R n on j (n = (nx, ny, 0)).
        wi, wj = w[i], w[j]
        gx = v[i, 0] - v[j, 0] - R * ny * (wi[2] + wj[2])
        gy = v[i, 1] - v[j, 1] + R * nx * (wi[2] + wj[2])
        gz = R * (wi[0] * ny - wi[1] * nx) + R * (wj[0] * ny - wj[1] * nx)
        gn = gx * nx + gy * ny
        gx, gy = gx - gn * nx, gy - gn * ny
        gmag = math.sqrt(gx * gx + gy * gy + gz * gz)
        if gmag > 0.0 and mu > 0.0:
            f = -min(mu * P, gmag / 7.0) / gmag  # on i at +R n; its vertical part: the cloth
            Fx, Fy, Fz = f * gx, f * gy, f * gz
            v[i] += (Fx, Fy)
            v[j] -= (Fx, Fy)
            tq = np.array([ny * Fz, -nx * Fz, nx * Fy - ny * Fx]) * (R / k)  # (R n) x F / k
            w[i] += tq
            w[j] += tq
        out.append((t, i, j, P, vi0, vj0, v[i].copy(), v[j].copy(), p[i].copy(), p[j].copy()))
    return out, v


def _fit_wave(pos: np.ndarray, vel: np.ndarray, dv: np.ndarray, dv_sd: np.ndarray, fixed: int,
              D: float, cfg: "EventConfig", horizon_s: float):
    """The cluster's contact wave (``_wave``) whose velocity changes best match the measured ones.

    ``pos`` (N, 2) centres at the cluster's instant (mm), ``vel`` (N, 2) approach velocities
    (mm/s), ``dv`` (N, 2) measured velocity changes (departure minus approach fit, mm/s) with
    standard errors ``dv_sd`` (N,); ``fixed`` the driven ball's index (its path is measured in
    motion, to a fraction of the others' rest errors). The gaps that decide the wave's order
    are fractions of a millimetre, below the detections' bias at rest, so the other centres
    are moved within ``wave_position_sd_mm`` (a Gaussian prior) to minimise a robust misfit:
    ``sum_k rho(r_k) + |delta_k|^2 / sd_p^2`` with ``r_k = |dv_sim_k - dv_k| / s_k``,
    ``s_k^2 = dv_sd_k^2 + (wave_model_share |dv_k|)^2`` and Cauchy's ``rho(r) = c^2 log(1 +
    r^2 / c^2)``, c = ``wave_misfit_sigmas`` (Hampel et al. 1986, robust statistics, from
    memory), so one ball whose departure fit holds a later contact does not bend the rest.
    The misfit is piecewise smooth in the centres (the order of the impacts jumps), so it is
    searched by coordinate descent (one ball, one axis, steps of a quarter, half and one sd
    at a time), which is deterministic and needs no gradient.

    Returns (contacts of ``_wave``, per-ball r (N,), per-ball s (N,) mm/s, moved centres
    (N, 2)).
    """
    sd_p = cfg.wave_position_sd_mm
    c = cfg.wave_misfit_sigmas
    s = np.sqrt(dv_sd ** 2 + (cfg.wave_model_share * np.hypot(*dv.T)) ** 2)
    spin = np.zeros((len(pos), 3))  # at rest, and the driven ball taken as stunned (unknown)

    def misfit(q):
        out, vf = _wave(q, vel, spin, D, cfg.ball_restitution, cfg.ball_friction, horizon_s)
        r = np.hypot(*(vf - vel - dv).T) / s
        prior = np.sum(((q - pos) / sd_p) ** 2)
        return float(np.sum(c * c * np.log1p((r / c) ** 2)) + prior), out, r
    best = np.array(pos, float)
    L, out, r = misfit(best)
    steps = [np.array(d, float) * f * sd_p for f in (0.25, 0.5, 1.0)
             for d in ((1, 0), (-1, 0), (0, 1), (0, -1))]
    for _ in range(cfg.wave_search_rounds):
        moved = False
        for kk in range(len(pos)):
            if kk == fixed:
                continue
            for st in steps:
                q = best.copy()
                q[kk] += st
                L2, out2, r2 = misfit(q)
                if L2 < L - 1e-9:
                    L, best, out, r, moved = L2, q, out2, r2, True
        if not moved:
            break
    return out, r, s, best


def _impulse_sigmas(fits: tuple["_Fit", "_Fit", "_Fit", "_Fit"], t_c: float) -> float:
    """How far (in standard errors) two balls' relative velocity along their line of centres
    jumps apart at ``t_c`` (s): the test that a touch was an impact.

    ``fits`` are ball a's approach and departure and ball b's (``_Finder._quadratic_fits``).
    Two balls meeting receive equal and opposite impulses along the line of centres n (b to a,
    from the fits' positions at the contact): smooth spheres under Newton's impact law, with a
    tangential friction impulse of at most the ball-ball friction coefficient (0.03-0.08,
    Alciatore 2004 [secondary]) times the normal one. So the change of the relative velocity
    along n, ``dV = ((va_out - va_in) - (vb_out - vb_in)) . n``, is ``(1 + e) u`` for the
    closing speed u: positive. Two balls passing a few millimetres apart (a near miss) change
    it by nothing but the noise of the four fits, whatever their velocities do otherwise (a
    slide turning to roll, noise that the magnitude balance of ``collision_min_balance``
    cannot tell from a kick). Returned: ``dV / sd`` with ``sd^2`` the sum of the four fits'
    velocity variances along any direction (``_Fit.vel_var``).
    """
    fa_in, fa_out, fb_in, fb_out = fits
    pa = 0.5 * (fa_in.pos(t_c) + fa_out.pos(t_c))
    pb = 0.5 * (fb_in.pos(t_c) + fb_out.pos(t_c))
    n = (pa - pb) / max(float(np.hypot(*(pa - pb))), 1e-12)
    dv = (fa_out.vel(t_c) - fa_in.vel(t_c)) - (fb_out.vel(t_c) - fb_in.vel(t_c))
    var = sum(f.vel_var(t_c) for f in fits)
    return float(dv @ n) / math.sqrt(max(var, 1e-12))


def _segment_distance(p: np.ndarray, a: np.ndarray, b: np.ndarray) -> float:
    ab = b - a
    s = np.clip(np.dot(p - a, ab) / np.dot(ab, ab), 0.0, 1.0)
    return float(np.hypot(*(p - (a + s * ab))))


def _row(t, kind, track, xy, *, speed_in=math.nan, speed_out=math.nan, other=None, rail="",
         diamond=math.nan, angle_in=math.nan, angle_out=math.nan, restitution=math.nan,
         pocket="") -> dict:
    return dict(t=float(t), kind=kind, track=int(track), other=other, x=float(xy[0]),
                y=float(xy[1]), rail=rail, diamond=float(diamond), speed_in=float(speed_in),
                speed_out=float(speed_out), angle_in=float(angle_in),
                angle_out=float(angle_out), restitution=float(restitution), pocket=pocket)


def _assemble(rows: list[dict], moves: list[tuple[int, float, float]], dt: float):
    """Number events and shots; a shot is a union of overlapping moving stretches."""
    if not rows:
        return empty_events(), empty_shots()
    shots = []  # [t_start, t_end, tracks set]
    for tid, t0, t1 in sorted(moves, key=lambda m: m[1]):
        if shots and t0 <= shots[-1][1] + 0.5 * dt:
            shots[-1][1] = max(shots[-1][1], t1)
            shots[-1][2].add(tid)
        else:
            shots.append([t0, t1, {tid}])
    order = {k: i for i, k in enumerate(KINDS)}
    rows = sorted(rows, key=lambda r: (r["t"], order[r["kind"]], r["track"]))
    ev = pd.DataFrame(rows)
    shot_of = []
    for t in ev["t"]:
        k = 0
        for i, (s0, _, _) in enumerate(shots):
            if t >= s0 - 2 * dt:
                k = i
        shot_of.append(k)
    ev.insert(0, "shot", np.asarray(shot_of, dtype=np.int64))
    ev.insert(0, "event", np.arange(len(ev), dtype=np.int64))
    ev["other"] = pd.array(ev["other"].tolist(), dtype="Int64")
    ev["track"] = ev["track"].astype(np.int64)
    ev = ev[EVENT_COLUMNS]
    srows = []
    for i, (t0, t1, tids) in enumerate(shots):
        e = ev[ev["shot"] == i]
        starts = e[e["kind"] == "start"]
        cue = int(starts["track"].iloc[0]) if len(starts) else min(
            tids, key=lambda tid: min(m[1] for m in moves if m[0] == tid))
        srows.append(dict(shot=i, t_start=t0, t_end=t1, cue_track=cue, balls_moved=len(tids),
                          cushions=int((e["kind"] == "cushion").sum()),
                          collisions=int((e["kind"] == "collision").sum() // 2),
                          pocketed=int((e["kind"] == "pocket").sum())))
    sh = pd.DataFrame(srows, columns=SHOT_COLUMNS)
    sh = sh.astype({"shot": "int64", "cue_track": "int64", "balls_moved": "int64",
                    "cushions": "int64", "collisions": "int64", "pocketed": "int64"})
    return ev.reset_index(drop=True), sh


def empty_events() -> pd.DataFrame:
    """An events DataFrame with no rows and the format's columns and dtypes."""
    dtypes = {"event": "int64", "shot": "int64", "t": "float64", "kind": "str", "track": "int64",
              "other": "Int64", "x": "float64", "y": "float64", "rail": "str",
              "diamond": "float64", "speed_in": "float64", "speed_out": "float64",
              "angle_in": "float64", "angle_out": "float64", "restitution": "float64",
              "pocket": "str"}
    return pd.DataFrame({c: pd.Series(dtype=dtypes[c]) for c in EVENT_COLUMNS})


def empty_shots() -> pd.DataFrame:
    """A shots DataFrame with no rows and its columns and dtypes."""
    dtypes = {"shot": "int64", "t_start": "float64", "t_end": "float64", "cue_track": "int64",
              "balls_moved": "int64", "cushions": "int64", "collisions": "int64",
              "pocketed": "int64"}
    return pd.DataFrame({c: pd.Series(dtype=dtypes[c]) for c in SHOT_COLUMNS})
