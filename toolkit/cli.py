"""The ``liftlag`` command.

Exit codes: 0 ok, 1 an analysis could not be done (the message says why), 2 bad config or
arguments, 3 bad data.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from . import __version__
from .errors import ConfigError, DataWarning, LiftlagError, StatisticalWarning

console = Console(stderr=False, highlight=False, soft_wrap=True)
err_console = Console(stderr=True, highlight=False, soft_wrap=True)


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # argparse's own errors exit 2, as ours do
        self.print_usage(sys.stderr)
        err_console.print(f"[bold red]error:[/] {escape(message)}")
        raise SystemExit(2)


def _config_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument("-c", "--config", default="liftlag.toml", help="the liftlag.toml to use (default: ./liftlag.toml)")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="liftlag", description="What coupons and discounts really do, from a warehouse export.")
    parser.add_argument("--version", action="version", version=f"liftlag {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("demo", help="generate the demo export, check it, build the panels and run every analysis")
    p.add_argument("--out", default="reports/demo", help="output folder (default: reports/demo)")
    p.add_argument("--seed", type=int, default=None, help="demo scenario seed (default: the shipped demo's)")
    p.add_argument("--customers", type=int, default=None, help="demo size in customers (default: the shipped demo's)")

    p = sub.add_parser("init", help="write a starter liftlag.toml for an export folder, guessing the column mapping")
    p.add_argument("export_dir", help="the folder holding the export's files")
    p.add_argument("-o", "--output", default=None, help="where to write the config (default: EXPORT_DIR/liftlag.toml)")
    p.add_argument("--force", action="store_true", help="overwrite an existing config")

    p = sub.add_parser("check", help="validate the export; rejected rows go to the workspace")
    _config_arg(p)
    p.add_argument("--out", default=None, help="also write rejects_summary.parquet (and check_summary) here")

    p = sub.add_parser("build", help="build the panels (skipped when inputs and config are unchanged)")
    _config_arg(p)
    p.add_argument("--force", action="store_true", help="rebuild even when nothing changed")

    p = sub.add_parser("sql", help="print the panel SQL, transpiled for another engine")
    p.add_argument("--dialect", required=True, help="spark, postgres, snowflake or bigquery (or duckdb, as written)")
    p.add_argument("--panel", default=None, help="only this panel (default: all, in build order)")
    p.add_argument("-c", "--config", default=None,
                   help="take the parameters (window lengths, margin rate) from this liftlag.toml (default: the defaults)")

    _register_analysis_commands(sub)
    return parser


def _register_analysis_commands(sub) -> None:
    """Analysis commands, added as their packages land (each module registers its own)."""
    from .commands import register_all

    register_all(sub, _config_arg)


# ---------------------------------------------------------------- command bodies


def cmd_check(args) -> int:
    from . import checks, config
    from .results import write_tables

    settings = config.load(args.config)
    with console.status("checking the export…") as status:
        result = checks.run(settings, progress=lambda text: status.update(f"check: {text}"))
    print_check(result)
    if args.out:
        write_tables(Path(args.out), {"rejects_summary": result.rejects, "check_summary": result.summary})
    if not result.usable:
        err_console.print("[bold red]the export cannot be used as it is:[/]")
        for problem in result.problems:
            err_console.print(f"  - {escape(problem)}")
        return 3
    return 0


def print_check(result) -> None:
    table = Table(title=f"check ({result.seconds:.1f} s)", show_lines=False)
    for col in ("table", "read", "accepted", "rejected", "warnings"):
        table.add_column(col, justify="left" if col == "table" else "right")
    for row in result.summary.itertuples():
        if not row.configured:
            table.add_row(row.table, "not configured", "", "", "")
            continue
        table.add_row(escape(row.table), f"{row.rows_read:,}", f"{row.accepted:,}", f"{row.rejected:,}", f"{row.warnings:,}")
    console.print(table)
    if len(result.rejects):
        rej = Table(title="rejected rows by reason (details in the workspace: checked.duckdb, rejected_rows)")
        for col in ("table", "reason", "rows"):
            rej.add_column(col, justify="right" if col == "rows" else "left")
        for row in result.rejects.itertuples(index=False):
            rej.add_row(escape(row[0]), escape(row[1]), f"{row[2]:,}")
        console.print(rej)
        if result.examples is not None and len(result.examples):
            console.print("examples (first rows of each reason):")
            for row in result.examples.itertuples(index=False):
                where = f"{Path(row.source_file).name} row {row.row_id}" if row.source_file else f"row {row.row_id}"
                console.print(f"  {row.table} / {row.reason}: {where}: {row.detail} — {row.raw_values}", markup=False)
    if len(result.warnings):
        warn = Table(title="warnings (rows kept)")
        for col in ("table", "rule", "rows"):
            warn.add_column(col, justify="right" if col == "rows" else "left")
        for row in result.warnings.itertuples(index=False):
            warn.add_row(escape(row[0]), escape(row[1]), f"{row[2]:,}")
        console.print(warn)


def cmd_build(args) -> int:
    from . import config

    settings = config.load(args.config)
    run_build(settings, force=args.force)
    return 0


def run_build(settings, force: bool = False):
    """Check (when needed) and build the panels, showing progress; returns the BuildResult."""
    from . import panels

    started = time.perf_counter()
    with console.status("building…") as status:
        def progress(step, detail=""):
            status.update(f"{step}: {escape(detail)}")

        result = panels.build(settings, force=force, progress=progress)
    if result.check is not None:
        print_check(result.check)
    if result.skipped:
        console.print("panels are up to date (inputs, SQL and settings unchanged); use --force to rebuild")
    else:
        table = Table(title=f"panels ({time.perf_counter() - started:.1f} s)")
        for col in ("panel", "rows", "seconds"):
            table.add_column(col, justify="left" if col == "panel" else "right")
        for name, rows in result.rows.items():
            table.add_row(name, f"{rows:,}", f"{result.seconds.get(name, 0):.2f}")
        console.print(table)
    return result


def cmd_sql(args) -> int:
    from . import panels
    from .engine.transpile import DIALECTS, transpile

    dialect = args.dialect.lower()
    if dialect not in (*DIALECTS, "duckdb"):
        raise ConfigError(f"--dialect {args.dialect!r} is not one of {', '.join((*DIALECTS, 'duckdb'))}")
    names = panels.PANEL_ORDER
    if args.panel:
        if args.panel not in names:
            raise ConfigError(f"--panel {args.panel!r} is not a panel; panels: {', '.join(names)}")
        names = (args.panel,)
    if args.config:
        from . import config

        parameters = panels.parameters(config.load(args.config))
    else:
        from .config import Settings

        parameters = panels.parameters(Settings(config_path=Path("liftlag.toml"), tables={}))
    values = ", ".join(f"{k} = {v}" for k, v in parameters.items())
    for name in names:
        sql = panels.panel_sql(name)
        text = sql if dialect == "duckdb" else transpile(sql, dialect, parameters)
        bound = "" if dialect == "duckdb" else f"; parameters bound: {values}"
        print(f"-- panel: {name} ({dialect}{bound})\n{text};\n")
    return 0


def cmd_init(args) -> int:
    from .init import write_starter_config

    path = write_starter_config(Path(args.export_dir), output=Path(args.output) if args.output else None,
                                force=args.force, console=console)
    console.print(f"wrote [bold]{escape(str(path))}[/]; review every line marked 'guessed', then run `liftlag check -c {escape(str(path))}`")
    return 0


def cmd_demo(args) -> int:
    from .demo_run import run_demo

    return run_demo(Path(args.out), seed=args.seed, customers=args.customers, console=console)


COMMANDS = {"check": cmd_check, "build": cmd_build, "sql": cmd_sql, "init": cmd_init, "demo": cmd_demo}


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, or an argument error (exit 2)
        return int(exc.code or 0)
    if not args.command:
        parser.print_help()
        return 2
    handler = COMMANDS.get(args.command) or getattr(args, "handler", None)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            code = handler(args)
        for w in caught:
            if issubclass(w.category, (DataWarning, StatisticalWarning)):
                err_console.print(f"[yellow]warning:[/] {escape(str(w.message))}")
        return code
    except LiftlagError as exc:
        err_console.print(f"[bold red]error:[/] {escape(str(exc))}")
        return exc.exit_code
    except BrokenPipeError:  # output piped into `head` and the like
        return 0
    except KeyboardInterrupt:
        err_console.print("interrupted; nothing was left half-written")
        return 1
    except RuntimeError as exc:
        # DuckDB turns Ctrl-C inside a query into an error of its own.
        if "interrupt" not in str(exc).lower():
            raise
        err_console.print("interrupted; nothing was left half-written")
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
