"""Fixtures of the quarterly report tests: the shipped demo's report, built once per session with
settings that keep it quick (fewer folds and bootstrap rounds, no Cox check)."""

from __future__ import annotations

import dataclasses
import os
import shutil
from pathlib import Path

import pytest

QUARTER = "2026Q3"  # the demo's latest complete quarter: campaigns FW-T13 and FW-T14 start in it


def chromium_available() -> bool:
    from toolkit.report.pdf import find_chromium

    return find_chromium() is not None


def require_browser():
    """Skip only when chromium is absent and CI is not set; in CI a missing browser fails."""
    if chromium_available():
        return
    if os.environ.get("CI"):
        pytest.fail("CI is set but chromium is not installed; .ci/run installs Debian's chromium")
    pytest.skip("chromium is not installed (apt-get install chromium); set CI to make this a failure")


def quick(settings):
    return dataclasses.replace(
        settings,
        campaign=dataclasses.replace(settings.campaign, folds=2),
        timing=dataclasses.replace(settings.timing, bootstrap_rounds=4, n_blocks=8),
    )


@pytest.fixture(scope="session")
def quick_settings(demo_settings):
    return quick(demo_settings)


@pytest.fixture(scope="session")
def demo_report(quick_settings, tmp_path_factory):
    """The demo's 2026Q3 report (with its PDF when chromium is installed)."""
    from toolkit.report.quarter.api import build_quarter_report

    out = tmp_path_factory.mktemp("quarter") / "report"
    return build_quarter_report(quick_settings, QUARTER, out, pdf=chromium_available(), fit_cox=False)


@pytest.fixture(scope="session")
def demo_customer_ids() -> set[str]:
    import pandas as pd

    root = Path(__file__).resolve().parents[2] / "demo_data"
    ids = set(pd.read_csv(root / "assignments.csv", usecols=["customer_id"])["customer_id"].astype(str))
    ids |= set(pd.read_csv(root / "customers.csv", usecols=["customer_id"])["customer_id"].astype(str))
    return ids
