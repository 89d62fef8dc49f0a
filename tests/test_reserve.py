"""Cost per claim and reserve arithmetic (common practice, no source)."""

from __future__ import annotations

import datetime as dt
import math

import pandas as pd

from warranty_forecast.config import ReserveSettings
from warranty_forecast.stages.reserve import (
    book_reserve,
    cost_per_claim_by_product,
    reserve_by_build_month,
    reserve_by_product,
)

JAN, FEB = dt.date(2024, 1, 1), dt.date(2024, 2, 1)


def claim_costs():
    return pd.DataFrame(
        {
            "product": ["A", "B", "C"],
            "window_returns": [4, 0, 0],
            "window_mean_cost": [50.0, math.nan, math.nan],
            "all_time_returns": [10, 3, 0],
            "all_time_mean_cost": [45.0, 70.0, math.nan],
        }
    )


def test_cost_per_claim_precedence():
    costs = cost_per_claim_by_product(claim_costs(), ["A", "B", "C", "D"], ReserveSettings()).set_index("product")
    assert costs.loc["A", "cost_per_claim"] == 50.0 and costs.loc["A", "basis_returns"] == 4
    assert costs.loc["B", "cost_per_claim"] == 70.0 and "all claims" in costs.loc["B", "cost_basis"]
    assert math.isnan(costs.loc["C", "cost_per_claim"]) and math.isnan(costs.loc["D", "cost_per_claim"])
    configured = ReserveSettings(cost_per_claim=30.0, cost_per_claim_by_product=(("B", 99.0),))
    costs = cost_per_claim_by_product(claim_costs(), ["A", "B"], configured).set_index("product")
    assert costs["cost_per_claim"].to_dict() == {"A": 30.0, "B": 99.0}
    assert set(costs["cost_basis"]) == {"configured"}


def test_reserve_is_expected_returns_times_cost_and_empty_without_forecast():
    summary = pd.DataFrame(
        {
            "product": ["A", "A", "B"],
            "build_month": [JAN, FEB, JAN],
            "units": [100, 200, 50],
            "units_in_channel": [0, 10, 0],
            "returns_to_date": [3, 1, 2],
            "cost_to_date": [150.0, 50.0, 140.0],
        }
    )
    forecast = pd.DataFrame(
        {
            "product": ["A", "A", "A"],
            "build_month": [JAN, JAN, FEB],
            "month": [FEB, dt.date(2024, 3, 1), dt.date(2024, 3, 1)],
            "expected_returns": [1.5, 0.5, 4.0],
        }
    )
    costs = cost_per_claim_by_product(claim_costs(), ["A", "B"], ReserveSettings())
    reserve = reserve_by_build_month(
        summary, forecast, costs, {"A": "forecast (weibull)", "B": "no forecast: insufficient_data"}, {"A"}
    )
    a = reserve[reserve["product"] == "A"].set_index("build_month")
    assert a["expected_future_returns"].to_dict() == {JAN: 2.0, FEB: 4.0}
    assert a["reserve"].to_dict() == {JAN: 100.0, FEB: 200.0}
    b = reserve[reserve["product"] == "B"].iloc[0]
    assert math.isnan(b["expected_future_returns"]) and math.isnan(b["reserve"])
    totals = reserve_by_product(reserve).set_index("product")
    assert totals.loc["A", "reserve"] == 300.0 and totals.loc["A", "units"] == 300
    assert math.isnan(totals.loc["B", "reserve"])
    assert totals.loc["B", "cost_to_date"] == 140.0


def test_book_reserve_prices_the_forecast_and_totals_what_it_books():
    summary = pd.DataFrame(
        {
            "product": ["A", "B"], "build_month": [JAN, JAN], "units": [100, 50], "units_in_channel": [0, 0],
            "returns_to_date": [3, 2], "cost_to_date": [150.0, 140.0],
        }
    )
    forecast = pd.DataFrame(
        {"product": ["A", "A"], "build_month": [JAN, JAN], "month": [FEB, dt.date(2024, 3, 1)],
         "expected_returns": [1.5, 0.5]}
    )
    booked = book_reserve(summary, claim_costs(), forecast, {"A": "forecast (weibull)"}, {"A"}, ReserveSettings())
    assert booked.forecast["expected_cost"].tolist() == [75.0, 25.0]  # A's window mean cost 50 x expected returns
    assert booked.forecast["expected_cost"].sum() == booked.by_build_month["reserve"].sum(min_count=1)
    assert booked.by_product.set_index("product").loc["A", "reserve"] == 100.0
    assert booked.total == 100.0  # B has no forecast: it adds nothing (and the run warns about it)
    assert booked.warnings == ()  # both products have a cost per claim
    unpriced = book_reserve(
        summary, claim_costs().iloc[1:], forecast, {"A": "forecast (weibull)"}, {"A"}, ReserveSettings()
    )
    assert unpriced.warnings == (
        "product A: no cost per claim (none: no counted return to price; set reserve.cost_per_claim);"
        " its reserve is empty",
    )


def test_the_reserve_a_flagged_month_adds_is_its_excess_over_the_product_model_priced():
    # hand computation: JAN expects 6 returns with its own life against 2 under the product's model, at the
    # window mean cost 50 (claim_costs: product A): reserve 300, of which (6 - 2) x 50 = 200 added by its
    # own life; FEB has no own life (equal columns): nothing added
    summary = pd.DataFrame({
        "product": ["A", "A"], "build_month": [JAN, FEB], "units": [100, 200], "units_in_channel": [0, 0],
        "returns_to_date": [3, 1], "cost_to_date": [150.0, 50.0],
    })
    forecast = pd.DataFrame({
        "product": ["A", "A", "A"], "build_month": [JAN, JAN, FEB],
        "month": [FEB, dt.date(2024, 3, 1), dt.date(2024, 3, 1)],
        "expected_returns": [4.0, 2.0, 1.0], "expected_returns_product_model": [1.5, 0.5, 1.0],
    })
    costs = cost_per_claim_by_product(claim_costs(), ["A"], ReserveSettings())
    reserve = reserve_by_build_month(summary, forecast, costs, {"A": "forecast (weibull)"}, {"A"}).set_index("build_month")
    assert reserve["reserve"].to_dict() == {JAN: 300.0, FEB: 50.0}
    assert reserve["expected_future_returns_product_model"].to_dict() == {JAN: 2.0, FEB: 1.0}
    assert reserve["reserve_added_by_flagged_month"].to_dict() == {JAN: 200.0, FEB: 0.0}
    totals = reserve_by_product(reserve.reset_index()).set_index("product")
    assert totals.loc["A", "reserve_added_by_flagged_months"] == 200.0
