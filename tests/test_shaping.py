"""The DuckDB stage on a handful of hand-written rows, with exact expected outputs.

Expected values are worked out by hand from the rules in the SQL headers (common practice, no source).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import os
from pathlib import Path

import pandas as pd
import pytest

from warranty_forecast.config import RunSettings, load_config
from warranty_forecast.errors import ConfigError, ContractError, InputUnreadableError
from warranty_forecast.stages.shaping import DataFreshness, shape_extracts

SHIPMENT_HEADER = "product,build_month,ship_date,sale_date,units,warranty_months,serial"
CLAIM_HEADER = "claim_id,product,build_month,sale_date,failure_date,claim_date,cost,status,failure_code,serial"

SHIPMENTS = [
    "A,2024-01,2024-01-10,2024-02-01,100,12,",  # 1 known sale date
    "A,2024-01,2024-01-15,,50,12,",  # 2 sale date imputed: ship + median lag (22 days) = 2024-02-06
    "A,2024-02,2024-02-10,2024-03-01,100,,",  # 3 default warranty 24
    "A,2024-02,2024-01-10,2024-03-01,100,,",  # 4 shipped before build month
    ",2024-02,2024-02-10,2024-03-01,100,,",  # 5 product missing
    "B,2024-01,2024-01-10,2024-01-20,1,24,S1",  # 6
    "B,2024-01,2024-01-10,2024-01-20,1,24,S1",  # 7 duplicate serial
    "B,2024-01,2024-01-10",  # 8 malformed line (too few fields)
    "A,2024-03,2025-06-01,,10,,",  # 9 shipped after the as-of date
    "A,2024-13,2024-02-10,,10,,",  # 10 unparseable build month
    "A,2024-02,2024-02-10,2024-02-01,10,,",  # 11 sold before shipped
    "A,2024-02,2024-02-10,,0,,",  # 12 units below one
    "A,2024-02,2024-02-10,,2.5,,",  # 13 not a whole number
    "B,2024-01,2024-01-10,2024-01-20,2,24,S2",  # 14 serial with many units
    "B,2024-01,2024-01-10,2025-03-01,1,24,S3",  # 15 sold after as-of: unsold then, clock imputed
    "C,2024-01,2024-01-10,2024-02-01,10,3,",  # 16 a 3-month warranty
]
CLAIMS = [
    "C1,A,2024-01,2024-02-01,2024-03-15,2024-03-20,50.00,approved,X,",  # 1 MIS 2
    "C2,A,2024-01,,2024-05-15,2024-05-20,60.00,,X,",  # 2 clock from cohort median, status default
    "C3,A,2024-02,2024-03-01,2024-04-15,2024-04-20,70.00,rejected,,",  # 3 not counted
    "C3,A,2024-02,2024-03-01,2024-04-15,2024-04-20,70.00,rejected,,",  # 4 duplicate claim_id
    "C4,B,2024-01,,2024-06-01,2024-06-03,100,approved,Y,S1",  # 5 clock from the unit's serial
    "C5,Z,2024-01,,2024-06-01,2024-06-03,100,approved,Y,",  # 6 cohort never shipped
    "C6,A,2024-01,2024-02-01,2024-03-15,2025-08-20,50.00,approved,X,",  # 7 filed after the as-of date
    "C7,A,2024-01,2024-02-01,2024-01-15,2024-03-20,50.00,approved,X,",  # 8 failure before sale
    "C8,A,2024-01,2024-02-01,2024-03-15,2024-03-20,-5,approved,X,",  # 9 negative cost
    "C9,A,2024-01,2024-02-01,2024-03-15,2024-03-10,5,approved,X,",  # 10 claim before failure
    "C10,A,2024-01,2024-02-01,2024-03-15,2024-03-20,5,lost,X,",  # 11 unknown status (open, pending are known)
    "C11,A,2024-01,,2023-12-15,2024-03-20,5,approved,X,",  # 12 failure before build month
    "C12,A,2024-01,2024-02-01,2024-02-30,2024-03-20,5,approved,X,",  # 13 unparseable failure date
    ",A,2024-01,2024-02-01,2024-03-15,2024-03-20,5,approved,X,",  # 14 claim_id missing
    "C13,C,2024-01,2024-02-01,2024-06-15,2024-06-20,40.00,approved,X,",  # 15 MIS 5 > 3: out of coverage
    "C14,B,2024-01,,2024-06-01,2024-06-03,100,approved,Y,S9",  # 16 unknown serial: cohort clock
    "C15,A,2024-01,,2024-06-01,2024-06-03,100,approved,Y,S1",  # 17 serial of another cohort
]
AS_OF = dt.date(2024, 12, 31)
RUN_DATE = dt.date(2025, 12, 31)  # after every date of the rows above
# the hand-written rows are half bad on purpose: no quarantine ceiling unless a test sets one
NO_CEILING = RunSettings(max_quarantined_share=1.0)


def write_extracts(folder: Path, shipments: list[str], claims: list[str]) -> tuple[Path, Path]:
    shipments_path = folder / "shipments.csv"
    claims_path = folder / "claims.csv"
    shipments_path.write_text("\n".join([SHIPMENT_HEADER, *shipments]) + "\n")
    claims_path.write_text("\n".join([CLAIM_HEADER, *claims]) + "\n")
    return shipments_path, claims_path


def config_for(shipments_path: Path, claims_path: Path, as_of=AS_OF, run_date=RUN_DATE, **settings):
    """A run configuration for hand-written extracts; `settings` replace RunConfig fields."""
    config = load_config(
        shipments_path=shipments_path, claims_path=claims_path, out_dir=shipments_path.parent / "out",
        as_of_date=as_of, run_date=run_date,
    )
    return dataclasses.replace(config, **{"run": NO_CEILING, **settings})


def shape(folder: Path, shipments: list[str] = SHIPMENTS, claims: list[str] = CLAIMS, as_of=AS_OF, **settings):
    shipments_path, claims_path = write_extracts(folder, shipments, claims)
    return shape_extracts(config_for(shipments_path, claims_path, as_of=as_of, **settings))


@pytest.fixture(scope="module")
def shaped(tmp_path_factory):
    return shape(tmp_path_factory.mktemp("shaping"))


def test_quarantine_lists_each_bad_row_with_file_row_column_and_reason(shaped):
    got = {(Path(r.source_file).name, r.row_number, r.column, r.reason) for r in shaped.quarantine.itertuples()}
    assert got == {
        ("shipments.csv", 4, "ship_date", "shipped_before_build"),
        ("shipments.csv", 5, "product", "missing_value"),
        ("shipments.csv", 7, "serial", "duplicate_serial"),
        ("shipments.csv", 8, "sale_date", "malformed_line"),
        ("shipments.csv", 10, "build_month", "unparseable_value"),
        ("shipments.csv", 11, "sale_date", "sold_before_shipped"),
        ("shipments.csv", 12, "units", "units_below_one"),
        ("shipments.csv", 13, "units", "not_a_whole_number"),
        ("shipments.csv", 14, "units", "serial_with_many_units"),
        ("claims.csv", 4, "claim_id", "duplicate_claim_id"),
        ("claims.csv", 6, "build_month", "cohort_never_shipped"),
        ("claims.csv", 8, "failure_date", "failure_before_sale"),
        ("claims.csv", 9, "cost", "negative_cost"),
        ("claims.csv", 10, "claim_date", "claim_before_failure"),
        ("claims.csv", 11, "status", "unknown_status"),
        ("claims.csv", 12, "failure_date", "failure_before_build"),
        ("claims.csv", 13, "failure_date", "unparseable_value"),
        ("claims.csv", 14, "claim_id", "missing_value"),
        ("claims.csv", 17, "serial", "serial_mismatch"),
    }
    files = shaped.quarantine.groupby("extract")["source_file"].unique().to_dict()
    assert {extract: [Path(f).name for f in names] for extract, names in files.items()} == {
        "shipments": ["shipments.csv"], "claims": ["claims.csv"],
    }
    assert all(os.path.isabs(f) for f in shaped.quarantine["source_file"])
    duplicate = shaped.quarantine[shaped.quarantine["reason"] == "duplicate_serial"].iloc[0]
    assert "first appears at row 6" in duplicate["detail"]
    raw = json.loads(shaped.quarantine[shaped.quarantine["reason"] == "negative_cost"].iloc[0]["raw_values"])
    assert raw["cost"] == "-5" and raw["claim_id"] == "C8"


def test_every_row_is_used_quarantined_or_after_the_as_of_date(shaped):
    rec = shaped.reconciliation.set_index("extract")
    folder = Path(shaped.quarantine["source_file"].iloc[0]).parent
    assert rec.loc["shipments"].to_dict() == {
        "source_file": str(folder / "shipments.csv"), "rows_read": 16, "rows_used": 6, "rows_quarantined": 9,
        "rows_after_as_of": 1,
    }
    assert rec.loc["claims"].to_dict() == {
        "source_file": str(folder / "claims.csv"), "rows_read": 17, "rows_used": 6, "rows_quarantined": 10,
        "rows_after_as_of": 1,
    }


def test_months_in_service_and_coverage(shaped):
    returns = shaped.fit_returns
    a = returns[returns["product"] == "A"].set_index("months_in_service")["returns"].to_dict()
    # C1: 2024-02-01 -> 2024-03-15 is 43 days = 1.41 months -> MIS 2.
    # C2: clock = median clock of A/2024-01 rows in service = 2024-02-01 (rows: 02-01, 02-06 -> lower median)
    #     -> 2024-05-15 is 104 days = 3.42 months -> MIS 4.
    assert a == {2: 1, 4: 1}
    b = returns[returns["product"] == "B"].set_index("months_in_service")["returns"].to_dict()
    # C4 on S1's clock 2024-01-20 -> 2024-06-01 = 133 days = 4.37 months -> MIS 5; C14 (unknown serial)
    # on the cohort median clock of B/2024-01: rows 2024-01-20 and 2024-01-20 + 22 days (S3) -> 2024-01-20.
    assert b == {5: 2}
    facts = shaped.run_facts
    assert facts["claims_out_of_coverage"] == 1  # C13: 135 days = 4.44 months, MIS 5 under a 3-month warranty
    assert facts["claims_status_not_counted"] == 1
    assert facts["claims_with_unknown_serial"] == 1
    assert facts["claims_sale_date_imputed"] == 2  # C2 and C14


def test_sale_date_imputation_and_the_as_of_rule(shaped):
    suspensions = shaped.fit_suspensions.set_index(["product", "warranty_start_date"])
    # ship-to-sale lags known by the as-of date: A rows 22 and 20 days (100 units each), B rows 10 days. Every
    # row is mature (shipped at least the longest lag before the as-of date), so G(D) = 1 for the rows without
    # a sale date: wholly sold, on the median lag given a lag of at most D days (the lower median, A 20 days,
    # B 10 days); m = 50/250 for A, 1/4 for B (not needed when G = 1).
    assert (("A", dt.date(2024, 2, 4)) in suspensions.index)  # 2024-01-15 + 20 days
    assert (("B", dt.date(2024, 1, 20)) in suspensions.index)  # S3 (sold after the as-of date) + 10 days
    assert shaped.run_facts["units_in_service_sale_date_imputed"] == 51  # 50 units of row 2 + S3
    assert shaped.run_facts["units_sale_date_imputed"] == 51
    assert shaped.run_facts["units_in_channel"] == 0
    assert shaped.run_facts["units_sold_after_as_of_sale_date_imputed"] == 1


def test_suspensions_share_group_survivors_and_observed_age_is_capped(shaped):
    rows = shaped.fit_suspensions
    group = rows[(rows["product"] == "A") & (rows["build_month"] == dt.date(2024, 1, 1))]
    # group A/2024-01/sale 2024-02/12 months: 150 units, 2 returns -> 148 survivors shared 100:50
    assert group["suspensions"].sum() == pytest.approx(148.0)
    assert sorted(group["suspensions"].round(6)) == pytest.approx([148 / 3, 296 / 3])
    # 2024-02-01 -> 2024-12-31 is 334 days after the start, 335 days in service (the start date is day 1)
    # = 11.01 months, below the 12-month warranty's 366 days
    assert group["observed_age_months"].max() == pytest.approx(335 / (365.25 / 12))


def test_age_in_service_matrix_units_at_risk(shaped):
    cells = shaped.age_in_service
    a1 = cells[(cells["product"] == "A") & (cells["build_month"] == dt.date(2024, 1, 1))].set_index(
        "months_in_service"
    )
    assert a1.loc[1, "units_at_risk"] == pytest.approx(150)
    assert a1.loc[2, ["units_at_risk", "returns"]].tolist() == pytest.approx([150, 1])
    assert a1.loc[3, "units_at_risk"] == pytest.approx(149)
    assert a1.loc[5, "units_at_risk"] == pytest.approx(148)
    assert a1.loc[2, "return_rate"] == pytest.approx(1 / 150)
    # month 11 holds the ages (305, 335] days (the day grid: floor(10 x 30.4375) + 1 = 305, floor(11 x
    # 30.4375) + 1 = 335). The row 335 days in service ends exactly with month 11 (a whole-month survivor,
    # not withdrawn); the 50-unit row 331 days in service ends inside it: its 148/3 survivors are withdrawn.
    assert a1.loc[11, "units_withdrawn"] == pytest.approx(148 / 3)
    assert a1.index.max() == 11


def test_as_of_date_defaults_to_the_newest_valid_date_of_both_extracts(tmp_path):
    shaped = shape(tmp_path, as_of=None)
    # C6 filed 2025-08-20 is the newest valid date (the newest valid ship_date is 2025-06-01, row 9),
    # so nothing is after the as-of date
    assert (shaped.as_of_date, shaped.as_of_source) == (dt.date(2025, 8, 20), "newest valid claim_date")
    assert shaped.reconciliation.set_index("extract")["rows_after_as_of"].to_dict() == {"shipments": 0, "claims": 0}
    # a shipments extract newer than the claims moves the default as-of date to its newest ship_date
    newer = shape(tmp_path, shipments=[*SHIPMENTS, "A,2025-09,2025-09-10,,5,,"], as_of=None)  # row 17
    assert (newer.as_of_date, newer.as_of_source) == (dt.date(2025, 9, 10), "newest valid ship_date")
    assert newer.freshness.days_after_newest_claim == 21
    assert newer.freshness.days_after_newest_shipment == 0


def test_as_of_date_after_the_newest_valid_data_is_a_config_error(tmp_path):
    with pytest.raises(ConfigError, match=(
        r"--as-of 2025-08-21 is after the newest valid data \(newest claim_date 2025-08-20, newest ship_date"
        r" 2025-06-01\)"
    )):
        shape(tmp_path, as_of=dt.date(2025, 8, 21))
    assert shape(tmp_path, as_of=dt.date(2025, 8, 20)).as_of_date == dt.date(2025, 8, 20)


def test_without_any_usable_shipment_the_run_stops(tmp_path):
    # no valid date anywhere: the run date stands in as the as-of date, and the run stops on the shipments
    with pytest.raises(ContractError, match=r"shipments\.csv: no usable row shipped by 2025-12-31"):
        shape(tmp_path, shipments=["A,2024-13,2024-01-10"], claims=["K1,A,2024-01,,x,y,5,,,"], as_of=None)
    with pytest.raises(ContractError, match=r"shipments\.csv holds no data rows"):
        shape(tmp_path, shipments=[], as_of=None)


def test_freshness_warns_about_each_gap_longer_than_the_limit():
    def freshness(claim, ship, run, limit=7):
        return DataFreshness(
            run_date=run, as_of_date=dt.date(2026, 11, 30), as_of_source="command line",
            newest_claim_date=claim, newest_ship_date=ship, max_gap_days=limit,
        )

    on_time = freshness(dt.date(2026, 11, 23), dt.date(2026, 11, 30), dt.date(2026, 12, 7))  # 7-day gaps: no warning
    assert on_time.warnings() == []
    late = freshness(dt.date(2026, 11, 22), None, dt.date(2026, 12, 8))
    assert late.warnings() == [
        "claims extract: newest valid claim_date 2026-11-22 is 8 days before the as-of date 2026-11-30 (more than"
        " run.max_data_gap_days = 7): the extract may be stale; claims missing from it make the return rates and"
        " the forecast too low",
        "shipments extract has no valid ship_date: it is empty or every row is quarantined",
        "as-of date 2026-11-30 is 8 days before the run date 2026-12-08 (more than run.max_data_gap_days = 7):"
        " the extracts may be stale",
    ]
    assert late.as_manifest()["days_as_of_after_newest_claim"] == 8
    # a past as-of date (newest data after it) is not a gap
    assert freshness(dt.date(2026, 12, 5), dt.date(2026, 12, 5), dt.date(2026, 12, 6)).warnings() == []


def test_missing_required_column_names_file_and_column(tmp_path):
    shipments_path, claims_path = write_extracts(tmp_path, SHIPMENTS, CLAIMS)
    claims_path.write_text(claims_path.read_text().replace("failure_date", "Failure_Date", 1))
    config = load_config(shipments_path=shipments_path, claims_path=claims_path, out_dir=tmp_path / "o")
    with pytest.raises(ContractError, match=r"claims\.csv.*'failure_date'.*'Failure_Date'"):
        shape_extracts(config)


def test_missing_optional_columns_are_defaulted(tmp_path):
    shipments = ["A,2024-01,2024-01-10", "A,2024-01,2024-01-20"]
    claims = ["K1,A,2024-01,2024-03-01,2024-03-02,10"]
    shipments_path = tmp_path / "s.csv"
    claims_path = tmp_path / "c.csv"
    shipments_path.write_text("product,build_month,ship_date\n" + "\n".join(shipments) + "\n")
    claims_path.write_text("claim_id,product,build_month,failure_date,claim_date,cost\n" + "\n".join(claims) + "\n")
    config = load_config(shipments_path=shipments_path, claims_path=claims_path, out_dir=tmp_path / "o")
    shaped = shape_extracts(config)
    assert shaped.quarantine.empty
    assert shaped.fit_suspensions["warranty_months"].unique().tolist() == [24]
    assert shaped.fit_suspensions["units"].sum() == 2
    assert shaped.fit_returns["returns"].sum() == 1


def test_parquet_extract_gives_the_same_result_as_csv(tmp_path, shaped):
    shipments_path, claims_path = write_extracts(tmp_path, SHIPMENTS, CLAIMS)
    # the malformed CSV line cannot exist in Parquet: drop it, keep the other rows' numbers in mind
    frame = pd.read_csv(shipments_path, dtype=str, keep_default_na=False).drop(index=7)  # data row 8
    parquet_path = tmp_path / "shipments.parquet"
    frame.replace("", None).to_parquet(parquet_path, index=False)
    from_parquet = shape_extracts(config_for(parquet_path, claims_path))
    pd.testing.assert_frame_equal(from_parquet.fit_returns, shaped.fit_returns)
    pd.testing.assert_frame_equal(from_parquet.fit_suspensions, shaped.fit_suspensions)
    reasons = from_parquet.quarantine[from_parquet.quarantine["extract"] == "shipments"]
    assert (reasons["source_file"] == str(parquet_path)).all()
    # rows after the skipped line 8 move up by one
    assert reasons.set_index("row_number")["reason"].to_dict()[9] == "unparseable_value"


def test_both_parquet_readers_number_rows_alike_across_row_groups(tmp_path):
    """raw/parquet_extract numbers rows with the reader's file_row_number; raw/parquet_extract_by_position
    (for a file holding a column of that name) joins a range to the rows by position: the same table,
    row numbers 1..n in file order across row groups (common practice, no source)."""
    import duckdb
    import pyarrow as pa
    import pyarrow.parquet as pq

    from warranty_forecast.stages.extracts import SHIPMENTS as CONTRACT
    from warranty_forecast.stages.sql_runner import run_model

    n = 2_500
    table = pa.table({
        "serial": [f"S{i:05d}" for i in range(n)],
        "product": ["P"] * n,
        "build_month": ["2024-01"] * n,
        "ship_date": pa.array([dt.date(2024, 2, 1)] * n),
        "units": pa.array([1] * n, pa.int32()),
    })
    path = tmp_path / "shipments.parquet"
    pq.write_table(table, path, row_group_size=700)  # four row groups
    assert pq.ParquetFile(path).num_row_groups == 4
    con = duckdb.connect()
    parameters = {
        "path": str(path),
        "contract_columns": list(table.column_names),
        "empty_contract_row": {column: None for column in CONTRACT.columns},
    }
    run_model(con, "raw/parquet_extract", parameters, table="by_reader")
    run_model(con, "raw/parquet_extract_by_position", parameters, table="by_position")
    by_reader = con.table("by_reader").order("source_row_number").df()
    by_position = con.table("by_position").order("source_row_number").df()
    pd.testing.assert_frame_equal(by_reader, by_position)
    assert by_reader["source_row_number"].tolist() == list(range(1, n + 1))
    assert by_reader["serial"].tolist() == [f"S{i:05d}" for i in range(n)]  # row k is the file's k-th row
    assert by_reader["ship_date"].iloc[0] == "2024-02-01" and by_reader["units"].iloc[0] == "1"


def test_unreadable_inputs(tmp_path):
    shipments_path, claims_path = write_extracts(tmp_path, SHIPMENTS, CLAIMS)
    missing = load_config(shipments_path=tmp_path / "nope.csv", claims_path=claims_path, out_dir=tmp_path / "o")
    with pytest.raises(InputUnreadableError, match="nope.csv"):
        shape_extracts(missing)
    text = tmp_path / "shipments.txt"
    text.write_text("x")
    wrong_type = load_config(shipments_path=text, claims_path=claims_path, out_dir=tmp_path / "o")
    with pytest.raises(InputUnreadableError, match="unsupported file type"):
        shape_extracts(wrong_type)
    broken = tmp_path / "broken.parquet"
    broken.write_bytes(b"not parquet at all")
    not_parquet = load_config(shipments_path=broken, claims_path=claims_path, out_dir=tmp_path / "o")
    with pytest.raises(InputUnreadableError, match="broken.parquet"):
        shape_extracts(not_parquet)
