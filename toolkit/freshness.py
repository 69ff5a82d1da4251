"""What a build is made from, and what changed since: content fingerprints of the inputs, the
settings each panel reads, and the code that checks and builds.

A build's *record* (:func:`current`) lists, per input table, every file with a fingerprint of its
content; the config's table mappings and the other settings the check reads; a digest of the check
rules and of liftlag's code; and per panel the digest of its SQL, the settings it reads (with
their values) and the panels it reads. :func:`build_fingerprint` digests a record;
:func:`differences` says in words what differs between two records, so that a rebuild or a
refusal can name its reason ("windows.after_days 28 -> 14, read by campaign_windows").

File fingerprints, by size (common practice, no source):

- files up to ``SMALL_FILE_BYTES``, while the fingerprint has read fewer than
  ``FULL_HASH_BUDGET_BYTES`` in full: a digest of the whole content (size and modification time
  are not needed, so a file rewritten with the same bytes is not a change, and a file edited in
  place with the same size and time is one);
- larger files: the size, the modification time and a digest of the Parquet footer (the
  file's metadata: schema, row groups, column statistics) or, for other formats, of the first
  and last ``SAMPLE_BYTES``. An edit in the middle of a large CSV that keeps its size and time
  is the one change this does not see.

A 0-byte file has its own fingerprint, so a broken export after a good build is a change (and
the rebuild then says what is wrong with it) rather than something silently ignored.
"""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

from . import __version__

SMALL_FILE_BYTES = 16 * 2**20
FULL_HASH_BUDGET_BYTES = 64 * 2**20  # per table
SAMPLE_BYTES = 2**20
_CHUNK = 2**20

# Config sections that do not change what `build` makes: they are read by the analyses (when they
# run), by the workspace machinery or by the engine. [windows] and [economics] are panel
# parameters, tracked per panel. Every other section (and any section added later) counts as
# something the check may read, so that a change of it rebuilds rather than mislabels.
NOT_BUILD_SECTIONS = ("campaign", "timing", "report", "workspace", "engine", "windows", "economics")


def _digest() -> "hashlib._Hash":
    return hashlib.blake2b(digest_size=16)


def text_digest(*texts: str) -> str:
    digest = _digest()
    for text in texts:
        digest.update(text.encode("utf-8"))
        digest.update(b"\0")
    return digest.hexdigest()


def _parquet_footer(fh, size: int) -> bytes | None:
    """The Parquet footer (metadata plus its length and the magic), or None when it is not one."""
    if size < 12:
        return None
    fh.seek(size - 8)
    tail = fh.read(8)
    if tail[4:] != b"PAR1":
        return None
    length = int.from_bytes(tail[:4], "little")
    if length <= 0 or length > size - 12:
        return None
    fh.seek(size - 8 - length)
    return fh.read(length) + tail


def file_fingerprint(path: Path, *, full: bool = True) -> dict:
    """The fingerprint of one input file (see the module's docstring).

    Parameters
    ----------
    path : Path
    full : bool, default=True
        Whether this file may be read whole (small, and within the fingerprint's budget).
    """
    st = path.stat()
    record: dict = {"path": str(path), "bytes": st.st_size}
    digest = _digest()
    with path.open("rb") as fh:
        if full and st.st_size <= SMALL_FILE_BYTES:
            while chunk := fh.read(_CHUNK):
                digest.update(chunk)
            record["content"] = digest.hexdigest()
            return record
        record["modified_ns"] = st.st_mtime_ns
        footer = _parquet_footer(fh, st.st_size)
        if footer is not None:
            digest.update(footer)
            record["footer"] = digest.hexdigest()
            return record
        fh.seek(0)
        digest.update(fh.read(SAMPLE_BYTES))
        fh.seek(max(0, st.st_size - SAMPLE_BYTES))
        digest.update(fh.read(SAMPLE_BYTES))
        record["head_tail"] = digest.hexdigest()
    return record


def fingerprint_files(files) -> list[dict]:
    """Fingerprints of a table's files, in the order given (whole-content digests within a budget)."""
    out, budget = [], FULL_HASH_BUDGET_BYTES
    for f in files:
        path = Path(f)
        size = path.stat().st_size
        full = size <= SMALL_FILE_BYTES and size <= budget
        if full:
            budget -= size
        out.append(file_fingerprint(path, full=full))
    return out


def _code_digest() -> str:
    """liftlag's own modules (the top level of the package, where the check and build live)."""
    package = Path(__file__).resolve().parent
    texts = [f"{p.name}\n{p.read_text(encoding='utf-8')}" for p in sorted(package.glob("*.py"))]
    return text_digest(__version__, *texts)


def _sql_without_comments(sql: str) -> str:
    return re.sub(r"--[^\n]*", "", sql)


def panel_reads(name: str) -> dict:
    """What one panel reads: ``parameters`` (DuckDB variables) and ``panels`` (built before it)."""
    from .panels import PANEL_ORDER, panel_sql

    sql = _sql_without_comments(panel_sql(name))
    parameters = sorted(set(re.findall(r"getvariable\(\s*'(\w+)'\s*\)", sql)))
    before = PANEL_ORDER[: PANEL_ORDER.index(name)]
    upstream = [p for p in before if re.search(rf"\b{re.escape(p)}\b", sql)]
    return {"parameters": parameters, "panels": upstream}


def _path_root(path: Path) -> Path:
    """The folder a configured path starts from: before its first glob character, the folder
    itself, or a file's folder."""
    parts = path.parts
    for i, part in enumerate(parts):
        if any(c in part for c in "*?["):
            return Path(*parts[:i]).resolve()
    return path.resolve() if path.is_dir() else path.resolve().parent


def recorded_name(settings, table, file: str) -> str:
    """A file's name in the build record: relative to the folder the table's path starts from, so
    that the same files reached through another path (a moved export, another config) are the
    same inputs; files outside that folder keep their path as given."""
    path = Path(file).resolve()
    root = _path_root(settings.resolve(table.path))
    return path.relative_to(root).as_posix() if path.is_relative_to(root) else str(file)


def current(settings) -> dict:
    """The record of what a build of ``settings`` would be made from now.

    Raises
    ------
    ConfigError, DataError
        A configured path matches no file (from the source layer).
    """
    from . import checks, panels, sources

    inputs = {}
    for name, table in sorted(settings.tables.items()):
        inputs[name] = fingerprint_files(sources.resolve_files(settings, table))
        for f in inputs[name]:
            f["path"] = recorded_name(settings, table, f["path"])
    # A table's path is fingerprinted through its files; its other settings as they are.
    tables = {name: {k: v for k, v in body.items() if k != "path"} if isinstance(body, dict) else body
              for name, body in settings.raw.get("tables", {}).items()}
    other = {k: v for k, v in settings.raw.items() if k != "tables" and k not in NOT_BUILD_SECTIONS}
    values = panels.parameters(settings)
    labels = panels.parameter_settings()
    panel_records = {}
    for name in panels.PANEL_ORDER:
        reads = panel_reads(name)
        panel_records[name] = {
            "sql": text_digest(panels.panel_sql(name)),
            "settings": {labels.get(p, p): values.get(p) for p in reads["parameters"]},
            "panels": reads["panels"],
        }
    return {
        "version": __version__,
        "inputs": inputs,
        "tables": tables,
        "check_settings": other,
        "check_code": text_digest(*(r.sql() for r in checks.RULES), _code_digest()),
        "panels": panel_records,
    }


def _digest_json(*parts) -> str:
    digest = hashlib.sha256()
    for part in parts:
        digest.update(json.dumps(part, sort_keys=True, default=str).encode())
    return digest.hexdigest()[:20]


def check_fingerprint(record: dict) -> str:
    """Digest of what the check reads: inputs, table mappings, check settings, rules and code."""
    return _digest_json(record["version"], record["inputs"], record["tables"], record["check_settings"],
                        record["check_code"])


def build_fingerprint(record: dict) -> str:
    """Digest of everything a build reads: the check's part and every panel's SQL and settings."""
    return _digest_json(check_fingerprint(record), record["panels"])


def _name(path: str) -> str:
    parts = Path(path).parts
    return "/".join(parts[-2:]) if len(parts) > 1 else path


def _file_changes(table: str, old: list[dict], new: list[dict]) -> list[str]:
    before = {f["path"]: f for f in old}
    after = {f["path"]: f for f in new}
    out = []
    for path, f in after.items():
        if path not in before:
            out.append(f"{table}: {_name(path)} is new")
            continue
        was = before[path]
        if f == was:
            continue
        if f["bytes"] == 0:
            out.append(f"{table}: {_name(path)} is now empty (0 bytes)")
        elif f["bytes"] != was["bytes"]:
            out.append(f"{table}: {_name(path)} changed ({was['bytes']:,} -> {f['bytes']:,} bytes)")
        else:
            out.append(f"{table}: {_name(path)} changed (same size, other content)")
    out += [f"{table}: {_name(path)} is gone" for path in before if path not in after]
    return out


def differences(old: dict | None, new: dict) -> list[str]:
    """What differs between the record a build was made from (``old``) and ``new``, in words."""
    if not old:
        return ["no build yet"]
    out = []
    if old.get("version") != new["version"]:
        out.append(f"liftlag {old.get('version')} -> {new['version']}")
    old_inputs, new_inputs = old.get("inputs", {}), new["inputs"]
    for table in sorted(set(old_inputs) | set(new_inputs)):
        if table not in old_inputs:
            out.append(f"table {table} is now configured")
        elif table not in new_inputs:
            out.append(f"table {table} is no longer configured")
        else:
            out += _file_changes(table, old_inputs[table], new_inputs[table])
    old_tables, new_tables = old.get("tables", {}), new["tables"]
    for table in sorted(set(old_tables) & set(new_tables)):
        if old_tables[table] != new_tables[table]:
            out.append(f"the [tables.{table}] settings changed")
    old_check, new_check = old.get("check_settings", {}), new["check_settings"]
    for section in sorted(set(old_check) | set(new_check)):
        if old_check.get(section) != new_check.get(section):
            out.append(f"the [{section}] settings changed")
    if old.get("check_code") != new["check_code"] and old.get("version") == new["version"]:
        out.append("the check rules or liftlag's code changed")
    old_panels = old.get("panels", {})
    changed_settings: dict[str, list] = {}
    for name, panel in new["panels"].items():
        was = old_panels.get(name)
        if was is None:
            out.append(f"panel {name} is new")
            continue
        if was.get("sql") != panel["sql"]:
            out.append(f"the SQL of panel {name} changed")
        for key, value in panel["settings"].items():
            before = was.get("settings", {}).get(key)
            if before != value:
                changed_settings.setdefault(key, [before, value, []])[2].append(name)
    for key, (before, value, names) in changed_settings.items():
        out.append(f"{key} {before} -> {value} (read by {', '.join(names)})")
    return out


def summary(reasons: list[str], limit: int = 3) -> str:
    """The reasons on one line: the first few, then how many more."""
    shown = "; ".join(reasons[:limit])
    return shown + (f"; and {len(reasons) - limit} more" if len(reasons) > limit else "")
