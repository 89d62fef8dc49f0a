"""Chain ladder with Mack's standard error (stages/chain_ladder.py): the RAA triangle's published figures,
properties of the method, the edges, the next-periods forecast and the returns triangle."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from warranty_forecast.stages.chain_ladder import (
    chain_ladder,
    development_month,
    last_whole_month,
    month_number,
    next_periods_forecast,
    returns_triangle,
)

RAA_CSV = Path(__file__).parent / "data" / "raa_triangle.csv"  # copy of /work/shared/reference (tests/data/README.md)

# Source: Mack (1993), "Distribution-free calculation of the standard error of chain ladder reserve estimates",
# ASTIN Bulletin 23, the RAA example, as given in the reference README (/work/shared/reference/README.md):
RAA_FACTORS = (2.999, 1.624, 1.271, 1.172, 1.113, 1.042, 1.033, 1.017, 1.009)  # printed to 3 decimals
RAA_TOTAL_RESERVE = 52_135.0  # printed to the unit
RAA_TOTAL_SE = 26_909.0  # the README: "treat the standard error's last digits as remembered, not read"
# Per origin year (reserve, Mack standard error), 1982..1990, rounded to units: from memory of the printed
# MackChainLadder(RAA) example of the R package ChainLadder (Gesmann et al.), not in the reference README.
RAA_BY_ORIGIN_FROM_MEMORY = {
    1982: (154, 206), 1983: (617, 623), 1984: (1_636, 747), 1985: (2_747, 1_469), 1986: (3_649, 2_002),
    1987: (5_435, 2_209), 1988: (10_907, 5_358), 1989: (10_650, 6_333), 1990: (16_339, 24_566),
}


def raa() -> pd.DataFrame:
    table = pd.read_csv(RAA_CSV, index_col="origin")
    table.columns = range(1, table.shape[1] + 1)
    return table


# -- the published example ------------------------------------------------------------------------------


def test_raa_factors_reserve_and_standard_error_match_mack_1993():
    result = chain_ladder(raa())
    np.testing.assert_allclose(result.factors.to_numpy(), RAA_FACTORS, atol=5e-4)  # 3 printed decimals
    assert result.total_reserve == pytest.approx(RAA_TOTAL_RESERVE, abs=1.0)
    # remembered last digits (reference README): within 0.5% rather than to the unit
    assert result.total_standard_error == pytest.approx(RAA_TOTAL_SE, rel=5e-3)
    assert bool(result.sigma2_extrapolated.iloc[-1]) and not result.sigma2_extrapolated.iloc[:-1].any()
    assert any("negative increment" in note for note in result.notes)  # 1982: 15,599 -> 15,496


def test_raa_per_origin_reserves_and_standard_errors_from_memory():
    result = chain_ladder(raa())
    assert result.reserve.loc[1981] == 0.0 and result.standard_error.loc[1981] == 0.0
    for origin, (reserve, standard_error) in RAA_BY_ORIGIN_FROM_MEMORY.items():
        # remembered figures: 1% (or one unit) of slack
        assert result.reserve.loc[origin] == pytest.approx(reserve, rel=1e-2, abs=1.0)
        assert result.standard_error.loc[origin] == pytest.approx(standard_error, rel=1e-2, abs=1.0)


def test_raa_one_step_origin_by_hand_and_the_covariance_term():
    # 1982 has one step left (period 9 -> 10): Mack 1993's formula by hand,
    # se = U sqrt(s2_9 / f_9^2 (1 / C_9 + 1 / S_9)), S_9 = C[1981, 9] alone; s2_9 by Mack's extrapolation
    table, result = raa(), chain_ladder(raa())
    f9, c9, s9 = 18_834 / 18_662, 16_704.0, 18_662.0
    s2 = result.sigma2.to_numpy()
    s2_9 = min(s2[7] ** 2 / s2[6], s2[6], s2[7])
    by_hand = 16_704 * f9 * np.sqrt(s2_9 / f9**2 * (1 / c9 + 1 / s9))
    assert result.factors.loc[9] == pytest.approx(f9, rel=1e-12)
    assert result.standard_error.loc[1982] == pytest.approx(by_hand, rel=1e-12)
    assert table.loc[1982, 10] != table.loc[1982, 10]  # unobserved: NaN
    # the factors are shared, so the origins' errors are positively correlated: total above the root sum of squares
    assert result.total_standard_error > np.sqrt(np.sum(result.standard_error**2)) + 500  # 26,909 vs 26,160
    summary = result.summary()
    assert summary.loc["total", "reserve"] == pytest.approx(RAA_TOTAL_RESERVE, abs=1.0)
    assert list(summary.index[:-1]) == list(range(1981, 1991))


# -- properties -----------------------------------------------------------------------------------------


def _triangle_from(first: list[float], factors: list[float]) -> pd.DataFrame:
    """A square staircase, n = len(first) = len(factors) + 1 origins: origin i observed to n - i periods,
    C[i, j+1] = C[i, j] f_j exactly."""
    n = len(factors) + 1
    values = np.full((n, n), np.nan)
    for i in range(n):
        values[i, 0] = first[i]
        for j in range(n - i - 1):
            values[i, j + 1] = values[i, j] * factors[j]
    return pd.DataFrame(values, index=range(2000, 2000 + n), columns=range(1, n + 1))


@settings(max_examples=40, deadline=None)
@given(
    first=st.lists(st.floats(1.0, 1e6), min_size=6, max_size=6),
    factors=st.lists(st.floats(1.0, 3.0), min_size=5, max_size=5),
)
def test_exact_constant_factors_are_reproduced_with_zero_standard_error(first, factors):
    # common practice, no source: with no noise every individual ratio equals f_j, so sigma^2 = 0
    triangle = _triangle_from(first, factors)
    result = chain_ladder(triangle)
    np.testing.assert_allclose(result.factors.to_numpy(), factors, rtol=1e-10)
    np.testing.assert_allclose(result.sigma2.to_numpy(), 0.0, atol=1e-9 * max(first))
    assert result.total_standard_error <= 1e-6 * max(result.total_reserve, 1.0)
    expected_ultimate = np.array(first) * np.prod(factors)
    np.testing.assert_allclose(result.ultimate.to_numpy(), expected_ultimate, rtol=1e-10)


@settings(max_examples=40, deadline=None)
@given(scale=st.floats(1e-3, 1e4), seed=st.integers(0, 2**32 - 1))
def test_scaling_the_amounts_scales_reserve_and_standard_error(scale, seed):
    # common practice, no source: f is scale-free, sigma^2 scales by c, so mse scales by c^2
    rng = np.random.default_rng(seed)
    n = 7
    values = np.cumsum(rng.gamma(2.0, 50.0, size=(n, n)), axis=1)
    values[np.add.outer(np.arange(n), np.arange(n)) >= n] = np.nan
    base = chain_ladder(pd.DataFrame(values, columns=range(1, n + 1)))
    scaled = chain_ladder(pd.DataFrame(values * scale, columns=range(1, n + 1)))
    np.testing.assert_allclose(scaled.factors, base.factors, rtol=1e-12)
    assert scaled.total_reserve == pytest.approx(scale * base.total_reserve, rel=1e-9)
    assert scaled.total_standard_error == pytest.approx(scale * base.total_standard_error, rel=1e-9)
    np.testing.assert_allclose(scaled.standard_error, scale * base.standard_error, rtol=1e-9, atol=1e-12)


# -- edges ----------------------------------------------------------------------------------------------


def test_a_column_summing_to_zero_gets_factor_one_with_a_note():
    triangle = pd.DataFrame(
        [[0.0, 0.0, 5.0], [0.0, 0.0, np.nan], [4.0, np.nan, np.nan]], index=["a", "b", "c"], columns=[1, 2, 3]
    )
    result = chain_ladder(triangle)
    assert result.factors.loc[1] == 1.0 and result.factors.loc[2] == 1.0
    assert any("sum to 0" in note and "factor set to 1" in note for note in result.notes)
    assert result.ultimate.loc["c"] == pytest.approx(4.0)


def test_a_single_origin_and_a_single_period():
    single_origin = chain_ladder(pd.DataFrame([[3.0, 5.0, 6.0]], index=["only"], columns=[1, 2, 3]))
    assert single_origin.total_reserve == 0.0 and single_origin.total_standard_error == 0.0
    np.testing.assert_allclose(single_origin.factors, [5 / 3, 6 / 5])
    assert single_origin.sigma2.isna().all()  # nothing to estimate it from; no reserve needs it
    one_period = chain_ladder(pd.DataFrame({1: [3.0, 4.0]}, index=[1, 2]))
    assert one_period.factors.empty and one_period.total_reserve == 0.0 and one_period.total_standard_error == 0.0
    assert list(one_period.ultimate) == [3.0, 4.0]


def test_negative_increments_are_allowed():
    triangle = pd.DataFrame([[10.0, 8.0, 9.0], [10.0, 12.0, np.nan], [5.0, np.nan, np.nan]], columns=[1, 2, 3])
    result = chain_ladder(triangle)
    assert result.factors.loc[1] == pytest.approx(20 / 20)
    assert any("negative increment" in note for note in result.notes)
    assert np.isfinite(result.total_standard_error)


def test_origins_are_sorted():
    shuffled = raa().iloc[[3, 0, 9, 1, 2, 8, 4, 7, 5, 6]]
    assert chain_ladder(shuffled).total_reserve == pytest.approx(chain_ladder(raa()).total_reserve, rel=1e-12)


@pytest.mark.parametrize(
    "values, message",
    [
        ([[1.0, np.nan, 3.0], [1.0, 2.0, np.nan], [1.0, np.nan, np.nan]], "origin 0 is not observed in development period 2"),
        ([[1.0, 2.0, np.nan], [1.0, 2.0, 3.0], [1.0, np.nan, np.nan]], "origin 1 is observed to development period 3"),
        ([[1.0, 2.0, np.nan], [1.0, np.nan, np.nan], [1.0, np.nan, np.nan]], "development period 3 is observed for no origin"),
        ([[1.0, 2.0, 3.0], [np.nan, np.nan, np.nan], [1.0, np.nan, np.nan]], "origin 1 has no observed development period"),
        ([[1.0, 2.0, np.inf], [1.0, 2.0, np.nan], [1.0, np.nan, np.nan]], "infinite at origin 0, development period 3"),
    ],
)
def test_ragged_input_is_refused_naming_the_origin_and_period(values, message):
    with pytest.raises(ValueError, match=message):
        chain_ladder(pd.DataFrame(values, columns=[1, 2, 3]))


def test_columns_must_be_the_development_periods():
    with pytest.raises(ValueError, match="columns must be the development periods 1..n"):
        chain_ladder(pd.read_csv(RAA_CSV, index_col="origin"))
    with pytest.raises(ValueError, match="repeated origin"):
        chain_ladder(pd.DataFrame([[1.0, 2.0], [1.0, np.nan]], index=[5, 5], columns=[1, 2]))


# -- next periods -----------------------------------------------------------------------------------------


def test_next_periods_past_the_last_column_are_the_reserve_and_its_standard_error():
    result = chain_ladder(raa())
    whole = next_periods_forecast(result, periods=20)
    assert whole.total == pytest.approx(result.total_reserve, rel=1e-12)
    assert whole.total_standard_error == pytest.approx(result.total_standard_error, rel=1e-12)
    np.testing.assert_allclose(whole.by_origin["standard_error"], result.standard_error, rtol=1e-12)
    assert whole.by_period.iloc[9:].sum() == 0.0  # nothing is projected past period 10 (tail factor 1)


def test_next_period_is_the_latest_diagonal_times_the_factor_less_one():
    result = chain_ladder(raa())
    one = next_periods_forecast(result, periods=1)
    latest, k = result.latest.to_numpy(), result.latest_period.to_numpy()
    factor = np.array([result.factors.loc[p] if p < 10 else 1.0 for p in k])
    np.testing.assert_allclose(one.by_origin["forecast"], latest * (factor - 1.0), rtol=1e-12)
    three = next_periods_forecast(result, periods=3)
    assert three.by_period.sum() == pytest.approx(three.total, rel=1e-12)
    np.testing.assert_allclose(three.by_origin_and_period.sum(axis=1), three.by_origin["forecast"], rtol=1e-12)
    # a shorter horizon has less uncertainty than the whole run-off
    assert one.total_standard_error < three.total_standard_error < result.total_standard_error
    with pytest.raises(ValueError, match="periods must be an integer >= 1"):
        next_periods_forecast(result, periods=0)


# -- the returns triangle -------------------------------------------------------------------------------


def test_month_helpers():
    assert development_month(dt.date(2024, 11, 1), dt.date(2024, 11, 20)) == 1
    assert development_month(dt.date(2024, 11, 1), dt.date(2025, 2, 3)) == 4
    assert last_whole_month(dt.date(2025, 1, 31)) == month_number(dt.date(2025, 1, 1))
    assert last_whole_month(dt.date(2025, 1, 30)) == month_number(dt.date(2024, 12, 1))
    assert last_whole_month(dt.date(2024, 2, 29)) == month_number(dt.date(2024, 2, 1))


def test_returns_triangle_keeps_whole_months_only():
    # hand-made: build months 2025-01 and 2025-02, as-of 2025-03-15: March is partly elapsed and left out
    jan, feb, mar = dt.date(2025, 1, 1), dt.date(2025, 2, 1), dt.date(2025, 3, 1)
    counts = pd.DataFrame({
        "build_month": [jan, jan, jan, jan, feb, feb],
        "development_month": [1, 2, 2, 3, 1, 2],  # jan: Jan, Feb, Feb, Mar; feb: Feb, Mar
        "returns": [2, 1, 4, 7, 3, 9],
    })
    triangle = returns_triangle(counts, dt.date(2025, 3, 15), origins=[jan, feb, mar])
    assert list(triangle.index) == [jan, feb]  # March has no whole month yet
    assert list(triangle.columns) == [1, 2]
    np.testing.assert_array_equal(triangle.to_numpy(), [[2.0, 7.0], [3.0, np.nan]])
    at_month_end = returns_triangle(counts, dt.date(2025, 3, 31), origins=[jan, feb, mar])
    np.testing.assert_array_equal(
        at_month_end.to_numpy(), [[2.0, 7.0, 14.0], [3.0, 12.0, np.nan], [0.0, np.nan, np.nan]]
    )
    assert chain_ladder(at_month_end).factors.loc[1] == pytest.approx(19 / 5)
    with pytest.raises(ValueError, match="after the as-of month"):
        returns_triangle(counts, dt.date(2025, 2, 28))
    with pytest.raises(ValueError, match="whole months >= 1"):
        returns_triangle(counts.assign(development_month=0), dt.date(2025, 3, 31))
    with pytest.raises(ValueError, match="no column 'returns'"):
        returns_triangle(counts.drop(columns="returns"), dt.date(2025, 3, 31))
