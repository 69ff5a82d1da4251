"""Run the long-run analyses' SQL (``sql/longrun/``, one table per file, named as the file).

Each file runs on a private cursor of the workspace connection, so the tables it makes are
temporary tables of that cursor and nothing is written to the workspace. Values are bound as
DuckDB variables (``SET VARIABLE name = ?``), never formatted into SQL text.
"""

from __future__ import annotations

from pathlib import Path

from .. import sqlfiles
from ..errors import AnalysisError

SQL_DIR = sqlfiles.folder("longrun")  # beside sql/checks and sql/panels (toolkit/sql in an installed package)


def sql_text(name: str) -> str:
    path = SQL_DIR / f"{name}.sql"
    if not path.is_file():
        raise AnalysisError(f"long-run SQL file {path} is missing; reinstall liftlag from its source tree")
    return path.read_text(encoding="utf-8")


def run(cursor, name: str, **variables) -> None:
    """Bind ``variables`` (as ``longrun_<name>``) and run ``sql/longrun/<name>.sql`` on ``cursor``."""
    for key, value in variables.items():
        cursor.execute(f"SET VARIABLE longrun_{key} = ?", [value])
    cursor.execute(sql_text(name))
