"""Writing the demo scenario's files: the extracts (Parquet and CSV), the planted rows, the truth and a
README, each atomically (a temporary file in the same folder, then os.replace)."""

from __future__ import annotations

import io
import json
import logging
import os
import tempfile
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from warranty_forecast.tools.demo_data import (
    OPEN_DECISION_DAYS,
    OPEN_WITHOUT_ESTIMATE_FRACTION,
    PENDING_SHARE,
    UNKNOWN_STATUS_EXAMPLE,
    DemoData,
    generate_demo_data,
)
from warranty_forecast.tools.demo_scenario import (
    CLAIM_SALE_DATE_FRACTION,
    CLAIMS_FILE,
    DAYS_PER_MONTH,
    DEFAULT_SEED,
    LOT_SIZE_MAX,
    LOT_SIZE_MIN,
    NO_FAULT_FOUND_COST,
    NO_FAULT_FOUND_FRACTION,
    OUT_OF_COVERAGE_GOODWILL_FRACTION,
    OUT_OF_COVERAGE_WINDOW_MONTHS,
    PLANT_NOTES,
    PLANTED_FILE,
    README_FILE,
    REJECTED_FRACTION,
    REPORTING_LAG_CAP_DAYS,
    REPORTING_LAG_MEAN_DAYS,
    SALE_LAG_MEAN_DAYS,
    SHIP_WINDOW_DAYS,
    SHIPMENTS_FILE,
    SHIPMENTS_SCHEMA,
    TRUTH_FILE,
    UNKNOWN_SALE_FRACTION,
)

logger = logging.getLogger(__name__)


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
    # the planted unknown status is demo_data's word (open and pending are accepted statuses)
    notes = {**PLANT_NOTES, ("unknown_status", "status"): f"status is `{UNKNOWN_STATUS_EXAMPLE}`"}
    planted_rows = "\n".join(
        f"| {r.source_file} | {r.row_number} | {r.column} | `{r.reason}` | {notes[(r.reason, r.column)]} |"
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
- Open claims: a claim to be approved is decided 0-{OPEN_DECISION_DAYS} days (uniform) after it is filed, so
  claims filed in the last weeks before the as-of date may still be `open` (or, {PENDING_SHARE:.0%} of them,
  `pending`), with an estimated cost (the eventual cost with a lognormal error, rounded to 10), left empty
  for {OPEN_WITHOUT_ESTIMATE_FRACTION:.0%} of them.
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
