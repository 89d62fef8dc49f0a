"""Actuarial life table with Greenwood bounds."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from warranty_forecast.stages.life_table import life_table


def cells(product, at_risk, returns, withdrawn):
    months = np.arange(1, len(at_risk) + 1)
    return pd.DataFrame(
        {
            "product": product,
            "build_month": pd.Timestamp("2024-01-01").date(),
            "months_in_service": months,
            "units_at_risk": np.asarray(at_risk, dtype=float),
            "returns": np.asarray(returns),
            "units_withdrawn": np.asarray(withdrawn, dtype=float),
        }
    )


def test_single_interval_matches_binomial_and_greenwood_closed_form():
    # common practice, no source: with no withdrawals F(1) = d/n and var(log S) = d / (n (n - d))
    table = life_table(cells("P", [200], [20], [0]))
    row = table.iloc[0]
    assert row["fraction_failed"] == pytest.approx(0.1, rel=1e-14)
    log_s = np.log(0.9)
    se = np.sqrt(20 / (200 * 180)) / -log_s
    z = stats.norm.ppf(0.975)
    assert row["fraction_failed_upper"] == pytest.approx(1 - 0.9 ** np.exp(z * se), rel=1e-12)
    assert row["fraction_failed_lower"] == pytest.approx(1 - 0.9 ** np.exp(-z * se), rel=1e-12)


def test_withdrawals_count_half_and_products_are_separate():
    # common practice, no source: actuarial estimator q = d / (n - w/2)
    frame = pd.concat([cells("P", [100, 80], [10, 8], [10, 0]), cells("Q", [50], [0], [0])])
    table = life_table(frame).set_index(["product", "months_in_service"])
    q1 = 10 / 95
    q2 = 8 / 80
    assert table.loc[("P", 1), "fraction_failed"] == pytest.approx(q1)
    assert table.loc[("P", 2), "fraction_failed"] == pytest.approx(1 - (1 - q1) * (1 - q2))
    assert table.loc[("Q", 1), "fraction_failed"] == 0.0
    assert np.isnan(table.loc[("Q", 1), "fraction_failed_lower"])


def test_expected_counts_reproduce_the_weibull_cdf():
    # common practice, no source: with n_k = N R(k-1) and d_k = N (R(k-1) - R(k)) the table gives R(k) exactly
    shape, scale, n = 1.7, 30.0, 1e6
    k = np.arange(1, 25)
    survival = np.exp(-((np.r_[0, k] / scale) ** shape))
    frame = cells("P", n * survival[:-1], n * (survival[:-1] - survival[1:]), np.zeros(24))
    table = life_table(frame)
    assert table["fraction_failed"].to_numpy() == pytest.approx(1 - survival[1:], rel=1e-10)
    assert (table["fraction_failed_lower"] < table["fraction_failed"]).all()
    assert (table["fraction_failed"] < table["fraction_failed_upper"]).all()


def test_build_months_are_summed():
    frame = pd.concat(
        [cells("P", [100], [5], [0]), cells("P", [100], [15], [0]).assign(build_month=pd.Timestamp("2024-02-01").date())]
    )
    assert life_table(frame)["fraction_failed"].tolist() == pytest.approx([0.1])
