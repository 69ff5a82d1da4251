"""``liftlag demo``: the invented demo export, checked, built and analysed end to end.

In a clone, the shipped ``demo_data/`` export is reused when its recorded generation matches the
requested seed and size; otherwise (and always after a normal install, which carries no
``demo_data/``) the same export is generated from its seed into ``<out>/export``. The workspace goes to
``<out>/.liftlag`` so that the shipped export stays untouched.
"""

from __future__ import annotations

import dataclasses
import time
from pathlib import Path

from rich.console import Console
from rich.markup import escape

from . import config as config_module
from .config import WorkspaceSettings
from .results import write_manifest, write_tables

# Beside the package in a clone; absent in an installed package (site-packages has no demo_data/).
SHIPPED = Path(__file__).resolve().parent.parent / "demo_data"


def demo_export(out: Path, seed: int | None, customers: int | None) -> Path:
    """The config path of a demo export matching ``seed`` and ``customers`` (generated if needed)."""
    from . import demo
    from .demo.generate import is_current

    seed = demo.DEFAULT_SEED if seed is None else seed
    customers = demo.DEFAULT_CUSTOMERS if customers is None else customers
    scenario = demo.Scenario.for_effects("all")
    if is_current(SHIPPED, seed=seed, customers=customers, effects="all", scenario=scenario):
        return SHIPPED / "liftlag.toml"
    return demo.ensure_demo_data(out / "export", seed=seed, customers=customers)


def run_demo(out: Path, seed: int | None = None, customers: int | None = None, console: Console | None = None) -> int:
    from . import analyses
    from .console import print_check, run_build

    console = console or Console()
    out = out.expanduser().resolve()
    out.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    timings: dict[str, float] = {}
    with console.status("preparing the demo export…"):
        config_path = demo_export(out, seed, customers)
    timings["export"] = round(time.perf_counter() - started, 2)
    console.print(f"demo export: [bold]{escape(str(config_path.parent))}[/] (invented data; see truth.json there)")
    settings = config_module.load(config_path)
    settings = dataclasses.replace(settings, workspace=WorkspaceSettings(path=out / ".liftlag"))
    t0 = time.perf_counter()
    result = run_build(settings, force=False)
    timings["check_and_build"] = round(time.perf_counter() - t0, 2)
    if result.check is None:
        from . import checks

        print_check(checks.run(settings))
    tables = {}
    from .engine.duckdb import connect as engine_connect
    from . import workspace

    con = engine_connect(settings, workspace.path(settings, workspace.CHECKED), read_only=True)
    try:
        tables["rejects_summary"] = con.execute("SELECT * FROM rejects_summary").df()
        tables["check_summary"] = con.execute("SELECT * FROM check_summary").df()
    finally:
        con.close()
    write_tables(out, tables)
    ran = analyses.run_all(settings, out, console=console, timings=timings)
    # Last: the latest complete quarter's promotion health report, in <out>/quarter-<Q>/.
    from .report.quarter.api import run_demo_quarter

    t0 = time.perf_counter()
    quarter_facts = run_demo_quarter(settings, out, console)
    timings["quarter_report"] = round(time.perf_counter() - t0, 2)
    ran.append("quarter_report")
    timings["total"] = round(time.perf_counter() - started, 2)
    write_manifest(
        out,
        command="liftlag demo",
        config=str(config_path),
        settings=settings.raw,
        seed=seed,
        input_fingerprint=result.fingerprint,
        row_counts=result.rows,
        timings=timings,
        analyses=ran,
        quarter_report=quarter_facts,
    )
    console.print(f"demo done in {timings['total']:.1f} s; results in [bold]{escape(str(out))}[/]")
    return 0
