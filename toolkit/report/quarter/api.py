"""``build_quarter_report``: the quarterly promotion health report from a config, end to end.

1. the panels are built first when stale (the build is skipped when nothing changed);
2. the quarter is checked against the quarters the export covers (exit 2 with the list if not);
3. ``gather`` runs the campaign readouts, purchase timing and the long-run analyses;
4. ``derive`` and ``health`` add the report's own tables (event study, tails, totals, verdict);
5. every table, ``report.html``, ``report.pdf`` (asked) and ``manifest.json`` are written into a
   temporary folder beside the output, which replaces the output folder only when all of it is
   written: a failed run never leaves a half report over a good one.

Examples
--------
>>> from toolkit import config                                                    # doctest: +SKIP
>>> from toolkit.report.quarter.api import build_quarter_report                  # doctest: +SKIP
>>> result = build_quarter_report(config.load("demo_data/liftlag.toml"), "2026Q2", "reports/2026Q2")  # doctest: +SKIP
>>> result.out / "report.html"                                                    # doctest: +SKIP
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from ... import __version__
from ...errors import ConfigError
from ...results import typed_for_parquet
from . import derive, health
from .gather import PRIVATE_TABLES, QuarterInputs, gather
from .period import Quarter, export_days, require_quarter
from .render import render_report

MANIFEST_COMMAND = "liftlag quarter"
# Columns that record how long something took: kept out of the results tables (they are in the
# manifest), so that two runs on the same inputs give identical tables.
RUNTIME_COLUMNS = ("all_learners_fit_seconds",)


@dataclass
class QuarterReport:
    """What :func:`build_quarter_report` wrote."""

    quarter: Quarter
    out: Path
    tables: dict[str, pd.DataFrame]
    missing: dict[str, str]
    files: list[str]
    call: str
    seconds: dict[str, float] = field(default_factory=dict)
    inputs: QuarterInputs | None = None


def ensure_built(settings, console=None):
    """Build the panels first when they are missing or stale.

    Uses the shared entry point ``toolkit.ensure.ensure_built`` when this build has it (it also
    reports failed builds and the last good panels); otherwise the build itself, which skips when
    nothing changed.
    """
    import importlib

    try:
        shared = importlib.import_module("toolkit.ensure").ensure_built
    except (ImportError, AttributeError):
        shared = None
    if shared is not None:
        return shared(settings, console)
    from ... import panels

    return panels.build(settings, force=False)


def _check_out(out: Path) -> None:
    """The output folder must be empty, absent, or a previous quarterly report (it is replaced)."""
    if not out.exists():
        return
    if not out.is_dir():
        raise ConfigError(f"--out {out} is a file; give a folder for the report")
    entries = [p for p in out.iterdir()]
    if not entries:
        return
    manifest = out / "manifest.json"
    if manifest.exists():
        try:
            if json.loads(manifest.read_text()).get("command") == MANIFEST_COMMAND:
                return
        except (OSError, json.JSONDecodeError):
            pass
    raise ConfigError(f"--out {out} already holds files that are not a quarterly report (no manifest.json of "
                      f"`{MANIFEST_COMMAND}`); the report replaces its folder, so choose an empty or new folder")


def _normalise(frame: pd.DataFrame) -> pd.DataFrame:
    """A table as written: positional index, runtime columns dropped, mixed object columns typed."""
    return typed_for_parquet(frame.drop(columns=[c for c in RUNTIME_COLUMNS if c in frame.columns])
                             .reset_index(drop=True))


def derive_tables(con, settings, inputs: QuarterInputs) -> dict[str, pd.DataFrame]:
    """The report's own tables from the gathered ones (see ``derive.py`` and ``health.py``)."""
    quarter = inputs.quarter
    alpha = settings.campaign.alpha
    tables = dict(inputs.tables)
    tables["quarter_campaigns"] = derive.quarter_campaigns(inputs.promotions, inputs.facts.get("campaign_status", {}),
                                                           tables)
    analysed = [pid for pid, state in inputs.facts.get("campaign_status", {}).items() if state == "analysed"]
    randomised = [pid for pid in analysed if inputs.facts.get("randomised", {}).get(pid, True)]
    tables["event_study"] = derive.event_study(con, randomised, weeks_before=settings.report.event_weeks_before,
                                               weeks_after=settings.report.event_weeks_after, alpha=alpha)
    tables["uplift_tails"] = derive.uplift_tails(tables, alpha=alpha)
    quarter_broadcasts = [str(p) for p, a in zip(inputs.promotions["promotion_id"], inputs.promotions["audience"])
                          if a == "broadcast"]
    economics_inputs = dict(tables)
    if "broadcast_effects" in tables:
        b = tables["broadcast_effects"]
        economics_inputs["broadcast_effects"] = b[b["promotion_id"].astype(str).isin(quarter_broadcasts)]
    tables["quarter_economics"] = derive.quarter_economics(economics_inputs, currency=settings.economics.currency,
                                                           alpha=alpha)
    previous = quarter.previous().label
    promotions_all = con.execute("SELECT promotion_id, CAST(starts_at AS DATE) AS starts_on FROM checked.promotions").df()
    starts = pd.to_datetime(promotions_all["starts_on"]).dt.date

    def ids_in(q: Quarter) -> list[str]:
        inside = (starts >= q.first_day) & (starts <= q.last_day)
        return promotions_all.loc[inside, "promotion_id"].astype(str).tolist()

    level = 1 - alpha
    rows = (health.dependence_indicators(tables.get("dependence_by_quarter"), quarter.label, previous,
                                         inputs.missing.get("dependence_by_quarter"), level)
            + health.timing_indicators(tables.get("timing_effects"), quarter.label, previous,
                                       inputs.missing.get("timing_effects"), quarter_ids=ids_in(quarter),
                                       previous_ids=ids_in(quarter.previous()), level=level, model="discrete_cloglog")
            + health.drift_indicators(tables, inputs.missing, quarter.label, level))
    tables["health_indicators"] = health.indicators_table(rows)
    tables["health_verdict"] = health.verdict(tables["health_indicators"], tables["quarter_economics"],
                                              tables["uplift_tails"], settings, quarter.label)
    return {name: _normalise(frame) for name, frame in tables.items() if name not in PRIVATE_TABLES
            and "customer_id" not in frame.columns}


def _fingerprints(settings) -> dict:
    """Input fingerprints for the footer and the manifest: the workspace's, and each input's files."""
    from ... import workspace
    from ...checks import input_fingerprint

    state = workspace.read_state(settings)
    out = {"check": state.get("check", {}).get("fingerprint"), "build": state.get("build", {}).get("fingerprint"),
           "inputs": {}}
    try:
        _, files = input_fingerprint(settings)
    except Exception:  # an input moved since the build: the workspace fingerprints still stand
        files = {}
    for name, listed in files.items():
        out["inputs"][name] = {"files": len(listed), "bytes": int(sum(f["bytes"] for f in listed))}
    return out


def _swap_into_place(staging: Path, out: Path) -> None:
    """Replace ``out`` by the finished ``staging`` folder (two renames; the old report is removed last)."""
    backup = None
    if out.exists():
        backup = out.with_name(f".{out.name}.previous-{os.getpid()}")
        if backup.exists():
            shutil.rmtree(backup)
        os.replace(out, backup)
    try:
        os.replace(staging, out)
    except BaseException:
        if backup is not None:
            os.replace(backup, out)
        raise
    if backup is not None:
        shutil.rmtree(backup, ignore_errors=True)


def build_quarter_report(settings, quarter_text: str, out: str | Path, *, pdf: bool = False, fit_cox: bool = True,
                         progress=None, console=None) -> QuarterReport:
    """Run the quarter's analyses and write its report folder.

    Parameters
    ----------
    settings : toolkit.config.Settings
    quarter_text : str
        ``"2026Q2"``.
    out : str or Path
        The report's folder; replaced as a whole when the run succeeds (it must be empty, absent,
        or a previous quarterly report).
    pdf : bool, default=False
        Also print ``report.pdf`` with headless Chromium (exit 1 when it is missing).
    fit_cox : bool, default=True
        Passed to the timing analysis (the Cox check on a customer sample).

    Raises
    ------
    ConfigError
        (exit 2) an unknown quarter, or one without purchases (the message lists those present),
        or an output folder holding other files.
    AnalysisError
        (exit 1) ``pdf`` without Chromium, or an analysis that cannot run.
    """
    from ... import workspace

    started = time.perf_counter()
    started_at = datetime.now(timezone.utc)
    say = progress or (lambda text: None)
    out = Path(out).expanduser().resolve()
    _check_out(out)
    if pdf:
        from ..pdf import require_chromium

        require_chromium()  # before an hour of analyses, not after
    seconds: dict[str, float] = {}
    clock = time.perf_counter()
    say("checking and building the panels (skipped when up to date)")
    ensure_built(settings, console)
    seconds["build"] = round(time.perf_counter() - clock, 2)
    con = workspace.connect(settings)
    try:
        quarter = require_quarter(con, quarter_text)
        first_day, last_day = export_days(con)
        inputs = gather(con, settings, quarter, fit_cox=fit_cox, progress=say)
        seconds.update(inputs.facts.get("seconds", {}))
        clock = time.perf_counter()
        say("deriving the report's tables")
        tables = derive_tables(con, settings, inputs)
        seconds["derive"] = round(time.perf_counter() - clock, 2)
    finally:
        con.close()
    if last_day is not None and last_day < quarter.last_day:
        inputs.notes.insert(0, ("export", "warning", f"the export ends on {last_day}, before the quarter's last day "
                                                     f"({quarter.last_day}): {quarter} is partial"))
    fingerprints = _fingerprints(settings)
    facts = {
        "quarter": quarter.label, "quarter_first_day": str(quarter.first_day), "quarter_last_day": str(quarter.last_day),
        "export_first_day": str(first_day), "export_last_day": str(last_day), "tool_version": __version__,
        "config": str(settings.config_path), "fingerprints": fingerprints,
        "seeds": {"campaign": settings.campaign.seed, "timing": settings.timing.seed,
                  **({"longrun": settings.longrun.seed} if hasattr(getattr(settings, "longrun", None), "seed") else {})},
        "generated_at": started_at.strftime("%Y-%m-%d %H:%M UTC"),
        "analysis_seconds": round(time.perf_counter() - started, 1),
        "missing": dict(sorted(inputs.missing.items())),
    }
    clock = time.perf_counter()
    say("rendering report.html")
    html = render_report(tables, inputs.missing, inputs.notes, settings, facts)
    seconds["render"] = round(time.perf_counter() - clock, 2)

    out.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{out.name}-", suffix=".tmp", dir=out.parent))
    try:
        files = []
        for name, frame in sorted(tables.items()):
            frame.to_parquet(staging / f"{name}.parquet", index=False)
            files.append(f"{name}.parquet")
        (staging / "report.html").write_text(html, encoding="utf-8")
        files.append("report.html")
        if pdf:
            from ..pdf import html_to_pdf

            clock = time.perf_counter()
            say("printing report.pdf with headless Chromium")
            html_to_pdf(staging / "report.html", staging / "report.pdf")
            seconds["pdf"] = round(time.perf_counter() - clock, 2)
            files.append("report.pdf")
        seconds["total"] = round(time.perf_counter() - started, 2)
        manifest = {
            "tool": "liftlag", "version": __version__, "command": MANIFEST_COMMAND, **facts,
            "settings": settings.raw, "row_counts": {n: int(len(f)) for n, f in sorted(tables.items())},
            "timings": seconds, "files": files + ["manifest.json"],
            "campaigns": inputs.facts.get("campaign_status", {}),
            "call": str(tables["health_verdict"]["call"].iloc[0]),
        }
        (staging / "manifest.json").write_text(json.dumps(manifest, indent=2, sort_keys=True, default=str))
        _swap_into_place(staging, out)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return QuarterReport(quarter=quarter, out=out, tables=tables, missing=inputs.missing, files=files,
                         call=manifest["call"], seconds=seconds, inputs=inputs)


def run_demo_quarter(settings, out_dir: str | Path, console=None) -> dict:
    """``liftlag demo``'s last step: the latest complete quarter's report in ``<out>/quarter-<Q>``.

    Prints the PDF too when Chromium is installed (and says so when it is not).
    """
    from ... import workspace
    from ..pdf import find_chromium
    from .period import latest_complete_quarter

    con = workspace.connect(settings)
    try:
        quarter = latest_complete_quarter(con)
    finally:
        con.close()
    if quarter is None:
        return {"skipped": "no quarter with purchases"}
    pdf = find_chromium() is not None
    target = Path(out_dir) / f"quarter-{quarter}"
    result = build_quarter_report(settings, quarter, target, pdf=pdf)
    if console is not None:
        console.print(f"  quarterly report {quarter}: call {result.call}; {target / 'report.html'}"
                      + ("" if pdf else " (no PDF: Chromium is not installed)"))
    return {"quarter": quarter, "out": str(target), "call": result.call, "pdf": pdf, "seconds": result.seconds}
