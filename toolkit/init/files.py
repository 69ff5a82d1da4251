"""The export's files, grouped into tables: a folder of files with the same columns is one glob.

Each data file (Parquet, CSV, gzipped CSV) is described with DuckDB's own readers (schema only).
Files under the same top-level folder, or side by side at the export's top, that have the same
columns and the same kind form one candidate table; its path is a glob that matches exactly
those files (checked), and the candidate says how many files it covers.
"""

from __future__ import annotations

import glob
import os
import warnings
from dataclasses import dataclass
from pathlib import Path

import duckdb

from ..errors import ConfigError, DataError, DataWarning
from ..failures import duckdb_cause

SUFFIXES = (".parquet", ".pq", ".csv.gz", ".tsv.gz", ".csv", ".tsv")
# At most this many files of a group are described one by one; the others are assumed alike
# (DuckDB reads them with union_by_name, so a differing file is still read).
DESCRIBE_AT_MOST = 60


@dataclass
class Candidate:
    """A file, or a group of files with the same columns, that may be one input table."""

    path: str  # as written in the config (relative to the export folder)
    format: str  # "parquet" or "csv"
    columns: list[tuple[str, str]]  # (name, DuckDB type)
    files: list[str]  # absolute paths
    exact: bool = True  # the glob matches exactly the group's files

    @property
    def label(self) -> str:
        return self.path if len(self.files) == 1 else f"{self.path} ({len(self.files)} files)"


def _suffix(path: Path) -> str | None:
    name = path.name.lower()
    return next((s for s in SUFFIXES if name.endswith(s)), None)


def _kind(suffix: str) -> str:
    return "parquet" if suffix in (".parquet", ".pq") else "csv"


def describe(con, path: str, kind: str) -> list[tuple[str, str]]:
    reader = "read_parquet(?)" if kind == "parquet" else "read_csv(?, sample_size = 2048)"
    try:
        rows = con.execute(f"DESCRIBE SELECT * FROM {reader}", [path]).fetchall()
    except duckdb.Error as exc:
        raise DataError(f"cannot read {path}: {duckdb_cause(exc)}") from None
    return [(r[0], r[1]) for r in rows]


def _pattern(export_dir: Path, files: list[Path], suffix: str, top: str | None) -> str:
    """The glob for a group: the whole folder when it holds only this group, else a name pattern."""
    if top is not None:
        nested = any(len(f.relative_to(export_dir).parts) > 2 for f in files)
        return f"{top}/**/*{suffix}" if nested else f"{top}/*{suffix}"
    names = [f.name for f in files]
    prefix = os.path.commonprefix(names)
    tail = os.path.commonprefix([n[::-1] for n in names])[::-1]
    if len(prefix) + len(tail) > min(len(n) for n in names):  # overlapping: keep the suffix only
        tail = suffix
    # Cut at a separator, so that later files (sales_2025_10 after sales_2025_09) match too.
    cut = max(prefix.rfind(ch) for ch in "_-. ")
    prefix = prefix[:cut + 1] if cut >= 0 else prefix
    starts = [i for i, ch in enumerate(tail) if ch in "_-. "]
    tail = tail[starts[0]:] if starts else suffix
    if not tail.endswith(suffix):
        tail = suffix
    return f"{glob.escape(prefix)}*{glob.escape(tail)}"


def _matches(export_dir: Path, pattern: str) -> set[str]:
    return {str(Path(p).resolve()) for p in glob.glob(str(export_dir / pattern), recursive=True) if Path(p).is_file()}


def find_candidates(export_dir: Path) -> list[Candidate]:
    """The candidate tables of an export folder (hidden files and folders are skipped)."""
    if not export_dir.is_dir():
        raise ConfigError(f"{export_dir} is not a folder; give the folder that holds the export's files")
    con = duckdb.connect()
    groups: dict[tuple[str | None, str], list[Path]] = {}
    for f in sorted(export_dir.rglob("*")):
        rel = f.relative_to(export_dir)
        if not f.is_file() or any(part.startswith(".") for part in rel.parts):
            continue
        suffix = _suffix(f)
        if suffix is None:
            continue
        top = rel.parts[0] if len(rel.parts) > 1 else None
        groups.setdefault((top, suffix), []).append(f)
    candidates: list[Candidate] = []
    skipped: list[str] = []
    for (top, suffix), files in groups.items():
        kind = _kind(suffix)
        by_columns: dict[tuple[str, ...], tuple[list[Path], list[tuple[str, str]]]] = {}
        step = max(1, len(files) // DESCRIBE_AT_MOST)
        described = set(files[::step]) | {files[-1]}
        last_key = None
        for f in files:
            if f not in described and last_key is not None:
                by_columns[last_key][0].append(f)
                continue
            try:
                cols = describe(con, str(f), kind)
            except DataError as exc:  # one unreadable file does not stop the others
                skipped.append(str(exc))
                continue
            key = tuple(sorted(name.lower() for name, _ in cols))
            by_columns.setdefault(key, ([], cols))[0].append(f)
            last_key = key
        whole_folder = top is not None and len(by_columns) == 1
        for group, cols in by_columns.values():
            if len(group) == 1:
                path, exact = group[0].relative_to(export_dir).as_posix(), True
            else:
                path = _pattern(export_dir, group, suffix, top if whole_folder else None)
                if not whole_folder and top is not None:
                    parent = group[0].parent.relative_to(export_dir).as_posix()
                    path = f"{parent}/{path}"
                exact = _matches(export_dir, path) == {str(f.resolve()) for f in group}
            candidates.append(Candidate(path, kind, cols, [str(f) for f in group], exact))
    if not candidates:
        extra = ("; " + "; ".join(skipped)) if skipped else ""
        raise DataError(f"{export_dir}: no readable Parquet or CSV files found (looked for *.parquet, *.csv, *.csv.gz){extra}")
    for message in skipped:
        warnings.warn(f"liftlag init skipped a file: {message}", DataWarning, stacklevel=2)
    return candidates
