"""Registry of the analysis commands (campaign, timing, ...), each wired to its package's api."""

from __future__ import annotations


def register_all(sub, config_arg) -> None:
    """Add every analysis subcommand to the ``liftlag`` parser."""
