"""``liftlag longrun``: discount dependence, responsiveness drift, population drift (and the
sections other modules add to ``toolkit.longrun.api.SECTIONS``), written as tables.

Wired into the ``liftlag`` parser by ``toolkit.commands.register_all`` through :func:`register`.
"""

from __future__ import annotations

import time
from pathlib import Path

DEFAULT_OUT = "results"


def register(sub, config_arg) -> None:
    """Add the ``longrun`` subcommand to the ``liftlag`` parser."""
    p = sub.add_parser(
        "longrun",
        help="long-run effects: discount dependence, responsiveness drift, population drift (tables)",
    )
    config_arg(p)
    p.add_argument("--through", default=None, metavar="QUARTER",
                   help="last quarter to analyse, e.g. 2026Q2 (default: all the data)")
    p.add_argument("--out", default=DEFAULT_OUT, help=f"output folder (default: ./{DEFAULT_OUT})")
    p.set_defaults(handler=run_command)


def run_command(args) -> int:
    from .. import config, workspace
    from ..console import console, err_console
    from .api import analyse_longrun, parse_quarter, write_longrun

    if args.through is not None:
        parse_quarter(args.through)  # a malformed quarter fails before any work (exit 2)
    settings = config.load(args.config)
    started = time.perf_counter()
    con = workspace.connect(settings)
    try:
        readout = analyse_longrun(con, settings, through=args.through)
    finally:
        con.close()
    out = Path(args.out)
    write_longrun(readout, out, command="liftlag longrun", config=str(settings.config_path),
                  settings=settings.raw, through=args.through, total_seconds=round(time.perf_counter() - started, 2))
    _print_summary(console, readout)
    for note in readout.notes:
        err_console.print(f"[yellow]note:[/] {note}")
    console.print(f"long-run tables in [bold]{out}[/] ({', '.join(sorted(readout.tables))})")
    return 0


def _print_summary(console, readout) -> None:
    from rich.table import Table

    console.print(f"long run: {len(readout.quarters)} quarters ({readout.quarters[0]} to {readout.quarters[-1]}), "
                  f"data through {readout.through_end}")
    dependence = readout.tables.get("dependence_by_quarter")
    if dependence is not None and len(dependence):
        table = Table(title="discount dependence by quarter")
        for column in ("quarter", "customers", "deal share of orders", "deal-only customers", "index p50", "index p90"):
            table.add_column(column, justify="left" if column == "quarter" else "right")
        for row in dependence.itertuples():
            table.add_row(row.quarter, f"{row.customers:,}", f"{row.deal_share_orders:.1%}", f"{row.deal_only_share:.1%}",
                          f"{row.dependence_index_p50:.2f}", f"{row.dependence_index_p90:.2f}")
        console.print(table)
    for name in ("responsiveness_drift", "population_drift"):
        frame = readout.tables.get(name)
        if frame is not None and "sentence" in frame.columns and len(frame):
            console.print(frame["sentence"].dropna().iloc[0] if frame["sentence"].notna().any() else "")
