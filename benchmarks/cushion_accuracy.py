"""Cushion-check accuracy on simulated room-staff sessions (truth folders, no rendering).

Scenario (our own invention): before opening, room staff check a 9 ft table by rolling the cue
ball (struck high, so it rolls at once) into every cushion from spots all along it, at soft to
hard pace and a little off square, catching it by hand once it has come off; then let a few
balls run free across and along the table, and play one firm centre-ball shot from the head spot
through the foot spot. Sessions are simulated by ``analysis.physics`` through
``railtrace.filming.simulate_scene`` and written as truth folders (results format).

Measured per session and seed:

* per rail and speed band, the fitted speed ratio minus the simulator's truth at the same speed.
  Truth is derived from the scene's physics parameters alone: the speed ratio of a rolling ball
  square into that rail in the impact model (``analysis.cushion``, Mathavan, Jackson & Parkin
  2010) with the restitution curve and rail factor of the scene (dead spots are reported
  separately and excluded from the rail's curve);
* which segments were flagged dead, for sessions with even cushions and with one deadened
  segment;
* measured cloth decelerations against ``mu g`` of the scene, and predicted against simulated
  table lengths of the spot shot.

Run: ``.venv/bin/python benchmarks/cushion_accuracy.py [--seeds 0 1 2 3 4] [--shots 160]``;
also ``--sample`` for the bundled ``sample_clips/cushion_check.toml``.
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from analysis.cushions import (  # noqa: E402
    CushionCheckConfig, check_session, load_session, perpendicular_rolling_ratio, simulate_spot_shot,
)
from railtrace.filming import camera_timeline, simulate_scene, write_truth  # noqa: E402
from railtrace.scene import Scene, load_scene, parse_scene  # noqa: E402
from vision.table import NINE_FOOT, RAILS, TableSpec, rail_direction, rail_inward_normal  # noqa: E402


def rolled_shot(rng: np.random.Generator, table: TableSpec, rail: str, span: tuple[float, float],
                mu_roll: float = 0.01) -> dict:
    """One rolled single-contact shot into ``rail`` meeting it between diamonds ``span``, as a
    scene ``[[shot]]`` dict: arrival speed log-uniform over 0.3-3.6 m/s normal to the rail, angle
    uniform within +-25 degrees, caught by hand 0.2 s after the contact."""
    a_roll = mu_roll * 9810.0
    d_rev = table.reversal_offset_mm
    n = np.asarray(rail_inward_normal(rail))
    u = np.asarray(rail_direction(rail))
    long_rail = rail in ("bottom", "top")
    for _attempt in range(100):
        p = rng.uniform(*span)
        if long_rail and abs(p - 4.0) < 0.3:
            continue  # the side pocket's mouth
        ang = math.radians(rng.uniform(-25.0, 25.0))
        depth = rng.uniform(250.0, 0.6 * (table.width_mm if long_rail else table.length_mm))
        contact = np.asarray(table.rail_point(rail, p, -d_rev))
        direction = math.sin(ang) * u - math.cos(ang) * n
        D = depth / math.cos(ang)
        start = contact - D * direction
        margin = 90.0
        if margin <= start[0] <= table.length_mm - margin and margin <= start[1] <= table.width_mm - margin:
            break
    v_arr = math.exp(rng.uniform(math.log(300.0), math.log(3600.0))) / math.cos(ang)
    v0 = math.sqrt(v_arr**2 + 2 * a_roll * D)
    t_arrive = (v0 - v_arr) / a_roll
    return {
        "ball": "cue", "setup": {"cue": [float(start[0]), float(start[1])]},
        "aim": {"heading_deg": math.degrees(math.atan2(direction[1], direction[0]))},
        "speed_mm_s": v0, "spin": {"height": 0.4}, "pause_s": 0.3,
        "lift_after_s": t_arrive + 0.2,
    }


def session_doc(
    rng: np.random.Generator,
    n_rolled: int = 160,
    n_free: int = 6,
    dead_spot: tuple[str, float, float, float] | None = None,
    rail_factor: dict[str, float] | None = None,
    table: TableSpec = NINE_FOOT,
    mu_roll: float = 0.01,
    spot_shot_mm_s: float | None = 3000.0,
    focus: tuple[str, float, float, int] | None = None,
) -> dict:
    """A room-staff check session as a parsed-TOML scene dict (see the module docstring).

    ``n_rolled`` rolled single-contact shots (:func:`rolled_shot`) spread over the four rails in
    proportion to their length; ``focus`` = (rail, from, to, n) adds ``n`` more into one stretch
    the staff suspect; ``n_free`` free-running rolled shots; ``dead_spot`` = (rail, from, to,
    factor) and ``rail_factor`` go to ``[physics]``.
    """
    weights = np.array([table.length_mm if r in ("bottom", "top") else table.width_mm for r in RAILS])
    rails = rng.choice(len(RAILS), size=n_rolled, p=weights / weights.sum())
    shots = []
    for k in rails:
        span = 8.0 if RAILS[k] in ("bottom", "top") else 4.0
        shots.append(rolled_shot(rng, table, RAILS[k], (0.35, span - 0.35), mu_roll))
    if focus is not None:
        rail, lo, hi, n_focus = focus
        shots += [rolled_shot(rng, table, rail, (lo + 0.1, hi - 0.1), mu_roll) for _ in range(n_focus)]
    for _ in range(n_free):
        along = rng.random() < 0.5
        start = [rng.uniform(600, 1900), rng.uniform(300, 970)]
        heading = (0.0 if along else 90.0) + rng.uniform(-8, 8) + (180.0 if rng.random() < 0.5 else 0.0)
        shots.append({"ball": "cue", "setup": {"cue": start}, "aim": {"heading_deg": heading},
                      "speed_mm_s": rng.uniform(1500, 3200), "spin": {"height": 0.4}, "pause_s": 0.3})
    if spot_shot_mm_s is not None:
        shots.append({"ball": "cue", "setup": {"cue": [table.length_mm / 4, table.width_mm / 2]},
                      "aim": {"heading_deg": 0.0}, "speed_mm_s": spot_shot_mm_s, "pause_s": 0.3})
    physics: dict = {"mu_roll": mu_roll}
    if rail_factor:
        physics["rail_factor"] = dict(rail_factor)
    if dead_spot is not None:
        rail, lo, hi, f = dead_spot
        physics["dead_spot"] = [{"rail": rail, "from_diamond": lo, "to_diamond": hi, "factor": f}]
    return {
        "name": "room-staff cushion check (simulated)", "lead_s": 0.2, "tail_s": 0.2, "seed": 1,
        "table": {"size": f"{table.length_mm:g}x{table.width_mm:g}"},
        "camera": {"fps": 60},
        "physics": physics,
        "ball": [{"id": "cue", "kind": "cue", "at": [table.length_mm / 4, table.width_mm / 2]}],
        "shot": shots,
    }


def write_session(scene: Scene, folder: Path) -> Path:
    """Simulate ``scene`` and write its truth folder to ``folder`` (results format); returns it."""
    simulated = simulate_scene(scene)
    n_frames = int(math.floor(simulated.duration_s * scene.film.fps)) + 1
    write_truth(scene, simulated, n_frames, camera_timeline(scene), folder)
    return folder


def truth_ratio(scene: Scene, rail: str, speed_mm_s: float, diamond: float | None = None) -> float:
    """The simulator's speed ratio for a rolling ball square into ``rail`` at ``speed_mm_s``:
    the impact model with the scene's restitution curve and rail factor, and the dead-spot factor
    at ``diamond`` when one is given."""
    c = scene.physics.cushion
    e = c.restitution(speed_mm_s, rail, diamond)
    return perpendicular_rolling_ratio(scene.table, e, speed_mm_s, mu_cushion=c.mu_cushion,
                                       mu_slide=scene.physics.mu_slide)


def band_errors(check, scene: Scene):
    """Per rail and band measured: (rail, band, n, reported, rail truth, contacts' fit, contacts'
    truth).

    ``reported`` is the check's ratio at the band's median speed and ``rail truth`` the scene's
    curve for that rail at the same speed (rail factor, no dead spot). ``contacts' fit`` is the
    mean of the fitted curve over the band's fitted contacts and ``contacts' truth`` the mean of
    the simulator's ratio for those contacts (rail factor and any dead spot at their diamond).
    """
    out = []
    c = check.contacts[check.contacts["fitted"]]
    for _, b in check.bands.iterrows():
        g = c[(c["rail"] == b["rail"]) & (c["band"] == b["band"])]
        fit_c = float(np.mean(check.curves.predict(b["rail"], g["normal_speed_mm_s"].to_numpy())))
        truth_c = float(np.mean([truth_ratio(scene, b["rail"], v, d) for v, d in zip(g["normal_speed_mm_s"], g["diamond"])]))
        out.append((b["rail"], b["band"], int(b["n_contacts"]), b["ratio_fit"],
                    truth_ratio(scene, b["rail"], b["speed_ref_mm_s"]), fit_c, truth_c))
    return out


def _print_errors(errs) -> float:
    worst = 0.0
    for r, b, n, f, t, fc, tc in errs:
        worst = max(worst, abs(f - t), abs(fc - tc))
        print(f"    {r:7s} {b:7s} n={n:3d} reported {f:.4f} rail truth {t:.4f} error {f - t:+.4f} | "
              f"over its contacts: fit {fc:.4f} truth {tc:.4f} error {fc - tc:+.4f}")
    return worst


def run_one(doc: dict, folder: Path, config: CushionCheckConfig, seed: int):
    scene = parse_scene(doc)
    write_session(scene, folder)
    check = check_session(load_session([folder], config), config, np.random.default_rng(seed))
    return scene, check


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2, 3, 4])
    ap.add_argument("--shots", type=int, default=160, help="rolled single-contact shots per session")
    ap.add_argument("--sample", action="store_true", help="also check sample_clips/cushion_check.toml")
    args = ap.parse_args(argv)
    config = CushionCheckConfig()
    worst = 0.0
    flags_even, flags_dead, missed = 0, 0, 0
    with tempfile.TemporaryDirectory() as tmp:
        if args.sample:
            scene = load_scene(Path(__file__).resolve().parents[1] / "sample_clips" / "cushion_check.toml")
            write_session(scene, Path(tmp) / "sample")
            check = check_session(load_session([Path(tmp) / "sample"], config), config, np.random.default_rng(0))
            print("sample_clips/cushion_check.toml (simulated truth folder):")
            _print_errors(band_errors(check, scene))
            print(f"  segments tested {len(check.segments)}, flagged {int(check.segments['flagged'].sum())}")
        for seed in args.seeds:
            rng = np.random.default_rng(seed)
            t0 = time.perf_counter()
            doc = session_doc(rng, n_rolled=args.shots, rail_factor={"left": 0.96, "top": 0.98})
            scene, check = run_one(doc, Path(tmp) / f"even{seed}", config, seed)
            errs = band_errors(check, scene)
            e_max = max(max(abs(f - t), abs(fc - tc)) for _r, _b, _n, f, t, fc, tc in errs)
            worst = max(worst, e_max)
            n_flag = int(check.segments["flagged"].sum())
            flags_even += n_flag
            cloth = check.cloth.set_index("phase")
            pred = check.lengths_predicted["table_lengths"]
            sim_len = simulate_spot_shot(scene.table, scene.physics, config.firm_speed_mm_s) / scene.table.length_mm
            meas = check.lengths_measured["table_lengths"].tolist()
            print(f"seed {seed} even cushions (left x0.96, top x0.98): {int(check.contacts['fitted'].sum())} contacts fitted, "
                  f"max |fit - truth| {e_max:.4f} over {len(errs)} rail-bands; segments tested "
                  f"{len(check.segments)}, flagged {n_flag}; rolling {cloth.loc['rolling', 'decel_mm_s2']:.1f} "
                  f"(truth {scene.physics.mu_roll * 9810:.1f}) sliding {cloth.loc['sliding', 'decel_mm_s2']:.0f} "
                  f"(truth {scene.physics.mu_slide * 9810:.0f}) mm/s^2; table lengths measured {meas and round(meas[0], 3)}, "
                  f"predicted {pred:.3f}, simulated truth {sim_len:.3f} ({time.perf_counter() - t0:.1f} s)")
            _print_errors(errs)
            rng = np.random.default_rng(1000 + seed)
            doc = session_doc(rng, n_rolled=args.shots, dead_spot=("top", 5.0, 6.0, 0.85))
            scene, check = run_one(doc, Path(tmp) / f"dead{seed}", config, seed)
            s = check.segments
            hit = s[(s["rail"] == "top") & (s["segment"] == "5-6")]
            others = int(s["flagged"].sum()) - int(hit["flagged"].sum())
            flags_dead += others
            missed += int(not (len(hit) and bool(hit["flagged"].iloc[0])))
            errs = band_errors(check, scene)
            e_max = max(max(abs(f - t), abs(fc - tc)) for _r, _b, _n, f, t, fc, tc in errs)
            worst = max(worst, e_max)
            print(f"seed {seed} top 5-6 deadened x0.85: flagged {bool(len(hit) and hit['flagged'].iloc[0])} "
                  f"(shortfall {hit['shortfall'].iloc[0] if len(hit) else math.nan:+.3f}, n {int(hit['n_segment'].iloc[0]) if len(hit) else 0}, "
                  f"p adj {hit['p_adjusted'].iloc[0] if len(hit) else math.nan:.2g}); other segments flagged {others}; "
                  f"max |fit - truth| {e_max:.4f}")
    print(f"SUMMARY worst |fit - truth| {worst:.4f} (tolerance 0.03); false flags on even sessions {flags_even}, "
          f"other flags on dead sessions {flags_dead}, dead segment missed {missed} of {len(args.seeds)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
