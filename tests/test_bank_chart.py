"""The bank chart: cushion and cloth fitted to a session recover the simulator's true parameters,
the fitted model predicts held-out banks, and the chart's sights make the ball drop."""

from __future__ import annotations

import math
import tomllib
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from analysis.bank_chart import ChartConfig, TableFit, bank_chart, chart_svg, fit_table, predict_bank
from analysis.banks import BankConfig, audit_session, intent_from_shots_row, read_session
from analysis.physics import PhysicsParams, Simulator, Strike
from benchmarks.bank_accuracy import (
    TRUE_E_SCALE, bank_scene_text, held_out_shots, side_spin_known, training_shots, write_truth_folder,
)
from benchmarks.bank_chart_accuracy import pair_shots
from railtrace.banks_cmd import main as banks_main
from railtrace.scene import parse_scene


@pytest.fixture(scope="module")
def truth_physics():
    return parse_scene(tomllib.loads(bank_scene_text(training_shots()[:1])), "").physics


@pytest.fixture(scope="module")
def train(tmp_path_factory, truth_physics):
    folder = write_truth_folder(bank_scene_text(training_shots()), tmp_path_factory.mktemp("chart") / "train.truth")
    s = read_session(folder)
    a = audit_session(s, [intent_from_shots_row(r, s.table) for _, r in s.shots.iterrows()],
                      BankConfig(physics=truth_physics))
    return folder, s, a


def _noisy(session, rng):
    """The session with measurement noise of the size a tracker leaves: angles 0.3 deg, restitution
    0.01, speeds 1 %, tracked speeds 10 mm/s, tracked positions 0.5 mm."""
    ev = session.events.copy()
    c = ev["kind"] == "cushion"
    n = int(c.sum())
    ev.loc[c, "angle_out"] += rng.normal(0, 0.3, n)
    ev.loc[c, "angle_in"] += rng.normal(0, 0.3, n)
    ev.loc[c, "restitution"] += rng.normal(0, 0.01, n)
    ev.loc[c, "speed_in"] *= 1 + rng.normal(0, 0.01, n)
    tr = session.tracks.copy()
    sp = np.hypot(tr["vx"], tr["vy"]).to_numpy()
    f = np.where(sp > 1, (sp + rng.normal(0, 10.0, len(sp))) / np.maximum(sp, 1), 1.0)
    tr["vx"] *= f
    tr["vy"] *= f
    tr["x"] += rng.normal(0, 0.5, len(tr))
    tr["y"] += rng.normal(0, 0.5, len(tr))
    return replace(session, events=ev, tracks=tr)


def test_fit_recovers_true_cushion_and_cloth(train, truth_physics):
    _, s, a = train
    fit = fit_table(s, a.shots, ChartConfig(), PhysicsParams(), side_spin_known(s))
    # Truth: the scene's [physics] (liveliness 0.9 x default, cushion friction 0.20, cloth 0.24 / 0.012).
    assert fit.good, fit.reason
    assert fit.e_scale == pytest.approx(TRUE_E_SCALE, abs=0.005)
    assert fit.physics.cushion.mu_cushion == pytest.approx(truth_physics.cushion.mu_cushion, abs=0.005)
    assert fit.physics.mu_slide == pytest.approx(truth_physics.mu_slide, abs=0.002)
    assert fit.physics.mu_roll == pytest.approx(truth_physics.mu_roll, abs=0.0002)
    assert fit.n_contacts == len(training_shots())


def test_fit_with_measurement_noise_stays_close_and_reports_its_uncertainty(train, truth_physics):
    _, s, a = train
    fit = fit_table(_noisy(s, np.random.default_rng(7)), a.shots, ChartConfig(), PhysicsParams(), side_spin_known(s))
    assert abs(fit.e_scale - TRUE_E_SCALE) < max(3 * fit.e_scale_se, 0.01)
    assert abs(fit.physics.cushion.mu_cushion - truth_physics.cushion.mu_cushion) < max(3 * fit.mu_cushion_se, 0.01)
    assert abs(fit.physics.mu_slide - truth_physics.mu_slide) < 0.01
    assert 0.1 < fit.angle_rms_deg < 1.0  # the injected 0.3 deg noise shows in the residuals


def test_held_out_banks_predicted_within_a_tenth_of_a_diamond(train, truth_physics, tmp_path):
    _, s, a = train
    fit = fit_table(_noisy(s, np.random.default_rng(3)), a.shots, ChartConfig(), PhysicsParams(), side_spin_known(s))
    held = read_session(write_truth_folder(bank_scene_text(held_out_shots()), tmp_path / "held.truth"))
    checked = 0
    for _, r in held.shots.iterrows():
        h = math.radians(r["heading_actual_deg"])
        pred = predict_bank(held.table, fit.physics, (r["start_x"], r["start_y"]), h, r["speed_set_mm_s"], "top", "bottom")
        ev = held.events[(held.events["shot"] == r["shot"]) & (held.events["kind"] == "cushion")]
        if ev.empty:  # dropped straight into a pocket on the way: no contact to predict
            continue
        assert pred["contact_mm"] == pytest.approx(float(ev.iloc[0]["x"]), abs=0.1 * 317.5)
        if len(ev) > 1 and ev.iloc[1]["rail"] == "bottom" and np.isfinite(pred["met_mm"]):
            # Where the bank came back to the bottom rail, truth vs fitted prediction (issue 5: 0.1 diamond).
            assert abs(pred["met_mm"] - float(ev.iloc[1]["x"])) / 317.5 < 0.1
            checked += 1
    assert checked >= 3


def test_chart_sights_drop_the_ball_and_match_the_true_tables(train, truth_physics):
    _, s, a = train
    fit = fit_table(_noisy(s, np.random.default_rng(5)), a.shots, ChartConfig(), PhysicsParams(), side_spin_known(s))
    spots = [("bottom", np.array([x, 317.5]), p, "top") for x in (762.0, 1524.0) for p in ("bottom-side", "bottom-right")]
    chart = bank_chart(s.table, fit, ChartConfig(), spots)
    true = bank_chart(s.table, TableFit(truth_physics, TRUE_E_SCALE, 0, 0, 0, 0, 0, 0, 0, 0, 0, True, "truth"),
                      ChartConfig(), spots)
    cols = ["soft_sight", "medium_sight", "hard_sight"]
    got, ref = chart[cols].to_numpy(), true[cols].to_numpy()
    assert np.isfinite(ref).sum() >= 8
    assert np.nanmax(np.abs(got - ref)) < 0.1  # diamonds (issue 5)
    # The fitted sight, played in the simulator with the true table, drops the ball (event-based
    # simulator as the independent reference; it models the pockets, the chart's solver does not).
    dropped = 0
    for i, row in chart.iterrows():
        for name, speed in zip(("soft", "medium", "hard"), ChartConfig().launch_speeds_mm_s):
            if not np.isfinite(row[f"{name}_sight"]):
                continue
            q = s.table.rail_point("top", row[f"{name}_sight"], s.table.sight_setback_mm)
            start = (row["start_x_mm"], row["start_y_mm"])
            sim = Simulator(s.table, truth_physics, {"b": start})
            sim.strike(0.0, Strike("b", speed, math.atan2(q[1] - start[1], q[0] - start[0])))
            sim.run_until_rest()
            pockets = [e.pocket for e in sim.trajectory().events if e.kind == "pocket"]
            dropped += pockets == [row["pocket"]]
            assert pockets == [row["pocket"]], (row["pocket"], name, pockets)
    assert dropped >= 8
    # The sights differ from both rules of thumb, and by speed (the point of a fitted chart).
    assert np.nanmax(np.abs(got - chart[["mirror_sight"]].to_numpy())) > 0.02


def test_chart_only_offered_when_the_fit_is_good(tmp_path, capsys):
    few = write_truth_folder(bank_scene_text(training_shots()[:2]), tmp_path / "few.truth")
    assert banks_main([str(few), "--chart"]) == 0
    out = capsys.readouterr().out
    assert "no bank chart" in out and "at least 6" in out
    assert not (few / "bank_chart.svg").exists() and not (few / "bank_chart.csv").exists()


def test_printable_chart_carries_fit_quality_and_shot_count(train, truth_physics):
    _, s, a = train
    fit = fit_table(s, a.shots, ChartConfig(), PhysicsParams(), side_spin_known(s))
    spots = [("bottom", np.array([1270.0, 317.5]), "bottom-side", "top")]
    svg = chart_svg(s.table, bank_chart(s.table, fit, ChartConfig(), spots), fit, "test")
    assert svg.startswith("<svg") and svg.rstrip().endswith("</svg>")
    assert f"{fit.n_contacts} contacts from {fit.n_shots} shots" in svg and "residuals" in svg


def _turn_departure(session, contact: pd.Series, deg: float) -> pd.DataFrame:
    """The session's tracks with the ball's path over the 0.3 s after ``contact`` (an event row)
    turned by ``deg`` about the contact point, as a track misled for that stretch would read it."""
    tr = session.tracks.copy()
    m = (tr["track"] == contact["track"]) & (tr["t"] > contact["t"]) & (tr["t"] <= contact["t"] + 0.3)
    c, s_ = math.cos(math.radians(deg)), math.sin(math.radians(deg))
    dx, dy = tr.loc[m, "x"] - contact["x"], tr.loc[m, "y"] - contact["y"]
    tr.loc[m, "x"], tr.loc[m, "y"] = contact["x"] + c * dx - s_ * dy, contact["y"] + s_ * dx + c * dy
    return tr


def test_a_badly_measured_contact_is_set_aside_not_fitted(train, truth_physics):
    # One contact's departure read 14 deg off (as a slow ball seen over a few centimetres was in a
    # filmed session): the fit sets it aside and still recovers the true table; with more than a
    # quarter of the contacts off, nothing is set aside and the chart is refused.
    _, s, a = train
    ev = s.events
    first = ev[ev["kind"] == "cushion"].groupby("shot").head(1)  # each bank's first contact
    one = replace(s, tracks=_turn_departure(s, first.iloc[2], 14.0))
    fit = fit_table(one, a.shots, ChartConfig(), PhysicsParams(), side_spin_known(s))
    assert fit.n_set_aside == 1 and fit.n_contacts == len(training_shots()) - 1 and fit.good, fit.reason
    assert fit.e_scale == pytest.approx(TRUE_E_SCALE, abs=0.005)
    assert fit.physics.cushion.mu_cushion == pytest.approx(truth_physics.cushion.mu_cushion, abs=0.005)
    assert "set aside" in fit.summary()
    many = one
    for k in range(3, 8):
        many = replace(many, tracks=_turn_departure(many, first.iloc[k], 14.0))
    bad = fit_table(many, a.shots, ChartConfig(), PhysicsParams(), side_spin_known(s))
    assert bad.n_set_aside == 0 and not bad.good and "path residual" in bad.reason


def test_fit_rests_on_the_departure_path_not_on_the_events_speed_and_angle_readings(train, truth_physics):
    # Every contact's speeds and angles as the events read them on a filmed session with automatic
    # calibration (tracking/events.py's approach and departure fits beside the contact): speed in
    # and out up to 3 % high, angles in and out 0.5 deg off, restitution 0.03 low. The positions
    # of the ball are untouched, so the fit must still recover the simulator's table.
    _, s, a = train
    ev = s.events.copy()
    c = ev["kind"] == "cushion"
    ev.loc[c, "speed_in"] *= 1.03
    ev.loc[c, "speed_out"] *= 1.03
    ev.loc[c, "angle_in"] += 0.5
    ev.loc[c, "angle_out"] -= 0.5
    ev.loc[c, "restitution"] -= 0.03
    fit = fit_table(replace(s, events=ev), a.shots, ChartConfig(), PhysicsParams(), side_spin_known(s))
    # Truth: the scene's [physics] (liveliness 0.9 x default, cushion friction 0.20).
    assert fit.good, fit.reason
    assert fit.e_scale == pytest.approx(TRUE_E_SCALE, abs=0.005)
    assert fit.physics.cushion.mu_cushion == pytest.approx(truth_physics.cushion.mu_cushion, abs=0.005)


FILMED = Path(__file__).parent / "data" / "bank_chart_filmed"


def test_fit_from_a_filmed_and_analysed_session_recovers_the_simulators_cushion():
    # Issue 5: a rendered session with known cushions, run through the real calibration (automatic),
    # detection, tracking and events (cached: tests/data/bank_chart_filmed/README.md), then fitted.
    # The truth is the scene's [physics]; the tolerance is the fit's own standard error, three of
    # them, so an overconfident fit fails as surely as a biased one.
    res = read_session(FILMED / "auto.results")
    truth_shots = pd.read_csv(FILMED / "truth" / "shots.csv")
    scene_text = (FILMED / "truth" / "scene.toml").read_text()
    true = parse_scene(tomllib.loads(scene_text), "").physics
    truth = replace(res, shots=truth_shots)
    pairs = pair_shots(res, truth)
    assert len(pairs) == len(truth_shots)
    intents = [replace(intent_from_shots_row(truth_shots.iloc[pairs[k][0]], res.table), ball=str(pairs[k][1]))
               if k in pairs else None for k in res.shots["shot"].astype(int)]
    audit = audit_session(res, intents, BankConfig())
    side = side_spin_known(truth)
    fit = fit_table(res, audit.shots[audit.shots["shot"].isin(list(pairs))], ChartConfig(), PhysicsParams(),
                    {k: side[v[0]] for k, v in pairs.items()})
    assert fit.good, fit.reason
    assert fit.n_contacts >= 12
    assert 0 < fit.e_scale_se <= 0.05 and 0 < fit.mu_cushion_se <= 0.05
    assert abs(fit.e_scale - TRUE_E_SCALE) <= 3 * fit.e_scale_se
    assert abs(fit.physics.cushion.mu_cushion - true.cushion.mu_cushion) <= 3 * fit.mu_cushion_se
