"""Config errors name the file and key, show what was found, and suggest the nearest key."""

from __future__ import annotations

import pytest

from toolkit import config
from toolkit.errors import ConfigError

MINIMAL = """
[tables.transactions]
path = "t.parquet"
[tables.promotions]
path = "p.csv"
[tables.assignments]
path = "a.csv"
"""


def load(tmp_path, text):
    path = tmp_path / "liftlag.toml"
    path.write_text(text)
    return config.load(path)


def test_minimal_config_gets_defaults(tmp_path):
    s = load(tmp_path, MINIMAL)
    assert s.tables["transactions"].format == "parquet"
    assert s.tables["promotions"].format == "csv"
    assert s.windows.after_days == 28 and s.windows.pre_period_days == 365
    assert s.workspace_dir == tmp_path / ".liftlag"


def test_unknown_key_suggests_the_nearest(tmp_path):
    with pytest.raises(ConfigError, match=r"liftlag.toml: unknown key 'windows.after_day'; did you mean 'after_days'"):
        load(tmp_path, MINIMAL + "[windows]\nafter_day = 14\n")


def test_unknown_table_suggests_the_nearest(tmp_path):
    with pytest.raises(ConfigError, match=r"unknown key 'tables.transaction'; did you mean 'transactions'"):
        load(tmp_path, MINIMAL.replace("[tables.transactions]", "[tables.transaction]"))


def test_unknown_contract_column_in_mapping(tmp_path):
    with pytest.raises(ConfigError, match=r"tables.transactions.columns.order_ids'; did you mean 'order_id'"):
        load(tmp_path, MINIMAL + '[tables.transactions.columns]\norder_ids = "invoice"\n')


def test_wrong_type_names_key_and_value(tmp_path):
    with pytest.raises(ConfigError, match=r"key 'windows.after_days' must be a whole number, found '28'"):
        load(tmp_path, MINIMAL + '[windows]\nafter_days = "28"\n')


def test_share_out_of_range(tmp_path):
    with pytest.raises(ConfigError, match=r"economics.margin_rate' must be a share between 0 and 1, found 38"):
        load(tmp_path, MINIMAL + "[economics]\nmargin_rate = 38\n")


def test_bad_memory_limit(tmp_path):
    with pytest.raises(ConfigError, match=r"engine.memory_limit' must be a size such as"):
        load(tmp_path, MINIMAL + '[engine]\nmemory_limit = "lots"\n')


def test_value_mapping_only_for_allowed_values(tmp_path):
    with pytest.raises(ConfigError, match=r"values.arm.control'; valid keys: holdout, treatment"):
        load(tmp_path, MINIMAL + '[tables.assignments.values.arm]\ncontrol = "C"\n')


def test_missing_required_table(tmp_path):
    with pytest.raises(ConfigError, match=r"\[tables.promotions\] is missing"):
        load(tmp_path, MINIMAL.replace('[tables.promotions]\npath = "p.csv"\n', ""))


def test_assignments_are_optional(tmp_path):
    """An export of broadcast sales only has no assignments (the data contract marks them optional)."""
    settings = load(tmp_path, MINIMAL.replace('[tables.assignments]\npath = "a.csv"\n', ""))
    assert "assignments" not in settings.tables


def test_format_cannot_be_guessed(tmp_path):
    with pytest.raises(ConfigError, match=r"cannot tell the format of 'tables.transactions.path'"):
        load(tmp_path, MINIMAL.replace("t.parquet", "t.dat"))


def test_missing_file_and_bad_toml(tmp_path):
    with pytest.raises(ConfigError, match=r"does not exist; write one with `liftlag init"):
        config.load(tmp_path / "nope.toml")
    with pytest.raises(ConfigError, match=r"not valid TOML"):
        load(tmp_path, "[tables\n")
