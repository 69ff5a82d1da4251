"""Quarters: parsing, first and last days, the previous quarter (calendar facts, common practice, no source)."""

from datetime import date

import pytest

from toolkit.errors import ConfigError
from toolkit.report.quarter.period import Quarter


@pytest.mark.parametrize("text, expected", [("2026Q2", (2026, 2)), ("2026-q4", (2026, 4)), (" 2025 Q1 ", (2025, 1))])
def test_quarter_parses_year_and_number(text, expected):
    q = Quarter.parse(text)
    assert (q.year, q.number) == expected


@pytest.mark.parametrize("text", ["2026Q5", "Q2 2026", "2026", "", "2026Q0"])
def test_bad_quarter_text_is_a_config_error(text):
    with pytest.raises(ConfigError, match="is not a quarter"):
        Quarter.parse(text)


def test_quarter_days_and_neighbours():
    q = Quarter.parse("2026Q1")
    assert q.first_day == date(2026, 1, 1) and q.last_day == date(2026, 3, 31)
    assert q.previous().label == "2025Q4" and q.next().label == "2026Q2"
    assert Quarter.parse("2026Q4").last_day == date(2026, 12, 31)
