"""The large synthetic extracts of the scale benchmark (tools/large_extracts.py), at small sizes: row counts,
the contract's columns, claims on real serials, the planted bad rows in the quarantine with the reasons
the staging checks give, and seeded reproducibility."""

from __future__ import annotations

import datetime as dt

import pyarrow.parquet as pq
import pytest

from warranty_forecast.config import load_config
from warranty_forecast.stages.extracts import CLAIMS, SHIPMENTS
from warranty_forecast.stages.shaping import shape_extracts
from warranty_forecast.tools.large_extracts import (
    CLAIM_BAD_KINDS,
    EXPECTED_CLAIM_REASONS,
    EXPECTED_SHIPMENT_REASONS,
    SHIPMENT_BAD_KINDS,
    main,
    write_large_extracts,
)

RUN_DATE = dt.date(2026, 12, 3)


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    return write_large_extracts(
        tmp_path_factory.mktemp("large"), units=8000, claims=500, products=3, build_months=18, seed=7,
        bad_rows_per_kind=2, chunk_units=3000,
    )


def test_row_counts_and_contract_columns(small):
    shipments = pq.read_table(small.shipments_path)
    claims = pq.read_table(small.claims_path)
    assert shipments.num_rows == 8000 and claims.num_rows == 500 == small.claims
    assert pq.ParquetFile(small.shipments_path).metadata.num_row_groups == 3  # chunks of 3000 units
    # the README's input contract (stages/extracts.py holds the same lists)
    assert sorted(shipments.column_names) == sorted(SHIPMENTS.columns)
    assert sorted(claims.column_names) == sorted(CLAIMS.columns)
    assert set(shipments.column("units").to_pylist()) <= {0, 1}  # 0 only on the planted units_zero rows
    assert small.failures_before_thinning >= small.claims  # thinned to the exact count asked for
    # every claim's serial is a serial the shipments extract holds
    assert set(claims.column("serial").to_pylist()) <= set(shipments.column("serial").to_pylist())
    statuses = set(claims.column("status").to_pylist())
    assert {"approved", "rejected", "no_fault_found", "open"} <= statuses
    assert small.bad_rows == 2 * (len(SHIPMENT_BAD_KINDS) + len(CLAIM_BAD_KINDS))


def test_bad_rows_land_in_the_quarantine_with_their_reasons(small, tmp_path):
    config = load_config(
        shipments_path=small.shipments_path, claims_path=small.claims_path, out_dir=tmp_path / "out",
        run_date=RUN_DATE, draw_charts=False,
    )
    shaped = shape_extracts(config)  # also checks that the reconciliation holds (check_reconciliation)
    quarantine = shaped.quarantine
    found = {
        (row.extract, int(row.row_number)): (row.column, row.reason) for row in quarantine.itertuples(index=False)
    }
    planted = {
        **{("shipments", r): EXPECTED_SHIPMENT_REASONS[k] for k, rows in small.bad_shipment_rows.items() for r in rows},
        **{("claims", r): EXPECTED_CLAIM_REASONS[k] for k, rows in small.bad_claim_rows.items() for r in rows},
    }
    assert found == planted  # every planted row, with its reason, and nothing else
    reconciliation = shaped.reconciliation.set_index("extract")
    assert int(reconciliation.loc["shipments", "rows_quarantined"]) == 2 * len(SHIPMENT_BAD_KINDS)
    assert int(reconciliation.loc["claims", "rows_read"]) == 500


def test_seeded_reproducibility(small, tmp_path):
    again = write_large_extracts(
        tmp_path / "again", units=8000, claims=500, products=3, build_months=18, seed=7,
        bad_rows_per_kind=2, chunk_units=3000,
    )
    other = write_large_extracts(
        tmp_path / "other", units=8000, claims=500, products=3, build_months=18, seed=8,
        bad_rows_per_kind=2, chunk_units=3000,
    )
    for name in ("shipments_path", "claims_path"):
        assert pq.read_table(getattr(again, name)).equals(pq.read_table(getattr(small, name)))
        assert not pq.read_table(getattr(other, name)).equals(pq.read_table(getattr(small, name)))


def test_many_products_and_the_command(tmp_path, capsys):
    assert main([
        "--units", "6000", "--claims", "200", "--products", "400", "--build-months", "6", "--out", str(tmp_path),
    ]) == 0
    assert "6,000 units" in capsys.readouterr().out
    shipments = pq.read_table(tmp_path / "shipments.parquet")
    assert len(set(shipments.column("product").to_pylist()) - {None}) > 350  # nearly all 400 drawn
    assert pq.read_table(tmp_path / "claims.parquet").num_rows == 200


@pytest.mark.parametrize("argument", ["units", "claims", "products", "build_months", "chunk_units"])
def test_bad_arguments_name_themselves(tmp_path, argument):
    sizes = {"units": 100, "claims": 5, "products": 2, "build_months": 3, "chunk_units": 50, argument: -1}
    with pytest.raises(ValueError, match=argument):
        write_large_extracts(tmp_path, **sizes)
