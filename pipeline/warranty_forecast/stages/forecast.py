"""Expected future returns per build month and calendar month, until every unit's warranty ends.

For a row of `s` surviving units observed to age `a` months under a warranty of `W` months, the
expected returns in each month in service k from the one holding `a` to W are

    s * (F(hi) - F(lo)) / R(a),    lo = max(a, b_{k-1}), hi = b_k,

with (b_{k-1}, b_k] = `lifecore.data.month_interval_ends(k)`, month k's ages on the day grid (about
(k-1, k]; the warranty's cover ends at b_W, where the observed ages stop too),
i.e. the conditional probability of failing in (lo, hi] given survival to `a` (the first interval is
the rest of the current month in service). Computed in log space as
    s * exp(logR(lo) - logR(a)) * (-expm1(logR(hi) - logR(lo))).
Each expected return is placed in the calendar month of the day on which the midpoint of its age
interval is reached: the warranty start date plus floor(midpoint * 365.25/12) days (day d after the start
holds the ages [d, d + 1) days). A unit observed through the as-of date has age (days since start + 1) / L,
so every piece falls on the day after the as-of date or later.

Pure functions over DataFrames; the life model comes in as anything with `log_survival(t)`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Protocol

import numpy as np
import pandas as pd

from warranty_forecast.lifecore.data import DAYS_PER_MONTH, month_interval_ends

FORECAST_DETAIL_COLUMNS = (
    "product",
    "build_month",
    "sale_month",
    "warranty_months",
    "months_in_service",
    "month",
    "expected_returns",
)


class LifeDistribution(Protocol):
    """A fitted life distribution in months: log R(t) for t >= 0."""

    def log_survival(self, t: np.ndarray) -> np.ndarray: ...


def expected_future_returns(
    suspensions: pd.DataFrame,
    models: Mapping[str, LifeDistribution],
    month_models: Mapping[tuple[str, object], LifeDistribution] | None = None,
) -> pd.DataFrame:
    """Expected returns per suspension row x future month in service x calendar month.

    `suspensions` has the columns of the fit_suspensions model (product, build_month, sale_month,
    warranty_months, warranty_start_date, observed_age_months, suspensions). Products without a model
    are left out (the caller reports them). `month_models`: (product, build_month) -> the life model of
    that build month, used instead of its product's (a flagged build month's own life). Returns
    FORECAST_DETAIL_COLUMNS; `month` is the first day of the calendar month.
    """
    month_models = month_models or {}
    pieces = []
    for product, rows in suspensions.groupby("product", sort=True):
        model = models.get(product)
        if model is None:
            continue
        own = [(month, m) for (p, month), m in month_models.items() if p == product]
        apart = rows["build_month"].isin([month for month, _ in own])
        pieces.append(_product_forecast(rows[~apart], model))
        for month, month_model in own:
            month_rows = rows[rows["build_month"] == month]
            if len(month_rows):
                pieces.append(_product_forecast(month_rows, month_model))
    if not pieces:
        return pd.DataFrame({c: pd.Series(dtype=_dtype(c)) for c in FORECAST_DETAIL_COLUMNS})
    return pd.concat(pieces, ignore_index=True)


@dataclass(frozen=True)
class _FutureIntervals:
    """Every (suspension row, future month in service) pair of one product, as flat arrays."""

    row_index: np.ndarray  # position of the suspension row
    months_in_service: np.ndarray  # k
    observed: np.ndarray  # a, the row's observed age (months)
    lower: np.ndarray  # max(a, b_{k-1})
    upper: np.ndarray  # b_k
    survivors: np.ndarray  # s of the row


def _future_intervals(rows: pd.DataFrame) -> _FutureIntervals:
    age = rows["observed_age_months"].to_numpy(dtype=float)
    warranty = rows["warranty_months"].to_numpy(dtype=np.int64)
    survivors = rows["suspensions"].to_numpy(dtype=float)
    cover_end = month_interval_ends(warranty)[1]
    open_rows = np.flatnonzero((age < cover_end) & (survivors > 0))
    # the month holding age a: the first k with b_k > a (k <= b_k <= k + 1/L, so floor(a) + 1 or one less)
    first_month = np.floor(age[open_rows]).astype(np.int64) + 1
    first_month -= (first_month >= 2) & (month_interval_ends(np.maximum(first_month - 1, 1))[1] > age[open_rows])
    months_left = warranty[open_rows] - first_month + 1
    row_index = np.repeat(open_rows, months_left)
    # month in service k for each (row, future month): first_month, first_month + 1, ..., W
    offsets = np.arange(months_left.sum()) - np.repeat(np.cumsum(months_left) - months_left, months_left)
    months_in_service = np.repeat(first_month, months_left) + offsets
    observed = age[row_index]
    start, end = month_interval_ends(months_in_service)
    return _FutureIntervals(
        row_index=row_index,
        months_in_service=months_in_service,
        observed=observed,
        lower=np.maximum(observed, start),
        upper=end,
        survivors=survivors[row_index],
    )


def _expected_in_intervals(intervals: _FutureIntervals, model: LifeDistribution) -> np.ndarray:
    log_r_observed = model.log_survival(intervals.observed)
    log_r_lower = model.log_survival(intervals.lower)
    log_r_upper = model.log_survival(intervals.upper)
    # naive: survivors * (F(upper) - F(lower)) / R(observed)
    return intervals.survivors * np.exp(log_r_lower - log_r_observed) * -np.expm1(log_r_upper - log_r_lower)


def _product_forecast(rows: pd.DataFrame, model: LifeDistribution) -> pd.DataFrame:
    intervals = _future_intervals(rows)
    row_index = intervals.row_index
    expected = _expected_in_intervals(intervals, model)

    # the calendar day the interval's midpoint age is reached: day d after the warranty start holds the
    # ages [d, d + 1) days, so start + floor(midpoint * L) days. Adding the age in months to a calendar-month
    # coordinate instead put the month after the as-of date into the as-of month (calendar months are not
    # L days long: 22.998 months from 2025-01-01 is 2026-12-02, but 22.998 calendar months is 2026-11).
    start = pd.to_datetime(rows["warranty_start_date"].to_numpy()[row_index]).to_numpy().astype("datetime64[D]")
    midpoint_days = np.floor((intervals.lower + intervals.upper) / 2.0 * DAYS_PER_MONTH).astype(np.int64)
    month = (start + midpoint_days).astype("datetime64[M]").astype("datetime64[s]")

    return pd.DataFrame(
        {
            "product": rows["product"].to_numpy()[row_index],
            "build_month": rows["build_month"].to_numpy()[row_index],
            "sale_month": rows["sale_month"].to_numpy()[row_index],
            "warranty_months": rows["warranty_months"].to_numpy(dtype=np.int64)[row_index],
            "months_in_service": intervals.months_in_service,
            "month": month,
            "expected_returns": expected,
        }
    )


def expected_future_returns_by_mode(
    suspensions: pd.DataFrame, mode_models: Mapping[str, Mapping[str, LifeDistribution]]
) -> pd.DataFrame:
    """Expected future returns per product x failure mode under independent competing risks.

    The product's survival is the product of the modes' survivals, R = prod_m R_m. In each future
    interval the product's expected returns are split among the modes in proportion to their
    cumulative-hazard increments, H_m(upper) - H_m(lower) with H_m = -log R_m (exact when the modes'
    hazards are proportional inside the interval; a month is short enough for that).
    Returns columns product, failure_mode, expected_returns.
    """
    rows_out = []
    for product, rows in suspensions.groupby("product", sort=True):
        models = mode_models.get(product)
        if not models:
            continue
        intervals = _future_intervals(rows)
        combined = CompetingRisks(tuple(models.values()))
        expected = _expected_in_intervals(intervals, combined)
        increments = {
            mode: model.log_survival(intervals.lower) - model.log_survival(intervals.upper)
            for mode, model in models.items()
        }
        total_increment = np.sum(list(increments.values()), axis=0)
        for mode, increment in increments.items():
            share = np.divide(increment, total_increment, out=np.zeros_like(increment), where=total_increment > 0)
            rows_out.append((product, mode, float(np.sum(expected * share))))
    return pd.DataFrame(rows_out, columns=["product", "failure_mode", "expected_returns"])


@dataclass(frozen=True)
class CompetingRisks:
    """Independent competing failure modes: log R(t) = sum over modes of log R_m(t)."""

    modes: tuple[LifeDistribution, ...]

    def log_survival(self, t: np.ndarray) -> np.ndarray:
        return np.sum([mode.log_survival(t) for mode in self.modes], axis=0)


def forecast_by_month(detail: pd.DataFrame) -> pd.DataFrame:
    """Expected returns per product x build month x calendar month (the published forecast grain)."""
    grouped = detail.groupby(["product", "build_month", "month"], sort=True, as_index=False)
    summed = grouped["expected_returns"].sum()
    summed["month"] = pd.to_datetime(summed["month"]).dt.date
    return summed


def _dtype(column: str) -> str:
    if column in ("warranty_months", "months_in_service"):
        return "int64"
    if column == "expected_returns":
        return "float64"
    if column == "month":
        return "datetime64[s]"
    return "object"


def expected_failures_within(
    model: LifeDistribution, ages: np.ndarray, counts: np.ndarray, horizon: float
) -> float:
    """Expected failures among `counts` survivors at `ages` if each runs `horizon` more (same time unit).

    sum counts * (R(a) - R(a + horizon)) / R(a), in log space.
    """
    ages = np.asarray(ages, dtype=float)
    log_r_now = model.log_survival(ages)
    log_r_later = model.log_survival(ages + horizon)
    return float(np.sum(np.asarray(counts, dtype=float) * -np.expm1(log_r_later - log_r_now)))
