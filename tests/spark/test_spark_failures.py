"""A Spark job that runs out of memory ends in a message that names the setting to raise.

py4j hands the JVM's error to Python as ``Py4JJavaError`` whose text carries the Java error; the
class is built here with the text a 10M-line build on Spark's default 1g driver gave
(``SparkOutOfMemoryError: [UNABLE_TO_ACQUIRE_MEMORY]``), since a real one takes minutes to provoke.
"""

from __future__ import annotations

import pytest

from toolkit.failures import describe

pytestmark = pytest.mark.spark

SEEN = ("An error occurred while calling o958.parquet.\n: org.apache.spark.SparkException: Job aborted due to stage "
        "failure: Task 0 in stage 244.0 failed 1 times, most recent failure: Lost task 0.0 in stage 244.0: "
        "org.apache.spark.memory.SparkOutOfMemoryError: [UNABLE_TO_ACQUIRE_MEMORY] Unable to acquire 262144 bytes "
        "of memory, got 97897. SQLSTATE: 53200")


class Py4JJavaError(Exception):
    """Stands in for py4j.protocol.Py4JJavaError (whose text needs a live JVM)."""


def test_spark_out_of_memory_names_the_driver_memory_setting():
    failure = describe(Py4JJavaError(SEEN))
    assert failure.exit_code == 1
    assert "Spark ran out of memory" in failure.message and "spark.driver.memory" in failure.message
    assert "liftlag bug" not in failure.message


def test_other_spark_errors_stay_reported_as_they_were():
    failure = describe(Py4JJavaError("An error occurred while calling o1.sql: something else"))
    assert "liftlag bug" in failure.message
