"""Tests of the family registry and of a family added by one small module (log-logistic), fitted and
bounded through the generic fitter and profile code (warranty_forecast.lifecore)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, stats

from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.families import FAMILIES, LOGLOGISTIC, LOGNORMAL, WEIBULL, get_family
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.lifecore.likelihood import log_likelihood
from warranty_forecast.lifecore.profile import likelihood_ratio_bounds, profile_bounds
from simulated_data import simulated_life_data  # tests/ is on sys.path

CHI2_95 = float(stats.chi2.ppf(0.95, 1))


def loglogistic_data(seed: int = 7, n: int = 400, shape: float = 2.5, scale: float = 30.0) -> LifeData:
    """Exact failures and right-censored survivors at 36 (one ends-of-test age), drawn from scipy.stats.fisk."""
    ages = stats.fisk(shape, scale=scale).rvs(size=n, random_state=np.random.default_rng(seed))
    failed = ages <= 36.0
    return LifeData.from_exact(ages[failed], np.ones(failed.sum()), [36.0], [float((~failed).sum())])


def fisk_log_likelihood(shape: float, scale: float, data: LifeData) -> float:
    # reference library: scipy.stats.fisk(c=shape, scale=scale) logpdf (exact ages) and logsf (suspensions)
    dist = stats.fisk(shape, scale=scale)
    return float(data.exact_counts @ dist.logpdf(data.exact_ages) + data.suspension_counts @ dist.logsf(data.suspension_ages))


def test_registry_names_every_family_and_rejects_unknown_names():
    assert FAMILIES == {"weibull": WEIBULL, "lognormal": LOGNORMAL, "loglogistic": LOGLOGISTIC}
    assert get_family("loglogistic") is LOGLOGISTIC and get_family(LOGNORMAL) is LOGNORMAL
    with pytest.raises(ValueError, match="unknown life family 'gamma'; known: loglogistic, lognormal, weibull"):
        get_family("gamma")


def test_loglogistic_closed_forms_match_scipy_fisk():
    # reference library: scipy.stats.fisk(c=shape, scale=scale)
    theta = LOGLOGISTIC.theta(shape=2.5, scale=30.0)
    dist = stats.fisk(2.5, scale=30.0)
    t = np.array([0.5, 5.0, 30.0, 200.0])
    np.testing.assert_allclose(LOGLOGISTIC.log_survival(t, theta), dist.logsf(t), rtol=1e-12)
    np.testing.assert_allclose(LOGLOGISTIC.cdf(t, theta), dist.cdf(t), rtol=1e-12)
    np.testing.assert_allclose(LOGLOGISTIC.pdf(t, theta), dist.pdf(t), rtol=1e-12)
    np.testing.assert_allclose(LOGLOGISTIC.quantile([0.1, 0.5], theta), dist.ppf([0.1, 0.5]), rtol=1e-12)
    assert LOGLOGISTIC.mean(theta) == pytest.approx(dist.mean(), rel=1e-12)
    assert LOGLOGISTIC.variance(theta) == pytest.approx(dist.var(), rel=1e-10)


def test_loglogistic_grouped_likelihood_matches_scipy_and_its_derivatives():
    # reference library: scipy.stats.fisk; interval rows as sf(lower) - sf(upper)
    data = simulated_life_data(3, 3000, 1.4, 50.0)
    shape, scale = 1.7, 45.0
    dist = stats.fisk(shape, scale=scale)
    want = float(
        data.interval_counts @ np.log(dist.sf(data.interval_lower) - dist.sf(data.interval_upper))
        + data.suspension_counts @ dist.logsf(data.suspension_ages)
    )
    theta = LOGLOGISTIC.theta(shape=shape, scale=scale)
    value, gradient, hessian = log_likelihood(LOGLOGISTIC, theta, data, derivatives=2)
    assert value == pytest.approx(want, rel=1e-10)
    # common practice, no source: central differences of the value and of the analytic gradient
    step = 1e-6
    for j, e in enumerate(np.eye(2) * step):
        up, down = (log_likelihood(LOGLOGISTIC, theta + s, data, derivatives=1) for s in (e, -e))
        assert gradient[j] == pytest.approx((up[0] - down[0]) / (2 * step), rel=1e-6)
        np.testing.assert_allclose(hessian[:, j], (up[1] - down[1]) / (2 * step), rtol=1e-5)


def test_loglogistic_fit_matches_brute_force_maximum_of_scipy_likelihood():
    data = loglogistic_data()
    fit = Fitter(LOGLOGISTIC).fit(data)
    # reference: scipy.stats.fisk log-likelihood maximised by Nelder-Mead (brute force, no derivatives)
    found = optimize.minimize(
        lambda v: -fisk_log_likelihood(math.exp(v[1]), math.exp(v[0]), data),
        x0=[math.log(25.0), 0.0], method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000},
    )
    assert fit.scale == pytest.approx(math.exp(found.x[0]), rel=1e-6)
    assert fit.shape == pytest.approx(math.exp(found.x[1]), rel=1e-6)
    assert fit.log_likelihood == pytest.approx(-found.fun, rel=1e-10)
    assert fit.aic == pytest.approx(4.0 + 2.0 * found.fun, rel=1e-10)
    assert 2.0 < fit.shape < 3.0 and 25.0 < fit.scale < 35.0  # drawn with shape 2.5, scale 30


def test_loglogistic_likelihood_ratio_bounds_through_the_generic_profile():
    data = loglogistic_data()
    fit = Fitter(LOGLOGISTIC).fit(data)
    bounds = likelihood_ratio_bounds(fit, b_life_fractions=(0.10,), cdf_ages=(24.0,))
    assert bounds.is_bounded and list(bounds.parameters) == ["shape", "scale"]
    assert bounds.shape[0] < fit.shape < bounds.shape[1]
    assert bounds.b_life[0.10][0] < fit.b10 < bounds.b_life[0.10][1]
    assert fit.bounds("shape", method="likelihood_ratio") == bounds.shape
    # reference: brute-force profile of the scipy.stats.fisk likelihood over the scale at each shape end
    for shape_end in bounds.shape:
        best = optimize.minimize_scalar(lambda a: -fisk_log_likelihood(shape_end, math.exp(a), data),
                                        bounds=(0.0, 8.0), method="bounded", options={"xatol": 1e-10})
        assert 2.0 * (fit.log_likelihood + best.fun) == pytest.approx(CHI2_95, abs=1e-5)
    # F(24) ends: on the profile, the largest likelihood with F(24) held there is chi2/2 below the maximum
    for f_end in bounds.cdf[24.0]:
        u = math.log(f_end / (1.0 - f_end))  # z-value of F: log-odds

        def negative(s: float) -> float:
            shape = math.exp(s)
            scale = 24.0 * math.exp(-u / shape)  # (24 / scale) ** shape = odds
            return -fisk_log_likelihood(shape, scale, data)

        best = optimize.minimize_scalar(negative, bounds=(-2.0, 3.0), method="bounded", options={"xatol": 1e-10})
        assert 2.0 * (fit.log_likelihood + best.fun) == pytest.approx(CHI2_95, abs=1e-5)


def test_lognormal_likelihood_ratio_bounds_match_brute_force_profile():
    data = simulated_life_data(5, 5000, 1.3, 60.0)
    fit = Fitter(LOGNORMAL).fit(data)
    lower, upper = profile_bounds(fit, "mu")
    assert lower < fit.mu < upper
    # reference: brute-force profile over log sigma at each mu end (the generic likelihood, checked
    # against scipy.stats.lognorm in test_lognormal_model.py)
    for mu_end in (lower, upper):
        best = optimize.minimize_scalar(lambda s: -log_likelihood(LOGNORMAL, [mu_end, s], data),
                                        bounds=(-3.0, 3.0), method="bounded", options={"xatol": 1e-10})
        assert 2.0 * (fit.log_likelihood + best.fun) == pytest.approx(CHI2_95, abs=1e-5)
    wald = fit.bounds("mu")
    assert wald[0] == pytest.approx(lower, abs=0.05) and wald[1] == pytest.approx(upper, abs=0.05)
