"""The starter ``liftlag.toml`` and the printed summary: every guess with its evidence.

A sure guess is marked ``# guessed: <evidence>``; one that is not sure is marked
``# guessed, NOT SURE: <evidence>; check it``, and so is a path whose glob is not exact.
"""

from __future__ import annotations

import json

from ..contract import INPUT_TABLES
from ..partitions import guess_keys
from .guess import TableGuess


def _toml_string(text: str) -> str:
    return json.dumps(text)  # a TOML basic string is a JSON string for these characters


def _mark(sure: bool, why: str) -> str:
    return f"# guessed: {why}" if sure else f"# guessed, NOT SURE: {why}; check it"


def _path_line(tg: TableGuess) -> tuple[str, str]:
    cand = tg.candidate
    if len(cand.files) == 1:
        why, sure = "from the file's name and columns", True
    elif cand.exact:
        why, sure = f"{len(cand.files)} files with the same columns; this glob reads all of them", True
    else:
        why, sure = (f"{len(cand.files)} files with the same columns; this glob may match other files too "
                     f"or miss some"), False
    return f"path = {_toml_string(cand.path)}  {_mark(sure, why)}", f"{tg.table}: {cand.label}"


def render_config(guesses: dict[str, TableGuess], passed_over: dict | None = None) -> tuple[str, list[str]]:
    """(the TOML text, the summary lines to print); ``passed_over`` as from ``guess_export``."""
    passed_over = passed_over or {}
    lines = ["# liftlag.toml written by `liftlag init`. Read every line marked 'guessed', above all",
             "# those marked NOT SURE, before you trust the results.", ""]
    report: list[str] = []
    for table, contract in INPUT_TABLES.items():
        tg = guesses.get(table)
        if tg is None and table in passed_over:
            cand, missing = passed_over[table]
            lines += [f"# [tables.{table}]  -- {cand.path} looked like it but has no {', '.join(missing)}: not taken;",
                      f"# add [tables.{table}] with its path and columns if it is the {table} table", ""]
            report.append(f"{table}: not taken: {cand.label} lacks {', '.join(missing)} (optional table)")
            continue
        elif tg is None:
            if table == "assignments":
                lines += ["# [tables.assignments]  -- no file looked like campaign assignments; add its path if the",
                          "# export has targeted campaigns (without it, there is no targeted campaign to read out)", ""]
                report.append("assignments: not found (optional: only targeted campaigns have them)")
            elif not contract.optional:
                lines += [f"# [tables.{table}]  -- no file looked like the {table} table; add its path", ""]
                report.append(f"{table}: NOT FOUND (required; add [tables.{table}] path = ...)")
            continue
        path_line, path_report = _path_line(tg)
        lines += [f"[tables.{table}]", path_line]
        report.append(path_report)
        if table == "transactions":
            keys = guess_keys(tg.candidate.files)
            if keys:
                value = _toml_string(keys[0]) if len(keys) == 1 else "[" + ", ".join(_toml_string(k) for k in keys) + "]"
                why = (f"the files lie in {'/'.join(k + '=...' for k in keys)} folders that read as dates; keep it "
                       f"only if that is the ORDER date (not an export or load date): files are then skipped by date")
                lines.append(f"date_partition = {value}  {_mark(False, why)}")
                report.append(f"  date_partition <- {'/'.join(keys)} (NOT SURE: is it the order date?)")
        mapping = [(c.name, tg.columns[c.name]) for c in contract.columns if c.name in tg.columns]
        renamed = [(c, g) for c, g in mapping if g.column != c]
        if renamed:
            lines.append(f"[tables.{table}.columns]")
        for c, g in mapping:
            why = "; ".join(g.evidence)
            if g.column != c:
                lines.append(f"{c} = {_toml_string(g.column)}  {_mark(g.sure, why)}")
            report.append(f"  {c} <- {g.column} ({'sure' if g.sure else 'NOT SURE'}: {why})")
        if not renamed and mapping:
            lines.append("# every contract column found under its own name:")
        for c, g in mapping:
            if g.column == c:
                lines.append(f"#   {c}  {_mark(g.sure, '; '.join(g.evidence))}")
        for r in contract.required:
            if r not in tg.columns:
                lines.append(f'# {r} = "?"  -- required column not found: name the export column')
                report.append(f"  {r}: NOT FOUND (required)")
        for column, (mapping_, sure, why) in tg.values.items():
            lines.append(f"[tables.{table}.values.{column}]")
            if not mapping_:
                lines.append(f"# {column} values need a map: {why}")
                report.append(f"  {column} values: NOT SURE ({why})")
            for contract_value, export_value in mapping_.items():
                lines.append(f"{contract_value} = {_toml_string(export_value)}  {_mark(sure, why)}")
                report.append(f"  {column} {contract_value} <- {export_value!r} ({'sure' if sure else 'NOT SURE'}: {why})")
        if tg.formats:
            lines.append(f"[tables.{table}.formats]")
            for column, (fmt, sure, why) in tg.formats.items():
                lines.append(f"{column} = {_toml_string(fmt)}  {_mark(sure, why)}")
                report.append(f"  {column} format {fmt} ({'sure' if sure else 'NOT SURE'}: {why})")
        lines.append("")
    lines += ["[economics]", "# margin_rate = 0.35  -- set your own: it stands in for products.unit_cost where that is missing",
              'currency = "EUR"  # guessed, NOT SURE: the export does not say; check it', "", "[windows]",
              "pre_period_days = 365", "after_days = 28", "", "[workspace]", 'path = ".liftlag"', ""]
    return "\n".join(lines), report
