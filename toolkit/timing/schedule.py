"""When are campaign starts expected, and which days before them can show anticipation?

Anticipation (customers holding off before the next coupon) is read in the days before the
campaign starts customers could expect. :class:`CampaignCadence` takes the start days of the
targeted campaigns from the promotions table and lays out the *expected* starts:

* every real start (customers who learned the rhythm wait for the starts that came), and
* where the starts keep to a regular cadence, the starts of the grid that were skipped: a spacing
  of two or three periods between two real starts gets the missing start(s) laid out between
  them, with the grid's phase taken from those two neighbouring real starts (so a calendar whose
  phase shifts after an irregular gap never puts an expected start days away from the real ones).

``expected_starts="observed"`` uses the real starts alone. The grid is not extended past the last
real start unless asked (``extend_past_last``): at the edge of the data nobody can tell whether
the programme went on, and a window before a start that never came would dilute the estimate.

:func:`anticipation_windows` then cuts the ``days_before`` days before each expected start so that
no window overlaps another promotion's running window or the window after it.
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
        The real starts, plus the skipped starts of a regular cadence (see the module docstring).
    skipped_starts_ : list of datetime.date
        Expected starts where no campaign started (empty unless the cadence is regular).
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
        self.skipped_starts_ = []
        self.expected_starts_ = list(waves)
        self.is_regular_ = False
        if len(waves) < self.min_campaigns:
            self.note_ = (
                f"{len(waves)} targeted campaign start(s); at least {self.min_campaigns} are needed "
                "to call a cadence regular; expected starts are the real starts"
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
            self.note_ = (f"starts are {period:.1f} days apart, shorter than min_cadence_days={self.min_cadence_days}; "
                          "expected starts are the real starts")
            return self
        if share < self.min_regular_share:
            self.note_ = (
                f"only {share:.0%} of the {len(spacing)} spacings between starts keep to a {period:.1f}-day "
                f"cadence (within {self.tolerance_days} days); {self.min_regular_share:.0%} needed; expected starts "
                "are the real starts"
            )
            return self
        self.is_regular_ = True
        if self.expected_starts == "cadence":
            self.skipped_starts_ = self._skipped(waves, spacing, periods, on)
            extra = self._beyond(waves[-1], period, until) if self.extend_past_last and until is not None else []
            self.expected_starts_ = sorted(set(waves) | set(self.skipped_starts_) | set(extra))
        self.note_ = (
            f"targeted campaigns start every {period:.1f} days ({share:.0%} of {len(spacing)} spacings on "
            f"cadence within {self.tolerance_days} days); expected starts: the {len(waves)} real starts"
            + (f" and {len(self.skipped_starts_)} skipped start(s) of the cadence" if self.skipped_starts_ else "")
        )
        return self

    @staticmethod
    def _skipped(waves: list[date], spacing: np.ndarray, periods: np.ndarray, on: np.ndarray) -> list[date]:
        """Starts of the grid missing between two real starts that are a whole number of periods apart.

        The phase is local: the missing starts divide the spacing between their two neighbouring
        real starts evenly, so a phase shift elsewhere in the calendar (after an irregular gap)
        cannot move them.
        """
        skipped = []
        for i in np.flatnonzero(on & (periods >= 2)):
            step = spacing[i] / periods[i]
            for j in range(1, int(periods[i])):
                skipped.append(waves[i] + timedelta(days=int(round(j * step))))
        return skipped

    @staticmethod
    def _beyond(last: date, period: float, until: date) -> list[date]:
        """Grid starts after the last real one, up to the first start past ``until``."""
        grid, j = [], 1
        while True:
            day = last + timedelta(days=int(round(j * period)))
            grid.append(day)
            if day > until:
                return grid
            j += 1

    def expected_windows(self, days_before: int, blocked=()) -> pd.DataFrame:
        """The windows before each expected start; see :func:`anticipation_windows`."""
        self._check_fitted()
        return anticipation_windows(self.expected_starts_, days_before, blocked, observed=self.starts_)

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
                    "n_skipped_starts": len(self.skipped_starts_),
                    "note": self.note_,
                }
            ]
        )

    def _header(self) -> dict[str, object]:
        return {"tolerance days": self.tolerance_days, "expected starts": self.expected_starts}


WINDOW_COLUMNS = ["window_no", "starts_on", "is_observed_start", "window_from_on", "window_to_on", "window_days",
                  "window_note"]


def anticipation_windows(expected_starts: Iterable, days_before: int, blocked: Iterable = (), *,
                         observed: Iterable = ()) -> pd.DataFrame:
    """The ``days_before`` days before each expected start, cut clear of other promotions.

    Parameters
    ----------
    expected_starts : iterable of date
    days_before : int
        Length of the window before a start (``anticipation_days``).
    blocked : iterable of (date, date, str)
        Days that no window may hold, inclusive, with what they are: each promotion's running
        window and the window after it. A window keeps its days next to the start up to the
        first blocked day before it; a window left with no day is kept as a row with a note and
        no ``window_no``.
    observed : iterable of date
        The real starts (``is_observed_start``).

    Returns
    -------
    DataFrame
        ``window_no`` (1, 2, .. in date order; missing for a window with no day left),
        ``starts_on``, ``is_observed_start``, ``window_from_on``, ``window_to_on``,
        ``window_days``, ``window_note``.

    Examples
    --------
    >>> from datetime import date
    >>> w = anticipation_windows([date(2025, 3, 3)], 7, [(date(2025, 1, 20), date(2025, 2, 26), "P1 and after")])
    >>> (str(w.loc[0, "window_from_on"]), int(w.loc[0, "window_days"]))
    ('2025-02-27', 4)
    """
    if isinstance(days_before, bool) or not isinstance(days_before, (int, np.integer)) or days_before < 1:
        raise ConfigError(f"timing.anticipation_days must be a whole number of at least 1, found {days_before!r}")
    blocked = [(pd.Timestamp(a).date(), pd.Timestamp(b).date(), str(what)) for a, b, what in blocked]
    observed = {pd.Timestamp(d).date() for d in observed}
    rows = []
    for start in sorted({pd.Timestamp(d).date() for d in expected_starts}):
        first, last = start - timedelta(days=int(days_before)), start - timedelta(days=1)
        cut_by = None
        for low, high, what in blocked:
            if low <= last and high >= first:  # overlaps the window: keep the days after it
                if high + timedelta(days=1) > first:
                    first, cut_by = high + timedelta(days=1), what
        days = (last - first).days + 1
        if days <= 0:
            note = f"no window: the {days_before} days before the start lie in {cut_by}"
        elif cut_by:
            note = f"shortened to {days} day(s): clear of {cut_by}"
        else:
            note = ""
        rows.append({"starts_on": start, "is_observed_start": start in observed,
                     "window_from_on": first if days > 0 else None, "window_to_on": last if days > 0 else None,
                     "window_days": max(days, 0), "window_note": note})
    frame = pd.DataFrame(rows, columns=WINDOW_COLUMNS[1:])
    usable = frame["window_days"] > 0
    frame.insert(0, "window_no", pd.array([pd.NA] * len(frame), dtype="Int64"))
    frame.loc[usable, "window_no"] = np.arange(1, int(usable.sum()) + 1)
    return frame[WINDOW_COLUMNS]
