"""``liftlag init``: inspect an export folder and write a starter ``liftlag.toml``.

``files`` groups the export's files into candidate tables (a folder of files with the same
columns is one glob), ``profile`` reads a sample of each and says what its values are, ``guess``
matches files to tables and columns to the contract from names and values, with the evidence for
each guess, and ``render`` writes the TOML with that evidence beside every line.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import ConfigError
from .files import Candidate, find_candidates
from .guess import Guess, TableGuess, guess_export, value_map
from .render import render_config

__all__ = ["Candidate", "Guess", "TableGuess", "find_candidates", "guess_export", "render_config",
           "value_map", "write_starter_config"]


def write_starter_config(export_dir: Path, output: Path | None = None, force: bool = False, console=None) -> Path:
    """Write ``liftlag.toml`` for ``export_dir`` (or ``output``); print what was guessed and why."""
    export_dir = export_dir.expanduser().resolve()
    target = output or (export_dir / "liftlag.toml")
    if target.exists() and not force:
        raise ConfigError(f"{target} exists; pass --force to overwrite it, or -o to write elsewhere")
    passed_over: dict = {}
    guesses = guess_export(find_candidates(export_dir), passed_over)
    text, report = render_config(guesses, passed_over)
    if output is not None and output.resolve().parent != export_dir:
        text = text.replace('path = "', f'path = "{export_dir.as_posix()}/')
        text = text.replace(f'path = "{export_dir.as_posix()}/.liftlag"', 'path = ".liftlag"')
    target.write_text(text, encoding="utf-8")
    if console is not None:
        console.print("[bold]what liftlag init guessed, and why[/]")
        for line in report:
            console.print(f"  {line}", markup=False)
    return target
