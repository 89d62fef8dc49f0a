"""Tests of the grouped, censored Weibull life model (warranty_forecast.lifecore.life_model).

Every external check names its source beside it. Reference numbers live in tests/reference_values.py.
Every test in this module turns warnings into errors, so any RuntimeWarning (overflow, log(0), ...)
fails it.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from warranty_forecast.errors import FitError
from warranty_forecast.lifecore.data import LifeData, month_interval_ends
from warranty_forecast.lifecore.errors import FitNotConvergedError, InsufficientDataError
from warranty_forecast.lifecore.families import WEIBULL
from warranty_forecast.lifecore.families.weibull import rate_from_scale, scale_from_rate
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.lifecore.likelihood import log_likelihood
from warranty_forecast.lifecore.result import FitResult
from closed_forms import weibull_b_life, weibull_cdf, weibull_hazard, weibull_log_survival, weibull_mean, weibull_pdf, weibull_survival, weibull_variance  # tests/closed_forms.py
from closed_forms import summary_table  # tests/closed_forms.py
import reference_values as ref  # tests/reference_values.py (tests/ is on sys.path under pytest)
from reference_values import reference_life_data
from simulated_data import mixed_life_data, simulate_warranty, simulated_life_data, weibull_life

pytestmark = pytest.mark.filterwarnings("error")



# ---------------------------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------------------------


def scipy_log_likelihood(data: LifeData, shape: float, scale: float) -> float:
    """Same log-likelihood from scipy.stats.weibull_min logpdf / logcdf / logsf (reference library)."""
    dist = stats.weibull_min(shape, scale=scale)
    exact = data.exact_counts @ dist.logpdf(data.exact_ages)
    suspended = data.suspension_counts @ dist.logsf(data.suspension_ages)
    lower, upper, counts = data.interval_lower, data.interval_upper, data.interval_counts
    from_zero = lower == 0.0
    interval = counts[from_zero] @ dist.logcdf(upper[from_zero]) + counts[~from_zero] @ np.log(
        dist.sf(lower[~from_zero]) - dist.sf(upper[~from_zero])
    )
    return float(exact + suspended + interval)


# ---------------------------------------------------------------------------------------------
# published reference sets
# ---------------------------------------------------------------------------------------------


def test_nist_handbook_example():
    # NIST/SEMATECH e-Handbook 8.4.1.3; tolerance half a unit in the last published digit.
    fit = Fitter(WEIBULL).fit(reference_life_data("nist_weibull_censored.csv"))
    assert fit.converged
    assert fit.shape == pytest.approx(ref.NIST_SHAPE, abs=5e-5)
    # measured 606.52756: the exact MLE (scipy agrees, see below) is 4.4e-4 below the printed 606.5280
    assert fit.scale == pytest.approx(ref.NIST_SCALE, abs=5e-4)
    assert fit.log_likelihood == pytest.approx(ref.NIST_LOG_LIKELIHOOD, abs=5e-4)
    assert fit.mean == pytest.approx(ref.NIST_MEAN, abs=5e-4)
    assert math.sqrt(fit.variance) == pytest.approx(ref.NIST_SD, abs=5e-4)
    assert fit.n_returns == 10 and fit.n_suspensions == 10


def test_nist_example_matches_scipy_censored_fit():
    # reference library: scipy.stats.weibull_min.fit with CensoredData (floc=0), tight Nelder-Mead
    data = reference_life_data("nist_weibull_censored.csv")
    fit = Fitter(WEIBULL).fit(data)
    censored = stats.CensoredData(
        uncensored=np.repeat(data.exact_ages, data.exact_counts.astype(int)),
        right=np.repeat(data.suspension_ages, data.suspension_counts.astype(int)),
    )
    shape, _, scale = stats.weibull_min.fit(censored, 1.7, floc=0, scale=600.0, optimizer=_tight_fmin)
    assert fit.shape == pytest.approx(shape, rel=1e-6)
    assert fit.scale == pytest.approx(scale, rel=1e-6)


def test_bearing_cage():
    # Abernethy et al. (1983) data; Meeker & Escobar (1998). Values per the reference README: shape and
    # scale from R survreg output (reproduced there to 7 digits), log-likelihood and B10 computed.
    data = reference_life_data("bearing_cage.csv")
    assert data.n_returns == 6 and data.n_returns + data.n_suspensions == 1703  # Abernethy et al. (1983)
    fit = Fitter(WEIBULL).fit(data)
    assert fit.converged
    assert fit.shape == pytest.approx(ref.BEARING_SHAPE, abs=5e-7)
    assert fit.scale == pytest.approx(ref.BEARING_SCALE, abs=5e-3)
    assert fit.log_likelihood == pytest.approx(ref.BEARING_LOG_LIKELIHOOD, abs=5e-4)
    assert fit.b10 == pytest.approx(ref.BEARING_B10, abs=0.5)  # "about 3,903"
    lower, upper = fit.bounds("b_life", p=0.10)
    assert lower == pytest.approx(ref.BEARING_B10_WALD_95[0], abs=1.0)  # "about", computed
    assert upper == pytest.approx(ref.BEARING_B10_WALD_95[1], abs=1.0)


def test_bearing_cage_prediction_of_new_failures():
    # Meeker & Escobar (1998) Table 12.1: every surviving unit runs 300 more hours; expected new
    # failures sum_i n_i (R(t_i) - R(t_i + 300)) / R(t_i). 5.058 computed per the reference README.
    data = reference_life_data("bearing_cage.csv")
    fit = Fitter(WEIBULL).fit(data)
    ages, counts = data.suspension_ages, data.suspension_counts
    expected = counts @ (1.0 - np.exp(fit.log_survival(ages + 300.0) - fit.log_survival(ages)))
    assert expected == pytest.approx(ref.BEARING_NEW_FAILURES_300H, abs=5e-4)


# ---------------------------------------------------------------------------------------------
# scipy cross-checks on simulated warranty data
# ---------------------------------------------------------------------------------------------


def _tight_fmin(func, x0, args=(), disp=0):
    # Nelder-Mead stops when both the simplex (xtol) and its function values (ftol, absolute) have shrunk
    return optimize.fmin(func, x0, args=args, disp=disp, xtol=1e-10, ftol=1e-10, maxiter=5_000, maxfun=10_000)


def test_grouped_fit_matches_scipy_censored_fit():
    # reference library: scipy.stats.weibull_min.fit with CensoredData, counts expanded by numpy.repeat
    months, returns, ages, counts = simulate_warranty(np.random.default_rng(20240601), 4000, weibull_life(1.3, 60.0))
    data = LifeData.from_monthly_returns(months, returns, ages, counts, day_grid=False)
    assert data.n_returns > 500  # enough returns for a well-determined fit
    fit = Fitter(WEIBULL).fit(data)
    n_per_month = returns.astype(int)
    censored = stats.CensoredData(
        interval=np.column_stack([np.repeat(months - 1.0, n_per_month), np.repeat(months * 1.0, n_per_month)]),
        right=np.repeat(ages, counts.astype(int)),
    )
    shape, loc, scale = stats.weibull_min.fit(
        censored, fit.shape * 0.95, floc=0, scale=fit.scale * 1.05, optimizer=_tight_fmin
    )
    assert loc == 0.0
    assert fit.shape == pytest.approx(shape, rel=1e-5)  # measured ~2e-8
    assert fit.scale == pytest.approx(scale, rel=1e-5)
    assert fit.log_likelihood == pytest.approx(scipy_log_likelihood(data, fit.shape, fit.scale), rel=1e-12)


@pytest.mark.parametrize(("shape", "scale"), [(1.5, 20.0), (0.6, 3.0), (4.0, 15.0)])
def test_log_likelihood_matches_scipy_sums(shape, scale):
    # reference library: scipy.stats.weibull_min logpdf / logcdf / logsf sums at the same parameters
    data = mixed_life_data()
    theta = [math.log(scale), math.log(shape)]
    assert log_likelihood(WEIBULL, theta, data) == pytest.approx(scipy_log_likelihood(data, shape, scale), rel=1e-12)


def test_complete_data_fit_matches_scipy():
    # reference library: scipy.stats.weibull_min.fit on uncensored data (floc=0)
    failures = stats.weibull_min.rvs(2.2, scale=30.0, size=40, random_state=np.random.default_rng(3))
    data = LifeData.from_exact(failures, np.ones_like(failures), [], [])
    fit = Fitter(WEIBULL, require_suspensions=False).fit(data)
    shape, _, scale = stats.weibull_min.fit(failures, 2.0, floc=0, scale=28.0, optimizer=_tight_fmin)
    assert fit.shape == pytest.approx(shape, rel=1e-6)
    assert fit.scale == pytest.approx(scale, rel=1e-6)


# ---------------------------------------------------------------------------------------------
# closed forms
# ---------------------------------------------------------------------------------------------

SHAPES_SCALES = [(0.4, 1.0), (0.7, 30.0), (1.0, 12.0), (1.7208, 606.528), (3.5, 2.5), (6.0, 20.0)]


@pytest.mark.parametrize(("shape", "scale"), SHAPES_SCALES)
def test_closed_forms_match_scipy(shape, scale):
    # reference library: scipy.stats.weibull_min
    dist = stats.weibull_min(shape, scale=scale)
    t = scale * np.array([1e-3, 0.1, 0.5, 1.0, 1.7, 3.0])
    assert weibull_mean(shape, scale) == pytest.approx(dist.mean(), rel=1e-12)
    assert weibull_variance(shape, scale) == pytest.approx(dist.var(), rel=1e-10)
    np.testing.assert_allclose(weibull_survival(t, shape, scale), dist.sf(t), rtol=1e-12)
    np.testing.assert_allclose(weibull_log_survival(t, shape, scale), dist.logsf(t), rtol=1e-12)
    np.testing.assert_allclose(weibull_cdf(t, shape, scale), dist.cdf(t), rtol=1e-12)
    np.testing.assert_allclose(weibull_pdf(t, shape, scale), dist.pdf(t), rtol=1e-12)
    # h = f / R, taken in logs: scipy's sf is subnormal at 3 x scale for shape 6
    hazard = np.exp(dist.logpdf(t) - dist.logsf(t))
    np.testing.assert_allclose(weibull_hazard(t, shape, scale), hazard, rtol=1e-12)
    p = np.array([0.001, 0.01, 0.10, 0.5, 0.9])
    np.testing.assert_allclose(weibull_b_life(p, shape, scale), dist.ppf(p), rtol=1e-12)


@pytest.mark.parametrize(("shape", "scale"), SHAPES_SCALES)
def test_mean_and_variance_by_numerical_integration(shape, scale):
    # common practice, no source: E[T] = int R(t) dt, E[T^2] = int 2 t R(t) dt (scipy.integrate.quad)
    def survival(t: float) -> float:
        return float(weibull_survival(t, shape, scale))

    options = {"epsabs": 0.0, "epsrel": 1e-13, "limit": 200}
    mean, _ = integrate.quad(survival, 0.0, np.inf, **options)
    second, _ = integrate.quad(lambda t: 2.0 * t * survival(t), 0.0, np.inf, **options)
    assert weibull_mean(shape, scale) == pytest.approx(mean, rel=1e-10)
    assert weibull_variance(shape, scale) == pytest.approx(second - mean**2, rel=1e-9)


def test_rate_and_scale_forms_agree():
    # common practice, no source: rate = scale^-shape; R(t) = exp(-rate t^shape)
    shape, scale = 1.7, 40.0
    rate = rate_from_scale(shape, scale)
    assert rate == pytest.approx(scale**-shape, rel=1e-14)
    assert scale_from_rate(shape, rate) == pytest.approx(scale, rel=1e-14)
    t = np.array([0.0, 1.0, 10.0, 80.0])
    np.testing.assert_allclose(weibull_survival(t, shape, scale), np.exp(-rate * t**shape), rtol=1e-13)
    hazard = rate * shape * t[1:] ** (shape - 1)
    np.testing.assert_allclose(weibull_hazard(t[1:], shape, scale), hazard, rtol=1e-13)


def test_closed_forms_at_age_zero_and_bad_inputs():
    # common practice, no source: h(0) is inf / 1/scale / 0 for shape <1 / =1 / >1; R(0) = 1
    assert weibull_hazard(0.0, 0.5, 2.0) == np.inf
    assert weibull_hazard(0.0, 1.0, 2.0) == 0.5
    assert weibull_hazard(0.0, 2.0, 2.0) == 0.0
    assert weibull_survival(0.0, 0.5, 2.0) == 1.0 and weibull_cdf(0.0, 0.5, 2.0) == 0.0
    with pytest.raises(ValueError, match="ages must be >= 0"):
        weibull_survival([-1.0], 1.0, 1.0)
    with pytest.raises(ValueError, match="strictly between 0 and 1"):
        weibull_b_life(1.0, 1.0, 1.0)


# ---------------------------------------------------------------------------------------------
# log-likelihood derivatives
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("scale", "shape"), [(20.0, 1.5), (3.0, 0.4), (500.0, 5.0), (8.0, 3.0), (1.0, 0.1), (40.0, 12.0)]
)
def test_gradient_and_hessian_match_central_differences(scale, shape):
    # common practice, no source: central finite differences, step 1e-5 in theta
    data = mixed_life_data()
    theta = np.array([math.log(scale), math.log(shape)])
    value, grad, hess = log_likelihood(WEIBULL, theta, data, derivatives=2)
    assert log_likelihood(WEIBULL, theta, data) == value
    assert np.array_equal(log_likelihood(WEIBULL, theta, data, derivatives=1)[1], grad)
    step = 1e-5
    fd_grad, fd_hess = np.zeros(2), np.zeros((2, 2))
    for i in range(2):
        e = np.zeros(2)
        e[i] = step
        fd_grad[i] = (log_likelihood(WEIBULL, theta + e, data) - log_likelihood(WEIBULL, theta - e, data)) / (2 * step)
        grad_up = log_likelihood(WEIBULL, theta + e, data, derivatives=1)[1]
        grad_down = log_likelihood(WEIBULL, theta - e, data, derivatives=1)[1]
        fd_hess[:, i] = (grad_up - grad_down) / (2 * step)
    floor = 1e-6 * max(1.0, abs(value))
    np.testing.assert_allclose(grad, fd_grad, rtol=1e-6, atol=floor)
    np.testing.assert_allclose(hess, fd_hess, rtol=1e-6, atol=floor)
    np.testing.assert_array_equal(hess, hess.T)


def test_log_likelihood_rejects_unknown_derivative_order():
    with pytest.raises(ValueError, match="derivatives"):
        log_likelihood(WEIBULL, [0.0, 0.0], mixed_life_data(), derivatives=3)


def test_zero_count_rows_contribute_nothing():
    # common practice, no source: a row with count 0 must not change value, derivatives or fit
    base = simulated_life_data(11, 2000, 1.4, 30.0)
    padded = LifeData(
        exact_ages=[1e-12, 5.0],
        exact_counts=[0.0, 0.0],
        interval_lower=np.concatenate([base.interval_lower, [0.0, 1e-9, 400.0]]),
        interval_upper=np.concatenate([base.interval_upper, [1e-300, 1.0, 1e6]]),
        interval_counts=np.concatenate([base.interval_counts, [0.0, 0.0, 0.0]]),
        suspension_ages=np.concatenate([base.suspension_ages, [0.0, 1e9]]),
        suspension_counts=np.concatenate([base.suspension_counts, [0.0, 0.0]]),
    )
    for theta in ([math.log(30.0), math.log(1.4)], [math.log(0.01), math.log(8.0)]):
        v0, g0, h0 = log_likelihood(WEIBULL, theta, base, derivatives=2)
        v1, g1, h1 = log_likelihood(WEIBULL, theta, padded, derivatives=2)
        assert v1 == v0
        np.testing.assert_array_equal(g1, g0)
        np.testing.assert_array_equal(h1, h0)
    fit0, fit1 = Fitter(WEIBULL).fit(base), Fitter(WEIBULL).fit(padded)
    assert (fit1.shape, fit1.scale, fit1.log_likelihood) == (fit0.shape, fit0.scale, fit0.log_likelihood)


def test_no_warnings_at_extreme_parameters():
    # common practice, no source: the overflow guards keep value, gradient and Hessian finite
    data = mixed_life_data()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for log_scale in (-30.0, -5.0, 0.0, 5.0, 30.0, 60.0):
            for log_shape in (-6.0, -2.0, 0.0, 2.0, 4.0, 6.0):
                value, grad, hess = log_likelihood(WEIBULL, [log_scale, log_shape], data, derivatives=2)
                assert np.isfinite(value) and np.all(np.isfinite(grad)) and np.all(np.isfinite(hess))
                assert value < 0.0


# ---------------------------------------------------------------------------------------------
# life data
# ---------------------------------------------------------------------------------------------


def test_from_monthly_returns_maps_month_k_to_interval():
    data = LifeData.from_monthly_returns([1, 2, 5], [3, 0, 1.5], [6.0, 12.0], [100, 50.5], day_grid=False)
    np.testing.assert_array_equal(data.interval_lower, [0.0, 1.0, 4.0])
    np.testing.assert_array_equal(data.interval_upper, [1.0, 2.0, 5.0])
    assert data.n_returns == 4.5
    assert data.n_suspensions == 150.5
    assert data.max_age == 12.0
    assert data.exact_ages.size == 0


def test_from_monthly_returns_puts_month_k_on_the_day_grid_by_default():
    # common practice, no source: the start date is day 1 of service, a failure d days after it is at an
    # age in [d, d + 1) days, and month k holds the day counts floor((k-1) L) + 1 .. floor(k L) (d = 0 in
    # month 1), L = 365.25 / 12 = 30.4375; so month 1 = (0, 31] days of age, month 2 = (31, 61],
    # month 3 = (61, 92], month 24 = (701, 731] (hand arithmetic: 23 L = 700.06, 24 L = 730.5).
    data = LifeData.from_monthly_returns([1, 2, 3, 24], [1, 1, 1, 1], [6.0], [10])
    days = 365.25 / 12
    np.testing.assert_allclose(data.interval_lower * days, [0.0, 31.0, 61.0, 701.0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(data.interval_upper * days, [31.0, 61.0, 92.0, 731.0], rtol=0, atol=1e-9)
    k = np.arange(1, 121)
    lower, upper = month_interval_ends(k)
    assert np.all(lower[1:] == upper[:-1]) and np.all(upper - lower > 0.98) and np.all(np.abs(upper - k) <= 1 / days + 1e-12)


@pytest.mark.parametrize("months", [[0, 1], [1.5, 2], [np.nan, 1]])
def test_from_monthly_returns_rejects_bad_months(months):
    with pytest.raises(ValueError, match="months_in_service"):
        LifeData.from_monthly_returns(months, [1, 1], [3.0], [10], day_grid=False)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"exact_ages": [1.0, 2.0], "exact_counts": [1.0]}, "equal lengths"),
        ({"exact_ages": [0.0], "exact_counts": [1.0]}, "exact_ages must be > 0"),
        ({"exact_ages": [np.inf], "exact_counts": [1.0]}, "finite"),
        ({"suspension_ages": [-1.0], "suspension_counts": [1.0]}, "non-negative"),
        ({"suspension_ages": [1.0], "suspension_counts": [-1.0]}, "non-negative"),
        ({"interval_lower": [2.0], "interval_upper": [2.0], "interval_counts": [1.0]}, "lower must be <"),
        ({"interval_lower": [[1.0]], "interval_upper": [[2.0]], "interval_counts": [[1]]}, "one-dimensional"),
    ],
)
def test_life_data_validation(kwargs, message):
    with pytest.raises(ValueError, match=message):
        LifeData(**kwargs)


def test_inputs_are_copied_not_mutated():
    months, returns, ages, counts = simulate_warranty(np.random.default_rng(1), 1000, weibull_life(1.2, 40.0))
    originals = [a.copy() for a in (months, returns, ages, counts)]
    data = LifeData.from_monthly_returns(months, returns, ages, counts, day_grid=False)
    Fitter(WEIBULL).fit(data)
    for before, after in zip(originals, (months, returns, ages, counts)):
        np.testing.assert_array_equal(before, after)
    assert not np.shares_memory(data.interval_counts, returns)
    assert not data.suspension_counts.flags.writeable
    with pytest.raises(ValueError):
        data.suspension_counts[0] = 1.0


# ---------------------------------------------------------------------------------------------
# fitter edges
# ---------------------------------------------------------------------------------------------


def test_zero_returns_raise_insufficient_data():
    data = LifeData.from_monthly_returns([], [], [12.0, 24.0], [500, 300], day_grid=False)
    with pytest.raises(InsufficientDataError, match="0 returns"):
        Fitter(WEIBULL).fit(data)
    assert issubclass(InsufficientDataError, FitError) and issubclass(FitNotConvergedError, FitError)


def test_fewer_returns_than_minimum_raise_insufficient_data():
    data = LifeData.from_monthly_returns([1, 3], [2, 2], [12.0], [500], day_grid=False)
    with pytest.raises(InsufficientDataError, match="fewer than the 5"):
        Fitter(WEIBULL).fit(data)
    # with the minimum lowered the data reach the optimiser (4 returns cannot pin down the scale here)
    assert Fitter(WEIBULL, min_returns=4, raise_on_failure=False).fit(data).n_returns == 4


def test_no_suspensions_raise_insufficient_data_unless_allowed():
    data = LifeData.from_monthly_returns([1, 2, 3, 4, 5, 6], [3, 5, 6, 4, 2, 1], [], [], day_grid=False)
    with pytest.raises(InsufficientDataError, match="no suspensions"):
        Fitter(WEIBULL).fit(data)
    assert Fitter(WEIBULL, require_suspensions=False).fit(data).converged


@pytest.mark.parametrize(
    ("months", "returns", "ages", "counts", "why"),
    [
        ([1], [12], [1.0], [988], "ill-conditioned"),  # cohort of age 1 month: a flat ridge
        # cohort of age 3, returns only in month 3: the shape runs off to infinity
        ([3], [6], [3.0], [994], "optimiser|ill-conditioned|outside the plausible range"),
    ],
)
def test_returns_in_one_month_do_not_give_a_confident_fit(months, returns, ages, counts, why):
    data = LifeData.from_monthly_returns(months, returns, ages, counts, day_grid=False)
    with pytest.raises(FitNotConvergedError, match=why) as raised:
        Fitter(WEIBULL).fit(data)
    message = str(raised.value)
    assert "fix the shape from engineering experience" in message
    assert "returns all in one month" in message
    assert "too few returns" in message
    flagged = Fitter(WEIBULL, raise_on_failure=False).fit(data)
    assert not flagged.converged
    assert all(math.isnan(v) for v in flagged.bounds("shape") + flagged.bounds("b_life", p=0.1))


def test_lower_tail_data_with_unidentifiable_scale_is_not_converged():
    # 200,000 units, true scale 2e5 months: ~17 returns within 24 months, scale > 1000 x max age
    data = simulated_life_data(0, 200_000, 1.0, 2e5)
    with pytest.raises(FitNotConvergedError, match="near-unidentifiable"):
        Fitter(WEIBULL).fit(data)


@pytest.mark.parametrize(
    ("shape", "scale", "n_units", "max_months", "warranty"),
    [(0.4, 500.0, 5000, 36, 24), (6.0, 20.0, 3000, 36, 36)],
)
def test_shape_near_the_bounds_is_recovered(shape, scale, n_units, max_months, warranty):
    data = simulated_life_data(11, n_units, shape, scale, max_months=max_months, warranty_months=warranty)
    fit = Fitter(WEIBULL).fit(data)
    assert fit.converged
    lower, upper = fit.bounds("shape")
    assert lower < shape < upper
    lower, upper = fit.bounds("scale")
    assert lower < scale < upper
    assert fit.shape == pytest.approx(shape, rel=0.1)


def test_true_shape_inside_wald_bounds_for_large_simulation():
    data = simulated_life_data(8, 100_000, 1.5, 40.0)
    fit = Fitter(WEIBULL).fit(data)
    lower, upper = fit.bounds("shape")
    assert lower < 1.5 < upper
    assert upper / lower < 1.05  # large data set: narrow bounds
    lower, upper = fit.bounds("scale")
    assert lower < 40.0 < upper


def test_wald_coverage_of_shape_is_near_nominal():
    # common practice, no source: 200 seeded replicates; nominal 95% (binomial sd ~1.5%)
    rng = np.random.default_rng(7)
    fitter = Fitter(WEIBULL)
    hits = 0
    for _ in range(200):
        fit = fitter.fit(LifeData.from_monthly_returns(*simulate_warranty(rng, 1500, weibull_life(1.5, 40.0)), day_grid=False))
        lower, upper = fit.bounds("shape")
        hits += lower <= 1.5 <= upper
    assert 0.90 <= hits / 200 <= 0.99


def test_fitter_settings_are_validated():
    with pytest.raises(ValueError, match="confidence_level"):
        Fitter(WEIBULL, confidence_level=1.0)
    with pytest.raises(ValueError, match="dispersion_limits"):
        Fitter(WEIBULL, dispersion_limits=(2.0, 1.0))


# ---------------------------------------------------------------------------------------------
# fit result
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def warranty_fit() -> FitResult:
    return Fitter(WEIBULL).fit(simulated_life_data(5, 5000, 1.3, 60.0))


def test_fit_methods_match_closed_forms(warranty_fit):
    fit = warranty_fit
    t = np.array([0.5, 6.0, 24.0])
    np.testing.assert_array_equal(fit.survival(t), weibull_survival(t, fit.shape, fit.scale))
    np.testing.assert_array_equal(fit.cdf(t), weibull_cdf(t, fit.shape, fit.scale))
    np.testing.assert_array_equal(fit.log_survival(t), weibull_log_survival(t, fit.shape, fit.scale))
    np.testing.assert_array_equal(fit.hazard(t), weibull_hazard(t, fit.shape, fit.scale))
    np.testing.assert_array_equal(fit.pdf(t), weibull_pdf(t, fit.shape, fit.scale))
    assert rate_from_scale(fit.shape, fit.scale) == pytest.approx(fit.scale ** -fit.shape, rel=1e-14)
    assert fit.b10 == pytest.approx(float(fit.b_life(0.10)), rel=1e-15)
    assert fit.iterations >= 1 and fit.gradient_norm < 1e-6
    assert fit.covariance.shape == (2, 2) and np.all(np.linalg.eigvalsh(fit.covariance) > 0)


def test_wald_bounds_are_log_symmetric_and_bracket_estimates(warranty_fit):
    # common practice, no source: Wald bounds on the log scale, z = norm.ppf(0.975) (scipy.stats)
    fit = warranty_fit
    z = stats.norm.ppf(0.975)
    se_log_scale, se_log_shape = np.sqrt(np.diag(fit.covariance))
    lower, upper = fit.bounds("shape")
    assert math.log(upper / fit.shape) == pytest.approx(z * se_log_shape, rel=1e-12)
    assert math.log(fit.shape / lower) == pytest.approx(z * se_log_shape, rel=1e-12)
    lower, upper = fit.bounds("scale")
    assert math.log(upper / fit.scale) == pytest.approx(z * se_log_scale, rel=1e-12)
    for p in (0.01, 0.10, 0.5):
        lower, upper = fit.bounds("b_life", p=p)
        assert lower < float(fit.b_life(p)) < upper


def test_cdf_bounds_are_vectorised_and_consistent_with_b_life_bounds(warranty_fit):
    fit = warranty_fit
    t = np.array([0.0, 1.0, 6.0, 24.0, 120.0])
    lower, upper = fit.bounds("cdf", t=t)
    assert lower.shape == upper.shape == t.shape
    assert lower[0] == upper[0] == 0.0
    assert np.all(lower[1:] < fit.cdf(t[1:])) and np.all(fit.cdf(t[1:]) < upper[1:])
    assert np.all(np.diff(upper) > 0.0)
    # common practice, no source: on the Weibull-paper scale u = log(-log R), at t = B10 the upper F bound
    # and the lower B10 bound are tied: u_upper(t_p) - log(-log(1-p)) = shape * (log t_p - log t_lower).
    p = 0.10
    t_p = float(fit.b_life(p))
    t_lower, _ = fit.bounds("b_life", p=p)
    _, f_upper = fit.bounds("cdf", t=t_p)
    u_upper = math.log(-math.log1p(-float(f_upper)))
    tie = fit.shape * math.log(t_p / t_lower)
    assert u_upper - math.log(-math.log1p(-p)) == pytest.approx(tie, rel=1e-10)


def test_summary_table(warranty_fit):
    table = summary_table(warranty_fit)
    assert list(table.index) == ["scale", "shape", "B1", "B10", "mean"]
    assert list(table.columns) == ["estimate", "lower", "upper", "bound_method"]
    assert set(table["bound_method"]) == {"wald-log"}
    assert np.all(table["lower"] < table["estimate"]) and np.all(table["estimate"] < table["upper"])
    assert table.loc["B10", "estimate"] == warranty_fit.b10
    assert (table.loc["B10", "lower"], table.loc["B10", "upper"]) == warranty_fit.bounds("b_life", p=0.10)
    assert table.loc["mean", "estimate"] == pytest.approx(warranty_fit.mean)


def test_confidence_level_widens_bounds():
    data = simulated_life_data(5, 5000, 1.3, 60.0)
    narrow = Fitter(WEIBULL, confidence_level=0.80).fit(data).bounds("shape")
    wide = Fitter(WEIBULL, confidence_level=0.99).fit(data).bounds("shape")
    assert wide[0] < narrow[0] and narrow[1] < wide[1]
