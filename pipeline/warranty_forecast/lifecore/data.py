"""Grouped life data: interval-censored returns, right-censored suspensions and exact ages, with counts.

Ages are in months of DAYS_PER_MONTH days. A return in month in service k lies in the day-grid interval
`month_interval_ends(k)`, about (k-1, k]; a suspension is a unit still running at its observed age. Counts may be fractional.
`LifeData.prepared` holds the positive-count rows with log ages, computed once and shared by every
family's likelihood.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]


DAYS_PER_MONTH = 365.25 / 12
"""Length of a month of age in days: ages in months are whole days / DAYS_PER_MONTH."""


def month_interval_ends(months_in_service: npt.ArrayLike) -> tuple[FloatArray, FloatArray]:
    """The age interval (lower, upper], in months, of a return counted in month in service k.

    Ages come from whole-day dates. The warranty start date is day 1 of service: a failure dated d = 0, 1,
    2, ... days after it happened during day d + 1, at an age in [d, d + 1) days. Month in service
    k = max(1, ceil(d / L)), L = DAYS_PER_MONTH, holds the day counts floor((k - 1) L) + 1 .. floor(k L)
    (and d = 0 in month 1), so its ages are

        (0, (floor(L) + 1) / L]  for k = 1,   ((floor((k - 1) L) + 1) / L, (floor(k L) + 1) / L]  for k >= 2,

    in months, not (k - 1, k]: month 1 is days 0-30 (31 days of age), month 2 days 31-60, month 3 days
    61-91, ... (whether an end is open or closed does not matter for continuous lives). The difference
    from (k - 1, k] is under a day but systematic; with tens of thousands of returns it is enough to make
    a goodness-of-fit test reject a true model. A unit observed through the as-of date, D days after its
    start, has been in service D + 1 days (macros/ages.sql: age_through_day).
    """
    k = np.asarray(months_in_service, dtype=float)
    lower = np.where(k <= 1.0, 0.0, (np.floor((k - 1.0) * DAYS_PER_MONTH) + 1.0) / DAYS_PER_MONTH)
    upper = (np.floor(k * DAYS_PER_MONTH) + 1.0) / DAYS_PER_MONTH
    return lower, upper


def _empty() -> FloatArray:
    return np.empty(0, dtype=float)


def _as_vector(name: str, values: npt.ArrayLike) -> FloatArray:
    arr = np.array(values, dtype=float, copy=True)  # copy: never share (or later mutate) input
    if arr.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite (no NaN or infinity)")
    if np.any(arr < 0.0):
        raise ValueError(f"{name} must be non-negative, got minimum {arr.min()!r}")
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True)
class PreparedRows:
    """Positive-count rows with logs of ages precomputed (internal; used by `log_likelihood`)."""

    exact_log_ages: FloatArray
    exact_counts: FloatArray
    left_open_log_upper: FloatArray  # intervals (0, upper]
    left_open_counts: FloatArray
    interval_log_lower: FloatArray  # intervals (lower, upper], lower > 0
    interval_log_upper: FloatArray
    interval_counts: FloatArray
    suspension_log_ages: FloatArray
    suspension_counts: FloatArray
    total_units: float


@dataclass(frozen=True, eq=False)
class LifeData:
    """Grouped life data; counts are numbers of units and may be fractional.

    * exact_ages, exact_counts: exact failure ages (> 0).
    * interval_lower, interval_upper, interval_counts: returns known to have failed in
      (lower, upper]; lower may be 0.
    * suspension_ages, suspension_counts: units still running at that age (right-censored).

    Array-likes are copied into read-only float arrays. Rows with zero count are allowed and
    contribute nothing to the likelihood.
    """

    exact_ages: FloatArray = field(default_factory=_empty)
    exact_counts: FloatArray = field(default_factory=_empty)
    interval_lower: FloatArray = field(default_factory=_empty)
    interval_upper: FloatArray = field(default_factory=_empty)
    interval_counts: FloatArray = field(default_factory=_empty)
    suspension_ages: FloatArray = field(default_factory=_empty)
    suspension_counts: FloatArray = field(default_factory=_empty)

    def __post_init__(self) -> None:
        for name in (
            "exact_ages",
            "exact_counts",
            "interval_lower",
            "interval_upper",
            "interval_counts",
            "suspension_ages",
            "suspension_counts",
        ):
            object.__setattr__(self, name, _as_vector(name, getattr(self, name)))
        groups = {
            "exact": ("exact_ages", "exact_counts"),
            "interval": ("interval_lower", "interval_upper", "interval_counts"),
            "suspension": ("suspension_ages", "suspension_counts"),
        }
        for group, names in groups.items():
            lengths = {n: len(getattr(self, n)) for n in names}
            if len(set(lengths.values())) != 1:
                raise ValueError(f"{group} arrays must have equal lengths, got {lengths}")
        if np.any(self.exact_ages <= 0.0):
            raise ValueError("exact_ages must be > 0 (a failure at age 0 has no density on the log-age scale)")
        bad = ~(self.interval_lower < self.interval_upper)
        if np.any(bad):
            i = int(np.flatnonzero(bad)[0])
            raise ValueError(
                "interval_lower must be < interval_upper in every row; row "
                f"{i} has ({self.interval_lower[i]!r}, {self.interval_upper[i]!r}]"
            )

    # -- constructors -------------------------------------------------------------------------

    @classmethod
    def from_monthly_returns(
        cls,
        months_in_service: npt.ArrayLike,
        returns: npt.ArrayLike,
        suspension_ages: npt.ArrayLike,
        suspension_counts: npt.ArrayLike,
        *,
        day_grid: bool = True,
    ) -> LifeData:
        """Returns counted by month in service k (integer >= 1), each in the day-grid interval of
        `month_interval_ends(k)` (months; what the pipeline's whole-day dates give), or in (k-1, k] with
        `day_grid=False` (ages measured on a continuous month scale), plus suspensions (units still in
        service at the given age in months)."""
        months = np.asarray(months_in_service, dtype=float)
        if months.ndim != 1 or not np.all(np.isfinite(months)):
            raise ValueError("months_in_service must be a one-dimensional array of finite values")
        if np.any(months < 1.0) or np.any(months != np.round(months)):
            raise ValueError("months_in_service must be integers >= 1 (month k covers ages of about (k-1, k])")
        lower, upper = month_interval_ends(months) if day_grid else (months - 1.0, months)
        return cls(
            interval_lower=lower,
            interval_upper=upper,
            interval_counts=returns,
            suspension_ages=suspension_ages,
            suspension_counts=suspension_counts,
        )

    @classmethod
    def from_exact(
        cls,
        failure_times: npt.ArrayLike,
        failure_counts: npt.ArrayLike,
        suspension_times: npt.ArrayLike,
        suspension_counts: npt.ArrayLike,
    ) -> LifeData:
        """Exact failure times and suspension (still running) times, each with unit counts."""
        return cls(
            exact_ages=failure_times,
            exact_counts=failure_counts,
            suspension_ages=suspension_times,
            suspension_counts=suspension_counts,
        )

    # -- summaries ----------------------------------------------------------------------------

    @property
    def n_returns(self) -> float:
        """Number of failed units: exact plus interval-censored counts."""
        return float(self.exact_counts.sum() + self.interval_counts.sum())

    @property
    def n_suspensions(self) -> float:
        """Number of units still running (right-censored)."""
        return float(self.suspension_counts.sum())

    @property
    def returns_at_one_time(self) -> bool:
        """True when every return (positive count) shares one exact age or one interval."""
        e, i = self.exact_counts > 0, self.interval_counts > 0
        return_times = np.concatenate(
            [
                np.column_stack([self.exact_ages[e], self.exact_ages[e]]),
                np.column_stack([self.interval_lower[i], self.interval_upper[i]]),
            ]
        )
        return np.unique(return_times, axis=0).shape[0] == 1

    @property
    def max_age(self) -> float:
        """Largest age observed in a row with positive count (interval rows: the upper end); 0 if none."""
        ages = np.concatenate(
            [
                self.exact_ages[self.exact_counts > 0],
                self.interval_upper[self.interval_counts > 0],
                self.suspension_ages[self.suspension_counts > 0],
            ]
        )
        return float(ages.max()) if ages.size else 0.0

    @cached_property
    def _distinct(self) -> LifeData:
        """Same data with identical rows merged (counts summed) and zero-count rows dropped.

        Same likelihood up to rounding, fewer rows: grouped warranty data repeat each month in
        service once per build month. Used by the profile-likelihood bounds (many evaluations).
        """

        def merge(columns: list[FloatArray], counts: FloatArray) -> tuple[list[FloatArray], FloatArray]:
            keep = counts > 0.0
            if not np.any(keep):
                return [c[:0] for c in columns], counts[:0]
            rows, inverse = np.unique(np.column_stack([c[keep] for c in columns]), axis=0, return_inverse=True)
            return list(rows.T), np.bincount(inverse.ravel(), weights=counts[keep], minlength=rows.shape[0])

        (exact_ages,), exact_counts = merge([self.exact_ages], self.exact_counts)
        (lower, upper), interval_counts = merge([self.interval_lower, self.interval_upper], self.interval_counts)
        (suspension_ages,), suspension_counts = merge([self.suspension_ages], self.suspension_counts)
        return LifeData(
            exact_ages=exact_ages,
            exact_counts=exact_counts,
            interval_lower=lower,
            interval_upper=upper,
            interval_counts=interval_counts,
            suspension_ages=suspension_ages,
            suspension_counts=suspension_counts,
        )

    @cached_property
    def prepared(self) -> PreparedRows:
        """Positive-count rows with log ages, computed once per data set (shared by every family)."""
        e = self.exact_counts > 0
        i = self.interval_counts > 0
        open_left = i & (self.interval_lower == 0.0)
        closed = i & (self.interval_lower > 0.0)
        s = (self.suspension_counts > 0) & (self.suspension_ages > 0.0)  # age-0 suspensions: log R = 0
        total = float(
            self.exact_counts[e].sum() + self.interval_counts[i].sum() + self.suspension_counts[s].sum()
        )
        return PreparedRows(
            exact_log_ages=np.log(self.exact_ages[e]),
            exact_counts=self.exact_counts[e],
            left_open_log_upper=np.log(self.interval_upper[open_left]),
            left_open_counts=self.interval_counts[open_left],
            interval_log_lower=np.log(self.interval_lower[closed]),
            interval_log_upper=np.log(self.interval_upper[closed]),
            interval_counts=self.interval_counts[closed],
            suspension_log_ages=np.log(self.suspension_ages[s]),
            suspension_counts=self.suspension_counts[s],
            total_units=total,
        )
