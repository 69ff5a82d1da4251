"""``report.html``: the quarter's tables laid out by ``templates/quarter.html.j2`` (autoescape on)."""

from __future__ import annotations

from pathlib import Path

from jinja2 import Environment, FileSystemLoader, StrictUndefined, select_autoescape
from markupsafe import Markup

from .. import charts
from . import context as ctx
from .period import Quarter

TEMPLATES = Path(__file__).resolve().parents[1] / "templates"


def environment() -> Environment:
    env = Environment(loader=FileSystemLoader(str(TEMPLATES)), autoescape=select_autoescape(["html", "j2"]),
                      trim_blocks=True, lstrip_blocks=True, undefined=StrictUndefined)
    # Charts are built (and their text escaped) in toolkit/report/charts.py; mark them as markup here.
    env.filters["svg"] = lambda chart: Markup(chart.svg) if chart is not None else ""
    return env


def methods_context(settings) -> dict:
    r = settings.report
    return {
        "min_cell": r.min_cell_customers, "act_min_adverse": r.act_min_adverse, "watch_min_adverse": r.watch_min_adverse,
        "act_on_negative_margin": r.act_on_negative_margin, "watch_on_groups_against": r.watch_on_groups_against,
        "alpha": settings.campaign.alpha, "level": f"{1 - settings.campaign.alpha:.0%}",
        "after_days": settings.windows.after_days, "pre_period_days": settings.windows.pre_period_days,
        "dip_days": settings.timing.dip_days, "anticipation_days": settings.timing.anticipation_days,
        "weeks_before": r.event_weeks_before, "weeks_after": r.event_weeks_after,
        "exclude_features": list(settings.campaign.exclude_features),
    }


def build_context(tables: dict, missing: dict, notes: list, settings, facts: dict) -> dict:
    k = settings.report.min_cell_customers
    alpha = settings.campaign.alpha
    currency = settings.economics.currency
    quarter = facts["quarter"]
    previous = Quarter.parse(quarter).previous().label
    campaigns = tables.get("quarter_campaigns")
    quarter_ids = campaigns["promotion_id"].astype(str).tolist() if campaigns is not None else []
    return {
        "title": f"Promotion health report, {quarter}",
        "quarter": quarter, "facts": facts, "currency": currency, "k": k,
        "sections": ctx.SECTIONS,
        "palette": charts.PALETTE, "tints": charts.TINTS, "status_colours": charts.STATUS,
        "font": Markup(charts.FONT),  # a constant of ours (quotes must stay quotes inside <style>)
        "verdict": ctx.verdict_section(tables, missing, k, currency, alpha),
        "campaigns": ctx.campaign_sections(tables, missing, k, currency, alpha),
        "tails": ctx.tails_section(tables, missing, k, alpha, quarter, previous),
        "timing": ctx.timing_section(tables, missing, k, alpha, horizon_days=2 * settings.timing.horizon_days,
                                     quarter_ids=quarter_ids),
        "longrun": ctx.longrun_section(tables, missing, k, alpha, quarter, previous),
        "quality": ctx.quality_section(tables, missing, notes, k),
        "methods": methods_context(settings),
        "missing": missing,
    }


def render_report(tables: dict, missing: dict, notes: list, settings, facts: dict) -> str:
    """The whole report as one self-contained HTML page."""
    return environment().get_template("quarter.html.j2").render(**build_context(tables, missing, notes, settings, facts))
