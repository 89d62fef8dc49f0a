"""Tests of observed-vs-expected goodness of fit by month in service (warranty_forecast.stages.goodness_of_fit).

Every external check names its source beside it. All simulations are seeded. Every test in this
module turns warnings into errors, so any RuntimeWarning (overflow, log(0), ...) fails it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, stats

from warranty_forecast.stages.goodness_of_fit import (
    CELL_COLUMNS,
    GoodnessOfFit,
    goodness_of_fit,
    pool_cells,
    saturated_log_likelihood,
)
from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.families import LOGNORMAL, WEIBULL
from warranty_forecast.lifecore.fitter import Fitter
from closed_forms import weibull_log_survival  # tests/closed_forms.py
from simulated_data import lognormal_life, simulate_warranty, weibull_life  # tests/ is on sys.path

pytestmark = pytest.mark.filterwarnings("error")



# ---------------------------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------------------------


def small_example() -> LifeData:
    """Month 1: 2 returns, month 2: 1 return; suspensions: 3 at age 1, 2 at age 1.5, 4 at age 2."""
    return LifeData.from_monthly_returns([1, 2], [2.0, 1.0], [1.0, 1.5, 2.0], [3.0, 2.0, 4.0], day_grid=False)


def exponential_log_survival(t: np.ndarray) -> np.ndarray:
    """R(t) = exp(-0.1 t): constant hazard 0.1 per month."""
    return -0.1 * np.asarray(t, dtype=float)


# ---------------------------------------------------------------------------------------------
# risk sets and expected counts
# ---------------------------------------------------------------------------------------------


def test_hand_computed_small_example():
    # common practice, no source: hand arithmetic.
    # Month 1: whole-month exposure = 3 returns (months 1, 2) + 9 suspensions (ages 1, 1.5, 2) = 12.
    # Month 2: whole = 1 return (month 2) + 4 suspensions at age 2 = 5; the 2 suspensions at 1.5 are
    # exposed for half the month. With R(t) = exp(-0.1 t):
    #   e_1 = 12 (1 - e^-0.1),   e_2 = 5 (1 - e^-0.1) + 2 (1 - e^-0.05).
    result = goodness_of_fit(small_example(), exponential_log_survival, n_parameters=0, min_expected=0.1)
    cells = result.cells
    assert list(cells.columns) == list(CELL_COLUMNS)
    assert cells["months_in_service"].tolist() == [1, 2]
    assert cells["units_exposed"].tolist() == [12.0, 5.0]
    assert cells["observed"].tolist() == [2.0, 1.0]
    e1 = 12 * (1 - math.exp(-0.1))  # 1.14195...
    e2 = 5 * (1 - math.exp(-0.1)) + 2 * (1 - math.exp(-0.05))  # 0.57335...
    np.testing.assert_allclose(cells["expected"], [e1, e2], rtol=1e-13)
    np.testing.assert_allclose(
        cells["standardized_residual"], [(2 - e1) / math.sqrt(e1), (1 - e2) / math.sqrt(e2)], rtol=1e-12
    )
    assert result.largest_residual_month == 1
    # two cells (min_expected 0.1), no parameters fitted: X^2 on 2 df
    assert result.chi_square == pytest.approx((2 - e1) ** 2 / e1 + (1 - e2) ** 2 / e2, rel=1e-13)
    assert result.chi_square_df == 2
    assert result.chi_square_p_value == pytest.approx(math.exp(-result.chi_square / 2), rel=1e-12)  # chi2(2) sf


def test_expected_equals_observed_for_exact_weibull_counts():
    # common practice, no source: cohorts of 100 units observed for 1..24 whole months, returns
    # d_k = sum over cohorts still observed of 100 (R(k-1) - R(k)) and survivors 100 R(A) exactly
    # (fractional counts, no noise), so e_k = d_k and both statistics vanish.
    shape, scale = 1.5, 40.0
    windows = np.arange(1, 25)
    r = np.exp(weibull_log_survival(np.arange(25.0), shape, scale))
    returns = np.array([100.0 * np.sum(windows >= k) * (r[k - 1] - r[k]) for k in range(1, 25)])
    data = LifeData.from_monthly_returns(np.arange(1, 25), returns, windows.astype(float), 100.0 * r[windows], day_grid=False)
    result = goodness_of_fit(data, lambda t: weibull_log_survival(t, shape, scale))
    np.testing.assert_allclose(result.cells["expected"], result.cells["observed"], rtol=1e-12)
    entering = [100.0 * np.sum(windows >= k) * r[k - 1] for k in windows]  # 100 R(k-1) per cohort still observed
    np.testing.assert_allclose(result.cells["units_exposed"], entering)
    assert result.chi_square == pytest.approx(0.0, abs=1e-18)
    assert result.deviance == pytest.approx(0.0, abs=1e-8)
    assert result.chi_square_p_value == pytest.approx(1.0)


def test_lognormal_fit_callable_is_accepted():
    # common practice, no source: the lognormal log R(0) = 0 is handled, totals add up
    data = LifeData.from_monthly_returns(
        *simulate_warranty(np.random.default_rng(3), 5_000, lognormal_life(math.log(60.0), 1.2), ages_in_days=True), day_grid=False
    )
    fit = Fitter(LOGNORMAL).fit(data)
    result = goodness_of_fit(data, fit.log_survival)
    assert result.cells["observed"].sum() == pytest.approx(data.n_returns)
    assert result.pooled_cells["observed"].sum() == pytest.approx(data.n_returns)
    assert result.pooled_cells["expected"].sum() == pytest.approx(result.cells["expected"].sum())
    assert np.isfinite(result.chi_square_p_value) and np.isfinite(result.deviance_p_value)


# ---------------------------------------------------------------------------------------------
# Pearson chi-square
# ---------------------------------------------------------------------------------------------


def test_pooling_rule():
    # common practice, no source: pool in order until expected >= 5, short last cell joins its neighbour
    expected = [1.0, 2.0, 3.0, 6.0, 0.5, 4.0, 1.0, 2.0]
    # cumulative 1, 3, 6 -> cell 0; 6 -> cell 1; 0.5, 4.5, 5.5 -> cell 2; 2 left over -> into cell 2
    assert pool_cells(expected, 5.0).tolist() == [0, 0, 0, 1, 2, 2, 2, 2]
    assert pool_cells([5.0, 5.0, 5.0], 5.0).tolist() == [0, 1, 2]
    assert pool_cells([1.0, 1.0, 1.0], 5.0).tolist() == [0, 0, 0]  # total below 5: one cell
    assert pool_cells([0.0, 0.0, 7.0, 0.0], 5.0).tolist() == [0, 0, 0, 0]


def test_pooled_cells_meet_minimum():
    # common practice, no source: every pooled cell has expected >= min_expected
    data = LifeData.from_monthly_returns(*simulate_warranty(np.random.default_rng(8), 1_500, weibull_life(1.3, 60.0), ages_in_days=True), day_grid=False)
    fit = Fitter(WEIBULL).fit(data)
    for minimum in (1.0, 5.0, 20.0):
        result = goodness_of_fit(data, fit.log_survival, min_expected=minimum)
        pooled = result.pooled_cells
        assert np.all(pooled["expected"] >= minimum)
        assert pooled["first_month"].iloc[0] == 1 and pooled["last_month"].iloc[-1] == len(result.cells)
        assert np.all(pooled["first_month"].iloc[1:].to_numpy() == pooled["last_month"].iloc[:-1].to_numpy() + 1)
        assert result.chi_square_df == len(pooled) - 2
        d, e = pooled["observed"].to_numpy(), pooled["expected"].to_numpy()
        assert result.chi_square == pytest.approx(np.sum((d - e) ** 2 / e), rel=1e-12)
        assert result.chi_square_p_value == pytest.approx(stats.chi2.sf(result.chi_square, len(pooled) - 2))


def test_too_few_cells_give_nan_with_reason():
    # common practice, no source: df = cells - parameters < 1 leaves no test
    data = LifeData.from_monthly_returns([1], [3.0], [1.0], [50.0], day_grid=False)
    result = goodness_of_fit(data, exponential_log_survival, n_parameters=2)
    assert result.chi_square_df == -1 and math.isnan(result.chi_square_p_value)
    assert result.deviance_df == -1 and math.isnan(result.deviance_p_value)
    assert any("Pearson test not available" in note for note in result.notes)
    assert any("deviance test not available" in note for note in result.notes)
    assert "p not available" in result.summary_line()


def test_pearson_p_values_calibrated_under_the_weibull():
    # common practice, no source: Monte Carlo under a true Weibull (shape 1.3, scale 60 months,
    # 2,000 units, ages in days, 24-month warranty), each data set refitted with WeibullFitter.
    # Measured over these 200 seeds: Pearson rejects 4.0% at the 5% level (deviance 5.5%).
    p_chi, p_dev = [], []
    for seed in range(200):
        data = LifeData.from_monthly_returns(
            *simulate_warranty(np.random.default_rng(1000 + seed), 2_000, weibull_life(1.3, 60.0), ages_in_days=True), day_grid=False
        )
        fit = Fitter(WEIBULL).fit(data)
        result = goodness_of_fit(data, fit.log_survival)
        p_chi.append(result.chi_square_p_value)
        p_dev.append(result.deviance_p_value)
    p_chi, p_dev = np.array(p_chi), np.array(p_dev)
    assert 0.01 <= np.mean(p_chi < 0.05) <= 0.10
    assert 0.01 <= np.mean(p_dev < 0.05) <= 0.10
    # roughly uniform: each fifth of (0, 1) holds 10% to 30% of the p-values
    fifths = np.histogram(p_chi, bins=5, range=(0.0, 1.0))[0] / len(p_chi)
    assert np.all((fifths >= 0.10) & (fifths <= 0.30))


def test_wrong_family_is_rejected():
    # common practice, no source: lognormal truth (median 60 months, sigma 1.2, 50,000 units)
    # fitted with a Weibull is rejected; the lognormal fit of the same data is not
    data = LifeData.from_monthly_returns(
        *simulate_warranty(np.random.default_rng(5), 50_000, lognormal_life(math.log(60.0), 1.2), ages_in_days=True), day_grid=False
    )
    weibull = goodness_of_fit(data, Fitter(WEIBULL).fit(data).log_survival)
    assert weibull.chi_square_p_value < 1e-10  # measured 2e-36
    assert weibull.deviance_p_value < 1e-10
    lognormal = goodness_of_fit(data, Fitter(LOGNORMAL).fit(data).log_survival)
    assert lognormal.chi_square_p_value > 0.01  # measured 0.85


# ---------------------------------------------------------------------------------------------
# saturated deviance
# ---------------------------------------------------------------------------------------------


def test_saturated_log_likelihood_hand_example():
    # common practice, no source: hand arithmetic with l_k* = d log d + E log E - (d+E) log(d+E).
    # Month 1: d = 2, E = 12 - 2 = 10 (the 3 suspensions at age 1 survive the whole month).
    # Month 2: d = 1, E = (5 - 1) + 2 x 0.5 = 5.
    month_1 = 2 * math.log(2) + 10 * math.log(10) - 12 * math.log(12)
    month_2 = 0.0 + 5 * math.log(5) - 6 * math.log(6)
    assert saturated_log_likelihood(small_example()) == pytest.approx(month_1 + month_2, rel=1e-14)


@pytest.mark.parametrize(("d", "exposure"), [(2.0, 10.0), (1.0, 5.0), (0.0, 7.0), (3.5, 0.25)])
def test_saturated_closed_form_is_the_maximum(d, exposure):
    # common practice, no source: numerical maximum over lambda of d log(1 - e^-lambda) - lambda E
    # (scipy.optimize.minimize_scalar) equals the closed form, for one month with whole-month survivors
    def negative(log_lambda: float) -> float:
        lam = math.exp(log_lambda)
        return -(d * math.log(-math.expm1(-lam)) - lam * exposure) if d > 0 else lam * exposure

    best = optimize.minimize_scalar(negative, bounds=(-30.0, 10.0), method="bounded", options={"xatol": 1e-12})
    data = LifeData.from_monthly_returns([1], [d], [1.0], [exposure], day_grid=False)
    assert saturated_log_likelihood(data) == pytest.approx(-best.fun, rel=1e-9, abs=1e-12)


def test_deviance_uses_the_same_likelihood_as_the_fit():
    # reference: warranty_forecast.lifecore.life_model's Weibull log-likelihood (itself checked against scipy.stats):
    # with suspensions at whole months, G^2 = 2 (log L_saturated - FitResult.log_likelihood) >= 0
    rng = np.random.default_rng(21)
    months = rng.integers(1, 37, size=3_000)
    life = 60.0 * rng.weibull(1.3, size=3_000)
    window = np.minimum(months, 24)
    failed = life <= window
    m, r = np.unique(np.ceil(life[failed]).astype(int), return_counts=True)
    a, c = np.unique(window[~failed], return_counts=True)
    data = LifeData.from_monthly_returns(m, r.astype(float), a.astype(float), c.astype(float), day_grid=False)
    fit = Fitter(WEIBULL).fit(data)
    result = goodness_of_fit(data, fit.log_survival)
    expected = 2.0 * (saturated_log_likelihood(data) - fit.log_likelihood)
    assert expected > 0.0
    assert result.deviance == pytest.approx(expected, rel=1e-10)
    assert result.deviance_df == 24 - 2
    assert not any("clamped" in note for note in result.notes)


def test_deviance_never_negative():
    # common practice, no source: G^2 >= 0 (clamped where suspensions inside months could push it below)
    for seed in range(20):
        data = LifeData.from_monthly_returns(
            *simulate_warranty(np.random.default_rng(seed), 300, weibull_life(2.5, 30.0), ages_in_days=True), day_grid=False
        )
        fit = Fitter(WEIBULL).fit(data)
        assert goodness_of_fit(data, fit.log_survival).deviance >= 0.0


def test_negative_deviance_is_clamped_with_a_note():
    # common practice, no source: a model whose hazard is ~0 in the first half of month 1 (Weibull
    # shape 20, scale 1) scores 10 mid-month withdrawals at age 0.5 with log R(0.5) ~ -1e-5, beating
    # the saturated constant-hazard month: raw G^2 = 2 (5 log 5 - 6 log 6 - log(1 - e^-1) + ...) < 0
    data = LifeData.from_monthly_returns([1], [1.0], [0.5], [10.0], day_grid=False)
    result = goodness_of_fit(data, lambda t: weibull_log_survival(t, 20.0, 1.0), n_parameters=0)
    raw = 2 * (5 * math.log(5) - 6 * math.log(6) - math.log(-math.expm1(-1.0)) + 10 * 0.5**20)
    assert raw < 0.0
    assert result.deviance == 0.0
    assert any(note.startswith(f"deviance {raw:.2e} clamped at 0") for note in result.notes)


# ---------------------------------------------------------------------------------------------
# inputs and report line
# ---------------------------------------------------------------------------------------------


def test_rejects_unsupported_inputs():
    # common practice, no source
    with pytest.raises(ValueError, match="exact failure ages are not supported"):
        goodness_of_fit(LifeData.from_exact([1.5], [1.0], [3.0], [10.0]), exponential_log_survival)
    for lower, upper in ((0.5, 1.5), (0.0, 2.0)):
        data = LifeData(interval_lower=[lower], interval_upper=[upper], interval_counts=[1.0])
        with pytest.raises(ValueError, match="monthly intervals"):
            goodness_of_fit(data, exponential_log_survival)
    with pytest.raises(ValueError, match="non-increasing"):
        goodness_of_fit(small_example(), lambda t: np.where(t == 0.0, 0.0, -0.5 + 0.01 * t))  # R rises after 1
    with pytest.raises(ValueError, match="<= 0"):
        goodness_of_fit(small_example(), lambda t: 0.1 * np.asarray(t))
    with pytest.raises(ValueError, match="no exposure"):
        goodness_of_fit(LifeData.from_monthly_returns([], [], [0.0], [5.0], day_grid=False), exponential_log_survival)


def test_zero_count_rows_and_inputs_untouched():
    # common practice, no source: zero-count rows change nothing; the data are not modified
    base = small_example()
    padded = LifeData.from_monthly_returns([1, 2, 2], [2.0, 1.0, 0.0], [1.0, 1.5, 2.0, 7.0], [3.0, 2.0, 4.0, 0.0], day_grid=False)
    a = goodness_of_fit(base, exponential_log_survival, n_parameters=0, min_expected=0.1)
    b = goodness_of_fit(padded, exponential_log_survival, n_parameters=0, min_expected=0.1)
    assert a.chi_square == b.chi_square and a.deviance == b.deviance
    np.testing.assert_array_equal(base.suspension_counts, [3.0, 2.0, 4.0])


def test_summary_line():
    # common practice, no source
    result = goodness_of_fit(small_example(), exponential_log_survival, n_parameters=0, min_expected=0.1)
    assert isinstance(result, GoodnessOfFit)
    line = result.summary_line()
    assert line.count(".") >= 1 and line.endswith(".") and "\n" not in line
    assert f"X^2 = {result.chi_square:.2f} on 2 df" in line
    assert "month 1" in line
