"""Packaging that pyproject.toml cannot say: the top-level ``sql/`` folder ships as ``toolkit/sql``.

The repository keeps one copy of the SQL in ``sql/`` (beside ``toolkit/``); ``package_dir`` maps
it into the package at build time, so a wheel carries every SQL file and ``toolkit.sqlfiles``
finds it in either place. Every sub-folder of ``sql/`` is picked up, so a new one needs no edit here.
"""

from pathlib import Path

from setuptools import find_namespace_packages, setup

HERE = Path(__file__).resolve().parent
SQL_FOLDERS = sorted(p.name for p in (HERE / "sql").iterdir() if p.is_dir() and any(p.glob("*.sql")))

setup(
    packages=find_namespace_packages(include=["toolkit", "toolkit.*"], exclude=["*.__pycache__"]) + ["toolkit.sql"] + [f"toolkit.sql.{name}" for name in SQL_FOLDERS],
    package_dir={"toolkit.sql": "sql"},
    package_data={
        "toolkit.report.templates": ["*"],
        **{f"toolkit.sql.{name}": ["*.sql"] for name in SQL_FOLDERS},
    },
)
