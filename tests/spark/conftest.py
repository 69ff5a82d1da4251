"""Spark tests: local mode, one SparkSession for the whole test session (start-up takes seconds).

Deselect them with ``-m "not spark"``; CI runs them (pyspark is installed by ``.ci/run``).
"""

from __future__ import annotations

import pytest

pytest.importorskip("pyspark", reason="pyspark is not installed (pip install -e '.[spark]')")


def pytest_collection_modifyitems(items):
    for item in items:
        if "tests/spark/" in str(item.fspath).replace("\\", "/"):
            item.add_marker(pytest.mark.spark)


@pytest.fixture(scope="session")
def spark_session():
    from toolkit.engine import spark

    return spark.session("local[2]", {"spark.sql.shuffle.partitions": "4", "spark.driver.memory": "1g"})
