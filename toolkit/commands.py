"""Registry of the subcommands: the foundation commands, then each analysis package's own.

A new analysis adds one line here (its ``register(sub, config_arg)``); ``cli.py`` is not touched."""

from __future__ import annotations


def register_all(sub, config_arg) -> None:
    """Add every analysis subcommand to the ``liftlag`` parser."""
    from .core_commands import register as register_core
    from .effects.command import register as register_campaign
    from .timing.command import register as register_timing
    from .longrun.command import register as register_longrun
    from .report.quarter.command import register as register_quarter

    register_core(sub, config_arg)
    register_campaign(sub, config_arg)
    register_timing(sub, config_arg)
    register_longrun(sub, config_arg)
    register_quarter(sub, config_arg)
