"""Model features of one campaign's assigned customers.

Pre-period columns of the ``campaign_windows`` panel, plus optional customer attributes
(numbers as they are, text one-hot on its most common values). Missing numbers stay missing:
the gradient-boosting learners handle them natively, and "no order in the pre-period" is itself
informative. Do not pass protected attributes (sex, ethnicity, health, religion, ...) as
targeting features: exclude them with ``exclude``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

PANEL_FEATURES = ("recency_days", "frequency", "monetary", "tenure_days", "past_deal_share", "past_coupons",
                  "pre_buyer", "pre_orders", "pre_net_amount", "pre_margin_amount")
MAX_LEVELS = 20          # one-hot columns per text attribute (the rest become "other")
MAX_UNIQUE_SHARE = 0.5   # a text attribute with more distinct values than this share looks like an identifier
_SKIP = {"customer_id", "first_seen_at"}


def attribute_features(customers: pd.DataFrame, *, exclude: tuple[str, ...] | list[str] = ()) -> tuple[pd.DataFrame, list[str]]:
    """Numeric features from customer attributes, indexed by customer_id.

    Returns the feature frame and the notes on columns left out (and why).
    """
    notes: list[str] = []
    if customers is None or customers.empty or "customer_id" not in customers.columns:
        return pd.DataFrame(index=pd.Index([], name="customer_id")), notes
    frame = customers.drop_duplicates("customer_id").set_index("customer_id")
    out: dict[str, pd.Series] = {}
    for col in frame.columns:
        if col in _SKIP or col in exclude:
            continue
        series = frame[col]
        if series.isna().all():
            notes.append(f"customer attribute '{col}' left out: all values missing")
            continue
        if pd.api.types.is_bool_dtype(series) or pd.api.types.is_numeric_dtype(series):
            out[f"customer_{col}"] = series.astype(float)
        elif pd.api.types.is_datetime64_any_dtype(series):
            notes.append(f"customer attribute '{col}' left out: dates are not used as features")
        else:
            text = series.astype("string")
            distinct = text.nunique(dropna=True)
            if distinct > MAX_UNIQUE_SHARE * max(text.notna().sum(), 1) and distinct > MAX_LEVELS:
                notes.append(f"customer attribute '{col}' left out: {distinct} distinct values look like an identifier")
                continue
            top = text.value_counts().index[:MAX_LEVELS]
            for level in top:
                out[f"customer_{col}={level}"] = (text == level).fillna(False).astype(float)
            if distinct > MAX_LEVELS:
                out[f"customer_{col}=other"] = (~text.isin(top) & text.notna()).astype(float)
    return pd.DataFrame(out, index=frame.index), notes


def campaign_features(panel: pd.DataFrame, customers: pd.DataFrame | None = None, *,
                      exclude: tuple[str, ...] | list[str] = ()) -> tuple[pd.DataFrame, list[str]]:
    """Feature matrix (float, NaN allowed) aligned row by row with ``panel``.

    Parameters
    ----------
    panel : DataFrame
        Rows of ``campaign_windows`` for one promotion.
    customers : DataFrame, optional
        ``checked.customers`` rows (customer_id plus attributes).
    exclude : sequence of str
        Column names (panel or customer attribute) never to use.

    Returns
    -------
    features : DataFrame
    notes : list of str
    """
    cols = [c for c in PANEL_FEATURES if c in panel.columns and c not in exclude]
    features = panel[cols].apply(pd.to_numeric, errors="coerce").astype(float).reset_index(drop=True)
    notes: list[str] = []
    if customers is not None and len(customers):
        attrs, notes = attribute_features(customers, exclude=exclude)
        if attrs.shape[1]:
            joined = attrs.reindex(panel["customer_id"].to_numpy())
            joined.index = features.index
            features = pd.concat([features, joined], axis=1)
    constant = [c for c in features.columns if features[c].nunique(dropna=False) <= 1]
    if constant:
        features = features.drop(columns=constant)
        notes.append("constant features left out: " + ", ".join(constant))
    return features.astype(np.float64), notes
