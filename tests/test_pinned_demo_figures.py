"""The demo's published figures, pinned: fits, bounds, goodness of fit, failure modes, life table,
forecast and reserve must not move when the code is reorganised.

The pinned tables in tests/data/pinned_demo/ were written by this project's own run on the shipped demo
data (as of 2026-11-30) before the structural redesign; they are this program's earlier output, not an
external reference. Estimates are compared at 1e-6 relative (optimiser and root-finder tolerances sit
well below that; a changed formula moves them far more). Regenerate only for a deliberate change of
method: `PIN_DEMO_FIGURES=1 pytest tests/test_pinned_demo_figures.py`, and say why in the commit.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest


ROOT = Path(__file__).resolve().parents[1]
PINNED = Path(__file__).resolve().parent / "data" / "pinned_demo"
RELATIVE_TOLERANCE = 1e-6

# Columns that describe the optimiser's path or hold prose, not figures.
NOT_PINNED = {"message", "family_message", "iterations", "gradient_norm", "cost_basis"}


def _figures(out: Path) -> dict[str, pd.DataFrame]:
    # published as calendar_month since issue 12; pinned under the name it had (`month`)
    forecast = pd.read_parquet(out / "forecast.parquet").rename(columns={"calendar_month": "month"})
    return {
        "life_model": pd.read_parquet(out / "life_model.parquet"),
        "life_model_by_mode": pd.read_parquet(out / "life_model_by_mode.parquet"),
        "life_table": pd.read_parquet(out / "life_table.parquet"),
        "reserve": pd.read_parquet(out / "reserve.parquet"),
        "reserve_by_product": pd.read_parquet(out / "reserve_by_product.parquet"),
        "forecast_by_product_and_month": forecast.groupby(["product", "month"], as_index=False)[
            ["expected_returns", "expected_cost"]
        ].sum(),
    }


@pytest.fixture(scope="module")
def demo_figures(demo_run_copy) -> dict[str, pd.DataFrame]:
    out = demo_run_copy  # the full demo run (conftest.py)
    figures = _figures(out)
    if os.environ.get("PIN_DEMO_FIGURES") == "1":
        PINNED.mkdir(parents=True, exist_ok=True)
        for name, frame in figures.items():
            frame.drop(columns=[c for c in frame.columns if c in NOT_PINNED]).to_csv(
                PINNED / f"{name}.csv", index=False, float_format="%.17g"
            )
    return figures


@pytest.mark.parametrize(
    "name",
    ["life_model", "life_model_by_mode", "life_table", "reserve", "reserve_by_product", "forecast_by_product_and_month"],
)
def test_demo_figures_are_unchanged(demo_figures, name):
    pinned = pd.read_csv(PINNED / f"{name}.csv", keep_default_na=True)
    got = demo_figures[name]
    # every pinned column still published, in the same order; columns added since are not pinned
    assert list(pinned.columns) == [c for c in got.columns if c not in NOT_PINNED and c in set(pinned.columns)]
    assert len(pinned) == len(got)
    for column in pinned.columns:
        want = pinned[column]
        have = got[column]
        if pd.api.types.is_numeric_dtype(want) and not pd.api.types.is_bool_dtype(want):
            np.testing.assert_allclose(
                have.to_numpy(dtype=float), want.to_numpy(dtype=float), rtol=RELATIVE_TOLERANCE, atol=0,
                equal_nan=True, err_msg=f"{name}.{column}",
            )
        else:
            # an empty text cell reads back from CSV as NaN
            assert have.fillna("").astype(str).tolist() == want.fillna("").astype(str).tolist(), f"{name}.{column}"
