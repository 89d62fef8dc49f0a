"""Tests of the grouped, censored lognormal life model (warranty_forecast.lifecore.families.lognormal through the generic fitter).

Every external check names its source beside it. All simulations are seeded. Every test in this
module turns warnings into errors, so any RuntimeWarning (overflow, log(0), ...) fails it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, stats

from warranty_forecast.errors import FitError
from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.errors import FitNotConvergedError, InsufficientDataError
from warranty_forecast.lifecore.families import WEIBULL
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.lifecore.comparison import FamilyComparison, compare_families
from warranty_forecast.lifecore.families import LOGNORMAL
from warranty_forecast.lifecore.likelihood import log_likelihood
from warranty_forecast.lifecore.result import FitResult, aic
from simulated_data import lognormal_life, mixed_life_data, simulate_warranty, weibull_life  # tests/ on sys.path

pytestmark = pytest.mark.filterwarnings("error")


# ---------------------------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------------------------


def scipy_log_likelihood(data: LifeData, mu: float, sigma: float) -> float:
    """Same log-likelihood from scipy.stats.lognorm logpdf / logcdf / logsf (s = sigma, scale = e^mu)."""
    dist = stats.lognorm(sigma, scale=math.exp(mu))
    exact = data.exact_counts @ dist.logpdf(data.exact_ages)
    suspended = data.suspension_counts @ dist.logsf(data.suspension_ages)
    lower, upper, counts = data.interval_lower, data.interval_upper, data.interval_counts
    from_zero = lower == 0.0
    interval = counts[from_zero] @ dist.logcdf(upper[from_zero]) + counts[~from_zero] @ np.log(
        dist.sf(lower[~from_zero]) - dist.sf(upper[~from_zero])
    )
    return float(exact + suspended + interval)


def _tight_fmin(func, x0, args=(), disp=0):
    # Nelder-Mead stops when both the simplex (xtol) and its function values (ftol, absolute) have shrunk
    return optimize.fmin(func, x0, args=args, disp=disp, xtol=1e-10, ftol=1e-10, maxiter=5_000, maxfun=10_000)


MU_TRUE, SIGMA_TRUE = math.log(60.0), 1.2


@pytest.fixture(scope="module")
def lognormal_warranty():
    """3,000 units, lognormal truth (median 60 months, sigma 1.2), 24-month warranty."""
    return simulate_warranty(np.random.default_rng(20240611), 3000, lognormal_life(MU_TRUE, SIGMA_TRUE))


# ---------------------------------------------------------------------------------------------
# agreement with scipy
# ---------------------------------------------------------------------------------------------


def test_grouped_fit_matches_scipy_censored_fit(lognormal_warranty):
    # reference library: scipy.stats.lognorm.fit with CensoredData (floc=0), counts expanded by
    # numpy.repeat; scipy's s is sigma and its scale is exp(mu)
    months, returns, ages, counts = lognormal_warranty
    data = LifeData.from_monthly_returns(months, returns, ages, counts, day_grid=False)
    assert data.n_returns > 300  # a well-determined fit
    fit = Fitter(LOGNORMAL).fit(data)
    assert fit.converged
    n_per_month = returns.astype(int)
    censored = stats.CensoredData(
        interval=np.column_stack([np.repeat(months - 1.0, n_per_month), np.repeat(months * 1.0, n_per_month)]),
        right=np.repeat(ages, counts.astype(int)),
    )
    s, loc, scale = stats.lognorm.fit(
        censored, fit.sigma * 0.95, floc=0, scale=fit.median * 1.05, optimizer=_tight_fmin
    )
    assert loc == 0.0
    assert fit.sigma == pytest.approx(s, rel=1e-5)  # measured 1.4e-8
    assert fit.mu == pytest.approx(math.log(scale), rel=1e-5)  # measured 6e-10
    assert fit.log_likelihood == pytest.approx(scipy_log_likelihood(data, fit.mu, fit.sigma), rel=1e-12)
    # and the truth is within 4 standard errors (common practice, no source)
    se = np.sqrt(np.diag(fit.covariance))
    assert abs(fit.mu - MU_TRUE) < 4 * se[0]
    assert abs(math.log(fit.sigma) - math.log(SIGMA_TRUE)) < 4 * se[1]


@pytest.mark.parametrize(("mu", "sigma"), [(math.log(60.0), 1.2), (1.0, 0.3), (4.0, 3.0), (-1.0, 0.8)])
def test_log_likelihood_matches_scipy_sums(mu, sigma):
    # reference library: scipy.stats.lognorm logpdf / logcdf / logsf sums at the same parameters
    data = mixed_life_data()
    value = log_likelihood(LOGNORMAL, [mu, math.log(sigma)], data)
    assert value == pytest.approx(scipy_log_likelihood(data, mu, sigma), rel=1e-12)


def test_complete_data_fit_matches_closed_form():
    # common practice, no source: with exact failures only, mu = mean(log t), sigma^2 = mean((log t - mu)^2)
    failures = stats.lognorm.rvs(0.7, scale=20.0, size=50, random_state=np.random.default_rng(7))
    data = LifeData.from_exact(failures, np.ones_like(failures), [], [])
    fit = Fitter(LOGNORMAL, require_suspensions=False).fit(data)
    log_t = np.log(failures)
    assert fit.mu == pytest.approx(log_t.mean(), rel=1e-9)
    assert fit.sigma == pytest.approx(log_t.std(ddof=0), rel=1e-9)
    # observed information at the MLE is diag(n / sigma^2, 2 n) in (mu, log sigma)
    np.testing.assert_allclose(fit.covariance, np.diag([fit.sigma**2 / 50, 1 / 100]), rtol=1e-6, atol=1e-12)


def test_covariance_is_inverse_of_numerical_information(lognormal_warranty):
    # common practice, no source: second central differences of scipy's log-likelihood sums at the MLE
    data = LifeData.from_monthly_returns(*lognormal_warranty, day_grid=False)
    fit = Fitter(LOGNORMAL).fit(data)

    def loglik(theta: np.ndarray) -> float:
        return scipy_log_likelihood(data, theta[0], math.exp(theta[1]))

    h = 1e-4
    theta = fit.theta
    hessian = np.empty((2, 2))
    for i in range(2):
        for j in range(2):
            ei, ej = np.eye(2)[i] * h, np.eye(2)[j] * h
            hessian[i, j] = (
                loglik(theta + ei + ej) - loglik(theta + ei - ej) - loglik(theta - ei + ej) + loglik(theta - ei - ej)
            ) / (4 * h * h)
    np.testing.assert_allclose(fit.covariance, np.linalg.inv(-hessian), rtol=1e-4)


# ---------------------------------------------------------------------------------------------
# log-likelihood details
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("theta", [(math.log(60.0), math.log(1.2)), (1.0, math.log(0.3)), (5.0, math.log(2.5))])
def test_gradient_matches_central_differences(theta):
    # common practice, no source: central differences, step 1e-6, of the log-likelihood itself;
    # the data include lower = 0 intervals and zero-count rows
    data = mixed_life_data()
    value, gradient = log_likelihood(LOGNORMAL, theta, data, derivatives=1)
    assert value == log_likelihood(LOGNORMAL, theta, data)
    h = 1e-6
    numeric = [
        (log_likelihood(LOGNORMAL, np.add(theta, e), data) - log_likelihood(LOGNORMAL, np.subtract(theta, e), data))
        / (2 * h)
        for e in np.eye(2) * h
    ]
    np.testing.assert_allclose(gradient, numeric, rtol=1e-6, atol=1e-6)


def test_zero_count_rows_contribute_nothing():
    # common practice, no source: dropping rows with zero count leaves value and gradient unchanged
    full = mixed_life_data()
    e, i, s = full.exact_counts > 0, full.interval_counts > 0, full.suspension_counts > 0
    trimmed = LifeData(
        exact_ages=full.exact_ages[e],
        exact_counts=full.exact_counts[e],
        interval_lower=full.interval_lower[i],
        interval_upper=full.interval_upper[i],
        interval_counts=full.interval_counts[i],
        suspension_ages=full.suspension_ages[s],
        suspension_counts=full.suspension_counts[s],
    )
    theta = (2.0, math.log(1.5))
    v_full, g_full = log_likelihood(LOGNORMAL, theta, full, derivatives=1)
    v_trim, g_trim = log_likelihood(LOGNORMAL, theta, trimmed, derivatives=1)
    assert v_full == pytest.approx(v_trim, rel=1e-14)
    np.testing.assert_allclose(g_full, g_trim, rtol=1e-14)


@pytest.mark.parametrize(("lower", "upper", "mu", "sigma"), [(1.0, 2.0, 10.0, 0.5), (30.0, 31.0, 0.0, 0.05)])
def test_interval_probability_stable_in_both_tails(lower, upper, mu, sigma):
    # reference library: scipy.stats.norm.logcdf / logsf on z (no cancellation here: the smaller
    # tail probability is e^-25 or less times the larger one). Far lower tail: F(2) ~ 1e-77, where
    # 1 - R(2) rounds to 0; far upper tail: R(30) ~ 1e-1007, which underflows in linear scale.
    data = LifeData(interval_lower=[lower], interval_upper=[upper], interval_counts=[1.0])
    z_l, z_u = (math.log(lower) - mu) / sigma, (math.log(upper) - mu) / sigma
    if z_u < 0:
        expected = stats.norm.logcdf(z_u) + math.log1p(-math.exp(stats.norm.logcdf(z_l) - stats.norm.logcdf(z_u)))
    else:
        expected = stats.norm.logsf(z_l) + math.log1p(-math.exp(stats.norm.logsf(z_u) - stats.norm.logsf(z_l)))
    value, gradient = log_likelihood(LOGNORMAL, [mu, math.log(sigma)], data, derivatives=1)
    assert value == pytest.approx(expected, rel=1e-10)
    assert np.all(np.isfinite(gradient))


def test_absurd_parameters_give_minus_infinity_without_warnings():
    # common practice, no source: a median of e^2000 months is rejected, not computed
    value, gradient = log_likelihood(LOGNORMAL, [2000.0, 0.0], mixed_life_data(), derivatives=1)
    assert value == -math.inf and np.all(gradient == 0.0)
    with pytest.raises(ValueError, match="derivatives"):
        log_likelihood(LOGNORMAL, [1.0, 0.0], mixed_life_data(), derivatives=3)


# ---------------------------------------------------------------------------------------------
# fit result
# ---------------------------------------------------------------------------------------------


def test_fit_functions_match_scipy_lognorm():
    # reference library: scipy.stats.lognorm(s=sigma, scale=exp(mu))
    fit = FitResult(LOGNORMAL, LOGNORMAL.theta(mu=3.5, sigma=0.9), np.eye(2), -100.0, True, 1, 0.0, mixed_life_data())
    dist = stats.lognorm(0.9, scale=math.exp(3.5))
    t = np.array([0.0, 0.5, 5.0, 33.0, 200.0])
    np.testing.assert_allclose(fit.log_survival(t), dist.logsf(t), rtol=1e-12, atol=0.0)
    np.testing.assert_allclose(fit.survival(t), dist.sf(t), rtol=1e-12)
    np.testing.assert_allclose(fit.cdf(t), dist.cdf(t), rtol=1e-12)
    p = np.array([0.001, 0.1, 0.5, 0.9])
    np.testing.assert_allclose(fit.b_life(p), dist.ppf(p), rtol=1e-12)
    assert fit.median == pytest.approx(dist.median(), rel=1e-14)
    assert fit.n_parameters == 2
    assert fit.aic == pytest.approx(2 * 2 + 200.0) == aic(-100.0, 2)  # AIC = 2k - 2 log L (Akaike 1974)
    with pytest.raises(ValueError, match="ages must be >= 0"):
        fit.survival(-1.0)
    with pytest.raises(ValueError, match="strictly between 0 and 1"):
        fit.b_life(1.0)


# ---------------------------------------------------------------------------------------------
# family comparison
# ---------------------------------------------------------------------------------------------


def test_lognormal_data_prefer_lognormal():
    # common practice, no source: AIC on data simulated from the family being tested
    data = LifeData.from_monthly_returns(
        *simulate_warranty(np.random.default_rng(11), 20_000, lognormal_life(math.log(80.0), 1.5)), day_grid=False
    )
    weibull, lognormal = Fitter(WEIBULL).fit(data), Fitter(LOGNORMAL).fit(data)
    comparison = compare_families(weibull.log_likelihood, lognormal.log_likelihood)
    assert comparison.prefers_lognormal
    assert comparison.delta_aic > 10.0  # measured 72.8
    assert comparison.lognormal_aic == pytest.approx(lognormal.aic, rel=1e-14)
    assert comparison.message.startswith("Lognormal preferred")


def test_weibull_data_prefer_weibull():
    # common practice, no source: AIC on data simulated from the family being tested
    data = LifeData.from_monthly_returns(
        *simulate_warranty(np.random.default_rng(12), 20_000, weibull_life(1.8, 50.0)), day_grid=False
    )
    weibull, lognormal = Fitter(WEIBULL).fit(data), Fitter(LOGNORMAL).fit(data)
    comparison = compare_families(weibull.log_likelihood, lognormal.log_likelihood)
    assert not comparison.prefers_lognormal
    assert comparison.delta_aic < 0.0  # measured -118.1
    assert comparison.weibull_aic < comparison.lognormal_aic


def test_compare_families_threshold_and_messages():
    # common practice, no source: delta = AIC_W - AIC_LN = 2 (loglik_LN - loglik_W) for 2 parameters each
    assert compare_families(-100.0, -94.0).delta_aic == pytest.approx(12.0)
    assert compare_families(-100.0, -94.0).prefers_lognormal
    at_threshold = compare_families(-100.0, -95.0)
    assert at_threshold.delta_aic == pytest.approx(10.0) and not at_threshold.prefers_lognormal
    assert at_threshold.message.startswith("No clear preference")
    assert compare_families(-90.0, -100.0).message.startswith("Weibull preferred")
    assert compare_families(-100.0, -99.0, threshold=1.0).prefers_lognormal
    assert isinstance(compare_families(-1.0, -1.0), FamilyComparison)
    with pytest.raises(ValueError, match="threshold"):
        compare_families(-1.0, -1.0, threshold=-1.0)


# ---------------------------------------------------------------------------------------------
# errors
# ---------------------------------------------------------------------------------------------


def test_insufficient_data():
    # common practice, no source: the fitter refuses data it cannot fit
    with pytest.raises(InsufficientDataError, match="fewer than the 5"):
        Fitter(LOGNORMAL).fit(LifeData.from_monthly_returns([1, 2], [1.0, 2.0], [12.0], [100.0], day_grid=False))
    with pytest.raises(InsufficientDataError, match="no suspensions"):
        Fitter(LOGNORMAL).fit(LifeData.from_monthly_returns([1, 2, 3], [4.0, 5.0, 6.0], [], [], day_grid=False))
    assert issubclass(InsufficientDataError, FitError)


def test_returns_in_one_month_do_not_converge():
    # common practice, no source: with every return in month 1, sigma runs off towards infinity
    data = LifeData.from_monthly_returns([1], [10.0], [12.0], [100.0], day_grid=False)
    with pytest.raises(FitNotConvergedError, match="returns all in one month"):
        Fitter(LOGNORMAL).fit(data)
    fit = Fitter(LOGNORMAL, raise_on_failure=False).fit(data)
    assert not fit.converged and np.all(np.isnan(fit.covariance))


def test_fit_does_not_touch_inputs(lognormal_warranty):
    # common practice, no source: inputs stay as they were
    months, returns, ages, counts = (a.copy() for a in lognormal_warranty)
    data = LifeData.from_monthly_returns(months, returns, ages, counts, day_grid=False)
    Fitter(LOGNORMAL).fit(data)
    for before, after in zip(lognormal_warranty, (months, returns, ages, counts)):
        np.testing.assert_array_equal(before, after)
    np.testing.assert_array_equal(data.interval_counts, lognormal_warranty[1])
