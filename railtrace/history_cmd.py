"""``railtrace history`` and ``railtrace export``: the session history database, read back.

``railtrace history [--db FILE] [--player P] [--table T] [--record DIR...] [--plot FILE]`` lists
the recorded sessions and shows trends over time: per speed band the bank bias (mean aim error,
actual minus declared contact, diamonds) and make rate, when bank results are recorded; per rail
the median cushion speed ratio; and draws them in a PNG. ``--record DIR`` first records analysed
folders (for folders analysed with ``--no-history`` or before the history existed).

``railtrace export --what KIND [--format csv|parquet] [--out FILE] [--db FILE] [--player P]
[--table T]`` writes one kind of row (``railtrace.history.EXPORTS``) as CSV (to stdout without
``--out``) or Parquet (needs pyarrow).

Both take ``--db``; the default is ``railtrace.history.default_db_path()``.
"""

from __future__ import annotations

import argparse
import importlib.util
import io
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from railtrace import history
from vision.atomic import atomic_path, write_text_atomic


def add_parser(subparsers) -> None:
    """Register ``history`` and ``export`` on an ``argparse`` subparsers object."""
    h = subparsers.add_parser(
        "history",
        help="list recorded sessions and show trends per player or table over time",
        description=(
            "List the sessions recorded in the history database and show trends over time: bank bias "
            "and make rate by speed band (when bank results are recorded) and cushion speed ratios by "
            "rail; writes the trends as a PNG plot. 'railtrace analyse' records every clip it analyses."
        ),
    )
    _common(h)
    h.add_argument("--record", type=Path, nargs="+", default=None, metavar="DIR",
                   help="first record these analysed folders (replacing earlier recordings of the same clips)")
    h.add_argument("--player-name", default=None, metavar="NAME", help="with --record: who played")
    h.add_argument("--table-name", default=None, metavar="NAME", help="with --record: which table (default: its size)")
    h.add_argument("--plot", type=Path, default=Path("history.png"), metavar="FILE",
                   help="PNG of the trends to write (default ./history.png)")
    e = subparsers.add_parser(
        "export",
        help="write recorded shots, events, banks... from the history database as CSV or Parquet",
        description="Write one kind of recorded row from the history database as CSV or Parquet.",
    )
    _common(e)
    e.add_argument("--what", required=True, choices=list(history.EXPORTS), help="which rows to export")
    e.add_argument("--format", default="csv", choices=["csv", "parquet"], help="file format (default csv)")
    e.add_argument("--out", type=Path, default=None, metavar="FILE",
                   help="file to write (default: CSV to standard output; Parquet needs --out)")


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--db", type=Path, default=None, metavar="FILE",
                   help=f"history database (default {history.default_db_path()})")
    p.add_argument("--player", default=None, help="only this player's sessions")
    p.add_argument("--table", default=None, help="only this table's sessions")


def run(args: argparse.Namespace) -> int:
    """Run ``history`` or ``export`` (by ``args.command``); 0 on success, ValueError for bad input."""
    return run_export(args) if args.command == "export" else run_history(args)


def _open(args) -> "history.sqlite3.Connection":
    db = args.db if args.db is not None else history.default_db_path()
    if args.command == "export" and not Path(db).is_file():
        raise ValueError(f"no history database at {db}; analyse a clip first or give --db")
    return history.connect(db)


def run_history(args: argparse.Namespace) -> int:
    """List sessions, print the trends and write the plot."""
    conn = _open(args)
    try:
        for folder in args.record or []:
            r = history.record_analysis(conn, folder, player=args.player_name, table_name=args.table_name)
            print(f"recorded {folder}: {r.shots} shots, {r.events} events, {r.banks} banks"
                  f"{' (replaced the earlier recording of this clip)' if r.replaced else ''}")
        s = history.sessions(conn, args.player, args.table)
        banks = history.bank_trends(conn, args.player, args.table)
        cush = history.cushion_trends(conn, args.player, args.table)
    finally:
        conn.close()
    who = " and ".join(x for x in (f"player {args.player}" if args.player else "",
                                   f"table {args.table}" if args.table else "") if x) or "all players and tables"
    if len(s) == 0:
        print(f"no sessions recorded for {who}")
        return 0
    print(f"{len(s)} session(s) for {who}:")
    print(_sessions_text(s))
    print()
    if len(banks):
        print("Banks by speed band (bias = mean aim error, actual minus declared contact, diamonds; + is further along the rail):")
        print(banks.assign(session=banks["session_time"].str[:16]).pivot_table(
            index="session", columns="band", values=["bias_diamonds", "make_rate"], aggfunc="first").round(3).to_string())
    else:
        print("Banks: no bank results recorded yet (run the bank audit on analysed folders, then record them).")
    print()
    if len(cush):
        print("Cushion speed ratio by rail (median over contacts at 0.6-2 m/s square to the cushion):")
        print(cush.assign(session=cush["session_time"].str[:16]).pivot_table(
            index="session", columns="rail", values="median_ratio", aggfunc="first").round(3).to_string())
    else:
        print("Cushions: no cushion contacts at 0.6-2 m/s recorded.")
    write_plot(args.plot, banks, cush, who)
    print(f"\nwrote {args.plot}")
    return 0


def _sessions_text(s: pd.DataFrame) -> str:
    out = s.assign(
        when=s["session_time"].str[:16].str.replace("T", " "),
        player=s["player"].fillna("-"),
        banks_made=[f"{int(m)}/{int(n)}" if n else "-" for m, n in zip(s["banks_made"].fillna(0), s["banks"])],
        clip=[Path(p).name if isinstance(p, str) else "-" for p in s["path"]],
    )[["clip_id", "when", "player", "table_name", "clip", "shots", "cushions", "banks_made"]]
    return out.rename(columns={"clip_id": "id", "table_name": "table"}).to_string(index=False)


def write_plot(path: Path, banks: pd.DataFrame, cush: pd.DataFrame, title: str) -> None:
    """Trends over time as a PNG (atomically): bank bias and make rate by speed band, cushion
    speed ratio by rail. Panels without data say so."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from analysis.report import BAND_COLOURS, RAIL_COLOURS

    fig = Figure(figsize=(11.0, 3.6))
    FigureCanvasAgg(fig)
    axes = [fig.add_axes((0.06 + i * 0.33, 0.22, 0.26, 0.62)) for i in range(3)]

    def when(col: pd.Series) -> np.ndarray:
        return pd.to_datetime(col, utc=True).dt.tz_localize(None).to_numpy()

    if len(banks):
        for j, (band, g) in enumerate(banks.groupby("band", sort=True)):
            colour = BAND_COLOURS[j % len(BAND_COLOURS)]
            axes[0].plot(when(g["session_time"]), g["bias_diamonds"], "o-", color=colour, label=str(band), ms=4)
            axes[1].plot(when(g["session_time"]), 100 * g["make_rate"], "o-", color=colour, label=str(band), ms=4)
        axes[0].axhline(0.0, color="#6b7078", lw=0.8)
        axes[0].legend(fontsize=7, frameon=False, title="speed band", title_fontsize=7)
        axes[1].set_ylim(-5, 105)
    else:
        for a in axes[:2]:
            a.text(0.5, 0.5, "no bank results recorded", ha="center", va="center", transform=a.transAxes, color="#6b7078")
    axes[0].set_title("Bank bias (diamonds, actual - declared)", fontsize=9, loc="left")
    axes[1].set_title("Banks made (%)", fontsize=9, loc="left")
    if len(cush):
        for rail, g in cush.groupby("rail", sort=True):
            axes[2].plot(when(g["session_time"]), g["median_ratio"], "o-", color=RAIL_COLOURS.get(rail, "#22252b"),
                         label=str(rail), ms=4)
        axes[2].legend(fontsize=7, frameon=False, title="rail", title_fontsize=7)
    else:
        axes[2].text(0.5, 0.5, "no cushion contacts", ha="center", va="center", transform=axes[2].transAxes, color="#6b7078")
    axes[2].set_title("Cushion speed ratio, median at 0.6-2 m/s", fontsize=9, loc="left")
    times = [when(df["session_time"]) for df in (banks, cush) if len(df)]
    if times:
        # One time axis for all panels, padded a day either side (a lone session would otherwise
        # get matplotlib's default span of years).
        t = np.concatenate(times)
        pad = np.timedelta64(1, "D")
        for a in axes:
            a.set_xlim(t.min() - pad, t.max() + pad)
    for a in axes:
        a.tick_params(labelsize=7)
        for lab in a.get_xticklabels():
            lab.set_rotation(30)
            lab.set_horizontalalignment("right")
        a.spines[["top", "right"]].set_visible(False)
    fig.suptitle(f"railtrace history: {title}", fontsize=10, x=0.06, ha="left")
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=100, metadata={"Software": None})


def run_export(args: argparse.Namespace) -> int:
    """Write one kind of row as CSV or Parquet."""
    if args.format == "parquet":
        if importlib.util.find_spec("pyarrow") is None:
            raise ValueError("Parquet export needs pyarrow, which is not installed: "
                             "'.venv/bin/pip install pyarrow', or use --format csv")
        if args.out is None:
            raise ValueError("Parquet is a binary file: give --out FILE.parquet")
    conn = _open(args)
    try:
        df = history.export_table(conn, args.what, args.player, args.table)
    finally:
        conn.close()
    if args.format == "parquet":
        with atomic_path(args.out) as tmp:
            df.to_parquet(tmp, engine="pyarrow", index=False)
    elif args.out is None:
        buf = io.StringIO()
        df.to_csv(buf, index=False)
        sys.stdout.write(buf.getvalue())
        return 0
    else:
        write_text_atomic(args.out, df.to_csv(index=False))
    print(f"wrote {len(df)} {args.what} row(s) to {args.out}", file=sys.stderr)
    return 0


def main(argv=None) -> int:
    """Stand-alone entry (``python -m railtrace.history_cmd history ...``) for tests and scripts."""
    parser = argparse.ArgumentParser(prog="railtrace")
    sub = parser.add_subparsers(dest="command", required=True)
    add_parser(sub)
    args = parser.parse_args(argv)
    try:
        return run(args)
    except ValueError as exc:
        print(f"railtrace {args.command}: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
