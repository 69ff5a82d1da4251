"""Spark tests: local mode, one SparkSession for the whole test session (start-up takes seconds).

pyspark comes with the test extra; Spark also needs a Java runtime (17). Without one the tests
are skipped, unless ``CI`` is set: in CI a missing pyspark or Java fails them (``.ci/run``
installs Debian's JDK when ``java`` is missing). Deselect them with ``-m "not spark"``.
"""

from __future__ import annotations

import os
import shutil

import pytest


def _missing() -> str | None:
    try:
        import pyspark  # noqa: F401
    except ImportError:
        return "pyspark is not installed (pip install -e '.[test]')"
    java_home = os.environ.get("JAVA_HOME")
    if shutil.which("java") is None and not (java_home and os.path.exists(os.path.join(java_home, "bin", "java"))):
        return "no Java runtime (install Java 17, e.g. apt-get install openjdk-17-jre-headless)"
    return None


def pytest_collection_modifyitems(items):
    for item in items:
        if "tests/spark/" in str(item.fspath).replace("\\", "/"):
            item.add_marker(pytest.mark.spark)


@pytest.fixture(scope="session")
def spark_session():
    missing = _missing()
    if missing:
        if os.environ.get("CI"):
            pytest.fail(f"CI is set but {missing}; .ci/run installs the test extra and a JDK")
        pytest.skip(f"{missing}; set CI to make this a failure")
    from toolkit.engine import spark

    return spark.session("local[2]", {"spark.sql.shuffle.partitions": "2", "spark.default.parallelism": "2",
                                      "spark.driver.memory": "1g"})
