"""``railtrace banks DIR``: the bank audit of an analysed session (or a truth folder).

Reads DIR (results format), the intent (``--drill FILE`` or ``--intents CSV``; a truth folder's
own shots.csv intent otherwise; else none, and targets are inferred), prints one line per bank
and the findings, and writes into DIR: ``banks.csv`` (one row per bank), ``bank_cushions.csv``
(one row per cushion of a bank), ``bank_stats.csv`` (per group), ``bank_findings.txt``,
``bank_audit.json`` (settings and the fitted correction) and, with ``--chart``, when the table fit
is good enough, ``bank_chart.csv`` and ``bank_chart.svg`` (printable). Every input is checked
before anything is written; each file is written under a temporary name and renamed.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np

from analysis.bank_chart import ChartConfig, bank_chart, chart_svg, fit_table
from analysis.banks import BankConfig, audit_session, audit_to_files, intent_from_shots_row, read_session
from analysis.drill import intents_for_shots, load_drill, load_intents_csv
from vision.atomic import atomic_path


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``banks`` on an ``argparse`` subparsers object; returns its parser."""
    p = subparsers.add_parser(
        "banks",
        help="audit every bank shot of an analysed session: aim, rebound, speed, spin, long/short",
        description=(
            "Audit the bank shots of a results folder (or a clip's truth folder): for each bank "
            "the contact against the declared aim, the rebound against the mirror split into what "
            "speed and the cushion explain and what is left for spin, long or short at the target, "
            "made or missed; per session the errors by speed band, rail and start region with "
            "confidence intervals, the fitted aim correction and findings. With --chart, fit the "
            "table's cushions and cloth and write a bank chart when the fit is good enough."
        ),
    )
    p.add_argument("folder", type=Path, help="results folder from 'railtrace analyse' (or a .truth folder)")
    p.add_argument("--drill", type=Path, default=None, help="drill file (TOML) stating each shot's intent; see docs/drills.md")
    p.add_argument("--intents", type=Path, default=None, metavar="CSV", help="intents added after the fact, one row per shot")
    p.add_argument("--bands", default=None, metavar="SOFT,MEDIUM",
                   help="speed at contact (mm/s) where medium and hard begin (default 600,1500)")
    p.add_argument("--chart", action="store_true", help="fit the table and write bank_chart.csv/.svg if the fit is good enough")
    p.add_argument("--quiet", action="store_true", help="print only the findings")
    return p


def parse_bands(text: str) -> tuple[float, float]:
    """``"600,1500"`` -> (600.0, 1500.0); ValueError naming the text and the fix."""
    try:
        a, b = (float(x) for x in text.split(","))
    except ValueError:
        raise ValueError(f"--bands {text!r} should be two speeds in mm/s like 600,1500") from None
    if not (0 < a < b and math.isfinite(b)):
        raise ValueError(f"--bands {text!r}: give two increasing positive speeds in mm/s, like 600,1500")
    return a, b


def run(args: argparse.Namespace) -> int:
    """Audit ``args.folder``; 0 on success. Bad input raises ValueError (one line), nothing written."""
    if args.drill is not None and args.intents is not None:
        raise ValueError("give either --drill or --intents, not both")
    session = read_session(args.folder)
    config = BankConfig() if args.bands is None else BankConfig(band_edges_mm_s=parse_bands(args.bands))
    n = len(session.shots)
    if args.drill is not None:
        drill = load_drill(args.drill, session.table)
        intents = intents_for_shots(drill.intents, drill.repeat, n, drill.source)
        source = f"drill {args.drill}" + (f" (player {drill.player})" if drill.player else "")
    elif args.intents is not None:
        intents = intents_for_shots(load_intents_csv(args.intents, session.table), False, n, str(args.intents))
        source = f"intents {args.intents}"
    elif "aim_kind" in session.shots.columns:
        intents = [intent_from_shots_row(r, session.table) for _, r in session.shots.iterrows()]
        source = "the scene's intent in shots.csv"
    else:
        intents, source = None, "none stated"
    audit = audit_session(session, intents, config)
    files = audit_to_files(audit, config)
    chart_note = None
    if args.chart:
        side = {}
        for k, it in enumerate(intents or []):
            if it is not None and it.tip_side is not None:
                side[k] = it.tip_side
        fit = fit_table(session, audit.shots, ChartConfig(), config.physics, side)
        if fit.good:
            chart = bank_chart(session.table, fit, ChartConfig())
            files["bank_chart.csv"] = chart.to_csv(index=False, float_format="%.3f")
            files["bank_chart.svg"] = chart_svg(session.table, chart, fit, f"Bank chart: {session.table.name} table, {args.folder.name}")
            chart_note = f"bank chart written ({len(chart)} entries): {fit.summary()}"
        else:
            chart_note = f"no bank chart: the table fit is not good enough ({fit.reason}); {fit.summary()}"
    for name, text in files.items():
        with atomic_path(args.folder / name) as tmp:
            tmp.write_text(text, encoding="utf-8")
    if not args.quiet:
        print(f"intent: {source}")
        print(format_table(audit.shots))
    for line in list(audit.notes) + list(audit.findings):
        print(line)
    if chart_note:
        print(chart_note)
    print(f"wrote {', '.join(files)} in {args.folder}")
    return 0


def format_table(shots) -> str:
    """The per-bank table for the terminal (diamonds and degrees)."""
    head = (f"{'shot':>4} {'kind':<4} {'rails':<12} {'contact':>8} {'aimed':>7} {'aim err':>8} {'mirror':>7} "
            f"{'speed':>6} {'band':<6} {'dev':>6} {'=model':>7} {'+spin':>6} {'English':<8} {'target':<13} "
            f"{'long':>6} made")
    lines = [head, "-" * len(head)]

    def f(v, fmt):
        return format(v, fmt) if v is not None and np.isfinite(v) else "-"

    for _, r in shots.iterrows():
        lines.append(
            f"{int(r['shot']):>4} {r['kind']:<4} {r['rails']:<12} {r['contact_diamond']:>8.2f} "
            f"{f(r['declared_diamond'], '.2f'):>7} {f(r['aim_error_diamonds'], '+.3f'):>8} "
            f"{f(r['mirror_diamond'], '.2f'):>7} {r['speed_in_mm_s']:>6.0f} {r['band']:<6} "
            f"{f(r['rebound_dev_deg'], '+.1f'):>6} {f(r['dev_model_deg'], '+.1f'):>7} {f(r['dev_spin_deg'], '+.1f'):>6} "
            f"{r['english']:<8} {r['target']:<13} {f(r['long_diamonds'], '+.2f'):>6} {'yes' if r['made'] else 'no'}"
        )
    lines.append("contact/aimed/mirror/aim err/long in diamonds (long + = past the target); speed mm/s at the "
                 "first contact; dev = rebound minus mirror, deg, + = wider")
    return "\n".join(lines)


def main(argv=None) -> int:
    """Stand-alone entry (the same as ``railtrace banks``) for tests and scripts."""
    parser = argparse.ArgumentParser(prog="railtrace")
    sub = parser.add_subparsers(dest="command")
    add_parser(sub)
    args = parser.parse_args(["banks", *(argv or [])])
    try:
        return run(args)
    except ValueError as exc:
        print(f"railtrace banks: error: {exc}", file=sys.stderr)
        return 2
