"""Collisions only where two balls exchange momentum: false pairs made of a hand's pieces or a
ball set moving beside a resting one are no collision (``tracking.events``; generators in
``test_tracker.py``)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from test_tracker import D, TABLE, collision_paths, detections
from tracking.events import EventConfig, find_events
from tracking.tracker import track


def _collisions(paths, times, seed, **kw) -> int:
    det = detections(paths, times, np.random.default_rng(seed), noise_mm=0.5, **kw)
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    return int((ev["kind"] == "collision").sum())


def test_a_ball_set_moving_beside_a_resting_one_is_no_collision():
    # A ball (or a hand's piece) at rest beside another, 5 mm clear of touching, leaves at
    # 0.9 m/s away from it while the other stays put. Balls of equal mass exchange equal and
    # opposite momentum at a collision (conservation of linear momentum; Alciatore 2004,
    # common practice): a velocity change on one side only is no collision.
    fps = 60.0
    times = np.arange(90) / fps
    t_s = 0.5 + 0.3 / fps

    def mover(t):
        t = np.asarray(t, float)
        x = 1000.0 - 900.0 * np.maximum(t - t_s, 0.0)
        return np.stack([x, 600.0 + 0.0 * t], axis=1)

    def rester(t):
        t = np.asarray(t, float)
        return np.stack([1000.0 + D + 5.0 + 0.0 * t, 600.0 + 0.0 * t], axis=1)
    n = sum(_collisions({"a": mover, "b": rester}, times, seed,
                        labels={"a": ("orange", "solid"), "b": ("orange", "solid")}) for seed in range(4))
    assert n == 0


def test_two_tracks_appearing_as_they_touch_make_no_collision():
    # Two false tracks (a hand's pieces, put down together over the middle of the table) first
    # seen as they touch, then drawn apart, one speeding up at 6 m/s^2 (so its velocity changes
    # at the touch). Two balls cannot both come onto the table at a mid-table touch (common
    # practice), so no collision may be reported; a contact neither of whose paths comes before
    # it cannot be measured either.
    fps = 60.0
    times = np.arange(60) / fps
    t_m = 0.3 + 0.4 / fps

    def fa(t):
        tau = np.maximum(np.asarray(t, float) - t_m, 0.0)
        return np.stack([900.0 - D / 2 - 300.0 * tau - 3000.0 * tau**2, 600.0 + 0.0 * tau], axis=1)

    def fb(t):
        tau = np.maximum(np.asarray(t, float) - t_m, 0.0)
        return np.stack([900.0 + D / 2 + 300.0 * tau, 610.0 + 0.0 * tau], axis=1)
    k = int(np.ceil(t_m * fps))  # the first frame at or past the touch
    n = sum(_collisions({"a": fa, "b": fb}, times, seed, present={"a": (k, 59), "b": (k, 59)},
                        labels={"a": ("blue", "solid"), "b": ("maroon", "solid")}) for seed in range(4))
    assert n == 0


@pytest.mark.parametrize("cut_deg", [0.0, 30.0, 60.0, 75.0])
def test_real_collisions_pass_the_momentum_balance(cut_deg):
    # A cue ball driven into a resting object ball at cut angles up to a thin 75 degrees (the
    # object ball takes cos(cut) of the speed, the cue ball keeps sin(cut): the two velocity
    # changes are equal and opposite): every one is still reported, once per ball.
    fps = 60.0
    times = np.arange(60) / fps
    n = [_collisions(dict(zip(("cue", "obj"), collision_paths((1400.0, 640.0), (1700.0, 250.0), cut_deg, 0.5 + 0.6 / fps))),
                     times, seed, labels={"cue": ("white", "cue"), "obj": ("red", "solid")}) for seed in range(3)]
    assert n == [2, 2, 2]


def test_collision_balance_is_validated():
    for bad in (1.5, 0.0, -0.25):
        with pytest.raises(ValueError, match="collision_min_balance"):
            EventConfig(collision_min_balance=bad)


def test_balls_passing_a_few_millimetres_apart_make_no_collision():
    # Two balls crossing paths at 0.94 and 0.72 m/s (about 100 degrees apart), their centres
    # passing 1, 2 and 3 mm further than a diameter apart, 30 fps, 2.5 mm noise per axis (the
    # moving noise of benchmarks/event_accuracy.py, whose seed 2 took such a pass for a
    # collision). Nothing acts on either ball, so no collision: at an impact the relative
    # velocity along the line of centres jumps apart (Newton's impact law for smooth spheres,
    # common practice), while here it changes only by the fits' noise. Measured: none of the 48;
    # before (momentum balance alone) 3 of the 48 were reported, one per distance.
    fps = 30.0
    times = np.arange(int(1.0 * fps)) / fps
    va, vb = np.array([940.0, -60.0]), np.array([-400.0, 600.0])
    vr = va - vb
    m = np.array([-vr[1], vr[0]]) / np.hypot(*vr)  # across the relative path
    n = 0
    for gap in (1.0, 2.0, 3.0):
        pb0 = np.array([1200.0, 600.0])
        pa0 = pb0 + (D + gap) * m  # nearest each other at t_m
        for seed in range(16):
            t_m = 0.5 + (0.1 + 0.05 * seed) / fps

            def fa(t, pa0=pa0, t_m=t_m):
                return pa0 + va * (np.asarray(t, float) - t_m)[:, None]

            def fb(t, t_m=t_m):
                return pb0 + vb * (np.asarray(t, float) - t_m)[:, None]
            det = detections({"a": fa, "b": fb}, times, np.random.default_rng(seed), noise_mm=2.5,
                             labels={"a": ("white", "cue"), "b": ("red", "solid")})
            ev, _ = find_events(track(det, TABLE), TABLE, det)
            n += int((ev["kind"] == "collision").sum())
    assert n == 0


def test_collision_impulse_sigmas_is_validated():
    for bad in (0.0, -2.0, float("nan")):
        with pytest.raises(ValueError, match="collision_impulse_sigmas"):
            EventConfig(collision_impulse_sigmas=bad)


def _cluster_shot(fps, tilt_deg, speed_mm_s, seed, noise_mm=1.0, spread_deg=30.0):
    """A cue ball driven at ``speed_mm_s`` into a ball with two more resting 0.3 mm clear of it
    behind, ``spread_deg`` either side of the line of aim (one tilted by ``tilt_deg``), simulated
    by our own simulator (``analysis.physics``), sampled at ``fps`` with Gaussian noise.

    Returns (the simulator's collisions as (t, pair) with pair the sorted ball names, the
    collisions found as (t, pair))."""
    from analysis.physics import PhysicsParams, Simulator, Strike

    c1 = np.array([1800.0, 635.0])
    g = D + 0.3
    up, down = np.radians(spread_deg + tilt_deg), np.radians(spread_deg - tilt_deg)
    balls = {"cue": (700.0, 640.0), "b1": tuple(c1),
             "b2": tuple(c1 + g * np.array([np.cos(up), -np.sin(up)])),
             "b3": tuple(c1 + g * np.array([np.cos(down), np.sin(down)]))}
    sim = Simulator(TABLE, PhysicsParams(), balls)
    sim.strike(0.3, Strike("cue", speed_mm_s, float(np.arctan2(c1[1] - 640.0, c1[0] - 700.0)),
                           0.0, 0.3))
    sim.run_until_rest(t_max=60.0)
    traj = sim.trajectory()
    times = np.arange(0.0, 1.4, 1.0 / fps)
    s = traj.sample(times)
    rng = np.random.default_rng(seed)
    rows = [dict(frame=k, t=float(t), x=p[0], y=p[1], sigma_mm=noise_mm, pattern="unknown",
                 colour="")
            for k, t in enumerate(times) for p in s.pos[k] + rng.normal(0.0, noise_mm, (4, 2))]
    det = pd.DataFrame(rows)
    tracks = track(det, TABLE)
    ev, _ = find_events(tracks, TABLE, det)
    first = tracks[tracks["frame"] == 0]
    name = {int(r.track): s.ball_ids[int(np.argmin(np.hypot(*(s.pos[0] - [r.x, r.y]).T)))]
            for r in first.itertuples()}
    truth = [(e.t, tuple(sorted((e.ball, e.other)))) for e in traj.events
             if e.kind == "collision" and e.t < times[-1]]
    col = ev[ev["kind"] == "collision"]
    found = [(float(r.t), tuple(sorted((name[int(r.track)], name[int(r.other)]))))
             for r in col.itertuples()]
    return truth, found


@pytest.mark.parametrize("fps", [30.0, 60.0, 120.0])
def test_a_ball_driven_into_a_cluster_meets_the_ball_it_hits(fps):
    # A cue ball driven into a ball with two more resting just behind it, 30 degrees either
    # side (a small rack): the simulator's contacts all come within half a millisecond, the cue
    # ball meeting b1 and b1 both others (and the cue ball again, 1-3 ms later). Far below a
    # frame interval, so only the pairs can be told, not their order: every pair that touched
    # must be reported within half a frame of its first contact (issue 4's collision target),
    # and no pair that never touched. Each ball's velocity change is the sum of equal and
    # opposite impulses along the lines of centres of its contacts (Newton's third law for
    # smooth spheres, common practice). Before, the cue ball was paired with b2 or b3 (its
    # approach path, extrapolated, runs into them) and b1's contacts were lost: the pairwise
    # momentum balance fails where a ball has several contacts at once.
    for tilt in (0.0, 12.0):
        for speed in (1500.0, 3500.0):
            truth, found = _cluster_shot(fps, tilt, speed, seed=0)
            first = {}
            for t, pair in truth:
                first.setdefault(pair, t)
            assert {p for _, p in found} == set(first), (tilt, speed, truth, found)
            # Simulator truth; half a frame is issue 4's collision time target.
            assert all(abs(t - first[p]) <= 0.5 / fps for t, p in found), (tilt, speed, found)


def test_a_cue_ball_struck_back_by_the_ball_it_drove_into_a_cluster_meets_it_twice():
    # The cluster above at 3.5 m/s: b1, driven into two balls 30 degrees either side of it
    # (together 1.5 balls' mass along its line, 2 cos^2 30), bounces back into the cue ball
    # 1-1.3 ms after their first contact, and the cue ball leaves backward at about 250 mm/s;
    # one impact of equal balls (restitution at most 1) never sends the striker back (Newton's
    # restitution law with momentum conservation, Alciatore 2004). The second contact must
    # be reported within half a frame of the simulator's (issue 4's collision target), at
    # 30, 60 and 120 fps. With the two balls 60 degrees either side (0.5 of a ball along the
    # line) b1 runs on and the simulator has one cue-b1 contact: none more may be reported.
    # Measured: found in 11 of the 12 draws below, at most 0.12 frame from the simulator's
    # (120 fps, tilt 12, seed 1: the cue ball's backward speed there is within the noise);
    # none at 60 degrees. Before: none found.
    found_kisses = 0
    for fps in (30.0, 60.0, 120.0):
        for tilt in (0.0, 12.0):
            for seed in (0, 1):
                truth, found = _cluster_shot(fps, tilt, 3500.0, seed=seed)
                t_true = sorted({round(t, 6) for t, p in truth if p == ("b1", "cue")})
                assert len(t_true) == 2 and t_true[1] - t_true[0] > 1e-3, truth  # the scenario
                t_found = sorted({round(t, 6) for t, p in found if p == ("b1", "cue")})
                assert len(t_found) <= 2, found
                if len(t_found) == 2:
                    found_kisses += 1
                    # Simulator truth; half a frame is issue 4's collision time target.
                    assert abs(t_found[1] - t_true[1]) <= 0.5 / fps, (fps, tilt, seed, found)
                truth, found = _cluster_shot(fps, tilt, 3500.0, seed=seed, spread_deg=60.0)
                assert len({round(t, 6) for t, p in truth if p == ("b1", "cue") and t < 0.7}) == 1, \
                    truth
                t_found = {round(t, 6) for t, p in found if p == ("b1", "cue") and t < 0.7}
                assert len(t_found) == 1, (fps, tilt, seed, found)
    assert found_kisses >= 11, found_kisses


def _collision_time_errors(p_obj, v_cue, detect) -> list[float]:
    """Worst |collision time - analytic contact| (frames) of each of 12 draws at 60 fps: a cue
    ball at ``v_cue`` (mm/s) meets a ball resting at ``p_obj`` (mm) at cuts of 0, 20 and 40
    degrees, four contact phases each (``collision_paths``); ``detect(cue, obj, times, t_c,
    rng)`` makes the detections. Both rows of the collision must be there."""
    fps = 60.0
    times = np.arange(60) / fps
    errors = []
    for cut in (0.0, 20.0, 40.0):
        for seed in range(4):
            t_c = 0.5 + (0.3 + 0.1 * seed) / fps
            cue, obj = collision_paths(p_obj, v_cue, cut, t_c)
            det = detect(cue, obj, times, t_c, np.random.default_rng(seed))
            ev, _ = find_events(track(det, TABLE), TABLE, det)
            col = ev[ev["kind"] == "collision"]
            assert len(col) == 2, (cut, seed)
            errors.append(float(np.max(np.abs(col["t"] - t_c))) * fps)
    return errors


def test_a_resting_ball_placed_toward_the_incoming_one_does_not_move_the_collision():
    # A cue ball at 0.59 m/s meets a resting ball (60 fps, 0.5 mm noise); in the frame before
    # the contact the resting ball's detection is pulled 10 mm toward the incoming ball, as a
    # detector can place a ball on the two of them as they close in (a rendered clip of our
    # own: 7 mm, the collision then half a frame late). Nothing moved the resting ball then, so
    # the sample is a gross outlier of its path (iterative rejection before least squares,
    # common practice) and must not move the solved time: every one within 0.12 frame of the
    # analytic contact. Measured: 0.074 frame at most (0.09 in the same draws without the
    # pulled detection); before, 0.231.
    def detect(cue, obj, times, t_c, rng):
        det = detections({"cue": cue, "obj": obj}, times, rng, noise_mm=0.5,
                         labels={"cue": ("white", "cue"), "obj": ("red", "solid")})
        k = int(np.floor(t_c / (times[1] - times[0])))  # the last frame before the contact
        toward = cue(times[k:k + 1])[0] - obj(times[k:k + 1])[0]
        row = (det["frame"] == k) & (det["truth"] == "obj")
        det.loc[row, ["x", "y"]] += 10.0 * toward / np.hypot(*toward)
        return det
    errors = _collision_time_errors((1400.0, 640.0), (-500.0, -320.0), detect)
    assert max(errors) <= 0.12, errors


def test_a_resting_ball_read_flicking_toward_the_incoming_one_gets_no_start():
    # A cue ball rolling at 0.59 m/s meets a resting ball (60 fps). The resting ball's read is
    # carried over unchanged from frame to frame (the detector's step for a ball at rest) and
    # in the five frames before the contact flicks 4.2 mm toward the incoming ball in four and
    # is back on its spot in the third; the tracks give it, there, the smoothed speeds the
    # tracker gave ball 15 of the extra clip uneven_60fps (automatic calibration, frames
    # 592-599: 20, 48, 81, 90, 84, 264, 264 mm/s toward the cue ball, then 328 mm/s away,
    # the tracker restarting its velocity on the flicking reads). A ball at rest stays at rest
    # until struck (Newton's first law), and one struck from rest never comes back to its spot
    # before its next contact (it only slows; Alciatore 2004): so the collision set it going
    # and it gets no start of its own, and both rows of the collision lie within half a frame
    # of the analytic contact (issue 4's target). Before: a start at the first flicking read,
    # 0.07 s before the contact, in all 9 draws.
    fps = 60.0
    times = np.arange(60) / fps
    p_obj = np.array([1400.0, 640.0])
    speeds = [20.0, 48.0, 81.0, 90.0, 84.0, 264.0, 264.0]  # frames k - 7 .. k - 1, mm/s
    for cut in (0.0, 20.0, 40.0):
        for seed in range(3):
            rng = np.random.default_rng(seed)
            t_c = 0.5 + (0.07 + 0.1 * seed) / fps
            cue, obj = collision_paths(p_obj, (-500.0, -320.0), cut, t_c)
            det = detections({"cue": cue, "obj": obj}, times, rng, noise_mm=0.5,
                             labels={"cue": ("white", "cue"), "obj": ("red", "stripe")})
            k = int(np.floor(t_c * fps))  # the last frame before the contact
            at_rest = (det["truth"] == "obj") & (det["frame"] <= k)
            det.loc[at_rest, ["x", "y"]] = p_obj + rng.normal(0.0, 0.5, 2)
            toward = cue(times[k - 4:k - 3])[0] - p_obj
            u = toward / np.hypot(*toward)
            flick = at_rest & det["frame"].isin([k - 4, k - 3, k - 1, k])
            det.loc[flick, ["x", "y"]] += 4.2 * u
            tr = track(det, TABLE)
            first = tr[tr["frame"] == 0]
            tid = first["track"].to_numpy()[np.argmin(np.hypot(*(first[["x", "y"]].to_numpy() - p_obj).T))]
            for f, v in zip(range(k - 7, k + 1), speeds + [-328.0 / 264.0 * speeds[-1]]):
                row = (tr["track"] == tid) & (tr["frame"] == f)
                tr.loc[row, ["vx", "vy"]] = v * u
            ev, _ = find_events(tr, TABLE, det)
            col = ev[ev["kind"] == "collision"]
            assert len(col) == 2 and np.all(np.abs(col["t"] - t_c) * fps <= 0.5), (cut, seed, col)
            assert not (ev["kind"] == "start").any(), (cut, seed, ev[ev["kind"] == "start"])


def _pushed_rest_shot(fps: float, cut_deg: float, seed: int, push_mm: float = 5.0):
    """A cue ball rolling at 0.3 m/s (struck 0.4 R above centre, Alciatore 2004) meets a ball
    at rest ``cut_deg`` off full, simulated by ``analysis.physics``; detections as in
    ``benchmarks/event_accuracy.py`` (0.3 mm at rest, 0.5 mm moving). The resting ball's read
    is carried over unchanged until the frame of the contact (the detector's step for a ball
    at rest), and in the frames before the contact where the two balls are less than 16.5 mm apart it is pushed
    ``push_mm`` along the line of centres, the way the struck ball then goes (the cut_bank
    sample: ball 2 read 2-8 mm off its spot in the four frames before the 1-2 ball met it,
    16.5 mm apart at the first). Returns (events, the simulator's contact time)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections as sim_detections

    rng = np.random.default_rng(seed)
    p_obj = np.array([1300.0, 600.0])
    heading = np.radians(200.0 + 7.0 * seed)
    n = np.array([np.cos(heading + np.radians(cut_deg)), np.sin(heading + np.radians(cut_deg))])
    p_cue = p_obj - D * n - 250.0 * np.array([np.cos(heading), np.sin(heading)])
    sim = Simulator(TABLE, PhysicsParams(), {"cue": tuple(p_cue), "obj": tuple(p_obj)})
    sim.strike(0.5, Strike("cue", 300.0, float(heading), 0.0, 0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    t_c = min(e.t for e in traj.events if e.kind == "collision")
    det = sim_detections(traj, 3.5, fps, rng, rest_sigma_mm=0.3, moving_sigma_mm=0.5, drop=0.0)
    obj = det["truth"] == "obj"
    det.loc[obj & (det["t"] < t_c - 0.5 / fps), ["x", "y"]] = p_obj + rng.normal(0.0, 0.3, 2)
    cue = det[det["truth"] == "cue"].set_index("frame")[["x", "y"]]
    pushed = 0
    for i in det.index[obj & (det["t"] < t_c)]:
        c = cue.loc[det.at[i, "frame"]].to_numpy(float)
        gap = np.hypot(*(c - p_obj)) - D
        if gap < 16.5:
            det.loc[i, ["x", "y"]] += push_mm * (p_obj - c) / (gap + D)
            pushed += 1
    assert pushed >= 1  # the case asked for
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    return ev, t_c


@pytest.mark.parametrize("fps", [30.0, 60.0])
def test_a_resting_ball_read_pushed_by_the_arriving_one_gets_no_start(fps):
    # A ball at rest stays at rest until struck (Newton's first law), and no cue strikes a ball
    # while another is arriving within a radius of it (common practice: a stroke is played
    # with the balls at rest). Reads pushed off the spot the way the ball then goes never come
    # back to it (``_left_for_good`` does not apply), so the motion seemed to begin frames
    # before the contact; the struck ball leaves along the line of centres (turned by at most
    # atan(0.06) = 3.4 degrees, Coulomb friction at the impact), so the collision set it going
    # and it gets no start: only the cue ball's, at its strike, and both collision rows.
    # Before: a start about two frames before the contact in all 6 draws at 30 fps (and in 8
    # of 12 over cuts 0, 20, 40 and seeds 0-3; none at 60 fps, where they stay none).
    for cut in (0.0, 20.0):
        for seed in range(3):
            ev, t_c = _pushed_rest_shot(fps, cut, seed)
            starts = ev[ev["kind"] == "start"]
            assert len(starts) == 1 and abs(starts["t"].iloc[0] - 0.5) <= 1.0 / fps, (
                cut, seed, t_c, starts)
            assert (ev["kind"] == "collision").sum() == 2, (cut, seed, ev)


def test_a_ball_unseen_at_rest_is_met_as_it_leaves_the_contact():
    # A cue ball at 3 m/s meets a resting ball that the detector never found at rest (taken
    # into the empty-table model, as in a dim room of our own rendered set), and the cue ball's
    # own detection is missing in the frame of the contact: the struck ball is first seen a
    # frame after it, moving (60 fps, 1 mm noise). The struck ball's track begins at the
    # contact, so its partner's velocity change lies in frames it does not share, and the
    # smoothed velocities there may still be the ones before the contact; every collision must
    # be found within half a frame of the analytic contact (issue 4's target). Measured: all
    # 12, 0.053 frame at most; before, none.
    def detect(cue, obj, times, t_c, rng):
        k = int(np.ceil(t_c / (times[1] - times[0])))  # the first frame after the contact
        return detections({"cue": cue, "obj": obj}, times, rng, noise_mm=1.0,
                          present={"obj": (k, len(times) - 1)}, gaps=[("cue", k - 1, k - 1)],
                          labels={"cue": ("white", "cue"), "obj": ("yellow", "solid")})
    errors = _collision_time_errors((1000.0, 600.0), (-2900.0, 900.0), detect)
    assert max(errors) <= 0.5, errors


def _rack(n: int, gap_mm: float, apex) -> dict:
    """Resting balls {name: (x, y) mm} of a touching rack, apex at ``apex`` facing -x: a
    three- or six-ball triangle (rows of 1, 2[, 3]) or a nine-ball diamond (1, 2, 3, 2, 1), each
    ball ``gap_mm`` clear of its neighbours (rows sqrt(3)/2 of a spacing apart)."""
    rows = {3: (1, 2), 6: (1, 2, 3), 9: (1, 2, 3, 2, 1)}[n]
    g = D + gap_mm
    out, k = {}, 0
    for r, count in enumerate(rows):
        for c in range(count):
            out[f"b{k}"] = (apex[0] + r * g * np.sqrt(3) / 2, apex[1] + (c - (count - 1) / 2) * g)
            k += 1
    return out


def _rack_break(n: int, fps: float, seed: int, gap_mm: float = 0.5, speed_mm_s: float = 5000.0,
                aim_off_mm: float = 2.0):
    """A cue ball struck at ``speed_mm_s`` into an ``n``-ball rack (``_rack``), simulated by our
    own simulator, sampled at ``fps`` over a half-open shutter (the mean centre of five
    instants, a blur streak's centroid) with Gaussian noise of 0.5 mm at rest and 1.5 mm
    moving. Returns (truth collisions (t, pair), found collisions (t, pair)), each pair's rows
    within 1 ms counted once (as ``benchmarks/score.py`` does); truth from
    ``railtrace.filming.truth_events``."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from railtrace.filming import ShotRecord, truth_events

    balls = _rack(n, gap_mm, (1905.0, 635.0))
    balls["cue"] = (640.0, 635.0 + aim_off_mm)
    sim = Simulator(TABLE, PhysicsParams(), balls)
    sim.strike(0.3, Strike("cue", speed_mm_s, 0.0, 0.0, 0.0))
    t_rest = sim.run_until_rest(t_max=60.0)
    traj = sim.trajectory()
    times = np.arange(0.0, 1.3, 1.0 / fps)
    sub = (times[:, None] + ((np.arange(5) + 0.5) / 5 - 0.5)[None, :] * 0.5 / fps).ravel()
    s = traj.sample(np.clip(sub, 0.0, None))
    B = len(traj.ball_ids)
    pos = s.pos.reshape(len(times), 5, B, 2).mean(axis=1)
    moving = np.hypot(*s.vel.reshape(len(times), 5, B, 2).mean(axis=1).transpose(2, 0, 1)) > 1.0
    rng = np.random.default_rng(seed)
    sig = np.where(moving, 1.5, 0.5)
    xy = pos + rng.normal(0.0, 1.0, pos.shape) * sig[..., None]
    det = pd.DataFrame([dict(frame=k, t=float(times[k]), x=xy[k, j, 0], y=xy[k, j, 1],
                             sigma_mm=sig[k, j], pattern="unknown", colour="")
                        for k in range(len(times)) for j in range(B)])
    tracks = track(det, TABLE)
    ev, _ = find_events(tracks, TABLE, det)
    first = tracks[tracks["frame"] == 0]
    name = {int(r.track): traj.ball_ids[int(np.argmin(np.hypot(*(pos[0] - [r.x, r.y]).T)))]
            for r in first.itertuples()}
    te = truth_events(TABLE, traj, (ShotRecord(None, 0.3, 0.0, 0.0, t_rest, balls["cue"]),))
    te = te[(te["kind"] == "collision") & (te["t"] < times[-1])]

    def once(rows):
        out = []
        for t, pair in sorted(rows):
            if not any(q == pair and t - u <= 1e-3 for u, q in out):
                out.append((t, pair))
        return out
    ids = traj.ball_ids
    truth = once((float(r.t), tuple(sorted((ids[int(r.track)], ids[int(r.other)]))))
                 for r in te.itertuples())
    col = ev[ev["kind"] == "collision"]
    found = once((float(r.t), tuple(sorted((name.get(int(r.track), "?"),
                                            name.get(int(r.other), "?")))))
                 for r in col.itertuples())
    return truth, found


def _unmatched(truth, found, fps):
    """Truth contacts with no found contact of the same pair within half a frame, and found
    contacts left over (one to one, nearest first)."""
    left = list(found)
    missed = []
    for t, pair in truth:
        near = [f for f in left if f[1] == pair and abs(f[0] - t) <= 0.5 / fps]
        if near:
            left.remove(min(near, key=lambda f: abs(f[0] - t)))
        else:
            missed.append((t, pair))
    return missed, left


@pytest.mark.parametrize("fps", [50.0, 60.0, 120.0])
def test_a_break_into_a_three_ball_rack_times_every_contact(fps):
    # A cue ball at 5 m/s into a three-ball triangle, 0.5 mm gaps: the simulator's contacts
    # (cue-b0, b0-b1, b0-b2 within a fraction of a millisecond, then b0 back into the cue ball
    # 1-2 ms later) must each be found within half a frame (issue 4's collision target), and
    # no pair that never touched. Truth: our simulator (railtrace.filming.truth_events), each
    # pair's contacts within 1 ms counted once as benchmarks/score.py counts them.
    # Measured (branch rack's events): all found, 0.25 frame at most, no false pair.
    for seed in (0, 1):
        truth, found = _rack_break(3, fps, seed, aim_off_mm=(seed - 0.5) * 4)
        assert len(truth) >= 3, truth  # the scenario: the impulse reaches both back balls
        missed, false = _unmatched(truth, found, fps)
        assert not missed and not false, (seed, missed, false, truth, found)


@pytest.mark.xfail(strict=True, reason="issue 4, not solved: the wave's repeat of the cue ball "
                   "into the apex ball (1.25 ms after the first impact) falls within 1 ms of it "
                   "where the rack's centres are given overlapping, and a slow late meeting "
                   "(about 40 mm/s, 12 ms after) lies beyond the wave's half frame and under "
                   "the noise of those balls' velocity changes")
@pytest.mark.parametrize("n", [6, 9])
def test_a_break_into_a_larger_rack_times_every_contact(n):
    # As above with a six-ball triangle and a nine-ball diamond at 50 and 60 fps. Measured
    # with the contact wave (``_fit_wave``): 6 balls 7/9 and 8/9 contacts, no false pair; 9
    # balls 12/14 and 11/14 with 3 false pairs at 60 fps (before it, on branch rack's events:
    # 6 balls 33/54 contacts over 1/2.5 mm noise and three frame rates with 6 false pairs, 9
    # balls 54/84 with 7; contacts 0.6-0.8 frame after the break reported at its instant).
    for fps in (50.0, 60.0):
        truth, found = _rack_break(n, fps, seed=0)
        missed, false = _unmatched(truth, found, fps)
        assert not missed and not false, (fps, missed, false, truth, found)


def test_an_impulse_is_not_split_onto_a_neighbour_at_right_angles_to_the_chain():
    # Newton's cradle (Herrmann & Schmaelzle 1981, from memory): a ball driven at 3 m/s into a
    # row of two touching balls stops and the last leaves at 3 m/s (equal masses, e = 1); a
    # third ball touching the middle one at right angles to the row takes no impulse, since
    # the middle ball is pushed only along the row. Its measured velocity change is noise of
    # 200 mm/s across the row (sd 30 mm/s for every ball): unbounded least squares puts about
    # 100 mm/s on that pair; the bound (``_cradle_bound``) allows it at most its slack,
    # hypot(30, 30), while the row's impulses stay within 1 % of 3000 mm/s.
    from scipy.optimize import nnls

    from tracking.events import _cradle_bound

    pos = {0: np.array([0.0, 0.0]), 1: np.array([D, 0.0]), 2: np.array([D, D]),
           3: np.array([2 * D, 0.0])}
    dv = {0: np.array([-3000.0, 0.0]), 1: np.zeros(2), 2: np.array([0.0, 200.0]),
          3: np.array([3000.0, 0.0])}
    sd = dict.fromkeys(pos, 30.0)
    pairs = [(0, 1), (1, 2), (1, 3)]
    A = np.zeros((8, 3))  # as in _Finder.cluster: +n / sd on the first ball, -n / sd on the second
    for e, (i, j) in enumerate(pairs):
        n = (pos[i] - pos[j]) / np.hypot(*(pos[i] - pos[j]))
        A[2 * i:2 * i + 2, e] = n / sd[i]
        A[2 * j:2 * j + 2, e] = -n / sd[j]
    y = np.concatenate([dv[k] / sd[k] for k in range(4)])
    J0, _ = nnls(A, y)
    assert J0[1] > 80.0  # the scenario: least squares alone splits the noise onto (1, 2)
    J = _cradle_bound(J0, A, y, 0, np.array([3000.0, 0.0]), pairs, pos, sd)
    assert J[1] <= np.hypot(30.0, 30.0) + 1e-6, J
    assert np.allclose(J[[0, 2]], 3000.0, rtol=0.01), J


def test_a_row_struck_at_one_end_passes_the_impulse_on_ball_by_ball():
    # Newton's cradle as a sequence of binary collisions (Herrmann & Seitz 1982, Am. J. Phys.
    # 50, 977, from memory): a ball at 3 m/s into a row of three touching balls, restitution
    # 1 and no friction: each impact of equal masses exchanges their velocities (analytic), so
    # the impulse runs down the row in order and only the last ball leaves, at 3 m/s.
    from tracking.events import _wave

    pos = np.array([[0.0, 0.0], [D, 0.0], [2 * D, 0.0], [3 * D, 0.0]]) + [500.0, 300.0]
    vel = np.array([[3000.0, 0.0], [0.0, 0.0], [0.0, 0.0], [0.0, 0.0]])
    contacts, v = _wave(pos, vel, np.zeros((4, 3)), D, 1.0, 0.0, 0.01)
    assert [(c[1], c[2]) for c in contacts] == [(0, 1), (1, 2), (2, 3)]
    assert np.allclose([c[3] for c in contacts], 3000.0)
    assert np.allclose(v, [[0.0, 0.0], [0.0, 0.0], [0.0, 0.0], [3000.0, 0.0]], atol=1e-9)


def test_a_wave_impact_comes_when_the_gap_closes_and_keeps_newtons_restitution_law():
    # Head-on, equal masses, restitution e: the struck ball leaves at (1 + e) / 2 v and the
    # striker keeps (1 - e) / 2 v (momentum conservation with Newton's law of restitution;
    # Alciatore 2004), when the gap g has closed, after g / v (analytic). Along y and with
    # friction on: a head-on impact has no tangential slip, so friction changes nothing.
    from tracking.events import _wave

    g, v0, e = 0.5, 2000.0, 0.95
    pos = np.array([[700.0, 400.0], [700.0, 400.0 + D + g]])
    vel = np.array([[0.0, v0], [0.0, 0.0]])
    contacts, v = _wave(pos, vel, np.zeros((2, 3)), D, e, 0.06, 0.01)
    assert len(contacts) == 1 and abs(contacts[0][0] - g / v0) < 1e-12
    assert np.allclose(v, [[0.0, (1 - e) / 2 * v0], [0.0, (1 + e) / 2 * v0]], atol=1e-9)


def test_a_rack_breaks_in_the_wave_as_in_our_simulator():
    # A cue ball at 5 m/s (2 mm off the rack's axis) into a six-ball triangle with 0.5 mm gaps,
    # started from our simulator's state 1 ms before the first impact (centres, velocities and
    # spins; analysis.physics, the truth of the rendered clips): the wave's impacts over the
    # next 4 ms (eight: the impulse passed on, the cue ball and a back ball met twice) must be
    # the simulator's, pair for pair in the same order, each within 0.05 ms, and the balls'
    # velocities after them within 20 mm/s of the simulator's: twice what the cloth's sliding
    # friction (about 2 m/s^2, left out of the wave) takes in 5 ms. Measured: 0.007 ms, 8.1
    # mm/s.
    from analysis.physics import PhysicsParams, Simulator, Strike
    from tracking.events import _wave

    balls = _rack(6, 0.5, (1905.0, 635.0))
    balls["cue"] = (640.0, 637.0)
    sim = Simulator(TABLE, PhysicsParams(), balls)
    sim.strike(0.3, Strike("cue", 5000.0, 0.0, 0.0, 0.0))
    sim.run_until_rest(t_max=60.0)
    traj = sim.trajectory()
    hits = sorted((e.t, e.ball, e.other) for e in traj.events if e.kind == "collision")
    t0 = hits[0][0] - 1e-3
    s = traj.sample(np.array([t0, t0 + 5e-3]))
    contacts, v = _wave(s.pos[0], s.vel[0], s.omega[0], D, 0.95, 0.06, 5e-3)
    ids = traj.ball_ids
    truth = []
    for t, a, b in hits:
        pair = tuple(sorted((a, b)))
        if t < t0 + 5e-3 and not any(p == pair and abs(u - t) < 1e-9 for u, p in truth):
            truth.append((t, pair))
    found = [(t0 + c[0], tuple(sorted((ids[c[1]], ids[c[2]])))) for c in contacts]
    assert [p for _, p in found] == [p for _, p in truth], (found, truth)
    assert len(truth) == 8, truth  # the scenario
    assert max(abs(a - b) for (a, _), (b, _) in zip(found, truth)) < 5e-5
    assert np.abs(v - s.vel[1]).max() < 20.0, v - s.vel[1]
