"""Property: whatever mix of valid and invalid rows arrives, every row read is used, quarantined (and
listed, at its own row number, with the reason its kind must get) or after the as-of date.

Random mixes are drawn by hypothesis; each invalid kind breaks one rule of the README's input contract
on its own row only, so the expected fate of every row is known (common practice, no source).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from warranty_forecast.config import RunSettings, load_config
from warranty_forecast.stages.shaping import shape_extracts

AS_OF = dt.date(2024, 12, 31)
RUN_DATE = dt.date(2025, 6, 30)
SHIPMENT_HEADER = "product,build_month,ship_date,sale_date,units,warranty_months,serial"
CLAIM_HEADER = "claim_id,product,build_month,sale_date,failure_date,claim_date,cost,status,failure_code,serial"

# Two valid rows always open the shipments: the cohort every claim belongs to, and the newest shipment.
SHIPMENTS_FIRST = ["P1,2024-01,2024-01-10,2024-01-20,100,24,", "P1,2024-12,2024-12-31,,10,24,"]

# kind -> (a line for row number i, expected fate: "used", "after", or (column, reason) when quarantined)
SHIPMENT_KINDS = {
    "valid": (lambda i: f"P1,2024-01,2024-01-{10 + i % 15:02d},,{1 + i % 50},24,", "used"),
    "units below one": (lambda i: "P1,2024-01,2024-01-10,,0,24,", ("units", "units_below_one")),
    "ship date not a date": (lambda i: "P1,2024-01,2024-01-99,,5,24,", ("ship_date", "unparseable_value")),
    "missing product": (lambda i: ",2024-01,2024-01-10,,5,24,", ("product", "missing_value")),
    "warranty too long": (lambda i: "P1,2024-01,2024-01-10,,5,2000000000,", ("warranty_months", "warranty_months_above_limit")),
    "shipped after the run date": (lambda i: "P1,2024-01,2099-01-10,,5,24,", ("ship_date", "dated_after_run_date")),
    "shipped after the as-of date": (lambda i: "P1,2024-01,2025-03-01,,5,24,", "after"),
    "too few fields": (lambda i: "P1,2024-01", ("", "malformed_line")),
}
CLAIM_KINDS = {
    "valid": (lambda i: f"C{i},P1,2024-01,,2024-03-{1 + i % 28:02d},2024-04-01,10.00,approved,F1,", "used"),
    "missing claim id": (lambda i: ",P1,2024-01,,2024-03-01,2024-04-01,10.00,approved,F1,", ("claim_id", "missing_value")),
    "impossible date": (lambda i: f"C{i},P1,2024-01,,2024-02-30,2024-04-01,10.00,approved,F1,", ("failure_date", "unparseable_value")),
    "negative cost": (lambda i: f"C{i},P1,2024-01,,2024-03-01,2024-04-01,-1,approved,F1,", ("cost", "negative_cost")),
    "filed before failing": (lambda i: f"C{i},P1,2024-01,,2024-03-01,2024-02-01,10.00,approved,F1,", ("claim_date", "claim_before_failure")),
    "filed after the run date": (lambda i: f"C{i},P1,2024-01,,2024-03-01,9999-12-31,10.00,approved,F1,", ("claim_date", "dated_after_run_date")),
    "filed after the as-of date": (lambda i: f"C{i},P1,2024-01,,2025-01-15,2025-02-01,10.00,approved,F1,", "after"),
    "too many fields": (lambda i: f"C{i},P1,2024-01,,2024-03-01,2024-04-01,10.00,approved,F1,,extra", ("", "malformed_line")),
}


def _write(path: Path, header: str, lines: list[str]) -> Path:
    path.write_text("\n".join([header, *lines]) + "\n", encoding="utf-8")
    return path


def _expected(kinds: list[str], table: dict, first: int = 0) -> dict[int, object]:
    """Row number (1-based, after `first` fixed rows) -> expected fate."""
    return {first + n + 1: table[kind][1] for n, kind in enumerate(kinds)}


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    shipment_kinds=st.lists(st.sampled_from(sorted(SHIPMENT_KINDS)), max_size=25),
    claim_kinds=st.lists(st.sampled_from(sorted(CLAIM_KINDS)), max_size=40),
)
def test_every_row_is_used_quarantined_or_after_the_as_of_date(tmp_path_factory, shipment_kinds, claim_kinds):
    folder = tmp_path_factory.mktemp("mix")
    shipments = _write(
        folder / "shipments.csv",
        SHIPMENT_HEADER,
        SHIPMENTS_FIRST + [SHIPMENT_KINDS[k][0](n) for n, k in enumerate(shipment_kinds)],
    )
    claims = _write(folder / "claims.csv", CLAIM_HEADER, [CLAIM_KINDS[k][0](n) for n, k in enumerate(claim_kinds)])
    config = load_config(
        shipments_path=shipments, claims_path=claims, out_dir=folder / "out", as_of_date=AS_OF, run_date=RUN_DATE
    )
    config = dataclasses.replace(config, run=RunSettings(max_quarantined_share=1.0))  # no ceiling: count them all

    shaped = shape_extracts(config)

    expected = {
        "shipments": {1: "used", 2: "used", **_expected(shipment_kinds, SHIPMENT_KINDS, first=len(SHIPMENTS_FIRST))},
        "claims": _expected(claim_kinds, CLAIM_KINDS),
    }
    reconciliation = shaped.reconciliation.set_index("extract")
    for extract, fates in expected.items():
        row = reconciliation.loc[extract]
        quarantined = {n: fate for n, fate in fates.items() if isinstance(fate, tuple)}
        assert row["rows_read"] == len(fates)
        assert row["rows_after_as_of"] == sum(fate == "after" for fate in fates.values())
        assert row["rows_quarantined"] == len(quarantined)
        assert row["rows_used"] == sum(fate == "used" for fate in fates.values())
        listed = shaped.quarantine[shaped.quarantine["extract"] == extract]
        got = {int(r.row_number): (r.column, r.reason) for r in listed.itertuples(index=False)}
        assert len(listed) == len(got)  # one quarantine row per bad row
        assert {n: reason for n, (_, reason) in got.items()} == {n: reason for n, (_, reason) in quarantined.items()}
        for number, (column, _) in quarantined.items():
            if column:  # a malformed line names whatever column DuckDB tripped on
                assert got[number][0] == column


@pytest.mark.parametrize("kind", sorted(set(SHIPMENT_KINDS) | set(CLAIM_KINDS)))
def test_each_kind_alone_is_recognised(tmp_path, kind):
    """A fixed example per kind, so a failure names the kind without hypothesis's shrinking."""
    shipment_kinds = [kind] if kind in SHIPMENT_KINDS else []
    claim_kinds = [kind] if kind in CLAIM_KINDS else []
    test_every_row_is_used_quarantined_or_after_the_as_of_date.hypothesis.inner_test(
        tmp_path_factory=_Factory(tmp_path), shipment_kinds=shipment_kinds, claim_kinds=claim_kinds
    )


class _Factory:
    def __init__(self, root: Path) -> None:
        self.root = root

    def mktemp(self, name: str) -> Path:
        path = self.root / name
        path.mkdir()
        return path
