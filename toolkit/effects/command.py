"""``liftlag campaign``: one campaign's readout (or every targeted campaign's), tables and HTML.

Wired into the ``liftlag`` parser by ``toolkit.commands.register_all`` through :func:`register`.
"""

from __future__ import annotations

import time
from pathlib import Path

from ..ensure import add_arguments as add_workspace_arguments
from ..errors import AnalysisError, ConfigError

DEFAULT_OUT = "results"


def register(sub, config_arg) -> None:
    """Add the ``campaign`` subcommand to the ``liftlag`` parser."""
    p = sub.add_parser("campaign", help="one campaign's readout: incremental buyers, pull-forward, uplift targeting (tables + HTML)")
    p.add_argument("promotion_id", nargs="?", metavar="PROMOTION_ID", help="the targeted promotion to read out")
    config_arg(p)
    p.add_argument("--all", action="store_true", help="every targeted promotion with assigned customers")
    p.add_argument("--out", default=DEFAULT_OUT, help=f"output folder (default: ./{DEFAULT_OUT})")
    add_workspace_arguments(p)
    p.set_defaults(handler=run_command)


def run_command(args) -> int:
    from rich.markup import escape

    from .. import config
    from ..console import console, err_console
    from ..ensure import ensure_built
    from .api import analyse_campaign, run_campaigns, write_campaign

    if bool(args.promotion_id) == bool(args.all):
        raise ConfigError("give one PROMOTION_ID or --all (not both, not neither); "
                          "`liftlag campaign --all -c liftlag.toml` reads out every targeted campaign")
    from ..results import check_out_dir

    settings = config.load(args.config)
    out = check_out_dir(args.out)
    ready = ensure_built(settings, console, use_last_good=getattr(args, "use_last_good", None), err_console=err_console)
    if args.all:
        started = time.perf_counter()
        facts = run_campaigns(settings, out, console=console)
        for pid, reason in facts["skipped"].items():
            err_console.print(f"[yellow]skipped {escape(str(pid))}:[/] {escape(str(reason))}")
        if not facts["campaigns"]:
            raise AnalysisError(_nothing_to_read_out(settings, facts))
        console.print(f"{len(facts['campaigns'])} campaigns in {time.perf_counter() - started:.1f} s; results in [bold]{escape(str(out))}[/]")
        return 0
    con = ready.connect()
    try:
        readout = analyse_campaign(con, settings, args.promotion_id)
    finally:
        con.close()
    if ready.note:
        _add_note(readout, ready.note)
    paths = write_campaign(readout, out)
    _print_summary(console, readout)
    for level, message in readout.notes:
        if level == "warning":
            err_console.print(f"[yellow]note:[/] {escape(str(message))}")
    html = [p for p in paths if p.suffix == ".html"]
    console.print(f"readout: [bold]{escape(str(html[0] if html else out))}[/] (tables beside it)")
    return 0


def _add_note(readout, note: str) -> None:
    """Carry "the last build failed ...; results below are from the build of ..." into the readout."""
    import pandas as pd

    readout.notes.insert(0, ("warning", note))
    notes = readout.tables.get("campaign_notes")
    if notes is not None:
        row = pd.DataFrame({"promotion_id": [readout.promotion_id], "level": ["warning"], "message": [note]})
        readout.tables["campaign_notes"] = pd.concat([row, notes], ignore_index=True)[list(notes.columns)]


def _nothing_to_read_out(settings, facts: dict) -> str:
    """Why ``campaign --all`` found no campaign to read out."""
    if facts["skipped"]:
        return f"no targeted campaign could be analysed ({len(facts['skipped'])} skipped, reasons above)"
    if "assignments" not in settings.tables:
        return (f"there is no targeted campaign to read out: {settings.config_path} has no [tables.assignments] "
                f"(an export of broadcast sales only); `liftlag timing` runs without assignments, and a targeted "
                f"campaign needs its assignments file under [tables.assignments]")
    return ("there is no targeted campaign to read out: the workspace has no targeted promotion with assigned "
            "customers (check the promotions' audience values and the assignments' promotion ids)")


def _print_summary(console, readout) -> None:
    from rich.markup import escape
    from rich.table import Table

    status = readout.randomisation_check
    colour = {"passed": "green", "not run": "yellow"}.get(status, "bold red")
    table = Table(title=f"campaign {escape(str(readout.promotion_id))}: randomisation check [{colour}]{escape(status)}[/]")
    for col in ("outcome", "window", "lift", "interval", "relative lift"):
        table.add_column(col, justify="left" if col in ("outcome", "window") else "right")
    summary = readout.summary
    for row in summary.itertuples():
        if row.window == "after" and row.outcome != "orders":
            continue
        if row.outcome == "buyers":
            lift, ci = f"{row.lift * 100:+.1f} pts", f"{row.lift_ci_low * 100:+.1f} to {row.lift_ci_high * 100:+.1f}"
        else:
            lift, ci = f"{row.lift:+.3g}", f"{row.lift_ci_low:+.3g} to {row.lift_ci_high:+.3g}"
        table.add_row(row.outcome, row.window, lift, ci, f"{row.relative_lift:+.1%}" if row.relative_lift == row.relative_lift else "")
    console.print(table)
