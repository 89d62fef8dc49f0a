"""A small invented scenario for tests that run the whole command but do not need the demo's size: two
product lines, six build months of 2024, five lots of 200 units each, 60 approved claims per line, the
newest filed 2024-12-30. A run on it takes about 2 s (the demo's, 10-20 s)."""

from __future__ import annotations

import csv
import datetime as dt
from pathlib import Path

import numpy as np

SHIPMENT_COLUMNS = ["product", "build_month", "ship_date", "sale_date", "units", "warranty_months", "serial"]
CLAIM_COLUMNS = [
    "claim_id", "product", "build_month", "sale_date", "failure_date", "claim_date", "cost", "status",
    "failure_code", "serial",
]
NEWEST_CLAIM_DATE = dt.date(2024, 12, 30)


def base_shipments() -> list[dict[str, str]]:
    """Two lines x six build months x five lots of 200 units; sale 20 days after shipping."""
    rows = []
    for product in ("P1", "P2"):
        for month in range(1, 7):
            for lot in range(5):
                ship = dt.date(2024, month, 10 + lot)
                rows.append(
                    {
                        "product": product, "build_month": f"2024-{month:02d}", "ship_date": ship.isoformat(),
                        "sale_date": (ship + dt.timedelta(days=20)).isoformat(), "units": "200",
                        "warranty_months": "24", "serial": "",
                    }
                )
    return rows


def base_claims() -> list[dict[str, str]]:
    """60 approved claims per line, failures spread over the months in service, the newest filed 2024-12-30."""
    rng = np.random.default_rng(6)
    rows = []
    for product in ("P1", "P2"):
        for number in range(60):
            month = 1 + number % 6
            sale = dt.date(2024, month, 30 if month != 2 else 29)
            latest = (NEWEST_CLAIM_DATE - dt.timedelta(days=3) - sale).days
            failure = sale + dt.timedelta(days=int(rng.integers(1, latest)))
            rows.append(
                {
                    "claim_id": f"{product}-{number:03d}", "product": product, "build_month": f"2024-{month:02d}",
                    "sale_date": "", "failure_date": failure.isoformat(),
                    "claim_date": (failure + dt.timedelta(days=3)).isoformat(), "cost": "50.00",
                    "status": "approved", "failure_code": "F1" if number % 3 else "F2", "serial": "",
                }
            )
    rows[-1]["claim_date"] = NEWEST_CLAIM_DATE.isoformat()
    return rows


def write_csv(path: Path, rows: list[dict[str, str]], columns: list[str]) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=columns, lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
    return path


def write_small_extracts(folder: Path) -> tuple[Path, Path]:
    """The scenario's shipments.csv and claims.csv in `folder`; returns their paths."""
    return (
        write_csv(Path(folder) / "shipments.csv", base_shipments(), SHIPMENT_COLUMNS),
        write_csv(Path(folder) / "claims.csv", base_claims(), CLAIM_COLUMNS),
    )
