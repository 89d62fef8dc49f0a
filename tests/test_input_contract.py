"""Hostile inputs: dates in the future, absurd numbers, malformed lines, odd headers and files.

Each test feeds hand-written rows (or bytes) and checks the exact quarantine rows or the exact error.
Expected values follow the README's input contract (common practice, no source).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import logging
import os
import subprocess
import sys
from pathlib import Path

import duckdb
import pandas as pd
import pytest

from warranty_forecast.stages import shaping
from warranty_forecast.config import RunSettings, ShipmentSettings, WarrantySettings, load_config
from warranty_forecast.errors import ContractError, InputUnreadableError, QuarantineCeilingError
from warranty_forecast.run import run_nightly
from warranty_forecast.stages.shaping import shape_extracts

RUN_DATE = dt.date(2025, 6, 30)
SHIPMENT_HEADER = "product,build_month,ship_date,sale_date,units,warranty_months,serial"
CLAIM_HEADER = "claim_id,product,build_month,sale_date,failure_date,claim_date,cost,status,failure_code,serial"
GOOD_SHIPMENTS = [
    "A,2024-01,2024-01-10,2024-02-01,100,12,",  # 1
    "A,2024-02,2024-02-10,2024-03-01,100,12,",  # 2
]
GOOD_CLAIMS = [
    "K1,A,2024-01,2024-02-01,2024-03-15,2024-03-20,50.00,approved,X,",  # 1
    "K2,A,2024-02,2024-03-01,2024-04-15,2024-04-20,60.00,approved,X,",  # 2: the newest claim_date
]
NEWEST_GOOD_DATE = dt.date(2024, 4, 20)
NO_CEILING = RunSettings(max_quarantined_share=1.0)


def csv_bytes(header: str, rows: list[str | bytes], newline: bytes = b"\n") -> bytes:
    lines = [header.encode(), *[row if isinstance(row, bytes) else row.encode() for row in rows]]
    return newline.join(lines) + newline


def parquet_file(path: Path, header: str, rows: list[str]) -> Path:
    frame = pd.DataFrame([row.split(",") for row in rows], columns=header.split(","), dtype=str)
    frame.replace("", None).to_parquet(path, index=False)
    return path


def config_for(shipments_path: Path, claims_path: Path, *, as_of=None, run_date=RUN_DATE, **settings):
    """A configuration without a quarantine ceiling unless `run` is given; `settings` replace RunConfig fields."""
    config = load_config(
        shipments_path=shipments_path, claims_path=claims_path, out_dir=shipments_path.parent / "out",
        as_of_date=as_of, run_date=run_date,
    )
    return dataclasses.replace(config, **{"run": NO_CEILING, **settings})


def extracts(folder: Path, shipments: bytes | None = None, claims: bytes | None = None) -> tuple[Path, Path]:
    shipments_path, claims_path = folder / "shipments.csv", folder / "claims.csv"
    shipments_path.write_bytes(shipments if shipments is not None else csv_bytes(SHIPMENT_HEADER, GOOD_SHIPMENTS))
    claims_path.write_bytes(claims if claims is not None else csv_bytes(CLAIM_HEADER, GOOD_CLAIMS))
    return shipments_path, claims_path


def shape(folder: Path, shipments_bytes: bytes | None = None, claims: bytes | None = None, **settings):
    return shape_extracts(config_for(*extracts(folder, shipments_bytes, claims), **settings))


def quarantined(shaped) -> set[tuple[str, int, str, str]]:
    return {(r.extract, r.row_number, r.column, r.reason) for r in shaped.quarantine.itertuples()}


def assert_every_row_accounted_for(shaped) -> None:
    shaping.check_reconciliation(shaped.reconciliation)
    listed = shaped.quarantine.groupby("extract").size().to_dict()
    counted = shaped.reconciliation.set_index("extract")["rows_quarantined"].to_dict()
    assert {extract: listed.get(extract, 0) for extract in counted} == counted


# ------------------------------------------------------------------- 1. dates in the future, out of range


def test_dates_after_the_run_date_or_out_of_range_are_quarantined_and_do_not_move_the_as_of_date(tmp_path):
    shipments = csv_bytes(SHIPMENT_HEADER, [
        *GOOD_SHIPMENTS,
        "A,2024-03,2025-07-01,,10,12,",  # 3 shipped the day after the run date
        "A,2024-03,2024-03-10,9999-12-31,10,12,",  # 4 sold on the last day of 9999
        "A,2025-07,2024-03-10,,10,12,",  # 5 built in a month that has not begun
        "A,1899-12,1899-12-10,,10,12,",  # 6 built before 1900
        "A,2024-03,12345-01-01,,10,12,",  # 7 a year DuckDB parses but Python cannot hold
        "A,2024-03,0001-01-01,,10,12,",  # 8 year 1
    ])
    claims = csv_bytes(CLAIM_HEADER, [
        *GOOD_CLAIMS,
        "K3,A,2024-01,,2024-03-15,9999-12-31,5,,,",  # 3 filed in 9999
        "K4,A,2024-01,,2024-03-15,12345-01-01,5,,,",  # 4
        "K5,A,2024-01,,1899-12-31,2024-03-20,5,,,",  # 5
        "K6,A,2024-01,,infinity,2024-03-20,5,,,",  # 6 DuckDB reads 'infinity' as a date
        "K7,A,2024-01,,2025-07-15,2025-07-20,5,,,",  # 7 fails and is filed after the run date
        "K8,A,2024-01,2026-01-01,2024-03-15,2024-03-20,5,,,",  # 8 sold after the run date
        "K9,A,2026-01,,2024-03-15,2024-03-20,5,,,",  # 9 built after the run date
    ])
    shaped = shape(tmp_path, shipments, claims)
    assert quarantined(shaped) == {
        ("shipments", 3, "ship_date", "dated_after_run_date"),
        ("shipments", 4, "sale_date", "dated_after_run_date"),
        ("shipments", 5, "build_month", "dated_after_run_date"),
        ("shipments", 6, "build_month", "date_out_of_range"),
        ("shipments", 7, "ship_date", "date_out_of_range"),
        ("shipments", 8, "ship_date", "date_out_of_range"),
        ("claims", 3, "claim_date", "dated_after_run_date"),
        ("claims", 4, "claim_date", "date_out_of_range"),
        ("claims", 5, "failure_date", "date_out_of_range"),
        ("claims", 6, "failure_date", "date_out_of_range"),
        ("claims", 7, "failure_date", "dated_after_run_date"),
        ("claims", 8, "sale_date", "dated_after_run_date"),
        ("claims", 9, "build_month", "dated_after_run_date"),
    }
    details = shaped.quarantine.set_index(["extract", "row_number"])["detail"]
    assert details[("claims", 3)] == "claim_date 9999-12-31 is after the run date 2025-06-30"
    assert details[("claims", 4)] == "claim_date 12345-01-01 is outside 1900-01-01 .. 9999-12-31"
    assert shaped.as_of_date == NEWEST_GOOD_DATE  # not 9999-12-31
    assert_every_row_accounted_for(shaped)

    on_the_run_date = csv_bytes(CLAIM_HEADER, [*GOOD_CLAIMS, "K3,A,2024-01,,2025-06-29,2025-06-30,5,,,"])
    boundary = shape(tmp_path, claims=on_the_run_date)
    assert boundary.quarantine.empty and boundary.as_of_date == RUN_DATE


# ---------------------------------------------------------------- 4. absurd numbers, limits, spill folder


def test_absurd_numbers_are_quarantined_and_no_cast_overflows(tmp_path):
    shipments = csv_bytes(SHIPMENT_HEADER, [
        *GOOD_SHIPMENTS,
        "A,2024-01,2024-01-15,,50,2000000000,",  # 3 once: DuckDB laid out 2e9 months and spilled 15 GB
        "A,2024-01,2024-01-15,,50,100000,",  # 4 once: a crash
        "A,2024-01,2024-01-15,,50,3000000000,",  # 5 once: integer overflow
        "A,2024-01,2024-01-15,,50,241,",  # 6 one above the default limit 240
        "A,2024-01,2024-01-15,,50,240,",  # 7 at the limit: valid
        "A,2024-01,2024-01-15,,1e19,,",  # 8 once: bigint overflow
        "A,2024-01,2024-01-15,,1000000001,,",  # 9 one above the default limit
        "A,2024-01,2024-01-15,,1000000000,,",  # 10 at the limit: valid
        "A,2024-01,2024-01-15,,NaN,,",  # 11
        "A,2024-01,2024-01-15,,inf,,",  # 12
        "A,2024-01,2024-01-15,,-inf,,",  # 13
        "A,2024-01,2024-01-15,,1e308,,",  # 14
        "A,2024-01,2024-01-15,," + "9" * 400 + ",,",  # 15 beyond any double: inf
        "A,2024-01,2024-01-15,,-5,,",  # 16
        "A,2024-01,2024-01-15,,5,NaN,",  # 17
        "A,2024-01,2024-01-15,,5,-1e308,",  # 18
        "A,2024-01,2024-01-15,,5,1e308,",  # 19
    ])
    claims = csv_bytes(CLAIM_HEADER, [
        *GOOD_CLAIMS,
        "K3,A,2024-01,,2024-03-15,2024-03-20,1e308,,,",  # 3
        "K4,A,2024-01,,2024-03-15,2024-03-20,NaN,,,",  # 4
        "K5,A,2024-01,,2024-03-15,2024-03-20," + "9" * 400 + ",,,",  # 5
        "K6,A,2024-01,,2024-03-15,2024-03-20,-inf,,,",  # 6
        "K7,A,2024-01,,2024-03-15,2024-03-20,9999999999999999.99,,,",  # 7 the largest cost: valid
    ])
    shaped = shape(tmp_path, shipments, claims)
    assert quarantined(shaped) == {
        ("shipments", 3, "warranty_months", "warranty_months_above_limit"),
        ("shipments", 4, "warranty_months", "warranty_months_above_limit"),
        ("shipments", 5, "warranty_months", "warranty_months_above_limit"),
        ("shipments", 6, "warranty_months", "warranty_months_above_limit"),
        ("shipments", 8, "units", "units_above_limit"),
        ("shipments", 9, "units", "units_above_limit"),
        ("shipments", 11, "units", "unparseable_value"),
        ("shipments", 12, "units", "unparseable_value"),
        ("shipments", 13, "units", "unparseable_value"),
        ("shipments", 14, "units", "units_above_limit"),
        ("shipments", 15, "units", "unparseable_value"),
        ("shipments", 16, "units", "units_below_one"),
        ("shipments", 17, "warranty_months", "unparseable_value"),
        ("shipments", 18, "warranty_months", "invalid_warranty_months"),
        ("shipments", 19, "warranty_months", "warranty_months_above_limit"),
        ("claims", 3, "cost", "unparseable_value"),
        ("claims", 4, "cost", "unparseable_value"),
        ("claims", 5, "cost", "unparseable_value"),
        ("claims", 6, "cost", "unparseable_value"),
    }
    details = shaped.quarantine.set_index(["extract", "row_number"])["detail"]
    assert details[("shipments", 3)] == "warranty_months 2000000000 is above the limit 240"
    assert details[("shipments", 8)] == "units 1e19 is above the limit 1000000000"
    assert shaped.fit_suspensions["warranty_months"].max() == 240
    assert shaped.fit_suspensions["units"].sum() == 100 + 100 + 50 + 1_000_000_000
    assert_every_row_accounted_for(shaped)


def test_limits_are_configurable(tmp_path):
    shipments = csv_bytes(SHIPMENT_HEADER, [
        *GOOD_SHIPMENTS,  # 1, 2: 100 units, 12 months: at both limits below
        "A,2024-01,2024-01-15,,101,13,",  # 3 above both: units is checked first
        "A,2024-01,2024-01-15,,100,13,",  # 4
    ])
    config = config_for(
        *extracts(tmp_path, shipments),
        warranty=WarrantySettings(default_months=12, max_months=12),
        shipments=ShipmentSettings(max_units_per_row=100),
    )
    assert quarantined(shape_extracts(config)) == {
        ("shipments", 3, "units", "units_above_limit"),
        ("shipments", 4, "warranty_months", "warranty_months_above_limit"),
    }


def test_duckdb_spills_into_a_folder_of_the_run_that_is_always_removed(tmp_path, monkeypatch, caplog):
    temp = tmp_path / "temp"
    temp.mkdir()
    monkeypatch.setattr(shaping.tempfile, "tempdir", str(temp))
    finished = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead_pid = int(finished.stdout)
    abandoned = temp / f"warranty-forecast-duckdb-{dead_pid}-abcd1234"
    (abandoned / "spill").mkdir(parents=True)
    alive = temp / f"warranty-forecast-duckdb-{os.getppid()}-efgh5678"  # a running process: kept
    alive.mkdir()
    folders = []
    connect = duckdb.connect

    def recording_connect(database, config):
        folders.append(Path(config["temp_directory"]))
        assert folders[-1].is_dir()
        return connect(database, config=config)

    monkeypatch.setattr(shaping.duckdb, "connect", recording_connect)
    folder = tmp_path / "data"
    folder.mkdir()
    with caplog.at_level(logging.INFO, logger="warranty_forecast.stages.shaping"):
        shape(folder)
    assert not abandoned.exists() and alive.exists()
    assert f"left by process {dead_pid}, which is no longer running" in caplog.text
    assert folders[0].parent == temp and folders[0].name.startswith(f"warranty-forecast-duckdb-{os.getpid()}-")
    assert not folders[0].exists()
    # a run that fails removes its folder too
    with pytest.raises(ContractError):
        shape(folder, claims=b"")
    assert len(folders) == 2 and not folders[1].exists()
    assert sorted(p.name for p in temp.iterdir()) == [alive.name]


# -------------------------------------------------------------------------------- 3. quarantine ceiling


def test_quarantine_ceiling_stops_the_run_naming_file_share_and_reasons(tmp_path):
    # the claims came with day/month/year dates: all but one fail
    rows = [f"K{n},A,2024-01,,15/03/2024,20/03/2024,5,,," for n in range(1, 20)] + [GOOD_CLAIMS[0].replace("K1", "K20")]
    shipments_path, claims_path = extracts(tmp_path, claims=csv_bytes(CLAIM_HEADER, rows))
    config = config_for(shipments_path, claims_path, run=RunSettings())  # the default ceiling 0.05
    with pytest.raises(QuarantineCeilingError) as raised:
        shape_extracts(config)
    assert str(raised.value) == (
        f"claims extract {claims_path}: 19 of 20 rows quarantined (95.000%), above run.max_quarantined_share ="
        " 0.05; top reasons: unparseable_value 19 (e.g. row 1, column failure_date). Nothing was published:"
        " check the extract (a changed date format or delimiter?) or raise the ceiling"
    )
    out = tmp_path / "out"
    with pytest.raises(QuarantineCeilingError):
        run_nightly(dataclasses.replace(config, out_dir=out))
    assert not out.exists()


def test_quarantine_ceiling_lists_the_top_three_reasons_and_allows_a_share_at_the_ceiling(tmp_path):
    rows = [
        *GOOD_CLAIMS,
        "K3,A,2024-01,,2024-03-15,2024-03-20,-1,,,",  # 3 negative_cost
        "K4,A,2024-01,,2024-03-15,2024-03-20,-1,,,",  # 4 negative_cost
        "K5,A,2024-01,,2024-03-15,2024-03-20,5,lost,,",  # 5 unknown_status
        "K6,A,2024-01,,2024-03-15,2024-03-10,5,,,",  # 6 claim_before_failure
        "K7,A,2024-01,,2024-03-15,x,5,,,",  # 7 unparseable_value
    ]
    shipments_path, claims_path = extracts(tmp_path, claims=csv_bytes(CLAIM_HEADER, rows))
    with pytest.raises(QuarantineCeilingError, match=(
        r"5 of 7 rows quarantined \(71\.429%\), above run\.max_quarantined_share = 0\.5; top reasons:"
        r" negative_cost 2 \(e\.g\. row 3, column cost\), claim_before_failure 1 \(e\.g\. row 6, column"
        r" claim_date\), unknown_status 1 \(e\.g\. row 5, column status\)\. Nothing"
    )):
        shape_extracts(config_for(shipments_path, claims_path, run=RunSettings(max_quarantined_share=0.5)))
    shaped = shape_extracts(config_for(shipments_path, claims_path, run=RunSettings(max_quarantined_share=5 / 7)))
    assert len(shaped.quarantine) == 5


# ------------------------------------------------------------------- 5. every quarantined row is listed


@pytest.mark.parametrize("shipments_format", ["csv", "parquet"])
@pytest.mark.parametrize("claims_format", ["csv", "parquet"])
def test_every_quarantined_row_is_listed_for_csv_and_parquet(tmp_path, shipments_format, claims_format):
    shipment_rows = [
        *GOOD_SHIPMENTS,
        "A,2024-01,2024-01-10",  # 3 ragged (CSV only)
        b"A,2024-01,2024-01-10,,5,12,caf\xe9",  # 4 latin-1, not UTF-8 (CSV only)
        "A,2024-13,2024-01-10,,5,12,",  # 5
    ]
    claim_rows = [
        *GOOD_CLAIMS,
        "K3,A,2024-01",  # 3 ragged (CSV only)
        b"K4,A,2024-01,,2024-03-15,2024-03-20,5,,caf\xe9,",  # 4 latin-1 (CSV only)
        "K5,A,2024-01,,2024-03-15,2024-03-20,-1,,,",  # 5
        "K6,A,2024-01,,2024-03-15,2024-03-20,5,,,,extra",  # 6 a field too many (CSV only)
    ]
    paths = {}
    for name, header, rows in (("shipments", SHIPMENT_HEADER, shipment_rows), ("claims", CLAIM_HEADER, claim_rows)):
        if (shipments_format if name == "shipments" else claims_format) == "csv":
            paths[name] = tmp_path / f"{name}.csv"
            paths[name].write_bytes(csv_bytes(header, rows))
        else:
            whole = [row for row in rows if isinstance(row, str) and row.count(",") == header.count(",")]
            paths[name] = parquet_file(tmp_path / f"{name}.parquet", header, whole)
    shaped = shape_extracts(config_for(paths["shipments"], paths["claims"]))
    assert_every_row_accounted_for(shaped)
    if claims_format == "csv":
        assert {row for row in quarantined(shaped) if row[0] == "claims"} == {
            ("claims", 3, "sale_date", "malformed_line"),
            ("claims", 4, "failure_code", "malformed_line"),
            ("claims", 5, "cost", "negative_cost"),
            ("claims", 6, "", "malformed_line"),
        }
    if shipments_format == "csv":
        assert {row for row in quarantined(shaped) if row[0] == "shipments"} == {
            ("shipments", 3, "sale_date", "malformed_line"),
            ("shipments", 4, "serial", "malformed_line"),
            ("shipments", 5, "build_month", "unparseable_value"),
        }


# ---------------------------------------------------------------------------------------------- 6. headers


@pytest.mark.parametrize(
    ("claims", "message"),
    [
        (csv_bytes(CLAIM_HEADER + ",cost", [row + ",1" for row in GOOD_CLAIMS]),
         r"claims extract .*claims\.csv: column 'cost' appears twice in the header \(columns 7 and 11\)"),
        (csv_bytes(CLAIM_HEADER.replace("product", " product"), GOOD_CLAIMS),
         r"claims\.csv: required column 'product' is written ' product' in the header"),
        (csv_bytes(CLAIM_HEADER.replace("serial", "Serial"), GOOD_CLAIMS),
         r"claims\.csv: optional column 'serial' is written 'Serial' in the header"),
        (csv_bytes(CLAIM_HEADER.replace(",", ";"), [row.replace(",", ";") for row in GOOD_CLAIMS]),
         r"claims\.csv: the header does not hold the required column\(s\) \['claim_id', .*'cost'\]; .*"
         r"the delimiter must be a comma"),
        (b"", r"claims extract .*claims\.csv has no header line: the file is empty"),
        (b"\n" + csv_bytes(CLAIM_HEADER, GOOD_CLAIMS), r"claims\.csv has no header line: its first line is empty"),
        (csv_bytes('claim_id,"product', GOOD_CLAIMS),
         r"claims\.csv: the header line \(line 1\) cannot be split into columns: an unterminated quote"),
        (csv_bytes(CLAIM_HEADER + ",caf\xe9", GOOD_CLAIMS).replace("caf\xe9".encode(), b"caf\xe9"),
         r"claims\.csv: the header line is not UTF-8 text \(byte 0xe9\)"),
    ],
    ids=["duplicate", "leading-space", "case", "semicolons", "empty", "blank-first-line", "open-quote", "latin-1"],
)
def test_header_problems_stop_the_run_with_a_message_a_person_can_act_on(tmp_path, claims, message):
    with pytest.raises(ContractError, match=message):
        shape(tmp_path, claims=claims)


def test_parquet_headers_are_held_to_the_same_rules(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    shipments_path, _ = extracts(tmp_path)
    frame = pd.DataFrame([row.split(",") for row in GOOD_CLAIMS], columns=CLAIM_HEADER.split(","))
    table = pa.Table.from_pandas(frame, preserve_index=False).append_column("cost", pa.array(["1", "2"]))
    pq.write_table(table, tmp_path / "duplicate.parquet")
    with pytest.raises(ContractError, match=r"duplicate\.parquet: column 'cost' appears twice"):
        shape_extracts(config_for(shipments_path, tmp_path / "duplicate.parquet"))
    frame.rename(columns={"product": "Product"}).to_parquet(tmp_path / "case.parquet", index=False)
    with pytest.raises(ContractError, match=r"case\.parquet: required column 'product' is written 'Product'"):
        shape_extracts(config_for(shipments_path, tmp_path / "case.parquet"))


@pytest.mark.parametrize("file_format", ["csv", "parquet"])
def test_extra_columns_named_like_internal_ones_are_ignored_and_listed(tmp_path, file_format):
    extra = ["ordinality", "file_row_number", "source_row_number", "accepted_row_number", "range", "ignored_column_2"]
    header = ",".join(["ordinality", *CLAIM_HEADER.split(","), *extra[1:]])
    rows = [",".join(["7", row, "a", "b", "c", "d", "e"]) for row in GOOD_CLAIMS]
    shipments_path, _ = extracts(tmp_path)
    if file_format == "csv":
        claims_path = tmp_path / "claims_with_extras.csv"
        claims_path.write_bytes(csv_bytes(header, rows))
    else:
        claims_path = parquet_file(tmp_path / "claims_with_extras.parquet", header, rows)
    shaped = shape_extracts(config_for(shipments_path, claims_path))
    assert shaped.ignored_columns == {"shipments": [], "claims": extra}
    assert shaped.quarantine.empty
    assert shaped.fit_returns["returns"].sum() == 2


def test_crlf_byte_order_mark_and_quoted_line_breaks_read_as_plain_csv(tmp_path):
    rows = [
        GOOD_CLAIMS[0].replace(",X,", ',"X\r\nand Y",'),  # 1 a quoted line break in failure_code
        "K9,A,2024-01",  # 2 ragged: its row number counts the quoted line break as part of row 1
        GOOD_CLAIMS[1],  # 3
    ]
    claims = b"\xef\xbb\xbf" + csv_bytes(CLAIM_HEADER, rows, newline=b"\r\n")
    shaped = shape(tmp_path, claims=claims)
    assert quarantined(shaped) == {("claims", 2, "sale_date", "malformed_line")}
    assert shaped.returns_by_failure_mode.set_index("failure_mode")["returns"].to_dict() == {"X": 1, "X\r\nand Y": 1}
    assert_every_row_accounted_for(shaped)


def test_header_only_file_has_zero_rows(tmp_path):
    shaped = shape(tmp_path, claims=CLAIM_HEADER.encode())  # no line end either
    assert shaped.reconciliation.set_index("extract").loc["claims", "rows_read"] == 0
    assert shaped.fit_returns.empty and shaped.as_of_date == dt.date(2024, 2, 10)  # the newest ship_date


def test_an_unterminated_quote_quarantines_its_row(tmp_path):
    rows = [GOOD_CLAIMS[0], 'K3,A,"2024-01,,2024-03-15,2024-03-20,5,,,', GOOD_CLAIMS[1]]
    shaped = shape(tmp_path, claims=csv_bytes(CLAIM_HEADER, rows))
    # the open quote runs to the end of the file, so row 2 swallows row 3: two rows read, one quarantined
    assert quarantined(shaped) == {("claims", 2, "build_month", "malformed_line")}
    assert "unterminated quote" in shaped.quarantine["detail"].iloc[0]
    assert shaped.reconciliation.set_index("extract").loc["claims", "rows_read"] == 2
    assert_every_row_accounted_for(shaped)


def test_binary_and_damaged_files_are_reported_without_a_traceback(tmp_path):
    with pytest.raises(InputUnreadableError, match=r"claims\.csv holds binary data .*not a CSV text file"):
        shape(tmp_path, claims=bytes(range(256)) * 8)
    shipments_path, _ = extracts(tmp_path)
    whole = parquet_file(tmp_path / "claims.parquet", CLAIM_HEADER, GOOD_CLAIMS).read_bytes()
    truncated = tmp_path / "truncated.parquet"
    truncated.write_bytes(whole[: len(whole) // 2])
    with pytest.raises(InputUnreadableError, match=r"truncated\.parquet is not a readable Parquet file \(truncated"):
        shape_extracts(config_for(shipments_path, truncated))
    parquet_named_csv = tmp_path / "parquet.csv"
    parquet_named_csv.write_bytes(whole)
    with pytest.raises(InputUnreadableError, match="binary data"):
        shape_extracts(config_for(shipments_path, parquet_named_csv))


@pytest.mark.parametrize(
    ("claims", "code", "words"),
    [(bytes(range(256)) * 8, 3, "holds binary data"), (b"a;b;c\n1;2;3\n", 4, "the delimiter must be a comma")],
)
def test_the_command_exits_with_one_clear_line(tmp_path, capfd, claims, code, words):
    from warranty_forecast.cli import main

    shipments_path, claims_path = extracts(tmp_path, claims=claims)
    assert main(["run", "--shipments", str(shipments_path), "--claims", str(claims_path), "--out", str(tmp_path / "o")]) == code
    err = capfd.readouterr().err
    assert words in err and "Traceback" not in err
    assert not (tmp_path / "o").exists()


# ------------------------------------------------------------------------ 7. which extract, which file


def test_quarantine_names_the_extract_and_its_absolute_path(tmp_path, monkeypatch):
    (tmp_path / "sales").mkdir()
    (tmp_path / "service").mkdir()
    (tmp_path / "sales" / "extract.csv").write_bytes(csv_bytes(SHIPMENT_HEADER, [*GOOD_SHIPMENTS, ",2024-01,2024-01-10,,1,,"]))
    (tmp_path / "service" / "extract.csv").write_bytes(csv_bytes(CLAIM_HEADER, [*GOOD_CLAIMS, "K3,A,2024-01,,x,2024-03-20,5,,,"]))
    monkeypatch.chdir(tmp_path)
    shaped = shape_extracts(config_for(Path("sales/extract.csv"), Path("service/../service/extract.csv")))
    assert list(shaped.quarantine.columns) == [
        "extract", "source_file", "row_number", "column", "reason", "detail", "raw_values",
    ]
    assert shaped.quarantine[["extract", "source_file", "row_number"]].values.tolist() == [
        ["claims", str(tmp_path / "service" / "extract.csv"), 3],
        ["shipments", str(tmp_path / "sales" / "extract.csv"), 3],
    ]
    assert json.loads(shaped.quarantine["raw_values"].iloc[0])["failure_date"] == "x"
    assert shaped.reconciliation.set_index("extract")["source_file"].to_dict() == {
        "shipments": str(tmp_path / "sales" / "extract.csv"), "claims": str(tmp_path / "service" / "extract.csv"),
    }


# ---------------------------------------------------------------------- 2. freshness in the manifest


def test_stale_extracts_warn_in_the_log_manifest_and_report(tmp_path):
    # claims 20 days older than the shipments; the run 41 days after the as-of date
    shipments = csv_bytes(SHIPMENT_HEADER, [*GOOD_SHIPMENTS, "A,2024-05,2024-05-10,,10,12,"])
    shipments_path, claims_path = extracts(tmp_path, shipments)
    config = config_for(shipments_path, claims_path, run_date=dt.date(2024, 6, 20))
    result = run_nightly(config)
    manifest = json.loads((config.out_dir / "latest" / "manifest.json").read_text())
    assert manifest["as_of_date"] == "2024-05-10" and manifest["as_of_source"] == "newest valid ship_date"
    assert manifest["freshness"] == {
        "run_date": "2024-06-20", "as_of_date": "2024-05-10", "newest_claim_date": "2024-04-20",
        "newest_ship_date": "2024-05-10", "days_as_of_after_newest_claim": 20, "days_as_of_after_newest_ship": 0,
        "days_run_date_after_as_of": 41, "max_data_gap_days": 7,
    }
    stale = [
        "claims extract: newest valid claim_date 2024-04-20 is 20 days before the as-of date 2024-05-10 (more"
        " than run.max_data_gap_days = 7): the extract may be stale; claims missing from it make the return"
        " rates and the forecast too low",
        "as-of date 2024-05-10 is 41 days before the run date 2024-06-20 (more than run.max_data_gap_days = 7):"
        " the extracts may be stale",
    ]
    assert manifest["warnings"][:2] == stale and list(result.warnings[:2]) == stale
    assert stale[0] in (config.out_dir / "latest" / "report.md").read_text()
    assert manifest["quarantine_by_reason"] == {}
