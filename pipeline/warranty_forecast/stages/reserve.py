"""Cost per claim and the warranty reserve per build month (currency units of the claims extract).

reserve = expected future claims x cost per claim, undiscounted and without inflation; the figures
are estimates for review by finance and auditors, not booked amounts. Expected future claims = the life
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
"""

from __future__ import annotations

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
    "cost_per_claim",
    "reserve",
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
    cost or a single claim).

    `claim_costs` has the columns of the claim_cost_by_product model.
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
    return pd.DataFrame(rows, columns=["product", "cost_per_claim", "cost_basis", "basis_returns", "cost_sd"])


def _sd(costs: pd.Series, column: str) -> float:
    value = costs.get(column, math.nan)
    return float(value) if value is not None and pd.notna(value) else math.nan


def reserve_by_build_month(
    cohort_summary: pd.DataFrame,
    forecast: pd.DataFrame,
    costs: pd.DataFrame,
    forecast_status: Mapping[str, str],
    forecast_products: Collection[str],
) -> pd.DataFrame:
    """The reserve per product x build month.

    `cohort_summary` has the columns of the cohort_summary model; `forecast` is expected returns per
    product x build month x month for the products in `forecast_products` (with, when present,
    expected_unreported_returns and expected_repeat_claims: see forecasting.BY_MONTH_COLUMNS);
    `forecast_status` is a sentence per product (which model, or why there is no forecast). Products
    without a forecast get empty expected returns and reserve. cost_to_date is every counted claim's cost
    (first claims and repeat claims).
    """
    defaults = {
        "expected_returns_product_model": forecast["expected_returns"],
        "expected_unreported_returns": 0.0,
        "expected_repeat_claims": 0.0,
    }
    forecast = forecast.assign(**{c: v for c, v in defaults.items() if c not in forecast.columns})
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
    table = table.merge(costs[["product", "cost_per_claim", "cost_basis"]], on="product", how="left")
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
    table["reserve"] = table["expected_future_claims"] * table["cost_per_claim"]
    # what a flagged build month's own life adds to (or takes from) the reserve its product's model gives
    table["reserve_added_by_flagged_month"] = (
        table["expected_future_returns"] - table["expected_future_returns_product_model"]
    ) * table["cost_per_claim"]
    return table.loc[:, list(RESERVE_COLUMNS)].sort_values(["product", "build_month"], ignore_index=True)


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
        reserve=("reserve", lambda s: s.sum(min_count=len(s))),
        reserve_added_by_flagged_months=("reserve_added_by_flagged_month", lambda s: s.sum(min_count=len(s))),
        cost_per_claim=("cost_per_claim", "first"),
        cost_basis=("cost_basis", "first"),
        forecast_status=("forecast_status", "first"),
    )
    return sums


def costed_forecast(forecast: pd.DataFrame, costs: pd.DataFrame) -> pd.DataFrame:
    """`forecast` (expected returns per product x build month x month) with expected_cost in currency units:
    expected claims (first failures + not yet reported + repeat; expected returns when the forecast has no
    expected_claims) x the product's cost per claim (empty where the product has no cost per claim)."""
    priced = forecast.merge(costs[["product", "cost_per_claim"]], on="product", how="left")
    claims = priced["expected_claims"] if "expected_claims" in priced else priced["expected_returns"]
    priced["expected_cost"] = claims * priced["cost_per_claim"]
    return priced.drop(columns="cost_per_claim")


@dataclass(frozen=True)
class ReserveResult:
    """The reserve stage's tables (currency units of the claims extract)."""

    costs: pd.DataFrame  # cost per claim by product, with its basis
    forecast: pd.DataFrame  # expected returns and their cost per product x build month x calendar month
    by_build_month: pd.DataFrame  # RESERVE_COLUMNS
    by_product: pd.DataFrame  # totals of by_build_month

    @property
    def warnings(self) -> tuple[str, ...]:
        """One sentence per product whose reserve is empty for want of a cost per claim."""
        return tuple(
            f"product {row.product}: no cost per claim ({row.cost_basis}); its reserve is empty"
            for row in self.costs.itertuples(index=False)
            if math.isnan(row.cost_per_claim)
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
) -> ReserveResult:
    """The whole reserve stage: cost per claim, the costed forecast, the reserve per build month and product."""
    costs = cost_per_claim_by_product(claim_costs, cohort_summary["product"], settings)
    by_build_month = reserve_by_build_month(cohort_summary, forecast, costs, forecast_status, forecast_products)
    return ReserveResult(
        costs=costs,
        forecast=costed_forecast(forecast, costs),
        by_build_month=by_build_month,
        by_product=reserve_by_product(by_build_month),
    )


INTERVAL_COLUMNS = ("returns_lower", "returns_median", "returns_upper", "reserve_lower", "reserve_median", "reserve_upper")
CALENDAR_MONTH_COLUMNS = (
    "product", "month", "expected_returns", "expected_unreported_returns", "expected_repeat_claims", "expected_claims",
    "returns_lower", "returns_median", "returns_upper",
)


def with_prediction_intervals(result: ReserveResult, prediction) -> tuple[ReserveResult, pd.DataFrame]:  # type: ignore[no-untyped-def]
    """The reserve tables with prediction intervals (stages.prediction.ReturnsPrediction), and the forecast
    per product x calendar month (CALENDAR_MONTH_COLUMNS).

    returns_lower / _median / _upper: quantiles of the first failures still to come (whole counts: the
    predictive distribution combines the fit's parameter uncertainty and the counts' Poisson randomness).
    reserve_lower / _median / _upper: quantiles of those failures' total cost (with the spread of single
    claim costs and of their mean) plus the expected cost of the claims not yet reported and of the repeat
    claims, which enter at their expectation (about 1-2% of the reserve on the demo; their own spread is
    left out), to the cent. Products or build months without an interval keep NaN."""
    keys = ["product", "build_month"]
    intervals = prediction.by_build_month.loc[:, [*keys, *INTERVAL_COLUMNS]].copy()
    intervals["build_month"] = pd.to_datetime(intervals["build_month"]).dt.date
    by_build_month = result.by_build_month.drop(columns=[c for c in INTERVAL_COLUMNS if c in result.by_build_month])
    by_build_month = by_build_month.merge(intervals, on=keys, how="left")
    beyond_first = (by_build_month["expected_unreported_returns"] + by_build_month["expected_repeat_claims"]) * (
        by_build_month["cost_per_claim"]
    )
    # quantiles of simulated currency sums, kept to the cent: the simulation's sums may differ in their last
    # bits between processes (summation order), and a rerun must write identical tables
    for column in ("reserve_lower", "reserve_median", "reserve_upper"):
        by_build_month[column] = (by_build_month[column].astype(float) + beyond_first).round(2)
    product_reserve = prediction.reserve_by_product.loc[:, ["product", "reserve_lower", "reserve_median", "reserve_upper"]]
    horizon = prediction.by_product[prediction.by_product["horizon"] == "to_warranty_end"].rename(
        columns={"lower": "returns_lower", "median": "returns_median", "upper": "returns_upper"}
    )[["product", "returns_lower", "returns_median", "returns_upper"]]
    by_product = result.by_product.drop(columns=[c for c in INTERVAL_COLUMNS if c in result.by_product])
    by_product = by_product.merge(horizon, on="product", how="left").merge(product_reserve, on="product", how="left")
    beyond = by_product["reserve"] - by_product["expected_future_returns"] * by_product["cost_per_claim"]
    for column in ("reserve_lower", "reserve_median", "reserve_upper"):
        by_product[column] = (by_product[column].astype(float) + beyond).round(2)
    calendar = result.forecast.assign(month=pd.to_datetime(result.forecast["month"]).dt.date).groupby(
        ["product", "month"], as_index=False
    )[["expected_returns", "expected_unreported_returns", "expected_repeat_claims", "expected_claims"]].sum()
    months = prediction.by_month.loc[:, ["product", "month", "returns_lower", "returns_median", "returns_upper"]].copy()
    months["month"] = pd.to_datetime(months["month"]).dt.date
    calendar = calendar.merge(months, on=["product", "month"], how="left").loc[:, list(CALENDAR_MONTH_COLUMNS)]
    return (
        ReserveResult(costs=result.costs, forecast=result.forecast, by_build_month=by_build_month, by_product=by_product),
        calendar.sort_values(["product", "month"], ignore_index=True),
    )
