"""Run what a quarter's report needs, through the analyses' own entry points.

* the readouts of the targeted campaigns that started in the quarter (``toolkit.effects.api``);
* purchase timing (``toolkit.timing.api``) on the whole workspace;
* the long-run analyses through the quarter's last day (``toolkit.longrun``), when that package
  is installed in this build;
* the check's summaries (rows read / accepted / rejected by reason, warnings).

Each source that is absent or fails leaves a reason in ``QuarterInputs.missing`` instead of a
table; the report shows that reason where the section would be. Tables holding customer
identifiers (``uplift_scores``) are never collected.
"""

from __future__ import annotations

import importlib
import time
import warnings
from dataclasses import dataclass, field

import pandas as pd

from ...errors import AnalysisError, ConvergenceError, DataError, StatisticalWarning
from .period import Quarter

# Tables that identify customers: a data product for targeting systems, never part of a report.
PRIVATE_TABLES = ("uplift_scores",)
CAMPAIGN_TABLES = ("campaign_effects", "pull_forward", "uplift_deciles", "qini", "uplift_segments",
                   "randomisation_checks", "model_choice", "campaign_economics", "targeting_depth", "next_campaign",
                   "campaign_notes")
TIMING_TABLES = ("timing_effects", "km_curves", "hazard_ratios", "ph_check", "campaign_schedule")
# The long-run tables the report lays out, and where each is expected to come from.
LONGRUN_TABLES = {
    "dependence_by_quarter": "long-run dependence (toolkit.longrun)",
    "dependence_transitions": "long-run dependence (toolkit.longrun)",
    "dependence_distribution": "long-run dependence (toolkit.longrun)",
    "responsiveness_drift": "long-run dependence (toolkit.longrun)",
    "population_drift": "long-run dependence (toolkit.longrun)",
    "cohort_retention": "cohorts (toolkit.longrun)",
    "cohort_value": "cohorts (toolkit.longrun)",
    "broadcast_effects": "broadcast sales (toolkit.longrun)",
    "broadcast_series": "broadcast sales (toolkit.longrun)",
}
# Long-run entry points: (module, function). Each returns a readout with ``.tables`` and
# ``.notes`` and takes ``(con, settings, through="2026Q2")``.
LONGRUN_ENTRY_POINTS = (
    ("toolkit.longrun.api", "analyse_longrun"),
)


@dataclass
class QuarterInputs:
    """Everything the report is made from.

    Attributes
    ----------
    quarter : Quarter
    tables : dict of str -> DataFrame
        Results tables (campaign tables concatenated over the quarter's campaigns).
    missing : dict of str -> str
        Table name -> why it is not available in this build/run.
    notes : list of (source, level, message)
    promotions : DataFrame
        The promotions that started in the quarter (from the checked inputs).
    facts : dict
        Export days, seconds per step, counts; for the footer and the manifest.
    """

    quarter: Quarter
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    missing: dict[str, str] = field(default_factory=dict)
    notes: list[tuple[str, str, str]] = field(default_factory=list)
    promotions: pd.DataFrame | None = None
    facts: dict = field(default_factory=dict)


def quarter_promotions(con, quarter: Quarter) -> pd.DataFrame:
    """Promotions whose first day falls in the quarter (targeted and broadcast), by start."""
    frame = con.execute(
        "SELECT * FROM checked.promotions WHERE CAST(starts_at AS DATE) BETWEEN ? AND ? ORDER BY starts_at, promotion_id",
        [quarter.first_day, quarter.last_day],
    ).df()
    for col in ("name", "mechanic", "depth", "cost_per_redemption"):
        if col not in frame.columns:
            frame[col] = None
    return frame


def gather(con, settings, quarter: Quarter, *, fit_cox: bool = True, progress=None) -> QuarterInputs:
    """Run the analyses a quarter's report needs on an open workspace connection."""
    inputs = QuarterInputs(quarter=quarter)
    say = progress or (lambda text: None)
    seconds: dict[str, float] = {}
    inputs.promotions = quarter_promotions(con, quarter)

    clock = time.perf_counter()
    say("campaign readouts")
    _campaigns(con, settings, inputs)
    seconds["campaigns"] = round(time.perf_counter() - clock, 2)

    clock = time.perf_counter()
    say("purchase timing")
    _timing(con, settings, inputs, fit_cox=fit_cox)
    seconds["timing"] = round(time.perf_counter() - clock, 2)

    clock = time.perf_counter()
    say("long-run analyses")
    _longrun(con, settings, inputs)
    seconds["longrun"] = round(time.perf_counter() - clock, 2)

    _data_quality(con, inputs)
    inputs.facts["seconds"] = seconds
    return inputs


def _campaigns(con, settings, inputs: QuarterInputs) -> None:
    from ...effects.api import analyse_campaign, list_targeted_promotions

    targeted = set(list_targeted_promotions(con)["promotion_id"].astype(str))
    promotions = inputs.promotions
    wanted = [str(p) for p, a in zip(promotions["promotion_id"], promotions["audience"]) if a == "targeted"]
    readouts, status = [], {}
    for pid in wanted:
        if pid not in targeted:
            status[pid] = "skipped: no assigned customers in the campaign_windows panel"
            continue
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", StatisticalWarning)  # carried in the readout's notes
                readout = analyse_campaign(con, settings, pid)
        except (AnalysisError, DataError) as exc:
            status[pid] = f"skipped: {exc}"
            inputs.notes.append(("campaign " + pid, "warning", f"not analysed: {exc}"))
            continue
        readouts.append(readout)
        status[pid] = "analysed"
        for level, message in readout.notes:
            inputs.notes.append(("campaign " + pid, level, message))
    inputs.facts["campaign_status"] = status
    if not wanted:
        reason = f"no targeted campaign started in {inputs.quarter}"
        for name in CAMPAIGN_TABLES:
            inputs.missing[name] = reason
        return
    if not readouts:
        for name in CAMPAIGN_TABLES:
            inputs.missing[name] = "no targeted campaign of the quarter could be analysed (see the notes)"
        return
    for name in CAMPAIGN_TABLES:
        frames = [r.tables[name] for r in readouts if name in r.tables and len(r.tables[name])]
        if frames:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", FutureWarning)  # concat with all-NA columns
                inputs.tables[name] = pd.concat(frames, ignore_index=True)
        else:
            inputs.tables[name] = readouts[0].tables[name].iloc[0:0].copy()
    inputs.facts["campaign_meta"] = {r.promotion_id: {k: r.meta.get(k) for k in
                                                      ("n_treated", "n_holdout", "chosen_model", "alpha", "seed",
                                                       "folds", "starts_on", "ends_on", "after_ends_on")}
                                     for r in readouts}
    inputs.facts["randomised"] = {r.promotion_id: bool(r.is_randomised) for r in readouts}


def _timing(con, settings, inputs: QuarterInputs, *, fit_cox: bool) -> None:
    from ...timing.api import analyse_timing, options_from

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", StatisticalWarning)
            readout = analyse_timing(con, settings, fit_cox=fit_cox, **options_from(settings))
    except (AnalysisError, ConvergenceError, DataError) as exc:
        for name in TIMING_TABLES:
            inputs.missing[name] = f"purchase timing could not be estimated: {exc}"
        inputs.notes.append(("timing", "warning", str(exc)))
        return
    for name in TIMING_TABLES:
        if name in readout.tables:
            inputs.tables[name] = readout.tables[name]
        else:
            inputs.missing[name] = "this build's timing analysis does not produce it"
    for note in readout.notes:
        inputs.notes.append(("timing", "info", note))


def _longrun_entry_points():
    found = []
    for module_name, function in LONGRUN_ENTRY_POINTS:
        try:
            module = importlib.import_module(module_name)
        except ImportError:
            continue
        entry = getattr(module, function, None)
        if entry is not None and entry not in found:
            found.append(entry)
    return found


def _longrun(con, settings, inputs: QuarterInputs) -> None:
    entries = _longrun_entry_points()
    produced: dict[str, pd.DataFrame] = {}
    for entry in entries:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", StatisticalWarning)
                readout = entry(con, settings, through=inputs.quarter.label)
        except (AnalysisError, ConvergenceError, DataError) as exc:
            inputs.notes.append(("long run", "warning", f"{entry.__name__}: {exc}"))
            for name in LONGRUN_TABLES:
                inputs.missing.setdefault(name, f"the long-run analysis could not run: {exc}")
            continue
        for name, frame in readout.tables.items():
            if "customer_id" in frame.columns:
                continue  # never carry customer-level rows into a report
            produced.setdefault(name, frame)
        for note in getattr(readout, "notes", []) or []:
            text = note[-1] if isinstance(note, tuple) else str(note)
            inputs.notes.append(("long run", "info", text))
    for name, source in LONGRUN_TABLES.items():
        if name in produced:
            inputs.tables[name] = produced[name]
        elif not entries:
            inputs.missing[name] = f"the {source} analysis is not part of this build yet"
        else:
            inputs.missing.setdefault(name, f"this build's long-run analysis did not produce {name} (its notes, "
                                            f"in the appendix, say why when a section could not run)")
    for name, frame in produced.items():
        if name not in LONGRUN_TABLES:
            inputs.tables[name] = frame


def _data_quality(con, inputs: QuarterInputs) -> None:
    for name in ("check_summary", "rejects_summary", "warnings_summary"):
        try:
            inputs.tables[name] = con.execute(f"SELECT * FROM checked.{name}").df()
        except Exception as exc:  # an old workspace without the table
            inputs.missing[name] = f"the workspace has no {name} ({type(exc).__name__}); rebuild with `liftlag build`"
