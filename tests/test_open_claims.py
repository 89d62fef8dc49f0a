"""Open claims (status open or pending: filed, not yet decided) and the handling cost of rejected and
no-fault-found claims (issue 10): accepted and counted as returns, left out of the observed cost, reserved at
their estimate; the reserve's three components add up to the total to book.

Every figure is a hand computation written beside its check (common practice, no source).
"""

from __future__ import annotations

import datetime as dt
import math
from types import SimpleNamespace

import pandas as pd
import pytest
from sql_tables import CLOCKED_CLAIMS, SALE_MONTH_GROUPS, d, run, table

from warranty_forecast.config import ClaimSettings, ReserveSettings, settings_from_document
from warranty_forecast.errors import ConfigError
from warranty_forecast.stages.reserve import (
    RESERVE_COLUMNS,
    book_reserve,
    cost_per_claim_by_product,
    reserve_by_product,
    with_prediction_intervals,
)

RUN_DATE = dt.date(2025, 12, 31)
AS_OF = dt.date(2024, 12, 31)
BUILD = dt.date(2024, 1, 1)
COMPONENTS = ("reserve_future_claims", "reserve_open_claims", "reserve_handling")


# --- staging: the accepted statuses, and cost empty only for an open claim --------------------------------

RAW_CLAIMS = {
    "source_row_number": "bigint", "claim_id": "varchar", "product": "varchar", "build_month": "varchar",
    "sale_date": "varchar", "failure_date": "varchar", "claim_date": "varchar", "cost": "varchar",
    "status": "varchar", "failure_code": "varchar", "serial": "varchar",
}


def test_open_and_pending_are_accepted_in_any_case_and_only_they_may_leave_cost_empty(con):
    row = {"product": "A", "build_month": "2024-01", "failure_date": "2024-03-15", "claim_date": "2024-03-20"}
    table(con, "raw_claims", RAW_CLAIMS, [
        {**row, "source_row_number": 1, "claim_id": "C1", "cost": "80.00", "status": "open"},
        {**row, "source_row_number": 2, "claim_id": "C2", "cost": "", "status": "Pending"},  # no estimate yet
        {**row, "source_row_number": 3, "claim_id": "C3", "cost": None, "status": " OPEN "},
        {**row, "source_row_number": 4, "claim_id": "C4", "cost": "", "status": "approved"},  # decided: cost needed
        {**row, "source_row_number": 5, "claim_id": "C5", "cost": "", "status": None},  # approved by default
        {**row, "source_row_number": 6, "claim_id": "C6", "cost": "10", "status": "lost"},
        {**row, "source_row_number": 7, "claim_id": "C7", "cost": "abc", "status": "open"},  # not a number
        {**row, "source_row_number": 8, "claim_id": "C8", "cost": "-5", "status": "pending"},
    ])
    got = run(con, "staging/stg_claims", "source_row_number, status, cost, problem_reason, problem_column",
              {"run_date": RUN_DATE})
    assert got == [
        (1, "open", 80, None, None),
        (2, "pending", None, None, None),
        (3, "open", None, None, None),
        (4, "approved", None, "missing_value", "cost"),
        (5, "approved", None, "missing_value", "cost"),
        (6, "lost", 10, "unknown_status", "status"),
        (7, "open", None, "unparseable_value", "cost"),
        (8, "pending", -5, "negative_cost", "cost"),
    ]
    detail = con.execute("select problem_detail from stg_claims where source_row_number = 6").fetchone()[0]
    assert detail == "status lost is not approved, rejected, no_fault_found, open or pending"
    assert set(ClaimSettings.open_statuses) == {"open", "pending"}


# --- intermediate and outputs: counted as returns, estimates kept apart --------------------------------

def _assigned(con, counted_statuses=("approved",)):  # type: ignore[no-untyped-def]
    group = {"product": "A", "build_month": d("2024-01"), "units_in_channel": 0, "sale_month": d("2024-02"),
             "warranty_months": 12, "units": 100}
    table(con, "sale_month_groups", SALE_MONTH_GROUPS, [group])
    claim = {"product": "A", "build_month": d("2024-01"), "is_unit_found": False, "is_quarantined": False,
             "months_in_service": 2, "claim_sale_month": d("2024-02"), "claim_date": d("2024-12-01")}
    table(con, "claims_on_warranty_clock", CLOCKED_CLAIMS, [
        {**claim, "source_row_number": 1, "claim_id": "C1", "status": "approved", "cost": 50},
        {**claim, "source_row_number": 2, "claim_id": "C2", "status": "open", "cost": 80},  # an estimate
        {**claim, "source_row_number": 3, "claim_id": "C3", "status": "pending"},  # no estimate
        # a serialised unit: its approved first claim, then an open later one (a repeat claim)
        {**claim, "source_row_number": 4, "claim_id": "C4", "status": "approved", "cost": 60, "serial": "S1",
         "failure_date": d("2024-05-01")},
        {**claim, "source_row_number": 5, "claim_id": "C5", "status": "open", "cost": 70, "serial": "S1",
         "failure_date": d("2024-09-01")},
        {**claim, "source_row_number": 6, "claim_id": "C6", "status": "open", "cost": 90,
         "months_in_service": 13},  # beyond the warranty: counted status, not in coverage
        {**claim, "source_row_number": 7, "claim_id": "C7", "status": "rejected", "cost": 0},
    ])
    run(con, "intermediate/claims_assigned_to_sale_month_groups", "source_row_number",
        {"counted_statuses": list(counted_statuses)})


@pytest.mark.parametrize("counted", [("approved",), ("approved", "rejected")])
def test_open_claims_count_as_returns_whatever_the_counted_statuses(con, counted):
    _assigned(con, counted)
    got = con.execute(
        "select source_row_number, is_open_claim, is_counted_status, is_return, is_repeat_claim, cost, estimated_cost"
        " from claims_assigned_to_sale_month_groups order by source_row_number"
    ).fetchall()
    rejected_counted = "rejected" in counted
    assert got == [
        (1, False, True, True, False, 50, None),
        (2, True, True, True, False, None, 80),  # cost is the settled cost: none yet
        (3, True, True, True, False, None, None),
        (4, False, True, True, False, 60, None),
        (5, True, True, False, True, None, 70),  # the unit's second counted claim
        (6, True, True, False, False, None, 90),
        (7, False, rejected_counted, rejected_counted, False, 0, None),
    ]


def test_open_claims_by_build_month_and_the_cost_tables_leave_estimates_out(con):
    _assigned(con)
    got = run(con, "outputs/open_claims_by_build_month",
              "product, build_month, open_claims, estimated_cost, open_claims_without_estimate")
    # counted open claims: rows 2, 3 and 5 (6 is out of coverage); estimates 80 + 70, one without
    assert got == [("A", d("2024-01"), 3, 150.0, 1)]
    costs = run(con, "outputs/claim_cost_by_product",
                "product, window_returns, window_mean_cost, all_time_returns, window_handled_claims",
                {"as_of_date": AS_OF, "cost_window_months": 12})
    # settled counted claims: 50 and 60 (mean 55); one rejected claim handled
    assert costs == [("A", 2, 55.0, 2, 1)]
    units = {"product": "varchar", "build_month": "date", "units": "bigint", "is_sale_date_imputed": "boolean",
             "warranty_months": "integer"}
    table(con, "units_aged_to_as_of", units, [
        {"product": "A", "build_month": d("2024-01"), "units": 100, "is_sale_date_imputed": False, "warranty_months": 12},
    ])
    table(con, "units_sold_or_in_channel", {"product": "varchar", "build_month": "date", "units": "double",
                                            "is_in_channel": "boolean"}, [])
    summary = run(con, "outputs/cohort_summary",
                  "returns_to_date, cost_to_date, repeat_claims_to_date, repeat_cost_to_date, claims_not_counted")
    # returns 1-4 (two of them open), cost to date 50 + 60 settled only; the open repeat claim costs nothing yet
    assert summary == [(4, 110.0, 1, 0.0, 1)]


# --- the reserve ---------------------------------------------------------------------------------------

def _summary() -> pd.DataFrame:
    return pd.DataFrame({
        "product": ["A", "A"], "build_month": [BUILD, dt.date(2024, 2, 1)], "units": [1000, 500],
        "units_in_channel": [0, 0], "returns_to_date": [10, 4], "cost_to_date": [500.0, 200.0],
    })


def _claim_costs(window_handled=5, window_returns=20) -> pd.DataFrame:
    return pd.DataFrame({
        "product": ["A"], "window_returns": [window_returns], "window_mean_cost": [50.0], "window_cost_sd": [10.0],
        "all_time_returns": [40], "all_time_mean_cost": [45.0], "all_time_cost_sd": [9.0],
        "window_handled_claims": [window_handled], "all_time_handled_claims": [12],
    })


def _forecast(claims_by_month: dict[dt.date, float]) -> pd.DataFrame:
    months = sorted(claims_by_month)
    claims = [claims_by_month[m] for m in months]
    return pd.DataFrame({
        "product": "A", "build_month": BUILD, "month": months, "expected_returns": claims,
        "expected_returns_product_model": claims, "expected_unreported_returns": 0.0, "expected_repeat_claims": 0.0,
        "expected_claims": claims,
    })


OPEN = pd.DataFrame({
    "product": ["A", "A"], "build_month": [BUILD, dt.date(2024, 2, 1)], "open_claims": [3, 1],
    "estimated_cost": [150.0, 0.0], "open_claims_without_estimate": [1, 1],
})


def _book(settings: ReserveSettings, open_claims=OPEN, as_of=AS_OF, claims=None):  # type: ignore[no-untyped-def]
    claims = claims if claims is not None else {dt.date(2025, 3, 1): 6.0, dt.date(2026, 6, 1): 2.0}
    return book_reserve(_summary(), _claim_costs(), _forecast(claims), {"A": "forecast (weibull)"}, {"A"}, settings,
                        as_of_date=as_of, open_claims=open_claims)


def test_handling_ratio_follows_the_cost_window():
    settings = ReserveSettings()
    costs = cost_per_claim_by_product(_claim_costs(), ["A", "B"], settings).set_index("product")
    assert costs.loc["A", "handled_per_claim"] == 5 / 20  # the trailing window, as the mean cost
    assert costs.loc["B", "handled_per_claim"] == 0.0 and costs.loc["B", "handled_basis"].startswith("none")
    all_time = cost_per_claim_by_product(_claim_costs(window_handled=0, window_returns=0), ["A"], settings)
    assert all_time.loc[0, "handled_per_claim"] == 12 / 40  # no settled claim in the window: all time
    configured = cost_per_claim_by_product(_claim_costs(), ["A"], ReserveSettings(cost_per_claim=70.0))
    assert configured.loc[0, "handled_per_claim"] == 5 / 20  # a configured cost still observes the ratio


def test_handling_reserve_by_hand_and_the_components_add_up():
    # hand computation: 8 expected claims at the window mean cost 50 = 400; handled per claim 5 / 20 = 0.25,
    # so 2 handled claims expected, at a handling cost of 30: 60 (rates 0). Open claims: build month 2024-01
    # has 3, estimates 150 and one without an estimate at the cost per claim 50: 200; 2024-02 has 1 without
    # an estimate: 50. Total 400 + 250 + 60 = 710.
    booked = _book(ReserveSettings(handling_cost_per_claim=30.0))
    table = booked.by_build_month.set_index("build_month")
    assert list(booked.by_build_month.columns) == list(RESERVE_COLUMNS)
    jan, feb = table.loc[BUILD], table.loc[dt.date(2024, 2, 1)]
    assert (jan["expected_future_claims"], jan["expected_handled_claims"]) == (8.0, 2.0)
    assert (jan["reserve_future_claims"], jan["reserve_handling"], jan["reserve_open_claims"]) == (400.0, 60.0, 200.0)
    assert (jan["open_claims"], jan["reserve"]) == (3, 660.0)
    assert (feb["open_claims"], feb["reserve_open_claims"], feb["reserve"]) == (1, 50.0, 50.0)
    # every row: the three components are the reserve exactly
    parts = booked.by_build_month[list(COMPONENTS)].sum(axis=1)
    assert (parts == booked.by_build_month["reserve"]).all()
    # open claims are due now: all current; future claims and handling split by month (March 2025 current,
    # June 2026 the 18th month after the as-of month: not); at rates 0 nothing is discounted
    assert jan["reserve_current"] == 6 * 50 + 200 + 6 * 0.25 * 30  # 545
    assert jan["reserve_non_current"] == 2 * 50 + 2 * 0.25 * 30  # 115
    assert jan["reserve_current"] + jan["reserve_non_current"] == jan["reserve"]
    assert jan["reserve_discounted"] == jan["reserve"] and feb["reserve_current"] == 50.0
    product = booked.by_product.iloc[0]
    assert (product["open_claims"], product["reserve"], product["reserve_open_claims"]) == (4, 710.0, 250.0)
    assert product["expected_handled_claims"] == 2.0 and product["reserve_handling"] == 60.0
    assert booked.total == 710.0
    # the costed forecast prices the future claims only
    assert booked.forecast["expected_cost"].sum() == product["reserve_future_claims"] == 400.0


def test_default_handling_cost_and_no_open_claims_leave_the_reserve_as_before():
    booked = _book(ReserveSettings(), open_claims=None)
    row = booked.by_build_month.set_index("build_month").loc[BUILD]
    assert row["reserve_handling"] == 0.0 and row["expected_handled_claims"] == 2.0  # counted, not priced
    assert row["reserve_open_claims"] == 0.0 and row["open_claims"] == 0
    assert row["reserve"] == row["reserve_future_claims"] == 8 * 50.0
    assert booked.warnings == ()


def test_open_claims_are_neither_inflated_nor_discounted_and_handling_is_timed_like_the_claims():
    settings = ReserveSettings(handling_cost_per_claim=30.0, annual_inflation_rate=0.10, annual_discount_rate=0.05)
    booked = _book(settings)
    jan = booked.by_build_month.set_index("build_month").loc[BUILD]
    # handling rides on the claims' own factors: its ratio to the future claims' part is (0.25 x 30) / 50
    assert jan["reserve_handling"] == pytest.approx(jan["reserve_future_claims"] * 7.5 / 50.0, rel=1e-12)
    assert jan["reserve_future_claims"] > 400.0  # inflated
    assert jan["reserve_open_claims"] == 200.0  # known today, due now
    assert jan["reserve"] == jan["reserve_future_claims"] + 200.0 + jan["reserve_handling"]
    # the same book without the open claims: every amount differs by exactly their 200, all of it current
    without_open = _book(settings, open_claims=None).by_build_month.set_index("build_month").loc[BUILD]
    assert jan["reserve_discounted"] - 200.0 == pytest.approx(without_open["reserve_discounted"], rel=1e-12)
    assert jan["reserve_current"] - 200.0 == pytest.approx(without_open["reserve_current"], rel=1e-12)
    assert jan["reserve_non_current"] == pytest.approx(without_open["reserve_non_current"], rel=1e-12)
    assert jan["reserve_current_discounted"] - 200.0 == pytest.approx(
        without_open["reserve_current_discounted"], rel=1e-12
    )
    assert jan["reserve_non_current_discounted"] == pytest.approx(without_open["reserve_non_current_discounted"], rel=1e-12)
    # a flagged month's excess would bring its handled claims too: none here (equal columns)
    assert jan["reserve_added_by_flagged_month"] == 0.0


def test_prediction_intervals_shift_by_the_open_claims_and_the_handling():
    claims = {dt.date(2025, 3, 1): 8.0}
    prediction = SimpleNamespace(
        by_build_month=pd.DataFrame({
            "product": ["A", "A"], "build_month": [pd.Timestamp(BUILD), pd.Timestamp("2024-02-01")],
            "returns_lower": [3, 0], "returns_median": [8, 0], "returns_upper": [14, 0],
            "reserve_lower": [150.0, 0.0], "reserve_median": [400.0, 0.0], "reserve_upper": [700.0, 0.0],
        }),
        reserve_by_product=pd.DataFrame({
            "product": ["A"], "reserve_lower": [150.0], "reserve_median": [400.0], "reserve_upper": [700.0],
        }),
        by_product=pd.DataFrame({"product": ["A"], "horizon": ["to_warranty_end"], "lower": [3], "median": [8],
                                 "upper": [14]}),
        by_month=pd.DataFrame({"product": ["A"], "month": [pd.Timestamp("2025-03-01")], "returns_lower": [3],
                               "returns_median": [8], "returns_upper": [14]}),
    )
    booked, _ = with_prediction_intervals(_book(ReserveSettings(handling_cost_per_claim=30.0), claims=claims), prediction)
    # build month 2024-01: + open 200 + handling 8 x 0.25 x 30 = 60; 2024-02: + open 50; product: + 250 + 60
    jan = booked.by_build_month.set_index("build_month").loc[BUILD]
    assert [jan[c] for c in ("reserve_lower", "reserve_median", "reserve_upper")] == [410.0, 660.0, 960.0]
    assert jan["reserve_median"] == jan["reserve"]  # the median of the future claims is their expectation here
    feb = booked.by_build_month.set_index("build_month").loc[dt.date(2024, 2, 1)]
    assert [feb[c] for c in ("reserve_lower", "reserve_upper")] == [50.0, 50.0]
    product = booked.by_product.iloc[0]
    assert [product[c] for c in ("reserve_lower", "reserve_median", "reserve_upper")] == [460.0, 710.0, 1010.0]
    assert product["reserve"] == 710.0 and booked.handling_cost_per_claim == 30.0


def test_an_open_claim_without_estimate_and_without_cost_per_claim_leaves_the_reserve_empty():
    costs = pd.DataFrame({"product": ["A"], "window_returns": [0], "window_mean_cost": [math.nan],
                          "all_time_returns": [0], "all_time_mean_cost": [math.nan]})
    booked = book_reserve(_summary(), costs, _forecast({dt.date(2025, 3, 1): 1.0}), {"A": "forecast (weibull)"},
                          {"A"}, ReserveSettings(handling_cost_per_claim=5.0), as_of_date=AS_OF, open_claims=OPEN)
    assert booked.by_build_month["reserve_open_claims"].isna().all() and math.isnan(booked.total)
    assert any("no settled counted claim" in w for w in booked.warnings)
    with pytest.raises(ValueError, match="open_claims lacks"):
        book_reserve(_summary(), _claim_costs(), _forecast({}), {}, set(), ReserveSettings(),
                     open_claims=OPEN.drop(columns="estimated_cost"))


def test_reserve_by_product_sums_the_components_to_the_cent():
    booked = _book(ReserveSettings(handling_cost_per_claim=12.34, annual_inflation_rate=0.03),
                   claims={dt.date(2025, m, 1): 0.37 * m for m in range(1, 13)})
    totals = reserve_by_product(booked.by_build_month).iloc[0]
    assert round(sum(totals[c] for c in COMPONENTS), 2) == round(totals["reserve"], 2)


def test_handling_cost_key_parses_and_open_statuses_is_not_a_key():
    settings = settings_from_document({"reserve": {"handling_cost_per_claim": 12}}, "settings.toml")["reserve"]
    assert settings.handling_cost_per_claim == 12.0 and ReserveSettings().handling_cost_per_claim == 0.0
    with pytest.raises(ConfigError, match="reserve.handling_cost_per_claim must be a number >= 0"):
        settings_from_document({"reserve": {"handling_cost_per_claim": -1}}, "settings.toml")
    with pytest.raises(ConfigError, match="open_statuses"):
        settings_from_document({"claims": {"open_statuses": ["open"]}}, "settings.toml")
    with pytest.raises(ConfigError, match="counted_statuses"):
        settings_from_document({"claims": {"counted_statuses": ["open"]}}, "settings.toml")  # always counted


# --- the demo -------------------------------------------------------------------------------------------

def test_demo_reserve_components_add_up_to_the_cent(demo_run_copy):
    # the demo's open claims (data_demo/README.md): 304 counted, filed in the 4 weeks to the as-of date,
    # 237 with estimates summing to 27,640.00 and 67 without (priced at their product's cost per claim)
    by_product = pd.read_parquet(demo_run_copy / "reserve_by_product.parquet")
    by_build_month = pd.read_parquet(demo_run_copy / "reserve.parquet")
    for table in (by_product, by_build_month):
        parts = table[list(COMPONENTS)].sum(axis=1)
        assert (parts.round(2) == table["reserve"].round(2)).all()
        assert (table["reserve_handling"] == 0.0).all()  # no handling cost configured
    assert round(by_product["reserve"].sum(), 2) == round(by_build_month["reserve"].sum(), 2) == 1_405_839.97
    assert int(by_product["open_claims"].sum()) == 304
    assert round(by_product["reserve_open_claims"].sum(), 2) == 34_662.46
    assert round(by_product["reserve_future_claims"].sum(), 2) == 1_371_177.51
    assert (by_product["reserve_lower"] <= by_product["reserve"]).all()
    assert (by_product["reserve"] <= by_product["reserve_upper"]).all()
