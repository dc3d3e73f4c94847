"""railtrace: measure bank shots, ball paths and cushion liveliness from overhead video.

Commands:
  analyse CLIP --out DIR             calibrate, detect, track and time every event of a clip;
                                     writes tracks.csv, events.csv, shots.csv, calibration.json
  banks DIR [--drill FILE] [--chart]  the bank audit of an analysed session: aim error, rebound,
                                     long/short, per-session statistics, correction, bank chart
  calibrate CLIP                     find the camera from the clip; writes calibration.json and a
                                     check image
  cushions DIR... [--before DIR...]  check each cushion's liveliness from analysed clips of one
                                     table; writes cushions.csv and a rail map
  report DIR                         one self-contained HTML report of an analysed clip
  overlay DIR                        the clip with paths, contacts and speeds drawn on it, and a
                                     top-down version
  history / export                   the session history (SQLite): trends per player or table;
                                     export to CSV or Parquet
  render SCENE.toml --out CLIP.mp4   film a scene file (simulated balls, rendered camera) and
                                     write its truth folder beside the clip
"""

from __future__ import annotations

import argparse
import logging
import sys
import time
from pathlib import Path

from railtrace import __version__, banks_cmd, calibrate_cmd, cushions_cmd, history_cmd, overlay, report_cmd

EPILOG = "Run 'railtrace COMMAND --help' for a command's options. Lengths are mm, times seconds."


def build_parser() -> argparse.ArgumentParser:
    """The argument parser for every command."""
    parser = argparse.ArgumentParser(
        prog="railtrace",
        description="Measure bank shots, ball paths and cushion liveliness from a fixed overhead camera's clips.",
        epilog=EPILOG,
    )
    parser.add_argument("--version", action="version", version=f"railtrace {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    analyse = sub.add_parser(
        "analyse",
        help="calibrate, detect and track every ball of a clip and time every event",
        description=(
            "Analyse a clip from a fixed overhead camera: calibrate the camera from the clip (or "
            "use --calibration), detect and track every ball, find every cue strike, collision, "
            "cushion contact, pocketing and stop. Writes DIR/tracks.csv, events.csv, shots.csv, "
            "calibration.json, detections.csv and run.json (see the results format in the README)."
        ),
    )
    analyse.add_argument("clip", type=Path, help="video file from the fixed overhead camera")
    analyse.add_argument("--out", type=Path, required=True, help="results folder to create (must not exist)")
    analyse.add_argument("--table", default="9ft", help="9ft, 8ft, 7ft or the playing area LxW in mm (default 9ft)")
    analyse.add_argument("--ball", type=float, default=None, metavar="MM", help="ball diameter, mm (default 57.15)")
    analyse.add_argument("--calibration", type=Path, default=None, metavar="FILE",
                         help="calibration.json from 'railtrace calibrate' (else the clip is calibrated itself)")
    analyse.add_argument("--no-report", action="store_true", help="do not write DIR/report.html")
    analyse.add_argument("--no-history", action="store_true", help="do not record the session in the history database")
    analyse.add_argument("--db", type=Path, default=None, metavar="FILE", help="history database (default: in your data folder)")
    analyse.add_argument("--player", default=None, help="player's name, for the history")
    analyse.add_argument("--table-name", default=None, help="the table's name in the room, for the history")
    analyse.add_argument("--quiet", action="store_true", help="no progress bar")
    analyse.add_argument("--workers", type=int, default=0, metavar="N",
                         help="processes detecting balls, each on its own part of the clip (default 0: one per core; "
                              "1: one pass, whose detections differ slightly from a split clip's)")

    banks_cmd.add_parser(sub)
    calibrate_cmd.add_parser(sub)
    cushions_cmd.add_parser(sub)
    report_cmd.add_parser(sub)
    overlay.add_parser(sub)
    history_cmd.add_parser(sub)

    render = sub.add_parser(
        "render",
        help="film a scene file: simulate its shots and render them as an overhead camera would",
        description=(
            "Simulate the shots of a scene file and film them through the scene's camera. Writes "
            "the clip and, beside it, CLIP_STEM.truth/ with tracks.csv, events.csv, shots.csv, "
            "calibration.json (the true camera) and scene.toml, in the results format."
        ),
    )
    render.add_argument("scene", type=Path, help="scene file (TOML); see README 'Scene files'")
    render.add_argument("--out", type=Path, required=True, help="clip to write (.mp4)")
    render.add_argument("--force", action="store_true", help="replace an existing clip and its truth folder")
    render.add_argument("--quiet", action="store_true", help="no progress bar")
    return parser


def main(argv: list[str] | None = None) -> int:
    """Parse ``argv`` and run the command; returns the exit code (0 ok, 2 bad input)."""
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.WARNING, format="%(levelname)s %(name)s: %(message)s")
    if args.command is None:
        parser.print_help()
        return 0
    try:
        return COMMANDS[args.command](args)
    except ValueError as exc:
        print(f"railtrace {args.command}: error: {exc}", file=sys.stderr)
        return 2


def _cmd_analyse(args: argparse.Namespace) -> int:
    from railtrace.pipeline import AnalyseConfig, analyse_clip
    from vision.table import parse_table

    config = AnalyseConfig(table=parse_table(args.table, args.ball), calibration_path=args.calibration, workers=args.workers)
    progress = None if args.quiet or not sys.stderr.isatty() else _ProgressBar("analysing")
    summary = analyse_clip(args.clip, args.out, config, progress=progress)
    if progress is not None:
        progress.done()
    print(summary.text())
    if not args.no_report:
        from railtrace.report_cmd import write_report

        print(f"report: {write_report(args.out)}")
    if not args.no_history:
        from railtrace.history import default_db_path, record_analysis

        db = args.db or default_db_path()
        record_analysis(db, args.out, player=args.player, table_name=args.table_name)
        print(f"recorded in the history at {db}")
    if summary.shots == 0:
        print("note: no ball moved in this clip, so there are no shots or events to report")
    return 0


def _cmd_render(args: argparse.Namespace) -> int:
    from railtrace.filming import film_scene
    from railtrace.scene import load_scene

    scene = load_scene(args.scene)
    out: Path = args.out
    if out.suffix.lower() not in (".mp4", ".mkv", ".avi", ".mov"):
        raise ValueError(f"--out {out} should be a video file name ending in .mp4")
    truth = out.with_name(out.stem + ".truth")
    if not args.force and (out.exists() or truth.exists()):
        raise ValueError(f"{out if out.exists() else truth} exists already; add --force to replace it")
    progress = None if args.quiet or not sys.stderr.isatty() else _ProgressBar("rendering")
    t0 = time.perf_counter()
    truth_dir = film_scene(scene, out, progress=progress)
    if progress is not None:
        progress.done()
    elapsed = time.perf_counter() - t0
    print(f"wrote {out} and its truth in {truth_dir}/ ({elapsed:.1f} s)")
    return 0


class _ProgressBar:
    """A one-line progress bar on stderr (only used on a terminal)."""

    def __init__(self, label: str) -> None:
        self.label = label
        self.last = 0.0

    def __call__(self, done: int, total: int) -> None:
        now = time.monotonic()
        if now - self.last < 0.2 and done < total:
            return
        self.last = now
        width = 30
        filled = int(width * done / max(total, 1))
        sys.stderr.write(f"\r{self.label} [{'#' * filled}{'.' * (width - filled)}] {done}/{total} frames")
        sys.stderr.flush()

    def done(self) -> None:
        sys.stderr.write("\n")


COMMANDS = {
    "analyse": _cmd_analyse,
    "banks": banks_cmd.run,
    "calibrate": calibrate_cmd.run,
    "cushions": cushions_cmd.run,
    "render": _cmd_render,
    "report": report_cmd.run,
    "overlay": overlay.run,
    "history": history_cmd.run,
    "export": history_cmd.run,
}


if __name__ == "__main__":
    sys.exit(main())
