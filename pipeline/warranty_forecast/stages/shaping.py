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

import csv
import datetime as dt
import io
import logging
import os
import re
import shutil
import tempfile
import time
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any, Mapping, Sequence

import duckdb
import pandas as pd

from warranty_forecast.config import RunConfig
from warranty_forecast.errors import ConfigError, ContractError, InputUnreadableError, QuarantineCeilingError

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
NEWEST_DATES_MODEL = "intermediate/newest_valid_dates"  # runs before the as-of date is chosen
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
    "outputs/known_products",
)

_PARAMETER = re.compile(r"\$([A-Za-z_][A-Za-z0-9_]*)")
_SUPPORTED_SUFFIXES = (".csv", ".parquet")


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
    fit_suspensions: pd.DataFrame
    age_in_service: pd.DataFrame
    cohort_summary: pd.DataFrame
    claim_cost_by_product: pd.DataFrame
    quarantine: pd.DataFrame
    reconciliation: pd.DataFrame
    run_facts: dict[str, int]
    known_products: tuple[str, ...]
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


# ---------------------------------------------------------------------------------------------- headers

_HEADER_BYTES = 1 << 20  # a header line longer than this is not a header
_BINARY_PROBE_BYTES = 8000
_DELIMITER_LOOKALIKES = (";", "\t", "|")


def read_csv_header(path: Path, contract: ExtractContract) -> list[str]:
    """The column names of a CSV extract's header line, parsed with Python's csv module.

    A byte-order mark is dropped; CRLF and quoted line breaks are read as CSV reads them. Raises
    InputUnreadableError for a file that cannot be opened or holds binary data (a NUL byte in its first
    8,000 bytes), ContractError for an empty file, a header that is not UTF-8 or cannot be split.
    """
    where = f"{contract.name} extract {path}"
    try:
        with open(path, "rb") as handle:
            head = handle.read(_HEADER_BYTES)
            is_whole_file = not handle.read(1)
    except OSError as error:
        raise InputUnreadableError(f"{where} cannot be read: {error.strerror or error}") from None
    if head.startswith(b"\xef\xbb\xbf"):
        head = head[3:]
    if b"\x00" in head[:_BINARY_PROBE_BYTES]:  # the test git uses to tell binary files from text
        raise InputUnreadableError(
            f"{where} holds binary data (a NUL byte in its first {_BINARY_PROBE_BYTES:,} bytes): it is not a CSV"
            " text file"
        )
    if not head.strip(b"\r\n"):
        raise ContractError(f"{where} has no header line: the file is empty (a CSV extract needs its header)")
    text = head.decode("utf-8", errors="surrogateescape")
    buffer = io.StringIO(text, newline="")
    try:
        names = next(csv.reader(buffer, strict=True), [])
    except csv.Error as error:
        reason = "an unterminated quote" if "unexpected end of data" in str(error) else str(error)
        raise ContractError(f"{where}: the header line (line 1) cannot be split into columns: {reason}") from None
    if not is_whole_file and buffer.tell() >= len(text):
        raise ContractError(
            f"{where}: no line end in the first {_HEADER_BYTES:,} bytes, so no header line: is it a CSV file?"
        )
    header = "".join(names)
    if any("\udc80" <= character <= "\udcff" for character in header):
        position = next(i for i, c in enumerate(header) if "\udc80" <= c <= "\udcff")
        raise ContractError(
            f"{where}: the header line is not UTF-8 text (byte 0x{ord(header[position]) - 0xDC00:02x});"
            " save the extract as UTF-8 (is it a CSV file?)"
        )
    if not names or names == [""]:
        raise ContractError(f"{where} has no header line: its first line is empty")
    return names


def read_parquet_header(con: duckdb.DuckDBPyConnection, path: Path, contract: ExtractContract) -> list[str]:
    """The top-level column names of a Parquet extract, as its schema holds them (duplicates included)."""
    try:
        schema = con.execute("select name, num_children from parquet_schema($path)", {"path": str(path)}).fetchall()
    except duckdb.Error as error:
        raise InputUnreadableError(
            f"{contract.name} extract {path} is not a readable Parquet file (truncated, damaged or another"
            f" format): {_first_line(error)}"
        ) from None
    names: list[str] = []
    position = 1

    def skip_element(index: int) -> int:  # the index after an element and its nested children
        children = schema[index][1] or 0
        index += 1
        for _ in range(children):
            index = skip_element(index)
        return index

    root_children = (schema[0][1] or 0) if schema else 0
    for _ in range(root_children):
        names.append(schema[position][0])
        position = skip_element(position)
    return names


@dataclass(frozen=True)
class HeaderCheck:
    """What an extract's header holds: the contract columns present and the columns ignored."""

    contract_columns: tuple[str, ...]
    ignored: tuple[str, ...]
    duckdb_names: tuple[str, ...]  # one per file column: its contract name, else ignored_column_<position>


def check_header(names: Sequence[str], path: Path, contract: ExtractContract) -> HeaderCheck:
    """Hold a header to the contract: exact, unique names; every required column.

    Raises ContractError naming the file and the column for a repeated name, a name that is a contract
    column written with other case or spaces (`" product"`, `"Product"`), or a missing required column
    (with a hint when the header looks split by another delimiter). Other names are ignored, whatever
    they are.
    """
    where = f"{contract.name} extract {path}"
    first_position: dict[str, int] = {}
    for position, name in enumerate(names, start=1):
        if name and name in first_position:
            raise ContractError(
                f"{where}: column {name!r} appears twice in the header (columns {first_position[name]} and"
                f" {position}); header names must be unique"
            )
        first_position.setdefault(name, position)
    for name in names:
        if name in contract.columns:
            continue
        for column in contract.columns:
            if "".join(name.split()).lower() == column:
                kind = "required" if column in contract.required else "optional"
                raise ContractError(
                    f"{where}: {kind} column {column!r} is written {name!r} in the header; header names must"
                    " match the contract exactly (lower case, no spaces)"
                )
    missing = [column for column in contract.required if column not in first_position]
    if missing:
        hint = ""
        if len(names) == 1 and any(mark in names[0] for mark in _DELIMITER_LOOKALIKES):
            hint = "; the header holds one column only: the delimiter must be a comma"
        raise ContractError(
            f"{where}: the header does not hold the required column(s) {missing}; it holds {list(names)}{hint}"
        )
    return HeaderCheck(
        contract_columns=tuple(column for column in contract.columns if column in first_position),
        ignored=tuple(
            name if name else f"(unnamed column {position})"
            for position, name in enumerate(names, start=1)
            if name not in contract.columns
        ),
        duckdb_names=tuple(
            name if name in contract.columns else f"ignored_column_{position}"
            for position, name in enumerate(names, start=1)
        ),
    )


def load_extract(con: duckdb.DuckDBPyConnection, path: Path, contract: ExtractContract) -> list[str]:
    """Load one extract into ``raw_<name>`` and ``raw_<name>_malformed``; return its ignored columns.

    The header is read and checked first (`read_csv_header` / `read_parquet_header`, `check_header`); the
    file is then read with those names, every column as text, with no dialect sniffing. Raises
    InputUnreadableError for a missing/unreadable file or an unsupported type, and ContractError naming
    the file (and the column or line) when the file breaks the contract as a whole.
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
    if suffix == ".csv":
        header = check_header(read_csv_header(path, contract), path, contract)
        accepted = f"{raw}_accepted"
        rejects = f"{raw}_rejects"
        try:
            run_model(
                con,
                "raw/csv_extract",
                {
                    "path": str(path),
                    "columns": {name: "VARCHAR" for name in header.duckdb_names},
                    "contract_columns": list(header.contract_columns),
                    "rejects_table": rejects,
                    "rejects_scan": f"{rejects}_scan",
                },
                table=accepted,
            )
        except duckdb.Error as error:
            line = re.search(r"[Ll]ine:? (\d+)", str(error))
            at = f" at line {line.group(1)}" if line else ""
            raise ContractError(
                f"{contract.name} extract {path} cannot be read as CSV{at}: {_first_line(error)}"
            ) from None
        run_model(con, "raw/csv_malformed_lines", {"rejects_table": rejects}, table=malformed)
        run_model(
            con, "raw/csv_numbered_rows", {"accepted_table": accepted, "malformed_table": malformed}, table=raw
        )
    else:
        header = check_header(read_parquet_header(con, path, contract), path, contract)
        try:
            run_model(
                con, "raw/parquet_extract", {"path": str(path), "contract_columns": list(header.contract_columns)},
                table=raw,
            )
        except duckdb.Error as error:
            raise InputUnreadableError(
                f"{contract.name} extract {path} cannot be read as Parquet: {_first_line(error)}"
            ) from None
        con.execute(
            f"create or replace table {malformed} as select 0::bigint as source_row_number,"
            " ''::varchar as problem_column, ''::varchar as problem_reason,"
            " ''::varchar as problem_detail, ''::varchar as raw_values where false"
        )
    for column in contract.optional:
        if column not in header.contract_columns:
            con.execute(f"alter table {raw} add column {column} varchar")
    return list(header.ignored)


def _first_line(error: BaseException) -> str:
    lines = str(error).strip().splitlines()
    return lines[0] if lines else type(error).__name__


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

    DuckDB spills to a folder of this run (see `make_spill_folder`), removed when the stage ends.
    """
    spill_folder = make_spill_folder()
    try:
        con = duckdb.connect(":memory:", config={"temp_directory": str(spill_folder)})
        try:
            return _shape(con, config)
        finally:
            con.close()
    finally:
        shutil.rmtree(spill_folder, ignore_errors=True)


def _shape(con: duckdb.DuckDBPyConnection, config: RunConfig) -> ShapedData:
    seconds: dict[str, float] = {}
    for macros in MACRO_FILES:
        con.execute(read_model_sql(macros))
    started = time.perf_counter()
    ignored = {
        "shipments": load_extract(con, config.shipments_path, SHIPMENTS),
        "claims": load_extract(con, config.claims_path, CLAIMS),
    }
    seconds["raw"] = time.perf_counter() - started

    started = time.perf_counter()
    staging_parameters = {
        "run_date": config.run_date,
        "max_units_per_row": config.shipments.max_units_per_row,
        "max_warranty_months": config.warranty.max_months,
    }
    for model in STAGING_MODELS:
        run_model(con, model, staging_parameters)
    seconds["staging"] = time.perf_counter() - started

    run_model(con, NEWEST_DATES_MODEL, {})
    newest_claim_date, newest_ship_date = con.execute(
        "select newest_claim_date, newest_ship_date from newest_valid_dates"
    ).fetchone()
    as_of_date, as_of_source = choose_as_of(config.as_of_date, newest_claim_date, newest_ship_date, config.run_date)
    parameters = {
        "as_of_date": as_of_date,
        "default_warranty_months": config.warranty.default_months,
        "counted_statuses": list(config.claims.counted_statuses),
        "cost_window_months": config.reserve.cost_window_months,
        "shipments_file": os.path.abspath(config.shipments_path),
        "claims_file": os.path.abspath(config.claims_path),
    }
    for layer, models in (("intermediate", INTERMEDIATE_MODELS), ("outputs", OUTPUT_MODELS)):
        started = time.perf_counter()
        for model in models:
            run_model(con, model, parameters)
        seconds[layer] = time.perf_counter() - started

    tables = {name: _table(con, name) for name in _OUTPUT_COLUMNS}

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
    "quarantine": ("extract", "source_file", "row_number", "column", "reason", "detail", "raw_values"),
    "reconciliation": (
        "extract", "source_file", "rows_read", "rows_used", "rows_quarantined", "rows_after_as_of",
    ),
    "run_facts": ("fact", "count"),
    "known_products": ("product",),
}

_SORT_KEYS: dict[str, tuple[str, ...]] = {
    "fit_returns": ("product", "build_month", "sale_month", "warranty_months", "months_in_service"),
    "returns_by_failure_mode": ("product", "failure_mode", "months_in_service"),
    "fit_suspensions": ("product", "build_month", "sale_month", "warranty_months", "warranty_start_date"),
    "age_in_service": ("product", "build_month", "months_in_service"),
    "cohort_summary": ("product", "build_month"),
    "claim_cost_by_product": ("product",),
    "quarantine": ("extract", "row_number"),
    "reconciliation": ("extract",),
    "run_facts": ("fact",),
    "known_products": ("product",),
}


def _table(con: duckdb.DuckDBPyConnection, name: str) -> pd.DataFrame:
    columns = ", ".join(f'"{c}"' for c in _OUTPUT_COLUMNS[name])
    order = ", ".join(f'"{c}"' for c in _SORT_KEYS[name])
    frame = con.execute(f"select {columns} from {name} order by {order}").df()
    for column in frame.columns:
        if pd.api.types.is_datetime64_any_dtype(frame[column]):
            frame[column] = frame[column].dt.date
    return frame
