"""One campaign's readout from the workspace: the entry points the command line calls.

``analyse_campaign(con, settings, promotion_id)`` reads the promotion's rows of the
``campaign_windows`` panel (and optional customer attributes), runs every analysis and returns a
:class:`~toolkit.effects.readout.CampaignReadout`; ``write_campaigns`` writes its tables as
Parquet and its HTML readout, atomically. ``analyse_panel`` does the same on frames already in
memory (notebooks, tests).

Examples
--------
>>> from toolkit import config, workspace                                   # doctest: +SKIP
>>> from toolkit.effects.api import analyse_campaign, write_campaign        # doctest: +SKIP
>>> settings = config.load("demo_data/liftlag.toml")                        # doctest: +SKIP
>>> readout = analyse_campaign(workspace.connect(settings), settings, "P001")  # doctest: +SKIP
>>> readout.summary                                                          # doctest: +SKIP
>>> write_campaign(readout, "reports/campaigns")                             # doctest: +SKIP
"""

from __future__ import annotations

import math
import os
import re
import shutil
import tempfile
import time
import warnings
from pathlib import Path
from typing import Iterable

import numpy as np
import pandas as pd
from rich.markup import escape

from ..contract import PANELS
from ..errors import AnalysisError, ConfigError, DataError, StatisticalWarning
from ..failures import interrupt_requested
from ..results import typed_for_parquet
from .balance import CHECK_COLUMNS, RandomisationCheck
from .economics import ECONOMICS_COLUMNS, campaign_economics
from .features import PANEL_FEATURES, campaign_features
from .outcomes import EFFECT_COLUMNS, OUTCOMES, WINDOWS, campaign_effects_table, outcome_values
from .pull_forward import PULL_FORWARD_COLUMNS, pull_forward_table
from .qini import DECILE_COLUMNS, qini_curve, uplift_by_decile
from .readout import TABLE_NAMES, CampaignReadout
from .recommend import DEPTH_COLUMNS, NEXT_COLUMNS, next_campaign_table, targeting_depth_table
from .segments import SEGMENT_COLUMNS, UPLIFT_THRESHOLD, assign_segments, segment_table
from .uplift import LEARNERS, UpliftModel
from .weighting import NOT_RANDOMISED, WeightedComparison

PANEL = "campaign_windows"
UPLIFT_OUTCOME = "during_buyer"
_COLUMNS = {
    "campaign_effects": EFFECT_COLUMNS,
    "pull_forward": PULL_FORWARD_COLUMNS,
    "uplift_deciles": ["promotion_id", "model", *DECILE_COLUMNS],
    "qini": ["promotion_id", "model", "fraction_targeted", "qini", "random", "uplift_curve", "is_chosen"],
    "uplift_scores": ["promotion_id", "customer_id", "uplift_score", "baseline_probability", "segment", "model"],
    "uplift_segments": ["promotion_id", *SEGMENT_COLUMNS],
    "randomisation_checks": ["promotion_id", *CHECK_COLUMNS],
    "model_choice": ["promotion_id", "learner", "qini_coefficient", "auuc", "is_chosen", "folds", "features",
                     "n_treated", "n_holdout", "outcome", "all_learners_fit_seconds"],
    "campaign_economics": ECONOMICS_COLUMNS,
    "targeting_depth": ["promotion_id", *DEPTH_COLUMNS],
    "next_campaign": NEXT_COLUMNS,
    "campaign_notes": ["promotion_id", "level", "message"],
}


# --- reading the workspace ----------------------------------------------------------------------


def _has_table(con, schema: str | None, name: str) -> bool:
    if schema:
        # ``checked`` is a schema of the panels database (toolkit.workspace.connect) or an attached one.
        q = ("SELECT count(*) FROM information_schema.tables WHERE (table_catalog = ? OR table_schema = ?) "
             "AND table_name = ?")
        return con.execute(q, [schema, schema, name]).fetchall()[0][0] > 0
    q = "SELECT count(*) FROM information_schema.tables WHERE table_name = ? AND table_catalog = current_database()"
    return con.execute(q, [name]).fetchall()[0][0] > 0


def list_targeted_promotions(con) -> pd.DataFrame:
    """Targeted promotions that have assigned customers in the ``campaign_windows`` panel.

    Returns
    -------
    DataFrame
        promotion_id, name, starts_at, ends_at, mechanic, assigned, treated, holdout; by start date.
        Use ``list_targeted_promotions(con)["promotion_id"]`` for ``liftlag campaign --all``.
    """
    promotions = con.execute("SELECT * FROM checked.promotions").df()
    counts = con.execute(
        f"SELECT promotion_id, count(*) AS assigned, sum(CASE WHEN is_treated THEN 1 ELSE 0 END) AS treated, "
        f"sum(CASE WHEN is_treated THEN 0 ELSE 1 END) AS holdout FROM {PANEL} GROUP BY promotion_id"
    ).df()
    targeted = promotions[promotions["audience"] == "targeted"]
    out = targeted.merge(counts, on="promotion_id", how="inner")
    for col in ("name", "starts_at", "ends_at", "mechanic"):
        if col not in out.columns:
            out[col] = None
    out = out.sort_values(["starts_at", "promotion_id"]).reset_index(drop=True)
    for col in ("assigned", "treated", "holdout"):
        out[col] = out[col].astype(np.int64)
    return out[["promotion_id", "name", "starts_at", "ends_at", "mechanic", "assigned", "treated", "holdout"]]


def _promotion(con, promotion_id: str) -> dict:
    rows = con.execute("SELECT * FROM checked.promotions WHERE promotion_id = ?", [promotion_id]).df()
    if rows.empty:
        valid = list_targeted_promotions(con)["promotion_id"].astype(str).tolist()
        shown = ", ".join(valid[:30]) + (f", ... ({len(valid)} in all)" if len(valid) > 30 else "")
        raise ConfigError(
            f"promotion_id {promotion_id!r} is not in the promotions table; targeted promotions with assignments: "
            f"{shown or '(none)'}"
        )
    row = rows.iloc[0].to_dict()
    if row.get("audience") == "broadcast":
        raise ConfigError(
            f"promotion {promotion_id!r} is a broadcast promotion (audience = broadcast): a broadcast sale has no "
            f"holdout, so there is no campaign readout to compute; {_broadcast_pointer()}"
        )
    return row


def _broadcast_pointer() -> str:
    """Where a broadcast sale is analysed instead."""
    return ("its effect against a counterfactual is in `liftlag longrun -c liftlag.toml` (table broadcast_effects) "
            "and in the quarterly report (`liftlag quarter`)")


def _both_arms(con, promotion_id: str) -> int:
    """Customers assigned to both arms of the promotion (the panels keep the earliest assignment)."""
    try:
        return int(con.execute(
            "SELECT count(*) FROM (SELECT customer_id FROM checked.assignments WHERE promotion_id = ? "
            "GROUP BY customer_id HAVING count(DISTINCT arm) > 1)", [promotion_id]).fetchall()[0][0])
    except Exception:  # a hand-made connection without the checked inputs
        return 0


def analyse_campaign(con, settings, promotion_id: str, *, comparison: pd.DataFrame | None = None,
                     exclude_features: Iterable[str] | None = None, uplift_threshold: float | None = None,
                     baseline_threshold: float | None = None, target_lift: float | None = None) -> CampaignReadout:
    """Analyse one targeted campaign from the workspace.

    Parameters
    ----------
    con : duckdb.DuckDBPyConnection
        The panels database with the checked inputs attached as ``checked``
        (``toolkit.workspace.connect(settings)``).
    settings : toolkit.config.Settings
    promotion_id : str
    comparison : DataFrame, optional
        Only for a campaign without holdout: rows of eligible customers who were *not* assigned,
        with the ``campaign_windows`` feature and outcome columns; the readout then compares the
        treated customers with them by propensity weighting (not randomised; it says so).
    Keyword arguments left at None take their value from ``settings.campaign``.

    exclude_features : sequence of str
        Panel columns or customer attributes never to use as model features (protected attributes).
    uplift_threshold : float, default=0.02
        Predicted uplift (in buying rate) from which a customer is persuadable (see :mod:`toolkit.effects.segments`).
    baseline_threshold : float, optional
        Predicted chance of buying without the offer from which a no-uplift customer is a sure thing;
        by default the holdout's buying rate during the campaign (more likely than the average
        customer to buy anyway). Both thresholds are written in the uplift_segments table.
    target_lift : float, optional
        Lift in buying rate the next holdout should detect (default: this campaign's lift).

    Raises
    ------
    ConfigError
        Unknown promotion id (the valid ones are listed), or a broadcast promotion.
    AnalysisError
        No assignments, or an arm is empty.
    """
    started = time.perf_counter()
    campaign = settings.campaign
    exclude_features = campaign.exclude_features if exclude_features is None else exclude_features
    uplift_threshold = campaign.uplift_threshold if uplift_threshold is None else uplift_threshold
    baseline_threshold = campaign.baseline_threshold if baseline_threshold is None else baseline_threshold
    target_lift = campaign.target_lift if target_lift is None else target_lift
    promotion = _promotion(con, str(promotion_id))
    panel = con.execute(f"SELECT * FROM {PANEL} WHERE promotion_id = ? ORDER BY customer_id", [str(promotion_id)]).df()
    if panel.empty:
        if "assignments" not in settings.tables:
            raise AnalysisError(
                f"promotion {promotion_id!r} is targeted but {settings.config_path} has no [tables.assignments]: "
                f"there is no targeted campaign to read out without the assignments of its customers; add the "
                f"assignments file under [tables.assignments] and run `liftlag build`"
            )
        raise AnalysisError(
            f"promotion {promotion_id!r} is targeted but has no rows in the {PANEL} panel: the assignments table has "
            f"no customers for it (or `liftlag build` ran before they were added); check the assignments export"
        )
    customers = None
    if _has_table(con, "checked", "customers"):
        customers = con.execute(
            f"SELECT c.* FROM checked.customers c WHERE c.customer_id IN "
            f"(SELECT customer_id FROM {PANEL} WHERE promotion_id = ?)", [str(promotion_id)]
        ).df()
    # A campaign without holdout comes with a pool of unassigned pre-period buyers (arm
    # 'comparison'): the comparison for the weighted readout, unless one is given.
    pool = panel["arm"] == "comparison"
    if pool.any():
        if comparison is None:
            comparison = panel[pool].reset_index(drop=True)
        panel = panel[~pool].reset_index(drop=True)
    read_seconds = time.perf_counter() - started
    readout = analyse_panel(panel, promotion=promotion, settings=settings, customers=customers, comparison=comparison,
                            exclude_features=exclude_features, uplift_threshold=uplift_threshold,
                            baseline_threshold=baseline_threshold, target_lift=target_lift)
    readout.meta["seconds"] = {"read": read_seconds, **readout.meta["seconds"],
                               "total": time.perf_counter() - started}
    readout.meta["input_fingerprint"] = _build_fingerprint(settings)
    both = _both_arms(con, str(promotion_id))
    if both:
        who = "1 customer was" if both == 1 else f"{both:,} customers were"
        message = (f"{who} assigned to both the treatment and the holdout of this promotion; "
                   f"each is counted in the arm of their earliest assignment (check the assignment export)")
        readout.notes.append(("warning", message))
        notes_table = readout.tables.get("campaign_notes")
        if notes_table is not None:
            row = pd.DataFrame({"promotion_id": [readout.promotion_id], "level": ["warning"], "message": [message]})
            readout.tables["campaign_notes"] = pd.concat([notes_table, row], ignore_index=True)
    return readout


def _build_fingerprint(settings) -> str | None:
    """The workspace build's fingerprint (shown in the readout's footer), when there is one."""
    try:
        from ..workspace import read_state

        return read_state(settings).get("build", {}).get("fingerprint")
    except Exception:  # a hand-made connection without a workspace folder
        return None


# --- the analysis on frames -----------------------------------------------------------------------


def _check_panel(panel: pd.DataFrame, promotion_id: str) -> pd.DataFrame:
    expected = [c.name for c in PANELS[PANEL]]
    missing = [c for c in expected if c not in panel.columns]
    if missing:
        raise DataError(f"the {PANEL} panel lacks columns {missing}; rebuild the panels with `liftlag build -c liftlag.toml`")
    panel = panel[panel["promotion_id"].astype(str) == str(promotion_id)].reset_index(drop=True)
    duplicated = panel["customer_id"].duplicated()
    if duplicated.any():
        raise DataError(f"the {PANEL} panel has {int(duplicated.sum())} duplicate customer rows for promotion "
                        f"{promotion_id!r} (e.g. customer {panel.loc[duplicated, 'customer_id'].iloc[0]!r} assigned twice); "
                        f"each customer must be assigned once per promotion: fix the assignments export")
    treated = panel["is_treated"]
    if treated.isna().any():
        treated = panel["arm"].eq("treatment")
    panel = panel.copy()
    panel["is_treated"] = treated.astype(bool).to_numpy()
    return panel


def _planned_share(settings, promotion_id: str) -> float | None:
    campaign = settings.campaign
    return campaign.holdout_share_by_promotion.get(str(promotion_id), campaign.holdout_share)


def _empty(name: str) -> pd.DataFrame:
    return pd.DataFrame(columns=_COLUMNS[name])


def analyse_panel(panel: pd.DataFrame, *, promotion: dict, settings, customers: pd.DataFrame | None = None,
                  comparison: pd.DataFrame | None = None, exclude_features: Iterable[str] = (),
                  uplift_threshold: float = UPLIFT_THRESHOLD, baseline_threshold: float | None = None,
                  target_lift: float | None = None) -> CampaignReadout:
    """Analyse one campaign's ``campaign_windows`` rows (see :func:`analyse_campaign`)."""
    pid = str(promotion["promotion_id"])
    seconds: dict[str, float] = {}
    clock = time.perf_counter()
    panel = _check_panel(panel, pid)
    if panel.empty:
        raise AnalysisError(f"promotion {pid!r} has no assigned customers in the {PANEL} panel")
    campaign = settings.campaign
    alpha = campaign.alpha
    currency = settings.economics.currency
    exclude = tuple(exclude_features)
    notes: list[tuple[str, str]] = []
    t = panel["is_treated"].to_numpy(dtype=bool)
    n_t, n_c = int(t.sum()), int((~t).sum())
    if n_t == 0:
        raise AnalysisError(f"promotion {pid!r} has no treated customers ({n_c} holdout): nothing to evaluate; "
                            f"check the arm values of the assignments export")
    for col in ("during_buyer", "after_buyer", "during_orders", "after_orders", "during_net_amount",
                "after_net_amount", "during_margin_amount", "after_margin_amount", "redeemed", "discount_amount"):
        if panel[col].isna().any():
            notes.append(("warning", f"{PANEL}.{col} has {int(panel[col].isna().sum())} missing values, counted as 0"))
            panel[col] = panel[col].fillna(0)
    if n_c == 0:
        if comparison is None:
            raise AnalysisError(
                f"promotion {pid!r} has no holdout customers ({n_t} treated): a randomised readout is impossible. "
                f"Keep a holdout next time; for an estimate now, pass a comparison frame of eligible customers who were "
                f"not assigned (analyse_campaign(..., comparison=frame)) for a weighted, non-randomised comparison"
            )
        return _weighted_readout(panel, comparison, promotion=promotion, settings=settings, notes=notes,
                                 target_lift=target_lift)
    seconds["prepare"] = time.perf_counter() - clock

    # randomisation checks
    clock = time.perf_counter()
    planned = _planned_share(settings, pid)
    balance_features = [c for c in PANEL_FEATURES if c in panel.columns]
    check = RandomisationCheck().fit(panel, features=balance_features, planned_holdout_share=planned)
    status = check.status_
    for reason in check.reasons_:
        notes.append(("warning", f"randomisation check failed: {reason}"))
    if status == "failed":
        warnings.warn(f"promotion {pid!r}: the randomisation check failed ({'; '.join(check.reasons_)}); "
                      f"read every effect of this campaign with care", StatisticalWarning, stacklevel=2)
    if check.sample_ratio_["passed"] is None:
        notes.append(("info", f"sample ratio check {check.sample_ratio_['detail']}"))
    seconds["checks"] = time.perf_counter() - clock

    # average effects and pull-forward
    clock = time.perf_counter()
    effects, effect_notes = campaign_effects_table(panel, promotion_id=pid, alpha=alpha)
    notes += [("info", n) for n in effect_notes]
    pull = pull_forward_table(panel, promotion_id=pid, alpha=alpha)
    if pull["note"].iloc[0]:
        notes.append(("info", "pull-forward: " + pull["note"].iloc[0]))
    seconds["effects"] = time.perf_counter() - clock

    # uplift models
    clock = time.perf_counter()
    tables = {name: _empty(name) for name in ("uplift_deciles", "qini", "uplift_scores", "uplift_segments",
                                              "model_choice", "targeting_depth")}
    segments = None
    model = None
    small = min(n_t, n_c) < campaign.min_arm_size
    y_uplift = panel[UPLIFT_OUTCOME].to_numpy(dtype=float)
    if small:
        message = (f"uplift models not fitted: the smaller arm has {min(n_t, n_c)} customers, fewer than "
                   f"campaign.min_arm_size = {campaign.min_arm_size}; the average effects are estimated but their "
                   f"intervals are wide")
        notes.append(("warning", message))
        warnings.warn(f"promotion {pid!r}: {message}", StatisticalWarning, stacklevel=2)
    else:
        features, feature_notes = campaign_features(panel, customers, exclude=exclude)
        notes += [("info", n) for n in feature_notes]
        try:
            model = UpliftModel(learners=LEARNERS, folds=campaign.folds, seed=campaign.seed).fit(
                features, outcome=y_uplift, treated=t)
        except AnalysisError as exc:
            notes.append(("warning", f"uplift models not fitted: {exc}"))
            model = None
    if model is not None:
        if model.sampled_:
            notes.append(("info", f"uplift models fitted on a random sample of {model.max_fit_rows:,} customers per "
                                  f"fold; every customer is scored out-of-fold"))
        score = model.uplift_
        baseline = model.baseline_probability_
        if baseline_threshold is None:
            baseline_threshold = float(y_uplift[~t].mean())
        segments = assign_segments(score, baseline, uplift_threshold=uplift_threshold,
                                   baseline_threshold=baseline_threshold)
        choice = model.model_choice_.copy()
        choice.insert(0, "promotion_id", pid)
        choice["folds"] = campaign.folds
        choice["features"] = ", ".join(model.feature_names_)
        choice["n_treated"], choice["n_holdout"] = n_t, n_c
        choice["outcome"] = "buyers (during)"
        choice["all_learners_fit_seconds"] = model.fit_seconds_  # one figure for the whole cross-fit
        tables["model_choice"] = choice
        curves = []
        for learner in model.scores_.columns:
            curve = qini_curve(model.scores_[learner].to_numpy(), t, y_uplift)
            curve.insert(0, "model", learner)
            curve["is_chosen"] = learner == model.chosen_
            curves.append(curve)
        qini = pd.concat(curves, ignore_index=True)
        qini.insert(0, "promotion_id", pid)
        tables["qini"] = qini
        deciles = uplift_by_decile(score, t, y_uplift)
        deciles.insert(0, "model", model.chosen_)
        deciles.insert(0, "promotion_id", pid)
        tables["uplift_deciles"] = deciles
        tables["uplift_scores"] = pd.DataFrame({
            "promotion_id": pid, "customer_id": panel["customer_id"].to_numpy(), "uplift_score": score,
            "baseline_probability": baseline, "segment": segments, "model": model.chosen_,
        })
        seg = segment_table(segments=segments, treated=t, outcome=y_uplift, redeemed=panel["redeemed"],
                            discount_amount=panel["discount_amount"], uplift=score, baseline_probability=baseline,
                            uplift_threshold=uplift_threshold, baseline_threshold=baseline_threshold)
        seg.insert(0, "promotion_id", pid)
        tables["uplift_segments"] = seg
        margin_total = outcome_values(panel, OUTCOMES[3], "total")
        depth = targeting_depth_table(score, t, margin_total, alpha=alpha)
        depth.insert(0, "promotion_id", pid)
        tables["targeting_depth"] = depth
    seconds["uplift"] = time.perf_counter() - clock

    # economics and next time
    clock = time.perf_counter()
    cost = promotion.get("cost_per_redemption")
    cost = float(cost) if cost is not None and not pd.isna(cost) else None
    economics = campaign_economics(panel, effects, promotion_id=pid, cost_per_redemption=cost, segments=segments,
                                   currency=currency)
    if economics["note"].iloc[0]:
        notes.append(("info", "economics: " + economics["note"].iloc[0]))
    welch_buyers = effects[(effects["outcome"] == "buyers") & (effects["window"] == "during")
                           & (effects["method"] == "welch")].iloc[0]
    cuped_buyers = effects[(effects["outcome"] == "buyers") & (effects["window"] == "during")
                           & (effects["method"] == "cuped")].iloc[0]
    nxt = next_campaign_table(
        promotion_id=pid, depth=tables["targeting_depth"] if model is not None else None, n_treated=n_t, n_holdout=n_c,
        holdout_rate=float(welch_buyers["holdout_mean"]), observed_lift=float(cuped_buyers["lift"]),
        untargeted_share=campaign.untargeted_share, alpha=alpha, target_lift=target_lift, currency=currency,
    )
    seconds["economics"] = time.perf_counter() - clock

    tables.update({
        "campaign_effects": effects, "pull_forward": pull, "campaign_economics": economics, "next_campaign": nxt,
        "randomisation_checks": _with_id(check.summary_, pid),
    })
    meta = _meta(settings, panel, pid, planned=planned, model=model, features=(model.feature_names_ if model else []),
                 uplift_threshold=uplift_threshold, baseline_threshold=baseline_threshold)
    meta["seconds"] = seconds
    return _finish(promotion, tables, status=status, is_randomised=True, notes=notes, meta=meta)


def _with_id(frame: pd.DataFrame, pid: str) -> pd.DataFrame:
    out = frame.copy()
    if "promotion_id" not in out.columns:
        out.insert(0, "promotion_id", pid)
    return out


def _finish(promotion, tables, *, status, is_randomised, notes, meta) -> CampaignReadout:
    pid = str(promotion["promotion_id"])
    tables["campaign_notes"] = pd.DataFrame(
        {"promotion_id": pid, "level": [lvl for lvl, _ in notes], "message": [msg for _, msg in notes]},
        columns=_COLUMNS["campaign_notes"])
    for name in TABLE_NAMES:
        frame = tables.get(name)
        if frame is None:
            frame = _empty(name)
        frame = frame.reset_index(drop=True)
        # a failed (or impossible) randomisation check travels with every output of the campaign
        frame["randomisation_check"] = status
        tables[name] = frame
    return CampaignReadout(promotion=promotion, tables={n: tables[n] for n in TABLE_NAMES},
                           randomisation_check=status, is_randomised=is_randomised, notes=notes, meta=meta)


def _meta(settings, panel, pid, *, planned, model, features, uplift_threshold, baseline_threshold) -> dict:
    import sklearn
    import statsmodels

    try:
        from importlib.metadata import version

        tool_version = version("liftlag")
    except Exception:  # not installed (running from a source tree)
        tool_version = "unknown"
    campaign = settings.campaign

    def day(col):
        values = pd.to_datetime(panel[col]).dropna()
        return str(values.min().date()) if len(values) else None

    return {
        "promotion_id": pid, "tool_version": tool_version, "sklearn_version": sklearn.__version__,
        "statsmodels_version": statsmodels.__version__, "config_path": str(getattr(settings, "config_path", "")),
        "rows": int(len(panel)), "n_treated": int(panel["is_treated"].sum()),
        "n_holdout": int((~panel["is_treated"]).sum()), "planned_holdout_share": planned,
        "alpha": campaign.alpha, "folds": campaign.folds, "seed": campaign.seed, "min_arm_size": campaign.min_arm_size,
        "untargeted_share": campaign.untargeted_share, "small_cell": settings.report.small_cell,
        "after_days": settings.windows.after_days, "pre_period_days": settings.windows.pre_period_days,
        "currency": settings.economics.currency, "starts_on": day("starts_on"), "ends_on": day("ends_on"),
        "after_ends_on": day("after_ends_on"), "features": list(features),
        "chosen_model": model.chosen_ if model is not None else None,
        "uplift_outcome": "during_buyer", "uplift_threshold": uplift_threshold, "baseline_threshold": baseline_threshold,
    }


# --- no holdout: the weighted comparison ------------------------------------------------------------


def _weighted_readout(panel, comparison, *, promotion, settings, notes, target_lift) -> CampaignReadout:
    pid = str(promotion["promotion_id"])
    alpha = settings.campaign.alpha
    clock = time.perf_counter()
    needed = [c for c in PANEL_FEATURES] + [o.during for o in OUTCOMES] + [o.after for o in OUTCOMES]
    missing = [c for c in needed if c not in comparison.columns]
    if missing:
        raise AnalysisError(f"the comparison frame lacks columns {missing}; it needs the {PANEL} feature and outcome columns")
    comparison = comparison.copy()
    for col in ("redeemed", "discount_amount"):
        if col not in comparison.columns:
            comparison[col] = 0.0
    frame = pd.concat([panel.assign(is_treated=True), comparison.assign(is_treated=False)], ignore_index=True)
    design = pd.DataFrame(index=frame.index)
    for col in PANEL_FEATURES:
        values = pd.to_numeric(frame[col], errors="coerce").astype(float)
        if values.isna().any():
            design[f"{col}_missing"] = values.isna().astype(float)
            values = values.fillna(values.median() if values.notna().any() else 0.0)
        design[col] = values
    design = design.loc[:, design.nunique() > 1]
    feature_cols = list(design.columns)
    work = pd.concat([design, frame[["is_treated"]]], axis=1)
    rows = []
    fit = None
    for outcome in OUTCOMES:
        for window in WINDOWS:
            work["y"] = outcome_values(frame, outcome, window)
            fit = WeightedComparison(estimand="att", alpha=alpha).fit(
                work, outcome_col="y", treatment_col="is_treated", feature_cols=feature_cols)
            summary = fit.summary.reset_index()
            summary["outcome"], summary["window"] = outcome.name, window
            rows.append(summary)
    effects = pd.concat(rows, ignore_index=True)
    effects["promotion_id"] = pid
    effects = effects[EFFECT_COLUMNS]
    notes.insert(0, ("warning", NOT_RANDOMISED))
    overlap = fit.overlap_
    check_rows = [{"check": "randomisation", "feature": "", "treated_value": math.nan, "holdout_value": math.nan,
                   "statistic": math.nan, "p_value": math.nan, "threshold": math.nan, "passed": None,
                   "detail": "not randomised: the campaign has no holdout; treated customers are compared with "
                             "customers who were not assigned"}]
    for _, r in overlap.iterrows():
        check_rows.append({"check": "overlap", "feature": f"propensity ({r['arm']})", "treated_value": r["propensity_min"],
                           "holdout_value": r["propensity_max"], "statistic": r["propensity_median"],
                           "p_value": math.nan, "threshold": r["trim_below"], "passed": None,
                           "detail": (f"propensity {r['propensity_min']:.3f} to {r['propensity_max']:.3f} (median "
                                      f"{r['propensity_median']:.3f}); {int(r['rows_trimmed'])} of {int(r['rows'])} rows "
                                      f"({r['share_trimmed']:.1%}) trimmed outside [{r['trim_below']:g}, {r['trim_above']:g}]; "
                                      f"effective sample size {r['effective_sample_size']:.0f}")})
    for _, r in fit.balance_.iterrows():
        ok = abs(r["smd_after"]) < 0.1
        check_rows.append({"check": "weighted_balance", "feature": r["feature"], "treated_value": math.nan,
                           "holdout_value": math.nan, "statistic": r["smd_after"], "p_value": math.nan,
                           "threshold": 0.1, "passed": bool(ok),
                           "detail": f"SMD {r['smd_before']:+.3f} before, {r['smd_after']:+.3f} after weighting"})
    checks = pd.DataFrame(check_rows, columns=CHECK_COLUMNS)
    share_trimmed = overlap.set_index("arm").loc["treated", "share_trimmed"]
    if share_trimmed > 0:
        notes.append(("warning", f"{share_trimmed:.1%} of treated customers had no comparable untreated customers "
                                 f"(propensity beyond the trimming bound) and were left out: the estimate is for the rest"))
    during = effects[(effects["outcome"] == "orders") & (effects["method"] == "doubly_robust")].set_index("window")
    d, a = float(during.loc["during", "lift"]), float(during.loc["after", "lift"])
    n_t = int(panel.shape[0])
    pull = pd.DataFrame([{
        "promotion_id": pid, "during_lift_orders": d, "during_lift_ci_low": during.loc["during", "lift_ci_low"],
        "during_lift_ci_high": during.loc["during", "lift_ci_high"], "after_lift_orders": a,
        "after_lift_ci_low": during.loc["after", "lift_ci_low"], "after_lift_ci_high": during.loc["after", "lift_ci_high"],
        "pull_forward_share": -a / d if d > 0 else math.nan, "pull_forward_share_ci_low": math.nan,
        "pull_forward_share_ci_high": math.nan, "net_lift_orders": float(during.loc["total", "lift"]),
        "net_lift_ci_low": during.loc["total", "lift_ci_low"], "net_lift_ci_high": during.loc["total", "lift_ci_high"],
        "n_treated": n_t, "n_holdout": int(comparison.shape[0]), "during_incremental_orders": d * n_t,
        "after_incremental_orders": a * n_t, "net_incremental_orders": float(during.loc["total", "lift"]) * n_t,
        "method": "doubly_robust", "ci_level": 1 - alpha, "note": NOT_RANDOMISED,
    }], columns=PULL_FORWARD_COLUMNS)
    cost = promotion.get("cost_per_redemption")
    cost = float(cost) if cost is not None and not pd.isna(cost) else None
    economics = campaign_economics(frame, effects, promotion_id=pid, cost_per_redemption=cost,
                                   currency=settings.economics.currency, method="doubly_robust")
    economics["note"] = "; ".join(filter(None, [NOT_RANDOMISED, economics["note"].iloc[0]]))
    buyers = effects[(effects["outcome"] == "buyers") & (effects["window"] == "during")
                     & (effects["method"] == "doubly_robust")].iloc[0]
    nxt = next_campaign_table(promotion_id=pid, depth=None, n_treated=n_t, n_holdout=0,
                              holdout_rate=float(buyers["holdout_mean"]), observed_lift=float(buyers["lift"]),
                              untargeted_share=settings.campaign.untargeted_share, alpha=alpha,
                              target_lift=target_lift, currency=settings.economics.currency)
    notes.append(("warning", "uplift models not fitted: they need a randomised holdout"))
    tables = {"campaign_effects": effects, "pull_forward": pull, "campaign_economics": economics,
              "next_campaign": nxt, "randomisation_checks": _with_id(checks, pid)}
    meta = _meta(settings, panel, pid, planned=None, model=None, features=feature_cols,
                 uplift_threshold=math.nan, baseline_threshold=math.nan)
    meta["n_holdout"] = 0
    meta["n_comparison"] = int(comparison.shape[0])
    meta["seconds"] = {"weighting": time.perf_counter() - clock}
    return _finish(promotion, tables, status="not randomised", is_randomised=False, notes=notes, meta=meta)


# --- writing -----------------------------------------------------------------------------------------


def _safe_name(promotion_id: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", str(promotion_id))


def write_campaigns(readouts: Iterable[CampaignReadout], out_dir: str | Path, *, html: bool = True) -> list[Path]:
    """Write readouts: one Parquet file per table (all campaigns) plus ``campaign_<promotion_id>.html`` each.

    A table file already in ``out_dir`` keeps the rows of other promotions; this run's promotions
    replace theirs. Every file is first written to a temporary folder inside ``out_dir`` and then
    moved into place, so no file is ever half-written.

    Returns
    -------
    list of Path
        The files written.
    """
    readouts = list(readouts)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    ids = {r.promotion_id for r in readouts}
    staging = Path(tempfile.mkdtemp(prefix=".campaign-", suffix=".tmp", dir=out))
    written: list[Path] = []
    try:
        staged: list[tuple[Path, Path]] = []
        for name in TABLE_NAMES:
            frames = [r.tables[name] for r in readouts if len(r.tables[name])]
            target = out / f"{name}.parquet"
            if target.exists():
                old = pd.read_parquet(target)
                if "promotion_id" in old.columns:
                    old = old[~old["promotion_id"].astype(str).isin(ids)]
                if len(old):
                    frames.insert(0, old)
            if frames:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", FutureWarning)  # concat with all-NA columns
                    table = pd.concat(frames, ignore_index=True)
            else:
                table = readouts[0].tables[name].iloc[0:0] if readouts else _empty(name)
            path = staging / target.name
            _to_parquet(table, path)
            staged.append((path, target))
        if html:
            for r in readouts:
                target = out / f"campaign_{_safe_name(r.promotion_id)}.html"
                path = staging / target.name
                path.write_text(r.to_html(), encoding="utf-8")
                staged.append((path, target))
        for path, target in staged:
            os.replace(path, target)
            written.append(target)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return written


def write_campaign(readout: CampaignReadout, out_dir: str | Path, *, html: bool = True) -> list[Path]:
    """Write one readout (see :func:`write_campaigns`)."""
    return write_campaigns([readout], out_dir, html=html)


def _to_parquet(frame: pd.DataFrame, path: Path) -> None:
    typed_for_parquet(frame).to_parquet(path, index=False)


def run_campaigns(settings, out_dir: str | Path, console=None, *, promotion_ids: Iterable[str] | None = None) -> dict:
    """Analyse every targeted campaign (or ``promotion_ids``) of the workspace and write the readouts.

    The runner for ``liftlag demo`` and ``liftlag campaign --all``: a campaign that cannot be
    analysed (an :class:`~toolkit.errors.AnalysisError`) is reported and skipped, the others are
    written together. Returns facts for the manifest (campaigns analysed, skipped with the reason,
    seconds each).
    """
    from .. import workspace

    con = workspace.connect(settings)
    try:
        ids = list(promotion_ids) if promotion_ids is not None else list_targeted_promotions(con)["promotion_id"]
        readouts, skipped, seconds = [], {}, {}
        for pid in ids:
            if interrupt_requested():  # Ctrl-C swallowed by a library: stop, write nothing half-done
                raise KeyboardInterrupt
            started = time.perf_counter()
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", StatisticalWarning)  # carried in the readout's notes
                    readouts.append(analyse_campaign(con, settings, str(pid)))
            except AnalysisError as exc:
                skipped[str(pid)] = str(exc)
                if console is not None:
                    console.print(f"  campaign {escape(str(pid))}: [yellow]skipped[/]: {escape(str(exc))}")
                continue
            seconds[str(pid)] = round(time.perf_counter() - started, 2)
            if console is not None:
                r = readouts[-1]
                flag = "" if r.randomisation_check in ("passed", "not run") else f" [red]({r.randomisation_check})[/]"
                console.print(f"  campaign {escape(str(pid))}: {seconds[str(pid)]:.1f} s{flag}")
    finally:
        con.close()
    written = write_campaigns(readouts, out_dir) if readouts else []
    return {"campaigns": [r.promotion_id for r in readouts], "skipped": skipped, "seconds": seconds,
            "files": [str(p) for p in written]}
