"""Input checks shared by the timing estimators.

Each check raises :class:`~toolkit.errors.DataError` or :class:`~toolkit.errors.AnalysisError`
with a message that names the table and column, shows what was found and says what to do.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..errors import AnalysisError, DataError

MIN_EVENTS_PER_COVARIATE = 10
"""Events needed per estimated coefficient (common practice, no source: the usual 10-events-per-
variable rule of thumb for proportional-hazards and logistic models)."""


def shown(value) -> str:
    """A value as a user should read it in a message (no numpy type names)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and value.is_integer():
        return repr(int(value))
    return repr(value)


def check_columns(frame: pd.DataFrame, columns: Sequence[str], *, table: str) -> None:
    """Raise DataError naming every column of ``columns`` missing from ``frame``."""
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise DataError(
            f"{table}: missing column(s) {', '.join(repr(c) for c in missing)}; "
            f"found {', '.join(map(str, frame.columns))}"
        )


def check_numeric(frame: pd.DataFrame, columns: Sequence[str], *, table: str) -> None:
    """Raise DataError when a column is not numeric (or boolean) or holds missing values."""
    for column in columns:
        values = frame[column]
        if not (pd.api.types.is_numeric_dtype(values) or pd.api.types.is_bool_dtype(values)):
            raise DataError(f"{table}.{column}: expected numbers or true/false, found type {values.dtype}")
        missing = int(values.isna().sum())
        if missing:
            raise DataError(
                f"{table}.{column}: {missing} missing value(s); fill them or drop those rows before fitting"
            )


def check_enough_events(n_events: float, n_parameters: int, *, table: str, what: str = "events") -> None:
    """Raise AnalysisError when there are fewer than 10 events per parameter (and at least 10)."""
    needed = max(MIN_EVENTS_PER_COVARIATE * max(n_parameters, 1), MIN_EVENTS_PER_COVARIATE)
    if n_events < needed:
        raise AnalysisError(
            f"{table}: too few {what} to fit: found {n_events:g}, need at least {needed} "
            f"({MIN_EVENTS_PER_COVARIATE} per estimated coefficient x {n_parameters} coefficient(s)); "
            "use a longer period, more customers, or fewer covariates"
        )


def constant_columns(frame: pd.DataFrame, columns: Sequence[str]) -> dict[str, object]:
    """Columns of ``columns`` that take a single value in ``frame``, with that value."""
    found = {}
    for column in columns:
        values = frame[column].to_numpy()
        if len(values) == 0 or np.all(values == values[0]):
            found[column] = values[0] if len(values) else None
    return found


def check_covariates_vary(frame: pd.DataFrame, columns: Sequence[str], *, table: str) -> None:
    """Raise AnalysisError naming every covariate that never varies."""
    constant = constant_columns(frame, columns)
    if constant:
        listed = ", ".join(f"'{c}' (always {shown(v)})" for c, v in constant.items())
        raise AnalysisError(
            f"{table}: covariate(s) {listed} never vary, so their hazard ratio cannot be estimated; "
            "drop them from the model or check how they are built (is the promotion schedule, the "
            "coupon history or the window length what you expect?)"
        )


def collinear_columns(matrix: np.ndarray, names: Sequence[str], *, tol: float = 1e-9) -> list[tuple[str, list[str]]]:
    """Columns that are linear combinations of earlier columns, with the columns they depend on.

    Works left to right on the cross-product matrix: a column whose residual, after projecting it
    on the columns kept so far, is (numerically) zero adds nothing to the design; it is reported
    with the kept columns that reproduce it (non-zero coefficients of that projection).
    """
    matrix = np.asarray(matrix, dtype=float)
    scale = np.sqrt((matrix ** 2).sum(axis=0))
    scale[scale == 0] = 1.0
    gram = (matrix / scale).T @ (matrix / scale)
    kept: list[int] = []
    found: list[tuple[str, list[str]]] = []
    for j in range(gram.shape[0]):
        if gram[j, j] < tol:
            found.append((names[j], []))
            continue
        if kept:
            block = gram[np.ix_(kept, kept)]
            coef = np.linalg.solve(block, gram[kept, j])
            residual = gram[j, j] - gram[j, kept] @ coef
        else:
            coef, residual = np.zeros(0), gram[j, j]
        if residual <= tol * gram[j, j]:
            found.append((names[j], [names[kept[i]] for i, c in enumerate(coef) if abs(c) > 1e-6]))
        else:
            kept.append(j)
    return found
