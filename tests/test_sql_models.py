"""One SQL model at a time, on in-memory DuckDB: a handful of hand-written input rows and the exact rows
expected out, worked out by hand from the rules in each model's header (common practice, no source).

Input tables hold only the columns the model reads; a column left out of a row is NULL.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json

import pytest

from warranty_forecast.stages import sql_runner
from sql_tables import CLOCKED_CLAIMS, SALE_MONTH_GROUPS, d, run, table  # tests/sql_tables.py
from warranty_forecast.stages.shaping import ShapedData

AS_OF = dt.date(2024, 12, 31)
RAW_TABLES = ("raw_shipments", "raw_shipments_malformed", "raw_claims", "raw_claims_malformed")
MONTH = 365.25 / 12  # days in a month of service


# --------------------------------------------------------------------------------------- the runner


def test_plan_runs_every_model_after_what_it_reads_and_outputs_read_no_raw_table(con):
    plan = sql_runner.plan_models(con, RAW_TABLES)
    position = {model.name: index for index, model in enumerate(plan)}
    assert {model.layer for model in plan} == {"staging", "intermediate", "outputs"}
    for model in plan:
        assert all(position[table] < position[model.name] for table in model.reads if table in position)
        if model.layer == "outputs":
            assert model.sort and not any(table.startswith("raw_") for table in model.reads)
    before_as_of = sql_runner.upstream_of(plan, "newest_valid_dates")
    assert [model.name for model in before_as_of] == ["stg_claims", "stg_shipments", "newest_valid_dates"]


def test_each_output_is_one_field_of_shaped_data():
    outputs = {path.split("/")[1] for path in sql_runner.layer_models("outputs")}
    fields = {field.name for field in dataclasses.fields(ShapedData)}
    assert outputs <= fields


def test_a_header_that_does_not_match_its_text_stops_the_plan(con, monkeypatch):
    read = sql_runner.read_model_sql

    def edited(path):
        text = read(path)
        if path == "outputs/fit_returns":
            return text.replace("-- Reads: returns_counted_by_group_and_month.", "-- Reads: sale_month_groups.")
        if path == "outputs/known_products":
            return text.replace("-- Reads: stg_shipments.", "-- Reads: raw_shipments.").replace(
                "from stg_shipments", "from raw_shipments"
            )
        if path == "outputs/run_facts":
            return text.replace("-- Sort: fact\n", "")
        if path == "outputs/cohort_summary":
            return text.replace("-- Parameters: none.", "-- Parameters: $as_of_date.")
        return text

    monkeypatch.setattr(sql_runner, "read_model_sql", edited)
    with pytest.raises(ValueError) as raised:
        sql_runner.plan_models(con, RAW_TABLES)
    message = str(raised.value)
    assert "outputs/fit_returns reads ['returns_counted_by_group_and_month'], its header says ['sale_month_groups']" in message
    assert "outputs/known_products (outputs) may not read raw_shipments (raw)" in message
    assert "outputs/run_facts has no '-- Sort:' line" in message
    assert "outputs/cohort_summary uses [], its header says ['as_of_date']" in message


def test_header_fields_join_continuation_lines():
    sql = "-- m: what\n-- Reads: a, b,\n--   c.\n-- Sort: x\n-- free text\nselect 1"
    assert sql_runner.header_fields(sql) == {"Reads": "a, b, c.", "Sort": "x"}


# ------------------------------------------------------------------------------- claims, step by step

STG_CLAIMS = {
    "source_row_number": "bigint", "claim_id": "varchar", "product": "varchar", "build_month": "date",
    "sale_date": "date", "failure_date": "date", "claim_date": "date", "cost": "decimal(18, 2)", "status": "varchar",
    "failure_code": "varchar", "serial": "varchar", "is_quarantined": "boolean", "problem_column": "varchar",
    "problem_reason": "varchar", "problem_detail": "varchar",
}
UNIT_PARTS = {
    "product": "varchar", "build_month": "date", "sale_month": "date", "warranty_months": "integer",
    "warranty_start_date": "date", "is_sale_date_imputed": "boolean", "is_in_channel": "boolean",
    "units": "double", "observed_age_months": "double",
}
UNITS_AGED = {
    "serial": "varchar", "product": "varchar", "build_month": "date", "ship_date": "date", "known_sale_date": "date",
    "warranty_start_date": "date", "is_sale_date_imputed": "boolean", "sale_month": "date",
    "warranty_months": "integer", "units": "bigint", "observed_age_months": "double", "is_in_channel": "boolean",
}


def test_claims_checked_against_shipments(con):
    table(con, "stg_shipments", {"product": "varchar", "build_month": "date", "is_quarantined": "boolean"}, [
        {"product": "A", "build_month": d("2024-01"), "is_quarantined": False},
        {"product": "B", "build_month": d("2024-01"), "is_quarantined": False},
        {"product": "C", "build_month": d("2024-01"), "is_quarantined": True},  # C's only row is bad
        {"product": "D", "build_month": d("2024-01"), "is_quarantined": False},
    ])
    unit = {"build_month": d("2024-01"), "is_sale_date_imputed": False, "warranty_months": 12, "is_in_channel": False}
    table(con, "units_aged_to_as_of", UNITS_AGED, [
        {**unit, "serial": "S1", "product": "A", "known_sale_date": d("2024-02-01"), "warranty_start_date": d("2024-02-01")},
        {**unit, "product": "A", "warranty_start_date": d("2024-02-10"), "is_sale_date_imputed": True},
        {**unit, "product": "A", "known_sale_date": d("2024-03-01"), "warranty_start_date": d("2024-03-01")},
        {**unit, "serial": "S2", "product": "B", "known_sale_date": d("2024-01-20"), "warranty_start_date": d("2024-01-20")},
        {**unit, "product": "D", "warranty_start_date": d("2025-02-01"), "is_in_channel": True},  # still in the channel
    ])
    claim = {"build_month": d("2024-01"), "failure_date": d("2024-03-15"), "claim_date": d("2024-03-20"),
             "is_quarantined": False}
    table(con, "stg_claims", STG_CLAIMS, [
        {**claim, "source_row_number": 1, "product": "A", "serial": "S1"},
        {**claim, "source_row_number": 2, "product": "C"},
        {**claim, "source_row_number": 3, "product": "D"},
        {**claim, "source_row_number": 4, "product": "A", "serial": "S2"},
        {**claim, "source_row_number": 5, "product": "A", "serial": "S1", "failure_date": d("2024-01-25")},
        {**claim, "source_row_number": 6, "product": "A", "claim_date": d("2025-01-05")},  # after the as-of date
        {**claim, "source_row_number": 7, "product": "A", "is_quarantined": True},  # failed a staging check
        {**claim, "source_row_number": 8, "product": "B", "serial": "S9"},  # a serial no unit has
    ])
    got = run(
        con, "intermediate/claims_checked_against_shipments",
        "source_row_number, is_unit_found, unit_warranty_start_date, cohort_median_warranty_start_date,"
        " is_quarantined, problem_column, problem_reason, problem_detail",
        {"as_of_date": AS_OF},
    )
    # A's units in service start 02-01, 02-10, 03-01: the (lower) median is 02-10; B's only unit 01-20
    assert got == [
        (1, True, d("2024-02-01"), d("2024-02-10"), False, None, None, None),
        (2, False, None, None, True, "build_month", "cohort_never_shipped",
         "no valid shipment of product C build month 2024-01"),
        (3, False, None, None, True, "build_month", "cohort_not_in_service",
         "no unit of product D build month 2024-01 was in service by 2024-12-31"),
        (4, True, d("2024-01-20"), d("2024-02-10"), True, "serial", "serial_mismatch",
         "serial S2 was shipped as product B build month 2024-01"),
        (5, True, d("2024-02-01"), d("2024-02-10"), True, "failure_date", "failure_before_sale",
         "failure_date 2024-01-25 is before the unit's sale_date 2024-02-01"),
        (8, False, None, d("2024-01-20"), False, None, None, None),
    ]


CHECKED_CLAIMS = {
    **STG_CLAIMS, "is_unit_found": "boolean", "unit_warranty_start_date": "date",
    "is_unit_sale_date_imputed": "boolean", "unit_sale_month": "date", "unit_warranty_months": "integer",
    "cohort_median_warranty_start_date": "date",
}


def test_claims_on_warranty_clock(con):
    claim = {"product": "A", "build_month": d("2024-01"), "is_unit_found": False, "is_quarantined": False,
             "cohort_median_warranty_start_date": d("2024-02-10")}
    table(con, "claims_checked_against_shipments", CHECKED_CLAIMS, [
        # 1 its own sale date wins over the unit's and the cohort's clock
        {**claim, "source_row_number": 1, "sale_date": d("2024-02-01"), "failure_date": d("2024-03-15"),
         "is_unit_found": True, "unit_warranty_start_date": d("2024-01-05"), "is_unit_sale_date_imputed": False},
        # 2 the unit's known clock
        {**claim, "source_row_number": 2, "failure_date": d("2024-06-01"), "is_unit_found": True,
         "unit_warranty_start_date": d("2024-01-20"), "is_unit_sale_date_imputed": False},
        # 3 the unit's imputed clock; failed the day it started: months in service 1, not 0
        {**claim, "source_row_number": 3, "failure_date": d("2024-02-05"), "is_unit_found": True,
         "unit_warranty_start_date": d("2024-02-05"), "is_unit_sale_date_imputed": True},
        # 4 no unit: the cohort's median clock
        {**claim, "source_row_number": 4, "failure_date": d("2024-05-10")},
        # 5 quarantined claims keep their problem
        {**claim, "source_row_number": 5, "failure_date": d("2024-05-10"), "is_quarantined": True,
         "problem_column": "serial", "problem_reason": "serial_mismatch", "problem_detail": "x"},
    ])
    got = run(
        con, "intermediate/claims_on_warranty_clock",
        "source_row_number, warranty_start_date, is_sale_date_imputed, claim_sale_month, months_in_service,"
        " is_quarantined, problem_reason",
    )
    assert got == [
        (1, d("2024-02-01"), False, d("2024-02"), 2, False, None),  # 43 days = 1.41 months
        (2, d("2024-01-20"), False, d("2024-01"), 5, False, None),  # 133 days = 4.37 months
        (3, d("2024-02-05"), True, d("2024-02"), 1, False, None),  # 0 days
        (4, d("2024-02-10"), True, d("2024-02"), 3, False, None),  # 90 days = 2.96 months
        (5, d("2024-02-10"), True, d("2024-02"), 3, True, "serial_mismatch"),
    ]
    ages = dict(run(con, "intermediate/claims_on_warranty_clock", "source_row_number, age_months"))
    assert ages[1] == pytest.approx(43 / MONTH, rel=1e-12) and ages[3] == 0




def test_claims_assigned_to_sale_month_groups(con):
    group = {"product": "A", "build_month": d("2024-01"), "units_in_channel": 0}
    table(con, "sale_month_groups", SALE_MONTH_GROUPS, [
        {**group, "sale_month": d("2024-02"), "warranty_months": 12, "units": 100},
        {**group, "sale_month": d("2024-02"), "warranty_months": 24, "units": 100},  # as many units, longer
        {**group, "sale_month": d("2024-04"), "warranty_months": 12, "units": 50},
        {**group, "sale_month": d("2024-03"), "warranty_months": 12, "units": 30, "units_in_channel": 30},
        {**group, "sale_month": d("2024-06"), "warranty_months": 12, "units": 10},
        {**group, "build_month": d("2024-02"), "sale_month": d("2024-03"), "warranty_months": 12, "units": 10},
        {**group, "build_month": d("2024-02"), "sale_month": d("2024-03"), "warranty_months": 24, "units": 20},
    ])
    claim = {"product": "A", "build_month": d("2024-01"), "status": "approved", "is_unit_found": False,
             "is_quarantined": False, "months_in_service": 2, "claim_sale_month": d("2024-02")}
    table(con, "claims_on_warranty_clock", CLOCKED_CLAIMS, [
        {**claim, "source_row_number": 1},  # same sale month; units tie: the shorter warranty
        {**claim, "source_row_number": 2, "claim_sale_month": d("2024-03")},  # 03 all in channel: 02 before 04
        {**claim, "source_row_number": 3, "claim_sale_month": d("2024-05")},  # 04 and 06 as near: the earlier
        {**claim, "source_row_number": 4, "claim_sale_month": d("2024-03"), "is_unit_found": True,
         "unit_sale_month": d("2024-03"), "unit_warranty_months": 12, "serial": "S1"},  # the unit's group
        {**claim, "source_row_number": 5, "status": "rejected"},
        {**claim, "source_row_number": 6, "months_in_service": 13},  # beyond the 12-month warranty
        {**claim, "source_row_number": 7, "is_quarantined": True},
        {**claim, "source_row_number": 8, "serial": "S9"},  # a serial no unit has
        {**claim, "source_row_number": 9, "build_month": d("2024-02"), "claim_sale_month": d("2024-03")},  # most units
    ])
    got = run(
        con, "intermediate/claims_assigned_to_sale_month_groups",
        "source_row_number, sale_month, warranty_months, is_group_reassigned, is_serial_unknown,"
        " is_counted_status, is_in_coverage, is_return",
        {"counted_statuses": ["approved"]},
    )
    assert got == [
        (1, d("2024-02"), 12, False, False, True, True, True),
        (2, d("2024-02"), 12, True, False, True, True, True),
        (3, d("2024-04"), 12, True, False, True, True, True),
        (4, d("2024-03"), 12, False, False, True, True, True),
        (5, d("2024-02"), 12, False, False, False, True, False),
        (6, d("2024-02"), 12, False, False, True, False, False),
        (7, None, None, False, False, True, None, False),
        (8, d("2024-02"), 12, False, True, True, True, True),
        (9, d("2024-03"), 24, False, False, True, True, True),
    ]


# ---------------------------------------------------------------------------- units on the warranty clock

STG_SHIPMENTS = {
    "source_row_number": "bigint", "product": "varchar", "build_month": "date", "ship_date": "date",
    "sale_date": "date", "units": "bigint", "warranty_months": "integer", "serial": "varchar",
    "is_quarantined": "boolean",
}


def test_newest_valid_dates(con):
    table(con, "stg_claims", {"claim_date": "date", "is_quarantined": "boolean"}, [
        {"claim_date": d("2024-03-01"), "is_quarantined": False},
        {"claim_date": d("2024-05-01"), "is_quarantined": False},
        {"claim_date": d("2024-09-01"), "is_quarantined": True},  # later, but failed a check
        {"is_quarantined": True},  # no date at all
    ])
    table(con, "stg_shipments", {"ship_date": "date", "is_quarantined": "boolean"}, [
        {"ship_date": d("2024-06-30"), "is_quarantined": False},
        {"ship_date": d("2024-07-01"), "is_quarantined": True},
    ])
    assert run(con, "intermediate/newest_valid_dates", "newest_claim_date, newest_ship_date") == [
        (d("2024-05-01"), d("2024-06-30")),
    ]
    con.execute("delete from stg_claims where not is_quarantined")  # no valid claim left: NULL, still one row
    assert run(con, "intermediate/newest_valid_dates", "newest_claim_date, newest_ship_date") == [
        (None, d("2024-06-30")),
    ]


def test_units_aged_to_as_of(con):
    row = {"product": "A", "build_month": d("2024-01"), "units": 1, "warranty_months": 12, "is_quarantined": False}
    table(con, "stg_shipments", STG_SHIPMENTS, [
        # A's lags known by the as-of date: 10 (5 units), 20 and 60 days; the longest, 60 days, makes rows 1-4
        # mature: G = 5/7 at 10 days, 6/7 at 20, 1 at 60; m = 10/17 (row 4's units). Hand arithmetic of the
        # sold share and the conditional medians: tests/test_sale_date_imputation.py
        {**row, "source_row_number": 1, "ship_date": d("2024-01-01"), "sale_date": d("2024-01-11"), "units": 5,
         "warranty_months": 24, "serial": "S1"},
        {**row, "source_row_number": 2, "ship_date": d("2024-01-01"), "sale_date": d("2024-01-21"),
         "warranty_months": None},  # the default warranty
        {**row, "source_row_number": 3, "ship_date": d("2024-01-01"), "sale_date": d("2024-03-01")},
        # 213 days ago: G = 1, sold; its clock the median lag given a lag of at most 213 days, 10 days
        {**row, "source_row_number": 4, "ship_date": d("2024-06-01"), "units": 10},
        # sold after the as-of date: its 45-day lag is not known then; 30 days ago, G(30) = 6/7: sold share 60/77,
        # clock the median lag given at most 30 days (10 days)
        {**row, "source_row_number": 5, "ship_date": d("2024-12-01"), "sale_date": d("2025-01-15")},
        {**row, "source_row_number": 6, "ship_date": d("2024-12-31")},  # G(0) = 0: in the channel, clock + 10 days
        {**row, "source_row_number": 7, "ship_date": d("2025-01-02")},  # shipped after the as-of date
        {**row, "source_row_number": 8, "ship_date": d("2024-01-01"), "sale_date": d("2024-01-02"),
         "is_quarantined": True},  # failed a staging check: neither a unit nor a lag
        # B has no known sale date: all products' mature rows' lags 10 (5 units), 20, 60, 90 (6 units); median 60
        {**row, "source_row_number": 9, "product": "B", "ship_date": d("2024-03-01"), "units": 3,
         "warranty_months": 6},  # 245 days = 8.05 months: observed age capped at the 6-month warranty
        {**row, "source_row_number": 10, "product": "C", "ship_date": d("2023-01-01"), "sale_date": d("2023-04-01"),
         "units": 2},  # 640 days = 21.03 months: capped at 12
        {**row, "source_row_number": 11, "product": "C", "ship_date": d("2024-10-02"), "sale_date": d("2024-12-31"),
         "units": 4},  # sold on the as-of date: known, age 0, in service
    ])
    parameters = {"as_of_date": AS_OF, "default_warranty_months": 12}
    sql_runner.run_model(con, "intermediate/ship_to_sale_lag_distribution", parameters)
    got = run(
        con, "intermediate/units_aged_to_as_of",
        "source_row_number, known_sale_date, is_sold_after_as_of, is_sale_date_imputed, warranty_start_date,"
        " sale_month, warranty_months, units, serial, is_in_channel",
        parameters,
    )
    assert got == [
        (1, d("2024-01-11"), False, False, d("2024-01-11"), d("2024-01"), 24, 5, "S1", False),
        (2, d("2024-01-21"), False, False, d("2024-01-21"), d("2024-01"), 12, 1, None, False),
        (3, d("2024-03-01"), False, False, d("2024-03-01"), d("2024-03"), 12, 1, None, False),
        (4, None, False, True, d("2024-06-11"), d("2024-06"), 12, 10, None, False),
        (5, None, True, True, d("2024-12-11"), d("2024-12"), 12, 1, None, False),
        (6, None, False, True, d("2025-01-10"), d("2025-01"), 12, 1, None, True),
        (9, None, False, True, d("2024-04-30"), d("2024-04"), 6, 3, None, False),
        (10, d("2023-04-01"), False, False, d("2023-04-01"), d("2023-04"), 12, 2, None, False),
        (11, d("2024-12-31"), False, False, d("2024-12-31"), d("2024-12"), 12, 4, None, False),
    ]
    days = {1: 355, 2: 345, 3: 305, 4: 203, 5: 20, 6: 0, 9: 245, 10: 640, 11: 0}  # start to 2024-12-31
    ages = run(
        con, "intermediate/units_aged_to_as_of", "source_row_number, age_months, observed_age_months", parameters
    )
    warranty = {1: 24, 9: 6}  # 12 months for the others
    # the start date is day 1 of service: D days after it, a unit has D + 1 days in service (a unit sold
    # on the as-of date, 1 day); one still in the channel (row 6), none. Observed ages stop at the end of
    # the warranty's last month on the day grid: floor(W x 30.4375) + 1 days (183 days for 6 months, 366
    # for 12, 731 for 24; hand arithmetic)
    cover_days = {6: 183, 12: 366, 24: 731}
    in_service = {number: 0 if number == 6 else days[number] + 1 for number in days}
    assert ages == [
        pytest.approx(
            (number, in_service[number] / MONTH,
             min(in_service[number], cover_days[warranty.get(number, 12)]) / MONTH), rel=1e-12
        )
        for number in sorted(days)
    ]


def test_units_aged_to_as_of_start_at_the_ship_date_when_no_sale_date_is_known(con):
    row = {"product": "A", "build_month": d("2024-10"), "units": 1, "warranty_months": 12, "is_quarantined": False}
    table(con, "stg_shipments", STG_SHIPMENTS, [
        {**row, "source_row_number": 1, "ship_date": d("2024-11-01")},
        {**row, "source_row_number": 2, "product": "B", "ship_date": d("2024-12-01"),
         "sale_date": d("2025-02-01")},  # sold after the as-of date: no lag known by then
        {**row, "source_row_number": 3, "ship_date": d("2024-11-01"), "sale_date": d("2024-11-06"),
         "is_quarantined": True},  # a 5-day lag, but on a row that failed a check
    ])
    sql_runner.run_model(con, "intermediate/ship_to_sale_lag_distribution", {"as_of_date": AS_OF})
    got = run(
        con, "intermediate/units_aged_to_as_of",
        "source_row_number, is_sale_date_imputed, warranty_start_date, is_in_channel, observed_age_months",
        {"as_of_date": AS_OF, "default_warranty_months": 12},
    )
    assert got == [
        pytest.approx((1, True, d("2024-11-01"), False, 61 / MONTH)),  # lag 0 days; 60 days after: 61 in service
        pytest.approx((2, True, d("2024-12-01"), False, 31 / MONTH)),
    ]


def test_sale_month_groups(con):
    unit = {"product": "A", "build_month": d("2024-01"), "sale_month": d("2024-12"), "warranty_months": 12,
            "is_in_channel": False}
    table(con, "units_sold_or_in_channel", UNIT_PARTS, [
        {**unit, "units": 10},
        {**unit, "units": 4.75},  # the sold part of a row without a sale date
        {**unit, "units": 0.25, "is_in_channel": True},  # its channel part, clock after a mid-month as-of date
        {**unit, "units": 5, "is_in_channel": True},  # same group; clock starts after a mid-month as-of date
        {**unit, "units": 7, "warranty_months": 24},  # another warranty length
        {**unit, "units": 2, "sale_month": d("2024-11")},  # another sale month
        {**unit, "units": 4, "build_month": d("2024-02")},  # another build month
        {**unit, "units": 1, "product": "B"},  # another product
    ])
    got = run(con, "intermediate/sale_month_groups",
              "product, build_month, sale_month, warranty_months, units, units_in_channel")
    assert got == [
        ("A", d("2024-01"), d("2024-11"), 12, 2, 0),
        ("A", d("2024-01"), d("2024-12"), 12, 20, 5.25),
        ("A", d("2024-01"), d("2024-12"), 24, 7, 0),
        ("A", d("2024-02"), d("2024-12"), 12, 4, 0),
        ("B", d("2024-01"), d("2024-12"), 12, 1, 0),
    ]


# ------------------------------------------------------------------------------------- cells of the fit

GROUP = {"product": "A", "build_month": d("2024-01"), "sale_month": d("2024-02"), "warranty_months": 12}


def test_returns_counted_by_group_and_month(con):
    table(con, "claims_assigned_to_sale_month_groups", {
        **{column: kind for column, kind in SALE_MONTH_GROUPS.items() if not column.startswith("units")},
        "months_in_service": "integer", "cost": "decimal(18, 2)", "is_return": "boolean",
    }, [
        {**GROUP, "months_in_service": 2, "cost": 50, "is_return": True},
        {**GROUP, "months_in_service": 2, "cost": 20.5, "is_return": True},
        {**GROUP, "months_in_service": 2, "cost": 99, "is_return": False},  # not a return
        {**GROUP, "months_in_service": 3, "cost": 10, "is_return": True},
    ])
    got = run(con, "intermediate/returns_counted_by_group_and_month", "months_in_service, returns, return_cost")
    assert [(mis, returns, float(cost)) for mis, returns, cost in got] == [(2, 2, 70.5), (3, 1, 10.0)]


def test_sale_month_group_survivors(con):
    table(con, "sale_month_groups", SALE_MONTH_GROUPS, [
        {**GROUP, "units": 150, "units_in_channel": 0},
        {**GROUP, "sale_month": d("2024-03"), "units": 1, "units_in_channel": 0},  # more returns than units
        {**GROUP, "sale_month": d("2024-04"), "units": 5, "units_in_channel": 5},  # no returns
    ])
    table(con, "returns_counted_by_group_and_month", {
        **{column: kind for column, kind in SALE_MONTH_GROUPS.items() if not column.startswith("units")},
        "months_in_service": "integer", "returns": "bigint",
    }, [
        {**GROUP, "months_in_service": 2, "returns": 1},
        {**GROUP, "months_in_service": 4, "returns": 1},
        {**GROUP, "sale_month": d("2024-03"), "months_in_service": 1, "returns": 2},
    ])
    got = run(con, "intermediate/sale_month_group_survivors", "sale_month, group_units, group_returns, group_survivors")
    assert got == [(d("2024-02"), 150, 2, 148), (d("2024-03"), 1, 2, 0), (d("2024-04"), 5, 0, 5)]


def test_suspensions_shared_by_start_date(con):
    unit = {**GROUP, "observed_age_months": 10.5, "is_in_channel": False}
    table(con, "units_sold_or_in_channel", UNIT_PARTS, [
        {**unit, "warranty_start_date": d("2024-02-01"), "units": 100},
        {**unit, "warranty_start_date": d("2024-02-16"), "units": 29.75, "observed_age_months": 10.0},  # sold parts:
        {**unit, "warranty_start_date": d("2024-02-16"), "units": 20.25, "observed_age_months": 10.0},  # same date
    ])
    table(con, "sale_month_group_survivors", {
        **{column: kind for column, kind in SALE_MONTH_GROUPS.items() if not column.startswith("units")},
        "group_units": "bigint", "group_returns": "hugeint", "group_survivors": "hugeint",
    }, [{**GROUP, "group_units": 150, "group_returns": 2, "group_survivors": 148}])
    got = run(con, "intermediate/suspensions_shared_by_start_date", "warranty_start_date, observed_age_months, units, suspensions")
    # 148 survivors shared 100 : 50
    assert got == [(d("2024-02-01"), 10.5, 100, 100 * 148 / 150), (d("2024-02-16"), 10.0, 50, 50 * 148 / 150)]


# -------------------------------------------------------------------------- quarantine and reconciliation

CHECKED = {"source_row_number": "bigint", "is_quarantined": "boolean", "problem_column": "varchar",
           "problem_reason": "varchar", "problem_detail": "varchar"}
MALFORMED = {"source_row_number": "bigint", "problem_column": "varchar", "problem_reason": "varchar",
             "problem_detail": "varchar", "raw_values": "varchar"}


def quarantine_inputs(con) -> None:
    table(con, "raw_shipments", {"source_row_number": "bigint", "product": "varchar", "units": "varchar"}, [
        {"source_row_number": 1, "product": "A", "units": "1"},
        {"source_row_number": 3, "product": "A", "units": "0"},
    ])
    table(con, "raw_shipments_malformed", MALFORMED, [
        {"source_row_number": 2, "problem_column": "units", "problem_reason": "malformed_line",
         "problem_detail": "missing columns", "raw_values": '{"line":"A,2024-01"}'},
    ])
    table(con, "stg_shipments", {**CHECKED, "ship_date": "date"}, [
        {"source_row_number": 1, "is_quarantined": False, "ship_date": d("2024-01-10")},
        {"source_row_number": 3, "is_quarantined": True, "problem_column": "units", "problem_reason": "units_below_one",
         "problem_detail": "units 0 is below 1"},
    ])
    table(con, "raw_claims", {"source_row_number": "bigint", "claim_id": "varchar", "serial": "varchar"}, [
        {"source_row_number": 1, "claim_id": "K1"},
        {"source_row_number": 2, "claim_id": "K2", "serial": "S9"},
        {"source_row_number": 3, "claim_id": "K3"},
        {"source_row_number": 4, "claim_id": "K4"},
    ])
    table(con, "raw_claims_malformed", MALFORMED, [])
    table(con, "stg_claims", {**CHECKED, "claim_date": "date"}, [
        {"source_row_number": 1, "is_quarantined": True, "problem_column": "claim_id", "problem_reason": "missing_value",
         "problem_detail": "claim_id is empty"},
        {"source_row_number": 2, "is_quarantined": False, "claim_date": d("2024-03-01")},
        {"source_row_number": 3, "is_quarantined": False, "claim_date": d("2025-03-01")},  # after the as-of date
        {"source_row_number": 4, "is_quarantined": False, "claim_date": d("2024-03-01")},
    ])
    table(con, "claims_checked_against_shipments", CHECKED, [
        {"source_row_number": 2, "is_quarantined": True, "problem_column": "serial",
         "problem_reason": "serial_mismatch", "problem_detail": "serial S9 was shipped as product B"},
        {"source_row_number": 4, "is_quarantined": False},
    ])


def test_rows_quarantined_with_reason_hold_each_row_as_read(con):
    quarantine_inputs(con)
    sql_runner.run_model(con, "intermediate/shipment_rows_quarantined", {})
    got = run(con, "intermediate/rows_quarantined_with_reason",
              "extract, source_row_number, problem_column, problem_reason, raw_values")
    assert [(*row[:4], json.loads(row[4])) for row in got] == [
        ("claims", 1, "claim_id", "missing_value", {"source_row_number": 1, "claim_id": "K1", "serial": None}),
        ("claims", 2, "serial", "serial_mismatch", {"source_row_number": 2, "claim_id": "K2", "serial": "S9"}),
        ("shipments", 2, "units", "malformed_line", {"line": "A,2024-01"}),
        ("shipments", 3, "units", "units_below_one", {"source_row_number": 3, "product": "A", "units": "0"}),
    ]


def test_reconciliation_accounts_for_every_row_read(con):
    quarantine_inputs(con)
    table(con, "units_aged_to_as_of", {"source_row_number": "bigint"}, [{"source_row_number": 1}])
    table(con, "claims_assigned_to_sale_month_groups", {"source_row_number": "bigint", "is_quarantined": "boolean"}, [
        {"source_row_number": 2, "is_quarantined": True},
        {"source_row_number": 4, "is_quarantined": False},
    ])
    files = {"shipments_file": "/data/s.csv", "claims_file": "/data/c.csv"}
    assert run(con, "intermediate/extracts_read", "extract, source_file, rows_read", files) == [
        ("claims", "/data/c.csv", 4), ("shipments", "/data/s.csv", 3),
    ]
    sql_runner.run_model(con, "intermediate/shipment_rows_quarantined", {})
    sql_runner.run_model(con, "intermediate/rows_quarantined_with_reason", {})
    assert run(con, "intermediate/rows_after_as_of", "extract, rows_after_as_of", {"as_of_date": AS_OF}) == [
        ("claims", 1), ("shipments", 0),
    ]
    got = run(con, "outputs/reconciliation",
              "extract, source_file, rows_read, rows_used, rows_quarantined, rows_after_as_of", {})
    assert got == [("claims", "/data/c.csv", 4, 1, 2, 1), ("shipments", "/data/s.csv", 3, 1, 2, 0)]
    quarantine = run(con, "outputs/quarantine", 'extract, source_file, row_number, "column", reason')
    assert quarantine[0] == ("claims", "/data/c.csv", 1, "claim_id", "missing_value") and len(quarantine) == 4


# ------------------------------------------------------------------------------------------------ outputs

ASSIGNED_CLAIMS = {
    "product": "varchar", "build_month": "date", "claim_date": "date", "cost": "decimal(18, 2)", "status": "varchar",
    "is_sale_date_imputed": "boolean", "is_group_reassigned": "boolean", "is_serial_unknown": "boolean",
    "is_counted_status": "boolean", "is_in_coverage": "boolean", "is_return": "boolean", "is_quarantined": "boolean",
    "is_repeat_claim": "boolean", "is_open_claim": "boolean", "estimated_cost": "decimal(18, 2)",
}
RETURN = {"status": "approved", "is_sale_date_imputed": False, "is_group_reassigned": False,
          "is_serial_unknown": False, "is_counted_status": True, "is_in_coverage": True, "is_return": True,
          "is_quarantined": False, "is_repeat_claim": False, "is_open_claim": False}
# a claim filed, not yet decided: counted, its settled cost empty, its extract cost an estimate
OPEN_RETURN = {**RETURN, "status": "open", "is_open_claim": True, "cost": None}
# a unit's later counted claim: a claim to pay, not a failed unit (is_return is the unit's first counted claim)
REPEAT = {**RETURN, "is_return": False, "is_repeat_claim": True}


def test_cohort_summary(con):
    unit = {"product": "A", "build_month": d("2024-01"), "warranty_months": 12, "is_sale_date_imputed": False,
            "is_in_channel": False}
    table(con, "units_aged_to_as_of", UNITS_AGED, [
        {**unit, "units": 100},
        {**unit, "units": 20, "warranty_months": 24, "is_sale_date_imputed": True},  # imputed, in service
        {**unit, "units": 5, "is_sale_date_imputed": True, "is_in_channel": True},
        {**unit, "units": 10, "build_month": d("2024-02")},  # a cohort without claims
        {**unit, "units": 3, "product": "B", "warranty_months": 6},
    ])
    part = {"product": "A", "build_month": d("2024-01"), "is_in_channel": False}
    table(con, "units_sold_or_in_channel", UNIT_PARTS, [  # the expected units in the channel come from here
        {**part, "units": 100},
        {**part, "units": 18.5},  # the 20 imputed units: 18.5 sold, 1.5 in the channel
        {**part, "units": 1.5, "is_in_channel": True},
        {**part, "units": 5, "is_in_channel": True},
        {**part, "units": 10, "build_month": d("2024-02")},
        {**part, "units": 3, "product": "B"},
    ])
    claim = {**RETURN, "product": "A", "build_month": d("2024-01")}
    table(con, "claims_assigned_to_sale_month_groups", ASSIGNED_CLAIMS, [
        {**claim, "cost": 50},
        {**claim, "cost": 20.5},
        {**claim, **REPEAT, "cost": 7.25},  # a repeat claim: not a return, counted apart with its cost
        {**claim, "cost": 99, "is_in_coverage": False, "is_return": False},  # counted status, out of coverage
        {**claim, "cost": 40, "status": "rejected", "is_counted_status": False, "is_return": False},
        {**claim, "cost": 30, "status": "rejected", "is_counted_status": False, "is_in_coverage": False,
         "is_return": False},  # not counted, so not out of coverage either
        {**claim, "cost": 70, "status": "rejected", "is_counted_status": False, "is_in_coverage": None,
         "is_return": False, "is_quarantined": True},  # failed a check: in no count
        {**claim, "product": "B", "cost": 10},
        {**claim, "product": "C", "cost": 5, "is_in_coverage": None, "is_return": False,
         "is_quarantined": True},  # C shipped nothing: no cohort row
    ])
    got = run(
        con, "outputs/cohort_summary",
        "product, build_month, units, units_in_channel, units_sale_date_imputed, min_warranty_months,"
        " max_warranty_months, returns_to_date, cost_to_date, repeat_claims_to_date, repeat_cost_to_date,"
        " claims_out_of_coverage, claims_not_counted",
    )
    assert got == [
        ("A", d("2024-01"), 125, 6.5, 25, 12, 24, 2, 70.5, 1, 7.25, 1, 2),
        ("A", d("2024-02"), 10, 0, 0, 12, 12, 0, 0.0, 0, 0.0, 0, 0),
        ("B", d("2024-01"), 3, 0, 0, 6, 6, 1, 10.0, 0, 0.0, 0, 0),
    ]


def test_age_in_service(con):
    # ages on the day grid (macros/ages.sql): months 1-3 end at 31, 61 and 92 days of age; a 3-month
    # warranty's cover ends at 92 days (END_3), where the observed ages of units past it stop
    END_3 = 92 / MONTH
    table(con, "suspensions_shared_by_start_date", {
        **{column: kind for column, kind in SALE_MONTH_GROUPS.items() if not column.startswith("units")},
        "warranty_start_date": "date", "observed_age_months": "double", "units": "bigint", "suspensions": "double",
    }, [
        # A, sale month 02, 3-month warranty: 100 units, 15 returns, 85 survivors shared 60 : 40
        {**GROUP, "product": "A", "warranty_months": 3, "warranty_start_date": d("2024-02-01"),
         "observed_age_months": END_3, "units": 60, "suspensions": 51},  # saw the whole warranty: never withdrawn
        {**GROUP, "product": "A", "warranty_months": 3, "warranty_start_date": d("2024-02-20"),
         "observed_age_months": 1.5, "units": 40, "suspensions": 34},  # into month 2 in part: withdrawn there
        # A, sale month 03, 4-month warranty: 20 units, 6 returns (one in month 4, on the claim's own clock)
        {**GROUP, "product": "A", "sale_month": d("2024-03"), "warranty_months": 4,
         "warranty_start_date": d("2024-03-10"), "observed_age_months": 2.25, "units": 20, "suspensions": 14},
        # A, still in the channel: at risk in no month
        {**GROUP, "product": "A", "sale_month": d("2025-01"), "warranty_months": 4,
         "warranty_start_date": d("2025-01-10"), "observed_age_months": 0.0, "units": 30, "suspensions": 30},
        # B: a group with more returns than units gives no negative units at risk
        {**GROUP, "product": "B", "warranty_months": 3, "warranty_start_date": d("2024-02-01"),
         "observed_age_months": END_3, "units": 2, "suspensions": 0},
        {**GROUP, "product": "B", "sale_month": d("2024-03"), "warranty_months": 3,
         "warranty_start_date": d("2024-03-01"), "observed_age_months": END_3, "units": 4, "suspensions": 4},
    ])
    table(con, "returns_counted_by_group_and_month", {
        **{column: kind for column, kind in SALE_MONTH_GROUPS.items() if not column.startswith("units")},
        "months_in_service": "integer", "returns": "bigint", "return_cost": "decimal(38, 2)",
    }, [
        {**GROUP, "warranty_months": 3, "months_in_service": 1, "returns": 10, "return_cost": 100},
        {**GROUP, "warranty_months": 3, "months_in_service": 2, "returns": 5, "return_cost": 60},
        {**GROUP, "sale_month": d("2024-03"), "warranty_months": 4, "months_in_service": 1, "returns": 5,
         "return_cost": 25},
        {**GROUP, "sale_month": d("2024-03"), "warranty_months": 4, "months_in_service": 4, "returns": 1,
         "return_cost": 30},
        {**GROUP, "product": "B", "warranty_months": 3, "months_in_service": 1, "returns": 3, "return_cost": 30},
    ])
    got = run(
        con, "outputs/age_in_service",
        "product, build_month, months_in_service, units_at_risk, returns, return_cost, units_withdrawn, return_rate",
    )
    assert got == [
        # month 1: every unit in service (60 + 40 + 20)
        pytest.approx(("A", d("2024-01"), 1, 120.0, 15, 125.0, 0.0, 15 / 120)),
        # month 2: 60 and 40 less 10/100 of them, 20 less 5/20 of it; the 1.5-month row withdrawn (34)
        pytest.approx(("A", d("2024-01"), 2, 54.0 + 36.0 + 15.0, 5, 60.0, 34.0, 5 / 105)),
        # month 3: 60 less 15/100, 20 less 5/20; the 2.25-month row withdrawn (14)
        pytest.approx(("A", d("2024-01"), 3, 51.0 + 15.0, 0, 0.0, 14.0, 0.0)),
        # month 4: a return, no unit observed into month 4: no rate
        pytest.approx(("A", d("2024-01"), 4, 0.0, 1, 30.0, 0.0, None)),
        pytest.approx(("B", d("2024-01"), 1, 6.0, 3, 30.0, 0.0, 0.5)),
        # 3 returns before month 2 of a 2-unit group: its share is capped at its units (0, not -1)
        pytest.approx(("B", d("2024-01"), 2, 4.0, 0, 0.0, 0.0, 0.0)),
        pytest.approx(("B", d("2024-01"), 3, 4.0, 0, 0.0, 0.0, 0.0)),
    ]


def test_run_facts(con):
    unit = {"is_sale_date_imputed": False, "is_in_channel": False, "is_sold_after_as_of": False}
    table(con, "units_aged_to_as_of", {**UNITS_AGED, "is_sold_after_as_of": "boolean"}, [
        {**unit, "units": 100},
        {**unit, "units": 20, "is_sale_date_imputed": True},
        {**unit, "units": 5, "is_sale_date_imputed": True, "is_in_channel": True},
        {**unit, "units": 3, "is_sale_date_imputed": True, "is_sold_after_as_of": True},  # in service, imputed
        {**unit, "units": 2, "is_sale_date_imputed": True, "is_sold_after_as_of": True, "is_in_channel": True},
    ])
    part = {"is_sale_date_imputed": True, "is_in_channel": False}
    table(con, "units_sold_or_in_channel", UNIT_PARTS, [  # the 30 imputed units' parts
        {**part, "units": 100, "is_sale_date_imputed": False},
        {**part, "units": 18.75},
        {**part, "units": 1.25, "is_in_channel": True},
        {**part, "units": 5, "is_in_channel": True},
        {**part, "units": 2.5},
        {**part, "units": 0.5, "is_in_channel": True},
        {**part, "units": 2, "is_in_channel": True},
    ])
    table(con, "claims_assigned_to_sale_month_groups", ASSIGNED_CLAIMS, [
        {**RETURN, "is_sale_date_imputed": True},
        {**RETURN, "is_group_reassigned": True},
        {**RETURN, "is_serial_unknown": True},
        {**REPEAT},  # a unit's second counted claim: used, not a return (a unit counts once in the life model)
        {**RETURN, "is_in_coverage": False, "is_return": False},  # out of coverage
        {**RETURN, "status": "rejected", "is_counted_status": False, "is_return": False},
        {**RETURN, "status": "no_fault_found", "is_counted_status": False, "is_return": False},
        {**RETURN, "status": "rejected", "is_counted_status": False, "is_in_coverage": False, "is_return": False},
        {**RETURN, "status": "rejected", "is_sale_date_imputed": True, "is_in_coverage": None, "is_return": False,
         "is_quarantined": True},  # left out of every count
        {**OPEN_RETURN, "status": "pending"},  # filed, not yet decided: a counted return, and an open claim
    ])
    survivors = {"group_units": "bigint", "group_returns": "hugeint"}
    table(con, "sale_month_group_survivors", survivors, [
        {"group_units": 150, "group_returns": 2},
        {"group_units": 1, "group_returns": 2},  # more returns than units
        {"group_units": 5, "group_returns": 5},  # as many: not more
    ])
    assert dict(run(con, "outputs/run_facts", "fact, count")) == {
        "units_total": 130,
        "units_sale_date_imputed": 30,
        "units_in_channel": 9,  # 8.75 rounded
        "units_in_service_sale_date_imputed": 21,  # 21.25 rounded
        "units_sold_after_as_of_sale_date_imputed": 5,
        "returns_counted": 4,
        "repeat_claims_counted": 1,
        "claims_out_of_coverage": 1,
        "claims_rejected": 2,
        "claims_no_fault_found": 1,
        "claims_open": 1,
        "claims_status_not_counted": 3,
        "claims_sale_date_imputed": 1,
        "claims_assigned_to_nearest_sale_month": 1,
        "claims_with_unknown_serial": 1,
        "groups_with_more_returns_than_units": 1,
    }
    for name in ("units_aged_to_as_of", "units_sold_or_in_channel", "claims_assigned_to_sale_month_groups",
                 "sale_month_group_survivors"):
        con.execute(f"delete from {name}")
    facts = run(con, "outputs/run_facts", "fact, count")  # nothing read: every fact is there, as 0
    assert len(facts) == 16 and {count for _, count in facts} == {0}  # 16 with claims_open


def test_claim_cost_by_product(con):
    table(con, "claims_assigned_to_sale_month_groups", ASSIGNED_CLAIMS, [
        # 12 months to 2024-12-31: the window runs from 2024-01-01 to the as-of date
        {**RETURN, "product": "A", "claim_date": d("2024-12-31"), "cost": 50},
        {**RETURN, "product": "A", "claim_date": d("2024-01-01"), "cost": 100},  # the window's first day
        {**RETURN, "product": "A", "claim_date": d("2023-12-31"), "cost": 30},  # the day before: all time only
        {**RETURN, "product": "A", "claim_date": d("2024-06-01"), "cost": 1000, "is_in_coverage": False,
         "is_return": False},  # not a return
        {**RETURN, "product": "B", "claim_date": d("2023-06-01"), "cost": 20},  # no return in the window
        {**REPEAT, "product": "B", "claim_date": d("2023-07-01"), "cost": 40},  # a repeat claim is priced too
        {**RETURN, "product": "C", "claim_date": d("2024-06-01"), "cost": 10, "status": "rejected",
         "is_counted_status": False, "is_return": False},  # no return at all: no row
        # an open claim: its estimate is not a settled cost (not in the mean, nor in the count)
        {**OPEN_RETURN, "product": "A", "claim_date": d("2024-12-01"), "estimated_cost": 500},
        # handled claims (rejected, no fault found, not counted): A one in the window, one before it
        {**RETURN, "product": "A", "claim_date": d("2024-03-01"), "cost": 0, "status": "rejected",
         "is_counted_status": False, "is_return": False},
        {**RETURN, "product": "A", "claim_date": d("2023-03-01"), "cost": 25, "status": "no_fault_found",
         "is_counted_status": False, "is_in_coverage": False, "is_return": False},  # out of coverage: handled too
        {**RETURN, "product": "A", "claim_date": d("2024-03-01"), "cost": 0, "status": "rejected",
         "is_counted_status": False, "is_return": False, "is_quarantined": True},  # quarantined: not counted
        {**RETURN, "product": "B", "claim_date": d("2024-03-01"), "cost": 25, "status": "no_fault_found",
         "is_in_coverage": False, "is_return": False},  # a counted status (configured): priced, not handled
    ])
    got = run(
        con, "outputs/claim_cost_by_product",
        "product, window_returns, window_mean_cost, all_time_returns, all_time_mean_cost, window_handled_claims,"
        " all_time_handled_claims",
        {"as_of_date": AS_OF, "cost_window_months": 12},
    )
    # hand computation: A (50 + 100) / 2 in the window, (50 + 100 + 30) / 3 all time; B (20 + 40) / 2
    assert got == [("A", 2, 75.0, 3, 60.0, 1, 2), ("B", 0, None, 2, 30.0, 0, 0)]


def test_returns_by_build_month_and_code(con):
    table(con, "claims_assigned_to_sale_month_groups", {
        "product": "varchar", "build_month": "date", "failure_code": "varchar", "is_return": "boolean",
    }, [
        {"product": "A", "build_month": d("2024-01"), "failure_code": "SEAL", "is_return": True},
        {"product": "A", "build_month": d("2024-01"), "failure_code": "SEAL", "is_return": True},
        {"product": "A", "build_month": d("2024-01"), "failure_code": "SEAL", "is_return": False},  # not a return
        {"product": "A", "build_month": d("2024-01"), "is_return": True},  # no code (staging made '' NULL)
        {"product": "A", "build_month": d("2024-02"), "failure_code": "SEAL", "is_return": True},  # another month
        {"product": "B", "build_month": d("2024-01"), "failure_code": "FAN", "is_return": True},
        {"product": "B", "build_month": d("2024-01"), "failure_code": "FAN", "is_return": False},
        {"product": "C", "build_month": d("2024-01"), "failure_code": "FAN", "is_return": False},  # none: no row
    ])
    got = run(con, "outputs/returns_by_build_month_and_code", "product, build_month, failure_code, returns")
    assert got == [
        ("A", d("2024-01"), "(no code)", 1),
        ("A", d("2024-01"), "SEAL", 2),
        ("A", d("2024-02"), "SEAL", 1),
        ("B", d("2024-01"), "FAN", 1),
    ]


def test_returns_by_failure_month(con):
    table(con, "claims_assigned_to_sale_month_groups", {
        "product": "varchar", "build_month": "date", "failure_date": "date", "claim_date": "date",
        "is_return": "boolean",
    }, [
        {"product": "A", "build_month": d("2024-01"), "failure_date": d("2024-03-31"), "claim_date": d("2024-04-02"),
         "is_return": True},  # failed in March, claimed in April
        {"product": "A", "build_month": d("2024-01"), "failure_date": d("2024-03-01"), "claim_date": d("2024-04-30"),
         "is_return": True},  # the same months
        {"product": "A", "build_month": d("2024-01"), "failure_date": d("2024-03-15"), "claim_date": d("2024-03-20"),
         "is_return": True},  # claimed in March
        {"product": "A", "build_month": d("2024-01"), "failure_date": d("2024-03-15"), "claim_date": d("2024-03-20"),
         "is_return": False},  # not a return
        {"product": "B", "build_month": d("2024-02"), "failure_date": d("2024-02-29"), "claim_date": d("2024-02-29"),
         "is_return": True},
    ])
    got = run(con, "outputs/returns_by_failure_month", "product, build_month, failure_month, claim_month, returns")
    assert got == [
        ("A", d("2024-01"), d("2024-03"), d("2024-03"), 1),
        ("A", d("2024-01"), d("2024-03"), d("2024-04"), 2),
        ("B", d("2024-02"), d("2024-02"), d("2024-02"), 1),
    ]


SAFETY_CLAIMS = {
    "source_row_number": "bigint", "claim_id": "varchar", "product": "varchar", "build_month": "date",
    "failure_date": "date", "claim_date": "date", "months_in_service": "integer", "failure_code": "varchar",
    "status": "varchar", "is_return": "boolean", "is_repeat_claim": "boolean", "cost": "decimal(18, 2)",
    "is_quarantined": "boolean",
}
SAFETY_TERMS = ["overheat", "smok", "fire", "burn", "shock"]  # the default of alerts.safety_terms


def test_safety_term_claims(con):
    claim = {"product": "A", "build_month": d("2024-01"), "status": "approved", "is_return": True,
             "is_repeat_claim": False, "is_quarantined": False}
    codes = {
        1: "OVERHEATING", 2: "overheated", 3: "BURNT", 4: "BURN_MARK", 5: "SMOKE_SMELL", 6: "ELECTRIC_SHOCK",
        7: "FIRMWARE_BUG",  # 'fire' is not where a word begins: FIRM...
        8: "MISFIRE",  # ... nor inside a word
        9: "Over-Heat",  # read from the word OVER with the '-' skipped: overheat
        10: "SHOCK_THEN_FIRE",  # two terms, in the terms' order
        11: None,  # no code
        14: "SEAL_LEAK",
        15: "2FIRE",  # digits separate words too
        16: "MotorOverheat",  # one word (no separator): 'overheat' does not begin a word
    }
    table(con, "claims_assigned_to_sale_month_groups", SAFETY_CLAIMS, [
        *({**claim, "source_row_number": row, "failure_code": code} for row, code in codes.items()),
        {**claim, "source_row_number": 12, "failure_code": "FIRE", "is_quarantined": True},  # failed a check
        {**claim, "source_row_number": 13, "failure_code": "FIRE_DAMAGE", "status": "rejected",
         "is_return": False},  # listed whatever its status
        {**claim, "source_row_number": 17, "failure_code": "SMOKE", "is_return": False,
         "is_repeat_claim": True},  # a unit's later claim: listed, marked as a repeat claim
    ])
    columns = "source_row_number, failure_code, status, is_return, is_repeat_claim, matched_terms"
    got = run(con, "outputs/safety_term_claims", columns, {"safety_terms": SAFETY_TERMS})
    # expected rows: hand computation from the rule in the model's header
    assert got == [
        (1, "OVERHEATING", "approved", True, False, ["overheat"]),
        (2, "overheated", "approved", True, False, ["overheat"]),
        (3, "BURNT", "approved", True, False, ["burn"]),
        (4, "BURN_MARK", "approved", True, False, ["burn"]),
        (5, "SMOKE_SMELL", "approved", True, False, ["smok"]),
        (6, "ELECTRIC_SHOCK", "approved", True, False, ["shock"]),
        (9, "Over-Heat", "approved", True, False, ["overheat"]),
        (10, "SHOCK_THEN_FIRE", "approved", True, False, ["fire", "shock"]),
        (13, "FIRE_DAMAGE", "rejected", False, False, ["fire"]),
        (15, "2FIRE", "approved", True, False, ["fire"]),
        (17, "SMOKE", "approved", False, True, ["smok"]),
    ]
    # terms in any case are matched in lower case; an empty list lists nothing (hand computation)
    assert run(con, "outputs/safety_term_claims", "source_row_number, matched_terms", {"safety_terms": ["Smok"]}) == [
        (5, ["smok"]), (17, ["smok"]),
    ]
    assert run(con, "outputs/safety_term_claims", "source_row_number", {"safety_terms": []}) == []
