"""``railtrace cushions DIR... [--before DIR...] [--out DIR]``: the cushion check of one table.

Reads analysed folders (``railtrace analyse --out DIR``, or a rendered clip's ``.truth`` folder:
same format), prints the terminal table and writes ``cushions.csv``, ``cushion_contacts.csv``,
``cushion_report.txt``, ``rail_map.png`` and ``cushion_run.json`` to ``--out``. The method is
described in ``analysis/cushions.py``. Bad input raises ValueError, which ``railtrace.cli``
turns into one line on stderr and exit code 2.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

from railtrace import __version__


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``cushions`` on an ``argparse`` subparsers object; returns its parser."""
    p = subparsers.add_parser(
        "cushions",
        help="check how lively and even each cushion of a table is, from analysed clips",
        description=(
            "Cushion check over one or several analysed folders of one table: the speed ratio "
            "normal to each cushion against impact speed, fitted per rail and reported per speed "
            "band with bootstrap intervals; rebound against incoming angle; dead spots between "
            "sights (Mann-Whitney U with Benjamini-Hochberg); cloth decelerations; the table lengths "
            "of a firm centre-ball spot-to-spot shot. With --before, what changed since an earlier "
            "check. Writes cushions.csv, cushion_contacts.csv, cushion_report.txt, rail_map.png."
        ),
    )
    p.add_argument("folders", type=Path, nargs="+", metavar="DIR", help="analysed folders (or .truth folders) of one table")
    p.add_argument("--before", type=Path, nargs="+", default=None, metavar="DIR",
                   help="analysed folders of an earlier check of the same table, to compare with")
    p.add_argument("--out", type=Path, default=Path("cushion_check"),
                   help="folder for the outputs (default ./cushion_check; files in it are replaced)")
    p.add_argument("--firm-speed", type=float, default=3000.0, metavar="MM_S",
                   help="cue-ball speed of the predicted firm centre-ball shot, mm/s (default 3000)")
    p.add_argument("--bands", default=None, metavar="E1,E2,...",
                   help="inner normal-speed band edges in mm/s (default 600,1200,2000: soft, medium, firm, hard)")
    p.add_argument("--boot", type=int, default=1000, help="bootstrap resamples (default 1000)")
    p.add_argument("--seed", type=int, default=0, help="random seed of the bootstrap (default 0)")
    return p


def _config(args):
    from analysis.cushions import CushionCheckConfig

    kwargs = {"firm_speed_mm_s": float(args.firm_speed), "n_boot": int(args.boot)}
    if not 100.0 <= args.firm_speed <= 12000.0:
        raise ValueError(f"--firm-speed {args.firm_speed:g} mm/s is outside 100..12000 mm/s")
    if args.bands:
        try:
            inner = [float(x) for x in args.bands.split(",")]
        except ValueError:
            raise ValueError(f"--bands {args.bands!r} should be increasing speeds in mm/s like 600,1200,2000") from None
        edges = (0.0, *inner, float("inf"))
        names = tuple(f"band{k + 1}" for k in range(len(edges) - 1))
        kwargs.update(band_edges_mm_s=edges, band_names=names)
    return CushionCheckConfig(**kwargs)


def run(args: argparse.Namespace) -> int:
    """Run the cushion check; 0 on success. Bad input raises ValueError (one line)."""
    from analysis.cushions import check_session, compare_checks, format_report, load_session, write_check

    config = _config(args)
    for f in [*args.folders, *(args.before or [])]:
        if not f.is_dir():
            raise ValueError(f"{f} is not a folder; give folders written by 'railtrace analyse --out DIR'")
    rng = np.random.default_rng(args.seed)
    check = check_session(load_session(args.folders, config), config, rng)
    changes = None
    if args.before:
        before = check_session(load_session(args.before, config), config, rng, predict_lengths=False)
        changes = compare_checks(before, check, config, rng)
    print(format_report(check, changes))
    paths = write_check(check, args.out, changes, run_info={
        "railtrace_version": __version__, "before": [str(f) for f in args.before or []], "seed": args.seed})
    print(f"\nwrote {', '.join(str(p) for p in paths.values())}")
    return 0


def main(argv=None) -> int:
    """Stand-alone entry (the same as ``railtrace cushions``) for tests and scripts."""
    parser = argparse.ArgumentParser(prog="railtrace")
    sub = parser.add_subparsers(dest="command")
    add_parser(sub)
    args = parser.parse_args(["cushions", *(argv or [])])
    try:
        return run(args)
    except ValueError as exc:
        print(f"railtrace cushions: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
