"""Seeded generator of a fictional demo scenario: nightly extracts of shipments and warranty claims.

The company (Quillmere Appliance Co.), its product lines, failure codes and every number are
invented. Each product line has a Weibull life measured from the sale date,
R(t) = exp(-(t / scale) ** shape) with t in months (days / (365.25 / 12)). One build month of one
line carries an extra early failure mode (the planted defect), and both extracts carry a handful
of planted malformed rows, each breaking exactly one input rule, listed in ``planted_defects``.

The scenario itself (lines, defect, planted rows, file layout) is in ``demo_scenario``;
``generate_demo_data`` here is pure (no I/O); ``demo_files.write_demo_data`` writes the files atomically.
The same seed gives the same frames and the same bytes.
"""

from __future__ import annotations

import datetime as dt
import logging
import time
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from warranty_forecast.tools.demo_scenario import (
    AS_OF_DATE,
    CLAIM_ID_PREFIX,
    CLAIM_PLANTS,
    CLAIM_SALE_DATE_FRACTION,
    CLAIMS_FILE,
    COMPANY,
    DAYS_PER_MONTH,
    DEFAULT_SEED,
    DEFAULT_WARRANTY_MONTHS,
    DEFECT,
    FIRST_BUILD_MONTH,
    LOT_SIZE_MAX,
    LOT_SIZE_MIN,
    MISSING_WARRANTY_FRACTION,
    N_BUILD_MONTHS,
    NEVER_SHIPPED_BUILD_MONTH,
    NO_FAULT_FOUND_COST,
    NO_FAULT_FOUND_FRACTION,
    OUT_OF_COVERAGE_GOODWILL_FRACTION,
    OUT_OF_COVERAGE_WINDOW_MONTHS,
    PLANTED_COLUMNS,
    PRODUCT_LINES,
    REJECTED_FRACTION,
    REPORTING_LAG_CAP_DAYS,
    REPORTING_LAG_MEAN_DAYS,
    SALE_LAG_GAMMA_SHAPE,
    SALE_LAG_MEAN_DAYS,
    SHIP_WINDOW_DAYS,
    SHIPMENT_PLANTS,
    SHIPMENTS_FILE,
    UNKNOWN_SALE_FRACTION,
    ProductLine,
)

logger = logging.getLogger(__name__)

# Open claims: an approved claim is decided a whole number of days after it is filed, uniform on
# 0 .. OPEN_DECISION_DAYS; one filed d days before the as-of date is still open with probability
# 1 - d / OPEN_DECISION_DAYS. Its status is then "open", or "pending" for PENDING_SHARE of them; its cost is
# an estimate (the eventual cost x a lognormal error of sd OPEN_ESTIMATE_SIGMA_LOG on the log scale, rounded
# to OPEN_ESTIMATE_ROUNDING currency units), left empty for OPEN_WITHOUT_ESTIMATE_FRACTION of them. Only
# claims that will be approved are open here, so the life model's returns are those of the scenario.
OPEN_DECISION_DAYS = 28
PENDING_SHARE = 0.3
OPEN_ESTIMATE_SIGMA_LOG = 0.25
OPEN_ESTIMATE_ROUNDING = 10.0
OPEN_WITHOUT_ESTIMATE_FRACTION = 0.2
UNKNOWN_STATUS_EXAMPLE = "lost"  # the planted unknown_status row's status


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
            row["status"] = UNKNOWN_STATUS_EXAMPLE
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
    # one stream per line, then claims, plants and open claims (a child's stream does not depend on how
    # many children are spawned, so adding the last one left the others as they were)
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(len(PRODUCT_LINES) + 3)]
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

    claims_rng, plant_rng, open_rng = streams[len(PRODUCT_LINES):]
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
    # the planted rows were drawn from the decided claims; open claims are marked after, by claim_id (so a
    # planted exact duplicate stays a copy of its original)
    open_status, open_cost = _open_claims(raw, ids[:n_claims], as_of, open_rng)
    claims = claims.astype(object)
    reopened = claims["claim_id"].map(open_status)
    is_open = reopened.notna().to_numpy()
    claims.loc[is_open, "status"] = reopened[is_open]
    claims.loc[is_open, "cost"] = claims.loc[is_open, "claim_id"].map(open_cost)
    claims = claims.astype("string")
    raw = raw.assign(status=pd.Series(ids[:n_claims]).map(open_status).fillna(raw["status"]).to_numpy())
    planted = pd.DataFrame(ship_records + claim_records, columns=PLANTED_COLUMNS)
    planted = planted.sort_values(["source_file", "row_number"], kind="stable").reset_index(drop=True)
    planted = planted.astype({"source_file": "str", "row_number": "int64", "column": "str", "reason": "str"})

    truth = _truth(seed, sims, raw, planted)
    logger.info(
        "generated demo data seed=%d: %d shipment rows, %d units, %d claims in %.1f s",
        seed, len(shipments), truth["total_units"], len(claims), time.perf_counter() - started,
    )
    return DemoData(shipments=shipments, claims=claims, planted_defects=planted, truth=truth, as_of_date=AS_OF_DATE)


def _open_claims(
    raw: pd.DataFrame, ids: np.ndarray, as_of: int, rng: np.random.Generator,
) -> tuple[dict[str, str], dict[str, float]]:
    """The approved claims still open at the as-of date: claim_id -> status ("open" or "pending") and
    claim_id -> cost text (the estimate, NaN when none is given). See OPEN_DECISION_DAYS."""
    n = len(raw)
    days_open = as_of - raw["claim"].to_numpy()  # days from filing to the as-of date
    decision = rng.integers(0, OPEN_DECISION_DAYS + 1, n)  # days from filing to the decision
    pending = rng.random(n) < PENDING_SHARE
    error = rng.normal(0.0, OPEN_ESTIMATE_SIGMA_LOG, n)
    no_estimate = rng.random(n) < OPEN_WITHOUT_ESTIMATE_FRACTION
    still_open = (raw["status"].to_numpy() == "approved") & (decision > days_open)
    estimate = np.maximum(
        np.rint(raw["cents"].to_numpy() / 100.0 * np.exp(error) / OPEN_ESTIMATE_ROUNDING) * OPEN_ESTIMATE_ROUNDING,
        OPEN_ESTIMATE_ROUNDING,
    )
    status: dict[str, str] = {}
    cost: dict[str, float] = {}
    for i in np.flatnonzero(still_open):
        status[str(ids[i])] = "pending" if pending[i] else "open"
        cost[str(ids[i])] = np.nan if no_estimate[i] else f"{estimate[i]:.2f}"
    return status, cost


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
            "open_claims": {
                "decision_days_uniform": [0, OPEN_DECISION_DAYS], "pending_share": PENDING_SHARE,
                "estimate": {"error": "lognormal", "sigma_log": OPEN_ESTIMATE_SIGMA_LOG,
                             "rounding": OPEN_ESTIMATE_ROUNDING},
                "without_estimate_fraction": OPEN_WITHOUT_ESTIMATE_FRACTION,
                "only_claims_to_be_approved": True,
            },
        },
        "total_units": int(sum(s.stats["units"] for s in sims)),
        "claims_total": int(len(raw)),
        "claims_by_status": {str(k): int(v) for k, v in status.items()},
        "planted_rows": {"total": int(len(planted)), **planted_counts},
    }
