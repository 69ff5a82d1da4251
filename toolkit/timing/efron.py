"""Cox partial likelihood with Efron's tie correction, on start-stop spells, fast.

The risk-set sums of the Cox score and information only depend, at each event time, on how many
spells of each covariate pattern are at risk and how many of them end in an event. When the
covariates take few distinct values (flags, small counts), the whole fit works on a table of
``event times x patterns`` counts instead of on the spells, so one Newton step costs almost
nothing and a customer bootstrap of a Cox model with time-varying covariates takes seconds.

Weights are replication counts: a spell of weight 3 counts as three identical spells, ties
included (this is what a bootstrap resample means). With all weights 1 the fit equals lifelines'
``CoxTimeVaryingFitter`` (tested in ``tests/timing/test_efron.py``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MAX_TABLE_CELLS = 30_000_000
"""Largest ``event times x patterns`` table built; beyond it the covariates are too fine-grained."""


@dataclass(frozen=True)
class RiskTable:
    """Counts at risk and events per distinct event time and covariate pattern.

    Attributes
    ----------
    patterns : ndarray, shape (n_patterns, n_covariates)
    at_risk : ndarray, shape (n_times, n_patterns)
    events : ndarray, shape (n_times, n_patterns)
    """

    patterns: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray


def _outer(x: np.ndarray) -> np.ndarray:
    return (x[:, :, None] * x[:, None, :]).reshape(len(x), -1)


@dataclass(frozen=True)
class SpellIndex:
    """Where each spell falls on the event-time axis and in the pattern table (built once).

    ``mode`` is ``"patterns"`` when the covariates take few distinct values (the fit then works
    on the event times x patterns table) and ``"spells"`` otherwise (risk-set sums are gathered
    from the spells directly with cumulative sums; same result, cost linear in the spells).
    """

    times: np.ndarray
    covariates: np.ndarray
    patterns: np.ndarray
    pattern_of: np.ndarray
    first: np.ndarray
    last: np.ndarray
    event_time: np.ndarray  # index of the spell's event time, -1 when it ends without an event
    mode: str
    event_rows: np.ndarray | None = None
    covariates_by_column: np.ndarray | None = None  # (covariates, spells), C-contiguous
    products_by_column: np.ndarray | None = None  # (covariates^2, spells): x_a x_b per spell

    @classmethod
    def build(cls, start: np.ndarray, stop: np.ndarray, event: np.ndarray, covariates: np.ndarray,
              *, mode: str | None = None) -> "SpellIndex":
        start = np.asarray(start, dtype=float)
        stop = np.asarray(stop, dtype=float)
        event = np.asarray(event, dtype=bool)
        covariates = np.asarray(covariates, dtype=float)
        if covariates.ndim == 1:
            covariates = covariates[:, None]
        times = np.unique(stop[event])
        patterns, pattern_of = np.unique(covariates, axis=0, return_inverse=True)
        pattern_of = pattern_of.reshape(-1)
        if mode is None:
            cells = (len(times) + 1) * len(patterns)
            mode = "patterns" if cells <= min(MAX_TABLE_CELLS, max(len(start), 100_000)) else "spells"
        first = np.searchsorted(times, start, side="right")
        last = np.searchsorted(times, stop, side="right")  # at risk at times[first:last]
        event_time = np.where(event, np.searchsorted(times, stop, side="left"), -1)
        extra = {}
        if mode == "spells":
            extra = dict(
                event_rows=np.flatnonzero(event_time >= 0),
                covariates_by_column=np.ascontiguousarray(covariates.T),
                products_by_column=np.ascontiguousarray(_outer(covariates).T),
            )
        return cls(times, covariates, patterns, pattern_of, first, last, event_time, mode, **extra)

    def table(self, weights: np.ndarray | None = None) -> "RiskTable | WeightedSpells":
        """The fit's input for these (replication) weights: a risk table, or the weighted spells."""
        w = np.ones(len(self.first)) if weights is None else np.asarray(weights, dtype=float)
        if self.mode == "spells":
            return WeightedSpells(self, w)
        m, p = len(self.times), len(self.patterns)
        size = (m + 1) * p
        opened = np.bincount(self.first * p + self.pattern_of, weights=w, minlength=size)
        closed = np.bincount(self.last * p + self.pattern_of, weights=w, minlength=size)
        at_risk = np.cumsum((opened - closed).reshape(m + 1, p), axis=0)[:m]
        has_event = self.event_time >= 0
        events = np.bincount(
            self.event_time[has_event] * p + self.pattern_of[has_event], weights=w[has_event], minlength=m * p
        ).reshape(m, p)
        return RiskTable(self.patterns, np.maximum(at_risk, 0.0), events)


@dataclass(frozen=True)
class WeightedSpells:
    """Spells with replication weights, for the spell-by-spell computation of the sums."""

    index: SpellIndex
    weights: np.ndarray

    def __post_init__(self) -> None:
        rows = self.index.event_rows
        w = self.weights[rows]
        m = len(self.index.times)
        # What does not depend on the coefficients is summed once.
        object.__setattr__(self, "event_x", w @ self.index.covariates[rows])
        object.__setattr__(self, "deaths", np.rint(np.bincount(self.index.event_time[rows], weights=w,
                                                               minlength=m)).astype(np.int64))

    @property
    def patterns(self) -> np.ndarray:  # the number of covariates is all fit_efron needs from it
        return self.index.covariates


@dataclass(frozen=True)
class EfronFit:
    params: np.ndarray
    log_likelihood: float
    information: np.ndarray  # observed information (minus the Hessian) at params
    iterations: int
    converged: bool
    step_norm: float


def _sums_from_table(table: RiskTable, beta: np.ndarray, second: bool):
    x = table.patterns
    k = x.shape[1]
    eta = x @ beta
    shift = eta.max() if len(eta) else 0.0
    risk = np.exp(eta - shift)  # a common factor cancels in every ratio
    n, d = table.at_risk, table.events
    deaths = np.rint(d.sum(axis=1)).astype(np.int64)
    keep = deaths > 0
    n, d, deaths = n[keep], d[keep], deaths[keep]
    rx = risk[:, None] * x
    r0, r1, e0, e1 = n @ risk, n @ rx, d @ risk, d @ rx
    r2 = e2 = None
    if second:
        rxx = risk[:, None] * _outer(x)
        r2, e2 = (n @ rxx).reshape(-1, k, k), (d @ rxx).reshape(-1, k, k)
    event_x = (d @ x).sum(axis=0)
    return r0, r1, r2, e0, e1, e2, event_x, deaths, shift


def _group_sums(keys: np.ndarray, rows: np.ndarray, size: int) -> np.ndarray:
    """Sum each row of ``rows`` (values x spells, C-contiguous) by ``keys``: shape (size, values)."""
    return np.stack([np.bincount(keys, weights=row, minlength=size) for row in rows], axis=1)


def _sums_from_spells(spells: WeightedSpells, beta: np.ndarray, second: bool):
    index, w = spells.index, spells.weights
    x = index.covariates
    k = x.shape[1]
    m = len(index.times)
    xt = index.covariates_by_column
    eta = beta @ xt
    shift = eta.max() if len(eta) else 0.0
    risk = w * np.exp(eta - shift)
    parts = [risk[None, :], risk[None, :] * xt]
    if second:
        parts.append(risk[None, :] * index.products_by_column)
    values = np.concatenate(parts, axis=0)  # (values, spells), one bincount per row
    at_risk = np.cumsum(_group_sums(index.first, values, m + 1) - _group_sums(index.last, values, m + 1), axis=0)[:m]
    rows = index.event_rows
    event_keys = index.event_time[rows]
    tied = _group_sums(event_keys, np.ascontiguousarray(values[:, rows]), m)
    deaths, event_x = spells.deaths, spells.event_x
    keep = deaths > 0
    at_risk, tied, deaths = at_risk[keep], tied[keep], deaths[keep]
    r0, r1, e0, e1 = at_risk[:, 0], at_risk[:, 1:1 + k], tied[:, 0], tied[:, 1:1 + k]
    r2 = e2 = None
    if second:
        r2, e2 = at_risk[:, 1 + k:].reshape(-1, k, k), tied[:, 1 + k:].reshape(-1, k, k)
    return r0, r1, r2, e0, e1, e2, event_x, deaths, shift


def efron_terms(table, beta: np.ndarray, penalizer: float = 0.0, *, information: bool = True):
    """Log partial likelihood, score and (unless ``information=False``) information at ``beta``."""
    gather = _sums_from_spells if isinstance(table, WeightedSpells) else _sums_from_table
    r0, r1, r2, e0, e1, e2, event_x, deaths, shift = gather(table, beta, information)
    # Efron: the l-th of D tied events (l = 0..D-1) sees the risk set less l/D of the tied risk.
    time_of = np.repeat(np.arange(len(deaths)), deaths)
    fraction = (np.arange(deaths.sum()) - np.repeat(np.cumsum(deaths) - deaths, deaths)) / np.repeat(deaths, deaths)
    denom = r0[time_of] - fraction * e0[time_of]
    num1 = r1[time_of] - fraction[:, None] * e1[time_of]
    mean = num1 / denom[:, None]
    log_lik = float(event_x @ beta - np.log(denom).sum() - shift * len(denom))
    score = event_x - mean.sum(axis=0)
    info = None
    if information:
        # sum over tie terms of (r2 - f e2) / denom, grouped by time to keep the arrays small
        inv = np.bincount(time_of, weights=1.0 / denom, minlength=len(deaths))
        frac_inv = np.bincount(time_of, weights=fraction / denom, minlength=len(deaths))
        info = np.einsum("t,tab->ab", inv, r2) - np.einsum("t,tab->ab", frac_inv, e2) - mean.T @ mean
    if penalizer:
        log_lik -= 0.5 * penalizer * float(beta @ beta)
        score = score - penalizer * beta
        if info is not None:
            info = info + penalizer * np.eye(len(beta))
    return log_lik, score, info


def fit_efron(
    table,
    *,
    initial: np.ndarray | None = None,
    penalizer: float = 0.0,
    max_iter: int = 50,
    tol: float = 1e-8,
    fixed_information: np.ndarray | None = None,
) -> EfronFit:
    """Newton-Raphson with step halving on the Efron log partial likelihood.

    With ``fixed_information`` (the information of a fit on similar data, e.g. the full data for
    a bootstrap resample) every step uses that matrix instead of recomputing it: each step is then
    far cheaper, convergence is linear instead of quadratic, and the optimum is the same.
    """
    k = table.patterns.shape[1]
    beta = np.zeros(k) if initial is None else np.asarray(initial, dtype=float).copy()
    need = fixed_information is None
    log_lik, score, info = efron_terms(table, beta, penalizer, information=need)
    if not need:
        info = fixed_information
    slack = 1e-10 * max(abs(log_lik), 1.0)
    step_norm = np.inf
    converged = False
    iteration = 0
    for iteration in range(1, max_iter + 1):
        try:
            step = np.linalg.solve(info, score)
        except np.linalg.LinAlgError:
            step = np.linalg.lstsq(info, score, rcond=None)[0]
        if np.max(np.abs(step)) < tol:
            beta = beta + step
            step_norm = float(np.max(np.abs(step)))
            converged = True
            break
        scale = 1.0
        while True:
            candidate = beta + scale * step
            new_ll, new_score, new_info = efron_terms(table, candidate, penalizer, information=need)
            if np.isfinite(new_ll) and new_ll >= log_lik - slack:
                break
            scale /= 2
            if scale < 1e-6:
                break
        step_norm = float(np.abs(scale * step).max()) if len(step) else 0.0
        beta, log_lik, score = candidate, new_ll, new_score
        if need:
            info = new_info
        if step_norm < tol:
            converged = True
            break
    if need:
        log_lik, score, info = efron_terms(table, beta, penalizer)
    return EfronFit(beta, log_lik, info, iteration, converged, step_norm)
