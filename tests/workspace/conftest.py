"""Fixtures of the workspace tests: a small demo export (300 customers) generated once per session,
copied afresh for each test that needs one, and a helper that runs ``liftlag`` as a subprocess."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="session")
def small_demo(tmp_path_factory) -> Path:
    """The folder of a small demo export (invented data, seeded); never built into."""
    from toolkit.demo import ensure_demo_data

    return ensure_demo_data(tmp_path_factory.mktemp("small_demo") / "export", customers=300).parent


@pytest.fixture
def demo_copy(small_demo, tmp_path) -> Path:
    """A fresh copy of the small demo export; returns its liftlag.toml (workspace: .liftlag beside it)."""
    target = tmp_path / "export"
    shutil.copytree(small_demo, target, ignore=shutil.ignore_patterns(".liftlag"))
    return target / "liftlag.toml"


def liftlag(*args, **popen) -> subprocess.Popen:
    """Start ``liftlag ARGS`` in a subprocess (the same interpreter), output captured as text."""
    env = {**os.environ, "PYTHONPATH": str(REPO), "COLUMNS": "120"}
    return subprocess.Popen([sys.executable, "-m", "toolkit.cli", *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env, cwd=REPO, **popen)


def run_liftlag(*args, timeout: float = 300) -> tuple[int, str, str]:
    proc = liftlag(*args)
    out, err = proc.communicate(timeout=timeout)
    return proc.returncode, out, err


def first_campaign(config: Path) -> str:
    """A targeted promotion of the export (the campaign readouts' argument)."""
    import csv

    with (config.parent / "promotions.csv").open() as fh:
        return next(r["promotion_id"] for r in csv.DictReader(fh) if r["audience"] == "targeted")


def partial_files(config: Path) -> list[str]:
    ws = config.parent / ".liftlag"
    return sorted(p.name for p in ws.glob("*.partial*")) if ws.exists() else []
