"""The DuckDB stage: load the two extracts, run the `sql/` models, check what they found, return aggregates.

This is the only stage that talks to DuckDB (through `extracts` and `sql_runner`). Every row-level
operation (typing, validation, quarantine, ageing, matching claims to units, grouping) happens in the SQL
models under `sql/`; Python receives aggregated tables only.

Layers (each model is one file; its table is named after the file):
  macros/        DuckDB macros the models share (run first, as statements)
  raw/           the extracts as text with their 1-based data row numbers (`extracts.load_extract`)
  staging/       typed, checked rows; the first failed check per row
  intermediate/  units on their warranty clock, claims checked, clocked and grouped, the cells of the fit
  outputs/       the tables Python reads: one `ShapedData` field each (run_facts and known_products as a
                 dict and a tuple); they read only staging and intermediate tables
The order of staging, intermediate and outputs comes from each model's `-- Reads:` header
(`sql_runner.plan_models`); `newest_valid_dates` and what it reads run first, as the as-of date comes
from it.
"""

from __future__ import annotations

import datetime as dt
import logging
import os
import re
import shutil
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd

from warranty_forecast.config import RunConfig
from warranty_forecast.errors import ConfigError, ContractError, QuarantineCeilingError
from warranty_forecast.stages.extracts import CLAIMS, SHIPMENTS, load_extract, raw_tables
from warranty_forecast.stages.sql_runner import (
    MACRO_FILES,
    Model,
    plan_models,
    read_row,
    read_table,
    run_models,
    run_statements,
    tables_done_after,
    upstream_of,
)

log = logging.getLogger(__name__)

NEWEST_DATES_MODEL = "newest_valid_dates"  # runs (with what it reads) before the as-of date is chosen



@dataclass(frozen=True)
class DataFreshness:
    """How the as-of date sits between the extracts' newest valid dates and the run date."""

    run_date: dt.date
    as_of_date: dt.date
    as_of_source: str
    newest_claim_date: dt.date | None
    newest_ship_date: dt.date | None
    max_gap_days: int

    @property
    def days_after_newest_claim(self) -> int | None:
        """Days from the newest valid claim_date to the as-of date (None without a valid claim)."""
        return None if self.newest_claim_date is None else (self.as_of_date - self.newest_claim_date).days

    @property
    def days_after_newest_shipment(self) -> int | None:
        """Days from the newest valid ship_date to the as-of date (None without a valid shipment)."""
        return None if self.newest_ship_date is None else (self.as_of_date - self.newest_ship_date).days

    @property
    def days_before_run_date(self) -> int:
        """Days from the as-of date to the run date."""
        return (self.run_date - self.as_of_date).days

    def warnings(self) -> list[str]:
        """One sentence per gap longer than max_gap_days (run.max_data_gap_days)."""
        limit = f"more than run.max_data_gap_days = {self.max_gap_days}"
        texts = []
        for extract, column, newest, gap, consequence in (
            (
                "claims", "claim_date", self.newest_claim_date, self.days_after_newest_claim,
                "claims missing from it make the return rates and the forecast too low",
            ),
            (
                "shipments", "ship_date", self.newest_ship_date, self.days_after_newest_shipment,
                "units shipped since are missing from the units at risk and the forecast",
            ),
        ):
            if newest is None:
                texts.append(f"{extract} extract has no valid {column}: it is empty or every row is quarantined")
            elif gap is not None and gap > self.max_gap_days:
                texts.append(
                    f"{extract} extract: newest valid {column} {newest} is {gap} days before the as-of date"
                    f" {self.as_of_date} ({limit}): the extract may be stale; {consequence}"
                )
        if self.days_before_run_date > self.max_gap_days:
            texts.append(
                f"as-of date {self.as_of_date} is {self.days_before_run_date} days before the run date"
                f" {self.run_date} ({limit}): the extracts may be stale"
            )
        return texts

    def as_manifest(self) -> dict[str, Any]:
        """The manifest's freshness block (dates as ISO text, gaps in days)."""
        return {
            "run_date": self.run_date.isoformat(),
            "as_of_date": self.as_of_date.isoformat(),
            "newest_claim_date": None if self.newest_claim_date is None else self.newest_claim_date.isoformat(),
            "newest_ship_date": None if self.newest_ship_date is None else self.newest_ship_date.isoformat(),
            "days_as_of_after_newest_claim": self.days_after_newest_claim,
            "days_as_of_after_newest_ship": self.days_after_newest_shipment,
            "days_run_date_after_as_of": self.days_before_run_date,
            "max_data_gap_days": self.max_gap_days,
        }


@dataclass(frozen=True)
class ShapedData:
    """Aggregated tables the statistics stages need (all ages in months, costs in currency units)."""

    as_of_date: dt.date
    as_of_source: str
    freshness: DataFreshness
    fit_returns: pd.DataFrame
    returns_by_failure_mode: pd.DataFrame
    returns_by_build_month_and_code: pd.DataFrame
    returns_by_failure_month: pd.DataFrame  # counted returns by product x build month x failure month x claim month
    safety_term_claims: pd.DataFrame  # valid claims whose failure code mentions an alerts.safety_terms term
    repeat_claims_by_age: pd.DataFrame  # repeat claims and serialised repaired units at risk, by months since first claim
    repaired_units_under_warranty: pd.DataFrame  # returns whose unit is still under warranty (repeat claims to come)
    fit_suspensions: pd.DataFrame
    age_in_service: pd.DataFrame
    cohort_summary: pd.DataFrame
    claim_cost_by_product: pd.DataFrame
    open_claims_by_build_month: pd.DataFrame  # counted claims not yet decided (open, pending) per build month
    claim_reporting_delays: pd.DataFrame  # counted returns by product x delay_days x observable_days (truncation)
    units_shipped_by_day: pd.DataFrame  # units by product x build month x warranty x ship date (roll-forward)
    claims_by_claim_date: pd.DataFrame  # settled and handled claims by product x claim date (roll-forward)
    quarantine: pd.DataFrame
    reconciliation: pd.DataFrame
    run_facts: dict[str, int]
    known_products: tuple[str, ...]
    ignored_columns: dict[str, list[str]]
    seconds_by_layer: dict[str, float]

    @property
    def warnings(self) -> tuple[str, ...]:
        """Stale extracts (see DataFreshness), sale-month groups with more returns than units, and per product
        the claims that mention safety-relevant terms."""
        texts = list(self.freshness.warnings())
        overfull = self.run_facts.get("groups_with_more_returns_than_units", 0)
        if overfull:
            texts.append(
                f"{overfull} sale-month group(s) have more returns than units: check the shipments extract for"
                " missing rows"
            )
        for product, claims in self.safety_term_claims.groupby("product", sort=True):
            terms = sorted({term for matched in claims["matched_terms"] for term in matched})
            texts.append(
                f"product {product}: {len(claims)} claim{'s mention' if len(claims) != 1 else ' mentions'}"
                f" safety-relevant terms ({', '.join(terms)}): listed in safety_term_claims.parquet; for"
                " qualified engineers to review"
            )
        return tuple(texts)

    @property
    def summary(self) -> str:
        """One line for the run log: what became of each extract's rows, and the dates."""
        return "; ".join(
            f"{row.extract}: {row.rows_read} rows read, {row.rows_used} used, {row.rows_quarantined} quarantined,"
            f" {row.rows_after_as_of} after as-of"
            for row in self.reconciliation.itertuples(index=False)
        ) + f"; as-of {self.as_of_date} ({self.as_of_source}), run date {self.freshness.run_date}"


# ------------------------------------------------------------------------------------- spill folders

_SPILL_PREFIX = "warranty-forecast-duckdb-"
_SPILL_NAME = re.compile(re.escape(_SPILL_PREFIX) + r"(\d+)-")


def make_spill_folder(parent: Path | None = None) -> Path:
    """A new folder for DuckDB's spill files, named with this process id, after removing abandoned ones."""
    parent = Path(tempfile.gettempdir()) if parent is None else parent
    remove_abandoned_spill_folders(parent)
    return Path(tempfile.mkdtemp(prefix=f"{_SPILL_PREFIX}{os.getpid()}-", dir=parent))


def remove_abandoned_spill_folders(parent: Path) -> list[Path]:
    """Remove spill folders whose process is gone (a run that was killed); return them."""
    removed = []
    for folder in sorted(parent.glob(f"{_SPILL_PREFIX}*")):
        match = _SPILL_NAME.match(folder.name)
        if match is None or not folder.is_dir():
            continue
        pid = int(match.group(1))
        if pid == os.getpid() or _process_exists(pid):
            continue
        shutil.rmtree(folder, ignore_errors=True)
        log.info("removed DuckDB spill folder %s left by process %d, which is no longer running", folder, pid)
        removed.append(folder)
    return removed


def _process_exists(pid: int) -> bool:
    if os.name != "posix":  # no safe existence probe: keep the folder
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # PermissionError: it exists under another user
        return True
    return True


# ------------------------------------------------------------------------------------------ the stage


def shape_extracts(config: RunConfig) -> ShapedData:
    """Run the whole SQL stage for one configuration and return the aggregated tables.

    DuckDB spills to a folder of this run (see `make_spill_folder`; under [run] duckdb_spill_folder when set),
    removed when the stage ends; [run] duckdb_memory_limit caps its memory.
    """
    spill_parent = Path(config.run.duckdb_spill_folder).expanduser() if config.run.duckdb_spill_folder else None
    if spill_parent is not None:
        spill_parent.mkdir(parents=True, exist_ok=True)
    spill_folder = make_spill_folder(spill_parent)
    try:
        duckdb_settings = {"temp_directory": str(spill_folder)}
        if config.run.duckdb_memory_limit is not None:
            duckdb_settings["memory_limit"] = config.run.duckdb_memory_limit
        con = duckdb.connect(":memory:", config=duckdb_settings)
        try:
            return _shape(con, config)
        finally:
            con.close()
    finally:
        shutil.rmtree(spill_folder, ignore_errors=True)


def _shape(con: duckdb.DuckDBPyConnection, config: RunConfig) -> ShapedData:
    seconds: dict[str, float] = {}
    for macros in MACRO_FILES:
        run_statements(con, macros)
    started = time.perf_counter()
    ignored = {
        "shipments": load_extract(con, config.shipments_path, SHIPMENTS),
        "claims": load_extract(con, config.claims_path, CLAIMS),
    }
    seconds["raw"] = time.perf_counter() - started

    plan = plan_models(con, [table for contract in (SHIPMENTS, CLAIMS) for table in raw_tables(contract)])
    parameters = run_parameters(config)
    before_as_of = upstream_of(plan, NEWEST_DATES_MODEL)
    outputs = [model.name for model in plan if model.layer == "outputs"]
    drop_after = tables_done_after(plan, keep=[*outputs, NEWEST_DATES_MODEL])
    run_models(con, before_as_of, parameters, seconds, drop_after)
    newest = read_row(con, NEWEST_DATES_MODEL)
    newest_claim_date, newest_ship_date = newest["newest_claim_date"], newest["newest_ship_date"]
    as_of_date, as_of_source = choose_as_of(config.as_of_date, newest_claim_date, newest_ship_date, config.run_date)
    parameters.update(as_of_parameters(config, as_of_date))
    run_models(con, [model for model in plan if model not in before_as_of], parameters, seconds, drop_after)
    tables = {model.name: read_table(con, model) for model in plan if model.layer == "outputs"}
    return shaped_data(
        config, tables, as_of_date, as_of_source, newest_claim_date, newest_ship_date, ignored, seconds
    )


# The parts of the stage every engine shares (stages/spark_engine.py runs the same plan on Spark).


def model_plan() -> tuple[Model, ...]:
    """The plan of the models (`sql_runner.plan_models`) without the extracts: an in-memory DuckDB with the
    macros parses the headers' tables; no data is read. For engines other than DuckDB."""
    con = duckdb.connect(":memory:")
    try:
        for macros in MACRO_FILES:
            run_statements(con, macros)
        return plan_models(con, [table for contract in (SHIPMENTS, CLAIMS) for table in raw_tables(contract)])
    finally:
        con.close()


def run_parameters(config: RunConfig) -> dict[str, Any]:
    """The models' parameters known before the as-of date is chosen (staging's limits, the run date)."""
    return {
        "run_date": config.run_date,
        "max_units_per_row": config.shipments.max_units_per_row,
        "max_warranty_months": config.warranty.max_months,
    }


def as_of_parameters(config: RunConfig, as_of_date: dt.date) -> dict[str, Any]:
    """The models' parameters that follow the as-of date and the settings (added to `run_parameters`)."""
    return {
        "as_of_date": as_of_date,
        "default_warranty_months": config.warranty.default_months,
        "counted_statuses": list(config.claims.counted_statuses),
        "cost_window_months": config.reserve.cost_window_months,
        "safety_terms": list(config.alerts.safety_terms),
        "shipments_file": os.path.abspath(config.shipments_path),
        "claims_file": os.path.abspath(config.claims_path),
    }


def shaped_data(
    config: RunConfig,
    tables: dict[str, pd.DataFrame],
    as_of_date: dt.date,
    as_of_source: str,
    newest_claim_date: dt.date | None,
    newest_ship_date: dt.date | None,
    ignored: dict[str, list[str]],
    seconds: dict[str, float],
) -> ShapedData:
    """The checks after the models (reconciliation, quarantine ceilings, usable shipments, the as-of
    date), then `ShapedData` from the output tables (by model name, in their `Sort:` order)."""
    tables = dict(tables)
    reconciliation = tables["reconciliation"]
    check_reconciliation(reconciliation)
    # the shipments first: without shipments every claim fails its cohort check, which says nothing
    # about the claims extract itself
    is_shipments = reconciliation["extract"] == "shipments"
    ceiling = config.run.max_quarantined_share
    check_quarantine_ceiling(reconciliation[is_shipments], tables["quarantine"], ceiling)
    shipments = reconciliation[is_shipments].iloc[0]
    if int(shipments["rows_read"]) == 0:
        raise ContractError(f"shipments extract {config.shipments_path} holds no data rows: nothing to forecast")
    if int(shipments["rows_used"]) == 0:
        raise ContractError(
            f"shipments extract {config.shipments_path}: no usable row shipped by {as_of_date}"
            " (see the quarantine counts in the log)"
        )
    check_quarantine_ceiling(reconciliation[~is_shipments], tables["quarantine"], ceiling)
    check_as_of(config.as_of_date, newest_claim_date, newest_ship_date)
    facts_frame = tables.pop("run_facts")
    products_frame = tables.pop("known_products")
    return ShapedData(
        as_of_date=as_of_date,
        as_of_source=as_of_source,
        freshness=DataFreshness(
            run_date=config.run_date,
            as_of_date=as_of_date,
            as_of_source=as_of_source,
            newest_claim_date=newest_claim_date,
            newest_ship_date=newest_ship_date,
            max_gap_days=config.run.max_data_gap_days,
        ),
        run_facts={str(k): int(v) for k, v in zip(facts_frame["fact"], facts_frame["count"])},
        known_products=tuple(str(p) for p in products_frame["product"]),
        ignored_columns=ignored,
        seconds_by_layer=seconds,
        **tables,
    )


def choose_as_of(
    requested: dt.date | None, newest_claim_date: dt.date | None, newest_ship_date: dt.date | None,
    run_date: dt.date,
) -> tuple[dt.date, str]:
    """The run's as-of date and where it came from: the requested one, else the newest valid date of both
    extracts (claim_date or ship_date). Without any valid date the run date stands in, so that the SQL stage
    can still count the quarantine; the run then stops, as there is no usable shipment."""
    if requested is not None:
        return requested, "command line"
    newest = [d for d in (newest_claim_date, newest_ship_date) if d is not None]
    if not newest:
        return run_date, "run date (no valid date in the extracts)"
    if newest_claim_date is not None and newest_claim_date == max(newest):
        return max(newest), "newest valid claim_date"
    return max(newest), "newest valid ship_date"


def check_as_of(
    requested: dt.date | None, newest_claim_date: dt.date | None, newest_ship_date: dt.date | None
) -> None:
    """Raise ConfigError (exit 2) naming the newest valid dates when the requested as-of date is after both."""
    newest = [d for d in (newest_claim_date, newest_ship_date) if d is not None]
    if requested is not None and newest and requested > max(newest):
        raise ConfigError(
            f"--as-of {requested} is after the newest valid data (newest claim_date {newest_claim_date},"
            f" newest ship_date {newest_ship_date}): nothing is known for the days between"
        )


def check_quarantine_ceiling(reconciliation: pd.DataFrame, quarantine: pd.DataFrame, max_share: float) -> None:
    """Raise QuarantineCeilingError when an extract's quarantined share of rows read is above `max_share`.

    The message names the file, the share and the three most frequent reasons, each with its count and the
    first row (and column) it holds, so that a wrong format is seen at once.
    """
    problems = []
    for row in reconciliation.itertuples(index=False):
        if row.rows_read == 0 or row.rows_quarantined / row.rows_read <= max_share:
            continue
        rows = quarantine[quarantine["extract"] == row.extract]
        by_reason = (
            rows.sort_values("row_number", kind="stable")
            .groupby("reason", sort=True)
            .agg(rows=("row_number", "size"), first_row=("row_number", "first"), column=("column", "first"))
            .reset_index()
            .sort_values(["rows", "reason"], ascending=[False, True], kind="stable")
        )
        reasons = ", ".join(
            f"{r.reason} {r.rows:,} (e.g. row {r.first_row}, column {r.column})" for r in by_reason.head(3).itertuples()
        )
        problems.append(
            f"{row.extract} extract {row.source_file}: {row.rows_quarantined:,} of {row.rows_read:,} rows"
            f" quarantined ({row.rows_quarantined / row.rows_read:.3%}), above run.max_quarantined_share ="
            f" {max_share:g}; top reasons: {reasons}"
        )
    if problems:
        raise QuarantineCeilingError(
            "; ".join(problems) + ". Nothing was published: check the extract (a changed date format or"
            " delimiter?) or raise the ceiling"
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

