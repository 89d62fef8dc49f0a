"""Weibull life model for grouped, censored warranty data, fitted by maximum likelihood.

Ages are in months in service (any time unit works, as long as it is used consistently; the
published reference sets in the tests are in hours).

Parameterisations
-----------------
* Scale form:  R(t) = exp(-(t / scale) ** shape)
* Rate form:   R(t) = exp(-rate * t ** shape), with rate = scale ** (-shape) and
  scale = rate ** (-1 / shape).

With these, the density is f(t) = rate * shape * t**(shape-1) * exp(-rate * t**shape), the
hazard is h(t) = rate * shape * t**(shape-1), and the B-life t_p (the age by which a fraction p
has failed) is scale * (-log(1 - p)) ** (1 / shape); B10 is p = 0.10.

Data
----
`LifeData` holds three kinds of rows, each with a (possibly fractional) unit count:
exact failure ages, returns interval-censored in (lower, upper] (a return in month in service k
lies in (k-1, k]), and suspensions (units still running at that age: right-censored).

Fitting
-------
The optimisation parameters are theta = (log scale, log shape). `log_likelihood` is a standalone
function of (theta, data) with analytic gradient and Hessian, so that later additions (profile
likelihood bounds, a fixed-shape fit, a lognormal alternative) can reuse it. `WeibullFitter`
maximises it with scipy's trust-region "trust-exact" method and then checks the answer itself
(gradient, positive-definite and well-conditioned information, plausible estimates) before
returning a `WeibullFit`; failures raise typed `FitError` subclasses with hints.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Literal, overload

import numpy as np
import numpy.typing as npt
from scipy import optimize, special, stats

from pipeline.errors import FitError

if TYPE_CHECKING:
    import pandas as pd

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]

# exp(z) is evaluated with z clipped here: exp(200) ~ 7e86, so products of two such terms, counts,
# squares of z and sums over many rows stay finite. Such z only occur at absurd trial parameters
# far from any optimum, where the clipped log-likelihood is still hugely negative.
_Z_MAX = 200.0
# Below this log(x), log(1 - exp(-x)) is log(x) - x/2 to double precision (x < 1e-13).
_LOG_X_SMALL = -30.0
_LN2 = math.log(2.0)


class InsufficientDataError(FitError):
    """Too few returns, or no suspensions / exposure, to fit a life model."""


class FitNotConvergedError(FitError):
    """The fit did not reach a trustworthy maximum; the message says why and what to try."""


# ---------------------------------------------------------------------------------------------
# Closed-form Weibull functions (scale form; vectorised over t, t >= 0)
# ---------------------------------------------------------------------------------------------


def rate_from_scale(shape: float, scale: float) -> float:
    """Rate parameter rate = scale ** (-shape) (units: 1 / age ** shape)."""
    return float(np.exp(-shape * np.log(scale)))


def scale_from_rate(shape: float, rate: float) -> float:
    """Scale parameter scale = rate ** (-1 / shape) (units: age)."""
    return float(np.exp(-np.log(rate) / shape))


def _ages(t: npt.ArrayLike) -> FloatArray:
    t = np.asarray(t, dtype=float)
    if np.any(t < 0.0):
        raise ValueError("ages must be >= 0")
    return t


def weibull_log_survival(t: npt.ArrayLike, shape: float, scale: float) -> FloatArray:
    """log R(t) = -(t / scale) ** shape for ages t >= 0 (same unit as scale)."""
    return -np.power(_ages(t) / scale, shape)


def weibull_survival(t: npt.ArrayLike, shape: float, scale: float) -> FloatArray:
    """Survival (reliability) R(t) = exp(-(t / scale) ** shape), fraction still running at age t."""
    return np.exp(weibull_log_survival(t, shape, scale))


def weibull_cdf(t: npt.ArrayLike, shape: float, scale: float) -> FloatArray:
    """Fraction failed by age t, F(t) = 1 - R(t), computed as -expm1(log R(t))."""
    return -np.expm1(weibull_log_survival(t, shape, scale))


def weibull_hazard(t: npt.ArrayLike, shape: float, scale: float) -> FloatArray:
    """Hazard h(t) = rate * shape * t**(shape-1) = (shape/scale) * (t/scale)**(shape-1), per unit age.

    At t = 0 it is infinite for shape < 1, 1/scale for shape 1 and 0 for shape > 1.
    """
    t = _ages(t)
    positive = t > 0.0
    ratio = np.where(positive, t / scale, 1.0)
    at_zero = math.inf if shape < 1.0 else (1.0 / scale if shape == 1.0 else 0.0)
    return np.where(positive, (shape / scale) * np.power(ratio, shape - 1.0), at_zero)


def weibull_pdf(t: npt.ArrayLike, shape: float, scale: float) -> FloatArray:
    """Density f(t) = h(t) * R(t), per unit age (t >= 0)."""
    return weibull_hazard(t, shape, scale) * weibull_survival(t, shape, scale)


def weibull_mean(shape: float, scale: float) -> float:
    """Mean life scale * Gamma(1 + 1/shape) (unit of scale)."""
    return float(scale * np.exp(special.gammaln(1.0 + 1.0 / shape)))


def weibull_variance(shape: float, scale: float) -> float:
    """Variance of life scale**2 * (Gamma(1 + 2/shape) - Gamma(1 + 1/shape)**2) (unit of scale squared)."""
    g1 = np.exp(special.gammaln(1.0 + 1.0 / shape))
    g2 = np.exp(special.gammaln(1.0 + 2.0 / shape))
    return float(scale**2 * (g2 - g1 * g1))


def weibull_b_life(p: npt.ArrayLike, shape: float, scale: float) -> FloatArray:
    """B-life: age by which a fraction p (0 < p < 1) has failed, scale * (-log1p(-p)) ** (1/shape)."""
    p = _check_fraction(p)
    return scale * np.power(-np.log1p(-p), 1.0 / shape)


def _check_fraction(p: npt.ArrayLike) -> FloatArray:
    p = np.asarray(p, dtype=float)
    if not np.all((p > 0.0) & (p < 1.0)):
        raise ValueError(f"fraction failed p must lie strictly between 0 and 1, got {p!r}")
    return p


# ---------------------------------------------------------------------------------------------
# Life data
# ---------------------------------------------------------------------------------------------


def _empty() -> FloatArray:
    return np.empty(0, dtype=float)


def _as_vector(name: str, values: npt.ArrayLike) -> FloatArray:
    arr = np.array(values, dtype=float, copy=True)  # copy: never share (or later mutate) input
    if arr.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite (no NaN or infinity)")
    if np.any(arr < 0.0):
        raise ValueError(f"{name} must be non-negative, got minimum {arr.min()!r}")
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True)
class _PreparedRows:
    """Positive-count rows with logs of ages precomputed (internal; used by `log_likelihood`)."""

    exact_log_ages: FloatArray
    exact_counts: FloatArray
    left_open_log_upper: FloatArray  # intervals (0, upper]
    left_open_counts: FloatArray
    interval_log_lower: FloatArray  # intervals (lower, upper], lower > 0
    interval_log_upper: FloatArray
    interval_counts: FloatArray
    suspension_log_ages: FloatArray
    suspension_counts: FloatArray
    total_units: float


@dataclass(frozen=True, eq=False)
class LifeData:
    """Grouped life data; counts are numbers of units and may be fractional.

    * exact_ages, exact_counts: exact failure ages (> 0).
    * interval_lower, interval_upper, interval_counts: returns known to have failed in
      (lower, upper]; lower may be 0.
    * suspension_ages, suspension_counts: units still running at that age (right-censored).

    Array-likes are copied into read-only float arrays. Rows with zero count are allowed and
    contribute nothing to the likelihood.
    """

    exact_ages: FloatArray = field(default_factory=_empty)
    exact_counts: FloatArray = field(default_factory=_empty)
    interval_lower: FloatArray = field(default_factory=_empty)
    interval_upper: FloatArray = field(default_factory=_empty)
    interval_counts: FloatArray = field(default_factory=_empty)
    suspension_ages: FloatArray = field(default_factory=_empty)
    suspension_counts: FloatArray = field(default_factory=_empty)

    def __post_init__(self) -> None:
        for name in (
            "exact_ages",
            "exact_counts",
            "interval_lower",
            "interval_upper",
            "interval_counts",
            "suspension_ages",
            "suspension_counts",
        ):
            object.__setattr__(self, name, _as_vector(name, getattr(self, name)))
        groups = {
            "exact": ("exact_ages", "exact_counts"),
            "interval": ("interval_lower", "interval_upper", "interval_counts"),
            "suspension": ("suspension_ages", "suspension_counts"),
        }
        for group, names in groups.items():
            lengths = {n: len(getattr(self, n)) for n in names}
            if len(set(lengths.values())) != 1:
                raise ValueError(f"{group} arrays must have equal lengths, got {lengths}")
        if np.any(self.exact_ages <= 0.0):
            raise ValueError("exact_ages must be > 0 (a failure at age 0 has no Weibull density)")
        bad = ~(self.interval_lower < self.interval_upper)
        if np.any(bad):
            i = int(np.flatnonzero(bad)[0])
            raise ValueError(
                "interval_lower must be < interval_upper in every row; row "
                f"{i} has ({self.interval_lower[i]!r}, {self.interval_upper[i]!r}]"
            )

    # -- constructors -------------------------------------------------------------------------

    @classmethod
    def from_monthly_returns(
        cls,
        months_in_service: npt.ArrayLike,
        returns: npt.ArrayLike,
        suspension_ages: npt.ArrayLike,
        suspension_counts: npt.ArrayLike,
    ) -> LifeData:
        """Returns counted by month in service k (integer >= 1), each in (k-1, k] months,
        plus suspensions (units still in service at the given age in months)."""
        months = np.asarray(months_in_service, dtype=float)
        if months.ndim != 1 or not np.all(np.isfinite(months)):
            raise ValueError("months_in_service must be a one-dimensional array of finite values")
        if np.any(months < 1.0) or np.any(months != np.round(months)):
            raise ValueError("months_in_service must be integers >= 1 (month k covers ages (k-1, k])")
        return cls(
            interval_lower=months - 1.0,
            interval_upper=months,
            interval_counts=returns,
            suspension_ages=suspension_ages,
            suspension_counts=suspension_counts,
        )

    @classmethod
    def from_exact(
        cls,
        failure_times: npt.ArrayLike,
        failure_counts: npt.ArrayLike,
        suspension_times: npt.ArrayLike,
        suspension_counts: npt.ArrayLike,
    ) -> LifeData:
        """Exact failure times and suspension (still running) times, each with unit counts."""
        return cls(
            exact_ages=failure_times,
            exact_counts=failure_counts,
            suspension_ages=suspension_times,
            suspension_counts=suspension_counts,
        )

    # -- summaries ----------------------------------------------------------------------------

    @property
    def n_returns(self) -> float:
        """Number of failed units: exact plus interval-censored counts."""
        return float(self.exact_counts.sum() + self.interval_counts.sum())

    @property
    def n_suspensions(self) -> float:
        """Number of units still running (right-censored)."""
        return float(self.suspension_counts.sum())

    @property
    def max_age(self) -> float:
        """Largest age observed in a row with positive count (interval rows: the upper end); 0 if none."""
        ages = np.concatenate(
            [
                self.exact_ages[self.exact_counts > 0],
                self.interval_upper[self.interval_counts > 0],
                self.suspension_ages[self.suspension_counts > 0],
            ]
        )
        return float(ages.max()) if ages.size else 0.0

    @cached_property
    def _prepared(self) -> _PreparedRows:
        """Positive-count rows with log ages, computed once per data set."""
        e = self.exact_counts > 0
        i = self.interval_counts > 0
        open_left = i & (self.interval_lower == 0.0)
        closed = i & (self.interval_lower > 0.0)
        s = (self.suspension_counts > 0) & (self.suspension_ages > 0.0)  # age-0 suspensions: log R = 0
        total = float(
            self.exact_counts[e].sum() + self.interval_counts[i].sum() + self.suspension_counts[s].sum()
        )
        return _PreparedRows(
            exact_log_ages=np.log(self.exact_ages[e]),
            exact_counts=self.exact_counts[e],
            left_open_log_upper=np.log(self.interval_upper[open_left]),
            left_open_counts=self.interval_counts[open_left],
            interval_log_lower=np.log(self.interval_lower[closed]),
            interval_log_upper=np.log(self.interval_upper[closed]),
            interval_counts=self.interval_counts[closed],
            suspension_log_ages=np.log(self.suspension_ages[s]),
            suspension_counts=self.suspension_counts[s],
            total_units=total,
        )


# ---------------------------------------------------------------------------------------------
# Log-likelihood in theta = (log scale, log shape)
# ---------------------------------------------------------------------------------------------


def _log1mexp(log_x: FloatArray) -> FloatArray:
    """log(1 - exp(-x)) for x = exp(log_x) > 0, accurate from underflowing x to huge x."""
    x = np.exp(np.minimum(log_x, _Z_MAX))
    tiny = log_x < _LOG_X_SMALL
    small = ~tiny & (x <= _LN2)
    x_small = np.where(small, x, 1.0)  # placeholders keep unused branches away from log(0)
    x_large = np.where(small | tiny, 1.0, x)
    return np.where(
        tiny,
        log_x - 0.5 * x,
        np.where(small, np.log(-np.expm1(-x_small)), np.log1p(-np.exp(-x_large))),
    )


@overload
def log_likelihood(theta: npt.ArrayLike, data: LifeData, *, derivatives: Literal[0] = 0) -> float: ...
@overload
def log_likelihood(
    theta: npt.ArrayLike, data: LifeData, *, derivatives: Literal[1]
) -> tuple[float, FloatArray]: ...
@overload
def log_likelihood(
    theta: npt.ArrayLike, data: LifeData, *, derivatives: Literal[2]
) -> tuple[float, FloatArray, FloatArray]: ...


def log_likelihood(
    theta: npt.ArrayLike, data: LifeData, *, derivatives: int = 0
) -> float | tuple[float, FloatArray] | tuple[float, FloatArray, FloatArray]:
    """Weibull log-likelihood of `data` at theta = (log scale, log shape), ages in data units.

    Exact failures contribute log f(t) (densities included, so the value depends on the time unit),
    interval returns log(R(lower) - R(upper)), suspensions log R(t); each weighted by its count.
    derivatives=1 also returns the gradient, derivatives=2 also the Hessian, both in theta.
    """
    if derivatives not in (0, 1, 2):
        raise ValueError(f"derivatives must be 0, 1 or 2, got {derivatives!r}")
    log_scale, log_shape = (float(v) for v in np.asarray(theta, dtype=float).reshape(2))
    k = math.exp(log_shape)
    rows = data._prepared

    # Notation: z = shape * (log t - log scale), so log R(t) = -exp(z);
    # dz = (dz/dlog scale, dz/dlog shape) = (-shape, z);
    # d2z = [[0, -shape], [-shape, z]];
    # g = d log R / dtheta = -e^z dz;   H = d2 log R / dtheta2 = -e^z (dz dz' + d2z).
    value = 0.0
    grad = np.zeros(2)
    hess = np.zeros((2, 2))

    # -- exact failures: log f = log shape - log t + z - e^z --------------------------------
    c = rows.exact_counts
    if c.size:
        z = k * (rows.exact_log_ages - log_scale)
        ez = np.exp(np.minimum(z, _Z_MAX))
        value += float(c.sum() * log_shape - c @ rows.exact_log_ages + c @ (z - ez))
        if derivatives:
            # grad = (0, 1) + (1 - e^z) dz
            one_m = 1.0 - ez
            grad += (-k * (c @ one_m), c.sum() + c @ (one_m * z))
            if derivatives == 2:
                # Hess = (1 - e^z) d2z - e^z dz dz'
                h_aa = -k * k * (c @ ez)
                h_ab = -k * (c @ one_m) + k * (c @ (ez * z))
                h_bb = c @ (one_m * z - ez * z * z)
                hess += ((h_aa, h_ab), (h_ab, h_bb))

    # -- suspensions: log R = -e^z ------------------------------------------------------------
    c = rows.suspension_counts
    if c.size:
        z = k * (rows.suspension_log_ages - log_scale)
        ez = np.exp(np.minimum(z, _Z_MAX))
        cez = c * ez
        value -= float(cez.sum())
        if derivatives:
            grad += (k * cez.sum(), -(cez @ z))
            if derivatives == 2:
                h_ab = k * (cez @ (z + 1.0))
                hess += ((-k * k * cez.sum(), h_ab), (h_ab, -(cez @ (z * z + z))))

    # -- interval returns (lower, upper] --------------------------------------------------------
    for log_lower, log_upper, c in (
        (None, rows.left_open_log_upper, rows.left_open_counts),
        (rows.interval_log_lower, rows.interval_log_upper, rows.interval_counts),
    ):
        if not c.size:
            continue
        v, g, h = _interval_terms(k, log_scale, log_lower, log_upper, c, derivatives)
        value += v
        grad += g
        hess += h

    if derivatives == 0:
        return value
    if derivatives == 1:
        return value, grad
    return value, grad, hess


def _interval_terms(
    k: float,
    log_scale: float,
    log_lower: FloatArray | None,
    log_upper: FloatArray,
    c: FloatArray,
    derivatives: int,
) -> tuple[float, FloatArray, FloatArray]:
    """Count-weighted sums of log(R(l) - R(u)) and its derivatives; log_lower None means l = 0."""
    z_u = k * (log_upper - log_scale)
    # Naive:   log(F(u) - F(l))  -- cancels catastrophically when both are near 0 or near 1.
    # Stable:  log(R(l) - R(u)) = log R(l) + log(-expm1(log R(u) - log R(l))),
    # with x = -(log R(u) - log R(l)) = e^{z_u} - e^{z_l} = e^{z_u} * (1 - e^{z_l - z_u}) taken in
    # logs, so that it survives underflow of e^z; z_l - z_u = shape * (log l - log u) exactly.
    if log_lower is None:  # l = 0: log R(l) = 0, z_l = -inf, no l-terms
        log_x = z_u
        log_r_l = np.zeros_like(z_u)
    else:
        z_l = k * (log_lower - log_scale)
        log_x = z_u + np.log(-np.expm1(k * (log_lower - log_upper)))
        log_r_l = -np.exp(np.minimum(z_l, _Z_MAX))
    log_1mr = _log1mexp(log_x)  # log(1 - r), r = R(u)/R(l) = exp(-x)
    value = float(c @ (log_r_l + log_1mr))
    grad = np.zeros(2)
    hess = np.zeros((2, 2))
    if not derivatives:
        return value, grad, hess

    # grad = (g_l - r g_u) / (1 - r) = -A dz_l + B dz_u, with A = e^{z_l}/(1-r), B = r e^{z_u}/(1-r)
    x = np.exp(np.minimum(log_x, _Z_MAX))
    z_u_c = np.minimum(z_u, _Z_MAX)
    b_w = np.exp(z_u_c - x - log_1mr)
    if log_lower is None:
        a_w = np.zeros_like(b_w)
        z_l = np.zeros_like(z_u)  # finite placeholder; every l-term is multiplied by A = 0
        ez_l = np.zeros_like(z_u)
    else:
        z_l_c = np.minimum(z_l, _Z_MAX)
        a_w = np.exp(z_l_c - log_1mr)
        ez_l = np.exp(z_l_c)
    g_a = k * (a_w - b_w)
    g_b = b_w * z_u - a_w * z_l
    grad[:] = (c @ g_a, c @ g_b)
    if derivatives == 2:
        # Hess = ((g_l g_l' + H_l) - r (g_u g_u' + H_u)) / (1 - r) - grad grad'
        #      = A M_l - B M_u - grad grad',  M = (e^z - 1) dz dz' - d2z
        em_l = ez_l - 1.0
        em_u = np.exp(z_u_c) - 1.0
        h_aa = c @ (k * k * (a_w * em_l - b_w * em_u) - g_a * g_a)
        h_ab = c @ (a_w * (k - em_l * k * z_l) - b_w * (k - em_u * k * z_u) - g_a * g_b)
        h_bb = c @ (a_w * (em_l * z_l * z_l - z_l) - b_w * (em_u * z_u * z_u - z_u) - g_b * g_b)
        hess[:] = ((h_aa, h_ab), (h_ab, h_bb))
    return value, grad, hess


# ---------------------------------------------------------------------------------------------
# Fit result
# ---------------------------------------------------------------------------------------------


def _z_quantile(confidence_level: float) -> float:
    return float(stats.norm.ppf(0.5 + 0.5 * confidence_level))


@dataclass(frozen=True, eq=False)
class WeibullFit:
    """A fitted Weibull life model (scale form; ages in the data's unit, e.g. months in service).

    `covariance` is the inverse observed information in theta = (log scale, log shape); all
    bounds are Wald bounds on a log scale (delta method) at `confidence_level`. `gradient_norm`
    is the Euclidean norm of the log-likelihood gradient in theta divided by the number of units.
    """

    shape: float
    scale: float
    log_likelihood: float
    covariance: FloatArray
    converged: bool
    iterations: int
    gradient_norm: float
    n_returns: float
    n_suspensions: float
    confidence_level: float = 0.95

    bound_method = "wald-log"

    # -- point estimates ----------------------------------------------------------------------

    @property
    def rate(self) -> float:
        """Rate form parameter scale ** (-shape)."""
        return rate_from_scale(self.shape, self.scale)

    @property
    def mean(self) -> float:
        """Mean life (age unit)."""
        return weibull_mean(self.shape, self.scale)

    @property
    def variance(self) -> float:
        """Variance of life (age unit squared)."""
        return weibull_variance(self.shape, self.scale)

    @property
    def b10(self) -> float:
        """Age by which 10% of units have failed."""
        return float(weibull_b_life(0.10, self.shape, self.scale))

    def survival(self, t: npt.ArrayLike) -> FloatArray:
        """R(t), fraction still running at age t."""
        return weibull_survival(t, self.shape, self.scale)

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        """log R(t)."""
        return weibull_log_survival(t, self.shape, self.scale)

    def cdf(self, t: npt.ArrayLike) -> FloatArray:
        """F(t), fraction failed by age t."""
        return weibull_cdf(t, self.shape, self.scale)

    def hazard(self, t: npt.ArrayLike) -> FloatArray:
        """Hazard h(t) per unit age."""
        return weibull_hazard(t, self.shape, self.scale)

    def pdf(self, t: npt.ArrayLike) -> FloatArray:
        """Density f(t) per unit age."""
        return weibull_pdf(t, self.shape, self.scale)

    def b_life(self, p: npt.ArrayLike) -> FloatArray:
        """Age by which a fraction p has failed."""
        return weibull_b_life(p, self.shape, self.scale)

    # -- Wald bounds on the log scale ---------------------------------------------------------

    @property
    def theta(self) -> FloatArray:
        """(log scale, log shape)."""
        return np.array([math.log(self.scale), math.log(self.shape)])

    def _wald(self, estimate: FloatArray, gradient: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Bounds estimate -/+ z * sd for a function with the given theta-gradient (last axis 2)."""
        var = np.einsum("...i,ij,...j->...", gradient, self.covariance, gradient)
        half = _z_quantile(self.confidence_level) * np.sqrt(np.maximum(var, 0.0))
        return estimate - half, estimate + half

    def _log_bounds(self, log_estimate: float, gradient: tuple[float, float]) -> tuple[float, float]:
        lo, hi = self._wald(np.asarray(log_estimate), np.asarray(gradient))
        return float(np.exp(lo)), float(np.exp(hi))

    def shape_bounds(self) -> tuple[float, float]:
        """Wald bounds of shape, symmetric in log shape."""
        return self._log_bounds(math.log(self.shape), (0.0, 1.0))

    def scale_bounds(self) -> tuple[float, float]:
        """Wald bounds of scale, symmetric in log scale."""
        return self._log_bounds(math.log(self.scale), (1.0, 0.0))

    def rate_bounds(self) -> tuple[float, float]:
        """Wald bounds of rate, symmetric in log rate = -shape * log scale."""
        a = math.log(self.scale)
        return self._log_bounds(-self.shape * a, (-self.shape, -self.shape * a))

    def mean_bounds(self) -> tuple[float, float]:
        """Wald bounds of mean life, symmetric in log mean = log scale + gammaln(1 + 1/shape)."""
        inv = 1.0 / self.shape
        d_log_shape = -inv * float(special.digamma(1.0 + inv))
        return self._log_bounds(math.log(self.mean), (1.0, d_log_shape))

    def b_life_bounds(self, p: float) -> tuple[float, float]:
        """Wald bounds of the B-life t_p, symmetric in log t_p = log scale + log(-log1p(-p)) / shape."""
        q = float(np.log(-np.log1p(-_check_fraction(p))))
        return self._log_bounds(math.log(self.scale) + q / self.shape, (1.0, -q / self.shape))

    def cdf_bounds(self, t: npt.ArrayLike) -> tuple[FloatArray, FloatArray]:
        """Pointwise Wald bounds of F(t), symmetric in u = log(-log R(t)) = shape*(log t - log scale).

        Vectorised over t; at t = 0 both bounds are 0.
        """
        t = np.asarray(t, dtype=float)
        positive = t > 0.0
        log_t = np.log(np.where(positive, t, 1.0))
        u = self.shape * (log_t - math.log(self.scale))
        gradient = np.stack([np.full_like(u, -self.shape), u], axis=-1)
        u_lo, u_hi = self._wald(u, gradient)

        def to_cdf(v: FloatArray) -> FloatArray:
            return np.where(positive, -np.expm1(-np.exp(np.minimum(v, _Z_MAX))), 0.0)

        return to_cdf(u_lo), to_cdf(u_hi)

    def summary(self) -> pd.DataFrame:
        """Table of shape, scale, rate, B1, B10 and mean with Wald bounds (ages in data units)."""
        import pandas as pd

        rows = {
            "shape": (self.shape, self.shape_bounds()),
            "scale": (self.scale, self.scale_bounds()),
            "rate": (self.rate, self.rate_bounds()),
            "B1": (float(self.b_life(0.01)), self.b_life_bounds(0.01)),
            "B10": (self.b10, self.b_life_bounds(0.10)),
            "mean": (self.mean, self.mean_bounds()),
        }
        return pd.DataFrame(
            {
                "estimate": [v[0] for v in rows.values()],
                "lower": [v[1][0] for v in rows.values()],
                "upper": [v[1][1] for v in rows.values()],
                "bound_method": [self.bound_method] * len(rows),
            },
            index=pd.Index(list(rows), name="quantity"),
        )


# ---------------------------------------------------------------------------------------------
# Fitter
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Attempt:
    """One optimiser run and the checks of its end point (internal)."""

    theta: FloatArray
    value: float
    gradient: FloatArray
    hessian: FloatArray
    iterations: int
    problems: tuple[str, ...]


class _Objective:
    """-log-likelihood / units for scipy, computing value, gradient and Hessian once per theta."""

    def __init__(self, data: LifeData) -> None:
        self._data = data
        self._per_unit = 1.0 / max(data._prepared.total_units, 1e-300)
        self._theta: bytes | None = None
        self._cache: tuple[float, FloatArray, FloatArray] = (0.0, np.zeros(2), np.zeros((2, 2)))

    def _eval(self, theta: FloatArray) -> tuple[float, FloatArray, FloatArray]:
        key = np.asarray(theta, dtype=float).tobytes()
        if key != self._theta:
            v, g, h = log_likelihood(theta, self._data, derivatives=2)
            w = self._per_unit
            self._cache = (-v * w, -g * w, -h * w)
            self._theta = key
        return self._cache

    def fun(self, theta: FloatArray) -> float:
        return self._eval(theta)[0]

    def jac(self, theta: FloatArray) -> FloatArray:
        return self._eval(theta)[1]

    def hess(self, theta: FloatArray) -> FloatArray:
        return self._eval(theta)[2]


@dataclass(frozen=True)
class WeibullFitter:
    """Maximum-likelihood Weibull fitter for grouped, censored life data.

    Settings:
      confidence_level: level of the Wald bounds on the returned fit.
      min_returns: fewer returns (exact + interval counts) raise InsufficientDataError.
      require_suspensions: warranty data without units still in service usually means missing
        shipment data, so it raises InsufficientDataError; set False for complete life tests.
      gradient_tolerance: largest accepted |gradient of log-likelihood| / units at the estimate.
      max_iterations: optimiser iterations per starting point.
      max_condition: largest accepted condition number of the observed information scaled to
        unit diagonal (i.e. of the correlation matrix of the estimates): (1+|rho|)/(1-|rho|).
      scale_ratio_limit, max_log_scale_se: a scale beyond scale_ratio_limit x the largest age
        together with a standard error of log scale above max_log_scale_se is treated as not
        identifiable from the data.
      shape_limits: estimates of shape outside these are reported as not converged.
      raise_on_failure: raise FitNotConvergedError (default) or return the best attempt with
        converged=False (its covariance, and so every bound, is NaN).
    """

    confidence_level: float = 0.95
    min_returns: float = 5
    require_suspensions: bool = True
    gradient_tolerance: float = 1e-6
    max_iterations: int = 100
    max_condition: float = 1e6
    scale_ratio_limit: float = 1e3
    max_log_scale_se: float = 1.0
    shape_limits: tuple[float, float] = (0.02, 50.0)
    raise_on_failure: bool = True

    # Starting shapes, tried in turn until a fit passes its checks: the exponential first.
    _START_SHAPES = (1.0, 0.5, 2.0, 4.0, 0.25)

    def __post_init__(self) -> None:
        if not 0.0 < self.confidence_level < 1.0:
            raise ValueError(f"confidence_level must lie in (0, 1), got {self.confidence_level!r}")
        if self.min_returns < 0 or self.max_iterations < 1:
            raise ValueError("min_returns must be >= 0 and max_iterations >= 1")
        if not 0.0 < self.shape_limits[0] < self.shape_limits[1]:
            raise ValueError(f"shape_limits must be increasing and positive, got {self.shape_limits!r}")

    def fit(self, data: LifeData) -> WeibullFit:
        """Fit shape and scale by maximum likelihood; ages in the data's unit."""
        self._check_data(data)
        objective = _Objective(data)
        attempts: list[_Attempt] = []
        for log_scale, log_shape in self._starts(data):
            attempt = self._optimise(objective, data, np.array([log_scale, log_shape]))
            attempts.append(attempt)
            if not attempt.problems:
                break
            logger.debug("fit attempt from shape %.3g failed: %s", math.exp(log_shape), attempt.problems)
        best = next((a for a in attempts if not a.problems), None)
        if best is None:
            best = max(attempts, key=lambda a: a.value if np.isfinite(a.value) else -np.inf)
            message = self._failure_message(data, best)
            if self.raise_on_failure:
                raise FitNotConvergedError(message)
            logger.warning("%s", message)
        result = self._result(data, best)
        logger.debug(
            "Weibull fit: shape %.6g scale %.6g loglik %.6f in %d iterations",
            result.shape,
            result.scale,
            result.log_likelihood,
            result.iterations,
        )
        return result

    # -- steps --------------------------------------------------------------------------------

    def _check_data(self, data: LifeData) -> None:
        n_returns = data.n_returns
        if n_returns < self.min_returns or n_returns <= 0:
            raise InsufficientDataError(
                f"{n_returns:g} returns, fewer than the {self.min_returns:g} needed for a Weibull fit; "
                "pool cohorts or fix the shape from engineering experience"
            )
        if data.max_age <= 0.0:
            raise InsufficientDataError("no exposure: every unit has age 0")
        if self.require_suspensions and data.n_suspensions <= 0:
            raise InsufficientDataError(
                "no suspensions (units still in service): a fit would treat every unit as returned; "
                "supply the surviving units, or set require_suspensions=False for complete life-test data"
            )

    def _starts(self, data: LifeData) -> list[tuple[float, float]]:
        """Starting points: for each shape, the scale maximising the likelihood with interval
        returns at their midpoints (for shape 1 that is the exponential MLE exposure / returns)."""
        ages = np.concatenate(
            [data.exact_ages, 0.5 * (data.interval_lower + data.interval_upper), data.suspension_ages]
        )
        counts = np.concatenate([data.exact_counts, data.interval_counts, data.suspension_counts])
        keep = (counts > 0) & (ages > 0)
        log_ages, counts = np.log(ages[keep]), counts[keep]
        log_returns = math.log(data.n_returns)
        starts = []
        for shape in self._START_SHAPES:
            # log scale = (log sum c t^k - log n) / k, via logsumexp (no overflow)
            log_exposure = float(special.logsumexp(shape * log_ages, b=counts))
            starts.append(((log_exposure - log_returns) / shape, math.log(shape)))
        return starts

    def _optimise(self, objective: _Objective, data: LifeData, theta0: FloatArray) -> _Attempt:
        # Stop early once the shape runs far outside its plausible range (a diverging fit).
        log_lo, log_hi = math.log(self.shape_limits[0] / 10.0), math.log(self.shape_limits[1] * 10.0)

        def stop_if_diverging(intermediate_result: optimize.OptimizeResult) -> None:
            if not log_lo <= intermediate_result.x[1] <= log_hi:
                raise StopIteration

        result = optimize.minimize(
            objective.fun,
            theta0,
            jac=objective.jac,
            hess=objective.hess,
            method="trust-exact",
            callback=stop_if_diverging,
            options={"gtol": 1e-3 * self.gradient_tolerance, "maxiter": self.max_iterations},
        )
        theta = np.asarray(result.x, dtype=float)
        value, gradient, hessian = log_likelihood(theta, data, derivatives=2)
        problems = self._check_end_point(data, theta, value, gradient, hessian)
        if not result.success and problems:
            problems = (f"optimiser: {str(result.message).rstrip('.')}",) + problems
        return _Attempt(theta, value, gradient, hessian, int(result.nit), problems)

    def _check_end_point(
        self, data: LifeData, theta: FloatArray, value: float, gradient: FloatArray, hessian: FloatArray
    ) -> tuple[str, ...]:
        if not (np.all(np.isfinite(theta)) and np.isfinite(value)):
            return ("estimates or log-likelihood not finite",)
        if not (np.all(np.isfinite(gradient)) and np.all(np.isfinite(hessian))):
            return ("gradient or Hessian not finite at the estimate",)
        problems = []
        units = data._prepared.total_units
        grad_norm = float(np.linalg.norm(gradient)) / units
        if grad_norm > self.gradient_tolerance:
            problems.append(f"gradient norm per unit {grad_norm:.2e} above {self.gradient_tolerance:.1e}")
        information = -hessian
        diag = np.diag(information)
        if np.any(diag <= 0.0):
            problems.append("observed information not positive definite (flat or saddle likelihood)")
            return tuple(problems)
        scaled = information / np.sqrt(np.outer(diag, diag))
        eig = np.linalg.eigvalsh(scaled)
        if eig[0] <= 0.0:
            problems.append("observed information not positive definite (flat or saddle likelihood)")
            return tuple(problems)
        condition = eig[-1] / eig[0]
        if condition > self.max_condition:
            problems.append(
                f"observed information ill-conditioned (condition {condition:.2e}): shape and scale "
                "cannot be told apart from these data"
            )
            return tuple(problems)
        covariance = np.linalg.inv(information)
        decrement = float(gradient @ covariance @ gradient)
        if decrement > 1e-8:
            problems.append(f"not at a maximum (Newton decrement {decrement:.2e} log-likelihood units)")
        shape, scale = math.exp(theta[1]), math.exp(theta[0])
        lo, hi = self.shape_limits
        if not lo <= shape <= hi:
            problems.append(f"shape {shape:.3g} outside the plausible range [{lo:g}, {hi:g}]")
        se_log_scale = math.sqrt(covariance[0, 0])
        if scale > self.scale_ratio_limit * data.max_age and se_log_scale > self.max_log_scale_se:
            problems.append(
                f"scale {scale:.3g} is over {self.scale_ratio_limit:g} x the largest age "
                f"{data.max_age:g} with standard error of log scale {se_log_scale:.2g}: "
                "the data sit deep in the lower tail and the scale is near-unidentifiable"
            )
        return tuple(problems)

    def _failure_message(self, data: LifeData, attempt: _Attempt) -> str:
        hints = ["fix the shape from engineering experience"]
        if data.n_returns < 20:
            hints.append(f"too few returns ({data.n_returns:g})")
        e, i = data.exact_counts > 0, data.interval_counts > 0
        return_times = np.concatenate(
            [
                np.column_stack([data.exact_ages[e], data.exact_ages[e]]),
                np.column_stack([data.interval_lower[i], data.interval_upper[i]]),
            ]
        )
        if np.unique(return_times, axis=0).shape[0] == 1:
            hints.append("returns all in one month (or at one age): the shape is not identifiable")
        hints.append("pool cohorts to widen the range of ages")
        return "Weibull fit not converged: " + "; ".join(attempt.problems) + ". Hints: " + "; ".join(hints)

    def _result(self, data: LifeData, attempt: _Attempt) -> WeibullFit:
        converged = not attempt.problems
        if converged:
            covariance = np.linalg.inv(-attempt.hessian)
            covariance = 0.5 * (covariance + covariance.T)
        else:  # no bounds from a fit that failed its checks
            covariance = np.full((2, 2), np.nan)
        covariance.setflags(write=False)
        return WeibullFit(
            shape=math.exp(attempt.theta[1]),
            scale=math.exp(attempt.theta[0]),
            log_likelihood=float(attempt.value),
            covariance=covariance,
            converged=converged,
            iterations=attempt.iterations,
            gradient_norm=float(np.linalg.norm(attempt.gradient)) / data._prepared.total_units,
            n_returns=data.n_returns,
            n_suspensions=data.n_suspensions,
            confidence_level=self.confidence_level,
        )
