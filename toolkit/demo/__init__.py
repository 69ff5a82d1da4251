"""The demo scenario generator: an invented retailer with a known truth.

Fernwick Home & Garden is an invented online home-and-garden shop. :func:`generate` simulates its
customers' daily purchases from a seed, with targeted coupon campaigns (randomised holdout), one
broadcast sale and known mechanisms (heterogeneous uplift, a post-promotion dip, anticipation of
the next campaign), and writes a warehouse-style export, the ``liftlag.toml`` that maps it, and the
truth computed from the generating process (``truth.json``, ``truth_uplift.parquet``).

Examples
--------
>>> import tempfile
>>> from toolkit.demo import generate
>>> config = generate(tempfile.mkdtemp(), customers=300, effects="none")
>>> sorted(p.name for p in config.parent.iterdir())[:3]
['assignments.csv', 'customers.csv', 'generation.json']
"""

from .generate import DEFAULT_CUSTOMERS, DEFAULT_SEED, ensure_demo_data, generate
from .scenario import EFFECTS, Scenario

__all__ = ["DEFAULT_CUSTOMERS", "DEFAULT_SEED", "EFFECTS", "Scenario", "ensure_demo_data", "generate"]
