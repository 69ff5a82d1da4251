"""Everything ``quarter.html.j2`` lays out: cells bound to results tables, charts, texts.

This module picks rows and formats them; it computes nothing new (the numbers are in the tables
that ``derive.py`` and ``health.py`` wrote). Each section is a dict with ``available`` and, when
a table it needs is missing, ``reason`` ("not available in this build: ...").
"""

from __future__ import annotations

import math

import pandas as pd

from .. import charts
from .cells import NA, Cell, cell, finite, fmt, generic_rows, interval, too_few

SECTIONS = (
    ("verdict", "The verdict"),
    ("campaigns", "Campaign scorecards"),
    ("tails", "The tails, not only the average"),
    ("timing", "Purchase timing"),
    ("longrun", "The long run"),
    ("quality", "Data quality appendix"),
    ("methods", "Methods and assumptions"),
)
OUTCOME_LABELS = {"buyers": "Buyers (share who bought)", "orders": "Orders per customer",
                  "net_revenue": "Net revenue per customer", "margin_after_discount": "Margin after discount per customer"}
WINDOW_LABELS = {"during": "during", "after": "after", "total": "during + after"}
SEGMENT_LABELS = {"persuadable": "Persuadable", "sure_thing": "Sure thing", "lost_cause": "Lost cause",
                  "do_not_disturb": "Do not disturb"}
ECONOMICS_LABELS = {
    "net_incremental_margin": "Net incremental margin (after discount and redemption cost)",
    "incremental_margin": "Incremental margin after discount",
    "discount_cost": "Discount paid to treated customers",
    "discount_to_buyers_who_would_have_bought": "Discount paid to buyers who would have bought anyway",
    "subsidy_to_sure_things": "Discount paid to sure things (model segments)",
    "orders_during": "Incremental orders during the campaigns",
    "orders_given_back_after": "Orders after the campaigns (negative: pulled forward)",
    "net_incremental_orders": "Net incremental orders (during + after)",
}
TIMING_LABELS = {"acceleration": "Acceleration (a usable promotion is running)",
                 "post_promotion_dip": "Post-promotion dip", "anticipation": "Anticipation before an expected campaign",
                 "gap_after_deal": "Gap after a deal (days, RMST difference)"}


def _missing(tables, missing, *names) -> str | None:
    for name in names:
        if name not in tables:
            return missing.get(name, f"{name} was not produced")
    return None


def _level(frame: pd.DataFrame, default: float) -> str:
    if "ci_level" in frame.columns and frame["ci_level"].notna().any():
        return f"{float(frame['ci_level'].dropna().iloc[0]):.0%}"
    return f"{default:.0%}"


def _safe_chart(builder, *args, **kwargs):
    try:
        return builder(*args, **kwargs)
    except ValueError:
        return None


# --- the verdict ---------------------------------------------------------------------------------


def verdict_section(tables, missing, k: int, currency: str, alpha: float) -> dict:
    verdict = tables["health_verdict"]
    v = verdict.iloc[0]
    indicators = tables["health_indicators"]
    rows = []
    for i, r in indicators.reset_index(drop=True).iterrows():
        unit = r["unit"]
        kind = {"share": "percent", "index": "number", "hazard_ratio": "ratio"}.get(unit, "number")
        change_kind = {"share": "points", "index": "signed", "hazard_ratio": "ratio"}.get(unit, "signed")
        small = finite(r["n"]) and float(r["n"]) < k
        rows.append({
            "label": r["label"], "assessment": r["assessment"], "sentence": r["sentence"], "reason": r["reason"] or "",
            "available": r["assessment"] != "not available",
            "value": cell(indicators, "health_indicators", i, "value", kind, suppress=small, k=k),
            "ci": interval(indicators, "health_indicators", i, "ci_low", "ci_high", kind, suppress=small, k=k),
            "previous_quarter": r["previous_quarter"] or "",
            "previous": cell(indicators, "health_indicators", i, "previous_value", kind, suppress=small, k=k),
            "change": cell(indicators, "health_indicators", i, "change", change_kind, suppress=small, k=k),
            "change_ci": interval(indicators, "health_indicators", i, "change_ci_low", "change_ci_high", change_kind,
                                  suppress=small, k=k),
            "level": fmt(r["ci_level"], "percent0") if finite(r["ci_level"]) else "",
            "n": cell(indicators, "health_indicators", i, "n", "count", suppress=small, k=k),
            "change_is_ratio": unit == "hazard_ratio",
        })
    economics = tables["quarter_economics"]
    econ_rows = []
    for i, r in economics.reset_index(drop=True).iterrows():
        kind = "money" if r["unit"] == currency else "whole"
        econ_rows.append({
            "label": ECONOMICS_LABELS.get(r["item"], str(r["item"]).replace("_", " ")),
            "unit": r["unit"], "note": r["note"],
            "estimate": cell(economics, "quarter_economics", i, "estimate", kind),
            "ci": interval(economics, "quarter_economics", i, "ci_low", "ci_high", kind),
            "level": fmt(r["ci_level"], "percent0"),
            "customers": cell(economics, "quarter_economics", i, "customers", "count"),
            "campaigns": cell(economics, "quarter_economics", i, "campaigns", "count"),
        })
    tails = tables["uplift_tails"]
    against = []
    for i, r in tails.reset_index(drop=True).iterrows():
        if not r["is_against_average"]:
            continue
        small = too_few(r["n_treated"], r["n_holdout"], k=k)
        against.append({
            "promotion_id": r["promotion_id"], "kind": r["group_kind"],
            "group": SEGMENT_LABELS.get(r["group"], r["group"]) if r["group_kind"] == "segment" else f"decile {r['group']}",
            "uplift": cell(tails, "uplift_tails", i, "uplift", "points", suppress=small, k=k),
            "ci": interval(tails, "uplift_tails", i, "ci_low", "ci_high", "points", suppress=small, k=k),
            "average": cell(tails, "uplift_tails", i, "average_lift", "points"),
        })
    return {
        "call": v["call"], "reasons": [s for s in str(v["reasons"]).split("; ") if s], "rule": v["rule"],
        "margin_assessment": v["margin_assessment"],
        "margin": cell(verdict, "health_verdict", 0, "net_incremental_margin", "money"),
        "margin_ci": interval(verdict, "health_verdict", 0, "net_incremental_margin_ci_low",
                              "net_incremental_margin_ci_high", "money"),
        "adverse": cell(verdict, "health_verdict", 0, "adverse_indicators", "count"),
        "indicators": rows, "economics": econ_rows, "against": against,
        "economics_reason": None if len(economics) else missing.get("campaign_economics", "no campaign in the quarter"),
        "level": f"{1 - alpha:.0%}",
    }


# --- campaign scorecards -----------------------------------------------------------------------------


def _rows_of(frame: pd.DataFrame | None, pid: str) -> pd.DataFrame:
    if frame is None or frame.empty:
        return pd.DataFrame()
    positions = frame.index[frame["promotion_id"].astype(str) == pid]
    return frame.loc[positions]


def campaign_sections(tables, missing, k: int, currency: str, alpha: float) -> dict:
    campaigns = tables["quarter_campaigns"]
    reason = _missing(tables, missing, "campaign_effects")
    cards = []
    effects = tables.get("campaign_effects")
    pull = tables.get("pull_forward")
    economics = tables.get("campaign_economics")
    segments = tables.get("uplift_segments")
    qini = tables.get("qini")
    checks = tables.get("randomisation_checks")
    nxt = tables.get("next_campaign")
    for ci, c in campaigns.reset_index(drop=True).iterrows():
        pid = str(c["promotion_id"])
        card = {"promotion_id": pid, "name": c["name"] or "", "audience": c["audience"], "status": c["status"],
                "mechanic": (c["mechanic"] or "").replace("_", " "),
                "depth": cell(campaigns, "quarter_campaigns", ci, "depth", "percent0"),
                "starts": str(c["starts_on"]), "ends": str(c["ends_on"]), "check": c["randomisation_check"] or "",
                "n_treated": cell(campaigns, "quarter_campaigns", ci, "n_treated", "count"),
                "n_holdout": cell(campaigns, "quarter_campaigns", ci, "n_holdout", "count"),
                "analysed": c["status"] == "analysed"}
        if not card["analysed"]:
            broadcast = tables.get("broadcast_effects")
            b = _rows_of(broadcast, pid)
            card["broadcast"] = [{
                "outcome": str(r["outcome"]).replace("_", " "), "window": WINDOW_LABELS.get(r["window"], r["window"]),
                "actual": cell(broadcast, "broadcast_effects", pos, "actual", "whole"),
                "counterfactual": cell(broadcast, "broadcast_effects", pos, "counterfactual", "whole"),
                "estimate": cell(broadcast, "broadcast_effects", pos, "estimate", "whole"),
                "ci": interval(broadcast, "broadcast_effects", pos, "ci_low", "ci_high", "whole"),
                "level": cell(broadcast, "broadcast_effects", pos, "ci_level", "percent0"),
            } for pos, r in b.iterrows()] if len(b) else []
            cards.append(card)
            continue
        e = _rows_of(effects, pid)
        randomised = bool(e["is_randomised"].iloc[0]) if len(e) and "is_randomised" in e.columns else True
        main = e[e["method"] == ("cuped" if randomised else "doubly_robust")]
        buyers = e[(e["method"] == "newcombe")]
        shown = pd.concat([buyers, main[main["outcome"] != "buyers"]]) if randomised else main
        effect_rows, intervals = [], []
        for pos, r in shown.iterrows():
            small = too_few(r["n_treated"], r["n_holdout"], k=k)
            kind = "points" if r["outcome"] == "buyers" else "signed"
            effect_rows.append({
                "outcome": OUTCOME_LABELS.get(r["outcome"], r["outcome"]), "window": WINDOW_LABELS.get(r["window"], r["window"]),
                "method": r["method"],
                "treated": cell(effects, "campaign_effects", pos, "treated_mean",
                                "percent" if r["outcome"] == "buyers" else "number", suppress=small, k=k),
                "holdout": cell(effects, "campaign_effects", pos, "holdout_mean",
                                "percent" if r["outcome"] == "buyers" else "number", suppress=small, k=k),
                "lift": cell(effects, "campaign_effects", pos, "lift", kind, suppress=small, k=k),
                "ci": interval(effects, "campaign_effects", pos, "lift_ci_low", "lift_ci_high", kind, suppress=small, k=k),
                "relative": cell(effects, "campaign_effects", pos, "relative_lift", "percent", suppress=small, k=k),
                "excludes_zero": (not small) and finite(r["lift_ci_low"]) and (r["lift_ci_low"] > 0 or r["lift_ci_high"] < 0),
            })
            if not small and finite(r["relative_lift"]):
                intervals.append(charts.Interval(
                    f"{r['outcome'].replace('_', ' ')} ({WINDOW_LABELS.get(r['window'], r['window'])})",
                    r["relative_lift"], r["relative_lift_ci_low"], r["relative_lift_ci_high"],
                    colour="blue" if r["window"] == "during" else ("amber" if r["window"] == "after" else "teal")))
        n_t = int(e["n_treated"].iloc[0]) if len(e) else 0
        n_h = int(e["n_holdout"].iloc[0]) if len(e) else 0
        level = _level(e, 1 - alpha)
        card["effects"] = effect_rows
        card["level"] = level
        card["randomised"] = randomised
        card["lift_chart"] = _safe_chart(
            charts.interval_chart, intervals, title=f"Relative lift by outcome and window, {pid}",
            caption=f"n = {n_t:,} treated, {n_h:,} {'holdout' if randomised else 'comparison'}; {level} intervals; "
                    f"{'Newcombe (buyers) and CUPED' if randomised else 'doubly robust, not randomised'}",
            x_label="relative lift (treated vs holdout)", reference=0.0, x_percent=True) if intervals else None
        p = _rows_of(pull, pid)
        if len(p):
            pos = p.index[0]
            small = too_few(p["n_treated"].iloc[0], p["n_holdout"].iloc[0], k=k)
            card["pull"] = {
                "during": cell(pull, "pull_forward", pos, "during_incremental_orders", "whole", suppress=small, k=k),
                "after": cell(pull, "pull_forward", pos, "after_incremental_orders", "whole", suppress=small, k=k),
                "net": cell(pull, "pull_forward", pos, "net_incremental_orders", "whole", suppress=small, k=k),
                "share": cell(pull, "pull_forward", pos, "pull_forward_share", "percent0", suppress=small, k=k),
                "share_ci": interval(pull, "pull_forward", pos, "pull_forward_share_ci_low", "pull_forward_share_ci_high",
                                     "percent0", suppress=small, k=k),
                "note": p["note"].iloc[0] or "",
            }
        ec = _rows_of(economics, pid)
        if len(ec):
            pos = ec.index[0]
            small = too_few(ec["n_treated"].iloc[0], ec["n_holdout"].iloc[0], k=k)
            card["economics"] = [
                (label, cell(economics, "campaign_economics", pos, col, kind, suppress=small, k=k),
                 interval(economics, "campaign_economics", pos, f"{col}_ci_low", f"{col}_ci_high", kind, suppress=small, k=k)
                 if f"{col}_ci_low" in economics.columns else None)
                for label, col, kind in (
                    ("Incremental buyers", "incremental_buyers", "whole"),
                    (f"Net incremental margin ({currency})", "net_incremental_margin", "money"),
                    (f"Discount paid ({currency})", "discount_cost", "money"),
                    (f"Discount paid to buyers who would have bought anyway ({currency})", "discount_paid_to_non_incremental", "money"),
                    (f"Subsidy to sure things ({currency})", "subsidy_to_sure_things", "money"),
                    ("Return on discount", "return_on_discount", "percent0"),
                )]
        s = _rows_of(segments, pid)
        card["segments"] = []
        for pos, r in s.iterrows():
            small = too_few(r["customers"], k=k)
            arms_small = too_few(r["n_treated"], r["n_holdout"], k=k)
            card["segments"].append({
                "segment": SEGMENT_LABELS.get(r["segment"], str(r["segment"])),
                "customers": cell(segments, "uplift_segments", pos, "customers", "count", suppress=small, k=k),
                "share": cell(segments, "uplift_segments", pos, "share", "percent", suppress=small, k=k),
                "uplift": cell(segments, "uplift_segments", pos, "observed_uplift", "points", suppress=arms_small, k=k),
                "discount": cell(segments, "uplift_segments", pos, "discount_cost", "money",
                                 suppress=too_few(r["n_treated"], k=k), k=k),
            })
        q = _rows_of(qini, pid)
        card["qini_chart"] = None
        if len(q) and not too_few(n_t, n_h, k=k):
            series = []
            for i, (model, curve) in enumerate(q.groupby("model", sort=False)):
                chosen = bool(curve["is_chosen"].iloc[0])
                series.append(charts.Series(f"{model.replace('_', ' ')}{' (chosen)' if chosen else ''}",
                                            curve["fraction_targeted"].tolist(), curve["qini"].tolist(),
                                            colour=("blue" if chosen else charts.SERIES_ORDER[2 + i % 2]),
                                            dash="" if chosen else "6 3"))
            first = q[q["is_chosen"]] if q["is_chosen"].any() else q
            series.append(charts.Series("random targeting", first["fraction_targeted"].tolist(), first["random"].tolist(),
                                        colour="slate", dash="2 3"))
            card["qini_chart"] = _safe_chart(
                charts.line_chart, series, title=f"Qini curves (out-of-fold), {pid}",
                caption=f"n = {n_t:,} treated, {n_h:,} holdout; curves are point estimates (no interval); "
                        f"y: incremental buyers per treated customer",
                x_label="share of customers targeted (highest predicted uplift first)",
                y_label="incremental buyers per customer", x_percent=True, y_percent=True)
        rc = _rows_of(checks, pid)
        card["checks"] = []
        for pos, r in rc.iterrows():
            passed = r["passed"]
            state = "not run" if passed is None or pd.isna(passed) else ("passed" if bool(passed) else "FAILED")
            card["checks"].append({"check": str(r["check"]).replace("_", " "), "feature": r["feature"] or "",
                                   "state": state, "detail": r["detail"] or "",
                                   "p": cell(checks, "randomisation_checks", pos, "p_value", "p")})
        nx = _rows_of(nxt, pid)
        if len(nx):
            pos = nx.index[0]
            card["next"] = {
                "recommendation": nx["recommendation"].iloc[0],
                "depth": cell(nxt, "next_campaign", pos, "recommended_depth", "percent0"),
                "untargeted": cell(nxt, "next_campaign", pos, "untargeted_share", "percent0"),
                "holdout_share": cell(nxt, "next_campaign", pos, "holdout_share_needed", "percent"),
                "mde": cell(nxt, "next_campaign", pos, "mde_buyers", "points"),
            }
        cards.append(card)
    return {"cards": cards, "reason": reason if not len(campaigns) else None,
            "empty": not len(campaigns)}


# --- the tails ---------------------------------------------------------------------------------------


def in_quarter(frame: pd.DataFrame, quarter: str, previous: str | None = None) -> pd.DataFrame:
    """The rows of a long-run table about the report's quarter (and the one before, if asked)."""
    keep = {quarter} | ({previous} if previous else set())
    if "quarter_to" in frame.columns:
        return frame[frame["quarter_to"].astype(str) == quarter]
    if "quarter" in frame.columns:
        return frame[frame["quarter"].astype(str).isin(keep)]
    return frame


def tails_section(tables, missing, k: int, alpha: float, quarter: str | None = None,
                  previous: str | None = None) -> dict:
    tails = tables["uplift_tails"]
    out = {"campaigns": [], "reason": None if len(tails) else missing.get("uplift_deciles", "no uplift deciles in the quarter")}
    for pid, group in tails.groupby("promotion_id", sort=False):
        deciles = group[group["group_kind"] == "decile"]
        rows = []
        bars = ([], [], [], [])
        for pos, r in group.iterrows():
            small = too_few(r["n_treated"], r["n_holdout"], k=k)
            rows.append({
                "kind": r["group_kind"],
                "group": SEGMENT_LABELS.get(r["group"], r["group"]) if r["group_kind"] == "segment" else r["group"],
                "n_treated": cell(tails, "uplift_tails", pos, "n_treated", "count", suppress=small, k=k),
                "n_holdout": cell(tails, "uplift_tails", pos, "n_holdout", "count", suppress=small, k=k),
                "uplift": cell(tails, "uplift_tails", pos, "uplift", "points", suppress=small, k=k),
                "ci": interval(tails, "uplift_tails", pos, "ci_low", "ci_high", "points", suppress=small, k=k),
                "against": bool(r["is_against_average"]),
            })
            if r["group_kind"] == "decile":
                bars[0].append(str(r["group"]))
                bars[1].append(math.nan if small else r["uplift"])
                bars[2].append(math.nan if small else r["ci_low"])
                bars[3].append(math.nan if small else r["ci_high"])
        n = int(deciles["customers"].sum()) if len(deciles) else 0
        level = _level(group, 1 - alpha)
        chart = _safe_chart(charts.bar_chart, bars[0], bars[1], low=bars[2], high=bars[3],
                            title=f"Effect on buying by uplift decile, {pid}",
                            caption=f"n = {n:,} customers; {level} Newcombe intervals; deciles with an arm under {k} "
                                    f"customers not drawn", x_label="decile of predicted uplift (1 = highest)",
                            y_label="treated minus holdout buying rate", y_percent=True) if bars[0] else None
        out["campaigns"].append({"promotion_id": pid, "rows": rows, "chart": chart,
                                 "average": cell(tails, "uplift_tails", group.index[0], "average_lift", "points")})
    dist = tables.get("dependence_distribution")
    out["distribution_reason"] = _missing(tables, missing, "dependence_distribution")
    if dist is not None:
        shown = in_quarter(dist, quarter, previous) if quarter else dist
        cols, rows, total, texts = generic_rows(shown, "dependence_distribution", k=k)
        out["distribution"] = {"columns": cols, "rows": rows, "total": total, "texts": texts}
        out["distribution_chart"] = _distribution_chart(dist, k, quarter)
    return out


def _distribution_chart(dist: pd.DataFrame, k: int, quarter: str | None = None):
    """Bars of customers by dependence band for the latest quarter, when the table has that shape."""
    band = next((c for c in ("band_label", "band", "bin", "dependence_band", "bucket") if c in dist.columns), None)
    count = next((c for c in ("customers", "share") if c in dist.columns), None)
    if band is None or count is None:
        return None
    frame = dist
    if "quarter" in frame.columns and quarter is not None:
        frame = frame[frame["quarter"].astype(str) == quarter]
    if "is_suppressed" in frame.columns:
        frame = frame.assign(**{count: frame[count].where(~frame["is_suppressed"].astype(bool))})
    values = [v if finite(v) and (count != "customers" or v >= k) else math.nan for v in frame[count]]
    n = int(frame["customers"].sum()) if "customers" in frame.columns else 0
    return _safe_chart(charts.bar_chart, [str(b) for b in frame[band]], values,
                       title="Customers by dependence on deals" + (f", {frame['quarter'].iloc[0]}" if "quarter" in frame.columns and len(frame) else ""),
                       caption=f"n = {n:,} customers; a distribution (no interval); bands under {k} customers not drawn",
                       x_label=band.replace("_", " "), y_label=count.replace("_", " "), y_percent=(count == "share"))


# --- timing -----------------------------------------------------------------------------------------


def timing_section(tables, missing, k: int, alpha: float, horizon_days: int = 180,
                   quarter_ids: list[str] | None = None) -> dict:
    out = {"reason": _missing(tables, missing, "timing_effects")}
    km = tables.get("km_curves")
    out["km_reason"] = _missing(tables, missing, "km_curves")
    if km is not None and len(km):
        overall = km[(km["scope"].astype(str) == "all") & (km["days"] <= horizon_days)]
        series = []
        for i, (group, curve) in enumerate(overall.groupby("group", sort=True)):
            shown = curve[curve["at_risk"] >= k]
            series.append(charts.Series(f"after a {str(group).replace('_', ' ')} order", shown["days"].tolist(),
                                        shown["survival"].tolist(), shown["ci_low"].tolist(), shown["ci_high"].tolist(),
                                        colour=charts.SERIES_ORDER[i % 2], step=True))
        at_start = overall.sort_values("days").groupby("group")["at_risk"].first()
        n_text = ", ".join(f"{int(v):,} {str(g).replace('_', ' ')} orders" for g, v in at_start.items())
        out["km_chart"] = _safe_chart(
            charts.line_chart, series, title="Days to the next order after a deal vs a full-price order",
            caption=f"n = {n_text}; Kaplan-Meier with {_level(overall, 1 - alpha)} pointwise intervals; "
                    f"drawn while at least {k} orders are at risk, to day {horizon_days}",
            x_label="days since the order", y_label="share who have not ordered again", y_percent=True)
    events = tables.get("event_study")
    out["event_charts"] = []
    if events is not None and len(events):
        for pid, frame in events.groupby("promotion_id", sort=False):
            frame = frame[frame["is_complete_week"]]
            series = []
            sizes = {}
            for arm, colour in (("treatment", "blue"), ("holdout", "amber")):
                a = frame[frame["arm"] == arm]
                if a.empty:
                    continue
                sizes[arm] = int(a["customers"].iloc[0])
                if sizes[arm] < k:
                    continue
                series.append(charts.Series(arm if arm == "holdout" else "treated", a["week"].tolist(),
                                            a["mean_orders"].tolist(), a["ci_low"].tolist(), a["ci_high"].tolist(),
                                            colour=colour))
            chart = _safe_chart(
                charts.line_chart, series, title=f"Weekly orders per customer around the start of {pid}",
                caption=f"n = {sizes.get('treatment', 0):,} treated, {sizes.get('holdout', 0):,} holdout; "
                        f"{_level(frame, 1 - alpha)} intervals; week 0 starts on the campaign's first day",
                x_label="weeks from the campaign's start", y_label="orders per customer per week",
                vlines=[(0, "start")]) if series else None
            out["event_charts"].append({"promotion_id": pid, "chart": chart,
                                        "reason": None if chart else f"an arm has fewer than {k} customers"})
    out["event_reason"] = _missing(tables, missing, "event_study") or (
        None if out["event_charts"] else "no targeted campaign with a holdout started in the quarter")
    effects = tables.get("timing_effects")
    out["effects"] = []
    if effects is not None and len(effects):
        rows_chart = []
        ids = set(quarter_ids or [])
        shown = effects[(effects["scope"].astype(str) == "all") | effects["scope"].astype(str).isin(ids)]
        out["effects_hidden"] = int(len(effects) - len(shown))
        for pos, r in shown.iterrows():
            small = too_few(r["n_customers"], k=k)
            kind = "days" if r["effect"] == "gap_after_deal" else "ratio"
            out["effects"].append({
                "effect": TIMING_LABELS.get(r["effect"], r["effect"]), "scope": str(r["scope"]), "model": r["model"],
                "basis": r.get("basis") or "", "verdict": r.get("verdict") or "",
                "estimate": cell(effects, "timing_effects", pos, "estimate", kind, suppress=small, k=k),
                "ci": interval(effects, "timing_effects", pos, "ci_low", "ci_high", kind, suppress=small, k=k),
                "n": cell(effects, "timing_effects", pos, "n_customers", "count", suppress=small, k=k),
                "level": cell(effects, "timing_effects", pos, "ci_level", "percent0"), "note": r["note"] or "",
            })
            if r["effect"] != "gap_after_deal" and str(r["scope"]) == "all" and not small and finite(r["estimate"]):
                rows_chart.append(charts.Interval(f"{r['effect'].replace('_', ' ')} ({r['model'].replace('_', ' ')})",
                                                  r["estimate"], r["ci_low"], r["ci_high"],
                                                  colour="blue" if r["model"].startswith("discrete") else "amber",
                                                  note="not estimable"))
        n = int(effects["n_customers"].max()) if effects["n_customers"].notna().any() else 0
        out["effects_chart"] = _safe_chart(
            charts.interval_chart, rows_chart, title="Timing effects: rate and hazard ratios, all campaigns",
            caption=f"n = up to {n:,} customers; {_level(effects, 1 - alpha)} bootstrap intervals; 1 = no effect; log "
                    f"scale; randomised rows compare treatment and holdout arms, the others are adjusted observational "
                    f"comparisons", x_label="ratio (log scale)", reference=1.0, log_scale=True) if rows_chart else None
    return out


# --- the long run ----------------------------------------------------------------------------------


def longrun_section(tables, missing, k: int, alpha: float, quarter: str | None = None,
                    previous: str | None = None) -> dict:
    out = {}
    dep = tables.get("dependence_by_quarter")
    out["dependence_reason"] = _missing(tables, missing, "dependence_by_quarter")
    if dep is not None and len(dep):
        quarters = dep["quarter"].astype(str).tolist()
        x = list(range(len(quarters)))
        series = []
        names = {"dependence_index_mean": "mean", "dependence_index_p50": "median customer",
                 "dependence_index_p90": "90th percentile"}
        for col, colour in (("dependence_index_mean", "blue"), ("dependence_index_p50", "amber"),
                            ("dependence_index_p90", "teal")):
            if col in dep.columns:
                series.append(charts.Series(names[col], x, dep[col].tolist(),
                                            dep.get(f"{col}_ci_low", pd.Series([None] * len(dep))).tolist(),
                                            dep.get(f"{col}_ci_high", pd.Series([None] * len(dep))).tolist(), colour=colour))
        n = int(dep["customers"].min()) if "customers" in dep.columns and len(dep) else 0
        out["dependence_chart"] = _safe_chart(
            charts.line_chart, series, title="Dependence on deals by quarter",
            caption=f"n = at least {n:,} customers per quarter; {_level(dep, 1 - alpha)} intervals; "
                    f"x: quarters {quarters[0]} to {quarters[-1]}",
            x_label="quarter", y_label="dependence index", x_tick_labels=dict(zip(x, quarters))) if series else None
        shown = ["quarter", "customers", "dependence_index_mean", "dependence_index_mean_ci_low",
                 "dependence_index_mean_ci_high", "dependence_index_p50", "dependence_index_p90", "full_price_share",
                 "full_price_share_ci_low", "full_price_share_ci_high", "deal_only_share", "mean_depth"]
        cols, rows, total, texts = generic_rows(dep, "dependence_by_quarter", k=k, columns=shown + ["method"])
        out["dependence"] = {"columns": cols, "rows": rows, "total": total, "texts": texts}
    out["tables"] = []
    for name, title in (("dependence_transitions", "Dependence transitions between quarters"),
                        ("responsiveness_drift", "Responsiveness drift"),
                        ("cohort_retention", "Cohort retention"), ("cohort_value", "Cohort value"),
                        ("population_drift", "Population drift"),
                        ("broadcast_effects", "Broadcast sales against their counterfactual")):
        frame = tables.get(name)
        if frame is None:
            out["tables"].append({"name": name, "title": title, "reason": missing.get(name, f"{name} not produced")})
            continue
        shown = in_quarter(frame, quarter, previous) if quarter and name != "broadcast_effects" else frame
        if "first_quarter" in shown.columns and (shown["first_quarter"].astype(str) == "all").any():
            shown = shown[shown["first_quarter"].astype(str) == "all"]  # whole cohorts; by quarter in the Parquet file
        cols, rows, total, texts = generic_rows(shown, name, k=k)
        out["tables"].append({"name": name, "title": title, "columns": cols, "rows": rows, "total": total,
                              "texts": texts, "reason": None})
    retention = tables.get("cohort_retention")
    out["retention_chart"] = None
    needed = {"cohort", "day", "survival"}
    if retention is not None and len(retention) and needed <= set(retention.columns):
        frame = retention
        if "first_quarter" in frame.columns:
            frame = frame[frame["first_quarter"].astype(str) == "all"]
        if "is_suppressed" in frame.columns:
            frame = frame[~frame["is_suppressed"].astype(bool)]
        series, sizes = [], []
        for i, (cohort, curve) in enumerate(frame.groupby("cohort", sort=True)):
            series.append(charts.Series(str(cohort).replace("_", " "), curve["day"].tolist(), curve["survival"].tolist(),
                                        curve.get("ci_low", pd.Series([None] * len(curve))).tolist(),
                                        curve.get("ci_high", pd.Series([None] * len(curve))).tolist(),
                                        colour=charts.SERIES_ORDER[i % len(charts.SERIES_ORDER)], step=True))
            if "customers" in curve.columns:
                sizes.append(f"{int(curve['customers'].max()):,} {str(cohort).replace('_', ' ')}")
        out["retention_chart"] = _safe_chart(
            charts.line_chart, series, title="Cohort retention: share not yet lapsed",
            caption=f"n = {', '.join(sizes)} customers; Kaplan-Meier with {_level(frame, 1 - alpha)} intervals",
            x_label="days since the first order", y_label="share not lapsed", y_percent=True) if series else None
    series_table = tables.get("broadcast_series")
    out["broadcast_reason"] = _missing(tables, missing, "broadcast_series")
    out["broadcast_charts"] = []
    if series_table is not None and len(series_table):
        day_col = next((c for c in ("day_on", "ordered_on", "date", "day") if c in series_table.columns), None)
        keys = [c for c in ("promotion_id", "outcome") if c in series_table.columns]
        for key, frame in series_table.groupby(keys, sort=False) if keys else []:
            pid = key[0] if isinstance(key, tuple) else key
            if day_col is None:
                break
            days = pd.to_datetime(frame[day_col])
            x = ((days - days.min()).dt.days).tolist()
            marks = []
            if "period" in frame.columns:
                for period, label in (("during", "sale"), ("after", "after")):
                    first = frame.index[frame["period"].astype(str) == period]
                    if len(first):
                        marks.append((x[frame.index.get_loc(first[0])], label))
            series = [charts.Series("actual", x, frame["actual"].tolist(), colour="blue"),
                      charts.Series("counterfactual", x, frame["counterfactual"].tolist(),
                                    frame.get("ci_low", pd.Series([None] * len(frame))).tolist(),
                                    frame.get("ci_high", pd.Series([None] * len(frame))).tolist(), colour="amber",
                                    dash="6 3")]
            out["broadcast_charts"].append(_safe_chart(
                charts.line_chart, series, title=f"Broadcast sale {pid}: actual vs counterfactual"
                + (f" ({str(frame['outcome'].iloc[0]).replace('_', ' ')})" if "outcome" in frame.columns else ""),
                caption=f"daily series from {days.min().date()}; counterfactual with {_level(frame, 1 - alpha)} interval; "
                        f"n = {len(frame):,} days", x_label=f"days from {days.min().date()}", vlines=marks,
                y_label=str(frame["outcome"].iloc[0]).replace("_", " ") if "outcome" in frame.columns else "orders"))
    return out


# --- data quality -----------------------------------------------------------------------------------


def quality_section(tables, missing, notes, k: int) -> dict:
    out = {}
    summary = tables.get("check_summary")
    out["summary_reason"] = _missing(tables, missing, "check_summary")
    out["summary"] = []
    if summary is not None:
        for pos, r in summary.iterrows():
            if "configured" in summary.columns and not r["configured"]:
                out["summary"].append({"table": r["table"], "configured": False})
                continue
            out["summary"].append({
                "table": r["table"], "configured": True,
                "read": cell(summary, "check_summary", pos, "rows_read", "count"),
                "accepted": cell(summary, "check_summary", pos, "accepted", "count"),
                "rejected": cell(summary, "check_summary", pos, "rejected", "count"),
                "warnings": cell(summary, "check_summary", pos, "warnings", "count"),
            })
    for name in ("rejects_summary", "warnings_summary"):
        frame = tables.get(name)
        if frame is None:
            out[name] = {"reason": missing.get(name)}
            continue
        count_col = "rows" if "rows" in frame.columns else frame.columns[-1]
        text_cols = [c for c in frame.columns if c != count_col]
        out[name] = {"columns": text_cols, "rows": [
            {"texts": [str(r[c]) for c in text_cols], "rows": cell(frame, name, pos, count_col, "count")}
            for pos, r in frame.iterrows()], "reason": None}
    checks = tables.get("randomisation_checks")
    out["failed_checks"] = []
    if checks is not None and len(checks):
        failed = checks[checks["passed"].astype("boolean").fillna(True) == False]  # noqa: E712
        out["failed_checks"] = [{"promotion_id": r["promotion_id"], "check": str(r["check"]).replace("_", " "),
                                 "feature": r["feature"] or "", "detail": r["detail"] or ""}
                                for _, r in failed.iterrows()]
    out["notes"] = [{"source": s, "level": lvl, "message": m} for s, lvl, m in notes]
    return out
