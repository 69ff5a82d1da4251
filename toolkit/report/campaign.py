"""The one-campaign HTML readout.

Reads only a :class:`~toolkit.effects.readout.CampaignReadout`'s tables; lays them out with
``templates/campaign.html.j2``. The page is self-contained (inline CSS, charts as base64 PNG, no
network). It never shows customer identifiers (the ``uplift_scores`` table is not used), and any
figure describing fewer than ``small_cell`` customers in an arm is suppressed.
"""

from __future__ import annotations

import base64
import io
import math
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd
from jinja2 import Environment, FileSystemLoader, select_autoescape

TEMPLATES = Path(__file__).parent / "templates"
SUPPRESSED = "suppressed"
OUTCOME_LABELS = {"buyers": "Buyers (share who bought)", "orders": "Orders per customer",
                  "net_revenue": "Net revenue per customer", "margin_after_discount": "Margin after discount per customer"}
WINDOW_LABELS = {"during": "during", "after": "after", "total": "during + after"}
SEGMENT_LABELS = {"persuadable": "Persuadable", "sure_thing": "Sure thing", "lost_cause": "Lost cause",
                  "do_not_disturb": "Do not disturb"}


# --- formatting (layout only: the numbers come from the tables) -----------------------------------


def _finite(value) -> bool:
    try:
        return value is not None and not pd.isna(value) and math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def fmt_number(value, digits: int = 3) -> str:
    if not _finite(value):
        return "—"
    v = float(value)
    if abs(v) >= 1000:
        return f"{v:,.0f}"
    if abs(v) >= 100:
        return f"{v:,.1f}"
    return f"{v:.{digits}g}" if v != 0 else "0"


def fmt_percent(value, digits: int = 1) -> str:
    return f"{float(value) * 100:.{digits}f}%" if _finite(value) else "—"


def fmt_points(value, digits: int = 1) -> str:
    return f"{float(value) * 100:+.{digits}f} pts" if _finite(value) else "—"


def fmt_money(value, currency: str) -> str:
    if not _finite(value):
        return "—"
    v = float(value)
    return f"{v:,.2f} {currency}" if abs(v) < 100 else f"{v:,.0f} {currency}"


def fmt_count(value) -> str:
    return f"{int(value):,}" if _finite(value) else "—"


def fmt_whole(value) -> str:
    """A count that may be estimated (negative, fractional): rounded to a whole number."""
    return f"{float(value):,.0f}" if _finite(value) else "—"


def fmt_interval(low, high, formatter) -> str:
    if not (_finite(low) and _finite(high)):
        return "—"
    return f"{formatter(low)} to {formatter(high)}"


def _png(fig) -> str:
    if fig.subplotpars.left == 0.125:  # the default: leave room for the axis labels
        fig.subplots_adjust(left=0.13, right=0.97, top=0.9, bottom=0.15)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=90)
    import matplotlib.pyplot as plt

    plt.close(fig)
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


# --- charts -------------------------------------------------------------------------------------


def effects_chart(effects: pd.DataFrame, method: str, level: float) -> str | None:
    rows = effects[effects["method"] == method].dropna(subset=["relative_lift"])
    if rows.empty:
        return None
    plt = _plt()
    labels = [f"{r.outcome.replace('_', ' ')} ({WINDOW_LABELS.get(r.window, r.window)})" for r in rows.itertuples()]
    y = np.arange(len(rows))[::-1]
    fig, ax = plt.subplots(figsize=(8, 0.32 * len(rows) + 1.2))
    low = rows["relative_lift"] - rows["relative_lift_ci_low"]
    high = rows["relative_lift_ci_high"] - rows["relative_lift"]
    ax.errorbar(rows["relative_lift"] * 100, y, xerr=[low.fillna(0) * 100, high.fillna(0) * 100], fmt="o",
                color="#1f5f8b", ecolor="#7aa6c2", capsize=3)
    ax.axvline(0, color="#444", lw=0.8)
    ax.set_yticks(y, labels)
    ax.set_xlabel(f"relative lift, % (with {level:.0%} interval)")
    n_t, n_c = int(rows["n_treated"].iloc[0]), int(rows["n_holdout"].iloc[0])
    ax.set_title(f"Lift by outcome and window ({method}); n = {n_t:,} treated, {n_c:,} holdout", fontsize=10)
    ax.grid(axis="x", alpha=0.3)
    fig.subplots_adjust(left=0.41, right=0.97, top=1 - 0.45 / fig.get_figheight(), bottom=0.75 / fig.get_figheight())
    return _png(fig)


def qini_chart(qini: pd.DataFrame, n_treated: int, n_holdout: int) -> str | None:
    if qini.empty:
        return None
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6.5, 4.2))
    for model, curve in qini.groupby("model", sort=False):
        chosen = bool(curve["is_chosen"].iloc[0])
        ax.plot(curve["fraction_targeted"] * 100, curve["qini"] * 100, lw=2.4 if chosen else 1.2,
                label=f"{model.replace('_', ' ')}{' (chosen)' if chosen else ''}")
    first = qini[qini["is_chosen"]] if qini["is_chosen"].any() else qini
    ax.plot(first["fraction_targeted"] * 100, first["random"] * 100, "--", color="#888", label="random targeting")
    ax.set_xlabel("customers targeted, % (highest predicted uplift first)")
    ax.set_ylabel("incremental buyers per treated customer, %")
    ax.set_title(f"Qini curves (out-of-fold); n = {n_treated:,} treated, {n_holdout:,} holdout", fontsize=10)
    ax.legend(fontsize=8)
    ax.grid(alpha=0.3)
    return _png(fig)


def decile_chart(deciles: pd.DataFrame, small_cell: int) -> str | None:
    shown = deciles[(deciles["n_treated"] >= small_cell) & (deciles["n_holdout"] >= small_cell)]
    if shown.empty:
        return None
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6.5, 3.6))
    ax.bar(shown["decile"], shown["uplift"] * 100, color="#1f5f8b", label="observed uplift")
    ax.plot(shown["decile"], shown["mean_predicted_uplift"] * 100, "o-", color="#d9822b", label="mean predicted uplift")
    ax.axhline(0, color="#444", lw=0.8)
    ax.set_xticks(range(1, 11))
    ax.set_xlabel("decile of predicted uplift (1 = highest)")
    ax.set_ylabel("points of buying rate")
    total = int(deciles["n_treated"].sum() + deciles["n_holdout"].sum())
    ax.set_title(f"Uplift by decile; n = {total:,} customers (deciles with an arm < {small_cell} not shown)", fontsize=10)
    ax.legend(fontsize=8)
    ax.grid(axis="y", alpha=0.3)
    return _png(fig)


def depth_chart(depth: pd.DataFrame, currency: str, level: float) -> str | None:
    rows = depth.dropna(subset=["incremental_margin"])
    if rows.empty:
        return None
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6.5, 3.6))
    x = rows["fraction_targeted"] * 100
    ax.fill_between(x, rows["incremental_margin_ci_low"], rows["incremental_margin_ci_high"], color="#7aa6c2", alpha=0.35,
                    label=f"{level:.0%} interval")
    ax.plot(x, rows["incremental_margin"], "o-", color="#1f5f8b", label="incremental margin after discount")
    best = rows[rows["is_recommended"]]
    if len(best):
        ax.plot(best["fraction_targeted"] * 100, best["incremental_margin"], "*", ms=16, color="#d9822b",
                label="recommended depth")
    ax.axhline(0, color="#444", lw=0.8)
    ax.set_xlabel("customers targeted, % (highest predicted uplift first)")
    ax.set_ylabel(currency)
    ax.set_title(f"Incremental margin by targeting depth; n = {int(rows['customers'].max()):,} customers", fontsize=10)
    ax.legend(fontsize=8)
    ax.grid(alpha=0.3)
    return _png(fig)


def pull_forward_chart(pull: pd.DataFrame, level: float) -> str | None:
    if pull.empty:
        return None
    r = pull.iloc[0]
    plt = _plt()
    fig, ax = plt.subplots(figsize=(5.5, 3.2))
    names = ["during", "after", "during + after"]
    values = [r["during_lift_orders"], r["after_lift_orders"], r["net_lift_orders"]]
    lows = [r["during_lift_ci_low"], r["after_lift_ci_low"], r["net_lift_ci_low"]]
    highs = [r["during_lift_ci_high"], r["after_lift_ci_high"], r["net_lift_ci_high"]]
    err = [[v - lo for v, lo in zip(values, lows)], [hi - v for v, hi in zip(values, highs)]]
    ax.bar(names, values, yerr=err, capsize=4, color=["#1f5f8b", "#d9822b", "#4a7c3f"])
    ax.axhline(0, color="#444", lw=0.8)
    ax.set_ylabel("lift in orders per treated customer")
    ax.set_title(f"Orders lift by window ({level:.0%} intervals); n = {int(r['n_treated']):,} treated, "
                 f"{int(r['n_holdout']):,} {'holdout' if r['method'] != 'doubly_robust' else 'comparison'}", fontsize=10)
    ax.grid(axis="y", alpha=0.3)
    return _png(fig)


# --- context ------------------------------------------------------------------------------------


def _small(n_treated, n_holdout, small_cell: int) -> bool:
    return not (_finite(n_treated) and _finite(n_holdout)) or n_treated < small_cell or n_holdout < small_cell


def _effects_rows(effects: pd.DataFrame, small_cell: int, currency: str) -> list[dict]:
    rows = []
    for r in effects.itertuples():
        suppress = _small(r.n_treated, r.n_holdout, small_cell)
        if r.outcome == "buyers":
            value, lift, ci = fmt_percent, fmt_points, fmt_points
        else:
            value = lift = ci = lambda v: fmt_number(v, 3)
        rows.append({
            "outcome": OUTCOME_LABELS.get(r.outcome, r.outcome), "window": WINDOW_LABELS.get(r.window, r.window),
            "method": r.method,
            "treated_mean": SUPPRESSED if suppress else value(r.treated_mean),
            "holdout_mean": SUPPRESSED if suppress else value(r.holdout_mean),
            "lift": SUPPRESSED if suppress else lift(r.lift),
            "lift_ci": SUPPRESSED if suppress else fmt_interval(r.lift_ci_low, r.lift_ci_high, ci),
            "relative_lift": SUPPRESSED if suppress else fmt_percent(r.relative_lift),
            "relative_ci": SUPPRESSED if suppress else fmt_interval(r.relative_lift_ci_low, r.relative_lift_ci_high, fmt_percent),
            "variance_reduction": fmt_percent(r.variance_reduction) if _finite(r.variance_reduction) else "",
            "n_treated": fmt_count(r.n_treated), "n_holdout": fmt_count(r.n_holdout),
            # (not "clear": in the template, r.clear would be the dict method, always true)
            "excludes_zero": (not suppress) and _finite(r.lift_ci_low) and (r.lift_ci_low > 0 or r.lift_ci_high < 0),
        })
    return rows


def _decile_rows(deciles: pd.DataFrame, small_cell: int) -> list[dict]:
    rows = []
    for r in deciles.itertuples():
        suppress = _small(r.n_treated, r.n_holdout, small_cell)
        rows.append({
            "decile": int(r.decile),
            "n_treated": fmt_count(r.n_treated) if r.n_treated >= small_cell else f"< {small_cell}",
            "n_holdout": fmt_count(r.n_holdout) if r.n_holdout >= small_cell else f"< {small_cell}",
            "treated_rate": SUPPRESSED if suppress else fmt_percent(r.treated_rate),
            "holdout_rate": SUPPRESSED if suppress else fmt_percent(r.holdout_rate),
            "uplift": SUPPRESSED if suppress else fmt_points(r.uplift),
            "predicted": fmt_points(r.mean_predicted_uplift),
        })
    return rows


def _segment_rows(segments: pd.DataFrame, small_cell: int, currency: str) -> list[dict]:
    rows = []
    for r in segments.itertuples():
        too_few = r.customers < small_cell
        arms_small = _small(r.n_treated, r.n_holdout, small_cell)
        rows.append({
            "segment": SEGMENT_LABELS.get(r.segment, r.segment),
            "customers": fmt_count(r.customers) if not too_few else f"< {small_cell}",
            "share": fmt_percent(r.share) if not too_few else SUPPRESSED,
            "redemption_rate": fmt_percent(r.redemption_rate) if r.n_treated >= small_cell else SUPPRESSED,
            "discount_cost": fmt_money(r.discount_cost, currency) if r.n_treated >= small_cell else SUPPRESSED,
            "observed_uplift": fmt_points(r.observed_uplift) if not arms_small else SUPPRESSED,
            "predicted": fmt_points(r.mean_predicted_uplift) if not too_few else SUPPRESSED,
            "baseline": fmt_percent(r.mean_baseline_probability) if not too_few else SUPPRESSED,
        })
    return rows


def _check_rows(checks: pd.DataFrame, small_cell: int, n_treated: int, n_holdout: int) -> list[dict]:
    rows = []
    suppress = _small(n_treated, n_holdout, small_cell)
    for r in checks.itertuples():
        passed = r.passed
        state = "not run" if passed is None or pd.isna(passed) else ("passed" if bool(passed) else "FAILED")
        is_count = r.check == "sample_ratio"
        rows.append({
            "check": r.check.replace("_", " "), "feature": r.feature,
            "treated": (fmt_count(r.treated_value) if is_count else fmt_number(r.treated_value)) if (is_count or not suppress) else SUPPRESSED,
            "holdout": (fmt_count(r.holdout_value) if is_count else fmt_number(r.holdout_value)) if (is_count or not suppress) else SUPPRESSED,
            "statistic": fmt_number(r.statistic), "p_value": fmt_number(r.p_value, 2),
            "state": state, "detail": r.detail,
        })
    return rows


def build_context(readout, *, small_cell: int | None = None) -> dict:
    """Everything the template lays out, already formatted (and suppressed where cells are small)."""
    tables = readout.tables
    meta = readout.meta
    small_cell = int(small_cell if small_cell is not None else meta.get("small_cell", 10))
    currency = meta.get("currency", "EUR")
    level = 1 - float(meta.get("alpha", 0.05))
    effects = tables["campaign_effects"]
    method = "cuped" if readout.is_randomised else "doubly_robust"
    n_t = int(meta.get("n_treated", 0))
    n_c = int(meta.get("n_holdout", 0)) if readout.is_randomised else int(meta.get("n_comparison", 0))
    economics = tables["campaign_economics"].iloc[0] if len(tables["campaign_economics"]) else None
    pull = tables["pull_forward"]
    nxt = tables["next_campaign"].iloc[0] if len(tables["next_campaign"]) else None
    key_effect = effects[(effects["outcome"] == "buyers") & (effects["window"] == "during") & (effects["method"] == method)]
    key = key_effect.iloc[0] if len(key_effect) else None
    suppress_all = _small(n_t, n_c, small_cell)
    headline = []
    if key is not None and not suppress_all:
        headline.append(("Lift in buyers during the campaign",
                         f"{fmt_points(key['lift'])} ({fmt_interval(key['lift_ci_low'], key['lift_ci_high'], fmt_points)})"))
    if economics is not None and not suppress_all:
        headline += [
            ("Incremental buyers", f"{fmt_whole(economics['incremental_buyers'])} "
                                   f"({fmt_interval(economics['incremental_buyers_ci_low'], economics['incremental_buyers_ci_high'], fmt_whole)})"),
            ("Net incremental margin, after discount and redemption cost (during + after)",
             f"{fmt_money(economics['net_incremental_margin'], currency)} "
             f"({fmt_interval(economics['net_incremental_margin_ci_low'], economics['net_incremental_margin_ci_high'], lambda v: fmt_money(v, currency))})"),
            ("Discount paid", fmt_money(economics["discount_cost"], currency)),
            ("Discount paid to buyers who would have bought anyway", fmt_money(economics["discount_paid_to_non_incremental"], currency)),
            ("Return on discount", fmt_percent(economics["return_on_discount"], 0)),
        ]
    if len(pull) and not suppress_all and _finite(pull["pull_forward_share_ci_low"].iloc[0]):
        headline.append(("Share of the orders bump given back after the campaign", fmt_percent(pull["pull_forward_share"].iloc[0], 0)))
    deciles = tables["uplift_deciles"]
    qini = tables["qini"]
    depth = tables["targeting_depth"]
    checks = tables["randomisation_checks"]
    failed_checks = [r["detail"] for _, r in checks.iterrows() if r["passed"] is False or r["passed"] == False]  # noqa: E712
    promotion = readout.promotion
    economics_rows = []
    if economics is not None:
        def money(col):
            return fmt_money(economics[col], currency) if not suppress_all else SUPPRESSED

        economics_rows = [
            ("Treated customers / holdout", f"{fmt_count(economics['n_treated'])} / {fmt_count(economics['n_holdout'])}"),
            ("Redemptions (rate)", f"{fmt_count(economics['redemptions'])} ({fmt_percent(economics['redemption_rate'])})"
             if not suppress_all else SUPPRESSED),
            ("Discount cost", money("discount_cost")),
            ("Redemption cost", money("redemption_cost")),
            ("Incremental net revenue (during + after)", money("incremental_net_revenue")),
            ("Incremental margin after discount (during + after)", money("incremental_margin")),
            ("Net incremental margin (after redemption cost)", money("net_incremental_margin")),
            ("Return on discount", fmt_percent(economics["return_on_discount"], 0) if not suppress_all else SUPPRESSED),
            ("Cost per incremental buyer", money("cost_per_incremental_buyer")),
            ("Share of treated buyers who would have bought anyway", fmt_percent(economics["non_incremental_buyer_share"], 0)
             if not suppress_all else SUPPRESSED),
            ("Discount paid to them", money("discount_paid_to_non_incremental")),
            ("Discount paid to sure things (model segments)", money("subsidy_to_sure_things")),
        ]
    next_rows = []
    if nxt is not None:
        next_rows = [
            ("Recommended targeting depth (of scored customers)", fmt_percent(nxt["recommended_depth"], 0)),
            ("Also send at random (untargeted share)", fmt_percent(nxt["untargeted_share"], 0)),
            ("Expected incremental margin at that depth (this campaign's size)",
             f"{fmt_money(nxt['expected_incremental_margin'], currency)} "
             f"({fmt_interval(nxt['expected_incremental_margin_ci_low'], nxt['expected_incremental_margin_ci_high'], lambda v: fmt_money(v, currency))})"),
            ("Holdout used (share)", f"{fmt_count(nxt['n_holdout'])} ({fmt_percent(nxt['holdout_share_used'])})"),
            (f"Minimum detectable lift in buyers (power {nxt['power']:.0%}, alpha {nxt['alpha']:g})", fmt_points(nxt["mde_buyers"])),
            ("Target lift for the next holdout", f"{fmt_points(nxt['target_lift_buyers'])} ({nxt['target_lift_source']})"),
            ("Holdout needed beside this many treated", fmt_count(math.ceil(nxt["holdout_needed"])) if _finite(nxt["holdout_needed"]) else
             ("not reachable" if nxt["holdout_needed"] == math.inf else "—")),
            ("Per arm with an even split", fmt_count(math.ceil(nxt["per_arm_equal_split"])) if _finite(nxt["per_arm_equal_split"]) else "—"),
        ]
    model_rows = [{"learner": r.learner.replace("_", " "), "qini": fmt_number(r.qini_coefficient, 3),
                   "auuc": fmt_number(r.auuc, 3), "chosen": bool(r.is_chosen)} for r in tables["model_choice"].itertuples()]
    return {
        "title": f"Campaign readout: {promotion.get('name') or promotion['promotion_id']}",
        "promotion": {
            "promotion_id": promotion["promotion_id"], "name": promotion.get("name") or "",
            "mechanic": promotion.get("mechanic"), "depth": promotion.get("depth"),
            "starts": str(meta.get("starts_on")), "ends": str(meta.get("ends_on")), "after_ends": str(meta.get("after_ends_on")),
        },
        "status": readout.randomisation_check, "is_randomised": readout.is_randomised,
        "failed_checks": failed_checks, "n_treated": fmt_count(n_t), "n_holdout": fmt_count(n_c),
        "comparison_label": "holdout" if readout.is_randomised else "comparison",
        "level": f"{level:.0%}", "method": method, "small_cell": small_cell, "currency": currency,
        "headline": headline, "suppress_all": suppress_all,
        "effects_rows": _effects_rows(effects, small_cell, currency),
        "effects_chart": None if suppress_all else effects_chart(effects, method, level),
        "pull": pull.iloc[0].to_dict() if len(pull) else None,
        "pull_text": {
            "share": fmt_percent(pull["pull_forward_share"].iloc[0], 0) if len(pull) else "—",
            "share_ci": fmt_interval(pull["pull_forward_share_ci_low"].iloc[0], pull["pull_forward_share_ci_high"].iloc[0],
                                     lambda v: fmt_percent(v, 0)) if len(pull) else "—",
            "net_orders": fmt_whole(pull["net_incremental_orders"].iloc[0]) if len(pull) else "—",
            "during_orders": fmt_whole(pull["during_incremental_orders"].iloc[0]) if len(pull) else "—",
            "after_orders": fmt_whole(pull["after_incremental_orders"].iloc[0]) if len(pull) else "—",
            "note": pull["note"].iloc[0] if len(pull) else "",
        },
        "pull_chart": None if suppress_all else pull_forward_chart(pull, level),
        "model_rows": model_rows, "chosen_model": meta.get("chosen_model"),
        "features": meta.get("features", []), "folds": meta.get("folds"),
        "qini_chart": qini_chart(qini, n_t, n_c) if len(qini) and not suppress_all else None,
        "decile_rows": _decile_rows(deciles, small_cell), "decile_chart": decile_chart(deciles, small_cell) if len(deciles) else None,
        "segment_rows": _segment_rows(tables["uplift_segments"], small_cell, currency),
        "thresholds": {"uplift": fmt_points(meta.get("uplift_threshold")), "baseline": fmt_percent(meta.get("baseline_threshold"), 0)},
        "economics_rows": economics_rows,
        "economics_note": economics["note"] if economics is not None else "",
        "next_rows": next_rows, "recommendation": nxt["recommendation"] if nxt is not None else "",
        "depth_chart": depth_chart(depth, currency, level) if len(depth) and not suppress_all else None,
        "check_rows": _check_rows(checks, small_cell, n_t, n_c),
        "notes": [{"level": lvl, "message": msg} for lvl, msg in readout.notes],
        "footer": {
            "tool_version": meta.get("tool_version"), "sklearn": meta.get("sklearn_version"),
            "statsmodels": meta.get("statsmodels_version"), "seed": meta.get("seed"), "folds": meta.get("folds"),
            "alpha": meta.get("alpha"), "min_arm_size": meta.get("min_arm_size"), "rows": meta.get("rows"),
            "planned_share": meta.get("planned_holdout_share"), "after_days": meta.get("after_days"),
            "pre_period_days": meta.get("pre_period_days"), "config": meta.get("config_path"),
            "fingerprint": meta.get("input_fingerprint"),
            "seconds": f"{meta.get('seconds', {}).get('total', sum(meta.get('seconds', {}).values())):.1f}",
            "generated": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        },
    }


def render_campaign(readout, *, small_cell: int | None = None) -> str:
    """The readout as one self-contained HTML page."""
    env = Environment(loader=FileSystemLoader(str(TEMPLATES)), autoescape=select_autoescape(["html", "j2"]),
                      trim_blocks=True, lstrip_blocks=True)
    return env.get_template("campaign.html.j2").render(**build_context(readout, small_cell=small_cell))
