"""Shared helpers of the tests that run single SQL models on hand-written tables (tests/ is on sys.path):
`d` (a date from YYYY-MM or YYYY-MM-DD), `table` (create a DuckDB table from rows), `run` (run one model
and read chosen columns back). The in-memory connection with the project's macros is the `con` fixture
of conftest.py."""

from __future__ import annotations

import datetime as dt

from warranty_forecast.stages import sql_runner


# column types of two intermediate models, for tables standing in for them
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


def d(text: str) -> dt.date:
    return dt.date.fromisoformat(text if len(text) > 7 else f"{text}-01")


def table(con, name: str, columns: dict[str, str], rows: list[dict]) -> None:  # type: ignore[no-untyped-def]
    """Create `name` with `columns` (name -> DuckDB type) holding `rows` (missing keys are NULL)."""
    spec = ", ".join(f'"{column}" {kind}' for column, kind in columns.items())
    con.execute(f"create table {name} ({spec})")
    if rows:
        marks = ", ".join("?" for _ in columns)
        con.executemany(f"insert into {name} values ({marks})", [[row.get(c) for c in columns] for row in rows])


def run(con, model: str, columns: str, parameters: dict | None = None) -> list[tuple]:  # type: ignore[no-untyped-def]
    """Run one model and return the chosen columns of its rows, ordered by those columns."""
    sql_runner.run_model(con, model, parameters or {})
    names = [c.strip() for c in columns.split(",")]
    return con.table(model.rsplit("/", 1)[-1]).select(*names).order(", ".join(names)).fetchall()
