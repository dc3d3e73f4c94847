"""Cushion check (analysis/cushions.py, railtrace/cushions_cmd.py) on simulated truth folders.

Ground truth: room-staff check sessions of our own invention (benchmarks/cushion_accuracy.py)
simulated by analysis.physics and written as truth folders, which have the results format. The
truth of a rail's speed ratio is derived from the scene's physics parameters alone: the impact
model's ratio for a rolling ball square into that rail with the scene's restitution curve and rail
factor. Outside references: Mathavan, Jackson & Parkin 2009 (shared/spec/references.md,
[secondary]) for the default cushion curve; Alciatore's stun-and-roll formulas (references.md,
[secondary]) for the spot shot; scipy.stats as the reference for Benjamini-Hochberg.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pandas as pd
import pytest

from analysis.cushions import (
    CushionCheckConfig, check_session, compare_checks, load_session, segment_tests, simulate_spot_shot,
)
from analysis.physics import PhysicsParams
from benchmarks.cushion_accuracy import session_doc, truth_ratio, write_session
from railtrace import cushions_cmd
from railtrace.scene import parse_scene
from vision.table import NINE_FOOT, RAILS

# Fewer resamples than the command's 1000 keep the suite fast; intervals are not asserted on.
CONFIG = CushionCheckConfig(n_boot=200)
SHOTS = 130


SETUPS = {
    "even0": (0, {}),
    "even1": (1, {"rail_factor": {"left": 0.93, "top": 0.97}}),
    "even2": (2, {"rail_factor": {"right": 1.02}}),
    # The top rail deadened between its 5th and 6th sights (x0.85 on e), as in the sample scene.
    "dead10": (10, {"dead_spot": ("top", 5.0, 6.0, 0.85)}),
    "dead11": (11, {"dead_spot": ("top", 5.0, 6.0, 0.85)}),
    "dead12": (12, {"dead_spot": ("top", 5.0, 6.0, 0.85)}),
    "duller": (21, {"rail_factor": {"left": 0.92}}),
    "cloth": (7, {"mu_roll": 0.0128}),
}


@pytest.fixture(scope="module")
def sessions(tmp_path_factory):
    """Build (scene, truth folder, check) of a named set-up once per module."""
    cache = {}

    def get(name):
        if name not in cache:
            seed, kwargs = SETUPS[name]
            scene = parse_scene(session_doc(np.random.default_rng(seed), n_rolled=SHOTS, **kwargs))
            folder = write_session(scene, tmp_path_factory.mktemp(name) / "truth")
            check = check_session(load_session([folder], CONFIG), CONFIG, np.random.default_rng(seed))
            cache[name] = (scene, folder, check)
        return cache[name]

    return get


@pytest.fixture(params=["even0", "even1", "even2"])
def even(request, sessions):
    """Sessions with even cushions along each rail (some rails livelier or deader as a whole)."""
    return sessions(request.param)


@pytest.fixture(params=["dead10", "dead11", "dead12"])
def dead(request, sessions):
    """Sessions with the top rail's 5-6 segment deadened."""
    return sessions(request.param)


def test_speed_ratio_per_band_within_003_of_simulator_truth(even):
    scene, _folder, check = even
    assert len(check.bands) >= 14, "every rail should have most bands measured"
    for _, b in check.bands.iterrows():
        truth = truth_ratio(scene, b["rail"], b["speed_ref_mm_s"])
        # Acceptance of issue 6: within 0.03 of the simulator's truth per speed band.
        assert abs(b["ratio_fit"] - truth) <= 0.03, (b["rail"], b["band"], b["ratio_fit"], truth)


def test_dead_session_curves_exclude_the_dead_spot(dead):
    scene, _folder, check = dead
    for _, b in check.bands.iterrows():
        # The rail's curve (dead spot left out) against the rail's truth without the dead spot.
        assert abs(b["ratio_fit"] - truth_ratio(scene, b["rail"], b["speed_ref_mm_s"])) <= 0.03


def test_default_cushions_follow_mathavan_2009(even):
    scene, _folder, check = even
    factors = dict(scene.physics.cushion.rail_factor)
    for _, b in check.bands.iterrows():
        if b["rail"] in factors:
            continue
        v = b["speed_ref_mm_s"] / 1000.0
        # Mathavan, Jackson & Parkin 2009 (references.md [secondary]): perpendicular rolling
        # impacts 0.28-3.5 m/s fitted by v_out = -0.0877 v^2 + 1.131 v - 0.0953 (m/s).
        v = min(max(v, 0.28), 3.5)
        ref = (-0.0877 * v * v + 1.131 * v - 0.0953) / v
        assert abs(b["ratio_fit"] - ref) <= 0.03, (b["rail"], b["band"], b["ratio_fit"], ref)


def test_even_cushions_flag_no_dead_spot(even):
    _scene, _folder, check = even
    assert len(check.segments) >= 15, "most segments should carry enough contacts to be tested"
    assert not check.segments["flagged"].any(), check.segments[check.segments["flagged"]]


def test_deadened_segment_is_flagged_and_sized(dead):
    scene, _folder, check = dead
    s = check.segments.set_index(["rail", "segment"])
    assert bool(s.loc[("top", "5-6"), "flagged"])
    assert int(s["flagged"].sum()) == 1, s[s["flagged"]]
    # Size: the scene's truth ratio with and without the dead-spot factor, at 1 m/s.
    expected = truth_ratio(scene, "top", 1000.0, 5.5) - truth_ratio(scene, "top", 1000.0)
    assert abs(s.loc[("top", "5-6"), "shortfall"] - expected) <= 0.03


def test_segment_test_uses_benjamini_hochberg_like_scipy():
    rng = np.random.default_rng(4)
    rows = []
    for rail in ("bottom", "top"):
        for k in range(8):
            for _ in range(6):
                v = rng.uniform(300, 3000)
                dead = rail == "top" and k == 2
                rows.append({"rail": rail, "segment": f"{k}-{k + 1}", "normal_speed_mm_s": v,
                             "ratio": 0.9 - (0.1 if dead else 0.0) + rng.normal(0, 0.01),
                             "diamond": k + 0.5})
    contacts = pd.DataFrame(rows)
    out = segment_tests(contacts, CONFIG, np.random.default_rng(0))
    p = out["p_value"].to_numpy()
    # Benjamini & Hochberg (1995) by hand: p_(i) m / i, then the running minimum from the top.
    order = np.argsort(p)
    adj = p[order] * len(p) / np.arange(1, len(p) + 1)
    adj = np.minimum.accumulate(adj[::-1])[::-1]
    expected = np.empty_like(adj)
    expected[order] = np.minimum(adj, 1.0)
    np.testing.assert_allclose(out["p_adjusted"], expected, rtol=1e-12)
    flagged = out[out["flagged"]]
    assert list(zip(flagged["rail"], flagged["segment"])) == [("top", "2-3")]
    assert abs(flagged["shortfall"].iloc[0] + 0.1) <= 0.015


def test_cloth_decelerations_match_the_scene(sessions):
    # Mathavan et al. 2009 measured mu_r about 0.0128 (references.md [secondary]); use it here.
    scene, _folder, check = sessions("cloth")
    cloth = check.cloth.set_index("phase")
    g = 9810.0
    assert abs(cloth.loc["rolling", "decel_mm_s2"] / (scene.physics.mu_roll * g) - 1) <= 0.03
    assert abs(cloth.loc["sliding", "decel_mm_s2"] / (scene.physics.mu_slide * g) - 1) <= 0.05


def test_spot_shot_without_cushion_matches_stun_and_roll_formulas():
    # Alciatore, technical proofs (references.md [secondary]): a stun at v0 slides
    # 12 v0^2 / (49 mu_s g), then rolls from 5/7 v0 for v^2 / (2 mu_r g).
    p = PhysicsParams()
    v0 = 800.0
    expected = 12 * v0**2 / (49 * p.mu_slide * p.g_mm_s2) + (5 / 7 * v0) ** 2 / (2 * p.mu_roll * p.g_mm_s2)
    assert expected < 0.75 * NINE_FOOT.length_mm - NINE_FOOT.reversal_offset_mm  # stops before the rail
    assert abs(simulate_spot_shot(NINE_FOOT, p, v0) - expected) <= 1.0


def test_table_lengths_measured_and_predicted(even):
    scene, _folder, check = even
    truth = simulate_spot_shot(scene.table, scene.physics, 3000.0) / scene.table.length_mm
    m = check.lengths_measured
    assert len(m) == 1 and abs(m["start_speed_mm_s"].iloc[0] - 3000.0) < 1.0
    assert abs(m["table_lengths"].iloc[0] - truth) <= 0.01 * truth
    assert abs(check.lengths_predicted["table_lengths"] - truth) <= 0.1


def test_compare_dates_finds_the_new_dead_spot(sessions):
    before = sessions("even0")[2]
    after = sessions("dead10")[2]
    changes = compare_checks(before, after, CONFIG, np.random.default_rng(3))
    new = changes[changes["measure"] == "dead_spot_new"]
    assert list(zip(new["rail"], new["band"])) == [("top", "5-6")]
    ratio = changes[changes["measure"] == "speed_ratio"]
    # Same cushions apart from the dead spot (left out of the curves): every band's change is
    # within the tolerance for a band value, 0.03.
    assert len(ratio) >= 12 and (ratio["change"].abs() <= 0.03).all(), ratio


def test_compare_detects_a_duller_rail(sessions):
    scene_before, _fb, before = sessions("even0")
    scene_after, _fa, after = sessions("duller")
    changes = compare_checks(before, after, CONFIG, np.random.default_rng(3))
    r = changes[changes["measure"] == "speed_ratio"]
    left = r[r["rail"] == "left"]
    # Welch's t-test with Benjamini-Hochberg must call a rail whose e fell by 8 % changed.
    assert len(left) >= 3 and left["significant"].all(), left
    # The size is held to the tolerance for a band value, 0.03 (single dates reach 0.016
    # in benchmarks/cushion_accuracy.py, seed 4 soft band).
    for _, x in left.iterrows():
        truth = (truth_ratio(scene_after, "left", x["speed_ref_mm_s"])
                 - truth_ratio(scene_before, "left", x["speed_ref_mm_s"]))
        assert abs(x["change"] - truth) <= 0.03
    assert (r.loc[r["rail"] != "left", "change"].abs() <= 0.03).all()


def test_command_writes_outputs(sessions, tmp_path, capsys):
    out = tmp_path / "check"
    code = cushions_cmd.main([str(sessions("dead10")[1]), "--before", str(sessions("even0")[1]),
                              "--out", str(out), "--boot", "200"])
    assert code == 0
    text = capsys.readouterr().out
    assert "DEAD  top diamonds 5-6" in text and "NEW DEAD SPOT: top diamonds 5-6" in text
    table = pd.read_csv(out / "cushions.csv")
    assert {"speed_ratio", "segment_shortfall", "rolling_deceleration", "table_lengths_predicted",
            "change_speed_ratio"} <= set(table["measure"])
    assert set(table.loc[table["measure"] == "speed_ratio", "rail"]) == set(RAILS)
    img = cv2.imread(str(out / "rail_map.png"))
    assert img is not None and img.shape[1] > img.shape[0] > 400


def test_command_rejects_a_folder_without_results(tmp_path, capsys):
    (tmp_path / "empty").mkdir()
    assert cushions_cmd.main([str(tmp_path / "empty"), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "has no events.csv" in err and err.count("\n") == 1


def test_session_without_contacts_is_reported_empty(tmp_path):
    doc = {"name": "no cushions", "lead_s": 0.2, "tail_s": 0.2,
           "ball": [{"id": "cue", "kind": "cue", "at": [1000.0, 635.0]}],
           "shot": [{"ball": "cue", "aim": {"heading_deg": 0.0}, "speed_mm_s": 300.0}]}
    folder = write_session(parse_scene(doc), tmp_path / "t")
    check = check_session(load_session([folder], CONFIG), CONFIG, np.random.default_rng(0))
    assert len(check.contacts) == 0 and len(check.bands) == 0 and len(check.segments) == 0
    assert math.isnan(check.lengths_predicted["table_lengths"])


def test_thirty_fps_clip_arrivals_are_measured(tmp_path):
    """At 30 fps the approach window must still hold enough frames to tell a rolling arrival from
    a sliding one (a 0.12 s window holds only three frames there): the same session filmed at 30
    and 60 fps has its arrivals measured alike."""
    checks = {}
    for fps in (30, 60):
        doc = session_doc(np.random.default_rng(30), n_rolled=40, n_free=0, spot_shot_mm_s=None)
        doc["camera"]["fps"] = fps
        scene = parse_scene(doc)
        folder = write_session(scene, tmp_path / f"truth{fps}")
        checks[fps] = check_session(load_session([folder], CONFIG), CONFIG, np.random.default_rng(30))
    rolling = {fps: int((c.contacts["arrival"] == "rolling").sum()) for fps, c in checks.items()}
    # Every shot is struck high so it rolls long before the cushion (common practice: a follow
    # stroke rolls at once); only a few hard shots from close by leave too short an approach.
    assert rolling[60] >= 36, rolling
    assert rolling[30] >= rolling[60] - 1, rolling
    for _, b in checks[30].bands.iterrows():
        # Acceptance of issue 6: within 0.03 of the simulator's truth per speed band.
        assert abs(b["ratio_fit"] - truth_ratio(scene, b["rail"], b["speed_ref_mm_s"])) <= 0.03
