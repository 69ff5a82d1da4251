"""liftlag: what coupons and discounts really do, from a warehouse export.

The public names are re-exported here; everything else is private to its module.
"""

__version__ = "0.1.0"

from .config import Settings, load  # noqa: E402
from .errors import (  # noqa: E402
    AnalysisError,
    ConfigError,
    ConvergenceError,
    DataError,
    DataWarning,
    LiftlagError,
    StatisticalWarning,
)

__all__ = [
    "__version__",
    "Settings",
    "load",
    "LiftlagError",
    "ConfigError",
    "DataError",
    "AnalysisError",
    "ConvergenceError",
    "StatisticalWarning",
    "DataWarning",
]
