"""``liftlag quarter QUARTER -c liftlag.toml [--out DIR] [--pdf]``: the quarterly promotion health report.

Wired into the ``liftlag`` parser by ``toolkit.commands.register_all`` through :func:`register`.
"""

from __future__ import annotations

from pathlib import Path


def register(sub, config_arg) -> None:
    """Add the ``quarter`` subcommand to the ``liftlag`` parser."""
    p = sub.add_parser("quarter", help="the quarterly promotion health report: tables, report.html (and report.pdf)")
    p.add_argument("quarter", help="the quarter, e.g. 2026Q2")
    config_arg(p)
    p.add_argument("--out", default=None,
                   help="the report's folder, replaced when the run succeeds (default: reports/quarter-QUARTER)")
    p.add_argument("--pdf", action="store_true", help="also print report.pdf with headless Chromium")
    p.add_argument("--no-cox", action="store_true", help="purchase timing without the Cox check on a customer sample")
    p.set_defaults(handler=run_command)


def run_command(args) -> int:
    from rich.markup import escape

    from ... import config
    from ...console import console
    from ...errors import ConfigError
    from .api import build_quarter_report
    from .period import Quarter

    settings = config.load(args.config)
    try:
        label = Quarter.parse(args.quarter).label
    except ConfigError:
        label = "unknown"  # build_quarter_report says why, with the quarters present, before writing anything
    out = Path(args.out) if args.out else Path("reports") / f"quarter-{label}"
    with console.status(f"quarterly report {escape(str(args.quarter))}…") as status:
        result = build_quarter_report(settings, args.quarter, out, pdf=args.pdf, fit_cox=not args.no_cox,
                                      progress=lambda text: status.update(f"quarter: {escape(text)}"),
                                      console=console)
    console.print(f"quarter {result.quarter}: call [bold]{result.call}[/]; "
                  f"{len(result.tables)} tables, report.html{' and report.pdf' if 'report.pdf' in result.files else ''} "
                  f"in [bold]{escape(str(result.out))}[/] ({result.seconds.get('total', 0):.1f} s)")
    for name, reason in sorted(result.missing.items()):
        console.print(f"  not available: {escape(name)}: {escape(reason)}", style="yellow")
    return 0
