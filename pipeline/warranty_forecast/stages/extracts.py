"""The extracts: their column contract, their headers read and checked in Python, and their loading
into DuckDB's raw tables through the models of `sql/raw/`.

`load_extract` writes, per extract, ``raw_<name>`` (one row per data row, every contract column as text,
plus its 1-based ``source_row_number``) and ``raw_<name>_malformed`` (the CSV lines DuckDB could not split;
none for Parquet); `raw_tables` names them for the SQL runner, whose models read them.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import duckdb

from warranty_forecast.errors import ContractError, InputUnreadableError
from warranty_forecast.stages.sql_runner import run_model

_SUPPORTED_SUFFIXES = (".csv", ".parquet")
PARQUET_ROW_NUMBER = "file_row_number"  # the column DuckDB's Parquet reader adds when asked to number rows


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


def raw_tables(contract: ExtractContract) -> tuple[str, str]:
    """The tables `load_extract` writes for an extract: its rows and its malformed lines."""
    return f"raw_{contract.name}", f"raw_{contract.name}_malformed"


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
    raw, malformed = raw_tables(contract)
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
            con,
            "raw/csv_numbered_rows",
            {"accepted_table": accepted, "malformed_table": malformed, "empty_contract_row": _empty_row(contract)},
            table=raw,
        )
        con.execute(f'drop table "{accepted}"')  # numbered into the raw table: its memory is free for the rest
    else:
        names = read_parquet_header(con, path, contract)
        header = check_header(names, path, contract)
        # the reader numbers the rows itself unless the file holds a column of that number's name
        model = "raw/parquet_extract_by_position" if PARQUET_ROW_NUMBER in names else "raw/parquet_extract"
        try:
            run_model(
                con,
                model,
                {
                    "path": str(path),
                    "contract_columns": list(header.contract_columns),
                    "empty_contract_row": _empty_row(contract),
                },
                table=raw,
            )
        except duckdb.Error as error:
            raise InputUnreadableError(
                f"{contract.name} extract {path} cannot be read as Parquet: {_first_line(error)}"
            ) from None
        run_model(con, "raw/empty_malformed_lines", {}, table=malformed)
    return list(header.ignored)


def _empty_row(contract: ExtractContract) -> dict[str, None]:
    """Every contract column -> NULL: the raw models add the optional columns a file lacks from it."""
    return {column: None for column in contract.columns}


def _first_line(error: BaseException) -> str:
    lines = str(error).strip().splitlines()
    return lines[0] if lines else type(error).__name__

