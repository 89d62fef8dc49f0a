"""One SQL model at a time, on in-memory DuckDB: a handful of hand-written input rows and the exact rows
expected out, worked out by hand from the rules in each model's header (common practice, no source).

Input tables hold only the columns the model reads; a column left out of a row is NULL.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json

import duckdb
import pytest

from warranty_forecast.stages import sql_runner
from warranty_forecast.stages.shaping import ShapedData

AS_OF = dt.date(2024, 12, 31)
RAW_TABLES = ("raw_shipments", "raw_shipments_malformed", "raw_claims", "raw_claims_malformed")
MONTH = 365.25 / 12  # days in a month of service


def d(text: str) -> dt.date:
    return dt.date.fromisoformat(text if len(text) > 7 else f"{text}-01")


@pytest.fixture
def con():
    connection = duckdb.connect(":memory:")
    for macros in sql_runner.MACRO_FILES:
        sql_runner.run_statements(connection, macros)
    yield connection
    connection.close()


def table(con, name: str, columns: dict[str, str], rows: list[dict]) -> None:
    """Create `name` with `columns` (name -> DuckDB type) holding `rows` (missing keys are NULL)."""
    spec = ", ".join(f'"{column}" {kind}' for column, kind in columns.items())
    con.execute(f"create table {name} ({spec})")
    if rows:
        marks = ", ".join("?" for _ in columns)
        con.executemany(f"insert into {name} values ({marks})", [[row.get(c) for c in columns] for row in rows])


def run(con, model: str, columns: str, parameters: dict | None = None) -> list[tuple]:
    """Run one model and return the chosen columns of its rows, ordered by those columns."""
    sql_runner.run_model(con, model, parameters or {})
    names = [c.strip() for c in columns.split(",")]
    return con.table(model.rsplit("/", 1)[-1]).select(*names).order(", ".join(names)).fetchall()


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


CLOCKED_CLAIMS = {
    "source_row_number": "bigint", "claim_id": "varchar", "product": "varchar", "build_month": "date",
    "failure_date": "date", "claim_date": "date", "cost": "decimal(18, 2)", "status": "varchar",
    "failure_code": "varchar", "serial": "varchar", "is_unit_found": "boolean", "unit_sale_month": "date",
    "unit_warranty_months": "integer", "warranty_start_date": "date", "is_sale_date_imputed": "boolean",
    "claim_sale_month": "date", "age_months": "double", "months_in_service": "integer", "is_quarantined": "boolean",
    "problem_column": "varchar", "problem_reason": "varchar", "problem_detail": "varchar",
}
SALE_MONTH_GROUPS = {
    "product": "varchar", "build_month": "date", "sale_month": "date", "warranty_months": "integer",
    "units": "bigint", "units_in_channel": "bigint",
}


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
    table(con, "units_aged_to_as_of", UNITS_AGED, [
        {**unit, "warranty_start_date": d("2024-02-01"), "units": 100},
        {**unit, "warranty_start_date": d("2024-02-16"), "units": 30, "observed_age_months": 10.0},
        {**unit, "warranty_start_date": d("2024-02-16"), "units": 20, "observed_age_months": 10.0},  # same start date
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
    sql_runner.run_model(con, "intermediate/rows_quarantined_with_reason", {})
    got = run(con, "outputs/reconciliation",
              "extract, source_file, rows_read, rows_used, rows_quarantined, rows_after_as_of", {"as_of_date": AS_OF})
    assert got == [("claims", "/data/c.csv", 4, 1, 2, 1), ("shipments", "/data/s.csv", 3, 1, 2, 0)]
    quarantine = run(con, "outputs/quarantine", 'extract, source_file, row_number, "column", reason')
    assert quarantine[0] == ("claims", "/data/c.csv", 1, "claim_id", "missing_value") and len(quarantine) == 4
