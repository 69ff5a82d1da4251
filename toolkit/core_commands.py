"""The foundation commands: check, build, sql, init and demo (argument wiring and bodies).

Registered by ``toolkit.commands.register_all``; ``toolkit.cli`` only parses and dispatches.
"""

from __future__ import annotations

from pathlib import Path

from rich.markup import escape

from .console import StepProgress, console, err_console, print_check, run_build
from .errors import ConfigError


def register(sub, config_arg) -> None:
    """Add check, build, sql, init and demo to the ``liftlag`` parser."""
    p = sub.add_parser("demo", help="generate the demo export, check it, build the panels and run every analysis")
    p.add_argument("--out", default="reports/demo", help="output folder (default: reports/demo)")
    p.add_argument("--seed", type=int, default=None, help="demo scenario seed (default: the shipped demo's)")
    p.add_argument("--customers", type=int, default=None, help="demo size in customers (default: the shipped demo's)")

    p = sub.add_parser("init", help="write a starter liftlag.toml for an export folder, guessing the column mapping")
    p.add_argument("export_dir", help="the folder holding the export's files")
    p.add_argument("-o", "--output", default=None, help="where to write the config (default: EXPORT_DIR/liftlag.toml)")
    p.add_argument("--force", action="store_true", help="overwrite an existing config")

    p = sub.add_parser("check", help="validate the export; rejected rows go to the workspace")
    config_arg(p)
    p.add_argument("--out", default=None, help="also write rejects_summary.parquet (and check_summary) here")

    p = sub.add_parser("build", help="build the panels (skipped when inputs and config are unchanged)")
    config_arg(p)
    p.add_argument("--force", action="store_true", help="rebuild even when nothing changed")
    p.add_argument("--wait", type=float, default=None, metavar="SECONDS",
                   help="wait this long for another build of the workspace to finish, then exit 2 "
                        "(default: [workspace] lock_wait_seconds, 600)")
    p.add_argument("--since", default=None, metavar="DAY",
                   help="check only the order-line files dated from DAY (YYYY-MM-DD) on, keeping the last build's "
                        "verdicts for earlier files; needs tables.transactions.date_partition (else a full build, "
                        "saying why)")

    p = sub.add_parser("sql", help="print the panel SQL, transpiled for another engine")
    p.add_argument("--dialect", required=True, help="spark, postgres, snowflake or bigquery (or duckdb, as written)")
    p.add_argument("--panel", default=None, help="only this panel (default: all, in build order)")
    p.add_argument("-c", "--config", default=None,
                   help="take the parameters (window lengths, margin rate) from this liftlag.toml (default: the defaults)")
    for name, handler in (("demo", cmd_demo), ("init", cmd_init), ("check", cmd_check),
                          ("build", cmd_build), ("sql", cmd_sql)):
        sub.choices[name].set_defaults(handler=handler)


def cmd_check(args) -> int:
    from . import checks, config
    from .results import write_tables

    settings = config.load(args.config)
    if args.out:
        from .results import check_out_dir

        check_out_dir(args.out)
    with StepProgress() as watcher:
        result = checks.run(settings, watcher=watcher,
                            notify=lambda text: err_console.print(f"[yellow]note:[/] {escape(text)}"))
    print_check(result)
    if args.out:
        write_tables(Path(args.out), {"rejects_summary": result.rejects, "check_summary": result.summary})
    if not result.usable:
        err_console.print("[bold red]the export cannot be used as it is:[/]")
        for problem in result.problems:
            err_console.print(f"  - {escape(problem)}")
        return 3
    return 0


def cmd_build(args) -> int:
    from . import config

    settings = config.load(args.config)
    if args.wait is not None and args.wait < 0:
        raise ConfigError(f"--wait {args.wait:g}: give a number of seconds, 0 or more")
    since = None
    if args.since is not None:
        import datetime as dt

        try:
            since = dt.date.fromisoformat(args.since.strip())
        except ValueError:
            raise ConfigError(f"--since {args.since!r}: give a day as YYYY-MM-DD, e.g. --since 2026-07-01") from None
    run_build(settings, force=args.force, wait=args.wait, since=since)
    return 0


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
    # An unset setting is bound as SQL NULL: say so in SQL's words, not Python's.
    values = ", ".join(f"{k} = {'NULL (not set)' if v is None else v}" for k, v in parameters.items())
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
