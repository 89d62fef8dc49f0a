"""The DuckDB stage: load the two extracts, run the `sql/` models in layer order, return aggregates.

This is the only module that talks to DuckDB. Every row-level operation (typing, validation,
quarantine, ageing, matching claims to units, grouping) happens in the SQL models under `sql/`;
Python receives aggregated tables only.

Layers, in the order they run (each model is one file; its table is named after the file):
  macros/        DuckDB macros the models share (run first, as statements)
  raw/           the extracts as text with their 1-based data row numbers (CSV or Parquet)
  staging/       typed, checked rows; the first failed check per row
  intermediate/  units on their warranty clock, sale-month groups, claims matched to units
  outputs/       fit input, the age-in-service matrix, summaries, quarantine, reconciliation
"""

from __future__ import annotations

import datetime as dt
from importlib import resources
import logging
import re
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import duckdb
import pandas as pd

from warranty_forecast.config import RunConfig
from warranty_forecast.errors import ContractError, InputUnreadableError

log = logging.getLogger(__name__)

# The SQL models ship inside the package (`warranty_forecast.sql`, mapped from the top-level sql/ folder
# that people edit); an editable install reads that folder itself.
SQL_PACKAGE = "warranty_forecast.sql"


@dataclass(frozen=True)
class ExtractContract:
    """Column names an extract must (required) or may (optional) carry."""

    name: str
    required: tuple[str, ...]
    optional: tuple[str, ...]

    @property
    def columns(self) -> tuple[str, ...]:
        return self.required + self.optional


SHIPMENTS = ExtractContract(
    name="shipments",
    required=("product", "build_month", "ship_date"),
    optional=("sale_date", "units", "warranty_months", "serial"),
)
CLAIMS = ExtractContract(
    name="claims",
    required=("claim_id", "product", "build_month", "failure_date", "claim_date", "cost"),
    optional=("sale_date", "status", "failure_code", "serial"),
)

MACRO_FILES: tuple[str, ...] = ("macros/validation",)
STAGING_MODELS: tuple[str, ...] = ("staging/stg_shipments", "staging/stg_claims")
INTERMEDIATE_MODELS: tuple[str, ...] = (
    "intermediate/units_aged_to_as_of",
    "intermediate/sale_month_groups",
    "intermediate/claims_matched_to_units",
)
OUTPUT_MODELS: tuple[str, ...] = (
    "outputs/fit_returns",
    "outputs/returns_by_failure_mode",
    "outputs/fit_suspensions",
    "outputs/age_in_service",
    "outputs/cohort_summary",
    "outputs/claim_cost_by_product",
    "outputs/quarantine",
    "outputs/reconciliation",
    "outputs/run_facts",
)

_PARAMETER = re.compile(r"\$([A-Za-z_][A-Za-z0-9_]*)")
_SUPPORTED_SUFFIXES = (".csv", ".parquet")


@dataclass(frozen=True)
class ShapedData:
    """Aggregated tables the statistics stages need (all ages in months, costs in currency units)."""

    as_of_date: dt.date
    as_of_source: str
    fit_returns: pd.DataFrame
    returns_by_failure_mode: pd.DataFrame
    fit_suspensions: pd.DataFrame
    age_in_service: pd.DataFrame
    cohort_summary: pd.DataFrame
    claim_cost_by_product: pd.DataFrame
    quarantine: pd.DataFrame
    reconciliation: pd.DataFrame
    run_facts: dict[str, int]
    ignored_columns: dict[str, list[str]]
    seconds_by_layer: dict[str, float]


def read_model_sql(model: str) -> str:
    """The text of one SQL model, e.g. ``read_model_sql("staging/stg_claims")``."""
    return resources.files(SQL_PACKAGE).joinpath(f"{model}.sql").read_text(encoding="utf-8")


def run_model(
    con: duckdb.DuckDBPyConnection, model: str, parameters: Mapping[str, Any], table: str | None = None
) -> None:
    """Materialise one SQL model as a table named after its file, binding only the parameters it uses."""
    sql = read_model_sql(model)
    used = set(_PARAMETER.findall(_without_comments(sql)))
    missing = used - set(parameters)
    if missing:
        raise KeyError(f"SQL model {model} needs parameters {sorted(missing)}")
    name = table or model.rsplit("/", 1)[-1]
    con.execute(f"create or replace table {name} as {sql}", {key: parameters[key] for key in used})


def _without_comments(sql: str) -> str:
    return "\n".join(line.split("--", 1)[0] for line in sql.splitlines())


def load_extract(con: duckdb.DuckDBPyConnection, path: Path, contract: ExtractContract) -> list[str]:
    """Load one extract into ``raw_<name>`` and ``raw_<name>_malformed``; return its ignored columns.

    Raises InputUnreadableError for a missing/unreadable file or an unsupported type, and
    ContractError naming the file and column when a required column is absent.
    """
    suffix = path.suffix.lower()
    if not path.is_file():
        raise InputUnreadableError(f"{contract.name} extract {path} does not exist or is not a file")
    if suffix not in _SUPPORTED_SUFFIXES:
        raise InputUnreadableError(
            f"{contract.name} extract {path}: unsupported file type {suffix!r}; use .csv or .parquet"
        )
    raw = f"raw_{contract.name}"
    malformed = f"{raw}_malformed"
    try:
        if suffix == ".csv":
            accepted = f"{raw}_accepted"
            rejects = f"{raw}_rejects"
            run_model(
                con,
                "raw/csv_extract",
                {"path": str(path), "rejects_table": rejects, "rejects_scan": f"{rejects}_scan"},
                table=accepted,
            )
            run_model(con, "raw/csv_malformed_lines", {"rejects_table": rejects}, table=malformed)
            run_model(
                con,
                "raw/csv_numbered_rows",
                {"accepted_table": accepted, "malformed_table": malformed},
                table=raw,
            )
        else:
            run_model(con, "raw/parquet_extract", {"path": str(path)}, table=raw)
            con.execute(
                f"create or replace table {malformed} as select 0::bigint as source_row_number,"
                " ''::varchar as problem_column, ''::varchar as problem_reason,"
                " ''::varchar as problem_detail, ''::varchar as raw_values where false"
            )
    except duckdb.Error as error:
        first_line = str(error).strip().splitlines()[0]
        raise InputUnreadableError(f"{contract.name} extract {path} cannot be read: {first_line}") from None

    columns = [row[0] for row in con.execute(f"describe {raw}").fetchall()]
    present = set(columns)
    for column in contract.required:
        if column not in present:
            near = [c for c in columns if c.strip().lower() == column]
            hint = f" (found {near[0]!r}: header names are case- and space-sensitive)" if near else ""
            raise ContractError(
                f"{contract.name} extract {path}: required column {column!r} is missing{hint}; "
                f"header has {[c for c in columns if c != 'source_row_number']}"
            )
    for column in contract.optional:
        if column not in present:
            con.execute(f"alter table {raw} add column {column} varchar")
    return sorted(c for c in columns if c not in contract.columns and c != "source_row_number")


def resolve_as_of(con: duckdb.DuckDBPyConnection, requested: dt.date | None) -> tuple[dt.date, str]:
    """The run's as-of date: the requested one, else the latest claim_date among valid claims."""
    if requested is not None:
        return requested, "command line"
    latest = con.execute("select max(claim_date) from stg_claims where not is_quarantined").fetchone()[0]
    if latest is None:
        raise ContractError("claims extract has no valid claim_date to default the as-of date from; pass --as-of")
    return latest, "latest valid claim_date"


def shape_extracts(config: RunConfig) -> ShapedData:
    """Run the whole SQL stage for one configuration and return the aggregated tables."""
    seconds: dict[str, float] = {}
    con = duckdb.connect(":memory:")
    try:
        for macros in MACRO_FILES:
            con.execute(read_model_sql(macros))
        started = time.perf_counter()
        ignored = {
            "shipments": load_extract(con, config.shipments_path, SHIPMENTS),
            "claims": load_extract(con, config.claims_path, CLAIMS),
        }
        seconds["raw"] = time.perf_counter() - started

        started = time.perf_counter()
        for model in STAGING_MODELS:
            run_model(con, model, {})
        seconds["staging"] = time.perf_counter() - started

        as_of_date, as_of_source = resolve_as_of(con, config.as_of_date)
        parameters = {
            "as_of_date": as_of_date,
            "default_warranty_months": config.warranty.default_months,
            "counted_statuses": list(config.claims.counted_statuses),
            "cost_window_months": config.reserve.cost_window_months,
            "shipments_file": config.shipments_path.name,
            "claims_file": config.claims_path.name,
        }
        for layer, models in (("intermediate", INTERMEDIATE_MODELS), ("outputs", OUTPUT_MODELS)):
            started = time.perf_counter()
            for model in models:
                run_model(con, model, parameters)
            seconds[layer] = time.perf_counter() - started

        tables = {name: _table(con, name) for name in _OUTPUT_COLUMNS}
    finally:
        con.close()

    reconciliation = tables["reconciliation"]
    check_reconciliation(reconciliation)
    if int(reconciliation.loc[reconciliation["extract"] == "shipments", "rows_used"].iloc[0]) == 0:
        raise ContractError(
            f"shipments extract {config.shipments_path}: no usable row shipped by {as_of_date}"
            " (see the quarantine counts in the log)"
        )
    facts_frame = tables.pop("run_facts")
    return ShapedData(
        as_of_date=as_of_date,
        as_of_source=as_of_source,
        run_facts={str(k): int(v) for k, v in zip(facts_frame["fact"], facts_frame["count"])},
        ignored_columns=ignored,
        seconds_by_layer=seconds,
        **tables,
    )


def check_reconciliation(reconciliation: pd.DataFrame) -> None:
    """Every row read is used, quarantined or after the as-of date; anything else is a bug."""
    for row in reconciliation.itertuples(index=False):
        accounted = row.rows_used + row.rows_quarantined + row.rows_after_as_of
        if accounted != row.rows_read:
            raise AssertionError(
                f"{row.source_file}: {row.rows_read} rows read but {accounted} accounted for "
                f"(used {row.rows_used}, quarantined {row.rows_quarantined}, after as-of {row.rows_after_as_of})"
            )


# The columns Python reads from each output table, in order (the SQL files own their meaning).
_OUTPUT_COLUMNS: dict[str, tuple[str, ...]] = {
    "fit_returns": (
        "product", "build_month", "sale_month", "warranty_months", "months_in_service", "returns", "return_cost",
    ),
    "returns_by_failure_mode": ("product", "failure_mode", "months_in_service", "returns"),
    "fit_suspensions": (
        "product", "build_month", "sale_month", "warranty_months", "warranty_start_date",
        "observed_age_months", "is_in_channel", "units", "suspensions",
    ),
    "age_in_service": (
        "product", "build_month", "months_in_service", "units_at_risk", "returns", "return_cost",
        "units_withdrawn", "return_rate",
    ),
    "cohort_summary": (
        "product", "build_month", "units", "units_in_channel", "units_sale_date_imputed", "min_warranty_months",
        "max_warranty_months", "returns_to_date", "cost_to_date", "claims_out_of_coverage", "claims_not_counted",
    ),
    "claim_cost_by_product": (
        "product", "window_returns", "window_mean_cost", "all_time_returns", "all_time_mean_cost",
    ),
    "quarantine": ("source_file", "row_number", "column", "reason", "detail", "raw_values"),
    "reconciliation": (
        "extract", "source_file", "rows_read", "rows_used", "rows_quarantined", "rows_after_as_of",
    ),
    "run_facts": ("fact", "count"),
}

_SORT_KEYS: dict[str, tuple[str, ...]] = {
    "fit_returns": ("product", "build_month", "sale_month", "warranty_months", "months_in_service"),
    "returns_by_failure_mode": ("product", "failure_mode", "months_in_service"),
    "fit_suspensions": ("product", "build_month", "sale_month", "warranty_months", "warranty_start_date"),
    "age_in_service": ("product", "build_month", "months_in_service"),
    "cohort_summary": ("product", "build_month"),
    "claim_cost_by_product": ("product",),
    "quarantine": ("source_file", "row_number"),
    "reconciliation": ("extract",),
    "run_facts": ("fact",),
}


def _table(con: duckdb.DuckDBPyConnection, name: str) -> pd.DataFrame:
    columns = ", ".join(f'"{c}"' for c in _OUTPUT_COLUMNS[name])
    order = ", ".join(f'"{c}"' for c in _SORT_KEYS[name])
    frame = con.execute(f"select {columns} from {name} order by {order}").df()
    for column in frame.columns:
        if pd.api.types.is_datetime64_any_dtype(frame[column]):
            frame[column] = frame[column].dt.date
    return frame
