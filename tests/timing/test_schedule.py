"""Campaign cadence detection and expected windows (toolkit.timing.schedule).

Common practice, no source: a cadence is a typical spacing that most spacings keep to, allowing a
skipped campaign (two periods) and a day or two of slack.
"""

from __future__ import annotations

from datetime import date, timedelta

import pytest

from toolkit.errors import ConfigError
from toolkit.timing.schedule import CampaignCadence

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


def test_irregular_starts_are_not_a_cadence_and_say_why():
    starts = [FIRST + timedelta(days=d) for d in (0, 9, 40, 47, 90, 130, 133, 200)]
    cadence = CampaignCadence().fit(starts)
    assert not cadence.is_regular_ and cadence.expected_starts_ == []
    assert "keep to a" in cadence.note_ and "needed" in cadence.note_


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
