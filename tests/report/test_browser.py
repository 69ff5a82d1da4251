"""The report in a real browser (Debian's chromium, driven by playwright; no browser download)
and its PDF. Skipped only when chromium is absent and CI is not set (.ci/run installs it)."""

from __future__ import annotations

import pytest

from toolkit.report.quarter.context import SECTIONS

from .conftest import require_browser

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def browser_page(demo_report):
    require_browser()
    from playwright.sync_api import sync_playwright

    from toolkit.report.pdf import find_chromium

    url = (demo_report.out / "report.html").resolve().as_uri()
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=find_chromium(),
                                    args=["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                                          "--disable-component-update", "--disable-sync", "--no-first-run"])
        page = browser.new_page()
        console, errors, requests = [], [], []
        page.on("console", lambda m: console.append((m.type, m.text)))
        page.on("pageerror", lambda e: errors.append(str(e)))
        page.on("request", lambda r: requests.append(r.url))
        page.goto(url, wait_until="load")
        facts = {
            "url": url, "console": console, "errors": errors, "requests": requests,
            "charts": page.eval_on_selector_all(
                "figure svg", "els => els.map(e => { const r = e.getBoundingClientRect(); return [r.width, r.height]; })"),
            "figures": page.locator("figure").count(),
            "h2": page.eval_on_selector_all("h2", "els => els.map(e => e.textContent.trim())"),
            "toc": page.eval_on_selector_all("nav.toc a", "els => els.map(e => e.getAttribute('href'))"),
            "ids": page.eval_on_selector_all("section", "els => els.map(e => e.id)"),
        }
        browser.close()
    return facts


def test_no_console_errors(browser_page):
    assert not browser_page["errors"]
    assert not [m for m in browser_page["console"] if m[0] in ("error", "warning")], browser_page["console"]


def test_no_request_leaves_the_file(browser_page):
    assert browser_page["requests"] == [browser_page["url"]]


def test_every_chart_has_a_size(browser_page):
    assert browser_page["figures"] >= 6
    assert len(browser_page["charts"]) == browser_page["figures"]
    for width, height in browser_page["charts"]:
        assert width > 100 and height > 100


def test_every_section_heading_is_present_and_in_the_contents(browser_page):
    assert browser_page["h2"] == [heading for _, heading in SECTIONS]
    assert browser_page["toc"] == [f"#{id_}" for id_, _ in SECTIONS]
    assert browser_page["ids"] == [id_ for id_, _ in SECTIONS]


def test_pdf_page_count_is_plausible_and_its_text_has_no_customer_id(demo_report, demo_customer_ids):
    require_browser()
    from pypdf import PdfReader

    pdf = demo_report.out / "report.pdf"
    assert pdf.exists() and pdf.read_bytes()[:5] == b"%PDF-"
    reader = PdfReader(pdf)
    pages = len(reader.pages)
    # contents, then a page break before each of the seven sections: at least eight pages; two
    # campaign scorecards, tails, timing and long-run tables make it longer, but not a book
    assert 8 <= pages <= 60, pages
    text = "\n".join(page.extract_text() or "" for page in reader.pages)
    assert "The verdict" in text and "Methods and assumptions" in text
    assert not [cid for cid in demo_customer_ids if cid in text]
