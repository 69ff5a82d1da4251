"""Where the SQL files are: ``sql/`` in a clone, ``toolkit/sql/`` in an installed package.

The repository keeps one copy of the SQL, in the top-level ``sql/`` folder; the build maps it
into the package as ``toolkit/sql`` (``setup.py``: ``package_dir``), so a wheel carries it. Every
module that reads SQL asks :func:`folder` for it instead of working out a path of its own.
"""

from __future__ import annotations

from functools import cache
from importlib import resources
from pathlib import Path

_PACKAGE = Path(str(resources.files("toolkit")))


@cache
def root() -> Path:
    """The folder holding ``checks/``, ``panels/``, ``timing/`` (installed copy first, then the clone's)."""
    for candidate in (_PACKAGE / "sql", _PACKAGE.parent / "sql"):
        if (candidate / "checks").is_dir():
            return candidate
    raise FileNotFoundError(
        f"liftlag's SQL files are missing: looked in {_PACKAGE / 'sql'} (installed package) and "
        f"{_PACKAGE.parent / 'sql'} (a clone); reinstall liftlag (pip install liftlag, or pip install -e . in a clone)"
    )


def folder(name: str) -> Path:
    """One SQL folder by name: ``checks``, ``panels`` or ``timing``."""
    return root() / name
