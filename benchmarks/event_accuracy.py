"""Cushion-contact and collision accuracy of ``tracking`` on simulated shots.

Ground truth is our own event-based simulator (``analysis.physics``): sliding and rolling motion
(Alciatore 2004: a sliding ball decelerates at ``mu_s g`` along a constant slip direction until it
rolls, then at ``mu_r g`` along its velocity), cushion impacts of Mathavan, Jackson & Parkin (2010)
and ball-ball impacts with throw. Each shot is

* a bank of the cue ball into a chosen rail at a chosen angle (0-70 degrees from the normal),
  speed 0.3-4 m/s, tip offsets giving draw, stun, follow and side spin; or
* a cut of the cue ball into an object ball (cut angle up to 50 degrees), both then running on
  to the cushions;

on a 9 ft, 8 ft or 7 ft table (``vision.table`` presets) with cloth friction drawn from the ranges
of ``shared/spec/references.md`` (sliding 0.15-0.3, rolling 0.007-0.014). Frames are sampled at
``fps`` (60, 30 and 120 fps); each detection is the mean centre over the exposure (a 180-degree
shutter, half the frame interval: a blur streak's centroid) plus Gaussian noise of 1 mm per axis
at rest and 2.5 mm moving, and 2 % of detections are dropped at random.

Detections go through ``tracking.tracker.track`` and ``tracking.events.find_events``; the result
is compared with the simulator's events under the definitions of ``railtrace.filming.truth_events``
(cushion ``x, y`` on the reversal line; angles and restitution by ``vision.table.cushion_angles``
on the velocities just before and after). Result tracks are mapped to truth balls by median
distance; a result event matches the truth event of the same ball (and rail, or other ball)
nearest in time within 0.1 s, one to one.

Printed per frame rate: cushion recall and precision (all truth contacts, and the ones a camera
can see: incoming normal speed above 100 mm/s, the ``min_velocity_change_mm_s`` scale); median
and p95 of the absolute errors in time (in frame intervals), along-rail position (mm), speed in
and out (relative), angle in and out (degrees) and restitution (the errors out over the contacts
that have a departure: a ball seen reaching a cushion and then not again has none); collision
recall, precision and time error; the missed and extra contacts (an extra one beside a jaw tip
that the simulated ball met, which the results format has no kind for and the truth leaves out,
says so, with how far past the end of the rail's cushion the ball's centre was). Acceptance
targets (issue "Follow every ball and time every contact") are printed
beside them.

``--shutter F`` keeps the shutter open for that share of the frame interval instead of half
(1: open the whole frame, as dim rooms and 30 fps cameras often film). Signed medians of the
speed-out and restitution errors are printed beside the absolute ones (a bias they hide).

``--line-shift-mm D`` stretches the detections about the table's centre so that the balls turn
D mm beyond every rail's reversal line (negative: short of it), as a calibration off by that much
at the cushions places them.

Run: ``.venv/bin/python benchmarks/event_accuracy.py [--shots N] [--fps 60 30 120] [--seed S]
[--line-shift-mm D] [--shutter F]``.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from analysis.physics import PhysicsParams, Simulator, Strike  # noqa: E402
from tracking.events import find_events  # noqa: E402
from tracking.tracker import track  # noqa: E402
from vision.table import (  # noqa: E402
    EIGHT_FOOT,
    NINE_FOOT,
    RAILS,
    SEVEN_FOOT,
    TableSpec,
    cushion_angles,
    rail_direction,
    rail_inward_normal,
)

TABLES = (NINE_FOOT, EIGHT_FOOT, SEVEN_FOOT)
# Tip offsets (side, height) in ball radii: draw, stun, a little follow, natural roll (0.4,
# Alciatore 2004), and side spin with each.
SPINS = ((0.0, -0.4), (0.0, 0.0), (0.0, 0.2), (0.0, 0.4), (0.3, 0.0), (-0.3, 0.3), (0.3, -0.3))
LEAD_S = 0.3  # clip time before the strike, s
MAX_AFTER_S = 3.0  # clip time kept after the strike, s
VISIBLE_NORMAL_SPEED_MM_S = 100.0

# Acceptance targets (issue "Follow every ball and time every contact").
TARGETS = {
    "cushion recall": ">= 0.98", "cushion precision": ">= 0.98",
    "along_mm": "median <= 4, p95 <= 12", "t_frames": "median <= 0.25",
    "speed_in": "median <= 0.03", "speed_out": "median <= 0.03",
    "angle_in": "median <= 1", "angle_out": "median <= 1", "restitution": "median <= 0.03",
    "collision recall": ">= 0.95", "collision t_frames": "within 0.5",
}


@dataclass(frozen=True)
class Shot:
    """One simulated shot: its table, physics, resting balls {id: (x, y) mm} and the strike."""

    table: TableSpec
    params: PhysicsParams
    balls: dict
    strike: Strike
    label: str


def _inside(table: TableSpec, xy, margin: float) -> bool:
    """Centre at least ``margin`` mm inside every reversal line and clear of the pocket mouths."""
    x, y = xy
    d = table.reversal_offset_mm + margin
    if not (d <= x <= table.length_mm - d and d <= y <= table.width_mm - d):
        return False
    return all(math.hypot(x - p.mouth_centre[0], y - p.mouth_centre[1]) > 250.0
               for p in table.pockets())


def bank_shot(rng: np.random.Generator, table: TableSpec, params: PhysicsParams) -> Shot | None:
    """Cue ball sent into a random rail at a random angle; None if it would start off the cloth."""
    rail = RAILS[int(rng.integers(4))]
    n_in = np.asarray(rail_inward_normal(rail))
    along_u = np.asarray(rail_direction(rail))
    span = table.length_mm if rail in ("bottom", "top") else table.width_mm
    s = rng.uniform(0.15, 0.85) * span
    c = table.reversal_line(rail)
    contact = np.array([s, c]) if rail in ("bottom", "top") else np.array([c, s])
    angle = math.radians(rng.uniform(0.0, 70.0)) * (1 if rng.random() < 0.5 else -1)
    u = math.cos(angle) * (-n_in) + math.sin(angle) * along_u  # heading into the rail
    speed = float(np.exp(rng.uniform(math.log(300.0), math.log(4000.0))))
    # Start a distance the ball can cover, rolling, with at least 60 % of its speed left.
    reach = 0.64 * speed**2 / (2 * params.mu_roll * params.g_mm_s2)
    dist = rng.uniform(150.0, min(900.0, max(160.0, reach)))
    start = contact - dist * u
    if not _inside(table, start, 40.0):
        return None
    side, height = SPINS[int(rng.integers(len(SPINS)))]
    strike = Strike("cue", speed, math.atan2(u[1], u[0]), side, height)
    label = f"bank {rail} {math.degrees(angle):+.0f}deg {speed:.0f}mm/s tip({side},{height})"
    return Shot(table, params, {"cue": tuple(start)}, strike, label)


def cut_shot(rng: np.random.Generator, table: TableSpec, params: PhysicsParams) -> Shot | None:
    """Cue ball cut into a resting object ball; None if a ball would start off the cloth."""
    D = table.ball_diameter_mm
    obj = np.array([rng.uniform(0.25, 0.75) * table.length_mm,
                    rng.uniform(0.25, 0.75) * table.width_mm])
    heading = rng.uniform(-math.pi, math.pi)
    u = np.array([math.cos(heading), math.sin(heading)])
    cut = math.radians(rng.uniform(-50.0, 50.0))
    n = np.array([math.cos(heading + cut), math.sin(heading + cut)])  # line of centres
    ghost = obj - D * n
    cue = ghost - rng.uniform(150.0, 600.0) * u
    if not (_inside(table, cue, 40.0) and _inside(table, obj, 40.0)):
        return None
    if np.hypot(*(cue - obj)) < D + 1.0:
        return None
    speed = float(rng.uniform(1200.0, 4000.0))
    side, height = SPINS[int(rng.integers(len(SPINS)))]
    strike = Strike("cue", speed, heading, side, height)
    label = f"cut {math.degrees(cut):+.0f}deg {speed:.0f}mm/s tip({side},{height})"
    return Shot(table, params, {"cue": tuple(cue), "obj": tuple(obj)}, strike, label)


def random_shots(rng: np.random.Generator, n: int, collision_fraction: float = 0.3) -> list[Shot]:
    """``n`` shots on random tables and cloths (see the module docstring)."""
    out = []
    while len(out) < n:
        table = TABLES[int(rng.integers(len(TABLES)))]
        params = PhysicsParams(mu_slide=float(rng.uniform(0.15, 0.3)),
                               mu_roll=float(rng.uniform(0.007, 0.014)))
        make = cut_shot if rng.random() < collision_fraction else bank_shot
        shot = make(rng, table, params)
        if shot is not None:
            out.append(shot)
    return out


def simulate(shot: Shot):
    """The shot's trajectory, struck at ``LEAD_S``; returns (trajectory, clip end time s)."""
    sim = Simulator(shot.table, shot.params, shot.balls)
    sim.strike(LEAD_S, shot.strike)
    t_rest = sim.run_until_rest(t_max=60.0)
    return sim.trajectory(), min(t_rest + 0.3, LEAD_S + MAX_AFTER_S)


def detections(traj, t_end: float, fps: float, rng: np.random.Generator,
               rest_sigma_mm: float = 1.0, moving_sigma_mm: float = 2.5, drop: float = 0.02,
               shutter_fraction: float = 0.5, subsamples: int = 5) -> pd.DataFrame:
    """Detections DataFrame (``frame, t, x, y, sigma_mm, pattern, colour, truth``) of every ball.

    Each detection is the mean centre over the exposure (``shutter_fraction`` of the frame
    interval, centred on the frame's time, ``subsamples`` instants) plus Gaussian noise.
    """
    times = np.arange(int(math.floor(t_end * fps)) + 1) / fps
    off = (np.arange(subsamples) + 0.5) / subsamples - 0.5
    sub = (times[:, None] + off[None, :] * shutter_fraction / fps).ravel()
    order = np.argsort(sub, kind="stable")
    s = traj.sample(np.clip(sub[order], 0.0, None))
    pos = np.empty_like(s.pos)
    pos[order] = s.pos
    vel = np.empty_like(s.vel)
    vel[order] = s.vel
    present = np.empty_like(s.present)
    present[order] = s.present
    T, B = len(times), len(traj.ball_ids)
    pos = pos.reshape(T, subsamples, B, 2).mean(axis=1)
    speed = np.hypot(*vel.reshape(T, subsamples, B, 2).mean(axis=1).transpose(2, 0, 1))
    present = present.reshape(T, subsamples, B).all(axis=1)
    rows = []
    for j, ball in enumerate(traj.ball_ids):
        keep = present[:, j] & (rng.random(T) >= drop)
        sig = np.where(speed[:, j] > 1.0, moving_sigma_mm, rest_sigma_mm)[keep]
        xy = pos[keep, j] + rng.normal(0.0, 1.0, (int(keep.sum()), 2)) * sig[:, None]
        rows.append(pd.DataFrame(dict(
            frame=np.flatnonzero(keep), t=times[keep], x=xy[:, 0], y=xy[:, 1], sigma_mm=sig,
            pattern="cue" if ball == "cue" else "solid",
            colour="white" if ball == "cue" else "red", truth=ball)))
    return pd.concat(rows, ignore_index=True).sort_values(["frame", "truth"]).reset_index(
        drop=True)


def truth_events(table: TableSpec, traj, t_end: float) -> pd.DataFrame:
    """Cushion and collision events of the simulation up to ``t_end``, as
    ``railtrace.filming.truth_events`` defines them (ball ids kept as names)."""
    rows = []
    for ev in traj.events:
        if ev.kind not in ("cushion", "collision") or ev.t > t_end:
            continue
        row = dict(t=ev.t, kind=ev.kind, ball=ev.ball, other=ev.other, rail=ev.rail,
                   x=ev.pos[0], y=ev.pos[1], speed_in=float(np.hypot(*ev.vel_in)),
                   speed_out=float(np.hypot(*ev.vel_out)), vn_in=math.nan)
        if ev.kind == "cushion":
            a_in, a_out, e = cushion_angles(ev.rail, np.array(ev.vel_in), np.array(ev.vel_out))
            row.update(angle_in=a_in, angle_out=a_out, restitution=e,
                       vn_in=-float(np.asarray(ev.vel_in) @ np.asarray(
                           rail_inward_normal(ev.rail))))
        rows.append(row)
    return pd.DataFrame(rows, columns=["t", "kind", "ball", "other", "rail", "x", "y",
                                       "speed_in", "speed_out", "vn_in", "angle_in",
                                       "angle_out", "restitution"])


def track_names(tracks: pd.DataFrame, traj) -> dict[int, str]:
    """Result track id -> truth ball id, by the smallest median distance over the track."""
    s = traj.sample(np.sort(tracks["t"].unique()))
    t_index = {t: k for k, t in enumerate(np.sort(tracks["t"].unique()))}
    out = {}
    for tid, g in tracks.groupby("track"):
        k = np.array([t_index[t] for t in g["t"]])
        xy = g[["x", "y"]].to_numpy(float)
        best = None
        for j, ball in enumerate(traj.ball_ids):
            d = np.hypot(*(s.pos[k, j] - xy).T)
            m = float(np.nanmedian(d)) if np.isfinite(d).any() else math.inf
            if best is None or m < best[0]:
                best = (m, ball)
        out[int(tid)] = best[1]
    return out


def match(res: pd.DataFrame, truth: pd.DataFrame, window_s: float = 0.1):
    """One-to-one greedy matching by time of result to truth events with the same key."""
    pairs = []
    for i, r in truth.iterrows():
        for j, q in res.iterrows():
            if q["key"] == r["key"] and abs(q["t"] - r["t"]) <= window_s:
                pairs.append((abs(q["t"] - r["t"]), i, j))
    pairs.sort()
    used_t, used_r, out = set(), set(), []
    for _, i, j in pairs:
        if i in used_t or j in used_r:
            continue
        used_t.add(i)
        used_r.add(j)
        out.append((i, j))
    return out


def _jaw_beside(table: TableSpec, traj, t: float, key, window_s: float = 0.1) -> tuple:
    """For an unmatched result contact ``key`` (ball, rail) at ``t`` s: ``("jaw tip", d)`` if the
    simulation has that ball meet a jaw tip at the end of that rail's cushion within
    ``window_s`` (d: mm from the centre's foot on the rail to the nearest cushion end, past
    it), which the results format has no kind for and ``truth_events`` leaves out; else ()."""
    ball, rail = key if isinstance(key, tuple) and len(key) == 2 else (None, None)
    if rail not in RAILS:
        return ()
    ends = [seg.start for seg in table.cushions() if seg.rail == rail] + \
        [seg.end for seg in table.cushions() if seg.rail == rail]
    for ev in traj.events:
        if ev.kind == "jaw" and ev.ball == ball and ev.rail == rail and abs(ev.t - t) <= window_s:
            s = float(table.along(rail, np.array(ev.pos))[0])
            d = min(abs(s - float(table.along(rail, np.array(e))[0])) for e in ends)
            return ("jaw tip", round(d, 2))
    return ()


def run_shot(shot: Shot, fps: float, rng: np.random.Generator, line_shift_mm: float = 0.0,
             shutter_fraction: float = 0.5) -> dict:
    """Simulate, detect, track and solve one shot; the matched errors and counts.

    ``line_shift_mm``: the detections are stretched about the table's centre, per axis, so the
    balls turn this far beyond every rail's reversal line (negative: short of it), as a
    calibration off by that much at the cushions would put them; speeds grow by the same
    stretch, under 0.15 % per mm on the smallest table. ``shutter_fraction``: share of the
    frame interval the shutter stays open (1: open the whole frame, the heaviest blur)."""
    traj, t_end = simulate(shot)
    det = detections(traj, t_end, fps, rng, shutter_fraction=shutter_fraction)
    if line_shift_mm:
        tb = shot.table
        for col, half in (("x", 0.5 * tb.length_mm), ("y", 0.5 * tb.width_mm)):
            reach = half - tb.reversal_offset_mm  # centre to the reversal lines, mm
            det[col] = half + (det[col] - half) * (reach + line_shift_mm) / reach
    tr = track(det, shot.table)
    ev, _ = find_events(tr, shot.table, det)
    names = track_names(tr, traj)
    truth = truth_events(shot.table, traj, t_end)
    ev = ev.copy()
    ev["ball"] = [names.get(int(k), "?") for k in ev["track"]]
    ev["other_ball"] = [names.get(int(o), "?") if pd.notna(o) else None for o in ev["other"]]
    out = {"cushion": [], "collision": [], "n": {}}
    dt = 1.0 / fps
    for kind in ("cushion", "collision"):
        te = truth[truth["kind"] == kind].copy()
        re_ = ev[ev["kind"] == kind].copy()
        if kind == "cushion":
            te["key"] = list(zip(te["ball"], te["rail"]))
            re_["key"] = list(zip(re_["ball"], re_["rail"]))
        else:
            te["key"] = list(zip(te["ball"], te["other"]))
            re_["key"] = list(zip(re_["ball"], re_["other_ball"]))
        visible = (te["vn_in"] > VISIBLE_NORMAL_SPEED_MM_S) if kind == "cushion" else \
            pd.Series(True, index=te.index)
        m = match(re_, te)
        matched_t = {i for i, _ in m}
        out["n"][kind] = dict(truth=len(te), truth_visible=int(visible.sum()), result=len(re_),
                              matched=len(m),
                              matched_visible=sum(1 for i in matched_t if visible[i]))
        out["missed_" + kind] = [(shot.label, fps, te.loc[i, "t"], te.loc[i, "key"],
                                  te.loc[i, "vn_in"]) for i in te.index
                                 if i not in matched_t and visible[i]]
        matched_r = {j for _, j in m}
        out["extra_" + kind] = [(shot.label, fps, re_.loc[j, "t"], re_.loc[j, "key"])
                                + _jaw_beside(shot.table, traj, re_.loc[j, "t"], re_.loc[j, "key"])
                                for j in re_.index if j not in matched_r]
        for i, j in m:
            t, r = te.loc[i], re_.loc[j]
            e = dict(label=shot.label, fps=fps, t_frames=abs(r["t"] - t["t"]) / dt)
            if kind == "cushion":
                ax = 0 if t["rail"] in ("bottom", "top") else 1
                e.update(
                    along_mm=abs((r["x"], r["y"])[ax] - (t["x"], t["y"])[ax]),
                    speed_in=abs(r["speed_in"] / t["speed_in"] - 1),
                    speed_out=abs(r["speed_out"] / t["speed_out"] - 1),
                    speed_out_signed=r["speed_out"] / t["speed_out"] - 1,
                    restitution_signed=r["restitution"] - t["restitution"],
                    angle_in=abs(r["angle_in"] - t["angle_in"]),
                    angle_out=abs(r["angle_out"] - t["angle_out"]),
                    restitution=abs(r["restitution"] - t["restitution"]),
                    truth_speed_in=t["speed_in"], truth_angle_in=t["angle_in"])
            out[kind].append(e)
    return out


def summarise(results: list[dict], fps: float) -> dict:
    """Recall, precision and error percentiles over ``results`` of ``run_shot``."""
    cu = pd.DataFrame([e for r in results for e in r["cushion"]])
    co = pd.DataFrame([e for r in results for e in r["collision"]])
    n = {k: {f: sum(r["n"][k][f] for r in results) for f in
             ("truth", "truth_visible", "result", "matched", "matched_visible")}
         for k in ("cushion", "collision")}
    s = {"fps": fps}
    for k in ("cushion", "collision"):
        c = n[k]
        s[f"{k} n_truth"] = c["truth"]
        s[f"{k} n_visible"] = c["truth_visible"]
        s[f"{k} recall"] = c["matched_visible"] / max(c["truth_visible"], 1)
        s[f"{k} recall_all"] = c["matched"] / max(c["truth"], 1)
        s[f"{k} precision"] = c["matched"] / max(c["result"], 1)
    for col in ("t_frames", "along_mm", "speed_in", "speed_out", "angle_in", "angle_out",
                "restitution"):
        # A contact solved from its approach alone (the ball not seen leaving) has no errors
        # out: NaN, left out of those figures.
        if len(cu) and np.isfinite(cu[col]).any():
            s[f"{col} median"] = float(np.nanmedian(cu[col]))
            s[f"{col} p95"] = float(np.nanpercentile(cu[col], 95))
            s[f"{col} max"] = float(np.nanmax(cu[col]))
    if len(cu):
        # Signed medians: a bias (e.g. departures read fast) that the absolute errors hide.
        s["speed_out signed median"] = float(np.nanmedian(cu["speed_out_signed"]))
        s["restitution signed median"] = float(np.nanmedian(cu["restitution_signed"]))
    if len(co):
        s["collision t_frames median"] = float(np.median(co["t_frames"]))
        s["collision t_frames p95"] = float(np.percentile(co["t_frames"], 95))
        s["collision within half frame"] = float(np.mean(co["t_frames"] <= 0.5))
    return s


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--shots", type=int, default=60, help="shots per frame rate")
    ap.add_argument("--fps", type=float, nargs="+", default=[60.0, 30.0, 120.0])
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--worst", type=int, default=0, help="list the N worst cushion contacts")
    ap.add_argument("--shutter", type=float, default=0.5,
                    help="share of the frame interval the shutter stays open (0-1]")
    ap.add_argument("--line-shift-mm", type=float, default=0.0,
                    help="balls turn this far beyond every reversal line (a calibration off at "
                         "the cushions; negative: short of it)")
    args = ap.parse_args(argv)
    if not 0.0 < args.shutter <= 1.0:
        ap.error(f"--shutter {args.shutter} must be in (0, 1]")
    for fps in args.fps:
        rng = np.random.default_rng(args.seed)
        shots = random_shots(rng, args.shots)
        t0 = time.perf_counter()
        results = [run_shot(sh, fps, rng, args.line_shift_mm, args.shutter) for sh in shots]
        s = summarise(results, fps)
        shift = f", lines {args.line_shift_mm:+g} mm" if args.line_shift_mm else ""
        shift += f", shutter {args.shutter:g} frame" if args.shutter != 0.5 else ""
        print(f"\n== {fps:g} fps, {len(shots)} shots, seed {args.seed}{shift} "
              f"({time.perf_counter() - t0:.0f} s) ==")
        for k, v in s.items():
            print(f"  {k:32s} {v:.4g}" if isinstance(v, float) else f"  {k:32s} {v}")
        print("  targets:", "; ".join(f"{k} {v}" for k, v in TARGETS.items()))
        missed = [m for r in results for k in ("missed_cushion", "missed_collision")
                  for m in r[k]]
        extra = [m for r in results for k in ("extra_cushion", "extra_collision") for m in r[k]]
        for m in missed[:10]:
            print("  missed:", m)
        for m in extra[:10]:
            print("  extra: ", m)
        if args.worst:
            cu = pd.DataFrame([e for r in results for e in r["cushion"]])
            for col in ("speed_out", "angle_out", "restitution", "along_mm", "t_frames"):
                print(f"  worst {col}:")
                print(cu.sort_values(col, ascending=False).head(args.worst)[
                    ["label", col, "truth_speed_in"]].to_string(index=False))
    return 0


if __name__ == "__main__":
    sys.exit(main())
