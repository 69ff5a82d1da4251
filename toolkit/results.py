"""Results tables: one Parquet file per table in an output folder, plus ``manifest.json``.

Tables are written to a temporary folder beside the output and moved in one by one only when
all of them are written, so a failed run never leaves a mixture of old and new results.
"""

from __future__ import annotations

import json
import os
import platform
import shutil
import tempfile
from pathlib import Path

import pandas as pd

from . import __version__


def check_out_dir(out_dir, option: str = "--out") -> Path:
    """Refuse, before any work, an output folder that is a file or lies under one (exit 2)."""
    from .errors import ConfigError

    path = Path(out_dir).expanduser()
    for part in (path, *path.parents):
        if part.exists() and not part.is_dir():
            where = "is a file" if part == path else f"lies under {part}, which is a file"
            raise ConfigError(f"{option} {out_dir}: {where}; give {option} a folder (it is created if missing)")
    return path


def typed_for_parquet(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy whose mixed object columns Parquet can store: all-boolean ones as nullable booleans,
    others that are not all text as text (missing values stay missing)."""
    import numpy as np

    frame = frame.copy()
    for col in frame.columns:
        if frame[col].dtype == object:
            values = frame[col].dropna()
            if len(values) and values.map(lambda v: isinstance(v, (bool, np.bool_))).all():
                frame[col] = frame[col].astype("boolean")
            elif len(values) and not values.map(lambda v: isinstance(v, str)).all():
                frame[col] = frame[col].astype(str).where(frame[col].notna(), None)
    return frame


def write_tables(out_dir: Path, tables: dict[str, pd.DataFrame]) -> list[Path]:
    """Write each DataFrame as ``<name>.parquet`` into ``out_dir`` (created if needed)."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=".partial-", dir=out_dir))
    written = []
    try:
        for name, frame in tables.items():
            frame.to_parquet(staging / f"{name}.parquet", index=False)
        for name in tables:
            target = out_dir / f"{name}.parquet"
            os.replace(staging / f"{name}.parquet", target)
            written.append(target)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return written


def write_manifest(out_dir: Path, **facts) -> Path:
    """``manifest.json``: tool version, config, input fingerprints, seed, row counts, timings."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    manifest = {"tool": "liftlag", "version": __version__, "python": platform.python_version(), **facts}
    target = out_dir / "manifest.json"
    tmp = target.with_suffix(".json.partial")
    tmp.write_text(json.dumps(manifest, indent=2, sort_keys=True, default=str))
    os.replace(tmp, target)
    return target
