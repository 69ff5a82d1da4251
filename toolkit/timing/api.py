"""Purchase timing: acceleration, the post-promotion dip, anticipation, and the gap after a deal.

:func:`analyse_timing` is the entry point: it reads the panels through the workspace connection,
builds spells and cells in SQL (``toolkit.timing.spells``), and fits

* Kaplan-Meier curves of the days to the next purchase after a deal and after a full-price
  purchase, log-rank test, medians, and the RMST difference to ``horizon_days`` (effect
  ``gap_after_deal``, in days; customer-block bootstrap interval), overall and per promotion;
* the discrete-time complementary log-log model on all customers (the default path at scale) and
  the Cox model with time-varying covariates on a stratified customer sample (both with
  customer-clustered bootstrap intervals), whose hazard ratios give ``acceleration``
  (``promotion_available``), ``post_promotion_dip`` (``in_dip``: the ``dip_days`` after a coupon
  redemption, on days no promotion runs) and ``anticipation`` (``in_anticipation``).

Both hazard models have the same covariates (see ``sql/timing/timing_spells.sql``), a baseline in
days since the last purchase (Cox: unrestricted; discrete: one level per period) and, by default,
calendar-month indicators as a seasonal adjustment. Assumptions, stated in every row's note:
the hazard ratios compare the same customers' days with and without each condition, adjusted for
time since the last purchase, the calendar month and coupons received; they are not randomised
contrasts (the holdout comparison in ``campaign_effects`` is), and a customer trait that both
drives redemption and the later purchase rate would bias the dip.

When targeted campaigns keep no regular cadence, anticipation is reported as not estimable (a
row with a null estimate and a note), never as zero.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

from ..errors import AnalysisError, StatisticalWarning
from .cox import TimeVaryingCox
from .discrete import DiscreteTimeHazard
from .kaplan_meier import TimeToNextOrder
from .ph_check import COLUMNS as PH_COLUMNS
from .ph_check import late_interaction_check, time_fixed_check
from .schedule import CampaignCadence
from .spells import COVARIATES, SpellOptions, TimingTables

EFFECTS = {
    "acceleration": "promotion_available",
    "post_promotion_dip": "in_dip",
    "anticipation": "in_anticipation",
}
EFFECT_COLUMNS = ["effect", "scope", "estimate", "ci_low", "ci_high", "model", "n_customers", "n_events",
                  "ci_level", "note"]
MODEL_DISCRETE = "discrete_cloglog"
MODEL_COX = "cox_time_varying"
MODEL_RMST = "kaplan_meier_rmst"
ASSUMPTIONS = ("not a randomised contrast: customer-days compared, adjusted for days since the last purchase, "
               "calendar month, recent purchase rate and coupons received")


@dataclass
class TimingReadout:
    """What :func:`analyse_timing` found: result tables and the fitted objects behind them.

    Attributes
    ----------
    tables : dict of str -> DataFrame
        ``timing_effects``, ``km_curves``, ``hazard_cells``, ``ph_check``, ``hazard_ratios``,
        ``campaign_schedule``, ``timing_inputs``.
    cadence : CampaignCadence
    gaps : TimeToNextOrder or None
    discrete : DiscreteTimeHazard or None
    cox : TimeVaryingCox or None
    notes : list of str
    seconds : dict of str -> float
        Wall time of each step.
    """

    tables: dict[str, pd.DataFrame]
    cadence: CampaignCadence
    gaps: TimeToNextOrder | None = None
    discrete: DiscreteTimeHazard | None = None
    cox: TimeVaryingCox | None = None
    notes: list[str] = field(default_factory=list)
    seconds: dict[str, float] = field(default_factory=dict)


def analyse_timing(
    con: duckdb.DuckDBPyConnection,
    settings,
    *,
    n_blocks: int = 64,
    coupons_cap: int = 10,
    dip_after: str = "targeted",
    calendar_adjustment: bool = True,
    rate_adjustment: bool = True,
    rate_classes: int = 8,
    fit_cox: bool = True,
    cadence_tolerance_days: int = 2,
    min_regular_share: float = 0.75,
    expected_starts: str = "cadence",
    late_period_days: int = 14,
) -> TimingReadout:
    """Run the purchase-timing analysis on a workspace.

    Parameters
    ----------
    con : duckdb.DuckDBPyConnection
        Workspace connection: the panels, with the checked inputs attached as ``checked``.
    settings : toolkit.config.Settings
        Uses ``settings.timing`` (dip_days, anticipation_days, anticipation_min_coupons,
        horizon_days, cox_sample_customers, bootstrap_rounds, seed, alpha) and
        ``settings.report.small_cell``.
    n_blocks : int, default=64
        Customer blocks of the bootstrap of the discrete model and of the RMST difference.
    coupons_cap : int, default=10
        Coupons received are counted up to this number (cells stay few).
    dip_after : {"targeted", "any"}, default="targeted"
        Which orders start a post-promotion dip: orders with a targeted coupon, or with any promotion.
    calendar_adjustment : bool, default=True
        Calendar-month indicators in both hazard models (seasonality, trend).
    rate_adjustment : bool, default=True
        Adjust for the customer's recent purchase rate (``rate_classes`` classes of purchase days
        in the year before the gap): indicators in the discrete model, strata in the Cox model.
        Without it, customers' different purchase rates pull every hazard ratio toward 1.
    fit_cox : bool, default=True
        Also fit the Cox model on the customer sample (the discrete model always runs).
    cadence_tolerance_days, min_regular_share, expected_starts
        Passed to :class:`~toolkit.timing.schedule.CampaignCadence`.
    late_period_days : int, default=14
        The discrete model's proportional-hazards check compares hazard ratios up to and after
        this many days since the purchase (inside dip_days, so the dip can be checked too).

    Returns
    -------
    TimingReadout

    Examples
    --------
    >>> from toolkit import config, workspace                        # doctest: +SKIP
    >>> settings = config.load("demo_data/liftlag.toml")              # doctest: +SKIP
    >>> readout = analyse_timing(workspace.connect(settings), settings)  # doctest: +SKIP
    >>> readout.tables["timing_effects"][["effect", "scope", "estimate", "model"]]  # doctest: +SKIP
    """
    timing = settings.timing
    small_cell = settings.report.small_cell
    seconds: dict[str, float] = {}
    notes: list[str] = []
    clock = time.perf_counter()

    starts = con.cursor().execute(
        "SELECT CAST(starts_at AS DATE) AS starts_on FROM checked.promotions WHERE audience = 'targeted'"
    ).df()["starts_on"]
    export_end = con.cursor().execute("SELECT max(ordered_on + days_to_next_order) FROM purchase_gaps").fetchall()[0][0]
    cadence = CampaignCadence(tolerance_days=cadence_tolerance_days, min_regular_share=min_regular_share,
                              expected_starts=expected_starts).fit(starts, until=export_end)
    options = SpellOptions(
        dip_days=timing.dip_days, anticipation_days=timing.anticipation_days,
        min_coupons=timing.anticipation_min_coupons, coupons_cap=coupons_cap, n_blocks=n_blocks,
        seed=timing.seed, sample_customers=timing.cox_sample_customers, dip_after=dip_after,
        horizon_days=timing.horizon_days, rate_classes=rate_classes,
    )
    tables = TimingTables(con, options, cadence.expected_starts_)
    seconds["sql"] = time.perf_counter() - clock
    try:
        counts = tables.counts()
        readout = TimingReadout(tables={}, cadence=cadence, notes=notes, seconds=seconds)
        effects: list[dict] = []

        clock = time.perf_counter()
        km_curves = _gap_after_deal(readout, tables, timing, small_cell, n_blocks, effects, counts)
        seconds["kaplan_meier"] = time.perf_counter() - clock

        clock = time.perf_counter()
        cells = tables.cells()
        covariates, dropped = _usable_covariates(cells, cadence)
        factors = ["month_no"] if calendar_adjustment and cells["month_no"].nunique() > 1 else []
        if rate_adjustment and cells["rate_class"].nunique() > 1:
            factors.append("rate_class")
        hazard_ratios, ph_rows = [], []
        try:
            discrete = DiscreteTimeHazard(alpha=timing.alpha, bootstrap_rounds=timing.bootstrap_rounds,
                                          seed=timing.seed).fit(cells, period_col="period", covariates=covariates,
                                                                factors=factors, block_col="block", table="timing_cells")
            readout.discrete = discrete
            hazard_ratios.append(_ratios(discrete, MODEL_DISCRETE))
            late = int(np.searchsorted(tables.periods["period_to"].to_numpy(), late_period_days, side="left")) + 1
            late_from = int(tables.periods["period_from"].iloc[late]) if late < len(tables.periods) else late_period_days
            ph_rows.append(late_interaction_check(discrete, cells, late_period=late,
                                                  late_label=f"day {late_from} or later since the purchase")
                           .assign(model=MODEL_DISCRETE))
            discrete_note = (f"customer-days at risk in {discrete.n_cells_} cells; baseline per period since the last "
                             f"purchase{' + calendar month' if factors else ''}; {discrete.interval_method_}")
            if discrete.is_penalised_:
                discrete_note = discrete.fit_note_ + "; " + discrete_note
            _hazard_rows(effects, discrete, MODEL_DISCRETE, counts["customers"], discrete.n_events_, timing.alpha,
                         discrete_note, dropped, cadence)
        except AnalysisError as exc:
            notes.append(f"discrete-time model not fitted: {exc}")
            _not_estimable(effects, MODEL_DISCRETE, counts["customers"], timing.alpha, str(exc))
        seconds["discrete"] = time.perf_counter() - clock

        if fit_cox:
            clock = time.perf_counter()
            _cox(readout, tables, timing, covariates, dropped, factors, cadence, effects, hazard_ratios, ph_rows,
                 strata="rate_class" if "rate_class" in factors else None)
            seconds["cox"] = time.perf_counter() - clock

        readout.tables = {
            "timing_effects": pd.DataFrame(effects, columns=EFFECT_COLUMNS),
            "km_curves": km_curves,
            "hazard_cells": _hazard_cells(cells, tables.periods, small_cell),
            "ph_check": pd.concat(ph_rows, ignore_index=True) if ph_rows else pd.DataFrame(columns=PH_COLUMNS + ["model"]),
            "hazard_ratios": pd.concat(hazard_ratios, ignore_index=True) if hazard_ratios else pd.DataFrame(),
            "campaign_schedule": _schedule_table(cadence, timing.anticipation_days),
            "timing_inputs": pd.DataFrame(
                [{"quantity": k, "value": v} for k, v in {**counts, **_sample_counts(tables)}.items()]),
        }
        return readout
    finally:
        tables.close()


# -- steps ------------------------------------------------------------------------------------------
def _usable_covariates(cells: pd.DataFrame, cadence: CampaignCadence) -> tuple[list[str], dict[str, str]]:
    """Covariates that vary in the cells; the others with the reason they are left out."""
    dropped: dict[str, str] = {}
    at_risk = cells[cells["at_risk"] > 0]
    usable = []
    for covariate in COVARIATES:
        if covariate == "in_anticipation" and not cadence.is_regular_:
            dropped[covariate] = "not estimable: no regular campaign cadence (" + cadence.note_ + ")"
        elif at_risk[covariate].nunique() < 2:
            dropped[covariate] = f"not estimable: '{covariate}' never varies in this data"
        elif at_risk.loc[at_risk[covariate] > 0, "events"].sum() == 0:
            dropped[covariate] = f"not estimable: no purchase at all on days with '{covariate}'"
        else:
            usable.append(covariate)
    return usable, dropped


def _gap_after_deal(readout, tables, timing, small_cell, n_blocks, effects, counts) -> pd.DataFrame:
    gap_counts = tables.gap_counts()
    gap_counts["group"] = np.where(gap_counts["is_deal"], "deal", "full_price")
    curves = []
    level = 1 - timing.alpha
    km_kwargs = dict(horizon_days=timing.horizon_days, alpha=timing.alpha, bootstrap_rounds=timing.bootstrap_rounds,
                     seed=timing.seed, small_cell=small_cell)
    try:
        fit = TimeToNextOrder(**km_kwargs).fit(gap_counts, groups=("deal", "full_price"), block_col="block",
                                               table="timing_gap_counts")
        readout.gaps = fit
        ci = fit.conf_int(timing.alpha).loc["rmst_difference"]
        groups = fit.groups_.set_index("group")
        effects.append({
            "effect": "gap_after_deal", "scope": "all", "estimate": fit.params_["rmst_difference"],
            "ci_low": ci["ci_low"], "ci_high": ci["ci_high"], "model": MODEL_RMST,
            "n_customers": counts["customers"], "n_events": int(groups["events"].sum()), "ci_level": level,
            "note": (f"restricted mean days to the next purchase within {timing.horizon_days} days, after a deal minus "
                     f"after a full-price purchase (deal {groups.loc['deal', 'rmst_days']:.1f}, full price "
                     f"{groups.loc['full_price', 'rmst_days']:.1f}; medians {groups.loc['deal', 'median_days']:g} and "
                     f"{groups.loc['full_price', 'median_days']:g} days); log-rank chi-square "
                     f"{fit.logrank_['test_statistic']:.2f}, p={fit.logrank_['p_value']:.3g}; interval: customer-block "
                     f"bootstrap ({n_blocks} blocks, {timing.bootstrap_rounds} rounds); purchase days, same-day "
                     f"orders merged ({counts['same_day_orders_merged']})"),
        })
        curves.append(fit.curves_.assign(scope="all"))
    except AnalysisError as exc:
        effects.append(_empty_row("gap_after_deal", "all", MODEL_RMST, counts["customers"], level, str(exc)))
    by_promotion = tables.customers_by_promotion()
    full_price = gap_counts[~gap_counts["is_deal"]]
    for promotion_id, customers in by_promotion.items():
        if customers < small_cell:
            effects.append(_empty_row("gap_after_deal", promotion_id, MODEL_RMST, customers, level,
                                      f"suppressed: fewer than {small_cell} customers bought on this promotion"))
            continue
        part = pd.concat([gap_counts[gap_counts["promotion_id"] == promotion_id].assign(group=promotion_id), full_price])
        try:
            fit = TimeToNextOrder(**km_kwargs, curves=False).fit(
                part, groups=(promotion_id, "full_price"), block_col="block", table=f"timing_gap_counts ({promotion_id})")
        except AnalysisError as exc:
            effects.append(_empty_row("gap_after_deal", promotion_id, MODEL_RMST, customers, level, str(exc)))
            continue
        ci = fit.conf_int(timing.alpha).loc["rmst_difference"]
        groups = fit.groups_.set_index("group")
        effects.append({
            "effect": "gap_after_deal", "scope": promotion_id, "estimate": fit.params_["rmst_difference"],
            "ci_low": ci["ci_low"], "ci_high": ci["ci_high"], "model": MODEL_RMST, "n_customers": customers,
            "n_events": int(groups.loc[promotion_id, "events"]), "ci_level": level,
            "note": (f"RMST to {timing.horizon_days} days after a purchase on {promotion_id} minus after a full-price "
                     f"purchase; log-rank p={fit.logrank_['p_value']:.3g}; customer-block bootstrap"),
        })
    columns = ["scope", "group", "days", "survival", "ci_low", "ci_high", "at_risk"]
    return pd.concat(curves, ignore_index=True)[columns] if curves else pd.DataFrame(columns=columns)


def _cox(readout, tables, timing, covariates, dropped, factors, cadence, effects, hazard_ratios, ph_rows,
         strata=None) -> None:
    spells = tables.cox_spells()
    sampled, population = tables.sample_size()
    sample_note = (f"Cox on a stratified sample of {sampled} of {population} customers (strata: coupons received x "
                   f"ever redeemed, seed {timing.seed})")
    model_columns = list(covariates)
    if strata:
        sample_note += "; strata: purchase rate class"
    if "month_no" in factors and readout.discrete is not None:
        # Seasonal adjustment in one column: the discrete model's log relative hazard of the
        # spell's calendar month (its coefficient should come out near 1).
        effects_by_month = readout.discrete.factor_effects("month_no")
        effects_by_month.index = effects_by_month.index.astype(spells["month_no"].dtype)
        spells["calendar_month_effect"] = spells["month_no"].map(effects_by_month).fillna(0.0).astype(float)
        if spells["calendar_month_effect"].nunique() > 1:
            model_columns.append("calendar_month_effect")
            sample_note += "; seasonal adjustment: the discrete model's month effects as one covariate"
    usable = [c for c in covariates if spells[c].nunique() > 1]
    try:
        if len(usable) < len(covariates):
            missing = sorted(set(covariates) - set(usable))
            raise AnalysisError(f"in the Cox sample, covariate(s) {', '.join(missing)} never vary; "
                                "raise timing.cox_sample_customers")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", StatisticalWarning)
            cox = TimeVaryingCox(alpha=timing.alpha, bootstrap_rounds=timing.bootstrap_rounds, seed=timing.seed).fit(
                spells, id_col="customer_id", start_col="start_days", stop_col="stop_days", event_col="is_event",
                covariates=model_columns, strata_col=strata, table="timing_spells (Cox sample)")
    except AnalysisError as exc:
        readout.notes.append(f"Cox model not fitted: {exc}")
        _not_estimable(effects, MODEL_COX, sampled, timing.alpha, f"{sample_note}; {exc}")
        return
    readout.cox = cox
    ratios = _ratios(cox, MODEL_COX)
    hazard_ratios.append(ratios[ratios["covariate"].isin(covariates)])
    note = f"{sample_note}; Efron ties; {cox.interval_method_}"
    if cox.is_penalised_:
        note = cox.fit_note_ + "; " + note
    _hazard_rows(effects, cox, MODEL_COX, cox.n_customers_, cox.n_events_, timing.alpha, note, dropped, cadence)
    first = spells[spells["start_days"] == 0].set_index(["customer_id", "purchase_day"])
    last = spells.groupby(["customer_id", "purchase_day"]).agg(days=("stop_days", "max"), is_event=("is_event", "max"))
    gaps = first[covariates].join(last).reset_index(drop=True)
    ph_rows.append(time_fixed_check(gaps, covariates, duration_col="days", event_col="is_event").assign(model=MODEL_COX))


def _hazard_rows(effects, model, name, n_customers, n_events, alpha, note, dropped, cadence) -> None:
    ci = model.conf_int(alpha)
    for effect, covariate in EFFECTS.items():
        if covariate in dropped:
            effects.append(_empty_row(effect, "all", name, n_customers, 1 - alpha, dropped[covariate]))
            continue
        extra = ""
        if effect == "anticipation":
            extra = f"; expected starts every {cadence.cadence_days_:g} days"
        if effect == "post_promotion_dip":
            extra = "; days after a coupon redemption with no promotion running"
        effects.append({
            "effect": effect, "scope": "all", "estimate": float(np.exp(model.params_[covariate])),
            "ci_low": float(np.exp(ci.loc[covariate, "ci_low"])), "ci_high": float(np.exp(ci.loc[covariate, "ci_high"])),
            "model": name, "n_customers": int(n_customers), "n_events": int(n_events), "ci_level": 1 - alpha,
            "note": f"hazard ratio ({covariate}); {note}{extra}; {ASSUMPTIONS}",
        })


def _not_estimable(effects, name, n_customers, alpha, reason) -> None:
    for effect in EFFECTS:
        effects.append(_empty_row(effect, "all", name, n_customers, 1 - alpha, reason))


def _empty_row(effect, scope, model, n_customers, level, note) -> dict:
    return {"effect": effect, "scope": scope, "estimate": np.nan, "ci_low": np.nan, "ci_high": np.nan,
            "model": model, "n_customers": int(n_customers), "n_events": 0, "ci_level": level, "note": note}


def _ratios(model, name: str) -> pd.DataFrame:
    summary = model.summary
    return summary.assign(model=name)[["model", "covariate", "hazard_ratio", "hr_ci_low", "hr_ci_high", "se_model",
                                       "se_bootstrap", "ci_level", "ci_method", "fit"]]


def _hazard_cells(cells: pd.DataFrame, periods: pd.DataFrame, small_cell: int) -> pd.DataFrame:
    """Cells summed over blocks and months; events and hazard suppressed in small cells."""
    keys = ["period", *COVARIATES]
    summary = cells.groupby(keys, as_index=False)[["at_risk", "events"]].sum()
    summary = summary.merge(periods, on="period", how="left")
    summary["hazard_per_day"] = summary["events"] / summary["at_risk"]
    small = summary["events"] < small_cell
    summary["is_suppressed"] = small
    summary.loc[small, ["events", "hazard_per_day"]] = np.nan
    summary = summary.rename(columns={"at_risk": "at_risk_days", "period_from": "days_from", "period_to": "days_to"})
    return summary[["period", "days_from", "days_to", *COVARIATES, "at_risk_days", "events", "hazard_per_day",
                    "is_suppressed"]]


def _schedule_table(cadence: CampaignCadence, anticipation_days: int) -> pd.DataFrame:
    windows = cadence.expected_windows(anticipation_days)
    observed = set(cadence.starts_)
    windows["is_observed_start"] = windows["starts_on"].isin(observed)
    summary = cadence.summary.iloc[0]
    for column in ("is_regular", "cadence_days", "share_on_cadence", "note"):
        windows[column] = summary[column]
    if windows.empty:
        windows = pd.DataFrame([{"starts_on": None, "window_from_on": None, "window_to_on": None,
                                 "is_observed_start": None, **{c: summary[c] for c in
                                                               ("is_regular", "cadence_days", "share_on_cadence", "note")}}])
    return windows


def _sample_counts(tables: TimingTables) -> dict[str, int]:
    sampled, population = tables.sample_size()
    return {"cox_sample_customers": sampled}


# -- writing ----------------------------------------------------------------------------------------
def write_timing(readout: TimingReadout, out_dir: str | Path) -> list[Path]:
    """Write each table of ``readout`` as ``<out_dir>/<name>.parquet``.

    The files are written into a temporary folder inside ``out_dir`` first and then moved into
    place one by one (an atomic rename each), so a reader never sees a half-written file.

    Returns
    -------
    list of Path
        The files written.
    """
    from ..results import write_tables

    return write_tables(Path(out_dir), readout.tables)


OPTION_NAMES = ("n_blocks", "coupons_cap", "dip_after", "calendar_adjustment", "rate_adjustment", "rate_classes",
                "cadence_tolerance_days", "min_regular_share", "expected_starts", "late_period_days")


def options_from(settings) -> dict:
    """The keyword options of :func:`analyse_timing`, as the config's ``[timing]`` section sets them."""
    return {name: getattr(settings.timing, name) for name in OPTION_NAMES}


def run_timing(settings, out_dir: str | Path, console=None) -> dict:
    """The runner for ``liftlag demo``: analyse the workspace's purchase timing, write the tables.

    Returns facts for the manifest (tables written, seconds, notes).
    """
    import time

    from .. import workspace

    started = time.perf_counter()
    con = workspace.connect(settings)
    try:
        readout = analyse_timing(con, settings, **options_from(settings))
    finally:
        con.close()
    write_timing(readout, out_dir)
    seconds = round(time.perf_counter() - started, 2)
    if console is not None:
        effects = readout.tables.get("timing_effects")
        console.print(f"  timing: {len(effects) if effects is not None else 0} effect rows in {seconds:.1f} s")
    return {"tables": sorted(readout.tables), "seconds": seconds, "notes": list(readout.notes)}
