"""Seeded generator of a fictional demo scenario: nightly extracts of shipments and warranty claims.

The company (Quillmere Appliance Co.), its product lines, failure codes and every number are
invented. Each product line has a Weibull life measured from the sale date,
R(t) = exp(-(t / scale) ** shape) with t in months (days / (365.25 / 12)). One build month of one
line carries an extra early failure mode (the planted defect), and both extracts carry a handful
of planted malformed rows, each breaking exactly one input rule, listed in ``planted_defects``.

``generate_demo_data`` is pure (no I/O); ``write_demo_data`` writes the files atomically.
The same seed gives the same frames and the same bytes.
"""

from __future__ import annotations

import datetime as dt
import io
import json
import logging
import os
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

logger = logging.getLogger(__name__)

DEFAULT_SEED = 20261130
AS_OF_DATE = dt.date(2026, 11, 30)
DAYS_PER_MONTH = 365.25 / 12  # days in one warranty month
FIRST_BUILD_MONTH = "2021-11"
N_BUILD_MONTHS = 60  # 2021-11 .. 2026-10
COMPANY = "Quillmere Appliance Co. (fictional)"

SHIP_WINDOW_DAYS = 60  # ship date is 0..60 days after the first day of the build month
SALE_LAG_GAMMA_SHAPE = 2.0  # ship-to-sale lag ~ gamma, days
SALE_LAG_MEAN_DAYS = 45.0
UNKNOWN_SALE_FRACTION = 0.08  # shipment rows whose sale date the channel never reported
DEFAULT_WARRANTY_MONTHS = 24  # what the pipeline assumes when warranty_months is empty
MISSING_WARRANTY_FRACTION = 0.05  # rows of default-warranty lines with warranty_months left empty
LOT_SIZE_MIN, LOT_SIZE_MAX = 10, 200  # units per lot (lot-level lines)
REPORTING_LAG_MEAN_DAYS = 6.0  # failure-to-claim lag ~ exponential, whole days
REPORTING_LAG_CAP_DAYS = 60
OUT_OF_COVERAGE_WINDOW_MONTHS = 3.0  # goodwill window just beyond the warranty
OUT_OF_COVERAGE_GOODWILL_FRACTION = 0.02
REJECTED_FRACTION = 0.002  # of units, at uniform ages within warranty, unit did not fail
NO_FAULT_FOUND_FRACTION = 0.003
NO_FAULT_FOUND_COST = (20.0, 30.0)  # handling cost, uniform, currency units
CLAIM_SALE_DATE_FRACTION = 0.90  # claims carrying a proof-of-purchase date
CLAIM_ID_PREFIX = "WC"

SHIPMENT_COLUMNS = ["product", "build_month", "ship_date", "sale_date", "units", "warranty_months", "serial"]
CLAIM_COLUMNS = [
    "claim_id", "product", "build_month", "sale_date", "failure_date",
    "claim_date", "cost", "status", "failure_code", "serial",
]
PLANTED_COLUMNS = ["source_file", "row_number", "column", "reason"]
SHIPMENTS_FILE = "shipments.parquet"
CLAIMS_FILE = "claims.csv"
PLANTED_FILE = "planted_defects.csv"
TRUTH_FILE = "truth.json"
README_FILE = "README.md"

SHIPMENTS_SCHEMA = pa.schema([
    ("product", pa.string()),
    ("build_month", pa.string()),
    ("ship_date", pa.date32()),
    ("sale_date", pa.date32()),
    ("units", pa.int32()),
    ("warranty_months", pa.int16()),
    ("serial", pa.string()),
])


@dataclass(frozen=True)
class ProductLine:
    """One product line: Weibull life from the sale date (months), warranty, volume and claim cost."""

    product: str
    description: str
    shape: float  # Weibull shape, dimensionless
    scale_months: float  # Weibull scale (characteristic life), months
    warranty_months: int
    units_per_month: int  # nominal build volume, units per build month
    unit_level: bool  # True: one row per unit with a serial; False: lots without serials
    serial_prefix: str
    cost_mean: float  # mean approved claim cost, currency units
    cost_sigma_log: float  # lognormal sigma of the claim cost
    failure_codes: tuple[tuple[str, float], ...]  # (code, share of genuine failures)
    volume_phase: float  # seasonal phase of the monthly volume, radians


@dataclass(frozen=True)
class Defect:
    """An extra early failure mode carried by a fraction of one build month of one line."""

    product: str
    build_month: str
    shape: float
    scale_months: float
    fraction: float  # share of the build month's units that carry the defect
    failure_code: str


PRODUCT_LINES: tuple[ProductLine, ...] = (
    ProductLine(
        product="QDS-210", description="countertop chilled-water dispenser",
        shape=0.8, scale_months=1300.0, warranty_months=24, units_per_month=9000,
        unit_level=False, serial_prefix="", cost_mean=85.0, cost_sigma_log=0.5,
        failure_codes=(("SEAL_LEAK", 0.45), ("SOLENOID_STUCK", 0.35), ("CONTROL_BOARD_DOA", 0.20)),
        volume_phase=0.0,
    ),
    ProductLine(
        product="QCP-140", description="domestic heating circulator pump",
        shape=1.4, scale_months=400.0, warranty_months=24, units_per_month=7000,
        unit_level=False, serial_prefix="", cost_mean=60.0, cost_sigma_log=0.5,
        failure_codes=(("BEARING_NOISE", 0.50), ("IMPELLER_CRACK", 0.30), ("WINDING_OPEN", 0.20)),
        volume_phase=2.0,
    ),
    ProductLine(
        product="QHT-360", description="cordless hedge trimmer",
        shape=2.6, scale_months=110.0, warranty_months=36, units_per_month=2500,
        unit_level=True, serial_prefix="HT", cost_mean=240.0, cost_sigma_log=0.4,
        failure_codes=(("BATTERY_FADE", 0.50), ("GEARBOX_WEAR", 0.30), ("TRIGGER_SWITCH", 0.20)),
        volume_phase=4.0,
    ),
)

DEFECT = Defect(
    product="QCP-140", build_month="2025-02", shape=1.0, scale_months=4.0,
    fraction=0.04, failure_code="START_CAP_SHORT",
)

# Planted malformed rows: (reason, column) in the order they are made.
SHIPMENT_PLANTS: tuple[tuple[str, str], ...] = (
    ("missing_value", "product"),
    ("missing_value", "ship_date"),
    ("unparseable_value", "build_month"),
    ("units_below_one", "units"),
    ("shipped_before_build", "ship_date"),
    ("sold_before_shipped", "sale_date"),
    ("duplicate_serial", "serial"),
)
CLAIM_PLANTS: tuple[tuple[str, str], ...] = (
    ("missing_value", "claim_id"),
    ("unparseable_value", "failure_date"),
    ("unparseable_value", "cost"),
    ("negative_cost", "cost"),
    ("unknown_status", "status"),
    ("claim_before_failure", "claim_date"),
    ("failure_before_sale", "failure_date"),
    ("failure_before_build", "failure_date"),
    ("duplicate_claim_id", "claim_id"),
    ("cohort_never_shipped", "build_month"),
)
NEVER_SHIPPED_BUILD_MONTH = "2019-05"
_PLANT_NOTES: dict[tuple[str, str], str] = {
    ("missing_value", "product"): "product is empty",
    ("missing_value", "ship_date"): "ship_date is empty",
    ("unparseable_value", "build_month"): "build_month is `2024-13`",
    ("units_below_one", "units"): "units is 0",
    ("shipped_before_build", "ship_date"): "ship_date is before the first day of the build month",
    ("sold_before_shipped", "sale_date"): "sale_date is before ship_date",
    ("duplicate_serial", "serial"): "repeats the serial of an earlier row (this later row is the bad one)",
    ("missing_value", "claim_id"): "claim_id is empty",
    ("unparseable_value", "failure_date"): "failure_date is `2025-02-30`",
    ("unparseable_value", "cost"): "cost is `abc`",
    ("negative_cost", "cost"): "cost is -35.00",
    ("unknown_status", "status"): "status is `pending`",
    ("claim_before_failure", "claim_date"): "claim_date is before failure_date",
    ("failure_before_sale", "failure_date"): "failure_date is before the claim's own sale_date",
    ("failure_before_build", "failure_date"): "failure_date is before the first day of the build month",
    ("duplicate_claim_id", "claim_id"): "exact copy of an earlier row (this later row is the bad one)",
    ("cohort_never_shipped", "build_month"): f"build month {NEVER_SHIPPED_BUILD_MONTH} of this product never shipped",
}


@dataclass(frozen=True, eq=False)
class DemoData:
    """The generated scenario.

    shipments: rows of shipments.parquet in file order; product, build_month, serial as str,
        ship_date and sale_date as datetime64[s] (NaT = missing), units Int32, warranty_months Int16.
    claims: rows of claims.csv in file order, every column as text (str, NaN = empty field),
        because planted rows hold unparseable values.
    planted_defects: source_file, row_number (1-based data row), column, reason.
    truth: JSON-able true parameters and counts.
    as_of_date: the extract date; nothing shipped or claimed after it.
    """

    shipments: pd.DataFrame
    claims: pd.DataFrame
    planted_defects: pd.DataFrame
    truth: dict[str, Any]
    as_of_date: dt.date


@dataclass(frozen=True)
class _LineSimulation:
    """Valid shipment rows and claims of one product line (dates as days since 1970-01-01)."""

    rows: pd.DataFrame
    claims: pd.DataFrame
    stats: dict[str, Any]
    defect_stats: dict[str, int]


def _build_month_labels() -> list[str]:
    first = np.datetime64(FIRST_BUILD_MONTH, "M")
    return [str(first + i) for i in range(N_BUILD_MONTHS)]


def _days(d: dt.date) -> int:
    """Days since 1970-01-01."""
    return (d - dt.date(1970, 1, 1)).days


def _iso(days: np.ndarray, present: np.ndarray | None = None) -> np.ndarray:
    """ISO date text of day numbers; None where not present."""
    text = np.datetime_as_string(days.astype("datetime64[D]"), unit="D").astype(object)
    if present is not None:
        text[~present] = None
    return text


def _monthly_volumes(line: ProductLine, rng: np.random.Generator) -> np.ndarray:
    """Units built per build month: nominal volume, a mild season and a little noise."""
    month = np.arange(N_BUILD_MONTHS)
    season = 1.0 + 0.08 * np.sin(2.0 * np.pi * month / 12.0 + line.volume_phase)
    noise = np.exp(rng.normal(0.0, 0.05, N_BUILD_MONTHS))
    return np.maximum(1, np.rint(line.units_per_month * season * noise)).astype(np.int64)


def _split_into_lots(volume: int, rng: np.random.Generator) -> np.ndarray:
    """Lot sizes (units) summing to volume; the last lot takes the remainder."""
    sizes = rng.integers(LOT_SIZE_MIN, LOT_SIZE_MAX + 1, volume // LOT_SIZE_MIN + 1)
    total = np.cumsum(sizes)
    n_lots = int(np.searchsorted(total, volume)) + 1
    sizes = sizes[:n_lots].copy()
    sizes[-1] = volume - (total[n_lots - 2] if n_lots > 1 else 0)
    return sizes


def _simulate_line(
    line: ProductLine, rng: np.random.Generator, months: list[str], month_start: np.ndarray, as_of: int,
) -> _LineSimulation:
    """Simulate shipments, sales, failures and claims of one line (vectorised over units)."""
    volumes = _monthly_volumes(line, rng)
    if line.unit_level:
        row_month = np.repeat(np.arange(N_BUILD_MONTHS), volumes)
        row_units = np.ones(row_month.size, dtype=np.int64)
    else:
        lots = [_split_into_lots(int(v), rng) for v in volumes]
        row_month = np.repeat(np.arange(N_BUILD_MONTHS), [lot.size for lot in lots])
        row_units = np.concatenate(lots)
    n_rows = row_month.size
    ship = month_start[row_month] + rng.integers(0, SHIP_WINDOW_DAYS + 1, n_rows)
    sale_lag = rng.gamma(SALE_LAG_GAMMA_SHAPE, SALE_LAG_MEAN_DAYS / SALE_LAG_GAMMA_SHAPE, n_rows)
    true_sale = ship + np.rint(sale_lag).astype(np.int64)
    unknown_sale = rng.random(n_rows) < UNKNOWN_SALE_FRACTION
    sale_known = ~unknown_sale & (true_sale <= as_of)
    if line.warranty_months == DEFAULT_WARRANTY_MONTHS:
        warranty_present = rng.random(n_rows) >= MISSING_WARRANTY_FRACTION
    else:
        warranty_present = np.ones(n_rows, dtype=bool)

    serial = np.full(n_rows, None, dtype=object)
    if line.unit_level:
        first_of_month = np.concatenate([[0], np.cumsum(volumes)[:-1]])
        seq = np.arange(n_rows) - first_of_month[row_month] + 1
        yymm = np.array([m[2:4] + m[5:7] for m in months])[row_month]
        serial = np.char.add(np.char.add(f"{line.serial_prefix}-", yymm), np.char.mod("-%05d", seq)).astype(object)

    in_extract = ship <= as_of  # not yet shipped units are not in the extract
    rows = pd.DataFrame({
        "product": line.product,
        "month": row_month,
        "ship": ship,
        "sale": np.where(sale_known, true_sale, -1),
        "sale_known": sale_known,
        "units": row_units,
        "warranty_present": warranty_present,
        "serial": serial,
    })[in_extract]

    # Unit level: failure age T ~ Weibull(shape, scale) months from the true sale date.
    unit_row = np.repeat(np.arange(n_rows), row_units)
    unit_row = unit_row[in_extract[unit_row]]
    n_units = unit_row.size
    unit_sale = true_sale[unit_row]
    life = line.scale_months * rng.weibull(line.shape, n_units)
    shares = np.array([share for _, share in line.failure_codes])
    codes = [code for code, _ in line.failure_codes]
    code_idx = rng.choice(len(codes), size=n_units, p=shares / shares.sum())
    susceptible_units = 0
    if line.product == DEFECT.product:
        codes.append(DEFECT.failure_code)
        in_month = row_month[unit_row] == months.index(DEFECT.build_month)
        susceptible = in_month & (rng.random(n_units) < DEFECT.fraction)
        defect_life = DEFECT.scale_months * rng.weibull(DEFECT.shape, n_units)
        first = susceptible & (defect_life < life)
        life = np.where(first, defect_life, life)
        code_idx = np.where(first, len(codes) - 1, code_idx)
        susceptible_units = int(susceptible.sum())

    warranty = float(line.warranty_months)
    reporting_lag = np.minimum(
        np.rint(rng.exponential(REPORTING_LAG_MEAN_DAYS, n_units)), REPORTING_LAG_CAP_DAYS,
    ).astype(np.int64)
    age_days = np.floor(np.minimum(life, 1e4) * DAYS_PER_MONTH).astype(np.int64)
    failure = unit_sale + age_days
    claim = failure + reporting_lag
    reported = claim <= as_of
    approved = reported & (life <= warranty)
    goodwill = (
        reported & (life > warranty) & (life <= warranty + OUT_OF_COVERAGE_WINDOW_MONTHS)
        & (rng.random(n_units) < OUT_OF_COVERAGE_GOODWILL_FRACTION)
    )

    # Rejected and no-fault-found claims: units that survive the warranty, at uniform ages within it.
    u = rng.random(n_units)
    spurious_age = np.floor(rng.uniform(0.0, warranty, n_units) * DAYS_PER_MONTH).astype(np.int64)
    spurious_failure = unit_sale + spurious_age
    spurious_claim = spurious_failure + reporting_lag
    spurious_ok = (life > warranty) & (spurious_claim <= as_of)
    rejected = spurious_ok & (u < REJECTED_FRACTION)
    no_fault = spurious_ok & (u >= REJECTED_FRACTION) & (u < REJECTED_FRACTION + NO_FAULT_FOUND_FRACTION)

    genuine = approved | goodwill
    pick = np.flatnonzero(genuine | rejected | no_fault)
    is_genuine = genuine[pick]
    status = np.where(is_genuine, "approved", np.where(rejected[pick], "rejected", "no_fault_found"))
    mu = np.log(line.cost_mean) - line.cost_sigma_log**2 / 2.0
    cost = rng.lognormal(mu, line.cost_sigma_log, pick.size)
    cost = np.where(status == "rejected", 0.0, cost)
    cost = np.where(status == "no_fault_found", rng.uniform(*NO_FAULT_FOUND_COST, pick.size), cost)
    cents = np.rint(cost * 100.0).astype(np.int64)
    carries_sale = rng.random(pick.size) < CLAIM_SALE_DATE_FRACTION
    codes_arr = np.array(codes, dtype=object)
    claims = pd.DataFrame({
        "product": line.product,
        "month": row_month[unit_row[pick]],
        "sale": np.where(carries_sale, unit_sale[pick], -1),
        "failure": np.where(is_genuine, failure[pick], spurious_failure[pick]),
        "claim": np.where(is_genuine, claim[pick], spurious_claim[pick]),
        "cents": cents,
        "status": status,
        "failure_code": np.where(is_genuine, codes_arr[code_idx[pick]], None),
        "serial": serial[unit_row[pick]],
        "in_warranty": is_genuine & (life[pick] <= warranty),
    })
    stats = {
        "units": int(n_units),
        "shipment_rows": int(len(rows)),
        "units_with_unknown_sale_date": int(np.sum(row_units[in_extract & unknown_sale])),
        "units_unsold_at_as_of": int(np.sum(unit_sale > as_of)),
    }
    defect_stats = {
        "susceptible_units": susceptible_units,
        "build_month_units": int(np.sum(row_month[unit_row] == months.index(DEFECT.build_month))),
    }
    return _LineSimulation(rows=rows, claims=claims, stats=stats, defect_stats=defect_stats)


def _insert_planted(
    valid: pd.DataFrame, planted: list[pd.DataFrame], after: list[int | None], rng: np.random.Generator,
) -> tuple[pd.DataFrame, list[int]]:
    """Insert planted rows at random positions (duplicates strictly after their original row).

    Returns the combined frame and the 1-based row number of each planted row.
    """
    n = len(valid)
    keys = [np.arange(n, dtype=float)]
    for j, orig in enumerate(after):
        lo = 0 if orig is None else orig + 1
        slot = int(rng.integers(lo, n + 1))  # inserted before valid row `slot`
        keys.append(np.array([slot - 0.5 + j * 1e-3]))
    key = np.concatenate(keys)
    order = np.argsort(key, kind="stable")
    combined = pd.concat([valid, *planted], ignore_index=True).iloc[order].reset_index(drop=True)
    position = np.empty(order.size, dtype=np.int64)
    position[order] = np.arange(order.size)
    return combined, [int(position[n + j]) + 1 for j in range(len(planted))]


def _plant_shipments(
    valid: pd.DataFrame, rng: np.random.Generator,
) -> tuple[pd.DataFrame, list[dict[str, Any]]]:
    """Add one malformed row per entry of SHIPMENT_PLANTS, each breaking exactly one rule."""
    lots = np.flatnonzero(valid["serial"].isna().to_numpy() & valid["sale_date"].notna().to_numpy())
    serial_rows = np.flatnonzero(valid["serial"].notna().to_numpy())
    planted: list[pd.DataFrame] = []
    after: list[int | None] = []
    for reason, column in SHIPMENT_PLANTS:
        src = int(rng.choice(serial_rows if reason == "duplicate_serial" else lots))
        row = valid.iloc[[src]].copy()
        start = pd.Timestamp(str(row["build_month"].iloc[0]) + "-01")
        if reason == "missing_value":
            row[column] = pd.NaT if column == "ship_date" else np.nan
        elif reason == "unparseable_value":
            row["build_month"] = "2024-13"
        elif reason == "units_below_one":
            row["units"] = 0
        elif reason == "shipped_before_build":
            row["ship_date"] = start - pd.Timedelta(days=int(rng.integers(1, 16)))
        elif reason == "sold_before_shipped":
            row["sale_date"] = row["ship_date"] - pd.Timedelta(days=int(rng.integers(1, 11)))
        planted.append(row.astype(valid.dtypes.to_dict()))
        after.append(src if reason == "duplicate_serial" else None)
    combined, numbers = _insert_planted(valid, planted, after, rng)
    records = [
        {"source_file": SHIPMENTS_FILE, "row_number": num, "column": column, "reason": reason}
        for (reason, column), num in zip(SHIPMENT_PLANTS, numbers)
    ]
    return combined, records


def _plant_claims(
    valid: pd.DataFrame, spare_ids: list[str], rng: np.random.Generator,
) -> tuple[pd.DataFrame, list[dict[str, Any]]]:
    """Add one malformed row per entry of CLAIM_PLANTS, each breaking exactly one rule."""
    failure = pd.to_datetime(valid["failure_date"])
    claim = pd.to_datetime(valid["claim_date"])
    sale = pd.to_datetime(valid["sale_date"])
    build_start = pd.to_datetime(valid["build_month"] + "-01")
    plain = (valid["serial"].isna() & (valid["status"] == "approved")).to_numpy()
    feb_2025 = (
        plain & (failure.dt.strftime("%Y-%m") == "2025-02").to_numpy()
        & (build_start <= pd.Timestamp("2025-02-01")).to_numpy()
        & (claim >= pd.Timestamp("2025-03-02")).to_numpy()
        & (sale.isna() | (sale <= pd.Timestamp("2025-02-28"))).to_numpy()
    )
    early = plain & (failure <= pd.Timestamp(AS_OF_DATE) - pd.Timedelta(days=30)).to_numpy()
    planted: list[pd.DataFrame] = []
    after: list[int | None] = []
    ids = iter(spare_ids)
    for reason, column in CLAIM_PLANTS:
        pool = {"unparseable_value": feb_2025, "failure_before_sale": early}.get(reason, plain)
        if reason == "duplicate_claim_id":
            pool = np.ones(len(valid), dtype=bool)
        candidates = np.flatnonzero(pool)
        if reason == "unparseable_value" and column == "cost":
            candidates = np.flatnonzero(plain)
        src = int(rng.choice(candidates))
        row = valid.iloc[[src]].copy()
        if reason != "duplicate_claim_id":
            row["claim_id"] = next(ids)
        f = pd.Timestamp(row["failure_date"].iloc[0])
        if reason == "missing_value":
            row["claim_id"] = np.nan
        elif reason == "unparseable_value" and column == "failure_date":
            row["failure_date"] = "2025-02-30"
        elif reason == "unparseable_value":
            row["cost"] = "abc"
        elif reason == "negative_cost":
            row["cost"] = "-35.00"
        elif reason == "unknown_status":
            row["status"] = "pending"
        elif reason == "claim_before_failure":
            row["claim_date"] = (f - pd.Timedelta(days=int(rng.integers(1, 11)))).strftime("%Y-%m-%d")
        elif reason == "failure_before_sale":
            row["sale_date"] = (f + pd.Timedelta(days=int(rng.integers(1, 21)))).strftime("%Y-%m-%d")
        elif reason == "failure_before_build":
            start = pd.Timestamp(str(row["build_month"].iloc[0]) + "-01")
            row["failure_date"] = (start - pd.Timedelta(days=int(rng.integers(1, 21)))).strftime("%Y-%m-%d")
            row["sale_date"] = np.nan
        elif reason == "cohort_never_shipped":
            row["build_month"] = NEVER_SHIPPED_BUILD_MONTH
        planted.append(row)
        after.append(src if reason == "duplicate_claim_id" else None)
    combined, numbers = _insert_planted(valid, planted, after, rng)
    records = [
        {"source_file": CLAIMS_FILE, "row_number": num, "column": column, "reason": reason}
        for (reason, column), num in zip(CLAIM_PLANTS, numbers)
    ]
    return combined, records


def generate_demo_data(seed: int = DEFAULT_SEED) -> DemoData:
    """Generate the demo scenario for ``seed`` (pure: no I/O, same seed gives the same data)."""
    started = time.perf_counter()
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(len(PRODUCT_LINES) + 2)]
    months = _build_month_labels()
    month_start = np.array([np.datetime64(m + "-01", "D") for m in months]).astype(np.int64)
    as_of = _days(AS_OF_DATE)

    sims = [_simulate_line(line, rng, months, month_start, as_of) for line, rng in zip(PRODUCT_LINES, streams)]
    month_arr = np.array(months, dtype=object)

    # Shipments: valid rows, sorted by ship date, product, build month, serial.
    rows = pd.concat([s.rows for s in sims], ignore_index=True)
    rows = rows.sort_values(["ship", "product", "month", "serial"], kind="stable", na_position="first")
    rows = rows.reset_index(drop=True)
    warranty_by_product = {line.product: line.warranty_months for line in PRODUCT_LINES}
    warranty = pd.array(rows["product"].map(warranty_by_product).to_numpy(), dtype="Int16")
    warranty[~rows["warranty_present"].to_numpy()] = pd.NA
    sale = rows["sale"].to_numpy().astype("datetime64[D]")
    sale[~rows["sale_known"].to_numpy()] = np.datetime64("NaT")
    shipments = pd.DataFrame({
        "product": pd.Series(rows["product"].to_numpy(), dtype="str"),
        "build_month": pd.Series(month_arr[rows["month"].to_numpy()], dtype="str"),
        "ship_date": pd.Series(rows["ship"].to_numpy().astype("datetime64[D]").astype("datetime64[s]")),
        "sale_date": pd.Series(sale.astype("datetime64[s]")),
        "units": pd.Series(rows["units"].to_numpy(), dtype="Int32"),
        "warranty_months": pd.Series(warranty),
        "serial": pd.Series(rows["serial"].to_numpy(), dtype="str"),
    })

    # Claims: only cohorts with units sold (known sale date) by the as-of date may carry claims.
    sold = shipments["sale_date"].notna()
    sold_cohorts = set(zip(shipments.loc[sold, "product"], shipments.loc[sold, "build_month"]))
    raw = pd.concat([s.claims for s in sims], ignore_index=True)
    raw_month = month_arr[raw["month"].to_numpy()]
    keep = pd.MultiIndex.from_arrays([raw["product"], raw_month]).isin(sold_cohorts)
    if not keep.all():
        logger.info("dropped %d claims of cohorts without a known sale by the as-of date", int((~keep).sum()))
    raw = raw[keep].reset_index(drop=True)
    raw_month = raw_month[keep]

    claims_rng, plant_rng = streams[-2], streams[-1]
    n_claims = len(raw)
    id_numbers = claims_rng.permutation(n_claims + len(CLAIM_PLANTS)) + 1
    ids = np.char.mod(f"{CLAIM_ID_PREFIX}%07d", id_numbers).astype(object)
    sale_present = raw["sale"].to_numpy() >= 0
    claims_valid = pd.DataFrame({
        "claim_id": ids[:n_claims],
        "product": raw["product"].to_numpy(dtype=object),
        "build_month": raw_month,
        "sale_date": _iso(raw["sale"].to_numpy(), sale_present),
        "failure_date": _iso(raw["failure"].to_numpy()),
        "claim_date": _iso(raw["claim"].to_numpy()),
        "cost": np.char.mod("%.2f", raw["cents"].to_numpy() / 100.0).astype(object),
        "status": raw["status"].to_numpy(dtype=object),
        "failure_code": raw["failure_code"].to_numpy(dtype=object),
        "serial": raw["serial"].to_numpy(dtype=object),
    })
    order = np.lexsort((claims_valid["claim_id"].to_numpy(dtype=str), raw["claim"].to_numpy()))
    claims_valid = claims_valid.iloc[order].reset_index(drop=True).astype("string")

    shipments, ship_records = _plant_shipments(shipments, plant_rng)
    claims, claim_records = _plant_claims(claims_valid, list(ids[n_claims:]), plant_rng)
    claims = claims.astype("string")
    planted = pd.DataFrame(ship_records + claim_records, columns=PLANTED_COLUMNS)
    planted = planted.sort_values(["source_file", "row_number"], kind="stable").reset_index(drop=True)
    planted = planted.astype({"source_file": "str", "row_number": "int64", "column": "str", "reason": "str"})

    truth = _truth(seed, sims, raw, planted)
    logger.info(
        "generated demo data seed=%d: %d shipment rows, %d units, %d claims in %.1f s",
        seed, len(shipments), truth["total_units"], len(claims), time.perf_counter() - started,
    )
    return DemoData(shipments=shipments, claims=claims, planted_defects=planted, truth=truth, as_of_date=AS_OF_DATE)


def _truth(seed: int, sims: list[_LineSimulation], raw: pd.DataFrame, planted: pd.DataFrame) -> dict[str, Any]:
    """The true parameters and counts, JSON-able."""
    lines: dict[str, Any] = {}
    for line, sim in zip(PRODUCT_LINES, sims):
        mine = raw[raw["product"] == line.product]
        approved = mine[mine["status"] == "approved"]
        shares = {code: share for code, share in line.failure_codes}
        lines[line.product] = {
            "description": line.description,
            "shape": line.shape,
            "scale_months": line.scale_months,
            "rate": line.scale_months ** -line.shape,
            "warranty_months": line.warranty_months,
            "in_warranty_failure_probability": float(
                1.0 - np.exp(-((line.warranty_months / line.scale_months) ** line.shape))
            ),
            "unit_level_rows_with_serials": line.unit_level,
            "nominal_units_per_build_month": line.units_per_month,
            **sim.stats,
            "claim_cost": {
                "distribution": "lognormal",
                "mean": line.cost_mean,
                "sigma_log": line.cost_sigma_log,
                "realised_mean_approved": round(float(approved["cents"].mean()) / 100.0, 2),
            },
            "failure_code_shares": shares,
            "failure_code_scale_months": {
                code: line.scale_months * share ** (-1.0 / line.shape) for code, share in shares.items()
            },
            "claims_by_status": {k: int(v) for k, v in mine["status"].value_counts().sort_index().items()},
            "approved_in_warranty": int(mine["in_warranty"].sum()),
        }
    defect_stats = next(s.defect_stats for line, s in zip(PRODUCT_LINES, sims) if line.product == DEFECT.product)
    planted_counts: dict[str, dict[str, int]] = {}
    for (source, reason), n in planted.groupby(["source_file", "reason"]).size().sort_index().items():
        planted_counts.setdefault(str(source), {})[str(reason)] = int(n)
    status = raw["status"].value_counts().sort_index()
    return {
        "description": "Invented demo data from the seeded generator warranty_forecast.tools.demo_data; "
        "no real company, product or claim.",
        "company": COMPANY,
        "as_of_date": AS_OF_DATE.isoformat(),
        "seed": seed,
        "days_per_month": DAYS_PER_MONTH,
        "life_model": "Weibull from the sale date, R(t) = exp(-(t/scale)^shape), t in months; "
        "rate = scale^-shape; failure codes are independent competing risks with the line's shape",
        "build_months": {"first": FIRST_BUILD_MONTH, "last": _build_month_labels()[-1], "count": N_BUILD_MONTHS},
        "product_lines": lines,
        "defect": {
            "product": DEFECT.product,
            "build_month": DEFECT.build_month,
            "shape": DEFECT.shape,
            "scale_months": DEFECT.scale_months,
            "fraction": DEFECT.fraction,
            "failure_code": DEFECT.failure_code,
            **defect_stats,
        },
        "simulation": {
            "ship_window_days": SHIP_WINDOW_DAYS,
            "sale_lag_days": {"distribution": "gamma", "shape": SALE_LAG_GAMMA_SHAPE, "mean": SALE_LAG_MEAN_DAYS},
            "unknown_sale_date_fraction_of_rows": UNKNOWN_SALE_FRACTION,
            "missing_warranty_months_fraction_of_24_month_rows": MISSING_WARRANTY_FRACTION,
            "lot_size_units": [LOT_SIZE_MIN, LOT_SIZE_MAX],
            "reporting_lag_days": {
                "distribution": "exponential", "mean": REPORTING_LAG_MEAN_DAYS,
                "rounding": "whole days", "cap": REPORTING_LAG_CAP_DAYS,
            },
            "out_of_coverage_window_months": OUT_OF_COVERAGE_WINDOW_MONTHS,
            "out_of_coverage_goodwill_fraction": OUT_OF_COVERAGE_GOODWILL_FRACTION,
            "rejected_fraction_of_units": REJECTED_FRACTION,
            "no_fault_found_fraction_of_units": NO_FAULT_FOUND_FRACTION,
            "no_fault_found_cost_uniform": list(NO_FAULT_FOUND_COST),
            "claim_sale_date_fraction": CLAIM_SALE_DATE_FRACTION,
        },
        "total_units": int(sum(s.stats["units"] for s in sims)),
        "claims_total": int(len(raw)),
        "claims_by_status": {str(k): int(v) for k, v in status.items()},
        "planted_rows": {"total": int(len(planted)), **planted_counts},
    }


def _shipments_parquet_bytes(shipments: pd.DataFrame) -> bytes:
    table = pa.Table.from_pandas(shipments, schema=SHIPMENTS_SCHEMA, preserve_index=False)
    table = table.replace_schema_metadata(None)
    sink = io.BytesIO()
    pq.write_table(table, sink, compression="zstd", compression_level=9)
    return sink.getvalue()


def _csv_bytes(frame: pd.DataFrame) -> bytes:
    return frame.to_csv(index=False, na_rep="", lineterminator="\n").encode("utf-8")


def _atomic_write(path: Path, payload: bytes) -> None:
    """Write to a temporary file in the same folder, then os.replace it onto path."""
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        os.chmod(tmp, 0o644)  # mkstemp creates 0600; the extracts are meant to be shared
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _readme(data: DemoData, sizes: dict[str, int]) -> str:
    t = data.truth
    line_rows = "\n".join(
        f"| {product} | {p['description']} | {p['shape']} | {p['scale_months']:g} | {p['rate']:.4e} "
        f"| {p['warranty_months']} | {p['units']:,} | {p['in_warranty_failure_probability']:.4f} |"
        for product, p in t["product_lines"].items()
    )
    code_rows = "\n".join(
        f"| {product} | " + ", ".join(f"`{c}` {s:.0%}" for c, s in p["failure_code_shares"].items()) + " |"
        for product, p in t["product_lines"].items()
    )
    d = t["defect"]
    planted_rows = "\n".join(
        f"| {r.source_file} | {r.row_number} | {r.column} | `{r.reason}` | {_PLANT_NOTES[(r.reason, r.column)]} |"
        for r in data.planted_defects.itertuples(index=False)
    )
    status = ", ".join(f"{k} {v:,}" for k, v in t["claims_by_status"].items())
    files = "\n".join(f"| {name} | {size:,} |" for name, size in sizes.items())
    return f"""# Demo data: invented warranty extracts

Everything here is **invented demo data** made by our own seeded generator
(`pipeline/warranty_forecast/tools/demo_data.py`, seed {t['seed']}). The company, {t['company']}, and its
products do not exist. Regenerate with `warranty-forecast demo-data` or

    python -c 'from pathlib import Path; from warranty_forecast.tools.demo_data import write_demo_data; write_demo_data(Path("data_demo"))'

The same seed gives byte-identical files.

## Scenario

Nightly extracts as known on the as-of date **{t['as_of_date']}**: no ship or claim date after
it, and a sale date after it is written as missing (unit still in the channel). Three product
lines, build months {t['build_months']['first']} .. {t['build_months']['last']}
({t['build_months']['count']} months), {t['total_units']:,} units in total.

- The two 24-month lines ship in lots of {LOT_SIZE_MIN}-{LOT_SIZE_MAX} identical units (no serials); the
  hedge trimmer ships one row per unit with a unique serial.
- Ship date is 0-{SHIP_WINDOW_DAYS} days after the first day of the build month; ship-to-sale lag is
  gamma with mean {SALE_LAG_MEAN_DAYS:g} days; about {UNKNOWN_SALE_FRACTION:.0%} of shipment rows have no
  reported sale date; some rows of the 24-month lines leave `warranty_months` empty (default 24).
- Each unit fails at a Weibull age from its sale date, R(t) = exp(-(t/scale)^shape), t in months
  (days / {DAYS_PER_MONTH}).
- A failure within warranty whose claim arrives by the as-of date is an `approved` claim
  (reporting lag exponential, mean {REPORTING_LAG_MEAN_DAYS:g} days, whole days, capped at {REPORTING_LAG_CAP_DAYS});
  {OUT_OF_COVERAGE_GOODWILL_FRACTION:.0%} of failures up to {OUT_OF_COVERAGE_WINDOW_MONTHS:g} months beyond
  warranty are approved as goodwill.
- `rejected` ({REJECTED_FRACTION:.1%} of units, cost 0) and `no_fault_found` ({NO_FAULT_FOUND_FRACTION:.1%} of
  units, handling cost {NO_FAULT_FOUND_COST[0]:g}-{NO_FAULT_FOUND_COST[1]:g}) claims come from units that did
  not fail; they stay survivors.
- About {CLAIM_SALE_DATE_FRACTION:.0%} of claims carry the sale date; trimmer claims carry the serial.

## True parameters

| product | description | shape | scale (months) | rate = scale^-shape | warranty (months) | units | P(fail in warranty) |
|---|---|---|---|---|---|---|---|
{line_rows}

Failure codes are independent competing risks with fixed shares of the genuine failures
(each code is a Weibull with the line's shape):

| product | failure codes |
|---|---|
{code_rows}

**Defect:** build month {d['build_month']} of {d['product']}: {d['fraction']:.0%} of its units carry an
extra early failure mode, Weibull shape {d['shape']:g}, scale {d['scale_months']:g} months, failure code
`{d['failure_code']}` ({d['susceptible_units']:,} of {d['build_month_units']:,} units).

Claims: {t['claims_total']:,} valid ({status}), plus the planted rows below. Full details in `truth.json`.

## Planted malformed rows

Each breaks exactly one input rule; every other row breaks none. Row numbers are 1-based data rows
(header excluded). Also in `planted_defects.csv`.

| file | row | column | reason | what is wrong |
|---|---|---|---|---|
{planted_rows}

## Files

| file | bytes |
|---|---|
{files}
| README.md | this file |
"""


def write_demo_data(out_dir: Path, seed: int = DEFAULT_SEED) -> DemoData:
    """Generate the scenario for ``seed`` and write its five files into ``out_dir`` atomically."""
    data = generate_demo_data(seed)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    payloads = {
        SHIPMENTS_FILE: _shipments_parquet_bytes(data.shipments),
        CLAIMS_FILE: _csv_bytes(data.claims),
        PLANTED_FILE: _csv_bytes(data.planted_defects),
        TRUTH_FILE: (json.dumps(data.truth, indent=2, sort_keys=True) + "\n").encode("utf-8"),
    }
    payloads[README_FILE] = _readme(data, {k: len(v) for k, v in payloads.items()}).encode("utf-8")
    for name, payload in payloads.items():
        _atomic_write(out_dir / name, payload)
    logger.info("wrote demo data to %s (%d bytes)", out_dir, sum(len(v) for v in payloads.values()))
    return data
