"""Prediction intervals of future returns and the reserve (stages/prediction.py)."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import reference_values as ref  # tests/ is on sys.path under pytest
from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.families import LOGNORMAL, WEIBULL
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.stages.forecast import CompetingRisks, expected_future_returns, forecast_by_month
from warranty_forecast.stages.prediction import (
    BY_BUILD_MONTH_COLUMNS,
    BY_PRODUCT_COLUMNS,
    COST_BY_MONTH_COLUMNS,
    NEXT_12_MONTHS,
    TO_WARRANTY_END,
    ClaimCosts,
    CompetingRisksSampler,
    NormalApproximation,
    ParameterDraws,
    ParametricBootstrap,
    claim_costs_by_product,
    month_in_service,
    poisson_mixture_quantiles,
    predict_failures_within,
    predict_returns,
    sampler_for,
)

AS_OF = dt.date(2024, 6, 30)
LEVELS = (0.05, 0.5, 0.95)
THETA = WEIBULL.theta(shape=1.5, scale=60.0)  # months
COVARIANCE = np.array([[0.02, -0.004], [-0.004, 0.003]])


def rows(**columns) -> pd.DataFrame:
    """fit_suspensions rows: two build months, staggered warranty starts (invented data)."""
    base = {
        "product": ["P"] * 4,
        "build_month": [dt.date(2024, 1, 1)] * 2 + [dt.date(2024, 3, 1)] * 2,
        "sale_month": [dt.date(2024, 1, 1), dt.date(2024, 2, 1), dt.date(2024, 3, 1), dt.date(2024, 4, 1)],
        "warranty_months": [12] * 4,
        "warranty_start_date": [dt.date(2024, 1, 10), dt.date(2024, 2, 20), dt.date(2024, 3, 5), dt.date(2024, 4, 28)],
        "observed_age_months": [5.7, 4.4, 3.9, 2.1],
        "is_in_channel": [False] * 4,
        "units": [2000, 1500, 3000, 2500],
        "suspensions": [1960.0, 1481.5, 2950.0, 2490.0],
    }
    base.update(columns)
    return pd.DataFrame(base)


def plug_in(theta=THETA) -> NormalApproximation:
    return NormalApproximation(WEIBULL, theta, np.zeros((2, 2)))


def normal(scale: float = 1.0) -> NormalApproximation:
    return NormalApproximation(WEIBULL, THETA, COVARIANCE, scale)


# ------------------------------------------------------------------------------------------------
# the Poisson mixture's quantiles
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("mean", [0.0, 1e-9, 0.3, 5.058, 47.5, 12345.6])
def test_one_component_is_the_poisson_quantile(mean):
    # scipy.stats.poisson.ppf: the smallest y with P(N <= y) >= q
    levels = (0.001, 0.05, 0.5, 0.95, 0.999)
    got = poisson_mixture_quantiles(np.array([mean]), levels)
    assert got.tolist() == stats.poisson.ppf(levels, mean).astype(int).tolist()


def test_mixture_quantiles_match_a_brute_force_mixture_cdf_and_rise_with_the_level():
    # brute force with scipy.stats.poisson.cdf summed over every component, on a grid of counts
    rng = np.random.default_rng(11)
    means = np.column_stack([rng.lognormal(2.0, 0.8, 400), rng.gamma(50.0, 4.0, 400), np.full(400, 0.2)])
    levels = np.linspace(0.01, 0.99, 25)
    got = poisson_mixture_quantiles(means, levels)
    counts = np.arange(0, 800)
    for g in range(means.shape[1]):
        cdf = stats.poisson.cdf(counts[:, None], means[None, :, g]).mean(axis=1)
        expected = [int(counts[np.argmax(cdf >= q)]) for q in levels]
        assert got[:, g].tolist() == expected
        assert np.all(np.diff(got[:, g]) >= 0)  # monotone in the level


def test_mixture_quantiles_reject_bad_input():
    with pytest.raises(ValueError, match="levels"):
        poisson_mixture_quantiles(np.ones(3), (0.0, 0.5))
    with pytest.raises(ValueError, match="means"):
        poisson_mixture_quantiles(np.array([1.0, -1.0]), (0.5,))
    with pytest.raises(ValueError, match="means"):
        poisson_mixture_quantiles(np.array([np.nan]), (0.5,))


# ------------------------------------------------------------------------------------------------
# parameter draws
# ------------------------------------------------------------------------------------------------


def test_drawn_log_survival_is_the_familys_at_each_draw():
    # reference: scipy.stats.weibull_min.logsf and scipy.stats.lognorm.logsf at each drawn theta
    thetas = np.array([[4.0, 0.3], [4.5, -0.2], [3.2, 0.9]])
    t = np.array([0.0, 0.5, 3.0, 3.0, 24.0, 200.0])
    weibull = ParameterDraws(WEIBULL, thetas).log_survival(t)
    lognormal = ParameterDraws(LOGNORMAL, thetas).log_survival(t)
    for b, (theta0, theta1) in enumerate(thetas):
        assert weibull[b] == pytest.approx(stats.weibull_min.logsf(t, np.exp(theta1), scale=np.exp(theta0)), rel=1e-12, abs=1e-300)
        assert lognormal[b] == pytest.approx(stats.lognorm.logsf(t, np.exp(theta1), scale=np.exp(theta0)), rel=1e-10, abs=1e-300)


def test_normal_draws_have_the_fits_mean_and_covariance_and_keep_a_fixed_parameter_fixed():
    draws = normal().sample_log_survival(np.random.default_rng(3), 40_000).thetas
    assert draws.mean(axis=0) == pytest.approx(THETA, abs=4 * np.sqrt(np.diag(COVARIANCE) / 40_000).max())
    assert np.cov(draws.T) == pytest.approx(COVARIANCE, rel=0.05, abs=2e-4)
    fixed = NormalApproximation(WEIBULL, THETA, np.array([[0.02, 0.0], [0.0, 0.0]]))
    assert np.all(fixed.sample_log_survival(np.random.default_rng(3), 100).thetas[:, 1] == THETA[1])


def test_normal_approximation_rejects_a_fit_without_covariance():
    with pytest.raises(ValueError, match="covariance"):
        NormalApproximation(WEIBULL, THETA, np.full((2, 2), np.nan))
    with pytest.raises(ValueError, match="semi-definite"):
        NormalApproximation(WEIBULL, THETA, np.array([[1.0, 2.0], [2.0, 1.0]]))


def test_sampler_for_each_kind_of_model():
    fit = Fitter(WEIBULL, min_returns=1).fit(ref.reference_life_data("bearing_cage.csv"))
    assert isinstance(sampler_for(fit), NormalApproximation)
    assert isinstance(sampler_for(CompetingRisks((fit, fit))), CompetingRisksSampler)

    class Plain:
        def log_survival(self, t):
            return -np.asarray(t, dtype=float) / 100.0

    assert sampler_for(Plain()) is None
    assert sampler_for(CompetingRisks((fit, Plain()))) is None
    # competing risks drawn: the sum of the two modes' drawn log survivals (independent draws)
    risks = CompetingRisksSampler(CompetingRisks((plug_in(), plug_in())), (plug_in(), plug_in()))
    drawn = risks.sample_log_survival(np.random.default_rng(0), 3).log_survival(np.array([10.0]))
    assert drawn[:, 0] == pytest.approx(2 * plug_in().log_survival(np.array([10.0]))[0])


# ------------------------------------------------------------------------------------------------
# predictions of returns
# ------------------------------------------------------------------------------------------------


def test_zero_covariance_gives_the_poisson_plug_in_interval_everywhere():
    # with the parameters known the count is Poisson(plug-in expectation): scipy.stats.poisson.ppf
    data = rows()
    model = plug_in()
    result = predict_returns(data, {"P": model}, AS_OF, draws=20, levels=LEVELS, seed=4)
    detail = expected_future_returns(data, {"P": model})
    by_build = detail.groupby("build_month")["expected_returns"].sum()
    table = result.by_build_month.set_index("build_month")
    for month, value in by_build.items():
        assert table.loc[month, "expected_returns"] == pytest.approx(value, rel=1e-12)
        assert table.loc[month, ["returns_lower", "returns_median", "returns_upper"]].tolist() == (
            stats.poisson.ppf(LEVELS, value).astype(int).tolist()
        )
    by_month = forecast_by_month(detail).groupby("month")["expected_returns"].sum()
    months = result.by_month.set_index("month")
    assert list(months.index) == list(by_month.index)
    for month, value in by_month.items():
        assert months.loc[month, "expected_returns"] == pytest.approx(value, rel=1e-12)
        assert months.loc[month, "returns_upper"] == stats.poisson.ppf(0.95, value)
    total = result.by_product.set_index("horizon")
    assert total.loc[TO_WARRANTY_END, "expected"] == pytest.approx(detail["expected_returns"].sum(), rel=1e-12)
    assert total.loc[TO_WARRANTY_END, ["lower", "median", "upper"]].tolist() == (
        stats.poisson.ppf(LEVELS, detail["expected_returns"].sum()).tolist()
    )
    assert list(result.by_product.columns) == list(BY_PRODUCT_COLUMNS)
    assert list(result.by_build_month.columns) == list(BY_BUILD_MONTH_COLUMNS)
    assert result.levels == LEVELS and result.draws == 20


def test_next_12_months_are_the_12_calendar_months_after_the_as_of_month():
    # the forecast's own calendar placement (forecast_by_month), summed over July 2024 .. June 2025
    data = rows(warranty_months=[36] * 4)
    model = plug_in()
    result = predict_returns(data, {"P": model}, AS_OF, draws=5)
    by_month = forecast_by_month(expected_future_returns(data, {"P": model}))
    window = by_month[(by_month["month"] >= dt.date(2024, 7, 1)) & (by_month["month"] <= dt.date(2025, 6, 1))]
    assert window["month"].nunique() == 12
    total = result.by_product.set_index("horizon")
    assert total.loc[NEXT_12_MONTHS, "expected"] == pytest.approx(window["expected_returns"].sum(), rel=1e-12)
    assert total.loc[NEXT_12_MONTHS, "expected"] < total.loc[TO_WARRANTY_END, "expected"]
    # an as-of date in the middle of a month: the same 12 months (the rest of June is not in them)
    mid = predict_returns(data, {"P": model}, dt.date(2024, 6, 12), draws=5).by_product.set_index("horizon")
    assert mid.loc[NEXT_12_MONTHS, "expected"] == pytest.approx(total.loc[NEXT_12_MONTHS, "expected"], rel=1e-12)


def test_seeded_reruns_are_identical_and_another_seed_is_not():
    data = rows()
    costs = {"P": ClaimCosts.from_costs([40.0, 55.0, 120.0, 80.0, 61.5])}
    first = predict_returns(data, {"P": normal()}, AS_OF, draws=300, seed=7, claim_costs=costs)
    again = predict_returns(data, {"P": normal()}, AS_OF, draws=300, seed=7, claim_costs=costs)
    other = predict_returns(data, {"P": normal()}, AS_OF, draws=300, seed=8, claim_costs=costs)
    for name in ("by_build_month", "by_month", "by_product", "reserve_by_product"):
        pd.testing.assert_frame_equal(getattr(first, name), getattr(again, name))
    assert not first.reserve_by_product.equals(other.reserve_by_product)
    # a product's intervals do not depend on the other products in the run
    two = pd.concat([data, data.assign(product="Q")], ignore_index=True)
    both = predict_returns(two, {"P": normal(), "Q": normal()}, AS_OF, draws=300, seed=7, claim_costs=costs)
    pd.testing.assert_frame_equal(both.by_product[both.by_product["product"] == "P"], first.by_product)


def test_intervals_widen_with_the_covariance_and_hold_the_plug_in_expectation():
    data = rows()
    widths, expectations = [], []
    for scale in (0.0, 1.0, 4.0, 16.0):
        total = predict_returns(data, {"P": normal(scale)}, AS_OF, draws=400, seed=1).by_product.set_index("horizon")
        widths.append(total.loc[TO_WARRANTY_END, "upper"] - total.loc[TO_WARRANTY_END, "lower"])
        expectations.append(total.loc[TO_WARRANTY_END, "expected"])
        assert total.loc[TO_WARRANTY_END, "lower"] <= total.loc[TO_WARRANTY_END, "median"] <= total.loc[TO_WARRANTY_END, "upper"]
    assert widths == sorted(widths) and widths[-1] > 2 * widths[0]
    assert expectations == pytest.approx([expectations[0]] * 4, rel=1e-12)


def test_edge_cases_no_survivors_past_warranty_zero_expected_and_no_model():
    # no survivors and every row past its warranty: nothing to forecast, zero intervals, build months kept
    none_left = rows(suspensions=[0.0] * 4)
    past = rows(observed_age_months=[12.5] * 4)
    for data in (none_left, past):
        result = predict_returns(data, {"P": normal()}, AS_OF, draws=10)
        assert len(result.by_build_month) == 2 and result.by_month.empty
        assert (result.by_build_month[["expected_returns", "returns_lower", "returns_upper"]] == 0).all().all()
        assert (result.by_product[["expected", "lower", "median", "upper"]] == 0).all().all()

    class NeverFails:  # log R = 0: no parameter draws offered, zero expected returns
        def log_survival(self, t):
            return np.zeros_like(np.asarray(t, dtype=float))

    result = predict_returns(rows(), {"P": NeverFails()}, AS_OF, draws=10)
    assert (result.by_product[["expected", "lower", "upper"]] == 0).all().all()
    assert result.methods["P"] == "parameters fixed (plug-in)"
    assert any("offers no parameter draws" in note for note in result.notes)
    # a product without a model is left out; no product at all gives empty tables with the columns
    assert predict_returns(rows(product=["Q"] * 4), {"P": normal()}, AS_OF, draws=10).by_product.empty
    empty = predict_returns(rows().iloc[:0], {"P": normal()}, AS_OF, draws=10)
    assert list(empty.by_build_month.columns) == list(BY_BUILD_MONTH_COLUMNS) and empty.by_build_month.empty


def test_a_flagged_month_with_a_fixed_own_life_gets_the_poisson_interval_of_its_own_expectation():
    data = rows()
    march = dt.date(2024, 3, 1)
    own = plug_in(WEIBULL.theta(shape=1.5, scale=20.0))

    class OwnLife:  # a flagged month's life without a way to draw its parameters
        def log_survival(self, t):
            return own.log_survival(t)

    result = predict_returns(data, {"P": normal(4.0)}, AS_OF, {("P", march): OwnLife()}, draws=300, seed=2)
    alone = expected_future_returns(data[data["build_month"] == march], {"P": own})["expected_returns"].sum()
    row = result.by_build_month.set_index("build_month").loc[march]
    assert row["expected_returns"] == pytest.approx(alone, rel=1e-12)
    assert [row["returns_lower"], row["returns_median"], row["returns_upper"]] == stats.poisson.ppf(LEVELS, alone).tolist()
    assert any("2024-03" in note and "treated as fixed" in note for note in result.notes)
    # with a sampler of its own the month's interval is wider than Poisson
    sampled = predict_returns(data, {"P": normal()}, AS_OF, {("P", march): NormalApproximation(WEIBULL, own.theta, 4 * COVARIANCE)},
                              draws=300, seed=2).by_build_month.set_index("build_month").loc[march]
    assert sampled["returns_upper"] - sampled["returns_lower"] > row["returns_upper"] - row["returns_lower"]


def test_additional_expected_claims_are_known_poisson_means_on_top():
    # unreported failures or repeat claims passed as known means: with zero covariance the count is
    # Poisson(first failures + additional) (scipy.stats.poisson.ppf); a month beyond the forecast's own
    # calendar months and a build month without rows get their own aggregates
    data = rows()
    extra = pd.DataFrame({
        "product": ["P", "P", "P"],
        "build_month": [dt.date(2024, 1, 1), dt.date(2024, 3, 1), dt.date(2023, 12, 1)],
        "month": [dt.date(2024, 7, 1), dt.date(2027, 1, 1), dt.date(2024, 8, 1)],
        "expected": [4.0, 2.5, 1.25],
    })
    base = predict_returns(data, {"P": plug_in()}, AS_OF, draws=5)
    more = predict_returns(data, {"P": plug_in()}, AS_OF, additional_expected=extra, draws=5)
    before = base.by_product.set_index("horizon")
    after = more.by_product.set_index("horizon")
    assert after.loc[TO_WARRANTY_END, "expected"] == pytest.approx(before.loc[TO_WARRANTY_END, "expected"] + 7.75)
    assert after.loc[NEXT_12_MONTHS, "expected"] == pytest.approx(before.loc[NEXT_12_MONTHS, "expected"] + 5.25)
    assert after.loc[TO_WARRANTY_END, "upper"] == stats.poisson.ppf(0.95, after.loc[TO_WARRANTY_END, "expected"])
    months = more.by_month.set_index("month")
    assert months.loc[dt.date(2027, 1, 1), "expected_returns"] == 2.5
    assert months.loc[dt.date(2027, 1, 1), "returns_upper"] == stats.poisson.ppf(0.95, 2.5)
    build = more.by_build_month.set_index("build_month")
    assert build.loc[dt.date(2023, 12, 1), "expected_returns"] == 1.25
    with pytest.raises(ValueError, match="additional_expected"):
        predict_returns(data, {"P": plug_in()}, AS_OF, additional_expected=extra.assign(expected=-1.0))


def test_arguments_are_checked():
    with pytest.raises(ValueError, match="draws"):
        predict_returns(rows(), {"P": normal()}, AS_OF, draws=0)
    with pytest.raises(ValueError, match="levels"):
        predict_returns(rows(), {"P": normal()}, AS_OF, levels=(0.5, 0.05, 0.95))
    with pytest.raises(ValueError, match="as_of_date"):
        predict_returns(rows(), {"P": normal()}, "2024-06-30")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="suspensions lacks columns"):
        predict_returns(rows().drop(columns="warranty_start_date"), {"P": normal()}, AS_OF)


# ------------------------------------------------------------------------------------------------
# claim costs and the reserve
# ------------------------------------------------------------------------------------------------


def test_claim_cost_totals_for_each_form():
    rng = np.random.default_rng(5)
    counts = np.array([[0, 3, 10]] * 20_000)
    # fixed: N x cost exactly; empirical with one distinct cost: the same
    assert np.all(ClaimCosts.fixed(50.0).draw_totals(rng, counts) == counts * 50.0)
    assert np.all(ClaimCosts.from_costs([50.0] * 7).draw_totals(rng, counts) == counts * 50.0)
    # gamma per claim (moments, common practice, no source): E = N m; Var = N s^2 + N^2 Var(mean factor) m^2,
    # the mean factor's variance s^2 / (n m^2) (sample mean of n claims); N = 10, m = 80, s = 40, n = 25
    totals = ClaimCosts.from_summary(80.0, 40.0, 25).draw_totals(rng, counts)[:, 2]
    assert totals.mean() == pytest.approx(800.0, rel=0.01)
    assert totals.var() == pytest.approx(10 * 40.0**2 + 100 * 40.0**2 / 25, rel=0.05)
    assert np.all(totals > 0) and np.all(ClaimCosts.from_summary(80.0, 40.0, 25).draw_totals(rng, counts)[:, 0] == 0)
    # empirical bootstrap (moments of resampling, common practice, no source): with costs c (n of them,
    # population variance v), E = N mean(c); Var = N v (n - 1) / n + N^2 v / n: a resample's own variance
    # is v (n - 1) / n on average, and its mean varies by v / n
    costs = np.array([20.0, 35.0, 50.0, 90.0, 205.0])
    totals = ClaimCosts.from_costs(costs).draw_totals(rng, counts)[:, 2]
    v = costs.var()
    assert totals.mean() == pytest.approx(10 * costs.mean(), rel=0.01)
    assert totals.var() == pytest.approx(10 * v * 4 / 5 + 100 * v / 5, rel=0.05)
    with pytest.raises(ValueError, match="costs"):
        ClaimCosts.from_costs([])
    with pytest.raises(ValueError, match="sd"):
        ClaimCosts.from_summary(10.0, -1.0, 5)


def test_claim_costs_from_the_reserve_cost_table():
    table = pd.DataFrame({
        "product": ["A", "B", "C", "D"], "cost_per_claim": [100.0, 60.0, 75.0, np.nan],
        "cost_basis": ["configured", "mean", "mean", "none"], "basis_returns": [0, 40, 12, 0],
        "cost_sd": [np.nan, 30.0, np.nan, np.nan],
    })
    costs = claim_costs_by_product(table)
    assert set(costs) == {"A", "B", "C"}
    assert costs["A"].sd == 0.0 and costs["B"].sd == 30.0 and costs["B"].n == 40
    assert costs["C"].sd == 0.0 and "no cost sd" in costs["C"].basis


def test_reserve_intervals_with_a_fixed_cost_follow_the_counts():
    data = rows()
    result = predict_returns(data, {"P": plug_in()}, AS_OF, draws=4000, seed=3, claim_costs={"P": ClaimCosts.fixed(100.0)})
    reserve = result.reserve_by_product.iloc[0]
    expected = result.by_product.set_index("horizon").loc[TO_WARRANTY_END, "expected"]
    assert reserve["expected_reserve"] == pytest.approx(100.0 * expected, rel=1e-12)
    # counts drawn from Poisson(expected): sample quantiles within 2 counts of scipy.stats.poisson.ppf
    assert np.abs(np.array([reserve["reserve_lower"], reserve["reserve_median"], reserve["reserve_upper"]]) / 100.0
                  - stats.poisson.ppf(LEVELS, expected)).max() <= 2
    by_month = result.by_build_month
    assert (by_month["reserve_lower"] <= by_month["reserve_median"]).all()
    assert (by_month["reserve_median"] <= by_month["reserve_upper"]).all()
    # cost spread and parameter spread both widen the reserve interval
    wide = predict_returns(data, {"P": normal(4.0)}, AS_OF, draws=4000, seed=3,
                           claim_costs={"P": ClaimCosts.from_summary(100.0, 80.0, 30)}).reserve_by_product.iloc[0]
    assert wide["reserve_upper"] - wide["reserve_lower"] > reserve["reserve_upper"] - reserve["reserve_lower"]


def test_cost_by_calendar_month_sums_the_products_draw_by_draw():
    # parameters known (zero covariance) and one fixed cost of 100: a product's month cost is 100 x Poisson(mu_pm)
    # and the run's is 100 x Poisson(mu_Pm + mu_Qm); sample quantiles of 4,000 draws within 2 counts of
    # scipy.stats.poisson.ppf. A sum of the products' quantiles would be wider than the quantile of the sum.
    two = pd.concat([rows(), rows(observed_age_months=[2.2, 1.9, 1.0, 0.4]).assign(product="Q")], ignore_index=True)
    costs = {"P": ClaimCosts.fixed(100.0), "Q": ClaimCosts.fixed(100.0)}
    result = predict_returns(two, {"P": plug_in(), "Q": plug_in()}, AS_OF, draws=4000, seed=5, claim_costs=costs)
    by_month = result.by_month
    assert by_month["expected_cost"].to_numpy() == pytest.approx(100.0 * by_month["expected_returns"].to_numpy(), rel=1e-12)
    for row in by_month.itertuples(index=False):
        drawn = np.array([row.cost_lower, row.cost_median, row.cost_upper]) / 100.0
        assert np.abs(drawn - stats.poisson.ppf(LEVELS, row.expected_returns)).max() <= 2
    assert (by_month["cost_lower"] <= by_month["cost_median"]).all() and (by_month["cost_median"] <= by_month["cost_upper"]).all()
    mu = by_month.groupby("month")["expected_returns"].sum()
    table = result.cost_by_month.set_index("month")
    assert list(table.index) == list(mu.index)
    assert table["products"].tolist() == by_month.groupby("month")["product"].nunique().tolist()
    assert table["expected_cost"].to_numpy() == pytest.approx(100.0 * mu.to_numpy(), rel=1e-12)
    for month, mean in mu.items():
        drawn = table.loc[month, ["cost_lower", "cost_median", "cost_upper"]].to_numpy(dtype=float) / 100.0
        assert np.abs(drawn - stats.poisson.ppf(LEVELS, mean)).max() <= 2
    both = by_month.groupby("month").filter(lambda g: len(g) == 2 and g["expected_returns"].min() > 20)
    assert both["month"].nunique() >= 3
    for month, group in both.groupby("month"):
        summed_quantiles = group["cost_upper"].sum() - group["cost_lower"].sum()
        assert table.loc[month, "cost_upper"] - table.loc[month, "cost_lower"] < summed_quantiles
    # a product without costs adds nothing to the run's month costs and has no cost columns
    alone = predict_returns(two, {"P": plug_in(), "Q": plug_in()}, AS_OF, draws=400, seed=5, claim_costs={"P": costs["P"]})
    assert alone.by_month.loc[alone.by_month["product"] == "Q", "cost_upper"].isna().all()
    p_months = alone.by_month[alone.by_month["product"] == "P"]
    assert alone.cost_by_month["expected_cost"].to_numpy() == pytest.approx(p_months["expected_cost"].to_numpy(), rel=1e-12)
    assert set(alone.cost_by_month["products"]) == {1}
    # no costs at all: an empty table with its columns
    none = predict_returns(two, {"P": plug_in(), "Q": plug_in()}, AS_OF, draws=20, seed=5)
    assert none.cost_by_month.empty and list(none.cost_by_month.columns) == list(COST_BY_MONTH_COLUMNS)


def test_current_and_non_current_parts_are_the_month_draws_summed():
    # parameters known and a fixed cost of 100: the current part (as-of month 2024-06 and the 12 after it, to
    # 2025-06) is 100 x Poisson(its months' expected returns), the later part likewise: the quantiles of 4,000
    # draws within 4 standard errors (+1 for the counts' steps) of scipy.stats.poisson.ppf, the standard error
    # of a sample quantile being sqrt(q (1 - q) / n) / density at it (large-sample result, from memory; the
    # Poisson's density taken as its normal approximation's). 20,000 draws meet the ppf to 1 count.
    data = rows(warranty_months=[36] * 4)
    result = predict_returns(data, {"P": plug_in()}, AS_OF, draws=4000, seed=9, claim_costs={"P": ClaimCosts.fixed(100.0)})
    months = result.by_month.assign(due=pd.to_datetime(result.by_month["month"]) <= pd.Timestamp(2025, 6, 1))
    current = months.loc[months["due"], "expected_returns"].sum()
    later = months.loc[~months["due"], "expected_returns"].sum()
    assert current > 10 and later > 10
    row = result.reserve_by_product.iloc[0]
    levels = np.array(LEVELS)
    for part, mean in (("reserve_current", current), ("reserve_non_current", later)):
        drawn = np.array([row[f"{part}_lower"], row[f"{part}_median"], row[f"{part}_upper"]]) / 100.0
        error = np.sqrt(levels * (1 - levels) / 4000) * np.sqrt(mean) / stats.norm.pdf(stats.norm.ppf(levels))
        assert (np.abs(drawn - stats.poisson.ppf(LEVELS, mean)) <= 4 * error + 1).all()
    # a warranty that ends within the current months: nothing later, the later part 0
    short = predict_returns(rows(), {"P": plug_in()}, AS_OF, draws=200, seed=9, claim_costs={"P": ClaimCosts.fixed(100.0)})
    assert short.reserve_by_product[["reserve_non_current_lower", "reserve_non_current_upper"]].iloc[0].tolist() == [0.0, 0.0]


# ------------------------------------------------------------------------------------------------
# parametric bootstrap
# ------------------------------------------------------------------------------------------------


def test_month_in_service_follows_the_interval_ends_of_the_life_data():
    # the interval of month k in LifeData.from_monthly_returns holds exactly the ages month_in_service maps to k
    months = np.arange(1, 30)
    data = LifeData.from_monthly_returns(months, np.ones(months.size), [1.0], [1.0])
    inside = 0.5 * (data.interval_lower + data.interval_upper)
    assert month_in_service(inside).tolist() == months.tolist()
    assert month_in_service(data.interval_upper).tolist() == months.tolist()  # an upper end is in its month


def test_parametric_bootstrap_refits_around_the_estimate():
    rng = np.random.default_rng(9)
    ages = np.repeat(np.arange(1.0, 25.0), 1) * 30.0 / (365.25 / 12)
    units = np.full(ages.size, 400.0)
    truth = plug_in(WEIBULL.theta(shape=1.3, scale=40.0))
    simulated = ParametricBootstrap(_FitLike(truth), ages, units).simulate(rng)
    fit = Fitter(WEIBULL, min_returns=1).fit(simulated)
    bootstrap = ParametricBootstrap(fit, ages, units)
    # simulated returns agree with the model: F(a) summed over units (common practice, no source)
    data = bootstrap.simulate(rng)
    expected = float(np.sum(units * -np.expm1(fit.log_survival(ages))))
    assert data.n_returns == pytest.approx(expected, abs=5 * np.sqrt(expected))
    assert data.n_returns + data.n_suspensions == units.sum()
    draws = bootstrap.sample_log_survival(np.random.default_rng(1), 40)
    sd = np.sqrt(np.diag(fit.covariance))
    assert np.abs(draws.thetas.mean(axis=0) - fit.theta).max() < 3 * sd.max() / np.sqrt(40) + 0.5 * sd.max()
    assert draws.thetas.std(axis=0) == pytest.approx(sd, rel=0.5)  # 40 refits: a rough agreement
    with pytest.raises(ValueError, match="units"):
        ParametricBootstrap.from_suspensions(fit, pd.DataFrame({"observed_age_months": [3.0], "units": [10]}))


class _FitLike:
    """What ParametricBootstrap.simulate reads of a fit: log_survival and b_life (the true model)."""

    def __init__(self, model: NormalApproximation) -> None:
        self.model = model

    def log_survival(self, t):
        return self.model.log_survival(t)

    def b_life(self, p):
        return self.model.family.quantile(p, self.model.theta)


# ------------------------------------------------------------------------------------------------
# published reference: bearing cage (within-sample prediction)
# ------------------------------------------------------------------------------------------------


def test_bearing_cage_new_failures_in_300_hours_and_their_prediction_interval():
    # Meeker & Escobar (1998), Table 12.1: expected failures among the 1,697 surviving bearing cages if each
    # runs 300 more hours, 5.058 (computed per the reference README; the book prints 5.057, from memory).
    data = ref.reference_life_data("bearing_cage.csv")
    fit = Fitter(WEIBULL, min_returns=1).fit(data)
    prediction = predict_failures_within(
        NormalApproximation.of(fit), fit, data.suspension_ages, data.suspension_counts, 300.0, draws=500, seed=0
    )
    assert prediction.expected == pytest.approx(ref.BEARING_NEW_FAILURES_300H, abs=5e-4)
    # the plug-in interval is scipy.stats.poisson.ppf of that expectation: (2, 5, 9) at 0.05 / 0.5 / 0.95
    assert prediction.plug_in_quantiles == tuple(stats.poisson.ppf(LEVELS, prediction.expected).astype(int))
    # six failures leave shape and scale very uncertain: the predictive interval is far wider than the
    # plug-in one, above all at the top (no published interval is compared here)
    lower, median, upper = prediction.quantiles
    assert lower <= prediction.plug_in_quantiles[0] and upper > 2 * prediction.plug_in_quantiles[2]
    assert median >= prediction.plug_in_quantiles[1]
