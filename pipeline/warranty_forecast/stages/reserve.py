"""Cost per claim and the warranty reserve per build month (currency units of the claims extract, whose
code is `reserve.currency`).

reserve = the sum over the calendar months of expected claims x cost per claim x inflation factor;
reserve_discounted the same, each month also discounted to the as-of date; reserve_current /
reserve_non_current split both by when the claims are expected: in the as-of date's month and the 12
calendar months after it, or later. The figures are estimates for review by finance and auditors, not
booked amounts. Time from the as-of date to a claim, in years (`years_from_as_of`), on the month grid:
every calendar month is 1/12 year; the as-of date sits at its month's index + day / days in the month (the
as-of day counted as finished), a claim at the middle of its calendar month (index + 0.5):

    t = max(0, (index(claim month) + 0.5 - index(as-of month) - day / days_in_month) / 12)
    inflation factor = (1 + reserve.annual_inflation_rate) ** t            (compounded annually)
    discount factor  = (1 + r_k) ** -t, k = ceil(t) (the year after the as-of date the claim falls in),
                       r_k = reserve.discount_rate_by_year[k - 1] (the last one beyond the list), else
                       reserve.annual_discount_rate

The reserve to book has three parts (each a column, and reserve is their sum):
  reserve_future_claims  expected future claims x cost per claim x the months' factors (below);
  reserve_open_claims    the open claims (filed, not yet decided: status open or pending), known today, at
                         their estimated cost (the extract's cost; an empty one priced at the product's cost
                         per claim); due now: all current, not inflated, not discounted;
  reserve_handling       expected_handled_claims x reserve.handling_cost_per_claim x the months' factors,
                         expected_handled_claims = expected future claims x the product's observed ratio of
                         rejected and no-fault-found claims to settled counted claims (handled_per_claim),
                         timed like the claims they come with.
With both rates 0 every factor is exactly 1 and reserve_future_claims is expected future claims x cost per
claim. Open claims are counted returns (the life model's returns to date), so the expected future claims
already leave them out. Expected future claims = the life
model's first failures still to come (expected_future_returns) + failures already incurred but not yet
reported (expected_unreported_returns) + repeat claims of repaired units (expected_repeat_claims). A flagged build month's expected
returns come from its own life (see stages.forecasting); reserve_added_by_flagged_month is its reserve
less what the product's model alone would give.

Cost per claim, per product, first that applies:
  1. the configured override (`reserve.cost_per_claim_by_product`, then `reserve.cost_per_claim`);
  2. the mean cost of counted returns filed in the trailing window (`reserve.cost_window_months`)
     ending at the as-of date;
  3. the mean cost of every counted return filed by the as-of date;
  4. none: the product's reserve is left empty and the run report says so.
Only settled claims are observed costs: an open claim's estimate is not (claim_cost_by_product, cost_to_date).

The handling ratio (handled_per_claim), per product, over the same period as the observed cost: claims
filed in the trailing cost window when it holds a settled counted claim, else all claims filed by the
as-of date, else 0 (no settled counted claim: the basis says so and, with a handling cost, a warning).
Handled claims are valid claims with status rejected or no_fault_found not counted as returns (a status
listed in claims.counted_statuses is priced as a claim instead); in or out of coverage.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from dataclasses import dataclass
from typing import Collection, Iterable, Mapping

import numpy as np
import pandas as pd

from warranty_forecast.config import ReserveSettings

RESERVE_COLUMNS = (
    "product",
    "build_month",
    "units",
    "units_in_channel",
    "returns_to_date",
    "repeat_claims_to_date",
    "cost_to_date",
    "expected_future_returns",
    "expected_unreported_returns",
    "expected_repeat_claims",
    "expected_future_claims",
    "open_claims",
    "expected_handled_claims",
    "cost_per_claim",
    "currency",
    "reserve",
    "reserve_future_claims",
    "reserve_open_claims",
    "reserve_handling",
    "reserve_discounted",
    "reserve_current",
    "reserve_non_current",
    "reserve_current_discounted",
    "reserve_non_current_discounted",
    "expected_future_returns_product_model",
    "reserve_added_by_flagged_month",
    "cost_basis",
    "forecast_status",
)


def cost_per_claim_by_product(
    claim_costs: pd.DataFrame, products: Iterable[str], settings: ReserveSettings
) -> pd.DataFrame:
    """One row per product: cost_per_claim (currency units), cost_basis (words), basis_returns (count),
    cost_sd (the sample standard deviation of the claims behind an observed mean; NaN for a configured
    cost or a single claim), handled_per_claim (rejected and no-fault-found claims per settled counted
    claim, a ratio >= 0) and handled_basis (words; see the module's docstring).

    `claim_costs` has the columns of the claim_cost_by_product model (window_handled_claims and
    all_time_handled_claims taken as 0 when absent).
    """
    observed = claim_costs.set_index("product")
    rows = []
    for product in sorted(set(products)):
        override = settings.override_for(product)
        if override is not None:
            rows.append((product, override, "configured", 0, math.nan))
            continue
        if product in observed.index:
            costs = observed.loc[product]
            if costs["window_returns"] > 0:
                rows.append(
                    (
                        product,
                        float(costs["window_mean_cost"]),
                        f"mean of claims filed in the {settings.cost_window_months} months to the as-of date",
                        int(costs["window_returns"]),
                        _sd(costs, "window_cost_sd"),
                    )
                )
                continue
            if costs["all_time_returns"] > 0:
                rows.append(
                    (
                        product,
                        float(costs["all_time_mean_cost"]),
                        "mean of all claims (none in the trailing window)",
                        int(costs["all_time_returns"]),
                        _sd(costs, "all_time_cost_sd"),
                    )
                )
                continue
        rows.append((product, math.nan, "none: no counted return to price; set reserve.cost_per_claim", 0, math.nan))
    costs = pd.DataFrame(rows, columns=["product", "cost_per_claim", "cost_basis", "basis_returns", "cost_sd"])
    handled = [_handled_ratio(observed.loc[p] if p in observed.index else None, settings) for p in costs["product"]]
    costs["handled_per_claim"] = [ratio for ratio, _ in handled]
    costs["handled_basis"] = [basis for _, basis in handled]
    return costs


def _handled_ratio(costs: pd.Series | None, settings: ReserveSettings) -> tuple[float, str]:
    """(rejected + no-fault-found claims) / settled counted claims of one product, and its basis in words:
    the trailing cost window when it holds a settled counted claim, else all time, else 0."""
    def count(column: str) -> int:
        value = costs.get(column, 0) if costs is not None else 0
        return int(value) if value is not None and pd.notna(value) else 0

    for claims, handled, basis in (
        ("window_returns", "window_handled_claims", f"claims filed in the {settings.cost_window_months} months to the as-of date"),
        ("all_time_returns", "all_time_handled_claims", "all claims (none settled in the trailing window)"),
    ):
        if count(claims) > 0:
            return count(handled) / count(claims), f"{count(handled)} handled per {count(claims)} settled counted, {basis}"
    return 0.0, "none: no settled counted claim (ratio taken as 0)"


def _sd(costs: pd.Series, column: str) -> float:
    value = costs.get(column, math.nan)
    return float(value) if value is not None and pd.notna(value) else math.nan


CURRENT_MONTHS = 12  # reserve_current: claims in the as-of date's month and the 12 calendar months after it

TIMING_COLUMNS = ("month", "years_from_as_of", "inflation_factor", "discount_factor", "is_current")


def _month_index(value: object) -> int:
    stamp = pd.Timestamp(value)
    return stamp.year * 12 + stamp.month - 1


def is_current_month(months: Iterable[object], as_of_date: dt.date) -> np.ndarray:
    """For each calendar month (any day of it): True when it is the as-of date's month or one of the
    CURRENT_MONTHS calendar months after it, the months whose claims reserve_current books."""
    last_current = _month_index(as_of_date) + CURRENT_MONTHS
    return np.array([_month_index(month) <= last_current for month in months], dtype=bool)


def years_from_as_of(months: Iterable[object], as_of_date: dt.date) -> np.ndarray:
    """Years from the end of `as_of_date` to the middle of each calendar month in `months` (dates, any day
    of the month), on the month grid (a calendar month is 1/12 year); 0 for months at or before it."""
    if not isinstance(as_of_date, dt.date):
        raise ValueError(f"as_of_date must be a date, got {as_of_date!r}")
    as_of = pd.Timestamp(as_of_date)
    position = _month_index(as_of) + as_of.day / as_of.days_in_month
    indices = np.array([_month_index(month) for month in months], dtype=float)
    return np.maximum((indices + 0.5 - position) / 12.0, 0.0)


def inflation_factors(years: np.ndarray, annual_rate: float) -> np.ndarray:
    """(1 + annual_rate) ** years, compounded annually (years >= 0); exactly 1 where the rate is 0."""
    if not math.isfinite(annual_rate) or annual_rate <= -1.0:
        raise ValueError(f"annual_rate must be a number above -1, got {annual_rate!r}")
    return np.exp(np.asarray(years, dtype=float) * math.log1p(annual_rate))


def discount_factors(years: np.ndarray, settings: ReserveSettings) -> np.ndarray:
    """(1 + r_k) ** -years with k = ceil(years) the year after the as-of date a claim falls in (year 1 for
    years = 0) and r_k its rate (ReserveSettings.discount_rate_for_year); exactly 1 where r_k is 0."""
    years = np.asarray(years, dtype=float)
    # a claim exactly at the end of year k belongs to year k (1e-9 years is about 30 ms)
    year = np.maximum(np.ceil(years - 1e-9), 1).astype(int)
    rates = np.array([settings.discount_rate_for_year(int(k)) for k in year], dtype=float)
    if np.any(rates <= -1.0):
        raise ValueError("settings: a discount rate must be above -1")
    return np.exp(-years * np.log1p(rates))


def claim_timing(months: Iterable[object], as_of_date: dt.date | None, settings: ReserveSettings) -> pd.DataFrame:
    """Per distinct calendar month (TIMING_COLUMNS): years_from_as_of, inflation_factor, discount_factor and
    is_current (the as-of date's month or one of the CURRENT_MONTHS calendar months after it).

    Without an as-of date (a caller that only prices, rates 0) the factors are 1 and is_current is empty
    (missing); with a non-zero rate the as-of date is required."""
    distinct = sorted(set(pd.to_datetime(pd.Series(list(months), dtype=object)).dt.date))
    if as_of_date is None:
        if settings.annual_inflation_rate or settings.annual_discount_rate or any(settings.discount_rate_by_year):
            raise ValueError("as_of_date is required to inflate or discount the reserve (a rate is not 0)")
        ones = np.ones(len(distinct))
        return pd.DataFrame({
            "month": pd.Series(distinct, dtype=object), "years_from_as_of": np.full(len(distinct), np.nan), "inflation_factor": ones,
            "discount_factor": ones, "is_current": pd.array([pd.NA] * len(distinct), dtype="boolean"),
        })
    years = years_from_as_of(distinct, as_of_date)
    return pd.DataFrame({
        "month": pd.Series(distinct, dtype=object),
        "years_from_as_of": years,
        "inflation_factor": inflation_factors(years, settings.annual_inflation_rate),
        "discount_factor": discount_factors(years, settings),
        "is_current": pd.array(is_current_month(distinct, as_of_date), dtype="boolean"),
    })


def _timed_claims(forecast: pd.DataFrame, timing: pd.DataFrame) -> pd.DataFrame:
    """Per product x build month: the expected claims (claims), and their cost weights: claims x inflation
    factor (inflated), x discount factor too (discounted), each also for the current and later months
    (NaN when is_current is unknown)."""
    keys = ["product", "build_month"]
    rows = forecast.assign(month=pd.to_datetime(forecast["month"]).dt.date).merge(timing, on="month", how="left")
    claims = rows["expected_claims"].astype(float)
    inflated = claims * rows["inflation_factor"]
    discounted = inflated * rows["discount_factor"]
    current = rows["is_current"].astype("float64")  # 1, 0 or NaN (unknown)
    weights = pd.DataFrame({
        "product": rows["product"], "build_month": rows["build_month"], "claims": claims, "inflated": inflated,
        "discounted": discounted, "current": inflated * current, "non_current": inflated * (1.0 - current),
        "current_discounted": discounted * current, "non_current_discounted": discounted * (1.0 - current),
    })
    return weights.groupby(keys, as_index=False).agg(
        claims=("claims", "sum"), inflated=("inflated", "sum"), discounted=("discounted", "sum"),
        **{c: (c, lambda s: s.sum(min_count=len(s))) for c in
           ("current", "non_current", "current_discounted", "non_current_discounted")},
    )


def _with_claim_columns(forecast: pd.DataFrame) -> pd.DataFrame:
    """`forecast` with expected_returns_product_model, expected_unreported_returns, expected_repeat_claims
    (0 when absent) and expected_claims (their sum with expected_returns when absent)."""
    defaults = {
        "expected_returns_product_model": forecast["expected_returns"],
        "expected_unreported_returns": 0.0,
        "expected_repeat_claims": 0.0,
    }
    forecast = forecast.assign(**{c: v for c, v in defaults.items() if c not in forecast.columns})
    if "expected_claims" not in forecast.columns:
        forecast = forecast.assign(
            expected_claims=forecast["expected_returns"] + forecast["expected_unreported_returns"]
            + forecast["expected_repeat_claims"]
        )
    return forecast


def reserve_by_build_month(
    cohort_summary: pd.DataFrame,
    forecast: pd.DataFrame,
    costs: pd.DataFrame,
    forecast_status: Mapping[str, str],
    forecast_products: Collection[str],
    *,
    settings: ReserveSettings | None = None,
    as_of_date: dt.date | None = None,
    open_claims: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """The reserve per product x build month (RESERVE_COLUMNS; amounts in `settings.currency`).

    `cohort_summary` has the columns of the cohort_summary model; `forecast` is expected returns per
    product x build month x calendar month for the products in `forecast_products` (with, when present,
    expected_unreported_returns, expected_repeat_claims and expected_claims: see
    forecasting.BY_MONTH_COLUMNS); `forecast_status` is a sentence per product (which model, or why there
    is no forecast). Products without a forecast get empty expected returns and reserve. cost_to_date is
    every counted claim's cost (first claims and repeat claims).

    reserve = expected_future_claims x cost_per_claim x the claims-weighted mean of the months' inflation
    factors (= the sum over months of claims x cost x factor; exactly claims x cost at rate 0);
    reserve_discounted likewise with inflation x discount factors; reserve_current / _non_current (and
    _discounted) the parts in the as-of date's month and the 12 calendar months after it / later, empty
    without `as_of_date`. `settings` defaults to ReserveSettings() (rates 0). Those are the future claims'
    part (reserve_future_claims); the columns reserve, reserve_discounted and the current / non-current
    ones are the totals to book: + reserve_open_claims (current, factors 1) + reserve_handling (timed like
    the future claims).

    `open_claims` has the columns of the open_claims_by_build_month model (product, build_month,
    open_claims, estimated_cost, open_claims_without_estimate); None: no open claims. `costs` may carry
    handled_per_claim (cost_per_claim_by_product; 0 when absent).
    """
    settings = settings if settings is not None else ReserveSettings()
    forecast = _with_claim_columns(forecast)
    timing = claim_timing(forecast["month"], as_of_date, settings)
    expected = (
        forecast.groupby(["product", "build_month"], as_index=False)[
            ["expected_returns", "expected_returns_product_model", "expected_unreported_returns",
             "expected_repeat_claims"]
        ]
        .sum()
        .rename(columns={
            "expected_returns": "expected_future_returns",
            "expected_returns_product_model": "expected_future_returns_product_model",
        })
    )
    summary = cohort_summary.assign(
        **{c: 0 for c in ("repeat_claims_to_date", "repeat_cost_to_date") if c not in cohort_summary.columns}
    )
    summary = summary.assign(cost_to_date=summary["cost_to_date"] + summary["repeat_cost_to_date"])
    table = summary.merge(expected, on=["product", "build_month"], how="left")
    table = table.merge(_timed_claims(forecast, timing), on=["product", "build_month"], how="left")
    costs = costs.assign(**({} if "handled_per_claim" in costs else {"handled_per_claim": 0.0}))
    table = table.merge(costs[["product", "cost_per_claim", "cost_basis", "handled_per_claim"]], on="product", how="left")
    table = table.merge(_open_claims_frame(open_claims), on=["product", "build_month"], how="left")
    table["forecast_status"] = table["product"].map(forecast_status).fillna("no forecast")
    has_forecast = table["product"].isin(list(forecast_products))
    table["expected_future_returns"] = np.where(
        has_forecast, table["expected_future_returns"].fillna(0.0), np.nan
    )
    for column in ("expected_future_returns_product_model", "expected_unreported_returns", "expected_repeat_claims"):
        table[column] = np.where(has_forecast, table[column].fillna(0.0), np.nan)
    table["expected_future_claims"] = (
        table["expected_future_returns"] + table["expected_unreported_returns"] + table["expected_repeat_claims"]
    )
    # the months' factors as a claims-weighted mean: a build month's reserve is exactly claims x cost at
    # rate 0 (x / x is 1 in floating point), and sum(claims x cost x factor) otherwise
    claims = table["claims"].fillna(0.0)
    has_claims = claims > 0

    def mean_factor(column: str) -> pd.Series:
        return pd.Series(np.where(has_claims, table[column] / claims.where(has_claims, 1.0), 1.0), index=table.index)

    # open claims: known today, due now (current, not inflated, not discounted); an open claim without an
    # estimate at the product's cost per claim
    table["open_claims"] = table["open_claims"].fillna(0).astype("int64")
    without = table["open_claims_without_estimate"].fillna(0)
    estimated = table["estimated_cost"].fillna(0.0)
    open_reserve = pd.Series(
        np.where(without > 0, estimated + without * table["cost_per_claim"], estimated), index=table.index
    )
    table["reserve_open_claims"] = open_reserve
    # handling: the rejected and no-fault-found claims expected with the future claims, at the handling cost
    handled = table["handled_per_claim"].fillna(0.0)
    handling_per_claim = handled * settings.handling_cost_per_claim  # currency units per expected claim
    table["expected_handled_claims"] = table["expected_future_claims"] * handled
    priced = table["expected_future_claims"] * table["cost_per_claim"]
    handling = table["expected_future_claims"] * handling_per_claim
    table["reserve_future_claims"] = priced * mean_factor("inflated")
    table["reserve_handling"] = handling * mean_factor("inflated")
    table["reserve"] = table["reserve_future_claims"] + table["reserve_open_claims"] + table["reserve_handling"]
    table["reserve_discounted"] = (
        priced * mean_factor("discounted") + table["reserve_open_claims"] + handling * mean_factor("discounted")
    )
    for column in ("current", "non_current", "current_discounted", "non_current_discounted"):
        part = table[column].where(has_claims, 0.0 if as_of_date is not None else np.nan)
        known = open_reserve if column.startswith("current") else 0.0
        table[f"reserve_{column}"] = np.where(
            has_forecast, part * table["cost_per_claim"] + known + part * handling_per_claim, np.nan
        )
    table["currency"] = settings.currency
    # what a flagged build month's own life adds to (or takes from) the reserve its product's model gives
    # (its claims and the handled claims that come with them)
    table["reserve_added_by_flagged_month"] = (
        table["expected_future_returns"] - table["expected_future_returns_product_model"]
    ) * (table["cost_per_claim"] + handling_per_claim)
    return table.loc[:, list(RESERVE_COLUMNS)].sort_values(["product", "build_month"], ignore_index=True)


OPEN_CLAIMS_COLUMNS = ("product", "build_month", "open_claims", "estimated_cost", "open_claims_without_estimate")


def _open_claims_frame(open_claims: pd.DataFrame | None) -> pd.DataFrame:
    """The open claims per product x build month (OPEN_CLAIMS_COLUMNS), empty when None; build months as
    dates."""
    if open_claims is None:
        return pd.DataFrame({c: pd.Series(dtype="object" if c in ("product", "build_month") else "float64")
                             for c in OPEN_CLAIMS_COLUMNS})
    missing = [c for c in OPEN_CLAIMS_COLUMNS if c not in open_claims.columns]
    if missing:
        raise ValueError(f"open_claims lacks the columns {missing}")
    frame = open_claims.loc[:, list(OPEN_CLAIMS_COLUMNS)].copy()
    if (frame[["open_claims", "estimated_cost", "open_claims_without_estimate"]] < 0).any().any():
        raise ValueError("open_claims: counts and estimated_cost must be >= 0")
    frame["build_month"] = pd.to_datetime(frame["build_month"]).dt.date
    return frame


def reserve_by_product(reserve: pd.DataFrame) -> pd.DataFrame:
    """Product totals of the per-build-month reserve; a product with any empty reserve has an empty total."""
    sums = reserve.groupby("product", as_index=False).agg(
        build_months=("build_month", "count"),
        units=("units", "sum"),
        returns_to_date=("returns_to_date", "sum"),
        repeat_claims_to_date=("repeat_claims_to_date", "sum"),
        cost_to_date=("cost_to_date", "sum"),
        expected_future_returns=("expected_future_returns", lambda s: s.sum(min_count=len(s))),
        expected_unreported_returns=("expected_unreported_returns", lambda s: s.sum(min_count=len(s))),
        expected_repeat_claims=("expected_repeat_claims", lambda s: s.sum(min_count=len(s))),
        expected_future_claims=("expected_future_claims", lambda s: s.sum(min_count=len(s))),
        open_claims=("open_claims", "sum"),
        expected_handled_claims=("expected_handled_claims", lambda s: s.sum(min_count=len(s))),
        reserve=("reserve", lambda s: s.sum(min_count=len(s))),
        **{c: (c, lambda s: s.sum(min_count=len(s))) for c in (
            "reserve_future_claims", "reserve_open_claims", "reserve_handling", "reserve_discounted", "reserve_current", "reserve_non_current", "reserve_current_discounted",
            "reserve_non_current_discounted",
        )},
        reserve_added_by_flagged_months=("reserve_added_by_flagged_month", lambda s: s.sum(min_count=len(s))),
        cost_per_claim=("cost_per_claim", "first"),
        currency=("currency", "first"),
        cost_basis=("cost_basis", "first"),
        forecast_status=("forecast_status", "first"),
    )
    return sums


def costed_forecast(
    forecast: pd.DataFrame,
    costs: pd.DataFrame,
    settings: ReserveSettings | None = None,
    as_of_date: dt.date | None = None,
) -> pd.DataFrame:
    """`forecast` (expected returns per product x build month x month) with expected_cost in currency units:
    expected claims (first failures + not yet reported + repeat; expected returns when the forecast has no
    expected_claims) x the product's cost per claim x the month's inflation factor (empty where the product
    has no cost per claim), and expected_cost_discounted (x the month's discount factor too); see
    claim_timing. `settings` defaults to ReserveSettings() (rates 0: factors 1)."""
    settings = settings if settings is not None else ReserveSettings()
    priced = forecast.merge(costs[["product", "cost_per_claim"]], on="product", how="left")
    claims = priced["expected_claims"] if "expected_claims" in priced else priced["expected_returns"]
    timing = claim_timing(priced["month"], as_of_date, settings)
    factors = pd.to_datetime(priced["month"]).dt.date.to_frame().merge(timing, on="month", how="left")
    priced["expected_cost"] = claims * priced["cost_per_claim"] * factors["inflation_factor"].to_numpy()
    priced["expected_cost_discounted"] = priced["expected_cost"] * factors["discount_factor"].to_numpy()
    return priced.drop(columns="cost_per_claim")


@dataclass(frozen=True)
class ReserveResult:
    """The reserve stage's tables (currency units of the claims extract, code in their currency column)."""

    costs: pd.DataFrame  # cost per claim by product, with its basis
    forecast: pd.DataFrame  # expected returns and their cost per product x build month x calendar month
    by_build_month: pd.DataFrame  # RESERVE_COLUMNS
    by_product: pd.DataFrame  # totals of by_build_month
    handling_cost_per_claim: float = 0.0  # reserve.handling_cost_per_claim in force (currency units)

    @property
    def warnings(self) -> tuple[str, ...]:
        """One sentence per product whose reserve is empty for want of a cost per claim; with a handling
        cost, one per product whose handling ratio could not be observed (taken as 0)."""
        empty = tuple(
            f"product {row.product}: no cost per claim ({row.cost_basis}); its reserve is empty"
            for row in self.costs.itertuples(index=False)
            if math.isnan(row.cost_per_claim)
        )
        if not self.handling_cost_per_claim or "handled_basis" not in self.costs:
            return empty
        return empty + tuple(
            f"product {row.product}: no settled counted claim to observe its share of rejected and no-fault-found"
            " claims; no handling cost is reserved for it"
            for row in self.costs.itertuples(index=False)
            if str(row.handled_basis).startswith("none")
        )

    @property
    def total(self) -> float:
        """The reserve summed over the products that have one (products without a forecast or a cost per
        claim add nothing and are named in the warnings); NaN when no product has one."""
        return float(self.by_product["reserve"].sum(min_count=1))


def book_reserve(
    cohort_summary: pd.DataFrame,
    claim_costs: pd.DataFrame,
    forecast: pd.DataFrame,
    forecast_status: Mapping[str, str],
    forecast_products: Collection[str],
    settings: ReserveSettings,
    as_of_date: dt.date | None = None,
    open_claims: pd.DataFrame | None = None,
) -> ReserveResult:
    """The whole reserve stage: cost per claim, the costed forecast, the reserve per build month and product.

    `as_of_date`: where inflation and discounting start and the current / non-current split falls; required
    when a rate is not 0 (without it the split columns are empty). `open_claims`: the open_claims_by_build_month
    model's table (ShapedData.open_claims_by_build_month), reserved at their estimates; None: no open claims
    reserved. The costed forecast (expected_cost) prices the future claims only (its sum is
    reserve_future_claims)."""
    costs = cost_per_claim_by_product(claim_costs, cohort_summary["product"], settings)
    by_build_month = reserve_by_build_month(
        cohort_summary, forecast, costs, forecast_status, forecast_products, settings=settings, as_of_date=as_of_date,
        open_claims=open_claims,
    )
    return ReserveResult(
        costs=costs,
        forecast=costed_forecast(forecast, costs, settings, as_of_date),
        by_build_month=by_build_month,
        by_product=reserve_by_product(by_build_month),
        handling_cost_per_claim=settings.handling_cost_per_claim,
    )


INTERVAL_COLUMNS = ("returns_lower", "returns_median", "returns_upper", "reserve_lower", "reserve_median", "reserve_upper")
CALENDAR_MONTH_COLUMNS = (
    "product", "month", "expected_returns", "expected_unreported_returns", "expected_repeat_claims", "expected_claims",
    "returns_lower", "returns_median", "returns_upper",
    "currency", "expected_cost", "cost_lower", "cost_median", "cost_upper",
)
RESERVE_BY_CALENDAR_MONTH_COLUMNS = (
    "month", "is_current", "products", "currency", "expected_claims", "expected_cost", "expected_cost_discounted",
    "cost_lower", "cost_median", "cost_upper",
)
_COST_QUANTILES = ("cost_lower", "cost_median", "cost_upper")


SPLIT_INTERVAL_COLUMNS = tuple(
    f"reserve_{part}_{level}" for part in ("current", "non_current") for level in ("lower", "median", "upper")
)


def with_prediction_intervals(result: ReserveResult, prediction, as_of_date: dt.date | None = None) -> tuple[ReserveResult, pd.DataFrame]:  # type: ignore[no-untyped-def]
    """The reserve tables with prediction intervals (stages.prediction.ReturnsPrediction), and the forecast
    per product x calendar month (CALENDAR_MONTH_COLUMNS).

    returns_lower / _median / _upper: quantiles of the first failures still to come (whole counts: the
    predictive distribution combines the fit's parameter uncertainty and the counts' Poisson randomness).
    reserve_lower / _median / _upper: quantiles of those failures' total cost (with the spread of single
    claim costs and of their mean) plus the expected cost of the claims not yet reported and of the repeat
    claims, which enter at their expectation (about 1-2% of the reserve on the demo; their own spread is
    left out), times the reserve's inflation factor (reserve over expected_future_claims x cost_per_claim:
    exact for the expected timing of the claims, 1 at rate 0), plus the open claims (known: a constant,
    reserve_open_claims) and the handling (at its expectation, reserve_handling), to the cent; so they bound
    the total `reserve`. They are not discounted: set them beside `reserve`, not `reserve_discounted`.
    Products or build months without an interval keep NaN.

    With `as_of_date`, reserve_by_product also gets reserve_current_lower / _median / _upper and
    reserve_non_current_* (SPLIT_INTERVAL_COLUMNS): the same construction for the claims due in the as-of
    date's month and the 12 after it / later (prediction's per-draw sums of the month costs; the other
    claims at their expectation; the part's own inflation factor; the open claims, all current, and the
    part's handling at their amounts), so they bound reserve_current / reserve_non_current."""
    keys = ["product", "build_month"]
    intervals = prediction.by_build_month.loc[:, [*keys, *INTERVAL_COLUMNS]].copy()
    intervals["build_month"] = pd.to_datetime(intervals["build_month"]).dt.date
    by_build_month = result.by_build_month.drop(columns=[c for c in INTERVAL_COLUMNS if c in result.by_build_month])
    by_build_month = by_build_month.merge(intervals, on=keys, how="left")
    beyond_first = (by_build_month["expected_unreported_returns"] + by_build_month["expected_repeat_claims"]) * (
        by_build_month["cost_per_claim"]
    )
    inflation = _inflation_factor(
        by_build_month["reserve_future_claims"], by_build_month["expected_future_claims"] * by_build_month["cost_per_claim"]
    )
    known = by_build_month["reserve_open_claims"] + by_build_month["reserve_handling"]
    # quantiles of simulated currency sums, kept to the cent: the simulation's sums may differ in their last
    # bits between processes (summation order), and a rerun must write identical tables
    for column in ("reserve_lower", "reserve_median", "reserve_upper"):
        by_build_month[column] = ((by_build_month[column].astype(float) + beyond_first) * inflation + known).round(2)
    product_reserve = prediction.reserve_by_product.loc[:, ["product", "reserve_lower", "reserve_median", "reserve_upper"]]
    horizon = prediction.by_product[prediction.by_product["horizon"] == "to_warranty_end"].rename(
        columns={"lower": "returns_lower", "median": "returns_median", "upper": "returns_upper"}
    )[["product", "returns_lower", "returns_median", "returns_upper"]]
    by_product = result.by_product.drop(columns=[c for c in INTERVAL_COLUMNS if c in result.by_product])
    by_product = by_product.merge(horizon, on="product", how="left").merge(product_reserve, on="product", how="left")
    # the product's reserve without inflation, summed as reserve_by_product sums the reserve (the same bits
    # at rate 0)
    uninflated = (
        result.by_build_month.assign(
            uninflated=result.by_build_month["expected_future_claims"] * result.by_build_month["cost_per_claim"]
        )
        .groupby("product")["uninflated"].agg(lambda s: s.sum(min_count=len(s)))
    )
    product_uninflated = by_product["product"].map(uninflated).astype(float)
    beyond = product_uninflated - by_product["expected_future_returns"] * by_product["cost_per_claim"]
    inflation = _inflation_factor(by_product["reserve_future_claims"], product_uninflated)
    known = by_product["reserve_open_claims"] + by_product["reserve_handling"]
    for column in ("reserve_lower", "reserve_median", "reserve_upper"):
        by_product[column] = ((by_product[column].astype(float) + beyond) * inflation + known).round(2)
    calendar = _priced_by_product_and_month(result)
    by_product = _with_split_intervals(by_product, calendar, prediction, as_of_date)
    months = prediction.by_month.reindex(
        columns=["product", "month", "returns_lower", "returns_median", "returns_upper", *_COST_QUANTILES]
    ).copy()
    months["month"] = pd.to_datetime(months["month"]).dt.date
    calendar = calendar.merge(months, on=["product", "month"], how="left")
    for column in _COST_QUANTILES:  # first failures drawn, the claims beyond them at their expectation, inflated
        calendar[column] = ((calendar[column].astype(float) + calendar["beyond_first_cost"]) * calendar["inflation"]).round(2)
    calendar["currency"] = calendar["product"].map(_currency_by_product(result))
    return (
        dataclasses.replace(result, by_build_month=by_build_month, by_product=by_product),
        calendar.loc[:, list(CALENDAR_MONTH_COLUMNS)].sort_values(["product", "month"], ignore_index=True),
    )


def _with_split_intervals(by_product: pd.DataFrame, calendar: pd.DataFrame, prediction,  # type: ignore[no-untyped-def]
                          as_of_date: dt.date | None) -> pd.DataFrame:
    """by_product with SPLIT_INTERVAL_COLUMNS (NaN without an as-of date or without the part's draws);
    `calendar`: _priced_by_product_and_month's table."""
    by_product = by_product.drop(columns=[c for c in SPLIT_INTERVAL_COLUMNS if c in by_product])
    drawn = prediction.reserve_by_product.reindex(columns=["product", *SPLIT_INTERVAL_COLUMNS])
    if as_of_date is None or not {"reserve_current", "reserve_non_current"} <= set(by_product.columns):
        return by_product.assign(**{c: np.nan for c in SPLIT_INTERVAL_COLUMNS})
    calendar = calendar.assign(is_current=is_current_month(calendar["month"], as_of_date))
    by_product = by_product.merge(drawn, on="product", how="left")
    for part, due in (("current", True), ("non_current", False)):
        rows = calendar[calendar["is_current"] == due]
        sums = rows.groupby("product")[["expected_cost", "uninflated_cost", "beyond_first_cost"]].sum(min_count=1)
        priced = by_product["product"].map(sums["expected_cost"]).astype(float).fillna(0.0)
        uninflated = by_product["product"].map(sums["uninflated_cost"]).astype(float).fillna(0.0)
        beyond = by_product["product"].map(sums["beyond_first_cost"]).astype(float).fillna(0.0)
        inflation = _inflation_factor(priced, uninflated)
        # the part's handling: what the part books beyond its future claims (and, for the current part,
        # beyond the open claims), taken at its amount as in the total's interval
        known = by_product[f"reserve_{part}"] - priced
        for level in ("lower", "median", "upper"):
            column = f"reserve_{part}_{level}"
            by_product[column] = ((by_product[column].astype(float) + beyond) * inflation + known).round(2)
    return by_product


def _currency_by_product(result: ReserveResult) -> dict[str, object]:
    table = result.by_build_month
    if "currency" not in table or table.empty:
        return {}
    return table.groupby("product")["currency"].first().to_dict()


def _priced_by_product_and_month(result: ReserveResult) -> pd.DataFrame:
    """The costed forecast per product x calendar month: expected counts and costs (expected_cost inflated,
    expected_cost_discounted), the cost of the claims beyond the first failures (not yet reported, repeat)
    at the product's cost per claim before inflation (beyond_first_cost), and the month's inflation factor
    (expected_cost over expected claims x cost per claim; 1 where that is 0 or unknown)."""
    forecast = result.forecast.assign(month=pd.to_datetime(result.forecast["month"]).dt.date)
    counts = ["expected_returns", "expected_unreported_returns", "expected_repeat_claims", "expected_claims"]
    money = [c for c in ("expected_cost", "expected_cost_discounted") if c in forecast]
    calendar = forecast.groupby(["product", "month"], as_index=False)[counts + money].sum(min_count=1)
    for column in ("expected_cost", "expected_cost_discounted"):
        if column not in calendar:
            calendar[column] = np.nan
    per_claim = calendar["product"].map(result.costs.set_index("product")["cost_per_claim"]).astype(float)
    calendar["beyond_first_cost"] = (calendar["expected_unreported_returns"] + calendar["expected_repeat_claims"]) * per_claim
    calendar["uninflated_cost"] = calendar["expected_claims"] * per_claim
    calendar["inflation"] = _inflation_factor(calendar["expected_cost"], calendar["uninflated_cost"])
    return calendar


def reserve_by_calendar_month(result: ReserveResult, prediction, as_of_date: dt.date) -> pd.DataFrame:  # type: ignore[no-untyped-def]
    """The cost of the claims still to come per calendar month over all products with a cost per claim
    (RESERVE_BY_CALENDAR_MONTH_COLUMNS; currency units), for finance's view by month.

    expected_cost / expected_cost_discounted: the costed forecast summed (its total is the products'
    reserve_future_claims / its discounted part); cost_lower / _median / _upper: quantiles of the month's
    cost over all products (stages.prediction's per-draw sums: parameter uncertainty, Poisson counts and the
    spread of claim costs), plus the claims beyond the first failures at their expectation, times the month's
    inflation factor, to the cent; not discounted. is_current: the as-of date's month or one of the
    reserve.CURRENT_MONTHS months after it. Open claims and handling are not placed in months (see
    reserve_by_product)."""
    calendar = _priced_by_product_and_month(result)
    calendar = calendar[calendar["expected_cost"].notna()]
    columns = list(RESERVE_BY_CALENDAR_MONTH_COLUMNS)
    if calendar.empty:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in columns})
    totals = calendar.groupby("month", as_index=False).agg(
        products=("product", "nunique"), expected_claims=("expected_claims", "sum"),
        expected_cost=("expected_cost", "sum"), expected_cost_discounted=("expected_cost_discounted", "sum"),
        beyond_first_cost=("beyond_first_cost", "sum"), uninflated_cost=("uninflated_cost", "sum"),
    )
    totals["inflation"] = _inflation_factor(totals["expected_cost"], totals["uninflated_cost"])
    drawn = prediction.cost_by_month.reindex(columns=["month", *_COST_QUANTILES]).copy()
    drawn["month"] = pd.to_datetime(drawn["month"]).dt.date
    totals = totals.merge(drawn, on="month", how="left")
    for column in _COST_QUANTILES:
        totals[column] = ((totals[column].astype(float) + totals["beyond_first_cost"]) * totals["inflation"]).round(2)
    totals["is_current"] = is_current_month(totals["month"], as_of_date)
    currencies = sorted(set(_currency_by_product(result).values()) - {None})
    totals["currency"] = currencies[0] if len(currencies) == 1 else None
    return totals.loc[:, columns].sort_values("month", ignore_index=True)


def _inflation_factor(reserve: pd.Series, uninflated: pd.Series) -> pd.Series:
    """reserve / uninflated where the uninflated amount is positive, else 1 (exactly 1 at rate 0)."""
    positive = uninflated.fillna(0.0) > 0
    return pd.Series(
        np.where(positive, reserve / uninflated.where(positive, 1.0), 1.0), index=reserve.index
    )
