"""The one-campaign HTML readout: self-contained, no customer identifiers, small cells suppressed, checks loud."""

from __future__ import annotations

import re

from toolkit.report.campaign import SUPPRESSED, build_context, render_campaign


def test_page_is_self_contained_and_shows_no_customer_identifiers(readouts, workspace):
    html = render_campaign(readouts["P1"])
    assert "<html" in html and "</html>" in html
    assert not re.search(r"(src|href)=\"(https?:)?//", html)  # nothing fetched from the network
    assert "<script" not in html
    images = re.findall(r"<img [^>]*src=\"([^\"]+)\"", html)
    assert len(images) == 5 and all(src.startswith("data:image/png;base64,") for src in images)
    text = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", html)
    customer_ids = set(workspace["panels"]["P1"]["customer_id"])
    assert not any(cid in text for cid in list(customer_ids)[:500])
    assert not re.search(r"C\d{6}", text)
    assert "Randomisation checks passed" in html
    assert "protected attributes" in html


def test_failed_check_is_shown_loudly(readouts):
    html = render_campaign(readouts["PK"])
    assert "RANDOMISATION CHECK FAILED" in html and "SAMPLE RATIO MISMATCH" in html


def test_small_cells_are_suppressed(readouts):
    """With small_cell above the decile sizes every decile rate is withheld (rows < small_cell in an arm)."""
    context = build_context(readouts["P1"], small_cell=100)  # each decile has about 60 holdout customers
    assert all(row["uplift"] == SUPPRESSED for row in context["decile_rows"] if row["n_holdout"] == "< 100")
    assert any(row["n_holdout"] == "< 100" for row in context["decile_rows"])
    tiny = build_context(readouts["PS"], small_cell=20)  # PS: 60 customers, holdout under 20
    assert tiny["suppress_all"]
    assert all(row["lift"] == SUPPRESSED for row in tiny["effects_rows"])
    assert tiny["effects_chart"] is None and tiny["headline"] == []
    html = render_campaign(readouts["PS"], small_cell=20)
    assert "fewer than 20 customers" in html


def test_only_lifts_whose_interval_excludes_zero_are_bold(readouts):
    """The page says "Bold lifts have intervals that exclude zero" (common practice, no source)."""
    html = render_campaign(readouts["P1"])
    effects = readouts["P1"].tables["campaign_effects"]
    crosses = ((effects["lift_ci_low"] <= 0) & (effects["lift_ci_high"] >= 0)).sum()
    excludes = len(effects) - crosses
    assert crosses > 0 and excludes > 0  # both kinds are on the page
    rows = re.findall(r'<tr class="(clear|)"><td>', html)
    assert rows.count("clear") == excludes and rows.count("") >= crosses
