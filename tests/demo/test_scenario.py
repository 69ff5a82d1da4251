"""Scenario variants: which mechanisms each ``effects`` value leaves on."""

from __future__ import annotations

import pytest

from toolkit.demo import Scenario
from toolkit.errors import ConfigError


def test_all_has_every_mechanism():
    scenario = Scenario.for_effects("all")
    assert scenario.has_dip and scenario.has_anticipation and scenario.has_uplift
    assert scenario.broadcast_hr != 1.0


def test_none_switches_off_dip_anticipation_uplift_and_sale():
    scenario = Scenario.for_effects("none")
    assert not scenario.has_dip
    assert not scenario.has_anticipation
    assert not scenario.has_uplift
    assert (scenario.post_promotion_dip_hr, scenario.dip_days) == (1.0, 0)
    assert (scenario.anticipation_hr, scenario.anticipation_days) == (1.0, 0)
    assert scenario.broadcast_hr == 1.0


def test_uplift_only_keeps_uplift_without_timing_effects():
    scenario = Scenario.for_effects("uplift_only")
    assert scenario.has_uplift and not scenario.has_dip and not scenario.has_anticipation


def test_overrides_apply_and_change_the_fingerprint():
    base = Scenario.for_effects("all")
    other = Scenario.for_effects("all", dip_days=14)
    assert other.dip_days == 14
    assert base.fingerprint() != other.fingerprint()
    assert base.fingerprint() == Scenario.for_effects("all").fingerprint()


def test_unknown_parameter_is_named():
    with pytest.raises(ConfigError, match="unknown demo scenario parameter.*dip_length"):
        Scenario.for_effects("all", dip_length=3)


def test_overlapping_windows_are_refused():
    with pytest.raises(ConfigError, match="cadence_days"):
        Scenario.for_effects("all", cadence_days=20)


def test_share_out_of_range_is_refused():
    with pytest.raises(ConfigError, match="holdout_share must be between 0 and 1"):
        Scenario.for_effects("all", holdout_share=1.5)
