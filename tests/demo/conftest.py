"""Shared fixtures for the demo generator's tests: generated exports, once per session.

The exports are generated into temporary folders with an explicit seed.
"""

from __future__ import annotations

import pytest
from demo_helpers import Export

from toolkit.demo import generate

SEED = 20261201


@pytest.fixture(scope="session")
def export_all(tmp_path_factory) -> Export:
    return Export(generate(tmp_path_factory.mktemp("demo_all"), seed=SEED))


@pytest.fixture(scope="session")
def export_none(tmp_path_factory) -> Export:
    return Export(generate(tmp_path_factory.mktemp("demo_none"), seed=SEED, effects="none"))
