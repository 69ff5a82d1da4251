"""The wheel carries every SQL file and template; the SQL is found through one helper.

Common practice, no source: a package must not read files from outside its own install folder.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from toolkit import checks, panels, sqlfiles
from toolkit.timing import spells

ROOT = Path(__file__).resolve().parents[2]


def test_every_module_reads_sql_from_the_one_resolved_folder():
    root = sqlfiles.root()
    assert (root / "checks" / "missing_required.sql").is_file()
    assert checks.CHECKS_DIR == root / "checks"
    assert panels.PANELS_DIR == root / "panels"
    assert spells.SQL_DIR == root / "timing"


@pytest.mark.slow
def test_the_built_wheel_holds_every_sql_file_and_template(tmp_path):
    # Build from a copy of the sources, so that the build leaves nothing in the clone.
    src = tmp_path / "src"
    src.mkdir()
    for name in ("pyproject.toml", "setup.py", "README.md"):
        shutil.copy2(ROOT / name, src / name)
    for name in ("toolkit", "sql"):
        shutil.copytree(ROOT / name, src / name, ignore=shutil.ignore_patterns("__pycache__"))
    done = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "-w", str(tmp_path), str(src)],
        capture_output=True, text=True, timeout=600, cwd=tmp_path,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    wheel = next(tmp_path.glob("liftlag-*.whl"))
    names = set(zipfile.ZipFile(wheel).namelist())
    sql = {f"toolkit/sql/{p.relative_to(ROOT / 'sql').as_posix()}" for p in (ROOT / "sql").rglob("*.sql")}
    templates = {p.relative_to(ROOT).as_posix() for p in (ROOT / "toolkit" / "report" / "templates").iterdir()
                 if p.is_file()}
    assert sql and sql <= names, sorted(sql - names)
    assert templates and templates <= names, sorted(templates - names)
    assert "toolkit/cli.py" in names and "toolkit/sqlfiles.py" in names
    # The clone's top-level sql/ is mapped into the package, not shipped beside it.
    assert not any(n.startswith("sql/") for n in names)


def test_ci_runs_the_readmes_test_command_word_for_word():
    """.ci/run ends with the README quick start's test command, and CI's extras bring pyspark."""
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    commands = [line for line in readme.splitlines() if line.startswith("python3 -m venv") and "pytest" in line]
    assert len(commands) == 1, commands
    ci_lines = [line for line in (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines() if line.strip()]
    assert ci_lines[-1] == commands[0]
    import tomllib

    extras = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]["optional-dependencies"]
    assert any(dep.startswith("pyspark") for dep in extras["test"])  # the Spark tests run in CI
