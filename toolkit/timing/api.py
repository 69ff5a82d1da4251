"""Purchase timing: acceleration, the post-promotion dip, anticipation, and the gap after a deal.

:func:`analyse_timing` is the entry point: it reads the panels through the workspace connection,
builds its inputs in SQL (``toolkit.timing.spells``, ``sql/timing/``), and writes one row per
effect x scope x model into ``timing_effects``, each labelled with its ``basis``:

* **randomised** (primary where campaigns keep a holdout): the treatment arm's daily order rate
  over the holdout's, by assignment, in the campaign window (``acceleration``) and in the window
  after it (``post_promotion_dip``), per campaign and pooled with one intercept per campaign
  (:mod:`toolkit.timing.randomised`), customer-block bootstrap intervals;
* **observational**: the discrete-time complementary log-log model on all customers (the default
  path at scale) and the Cox model with time-varying covariates on a stratified customer sample
  (both with customer-clustered bootstrap intervals), whose hazard ratios give ``acceleration``
  (``promotion_available``), ``post_promotion_dip`` (``in_dip``: the ``dip_days`` after a coupon
  redemption, on days no promotion runs) and ``anticipation`` (``in_anticipation``). Anticipation
  is a difference in differences: exposed customers (at least ``anticipation_min_coupons`` coupons
  received) vs the rest, in the windows before the expected starts vs other days, with a factor
  per window and the exposed group's difference per calendar month; the discrete model's
  anticipation rows (pooled and per expected start) are the primary ones;
* **descriptive**: Kaplan-Meier curves of the days to the next purchase after a deal and after a
  full-price purchase, log-rank test, medians and the RMST difference (``gap_after_deal``, days).

The hazard models adjust for days since the last purchase, calendar month, coupons received and a
purchase-rate class measured before each promotion. A row that the data cannot support (too few
exposed customers or starts, a thin arm, an after-window past the export's end) has no estimate and
a note that starts with "not estimable", never a number near 1. Only pooled primary rows carry a
``verdict``.
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
from .randomised import POOLED, fit_windows
from .schedule import CampaignCadence
from .spells import COVARIATES, SpellOptions, TimingTables, merge_periods, workspace_tables

EFFECTS = {
    "acceleration": "promotion_available",
    "post_promotion_dip": "in_dip",
    "anticipation": "in_anticipation",
}
EFFECT_COLUMNS = ["effect", "scope", "estimate", "ci_low", "ci_high", "model", "basis", "is_primary", "verdict",
                  "n_customers", "n_events", "ci_level", "note"]
MODEL_RANDOMISED = "randomised_rate_ratio"
RANDOMISED_WINDOWS = {"acceleration": "during", "post_promotion_dip": "after"}
EFFECT_ORDER = ("acceleration", "post_promotion_dip", "anticipation", "gap_after_deal")
BASIS_ORDER = ("randomised", "observational", "descriptive")
MODEL_DISCRETE = "discrete_cloglog"
MODEL_COX = "cox_time_varying"
MODEL_RMST = "kaplan_meier_rmst"
ASSUMPTIONS = ("observational, not a randomised contrast: customer-days compared, adjusted for days since the last "
               "purchase, calendar month, coupons received and the purchase rate measured before each promotion")


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
    randomised : dict of str -> ArmRateRatio
        The randomised contrasts by effect (``acceleration``: campaign window,
        ``post_promotion_dip``: the window after it).
    anticipation_by_window : DiscreteTimeHazard or None
        The discrete model with one anticipation interaction per expected start.
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
    randomised: dict = field(default_factory=dict)
    anticipation_by_window: DiscreteTimeHazard | None = None


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

    promotions = con.cursor().execute(
        "SELECT promotion_id, CAST(starts_at AS DATE) AS starts_on, CAST(ends_at AS DATE) AS ends_on, audience "
        "FROM checked.promotions ORDER BY starts_on, promotion_id"
    ).df()
    targeted = promotions[promotions["audience"] == "targeted"]
    export_end = con.cursor().execute("SELECT max(ordered_on + days_to_next_order) FROM purchase_gaps").fetchall()[0][0]
    cadence = CampaignCadence(tolerance_days=cadence_tolerance_days, min_regular_share=min_regular_share,
                              expected_starts=expected_starts).fit(targeted["starts_on"], until=export_end)
    after_days = int(settings.windows.after_days)
    blocked = [(row.starts_on, row.ends_on + pd.Timedelta(days=after_days),
                f"{row.promotion_id} ({row.starts_on:%Y-%m-%d} to {row.ends_on:%Y-%m-%d} and {after_days} days after)")
               for row in promotions.itertuples()]
    windows = cadence.expected_windows(timing.anticipation_days, blocked)
    exposure_periods = merge_periods(
        (row.starts_on, row.ends_on + pd.Timedelta(days=max(after_days, int(timing.dip_days))))
        for row in promotions.itertuples())
    options = SpellOptions(
        dip_days=timing.dip_days, anticipation_days=timing.anticipation_days,
        min_coupons=timing.anticipation_min_coupons, coupons_cap=coupons_cap, n_blocks=n_blocks,
        seed=timing.seed, sample_customers=timing.cox_sample_customers, dip_after=dip_after,
        horizon_days=timing.horizon_days, rate_classes=rate_classes,
    )
    tables = TimingTables(con, options, windows, exposure_periods)
    seconds["sql"] = time.perf_counter() - clock
    try:
        counts = tables.counts()
        readout = TimingReadout(tables={}, cadence=cadence, notes=notes, seconds=seconds)
        effects: list[dict] = []

        clock = time.perf_counter()
        _randomised(readout, tables, timing, effects)
        seconds["randomised"] = time.perf_counter() - clock

        clock = time.perf_counter()
        km_curves = _gap_after_deal(readout, tables, timing, small_cell, n_blocks, effects, counts)
        seconds["kaplan_meier"] = time.perf_counter() - clock

        clock = time.perf_counter()
        cells = tables.cells()
        schedule = _schedule_table(cadence, windows, tables.window_exposure(), targeted, timing)
        estimable_windows = schedule.loc[schedule["is_estimable"].fillna(False).astype(bool), "window_no"]
        estimable_windows = [int(w) for w in estimable_windows]
        # Exposed customers' days in windows too thin to estimate are left out of the fit rather
        # than counted as ordinary days (which would pull the pooled estimate toward 1).
        thin = cells["in_anticipation"].astype(bool) & ~cells["window_no"].isin(estimable_windows)
        cells = cells[~thin]
        covariates, dropped = _usable_covariates(cells, schedule, timing)
        factors = ["month_no"] if calendar_adjustment and cells["month_no"].nunique() > 1 else []
        if rate_adjustment and cells["rate_class"].nunique() > 1:
            factors.append("rate_class")
        if "in_anticipation" in covariates and cells["window_no"].nunique() > 1:
            factors.append("window_no")
            if "month_no" in factors and "is_exposed" in covariates:
                # The exposed group's difference from the rest, month by month: the contrast of
                # a window is then made against the same month's days away from it, so a change
                # in who is exposed over the years (older customers collect coupons, newer ones
                # have none) does not pass for anticipation.
                cells = cells.assign(exposed_month=np.where(cells["is_exposed"] > 0, cells["month_no"], 0))
                factors.append("exposed_month")
                covariates.remove("is_exposed")
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
                             f"purchase{' + calendar month' if 'month_no' in factors else ''}; "
                             f"{discrete.interval_method_}")
            if discrete.is_penalised_:
                discrete_note = discrete.fit_note_ + "; " + discrete_note
            _hazard_rows(effects, discrete, MODEL_DISCRETE, counts["customers"], discrete.n_events_, timing,
                         discrete_note, dropped, cadence, primary_anticipation=True,
                         randomised={e for e, fit in readout.randomised.items()
                                     if bool(fit.ratios_.set_index("stratum").loc[POOLED, "is_estimable"])})
        except AnalysisError as exc:
            notes.append(f"discrete-time model not fitted: {exc}")
            _not_estimable(effects, MODEL_DISCRETE, counts["customers"], timing.alpha, str(exc))
        seconds["discrete"] = time.perf_counter() - clock

        clock = time.perf_counter()
        _anticipation_by_window(readout, effects, cells, covariates, factors, schedule, estimable_windows, timing,
                                counts["customers"])
        seconds["anticipation_by_window"] = time.perf_counter() - clock

        if fit_cox:
            clock = time.perf_counter()
            _cox(readout, tables, timing, covariates, dropped, factors, cadence, effects, hazard_ratios, ph_rows,
                 strata="rate_class" if "rate_class" in factors else None, estimable_windows=estimable_windows)
            seconds["cox"] = time.perf_counter() - clock

        used = {"anticipation_days": timing.anticipation_days,
                "anticipation_min_coupons": timing.anticipation_min_coupons,
                "anticipation_min_exposed_customers": timing.anticipation_min_exposed_customers,
                "anticipation_min_starts": timing.anticipation_min_starts,
                "anticipation_windows_estimable": len(estimable_windows),
                "dip_days": timing.dip_days, "after_days": after_days,
                "min_arm_customers": timing.min_arm_customers}
        readout.tables = {
            "timing_effects": _order_effects(pd.DataFrame(effects, columns=EFFECT_COLUMNS)),
            "km_curves": km_curves,
            "hazard_cells": _hazard_cells(cells, tables.periods, small_cell),
            "ph_check": pd.concat(ph_rows, ignore_index=True) if ph_rows else pd.DataFrame(columns=PH_COLUMNS + ["model"]),
            "hazard_ratios": pd.concat(hazard_ratios, ignore_index=True) if hazard_ratios else pd.DataFrame(),
            "campaign_schedule": schedule,
            "timing_inputs": pd.DataFrame(
                [{"quantity": k, "value": v} for k, v in {**counts, **_sample_counts(tables), **used}.items()]),
        }
        return readout
    finally:
        tables.close()


# -- steps ------------------------------------------------------------------------------------------
def _usable_covariates(cells: pd.DataFrame, schedule: pd.DataFrame, timing) -> tuple[list[str], dict[str, str]]:
    """Covariates that vary in the cells; the others with the reason they are left out."""
    dropped: dict[str, str] = {}
    at_risk = cells[cells["at_risk"] > 0]
    usable = []
    for covariate in COVARIATES:
        if covariate == "in_anticipation" and (reason := _anticipation_reason(schedule, at_risk, timing)):
            dropped[covariate] = reason
        elif at_risk[covariate].nunique() < 2:
            dropped[covariate] = f"not estimable: '{covariate}' never varies in this data"
        elif at_risk.loc[at_risk[covariate] > 0, "events"].sum() == 0:
            dropped[covariate] = f"not estimable: no purchase at all on days with '{covariate}'"
        else:
            usable.append(covariate)
    return usable, dropped


def _anticipation_reason(schedule: pd.DataFrame, at_risk: pd.DataFrame, timing) -> str:
    """Why anticipation cannot be estimated on this calendar, or "" when it can."""
    if schedule["starts_on"].isna().all():
        return "not estimable: no targeted campaign start in the promotions table"
    estimable = int(schedule["is_estimable"].fillna(False).astype(bool).sum())
    with_window = int(schedule["window_no"].notna().sum())
    if estimable < timing.anticipation_min_starts:
        return (f"not estimable: {estimable} of {len(schedule)} expected start(s) have a window of "
                f"{timing.anticipation_days} days clear of other promotions ({with_window} have one) with at least "
                f"{timing.anticipation_min_exposed_customers} exposed and as many unexposed customers; "
                f"timing.anticipation_min_starts = {timing.anticipation_min_starts} are needed")
    if at_risk["is_exposed"].nunique() < 2:
        return "not estimable: every customer-day is on the same side of the exposure threshold"
    return ""


def _randomised(readout, tables, timing, effects) -> None:
    """Treatment vs holdout rate ratios in the campaign window and after it (intention to treat)."""
    level = 1 - timing.alpha
    cells = tables.arm_cells()
    readout.randomised = {}
    try:
        fits = fit_windows(cells, alpha=timing.alpha, bootstrap_rounds=timing.bootstrap_rounds, seed=timing.seed,
                           min_arm_customers=timing.min_arm_customers)
    except AnalysisError as exc:
        for effect in RANDOMISED_WINDOWS:
            effects.append(_empty_row(effect, "all", MODEL_RANDOMISED, 0, level, f"not estimable: {exc}",
                                      basis="randomised", is_primary=True))
        return
    for effect, window in RANDOMISED_WINDOWS.items():
        fit = fits[window]
        readout.randomised[effect] = fit
        what = ("in the campaign window" if window == "during" else
                "in the window after the campaign (after_days, cut at the export's end)")
        for row in fit.ratios_.itertuples():
            scope = "all" if row.stratum == POOLED else row.stratum
            if not row.is_estimable:
                effects.append(_empty_row(effect, scope, MODEL_RANDOMISED, row.n_treated + row.n_holdout, level,
                                          row.reason, basis="randomised", is_primary=True))
                continue
            pooled = (f"pooled over {len(fit.usable_)} campaign(s) with a holdout: Poisson model with one intercept per "
                      "campaign (stratified by campaign)" if scope == "all" else f"campaign {scope}")
            effects.append({
                "effect": effect, "scope": scope, "estimate": float(row.rate_ratio), "ci_low": float(row.ci_low),
                "ci_high": float(row.ci_high), "model": MODEL_RANDOMISED, "basis": "randomised", "is_primary": True,
                "n_customers": int(row.n_treated + row.n_holdout),
                "n_events": int(row.treated_orders + row.holdout_orders), "ci_level": level,
                "note": (f"randomised contrast (intention to treat): daily order rate of the treatment arm / the holdout "
                         f"arm {what}, every assigned customer counted in their arm whether or not they redeemed; "
                         f"{pooled}; treated {row.treated_rate:.4f} vs holdout {row.holdout_rate:.4f} orders per "
                         f"customer-day ({row.n_treated} vs {row.n_holdout} customers); interval: "
                         f"{fit.interval_method_}"),
            })


def _schedule_table(cadence: CampaignCadence, windows: pd.DataFrame, exposure: pd.DataFrame,
                    targeted: pd.DataFrame, timing) -> pd.DataFrame:
    """Expected starts, their anticipation windows, exposed customers, and whether each is estimable."""
    summary = cadence.summary.iloc[0]
    cadence_columns = {c: summary[c] for c in ("is_regular", "cadence_days", "share_on_cadence", "note")}
    if windows.empty:
        return pd.DataFrame([{"window_no": pd.NA, "starts_on": None, "scope": None, "is_observed_start": None,
                              "window_from_on": None, "window_to_on": None, "window_days": 0,
                              "customers_at_risk": 0, "exposed_customers": 0, "is_estimable": False,
                              "window_note": "no targeted campaign start", **cadence_columns}])
    frame = windows.merge(exposure[["window_no", "customers_at_risk", "exposed_customers"]].astype("Int64"),
                          on="window_no", how="left")
    frame[["customers_at_risk", "exposed_customers"]] = frame[["customers_at_risk", "exposed_customers"]].fillna(0)
    starts = pd.to_datetime(targeted["starts_on"]).dt.date
    tolerance = cadence.tolerance_days

    def scope(start) -> str:
        ids = sorted(targeted.loc[[abs((d - start).days) <= tolerance for d in starts], "promotion_id"].astype(str))
        return "+".join(ids) if ids else f"expected {start:%Y-%m-%d} (skipped)"

    frame.insert(2, "scope", [scope(d) for d in frame["starts_on"]])
    minimum = timing.anticipation_min_exposed_customers
    unexposed = frame["customers_at_risk"] - frame["exposed_customers"]
    estimable = frame["window_no"].notna() & (frame["exposed_customers"] >= minimum) & (unexposed >= minimum)
    frame["is_estimable"] = estimable.astype(bool)
    thin = frame["window_no"].notna() & ~estimable
    frame.loc[thin, "window_note"] = [
        f"not estimable: {int(e)} exposed and {int(n - e)} unexposed customers at risk; each needs at least {minimum}"
        for e, n in zip(frame.loc[thin, "exposed_customers"], frame.loc[thin, "customers_at_risk"])]
    no_window = frame["window_no"].isna()
    frame.loc[no_window, "window_note"] = "not estimable: " + frame.loc[no_window, "window_note"].astype(str)
    for column, value in cadence_columns.items():
        frame[column] = value
    return frame


def _anticipation_by_window(readout, effects, cells, covariates, factors, schedule, estimable_windows, timing,
                            n_customers) -> None:
    """Per expected start: the anticipation interaction of that window alone (discrete model)."""
    level = 1 - timing.alpha
    rows = schedule[schedule["starts_on"].notna()]
    if "in_anticipation" not in covariates or readout.discrete is None:
        return
    columns, usable = {}, []
    at_risk = cells[cells["at_risk"] > 0]
    for w in estimable_windows:
        flag = (at_risk["in_anticipation"].astype(bool) & (at_risk["window_no"] == w))
        if at_risk.loc[flag, "events"].sum() > 0:
            usable.append(w)
            columns[f"in_anticipation_w{w}"] = (cells["in_anticipation"].astype(bool)
                                                & (cells["window_no"] == w)).astype(int)
    fit, error = None, ""
    if usable:
        split = cells.assign(**columns)
        names = [c for c in covariates if c != "in_anticipation"] + list(columns)
        try:
            fit = DiscreteTimeHazard(alpha=timing.alpha, bootstrap_rounds=timing.bootstrap_rounds, seed=timing.seed).fit(
                split, period_col="period", covariates=names, factors=factors, block_col="block",
                table="timing_cells (anticipation per window)")
        except AnalysisError as exc:
            error = f"not estimable: {exc}"
    readout.anticipation_by_window = fit
    ci = fit.conf_int(timing.alpha) if fit is not None else None
    for row in rows.itertuples():
        w = None if pd.isna(row.window_no) else int(row.window_no)
        if w is None or w not in estimable_windows:
            note = row.window_note
        elif w not in usable:
            note = "not estimable: no purchase by exposed customers in the window"
        elif fit is None:
            note = error
        else:
            name = f"in_anticipation_w{w}"
            effects.append({
                "effect": "anticipation", "scope": row.scope, "estimate": float(np.exp(fit.params_[name])),
                "ci_low": float(np.exp(ci.loc[name, "ci_low"])), "ci_high": float(np.exp(ci.loc[name, "ci_high"])),
                "model": MODEL_DISCRETE, "basis": "observational", "is_primary": True,
                "n_customers": int(row.customers_at_risk), "n_events": int(fit.n_events_), "ci_level": level,
                "note": (f"difference in differences for the start on {row.starts_on:%Y-%m-%d}: exposed customers "
                         f"({int(row.exposed_customers)} with at least {timing.anticipation_min_coupons} coupons "
                         f"received) vs the rest, in the window {row.window_from_on:%Y-%m-%d} to "
                         f"{row.window_to_on:%Y-%m-%d} vs other days; same model as the pooled row with this "
                         f"window's interaction alone; anticipation_days={timing.anticipation_days}; "
                         f"{fit.interval_method_}"),
            })
            continue
        effects.append(_empty_row("anticipation", row.scope, MODEL_DISCRETE, int(row.customers_at_risk), level, note,
                                  basis="observational", is_primary=True))


def _order_effects(table: pd.DataFrame) -> pd.DataFrame:
    """Rows in reading order, each primary row with its verdict (descriptive rows never get one)."""
    table = table.copy()
    table["verdict"] = [_verdict(row) for row in table.itertuples()]
    keys = pd.DataFrame({
        "effect": table["effect"].map({e: i for i, e in enumerate(EFFECT_ORDER)}).fillna(len(EFFECT_ORDER)),
        "primary": ~table["is_primary"].astype(bool),
        "basis": table["basis"].map({b: i for i, b in enumerate(BASIS_ORDER)}).fillna(len(BASIS_ORDER)),
        "model": table["model"].map({MODEL_RANDOMISED: 0, MODEL_DISCRETE: 1, MODEL_COX: 2}).fillna(3),
        "scope": table["scope"].ne("all"),
    })
    order = keys.sort_values(list(keys.columns), kind="stable").index
    return table.loc[order].reset_index(drop=True)


def _verdict(row) -> str:
    """What a pooled primary row says: higher / lower / no clear effect / not estimable.

    Descriptive and secondary rows never get one, nor do the per-campaign rows (many intervals at
    once: some exclude 1 by chance; they are detail to read under the pooled verdict).
    """
    if row.basis == "descriptive" or not row.is_primary or row.scope != "all":
        return ""
    if pd.isna(row.estimate):
        return "not estimable"
    null = 0.0 if row.effect == "gap_after_deal" else 1.0
    if row.ci_high < null:
        return "lower"
    if row.ci_low > null:
        return "higher"
    return "no clear effect"


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
            "ci_low": ci["ci_low"], "ci_high": ci["ci_high"], "model": MODEL_RMST, "basis": "descriptive",
            "is_primary": False, "n_customers": counts["customers"], "n_events": int(groups["events"].sum()), "ci_level": level,
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
        effects.append(_empty_row("gap_after_deal", "all", MODEL_RMST, counts["customers"], level, str(exc),
                                  basis="descriptive"))
    by_promotion = tables.customers_by_promotion()
    full_price = gap_counts[~gap_counts["is_deal"]]
    for promotion_id, customers in by_promotion.items():
        if customers < small_cell:
            effects.append(_empty_row("gap_after_deal", promotion_id, MODEL_RMST, customers, level,
                                      f"suppressed: fewer than {small_cell} customers bought on this promotion",
                                      basis="descriptive"))
            continue
        part = pd.concat([gap_counts[gap_counts["promotion_id"] == promotion_id].assign(group=promotion_id), full_price])
        try:
            fit = TimeToNextOrder(**km_kwargs, curves=False).fit(
                part, groups=(promotion_id, "full_price"), block_col="block", table=f"timing_gap_counts ({promotion_id})")
        except AnalysisError as exc:
            effects.append(_empty_row("gap_after_deal", promotion_id, MODEL_RMST, customers, level, str(exc),
                                      basis="descriptive"))
            continue
        ci = fit.conf_int(timing.alpha).loc["rmst_difference"]
        groups = fit.groups_.set_index("group")
        effects.append({
            "effect": "gap_after_deal", "scope": promotion_id, "estimate": fit.params_["rmst_difference"],
            "ci_low": ci["ci_low"], "ci_high": ci["ci_high"], "model": MODEL_RMST, "basis": "descriptive",
            "is_primary": False, "n_customers": customers,
            "n_events": int(groups.loc[promotion_id, "events"]), "ci_level": level,
            "note": (f"RMST to {timing.horizon_days} days after a purchase on {promotion_id} minus after a full-price "
                     f"purchase; log-rank p={fit.logrank_['p_value']:.3g}; customer-block bootstrap"),
        })
    columns = ["scope", "group", "days", "survival", "ci_low", "ci_high", "at_risk"]
    return pd.concat(curves, ignore_index=True)[columns] if curves else pd.DataFrame(columns=columns)


def _cox(readout, tables, timing, covariates, dropped, factors, cadence, effects, hazard_ratios, ph_rows,
         strata=None, estimable_windows=()) -> None:
    spells = tables.cox_spells()
    thin = spells["in_anticipation"].astype(bool) & ~spells["window_no"].isin(list(estimable_windows))
    spells = spells[~thin].reset_index(drop=True)  # as in the discrete model's cells
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
    if "exposed_month" in factors:
        spells["exposed_month"] = np.where(spells["is_exposed"] > 0, spells["month_no"], 0)
    for factor, column, what in (("window_no", "calendar_window_effect", "window"),
                                 ("exposed_month", "exposed_month_effect", "exposed-group-by-month")):
        # The same for the anticipation windows and the exposed group by month: the discrete
        # model's effects as one covariate each, so in_anticipation stays the exposed x window contrast.
        if factor not in factors or readout.discrete is None:
            continue
        by_level = readout.discrete.factor_effects(factor)
        by_level.index = by_level.index.astype(float).astype(spells[factor].dtype)
        spells[column] = spells[factor].map(by_level).fillna(0.0).astype(float)
        if spells[column].nunique() > 1:
            model_columns.append(column)
            sample_note += f"; the discrete model's {what} effects as one covariate"
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
    _hazard_rows(effects, cox, MODEL_COX, cox.n_customers_, cox.n_events_, timing, note, dropped, cadence)
    first = spells[spells["start_days"] == 0].set_index(["customer_id", "purchase_day"])
    last = spells.groupby(["customer_id", "purchase_day"]).agg(days=("stop_days", "max"), is_event=("is_event", "max"))
    gaps = first[covariates].join(last).reset_index(drop=True)
    ph_rows.append(time_fixed_check(gaps, covariates, duration_col="days", event_col="is_event").assign(model=MODEL_COX))


def _hazard_rows(effects, model, name, n_customers, n_events, timing, note, dropped, cadence, *,
                 randomised=(), primary_anticipation=False) -> None:
    ci = model.conf_int(timing.alpha)
    for effect, covariate in EFFECTS.items():
        # The hazard models are the primary estimate of anticipation (discrete model) and of the
        # other effects only where no randomised contrast could be made.
        primary = primary_anticipation if effect == "anticipation" else (
            primary_anticipation and effect not in randomised)
        if covariate in dropped:
            effects.append(_empty_row(effect, "all", name, n_customers, 1 - timing.alpha, dropped[covariate],
                                      basis="observational", is_primary=primary))
            continue
        extra = ""
        if effect == "anticipation":
            extra = (f"; difference in differences: customers with at least {timing.anticipation_min_coupons} coupons "
                     f"received (exposed) vs the rest, in the {timing.anticipation_days} days before each expected "
                     f"start (real starts{' and skipped starts of the cadence' if cadence.skipped_starts_ else ''}, "
                     "windows cut clear of other promotions' running and after-windows) vs other days, with an "
                     "indicator per window so calendar effects shared by everyone cancel; "
                     f"anticipation_days={timing.anticipation_days}, exposure threshold "
                     f"{timing.anticipation_min_coupons} coupons")
        if effect == "post_promotion_dip":
            extra = ("; days after a coupon redemption with no promotion running vs other days; redeemers choose to "
                     "redeem, so this is secondary to the randomised row")
        effects.append({
            "effect": effect, "scope": "all", "estimate": float(np.exp(model.params_[covariate])),
            "ci_low": float(np.exp(ci.loc[covariate, "ci_low"])), "ci_high": float(np.exp(ci.loc[covariate, "ci_high"])),
            "model": name, "basis": "observational", "is_primary": primary, "n_customers": int(n_customers),
            "n_events": int(n_events), "ci_level": 1 - timing.alpha,
            "note": f"hazard ratio ({covariate}); {note}{extra}; {ASSUMPTIONS}",
        })


def _not_estimable(effects, name, n_customers, alpha, reason) -> None:
    for effect in EFFECTS:
        effects.append(_empty_row(effect, "all", name, n_customers, 1 - alpha, reason, basis="observational",
                                  is_primary=name == MODEL_DISCRETE and effect == "anticipation"))


def _empty_row(effect, scope, model, n_customers, level, note, *, basis="observational", is_primary=False) -> dict:
    return {"effect": effect, "scope": scope, "estimate": np.nan, "ci_low": np.nan, "ci_high": np.nan,
            "model": model, "basis": basis, "is_primary": is_primary, "n_customers": int(n_customers), "n_events": 0,
            "ci_level": level, "note": note}


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


def open_sql(settings):
    """The connection the timing SQL runs on: the published workspace on DuckDB, or with
    ``[engine] kind = "spark"`` on Spark, which reads the panels the timing SQL names
    (``spells.workspace_tables``) copied out as Parquet; the model fits stay in Python either way,
    on the aggregated tables the SQL returns (``toolkit.engine.open_workspace_sql``)."""
    from ..engine import open_workspace_sql

    return open_workspace_sql(settings, workspace_tables)


def run_timing(settings, out_dir: str | Path, console=None) -> dict:
    """The runner for ``liftlag demo``: analyse the workspace's purchase timing, write the tables.

    Returns facts for the manifest (tables written, seconds, notes).
    """
    import time

    started = time.perf_counter()
    con = open_sql(settings)
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
