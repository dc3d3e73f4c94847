"""Film a scene: simulate its shots, render every frame through its camera, write the clip and
the truth beside it.

``film_scene(scene, clip_path)`` writes ``clip_path`` (H.264 or MPEG-4) and the folder
``<clip stem>.truth/`` next to it holding, in the results format (``../shared/spec``):
``tracks.csv`` (every ball in every frame, at the frame's presentation time, which is the middle
of its exposure), ``events.csv``, ``shots.csv`` (with each shot's stated intent), ``calibration.json``
(the true camera) and ``scene.toml`` (the scene that regenerates it all).
"""

from __future__ import annotations

import logging
import math
import shutil
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

import numpy as np
import pandas as pd

from analysis.physics import Simulator, Strike, Trajectory
from railtrace.results import write_results
from railtrace.scene import Scene, ShotSpec
from vision.calibfile import calibration_dict
from vision.camera import Camera, _rotation_to_rvec
from vision.render import BallLook, CueStroke, Occluder, Renderer
from vision.table import TableSpec, cushion_angles
from vision.video import write_video

log = logging.getLogger(__name__)

# Sub-samples per frame: one every SUBSAMPLE_MM of ball travel during the exposure, so blur
# streaks are smooth; never fewer than 3 for a moving ball nor more than 48.
SUBSAMPLE_MM = 2.0
MAX_SUBSAMPLES = 48
# Truth speeds below this count as at rest (mm/s).
REST_SPEED_MM_S = 1e-6


@dataclass(frozen=True)
class ShotRecord:
    """What happened at one shot: its spec, when it was struck, the actual cue heading and when
    everything came to rest (s)."""

    spec: ShotSpec
    t_strike: float
    heading_rad: float
    intended_heading_rad: float
    t_rest: float
    ball_xy_mm: tuple[float, float]


@dataclass(frozen=True)
class Simulated:
    """A simulated scene: the trajectory, the shots and the clip's duration (s)."""

    trajectory: Trajectory
    shots: tuple[ShotRecord, ...]
    duration_s: float


def simulate_scene(scene: Scene) -> Simulated:
    """Run the scene's shots one after another, each ``pause_s`` after everything has stopped."""
    start = {b.ball: b.at_mm for b in scene.balls if b.at_mm is not None}
    sim = Simulator(scene.table, scene.physics, start, t0=0.0)
    t = scene.lead_s
    records = []
    for i, shot in enumerate(scene.shots):
        t += shot.pause_s if i else 0.0
        if shot.setup:
            t_place = t - min(shot.pause_s, 0.5) / 2 if i else max(t - 0.2, 0.0)
            for ball, xy in shot.setup:
                sim.place(t_place, ball, xy)
        positions = _positions_at(sim.trajectory(), t)
        if shot.ball not in positions:
            raise ValueError(f"shot {i}: ball {shot.ball!r} is not on the table at t = {t:.2f} s; place it with setup")
        intended = aim_heading(scene.table, shot, positions)
        heading = intended + math.radians(shot.aim_error_deg)
        sim.strike(t, Strike(shot.ball, shot.speed_mm_s, heading, shot.tip_side, shot.tip_height))
        if shot.lift_after_s is not None:
            try:
                sim.lift(t + shot.lift_after_s, shot.ball)
            except ValueError:
                pass  # already pocketed: nothing left to catch
        t_rest = sim.run_until_rest(t_max=t + 120.0)
        records.append(ShotRecord(shot, t, heading, intended, t_rest, positions[shot.ball]))
        t = t_rest
    duration = t + scene.tail_s
    if scene.max_duration_s is not None:
        duration = min(duration, scene.max_duration_s)
    return Simulated(sim.trajectory(), tuple(records), duration)


def _positions_at(traj: Trajectory, t: float) -> dict[str, tuple[float, float]]:
    s = traj.sample(np.array([t]))
    return {
        b: (float(s.pos[0, j, 0]), float(s.pos[0, j, 1]))
        for j, b in enumerate(traj.ball_ids)
        if s.present[0, j]
    }


def aim_heading(table: TableSpec, shot: ShotSpec, positions: dict[str, tuple[float, float]]) -> float:
    """Heading (rad, anticlockwise from +x) of the stated aim from the struck ball's centre.

    A sight aim is the line through the ball's centre and the sight on the rail top, as a player
    sights it; a ball aim is the ghost-ball line that sends that object ball toward its target.
    """
    x, y = positions[shot.ball]
    aim = shot.aim
    if aim.kind == "heading":
        return math.radians(aim.heading_deg)
    if aim.kind == "point":
        px, py = aim.point_mm
    elif aim.kind == "sight":
        px, py = table.rail_point(aim.rail, aim.diamond, table.sight_setback_mm)
    else:
        if aim.ball not in positions:
            raise ValueError(f"shot at ball {aim.ball!r}: that ball is not on the table")
        ox, oy = positions[aim.ball]
        tx, ty = aim.send_to_mm
        d = math.hypot(tx - ox, ty - oy)
        px = ox - table.ball_diameter_mm * (tx - ox) / d
        py = oy - table.ball_diameter_mm * (ty - oy) / d
    if math.hypot(px - x, py - y) < 1e-6:
        raise ValueError(f"shot of ball {shot.ball!r} aims at its own centre; aim somewhere else")
    return math.atan2(py - y, px - x)


def film_scene(
    scene: Scene,
    clip_path: str | Path,
    progress: Callable[[int, int], None] | None = None,
) -> Path:
    """Simulate and render ``scene`` to ``clip_path``; write the truth folder beside it.

    Returns the truth folder. Nothing is left half-written: the clip and the truth files are each
    written under temporary names and renamed.
    """
    clip_path = Path(clip_path)
    simulated = simulate_scene(scene)
    traj = simulated.trajectory
    fps = scene.film.fps
    n_frames = int(math.floor(simulated.duration_s * fps)) + 1
    cameras = camera_timeline(scene)
    balls = [_ball_look(scene, b) for b in traj.ball_ids]
    occluder = None
    if scene.occluder:
        occluder = Occluder(tuple(CueStroke(r.t_strike, r.ball_xy_mm, r.heading_rad) for r in simulated.shots))

    renderers: dict[int, Renderer] = {}

    def renderer_for(t: float) -> Renderer:
        k = max(i for i, (t0, _) in enumerate(cameras) if t0 <= t)
        if k not in renderers:
            renderers.clear()
            renderers[k] = Renderer(scene.table, cameras[k][1], scene.look, balls, occluder, seed=scene.seed + k)
        return renderers[k]

    def frames() -> Iterator[np.ndarray]:
        rot_state = None
        for i0 in range(0, n_frames, 30):
            idx = np.arange(i0, min(i0 + 30, n_frames))
            subs = _exposure_times(traj, idx / fps, scene.film.shutter_s, scene.table)
            all_t = np.concatenate(subs)
            s_all = traj.sample(all_t)
            # Orientation is integrated once through the clip, chunk after chunk.
            rot_all = traj.rotations(all_t, start=rot_state)
            rot_state = (float(all_t[-1]), rot_all[-1])
            k = 0
            for i, sub_t in zip(idx, subs):
                n = len(sub_t)
                yield renderer_for(i / fps).render(
                    s_all.pos[k : k + n], rot_all[k : k + n], s_all.present[k : k + n], sub_t
                )
                k += n
                if progress is not None:
                    progress(int(i) + 1, n_frames)

    truth_dir = clip_path.with_suffix("").with_name(clip_path.stem + ".truth")
    write_video(clip_path, frames(), fps, codec=scene.film.codec, quality=scene.film.quality)
    write_truth(scene, simulated, n_frames, cameras, truth_dir)
    return truth_dir


def camera_timeline(scene: Scene) -> list[tuple[float, Camera]]:
    """The camera from t = 0 and after each bump, as (t_from_s, camera)."""
    out = [(0.0, scene.camera)]
    cam = scene.camera
    for bump in sorted(scene.bumps, key=lambda b: b.t_s):
        pos = cam.centre_mm + np.asarray(bump.offset_mm)
        rot = cam.R
        # The mount pivots: the camera keeps its aim direction but rolls about its optical axis.
        a = math.radians(bump.roll_deg)
        roll = np.array([[math.cos(a), math.sin(a), 0], [-math.sin(a), math.cos(a), 0], [0, 0, 1]])
        new_rot = roll @ rot
        cam = Camera(cam.K, cam.dist, _rotation_to_rvec(new_rot), -new_rot @ pos, cam.image_size)
        out.append((bump.t_s, cam))
    return out


def _exposure_times(traj: Trajectory, t_frames: np.ndarray, shutter_s: float, table: TableSpec) -> list[np.ndarray]:
    """Sub-sample instants across each frame's exposure, centred on its presentation time."""
    s = traj.sample(t_frames)
    speed = np.nan_to_num(np.linalg.norm(s.vel, axis=2), nan=0.0).max(axis=1)
    out = []
    for t, v in zip(t_frames, speed):
        travel = v * shutter_s
        n = 1 if travel < 0.25 else int(min(MAX_SUBSAMPLES, max(3, math.ceil(travel / SUBSAMPLE_MM))))
        if n == 1:
            out.append(np.array([t]))
        else:
            out.append(t + shutter_s * ((np.arange(n) + 0.5) / n - 0.5))
    return out


def _ball_look(scene: Scene, ball: str) -> BallLook:
    spec = next(b for b in scene.balls if b.ball == ball)
    return BallLook(ball, spec.kind, spec.colour_bgr)


# --- truth -------------------------------------------------------------------------------------
def write_truth(
    scene: Scene,
    simulated: Simulated,
    n_frames: int,
    cameras: list[tuple[float, Camera]],
    truth_dir: Path,
) -> None:
    """Write the truth folder (results format) for a filmed scene."""
    traj = simulated.trajectory
    tracks = truth_tracks(scene, traj, n_frames)
    events = truth_events(scene.table, traj, simulated.shots)
    events = events[events["t"] <= simulated.duration_s].reset_index(drop=True)
    events["event"] = np.arange(len(events))
    shots = truth_shots(scene, traj, simulated.shots, events)
    calib = calibration_dict(scene.table, scene.camera, "truth", camera_changes=cameras if len(cameras) > 1 else None)
    write_results(truth_dir, tracks, events, shots, calib, extra_files={"scene.toml": scene.source_text})


def _kind_of(scene: Scene, ball: str) -> str:
    return "cue" if next(b for b in scene.balls if b.ball == ball).kind == "cue" else "object"


def truth_tracks(scene: Scene, traj: Trajectory, n_frames: int) -> pd.DataFrame:
    """One row per ball per frame on the table, at the frame's presentation time."""
    t = np.arange(n_frames) / scene.film.fps
    s = traj.sample(t)
    rows = []
    for j, ball in enumerate(traj.ball_ids):
        on = s.present[:, j]
        spec = next(b for b in scene.balls if b.ball == ball)
        rows.append(
            pd.DataFrame(
                {
                    "frame": np.nonzero(on)[0],
                    "t": t[on],
                    "track": j,
                    "ball": _kind_of(scene, ball),
                    "x": s.pos[on, j, 0],
                    "y": s.pos[on, j, 1],
                    "vx": s.vel[on, j, 0],
                    "vy": s.vel[on, j, 1],
                    "seen": 1,
                    "label": ball,
                    "pattern": spec.kind,
                }
            )
        )
    return pd.concat(rows, ignore_index=True).sort_values(["frame", "track"], kind="stable").reset_index(drop=True)


EVENT_KINDS = {"start": "start", "collision": "collision", "cushion": "cushion", "pocket": "pocket", "stop": "stop"}


def truth_events(table: TableSpec, traj: Trajectory, shots: tuple[ShotRecord, ...]) -> pd.DataFrame:
    """The simulator's events in the results format, numbered, with their shot.

    Jaw contacts (a ball meeting a pocket's jaw tip) are not cushion contacts in the format's
    sense (no rail normal) and are left out; so are internal phase changes.
    """
    index = {b: j for j, b in enumerate(traj.ball_ids)}
    starts = [r.t_strike for r in shots]
    rows = []
    for ev in traj.events:
        kind = EVENT_KINDS.get(ev.kind)
        if kind is None:
            continue
        shot = int(np.searchsorted(starts, ev.t + 1e-9, side="right")) - 1
        row = {
            "shot": shot,
            "t": ev.t,
            "kind": kind,
            "track": index[ev.ball],
            "other": index[ev.other] if ev.other is not None else None,
            "x": ev.pos[0],
            "y": ev.pos[1],
            "rail": ev.rail if kind == "cushion" else None,
            "diamond": None,
            "speed_in": float(np.hypot(*ev.vel_in)),
            "speed_out": float(np.hypot(*ev.vel_out)),
            "angle_in": None,
            "angle_out": None,
            "restitution": None,
            "pocket": ev.pocket if kind == "pocket" else None,
        }
        if kind == "cushion":
            along = table.along(ev.rail, np.array(ev.pos))[0]
            row["diamond"] = table.to_diamonds(ev.rail, along)
            a_in, a_out, e = cushion_angles(ev.rail, np.array(ev.vel_in), np.array(ev.vel_out))
            row.update(angle_in=a_in, angle_out=a_out, restitution=e)
        rows.append(row)
    df = pd.DataFrame(rows, columns=_TRUTH_EVENT_COLUMNS)
    df = df.sort_values("t", kind="stable").reset_index(drop=True)
    df.insert(0, "event", np.arange(len(df)))
    return df


_TRUTH_EVENT_COLUMNS = [
    "shot", "t", "kind", "track", "other", "x", "y", "rail", "diamond",
    "speed_in", "speed_out", "angle_in", "angle_out", "restitution", "pocket",
]


def truth_shots(
    scene: Scene, traj: Trajectory, shots: tuple[ShotRecord, ...], events: pd.DataFrame
) -> pd.DataFrame:
    """One row per shot with its counts, results and the intent the scene stated."""
    index = {b: j for j, b in enumerate(traj.ball_ids)}
    rows = []
    for k, r in enumerate(shots):
        ev = events[events["shot"] == k]
        pocketed = ev[ev["kind"] == "pocket"]
        target = r.spec.target
        aim = r.spec.aim
        rows.append(
            {
                "shot": k,
                "t_start": r.t_strike,
                "t_end": r.t_rest,
                "cue_track": index[r.spec.ball],
                "balls_moved": int(ev.loc[ev["kind"].isin(["start", "collision"]), "track"].nunique()),
                "cushions": int((ev["kind"] == "cushion").sum()),
                "collisions": int((ev["kind"] == "collision").sum() // 2),
                "pocketed": len(pocketed),
                "pocketed_tracks": " ".join(str(int(t)) for t in pocketed["track"]),
                "start_x": r.ball_xy_mm[0],
                "start_y": r.ball_xy_mm[1],
                "speed_set_mm_s": r.spec.speed_mm_s,
                "tip_side": r.spec.tip_side,
                "tip_height": r.spec.tip_height,
                "aim_kind": aim.kind,
                "aim_rail": aim.rail,
                "aim_diamond": aim.diamond,
                "aim_x": aim.point_mm[0] if aim.point_mm else None,
                "aim_y": aim.point_mm[1] if aim.point_mm else None,
                "aim_ball": index.get(aim.ball) if aim.ball else None,
                "heading_aimed_deg": math.degrees(r.intended_heading_rad),
                "heading_actual_deg": math.degrees(r.heading_rad),
                "target": target if isinstance(target, str) else (f"{target[0]}:{target[1]:g}" if target else None),
            }
        )
    return pd.DataFrame(rows, columns=_TRUTH_SHOT_COLUMNS)


_TRUTH_SHOT_COLUMNS = [
    "shot", "t_start", "t_end", "cue_track", "balls_moved", "cushions", "collisions", "pocketed",
    "pocketed_tracks", "start_x", "start_y", "speed_set_mm_s", "tip_side", "tip_height", "aim_kind",
    "aim_rail", "aim_diamond", "aim_x", "aim_y", "aim_ball", "heading_aimed_deg",
    "heading_actual_deg", "target",
]
