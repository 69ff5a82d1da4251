"""``liftlag timing``: purchase-timing effects (acceleration, post-promotion dip, anticipation,
gap after a deal), written as tables.

Wired into the ``liftlag`` parser by ``toolkit.commands.register_all`` through :func:`register`.
"""

from __future__ import annotations

import math
from pathlib import Path

from ..ensure import add_arguments as add_workspace_arguments

DEFAULT_OUT = "results"


def register(sub, config_arg) -> None:
    """Add the ``timing`` subcommand to the ``liftlag`` parser."""
    p = sub.add_parser(
        "timing",
        help="purchase timing: acceleration, post-promotion dip, anticipation, gap after a deal (tables)",
    )
    config_arg(p)
    p.add_argument("--out", default=DEFAULT_OUT, help=f"output folder (default: ./{DEFAULT_OUT})")
    p.add_argument("--no-cox", action="store_true",
                   help="fit only the discrete-time model (skips the Cox model on the customer sample)")
    add_workspace_arguments(p)
    p.set_defaults(handler=run_command)


def run_command(args) -> int:
    from rich.markup import escape

    from .. import config
    from ..console import console, err_console
    from ..ensure import ensure_built
    from .api import analyse_timing, open_sql, options_from, write_timing

    from ..results import check_out_dir

    settings = config.load(args.config)
    check_out_dir(args.out)
    ready = ensure_built(settings, console, use_last_good=getattr(args, "use_last_good", None), err_console=err_console)
    con = open_sql(ready.settings)  # DuckDB, or Spark with [engine] kind = "spark"
    try:
        readout = analyse_timing(con, settings, fit_cox=not args.no_cox, **options_from(settings))
    finally:
        con.close()
    if ready.note:
        readout.notes.insert(0, ready.note)
    out = Path(args.out)
    write_timing(readout, out)
    _print_summary(console, readout)
    for note in readout.notes:
        err_console.print(f"[yellow]note:[/] {escape(str(note))}")
    console.print(f"timing tables in [bold]{escape(str(out))}[/] ({', '.join(sorted(readout.tables))})")
    return 0


MODEL_WORDS = {"discrete_cloglog": "discrete", "cox_time_varying": "Cox"}


def _print_summary(console, readout) -> None:
    from rich.table import Table

    effects = readout.tables["timing_effects"]
    table = Table(title="purchase timing (rate and hazard ratios; gap after a deal in days); primary rows first")
    for column in ("effect", "basis", "estimate", "interval", "verdict"):
        table.add_column(column, justify="right" if column in ("estimate", "interval") else "left", overflow="fold")
    for row in effects[effects["scope"] == "all"].itertuples():
        if row.estimate is None or (isinstance(row.estimate, float) and math.isnan(row.estimate)):
            estimate, interval = "not estimable", ""
        else:
            estimate = f"{row.estimate:.3g}"
            interval = f"{row.ci_low:.3g} to {row.ci_high:.3g} ({row.ci_level:.0%})"
        basis = row.basis if row.basis != "observational" else f"observational ({MODEL_WORDS.get(row.model, row.model)})"
        table.add_row(row.effect, basis, estimate, interval, row.verdict)
    console.print(table)
