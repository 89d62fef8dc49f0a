"""The published fits leave the flagged build months out; a product whose fit fails without them keeps
its fit on all months (and says so) rather than losing its forecast."""

from __future__ import annotations

import datetime as dt
from types import SimpleNamespace

import pandas as pd

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.stages.fitting import PUBLISHED_STATUSES
from warranty_forecast.stages.life_models import fit_lives, keep_screening_where_refit_failed

A, B = dt.date(2024, 1, 1), dt.date(2024, 2, 1)


def _shaped(returns_b: list[int]) -> SimpleNamespace:
    """Product P: build month A, 1,000 units with 10, 15, ..., 35 returns in months 1..6 (observed to age 6),
    build month B, 1,000 units with `returns_b` returns in months 1..6."""
    counts = {A: [10, 15, 20, 25, 30, 35], B: returns_b}
    fit_returns = pd.DataFrame(
        [("P", month, k + 1, n) for month, ns in counts.items() for k, n in enumerate(ns) if n > 0],
        columns=["product", "build_month", "months_in_service", "returns"],
    )
    fit_suspensions = pd.DataFrame(
        [("P", month, 6.0, 1000, 1000.0 - sum(ns)) for month, ns in counts.items()],
        columns=["product", "build_month", "observed_age_months", "units", "suspensions"],
    )
    return SimpleNamespace(
        fit_returns=fit_returns,
        fit_suspensions=fit_suspensions,
        cohort_summary=pd.DataFrame({"product": ["P", "P"], "build_month": [A, B], "units": [1000, 1000],
                                     "max_warranty_months": [24, 24]}),
        returns_by_failure_mode=fit_returns.assign(failure_mode="X"),
    )


def test_the_refit_leaves_the_flagged_month_out_and_names_it():
    shaped = _shaped([3, 4, 6, 8, 10, 12])
    refit = fit_lives(shaped, LifeModelSettings(), left_out={"P": [A]})
    assert refit.products["P"].status in PUBLISHED_STATUSES
    assert refit.products["P"].data.n_returns == 43  # month B only (hand count)
    assert refit.table.set_index("product").loc["P", "build_months_left_out"] == "2024-01"
    assert refit.left_out == {"P": (A,)}
    assert keep_screening_where_refit_failed(refit, fit_lives(shaped, LifeModelSettings())) is refit


def test_a_product_whose_fit_fails_without_its_flagged_month_keeps_its_fit_on_all_months():
    shaped = _shaped([1, 1, 0, 0, 0, 0])  # 2 returns left without A: fewer than min_returns (5)
    screening = fit_lives(shaped, LifeModelSettings())
    refit = fit_lives(shaped, LifeModelSettings(), left_out={"P": [A]})
    assert refit.products["P"].status not in PUBLISHED_STATUSES
    kept = keep_screening_where_refit_failed(refit, screening)
    assert kept.products["P"] is screening.products["P"]
    assert kept.table.set_index("product").loc["P", "build_months_left_out"] == ""
    assert kept.left_out == {}
    assert any("fit without the flagged build months (2024-01) failed" in w for w in kept.product_warnings)
    assert kept.table.set_index("product").loc["P", "shape"] == screening.table.set_index("product").loc["P", "shape"]


def _two_products() -> SimpleNamespace:
    """Products P (as `_shaped`, month B with 3, 4, 6, 8, 10, 12 returns) and Q (the same rows renamed)."""
    one = _shaped([3, 4, 6, 8, 10, 12])
    two = {
        name: pd.concat([frame, frame.assign(product="Q")], ignore_index=True)
        for name, frame in vars(one).items()
    }
    return SimpleNamespace(**two)


def test_the_refit_fits_again_only_the_products_with_months_left_out():
    # common practice, no source: the same data give the same fit, so a product with nothing left out
    # keeps its screening fit (the very object); the refitted product matches a refit from scratch
    shaped = _two_products()
    screening = fit_lives(shaped, LifeModelSettings())
    reused = fit_lives(shaped, LifeModelSettings(), left_out={"P": [A]}, unchanged=screening)
    scratch = fit_lives(shaped, LifeModelSettings(), left_out={"P": [A]})
    assert reused.products["Q"] is screening.products["Q"] and reused.modes["Q"] is screening.modes["Q"]
    assert reused.products["P"] is not screening.products["P"]
    assert list(reused.products) == list(scratch.products) and list(reused.modes) == list(scratch.modes)
    pd.testing.assert_frame_equal(reused.table, scratch.table)
    assert reused.product_warnings == scratch.product_warnings
    assert reused.products["P"].data.n_returns == 43  # month B only (hand count)
