"""Failure modes as independent competing risks."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.stages.failure_modes import (
    OTHER,
    competing_risk_data,
    complete_mode_models,
    fit_failure_modes,
    life_model_by_mode_table,
    mode_membership,
)
from warranty_forecast.stages.fitting import FITTED
from warranty_forecast.stages.forecast import CompetingRisks, expected_future_returns, expected_future_returns_by_mode
from warranty_forecast.lifecore.data import LifeData
from closed_forms import weibull_log_survival  # tests/closed_forms.py


class Weibull:
    def __init__(self, shape, scale):
        self.shape, self.scale = shape, scale

    def log_survival(self, t):
        return weibull_log_survival(t, self.shape, self.scale)


def simulate_modes(seed: int, n_units: int, modes: dict[str, tuple[float, float]], warranty: int = 24):
    """Staggered sales (1..36 months in service), each unit fails at the first of its modes' lives."""
    rng = np.random.default_rng(seed)
    in_service = rng.integers(1, 37, size=n_units)
    window = np.minimum(in_service, warranty).astype(float)
    names = list(modes)
    lives = np.column_stack([scale * rng.weibull(shape, size=n_units) for shape, scale in modes.values()])
    first = lives.min(axis=1)
    cause = np.array(names)[lives.argmin(axis=1)]
    failed = first <= window
    returns = (
        pd.DataFrame({"failure_mode": cause[failed], "months_in_service": np.ceil(first[failed]).astype(int)})
        .value_counts()
        .rename("returns")
        .reset_index()
        .assign(product="P")
    )
    ages, counts = np.unique(window[~failed], return_counts=True)
    data = LifeData.from_monthly_returns(
        *[x.to_numpy(dtype=float) for x in (returns.groupby("months_in_service")["returns"].sum().reset_index()[c]
                                              for c in ("months_in_service", "returns"))],
        ages.astype(float),
        counts.astype(float), day_grid=False
    )
    return returns, data


def test_small_codes_fold_into_other():
    membership = mode_membership(pd.Series({"A": 50, "B": 20, "C": 19, "D": 1}), 20)
    assert membership == {"A": ("A",), "B": ("B",), OTHER: ("C", "D")}
    assert mode_membership(pd.Series({"A": 50}), 20) == {"A": ("A",)}


def test_other_modes_returns_become_suspensions_at_mid_month():
    returns = pd.DataFrame(
        {"failure_mode": ["A", "A", "B", "C"], "months_in_service": [1, 3, 3, 5], "returns": [2, 1, 4, 6]}
    )
    product = LifeData.from_monthly_returns([1, 3, 3, 5], [2, 1, 4, 6], [10.0, 12.0], [100.0, 50.0])
    data = competing_risk_data(returns, ("A",), product)
    days = 365.25 / 12  # the day grid (hand arithmetic): month 3 = (61, 92] days, month 5 = (122, 153] days
    assert (data.interval_upper * days).round(9).tolist() == [31.0, 92.0] and data.interval_counts.tolist() == [2.0, 1.0]
    suspended = {round(age * days, 9): count for age, count in zip(data.suspension_ages, data.suspension_counts)}
    assert suspended == {round(10 * days, 9): 100.0, round(12 * days, 9): 50.0, 76.5: 4.0, 137.5: 6.0}
    assert data.n_returns + data.n_suspensions == product.n_returns + product.n_suspensions


def test_modes_recover_their_true_weibulls():
    # common practice, no source: independent Weibull lives, the first failure is observed by month
    truth = {"EARLY": (0.9, 900.0), "WEAR": (2.8, 60.0)}
    returns, data = simulate_modes(11, 200_000, truth)
    fits = fit_failure_modes(returns, {"P": data}, LifeModelSettings(min_returns_per_mode=20))
    for mode in fits["P"]:
        shape, scale = truth[mode.failure_mode]
        assert mode.status == FITTED
        assert mode.lr_bounds.shape[0] <= shape <= mode.lr_bounds.shape[1], mode.failure_mode
        assert mode.lr_bounds.scale[0] <= scale <= mode.lr_bounds.scale[1], mode.failure_mode


def test_mode_shares_are_exact_for_proportional_hazards_and_add_up():
    # common practice, no source: modes with one shape have proportional hazards, so each mode's share of
    # future returns is its share of the rate (scale**-shape), and the shares add up to the product forecast.
    shape = 1.3
    mode_a, mode_b = Weibull(shape, 200.0), Weibull(shape, 200.0 * 3 ** (1 / shape))  # rates 3 : 1
    suspensions = pd.DataFrame(
        {
            "product": ["P", "P"],
            "build_month": [dt.date(2024, 1, 1)] * 2,
            "sale_month": [dt.date(2024, 1, 1)] * 2,
            "warranty_months": [24, 24],
            "warranty_start_date": [dt.date(2024, 1, 5), dt.date(2024, 1, 20)],
            "observed_age_months": [3.2, 0.0],
            "is_in_channel": [False, True],
            "units": [1000, 500],
            "suspensions": [990.0, 500.0],
        }
    )
    by_mode = expected_future_returns_by_mode(suspensions, {"P": {"A": mode_a, "B": mode_b}}).set_index("failure_mode")
    assert by_mode.loc["A", "expected_returns"] / by_mode.loc["B", "expected_returns"] == pytest.approx(3.0, rel=1e-12)
    combined = CompetingRisks((mode_a, mode_b))
    total = expected_future_returns(suspensions, {"P": combined})["expected_returns"].sum()
    assert by_mode["expected_returns"].sum() == pytest.approx(total, rel=1e-12)
    t = np.array([1.0, 10.0, 24.0])
    assert np.exp(combined.log_survival(t)) == pytest.approx(
        np.exp(mode_a.log_survival(t)) * np.exp(mode_b.log_survival(t)), rel=1e-14
    )


def test_mode_table_reports_shares_and_incomplete_products():
    truth = {"EARLY": (0.9, 900.0), "WEAR": (2.8, 60.0), "RARE": (1.0, 1e5)}
    returns, data = simulate_modes(5, 50_000, truth)  # RARE has 10 returns: it folds into "other"
    suspensions = pd.DataFrame(
        {
            "product": ["P"], "build_month": [dt.date(2024, 1, 1)], "sale_month": [dt.date(2024, 1, 1)],
            "warranty_months": [24], "warranty_start_date": [dt.date(2024, 1, 1)], "observed_age_months": [6.0],
            "is_in_channel": [False], "units": [1000], "suspensions": [1000.0],
        }
    )

    def table_for(settings):
        fits = fit_failure_modes(returns, {"P": data}, settings)
        expected = expected_future_returns_by_mode(suspensions, complete_mode_models(fits))
        return life_model_by_mode_table(fits, expected).set_index("failure_mode")

    complete = table_for(LifeModelSettings(min_returns_per_mode=20))
    assert complete.loc[OTHER, "failure_codes"] == "RARE" and complete.loc[OTHER, "returns"] == 10
    assert set(complete["status"]) == {FITTED}
    assert complete["share_of_expected_future_returns"].sum() == pytest.approx(1.0, rel=1e-12)
    assert set(complete.columns) >= {"product", "returns", "shape", "scale", "shape_lr_lower", "b10_lr_upper"}

    # "other" below min_returns and no configured shape: no fit, so no competing-risks shares at all
    incomplete = table_for(LifeModelSettings(min_returns_per_mode=20, min_returns=15))
    assert incomplete.loc[OTHER, "status"] == "insufficient_data"
    assert incomplete["share_of_expected_future_returns"].isna().all()

    # with a shape from engineering experience, "other" gets a fixed-shape fit and the shares return
    fixed = table_for(LifeModelSettings(min_returns_per_mode=20, min_returns=15, fixed_shape=1.0))
    assert fixed.loc[OTHER, "status"] == "fixed_shape" and fixed.loc[OTHER, "shape"] == 1.0
    assert fixed["share_of_expected_future_returns"].sum() == pytest.approx(1.0, rel=1e-12)
