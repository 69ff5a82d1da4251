"""Long-run analyses: discount dependence, responsiveness drift, acquisition cohorts, population
drift, and sales run without a holdout (broadcast)."""
