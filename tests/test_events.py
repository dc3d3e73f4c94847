"""Event timing (cushion contacts, collisions, starts, stops, pockets) and shots, on analytic paths
with known contact instants (generators and their sources in ``test_tracker.py``)."""

from __future__ import annotations

import math
import os
import sys

import numpy as np
import pandas as pd
import pytest

from test_tracker import (
    D,
    R,
    G,
    TABLE,
    bounce_path,
    collision_paths,
    decel_path,
    detections,
    stun_roll_path,
)
from tracking.events import EVENT_COLUMNS, SHOT_COLUMNS, EventConfig, find_events, find_events_and_rests
from tracking.tracker import track
from vision.table import cushion_angles, rail_direction, rail_inward_normal


def _bounce_case(rail, along, angle_deg, speed, e, t_c, decel=0.0):
    """Incoming velocity at ``angle_deg`` from the normal into ``rail``, outgoing with normal
    restitution ``e`` and the same along-rail component; optional deceleration ``decel`` mm/s^2
    along each side's velocity (cloth friction)."""
    n_in = np.asarray(rail_inward_normal(rail))
    along_u = np.asarray(rail_direction(rail))
    a = math.radians(angle_deg)
    v_in = speed * (math.sin(a) * along_u - math.cos(a) * n_in)
    v_out = speed * math.sin(a) * along_u + e * speed * math.cos(a) * n_in
    acc_in = -decel * v_in / np.hypot(*v_in)
    acc_out = -decel * v_out / np.hypot(*v_out)
    return bounce_path(rail, along, t_c, v_in, v_out, acc_in, acc_out), v_in, v_out


def _rolling_bank_case(rail, along, angle_deg, speed, e, t_c, mu_s=0.25, mu_r=0.01):
    """A rolling ball banking off ``rail``: it arrives rolling at ``speed`` (mm/s) ``angle_deg``
    from the normal, decelerating at ``mu_r g`` along its velocity; the cushion returns the
    normal component times ``e`` and keeps the along-rail one; the spin, still that of rolling
    into the rail, leaves the ball slipping away from the rail at ``(1 + e) vn``, so it slides
    at ``mu_s g`` toward the rail until the slip is gone, ``2 (1 + e) vn / (7 mu_s g)`` later
    (Alciatore 2004, technical proofs: the slip decays at 7/2 mu_s g, the velocity changes at
    mu_s g), and then rolls at ``mu_r g`` (a rigid ball and a cushion without friction or
    height, the simplest physical bounce). Returns (path f(t) -> (n, 2) mm, v_in, v_out)."""
    n_in = np.asarray(rail_inward_normal(rail))
    along_u = np.asarray(rail_direction(rail))
    a = math.radians(angle_deg)
    vn = speed * math.cos(a)
    v_in = speed * (math.sin(a) * along_u - math.cos(a) * n_in)
    v_out = speed * math.sin(a) * along_u + e * vn * n_in
    t_slide = 2.0 * (1.0 + e) * vn / (7.0 * mu_s * G)
    acc_slide = -mu_s * G * n_in
    v_k = v_out + acc_slide * t_slide
    acc_roll = -mu_r * G * v_k / np.hypot(*v_k)
    c = TABLE.reversal_line(rail)
    pc = np.array([along, c]) if rail in ("bottom", "top") else np.array([c, along])
    p_k = pc + v_out * t_slide + 0.5 * acc_slide * t_slide**2

    def f(t):
        tau = (np.asarray(t, float) - t_c)[:, None]
        before = pc + v_in * tau - 0.5 * mu_r * G * v_in / speed * tau**2
        m = np.clip(tau, 0.0, t_slide)
        r = np.clip(tau - t_slide, 0.0, None)
        after = np.where(tau <= t_slide, pc + v_out * m + 0.5 * acc_slide * m**2,
                         p_k + v_k * r + 0.5 * acc_roll * r**2)
        return np.where(tau < 0, before, after)
    return f, v_in, v_out


def _only(events, kind):
    return events[events["kind"] == kind].reset_index(drop=True)


def _exact_bounce_reads(rail: str, along: float, angle: float):
    """A ball rolling at 1500 mm/s into ``rail`` at ``along`` (mm) and ``angle`` (deg), its
    contact between frames of 60 fps, read noise-free (sd stated 1 mm) until it still slides
    after the contact: the slide's end, were it seen, is placed on a grid of a quarter frame
    (``kink_step_frames``), which is exact only on the grid. Returns the path, contact time
    (s), frame times (s) and detections."""
    fps = 60.0
    t_c = 0.5 + 0.37 / fps  # between frames
    f, _, _ = _rolling_bank_case(rail, along, angle, 1500.0, 1.0, t_c)
    t_slide = 2.0 * 2.0 * 1500.0 * math.cos(math.radians(angle)) / (7.0 * 0.25 * G)
    times = np.arange(int(1.0 * fps)) / fps
    times = times[times < t_c + t_slide]
    det = detections({"a": f}, times, np.random.default_rng(0), noise_mm=0.0)
    det["sigma_mm"] = 1.0
    return f, t_c, times, det


def _assert_exact_bounce(cu, f, t_c: float, angle: float) -> None:
    """The one cushion row ``cu`` is the mirror bounce of path ``f`` at ``t_c`` (s) and
    ``angle`` (deg) to the fits' rounding: time 1e-6 s, point 1e-6 mm, angles 1e-6 deg,
    restitution 1e-9."""
    assert abs(cu.loc[0, "t"] - t_c) < 1e-6
    truth = f(np.array([t_c]))[0]
    assert abs(cu.loc[0, "x"] - truth[0]) < 1e-6 and abs(cu.loc[0, "y"] - truth[1]) < 1e-6
    assert abs(cu.loc[0, "angle_in"] - angle) < 1e-6 and abs(cu.loc[0, "angle_out"] - angle) < 1e-6
    assert abs(cu.loc[0, "restitution"] - 1.0) < 1e-9


@pytest.mark.parametrize("rail, along, angle", [
    ("bottom", 700.0, 30.0), ("right", 500.0, -45.0), ("top", 1900.0, 0.0), ("left", 800.0, 60.0),
])
def test_mirror_bounce_recovered_exactly_without_noise(rail, along, angle):
    # A ball rolling in and, the normal velocity reversed whole (e = 1), sliding off and then
    # rolling (``_rolling_bank_case``; a ball leaving a cushion always slides first, so a
    # drag-free departure would be no physical input).
    f, t_c, _, det = _exact_bounce_reads(rail, along, angle)
    tr = track(det, TABLE)
    ev, _ = find_events(tr, TABLE, det)
    cu = _only(ev, "cushion")
    assert len(cu) == 1 and cu.loc[0, "rail"] == rail
    # Exact: constant-acceleration pieces are reproduced exactly by the fits (analytic truth).
    _assert_exact_bounce(cu, f, t_c, angle)
    assert cu.loc[0, "diamond"] == pytest.approx(TABLE.to_diamonds(rail, along), abs=1e-9)


def test_noisy_bounces_meet_acceptance_targets():
    """1 mm noise, 60 fps, several approach angles and speeds, cushion speed ratio 0.8 and cloth
    deceleration mu_s g on both sides (Alciatore 2004 sliding friction 0.2). Targets are the
    project's acceptance targets (brief)."""
    fps = 60.0
    dt = 1 / fps
    times = np.arange(int(0.9 * fps)) / fps
    rng = np.random.default_rng(2024)
    errs = {k: [] for k in ("t", "along", "speed_in", "speed_out", "angle_in", "angle_out", "e")}
    for angle in (-50.0, -20.0, 0.0, 15.0, 40.0):
        for speed in (1000.0, 1800.0, 2600.0):
            for rep in range(2):
                t_c = 0.45 + rng.uniform(0, 1) * dt
                rail = ("bottom", "top", "left", "right")[(rep + int(speed)) % 4]
                along = 600.0 if rail in ("bottom", "top") else 640.0
                e = 0.8
                f, v_in, v_out = _bounce_case(rail, along, angle, speed, e, t_c, decel=0.2 * G)
                det = detections({"a": f}, times, rng, noise_mm=1.0)
                ev, _ = find_events(track(det, TABLE), TABLE, det)
                cu = _only(ev, "cushion")
                assert len(cu) == 1, (angle, speed, rail)
                r = cu.loc[0]
                a_in, a_out, e_true = cushion_angles(rail, v_in, v_out)
                truth = f(np.array([t_c]))[0]
                ax = 0 if rail in ("bottom", "top") else 1
                errs["t"].append(abs(r["t"] - t_c))
                errs["along"].append(abs((r["x"], r["y"])[ax] - truth[ax]))
                errs["speed_in"].append(abs(r["speed_in"] / np.hypot(*v_in) - 1))
                errs["speed_out"].append(abs(r["speed_out"] / np.hypot(*v_out) - 1))
                errs["angle_in"].append(abs(r["angle_in"] - a_in))
                errs["angle_out"].append(abs(r["angle_out"] - a_out))
                errs["e"].append(abs(r["restitution"] - e_true))
    med = {k: float(np.median(v)) for k, v in errs.items()}
    worst = {k: float(np.max(v)) for k, v in errs.items()}
    print("median", med, "\nworst", worst)
    # Medians over the 30 cases against the acceptance targets. Worst cases measured at the
    # default fit window (0.3 s): speed 3.2 %, angle 1.7 deg, e 0.027 (reported, not asserted).
    assert med["t"] < dt / 4
    assert med["along"] < 4.0 and worst["along"] < 4.0
    assert med["speed_in"] < 0.03 and med["speed_out"] < 0.03
    assert med["angle_in"] < 1.0 and med["angle_out"] < 1.0
    assert med["e"] < 0.03


def test_bounce_in_a_pocket_mouth_is_not_a_cushion_event():
    fps = 60.0
    times = np.arange(50) / fps
    # Reflects on the bottom reversal line at the side pocket (x = L/2): inside the mouth.
    f, _, _ = _bounce_case("bottom", TABLE.length_mm / 2, 20.0, 1500.0, 1.0, 0.4 + 0.5 / fps)
    det = detections({"a": f}, times, np.random.default_rng(0), noise_mm=0.0)
    det["sigma_mm"] = 1.0
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    assert (ev["kind"] == "cushion").sum() == 0


@pytest.mark.parametrize("cut_deg", [0.0, 25.0, 45.0])
def test_collision_time_within_half_a_frame(cut_deg):
    fps = 60.0
    dt = 1 / fps
    times = np.arange(int(1.0 * fps)) / fps
    rng = np.random.default_rng(int(cut_deg) + 7)
    t_c = 0.5 + 0.6 * dt
    cue, obj = collision_paths((1400.0, 640.0), (1700.0, 250.0), cut_deg, t_c)
    det = detections({"cue": cue, "obj": obj}, times, rng, noise_mm=1.0,
                     labels={"cue": ("white", "cue"), "obj": ("red", "solid")})
    tr = track(det, TABLE)
    ev, shots = find_events(tr, TABLE, det)
    col = _only(ev, "collision")
    assert len(col) == 2
    assert set(col["track"]) == set(tr["track"]) and set(col["other"]) == set(tr["track"])
    assert np.all(np.abs(col["t"] - t_c) < dt / 2)  # target (brief): half a frame interval
    # The object ball was set moving by the collision, not the cue: it gets no start event.
    cue_id = int(tr.loc[tr["ball"] == "cue", "track"].iloc[0])
    starts = _only(ev, "start")
    assert list(starts["track"]) == []  # cue ball already moving when the clip began
    assert len(shots) == 1 and shots.loc[0, "collisions"] == 1
    # Centres one diameter apart at the solved instant (definition of contact).
    xy = col.set_index("track")[["x", "y"]]
    assert np.hypot(*(xy.iloc[0] - xy.iloc[1])) == pytest.approx(D, abs=2.0)
    assert cue_id in set(col["track"])


def test_start_and_stop_times():
    """A stun shot from rest (Alciatore 2004: slide then roll) and its stop."""
    fps = 60.0
    dt = 1 / fps
    t_s = 0.3 + 0.45 * dt
    v0 = 1200.0
    f = stun_roll_path((300.0, 300.0), 10.0, v0, mu_s=0.2, mu_r=0.02, t_start=t_s)
    t1 = 2 * v0 / (7 * 0.2 * G)
    t_stop = t_s + t1 + (5 / 7 * v0) / (0.02 * G)  # rolls from 5/7 v0 at mu_r g to rest
    times = np.arange(int((t_stop + 1.0) * fps)) / fps
    rng = np.random.default_rng(12)
    det = detections({"a": f}, times, rng, noise_mm=1.0)
    det.loc[det["t"] < t_s, "pattern"] = "cue"
    ev, shots = find_events(track(det, TABLE), TABLE, det)
    st, sp = _only(ev, "start"), _only(ev, "stop")
    assert len(st) == 1 and len(sp) == 1
    assert abs(st.loc[0, "t"] - t_s) < dt / 2
    assert st.loc[0, "speed_out"] == pytest.approx(v0, rel=0.05)
    # The stop is ill-conditioned (speed fades slowly); 0.15 s is 2 % of the roll.
    assert abs(sp.loc[0, "t"] - t_stop) < 0.15
    assert len(shots) == 1
    assert shots.loc[0, "t_start"] == pytest.approx(st.loc[0, "t"])
    assert shots.loc[0, "t_end"] == pytest.approx(sp.loc[0, "t"])
    assert list(ev["event"]) == list(range(len(ev)))


def test_pocketed_ball_gets_pocket_event():
    fps = 60.0
    times = np.arange(90) / fps
    a = decel_path((400.0, 400.0), 225.0, 1500.0, 200.0, t_start=0.1)
    b = decel_path((1500.0, 700.0), 0.0, 0.0, 1.0)
    pos = a(times)
    pk = TABLE.pocket("bottom-left")
    # Seen until the centre is a radius short of the mouth line x + y = a (the jaws hide it).
    mouth = pk.jaw_a[0]
    last = int(np.argmax(pos.sum(axis=1) < mouth + TABLE.radius_mm * math.sqrt(2))) - 1
    det = detections({"a": a, "b": b}, times, np.random.default_rng(1), noise_mm=1.0,
                     present={"a": (0, last)})
    ev, shots = find_events(track(det, TABLE), TABLE, det)
    pe = _only(ev, "pocket")
    assert len(pe) == 1 and pe.loc[0, "pocket"] == "bottom-left"
    # Crossing time of the mouth line from the analytic path.
    s = np.linspace(0.1, 1.5, 200001)
    t_cross = s[np.argmax(a(s).sum(axis=1) < mouth)]
    assert abs(pe.loc[0, "t"] - t_cross) < 1 / fps
    assert shots.loc[0, "pocketed"] == 1


def test_two_shots_split_and_counted():
    fps = 60.0
    dt = 1 / fps
    # Shot 0: ball a rolls (mu_r g, Alciatore 2004 rolling deceleration) and stops. Shot 1: ball b.
    a = decel_path((400.0, 300.0), 0.0, 600.0, 0.05 * G, t_start=0.2)
    b = decel_path((1500.0, 900.0), 90.0, 600.0, 0.05 * G, t_start=2.0)
    t_end_a = 0.2 + 600.0 / (0.05 * G)
    times = np.arange(int(3.6 * fps)) / fps
    det = detections({"a": a, "b": b}, times, np.random.default_rng(8), noise_mm=1.0,
                     labels={"a": ("white", "cue"), "b": ("white", "cue")})
    tr = track(det, TABLE)
    ev, shots = find_events(tr, TABLE, det)
    assert list(shots["shot"]) == [0, 1]
    assert shots.loc[0, "t_start"] == pytest.approx(0.2, abs=dt / 2)
    assert shots.loc[0, "t_end"] == pytest.approx(t_end_a, abs=0.15)
    assert shots.loc[1, "t_start"] == pytest.approx(2.0, abs=dt / 2)
    assert list(shots["balls_moved"]) == [1, 1]
    assert shots.loc[0, "cue_track"] != shots.loc[1, "cue_track"]
    assert set(ev.loc[ev["shot"] == 1, "kind"]) == {"start", "stop"}
    assert np.all(np.diff(ev["t"]) >= 0)


def test_empty_and_bad_input():
    empty = pd.DataFrame({c: [] for c in ("frame", "t", "track", "ball", "x", "y", "vx", "vy",
                                          "seen")})
    ev, shots = find_events(empty, TABLE)
    assert list(ev.columns) == EVENT_COLUMNS and len(ev) == 0
    assert list(shots.columns) == SHOT_COLUMNS and len(shots) == 0
    with pytest.raises(ValueError, match="vx, vy"):
        find_events(empty.drop(columns=["vx", "vy"]), TABLE)
    with pytest.raises(ValueError, match="rest_speed_mm_s"):
        EventConfig(rest_speed_mm_s=100.0, move_speed_mm_s=50.0)


@pytest.mark.skipif(not os.path.exists(os.path.join(os.path.dirname(__file__), "..", "analysis",
                                                    "physics.py")), reason="no simulator yet")
def test_simulated_bank_shot_cushion_contact():
    """A rolling bank off the top rail from our own simulator (cushion impact model of
    Mathavan, Jackson & Parkin 2010): the solved contact against the simulator's event."""
    from analysis.physics import PhysicsParams, Simulator, Strike

    fps = 60.0
    dt = 1 / fps
    sim = Simulator(TABLE, PhysicsParams(), {"cue": (700.0, 300.0)})
    sim.strike(0.2, Strike("cue", 1800.0, math.radians(70.0), 0.0, 0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    truth = [e for e in traj.events if e.kind == "cushion"][0]
    times = np.arange(0.0, truth.t + 0.6, dt)
    s = traj.sample(times)
    rng = np.random.default_rng(5)
    det = pd.DataFrame(dict(frame=np.arange(len(times)), t=times,
                            x=s.pos[:, 0, 0] + rng.normal(0, 1.0, len(times)),
                            y=s.pos[:, 0, 1] + rng.normal(0, 1.0, len(times)),
                            sigma_mm=1.0, pattern="cue"))
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    cu = _only(ev, "cushion")
    assert len(cu) >= 1 and cu.loc[0, "rail"] == truth.rail
    a_in, a_out, e = cushion_angles(truth.rail, truth.vel_in, truth.vel_out)
    print(cu.loc[0].to_dict(), truth.t, a_in, a_out, e)
    assert abs(cu.loc[0, "t"] - truth.t) < dt / 4
    assert abs(cu.loc[0, "x"] - truth.pos[0]) < 4.0
    assert abs(cu.loc[0, "angle_in"] - a_in) < 1.0


# --- realistic paths from our own simulator ---------------------------------------------------
# Shots, detections and matching come from benchmarks/event_accuracy.py (its docstring gives the
# noise model: exposure-averaged centres, 1 mm at rest, 2.5 mm moving, 2 % dropped frames).
# The physics behind the paths: sliding at mu_s g along a constant slip direction until rolling,
# then mu_r g along the velocity (Alciatore 2004); cushion impacts of Mathavan, Jackson & Parkin
# (2010). Targets are the project's acceptance targets (issue "Follow every ball and time every
# contact").
@pytest.fixture(scope="module")
def simulated_contacts():
    from benchmarks.event_accuracy import random_shots, run_shot, summarise

    rng = np.random.default_rng(2024)
    shots = random_shots(rng, 8)
    results = [run_shot(sh, 60.0, rng) for sh in shots]
    return summarise(results, 60.0)


@pytest.mark.xfail(strict=True, reason="misses one slow contact (draw shot, 102 mm/s into the "
                   "bottom rail at t = 3.03 s): 17 of 18, recall 0.944. The ball's smoothed "
                   "speed falls below the rest speed at 3.02 s, so its motion ends a frame "
                   "before the contact and no contact is looked for after; searching on for "
                   "min_rest_s finds it but times cut_bank's slow contact 2.8 frames late")
def test_simulated_cushions_recall(simulated_contacts):
    s = simulated_contacts
    assert s["cushion recall"] >= 0.98


def test_simulated_contacts_found_and_timed(simulated_contacts):
    s = simulated_contacts
    print(s)
    assert s["cushion n_visible"] >= 10  # enough contacts for medians to mean something
    assert s["cushion precision"] >= 0.98
    assert s["collision recall"] >= 0.95
    assert s["collision within half frame"] == 1.0
    assert s["t_frames median"] <= 0.25  # a quarter of a frame interval
    assert s["along_mm median"] <= 4.0 and s["along_mm p95"] <= 12.0


def test_simulated_contacts_incoming_measures(simulated_contacts):
    s = simulated_contacts
    assert s["speed_in median"] <= 0.03
    assert s["angle_in median"] <= 1.0


def test_simulated_contacts_outgoing_measures(simulated_contacts):
    # With the cloth's sliding deceleration measured once per clip and held in the departure
    # fits; measured on these 8 shots: speed_out 2.9 %, angle_out 0.81 deg, restitution 0.026;
    # with it pooled over the clip's slides under the typical cloth's prior and the slide
    # direction's prior at 5 degrees: 1.6 %, 0.66 deg, 0.022.
    s = simulated_contacts
    assert s["speed_out median"] <= 0.03
    assert s["angle_out median"] <= 1.0
    assert s["restitution median"] <= 0.03


def test_pocketed_ball_spotted_again_keeps_its_id_and_gets_no_stop():
    # A ball rolls into the bottom-left corner pocket, is taken out and spotted at (1800, 800)
    # a second later (the tracker gives it its id back). Its events are its start and the
    # pocket: leaving the table is not coming to rest, and being put down is not a motion.
    fps = 60.0
    times = np.arange(int(4.0 * fps)) / fps
    run = decel_path((400.0, 400.0), 225.0, 1500.0, 200.0, t_start=0.3)
    pos = run(times)
    pk = TABLE.pocket("bottom-left")
    last = int(np.argmax(pos.sum(axis=1) < pk.jaw_a[0] + TABLE.radius_mm * math.sqrt(2))) - 1

    def solid(t):
        out = run(t)
        out[np.asarray(t) >= 2.5] = (1800.0, 800.0)
        return out
    rest = decel_path((1500.0, 300.0), 0.0, 0.0, 1.0)
    det = detections({"a": solid, "b": rest}, times, np.random.default_rng(3), noise_mm=1.0,
                     labels={"a": ("yellow", "solid"), "b": ("white", "cue")})
    det = det[~((det["truth"] == "a") & (det["frame"] > last) & (det["t"] < 2.5))]
    tr = track(det, TABLE)
    assert tr["track"].nunique() == 2
    ev, shots = find_events(tr, TABLE, det)
    a_id = int(tr.loc[tr["colour"] == "yellow", "track"].iloc[0])
    mine = ev[ev["track"] == a_id]
    assert list(mine["kind"]) == ["start", "pocket"]
    assert mine.iloc[1]["pocket"] == "bottom-left"
    assert len(shots) == 1


def test_a_ball_that_nearly_halts_and_runs_on_has_one_stop():
    # A stun-follow path (Alciatore 2004: a ball with topspin brought almost to a halt slides,
    # friction speeding it up at mu_s g until it rolls, then it slows at mu_r g): its speed dips
    # under the rest threshold for a few frames, but it never rests, so one motion, one stop.
    fps = 60.0
    dt = 1 / fps
    t0, v0, a1 = 0.3, 800.0, 0.2 * G
    t1 = t0 + (v0 - 10.0) / a1  # slowed to 10 mm/s
    v2 = 400.0
    t2 = t1 + (v2 - 10.0) / (0.2 * G)  # sped up by friction to rolling speed
    t3 = t2 + v2 / (0.01 * G)  # rolls to rest

    def speed(t):
        return np.select([t < t0, t < t1, t < t2, t < t3],
                         [0.0, v0 - a1 * (t - t0), 10.0 + 0.2 * G * (t - t1),
                          v2 - 0.01 * G * (t - t2)], 0.0)
    fine = np.arange(0.0, t3 + 1.0, 1e-4)
    s = np.concatenate([[0.0], np.cumsum(0.5 * (speed(fine[1:]) + speed(fine[:-1])) * 1e-4)])

    def f(t):
        d = np.interp(np.asarray(t, float), fine, s)
        return np.stack([500.0 + d, np.full_like(d, 600.0)], axis=1)
    times = np.arange(int((t3 + 0.8) * fps)) / fps
    det = detections({"a": f}, times, np.random.default_rng(7), noise_mm=1.0,
                     labels={"a": ("white", "cue")})
    ev, shots = find_events(track(det, TABLE), TABLE, det)
    assert list(ev["kind"]) == ["start", "stop"]
    assert abs(ev.iloc[0]["t"] - t0) < dt / 2
    # The stop is ill-conditioned (speed fades slowly); 0.15 s as in test_start_and_stop_times.
    assert abs(ev.iloc[1]["t"] - t3) < 0.15
    assert len(shots) == 1


def test_departure_fit_with_the_cloths_sliding_deceleration():
    # A ball leaving a contact slides at mu_s g in a fixed direction (its slip's, opposite) for
    # 4 frames, then rolls at mu_r g (Alciatore 2004, technical proofs: constant slip direction,
    # deceleration mu_s g while sliding). With mu_s g known (one cloth; find_events measures it
    # once per clip) the fitted speed at the contact is within the issue's 3 % in the median over
    # 1 mm noise draws, and speed and direction beat the fit with the loose prior on mu_s g.
    from tracking.events import _piecewise_fit

    fps = 60.0
    dt = 1 / fps
    cfg = EventConfig()
    a_s = 0.2 * G
    v0 = np.array([350.0, 900.0])  # just after the contact, mm/s
    u = np.array([math.cos(math.radians(-120.0)), math.sin(math.radians(-120.0))])  # accel dir
    tk = 0.07
    vk = v0 + a_s * u * tk
    pk = v0 * tk + 0.5 * a_s * u * tk**2
    t_c = 0.37 * dt  # contact between frames 0 and 1
    ts = np.arange(1, 19) * dt
    tau = ts - t_c
    r = np.clip(tau - tk, 0.0, None)
    m = np.minimum(tau, tk)
    roll = -0.01 * G * vk / np.hypot(*vk)
    truth = np.where((tau <= tk)[:, None], v0 * m[:, None] + 0.5 * a_s * u * m[:, None] ** 2,
                     pk + vk * r[:, None] + 0.5 * roll * r[:, None] ** 2)
    rng = np.random.default_rng(31)
    err = {"known": [], "loose": []}
    for _ in range(20):
        ps = truth + rng.normal(0.0, 1.0, truth.shape)
        for name, sd in (("known", a_s), ("loose", None)):
            # Normal coordinate pinned at the contact, as find_events refits a departure
            # through the reversal line (the contact is at the origin here, rail y = 0).
            f = _piecewise_fit(ts, ps, t_c, 1.0, 0.25 * dt, cfg, pin=np.array([np.nan, 0.0]),
                               slide_decel=sd)
            v = f.vel(t_c)
            err[name].append((abs(np.hypot(*v) / np.hypot(*v0) - 1),
                              abs(math.degrees(math.atan2(v[1], v[0]) - math.atan2(v0[1], v0[0])))))
    known = np.median(np.array(err["known"]), axis=0)
    loose = np.median(np.array(err["loose"]), axis=0)
    print("known", known, "loose", loose)
    # Measured (seed 31): known 0.6 % and 1.6 deg, loose 0.9 % and 2.3 deg. The speed meets the
    # issue's 3 %; the direction of a 4-frame slide is not yet within 1 degree on its own (the
    # cushion fit adds a prior on it), so here it must only improve on the loose fit.
    assert known[0] <= 0.03
    assert known[0] < loose[0] and known[1] < loose[1]


@pytest.mark.parametrize("deg, n, measured", [(1, 3, False), (1, 4, True), (2, 4, False),
                                               (2, 5, True)])
def test_a_side_fit_says_whether_its_scatter_was_measured(deg, n, measured):
    # A fit measures its residual variance only with at least 4 residual degrees of freedom over
    # both axes (2 (n - deg - 1)); without them its s2 is the noise it was given. Checked against
    # numpy.polyfit's residual sum of squares (reference library): a straight-line fallback on 4
    # samples has 4 and measures its scatter; the contact check reads the fit's own flag
    # rather than counting parameters a second time.
    from tracking.events import _fit, _piecewise_fit

    rng = np.random.default_rng(7)
    ts = np.arange(n) / 60.0
    ps = np.column_stack([100.0 + 600.0 * ts, 50.0 - 300.0 * ts + 200.0 * ts**2])
    ps = ps + rng.normal(0.0, 0.5, ps.shape)
    f = _fit(ts, ps, 0.0, deg, 3.0)
    assert f.s2_measured is measured
    rss = sum(float(np.polyfit(ts, ps[:, a], deg, full=True)[1].sum()) for a in (0, 1))
    expected = rss / (2 * (n - deg - 1)) if measured else 9.0
    assert f.s2 == pytest.approx(expected, rel=1e-9)
    # The piecewise fit sets the same flag from its own count (2 n - k residual degrees).
    g = _piecewise_fit(ts, ps, 0.0, 3.0, 0.25 / 60.0, EventConfig())
    assert g.s2_measured is (2 * g.n - g.k >= 4)


def test_a_rolling_approach_with_drifting_detection_errors_is_not_fitted_speeding_up():
    # A ball rolling into a rail decelerates at mu_r g along its velocity; only a sliding ball
    # has a curve of its own, a constant acceleration of size mu_s g (Alciatore 2004). The
    # detections here carry errors the size of those measured on the rendered dim_540p_60fps
    # clip's moving balls (1.4-1.6 mm per axis, neighbouring frames correlated 0.2-0.8:
    # benchmarks/analyse_accuracy.py --extra, its detections against the exposure-averaged
    # truth), an AR(1) process of sd 1.5 mm and correlation 0.5. A free quadratic took such
    # errors for a ball speeding up into the rail (that clip at 5.46 s: +255 mm/s^2, speed_in
    # 5.3 % high); held to a slide's deceleration (``held``, as the pinned contact fits are),
    # the speed at the contact stays within the issue's 3 % in the 95th percentile over 100
    # draws. Measured: 1.6 %, none beyond 3 %; the free quadratic (main before): 4.4 %, 12 of
    # 100 beyond 3 %.
    from tracking.events import _piecewise_fit

    dt = 1 / 60.0
    cfg = EventConfig()
    v0, a = 1000.0, -0.01 * G  # mm/s at the contact; rolling deceleration mu_r g
    ts = -np.arange(18, 0, -1) * dt + 0.3 * dt  # 0.3 s of approach, the last 0.7 frame before
    truth = np.stack([v0 * ts + 0.5 * a * ts**2, np.full_like(ts, 300.0)], axis=1)
    rng = np.random.default_rng(5)
    errs = []
    for _ in range(100):
        e = np.zeros_like(truth)
        e[0] = rng.normal(0.0, 1.5, 2)
        for i in range(1, len(ts)):
            e[i] = 0.5 * e[i - 1] + math.sqrt(1 - 0.25) * rng.normal(0.0, 1.5, 2)
        f = _piecewise_fit(ts, truth + e, 0.0, 1.5, 0.25 * dt, cfg, held=True)
        errs.append(abs(np.hypot(*f.vel(0.0)) / v0 - 1))
    assert np.percentile(errs, 95) <= 0.03  # the issue's 3 %


# --- a cushion-check session from our own simulator -------------------------------------------
def _cushion_session(seed: int, fps: float = 60.0, noise_mm: float = 1.0, drift_mm: float = 0.0,
                     drift_s: tuple[float, float] = (0.45, 0.7), outlier_mm: float = 0.0,
                     shift_mm: float = 0.0, mu_slide: float = 0.2):
    """Room staff rolling the cue ball (struck 0.4 R above centre, so it rolls at once,
    Alciatore 2004) into the bottom and top cushions 12 times at 0.3-1.5 m/s normal speed and
    up to 30 degrees off square, catching it 0.45 s after the contact; simulated by
    ``analysis.physics`` (cushion impacts of Mathavan, Jackson & Parkin 2010). Detections as in
    ``benchmarks/event_accuracy.py`` (exposure-averaged centres) with ``noise_mm`` per axis
    moving, half that at rest; ``drift_mm``: amplitude per axis of a slowly drifting detection
    bias added on top (two sinusoids of random phase and periods ``drift_s``); ``outlier_mm``:
    the detection two frames after every third contact moved this far along x (a gross error
    the detector does not flag); ``shift_mm``: every detection moved this far along y, so the
    table's reversal lines sit that far off the balls' true contact lines (on the bottom rail
    short of it, on the top rail beyond it), as a calibration off by that much places them;
    ``mu_slide``: the cloth's ball-cloth sliding friction (Alciatore 2004 range 0.15-0.4).
    Returns (found cushion events, the simulator's cushion events)."""
    det, truth = _cushion_session_detections(seed, fps, noise_mm, drift_mm, drift_s, outlier_mm,
                                             shift_mm, mu_slide)
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    return _only(ev, "cushion"), truth


def _cushion_session_detections(seed, fps, noise_mm, drift_mm, drift_s, outlier_mm, shift_mm,
                                mu_slide):
    """The detections of ``_cushion_session`` (same arguments) and the simulator's cushion
    events."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections, truth_events

    rng = np.random.default_rng(seed)
    sim = Simulator(TABLE, PhysicsParams(mu_slide=mu_slide), {"cue": (400.0, 320.0)})
    t = 0.5
    xs = np.r_[np.linspace(400.0, 1000.0, 6), np.linspace(1550.0, 2150.0, 6)]  # clear of pockets
    for i, x0 in enumerate(xs):
        bottom = i % 2 == 0
        vn = float(np.exp(rng.uniform(math.log(300.0), math.log(1500.0))))
        ang = float(rng.uniform(-30.0, 30.0))
        if i:
            sim.place(t, "cue", (x0, 320.0 if bottom else TABLE.width_mm - 320.0))
        speed = vn / math.cos(math.radians(ang))
        sim.strike(t + 0.4, Strike("cue", speed, math.radians((-90.0 if bottom else 90.0) + ang),
                                   0.0, 0.4))
        t_lift = t + 0.4 + (320.0 - R) / vn + 0.45
        sim.lift(t_lift, "cue")
        t = t_lift + 0.4
    traj = sim.trajectory()
    det = detections(traj, t, fps, rng, rest_sigma_mm=0.5 * noise_mm, moving_sigma_mm=noise_mm,
                     drop=0.0)
    if drift_mm:
        ph = rng.uniform(0.0, 2.0 * math.pi, (2, 2))
        tt = det["t"].to_numpy()
        for ax, col in enumerate(("x", "y")):
            det[col] += drift_mm / math.sqrt(2.0) * (np.sin(2 * math.pi * tt / drift_s[0] + ph[ax, 0])
                                                     + np.sin(2 * math.pi * tt / drift_s[1] + ph[ax, 1]))
    det["y"] += shift_mm
    truth = truth_events(TABLE, traj, t)
    truth = truth[truth["kind"] == "cushion"].reset_index(drop=True)
    if outlier_mm:
        for t_c in truth["t"].to_numpy()[::3]:
            rows = det.index[det["frame"] == int(math.floor(t_c * fps)) + 2]
            det.loc[rows[:1], "x"] += outlier_mm
    return det, truth


@pytest.mark.skipif(sys.version_info >= (3, 12), reason="no fork from Python 3.12 on (tracking.share.worker_count)")
def test_events_shared_with_a_forked_process_equal_those_of_one_process(monkeypatch):
    # The contact solves shared among processes (EventConfig.workers, tracking.share) must
    # give what one process gives, to the bit: the same events, shots and stays at rest. The
    # session's twelve contacts, each in its own motion, make twelve runs (_contact_units),
    # enough to share; the drift and outliers make the fits strike samples, whose taking over
    # from the forked copy this checks too.
    det, truth = _cushion_session_detections(3, 60.0, 1.0, 1.0, (0.45, 0.7), 15.0, 0.0, 0.2)
    import tracking.events
    from tracking.share import Shared

    forks = []

    class Counted(Shared):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            forks.append(self.forked)

    monkeypatch.setattr(tracking.events, "Shared", Counted)
    tracks = track(det, TABLE)
    one = find_events_and_rests(tracks, TABLE, det, EventConfig(workers=1))
    assert forks == [0, 0]  # the slide profile and the contacts, each in this process
    two = find_events_and_rests(tracks, TABLE, det, EventConfig(workers=2))
    assert forks[2:] == [1, 1]  # each shared with one forked copy
    assert len(_only(one[0], "cushion")) == len(truth) >= 10
    for a, b in zip(one, two):
        assert a.equals(b)
    with pytest.raises(ValueError, match="workers"):
        EventConfig(workers=-1)


def test_cushion_session_outgoing_measures():
    # After a cushion a rolling ball slides a few frames, its slip along the rail's normal
    # (the spin still carries it toward the rail); fitting that slide is what the outgoing
    # speed, angle and restitution rest on. Targets are the issue's (speed 3 %, angle 1 degree,
    # restitution 0.03, medians); the truth is the simulator's impact (analytic between events).
    errs = []
    for seed in (1, 2):
        found, truth = _cushion_session(seed)
        assert len(found) == len(truth) >= 10
        for _, tr in truth.iterrows():
            r = found.iloc[int(np.argmin(np.abs(found["t"] - tr["t"])))]
            errs.append((abs(r["t"] - tr["t"]) * 60.0,
                         abs(r["speed_out"] / tr["speed_out"] - 1),
                         abs(r["angle_out"] - tr["angle_out"]),
                         abs(r["restitution"] - tr["restitution"])))
    med = np.median(np.array(errs), axis=0)
    print("median |t| frames, |speed_out|, |angle_out| deg, |restitution|:", med)
    # Measured: 0.045 frame, 1.1 %, 0.66 deg, 0.018; with the slide's direction prior from the
    # velocity change and a free rolling departure (before): 0.047, 1.4 %, 1.09 deg, 0.022.
    assert med[0] <= 0.25
    assert med[1] <= 0.03
    assert med[2] <= 1.0
    assert med[3] <= 0.03


def test_contacts_with_the_reversal_line_off_by_a_millimetre_and_a_half():
    # An automatic calibration on compressed footage places a cushion nose to about 0.3 px, a
    # millimetre or so (benchmarks/calib_accuracy.py), and every contact is solved through the
    # reversal line. Detections moved 1.5 mm along y put the bottom rail's line 1.5 mm short
    # of the balls' contact line and the top rail's 1.5 mm beyond it; 0.3 mm detection noise,
    # so the line's error, not the noise, dominates. Targets are the issue's (speed out 3 %,
    # restitution 0.03, medians); the truth is the simulator's impact. Measured: speed_out
    # 0.26 %, restitution 0.0052; pinned to the given line (before): 2.5 %, 0.037.
    errs = []
    for seed in (5, 6):
        found, truth = _cushion_session(seed, noise_mm=0.3, shift_mm=1.5)
        assert len(found) == len(truth) >= 10
        for _, tr in truth.iterrows():
            r = found.iloc[int(np.argmin(np.abs(found["t"] - tr["t"])))]
            errs.append((abs(r["speed_out"] / tr["speed_out"] - 1),
                         abs(r["restitution"] - tr["restitution"])))
    med = np.median(np.array(errs), axis=0)
    print("median |speed_out|, |restitution|:", med)
    assert med[0] <= 0.03
    assert med[1] <= 0.03


def _session_errors(sessions) -> np.ndarray:
    """Median |errors| (speed_in, angle_in, speed_out, angle_out, restitution) over the contacts
    of cushion sessions, each (found cushion events, the simulator's) of ``_cushion_session``."""
    errs = []
    for found, truth in sessions:
        assert len(found) == len(truth) >= 10
        for _, tr in truth.iterrows():
            r = found.iloc[int(np.argmin(np.abs(found["t"] - tr["t"])))]
            errs.append((abs(r["speed_in"] / tr["speed_in"] - 1),
                         abs(r["angle_in"] - tr["angle_in"]),
                         abs(r["speed_out"] / tr["speed_out"] - 1),
                         abs(r["angle_out"] - tr["angle_out"]),
                         abs(r["restitution"] - tr["restitution"])))
    med = np.median(np.array(errs), axis=0)
    print("median |speed_in|, |angle_in|, |speed_out|, |angle_out|, |restitution|:", med)
    return med


@pytest.fixture(scope="module")
def contacts_at_30fps():
    """Median |errors| (angle_in, angle_out, restitution) over three cushion sessions filmed at
    30 fps with the noise of ``benchmarks/event_accuracy.py`` (2.5 mm per axis moving)."""
    med = _session_errors([_cushion_session(seed, fps=30.0, noise_mm=2.5) for seed in (1, 2, 3)])
    return med[[1, 3, 4]]


def test_contact_angles_at_30fps(contacts_at_30fps):
    # At 30 fps a 0.3 s window holds 9 samples a side, half what it holds at 60 fps, and a
    # side's velocity is known to a variance proportional to 1 / (rate T^3) (least-squares
    # slope), so the window stretches to 12 frame intervals (EventConfig.fit_min_samples).
    # Targets are the issue's (angle 1 degree, medians); the truth is the simulator's impact.
    # Measured: angle_in 0.63, angle_out 0.51 deg; over 0.3 s (before): 0.90, 1.44.
    assert contacts_at_30fps[0] <= 1.0
    assert contacts_at_30fps[1] <= 1.0


def test_restitution_at_30fps(contacts_at_30fps):
    # Every departure holds the clip's pooled mu_s g (_cloth_slide_decel), and the slides of
    # 5-12 frames it pools at 30 fps are ambiguous between a slide lasting through the window
    # at a low mu_s g and a shorter one at the true mu_s g. The target is the issue's (0.03,
    # median); the truth is the simulator's impact. Measured: 0.022 (pooled mu_s g 2182, 1872,
    # 1921 mm/s^2 on the 1962 cloth); with a slide through the window charged a parameter less
    # than one ending in it (before): 0.038 (the seed-2 session pooled 1132 +- 119).
    assert contacts_at_30fps[2] <= 0.03  # the issue's 0.03


def test_a_departure_cut_short_still_holds_its_slide_at_30fps():
    # At 30 fps a departure that _side cut to the six samples nearest the contact (its model
    # missed the noise test, as a detection drifting near a cushion makes it) left the pinned
    # fit no room for a slide beyond the third sample (the kink sits three samples or more
    # before the window's end): the sample clip multi_rail_30fps's 3.55 s contact fitted its
    # 0.116 s slide as 0.077 s. Truth: the analytic rolling bank of _rolling_bank_case (rigid
    # ball, slide 2 (1 + e) vn / (7 mu_s g), Alciatore 2004), 0.1 mm noise, the cloth and the
    # slide's prior given. Measured: slide 0.1125 s against 0.1201 s, normal speed out 0.7 %
    # slow; with the six samples alone (before): 0.078 s and 2.8 % slow.
    from dataclasses import replace
    from tracking.events import _Ball, _Finder, _piecewise_fit

    dt, mu_s, e, vn, ang = 1.0 / 30.0, 0.2, 0.9, 434.0, 20.0
    t_c = 1.0 + 0.4 * dt
    f, _, _ = _rolling_bank_case("bottom", 1200.0, ang, vn / math.cos(math.radians(ang)), e, t_c,
                                 mu_s=mu_s)
    t_slide = 2.0 * (1.0 + e) * vn / (7.0 * mu_s * G)
    t = np.arange(54) * dt
    p = f(t)
    raw = p + np.random.default_rng(0).normal(0.0, 0.1, p.shape)
    b = _Ball(0, t, np.arange(len(t)), p, np.gradient(p, dt, axis=0), raw, sigma=0.1,
              sigma_fit=0.1)
    cfg = replace(EventConfig(), fit_window_s=12 * dt)  # as find_events stretches it at 30 fps
    finder = _Finder(TABLE, cfg, dt, 0.5 * dt)
    finder.slide_decel = mu_s * G
    step = cfg.kink_step_frames * dt
    ta, pa = b.samples(t_c - cfg.fit_window_s, t_c, (t_c, 0.25 * dt))
    td, pd_ = b.samples(t_c, t_c + cfg.fit_window_s, (t_c, 0.25 * dt))
    fa0 = _piecewise_fit(ta, pa, t_c, 0.1, step, cfg)
    fd0 = _piecewise_fit(td[:6], pd_[:6], t_c, 0.1, step, cfg, slide_decel=finder.slide_decel)
    n_in = np.asarray(rail_inward_normal("bottom"))
    prior = (t_slide, 0.05 * vn / finder.slide_decel)  # EventConfig.slide_ratio_sigma 0.05
    t_b, _, fd, _ = finder._pinned_contact(b, 1, TABLE.reversal_line("bottom"), t_c, -math.inf,
                                           math.inf, fa0, fd0, -n_in, prior, 0.0)
    assert abs(fd.tk - t_slide) <= 0.25 * dt  # a quarter frame, the issue's time target
    assert abs(float(fd.vel(t_b) @ n_in) / (e * vn) - 1.0) <= 0.03  # the issue's 3 %


@pytest.fixture(scope="module")
def drifting_contacts():
    """Per contact |errors| (speed_in, angle_in, speed_out, angle_out, restitution) of two
    cushion sessions whose detections carry a drifting bias (see the test below)."""
    return _session_errors([_cushion_session(seed, noise_mm=0.15, drift_mm=1.0,
                                             drift_s=(0.15, 0.3)) for seed in (3, 4)])


def test_contacts_with_a_drifting_detection_bias(drifting_contacts):
    # Real detections are off by a bias that drifts along the path (a blur streak's or a
    # shadow's bias changing with position and speed; on the rendered sample clip cut_bank about
    # 1 mm within a few frames), while neighbouring frames agree to a few tenths of a mm. Third
    # differences of neighbouring samples see only that small white part, and contact fits
    # judged against it fail their chi-square test and are cut short. Detections here: 0.15 mm
    # white noise (what the detector states of itself) plus a drift of 0.7 mm rms per axis
    # (periods 0.15 and 0.3 s). Targets are the issue's (speed 3 %, angle 1 degree, restitution
    # 0.03, medians); the truth is the simulator's impact. Measured: speed_in 0.8 %, angle_in
    # 0.84 deg, speed_out 2.3 %, restitution 0.019; with the white noise alone judging the fits
    # (before): 2.3 %, 1.30 deg, 2.8 %, 0.048.
    med = drifting_contacts
    assert med[0] <= 0.03 and med[1] <= 1.0
    assert med[2] <= 0.03
    assert med[4] <= 0.03


@pytest.mark.xfail(strict=True, reason="angle_out median 1.11 deg with a drifting bias (1.63 "
                   "with the slide direction's prior at 5 degrees): the few frames of the slide "
                   "after the cushion fix its direction poorly; not yet solved")
def test_departure_angle_with_a_drifting_detection_bias(drifting_contacts):
    assert drifting_contacts[3] <= 1.0  # the issue's 1 degree


def test_slide_direction_prior_mean_follows_the_impact_model():
    # The prior's mean direction of the slide after a cushion (_slide_direction, a closed form
    # of the impact model of Mathavan, Jackson & Parkin 2010 with the nose contact slipping in
    # one direction throughout) against that model's own integration (analysis.cushion,
    # cushion_friction 0.14) for a ball arriving rolling without side spin: friction opposes
    # the slip of the cloth contact (Alciatore 2004). Measured: within 0.51 degree at 0-80
    # degrees off square, 0.3-3 m/s, cloth 0.15-0.3; the normal alone (before) was 2.85 off.
    from analysis.cushion import CushionParams, cushion_impact
    from tracking.events import _slide_direction

    cp = CushionParams()
    n = np.array([0.0, 1.0])  # bottom rail
    worst = 0.0
    for mu_s in (0.15, 0.3):
        for speed in (300.0, 1000.0, 3000.0):
            for a in (0.0, 10.0, 20.0, 30.0, 45.0, 60.0, 80.0):
                v = speed * np.array([math.sin(math.radians(a)), -math.cos(math.radians(a))])
                w = np.array([-v[1] / R, v[0] / R, 0.0])  # rolling: v + w x (0, 0, -R) = 0
                e = cp.restitution(-v[1])
                v2, w2 = cushion_impact(v, w, n, TABLE, e, cp.mu_cushion, mu_s)
                slip = np.array([v2[0] - R * w2[1], v2[1] + R * w2[0]])
                d = _slide_direction(v, n, TABLE.contact_angle_rad, cp.mu_cushion)
                diff = math.atan2(-slip[0], -slip[1]) - math.atan2(d[0], d[1])
                worst = max(worst, abs(math.degrees(math.remainder(diff, 2 * math.pi))))
    print("largest difference, degrees:", worst)
    assert worst <= 0.6


def test_slide_direction_prior_spans_the_impact_models_slips():
    # The prior on the direction of the slide after a cushion (EventConfig.slide_dir_sigma_deg,
    # about the rail's outward normal) must span the slips of the impact model of Mathavan,
    # Jackson & Parkin 2010 (analysis.cushion) for a ball arriving rolling: any angle up to 85
    # degrees off square, 0.1 to 3 m/s, side spin up to the rolling spin either way; friction at
    # the cloth opposes the slip of the contact point (Alciatore 2004). Measured: at most 2.85
    # degrees off the normal, and as much as 2.5 on both sides with side spin, so a prior
    # narrower than that would pull real slides off their course.
    from analysis.cushion import CushionParams, cushion_impact

    n = np.asarray(rail_inward_normal("bottom"), float)
    cp = CushionParams()
    devs = []
    for side in (-1.0, -0.5, 0.0, 0.5, 1.0):
        for speed in (100.0, 400.0, 1500.0, 3000.0):
            for ang in np.radians(np.arange(0.0, 86.0, 5.0)):
                v = speed * np.array([math.sin(ang), -math.cos(ang)])  # into the bottom rail
                w = np.array([-v[1] / R, v[0] / R, side * speed / R])  # rolling: w x (-R z) = -v
                vo, wo = cushion_impact(v, w, n, TABLE, cp.restitution(speed * math.cos(ang)),
                                        cp.mu_cushion, 0.2)
                slip = np.array([vo[0] - R * wo[1], vo[1] + R * wo[0]])  # cloth contact point
                assert np.hypot(*slip) > 1.0  # the ball slides after the cushion
                a = -slip  # friction's direction
                devs.append(math.degrees(math.atan2(a[0] * n[1] - a[1] * n[0], -(a @ n))))
    devs = np.array(devs)
    assert np.abs(devs).max() <= EventConfig().slide_dir_sigma_deg
    assert devs.min() < -2.0 and devs.max() > 2.0  # the model does slip off the normal


def test_a_path_leaving_the_rail_faster_than_it_came_is_no_cushion_contact():
    # A cushion returns less normal speed than it takes (speed ratio below 1; Mathavan et al.
    # 2009 measured at most about 0.95 [secondary]); a track turning at the rail and leaving at
    # twice its arriving normal speed (a hand sweeping past) is no contact. The same path with
    # speed ratio 0.9 is one (control).
    fps = 60.0
    times = np.arange(int(1.0 * fps)) / fps
    t_c = 0.5 + 0.3 / fps
    found = {}
    for e in (0.9, 2.0):
        f, _, _ = _rolling_bank_case("left", 400.0, 10.0, 1100.0, e, t_c)
        det = detections({"a": f}, times, np.random.default_rng(4), noise_mm=1.0)
        ev, _ = find_events(track(det, TABLE), TABLE, det)
        found[e] = _only(ev, "cushion")
    assert len(found[0.9]) == 1 and abs(found[0.9].loc[0, "restitution"] - 0.9) < 0.03
    assert len(found[2.0]) == 0


def test_a_detection_flagged_as_poor_weighs_less_at_a_contact():
    # One detection just after the contact lands 12 mm off (a ball half hidden by the cushion's
    # shadow), and the detector says so: its sigma_mm is 12 times the others'. Weighted least
    # squares (each sample by the detector's noise, Gauss-Markov) keeps the contact's measures
    # to the issue's targets (speed 3 %, angle 1 degree, restitution 0.03).
    fps = 60.0
    times = np.arange(int(1.0 * fps)) / fps
    t_c = 0.5 + 0.45 / fps
    speed, e = 900.0, 0.8
    f, v_in, v_out = _rolling_bank_case("right", 600.0, 25.0, speed, e, t_c)
    errs = []
    for seed in range(6):
        det = detections({"a": f}, times, np.random.default_rng(seed), noise_mm=0.5)
        k = int(np.searchsorted(times, t_c)) + 1  # the second frame after the contact
        row = det.index[det["frame"] == k][0]
        det.loc[row, "x"] -= 12.0  # toward the table's centre, off the right rail
        det.loc[row, "sigma_mm"] = 6.0
        ev, _ = find_events(track(det, TABLE), TABLE, det)
        cu = _only(ev, "cushion")
        assert len(cu) == 1
        _, a_out, _ = cushion_angles("right", v_in, v_out)
        errs.append((abs(cu.loc[0, "speed_out"] / np.hypot(*v_out) - 1),
                     abs(cu.loc[0, "angle_out"] - a_out), abs(cu.loc[0, "restitution"] - e)))
    med = np.median(np.array(errs), axis=0)
    print("median |speed_out|, |angle_out|, |restitution|:", med)
    assert med[0] <= 0.03 and med[1] <= 1.0 and med[2] <= 0.03


def test_a_gross_outlier_the_detector_did_not_flag_is_struck():
    # Two cushion sessions (rolled balls, 1 mm noise) in which the detection two frames after
    # every third contact lies 10 mm off along the rail with the same sigma_mm as the others (a
    # ball's image merged with a hand or the cushion's shadow can look like a good one). A
    # sample 5 noise sigmas off a side's fit is struck (common practice: rejecting gross
    # outliers before least squares). Over those contacts the departure meets the issue's
    # targets (speed 3 %, angle 1 degree, restitution 0.03, medians; truth the simulator's).
    # Measured: 2.4 %, 0.55 deg, 0.029 (2.2 %, 0.60 deg, 0.026 with mu_s g pooled and the
    # slide direction's prior at 5 degrees); left in (before): 1.6 %, 3.8 deg, 0.030.
    errs = []
    for seed in (1, 2):
        found, truth = _cushion_session(seed, outlier_mm=10.0)
        for _, tr in truth.iloc[::3].iterrows():
            r = found.iloc[int(np.argmin(np.abs(found["t"] - tr["t"])))]
            errs.append((abs(r["speed_out"] / tr["speed_out"] - 1),
                         abs(r["angle_out"] - tr["angle_out"]),
                         abs(r["restitution"] - tr["restitution"])))
    med = np.median(np.array(errs), axis=0)
    print("median |speed_out|, |angle_out|, |restitution|:", med)
    assert med[0] <= 0.03 and med[1] <= 1.0 and med[2] <= 0.03


@pytest.mark.parametrize("rail, along, angle", [
    ("bottom", 700.0, 30.0), ("right", 500.0, -45.0), ("top", 1200.0, 30.0), ("left", 800.0, 60.0),
])
def test_one_gross_read_beside_a_mirror_bounce_is_struck_and_the_bounce_recovered_exactly(
        rail, along, angle):
    # The exact mirror bounce of ``test_mirror_bounce_recovered_exactly_without_noise`` (e = 1,
    # rolling in, sliding off; analytic truth, ``_rolling_bank_case``), with the first read
    # after the contact 5 mm off toward the table's centre (a read pulled by the cushion's
    # shadow) and the same stated sigma_mm as every other read. That read sets the departure's
    # short slide, which follows it: its plain residual is the smallest of the side while
    # the good reads beyond it are left off the bent path. Ranked by studentised residuals
    # (Cook & Weisberg 1982: residual over sqrt(1 - leverage)) it is the read struck, and the
    # rest, exact, give the bounce back exactly. (Before: restitution 0.80, angle out 2.5
    # degrees off, time 0.2 frame early, on the top rail.)
    f, t_c, times, det = _exact_bounce_reads(rail, along, angle)
    row = det.index[det["frame"] == int(np.searchsorted(times, t_c))][0]
    det.loc[row, ["x", "y"]] += 5.0 * np.asarray(rail_inward_normal(rail))
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    cu = _only(ev, "cushion")
    assert len(cu) == 1 and cu.loc[0, "rail"] == rail
    # Exact, as without the gross read (constant-acceleration pieces fitted exactly).
    _assert_exact_bounce(cu, f, t_c, angle)


def test_two_tracks_ending_as_they_touch_make_no_collision():
    # Two false tracks (a hand's knuckles, swept together over the middle of the table and
    # lifted) close on each other, turn and both end in the first frame past the touch. Two balls
    # cannot both leave the table at a mid-table touch (common practice), so no collision may be
    # reported; a contact neither of whose paths goes on cannot be measured either.
    fps = 60.0
    times = np.arange(60) / fps
    t_m = (400.0 - D) / 2400.0  # the centres are one diameter apart

    # Swept together at 1.2 m/s each, then drawn apart at 0.3 m/s as the hand is lifted.
    def fa(t):
        t = np.asarray(t, float)
        x = 700.0 + 1200.0 * np.minimum(t, t_m) - 300.0 * np.maximum(t - t_m, 0.0)
        return np.stack([x, 600.0 + 0.0 * t], axis=1)

    def fb(t):
        t = np.asarray(t, float)
        x = 1100.0 - 1200.0 * np.minimum(t, t_m) + 300.0 * np.maximum(t - t_m, 0.0)
        return np.stack([x, 620.0 + 0.0 * t], axis=1)
    k = int(np.ceil(t_m * fps))  # the first frame at or past the touch
    n = 0
    for seed in range(6):
        det = detections({"a": fa, "b": fb}, times, np.random.default_rng(seed), noise_mm=0.5,
                         present={"a": (0, k), "b": (0, k)},
                         labels={"a": ("orange", "solid"), "b": ("maroon", "solid")})
        ev, _ = find_events(track(det, TABLE), TABLE, det)
        n += int((ev["kind"] == "collision").sum())
    assert n == 0


# --- a slow bank and a contact line off by half a millimetre ----------------------------------
def _slow_bank_session(seed: int):
    """Four rolling contacts with the bottom cushion at 0.4-1.2 m/s normal speed (they measure
    the clip's cloth and slide), then one slow rolling bank off the top cushion, arriving at
    about 0.24 m/s 35 degrees off square and departing at about 0.18 m/s: the top rail's line
    rests on that one contact. Simulated by ``analysis.physics`` (Alciatore 2004 cloth; cushion
    impacts of Mathavan, Jackson & Parkin 2010); detections as in ``_cushion_session`` with
    0.3 mm noise. Returns (tracks, detections, the simulator's slow contact)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections, truth_events

    rng = np.random.default_rng(seed)
    sim = Simulator(TABLE, PhysicsParams(), {"cue": (400.0, 320.0)})
    t = 0.5
    for i, x0 in enumerate((400.0, 900.0, 1650.0, 2150.0)):  # clear of the pockets
        if i:
            sim.place(t, "cue", (x0, 320.0))
        vn = float(rng.uniform(400.0, 1200.0))
        ang = float(rng.uniform(-25.0, 25.0))
        sim.strike(t + 0.4, Strike("cue", vn / math.cos(math.radians(ang)),
                                   math.radians(-90.0 + ang), 0.0, 0.4))
        t_lift = t + 0.4 + (320.0 - R) / vn + 0.45
        sim.lift(t_lift, "cue")
        t = t_lift + 0.4
    sim.place(t, "cue", (1800.0, TABLE.width_mm - 250.0))
    sim.strike(t + 0.4, Strike("cue", 330.0, math.radians(90.0 + 35.0), 0.0, 0.4))
    sim.run_until_rest()
    t_end = t + 0.4 + 2.2
    traj = sim.trajectory()
    det = detections(traj, t_end, 60.0, rng, rest_sigma_mm=0.15, moving_sigma_mm=0.3, drop=0.0)
    truth = truth_events(TABLE, traj, t_end)
    truth = truth[(truth["kind"] == "cushion") & (truth["rail"] == "top")].reset_index(drop=True)
    return track(det, TABLE), det, truth.iloc[0]


def test_a_slow_departure_hardly_turns_with_the_contact_line():
    # A slow ball's departure is fixed by its own path: after its short slide the rolling leg is
    # seen for many frames, and the slide's duration has the clip's prior
    # (``_cushion_slide_ratio``, sd 0.05 of the normal speed arriving). Pinned exactly to a line
    # moved by s, the slide must stretch by about s (vn_in + vn_roll) / (mu_s g tk vn_in),
    # here some 23 ms per mm, i.e. 45 mm/s of normal speed out and 8 degrees per mm. The leg
    # alone fixes angle_out to the prior's sd: 0.05 vn_in ~ 10 mm/s of normal speed, times
    # |v_along| / |v_out|^2, at 180 mm/s 35 degrees off square about 1.8 degrees (all derived
    # here, with the simulator's slide of 32 ms at mu_s g = 1.96 m/s^2). A line known to sd_L
    # weighed against that leg moves the estimate by at most (sd_leg / 2) (shift / sd_L) (the
    # weight of a Gaussian prior of sd k sd_L against one of sd sd_leg, times the slope k, peaks
    # at sd_leg / (2 sd_L)), which is sd_leg over a shift of two sd_L, the calibration's half a
    # millimetre each way: so over -0.5, 0, +0.5 mm angle_out may move by at most 1.8 degrees,
    # and its median error must meet the issue's 1 degree against the simulator's impact.
    # Measured: spreads 1.34, 1.05, 0.96, 0.96 degrees, median |error| 0.73 degree (1.43,
    # 0.94, 1.07, 1.12 and 0.96 with mu_s g pooled under the typical cloth's prior); pinned
    # exactly to the line with one model chosen (before): spreads 4.6, 4.9, 3.3, 2.5, 0.93.
    errs, spreads = [], []
    for seed in (11, 12, 13, 14):
        tracks, det, tr = _slow_bank_session(seed)
        assert 150.0 <= tr["speed_out"] <= 250.0  # the case asked for: a slow departure
        got = []
        for shift in (-0.5, 0.0, 0.5):
            # Every position moved along y: the top rail's reversal line then sits that far
            # beyond (or short of) the balls' contact line, as a calibration off by that much
            # places it.
            tr_s, det_s = tracks.copy(), det.copy()
            for df in (tr_s, det_s):
                for col in ("y", "y_meas"):
                    if col in df:
                        df[col] += shift
            found = _only(find_events(tr_s, TABLE, det_s)[0], "cushion")
            r = found.iloc[int(np.argmin(np.abs(found["t"] - tr["t"])))]
            assert abs(r["t"] - tr["t"]) < 1 / 60
            got.append(r["angle_out"] - tr["angle_out"])
        print(seed, np.round(got, 2))
        errs += got
        spreads.append(max(got) - min(got))
    print("spreads", np.round(spreads, 2), "median |error|", np.median(np.abs(errs)))
    assert max(spreads) <= 1.8
    assert np.median(np.abs(errs)) <= 1.0


def _graze_sessions():
    """Rolling balls (struck 0.4 R above centre, Alciatore 2004) on the 9 ft table simulated by
    ``analysis.physics`` (cushion impacts of Mathavan, Jackson & Parkin 2010), 60 fps, detections
    as in ``benchmarks/event_accuracy.py`` with 0.3 mm noise moving: four grazes of the bottom
    cushion, 0.25-0.45 m/s at 80-84 degrees off square (30-75 mm/s normal speed, below the 50 mm/s
    the smoothed velocity's threshold asks of each side), and one ball rolling along the top
    cushion 40 mm off the line, parallel to it, which touches nothing.
    Yields (found cushion events, the simulator's cushion events)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections, truth_events

    for seed, (x0, speed, ang) in enumerate(((500.0, 300.0, 82.0), (700.0, 450.0, 84.0),
                                             (1700.0, 250.0, -80.0), (2000.0, 350.0, -83.0))):
        rng = np.random.default_rng(seed)
        # Start 20 mm inside the line, heading down at (90 - ang) degrees to the rail.
        y0 = TABLE.reversal_line("bottom") + 20.0
        sim = Simulator(TABLE, PhysicsParams(), {"cue": (x0, y0)})
        heading = math.radians(-90.0 + ang)
        sim.strike(0.3, Strike("cue", speed, heading, 0.0, 0.4))
        sim.run_until_rest()
        traj = sim.trajectory()
        t_end = 0.3 + 1.6
        det = detections(traj, t_end, 60.0, rng, rest_sigma_mm=0.15, moving_sigma_mm=0.3,
                         drop=0.0)
        truth = truth_events(TABLE, traj, t_end)
        yield _only(find_events(track(det, TABLE), TABLE, det)[0], "cushion"), \
            truth[truth["kind"] == "cushion"].reset_index(drop=True)
    rng = np.random.default_rng(9)
    y0 = TABLE.reversal_line("top") - 40.0
    sim = Simulator(TABLE, PhysicsParams(), {"cue": (1350.0, y0)})  # past the side pocket
    sim.strike(0.3, Strike("cue", 400.0, 0.0, 0.0, 0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    det = detections(traj, 2.0, 60.0, rng, rest_sigma_mm=0.15, moving_sigma_mm=0.3, drop=0.0)
    truth = truth_events(TABLE, traj, 2.0)
    yield _only(find_events(track(det, TABLE), TABLE, det)[0], "cushion"), \
        truth[truth["kind"] == "cushion"].reset_index(drop=True)


def test_grazes_below_the_speed_threshold_are_found_and_nothing_else():
    # The issue's targets: recall and precision 0.98 (here: every graze found, within two
    # frames of the simulator's contact, and no contact where none was). Measured: all four
    # found within 0.45 frame; before (the smoothed-speed threshold alone) the first session's
    # graze was missed.
    n_truth = n_found = 0
    for found, truth in _graze_sessions():
        print(found[["t", "rail", "speed_in", "speed_out", "angle_in"]].round(3).to_dict("records"),
              truth[["t", "rail", "vn_in"]].round(3).to_dict("records"))
        assert len(found) == len(truth)
        for _, tr in truth.iterrows():
            assert np.min(np.abs(found["t"] - tr["t"])) < 2 / 60
        n_truth += len(truth)
        n_found += len(found)
    assert n_truth == 4 and n_found == 4


def _short_departure_cases(n_after: int):
    """A ball rolling into the right cushion at 180 mm/s normal speed (480 mm/s in all) and
    leaving it at 30 mm/s normal speed, seen for only ``n_after`` frames after the contact (then
    gone: pocketed in the corner or picked up), 60 fps, 0.5 mm noise; one case per seed.
    Yields (found cushion events, contact time)."""
    fps = 60.0
    times = np.arange(int(0.8 * fps)) / fps
    for seed in range(6):
        t_c = 0.6 + (0.1 + 0.13 * seed) / fps  # between frames, a different phase each
        f = bounce_path("right", 300.0, t_c, (180.0, -440.0), (-30.0, -400.0))
        last = int(math.floor(t_c * fps)) + n_after
        det = detections({"a": f}, times, np.random.default_rng(seed), noise_mm=0.5,
                         present={"a": (0, last)})
        yield _only(find_events(track(det, TABLE), TABLE, det)[0], "cushion"), t_c


def test_a_contact_seen_only_a_few_frames_after_is_found():
    # The departure's five samples (83 ms) leave its smoothed normal velocity near the noise,
    # but the approach heads into the rail far beyond it: the turn is the change of slope
    # between the legs (analytic path; timing within two frames as in the graze test). Before:
    # two of the six found (each leg had to be seen six frames and turn by itself).
    for found, t_c in _short_departure_cases(5):
        assert len(found) == 1 and found.loc[0, "rail"] == "right"
        assert abs(found.loc[0, "t"] - t_c) < 2 / 60


def test_a_ball_gone_before_it_reaches_the_rail_makes_no_contact():
    # Seen last two frames short of the cushion (centre about 6 mm from its reversal line):
    # nothing turned, so no contact (analytic path).
    for found, _ in _short_departure_cases(-2):
        assert len(found) == 0


def test_a_slow_turn_is_timed_by_its_raw_legs_not_by_a_smoothed_velocity():
    # A graze of the top cushion (analytic path: 35 mm/s normal speed in, 10 mm/s out, 340 mm/s
    # along it), 0.3 mm noise, 60 fps, eight phases. The tracks' velocity is the true one
    # averaged over 15 frames, a smoother that blurs the turn: with the departure slower than
    # the approach its normal velocity changes sign 3-4 frames after the contact. The contact
    # must still be found and timed from the raw legs, within a frame (common practice: the
    # scorer matches within 0.1 s, but a frame at 340 mm/s is 6 mm along the rail). Measured:
    # within 0.56 frame; before: 1.4-3.6 frames late, one of the eight missed.
    fps = 60.0
    times = np.arange(int(1.2 * fps)) / fps
    for seed in range(8):
        t_c = 0.6 + (0.1 + 0.11 * seed) / fps
        f = bounce_path("top", 1000.0, t_c, (340.0, 35.0), (330.0, -10.0))
        det = detections({"a": f}, times, np.random.default_rng(seed), noise_mm=0.3)
        tr = track(det, TABLE)
        v = np.gradient(f(times), axis=0) * fps
        box = np.ones(15) / 15
        for i, col in enumerate(("vx", "vy")):
            tr[col] = np.convolve(np.pad(v[:, i], 7, mode="edge"), box, mode="valid")
        found = _only(find_events(tr, TABLE, det)[0], "cushion")
        assert len(found) == 1 and found.loc[0, "rail"] == "top"
        assert abs(found.loc[0, "t"] - t_c) < 1.0 / fps


@pytest.mark.parametrize("n_after", [0, 1])
def test_a_ball_lifted_as_it_reaches_the_cushion_still_touched_it(n_after):
    # A ball rolling into the bottom cushion at 1400 mm/s, 50 degrees off square (900 mm/s
    # normal speed), is last seen on the frame before the contact or the one after, then
    # caught or hidden, while the clip goes on (another ball rests on the table; 60 fps, 0.5 mm
    # noise, six phases; analytic paths). It cannot pass the cushion, so it touched it: the
    # contact is reported from the approach (time within half a frame, speed in within 3 %,
    # angle in within 1 degree: the project's targets), with speed and angle out and
    # restitution empty. Measured: within 0.037 frame, 0.7 % and 0.23 degree. Before: no
    # contact at all.
    fps = 60.0
    times = np.arange(int(1.2 * fps)) / fps  # the clip goes on after the ball is gone
    for seed in range(6):
        t_c = 0.6 + (0.05 + 0.16 * seed) / fps
        f, v_in, _ = _bounce_case("bottom", 900.0, -50.0, 1400.0, 0.8, t_c)
        last = int(math.floor(t_c * fps)) + n_after
        rest = decel_path((1800.0, 700.0), 0.0, 0.0, 1.0)  # another ball, resting throughout
        det = detections({"a": f, "b": rest}, times, np.random.default_rng(seed), noise_mm=0.5,
                         present={"a": (0, last)})
        cu = _only(find_events(track(det, TABLE), TABLE, det)[0], "cushion")
        assert len(cu) == 1 and cu.loc[0, "rail"] == "bottom"
        assert abs(cu.loc[0, "t"] - t_c) < 0.5 / fps
        assert abs(cu.loc[0, "speed_in"] / 1400.0 - 1.0) < 0.03
        assert abs(cu.loc[0, "angle_in"] - (-50.0)) < 1.0
        assert np.isnan(cu.loc[0, "speed_out"]) and np.isnan(cu.loc[0, "restitution"])


# --- the cloth's sliding deceleration, pooled over a clip's slides ---------------------------
@pytest.mark.parametrize("mu_slide", [0.15, 0.3])
def test_departures_on_a_slower_and_a_faster_cloth(mu_slide):
    # The cloth's mu_s g is estimated once per clip, pooled over its slides with the typical
    # cloth (mu_s 0.2) as the prior (``_cloth_slide_decel``); on cloths away from the prior
    # the slides must win: the departures meet the issue's targets (speed 3 %, angle 1 degree,
    # restitution 0.03, medians; truth the simulator's, Alciatore 2004 cloth range 0.15-0.4,
    # cushion impacts of Mathavan, Jackson & Parkin 2010). Measured over two sessions each:
    # 0.15: 0.9 %, 0.36 deg, 0.015 (pooled 1439 and 1529 against 1472 mm/s^2); 0.3: 1.7 %,
    # 0.33 deg, 0.021 (2795 and 3020 against 2943).
    errs = []
    for seed in (1, 2):
        found, truth = _cushion_session(seed, mu_slide=mu_slide)
        for _, tr in truth.iterrows():
            r = found.iloc[int(np.argmin(np.abs(found["t"] - tr["t"])))]
            assert abs(r["t"] - tr["t"]) < 1 / 60
            errs.append((abs(r["speed_out"] / tr["speed_out"] - 1),
                         abs(r["angle_out"] - tr["angle_out"]),
                         abs(r["restitution"] - tr["restitution"])))
    med = np.median(np.array(errs), axis=0)
    print(mu_slide, "median |speed_out|, |angle_out|, |restitution|:", med)
    assert med[0] <= 0.03 and med[1] <= 1.0 and med[2] <= 0.03


@pytest.mark.parametrize("rail, along, angle, speed", [
    ("bottom", 700.0, 30.0, 800.0), ("right", 500.0, -45.0, 1000.0), ("top", 1900.0, 0.0, 600.0),
    ("left", 800.0, 50.0, 900.0),
])
def test_short_slides_at_30fps_measure_the_cloth(rail, along, angle, speed):
    # At 30 fps the slide after a cushion spans a few frames: a ball rolling in at 0.5-0.7 m/s
    # normal speed with e = 0.8 on a 0.25 cloth slides 2 (1 + e) vn / (7 mu_s g) = 0.12-0.15 s,
    # 3.6-4.5 frame intervals (``_rolling_bank_case``, Alciatore 2004), so each slide has 3-4
    # samples. Each still counts toward the clip's mu_s g (``cloth_slide_min_samples``: three
    # samples give a piece its own curvature), where at least five were asked before and the
    # typical cloth's prior (mu_s 0.2) stood in. Noise-free analytic paths; truth the path's
    # e = 0.8; target the issue's 0.03. Measured |error| 0.010, 0.013, 0.027, 0.003 (mu_s g
    # 2321, 2559, 2256, 2474 against 2452.5 mm/s^2); before: 0.048, 0.046, 0.051, 0.049.
    fps = 30.0
    t_c = 0.5 + 0.37 / fps
    f, _, _ = _rolling_bank_case(rail, along, angle, speed, 0.8, t_c)
    times = np.arange(int(1.2 * fps)) / fps
    det = detections({"a": f}, times, np.random.default_rng(0), noise_mm=0.0)
    det["sigma_mm"] = 1.0
    cu = _only(find_events(track(det, TABLE), TABLE, det)[0], "cushion")
    assert len(cu) == 1 and cu.loc[0, "rail"] == rail
    assert abs(cu.loc[0, "restitution"] - 0.8) <= 0.03  # the issue's 0.03


@pytest.mark.xfail(strict=True, reason="a lone slow contact's departure reads 3.9 % slow "
                   "(signed median) and angle_out 1.12 deg (median |error|) over 9 contacts; "
                   "fitted as rolling from the contact before: -31 % and 5.0 deg")
def test_a_lone_slow_contact_departs_sliding_on_the_typical_cloth():
    # One slow rolling bank per clip (0.15-0.4 m/s normal speed, up to 40 degrees off square,
    # 1 mm noise moving), so no slide of the clip measures the cloth: the departure is then a
    # slide on the prior's typical cloth (mu_s 0.2, Alciatore 2004), not rolling from the
    # contact (physics: a ball leaves a cushion sliding). Against the simulator (Mathavan,
    # Jackson & Parkin 2010 impacts, mu_s 0.2): no bias in speed_out beyond the issue's 3 %
    # (signed median), angle_out within its 1 degree (median |error|).
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections, truth_events

    errs = []
    for seed in range(12):
        rng = np.random.default_rng(100 + seed)
        vn, ang = rng.uniform(150.0, 400.0), rng.uniform(-40.0, 40.0)
        sim = Simulator(TABLE, PhysicsParams(), {"cue": (rng.uniform(500.0, 2000.0), 200.0)})
        sim.strike(0.3, Strike("cue", vn / math.cos(math.radians(ang)),
                               math.radians(-90.0 + ang), 0.0, 0.4))
        sim.run_until_rest()
        traj = sim.trajectory()
        det = detections(traj, 2.8, 60.0, rng, rest_sigma_mm=0.5, moving_sigma_mm=1.0,
                         drop=0.0)
        truth = truth_events(TABLE, traj, 2.8)
        truth = truth[truth["kind"] == "cushion"]
        if not len(truth):
            continue  # the ball stopped short of the rail
        tr = truth.iloc[0]
        found = _only(find_events(track(det, TABLE), TABLE, det)[0], "cushion")
        if not len(found) or np.min(np.abs(found["t"] - tr["t"])) > 1 / 60:
            continue  # finding slow contacts is tested elsewhere; this measures departures
        r = found.iloc[int(np.argmin(np.abs(found["t"] - tr["t"])))]
        errs.append((r["speed_out"] / tr["speed_out"] - 1, abs(r["angle_out"] - tr["angle_out"])))
    errs = np.array(errs)
    print("signed speed_out", np.round(errs[:, 0], 3), "|angle_out|", np.round(errs[:, 1], 2))
    assert len(errs) >= 8
    assert abs(np.median(errs[:, 0])) <= 0.03
    assert np.median(errs[:, 1]) <= 1.0


def _struck_near(fps: float, seed: int, n: int = 6, gap_mm: tuple[float, float] = (60.0, 140.0),
                 exact: bool = False):
    """Simulated shots (``analysis.physics``: sliding then rolling, Alciatore 2004; cushion
    impacts of Mathavan, Jackson & Parkin 2010) in which the cue ball, struck from rest at 2-3.5
    m/s up to 30 degrees off square, meets the bottom or top cushion ``gap_mm`` after it starts
    (centre to the reversal line), so within one to three frame intervals at 30 fps; caught
    0.5 s later and set down 0.7 s after that for the next. Detections as in ``benchmarks/event_accuracy.py``
    (exposure-averaged centres, 2.5 mm noise moving, 1 mm at rest), or ``exact``: the true
    centres at the frame times with 0.3 mm of noise, stated sigma 1 mm. Returns (found events,
    the simulator's cushion events)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections, truth_events

    rng = np.random.default_rng(seed)
    sim = Simulator(TABLE, PhysicsParams(), {"cue": (500.0, 400.0)})
    t = 0.3
    for i, x0 in enumerate(np.linspace(500.0, 2000.0, n)):
        bottom = i % 2 == 0
        ang = math.radians(rng.uniform(-30.0, 30.0))
        dist = rng.uniform(*gap_mm)
        c = TABLE.reversal_line("bottom" if bottom else "top")
        y0 = c + dist * math.cos(ang) if bottom else c - dist * math.cos(ang)
        if i:
            sim.place(t, "cue", (x0, y0))
        else:
            sim.place(0.0, "cue", (x0, y0))
        heading = (-math.pi / 2 if bottom else math.pi / 2) + ang
        sim.strike(t + 0.5, Strike("cue", rng.uniform(2000.0, 3500.0), heading, 0.0,
                                   rng.choice([-0.4, 0.0, 0.4])))
        sim.lift(t + 1.0, "cue")
        t += 1.7
    traj = sim.trajectory()
    if exact:
        det = detections(traj, t, fps, rng, 0.3, 0.3, drop=0.0, shutter_fraction=0.0)
        det["sigma_mm"] = 1.0
    else:
        det = detections(traj, t, fps, rng, drop=0.0)
    truth = truth_events(TABLE, traj, t)
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    return ev, truth[truth["kind"] == "cushion"].reset_index(drop=True)


@pytest.mark.parametrize("seed", [1, 2])
def test_a_cushion_a_frame_or_two_after_the_strike_is_found_at_30fps(seed):
    # At 30 fps a ball struck from rest 60-140 mm from a rail at 2-3.5 m/s reaches it one to
    # three frames later, so its approach has at most two samples clear of the strike and the
    # contact. Each simulated contact must be found on its rail within half a frame (the issue's
    # collision tolerance; the scorer matches within 0.1 s) and no contact made up. Before: the
    # strike's bound was dropped near the contact, so the approach fit ran back through the rest
    # before the strike, and a contact with fewer than two approach samples was never solved
    # (event_accuracy.py 30 fps, seeds 1-5: 8 such contacts missed).
    fps = 30.0
    ev, truth = _struck_near(fps, seed)
    found = _only(ev, "cushion")
    assert len(found) == len(truth)
    for _, tr in truth.iterrows():
        near = found[(found["rail"] == tr["rail"]) & ((found["t"] - tr["t"]).abs() < 0.5 / fps)]
        assert len(near) == 1, (tr["t"], found[["t", "rail"]].to_dict("records"))


def test_open_shutter_exposure_averages_at_25fps_keep_cushion_measures_within_targets():
    # A 25 fps camera with its shutter open the whole frame (cheap and webcam-like cameras in
    # dim rooms, the extra clip cheapwide_25fps): each detection of a moving ball is its
    # centre's mean over the 40 ms exposure (a streak's centroid), not the centre at the
    # frame's time; a frame whose exposure holds a cushion contact averages a bent path, and
    # one in the slide after it a decelerating one (mean of p(t + s) over |s| < T/2 is
    # p(t) + a T^2 / 24, 0.13 mm at mu_s g). Banks from our own simulator
    # (``benchmarks/event_accuracy.py``: random rails, angles, speeds 0.3-4 m/s, spins, 7-9 ft
    # tables and cloths; ``analysis.physics``: Alciatore 2004 sliding and rolling, cushions of
    # Mathavan, Jackson & Parkin 2010), each detection the mean of 41 instants across the
    # frame interval plus 0.3 mm of noise. Against the simulator's own contacts (visible ones:
    # normal speed in over 100 mm/s), the medians meet the issue's targets (speed 3 %,
    # restitution 0.03, time 0.25 frame), the exposure model aside: measured 0.81 % and 0.018
    # over these 51 contacts (time 0.013-0.023 frame per seed), and 0.78 %, 0.019 with a
    # shutter of 1/50 of the frame (the same shots sampled at an instant).
    from benchmarks.event_accuracy import detections, random_shots, simulate, truth_events

    fps = 25.0
    errs = []
    for seed in (3, 4, 5):
        rng = np.random.default_rng(seed)
        for shot in random_shots(rng, 12, collision_fraction=0.0):
            traj, t_end = simulate(shot)
            det = detections(traj, t_end, fps, np.random.default_rng(seed + 1), 0.3, 0.3,
                             drop=0.0, shutter_fraction=1.0, subsamples=41)
            det["sigma_mm"] = 1.0
            truth = truth_events(shot.table, traj, t_end)
            truth = truth[(truth["kind"] == "cushion") & (truth["vn_in"] > 100.0)]
            ev, _ = find_events(track(det, shot.table), shot.table, det)
            found = _only(ev, "cushion")
            for _, tr in truth.iterrows():
                near = found[(found["rail"] == tr["rail"])
                             & ((found["t"] - tr["t"]).abs() < 0.5 / fps)]
                assert len(near) == 1, (shot.label, tr["t"], found[["t", "rail"]].to_dict("records"))
                got = near.iloc[0]
                if np.isfinite(got["restitution"]):
                    errs.append((got["speed_out"] / tr["speed_out"] - 1.0,
                                 got["restitution"] - tr["restitution"], (got["t"] - tr["t"]) * fps))
    errs = np.abs(np.array(errs))
    assert len(errs) >= 40
    assert np.median(errs[:, 0]) <= 0.03
    assert np.median(errs[:, 1]) <= 0.03
    assert np.median(errs[:, 2]) <= 0.25


@pytest.mark.parametrize("seed", [2, 3])
def test_a_ball_struck_into_a_cushion_slides_into_it_at_30fps(seed):
    # Struck from rest 380-460 mm from the rail at 2-3.5 m/s, the ball meets it 0.11-0.23 s
    # later, while a stun or draw still slides (2 v0 / (7 mu_s g) = 0.29-0.51 s on the
    # simulator's 0.2 cloth, Alciatore 2004): its approach holds three to five samples at
    # 30 fps, too few for a free quadratic. Against the simulator's own contacts
    # (``analysis.physics``), on true centres with 0.3 mm of noise, speed in within 2 % and
    # restitution within 0.02 (the issue's targets are 3 % and 0.03 for medians). Before,
    # such an approach was fitted rolling only: speed in up to 10.7 % high and restitution
    # 0.084 low (seeds 2 and 3: 7.5, 4.9, 9.7, 3.9, 7.9 and 10.7 %). (An approach of two samples,
    # seed 1 at 9.43 s, cannot tell a stun from a follow that rolls at once: its speed in is
    # the chord's, 3.1 % high there.)
    fps = 30.0
    ev, truth = _struck_near(fps, seed, gap_mm=(380.0, 460.0), exact=True)
    found = _only(ev, "cushion")
    checked = 0
    for _, tr in truth.iterrows():
        near = found[(found["rail"] == tr["rail"]) & ((found["t"] - tr["t"]).abs() < 0.5 / fps)]
        if len(near) != 1 or not np.isfinite(near["restitution"].iloc[0]):
            continue
        got = near.iloc[0]
        assert abs(got["speed_in"] / tr["speed_in"] - 1.0) < 0.02, (tr.to_dict(), got.to_dict())
        assert abs(got["restitution"] - tr["restitution"]) < 0.02, (tr.to_dict(), got.to_dict())
        checked += 1
    assert checked >= 2


@pytest.mark.parametrize("seed", [2, 4])
def test_every_contact_of_a_clean_clip_of_short_shots_is_found_at_30fps(seed):
    # The struck-into-a-cushion shots above on true centres (0.3 mm of noise): each motion,
    # struck, bounced and caught within half a second, holds its contact, so the ball's noise
    # estimate at the fits' scale, a median over runs of twelve frames, is a contact's misfit
    # (44 mm), and a three-sample approach, whose s2 is that estimate, looked like a path
    # scattering beyond a ball's radius. Every simulated contact (``analysis.physics``) must
    # be found on its rail within half a frame (the issue's tolerance). Before: 10 of the 24
    # contacts of seeds 1-4, none of seed 4's six.
    fps = 30.0
    ev, truth = _struck_near(fps, seed, gap_mm=(380.0, 460.0), exact=True)
    found = _only(ev, "cushion")
    assert len(found) == len(truth) == 6
    for _, tr in truth.iterrows():
        near = found[(found["rail"] == tr["rail"]) & ((found["t"] - tr["t"]).abs() < 0.5 / fps)]
        assert len(near) == 1, (tr["t"], found[["t", "rail"]].to_dict("records"))


def _struck_into_a_ball(fps: float, seed: int):
    """A cue ball struck from rest at 2-3.5 m/s into an object ball ahead, cut 0-30 degrees,
    the gap between the balls what the speed covers in 1.2 to 2 frame intervals, so they meet
    one to two frames after the strike; simulated by ``analysis.physics`` (ball-ball impacts
    with throw). Detections as in ``benchmarks/event_accuracy.py``. Returns (found events, the
    simulator's collision time)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections

    rng = np.random.default_rng(seed)
    obj = np.array([1200.0, 600.0])
    heading = rng.uniform(-math.pi, math.pi)
    cut = math.radians(rng.uniform(-30.0, 30.0))
    n = np.array([math.cos(heading + cut), math.sin(heading + cut)])  # line of centres
    u = np.array([math.cos(heading), math.sin(heading)])
    speed = rng.uniform(2000.0, 3500.0)
    cue = obj - D * n - speed * rng.uniform(1.2, 2.0) / fps * u
    sim = Simulator(TABLE, PhysicsParams(), {"cue": tuple(cue), "obj": tuple(obj)})
    sim.strike(0.3, Strike("cue", speed, heading, 0.0, 0.0))
    sim.run_until_rest()
    traj = sim.trajectory()
    t_c = next(e.t for e in traj.events if e.kind == "collision")
    det = detections(traj, 1.2, fps, rng, drop=0.0)
    det["pattern"] = np.where(det["truth"] == "cue", "cue", "solid")
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    return ev, t_c


def test_a_collision_a_frame_or_two_after_the_strike_is_found_at_30fps():
    # The struck ball meets the other before its third frame: the collision must be found (both
    # balls' rows) within half a frame (the issue's target) and the struck ball keep its start
    # (it left rest before the other did; the other's motion begins at the collision). Before:
    # the struck ball's approach was fitted through its rest, which made its velocity change
    # look a seventh of the other's and the collision was dropped as unbalanced, or the
    # departure's touch was looked for at the root where the paths close in (event_accuracy.py
    # 30 fps, seeds 2 and 3: one of 19 and one of 22 collisions missed).
    fps = 30.0
    for seed in range(6):
        ev, t_c = _struck_into_a_ball(fps, seed)
        col = _only(ev, "collision")
        assert len(col) == 2 and np.all(np.abs(col["t"] - t_c) < 0.5 / fps), (seed, t_c, col)
        starts = _only(ev, "start")
        assert len(starts) == 1 and starts.loc[0, "t"] < t_c, (seed, starts)


def _creep_path(t_c: float, along: float = 700.0):
    """A ball rolling into the top cushion, decelerating at mu_r g (mu_r 0.0107, Alciatore 2004
    range), 47 mm/s at the contact (45 of it normal: below the 50 mm/s rest speed), leaving
    at (10, -30) mm/s and sliding to rest in 0.2 s (analytic path, mm)."""
    c = TABLE.reversal_line("top")
    pc = np.array([along, c])
    u = np.array([0.3, 1.0]) / math.hypot(0.3, 1.0)
    v_c, dec_in = 47.0, 0.0107 * G
    v_out, t_stop = np.array([10.0, -30.0]), 0.2

    def f(t):
        tau = (np.asarray(t, float) - t_c)[:, None]
        before = pc + v_c * u * tau - 0.5 * dec_in * u * tau**2
        m = np.clip(tau, 0.0, t_stop)
        return np.where(tau < 0, before, pc + v_out * m - 0.5 * v_out / t_stop * m**2)
    return f


def test_a_creeping_ball_is_not_given_a_contact_where_its_smoothed_velocity_swung():
    # A ball creeping into the top cushion at 45 mm/s of normal speed, 30 fps, 2.5 mm noise
    # (benchmarks/event_accuracy.py's moving noise), eight phases. The tracks' velocity is the
    # true one, except that three frames before the contact it swings to 160 mm/s into the rail
    # and then 74 out, as the tracker's bounce hypothesis made of such a ball's scatter in
    # event_accuracy.py --fps 30 --seed 2 (smoothed 163 in, 74 out; true 57 and 54). Its raw
    # samples creep on into the rail, so the contact is where they turn: at 45 mm/s and 2.5 mm
    # of noise a frame's travel is 1.5 mm, so its time is known to about a frame (common
    # practice: the scorer's window is 0.1 s, three frames). Measured: seven found, 0.1-1.6
    # frames off, median 0.5; before: all eight 1.4-3.7 frames early, median 1.8.
    fps = 30.0
    times = np.arange(int(2.4 * fps)) / fps
    errors = []
    for seed in range(8):
        t_c = 1.8 + (0.1 + 0.11 * seed) / fps
        f = _creep_path(t_c)
        det = detections({"a": f}, times, np.random.default_rng(seed), noise_mm=2.5)
        tr = track(det, TABLE)
        v = np.gradient(f(times), axis=0) * fps
        tr["vx"], tr["vy"] = v[tr["frame"], 0], v[tr["frame"], 1]
        k_swing = int(math.floor(t_c * fps)) - 3
        tr.loc[tr["frame"].isin([k_swing - 2, k_swing - 1]), "vy"] = 160.0
        tr.loc[tr["frame"] == k_swing, "vy"] = -74.0
        found = _only(find_events(tr, TABLE, det)[0], "cushion")
        assert len(found) <= 1 and set(found["rail"]) <= {"top"}
        errors += list(np.abs(found["t"] - t_c) * fps)
    assert len(errors) >= 6 and max(errors) < 2.0 and np.median(errors) < 1.0



def test_reads_pulled_toward_the_rail_after_a_contact_make_no_second_contact():
    # A ball rolling into the top cushion at 230 mm/s, 30 degrees off square, banks off it
    # (analytic rolling bank, ``_rolling_bank_case``: Alciatore 2004's slide then roll), 60 fps,
    # 0.7 mm noise, eight phases. Eight frames after the contact four reads are pulled 5.4, 8.8,
    # 7.2 and 7.3 mm toward the rail, as the detector read the uneven_60fps extra clip's ball 1
    # 0.11-0.16 s after its slow contact (benchmarks/analyse_accuracy.py --extra on the along
    # branch's detections), and the tracker follows them: there its positions are the reads
    # and its velocities their central differences, so its normal velocity swings into the
    # rail and back. The ball runs on away from the rail throughout, so the one contact is the
    # bank (common practice: a ball leaving a cushion does not meet it again without turning;
    # a cushion's speed ratio stays below 1, Mathavan et al. 2009 measured at most about
    # 0.95). Measured: one contact each, within 0.5 frame; before, a second contact 0.17 s
    # later in all eight (restitution 1.6-2.1).
    fps = 60.0
    times = np.arange(int(1.4 * fps)) / fps
    for seed in range(8):
        t_c = 0.6 + (0.1 + 0.11 * seed) / fps
        f, _, _ = _rolling_bank_case("top", 1700.0, -30.0, 230.0, 0.77, t_c, mu_s=0.2)
        det = detections({"a": f}, times, np.random.default_rng(seed), noise_mm=0.7)
        k0 = int(math.ceil(t_c * fps)) + 8
        det.loc[det["frame"].isin(range(k0, k0 + 4)), "y"] += [5.4, 8.8, 7.2, 7.3]
        tr = track(det, TABLE)
        xy = det.sort_values("frame")[["x", "y"]].to_numpy()
        v = np.gradient(xy, axis=0) * fps
        rows = tr["frame"].isin(range(k0 - 1, k0 + 5)).to_numpy()
        tr.loc[rows, ["x", "y"]] = xy[tr.loc[rows, "frame"]]
        tr.loc[rows, ["vx", "vy"]] = v[tr.loc[rows, "frame"]]
        found = _only(find_events(tr, TABLE, det)[0], "cushion")
        print(found[["t", "speed_in", "speed_out", "restitution"]].round(3).values.tolist())
        assert len(found) == 1 and found.loc[0, "rail"] == "top"
        assert abs(found.loc[0, "t"] - t_c) < 1.0 / fps



def _slow_square_bank(rng, moving_sigma_mm: float):
    """One slow near-square bank off the top cushion: the cue ball struck with roll at 0.26-0.33
    m/s normal speed, at most 10 degrees off square, from a random spot (simulated by
    ``analysis.physics``: Alciatore 2004 cloth, Mathavan, Jackson & Parkin 2010 impacts), read at
    60 fps with 0.5 mm noise at rest and ``moving_sigma_mm`` moving. Returns (detections, the
    simulator's first cushion contact, or None where the ball stopped short of the rail)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections, truth_events

    vn, ang = rng.uniform(260.0, 330.0), rng.uniform(-10.0, 10.0)
    sim = Simulator(TABLE, PhysicsParams(), {"cue": (rng.uniform(800.0, 2000.0), 1050.0)})
    sim.strike(0.3, Strike("cue", vn / math.cos(math.radians(ang)),
                           math.radians(90.0 + ang), 0.0, 0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    det = detections(traj, 3.5, 60.0, rng, rest_sigma_mm=0.5, moving_sigma_mm=moving_sigma_mm,
                     drop=0.0)
    truth = truth_events(TABLE, traj, 3.5)
    truth = truth[truth["kind"] == "cushion"]
    return det, (truth.iloc[0] if len(truth) else None)


def test_a_dip_of_the_tracked_speed_after_a_slow_contact_does_not_cut_its_departure():
    # Slow near-square banks off the top cushion (0.26-0.33 m/s struck with roll, 10 degrees
    # off square at most), simulated by ``analysis.physics`` (Alciatore 2004 cloth, Mathavan,
    # Jackson & Parkin 2010 impacts), 60 fps, 1 mm noise moving. Six frames after the contact
    # the tracks' speed dips to 30 mm/s for three frames, under the rest speed, as the
    # tracker's did on uneven_60fps's ball 1 after its slow contact (30-39 mm/s smoothed, 83
    # true: a few reads off), while the ball rolls on. The contact's measures must not change
    # for it (the issue's targets are 3 % and 0.03; with 1 mm noise on slow contacts these
    # draws reach 3.2 % and 0.033 in the median without the dip). Measured: median |speed_out|
    # error 3.2 %, |restitution| 0.033 (0.032 and 0.034 without the dip); before: 20 % and
    # 0.205 (the dip ended the ball's fast stretch, and that end bounded the departure fit).
    errs = []
    for seed in range(12):
        det, tr = _slow_square_bank(np.random.default_rng(400 + seed), 1.0)
        assert tr is not None
        tracks = track(det, TABLE)
        k0 = int(math.ceil(tr["t"] * 60)) + 6
        dip = tracks["frame"].isin(range(k0, k0 + 3)).to_numpy()
        v = tracks.loc[dip, ["vx", "vy"]].to_numpy()
        tracks.loc[dip, ["vx", "vy"]] = v * (30.0 / np.hypot(*v.T))[:, None]
        found = _only(find_events(tracks, TABLE, det)[0], "cushion")
        assert len(found) == 1
        errs.append((found.loc[0, "speed_out"] / tr["speed_out"] - 1,
                     found.loc[0, "restitution"] - tr["restitution"]))
    errs = np.abs(np.array(errs))
    print("median |speed_out|, |restitution|", np.round(np.median(errs, axis=0), 3))
    assert np.median(errs[:, 0]) < 0.05 and np.median(errs[:, 1]) < 0.05



def test_one_trusted_read_among_biased_ones_does_not_turn_a_slow_approach():
    # Slow near-square banks off the top cushion simulated by ``analysis.physics`` (Alciatore
    # 2004 cloth, Mathavan, Jackson & Parkin 2010 impacts), 60 fps, 0.7 mm noise. Every moving
    # read is pulled 4.5 mm along the rail (a ball's shadow, as uneven_60fps's ball 1 read 3-7
    # mm toward its shadow) and states 2.5 mm of noise, except two reads eight and seven
    # frames before the contact that state 0.9 and 1.0 mm, the second of them 1.3 mm from the
    # true centre (uneven's frames 164 and 165: weighed 2.8 and 2.5 against 0.6-1.0 around).
    # The approach's direction must not turn on them (the issue's target is 1 degree; the
    # shared pull itself moves no velocity). Measured: median |angle_in| error 1.02 degrees
    # (max 3.4); before: 11.3 (max 34), the trusted read bending the weighted fit so its plain
    # residual stayed under the outlier test.
    errs = []
    for seed in range(12):
        det, tr = _slow_square_bank(np.random.default_rng(500 + seed), 0.7)
        if tr is None:
            continue  # the ball stopped short of the rail
        moving = (det["sigma_mm"] > 0.6).to_numpy()
        det.loc[moving, "x"] -= 4.5
        det.loc[moving, "sigma_mm"] = 2.5
        k = int(math.floor(tr["t"] * 60)) - 8
        det.loc[det["frame"] == k, "sigma_mm"] = 0.9
        right = det["frame"] == k + 1
        det.loc[right, "x"] += 4.5 + 1.3
        det.loc[right, "sigma_mm"] = 1.0
        found = _only(find_events(track(det, TABLE), TABLE, det)[0], "cushion")
        assert len(found) == 1
        errs.append(abs(found.loc[0, "angle_in"] - tr["angle_in"]))
    print("median |angle_in|", round(float(np.median(errs)), 2), "max", round(max(errs), 2))
    assert len(errs) >= 8 and np.median(errs) < 2.0


def _noise_of_one_ball(t, p, z, seen):
    """(white, at the fits' scale) noise sigma (mm) the event finder states for one ball whose
    true path is p (N, 2) mm at times t (s), read as z where seen (bool (N,))."""
    from tracking.events import _balls, _motion, _noise_sigma
    v = np.gradient(p, t, axis=0)
    tracks = pd.DataFrame({"frame": np.arange(len(t)), "t": t, "track": 0, "ball": "object",
                           "x": p[:, 0], "y": p[:, 1], "vx": v[:, 0], "vy": v[:, 1],
                           "seen": seen.astype(int), "x_meas": np.where(seen, z[:, 0], np.nan),
                           "y_meas": np.where(seen, z[:, 1], np.nan)})
    cfg = EventConfig()
    (ball,) = _balls(tracks, None, 28.575)
    _motion(ball, cfg, D)
    return _noise_sigma(ball, cfg)


def test_detection_noise_is_measured_on_the_moving_samples_not_the_repeated_resting_ones():
    # A ball rests 4 s, its detection carried over unchanged frame to frame as the detector
    # does for a ball at rest (vision.detect, step 2), then rolls 4 s (decelerating at mu_r g,
    # Alciatore 2004) with Gaussian detection noise of 1.5 mm per axis, missed in every tenth
    # frame (a dim ball at 30 fps). The fits of its contacts use the moving samples, so their
    # noise is what must be measured: third differences of white noise on a quadratic path
    # have variance 20 s^2 (binomial weights 1, 3, 3, 1), and the median of the ~190 here
    # (neighbours correlated) scattered within -20 % .. +25 % of s over seeds 0-19; repeating
    # the resting detection gives zeros, which put it at the 0.05 mm floor.
    fps, sd = 30.0, 1.5
    t = np.arange(int(8.0 * fps)) / fps
    rest = t < 4.0
    tau = np.clip(t - 4.0, 0.0, None)
    s = 800.0 * tau - 0.5 * 98.1 * tau**2
    p = np.column_stack([400.0 + s * 0.8, 300.0 + s * 0.6])
    rng = np.random.default_rng(11)
    z = p.copy()
    z[rest] = p[rest] + rng.normal(0.0, sd, 2)  # one detection, repeated while at rest
    z[~rest] += rng.normal(0.0, sd, (int((~rest).sum()), 2))
    seen = ~((~rest) & (np.arange(len(t)) % 10 == 0))
    white, _ = _noise_of_one_ball(t, p, z, seen)
    assert abs(white / sd - 1.0) < 0.3, white


def test_fit_scale_noise_sees_a_drifting_error_on_a_track_with_gaps():
    # A striped ball's outline error turns with its roll (cheapwide_25fps extra clip, the
    # green-stripe 14 at 400 mm/s: along its path, swinging about +-7 mm with a period of about
    # ten frames, 2 pi R / v = 0.45 s at 25 fps), and the detector misses it every few frames.
    # Here: rolling at 500 mm/s, decelerating at mu_r g (Alciatore 2004), with an error of
    # amplitude A = 4 mm and a 10-frame period along the heading, 0.5 mm of white noise per
    # axis, and every fifth frame missed, so no run of 2 quadratic_min_samples frames is seen
    # whole. Third differences pass a sinusoid of angular step w times |2 sin(w / 2)|^3
    # (the difference operator's frequency response; common practice), 0.236 at w = 2 pi / 10,
    # so the white estimate sees about 0.5 mm; the fits over 0.3 s see the drift, whose rms
    # per axis is A / 2 = 2 mm (half the variance A^2 / 2 on each of two axes), which a
    # quadratic over 12 frames (1.2 periods) removes little of. Measured over seeds 0-9: white
    # 0.41-0.59 mm, at the fits' scale 1.52-1.69 mm; before runs with gaps counted, the
    # fit-scale estimate fell back to the white one (0.48 mm at this seed).
    fps, amp, sd = 25.0, 4.0, 0.5
    t = np.arange(int(5.0 * fps)) / fps
    tau = np.clip(t - 0.5, 0.0, None)
    s = 500.0 * tau - 0.5 * 98.1 * tau**2
    heading = np.array([0.8, 0.6])
    p = np.array([300.0, 250.0]) + s[:, None] * heading
    rng = np.random.default_rng(5)
    moving = t >= 0.5
    drift = amp * np.sin(2 * np.pi * np.arange(len(t)) / 10.0)
    z = p.copy()
    z[moving] += drift[moving, None] * heading + rng.normal(0.0, sd, (int(moving.sum()), 2))
    seen = ~(moving & (np.arange(len(t)) % 5 == 0))
    white, at_fits = _noise_of_one_ball(t, p, z, seen)
    assert white < 0.5 * amp / 2, white
    assert 0.6 * amp / 2 < at_fits < 1.2 * amp / 2, at_fits


@pytest.mark.parametrize("fps,noise_mm,v0,mu_r,seed", [
    (60.0, 1.0, 600.0, 0.01, 21),
    (30.0, 1.5, 500.0, 0.01, 22),
    (50.0, 1.0, 700.0, 0.015, 23),
    (120.0, 0.5, 400.0, 0.005, 24),
])
def test_stop_of_a_rolling_ball_against_the_analytic_stop(fps, noise_mm, v0, mu_r, seed):
    # A ball rolling from v0 decelerates at mu_r g and stops after v0 / (mu_r g) over
    # v0^2 / (2 mu_r g) (Alciatore 2004, technical proofs: a rolling ball stops after
    # v^2 / (2 mu_r g); uniformly accelerated rectilinear motion, Meriam & Kraige, Engineering
    # Mechanics: Dynamics, ch. 2, from memory); mu_r over Alciatore's range 0.005-0.015.
    # Below 50 mm/s the smoothed speed still has half a second and a centimetre to go at
    # mu_r 0.01, and its noise lifts it over the move speed again. The solved stop must lie
    # within the accuracy scorer's window for a stop (0.1 s, benchmarks/score.py; taken at the
    # zero of a quadratic's velocity where the smoothed speed fell under 50 mm/s, these four
    # came out 0.17, 0.16, 0.06 and 0.32 s off),
    # and its place within 3 detection sigmas of the analytic rest point. Over seeds 0-39 of
    # each case the stop's error had a median of 0.3-1.1 frames and a maximum of 0.093 s
    # (30 fps, 1.5 mm), 0.031, 0.035 and 0.032 s in the others.
    dt = 1 / fps
    decel = mu_r * G
    t0 = 0.3 + 0.37 * dt
    a = decel_path((300.0, 400.0), 8.0, v0, decel, t_start=t0)
    t_stop = t0 + v0 / decel
    times = np.arange(int((t_stop + 1.0) * fps)) / fps
    det = detections({"a": a}, times, np.random.default_rng(seed), noise_mm=noise_mm,
                     labels={"a": ("white", "cue")})
    ev, shots = find_events(track(det, TABLE), TABLE, det)
    assert list(ev["kind"]) == ["start", "stop"]
    sp = ev.iloc[1]
    assert abs(sp["t"] - t_stop) < 0.1, (sp["t"], t_stop)
    rest = a(np.array([t_stop + 1.0]))[0]
    assert np.hypot(sp["x"] - rest[0], sp["y"] - rest[1]) < 3 * noise_mm
    assert shots.loc[0, "t_end"] == pytest.approx(sp["t"])


@pytest.mark.parametrize("shot_under_way", [True, False])
def test_a_ball_first_seen_rolling_slowly_gets_its_stop(shot_under_way):
    # A rack ball nudged by a break is often not seen until the break parts it from the rack,
    # and then rolls slower than the move speed (150 mm/s) for less than a radius: here from
    # 90 mm/s at 0.5 s, seen from 0.8 s (61 mm/s, 19 mm from rest), at mu_r g (Alciatore
    # 2004, technical proofs: a rolling ball stops after v0 / (mu_r g)), while the cue ball
    # rolls elsewhere. Its stop must be found within the scorer's 0.1 s (benchmarks/score.py)
    # and within 3 detection sigmas of the analytic rest point. With no shot under way (the
    # cue ball at rest) a ball that appears rolling was put down by hand: no event at all.
    fps, noise_mm = 60.0, 1.0
    decel = 0.01 * G
    cue = (decel_path((300.0, 300.0), 0.0, 600.0, decel, t_start=0.3) if shot_under_way
           else decel_path((300.0, 300.0), 0.0, 0.0, decel))
    nudged = decel_path((1800.0, 1000.0), 200.0, 90.0, decel, t_start=0.5)
    t_stop = 0.5 + 90.0 / decel
    times = np.arange(int((t_stop + 1.0) * fps)) / fps
    det = detections({"cue": cue, "b": nudged}, times, np.random.default_rng(5), noise_mm=noise_mm,
                     labels={"cue": ("white", "cue"), "b": ("red", "solid")},
                     present={"b": (int(0.8 * fps), len(times) - 1)})
    ev, _ = find_events(track(det, TABLE), TABLE, det)
    if not shot_under_way:
        assert ev.empty, ev
        return
    assert list(ev["kind"]) == ["start", "stop"]
    sp = ev.iloc[1]
    assert abs(sp["t"] - t_stop) < 0.1, (sp["t"], t_stop)
    rest = nudged(np.array([t_stop + 1.0]))[0]
    assert np.hypot(sp["x"] - rest[0], sp["y"] - rest[1]) < 3 * noise_mm


def test_a_slow_ball_lost_and_found_again_under_a_new_id_gets_its_stop():
    # The cue ball rolls from 300 mm/s at mu_r g (Alciatore 2004, technical proofs: it stops
    # after v0 / (mu_r g)); the tracker loses it from 2.2 s (113 mm/s) to 2.8 s (54 mm/s, 15 mm
    # from rest) and finds it again under a new id, rolling under the move speed to its stop.
    # That stop must be found within the scorer's 0.1 s (benchmarks/score.py), and the shot must
    # run to it as one shot.
    fps, noise_mm = 60.0, 1.0
    decel = 0.01 * G
    cue = decel_path((400.0, 500.0), 15.0, 300.0, decel, t_start=0.3)
    t_stop = 0.3 + 300.0 / decel
    times = np.arange(int((t_stop + 1.0) * fps)) / fps
    det = detections({"cue": cue}, times, np.random.default_rng(8), noise_mm=noise_mm,
                     labels={"cue": ("white", "cue")})
    tr = track(det, TABLE)
    tr = tr[(tr["t"] < 2.2) | (tr["t"] >= 2.8)].copy()
    tr.loc[tr["t"] >= 2.8, "track"] = int(tr["track"].max()) + 1
    ev, shots = find_events(tr, TABLE, det)
    assert list(ev["kind"]) == ["start", "stop"]
    assert ev.iloc[1]["track"] != ev.iloc[0]["track"]
    assert abs(ev.iloc[1]["t"] - t_stop) < 0.1, (ev.iloc[1]["t"], t_stop)
    assert len(shots) == 1 and shots.loc[0, "t_end"] == pytest.approx(ev.iloc[1]["t"])


def test_a_slow_rolling_tail_is_not_restarted():
    # A ball rolls at mu_r g (Alciatore 2004) from 900 mm/s, filmed at 30 fps with 2 mm
    # detection noise: its smoothed speed dips under the rest speed and rises over the move
    # speed on the noise while it creeps the last centimetres. A start is a resting ball set
    # moving by the cue (results format), so one start and one stop, the stop within two
    # frames of v0 / (mu_r g).
    fps, v0 = 30.0, 900.0
    dt = 1 / fps
    t0 = 0.4
    decel = 0.01 * G
    a = decel_path((300.0, 300.0), 20.0, v0, decel, t_start=t0)
    times = np.arange(int((t0 + v0 / decel + 1.2) * fps)) / fps
    for seed in range(3):
        det = detections({"a": a}, times, np.random.default_rng(40 + seed), noise_mm=2.0,
                         labels={"a": ("white", "cue")})
        ev, shots = find_events(track(det, TABLE), TABLE, det)
        assert list(ev["kind"]) == ["start", "stop"], (seed, list(zip(ev["kind"], ev["t"])))
        assert abs(ev.iloc[1]["t"] - (t0 + v0 / decel)) < 2 * dt
        assert len(shots) == 1


def test_a_resting_ball_that_jitters_more_than_it_does_moving_rests_and_is_struck():
    # Detections of a resting ball scattering 1.5 mm (a flickering light on other footage)
    # while its moving ones scatter 0.3 mm: the rest test must not take the resting jitter for
    # motion (its scale is the larger of the two noises, ``_still_sigma``), or the ball would
    # seem to be moving before the strike, and a ball never seen at rest before a motion gets
    # no start (scaled by the moving noise alone, seeds 1 and 5 of 0-5 lost their start). The
    # ball rolls from 500 mm/s at mu_r g (Alciatore 2004) and stops at v0 / (mu_r g); the
    # stop within the scorer's 0.1 s as in the tests above.
    fps, v0, t0 = 60.0, 500.0, 0.5
    decel = 0.01 * G
    a = decel_path((400.0, 500.0), -15.0, v0, decel, t_start=t0)
    t_stop = t0 + v0 / decel
    times = np.arange(int((t_stop + 1.5) * fps)) / fps
    for seed in range(6):
        rng = np.random.default_rng(seed)
        det = detections({"a": a}, times, rng, noise_mm=0.3, labels={"a": ("white", "cue")})
        still = (det["t"] < t0) | (det["t"] > t_stop)
        det.loc[still, ["x", "y"]] += rng.normal(0.0, 1.5, (int(still.sum()), 2))
        det.loc[still, "sigma_mm"] = 1.5
        ev, _ = find_events(track(det, TABLE), TABLE, det)
        assert list(ev["kind"]) == ["start", "stop"], (seed, list(zip(ev["kind"], ev["t"])))
        assert abs(ev.iloc[0]["t"] - t0) < 1 / fps
        assert abs(ev.iloc[1]["t"] - t_stop) < 0.1, (seed, ev.iloc[1]["t"], t_stop)


def test_a_cue_ball_stopped_dead_by_a_full_hit_stops_at_the_collision():
    # A full hit between equal balls (frictionless and elastic: the object ball takes the
    # whole velocity along the line of centres, common practice) leaves the cue ball lying
    # still on the spot: its stop (the ball comes to rest, results format) is the collision's
    # instant, not somewhere a path fitted to its resting noise runs on to (0.2 s later on
    # seed 5 before the stop fit compared running on with stopping at the contact).
    fps = 60.0
    dt = 1 / fps
    t_c = 0.8 + 0.3 * dt
    cue, obj = collision_paths((1200.0, 600.0), (900.0, 0.0), 0.0, t_c)
    times = np.arange(int(1.6 * fps)) / fps
    for seed in (5, 6, 7):
        det = detections({"cue": cue, "obj": obj}, times, np.random.default_rng(seed),
                         noise_mm=0.7, labels={"cue": ("white", "cue"), "obj": ("red", "solid")})
        tr = track(det, TABLE)
        ev, _ = find_events(tr, TABLE, det)
        cue_id = int(tr.loc[tr["colour"] == "white", "track"].iloc[0])
        sp, col = _only(ev, "stop"), _only(ev, "collision")
        assert list(sp["track"]) == [cue_id]  # the object ball still runs at the clip's end
        assert len(col) == 2
        assert col.loc[0, "t"] <= sp.loc[0, "t"] < t_c + 2 * dt, (seed, sp.loc[0, "t"], t_c)


def _driven_through(seed: int):
    """A cue ball struck stun-low (``tip_height`` -0.2) at 1.9-2.6 m/s straight into two
    touching balls, simulated by ``analysis.physics``: the middle ball passes nearly all its
    momentum on and creeps 30-60 mm to rest, never above the move speed (150 mm/s). Detections
    as in ``benchmarks/event_accuracy.py``, up to 0.8 s after the middle ball's stop (before
    the far ball comes back off the cushion). Returns (found events, tracks, the simulator's
    stop time of the middle ball (s) and its rest point (2,) mm)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections as sim_detections

    rng = np.random.default_rng(seed)
    a = np.array([1200.0, 600.0])
    sim = Simulator(TABLE, PhysicsParams(), {"cue": (a[0] - D - 150.0, a[1]),
                                             "a": tuple(a), "b": (a[0] + D, a[1])})
    sim.strike(0.3, Strike("cue", 2000.0 + 300.0 * seed, 0.0, 0.0, -0.2))
    sim.run_until_rest()
    traj = sim.trajectory()
    t_stop = next(e.t for e in traj.events if e.kind == "stop" and e.ball == "a")
    det = sim_detections(traj, t_stop + 0.8, 60.0, rng, drop=0.0)
    det["pattern"] = np.where(det["truth"] == "cue", "cue", "solid")
    det["colour"] = det["truth"].map({"cue": "white", "a": "red", "b": "blue"})
    tr = track(det, TABLE)
    rest = traj.sample(np.array([t_stop + 0.5])).pos[0, list(traj.ball_ids).index("a")]
    return find_events(tr, TABLE, det)[0], tr, t_stop, rest


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_a_ball_left_creeping_by_a_collision_gets_its_stop(seed):
    # A ball comes to rest after every motion (results format: a shot runs until every ball is
    # at rest), however slow: the middle ball of a line struck straight keeps only a few
    # percent of the speed (restitution 0.95, Alciatore 2004 [secondary]) and creeps 30-60 mm
    # below the move speed, so the speed hysteresis never saw it move (its stop was missing on
    # all three seeds; bright_pocket_1080p50 lost one of six stops so). Its collision set it
    # going: its stop must be found within the scorer's 0.1 s of the simulator's
    # (benchmarks/score.py), within 3 mm of its rest point (three of the 1 mm resting
    # detection sigmas), and it gets no start (a collision, not the cue, set it moving).
    ev, tr, t_stop, rest = _driven_through(seed)
    a_id = int(tr.loc[tr["colour"] == "red", "track"].iloc[0])
    mine = ev[ev["track"] == a_id]
    assert "collision" in set(mine["kind"]), mine
    sp = _only(mine, "stop")
    assert len(sp) == 1, mine
    assert abs(sp.loc[0, "t"] - t_stop) < 0.1, (sp.loc[0, "t"], t_stop)
    assert np.hypot(sp.loc[0, "x"] - rest[0], sp.loc[0, "y"] - rest[1]) < 3.0, (sp, rest)
    assert "start" not in set(mine["kind"]), mine


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_a_ball_unseen_for_frames_after_the_strike_keeps_its_start(seed):
    # A ball struck from rest at 3.3 m/s, seen once 20 mm on and then undetected for five
    # frames (its streak missed, as lamp_50fps's cue ball under the lamp): the tracker coasts
    # it under its id at the velocity its one moving sample gave and finds it again some
    # 230 mm from the coasted place. That jump is the strike, not a ball put down elsewhere: a
    # ball only slows between contacts, so it can have travelled up to its speed when seen
    # again times the time unseen (uniformly decelerated motion, Meriam & Kraige, Engineering
    # Mechanics: Dynamics, ch. 2, from memory). The start (a resting ball set moving by the
    # cue, results format) must be found within a quarter frame of the strike (before: none,
    # the motion taken for one already under way when first seen; with only the break mended,
    # the launch fitted to the samples within ``start_fit_s`` of the first moving one, which
    # is that one alone, so no fit and the start clipped to that sample's time, 0.3 frames
    # late on all three seeds; lamp_50fps: the motion's first row, a frame early).
    fps, t0, v0 = 50.0, 0.5 - 0.3 / 50.0, 3300.0
    a = decel_path((600.0, 300.0), 40.0, v0, 0.01 * G, t_start=t0)
    times = np.arange(int(0.8 * fps)) / fps  # 0.3 s and 0.9 m after the strike: on the table
    k0 = int(math.ceil(t0 * fps))
    det = detections({"a": a}, times, np.random.default_rng(seed), noise_mm=0.7,
                     labels={"a": ("white", "cue")}, gaps=[("a", k0 + 1, k0 + 5)])
    tr = track(det, TABLE)
    assert tr["track"].nunique() == 1 and (tr["seen"] == 0).sum() == 5  # coasted, as there
    ev, _ = find_events(tr, TABLE, det)
    st = _only(ev, "start")
    assert len(st) == 1 and abs(st.loc[0, "t"] - t0) < 0.25 / fps, (seed, ev[["t", "kind"]])


def _nudge_case(seed: int, fps: float, moving_sigma_mm: float, gap_mm: float, edit=None):
    """A ball struck rolling (``tip_height`` 0.4: rolling at once, Alciatore 2004) at 330-450
    mm/s from 0.5 m away, past a ball at rest with its centre line offset a diameter plus
    ``gap_mm`` (negative: a glancing touch; 0.5-3 mm of overlap leaves the resting ball
    16-93 mm/s, rolled 0.7-23 mm on), simulated by ``analysis.physics``; detections as in
    ``benchmarks/event_accuracy.py`` (resting sigma 1 mm, moving ``moving_sigma_mm``), changed
    by ``edit(detections, collision time)`` where given. Returns (found events, tracks, the
    simulator's collision time or None)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections as sim_detections

    rng = np.random.default_rng(seed)
    rest = np.array([1200.0, 600.0])
    heading = rng.uniform(-math.pi, math.pi)
    u = np.array([math.cos(heading), math.sin(heading)])
    side = rng.choice([-1.0, 1.0]) * np.array([-u[1], u[0]])
    sim = Simulator(TABLE, PhysicsParams(), {"cue": tuple(rest - 500.0 * u + (D + gap_mm) * side),
                                             "obj": tuple(rest)})
    sim.strike(0.3, Strike("cue", rng.uniform(330.0, 450.0), heading, 0.0, 0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    t_c = next((e.t for e in traj.events if e.kind == "collision"), None)
    det = sim_detections(traj, 4.0, fps, rng, rest_sigma_mm=1.0, moving_sigma_mm=moving_sigma_mm,
                         drop=0.0)
    det["pattern"] = np.where(det["truth"] == "cue", "cue", "solid")
    det["colour"] = det["truth"].map({"cue": "white", "obj": "red"})
    if edit is not None:
        det = edit(det, t_c)
    tr = track(det, TABLE)
    return find_events(tr, TABLE, det)[0], tr, t_c


@pytest.mark.parametrize("fps,noise_mm", [(60.0, 1.0), (30.0, 1.0), (60.0, 2.5), (30.0, 2.5)])
def test_a_gentle_nudge_of_a_resting_ball_is_a_collision(fps, noise_mm):
    # A ball at rest moves only when the cue or another ball strikes it (Newton's first law):
    # a rolling ball glancing off it, bent along the line of centres and leaving it a few
    # millimetres on (equal masses: equal and opposite impulses along the line of centres,
    # Meriam & Kraige, Engineering Mechanics: Dynamics, oblique central impact, from memory)
    # struck it, though the velocity changes stay under min_velocity_change_mm_s. Cases: the
    # simulator's struck ball leaves at 35-93 mm/s and rolls 3.3-23 mm (gap -3 mm, seeds 0-2:
    # the first is phone_wide_30fps's 2 -> 8 at 7.357 s, 133 mm/s in, 41 out, 4.5 mm; gap
    # -1.5 mm, seeds 1-2). Before: 5 of these 20 found (all of seed 2, the fastest, four at
    # 30 fps). Both rows must name the pair within the scorer's 0.1 s (benchmarks/score.py
    # DEFAULT_WINDOW_S) of the simulator's touch, and the nudged ball get its stop and no
    # start (a collision set it going, not the cue). The touch's time rests on where the
    # resting ball lies along the line of centres over the speed it leaves at: 1 mm of
    # resting detection error at 41 mm/s is 24 ms, so the issue's half frame is not asserted
    # (measured here: median 0.39 frame, max 2.03; 12 of the 20 within half a frame).
    for gap_mm, seed in ((-3.0, 0), (-3.0, 1), (-3.0, 2), (-1.5, 1), (-1.5, 2)):
        ev, tr, t_c = _nudge_case(seed, fps, noise_mm, gap_mm)
        col = _only(ev, "collision")
        assert t_c is not None and len(col) == 2, (gap_mm, seed, col)
        assert np.all(np.abs(col["t"] - t_c) < 0.1), (gap_mm, seed, t_c, col)
        obj = int(tr.loc[tr["colour"] == "red", "track"].iloc[0])
        mine = ev[ev["track"] == obj]
        assert set(col["track"]) == set(col["other"]) and obj in set(col["track"]), col
        assert "start" not in set(mine["kind"]) and "stop" in set(mine["kind"]), (seed, mine)


@pytest.mark.parametrize("gap_mm", [1.0, 2.0, 4.0])
@pytest.mark.parametrize("fps,noise_mm", [(60.0, 1.0), (30.0, 1.0), (60.0, 2.5), (30.0, 2.5)])
def test_a_near_miss_beside_a_resting_ball_is_no_collision(gap_mm, fps, noise_mm):
    # The same shots passing 1-4 mm clear: no impulse, so the passing ball runs straight on
    # and the resting one stays put (Newton's first law); no collision may be reported (none
    # before; a first version of the nudge finder without the struck ball's own move took a
    # slow ball passing 2 mm clear at 0.5 mm noise for one).
    for seed in range(3):
        ev, _, t_c = _nudge_case(seed, fps, noise_mm, gap_mm)
        assert t_c is None
        assert len(_only(ev, "collision")) == 0, (seed, ev)


def _carry_a_read(off_mm: float, carried_s: float):
    """An ``edit`` for ``_nudge_case``: the resting ball's reads over the ``carried_s`` before
    the touch become one read, ``off_mm`` from its spot toward the moving ball's read nearest
    the touch, repeated every frame (the detector carries a resting ball's read over frames in
    which nothing changed around it, ``vision.detect``)."""
    def edit(det: pd.DataFrame, t_c: float) -> pd.DataFrame:
        det = det.copy()
        obj, cue = det["truth"] == "obj", det["truth"] == "cue"
        spot = det.loc[obj & (det["t"] < t_c), ["x", "y"]].median().to_numpy()
        near = det.loc[cue].iloc[int(np.argmin(np.abs(det.loc[cue, "t"] - t_c)))]
        u = np.array([near["x"], near["y"]]) - spot
        held = obj & (det["t"] > t_c - carried_s) & (det["t"] < t_c)
        det.loc[held, ["x", "y"]] = spot + off_mm * u / np.hypot(*u)
        det.loc[held, "sigma_mm"] = 1.0
        return det
    return edit


def test_a_resting_read_carried_over_many_frames_does_not_time_a_nudge():
    # A ball at rest stays where it lies until struck (Newton's first law), so the nudged
    # ball's spot is where all its reads of that stay put it, and a read the detector carried
    # over unchanged frames is one read, not one per frame (phone_wide_30fps extra clip: the
    # black 8's read 1.8 mm toward the 11 carried over twelve frames of the second before its
    # nudge was that second's median). Here the resting ball's reads over the 1.2 s before the
    # touch become one read 3 mm toward the moving ball, among the 13-20 distinct reads of its
    # stay before that: counted once it moves their median by a small fraction of their 1 mm
    # sd, so the touch, a diameter from the spot, may move by a quarter frame at most
    # (measured: 0.00-0.08 frame); taken per frame it made the spot (measured before: the
    # touch 0.25-1.24 frames earlier). The touch itself is still within the scorer's 0.1 s
    # (benchmarks/score.py DEFAULT_WINDOW_S) and the median within the issue's half frame
    # (issue 4), since a nudge's time scatters by that much on unbiased reads
    # (test_a_gentle_nudge_of_a_resting_ball_is_a_collision: 12 of 20 within half a frame).
    errs = []
    for gap_mm, seed in ((-3.0, 0), (-3.0, 1), (-3.0, 2), (-1.5, 1), (-1.5, 2)):
        t_found = []
        for off_mm in (0.0, 3.0):
            ev, _, t_c = _nudge_case(seed, 30.0, 1.0, gap_mm, edit=_carry_a_read(off_mm, 1.2))
            col = _only(ev, "collision")
            assert len(col) == 2 and np.all(np.abs(col["t"] - t_c) < 0.1), (gap_mm, seed, col)
            t_found.append(float(col["t"].iloc[0]))
        assert abs(t_found[1] - t_found[0]) * 30.0 <= 0.25, (gap_mm, seed, t_found)
        errs.append(abs(t_found[1] - t_c) * 30.0)
    assert np.median(errs) <= 0.5, errs


def _thin_nudge_case(seed: int, mu_roll: float):
    """phone_wide_30fps's 11 -> 8 nudge in the simulator: at 30 fps a ball struck rolling at
    355 mm/s from 0.5 m meets a resting one 1.8 mm inside a diameter of its line (75 deg from
    head-on; 168 mm/s at the touch and the struck ball 41 mm/s on the clip's cloth, mu_r 0.01),
    detections as ``_nudge_case`` with 1.5 mm moving noise. Returns (found collisions, the
    simulator's collision time)."""
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections as sim_detections

    rng = np.random.default_rng(seed)
    rest = np.array([1200.0, 600.0])
    h = math.radians(45.9)
    u = np.array([math.cos(h), math.sin(h)])
    start = rest - 500.0 * u + (D - 1.8) * np.array([-u[1], u[0]])
    sim = Simulator(TABLE, PhysicsParams(mu_roll=mu_roll), {"cue": tuple(start), "obj": tuple(rest)})
    sim.strike(0.3, Strike("cue", 355.0, h, 0.0, 0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    t_c = next(e.t for e in traj.events if e.kind == "collision")
    det = sim_detections(traj, 5.0, 30.0, rng, rest_sigma_mm=1.0, moving_sigma_mm=1.5, drop=0.0)
    det["pattern"] = np.where(det["truth"] == "cue", "cue", "solid")
    det["colour"] = det["truth"].map({"cue": "white", "obj": "red"})
    return _only(find_events(track(det, TABLE), TABLE, det)[0], "collision"), t_c


def test_a_thin_nudge_on_a_slower_cloth_is_found_and_timed():
    # The cloth's rolling resistance mu_r spans 0.005-0.015 (Alciatore 2004 [secondary];
    # Mathavan et al. 2009 about 0.0128), while the finder assumes 0.01: on a cloth of 0.007 the
    # nudged ball's approach slows at 69 mm/s^2, not 98. A nudge's fit with the deceleration
    # held at 0.01 g bent its long approach and lost the touch (seeds 0-3: one of four found,
    # 12 seeds: 4); with one deceleration fitted for both sides under its prior all are found
    # within the scorer's 0.1 s (benchmarks/score.py DEFAULT_WINDOW_S), and the median time
    # error is within the issue's half frame (issue 4; measured 0.02-1.05 frame, median 0.27).
    errs = []
    for seed in range(4):
        col, t_c = _thin_nudge_case(seed, 0.007)
        assert len(col) == 2 and np.all(np.abs(col["t"] - t_c) < 0.1), (seed, t_c, col)
        errs.append(abs(float(col["t"].iloc[0]) - t_c) * 30.0)
    assert np.median(errs) <= 0.5, errs



@pytest.mark.parametrize("striped, speed, turns", [(True, 220.0, 2.0), (True, 900.0, 0.0),
                                                   (False, 220.0, 0.0)])
def test_a_striped_balls_slow_departure_reaches_two_of_its_turns(striped, speed, turns):
    # A rolling ball turns once per 2 pi R travelled (rolling without slipping, omega = v / R:
    # Marlow 1995, The Physics of Pocket Billiards, from memory), so a read error tied to a
    # striped ball's orientation repeats with period 2 pi R / v or its halves (measured on the
    # renderer: _STRIPE_ALONG below), and the least-squares slope of A sin(w t + phi) over a
    # window T of whole periods is -12 A cos(phi) / (w T^2) (integrating by parts): it averages
    # out over whole turns and passes for velocity over less than one. A striped ball's
    # departure therefore reaches two turns, here 2 * 2 pi R / 220 mm/s = 1.63 s, capped at
    # EventConfig.depart_max_s 1.5 s; a fast stripe (two turns 0.40 s) and a plain ball keep
    # the 12-interval window (0.48 s at 25 fps). Path: rolling straight, noise-free, 25 fps.
    from dataclasses import replace
    from tracking.events import _Ball, _Finder

    dt = 1.0 / 25.0
    t = np.arange(100) * dt
    p = np.stack([300.0 + speed * t, np.full_like(t, 600.0)], axis=1)
    b = _Ball(0, t, np.arange(len(t)), p, np.gradient(p, dt, axis=0), p.copy(), sigma=0.5,
              sigma_fit=0.5, striped=striped)
    cfg = replace(EventConfig(), fit_window_s=12 * dt)  # as find_events stretches it at 25 fps
    finder = _Finder(TABLE, cfg, dt, 0.5 * dt)
    reach = finder._depart_reach(b, 0.5, math.inf)
    expect = 12 * dt if turns == 0 else min(turns * 2 * math.pi * R / speed, cfg.depart_max_s)
    assert reach == pytest.approx(expect, rel=1e-6)

# A striped ball's read error against its roll, measured on our renderer and detector (not an
# outside source; scratch script of session 19, stripe_roll.py): one green-banded stripe rolling
# without slipping at 220 mm/s under the extra set's cheapwide_25fps camera and room (1.6 m up,
# strong barrel lens, open 1/25 s shutter over 8 sub-samples, H.264 crf 32), 60 frames read by
# vision.detect.BallDetector, read minus truth along and across its heading fitted by a Fourier
# series in the roll angle theta (harmonics 1..4, cos then sin of each; the mean left out: a
# constant offset moves no velocity). Rows: the band's axis at _STRIPE_PSI degrees from the roll
# axis (theta = 0 with the axis tipped toward the zenith). The second harmonic along the heading
# (-1.4 .. -2.9 mm) is a sawtooth twice per turn: the outline rides the band, whose top moves at
# twice the centre's speed, for three or four frames and drops back; cheapwide's own green 14
# reads the same way after its top-rail contact (along its heading -8.1, -7.0, -4.0, -2.2, +0.8,
# +3.6, +6.5 mm, then back). Rendered sharp and without the codec (band at 0, 30, 60 deg, 300
# mm/s) the harmonics stay under 0.7 mm.
_STRIPE_PSI = np.array([0.0, 20.0, 45.0, 60.0, 75.0, 90.0])
_STRIPE_ALONG = np.array([
    [-0.18, -0.10, 0.64, -1.47, 0.23, 0.01, -0.31, -0.74],
    [-0.27, 0.01, 0.78, -1.85, -0.20, 0.11, -0.04, -0.57],
    [-0.16, 0.74, 0.53, -2.25, -0.64, -0.06, 0.82, -0.36],
    [0.48, 0.06, 0.94, -2.91, 0.40, -0.02, 0.61, 0.56],
    [0.33, -0.08, 0.35, -2.70, -0.12, 0.18, 0.08, 1.10],
    [-0.44, -0.64, 0.40, -1.42, -0.31, -0.12, 1.38, 2.08]])
_STRIPE_ACROSS = np.array([
    [-0.19, 0.12, 0.04, 0.01, 0.06, 0.07, 0.15, 0.06],
    [-0.65, -0.00, -0.07, 0.03, -0.06, -0.18, -0.02, 0.08],
    [-0.86, -0.35, 0.01, -0.02, 0.53, -0.31, -0.59, 0.10],
    [-0.93, -0.01, -0.34, -0.27, 0.18, -0.25, -0.16, -0.05],
    [0.88, -0.52, 0.61, -0.33, 1.21, 0.32, 0.40, 0.48],
    [0.55, -0.08, -0.04, 0.77, -0.72, -0.12, 0.70, -0.75]])


def _stripe_read_error(rot: np.ndarray, vel: np.ndarray) -> np.ndarray:
    """(T, 2) mm read error of a striped ball with body-to-table rotations ``rot`` (T, 3, 3)
    (band about the body z axis, as vision.render draws it) moving at ``vel`` (T, 2) mm/s: the
    band axis ``a`` (sign-free) in the heading frame gives psi = angle(a, roll axis) and
    theta = atan2(a . heading, a . up); the tables above, interpolated in psi."""
    out = np.zeros((len(rot), 2))
    for i, (m, v) in enumerate(zip(rot, vel)):
        sp = math.hypot(*v)
        if sp < 1.0:
            continue
        h = np.array([v[0] / sp, v[1] / sp, 0.0])
        r = np.array([-h[1], h[0], 0.0])  # the roll axis, z x heading
        a = m[:, 2] if m[:, 2] @ r >= 0 else -m[:, 2]
        psi = math.degrees(math.acos(min(1.0, float(a @ r))))
        th = math.atan2(float(a @ h), float(a[2]))
        f = np.array([g(k * th) for k in range(1, 5) for g in (math.cos, math.sin)])
        along = f @ np.array([np.interp(psi, _STRIPE_PSI, c) for c in _STRIPE_ALONG.T])
        across = f @ np.array([np.interp(psi, _STRIPE_PSI, c) for c in _STRIPE_ACROSS.T])
        out[i] = along * h[:2] + across * r[:2]
    return out


def _striped_top_bank(seed: int, fps: float, cfg: EventConfig):
    """A striped ball struck rolling up the table into the top rail (270-470 mm/s arriving,
    within 15 degrees of square), simulated by analysis.physics (Mathavan, Jackson & Parkin
    2010 cushion impulse, then the slide to rolling on the cloth: Han 2005, Alciatore 2004),
    its orientation integrated from a random start (Trajectory.rotations), read with
    ``_stripe_read_error`` plus 0.8 mm white noise. Returns (found cushion row, truth row)."""
    from scipy.spatial.transform import Rotation

    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import truth_events

    rng = np.random.default_rng(seed)
    ang, v0 = float(rng.uniform(-15.0, 15.0)), float(rng.uniform(480.0, 640.0))
    sim = Simulator(TABLE, PhysicsParams(), {"s": (1000.0, 300.0)})
    sim.strike(0.2, Strike("s", v0, math.radians(90.0 + ang), 0.0, 0.4))
    t_end = 4.5
    sim.lift(t_end, "s")
    traj = sim.trajectory()
    times = np.arange(int(t_end * fps)) / fps
    s = traj.sample(times)
    rot = traj.rotations(times, start=(0.0, Rotation.random(random_state=seed).as_matrix()[None]))
    pos, vel = s.pos[:, 0], np.nan_to_num(s.vel[:, 0])
    moving = (np.hypot(*vel.T) > 1.0)[:, None]
    z = pos + _stripe_read_error(rot[:, 0], vel) + rng.normal(0.0, 0.8, pos.shape) * moving
    det = pd.DataFrame(dict(frame=np.arange(len(times)), t=times, x=z[:, 0], y=z[:, 1], u=0.0,
                            v=0.0, quality=0.9, colour="", pattern="stripe", blur_x=0.0,
                            blur_y=0.0, sigma_mm=1.0, truth="s"))
    truth = truth_events(TABLE, traj, t_end)
    truth = truth[(truth.kind == "cushion") & (truth.rail == "top")]
    found = _only(find_events(track(det, TABLE), TABLE, det, cfg)[0], "cushion")
    if len(truth) == 0 or len(found) == 0:
        return None, None
    tr = truth.iloc[0]
    return found.iloc[int(np.argmin(np.abs(found.t - tr.t)))], tr


@pytest.fixture(scope="module")
def striped_banks():
    """(speed_out relative, angle_out deg, restitution) errors of the striped top-rail banks of
    seeds 0..11 at 25 fps (``_striped_top_bank``; seed 3 stops short of the rail)."""
    errs = []
    for seed in range(12):
        found, tr = _striped_top_bank(seed, 25.0, EventConfig())
        if tr is None:
            continue
        errs.append((found.speed_out / tr.speed_out - 1.0, found.angle_out - tr.angle_out,
                     found.restitution - tr.restitution))
    return np.abs(np.array(errs))


def test_a_striped_balls_slow_bank_read_with_its_roll_error(striped_banks):
    # Issue 4 acceptance, cushion figures: restitution median error <= 0.03 and angle out
    # <= 1 degree, here on slow striped banks whose reads carry the renderer-measured
    # roll-periodic error (``_stripe_read_error``) against the simulator's truth (Mathavan
    # et al. 2010 cushion). Measured (session 19, 23 contacts of seeds 0..23): one fit window
    # restitution 0.057, angle out 0.60 deg, speed out 4.2 % with one fit window; 0.027,
    # 0.63 deg, 5.5 % with the departure over two turns (``_Finder._depart_reach``); session
    # 20, its rolling piece held straight (``_lateral_prior``): 0.027, 0.32 deg, 4.9 %.
    med = np.median(striped_banks, axis=0)
    assert len(striped_banks) >= 10, striped_banks
    assert med[1] <= 1.0, med


def test_a_striped_balls_slow_bank_restitution(striped_banks):
    # Issue 4 acceptance: cushion restitution median error <= 0.03 (one fit window: 0.057).
    assert np.median(striped_banks[:, 2]) <= 0.03, np.median(striped_banks, axis=0)


@pytest.mark.xfail(strict=True, reason="speed out of slow striped banks misses issue 4's 3 %: "
                   "4.2 % with one fit window, 5.5 % with two turns (session 19, 23 contacts), "
                   "4.9 % held straight (session 20); the contact line leans on an unpinned "
                   "departure fit without its slide")
def test_a_striped_balls_slow_bank_speed_out(striped_banks):
    # Issue 4 acceptance: cushion speed median error <= 3 %.
    assert np.median(striped_banks[:, 0]) <= 0.03, np.median(striped_banks, axis=0)


def test_a_rolling_piece_held_straight_joins_the_axes_as_one_dense_solve():
    # _straighten and _straight_slide_terms solve the per-axis least squares joined by the
    # prior k (n . c_roll)^2 through the Sherman-Morrison formula (Sherman & Morrison 1950);
    # the reference is numpy.linalg's dense solve of the joined normal equations (both axes'
    # coefficients in one system with k u u^T added), on random well-posed systems.
    from tracking.events import _straight_slide_terms, _straighten

    rng = np.random.default_rng(7)
    G, q, k = 3, 4, 7.5
    n_hat = np.array([0.6, 0.8])
    N = [np.einsum("gni,gnj->gij", a, a) for a in rng.normal(size=(2, G, 10, q))]
    h = [rng.normal(size=(G, q)) for _ in range(2)]
    roll, slide = [2, 1], [3, 0]
    solo = [(np.linalg.solve(N[ax], h[ax][..., None])[..., 0], np.linalg.inv(N[ax]))
            for ax in range(2)]
    joined = _straighten(solo, roll, n_hat, k)
    x = np.array([0.7, -1.3])  # held slide coefficients of the second check
    others = [[i for i in range(q) if i != slide[ax]] for ax in range(2)]
    parts = [(np.linalg.inv(N[ax][:, o][:, :, o]), N[ax][:, o, slide[ax]], h[ax][:, o])
             for ax, o in enumerate(others)]
    kappa, w0, m, cols = _straight_slide_terms(parts, [o.index(r) for o, r in zip(others, roll)],
                                               n_hat, k)
    for g in range(G):
        u = np.zeros(2 * q)
        u[roll[0]], u[q + roll[1]] = n_hat
        J = np.zeros((2 * q, 2 * q))
        J[:q, :q], J[q:, q:] = N[0][g], N[1][g]
        J += k * np.outer(u, u)
        c = np.linalg.solve(J, np.concatenate([h[0][g], h[1][g]]))
        Ji = np.linalg.inv(J)
        for ax in range(2):
            assert np.allclose(joined[ax][0][g], c[ax * q:(ax + 1) * q], rtol=1e-9, atol=1e-12)
            assert np.allclose(joined[ax][1][g], Ji[ax * q:(ax + 1) * q, ax * q:(ax + 1) * q],
                               rtol=1e-9, atol=1e-12)
        # With each axis' slide coefficient held at x: the joined minimum over the others.
        p = q - 1
        Jb, rhs = np.zeros((2 * p, 2 * p)), np.zeros(2 * p)
        for ax, o in enumerate(others):
            Jb[ax * p:(ax + 1) * p, ax * p:(ax + 1) * p] = N[ax][g][np.ix_(o, o)]
            rhs[ax * p:(ax + 1) * p] = h[ax][g][o] - N[ax][g][o, slide[ax]] * x[ax]
        ub = np.zeros(2 * p)
        ub[others[0].index(roll[0])], ub[p + others[1].index(roll[1])] = n_hat
        b_solo = np.linalg.solve(Jb, rhs)
        b_joined = np.linalg.solve(Jb + k * np.outer(ub, ub), rhs)
        gap = w0[g] - m[0][g] * x[0] - m[1][g] * x[1]
        assert rhs @ b_solo - rhs @ b_joined == pytest.approx(kappa[g] * gap**2, rel=1e-9)
        for ax in range(2):
            assert np.allclose(b_solo[ax * p:(ax + 1) * p] - kappa[g] * gap * n_hat[ax] * cols[ax][g],
                               b_joined[ax * p:(ax + 1) * p], rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("ahead_mm", [0.0, 5.0])
def test_stun_ball_stop_against_the_analytic_stop_with_crawl_reads_ahead(ahead_mm):
    # A ball set moving without spin (a stun, or a ball hit by another) slides at mu_s g for
    # 2 v0 / (7 mu_s g) and rolls on from 5/7 v0 at mu_r g, so it stops v0 (2/7 / (mu_s g) +
    # 5/7 / (mu_r g)) after it starts (Alciatore 2004, technical proofs), simulated by
    # ``analysis.physics`` (its stop checked against that formula here). Slow (150-400 mm/s,
    # as the 4 ball nudged in the lamp_50fps extra clip, 178 mm/s), 50 fps, 1 mm noise moving.
    # With ``ahead_mm`` the reads of the last 0.4 s before the stop lie that far on along the
    # heading, as that clip's crawling 4 ball was read 3-7.5 mm ahead of its true centre (its
    # stay's reads back on it); main's stop fit over 0.6 s each side of the rest's start then
    # came 0.155 s early there. Each stop must lie within the accuracy scorer's 0.1 s window
    # (benchmarks/score.py) and its place within 3 mm of the simulator's rest point.
    from analysis.physics import PhysicsParams, Simulator, Strike
    from benchmarks.event_accuracy import detections

    params = PhysicsParams()
    mu_s_g, mu_r_g = params.mu_slide * params.g_mm_s2, params.mu_roll * params.g_mm_s2
    errs = []
    for seed in range(6):
        rng = np.random.default_rng(400 + seed)
        v0, heading = rng.uniform(150.0, 400.0), rng.uniform(0.0, 2 * math.pi)
        t0 = 0.3
        sim = Simulator(TABLE, params, {"b": (1300.0, 650.0)})
        sim.strike(t0, Strike("b", v0, heading, 0.0, 0.0))
        sim.run_until_rest()
        traj = sim.trajectory()
        t_stop = t0 + v0 * (2 / 7 / mu_s_g + 5 / 7 / mu_r_g)
        rest = traj.sample(np.array([t_stop + 1.0])).pos[0, 0]
        # The simulator against the analytic stop: still 1 ms after it, moving 5 ms before.
        near = traj.sample(np.array([t_stop - 0.005, t_stop + 0.001])).vel[:, 0]
        assert np.hypot(*near[0]) > 0.0 and np.hypot(*near[1]) == pytest.approx(0.0, abs=1e-6)
        det = detections(traj, t_stop + 0.8, 50.0, rng, rest_sigma_mm=0.5, moving_sigma_mm=1.0,
                         drop=0.0)
        late = (det["t"] > t_stop - 0.4) & (det["t"] < t_stop)
        det.loc[late, "x"] += ahead_mm * math.cos(heading)
        det.loc[late, "y"] += ahead_mm * math.sin(heading)
        ev, _ = find_events(track(det, TABLE), TABLE, det)
        assert list(ev["kind"]) == ["start", "stop"], ev
        sp = ev.iloc[1]
        errs.append(sp["t"] - t_stop)
        assert np.hypot(sp["x"] - rest[0], sp["y"] - rest[1]) < 3.0
    print("stop error (s)", np.round(errs, 3))
    assert np.max(np.abs(errs)) < 0.1, errs


def test_a_read_carried_over_unchanged_frames_counts_once_in_the_rest_point():
    """The stay's rest point is the median of its distinct reads: a detector that finds nothing
    new in unchanged frames carries one read over them, and counted once per frame that single
    read would outvote every other (phone_wide_30fps's nudged 8: one read carried seven times
    pulled its stop 0.19 s late). The median of three distinct values is the middle one
    (definition of the median, common practice)."""
    from tracking.events import _rest_point

    ps = np.array([[0.0, 0.0], [2.0, 1.0]] + [[6.0, 3.0]] * 5)
    assert np.allclose(_rest_point(ps), [2.0, 1.0])
    # Three distinct reads are the fewest that can outvote one stray read.
    assert _rest_point(np.array([[0.0, 0.0]] * 2 + [[1.0, 1.0]] * 2)) is None
