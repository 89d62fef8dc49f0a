"""The invented demo scenario: a fictional appliance maker's product lines, their true Weibull lives,
the one defective build month, the planted malformed rows, and the extracts' file layout.

Every name and number here is invented for the demo; `demo_data` simulates the extracts from it and
`demo_files` writes them.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import pyarrow as pa

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
PLANT_NOTES: dict[tuple[str, str], str] = {
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
    ("unknown_status", "status"): "status is `lost`",
    ("claim_before_failure", "claim_date"): "claim_date is before failure_date",
    ("failure_before_sale", "failure_date"): "failure_date is before the claim's own sale_date",
    ("failure_before_build", "failure_date"): "failure_date is before the first day of the build month",
    ("duplicate_claim_id", "claim_id"): "exact copy of an earlier row (this later row is the bad one)",
    ("cohort_never_shipped", "build_month"): f"build month {NEVER_SHIPPED_BUILD_MONTH} of this product never shipped",
}
