"""The verdict: the long-run indicators with their change from the previous quarter, and the call.

``health_indicators`` has one row per indicator: its value in the quarter with an interval, its
value in the previous quarter, the change with an interval, whether the change is adverse,
favourable or within noise, and one plain sentence (words only: the numbers are laid out beside
it from the same row). ``health_verdict`` has one row: the overall call and why.

The rule (settings in ``[report]``, written out in the report's methods section):

* an indicator is *adverse* when it moved in its harmful direction and the interval of the move
  excludes no change; a hazard ratio with no quarterly series is judged by its level instead (a
  *harmful level* when its interval excludes 1 on the harmful side), which can make the call
  "watch" but never "act";
* **act** when at least ``act_min_adverse`` indicators are adverse, or (``act_on_negative_margin``)
  the interval of the quarter's net incremental margin lies wholly below zero;
* **watch** when at least ``watch_min_adverse`` indicators are adverse, an indicator sits at a
  harmful level, or the margin's interval
  includes zero, or (``watch_on_groups_against``) a decile or segment moves against its
  campaign's average;
* **healthy** otherwise.

Change intervals combine the two quarters' half-widths in quadrature (on the log scale for hazard
ratios). That treats the quarters as independent; the same customers appear in both, which
usually correlates the estimates positively, so the combined interval is on the wide side
(conservative) (common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

INDICATOR_COLUMNS = ["indicator", "label", "quarter", "value", "ci_low", "ci_high", "previous_quarter",
                     "previous_value", "previous_ci_low", "previous_ci_high", "change", "change_ci_low",
                     "change_ci_high", "ci_level", "n", "n_label", "unit", "harmful_direction", "assessment",
                     "sentence", "source_table", "reason"]
VERDICT_COLUMNS = ["quarter", "call", "adverse_indicators", "harmful_levels", "indicators_available", "groups_against_average",
                   "net_incremental_margin", "net_incremental_margin_ci_low", "net_incremental_margin_ci_high",
                   "margin_assessment", "reasons", "rule"]


@dataclass(frozen=True)
class Indicator:
    name: str
    label: str
    unit: str                 # "share", "index", "hazard_ratio", "slope", "drift"
    harmful: str              # "up" or "down"
    source: str
    plain_up: str             # what an increase means, in words
    plain_down: str


DEPENDENCE = (
    Indicator("dependence_index_mean", "Dependence index, mean over customers", "index", "up", "dependence_by_quarter",
              "customers lean more on deals", "customers lean less on deals"),
    Indicator("dependence_index_p50", "Dependence index, median customer", "index", "up", "dependence_by_quarter",
              "the typical customer leans more on deals", "the typical customer leans less on deals"),
    Indicator("dependence_index_p90", "Dependence index, 90th percentile", "index", "up", "dependence_by_quarter",
              "the most deal-reliant tenth rely on deals even more", "the most deal-reliant tenth rely on deals less"),
    Indicator("full_price_share", "Full-price share of orders", "share", "down", "dependence_by_quarter",
              "more orders are bought at full price", "fewer orders are bought at full price"),
    Indicator("deal_only_share", "Customers who buy only on deal", "share", "up", "dependence_by_quarter",
              "more customers buy only when there is a deal", "fewer customers buy only when there is a deal"),
)
TIMING = (
    Indicator("anticipation", "Anticipation ratio (buying just before an expected campaign)", "hazard_ratio", "down",
              "timing_effects", "customers hold off less before an expected campaign",
              "customers hold off more before an expected campaign"),
    Indicator("post_promotion_dip", "Post-promotion dip (order rate ratio after a deal)", "hazard_ratio", "down", "timing_effects",
              "buying recovers faster after a deal", "buying after a deal falls further (more pull-forward)"),
)


def _half(low, high) -> float:
    return (high - low) / 2 if pd.notna(low) and pd.notna(high) else math.nan


def _change(value, low, high, prev, prev_low, prev_high, *, log: bool) -> tuple[float, float, float]:
    if not all(pd.notna(v) for v in (value, prev)):
        return math.nan, math.nan, math.nan
    if log:
        if min(value, prev, low, high, prev_low, prev_high) <= 0:
            return math.nan, math.nan, math.nan
        value, low, high = math.log(value), math.log(low), math.log(high)
        prev, prev_low, prev_high = math.log(prev), math.log(prev_low), math.log(prev_high)
    change = value - prev
    half = math.sqrt(_half(low, high) ** 2 + _half(prev_low, prev_high) ** 2)
    if log:
        return math.exp(change), math.exp(change - half), math.exp(change + half)
    return change, change - half, change + half


def _assess(indicator: Indicator, change, low, high, *, null: float) -> str:
    if not (pd.notna(change) and pd.notna(low) and pd.notna(high)):
        return "not assessed"
    if low > null:
        moved = "up"
    elif high < null:
        moved = "down"
    else:
        return "within noise"
    return "adverse" if moved == indicator.harmful else "favourable"


def _sentence(indicator: Indicator, assessment: str, direction: str | None, basis: str) -> str:
    """One plain sentence, words only (the numbers sit beside it in the report)."""
    if assessment == "not assessed":
        return f"{indicator.label}: no comparison possible ({basis})."
    if assessment == "within noise":
        return f"{indicator.label}: no change beyond chance {basis}."
    meaning = indicator.plain_up if direction == "up" else indicator.plain_down
    verdict = "a warning sign" if assessment in ("adverse", "harmful level") else "a good sign"
    return f"{indicator.label}: {meaning} {basis} — {verdict}."


def _row(indicator, quarter, **values) -> dict:
    row = {c: None for c in INDICATOR_COLUMNS}
    row.update({"indicator": indicator.name, "label": indicator.label, "quarter": quarter, "unit": indicator.unit,
                "harmful_direction": indicator.harmful, "source_table": indicator.source})
    row.update(values)
    return row


def _unavailable(indicator, quarter, reason) -> dict:
    return _row(indicator, quarter, assessment="not available", reason=reason,
                sentence=f"{indicator.label}: not available in this build ({reason}).")


def dependence_indicators(table: pd.DataFrame | None, quarter: str, previous: str, missing: str | None,
                          level: float) -> list[dict]:
    rows = []
    for ind in DEPENDENCE:
        if table is None:
            rows.append(_unavailable(ind, quarter, missing or "dependence_by_quarter not produced"))
            continue
        if ind.name not in table.columns:
            rows.append(_unavailable(ind, quarter, f"dependence_by_quarter has no column {ind.name}"))
            continue
        by_q = table.assign(quarter=table["quarter"].astype(str)).set_index("quarter")
        if quarter not in by_q.index:
            rows.append(_unavailable(ind, quarter, f"dependence_by_quarter has no row for {quarter}"))
            continue
        cur = by_q.loc[quarter]
        low_col, high_col = f"{ind.name}_ci_low", f"{ind.name}_ci_high"
        value, low, high = cur[ind.name], cur.get(low_col, math.nan), cur.get(high_col, math.nan)
        if previous in by_q.index:
            prev = by_q.loc[previous]
            p, pl, ph = prev[ind.name], prev.get(low_col, math.nan), prev.get(high_col, math.nan)
            change, cl, ch = _change(value, low, high, p, pl, ph, log=False)
            basis = f"since {previous}"
        else:
            p = pl = ph = change = cl = ch = math.nan
            basis = f"no row for {previous}"
        assessment = _assess(ind, change, cl, ch, null=0.0)
        direction = "up" if pd.notna(change) and change > 0 else "down"
        rows.append(_row(ind, quarter, value=value, ci_low=low, ci_high=high, previous_quarter=previous,
                         previous_value=p, previous_ci_low=pl, previous_ci_high=ph, change=change, change_ci_low=cl,
                         change_ci_high=ch, ci_level=level, n=cur.get("customers"), n_label="customers",
                         assessment=assessment, sentence=_sentence(ind, assessment, direction, basis)))
    return rows


def _pooled_log(rows: pd.DataFrame, z: float) -> tuple[float, float, float, int]:
    """Inverse-variance pooled hazard ratio of several campaigns' rows (log scale)."""
    rows = rows[(rows["estimate"] > 0) & (rows["ci_low"] > 0) & (rows["ci_high"] > 0)]
    if rows.empty:
        return math.nan, math.nan, math.nan, 0
    log = np.log(rows["estimate"].to_numpy(float))
    se = (np.log(rows["ci_high"].to_numpy(float)) - np.log(rows["ci_low"].to_numpy(float))) / (2 * z)
    w = 1 / np.maximum(se, 1e-12) ** 2
    est = float((w * log).sum() / w.sum())
    s = float(math.sqrt(1 / w.sum()))
    n = int(rows["n_customers"].sum()) if "n_customers" in rows.columns else 0
    return math.exp(est), math.exp(est - z * s), math.exp(est + z * s), n


def _in_scope(scope, ids: list[str], quarter: str | None) -> bool:
    """A per-campaign row of the quarter: its scope names one of the quarter's promotions, or a
    start day inside the quarter (anticipation rows per expected start)."""
    text = str(scope)
    if text in ids:
        return True
    if quarter is None:
        return False
    try:
        day = pd.Timestamp(text)
    except (ValueError, TypeError):
        return False
    from .period import Quarter

    q = Quarter.parse(quarter)
    return q.first_day <= day.date() <= q.last_day


def _model_order(effect: pd.DataFrame, preferred: str) -> list[str]:
    """Models to read an effect from: randomised contrasts first, then the preferred model, then the rest."""
    models = effect["model"].dropna().unique().tolist()
    basis = effect.groupby("model")["basis"].first().to_dict() if "basis" in effect.columns else {}
    return sorted(models, key=lambda m: (basis.get(m) != "randomised", m != preferred, m))


def timing_indicators(table: pd.DataFrame | None, quarter: str, previous: str, missing: str | None, *,
                      quarter_ids: list[str], previous_ids: list[str], level: float, model: str) -> list[dict]:
    """Anticipation and dip: per-campaign rows of the quarter pooled against the previous quarter's
    when the timing table has them (randomised rows first); otherwise the whole-export level."""
    from scipy import stats

    z = float(stats.norm.ppf(0.5 + level / 2))
    rows = []
    for ind in TIMING:
        if table is None:
            rows.append(_unavailable(ind, quarter, missing or "timing_effects not produced"))
            continue
        effect = table[table["effect"] == ind.name]
        if "is_primary" in effect.columns and effect["is_primary"].astype("boolean").fillna(False).any():
            effect = effect[effect["is_primary"].astype("boolean").fillna(False).astype(bool)]
        done = False
        for use in _model_order(effect, model):
            rows_m = effect[(effect["model"] == use) & effect["estimate"].notna()]
            per_campaign = rows_m[[_in_scope(s, quarter_ids, quarter) for s in rows_m["scope"]]]
            if per_campaign.empty:
                continue
            value, low, high, n = _pooled_log(per_campaign, z)
            prev_rows = rows_m[[_in_scope(s, previous_ids, previous) for s in rows_m["scope"]]]
            p, pl, ph, _ = _pooled_log(prev_rows, z) if len(prev_rows) else (math.nan,) * 3 + (0,)
            change, cl, ch = _change(value, low, high, p, pl, ph, log=True)
            basis = (f"for {quarter}'s campaigns against {previous}'s" if pd.notna(p)
                     else f"no comparable rows for {previous}")
            assessment = _assess(ind, change, cl, ch, null=1.0)
            direction = "up" if pd.notna(change) and change > 1 else "down"
            rows.append(_row(ind, quarter, value=value, ci_low=low, ci_high=high, previous_quarter=previous,
                             previous_value=p, previous_ci_low=pl, previous_ci_high=ph, change=change,
                             change_ci_low=cl, change_ci_high=ch, ci_level=level, n=n, n_label="customers",
                             assessment=assessment, sentence=_sentence(ind, assessment, direction, basis),
                             reason=f"model {use}, {len(per_campaign)} row(s) pooled; change is a ratio of ratios"))
            done = True
            break
        if done:
            continue
        for use in _model_order(effect, model):
            overall = effect[(effect["model"] == use) & (effect["scope"].astype(str) == "all")]
            if overall.empty or overall["estimate"].isna().all():
                continue
            r = overall.iloc[0]
            assessment = _assess(ind, r["estimate"], r["ci_low"], r["ci_high"], null=1.0)
            # a level is not a movement: it can make the call "watch", never "act"
            assessment = {"adverse": "harmful level", "favourable": "favourable level"}.get(assessment, assessment)
            direction = "up" if r["estimate"] > 1 else "down"
            basis = "over the whole export (no quarterly series: the level against no effect, not a change)"
            rows.append(_row(ind, quarter, value=r["estimate"], ci_low=r["ci_low"], ci_high=r["ci_high"],
                             ci_level=r.get("ci_level", level), n=r.get("n_customers"), n_label="customers",
                             assessment=assessment, sentence=_sentence(ind, assessment, direction, basis),
                             reason=f"model {use}; level, not change"))
            done = True
            break
        if not done:
            notes = effect["note"].dropna() if "note" in effect.columns else pd.Series([], dtype=object)
            rows.append(_unavailable(ind, quarter, f"not estimable: {notes.iloc[0] if len(notes) else 'no estimate'}"))
    return rows


# Responsiveness drift: terms of the long-run fixed-effects model (toolkit.longrun.responsiveness).
RESPONSIVENESS = (
    (Indicator("responsiveness_drift", "Responsiveness to coupons, drift with coupons received", "slope", "up",
               "responsiveness_drift", "customers respond more to a coupon the more coupons they have had",
               "customers respond less to a coupon the more coupons they have had"),
     "coupon_available_x_coupons_before"),
    (Indicator("full_price_drift", "Buying without a coupon, drift with coupons received", "slope", "down",
               "responsiveness_drift", "customers buy more without a coupon the more coupons they have had",
               "customers buy less without a coupon the more coupons they have had"),
     "coupons_before"),
)
POPULATION = Indicator("population_drift", "Population drift (who the customers are)", "drift", "up",
                       "population_drift", "the customer base is shifting", "the customer base is settling")


def _drift_row(ind: Indicator, frame: pd.DataFrame, quarter: str, level: float, basis: str,
               null: float = 0.0) -> dict:
    r = frame.iloc[0]
    low, high = r.get("ci_low", math.nan), r.get("ci_high", math.nan)
    assessment = _assess(ind, r["estimate"], low, high, null=null)
    direction = "up" if r["estimate"] > null else "down"
    term = r.get("term", r.get("measure", r.get("comparison", "")))
    n = r.get("n_customers", r.get("customers", r.get("n_to")))
    return _row(ind, quarter, value=r["estimate"], ci_low=low, ci_high=high, ci_level=r.get("ci_level", level), n=n,
                n_label="customers", assessment=assessment, sentence=_sentence(ind, assessment, direction, basis),
                reason=f"{ind.source}: {term}" if term else ind.source)


def drift_indicators(tables: dict, missing: dict, quarter: str, level: float) -> list[dict]:
    """Responsiveness drift (its slopes against no drift) and population drift."""
    rows = []
    table = tables.get("responsiveness_drift")
    for ind, term in RESPONSIVENESS:
        if table is None:
            rows.append(_unavailable(ind, quarter, missing.get(ind.source, f"{ind.source} not produced")))
            continue
        frame = table[table["term"].astype(str) == term] if "term" in table.columns else table
        if frame.empty or "estimate" not in frame.columns or frame["estimate"].isna().all():
            rows.append(_unavailable(ind, quarter, f"{ind.source} has no estimate for {term}"))
            continue
        rows.append(_drift_row(ind, frame, quarter, level, "over the data through the quarter (a slope: 0 = no drift)"))
    table = tables.get("population_drift")
    if table is None:
        rows.append(_unavailable(POPULATION, quarter, missing.get("population_drift", "population_drift not produced")))
    elif table.empty or not ({"estimate", "auc"} & set(table.columns)):
        rows.append(_unavailable(POPULATION, quarter, "population_drift has no estimate rows"))
    else:
        frame = table
        for col in ("quarter_to", "quarter"):
            if col in frame.columns and (frame[col].astype(str) == quarter).any():
                frame = frame[frame[col].astype(str) == quarter]
                break
        if "comparison" in frame.columns:  # year over year first: adjacent quarters differ by season too
            frame = frame.sort_values("comparison", key=lambda c: c.astype(str) != "year_over_year", kind="stable")
        if "auc" in frame.columns and "estimate" not in frame.columns:
            frame = frame.rename(columns={"auc": "estimate", "auc_ci_low": "ci_low", "auc_ci_high": "ci_high"})
        text = " ".join(str(frame.iloc[0].get(c, "")) for c in ("measure", "term", "method", "metric")).lower()
        # a classifier telling the quarters apart: an AUC of 0.5 means no drift
        null = 0.5 if "auc" in text or "auc" in table.columns else 0.0
        rows.append(_drift_row(POPULATION, frame, quarter, level,
                               "through the quarter (against no drift" + (": AUC 0.5)" if null else ")"), null=null))
    return rows


def indicators_table(rows: list[dict]) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=INDICATOR_COLUMNS)
    for col in ("value", "ci_low", "ci_high", "previous_value", "previous_ci_low", "previous_ci_high", "change",
                "change_ci_low", "change_ci_high", "ci_level"):
        frame[col] = pd.to_numeric(frame[col], errors="coerce").astype(float)
    frame["n"] = pd.array(pd.to_numeric(frame["n"], errors="coerce"), dtype="Int64")
    for col in ("previous_quarter", "n_label", "reason"):
        frame[col] = frame[col].astype(object).where(frame[col].notna(), None)
    return frame


def verdict(indicators: pd.DataFrame, economics: pd.DataFrame, tails: pd.DataFrame, settings, quarter: str) -> pd.DataFrame:
    """The overall call (healthy / watch / act) and the reasons, by the rule in the module docstring."""
    report = settings.report
    adverse = indicators[indicators["assessment"] == "adverse"]
    levels = indicators[indicators["assessment"] == "harmful level"]
    available = indicators[~indicators["assessment"].isin(["not available"])]
    against = tails[tails["is_against_average"]] if len(tails) else tails
    margin = economics[economics["item"] == "net_incremental_margin"] if len(economics) else economics
    m, ml, mh = (margin.iloc[0][["estimate", "ci_low", "ci_high"]].tolist() if len(margin) else (math.nan,) * 3)
    if pd.notna(mh) and mh < 0:
        margin_state = "negative"
    elif pd.notna(ml) and ml > 0:
        margin_state = "positive"
    elif pd.notna(ml):
        margin_state = "unclear"
    else:
        margin_state = "not available"
    reasons = []
    call = "healthy"
    if len(adverse) >= report.act_min_adverse:
        call = "act"
        reasons.append(f"{len(adverse)} indicators moved the harmful way (act from {report.act_min_adverse})")
    if report.act_on_negative_margin and margin_state == "negative":
        call = "act"
        reasons.append("the quarter's net incremental margin is below zero (whole interval)")
    if call != "act":
        if len(adverse) >= report.watch_min_adverse:
            call = "watch"
            reasons.append(f"{len(adverse)} indicator(s) moved the harmful way (watch from {report.watch_min_adverse})")
        if len(levels):
            call = "watch"
            reasons.append(f"{len(levels)} indicator(s) without a quarterly series sit at a harmful level: "
                           + ", ".join(levels["label"].str.split(" \\(").str[0]))
        if margin_state == "unclear":
            call = "watch"
            reasons.append("the quarter's net incremental margin could be zero (its interval includes zero)")
        elif margin_state == "negative":
            call = "watch"
            reasons.append("the quarter's net incremental margin is below zero (act_on_negative_margin is off)")
        if report.watch_on_groups_against and len(against):
            call = "watch"
            reasons.append(f"{len(against)} decile(s) or segment(s) move against their campaign's average")
    if not reasons:
        reasons.append("no indicator moved the harmful way beyond chance and the incremental margin is positive"
                       if margin_state == "positive" else "no indicator moved the harmful way beyond chance")
    if len(available) == 0:
        reasons.append("no long-run indicator is available in this build: the call rests on the campaigns alone")
    rule = (f"act: at least {report.act_min_adverse} adverse indicators"
            + (" or a net incremental margin whose interval lies below zero" if report.act_on_negative_margin else "")
            + f"; watch: at least {report.watch_min_adverse} adverse indicator(s), an indicator without a quarterly "
              f"series at a harmful level, or a margin interval that includes zero (or lies below it)"
            + (", or a group moving against its campaign's average" if report.watch_on_groups_against else "")
            + "; healthy: otherwise")
    return pd.DataFrame([{
        "quarter": quarter, "call": call, "adverse_indicators": int(len(adverse)), "harmful_levels": int(len(levels)),
        "indicators_available": int(len(available)), "groups_against_average": int(len(against)),
        "net_incremental_margin": m, "net_incremental_margin_ci_low": ml, "net_incremental_margin_ci_high": mh,
        "margin_assessment": margin_state, "reasons": "; ".join(reasons), "rule": rule,
    }], columns=VERDICT_COLUMNS)
