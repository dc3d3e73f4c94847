"""Tests of analysis/physics.py: the event-based ball simulator."""

import math

import numpy as np
import pytest

from analysis.cushion import CushionParams
from analysis.physics import PhysicsParams, Simulator, Strike, ball_energy
from vision.table import NINE_FOOT, TableSpec

G = 9810.0
R = NINE_FOOT.radius_mm
# A table large enough that nothing reaches a cushion.
BIG = TableSpec("big", 20000.0, 10000.0)


def kinds(traj, ball=None):
    return [e.kind for e in traj.events if ball is None or e.ball == ball]


def rack_scene(table=NINE_FOOT, gap=0.05):
    """Cue ball on the head string and 15 balls in a triangle on the foot spot (mm)."""
    balls = {"cue": (table.length_mm * 0.25, table.width_mm / 2 + 5.0)}
    apex = (table.length_mm * 0.75, table.width_mm / 2)
    k = 1
    pitch = 2 * R + gap
    for row in range(5):
        for j in range(row + 1):
            balls[f"b{k}"] = (apex[0] + row * pitch * math.sqrt(3) / 2,
                              apex[1] + (j - row / 2) * pitch)
            k += 1
    return balls


def test_stun_shot_slides_then_rolls_at_five_sevenths():
    # Alciatore 2004, technical proofs: rolling after 2 v0 / (7 mu_s g), distance
    # 12 v0^2 / (49 mu_s g), at 5/7 v0; worked case in shared/spec/references.md: 1 m/s,
    # mu_s 0.2, mu_r 0.01 slides 0.146 s over 0.125 m then rolls from 0.714 m/s for 7.28 s
    # over 2.60 m.
    sim = Simulator(BIG, PhysicsParams(mu_slide=0.2, mu_roll=0.01), {"cue": (1000.0, 5000.0)})
    sim.strike(0.0, Strike("cue", 1000.0, 0.0))
    t_rest = sim.run_until_rest()
    traj = sim.trajectory()
    assert kinds(traj) == ["start", "rolling", "stop"]
    roll, stop = traj.events[1], traj.events[2]
    assert roll.t == pytest.approx(2 * 1000.0 / (7 * 0.2 * G), abs=1e-9)
    assert roll.pos[0] - 1000.0 == pytest.approx(12 * 1000.0**2 / (49 * 0.2 * G), abs=1e-6)
    assert roll.vel_out[0] == pytest.approx(5 / 7 * 1000.0, rel=1e-12)
    assert roll.t == pytest.approx(0.146, abs=5e-4)
    assert (roll.pos[0] - 1000.0) / 1000 == pytest.approx(0.125, abs=5e-4)
    assert stop.t - roll.t == pytest.approx(7.28, abs=5e-3)
    assert (stop.pos[0] - roll.pos[0]) / 1000 == pytest.approx(2.60, abs=5e-3)
    assert t_rest == stop.t
    # The stun: no spin at the strike.
    assert traj.events[0].omega_out == (0.0, 0.0, 0.0)


@pytest.mark.parametrize("speed", [300.0, 1500.0])
def test_rolling_ball_stops_after_v2_over_2_mu_g(speed):
    # Rigid-body rolling with resistance mu_r g (Alciatore 2004): distance v^2 / (2 mu_r g),
    # time v / (mu_r g). tip_height 0.4 rolls at once (h = 7R/5, Alciatore 2004).
    mu_r = 0.012
    sim = Simulator(BIG, PhysicsParams(mu_roll=mu_r), {"cue": (1000.0, 1000.0)})
    heading = math.radians(30.0)
    sim.strike(0.5, Strike("cue", speed, heading, tip_height=0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    assert kinds(traj) == ["start", "stop"]
    start, stop = traj.events
    w = np.array(start.omega_out)
    v = np.array(start.vel_out)
    np.testing.assert_allclose(w[:2], [-v[1] / R, v[0] / R], rtol=1e-12)  # rolling: u = 0
    assert stop.t - 0.5 == pytest.approx(speed / (mu_r * G), rel=1e-12)
    dist = math.hypot(stop.pos[0] - 1000.0, stop.pos[1] - 1000.0)
    assert dist == pytest.approx(speed**2 / (2 * mu_r * G), rel=1e-12)
    assert math.atan2(stop.pos[1] - 1000.0, stop.pos[0] - 1000.0) == pytest.approx(heading)


def test_sidespin_decays_at_constant_rate():
    params = PhysicsParams(spin_decel_rad_s2=8.0)
    sim = Simulator(BIG, params, {"cue": (1000.0, 1000.0)})
    sim.strike(0.0, Strike("cue", 800.0, 0.0, tip_side=0.5, tip_height=0.2))
    sim.run_until_rest()
    traj = sim.trajectory()
    wz0 = traj.events[0].omega_out[2]
    # r x J for a tip 0.5 R right of centre: wz = 0.5 R v / (2/5 R^2) (rigid body).
    assert wz0 == pytest.approx(0.5 * 800.0 / (0.4 * R), rel=1e-12)
    spin_stop = next(e for e in traj.events if e.kind == "spin_stop")
    assert spin_stop.t == pytest.approx(wz0 / 8.0, rel=1e-12)
    times = np.linspace(0.0, spin_stop.t, 50)
    wz = traj.sample(times).omega[:, 0, 2]
    np.testing.assert_allclose(wz, wz0 - 8.0 * times, atol=1e-9)
    assert traj.sample([spin_stop.t + 1.0]).omega[0, 0, 2] == 0.0


def test_straight_shot_into_cushion_event_time_and_place():
    # Event time against the closed-form contact time of a rolling ball: the centre runs
    # y0 - d with d the reversal offset; x(t) = v t - mu_r g t^2 / 2.
    table = NINE_FOOT
    params = PhysicsParams()
    y0, v0 = 800.0, 1200.0
    sim = Simulator(table, params, {"cue": (700.0, y0)})
    sim.strike(0.0, Strike("cue", v0, -math.pi / 2, tip_height=0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    hit = next(e for e in traj.events if e.kind == "cushion")
    s = y0 - table.reversal_offset_mm
    f = params.mu_roll * G
    t_exact = (v0 - math.sqrt(v0**2 - 2 * f * s)) / f
    assert abs(hit.t - t_exact) < 1e-7  # brief: better than 0.1 ms
    assert hit.rail == "bottom"
    assert hit.pos[1] == pytest.approx(table.reversal_line("bottom"), abs=1e-9)
    assert hit.pos[0] == pytest.approx(700.0, abs=1e-9)
    assert hit.vel_out[1] > 0 and abs(hit.vel_out[0]) < 1e-9


def test_head_on_collision_transfers_all_speed_at_the_exact_time():
    # Equal masses, e = 1, no friction: the striker stops and the target takes its velocity
    # (Newton's law of restitution with momentum conservation). Contact time from the closed-form
    # rolling motion.
    params = PhysicsParams(ball_restitution=1.0, ball_friction=0.0)
    gap = 500.0
    sim = Simulator(BIG, params, {"a": (1000.0, 1000.0), "b": (1000.0 + 2 * R + gap, 1000.0)})
    v0 = 900.0
    sim.strike(0.0, Strike("a", v0, 0.0, tip_height=0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    col = [e for e in traj.events if e.kind == "collision"]
    assert [e.ball for e in col] == ["a", "b"] and col[0].other == "b"
    f = params.mu_roll * G
    t_exact = (v0 - math.sqrt(v0**2 - 2 * f * gap)) / f
    assert abs(col[0].t - t_exact) < 1e-7
    assert col[1].pos[0] - col[0].pos[0] == pytest.approx(2 * R, abs=1e-8)
    v_in = col[0].vel_in[0]
    assert col[0].vel_out[0] == pytest.approx(0.0, abs=1e-9)
    assert col[1].vel_out[0] == pytest.approx(v_in, rel=1e-12)


def test_moving_balls_meet_at_the_exact_time():
    # Two rolling balls approaching each other along y: separation closes at 2 v - 2 f t.
    params = PhysicsParams()
    sim = Simulator(BIG, params, {"a": (3000.0, 1000.0), "b": (3000.0, 1800.0)})
    sim.strike(0.0, Strike("a", 700.0, math.pi / 2, tip_height=0.4))
    sim.strike(0.0, Strike("b", 700.0, -math.pi / 2, tip_height=0.4))
    sim.run_until_rest()
    col = next(e for e in sim.trajectory().events if e.kind == "collision")
    f = params.mu_roll * G
    s = (800.0 - 2 * R) / 2
    t_exact = (700.0 - math.sqrt(700.0**2 - 2 * f * s)) / f
    assert abs(col.t - t_exact) < 1e-7


def test_cut_shot_conserves_momentum_and_throws():
    # Momentum conservation across a ball-ball impact (Newton); friction at the contact throws
    # the object ball off the line of centres (cut-induced throw, Alciatore 2004 [secondary]).
    sim = Simulator(BIG, PhysicsParams(), {"a": (1000.0, 1000.0), "b": (1600.0, 1000.0 + R)})
    sim.strike(0.0, Strike("a", 2000.0, 0.0))
    sim.run_until_rest()
    a_ev, b_ev = [e for e in sim.trajectory().events if e.kind == "collision"][:2]
    p_in = np.add(a_ev.vel_in, b_ev.vel_in)
    p_out = np.add(a_ev.vel_out, b_ev.vel_out)
    np.testing.assert_allclose(p_out, p_in, rtol=0, atol=1e-9 * np.linalg.norm(p_in))
    n = (np.array(b_ev.pos) - a_ev.pos) / (2 * R)
    vb = np.array(b_ev.vel_out)
    throw = math.degrees(math.asin(abs(n[0] * vb[1] - n[1] * vb[0]) / np.linalg.norm(vb)))
    assert 0.5 < throw < 6.0  # a few degrees at a half-ball hit with stun, common practice


def test_ball_into_corner_pocket_is_pocketed():
    table = NINE_FOOT
    sim = Simulator(table, PhysicsParams(), {"cue": (600.0, 600.0), "x": (2000.0, 900.0)})
    sim.strike(0.0, Strike("cue", 2000.0, math.radians(-135.0)))
    sim.run_until_rest()
    traj = sim.trajectory()
    pocket = [e for e in traj.events if e.kind == "pocket"]
    assert len(pocket) == 1 and pocket[0].pocket == "bottom-left" and pocket[0].ball == "cue"
    assert "cushion" not in kinds(traj) and "jaw" not in kinds(traj)
    mouth_line = table.corner_mouth_mm / math.sqrt(2)  # x + y on the bottom-left mouth line
    assert pocket[0].pos[0] + pocket[0].pos[1] == pytest.approx(mouth_line)
    after = traj.sample([pocket[0].t + 1e-6, traj.t_end + 1.0])
    assert not after.present[:, 0].any() and np.isnan(after.pos[:, 0]).all()
    assert after.present[:, 1].all()
    with pytest.raises(ValueError, match="not on the table"):
        sim.strike(traj.t_end, Strike("cue", 100.0, 0.0))


def test_ball_at_a_jaw_bounces_off_the_jaw():
    table = NINE_FOOT
    jaw = table.pocket("bottom-side").jaw_a
    # Aim straight down a little inside the mouth, so the centre meets the jaw tip's circle.
    x0 = jaw[0] + 10.0
    sim = Simulator(table, PhysicsParams(), {"cue": (x0, 500.0)})
    sim.strike(0.0, Strike("cue", 1500.0, -math.pi / 2, tip_height=0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    hit = next(e for e in traj.events if e.kind in ("jaw", "pocket", "cushion"))
    assert hit.kind == "jaw" and hit.pocket == "bottom-side" and hit.rail == "bottom"
    d = table.reversal_offset_mm
    assert math.hypot(hit.pos[0] - jaw[0], hit.pos[1] - jaw[1]) == pytest.approx(d, abs=1e-7)
    assert hit.vel_out[0] > 0 and hit.vel_out[1] > 0  # thrown back out and towards +x


def test_busy_break_loses_energy_and_stays_on_the_cloth():
    # Passive impacts and friction cannot create energy (rigid-body mechanics): total kinetic
    # energy never rises between samples, nor across any event.
    table = NINE_FOOT
    sim = Simulator(table, PhysicsParams(), rack_scene(table))
    sim.strike(0.0, Strike("cue", 7000.0, 0.004, tip_side=0.2, tip_height=0.3))
    t_rest = sim.run_until_rest()
    traj = sim.trajectory()
    counts = {k: kinds(traj).count(k) for k in set(kinds(traj))}
    assert counts["collision"] >= 30 and counts["cushion"] >= 5
    times = np.arange(1e-6, t_rest + 0.05, 1e-3)
    s = traj.sample(times)
    e = np.nansum(ball_energy(s.vel, s.omega, R), axis=1)
    assert np.all(np.diff(e) <= 1e-9 * e[0])
    assert e[-1] == 0.0
    # Across events: a collision's two balls together, every other event ball by ball.
    ev = list(traj.events)
    i = 0
    while i < len(ev):
        group = ev[i:i + 2] if ev[i].kind == "collision" else ev[i:i + 1]
        if ev[i].kind != "start":
            e_in = sum(ball_energy(g.vel_in, g.omega_in, R) for g in group)
            e_out = sum(ball_energy(g.vel_out, g.omega_out, R) for g in group)
            assert e_out <= e_in * (1 + 1e-12) + 1e-12, group
        i += len(group)
    # Every centre stays where a ball fits: inside the reversal lines, or heading into a pocket.
    d = table.reversal_offset_mm
    p = s.pos[s.present]
    assert np.all(p >= -1e-6 + np.array([0.0, 0.0]))
    on_table = (p[:, 0] >= d - 1e-6) & (p[:, 0] <= table.length_mm - d + 1e-6) & (
        p[:, 1] >= d - 1e-6) & (p[:, 1] <= table.width_mm - d + 1e-6)
    near_pocket = np.min([np.hypot(p[:, 0] - q.mouth_centre[0], p[:, 1] - q.mouth_centre[1])
                          for q in table.pockets()], axis=0) < table.side_mouth_mm
    assert np.all(on_table | near_pocket)
    # No two present balls overlap at any sample.
    for k in range(0, times.size, 10):
        q = s.pos[k][s.present[k]]
        dist = np.hypot(*(q[:, None, :] - q[None, :, :]).transpose(2, 0, 1))
        dist[np.diag_indices_from(dist)] = np.inf
        assert dist.min() >= 2 * R - 1e-6
    # Events are in time order and sampling reproduces event positions.
    t_ev = [x.t for x in ev]
    assert t_ev == sorted(t_ev)
    for x in ev[::7]:
        if x.kind in ("pocket", "remove"):
            continue
        k = traj.ball_ids.index(x.ball)
        got = traj.sample([x.t]).pos[0, k]
        np.testing.assert_allclose(got, x.pos, atol=1e-6)


def play_dozen_shots(seed: int = 11) -> int:
    """Strike a 16-ball rack a dozen times (random speeds, headings and tip offsets), each run to
    rest, re-spotting the cue ball when pocketed; returns the number of events. Timed by
    ``benchmarks/simulate_speed.py``."""
    table = NINE_FOOT
    rng = np.random.default_rng(seed)
    sim = Simulator(table, PhysicsParams(), rack_scene(table))
    t = 0.0
    n_events = 0
    for shot in range(12):
        present = [b for b in traj_present(sim)]
        target = "cue" if "cue" in present else present[0]
        sim.strike(t, Strike(target, rng.uniform(1500.0, 6000.0), rng.uniform(0, 2 * np.pi),
                             rng.uniform(-0.3, 0.3), rng.uniform(-0.3, 0.4)))
        t = sim.run_until_rest() + 0.5
        n_events = len(sim.trajectory().events)
        if "cue" not in traj_present(sim):
            sim.place(t, "cue", (table.length_mm * 0.25, table.width_mm / 2 + 3 * R * (shot % 5)))
    return n_events


def test_scene_of_sixteen_balls_and_a_dozen_shots_runs_to_rest():
    # Its speed (brief: well under a second) is measured by benchmarks/simulate_speed.py.
    assert play_dozen_shots() > 150


def traj_present(sim):
    s = sim.trajectory().sample([sim.t])
    return [b for b, p in zip(s.ball_ids, s.present[0]) if p]


def test_place_and_remove_between_shots():
    sim = Simulator(BIG, PhysicsParams(), {"cue": (1000.0, 1000.0)})
    sim.strike(0.0, Strike("cue", 500.0, 0.0, tip_height=0.4))
    with pytest.raises(ValueError, match="still moving"):
        sim.place(0.1, "x", (3000.0, 3000.0))
    t = sim.run_until_rest()
    sim.place(t + 1.0, "x", (3000.0, 3000.0))
    sim.place(t + 2.0, "cue", (500.0, 500.0))
    sim.place(t + 3.0, "x", None)
    traj = sim.trajectory()
    assert traj.ball_ids == ("cue", "x")
    assert kinds(traj)[-3:] == ["place", "place", "remove"]
    s = traj.sample([t + 0.5, t + 1.5, t + 2.5, t + 3.5])
    np.testing.assert_array_equal(s.present[:, 1], [False, True, True, False])
    np.testing.assert_allclose(s.pos[2, 0], [500.0, 500.0])
    np.testing.assert_allclose(s.pos[1, 1], [3000.0, 3000.0])
    with pytest.raises(ValueError, match="overlaps"):
        sim.place(t + 4.0, "y", (510.0, 520.0))
    with pytest.raises(ValueError, match="before the simulation clock"):
        sim.place(t, "y", (800.0, 800.0))
    with pytest.raises(ValueError, match="not on the table"):
        sim.place(t + 5.0, "x", None)


@pytest.mark.parametrize(
    "balls",
    [
        {"a": (1000.0, 600.0), "b": (1000.0 + 2 * R - 0.5, 600.0)},  # overlap
        {"a": (10.0, 600.0)},  # inside the reversal offset of the left cushion
        {"a": (1000.0, 1270.0 + 40.0)},  # off the table
        {"a": (30.0, 30.0)},  # in a corner pocket's mouth
        {"a": (float("nan"), 600.0)},
    ],
)
def test_bad_placements_raise(balls):
    with pytest.raises(ValueError):
        Simulator(NINE_FOOT, PhysicsParams(), balls)


def test_bad_strikes_and_params_raise():
    with pytest.raises(ValueError, match="tip offset"):
        Strike("cue", 1000.0, 0.0, tip_side=0.5, tip_height=0.4)
    with pytest.raises(ValueError, match="speed"):
        Strike("cue", -5.0, 0.0)
    with pytest.raises(ValueError, match="mu_slide"):
        PhysicsParams(mu_slide=0.0)
    with pytest.raises(ValueError, match="ball_restitution"):
        PhysicsParams(ball_restitution=1.5)
    sim = Simulator(NINE_FOOT, PhysicsParams(), {"cue": (600.0, 600.0)})
    with pytest.raises(ValueError, match="not on the table"):
        sim.strike(0.0, Strike("nobody", 1000.0, 0.0))


def test_rotations_of_a_rolling_ball_match_the_distance_rolled():
    # Rolling without slipping turns the ball by distance / R about the horizontal axis
    # perpendicular to the motion (rigid-body kinematics).
    sim = Simulator(BIG, PhysicsParams(), {"cue": (1000.0, 1000.0)})
    heading = math.radians(20.0)
    sim.strike(0.0, Strike("cue", 1000.0, heading, tip_height=0.4))
    sim.run_until_rest()
    traj = sim.trajectory()
    times = np.array([0.0, 0.3, 1.0, 2.5, traj.t_end + 1.0])
    rot = traj.rotations(times)[:, 0]
    pos = traj.sample(times).pos[:, 0]
    axis = np.array([-math.sin(heading), math.cos(heading), 0.0])
    for k in range(times.size):
        np.testing.assert_allclose(rot[k] @ rot[k].T, np.eye(3), atol=1e-12)
        angle = np.linalg.norm(pos[k] - pos[0]) / R
        K = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
        want = np.eye(3) + math.sin(angle) * K + (1 - math.cos(angle)) * K @ K
        np.testing.assert_allclose(rot[k], want, atol=1e-4)


def test_rotations_agree_with_a_fine_reference_integration():
    # Numerical cross-check: sub-steps of 1 ms with the Magnus term against 10 us midpoint steps.
    sim = Simulator(BIG, PhysicsParams(), {"cue": (1000.0, 1000.0)})
    sim.strike(0.0, Strike("cue", 2500.0, 0.3, tip_side=0.4, tip_height=-0.35))
    t_rest = sim.run_until_rest()
    traj = sim.trajectory()
    t_check = min(t_rest, 3.0)
    got = traj.rotations(np.array([t_check]))[0, 0]
    fine = np.arange(0.0, t_check, 1e-5)
    mid = traj.sample(fine + 0.5e-5).omega[:, 0]
    ref = np.eye(3)
    for w in mid:
        th = np.linalg.norm(w) * 1e-5
        if th == 0:
            continue
        k = w / np.linalg.norm(w)
        K = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
        ref = (np.eye(3) + math.sin(th) * K + (1 - math.cos(th)) * K @ K) @ ref
    assert np.abs(got - ref).max() < 1e-4


def test_strike_on_a_moving_ball_and_repeated_shots():
    sim = Simulator(BIG, PhysicsParams(), {"cue": (1000.0, 1000.0), "x": (5000.0, 5000.0)})
    sim.strike(0.0, Strike("cue", 1000.0, 0.0, tip_height=0.4))
    sim.strike(0.5, Strike("x", 400.0, math.pi, tip_height=0.4))
    before = sim.trajectory().sample([0.5]).vel[0, 0]
    sim.strike(0.5, Strike("cue", 300.0, math.pi / 2, tip_height=0.4))
    after = sim.trajectory().sample([0.5]).vel[0, 0]
    np.testing.assert_allclose(after - before, [0.0, 300.0], atol=1e-9)
    t1 = sim.run_until_rest()
    sim.strike(t1 + 1.0, Strike("cue", 300.0, 0.0))
    t2 = sim.run_until_rest()
    assert t2 > t1 + 1.0
    assert kinds(sim.trajectory()).count("start") == 4


def test_dead_spot_deadens_the_cushion_there():
    # A dead spot multiplies e: the same perpendicular shot comes back slower there.
    def rebound(params, x):
        sim = Simulator(NINE_FOOT, params, {"cue": (x, 600.0)})
        sim.strike(0.0, Strike("cue", 1500.0, math.pi / 2, tip_height=0.4))
        sim.run_until_rest()
        hit = next(e for e in sim.trajectory().events if e.kind == "cushion")
        assert hit.rail == "top"
        return hit.vel_out[1] / hit.vel_in[1]

    from analysis.cushion import DeadSpot

    dead = PhysicsParams(cushion=CushionParams(dead_spots=(DeadSpot("top", 2.0, 3.0, 0.7),)))
    x_in = NINE_FOOT.from_diamonds("top", 2.5)
    x_out = NINE_FOOT.from_diamonds("top", 5.5)
    assert rebound(dead, x_out) == pytest.approx(rebound(PhysicsParams(), x_out), rel=1e-12)
    assert abs(rebound(dead, x_in)) < 0.8 * abs(rebound(PhysicsParams(), x_in))


def test_lift_takes_a_moving_ball_off_and_the_rest_carry_on():
    # A hand catching a rolling ball: it is absent from then on, other balls are unaffected.
    table = NINE_FOOT
    sim = Simulator(table, PhysicsParams(), {"a": (500.0, 300.0), "b": (500.0, 900.0)})
    sim.strike(0.0, Strike("a", 1000.0, 0.0, tip_height=0.4))
    sim.strike(0.0, Strike("b", 1000.0, 0.0, tip_height=0.4))
    sim.lift(0.5, "a")
    sim.run_until_rest()
    traj = sim.trajectory()
    s = traj.sample(np.array([0.49, 0.51, 2.0]))
    ia, ib = traj.ball_ids.index("a"), traj.ball_ids.index("b")
    assert s.present[0, ia] and not s.present[1, ia] and not s.present[2, ia]
    assert s.present[2, ib]
    # Ball b rolls on undisturbed: rolling deceleration mu_r g (Alciatore 2004).
    assert s.vel[2, ib, 0] == pytest.approx(1000.0 - 0.01 * 9810.0 * 2.0, rel=1e-9)
    removes = [e for e in traj.events if e.kind == "remove"]
    assert len(removes) == 1 and removes[0].t == pytest.approx(0.5)
    with pytest.raises(ValueError, match="not on the table"):
        sim.lift(sim.t, "a")


def test_rotations_continue_from_a_start_state():
    # Integrating in two chunks (the second continuing from the first's end) must equal one pass.
    sim = Simulator(NINE_FOOT, PhysicsParams(), {"a": (500.0, 400.0)})
    sim.strike(0.1, Strike("a", 1500.0, 0.3, tip_side=0.3, tip_height=0.2))
    sim.run_until_rest()
    traj = sim.trajectory()
    times = np.linspace(0.0, 2.0, 81)
    whole = traj.rotations(times)
    first = traj.rotations(times[:40])
    second = traj.rotations(times[40:], start=(times[39], first[-1]))
    assert np.max(np.abs(np.concatenate([first, second]) - whole)) < 1e-9
    with pytest.raises(ValueError, match="precede"):
        traj.rotations(times[:5], start=(1.0, first[-1]))
