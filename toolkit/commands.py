"""Registry of the analysis commands (campaign, timing, ...), each wired to its package's api."""

from __future__ import annotations


def register_all(sub, config_arg) -> None:
    """Add every analysis subcommand to the ``liftlag`` parser."""
    from .effects.command import register as register_campaign
    from .timing.command import register as register_timing

    register_campaign(sub, config_arg)
    register_timing(sub, config_arg)
