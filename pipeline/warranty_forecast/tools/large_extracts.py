"""Large synthetic extracts for the scale benchmark (issue 11): serialised unit rows and claims as Parquet.

    python -m warranty_forecast.tools.large_extracts --units 10000000 --claims 360000 --products 3 \\
        --build-months 60 --out DIR [--seed N] [--as-of 2026-11-30] [--chunk-units 1000000]

writes DIR/shipments.parquet (one serialised unit per row: product, build_month, ship_date, sale_date,
units = 1, warranty_months, serial) and DIR/claims.parquet (claim_id, product, build_month, sale_date,
failure_date, claim_date, cost, status, failure_code, serial): the README's input contract.

Our own invented scenario (not the demo's; nothing in it is taken from real data):

* Products `WX-0001`, `WX-0002`, ...; each product's share of the units is drawn from a Dirichlet(2, ..., 2),
  its warranty is 12, 24 or 36 months (probabilities 0.2, 0.6, 0.2), its life a Weibull with shape drawn
  uniformly in [0.8, 2.2] and a scale (months) drawn in [60, 400] then multiplied by one common factor
  chosen so that about `claims` claims are filed by the as-of date (see `calibrate_scale_factor`).
* Build months: the `build_months` months ending with the as-of date's month; production ramps up
  (a month's weight grows linearly from 1 to 3).
* Ship date: a uniform day of the build month plus a Gamma(2, 7 days) lag; sale date: ship date plus a
  Gamma(1.5, 30 days) lag, per unit. Dates after the as-of date are pulled back (a ship date) or left
  empty (a sale, not yet known); 10% of sold units never have their sale date reported (an empty
  sale_date: the pipeline imputes their clock), which `missing_sale_share` changes.
* A sold unit fails at its Weibull life (days = months x 365.25/12, whole days after the true sale date
  on the day grid) if that lies within its warranty and before the as-of date; the claim is filed an
  Exponential(12 days) delay later (whole days) and is in the extract only if filed by the as-of date.
  About 8% of those failures are then thinned away at random to hit `claims` exactly (failures that
  were never claimed), and the claims are written in claim_date order.
* Claims: status approved 90%, rejected 4%, no_fault_found 4%, open 1.5%, pending 0.5%; cost a
  lognormal around a product's mean cost (currency units, to the cent; an open claim's estimate is
  empty half the time); failure codes from six per product (`<product>-E1` .. `-E6`, skewed shares).
* Deliberately bad rows, replacing good ones in place so the row counts stay as asked (a handful per
  kind, `bad_rows_per_kind`, fewer in small files): shipments with a missing product, a missing
  ship_date, a build_month that is not a month, a ship_date after the run date, a ship_date before the
  build month, a sale_date before the ship_date, a serial repeated from an earlier row, units 0, a
  warranty of 999 months; claims with a missing claim_id, a missing failure_date, a build_month that
  is not a month, a claim_date before the failure_date, an unknown status, a negative cost, a claim_id
  repeated from an earlier row, a failure_date in 1850 and a claim_date after the run date. What each
  kind should give in the quarantine is `EXPECTED_SHIPMENT_REASONS` / `EXPECTED_CLAIM_REASONS`.

Vectorised numpy + pyarrow, seeded (`numpy.random.default_rng([seed, purpose, chunk])`), written in
row groups of `chunk_units` units with `pyarrow.parquet.ParquetWriter`: memory is one chunk plus the
claims (held whole), not the units (peak 0.8 GB for 10 M units + 0.36 M claims, 1.7 GB for 20 M + 2 M).
"""

from __future__ import annotations

import argparse
import datetime as dt
import math
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
from scipy.optimize import brentq

DEFAULT_SEED = 20261111
DEFAULT_AS_OF = dt.date(2026, 11, 30)
DEFAULT_CHUNK_UNITS = 1_000_000
DAYS_PER_MONTH = 365.25 / 12
BAD_ROWS_PER_KIND = 30
THINNING_MARGIN = 1.08  # aim at this many times the claims asked for, then thin to the exact count

WARRANTY_CHOICES = np.array([12, 24, 36])
WARRANTY_PROBABILITIES = np.array([0.2, 0.6, 0.2])
STATUSES = np.array(["approved", "rejected", "no_fault_found", "open", "pending"])
STATUS_PROBABILITIES = np.array([0.90, 0.04, 0.04, 0.015, 0.005])
CODE_PROBABILITIES = np.array([0.35, 0.25, 0.15, 0.12, 0.08, 0.05])
SHIP_LAG = (2.0, 7.0)  # Gamma(shape, scale days)
SALE_LAG = (1.5, 30.0)
CLAIM_DELAY_DAYS = 12.0  # Exponential mean
BAD_DATE_AFTER_RUN = dt.date(2099, 1, 1)
BAD_DATE_OUT_OF_RANGE = dt.date(1850, 6, 1)

SHIPMENT_BAD_KINDS = (
    "missing_product", "missing_ship_date", "bad_build_month", "ship_after_run_date", "shipped_before_build",
    "sold_before_shipped", "duplicate_serial", "units_zero", "warranty_too_long",
)
CLAIM_BAD_KINDS = (
    "missing_claim_id", "missing_failure_date", "bad_build_month", "claim_before_failure", "unknown_status",
    "negative_cost", "duplicate_claim_id", "failure_date_out_of_range", "claim_after_run_date",
)
# the quarantine's (column, reason) for each kind of bad row (sql/staging/stg_*.sql, sql/macros/validation.sql)
EXPECTED_SHIPMENT_REASONS = {
    "missing_product": ("product", "missing_value"),
    "missing_ship_date": ("ship_date", "missing_value"),
    "bad_build_month": ("build_month", "unparseable_value"),
    "ship_after_run_date": ("ship_date", "dated_after_run_date"),
    "shipped_before_build": ("ship_date", "shipped_before_build"),
    "sold_before_shipped": ("sale_date", "sold_before_shipped"),
    "duplicate_serial": ("serial", "duplicate_serial"),
    "units_zero": ("units", "units_below_one"),
    "warranty_too_long": ("warranty_months", "warranty_months_above_limit"),
}
EXPECTED_CLAIM_REASONS = {
    "missing_claim_id": ("claim_id", "missing_value"),
    "missing_failure_date": ("failure_date", "missing_value"),
    "bad_build_month": ("build_month", "unparseable_value"),
    "claim_before_failure": ("claim_date", "claim_before_failure"),
    "unknown_status": ("status", "unknown_status"),
    "negative_cost": ("cost", "negative_cost"),
    "duplicate_claim_id": ("claim_id", "duplicate_claim_id"),
    "failure_date_out_of_range": ("failure_date", "date_out_of_range"),
    "claim_after_run_date": ("claim_date", "dated_after_run_date"),
}

SHIPMENTS_SCHEMA = pa.schema([
    ("product", pa.string()),
    ("build_month", pa.string()),
    ("ship_date", pa.date32()),
    ("sale_date", pa.date32()),
    ("units", pa.int32()),
    ("warranty_months", pa.int32()),
    ("serial", pa.string()),
])
CLAIMS_SCHEMA = pa.schema([
    ("claim_id", pa.string()),
    ("product", pa.string()),
    ("build_month", pa.string()),
    ("sale_date", pa.date32()),
    ("failure_date", pa.date32()),
    ("claim_date", pa.date32()),
    ("cost", pa.float64()),
    ("status", pa.string()),
    ("failure_code", pa.string()),
    ("serial", pa.string()),
])

# purposes of the seeded streams (so each draw is reproducible on its own)
_SCENARIO, _CALIBRATION, _UNITS, _CLAIMS, _BAD = range(5)
_EPOCH = np.datetime64("1970-01-01", "D")


@dataclass(frozen=True)
class Scenario:
    """The invented products: life (Weibull shape, scale in months), warranty (months), mean claim cost
    (currency units), share of the units; the build months (first day of each, as days since 1970-01-01)."""

    products: tuple[str, ...]
    shares: np.ndarray
    shapes: np.ndarray
    scales_months: np.ndarray
    warranty_months: np.ndarray
    mean_costs: np.ndarray
    build_month_starts: np.ndarray  # int64 days since 1970-01-01
    build_month_weights: np.ndarray
    as_of_day: int  # days since 1970-01-01
    missing_sale_share: float


@dataclass(frozen=True)
class GeneratedExtracts:
    """What `write_large_extracts` wrote: the files, their row counts and the bad rows planted (kind ->
    1-based row numbers of the file), the scenario and the seconds it took."""

    shipments_path: Path
    claims_path: Path
    units: int
    claims: int
    failures_before_thinning: int
    bad_shipment_rows: dict[str, tuple[int, ...]]
    bad_claim_rows: dict[str, tuple[int, ...]]
    scenario: Scenario
    seconds: float

    @property
    def bad_rows(self) -> int:
        return sum(map(len, self.bad_shipment_rows.values())) + sum(map(len, self.bad_claim_rows.values()))


def _days(date: dt.date) -> int:
    return (date - dt.date(1970, 1, 1)).days


def make_scenario(
    n_products: int, n_build_months: int, *, seed: int, as_of: dt.date, missing_sale_share: float = 0.10,
) -> Scenario:
    """The products and build months (before the claims calibration: scales still unscaled)."""
    rng = np.random.default_rng([seed, _SCENARIO])
    width = max(4, len(str(n_products)))
    products = tuple(f"WX-{i + 1:0{width}d}" for i in range(n_products))
    last_month = np.datetime64(as_of.strftime("%Y-%m"), "M")
    months = last_month - np.arange(n_build_months - 1, -1, -1)
    starts = (months.astype("datetime64[D]") - _EPOCH).astype(np.int64)
    return Scenario(
        products=products,
        shares=rng.dirichlet(np.full(n_products, 2.0)),
        shapes=rng.uniform(0.8, 2.2, n_products),
        scales_months=rng.uniform(60.0, 400.0, n_products),
        warranty_months=rng.choice(WARRANTY_CHOICES, size=n_products, p=WARRANTY_PROBABILITIES),
        mean_costs=np.round(rng.uniform(60.0, 400.0, n_products), 2),
        build_month_starts=starts,
        build_month_weights=np.linspace(1.0, 3.0, n_build_months) / np.linspace(1.0, 3.0, n_build_months).sum(),
        as_of_day=_days(as_of),
        missing_sale_share=missing_sale_share,
    )


@dataclass(frozen=True)
class _Units:
    product: np.ndarray  # product index
    build_month: np.ndarray  # build month index
    ship_day: np.ndarray  # days since 1970-01-01
    true_sale_day: np.ndarray  # float: NaN when not sold by the as-of date
    reported_sale_day: np.ndarray  # float: NaN when empty in the extract


def _draw_units(scenario: Scenario, n: int, rng: np.random.Generator) -> _Units:
    product = rng.choice(len(scenario.products), size=n, p=scenario.shares)
    build_month = rng.choice(len(scenario.build_month_starts), size=n, p=scenario.build_month_weights)
    start = scenario.build_month_starts[build_month]
    next_start = np.append(scenario.build_month_starts[1:], scenario.build_month_starts[-1] + 31)[build_month]
    made = start + np.floor(rng.uniform(0.0, 1.0, n) * (next_start - start)).astype(np.int64)
    ship = made + np.floor(rng.gamma(*SHIP_LAG, n)).astype(np.int64)
    ship = np.minimum(ship, scenario.as_of_day)
    sale = ship + np.floor(rng.gamma(*SALE_LAG, n))
    sale[sale > scenario.as_of_day] = np.nan
    reported = sale.copy()
    reported[rng.uniform(0.0, 1.0, n) < scenario.missing_sale_share] = np.nan
    return _Units(product, build_month, ship, sale, reported)


def _failure_days(scenario: Scenario, units: _Units, factor: float, rng: np.random.Generator) -> np.ndarray:
    """Whole days from the true sale date to the failure (NaN: no failure within the warranty by the as-of
    date): a Weibull life in days, floored to the day grid."""
    p = units.product
    life_days = factor * scenario.scales_months[p] * DAYS_PER_MONTH * rng.weibull(scenario.shapes[p])
    days = np.floor(life_days)
    in_service = scenario.as_of_day - units.true_sale_day  # NaN when unsold
    # months in service k = max(1, ceil(days / DAYS_PER_MONTH)) must be within the warranty: days up to
    # floor(W x 365.25/12) (730 for 24 months: the day counts 0 .. 730 are months 1 .. 24, macros/ages.sql)
    last_day = np.floor(scenario.warranty_months[p] * DAYS_PER_MONTH)
    fails = (days <= in_service) & (days <= last_day)
    return np.where(fails, days, np.nan)


def calibrate_scale_factor(scenario: Scenario, n_units: int, n_claims: int, seed: int) -> float:
    """The common factor on the products' Weibull scales at which the expected number of claims filed by
    the as-of date is THINNING_MARGIN x n_claims, from 200,000 sample units (expected counts by the
    closed-form Weibull CDF over each unit's window, less the mean reporting delay)."""
    rng = np.random.default_rng([seed, _CALIBRATION])
    sample = _draw_units(scenario, 200_000, rng)
    sold = ~np.isnan(sample.true_sale_day)
    p = sample.product[sold]
    window = np.minimum(
        scenario.as_of_day - sample.true_sale_day[sold] - CLAIM_DELAY_DAYS,
        np.floor(scenario.warranty_months[p] * DAYS_PER_MONTH),
    )
    window = np.maximum(window, 0.0) / DAYS_PER_MONTH
    shapes, scales = scenario.shapes[p], scenario.scales_months[p]
    target = min(THINNING_MARGIN * n_claims / n_units, 0.95)

    def excess(log_factor: float) -> float:
        cdf = -np.expm1(-((window / (np.exp(log_factor) * scales)) ** shapes))
        return float(cdf.sum() / sample.product.size - target)

    if excess(12.0) > 0:  # even near-immortal units give too many claims: cannot happen for target > 0
        return math.exp(12.0)
    if excess(-12.0) < 0:
        raise ValueError(f"claims={n_claims} is more than the units={n_units} can give within their warranties")
    return math.exp(brentq(excess, -12.0, 12.0, xtol=1e-6))


def _date_array(days: np.ndarray) -> pa.Array:
    """int or float days since 1970-01-01 (NaN: empty) as a date32 array."""
    mask = np.isnan(days) if days.dtype.kind == "f" else np.zeros(days.size, bool)
    values = np.where(mask, 0, days).astype(np.int32)
    return pa.array(values, type=pa.int32(), mask=mask).cast(pa.date32())


def _month_texts(scenario: Scenario) -> np.ndarray:
    return np.array([str(np.datetime64(int(d), "D").astype("datetime64[M]")) for d in scenario.build_month_starts])


def _serials(indices: np.ndarray) -> pa.Array:
    """Serial numbers SN000000001, ... (the unit's 1-based index, zero-padded): vectorised in Arrow."""
    return pc.binary_join_element_wise(
        "SN", pc.utf8_lpad(pc.cast(pa.array(indices + 1, type=pa.int64()), pa.string()), width=9, padding="0"), ""
    )


def _bad_rows_per_kind(rows: int, requested: int | None) -> int:
    if requested is not None:
        return requested
    return int(min(BAD_ROWS_PER_KIND, rows // 2000))


def _plant_positions(rows: int, kinds: Sequence[str], per_kind: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Distinct 0-based rows for each kind: odd rows only, so the row before a planted row is never planted
    itself (a duplicate copies the serial or claim id of a good row)."""
    candidates = rows // 2  # rows 1, 3, 5, ... below `rows`
    count = min(per_kind * len(kinds), candidates)
    chosen = 1 + 2 * rng.choice(candidates, size=count, replace=False) if count else np.zeros(0, np.int64)
    per = count // len(kinds) if kinds else 0
    return {kind: np.sort(chosen[i * per:(i + 1) * per]) for i, kind in enumerate(kinds)}


def write_large_extracts(
    out_dir: Path,
    *,
    units: int,
    claims: int,
    products: int = 3,
    build_months: int = 60,
    seed: int = DEFAULT_SEED,
    as_of: dt.date = DEFAULT_AS_OF,
    chunk_units: int = DEFAULT_CHUNK_UNITS,
    missing_sale_share: float = 0.10,
    bad_rows_per_kind: int | None = None,
) -> GeneratedExtracts:
    """Write shipments.parquet and claims.parquet into `out_dir` (created) and say what was written.

    `units` serialised unit rows; `claims` claim rows (fewer only if the units cannot give that many: the
    count written is returned); `products` product lines over `build_months` build months ending in the
    as-of date's month; `bad_rows_per_kind` bad rows of each kind in each file (default: 30, or one per
    2,000 rows in smaller files, none below 2,000 rows)."""
    for name, value, minimum in (("units", units, 2), ("claims", claims, 0), ("products", products, 1),
                                 ("build_months", build_months, 1), ("chunk_units", chunk_units, 1)):
        if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
            raise ValueError(f"{name} must be an integer >= {minimum}, got {value!r}")
    if not 0.0 <= missing_sale_share < 1.0:
        raise ValueError(f"missing_sale_share must be in [0, 1), got {missing_sale_share!r}")
    started = time.perf_counter()
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    scenario = make_scenario(products, build_months, seed=seed, as_of=as_of, missing_sale_share=missing_sale_share)
    factor = calibrate_scale_factor(scenario, units, claims, seed) if claims else math.inf
    month_texts = _month_texts(scenario)
    product_names = np.array(scenario.products)
    rng_bad = np.random.default_rng([seed, _BAD])
    ship_bad = _plant_positions(units, SHIPMENT_BAD_KINDS, _bad_rows_per_kind(units, bad_rows_per_kind), rng_bad)

    # a unit whose row is planted as a duplicate serial has lost its own serial: it gets no claims, so every
    # claim's serial is one the shipments extract holds
    no_claims = ship_bad["duplicate_serial"]
    failures: list[np.ndarray] = []
    shipments_path = out_dir / "shipments.parquet"
    with pq.ParquetWriter(shipments_path, SHIPMENTS_SCHEMA) as writer:
        for chunk, first in enumerate(range(0, units, chunk_units)):
            n = min(chunk_units, units - first)
            rng = np.random.default_rng([seed, _UNITS, chunk])
            drawn = _draw_units(scenario, n, rng)
            if claims:
                days = _failure_days(scenario, drawn, factor, rng)
                failed = np.flatnonzero(~np.isnan(days))
                failure_day = drawn.true_sale_day[failed] + days[failed]
                claim_day = failure_day + np.floor(rng.exponential(CLAIM_DELAY_DAYS, failed.size))
                filed = (claim_day <= scenario.as_of_day) & ~np.isin(first + failed, no_claims)
                failed = failed[filed]
                failures.append(np.column_stack([
                    first + failed, drawn.product[failed], drawn.build_month[failed],
                    drawn.reported_sale_day[failed], failure_day[filed], claim_day[filed],
                ]))
            columns = {
                "product": product_names[drawn.product].astype(object),
                "build_month": month_texts[drawn.build_month].astype(object),
                "ship_day": drawn.ship_day.astype(np.float64),
                "sale_day": drawn.reported_sale_day.copy(),
                "units": np.ones(n, np.int32),
                "warranty_months": scenario.warranty_months[drawn.product].astype(np.int32),
            }
            serial_index = np.arange(first, first + n, dtype=np.int64)
            _plant_shipment_rows(columns, serial_index, ship_bad, first, n, scenario)
            table = pa.table({
                "product": pa.array(columns["product"], type=pa.string()),
                "build_month": pa.array(columns["build_month"], type=pa.string()),
                "ship_date": _date_array(columns["ship_day"]),
                "sale_date": _date_array(columns["sale_day"]),
                "units": pa.array(columns["units"], type=pa.int32()),
                "warranty_months": pa.array(columns["warranty_months"], type=pa.int32()),
                "serial": _serials(serial_index),
            }, schema=SHIPMENTS_SCHEMA)
            writer.write_table(table, row_group_size=chunk_units)

    found = np.concatenate(failures) if failures else np.zeros((0, 6))
    rng_claims = np.random.default_rng([seed, _CLAIMS])
    if found.shape[0] > claims:
        found = found[np.sort(rng_claims.choice(found.shape[0], size=claims, replace=False))]
    found = found[np.lexsort((found[:, 0], found[:, 5]))]  # claim_date order, then serial
    claim_bad = _plant_positions(
        found.shape[0], CLAIM_BAD_KINDS, _bad_rows_per_kind(found.shape[0], bad_rows_per_kind), rng_bad,
    ) if found.shape[0] > 1 else {kind: np.zeros(0, np.int64) for kind in CLAIM_BAD_KINDS}
    claims_path = out_dir / "claims.parquet"
    pq.write_table(
        _claims_table(found, scenario, month_texts, product_names, claim_bad, rng_claims),
        claims_path, row_group_size=max(1, chunk_units),
    )
    return GeneratedExtracts(
        shipments_path=shipments_path,
        claims_path=claims_path,
        units=units,
        claims=int(found.shape[0]),
        failures_before_thinning=int(sum(f.shape[0] for f in failures)),
        bad_shipment_rows={kind: tuple(int(i) + 1 for i in rows) for kind, rows in ship_bad.items()},
        bad_claim_rows={kind: tuple(int(i) + 1 for i in rows) for kind, rows in claim_bad.items()},
        scenario=scenario,
        seconds=time.perf_counter() - started,
    )


def _plant_shipment_rows(
    columns: dict[str, np.ndarray], serial_index: np.ndarray, bad: dict[str, np.ndarray], first: int, n: int,
    scenario: Scenario,
) -> None:
    """Turn the planted rows that fall in this chunk [first, first + n) into bad rows, in place."""
    def local(kind: str) -> np.ndarray:
        rows = bad[kind]
        return rows[(rows >= first) & (rows < first + n)] - first

    columns["product"][local("missing_product")] = None
    columns["ship_day"][local("missing_ship_date")] = np.nan
    columns["build_month"][local("bad_build_month")] = "2024-13"
    columns["ship_day"][local("ship_after_run_date")] = _days(BAD_DATE_AFTER_RUN)
    rows = local("shipped_before_build")
    columns["ship_day"][rows] = scenario.build_month_starts[0] - 40
    columns["sale_day"][rows] = np.nan
    rows = local("sold_before_shipped")
    columns["sale_day"][rows] = columns["ship_day"][rows] - 5
    rows = local("duplicate_serial")
    serial_index[rows] -= 1  # the serial of the row before (a good row: planted rows are odd)
    columns["units"][local("units_zero")] = 0
    columns["warranty_months"][local("warranty_too_long")] = 999


def _claims_table(
    found: np.ndarray, scenario: Scenario, month_texts: np.ndarray, product_names: np.ndarray,
    bad: dict[str, np.ndarray], rng: np.random.Generator,
) -> pa.Table:
    n = found.shape[0]
    unit = found[:, 0].astype(np.int64)
    product = found[:, 1].astype(np.int64)
    build_month = found[:, 2].astype(np.int64)
    sale_day = found[:, 3].copy()
    failure_day = found[:, 4].copy()
    claim_day = found[:, 5].copy()
    status = STATUSES[rng.choice(STATUSES.size, size=n, p=STATUS_PROBABILITIES)].astype(object)
    cost = np.round(scenario.mean_costs[product] * rng.lognormal(-0.18, 0.6, n), 2)
    is_open = (status == "open") | (status == "pending")
    cost[is_open & (rng.uniform(0.0, 1.0, n) < 0.5)] = np.nan
    code_number = 1 + rng.choice(CODE_PROBABILITIES.size, size=n, p=CODE_PROBABILITIES)
    codes = np.char.add(np.char.add(product_names[product].astype(str), "-E"), code_number.astype(str)).astype(object)
    claim_index = np.arange(n, dtype=np.int64)
    product_text = product_names[product].astype(object)
    month_text = month_texts[build_month].astype(object)
    claim_ids_missing = np.zeros(n, bool)

    claim_ids_missing[bad["missing_claim_id"]] = True
    failure_day[bad["missing_failure_date"]] = np.nan
    month_text[bad["bad_build_month"]] = "2025-00"
    rows = bad["claim_before_failure"]
    claim_day[rows] = failure_day[rows] - 3
    rows = bad["unknown_status"]
    status[rows] = "lost_in_transit"
    cost[rows] = np.where(np.isnan(cost[rows]), scenario.mean_costs[product[rows]], cost[rows])
    rows = bad["negative_cost"]
    status[rows] = "approved"
    cost[rows] = -50.0
    rows = bad["duplicate_claim_id"]
    claim_index[rows] = rows - 1
    failure_day[bad["failure_date_out_of_range"]] = _days(BAD_DATE_OUT_OF_RANGE)
    claim_day[bad["claim_after_run_date"]] = _days(BAD_DATE_AFTER_RUN)

    claim_ids = pc.binary_join_element_wise(
        "CL", pc.utf8_lpad(pc.cast(pa.array(claim_index + 1, type=pa.int64()), pa.string()), width=9, padding="0"), "",
    )
    claim_ids = pc.if_else(pa.array(claim_ids_missing), pa.scalar(None, pa.string()), claim_ids)
    return pa.table({
        "claim_id": claim_ids,
        "product": pa.array(product_text, type=pa.string()),
        "build_month": pa.array(month_text, type=pa.string()),
        "sale_date": _date_array(sale_day),
        "failure_date": _date_array(failure_day),
        "claim_date": _date_array(claim_day),
        "cost": pa.array(cost, type=pa.float64(), from_pandas=True),
        "status": pa.array(status, type=pa.string()),
        "failure_code": pa.array(codes, type=pa.string()),
        "serial": _serials(unit),
    }, schema=CLAIMS_SCHEMA)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m warranty_forecast.tools.large_extracts",
        allow_abbrev=False,
        description="Write large synthetic extracts (shipments.parquet, claims.parquet) for the scale benchmark.",
    )
    parser.add_argument("--units", type=int, required=True, help="serialised unit rows (shipments)")
    parser.add_argument("--claims", type=int, required=True, help="claim rows")
    parser.add_argument("--products", type=int, default=3, help="product lines (default 3)")
    parser.add_argument("--build-months", type=int, default=60, help="build months (default 60)")
    parser.add_argument("--out", type=Path, required=True, help="folder for shipments.parquet and claims.parquet")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default {DEFAULT_SEED})")
    parser.add_argument("--as-of", type=dt.date.fromisoformat, default=DEFAULT_AS_OF,
                        help=f"the newest date in the data (default {DEFAULT_AS_OF})")
    parser.add_argument("--chunk-units", type=int, default=DEFAULT_CHUNK_UNITS,
                        help=f"units per Parquet row group and per generated chunk (default {DEFAULT_CHUNK_UNITS:,})")
    parser.add_argument("--bad-rows-per-kind", type=int, default=None,
                        help="bad rows of each kind in each file (default 30; one per 2,000 rows in smaller files)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Write the extracts and print what was written; 0, or 2 on a bad argument."""
    arguments = build_parser().parse_args(argv)
    try:
        result = write_large_extracts(
            arguments.out, units=arguments.units, claims=arguments.claims, products=arguments.products,
            build_months=arguments.build_months, seed=arguments.seed, as_of=arguments.as_of,
            chunk_units=arguments.chunk_units, bad_rows_per_kind=arguments.bad_rows_per_kind,
        )
    except ValueError as error:
        print(f"error: {error}", file=sys.stderr)
        return 2
    print(
        f"wrote {result.shipments_path} ({result.units:,} units) and {result.claims_path} ({result.claims:,} claims"
        f" of {result.failures_before_thinning:,} filed failures); {result.bad_rows} bad rows planted;"
        f" {len(result.scenario.products):,} products x {len(result.scenario.build_month_starts)} build months;"
        f" {result.seconds:.1f} s"
    )
    if result.claims < arguments.claims:
        print(f"note: only {result.claims:,} claims: the units cannot give {arguments.claims:,}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
