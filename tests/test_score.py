"""Tests of the accuracy scorer (benchmarks/score.py) on analytic truth folders.

The truth clip, 50 frames/s for 3 s on a 9 ft table (2540 x 1270 mm):

* ball "0" (cue) rests, starts at 0.2 s, banks off the top rail then the right rail, and stops;
* ball "2" starts at 0.1 s and runs straight into resting ball "1" (a head-on collision); "2"
  stops dead, "1" runs on and is pocketed.

Paths are piecewise straight lines, so every event time and state is known in closed form.
"""

from __future__ import annotations

import itertools
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from benchmarks.score import (
    collision_pairs,
    format_report,
    main,
    match_frames,
    rotate_events_180,
    rotate_tracks_180,
    score,
)

REPO = Path(__file__).resolve().parents[1]
L, W = 2540.0, 1270.0  # WPA 9 ft playing area (spec/references.md)
D = 57.15  # WPA ball diameter (spec/references.md)
R = D / 2
FPS = 50.0
N_FRAMES = 151
DIAMOND = {"bottom": L / 8, "top": L / 8, "left": W / 4, "right": W / 4}


# --- analytic truth ------------------------------------------------------------------------
def cushion_angle_deg(rail: str, v: tuple[float, float]) -> float:
    """Angle between v and the rail's normal, signed by the format's rule: positive when the
    along-rail component points toward increasing rail coordinate (x on bottom/top, y on
    left/right). Written from spec/results-format.md, independently of the scorer."""
    along, normal = (v[0], v[1]) if rail in ("bottom", "top") else (v[1], v[0])
    return math.copysign(math.degrees(math.atan2(abs(along), abs(normal))), along)


class Ball:
    """A piecewise-linear path: legs (t_start, (x, y), (vx, vy)) until ``t_off`` (leaves the
    table) or the end of the clip."""

    def __init__(self, legs, t_off=math.inf):
        self.legs, self.t_off = legs, t_off

    def state(self, t):
        if t >= self.t_off:
            return None
        leg = [g for g in self.legs if g[0] <= t][-1]
        t0, (x0, y0), (vx, vy) = leg
        return x0 + vx * (t - t0), y0 + vy * (t - t0), vx, vy


def build_truth():
    """(tracks, events, shots) DataFrames of the analytic clip."""
    events = []

    def event(kind, t, track, x, y, other="", rail="", diamond=np.nan, s_in=np.nan, s_out=np.nan,
              a_in=np.nan, a_out=np.nan, e=np.nan):  # fmt: skip
        events.append(dict(t=t, kind=kind, track=track, other=other, x=x, y=y, rail=rail,
                           diamond=diamond, speed_in=s_in, speed_out=s_out, angle_in=a_in,
                           angle_out=a_out, restitution=e))  # fmt: skip

    # Ball 0: cushions at the reversal line R from the nose (simple choice for the test).
    p0, v1 = (500.0, 635.0), (1200.0, 800.0)
    t_start0 = 0.2
    t_c1 = t_start0 + (W - R - p0[1]) / v1[1]
    c1 = (p0[0] + v1[0] * (t_c1 - t_start0), W - R)
    v2 = (0.9 * v1[0], -0.8 * v1[1])
    t_c2 = t_c1 + (L - R - c1[0]) / v2[0]
    c2 = (L - R, c1[1] + v2[1] * (t_c2 - t_c1))
    v3 = (-0.7 * v2[0], 0.95 * v2[1])
    t_stop0 = t_c2 + 0.3
    s0 = (c2[0] + v3[0] * 0.3, c2[1] + v3[1] * 0.3)
    ball0 = Ball([(0.0, p0, (0, 0)), (t_start0, p0, v1), (t_c1, c1, v2), (t_c2, c2, v3),
                  (t_stop0, s0, (0, 0))])  # fmt: skip
    event("start", t_start0, "0", *p0, s_in=0.0, s_out=math.hypot(*v1))
    for t, c, rail, va, vb in ((t_c1, c1, "top", v1, v2), (t_c2, c2, "right", v2, v3)):
        along = c[0] if rail == "top" else c[1]
        normal_in, normal_out = (va[1], vb[1]) if rail == "top" else (va[0], vb[0])
        event("cushion", t, "0", *c, rail=rail, diamond=along / DIAMOND[rail],
              s_in=math.hypot(*va), s_out=math.hypot(*vb), a_in=cushion_angle_deg(rail, va),
              a_out=cushion_angle_deg(rail, vb), e=abs(normal_out / normal_in))  # fmt: skip
    event("stop", t_stop0, "0", *s0, s_in=math.hypot(*v3), s_out=0.0)

    # Balls 2 -> 1 head-on along y = 200; equal masses swap velocities.
    y, x1, x2, u = 200.0, 600.0, 200.0, 1000.0
    t_start2 = 0.1
    t_col = t_start2 + (x1 - D - x2) / u
    t_pocket = t_col + (L - 40.0 - x1) / u
    ball1 = Ball([(0.0, (x1, y), (0, 0)), (t_col, (x1, y), (u, 0))], t_off=t_pocket)
    ball2 = Ball([(0.0, (x2, y), (0, 0)), (t_start2, (x2, y), (u, 0)),
                  (t_col, (x1 - D, y), (0, 0))])  # fmt: skip
    event("start", t_start2, "2", x2, y, s_in=0.0, s_out=u)
    event("collision", t_col, "2", x1 - D, y, other="1", s_in=u, s_out=0.0)
    event("collision", t_col, "1", x1, y, other="2", s_in=0.0, s_out=u)
    event("stop", t_col, "2", x1 - D, y, s_in=u, s_out=0.0)
    event("pocket", t_pocket, "1", L - 40.0, y, s_in=u, s_out=u)

    rows = []
    for f in range(N_FRAMES):
        t = f / FPS
        for track, ball, label in (("0", ball0, "cue"), ("1", ball1, "object"),
                                   ("2", ball2, "object")):  # fmt: skip
            st = ball.state(t)
            if st is not None:
                rows.append(dict(frame=f, t=t, track=track, ball=label, x=st[0], y=st[1],
                                 vx=st[2], vy=st[3], seen=1))  # fmt: skip
    tracks = pd.DataFrame(rows)
    ev = pd.DataFrame(events).sort_values("t", kind="stable").reset_index(drop=True)
    ev.insert(0, "shot", 0)
    ev.insert(0, "event", np.arange(len(ev)))
    shots = pd.DataFrame(
        {"shot": [0], "t_start": [t_start2], "t_end": [t_stop0], "cue_track": ["0"]}
    )
    return tracks, ev, shots


def write_folder(path: Path, tracks, events, shots, calibration=True) -> Path:
    path.mkdir(parents=True, exist_ok=True)
    tracks.to_csv(path / "tracks.csv", index=False)
    events.to_csv(path / "events.csv", index=False)
    shots.to_csv(path / "shots.csv", index=False)
    if calibration:
        cal = {"table": {"length_mm": L, "width_mm": W, "ball_mm": D},
               "homography": [[1, 0, 0], [0, 1, 0], [0, 0, 1]]}  # fmt: skip
        (path / "calibration.json").write_text(json.dumps(cal))
    return path


@pytest.fixture(scope="module")
def truth_data():
    return build_truth()


@pytest.fixture
def truth_dir(tmp_path, truth_data):
    return write_folder(tmp_path / "truth", *truth_data)


def results_dir(tmp_path, tracks, events, shots, calibration=False):
    return write_folder(tmp_path / "results", tracks, events, shots, calibration=calibration)


# --- tests ---------------------------------------------------------------------------------
def test_truth_construction_is_consistent(truth_data):
    # Guards the fixture itself: cushion rows sit where the tracks say the ball turns.
    tracks, events, _ = truth_data
    cushions = events[events["kind"] == "cushion"]
    assert list(cushions["rail"]) == ["top", "right"]
    assert cushions["y"].iloc[0] == pytest.approx(W - R, abs=1e-9)
    assert cushions["x"].iloc[1] == pytest.approx(L - R, abs=1e-9)
    assert cushions["restitution"].tolist() == pytest.approx([0.8, 0.7], abs=1e-12)
    assert tracks["x"].between(0, L).all() and tracks["y"].between(0, W).all()
    # No two balls closer than a diameter except at the collision, so the gate is unambiguous.
    for _, g in tracks.groupby("frame"):
        xy = g[["x", "y"]].to_numpy()
        d = np.hypot(*(xy[:, None] - xy[None]).transpose(2, 0, 1))
        assert (d[np.triu_indices(len(xy), 1)] >= D - 1e-9).all()


def test_truth_against_itself_is_perfect(tmp_path, truth_data, truth_dir):
    s = score(results_dir(tmp_path, *truth_data), truth_dir)
    tr = s["tracks"]
    assert s["frame"]["chosen"] == "identity"
    assert tr["matched"] == tr["truth_rows"] == tr["result_rows"] == len(truth_data[0])
    assert (tr["misses"], tr["false_positives"], tr["id_switches"]) == (0, 0, 0)
    assert tr["recall"] == tr["precision"] == tr["mota"] == 1.0
    assert tr["identity_map"] == {"0": "0", "1": "1", "2": "2"}
    for part in ("all", "moving", "resting", "seen"):
        assert s["position_error_mm"][part]["max"] == 0.0
    assert s["position_error_mm"]["unseen"]["n"] == 0
    assert s["position_error_mm"]["unseen"]["median"] is None
    assert s["truth_frame_interval_s"] == pytest.approx(1 / FPS, abs=1e-12)
    expected_counts = {"cushion": 2, "collision": 1, "pocket": 1, "start": 2, "stop": 2}
    for kind, n in expected_counts.items():
        e = s["events"][kind]
        assert (e["truth"], e["results"], e["matched"]) == (n, n, n), kind
        assert e["recall"] == e["precision"] == 1.0, kind
        for name, st in e["errors"].items():
            worst = st["max"] if "max" in st else st["max_abs"]
            assert worst == 0.0, (kind, name)
    # JSON-ready, NaN-free.
    json.dumps(s, allow_nan=False)


def test_rotated_results_score_perfect_and_report_the_frame(tmp_path, truth_data, truth_dir):
    tracks, events, shots = truth_data
    s = score(results_dir(tmp_path, rotate_tracks_180(tracks, L, W),
                          rotate_events_180(events, L, W), shots), truth_dir)  # fmt: skip
    assert s["frame"]["chosen"] == "rotated_180"
    assert s["frame"]["candidates"]["rotated_180"]["matched"] == len(tracks)
    assert s["tracks"]["recall"] == 1.0 and s["tracks"]["id_switches"] == 0
    assert s["position_error_mm"]["all"]["max"] == pytest.approx(0.0, abs=1e-9)
    assert s["velocity_error_mm_s"]["max"] == pytest.approx(0.0, abs=1e-9)
    for kind, e in s["events"].items():
        assert e["recall"] == e["precision"] == 1.0, kind
        for name, st in e["errors"].items():
            worst = st["max"] if "max" in st else st["max_abs"]
            assert worst == pytest.approx(0.0, abs=1e-9), (kind, name)
    assert "rotated 180" in format_report(s)


def test_rotation_matches_the_sign_rule_and_is_an_involution(truth_data):
    tracks, events, _ = truth_data
    turned = rotate_events_180(events, L, W)
    back = rotate_events_180(turned, L, W)
    cols = ["x", "y", "diamond", "angle_in", "angle_out", "restitution"]
    np.testing.assert_allclose(back[cols].to_numpy(float), events[cols].to_numpy(float),
                               atol=1e-9)  # fmt: skip
    assert back["rail"].tolist() == events["rail"].tolist()
    assert turned.loc[events["kind"] == "cushion", "rail"].tolist() == ["bottom", "left"]
    # Recompute each cushion's angles from the turned velocities with the format's own rule.
    tt = rotate_tracks_180(tracks, L, W)
    for _, row in turned[turned["kind"] == "cushion"].iterrows():
        ball = tt[tt["track"] == row["track"]]
        before = ball[ball["t"] < row["t"]].iloc[-1]
        after = ball[ball["t"] > row["t"]].iloc[0]
        v_in, v_out = (before["vx"], before["vy"]), (after["vx"], after["vy"])
        assert row["angle_in"] == pytest.approx(cushion_angle_deg(row["rail"], v_in), abs=1e-9)
        assert row["angle_out"] == pytest.approx(cushion_angle_deg(row["rail"], v_out), abs=1e-9)
        along = row["x"] if row["rail"] in ("bottom", "top") else row["y"]
        assert row["diamond"] == pytest.approx(along / DIAMOND[row["rail"]], abs=1e-12)


def test_known_perturbation_comes_out_exactly(tmp_path, truth_data, truth_dir):
    tracks, events, shots = truth_data
    res_t, res_e = tracks.copy(), events.copy()
    res_t["x"] += 3.0
    res_e["x"] += 3.0
    long_rail = res_e["rail"].isin(["bottom", "top"])
    res_e.loc[long_rail, "diamond"] += 3.0 / (L / 8)
    res_e["t"] += 0.004
    res_e["speed_in"] *= 1.05
    res_e["angle_out"] += 1.5
    s = score(results_dir(tmp_path, res_t, res_e, shots), truth_dir)
    assert s["frame"]["chosen"] == "identity"
    pos = s["position_error_mm"]
    for part in ("all", "moving", "resting"):
        for stat in ("median", "p95", "max"):
            assert pos[part][stat] == pytest.approx(3.0, abs=1e-9), (part, stat)
    assert pos["moving"]["n"] + pos["resting"]["n"] == len(tracks)
    assert s["tracks"]["motp_mm"] == pytest.approx(3.0, abs=1e-9)
    cu = s["events"]["cushion"]["errors"]
    assert cu["position_mm"]["max"] == pytest.approx(3.0, abs=1e-9)
    assert cu["position_mm"]["median"] == pytest.approx(3.0, abs=1e-9)
    # Top rail runs along x (+3 mm), right rail along y (0 mm).
    assert cu["along_mm"]["max_abs"] == pytest.approx(3.0, abs=1e-9)
    assert cu["along_mm"]["median"] == pytest.approx(1.5, abs=1e-9)
    assert cu["along_diamonds"]["max_abs"] == pytest.approx(3.0 / (L / 8), abs=1e-12)
    for stat in ("median", "max_abs", "median_abs"):
        assert cu["time_ms"][stat] == pytest.approx(4.0, abs=1e-6)
        assert cu["time_frames"][stat] == pytest.approx(0.004 * FPS, abs=1e-6)
        assert cu["speed_in_pct"][stat] == pytest.approx(5.0, abs=1e-9)
        assert cu["angle_out_deg"][stat] == pytest.approx(1.5, abs=1e-9)
    for name in ("speed_out_pct", "angle_in_deg", "restitution"):
        assert cu[name]["max_abs"] == pytest.approx(0.0, abs=1e-9), name
    for kind in ("collision", "pocket", "start", "stop"):
        e = s["events"][kind]
        assert e["recall"] == 1.0, kind
        assert e["errors"]["time_ms"]["median"] == pytest.approx(4.0, abs=1e-6), kind


def test_positions_beyond_the_gate_do_not_match(tmp_path, truth_data, truth_dir):
    tracks, events, shots = truth_data
    # Shift across y: the balls on y = 200 then never land near another truth ball (a shift
    # along x would legitimately put ball 2 on ball 1 at the collision).
    inside, outside = tracks.copy(), tracks.copy()
    inside["y"] += D - 0.01
    outside["y"] += D + 0.01
    s_in = score(results_dir(tmp_path / "a", inside, events, shots), truth_dir)
    s_out = score(results_dir(tmp_path / "b", outside, events, shots), truth_dir)
    assert s_in["tracks"]["recall"] == 1.0
    assert s_out["tracks"]["matched"] == 0
    assert s_out["tracks"]["misses"] == s_out["tracks"]["false_positives"] == len(tracks)
    assert s_out["tracks"]["recall"] == 0.0 and s_out["tracks"]["motp_mm"] is None
    # Without an identity map no event can be attributed to a truth ball.
    assert s_out["events"]["cushion"]["recall"] == 0.0
    # A wider gate brings them back.
    s_wide = score(results_dir(tmp_path / "b", outside, events, shots), truth_dir, gate_mm=60.0)
    assert s_wide["tracks"]["recall"] == 1.0
    # Only ball 0 beyond the gate: the solver still pairs it in frames with other balls, but
    # such pairs must be dropped, not counted.
    one = tracks.copy()
    is0 = one["track"] == "0"
    one.loc[is0, "y"] += D + 0.01
    s_one = score(results_dir(tmp_path / "c", one, events, shots), truth_dir)
    n0 = int(is0.sum())
    tr = s_one["tracks"]
    assert (tr["matched"], tr["misses"], tr["false_positives"]) == (len(tracks) - n0, n0, n0)
    assert s_one["position_error_mm"]["all"]["max"] == 0.0
    assert tr["identity_map"] == {"1": "1", "2": "2"}


def _frame_table(points, track_prefix):
    return pd.DataFrame({"frame": [0] * len(points), "track": [f"{track_prefix}{i}" for i in
                         range(len(points))], "x": [p[0] for p in points],
                         "y": [p[1] for p in points]})  # fmt: skip


def test_frame_matching_prefers_more_pairs_then_less_distance():
    # The cheapest single pair (T2-R1, 1 mm) would block a second pair; the scorer must keep the
    # two 55 mm pairs (most admissible pairs first, as in CLEAR-MOT's one-to-one mapping).
    truth = _frame_table([(0.0, 0.0), (56.0, 0.0)], "T")
    res = _frame_table([(55.0, 0.0), (111.0, 0.0)], "R")
    m = match_frames(truth, res, gate_mm=D)
    assert sorted(zip(m["truth_track"], m["result_track"])) == [("T0", "R0"), ("T1", "R1")]
    np.testing.assert_allclose(m["error_mm"], [55.0, 55.0], atol=1e-12)


def test_frame_matching_agrees_with_brute_force():
    # Cross-check against exhaustive search over all one-to-one partial matchings.
    rng = np.random.default_rng(7)
    for _ in range(150):
        tp = rng.uniform(0, 150, size=(rng.integers(0, 5), 2))
        rp = rng.uniform(0, 150, size=(rng.integers(0, 5), 2))
        m = match_frames(_frame_table(tp, "T"), _frame_table(rp, "R"), gate_mm=D)
        best = (0, 0.0)
        for k in range(1, min(len(tp), len(rp)) + 1):
            for ti in itertools.combinations(range(len(tp)), k):
                for ri in itertools.permutations(range(len(rp)), k):
                    d = [math.dist(tp[a], rp[b]) for a, b in zip(ti, ri)]
                    if max(d) <= D and (k, -sum(d)) > (best[0], -best[1]):
                        best = (k, sum(d))
        assert len(m) == best[0]
        assert m["error_mm"].sum() == pytest.approx(best[1], abs=1e-9)


@pytest.mark.parametrize(
    "segments, expected",
    [([(60, N_FRAMES)], 2), ([(60, 80)], 4), ([(40, 50), (60, 70)], 8)],
)
def test_identity_swaps_count_exactly(tmp_path, truth_data, truth_dir, segments, expected):
    # Tracks 1 and 2 are both on the table in frames 0..117; relabel them inside each segment.
    tracks, events, shots = truth_data
    res = tracks.copy()
    for a, b in segments:
        inside = res["frame"].between(a, b - 1) & res["track"].isin(["1", "2"])
        res.loc[inside, "track"] = res.loc[inside, "track"].map({"1": "2", "2": "1"})
    s = score(results_dir(tmp_path, res, events, shots), truth_dir)
    assert s["tracks"]["id_switches"] == expected
    assert s["tracks"]["recall"] == 1.0
    assert s["position_error_mm"]["all"]["max"] == 0.0
    n = len(tracks)
    assert s["tracks"]["mota"] == pytest.approx(1.0 - expected / n, abs=1e-12)


def test_dropped_and_extra_cushions_change_recall_and_precision(tmp_path, truth_data, truth_dir):
    tracks, events, shots = truth_data
    cushions = events.index[events["kind"] == "cushion"]
    dropped = events.drop(index=cushions[0])
    s = score(results_dir(tmp_path / "a", tracks, dropped, shots), truth_dir)
    cu = s["events"]["cushion"]
    assert (cu["matched"], cu["recall"], cu["precision"]) == (1, 0.5, 1.0)

    extra_far = events.loc[[cushions[0]]].assign(t=events.loc[cushions[0], "t"] + 0.5)
    wrong_rail = events.loc[[cushions[0]]].assign(rail="bottom")  # right time, wrong rail
    for name, extra in (("far", extra_far), ("rail", wrong_rail)):
        ev = pd.concat([events, extra]).sort_values("t", kind="stable")
        s = score(results_dir(tmp_path / name, tracks, ev, shots), truth_dir)
        cu = s["events"]["cushion"]
        assert (cu["results"], cu["matched"]) == (3, 2), name
        assert cu["recall"] == 1.0, name
        assert cu["precision"] == pytest.approx(2 / 3, abs=1e-15), name


def test_starts_and_stops_recall_and_precision_from_hand_made_tables(tmp_path, truth_data,
                                                                     truth_dir):  # fmt: skip
    # The results format's definitions (spec/results-format.md): a start is a resting ball set
    # moving by the cue, a stop a ball coming to rest. The truth clip has two of each (balls 0
    # and 2 start and stop; ball 1 is set moving by a collision and pocketed, so neither). Each
    # results table below is edited by hand from the truth's and its counts worked out by hand:
    # recall = matched / truth events, precision = matched / result events (common practice).
    tracks, events, shots = truth_data
    starts = events.index[events["kind"] == "start"]
    stops = events.index[events["kind"] == "stop"]
    ball2_stop = stops[events.loc[stops, "track"] == "2"][0]

    def scored(name, ev):
        ev = ev.sort_values("t", kind="stable")
        return score(results_dir(tmp_path / name, tracks, ev, shots), truth_dir)["events"]

    # Ball 2's stop left out: 1 of 2 stops found, the one written is right.
    e = scored("no_stop", events.drop(index=ball2_stop))
    assert (e["stop"]["truth"], e["stop"]["results"], e["stop"]["matched"]) == (2, 1, 1)
    assert (e["stop"]["recall"], e["stop"]["precision"]) == (0.5, 1.0)
    assert e["start"]["recall"] == e["start"]["precision"] == 1.0
    # Ball 2's stop written for ball 1 instead (rolling on to the pocket then): it matches no
    # truth stop, so recall and precision are both 1 of 2.
    moved = events["track"].mask(events.index == ball2_stop, "1")
    e = scored("wrong_ball", events.assign(track=moved))
    assert (e["stop"]["results"], e["stop"]["matched"]) == (2, 1)
    assert (e["stop"]["recall"], e["stop"]["precision"]) == (0.5, 0.5)
    # A start for ball 1 at the collision: set moving by ball 2, not by the cue, so it is no
    # start by the format's definition: precision 2 of 3, recall still 2 of 2.
    col = events.index[(events["kind"] == "collision") & (events["track"] == "1")][0]
    false_start = events.loc[[col]].assign(kind="start", other="")
    e = scored("false_start", pd.concat([events, false_start]))
    assert (e["start"]["truth"], e["start"]["results"], e["start"]["matched"]) == (2, 3, 2)
    assert e["start"]["recall"] == 1.0
    assert e["start"]["precision"] == pytest.approx(2 / 3, abs=1e-15)
    # Both starts missing, and a stop just outside the event window (0.1 s): nothing to match.
    late = events.drop(index=starts)
    late.loc[ball2_stop, "t"] += 0.1 + 1e-6
    e = scored("late", late)
    st = e["start"]
    assert (st["truth"], st["results"], st["recall"], st["precision"]) == (2, 0, 0.0, None)
    assert (e["stop"]["matched"], e["stop"]["recall"], e["stop"]["precision"]) == (1, 0.5, 0.5)


def test_cushion_just_outside_the_window_is_missed(tmp_path, truth_data, truth_dir):
    tracks, events, shots = truth_data
    ev = events.copy()
    first = ev.index[ev["kind"] == "cushion"][0]
    ev.loc[first, "t"] += 0.1 + 1e-6
    s = score(results_dir(tmp_path, tracks, ev, shots), truth_dir)
    assert s["events"]["cushion"]["matched"] == 1
    s = score(results_dir(tmp_path, tracks, ev, shots), truth_dir, window_s=0.2)
    assert s["events"]["cushion"]["matched"] == 2


def test_collisions_count_once_per_pair(tmp_path, truth_data, truth_dir):
    tracks, events, shots = truth_data
    assert len(collision_pairs(events)) == 1
    # Results that write a collision only once, from the other ball's side, still match.
    col = events.index[events["kind"] == "collision"]
    one_row = events.drop(index=col[0])
    s = score(results_dir(tmp_path / "a", tracks, one_row, shots), truth_dir)
    c = s["events"]["collision"]
    assert (c["truth"], c["results"], c["matched"], c["recall"]) == (1, 1, 1, 1.0)
    # Rows of one collision up to 1 ms apart (the scorer's dedupe rule) collapse to one pair; a
    # second contact 2 ms later is a separate collision.
    for name, dt, n_pairs in (("near", 0.0009, 1), ("far", 0.002, 2)):
        again = events.loc[[col[0]]].assign(t=events.loc[col[0], "t"] + dt)
        ev = pd.concat([events, again]).sort_values("t", kind="stable")
        s = score(results_dir(tmp_path / name, tracks, ev, shots), truth_dir)
        c = s["events"]["collision"]
        assert (c["results"], c["matched"]) == (n_pairs, 1), name
        assert c["precision"] == 1 / n_pairs, name


def test_empty_folders_are_normal(tmp_path, truth_data):
    tracks, events, shots = truth_data
    no_events = events.iloc[0:0]
    truth = write_folder(tmp_path / "truth", tracks, no_events, shots)
    s = score(results_dir(tmp_path, tracks, no_events, shots), truth)
    for kind, e in s["events"].items():
        assert (e["truth"], e["results"], e["recall"], e["precision"]) == (0, 0, None, None)
        assert e["errors"]["time_ms"]["n"] == 0 and e["errors"]["time_ms"]["median_abs"] is None
    # Results with no balls at all: recall 0, precision undefined, errors None.
    s = score(results_dir(tmp_path / "x", tracks.iloc[0:0], events, shots.iloc[0:0]), truth)
    assert s["tracks"]["recall"] == 0.0 and s["tracks"]["precision"] is None
    assert s["position_error_mm"]["all"]["median"] is None
    assert s["events"]["cushion"]["precision"] == 0.0
    json.dumps(s, allow_nan=False)
    assert "cushion" in format_report(s)


def test_table_size_falls_back_to_the_results_calibration(tmp_path, truth_data):
    tracks, events, shots = truth_data
    truth = write_folder(tmp_path / "truth", tracks, events, shots, calibration=False)
    res = results_dir(tmp_path, tracks, events, shots, calibration=True)
    s = score(res, truth)
    assert s["table"] == {"length_mm": L, "width_mm": W, "source": "results"}
    (res / "calibration.json").unlink()
    with pytest.raises(ValueError, match="table.length_mm"):
        score(res, truth)


def test_bad_parameters_raise(tmp_path, truth_data, truth_dir):
    res = results_dir(tmp_path, *truth_data)
    with pytest.raises(ValueError, match="gate_mm must be a positive number, got -1"):
        score(res, truth_dir, gate_mm=-1)


def test_cli_prints_report_and_writes_json(tmp_path, truth_data, truth_dir, capsys):
    tracks, events, shots = truth_data
    res = results_dir(tmp_path, rotate_tracks_180(tracks, L, W),
                      rotate_events_180(events, L, W), shots)  # fmt: skip
    out_json = tmp_path / "score.json"
    assert main([str(res), str(truth_dir), "--json", str(out_json), "--gate-mm", "40",
                 "--window-s", "0.05"]) == 0  # fmt: skip
    printed = capsys.readouterr().out
    assert "rotated 180" in printed and "identity switches 0" in printed
    written = json.loads(out_json.read_text())
    assert written["params"]["gate_mm"] == 40.0 and written["params"]["window_s"] == 0.05
    assert written == score(res, truth_dir, gate_mm=40.0, window_s=0.05)


@pytest.mark.parametrize(
    "damage, needle",
    [
        (lambda d: (d / "events.csv").unlink(), "events.csv: file not found"),
        (lambda d: pd.read_csv(d / "tracks.csv").drop(columns="vy").to_csv(
            d / "tracks.csv", index=False), "tracks.csv: missing column 'vy'"),
        (lambda d: pd.read_csv(d / "events.csv").drop(columns="rail").to_csv(
            d / "events.csv", index=False), "events.csv: missing column 'rail'"),
        (lambda d: pd.read_csv(d / "tracks.csv").assign(x="oops").to_csv(
            d / "tracks.csv", index=False), "column 'x' must be numeric, found 'oops'"),
    ],
    ids=["missing-file", "missing-track-column", "missing-event-column", "non-numeric"],
)
def test_cli_bad_input_exits_2_with_one_line(tmp_path, truth_data, truth_dir, capsys, damage,
                                             needle):  # fmt: skip
    res = results_dir(tmp_path, *truth_data)
    damage(res)
    assert main([str(res), str(truth_dir)]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    assert needle in captured.err
    assert len(captured.err.strip().splitlines()) == 1


def test_script_runs_as_a_program(tmp_path, truth_data, truth_dir):
    res = results_dir(tmp_path, *truth_data)
    (res / "shots.csv").unlink()
    proc = subprocess.run([sys.executable, str(REPO / "benchmarks" / "score.py"), str(res),
                           str(truth_dir)], capture_output=True, text=True, timeout=60)  # fmt: skip
    assert proc.returncode == 2
    assert "shots.csv: file not found" in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
