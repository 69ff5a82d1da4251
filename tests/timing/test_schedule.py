"""Campaign cadence detection, expected starts and anticipation windows (toolkit.timing.schedule).

Common practice, no source: a cadence is a typical spacing that most spacings keep to, allowing a
skipped campaign (two periods) and a day or two of slack; customers who learned the rhythm expect
the real starts and the skipped one, never a start laid days away from the real ones.
"""

from __future__ import annotations

from datetime import date, timedelta

import pandas as pd
import pytest

from toolkit.errors import ConfigError
from toolkit.timing.schedule import CampaignCadence, anticipation_windows

FIRST = date(2025, 2, 17)


def every(days: int, count: int, *, skip: tuple[int, ...] = (), jitter: dict[int, int] | None = None) -> list[date]:
    jitter = jitter or {}
    return [FIRST + timedelta(days=days * k + jitter.get(k, 0)) for k in range(count) if k not in skip]


def test_a_regular_cadence_is_found_with_its_period():
    cadence = CampaignCadence().fit(every(42, 10))
    assert cadence.is_regular_ and cadence.cadence_days_ == 42.0 and cadence.share_on_cadence_ == 1.0
    assert cadence.expected_starts_ == every(42, 10)


def test_a_skipped_campaign_keeps_the_cadence_and_is_expected_anyway():
    starts = every(28, 9, skip=(4,), jitter={2: 1, 6: -1})
    cadence = CampaignCadence().fit(starts)
    assert cadence.is_regular_ and cadence.cadence_days_ == pytest.approx(28.0, abs=0.2)
    skipped = FIRST + timedelta(days=28 * 4)
    assert skipped in cadence.expected_starts_ and skipped not in cadence.starts_
    assert CampaignCadence(expected_starts="observed").fit(starts).expected_starts_ == sorted(starts)


def test_irregular_starts_are_not_a_cadence_and_say_why_but_stay_expected():
    starts = [FIRST + timedelta(days=d) for d in (0, 9, 40, 47, 90, 130, 133, 200)]
    cadence = CampaignCadence().fit(starts)
    assert not cadence.is_regular_ and cadence.skipped_starts_ == []
    assert cadence.expected_starts_ == cadence.starts_  # the real starts: customers wait for those
    assert "keep to a" in cadence.note_ and "needed" in cadence.note_


def test_expected_starts_are_the_real_starts_plus_the_skipped_one_whatever_the_phase():
    """Starts every 70 days from a Monday, one period skipped, then one irregular gap of 100 days
    after which the phase has moved by 30 days: the expected starts are exactly the real starts
    and the skipped one (a grid fitted to all starts at once would lay every start days away)."""
    monday = date(2025, 3, 3)
    assert monday.weekday() == 0
    offsets = [0, 70, 140, 280, 350, 450, 520, 590, 660]  # 210 skipped; 350 -> 450 is the irregular gap
    starts = [monday + timedelta(days=d) for d in offsets]
    cadence = CampaignCadence().fit(starts)
    assert cadence.is_regular_ and cadence.cadence_days_ == 70.0
    assert cadence.skipped_starts_ == [monday + timedelta(days=210)]
    assert cadence.expected_starts_ == sorted(starts + [monday + timedelta(days=210)])
    windows = cadence.expected_windows(7)
    assert windows["is_observed_start"].tolist() == [s in starts for s in cadence.expected_starts_]


def test_windows_are_cut_clear_of_other_promotions_running_and_after_windows():
    starts = [date(2025, 3, 3), date(2025, 4, 14), date(2025, 6, 2)]
    blocked = [
        (date(2025, 1, 20), date(2025, 2, 27), "P0 and after"),  # ends 4 days before the first start
        (date(2025, 4, 10), date(2025, 4, 20), "a sale"),        # runs across the second start
    ]
    windows = anticipation_windows(starts, 7, blocked)
    first, second, third = windows.to_dict("records")
    assert (first["window_from_on"], first["window_to_on"], first["window_days"]) == (
        date(2025, 2, 28), date(2025, 3, 2), 3)
    assert "shortened to 3 day(s): clear of P0 and after" == first["window_note"]
    assert pd.isna(second["window_no"]) and second["window_days"] == 0 and "a sale" in second["window_note"]
    assert third["window_days"] == 7 and third["window_no"] == 2 and third["window_note"] == ""


def test_anticipation_days_must_be_a_positive_whole_number():
    with pytest.raises(ConfigError, match="timing.anticipation_days must be a whole number of at least 1, found 0"):
        anticipation_windows([FIRST], 0)


def test_too_few_campaigns_are_never_regular():
    cadence = CampaignCadence().fit(every(30, 3))
    assert not cadence.is_regular_
    assert cadence.note_.startswith("3 targeted campaign start(s); at least 4")


def test_starts_on_neighbouring_days_count_as_one_wave():
    starts = every(35, 6) + [FIRST + timedelta(days=35 * 2 + 1)]
    cadence = CampaignCadence().fit(starts)
    assert cadence.n_campaigns_ == 6 and cadence.is_regular_


def test_the_grid_is_extended_past_the_last_start_only_when_asked():
    starts = every(42, 6)
    until = starts[-1] + timedelta(days=60)
    assert CampaignCadence().fit(starts, until=until).expected_starts_[-1] == starts[-1]
    extended = CampaignCadence(extend_past_last=True).fit(starts, until=until).expected_starts_
    assert extended[-2:] == [starts[-1] + timedelta(days=42), starts[-1] + timedelta(days=84)]


def test_expected_windows_are_the_days_before_each_start():
    windows = CampaignCadence().fit(every(42, 5)).expected_windows(7)
    first = windows.iloc[0]
    assert (first["window_from_on"], first["window_to_on"]) == (FIRST - timedelta(days=7), FIRST - timedelta(days=1))
    assert len(windows) == 5


def test_bad_options_are_refused():
    with pytest.raises(ConfigError, match="expected_starts must be one of cadence, observed"):
        CampaignCadence(expected_starts="guess").fit(every(42, 5))
