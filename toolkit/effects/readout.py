"""The result of one campaign's analysis: its tables, its checks, its notes."""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

# Every table a campaign readout holds, with its columns (so that an empty table keeps its shape).
TABLE_NAMES = (
    "campaign_effects", "pull_forward", "uplift_deciles", "qini", "uplift_scores", "uplift_segments",
    "randomisation_checks", "model_choice", "campaign_economics", "targeting_depth", "next_campaign",
    "campaign_notes",
)
# uplift_scores holds customer identifiers: a data product for targeting, never shown in a report.
PRIVATE_TABLES = ("uplift_scores",)


@dataclass
class CampaignReadout:
    """One campaign's readout.

    Attributes
    ----------
    promotion : dict
        The promotion's row from ``checked.promotions``.
    tables : dict of str to DataFrame
        The results tables (see :data:`TABLE_NAMES`); every table has promotion_id and
        randomisation_check columns.
    randomisation_check : str
        ``"passed"``, ``"failed"``, ``"not run"`` or ``"not randomised"`` (no holdout; weighted comparison).
    is_randomised : bool
    notes : list of (level, message)
        ``level`` is ``"warning"`` or ``"info"``.
    meta : dict
        Settings used, counts, features, seconds per step, versions.
    """

    promotion: dict
    tables: dict[str, pd.DataFrame]
    randomisation_check: str
    is_randomised: bool
    notes: list[tuple[str, str]] = field(default_factory=list)
    meta: dict = field(default_factory=dict)

    @property
    def promotion_id(self) -> str:
        return str(self.promotion["promotion_id"])

    @property
    def summary(self) -> pd.DataFrame:
        """Lift per outcome and window by the main method (CUPED when randomised, doubly robust if not)."""
        effects = self.tables["campaign_effects"]
        method = "cuped" if self.is_randomised else "doubly_robust"
        cols = ["outcome", "window", "treated_mean", "holdout_mean", "lift", "lift_ci_low", "lift_ci_high",
                "relative_lift", "n_treated", "n_holdout", "method"]
        return effects.loc[effects["method"] == method, cols].reset_index(drop=True)

    def to_html(self, *, small_cell: int | None = None) -> str:
        """The self-contained HTML readout (no customer identifiers, small cells suppressed)."""
        from ..report.campaign import render_campaign

        return render_campaign(self, small_cell=small_cell)

    def _repr_html_(self) -> str:
        return self.to_html()

    def __repr__(self) -> str:
        return (f"CampaignReadout(promotion_id={self.promotion_id!r}, randomisation_check={self.randomisation_check!r}, "
                f"tables={sorted(self.tables)})")
