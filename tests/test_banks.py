"""The bank audit: geometry against hand-worked examples, measures against simulated sessions whose
intents and outcomes are known, statistics against reference implementations."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from analysis.banks import (
    BankConfig, audit_session, counting_sight, declared_contact, fit_correction, intent_from_shots_row,
    mean_ci, mirror_contacts, mirror_sight, read_session, wilson,
)
from analysis.drill import AimSpec, intents_for_shots, load_drill
from benchmarks.bank_accuracy import bank_scene_text, write_truth_folder
from railtrace.banks_cmd import main as banks_main
from railtrace.filming import simulate_scene
from railtrace.scene import load_scene, parse_scene
from vision.table import NINE_FOOT

DEFAULT_PHYSICS = "[physics]\n"  # the simulator's defaults (Mathavan 2009/2010 cushion)
T = NINE_FOOT  # reversal offset 27.514 mm, sights 93.7 mm behind the nose


# --- geometry: hand-worked examples -----------------------------------------------------------
def test_reversal_offset_matches_the_hand_worked_contact_geometry():
    # references.md (derived there): nose at 63.5 % of 57.15 mm -> sin(theta) = 0.27, centre at
    # R cos(theta) = 28.575 * 0.96285 = 27.51 mm from the nose.
    assert T.reversal_offset_mm == pytest.approx(27.514, abs=0.002)


def test_mirror_contact_by_similar_triangles():
    # Mirror-image construction of plane geometry (reflection law; Alciatore 2004, from memory):
    # ball (1000, 300) to the bottom-side pocket's mouth centre (1270, 0) off the top rail, whose
    # reversal line is y = 1270 - 27.514 = 1242.486. The contact divides the 270 mm run in the
    # ratio of the distances to the line, 942.486 : 1242.486, so x = 1000 + 270 * 942.486 /
    # 2184.972 = 1116.464 mm (worked by hand).
    (x,) = mirror_contacts(T, (1000.0, 300.0), (1270.0, 0.0), ["top"])
    assert x == pytest.approx(1116.464, abs=0.01)


def test_two_rail_mirror_path_by_double_reflection():
    # Two-rail mirror: reflect the target across the second rail, then the first (plane geometry).
    # Ball (500, 400), target (2000, 400), off the top then the right rail: image of (2000, 400)
    # across x = 2512.486 is (3024.972, 400), then across y = 1242.486 is (3024.972, 2084.972). The
    # line from (500, 400) meets y = 1242.486 at x = 500 + 2524.972 * 842.486 / 1684.972 = 1762.486
    # and then x = 2512.486 at y = 1242.486 - (750.000 / 1262.486) * 842.486 ... worked: the
    # second leg runs from (1762.486, 1242.486) toward (3024.972, 400) reflected, i.e. slope
    # -842.486/1262.486, meeting x = 2512.486 at y = 1242.486 - 0.66732 * 750 = 742.0 (by hand).
    top, right = mirror_contacts(T, (500.0, 400.0), (2000.0, 400.0), ["top", "right"])
    assert top == pytest.approx(1762.486, abs=0.01)
    assert right == pytest.approx(742.0, abs=0.1)


def test_declared_contact_uses_the_sight_on_the_rail_top_and_the_reversal_line():
    # Ball (1000, 300) aimed through the top rail's sight 3.5 = (1111.25, 1270 + 93.7): the line meets
    # y = 1242.486 at x = 1000 + 111.25 * 942.486 / 1063.7 = 1098.573 mm (by hand), not at the sight's
    # x (1111.25) nor where it crosses the nose line (1000 + 111.25 * 970 / 1063.7 = 1101.45).
    rail, x = declared_contact(T, (1000.0, 300.0), AimSpec("sight", rail="top", diamond=3.5))
    assert rail == "top" and x == pytest.approx(1098.573, abs=0.01)


def test_counting_by_sights_and_the_mirror_rule_differ_by_the_turning_line():
    # Counting by sights (common practice): a ball as far from the bank rail's sights as the target
    # is banks through the sight halfway between them: ball on the bottom nose at 2 diamonds, the
    # side pocket at 4, aim at 3 on the top rail.
    assert counting_sight(T, (635.0, 0.0), (1270.0, 0.0), "top") == pytest.approx(3.0, abs=1e-9)
    # With the ball's centre where it really is (27.514 mm off the nose) the counting answer is
    # 635 + 635 * 1336.186 / 2699.886 = 949.26 mm = 2.990 diamonds, while the mirror at the reversal
    # line gives the contact 635 + 635 * 1214.972 / 2457.458 = 948.95 mm and, through it, the sight
    # 635 + 313.95 * 1336.186 / 1214.972 = 980.27 mm = 3.087 diamonds (worked by hand): about a
    # tenth of a diamond apart because the centre turns 121 mm inside the sight line
    # (references.md, geometry derived there).
    assert counting_sight(T, (635.0, 27.514), (1270.0, 0.0), "top") == pytest.approx(2.990, abs=0.002)
    assert mirror_sight(T, (635.0, 27.514), (1270.0, 0.0), "top") == pytest.approx(3.087, abs=0.002)


# --- the audit on simulated sessions ----------------------------------------------------------
SPIN_SHOTS = [
    # Kicks of a lone cue ball through top-rail sights; aim errors and side spin stated.
    {"at": (900.0, 300.0), "rail": "top", "diamond": 3.4, "speed": 1500.0, "aim_error_deg": 0.7, "target": "bottom-side"},
    {"at": (1600.0, 350.0), "rail": "top", "diamond": 5.0, "speed": 1800.0, "aim_error_deg": -0.5, "target": "bottom-side"},
    {"at": (700.0, 400.0), "rail": "top", "diamond": 4.0, "speed": 2200.0, "side": 0.3, "target": "bottom-right"},
    {"at": (1800.0, 300.0), "rail": "top", "diamond": 4.8, "speed": 1600.0, "side": -0.3, "target": "bottom-left"},
    {"at": (1200.0, 250.0), "rail": "top", "diamond": 3.3, "speed": 1200.0, "target": "bottom-side"},
]


@pytest.fixture(scope="module")
def spin_session(tmp_path_factory):
    text = bank_scene_text(SPIN_SHOTS, physics=DEFAULT_PHYSICS)
    folder = write_truth_folder(text, tmp_path_factory.mktemp("banks") / "spin.truth")
    session = read_session(folder)
    intents = [intent_from_shots_row(r, session.table) for _, r in session.shots.iterrows()]
    sim = simulate_scene(parse_scene(__import__("tomllib").loads(text), source_text=text))
    return session, audit_session(session, intents), sim


def test_aim_error_recovered_from_the_stated_miss(spin_session):
    session, audit, _ = spin_session
    assert len(audit.shots) == len(SPIN_SHOTS)
    for _, s in audit.shots.iterrows():
        r = session.shots.iloc[int(s["shot"])]
        # Independent truth: the cue's actual heading (shots.csv) from the start, met with the top
        # reversal line, minus the declared contact (line through the sight), by plane geometry.
        h = math.radians(r["heading_actual_deg"])
        x_true = r["start_x"] + (T.reversal_line("top") - r["start_y"]) / math.tan(h)
        _, x_decl = declared_contact(T, (r["start_x"], r["start_y"]), AimSpec("sight", rail="top", diamond=r["aim_diamond"]))
        assert s["aim_error_mm"] == pytest.approx(x_true - x_decl, abs=0.5)
        assert s["aim_error_diamonds"] == pytest.approx((x_true - x_decl) / 317.5, abs=0.002)
    # The stated misses are large enough to see: 0.7 deg over about 1 m is more than 10 mm.
    assert abs(audit.shots.loc[0, "aim_error_mm"]) > 10 and abs(audit.shots.loc[4, "aim_error_mm"]) < 0.5


def test_rebound_deviation_split_and_side_spin_recovered(spin_session):
    _, audit, sim = spin_session
    c = audit.cushions[audit.cushions["cushion"] == 0].set_index("shot")
    # The simulator's side spin at each shot's first cushion contact (rad/s).
    true_wz = {}
    for k, rec in enumerate(sim.shots):
        ev = [e for e in sim.trajectory.events if e.kind == "cushion" and e.t > rec.t_strike]
        true_wz[k] = ev[0].omega_in[2]
    for shot, row in c.iterrows():
        assert row["rebound_dev_deg"] == pytest.approx(row["dev_model_deg"] + row["dev_spin_deg"], abs=1e-9)
        if SPIN_SHOTS[shot].get("side", 0.0) == 0.0:
            # No side spin: the cushion model with the measured speed explains the whole deviation.
            assert abs(row["dev_spin_deg"]) < 0.1 and row["english"] == "none"
            assert abs(row["side_spin_rad_s"]) < 0.5
        else:
            assert row["side_spin_rad_s"] == pytest.approx(true_wz[shot], rel=0.05, abs=0.5)
            assert abs(row["dev_spin_deg"]) > 0.5


def test_same_aim_soft_lands_longer_than_hard(tmp_path):
    # Common practice: at the same aim a soft ball rebounds wider and runs longer along the rail than
    # a hard one (references.md). Same spot, same sight, soft and hard, stun and rolling; measured
    # where the ball meets the target rail. (The angle just off the cushion alone is not monotonic
    # in speed in the model, whose restitution peaks near 1 m/s (Mathavan et al. 2009); the
    # landing point includes the bend of the sliding departure.)
    shots = [{"at": (1000.0, 300.0), "rail": "top", "diamond": 3.6, "speed": v, "height": h,
              "target": "bottom-side"} for h in (0.0, 0.4) for v in (1500.0, 3200.0)]
    folder = write_truth_folder(bank_scene_text(shots, physics=DEFAULT_PHYSICS), tmp_path / "speed.truth")
    s = read_session(folder)
    a = audit_session(s, [intent_from_shots_row(r, s.table) for _, r in s.shots.iterrows()]).shots
    for soft, hard in ((0, 1), (2, 3)):
        assert a.loc[soft, "speed_in_mm_s"] < 0.6 * a.loc[hard, "speed_in_mm_s"] and a.loc[hard, "band"] == "hard"
        assert a.loc[soft, "long_mm"] > a.loc[hard, "long_mm"] + 2.0  # mm; about 5 to 11 mm here
        assert a.loc[soft, "ended_by"] != "stop"  # it reached the target line
        # ... and the fitted correction therefore moves the soft aim back relative to the hard one.
        assert a.loc[soft, "correction_diamonds"] < a.loc[hard, "correction_diamonds"]
        # No side spin was put on: the remainder left for spin is nil.
        assert abs(a.loc[soft, "dev_spin_deg"]) < 0.1 and abs(a.loc[hard, "dev_spin_deg"]) < 0.1


# --- the sample bank session ------------------------------------------------------------------
SAMPLE_DRILL = """\
player = "sample player"
table = "9ft"
[[shot]]
aim = { rail = "top", diamond = 3.531 }
target = "bottom-side"
[[shot]]
aim = { rail = "top", diamond = 4.380 }
target = "bottom-side"
[[shot]]
aim = { rail = "top", diamond = 3.725 }
target = "bottom-side"
[[shot]]
aim = { rail = "top", diamond = 5.947 }
target = "bottom-right"
[[shot]]
aim = { rail = "top", diamond = 6.612 }
target = "bottom-right"
[[shot]]
aim = { rail = "right", diamond = 3.066 }
target = "top-left"
"""


@pytest.fixture(scope="module")
def sample_truth(tmp_path_factory):
    from pathlib import Path

    scene_path = Path(__file__).resolve().parents[1] / "sample_clips" / "bank_practice.toml"
    text = scene_path.read_text(encoding="utf-8")
    folder = write_truth_folder(text, tmp_path_factory.mktemp("sample") / "bank_practice.truth")
    drill = folder.parent / "drill.toml"
    drill.write_text(SAMPLE_DRILL, encoding="utf-8")
    return folder, drill, load_scene(scene_path)


def test_sample_session_every_bank_reported(sample_truth, capsys):
    folder, drill, scene = sample_truth
    assert banks_main([str(folder), "--drill", str(drill)]) == 0
    out = capsys.readouterr().out
    shots = pd.read_csv(folder / "banks.csv")
    assert list(shots["shot"]) == list(range(len(scene.shots)))
    for k in range(len(scene.shots)):
        assert any(line.split()[:1] == [str(k)] for line in out.splitlines())
    # Object-ball banks (the cue ball strikes the 1 full): the aims of the two shots the scene
    # misses on purpose (aim_error_deg) are off, the others within 0.5 mm.
    off = [i for i, s in enumerate(scene.shots) if s.aim_error_deg != 0.0]
    for _, r in shots.iterrows():
        if r["shot"] in off:
            assert abs(r["aim_error_mm"]) > 10
        else:
            assert abs(r["aim_error_mm"]) < 0.5
    ev = pd.read_csv(folder / "events.csv")
    made = set(ev.loc[(ev["kind"] == "pocket") & (ev["track"] == 1), "shot"])
    assert set(shots.loc[shots["made"], "shot"]) == made & set(shots["shot"])
    for name in ("bank_cushions.csv", "bank_stats.csv", "bank_findings.txt", "bank_audit.json"):
        assert (folder / name).is_file()


def test_a_bank_whose_departure_was_not_seen_is_audited_without_a_rebound(sample_truth, tmp_path, capsys):
    # A ball lifted or hidden as it reaches the cushion has a contact with no speed, angle or
    # restitution out (results format: those columns empty); its bank keeps its contact and aim.
    import shutil

    folder, drill, _ = sample_truth
    copy = tmp_path / "unseen"
    shutil.copytree(folder, copy)
    ev = pd.read_csv(copy / "events.csv")
    first = ev.index[ev["kind"] == "cushion"][0]
    ev.loc[first, ["speed_out", "angle_out", "restitution"]] = np.nan
    ev.to_csv(copy / "events.csv", index=False)
    assert banks_main([str(copy), "--drill", str(drill)]) == 0
    out = capsys.readouterr().out
    assert "nan" not in out.lower()
    shots = pd.read_csv(copy / "banks.csv")
    hit = shots[shots["english"] == "unseen"]
    assert len(hit) == 1 and np.isnan(hit["rebound_dev_deg"].iloc[0])
    assert np.isfinite(hit["aim_error_mm"].iloc[0]) and np.isfinite(hit["contact_diamond"].iloc[0])
    findings = (copy / "bank_findings.txt").read_text(encoding="utf-8")
    assert "nan" not in findings.lower()


def test_without_intent_outcomes_only_and_says_so(sample_truth):
    folder, _, _ = sample_truth
    s = read_session(folder)
    a = audit_session(s, None)
    assert "no intent was stated" in a.notes[0]
    assert a.shots["aim_error_mm"].isna().all()
    # Made banks have their pocket inferred as the target.
    made = a.shots[a.shots["made"]]
    assert len(made) >= 1 and set(made["target"]) <= {"bottom-side", "bottom-right"}


def test_bands_are_configurable_and_checked(sample_truth, capsys):
    folder, drill, _ = sample_truth
    assert banks_main([str(folder), "--drill", str(drill), "--bands", "100,5000", "--quiet"]) == 0
    assert set(pd.read_csv(folder / "banks.csv")["band"]) == {"medium"}
    assert banks_main([str(folder), "--bands", "900,300"]) == 2
    assert "--bands" in capsys.readouterr().err


# --- statistics --------------------------------------------------------------------------------
def test_intervals_match_reference_implementations():
    x = np.array([0.12, -0.05, 0.3, 0.22, 0.08, 0.15])
    m, lo, hi, sd = mean_ci(x, 0.95)
    ref = stats.t.interval(0.95, len(x) - 1, loc=x.mean(), scale=stats.sem(x))  # scipy reference
    assert (lo, hi) == pytest.approx(ref, abs=1e-12) and sd == pytest.approx(x.std(ddof=1))
    # Wilson (1927) score interval against scipy's binomtest implementation.
    ref = stats.binomtest(2, 6).proportion_ci(0.95, method="wilson")
    assert wilson(2, 6, 0.95) == pytest.approx((ref.low, ref.high), abs=1e-9)


def test_correction_fit_recovers_a_known_linear_law():
    rng = np.random.default_rng(4)
    n = 40
    v = rng.uniform(300, 2500, n)
    y = 0.10 - 0.15 * (v - 1000) / 1000 + rng.normal(0, 0.03, n)
    shots = pd.DataFrame({"correction_diamonds": y, "speed_in_mm_s": v,
                          "start_depth_diamonds": np.full(n, 2.0)})
    c = fit_correction(shots, BankConfig())
    assert c["terms"] == ["offset", "per_m_s"]
    X = np.column_stack([np.ones(n), (v - 1000) / 1000])
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)  # numpy's least squares as the reference
    assert c["coef"] == pytest.approx(beta, abs=1e-8)
    resid = y - X @ beta
    se = np.sqrt(np.diag(np.linalg.inv(X.T @ X)) * (resid @ resid) / (n - 2))
    assert c["coef_se"] == pytest.approx(se, rel=1e-6)
    assert abs(c["coef"][1] + 0.15) < 3 * c["coef_se"][1]


def test_drill_on_a_truth_folder_matches_its_scene(sample_truth):
    folder, drill, _ = sample_truth
    s = read_session(folder)
    d = load_drill(drill, s.table)
    a = audit_session(s, intents_for_shots(d.intents, d.repeat, len(s.shots), d.source), BankConfig())
    # The drill's sights are those the scene sent the 1 through (ghost-ball aims straight behind).
    assert a.shots["declared_diamond"].round(2).tolist()[:2] == [3.48, 4.42]


def test_a_bank_that_dies_short_is_measured_along_its_rolled_line(sample_truth):
    # The sample's soft banks stop a metre short of the bottom rail, so long/short is where their
    # line, extended, meets it. Tracker-sized noise (positions 0.5 mm, velocities 8 mm/s; the
    # analysed sample's resting balls show velocities of that size) must not swing it: a heading
    # fitted over ~80 mm of rolled path with 0.5 mm noise is good to about 0.15 deg, i.e. about
    # 3 mm after 1.1 m (least-squares slope error sigma / (L sqrt(N / 12)), standard regression).
    folder, drill, _ = sample_truth
    s = read_session(folder)
    d = load_drill(drill, s.table)
    intents = intents_for_shots(d.intents, d.repeat, len(s.shots), d.source)
    clean_audit = audit_session(s, intents)
    clean = clean_audit.shots
    rng = np.random.default_rng(11)
    tr = s.tracks.copy()
    n = len(tr)
    for col, sd in (("x", 0.5), ("y", 0.5), ("vx", 8.0), ("vy", 8.0)):
        tr[col] = tr[col] + rng.normal(0, sd, n)
    from dataclasses import replace

    noisy_audit = audit_session(replace(s, tracks=tr), intents)
    noisy = noisy_audit.shots
    died = clean[(clean["ended_by"] == "stop") & (clean["target_rail"] == "bottom")]
    assert len(died) >= 2  # the two soft banks
    for k in died.index:
        # Both soft banks stop more than 1 m from the target line: a pure extrapolation.
        assert abs(noisy.loc[k, "long_mm"] - clean.loc[k, "long_mm"]) < 15.0  # mm, 5x the estimate
        assert abs(noisy.loc[k, "correction_diamonds"] - clean.loc[k, "correction_diamonds"]) < 0.05
    # ... nor the session's fitted correction per band (issue 5: within 0.05 diamond of the truth's).
    for band, p in clean_audit.correction["by_band"].items():
        assert abs(noisy_audit.correction["by_band"][band]["correction_diamonds"] - p["correction_diamonds"]) < 0.05


def test_a_ball_named_by_track_is_audited_as_a_kick_from_its_start(spin_session):
    # A tracker may name another track as a shot's cue ball (something else seen moving); a drill
    # naming the struck ball by its track must still give the same kick, launched at its start.
    from dataclasses import replace

    session, audit, _ = spin_session
    shots = session.shots.copy()
    shots["cue_track"] = 99
    intents = [replace(intent_from_shots_row(r, session.table), ball="0") for _, r in session.shots.iterrows()]
    again = audit_session(replace(session, shots=shots), intents).shots
    assert list(again["kind"]) == ["kick"] * len(SPIN_SHOTS)
    assert np.allclose(again["aim_error_mm"], audit.shots["aim_error_mm"], atol=1e-9)
    assert np.allclose(again["long_mm"], audit.shots["long_mm"], atol=1e-9)
