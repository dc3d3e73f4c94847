"""``railtrace report DIR [--out FILE]``: one self-contained HTML page of an analysed folder.

Reads DIR in the results format (``../shared/spec/results-format.md``; a rendered clip's
``.truth`` folder works too) and, where present, what other stages wrote into it: the bank
audit's ``banks.csv``, ``bank_stats.csv``, ``bank_findings.txt`` and ``bank_chart.svg``, the
cushion check's ``cushions.csv`` and ``rail_map.png``. Where no cushion check was written, one is
made for this folder alone with ``analysis.cushions`` (rail map and speed-ratio table). The page
is built by ``analysis.report`` and written atomically to ``DIR/report.html`` (or ``--out``).

Other stages' tables are read defensively: a missing or unreadable file becomes a note in the
report, and their columns are shown as they are, so a column added later still appears.
"""

from __future__ import annotations

import argparse
import json
import logging
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

from analysis.report import ReportConfig, ReportData, build_html, data_uri
from vision.atomic import write_text_atomic
from vision.calibfile import table_from_dict

log = logging.getLogger(__name__)

REQUIRED = ("tracks.csv", "events.csv", "shots.csv", "calibration.json")


def _read_csv(path: Path, notes: list[str]) -> pd.DataFrame | None:
    """A CSV another stage wrote, or None (with a note) when it is missing or unreadable."""
    if not path.is_file():
        return None
    try:
        return pd.read_csv(path)
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        notes.append(f"{path.name} could not be read ({type(exc).__name__}: {exc}); it is left out.")
        return None


def load_report_data(folder: str | Path, compute_cushions: bool = True, seed: int = 0) -> ReportData:
    """Read everything the report shows from results folder ``folder``.

    ValueError (one line, naming the file) when a required file of the results format is missing
    or unreadable. ``compute_cushions``: run the cushion check on this folder when it holds no
    ``cushions.csv`` / ``rail_map.png`` (bootstrap seeded with ``seed``, so the report is
    reproducible).
    """
    d = Path(folder)
    if not d.is_dir():
        raise ValueError(f"{d} is not a folder; give a folder written by 'railtrace analyse --out DIR'")
    for name in REQUIRED:
        if not (d / name).is_file():
            raise ValueError(f"{d} has no {name}; give a folder written by 'railtrace analyse --out DIR'")
    try:
        tracks = pd.read_csv(d / "tracks.csv")
        events = pd.read_csv(d / "events.csv")
        shots = pd.read_csv(d / "shots.csv")
        calibration = json.loads((d / "calibration.json").read_text(encoding="utf-8"))
    except (OSError, ValueError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        raise ValueError(f"{d} holds an unreadable results file ({type(exc).__name__}: {exc})") from None
    for df, name, cols in ((tracks, "tracks.csv", ("t", "track", "x", "y")),
                           (events, "events.csv", ("shot", "t", "kind", "track", "x", "y")),
                           (shots, "shots.csv", ("shot", "t_start", "t_end", "cue_track"))):
        missing = [c for c in cols if c not in df.columns]
        if missing:
            raise ValueError(f"{d / name} lacks column(s) {', '.join(missing)}")
    if "table" not in calibration:
        raise ValueError(f"{d / 'calibration.json'} lacks its 'table' entry")
    table = table_from_dict(calibration["table"])
    run = {}
    if (d / "run.json").is_file():
        try:
            run = json.loads((d / "run.json").read_text(encoding="utf-8"))
        except (OSError, ValueError):
            run = {}
    notes: list[str] = []
    banks = _read_csv(d / "banks.csv", notes)
    bank_stats = _read_csv(d / "bank_stats.csv", notes)
    findings: tuple[str, ...] = ()
    if (d / "bank_findings.txt").is_file():
        findings = tuple(x.strip() for x in (d / "bank_findings.txt").read_text(encoding="utf-8").splitlines() if x.strip())
    images: list[tuple[str, str]] = []
    if (d / "bank_chart.svg").is_file():
        images.append(("bank chart: where to aim for each pocket, fitted to this table",
                       data_uri((d / "bank_chart.svg").read_bytes(), "image/svg+xml")))
    cushion_results = _read_csv(d / "cushions.csv", notes)
    cushion_summary = ""
    rail_map_caption = ("Rail map: each stretch of cushion between two sights coloured by how its contacts' "
                        "speed ratio compares with the rest of its rail (sand = even, brick red = 0.15 or more "
                        "below); "
                        "a thick outline marks a stretch a statistical test found dead.")
    if (d / "rail_map.png").is_file():
        images.append((rail_map_caption, data_uri((d / "rail_map.png").read_bytes())))
    elif cushion_results is None and compute_cushions:
        rail_png, cushion_results, cushion_summary, note = _cushion_check(d, seed)
        if rail_png is not None:
            images.append((rail_map_caption, data_uri(rail_png)))
        if note:
            notes.append(note)
    title = f"railtrace report: {Path(str(run.get('clip', '')) or d.name).stem or d.name}"
    return ReportData(
        title=title, table=table, tracks=tracks, events=events, shots=shots, run=run,
        calibration=calibration, banks=banks, bank_stats=bank_stats, bank_findings=findings,
        cushion_results=cushion_results, cushion_summary=cushion_summary, images=tuple(images),
        notes=tuple(notes),
    )


def _cushion_check(folder: Path, seed: int):
    """(rail map PNG bytes or None, results table or None, one-line summary, note) of the cushion
    check of ``folder`` alone. The table-length prediction (a simulation) is left to
    ``railtrace cushions``: the report stays quick."""
    import cv2

    from analysis.cushions import CushionCheckConfig, check_session, draw_rail_map, load_session, results_table

    config = CushionCheckConfig()
    try:
        check = check_session(load_session([folder], config), config, np.random.default_rng(seed), predict_lengths=False)
    except ValueError as exc:
        return None, None, "", f"The cushion check could not be made from this folder: {exc}"
    c = check.contacts
    if len(c) == 0:
        return None, None, "", "No cushion contacts in this clip, so no cushion check."
    ok, buf = cv2.imencode(".png", draw_rail_map(check))
    summary = (f"Cushion check of this clip alone: {len(c)} cushion contacts, {int(c['usable'].sum())} arrived "
               "rolling and were measured. For a table's verdict, run 'railtrace cushions' over several clips "
               "of it (it also predicts how many table lengths a firm shot travels).")
    return (buf.tobytes() if ok else None), results_table(check), summary, ""


def write_report(folder: str | Path, out: str | Path | None = None, config: ReportConfig = ReportConfig(),
                 compute_cushions: bool = True) -> Path:
    """Build the report of results folder ``folder`` and write it atomically to ``out`` (default
    ``folder/report.html``). Returns the path written; ValueError for a bad folder."""
    data = load_report_data(folder, compute_cushions=compute_cushions)
    target = Path(out) if out is not None else Path(folder) / "report.html"
    write_text_atomic(target, build_html(data, config))
    return target


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``report`` on an ``argparse`` subparsers object; returns its parser."""
    p = subparsers.add_parser(
        "report",
        help="write one self-contained HTML page of an analysed folder (opens offline in any browser)",
        description=(
            "Write DIR/report.html: a summary, every shot drawn to scale on the table with each "
            "ball's path, events and cushion contacts, the bank audit (if DIR/banks.csv exists) with "
            "declared aim and mirror line, and the cushion check's rail map (from DIR/rail_map.png, "
            "or computed for this folder). Images are embedded; the page fetches nothing."
        ),
    )
    p.add_argument("folder", type=Path, metavar="DIR", help="folder written by 'railtrace analyse --out DIR'")
    p.add_argument("--out", type=Path, default=None, metavar="FILE", help="HTML file to write (default DIR/report.html)")
    p.add_argument("--no-cushions", action="store_true",
                   help="do not compute a cushion check when DIR holds none (faster)")
    return p


def run(args: argparse.Namespace) -> int:
    """Write the report; 0 on success. Bad input raises ValueError (one line)."""
    t0 = time.perf_counter()
    path = write_report(args.folder, args.out, compute_cushions=not args.no_cushions)
    print(f"wrote {path} ({path.stat().st_size / 1e6:.1f} MB, {time.perf_counter() - t0:.1f} s); open it in any browser")
    return 0


def main(argv=None) -> int:
    """Stand-alone entry (the same as ``railtrace report``) for tests and scripts."""
    parser = argparse.ArgumentParser(prog="railtrace")
    sub = parser.add_subparsers(dest="command")
    add_parser(sub)
    args = parser.parse_args(["report", *(argv or [])])
    try:
        return run(args)
    except ValueError as exc:
        print(f"railtrace report: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
