"""One build month's life against its product's base: the hazard-ratio (own scale) test and the life model
a flagged month's forecast uses (own scale or a defective share)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.stages.month_life import (
    DEFECTIVE_SHARE,
    OWN_SCALE,
    MonthData,
    ScaledHazard,
    WithDefectiveShare,
    hazard_ratio_test,
    log_likelihood,
    month_life_model,
)


class Weibull:
    """log R(t) = -(t / scale)^shape."""

    def __init__(self, shape: float, scale: float) -> None:
        self.shape, self.scale = shape, scale

    def log_survival(self, t):
        return -((np.asarray(t, dtype=float) / self.scale) ** self.shape)


def test_hazard_ratio_of_one_month_of_returns_has_its_closed_form():
    # Hand computation: n returns in month 1 and s suspensions at its end b_1 (the day grid: 31 days =
    # 31 / 30.4375 months) under an exponential base of mean 50 months (d = H0(b_1) = b_1 / 50):
    # l(c) = n log(1 - exp(-c d)) - c s d, maximal where exp(-c d) = s / (n + s), so
    # c_hat = -log(s / (n + s)) / d.
    end = 31 / (365.25 / 12)
    n, s, d = 30.0, 970.0, end / 50
    test = hazard_ratio_test(Weibull(1.0, 50.0), MonthData.of([1], [n], [end], [s]))
    assert test.hazard_ratio == pytest.approx(-math.log(s / (n + s)) / d, rel=1e-9)
    # the likelihood-ratio interval's ends drop the log-likelihood by chi2_1(0.95) / 2 (definition)
    def ell(c):
        return n * math.log(-math.expm1(-c * d)) - c * s * d
    target = ell(test.hazard_ratio) - stats.chi2.ppf(0.95, 1) / 2
    assert ell(test.lower) == pytest.approx(target, abs=1e-7)
    assert ell(test.upper) == pytest.approx(target, abs=1e-7)
    # one-sided signed-root p (definition): z = sqrt(2 (l(c_hat) - l(1))) for c_hat > 1
    z = math.sqrt(2 * (ell(test.hazard_ratio) - ell(1.0)))
    assert test.p_value == pytest.approx(stats.norm.sf(z), rel=1e-9)


def test_with_a_weibull_base_the_hazard_ratio_is_the_months_own_scale_at_the_common_shape():
    # c = (eta0 / eta_m)^b: the month's own scale with the base's shape, as the lifecore fitter finds it
    # when the shape is fixed (an independent maximisation of the same likelihood)
    rng = np.random.default_rng(7)
    base = Weibull(1.5, 300.0)
    life = 300.0 / 2.0 ** (1 / 1.5) * rng.weibull(1.5, size=8000)  # twice the base hazard: scale 300 / 2^(1/1.5)
    observed = 18.0
    failed = life <= observed
    months, counts = np.unique(np.ceil(life[failed]), return_counts=True)
    data = MonthData.of(months, counts, [observed], [float((~failed).sum())])
    test = hazard_ratio_test(base, data)
    fixed = Fitter("weibull").fit(
        LifeData.from_monthly_returns(months, counts, [observed], [float((~failed).sum())]), fixed={"shape": 1.5}
    )
    assert 300.0 * test.hazard_ratio ** (-1 / 1.5) == pytest.approx(fixed.scale, rel=1e-7)
    assert test.lower < 2.0 < test.upper  # the simulated truth (seeded draw)
    assert test.p_value < 1e-20


def test_a_month_without_returns_has_ratio_zero_p_one_and_an_upper_bound():
    # l(c) = -c S with S = sum s H0(a): the upper bound solves c S = chi2_1(0.95) / 2 (hand computation)
    base = Weibull(1.0, 100.0)
    test = hazard_ratio_test(base, MonthData.of([], [], [6.0], [500.0]))
    assert test.hazard_ratio == 0.0 and test.lower == 0.0 and test.p_value == 1.0
    assert test.upper == pytest.approx(stats.chi2.ppf(0.95, 1) / 2 / (500.0 * 6.0 / 100.0), rel=1e-12)


def test_the_grouped_log_likelihood_matches_the_lifecore_likelihood():
    # the same grouped likelihood as the product fits use (lifecore), at the fitted parameters
    months = np.array([1.0, 2.0, 3.0, 5.0])
    counts = np.array([4.0, 7.0, 2.0, 9.0])
    ages, survivors = np.array([2.5, 6.0]), np.array([300.0, 700.0])
    fit = Fitter("weibull").fit(LifeData.from_monthly_returns(months, counts, ages, survivors))  # both on the day grid
    assert log_likelihood(fit, MonthData.of(months, counts, ages, survivors)) == pytest.approx(fit.log_likelihood, rel=1e-10)


def _month_data(rng, base: Weibull, units: int, observed: float, *, share=0.0, mean_life=1.0, ratio=1.0) -> MonthData:
    """Seeded lives: base Weibull with its cumulative hazard times `ratio`, plus an exponential defect of mean
    `mean_life` months in a share `share` of the units (competing risks); observed to `observed` months."""
    life = base.scale * (rng.exponential(size=units) / ratio) ** (1 / base.shape)
    defective = rng.random(units) < share
    life = np.where(defective, np.minimum(life, rng.exponential(mean_life, size=units)), life)
    failed = life <= observed
    months, counts = np.unique(np.ceil(life[failed]), return_counts=True)
    return MonthData.of(months, counts, [observed], [float((~failed).sum())])


def test_a_defective_share_is_found_and_chosen_over_a_scaled_hazard():
    # simulated (seeded): 7,000 units, base Weibull 1.4 / 400 months, 4% with an exponential defect of mean
    # 4 months, observed to 20 months (the demo's planted defect, data_demo/README.md)
    base = Weibull(1.4, 400.0)
    data = _month_data(np.random.default_rng(11), base, 7000, 20.0, share=0.04, mean_life=4.0)
    model = month_life_model(base, data)
    assert model.kind == DEFECTIVE_SHARE
    assert model.defective_share == pytest.approx(0.04, abs=0.01)
    assert model.defect_mean_life == pytest.approx(4.0, rel=0.35)
    assert model.aic_defective_share < model.aic_own_scale
    assert isinstance(model.model, WithDefectiveShare)


def test_a_scaled_hazard_is_chosen_when_the_whole_life_runs_faster():
    base = Weibull(1.4, 400.0)
    data = _month_data(np.random.default_rng(12), base, 7000, 20.0, ratio=3.0)
    model = month_life_model(base, data)
    assert model.kind == OWN_SCALE
    assert isinstance(model.model, ScaledHazard)
    assert model.hazard_ratio == pytest.approx(3.0, rel=0.15)
    # its survival is the base's raised to the power c (definition)
    t = np.array([0.0, 5.0, 24.0])
    np.testing.assert_allclose(model.log_survival(t), model.hazard_ratio * base.log_survival(t))


def test_month_data_rejects_what_is_not_life_data():
    with pytest.raises(ValueError, match="months_in_service"):
        MonthData.of([0], [1], [], [])
    with pytest.raises(ValueError, match="suspension_counts"):
        MonthData.of([], [], [1.0], [-1.0])
    with pytest.raises(ValueError, match="pair up"):
        MonthData.of([1, 2], [1], [], [])
