"""The project's exception and warning classes.

Impossible input raises; suspicious input warns. Every message names the file, table, column
or key, shows the offending value and says what to do next.
"""

from __future__ import annotations


class LiftlagError(Exception):
    """Base class of every error liftlag raises on purpose."""

    exit_code = 1


class ConfigError(LiftlagError):
    """The config file or the command-line arguments are wrong (exit code 2)."""

    exit_code = 2


class DataError(LiftlagError):
    """The export cannot be used as it is (exit code 3)."""

    exit_code = 3


class WorkspaceBusy(LiftlagError):
    """Another process holds the workspace (a build is running); the message names it (exit code 2)."""

    exit_code = 2


class AnalysisError(LiftlagError):
    """An analysis could not be done on this data; the message says why (exit code 1)."""

    exit_code = 1


class ConvergenceError(AnalysisError):
    """A model fit did not converge; the message lists what to check."""


class StatisticalWarning(UserWarning):
    """A result is computed but should be read with care (small cells, failed balance, ...)."""


class DataWarning(UserWarning):
    """Something in the export is odd but kept (a discount deeper than the promotion's depth, ...)."""
