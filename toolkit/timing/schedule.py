"""Is there a regular campaign cadence customers could learn, and when is the next start due?

Anticipation (customers holding off before the next coupon) is only meaningful when targeted
campaigns start on a rhythm a customer can pick up. :class:`CampaignCadence` looks at the start
days of the targeted campaigns, finds the typical spacing, and says whether the starts keep to it
(a skipped campaign, i.e. a spacing of two or three periods, still keeps to it). From a regular
cadence it lays out the *expected* starts: by default the cadence grid itself, which includes
starts that were skipped and the next start after the last one seen, since a customer who has
learnt the rhythm expects those too; ``expected_starts="observed"`` uses the starts that happened.
The grid is not extended past the last observed start unless asked (``extend_past_last``): at the
edge of the data nobody can tell whether the programme went on, and a window before a start that
never came would dilute the anticipation estimate.
"""

from __future__ import annotations

from collections.abc import Iterable
from datetime import date, timedelta

import numpy as np
import pandas as pd

from ..errors import ConfigError
from ._base import FittedMixin

EXPECTED_STARTS = ("cadence", "observed")


class CampaignCadence(FittedMixin):
    """Detect a regular cadence in campaign start dates.

    Parameters
    ----------
    tolerance_days : int, default=2
        A spacing counts as on cadence when it is within this many days of a whole number of
        periods.
    min_campaigns : int, default=4
        Fewer distinct starts than this are never called regular.
    min_regular_share : float, default=0.75
        Share of spacings that must be on cadence.
    min_cadence_days : int, default=7
        Shortest period called a cadence (starts closer than this look like one wave).
    expected_starts : {"cadence", "observed"}, default="cadence"
        How the expected starts are laid out (see the module docstring).
    extend_past_last : bool, default=False
        With ``expected_starts="cadence"``, continue the grid past the last observed start to
        the first start after ``until``.

    Attributes
    ----------
    is_regular_ : bool
    cadence_days_ : float or None
        The period, refined as total spacing / total number of periods over on-cadence spacings.
    share_on_cadence_ : float or None
    n_campaigns_ : int
        Distinct start days (starts within ``tolerance_days`` of each other are one wave).
    starts_ : list of datetime.date
    expected_starts_ : list of datetime.date
        Empty when the cadence is not regular.
    note_ : str
        Why the cadence is or is not regular, in words.

    Examples
    --------
    >>> from datetime import date, timedelta
    >>> starts = [date(2025, 2, 17) + timedelta(days=42 * k) for k in range(8)]
    >>> CampaignCadence().fit(starts).cadence_days_
    42.0
    """

    _fitted_attribute = "is_regular_"

    def __init__(
        self,
        *,
        tolerance_days: int = 2,
        min_campaigns: int = 4,
        min_regular_share: float = 0.75,
        min_cadence_days: int = 7,
        expected_starts: str = "cadence",
        extend_past_last: bool = False,
    ) -> None:
        self.tolerance_days = tolerance_days
        self.min_campaigns = min_campaigns
        self.min_regular_share = min_regular_share
        self.min_cadence_days = min_cadence_days
        self.expected_starts = expected_starts
        self.extend_past_last = extend_past_last

    def fit(self, starts: Iterable, *, until: date | None = None) -> "CampaignCadence":
        """Look for a cadence in ``starts`` (dates or timestamps of targeted campaign starts).

        Parameters
        ----------
        starts : iterable of date-like
        until : date, optional
            Last day of the data; the expected grid runs to the first start after it.
        """
        if self.expected_starts not in EXPECTED_STARTS:
            raise ConfigError(
                f"expected_starts must be one of {', '.join(EXPECTED_STARTS)}, found {self.expected_starts!r}"
            )
        if not 0 < self.min_regular_share <= 1:
            raise ConfigError(f"min_regular_share must be in (0, 1], found {self.min_regular_share!r}")
        days = sorted({pd.Timestamp(s).date() for s in starts if s is not None and not pd.isna(s)})
        waves: list[date] = []
        for day in days:
            if waves and (day - waves[-1]).days <= self.tolerance_days:
                continue
            waves.append(day)
        self.starts_ = waves
        self.n_campaigns_ = len(waves)
        self.cadence_days_ = None
        self.share_on_cadence_ = None
        self.expected_starts_ = []
        self.is_regular_ = False
        if len(waves) < self.min_campaigns:
            self.note_ = (
                f"{len(waves)} targeted campaign start(s); at least {self.min_campaigns} are needed "
                "to call a cadence regular"
            )
            return self
        spacing = np.diff([d.toordinal() for d in waves]).astype(float)
        period = float(np.median(spacing))
        periods = np.maximum(np.rint(spacing / period), 1)
        on = np.abs(spacing - periods * period) <= self.tolerance_days
        share = float(on.mean())
        if on.any():
            period = float(spacing[on].sum() / periods[on].sum())
        self.cadence_days_ = round(period, 2)
        self.share_on_cadence_ = round(share, 4)
        if period < self.min_cadence_days:
            self.note_ = f"starts are {period:.1f} days apart, shorter than min_cadence_days={self.min_cadence_days}"
            return self
        if share < self.min_regular_share:
            self.note_ = (
                f"only {share:.0%} of the {len(spacing)} spacings between starts keep to a {period:.1f}-day "
                f"cadence (within {self.tolerance_days} days); {self.min_regular_share:.0%} needed"
            )
            return self
        self.is_regular_ = True
        if self.expected_starts == "observed":
            self.expected_starts_ = list(waves)
        else:
            self.expected_starts_ = self._grid(waves, period, until if self.extend_past_last else None)
        self.note_ = (
            f"targeted campaigns start every {period:.1f} days ({share:.0%} of {len(spacing)} spacings on "
            f"cadence within {self.tolerance_days} days)"
        )
        return self

    @staticmethod
    def _grid(waves: list[date], period: float, until: date | None) -> list[date]:
        """Grid anchored by least squares on the observed starts, to the first start past the data."""
        first = waves[0].toordinal()
        offsets = np.array([w.toordinal() - first for w in waves], dtype=float)
        k = np.rint(offsets / period)
        anchor = first + float(np.mean(offsets - k * period))
        grid = []
        j = 0
        if until is None:
            last = waves[-1].toordinal() + period / 2  # up to the last observed start
            while anchor + j * period <= last:
                grid.append(date.fromordinal(int(round(anchor + j * period))))
                j += 1
            return grid
        end = until.toordinal()
        while True:
            day = int(round(anchor + j * period))
            grid.append(date.fromordinal(day))
            if day > end:
                break
            j += 1
        return grid

    def expected_windows(self, days_before: int) -> pd.DataFrame:
        """The ``days_before`` days before each expected start: ``starts_on``, ``window_from_on``, ``window_to_on``."""
        self._check_fitted()
        rows = [
            {"starts_on": s, "window_from_on": s - timedelta(days=days_before), "window_to_on": s - timedelta(days=1)}
            for s in self.expected_starts_
        ]
        return pd.DataFrame(rows, columns=["starts_on", "window_from_on", "window_to_on"])

    def _summary_frame(self) -> pd.DataFrame:
        return pd.DataFrame(
            [
                {
                    "is_regular": self.is_regular_,
                    "cadence_days": self.cadence_days_,
                    "share_on_cadence": self.share_on_cadence_,
                    "n_campaigns": self.n_campaigns_,
                    "first_start_on": self.starts_[0] if self.starts_ else None,
                    "last_start_on": self.starts_[-1] if self.starts_ else None,
                    "n_expected_starts": len(self.expected_starts_),
                    "note": self.note_,
                }
            ]
        )

    def _header(self) -> dict[str, object]:
        return {"tolerance days": self.tolerance_days, "expected starts": self.expected_starts}
