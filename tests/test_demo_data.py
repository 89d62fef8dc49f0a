"""Tests of the seeded demo-data generator (warranty_forecast.tools.demo_data).

The rule checks below re-state the input contract with vectorised pandas operations, independently
of the generator, so that the pipeline's quarantine catches exactly the planted rows.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from warranty_forecast.tools.demo_data import DemoData, generate_demo_data
from warranty_forecast.tools.demo_files import write_demo_data
from warranty_forecast.tools.demo_scenario import CLAIM_COLUMNS, DEFAULT_SEED, SHIPMENT_COLUMNS

AS_OF = pd.Timestamp("2026-11-30")
DAYS_PER_MONTH = 365.25 / 12
FILES = ["shipments.parquet", "claims.csv", "planted_defects.csv", "truth.json", "README.md"]
STATUSES = {"approved", "rejected", "no_fault_found", "open", "pending"}
OPEN = {"open", "pending"}  # filed, not yet decided: cost may be empty (its estimate not given yet)
APPROVED_OR_OPEN = ["approved", "open", "pending"]  # the demo's open claims are all to be approved
REPO_DATA = Path(__file__).resolve().parents[1] / "data_demo"


@pytest.fixture(scope="module")
def written(tmp_path_factory: pytest.TempPathFactory) -> tuple[DemoData, Path, Path]:
    """The default scenario written twice into two fresh folders."""
    first = tmp_path_factory.mktemp("demo_a")
    second = tmp_path_factory.mktemp("demo_b")
    data = write_demo_data(first)
    write_demo_data(second)
    return data, first, second


@pytest.fixture(scope="module")
def other_seed() -> DemoData:
    return generate_demo_data(DEFAULT_SEED + 1)


@pytest.fixture(scope="module")
def demo(written: tuple[DemoData, Path, Path]) -> DemoData:
    return written[0]


@pytest.fixture(scope="module")
def shipments_file(written: tuple[DemoData, Path, Path]) -> pd.DataFrame:
    """shipments.parquet read back, dates as datetime64[s]."""
    frame = pq.read_table(written[1] / "shipments.parquet").to_pandas()
    for col in ("ship_date", "sale_date"):
        frame[col] = pd.to_datetime(frame[col]).astype("datetime64[s]")
    return frame.astype({"units": "Int32", "warranty_months": "Int16"})


@pytest.fixture(scope="module")
def claims_file(written: tuple[DemoData, Path, Path]) -> pd.DataFrame:
    """claims.csv read back as text, empty field = missing."""
    return pd.read_csv(written[1] / "claims.csv", dtype="str", keep_default_na=False, na_values=[""])


@pytest.fixture(scope="module")
def planted(written: tuple[DemoData, Path, Path]) -> pd.DataFrame:
    return pd.read_csv(written[1] / "planted_defects.csv", dtype={"row_number": "int64"})


def _parse_dates(text: pd.Series) -> pd.Series:
    return pd.to_datetime(text, format="%Y-%m-%d", errors="coerce")


def _build_start(build_month: pd.Series) -> pd.Series:
    ok = build_month.str.fullmatch(r"\d{4}-\d{2}").fillna(False).astype(bool)
    return _parse_dates(build_month.where(ok) + "-01")


def shipment_violations(ship: pd.DataFrame) -> pd.DataFrame:
    """One boolean column per (reason, column) of the shipments contract; True = row breaks it."""
    start = _build_start(ship["build_month"])
    serial = ship["serial"]
    return pd.DataFrame({
        ("missing_value", "product"): ship["product"].isna() | (ship["product"] == ""),
        ("missing_value", "build_month"): ship["build_month"].isna(),
        ("unparseable_value", "build_month"): ship["build_month"].notna() & start.isna(),
        ("missing_value", "ship_date"): ship["ship_date"].isna(),
        ("units_below_one", "units"): (ship["units"] < 1).fillna(False),
        ("warranty_below_one", "warranty_months"): (ship["warranty_months"] < 1).fillna(False),
        ("shipped_before_build", "ship_date"): (ship["ship_date"] < start).fillna(False),
        ("sold_before_shipped", "sale_date"): (ship["sale_date"] < ship["ship_date"]).fillna(False),
        ("duplicate_serial", "serial"): serial.notna() & serial.duplicated(keep="first"),
        ("serial_with_units", "units"): serial.notna() & (ship["units"] != 1).fillna(True),
        ("after_as_of", "ship_date"): (ship["ship_date"] > AS_OF).fillna(False),
        ("after_as_of", "sale_date"): (ship["sale_date"] > AS_OF).fillna(False),
    })


def claim_violations(claims: pd.DataFrame, good_shipments: pd.DataFrame) -> pd.DataFrame:
    """One boolean column per (reason, column) of the claims contract; True = row breaks it."""
    sale = _parse_dates(claims["sale_date"])
    failure = _parse_dates(claims["failure_date"])
    claim = _parse_dates(claims["claim_date"])
    start = _build_start(claims["build_month"])
    cost = pd.to_numeric(claims["cost"], errors="coerce")
    out: dict[tuple[str, str], pd.Series] = {}
    for col in ("claim_id", "product", "build_month", "failure_date", "claim_date", "cost", "status"):
        out[("missing_value", col)] = claims[col].isna()
    out[("missing_value", "cost")] &= ~claims["status"].str.lower().isin(OPEN).fillna(False)
    out[("unparseable_value", "build_month")] = claims["build_month"].notna() & start.isna()
    for col, parsed in (("sale_date", sale), ("failure_date", failure), ("claim_date", claim)):
        out[("unparseable_value", col)] = claims[col].notna() & parsed.isna()
    out[("unparseable_value", "cost")] = claims["cost"].notna() & cost.isna()
    out[("cost_not_two_decimals", "cost")] = cost.notna() & ~claims["cost"].str.fullmatch(r"-?\d+\.\d{2}").fillna(False)
    out[("negative_cost", "cost")] = (cost < 0).fillna(False)
    out[("unknown_status", "status")] = claims["status"].notna() & ~claims["status"].isin(STATUSES)
    out[("claim_before_failure", "claim_date")] = (claim < failure).fillna(False)
    out[("failure_before_sale", "failure_date")] = (failure < sale).fillna(False)
    out[("failure_before_build", "failure_date")] = (failure < start).fillna(False)
    out[("duplicate_claim_id", "claim_id")] = claims["claim_id"].notna() & claims["claim_id"].duplicated(keep="first")
    out[("after_as_of", "failure_date")] = (failure > AS_OF).fillna(False)
    out[("after_as_of", "claim_date")] = (claim > AS_OF).fillna(False)

    sold = good_shipments[good_shipments["sale_date"] <= AS_OF]
    cohorts = pd.MultiIndex.from_frame(sold[["product", "build_month"]].drop_duplicates())
    in_cohort = pd.MultiIndex.from_frame(claims[["product", "build_month"]]).isin(cohorts)
    out[("cohort_never_shipped", "build_month")] = pd.Series(~in_cohort, index=claims.index) & start.notna()

    units = good_shipments.loc[good_shipments["serial"].notna(), ["serial", "product", "build_month", "ship_date", "sale_date"]]
    joined = claims[["serial", "product", "build_month"]].merge(
        units.rename(columns={"product": "u_product", "build_month": "u_build_month"}),
        on="serial", how="left", validate="many_to_one",
    )
    joined.index = claims.index
    has_serial = claims["serial"].notna()
    out[("serial_unknown", "serial")] = has_serial & joined["u_product"].isna()
    out[("serial_other_cohort", "serial")] = has_serial & joined["u_product"].notna() & (
        (joined["u_product"] != claims["product"]) | (joined["u_build_month"] != claims["build_month"])
    )
    out[("failure_before_unit_sale", "failure_date")] = has_serial & (failure < joined["sale_date"]).fillna(False)
    out[("sale_before_unit_ship", "sale_date")] = (
        has_serial & joined["sale_date"].isna() & (sale < joined["ship_date"]).fillna(False)
    )
    return pd.DataFrame(out)


def _good(frame: pd.DataFrame, planted: pd.DataFrame, source: str) -> pd.DataFrame:
    rows = planted.loc[planted["source_file"] == source, "row_number"].to_numpy() - 1
    return frame.drop(index=rows)


def _assert_exactly_planted(violations: pd.DataFrame, planted: pd.DataFrame, source: str) -> None:
    mine = planted[planted["source_file"] == source]
    position = mine["row_number"].to_numpy() - 1
    clean = violations.drop(index=position)
    broken = clean.any(axis=1)
    assert not broken.any(), f"{source}: unplanted rows break rules:\n{clean[broken].loc[:, clean[broken].any()]}"
    for row in mine.itertuples(index=False):
        flags = violations.iloc[row.row_number - 1]
        assert list(flags[flags].index) == [(row.reason, row.column)], (source, row)


# --- determinism -------------------------------------------------------------------------------

def test_written_twice_gives_identical_bytes(written: tuple[DemoData, Path, Path]) -> None:
    _, first, second = written
    for name in FILES:
        assert (first / name).read_bytes() == (second / name).read_bytes(), name
    assert sorted(p.name for p in first.iterdir()) == sorted(FILES)  # no temp files left behind


def test_same_seed_same_data_different_seed_differs(demo: DemoData, other_seed: DemoData) -> None:
    again = generate_demo_data(DEFAULT_SEED)
    pd.testing.assert_frame_equal(again.shipments, demo.shipments)
    pd.testing.assert_frame_equal(again.claims, demo.claims)
    pd.testing.assert_frame_equal(again.planted_defects, demo.planted_defects)
    assert again.truth == demo.truth
    other = other_seed
    assert not other.shipments.equals(demo.shipments)
    assert not other.claims.equals(demo.claims)
    assert other.truth["seed"] == DEFAULT_SEED + 1


def test_files_hold_the_returned_frames(demo: DemoData, shipments_file: pd.DataFrame, claims_file: pd.DataFrame,
                                        planted: pd.DataFrame) -> None:
    pd.testing.assert_frame_equal(shipments_file, demo.shipments, check_dtype=False)
    pd.testing.assert_frame_equal(claims_file, demo.claims, check_dtype=False)
    pd.testing.assert_frame_equal(planted, demo.planted_defects, check_dtype=False)


def test_committed_data_demo_matches_generator(written: tuple[DemoData, Path, Path],
                                               shipments_file: pd.DataFrame) -> None:
    if not (REPO_DATA / "truth.json").exists():
        pytest.skip("data_demo/ not generated yet")
    for name in ("claims.csv", "planted_defects.csv", "truth.json"):
        assert (REPO_DATA / name).read_bytes() == (written[1] / name).read_bytes(), name
    committed = pq.read_table(REPO_DATA / "shipments.parquet")
    assert committed.equals(pq.read_table(written[1] / "shipments.parquet"))
    assert sum((REPO_DATA / n).stat().st_size for n in FILES) <= 6_000_000


# --- contract ------------------------------------------------------------------------------------

def test_shipments_parquet_schema(written: tuple[DemoData, Path, Path], demo: DemoData) -> None:
    schema = pq.read_schema(written[1] / "shipments.parquet")
    assert schema.names == SHIPMENT_COLUMNS
    expected = [pa.string(), pa.string(), pa.date32(), pa.date32(), pa.int32(), pa.int16(), pa.string()]
    assert [f.type for f in schema] == expected
    assert {c: str(t) for c, t in demo.shipments.dtypes.items()} == {
        "product": "str", "build_month": "str", "ship_date": "datetime64[s]", "sale_date": "datetime64[s]",
        "units": "Int32", "warranty_months": "Int16", "serial": "str",
    }


def test_claims_csv_header_and_text(written: tuple[DemoData, Path, Path], demo: DemoData) -> None:
    header = (written[1] / "claims.csv").read_text().splitlines()[0]
    assert header == ",".join(CLAIM_COLUMNS)
    assert all(pd.api.types.is_string_dtype(t) for t in demo.claims.dtypes)
    planted_header = (written[1] / "planted_defects.csv").read_text().splitlines()[0]
    assert planted_header == "source_file,row_number,column,reason"


def test_truth_is_json_and_consistent(demo: DemoData, shipments_file: pd.DataFrame, claims_file: pd.DataFrame,
                                      planted: pd.DataFrame) -> None:
    truth = json.loads(json.dumps(demo.truth))
    assert truth["as_of_date"] == "2026-11-30" == demo.as_of_date.isoformat()
    good_ship = _good(shipments_file, planted, "shipments.parquet")
    good_claims = _good(claims_file, planted, "claims.csv")
    assert truth["total_units"] == int(good_ship["units"].sum())
    assert truth["claims_by_status"] == good_claims["status"].value_counts().sort_index().to_dict()
    units = good_ship.groupby("product")["units"].sum()
    for product, line in truth["product_lines"].items():
        assert line["units"] == units[product]
        assert line["rate"] == pytest.approx(line["scale_months"] ** -line["shape"])
        assert sum(line["failure_code_shares"].values()) == pytest.approx(1.0)
    assert truth["planted_rows"]["total"] == len(planted) == 17
    assert truth["defect"]["product"] in truth["product_lines"]


def test_scenario_size_and_lines(demo: DemoData, shipments_file: pd.DataFrame, planted: pd.DataFrame) -> None:
    good = _good(shipments_file, planted, "shipments.parquet")
    assert good["units"].sum() >= 1_000_000
    assert good["build_month"].nunique() >= 48
    per_line = good.groupby("product")["build_month"].nunique()
    assert len(per_line) == 3 and (per_line >= 48).all()
    shapes = [line["shape"] for line in demo.truth["product_lines"].values()]
    assert min(shapes) < 1 < max(shapes)
    serial_lines = good.loc[good["serial"].notna(), "product"].unique()
    assert len(serial_lines) == 1  # one unit-level line, two lot-level lines
    lots = good[good["serial"].isna()]
    assert lots["units"].between(1, 200).all() and lots["units"].median() > 50
    # only 24-month lines may leave warranty_months empty (the pipeline defaults it to 24)
    missing_w = good.loc[good["warranty_months"].isna(), "product"].unique()
    known_w = good.dropna(subset=["warranty_months"]).groupby("product")["warranty_months"].unique()
    assert len(missing_w) > 0 and all(list(known_w[p]) == [24] for p in missing_w)
    assert 0.04 < good["sale_date"].isna().mean() < 0.15


# --- planted rows and rules ----------------------------------------------------------------------

def test_shipments_only_planted_rows_break_rules(shipments_file: pd.DataFrame, planted: pd.DataFrame) -> None:
    violations = shipment_violations(shipments_file)
    _assert_exactly_planted(violations, planted, "shipments.parquet")
    assert (planted["source_file"] == "shipments.parquet").sum() == 7


def test_claims_only_planted_rows_break_rules(shipments_file: pd.DataFrame, claims_file: pd.DataFrame,
                                              planted: pd.DataFrame) -> None:
    good_ship = _good(shipments_file, planted, "shipments.parquet")
    violations = claim_violations(claims_file, good_ship)
    _assert_exactly_planted(violations, planted, "claims.csv")
    assert (planted["source_file"] == "claims.csv").sum() == 10


def test_another_seed_also_breaks_only_planted_rows(other_seed: DemoData) -> None:
    ship, claims, planted = other_seed.shipments, other_seed.claims, other_seed.planted_defects
    _assert_exactly_planted(shipment_violations(ship), planted, "shipments.parquet")
    good_ship = _good(ship, planted, "shipments.parquet")
    _assert_exactly_planted(claim_violations(claims, good_ship), planted, "claims.csv")


def test_duplicates_come_after_their_original(shipments_file: pd.DataFrame, claims_file: pd.DataFrame,
                                              planted: pd.DataFrame) -> None:
    dup = planted.set_index("reason")["row_number"]
    later = claims_file.iloc[dup["duplicate_claim_id"] - 1]
    earlier = claims_file[claims_file["claim_id"] == later["claim_id"]]
    assert len(earlier) == 2 and earlier.index[0] < later.name
    assert earlier.iloc[0].equals(later)  # an exact copy
    ser = shipments_file.iloc[dup["duplicate_serial"] - 1]
    first = shipments_file.index[shipments_file["serial"] == ser["serial"]]
    assert len(first) == 2 and first[0] < ser.name


def test_claims_content(claims_file: pd.DataFrame, planted: pd.DataFrame, demo: DemoData) -> None:
    good = _good(claims_file, planted, "claims.csv")
    cost = good["cost"].astype(float)
    assert (cost[good["status"] == "rejected"] == 0).all()
    assert cost[good["status"] == "no_fault_found"].between(20, 30).all()
    assert 0.85 < good["sale_date"].notna().mean() < 0.95
    unit_line = [p for p, line in demo.truth["product_lines"].items() if line["unit_level_rows_with_serials"]]
    assert good.loc[good["product"].isin(unit_line), "serial"].notna().all()
    assert good.loc[~good["product"].isin(unit_line), "serial"].isna().all()
    claim_days = _parse_dates(good["claim_date"])
    assert claim_days.is_monotonic_increasing  # sorted by claim date (planted rows aside)
    lag = (claim_days - _parse_dates(good["failure_date"])).dt.days
    assert lag.between(0, 60).all() and 4 < lag.mean() < 8


def test_open_claims_are_recent_with_estimates(claims_file: pd.DataFrame, planted: pd.DataFrame) -> None:
    # the demo's open claims: filed within its decision window (28 days) before the as-of date, some
    # pending, most with an estimated cost (a whole multiple of 10), some without
    good = _good(claims_file, planted, "claims.csv")
    still_open = good[good["status"].isin(OPEN)]
    assert 100 < len(still_open) < 1000 and set(still_open["status"]) == OPEN
    filed = _parse_dates(still_open["claim_date"])
    assert ((AS_OF - filed).dt.days <= 28).all()
    estimate = still_open["cost"].dropna().astype(float)
    assert 0.6 < len(estimate) / len(still_open) < 0.95
    assert ((estimate % 10) == 0).all() and (estimate >= 10).all()
    assert good.loc[~good["status"].isin(OPEN), "cost"].notna().all()


# --- the generator against its own closed form ----------------------------------------------------

def _cohort_units(shipments: pd.DataFrame, planted: pd.DataFrame, product: str) -> pd.Series:
    good = _good(shipments, planted, "shipments.parquet")
    return good[good["product"] == product].groupby("build_month")["units"].sum()


def test_in_warranty_fraction_of_mature_line_1_cohorts(demo: DemoData, shipments_file: pd.DataFrame,
                                                        claims_file: pd.DataFrame, planted: pd.DataFrame) -> None:
    # common practice, no source: a fully matured cohort's in-warranty failure fraction is
    # F(W) = 1 - exp(-(W/scale)^shape); the count is binomial, checked within 4 standard errors.
    product, line = next(iter(demo.truth["product_lines"].items()))
    assert line["shape"] < 1
    w = line["warranty_months"]
    p = 1.0 - np.exp(-((w / line["scale_months"]) ** line["shape"]))
    good = _good(claims_file, planted, "claims.csv")
    mine = good[(good["product"] == product) & good["status"].isin(APPROVED_OR_OPEN)]
    age = (_parse_dates(mine["failure_date"]) - _parse_dates(mine["sale_date"])).dt.days
    in_warranty = mine[age.isna() | (age <= w * DAYS_PER_MONTH)]  # no sale date: counted (goodwill is ~0.1%)
    units = _cohort_units(shipments_file, planted, product)
    mature = [m for m in units.index if m <= "2023-06"]  # sold by mid-2024, warranty over by mid-2026
    for months in (["2022-06"], mature):
        n = int(units[months].sum())
        k = int(in_warranty["build_month"].isin(months).sum())
        assert abs(k / n - p) < 4 * np.sqrt(p * (1 - p) / n), (months[:2], k, n, p)


def test_defect_build_month_returns_early(demo: DemoData, shipments_file: pd.DataFrame,
                                          claims_file: pd.DataFrame, planted: pd.DataFrame) -> None:
    defect = demo.truth["defect"]
    units = _cohort_units(shipments_file, planted, defect["product"])
    good = _good(claims_file, planted, "claims.csv")
    mine = good[(good["product"] == defect["product"]) & good["status"].isin(APPROVED_OR_OPEN)]
    months_from_build = (_parse_dates(mine["failure_date"]) - _build_start(mine["build_month"])).dt.days / DAYS_PER_MONTH
    early = mine[months_from_build <= 8].groupby("build_month").size().reindex(units.index, fill_value=0) / units
    at = list(units.index).index(defect["build_month"])
    neighbours = early.iloc[[at - 3, at - 2, at - 1, at + 1, at + 2, at + 3]]
    assert early.iloc[at] > 0.02
    assert early.iloc[at] > 5 * neighbours.max()
    coded = mine[mine["failure_code"] == defect["failure_code"]]
    assert set(coded["build_month"]) == {defect["build_month"]}


def test_failure_code_shares(demo: DemoData, claims_file: pd.DataFrame, planted: pd.DataFrame) -> None:
    # common practice, no source: code counts are multinomial with the fixed shares (4 standard errors)
    good = _good(claims_file, planted, "claims.csv")
    approved = good[good["status"].isin(APPROVED_OR_OPEN)]
    for product, line in demo.truth["product_lines"].items():
        codes = approved.loc[approved["product"] == product, "failure_code"]
        codes = codes[codes.isin(line["failure_code_shares"])]
        n = len(codes)
        for code, share in line["failure_code_shares"].items():
            assert abs((codes == code).mean() - share) < 4 * np.sqrt(share * (1 - share) / n), (product, code)


def test_rejected_and_no_fault_units_are_survivors(shipments_file: pd.DataFrame, claims_file: pd.DataFrame,
                                                   planted: pd.DataFrame, demo: DemoData) -> None:
    # on the serial line: a unit with a rejected or no-fault-found claim never also fails in warranty
    good = _good(claims_file, planted, "claims.csv")
    units = _good(shipments_file, planted, "shipments.parquet").dropna(subset=["serial"])
    mine = good[good["serial"].notna()].merge(units[["serial", "sale_date", "warranty_months"]], on="serial")
    assert len(mine) == good["serial"].notna().sum()
    sale = _parse_dates(mine["sale_date_x"]).fillna(mine["sale_date_y"])
    age = (_parse_dates(mine["failure_date"]) - sale).dt.days / DAYS_PER_MONTH
    failed = mine.loc[mine["status"].isin(APPROVED_OR_OPEN) & ~(age > mine["warranty_months"]), "serial"]
    spurious = mine.loc[mine["status"].isin(["rejected", "no_fault_found"]), "serial"]
    assert len(failed) > 1000 and len(spurious) > 100
    assert not set(failed) & set(spurious)
