"""Lognormal life model for grouped, censored warranty data, fitted by maximum likelihood.

An alternative life family to the Weibull of `warranty_forecast.lifecore.life_model`, fitted on the same `LifeData`
(ages in months in service, or any unit used consistently).

Parameterisation
----------------
log T ~ Normal(mu, sigma**2): mu in log(months), sigma > 0 dimensionless. With
z = (log t - mu) / sigma and Phi the standard normal distribution function,

* survival R(t) = Phi(-z), fraction failed F(t) = Phi(z), median exp(mu) (months);
* density f(t) = phi(z) / (sigma * t) per month;
* B-life t_p = exp(mu + sigma * Phi^-1(p)).

scipy.stats.lognorm uses s = sigma and scale = exp(mu) (loc = 0).

The optimisation parameters are theta = (mu, log sigma). `lognormal_log_likelihood` is a standalone
function of (theta, data) with an analytic gradient; `LognormalFitter` maximises it with scipy's
L-BFGS-B inside a generous box, polishes the end point with Newton steps on a Hessian obtained by
central differences of the analytic gradient, then checks the end point itself (gradient, positive
definite information, plausible estimates) before returning a `LognormalFit`.

`compare_families` compares a Weibull and a lognormal fit of the same data by AIC.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from typing import Literal, overload

import numpy as np
import numpy.typing as npt
from scipy import optimize, special

from warranty_forecast.errors import FitError
from warranty_forecast.lifecore.life_model import (
    FitNotConvergedError,
    InsufficientDataError,
    LifeData,
    PreparedRows,
    WeibullFitter,
)

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)
# Exponents of density-to-probability ratios are clipped here so that absurd trial parameters far
# from any optimum cannot overflow; at sensible parameters these ratios are far below exp(500).
_EXP_MAX = 500.0
# Outside |mu| <= _MU_MAX (log months) and |log sigma| <= _LOG_SIGMA_MAX the log-likelihood is
# reported as -inf (gradient 0): such trial points (median e^1000, sigma e^25) are absurd, and
# rejecting them keeps every intermediate finite.
_MU_MAX = 1000.0
_LOG_SIGMA_MAX = 25.0


# ---------------------------------------------------------------------------------------------
# Rows of the likelihood
# ---------------------------------------------------------------------------------------------


def _log_phi(z: FloatArray) -> FloatArray:
    """log of the standard normal density."""
    return -0.5 * z * z - _LOG_SQRT_2PI


def _log_interval_probability(z_l: FloatArray, z_u: FloatArray) -> FloatArray:
    """log(Phi(z_u) - Phi(z_l)) = log(R(l) - R(u)) for z_l < z_u, accurate in both tails."""
    # Naive:  log(R(l) - R(u)) = log(Phi(-z_l) - Phi(-z_u)) -- loses every digit when both R are
    #         near 1 (early months) and gives log(0) when both underflow (far upper tail).
    # Stable: log R(l) + log(-expm1(log R(u) - log R(l))), with log R = log_ndtr(-z) kept in logs.
    #         Where z_u <= 0 (both ages below the median) the same identity is used on F = Phi(z):
    #         log F(u) + log(-expm1(log F(l) - log F(u))), which also survives F underflowing.
    upper_tail = z_u > 0.0
    a = np.where(upper_tail, -z_l, z_u)  # log of the larger probability: log_ndtr(a)
    b = np.where(upper_tail, -z_u, z_l)  # log of the smaller one: log_ndtr(b)
    log_big = special.log_ndtr(a)
    log_small = special.log_ndtr(b)
    with np.errstate(divide="ignore"):  # z_l == z_u only at absurd sigma: -inf, no warning
        return log_big + np.log(-np.expm1(log_small - log_big))


@overload
def lognormal_log_likelihood(theta: npt.ArrayLike, data: LifeData, derivatives: Literal[0] = 0) -> float: ...
@overload
def lognormal_log_likelihood(
    theta: npt.ArrayLike, data: LifeData, derivatives: Literal[1]
) -> tuple[float, FloatArray]: ...


def lognormal_log_likelihood(
    theta: npt.ArrayLike, data: LifeData, derivatives: int = 0
) -> float | tuple[float, FloatArray]:
    """Lognormal log-likelihood of `data` at theta = (mu, log sigma), ages in data units.

    Exact failures contribute log f(t) (densities per unit age, so the value depends on the time
    unit), interval returns log(R(lower) - R(upper)) (lower may be 0), suspensions log R(age); each
    weighted by its count. Zero-count rows contribute nothing. derivatives=1 also returns the
    analytic gradient in theta. Outside |mu| <= 1000 and |log sigma| <= 25 the value is -inf
    (gradient zeros).
    """
    if derivatives not in (0, 1):
        raise ValueError(f"derivatives must be 0 or 1, got {derivatives!r}")
    return _log_likelihood(theta, data.prepared, derivatives)


def _log_likelihood(theta: npt.ArrayLike, rows: PreparedRows, derivatives: int) -> float | tuple[float, FloatArray]:
    mu, log_sigma = (float(v) for v in np.asarray(theta, dtype=float).reshape(2))
    if not (abs(mu) <= _MU_MAX and abs(log_sigma) <= _LOG_SIGMA_MAX):
        return (-math.inf, np.zeros(2)) if derivatives else -math.inf
    sigma = math.exp(log_sigma)
    # z = (log t - mu) / sigma;  dz/dmu = -1/sigma,  dz/dlog sigma = -z.
    value = 0.0
    grad = np.zeros(2)

    # -- exact failures: log f = log phi(z) - log sigma - log t -------------------------------
    c = rows.exact_counts
    if c.size:
        z = (rows.exact_log_ages - mu) / sigma
        value += float(c @ (_log_phi(z) - rows.exact_log_ages) - c.sum() * log_sigma)
        if derivatives:
            # d log phi / dz = -z  =>  (z / sigma, z^2), and -1 from -log sigma
            grad += (float(c @ z) / sigma, float(c @ (z * z)) - c.sum())

    # -- suspensions: log R(a) = log Phi(-z) ------------------------------------------------------
    c = rows.suspension_counts
    if c.size:
        z = (rows.suspension_log_ages - mu) / sigma
        log_r = special.log_ndtr(-z)
        value += float(c @ log_r)
        if derivatives:
            # d log R / dz = -exp(log phi(z) - log R(z)) = -h;  gradient = h * (1/sigma, z)
            h = np.exp(np.minimum(_log_phi(z) - log_r, _EXP_MAX))
            grad += (float(c @ h) / sigma, float(c @ (h * z)))

    # -- interval returns (0, u] and (l, u] ----------------------------------------------------
    # d log(R(l) - R(u)) = (-phi(z_l) dz_l + phi(z_u) dz_u) / (R(l) - R(u))
    #                    = ((w_l - w_u) / sigma, w_l z_l - w_u z_u),  w = exp(log phi(z) - log(R(l) - R(u)))
    c = rows.left_open_counts
    if c.size:
        z_u = (rows.left_open_log_upper - mu) / sigma
        log_p = special.log_ndtr(z_u)  # l = 0: log R(0) = 0, so log(1 - R(u)) = log Phi(z_u)
        value += float(c @ log_p)
        if derivatives:
            w_u = np.exp(np.minimum(_log_phi(z_u) - log_p, _EXP_MAX))
            grad += (-float(c @ w_u) / sigma, -float(c @ (w_u * z_u)))
    c = rows.interval_counts
    if c.size:
        z_l = (rows.interval_log_lower - mu) / sigma
        z_u = (rows.interval_log_upper - mu) / sigma
        log_p = _log_interval_probability(z_l, z_u)
        value += float(c @ log_p)
        if derivatives:
            w_l = np.exp(np.minimum(_log_phi(z_l) - log_p, _EXP_MAX))
            w_u = np.exp(np.minimum(_log_phi(z_u) - log_p, _EXP_MAX))
            grad += (float(c @ (w_l - w_u)) / sigma, float(c @ (w_l * z_l - w_u * z_u)))

    if derivatives:
        return value, grad
    return value


# ---------------------------------------------------------------------------------------------
# Fit result and model comparison
# ---------------------------------------------------------------------------------------------


def aic(log_likelihood: float, n_parameters: int) -> float:
    """Akaike information criterion 2 k - 2 log-likelihood (lower is better)."""
    return 2.0 * n_parameters - 2.0 * float(log_likelihood)


def _ages(t: npt.ArrayLike) -> FloatArray:
    t = np.asarray(t, dtype=float)
    if np.any(t < 0.0):
        raise ValueError("ages must be >= 0")
    return t


def _z(t: FloatArray, mu: float, sigma: float) -> tuple[FloatArray, FloatArray]:
    """(z, positive mask); z at t = 0 is a finite placeholder (callers use the mask)."""
    positive = t > 0.0
    log_t = np.log(np.where(positive, t, 1.0))
    return (log_t - mu) / sigma, positive


@dataclass(frozen=True, eq=False)
class LognormalFit:
    """A fitted lognormal life model: log T ~ Normal(mu, sigma**2), ages in the data's unit (months).

    `covariance` is the inverse observed information in theta = (mu, log sigma) (from a central
    difference Hessian of the analytic gradient); NaN when `converged` is False.
    """

    mu: float
    sigma: float
    log_likelihood: float
    covariance: FloatArray
    converged: bool
    n_returns: float
    n_suspensions: float
    confidence_level: float = 0.95

    @property
    def theta(self) -> FloatArray:
        """(mu, log sigma)."""
        return np.array([self.mu, math.log(self.sigma)])

    @property
    def n_parameters(self) -> int:
        """Number of fitted parameters (mu, sigma)."""
        return 2

    @property
    def aic(self) -> float:
        """AIC = 2 * n_parameters - 2 * log_likelihood."""
        return 2.0 * self.n_parameters - 2.0 * self.log_likelihood

    @property
    def median(self) -> float:
        """Median life exp(mu) (age unit, months)."""
        return math.exp(self.mu)

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        """log R(t) = log Phi(-(log t - mu) / sigma); 0 at t = 0."""
        t = _ages(t)
        z, positive = _z(t, self.mu, self.sigma)
        return np.where(positive, special.log_ndtr(-z), 0.0)

    def survival(self, t: npt.ArrayLike) -> FloatArray:
        """R(t), fraction still running at age t."""
        return np.exp(self.log_survival(t))

    def cdf(self, t: npt.ArrayLike) -> FloatArray:
        """F(t) = Phi(z), fraction failed by age t (accurate in the lower tail); 0 at t = 0."""
        t = _ages(t)
        z, positive = _z(t, self.mu, self.sigma)
        return np.where(positive, special.ndtr(z), 0.0)

    def b_life(self, p: npt.ArrayLike) -> FloatArray:
        """Age by which a fraction p (0 < p < 1) has failed: exp(mu + sigma * Phi^-1(p))."""
        p = np.asarray(p, dtype=float)
        if not np.all((p > 0.0) & (p < 1.0)):
            raise ValueError(f"fraction failed p must lie strictly between 0 and 1, got {p!r}")
        return np.exp(self.mu + self.sigma * special.ndtri(p))


@dataclass(frozen=True)
class FamilyComparison:
    """AIC comparison of a Weibull and a lognormal fit of the same data (both 2 parameters).

    delta_aic = weibull_aic - lognormal_aic; positive favours the lognormal.
    """

    weibull_aic: float
    lognormal_aic: float
    delta_aic: float
    threshold: float
    prefers_lognormal: bool
    message: str


def compare_families(
    weibull_log_likelihood: float, lognormal_log_likelihood: float, threshold: float = 10.0
) -> FamilyComparison:
    """Compare the Weibull and lognormal families by AIC (two parameters each).

    The lognormal is preferred only when the Weibull AIC exceeds the lognormal AIC by more than
    `threshold`; otherwise the Weibull (the pipeline's default family) is kept. The default 10 is a
    rule of thumb: Burnham & Anderson (2002, Model Selection and Multimodel Inference) describe an
    AIC difference above about 10 as essentially no support for the worse model (quoted from
    memory, not checked against the book). Both log-likelihoods must come from the same data in the
    same age unit.
    """
    if not threshold >= 0.0:
        raise ValueError(f"threshold must be >= 0, got {threshold!r}")
    weibull_aic = aic(weibull_log_likelihood, 2)
    lognormal_aic = aic(lognormal_log_likelihood, 2)
    delta = weibull_aic - lognormal_aic
    prefers = bool(delta > threshold)
    figures = f"AIC Weibull {weibull_aic:.1f}, lognormal {lognormal_aic:.1f}, difference {delta:+.1f}"
    if prefers:
        message = f"Lognormal preferred ({figures}, above the threshold {threshold:g})."
    elif delta < -threshold:
        message = f"Weibull preferred ({figures})."
    else:
        message = f"No clear preference, Weibull kept ({figures}, within +/-{threshold:g})."
    return FamilyComparison(weibull_aic, lognormal_aic, delta, float(threshold), prefers, message)


# ---------------------------------------------------------------------------------------------
# Fitter
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Attempt:
    theta: FloatArray
    value: float
    gradient: FloatArray
    hessian: FloatArray
    problems: tuple[str, ...]


class _Objective:
    """-log-likelihood / units for scipy; value and gradient cached per theta."""

    def __init__(self, rows: PreparedRows, step: float) -> None:
        self._rows = rows
        self._per_unit = 1.0 / max(rows.total_units, 1e-300)
        self._step = step
        self._key: bytes | None = None
        self._cache: tuple[float, FloatArray] = (0.0, np.zeros(2))

    def log_likelihood(self, theta: FloatArray) -> tuple[float, FloatArray]:
        """Unscaled (value, gradient) of the log-likelihood."""
        v, g = _log_likelihood(theta, self._rows, 1)
        return float(v), np.asarray(g)

    def _eval(self, theta: FloatArray) -> tuple[float, FloatArray]:
        key = np.asarray(theta, dtype=float).tobytes()
        if key != self._key:
            v, g = self.log_likelihood(theta)
            self._cache = (-v * self._per_unit, -g * self._per_unit)
            self._key = key
        return self._cache

    def fun(self, theta: FloatArray) -> float:
        return self._eval(theta)[0]

    def jac(self, theta: FloatArray) -> FloatArray:
        return self._eval(theta)[1]

    def hessian(self, theta: FloatArray) -> FloatArray:
        """Hessian of the (unscaled) log-likelihood: central differences of the analytic gradient."""
        theta = np.asarray(theta, dtype=float)
        h = np.empty((2, 2))
        for j in range(2):
            step = np.zeros(2)
            step[j] = self._step
            h[:, j] = (self.log_likelihood(theta + step)[1] - self.log_likelihood(theta - step)[1]) / (2 * self._step)
        return 0.5 * (h + h.T)


@dataclass(frozen=True)
class LognormalFitter:
    """Maximum-likelihood lognormal fitter for grouped, censored life data.

    Settings:
      confidence_level: carried on the returned fit.
      min_returns: fewer returns (exact + interval counts) raise InsufficientDataError.
      require_suspensions: warranty data without units in service usually means missing shipments,
        so it raises InsufficientDataError; set False for complete life tests.
      gradient_tolerance: largest accepted |gradient of log-likelihood| / units at the estimate.
      max_iterations: L-BFGS-B iterations per starting point.
      max_newton_steps: Newton steps (on the finite-difference Hessian) polishing each end point.
      hessian_step: central-difference step in theta for the observed information.
      max_condition: largest accepted condition number of the observed information scaled to unit
        diagonal, (1+|rho|)/(1-|rho|) with rho the correlation of the estimates.
      sigma_limits: estimates of sigma outside these are reported as not converged.
      median_ratio_limit, max_mu_se: a median beyond median_ratio_limit x the largest age together
        with a standard error of mu above max_mu_se is treated as not identifiable.
      raise_on_failure: raise FitNotConvergedError (default) or return the best attempt with
        converged=False and a NaN covariance.
    """

    confidence_level: float = 0.95
    min_returns: float = 5
    require_suspensions: bool = True
    gradient_tolerance: float = 1e-6
    max_iterations: int = 100
    hessian_step: float = 1e-5
    max_condition: float = 1e6
    sigma_limits: tuple[float, float] = (0.02, 50.0)
    median_ratio_limit: float = 1e3
    max_mu_se: float = 1.0
    max_newton_steps: int = 20
    raise_on_failure: bool = True

    # Fallback starting sigmas (mu profiled out for each), after the Weibull-matched start.
    _START_SIGMAS = (1.0, 0.5, 2.0, 4.0)

    def __post_init__(self) -> None:
        if not 0.0 < self.confidence_level < 1.0:
            raise ValueError(f"confidence_level must lie in (0, 1), got {self.confidence_level!r}")
        if self.min_returns < 0 or self.max_iterations < 1 or not self.hessian_step > 0.0:
            raise ValueError("min_returns must be >= 0, max_iterations >= 1 and hessian_step > 0")
        if not 0.0 < self.sigma_limits[0] < self.sigma_limits[1]:
            raise ValueError(f"sigma_limits must be increasing and positive, got {self.sigma_limits!r}")

    def fit(self, data: LifeData) -> LognormalFit:
        """Fit mu and sigma by maximum likelihood; ages in the data's unit (months)."""
        self._check_data(data)
        rows = data.prepared
        objective = _Objective(rows, self.hessian_step)
        attempts: list[_Attempt] = []
        for theta0 in self._starts(data, objective):
            attempt = self._optimise(objective, data, theta0)
            attempts.append(attempt)
            if not attempt.problems:
                break
            logger.debug("lognormal attempt from %s failed: %s", theta0, attempt.problems)
        best = next((a for a in attempts if not a.problems), None)
        if best is None:
            best = max(attempts, key=lambda a: a.value if np.isfinite(a.value) else -np.inf)
            message = "Lognormal fit not converged: " + "; ".join(best.problems) + ". Hints: " + self._hints(data)
            if self.raise_on_failure:
                raise FitNotConvergedError(message)
            logger.warning("%s", message)
        converged = not best.problems
        if converged:
            covariance = np.linalg.inv(-best.hessian)
            covariance = 0.5 * (covariance + covariance.T)
        else:
            covariance = np.full((2, 2), np.nan)
        covariance.setflags(write=False)
        fit = LognormalFit(
            mu=float(best.theta[0]),
            sigma=math.exp(best.theta[1]),
            log_likelihood=float(best.value),
            covariance=covariance,
            converged=converged,
            n_returns=data.n_returns,
            n_suspensions=data.n_suspensions,
            confidence_level=self.confidence_level,
        )
        logger.debug("lognormal fit: mu %.6g sigma %.6g loglik %.6f", fit.mu, fit.sigma, fit.log_likelihood)
        return fit

    # -- steps --------------------------------------------------------------------------------

    def _check_data(self, data: LifeData) -> None:
        n_returns = data.n_returns
        if n_returns < self.min_returns or n_returns <= 0:
            raise InsufficientDataError(
                f"{n_returns:g} returns, fewer than the {self.min_returns:g} needed for a lognormal fit; "
                "pool cohorts"
            )
        if data.max_age <= 0.0:
            raise InsufficientDataError("no exposure: every unit has age 0")
        if self.require_suspensions and data.n_suspensions <= 0:
            raise InsufficientDataError(
                "no suspensions (units still in service): a fit would treat every unit as returned; "
                "supply the surviving units, or set require_suspensions=False for complete life-test data"
            )

    @staticmethod
    def _hints(data: LifeData) -> str:
        hints = []
        if data.n_returns < 20:
            hints.append(f"too few returns ({data.n_returns:g})")
        if data.returns_at_one_time:
            hints.append("returns all in one month (or at one age): sigma is not identifiable")
        hints.append("pool cohorts to widen the range of ages")
        return "; ".join(hints)

    def _starts(self, data: LifeData, objective: _Objective) -> list[FloatArray]:
        starts = []
        weibull_start = self._weibull_start(data)
        if weibull_start is not None:
            starts.append(weibull_start)
        for sigma in self._START_SIGMAS:
            starts.append(self._profile_start(data, objective, sigma))
        return starts

    @staticmethod
    def _weibull_start(data: LifeData) -> FloatArray | None:
        """Lognormal matching a Weibull fit's fraction failed at two ages inside the data: the
        count-weighted lower quartile of the return ages (interval midpoints) and the largest age."""
        try:
            # only a starting point: floating-point warnings on degenerate data are not the caller's concern
            with np.errstate(over="ignore", under="ignore", divide="ignore", invalid="ignore"):
                weibull = WeibullFitter(min_returns=0, require_suspensions=False).fit(data)
        except (FitError, ValueError, ArithmeticError, np.linalg.LinAlgError) as error:
            logger.debug("no Weibull start for the lognormal fit: %s", error)
            return None
        ages = np.concatenate([data.exact_ages, 0.5 * (data.interval_lower + data.interval_upper)])
        counts = np.concatenate([data.exact_counts, data.interval_counts])
        keep = counts > 0
        ages, counts = ages[keep], counts[keep]
        order = np.argsort(ages)
        cumulative = np.cumsum(counts[order])
        t1 = float(ages[order][np.searchsorted(cumulative, 0.25 * cumulative[-1])])
        t2 = data.max_age
        if not (np.isfinite(weibull.shape) and np.isfinite(weibull.scale) and 0.0 < t1 < t2):
            return None
        q1, q2 = (float(special.ndtri(weibull.cdf(t))) for t in (t1, t2))
        if not (np.isfinite(q1) and np.isfinite(q2) and q2 > q1):
            return None
        sigma = (math.log(t2) - math.log(t1)) / (q2 - q1)
        return np.array([math.log(t2) - sigma * q2, math.log(sigma)])

    @staticmethod
    def _profile_start(data: LifeData, objective: _Objective, sigma: float) -> FloatArray:
        """(mu maximising the likelihood at this sigma, log sigma); the likelihood is log-concave in mu."""
        positive = np.concatenate([data.exact_ages, data.interval_upper, data.suspension_ages])
        positive = positive[positive > 0.0]
        lo = math.log(float(positive.min())) - 5.0 * sigma
        hi = math.log(data.max_age) + 10.0 * sigma + 5.0
        log_sigma = math.log(sigma)
        result = optimize.minimize_scalar(
            lambda mu: objective.fun(np.array([mu, log_sigma])),
            bounds=(lo, hi),
            method="bounded",
            options={"xatol": 1e-3},
        )
        return np.array([float(result.x), log_sigma])

    def _bounds(self, data: LifeData) -> list[tuple[float, float]]:
        """Search box in theta: sigma within 10x its plausible limits, the median within e^100 of the ages."""
        ages = np.concatenate([data.exact_ages, data.interval_upper, data.suspension_ages])
        youngest = float(ages[ages > 0.0].min())
        lo, hi = self.sigma_limits
        return [
            (math.log(youngest) - 100.0, math.log(data.max_age) + 100.0),
            (math.log(lo / 10.0), math.log(hi * 10.0)),
        ]

    def _optimise(self, objective: _Objective, data: LifeData, theta0: FloatArray) -> _Attempt:
        """L-BFGS-B inside `_bounds` with the analytic gradient, then Newton steps on the
        central-difference Hessian (with step halving) to polish the maximum."""
        bounds = self._bounds(data)
        theta0 = np.clip(theta0, [b[0] for b in bounds], [b[1] for b in bounds])
        result = optimize.minimize(
            objective.fun,
            theta0,
            jac=objective.jac,
            method="L-BFGS-B",
            bounds=bounds,
            options={"maxiter": self.max_iterations, "ftol": 1e-15, "gtol": 1e-3 * self.gradient_tolerance},
        )
        theta = np.asarray(result.x, dtype=float)
        value, gradient = objective.log_likelihood(theta)
        hessian = objective.hessian(theta)
        for _ in range(self.max_newton_steps):
            if not (np.isfinite(value) and np.all(np.isfinite(gradient)) and np.all(np.isfinite(hessian))):
                break
            try:
                step = np.linalg.solve(-hessian, gradient)
            except np.linalg.LinAlgError:
                break
            decrement = float(gradient @ step)
            if not decrement > 1e-14 * max(1.0, abs(value)):  # converged, or not an ascent direction
                break
            for fraction in 0.5 ** np.arange(30):
                candidate = theta + fraction * step
                if not all(b[0] <= x <= b[1] for x, b in zip(candidate, bounds)):
                    continue
                candidate_value, candidate_gradient = objective.log_likelihood(candidate)
                if candidate_value >= value:
                    break
            else:
                break
            theta, value, gradient = candidate, candidate_value, candidate_gradient
            hessian = objective.hessian(theta)
        problems = self._check_end_point(data, objective, theta, value, gradient, hessian)
        at_bound = [b for x, b in zip(theta, bounds) if min(abs(x - b[0]), abs(x - b[1])) < 1e-8]
        if at_bound and problems:
            problems = ("estimate at the edge of the search box (mu, log sigma)",) + problems
        if not result.success and problems:
            problems = (f"optimiser: {str(result.message).rstrip('.')}",) + problems
        return _Attempt(theta, value, gradient, hessian, problems)

    def _check_end_point(
        self,
        data: LifeData,
        objective: _Objective,
        theta: FloatArray,
        value: float,
        gradient: FloatArray,
        hessian: FloatArray,
    ) -> tuple[str, ...]:
        if not (np.all(np.isfinite(theta)) and np.isfinite(value)):
            return ("estimates or log-likelihood not finite",)
        if not (np.all(np.isfinite(gradient)) and np.all(np.isfinite(hessian))):
            return ("gradient or Hessian not finite at the estimate",)
        problems = []
        grad_norm = float(np.linalg.norm(gradient)) / objective._rows.total_units
        if grad_norm > self.gradient_tolerance:
            problems.append(f"gradient norm per unit {grad_norm:.2e} above {self.gradient_tolerance:.1e}")
        information = -hessian
        diag = np.diag(information)
        if np.any(diag <= 0.0):
            problems.append("observed information not positive definite (flat or saddle likelihood)")
            return tuple(problems)
        eig = np.linalg.eigvalsh(information / np.sqrt(np.outer(diag, diag)))
        if eig[0] <= 0.0:
            problems.append("observed information not positive definite (flat or saddle likelihood)")
            return tuple(problems)
        if eig[-1] / eig[0] > self.max_condition:
            problems.append(
                f"observed information ill-conditioned (condition {eig[-1] / eig[0]:.2e}): "
                "mu and sigma cannot be told apart from these data"
            )
            return tuple(problems)
        covariance = np.linalg.inv(information)
        decrement = float(gradient @ covariance @ gradient)
        if decrement > 1e-8:
            problems.append(f"not at a maximum (Newton decrement {decrement:.2e} log-likelihood units)")
        sigma = math.exp(theta[1])
        lo, hi = self.sigma_limits
        if not lo <= sigma <= hi:
            problems.append(f"sigma {sigma:.3g} outside the plausible range [{lo:g}, {hi:g}]")
        median, se_mu = math.exp(min(theta[0], 700.0)), math.sqrt(covariance[0, 0])
        if median > self.median_ratio_limit * data.max_age and se_mu > self.max_mu_se:
            problems.append(
                f"median {median:.3g} is over {self.median_ratio_limit:g} x the largest age {data.max_age:g} "
                f"with standard error of mu {se_mu:.2g}: the median is near-unidentifiable"
            )
        return tuple(problems)
