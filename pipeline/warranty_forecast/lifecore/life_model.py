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
returning a `WeibullFit`; failures raise typed `FitError` subclasses with hints
(`UnidentifiableError` when the likelihood is flat and only a fixed shape will do).
`WeibullFitter.fit_fixed_shape` estimates the scale alone for a shape given from experience.

Bounds
------
`WeibullFit` carries Wald bounds (log scale, delta method). `profile_bounds` and
`likelihood_ratio_bounds` give likelihood-ratio (profile likelihood) bounds of shape, scale,
B-lives and F(t): each quantity is made a coordinate by reparameterising theta, the other
coordinate is maximised out by 1-D Newton, and the ends are found by bracketing and brentq.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from types import MappingProxyType
from typing import TYPE_CHECKING, Literal, NamedTuple, overload

import numpy as np
import numpy.typing as npt
from scipy import optimize, special, stats

from warranty_forecast.errors import FitError

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


class UnidentifiableError(FitNotConvergedError):
    """The likelihood is (near-)flat: these data cannot identify shape and scale together.

    Raised instead of the plain FitNotConvergedError when the end point's checks find a flat or
    saddle likelihood, ill-conditioned information, a runaway scale far beyond the data, or a
    shape running off to its plausible limits. The usual remedy is `WeibullFitter.fit_fixed_shape`
    with a shape from engineering experience.
    """


class ProfileLikelihoodError(FitError):
    """A profile likelihood could not be maximised reliably, so no likelihood-ratio bound is given."""


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
class PreparedRows:
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
    def returns_at_one_time(self) -> bool:
        """True when every return (positive count) shares one exact age or one interval."""
        e, i = self.exact_counts > 0, self.interval_counts > 0
        return_times = np.concatenate(
            [
                np.column_stack([self.exact_ages[e], self.exact_ages[e]]),
                np.column_stack([self.interval_lower[i], self.interval_upper[i]]),
            ]
        )
        return np.unique(return_times, axis=0).shape[0] == 1

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
    def _distinct(self) -> LifeData:
        """Same data with identical rows merged (counts summed) and zero-count rows dropped.

        Same likelihood up to rounding, fewer rows: grouped warranty data repeat each month in
        service once per build month. Used by the profile-likelihood bounds (many evaluations).
        """

        def merge(columns: list[FloatArray], counts: FloatArray) -> tuple[list[FloatArray], FloatArray]:
            keep = counts > 0.0
            if not np.any(keep):
                return [c[:0] for c in columns], counts[:0]
            rows, inverse = np.unique(np.column_stack([c[keep] for c in columns]), axis=0, return_inverse=True)
            return list(rows.T), np.bincount(inverse.ravel(), weights=counts[keep], minlength=rows.shape[0])

        (exact_ages,), exact_counts = merge([self.exact_ages], self.exact_counts)
        (lower, upper), interval_counts = merge([self.interval_lower, self.interval_upper], self.interval_counts)
        (suspension_ages,), suspension_counts = merge([self.suspension_ages], self.suspension_counts)
        return LifeData(
            exact_ages=exact_ages,
            exact_counts=exact_counts,
            interval_lower=lower,
            interval_upper=upper,
            interval_counts=interval_counts,
            suspension_ages=suspension_ages,
            suspension_counts=suspension_counts,
        )

    @cached_property
    def prepared(self) -> PreparedRows:
        """Positive-count rows with log ages, computed once per data set (shared by every family)."""
        e = self.exact_counts > 0
        i = self.interval_counts > 0
        open_left = i & (self.interval_lower == 0.0)
        closed = i & (self.interval_lower > 0.0)
        s = (self.suspension_counts > 0) & (self.suspension_ages > 0.0)  # age-0 suspensions: log R = 0
        total = float(
            self.exact_counts[e].sum() + self.interval_counts[i].sum() + self.suspension_counts[s].sum()
        )
        return PreparedRows(
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
    rows = data.prepared

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


def _bounded_exp(x: float) -> float:
    """exp(x), saturating at the largest double instead of raising OverflowError for absurd estimates."""
    return math.exp(min(float(x), 709.0))


def _z_quantile(confidence_level: float) -> float:
    return float(stats.norm.ppf(0.5 + 0.5 * confidence_level))


@dataclass(frozen=True, eq=False)
class WeibullFit:
    """A fitted Weibull life model (scale form; ages in the data's unit, e.g. months in service).

    `covariance` is the inverse observed information in theta = (log scale, log shape); all
    bounds are Wald bounds on a log scale (delta method) at `confidence_level`. `gradient_norm`
    is the Euclidean norm of the log-likelihood gradient in theta divided by the number of units.
    With `shape_fixed` the shape was given, not estimated (`WeibullFitter.fit_fixed_shape`): the
    variance of log shape is 0, the shape bounds are (shape, shape) and every other bound reflects
    the uncertainty of the scale alone. Likelihood-ratio bounds: `profile_bounds`,
    `likelihood_ratio_bounds`.
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
    shape_fixed: bool = False

    @property
    def bound_method(self) -> str:
        """How the bounds of this fit are computed: "wald-log", or "wald-log, shape fixed"."""
        return "wald-log, shape fixed" if self.shape_fixed else "wald-log"

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
        """Wald bounds of shape, symmetric in log shape; (shape, shape) when the shape was fixed."""
        if self.shape_fixed:
            return self.shape, self.shape
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
        """Table of shape, scale, rate, B1, B10 and mean with Wald bounds (ages in data units).

        With a fixed shape, the shape row's bound_method is "fixed" and the others say "shape fixed".
        """
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
                "bound_method": [
                    "fixed" if self.shape_fixed and name == "shape" else self.bound_method for name in rows
                ],
            },
            index=pd.Index(list(rows), name="quantity"),
        )


# ---------------------------------------------------------------------------------------------
# Fitter
# ---------------------------------------------------------------------------------------------


class _Problem(NamedTuple):
    """One failed check of an end point (internal); `unidentifiable` marks a flat likelihood."""

    text: str
    unidentifiable: bool = False


@dataclass(frozen=True)
class _Attempt:
    """One optimiser run and the checks of its end point (internal)."""

    theta: FloatArray
    value: float
    gradient: FloatArray
    hessian: FloatArray
    iterations: int
    problems: tuple[_Problem, ...]


class _Objective:
    """-log-likelihood / units for scipy, computing value, gradient and Hessian once per theta."""

    def __init__(self, data: LifeData) -> None:
        self._data = data
        self._per_unit = 1.0 / max(data.prepared.total_units, 1e-300)
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
      raise_on_failure: raise FitNotConvergedError (default; its subclass UnidentifiableError when
        the likelihood is flat: ill-conditioned or singular information, runaway scale or shape) or
        return the best attempt with converged=False (its covariance, and so every bound, is NaN).

    `fit` estimates shape and scale; `fit_fixed_shape` estimates the scale with the shape given.
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
            logger.debug(
                "fit attempt from shape %.3g failed: %s",
                math.exp(log_shape),
                "; ".join(p.text for p in attempt.problems),
            )
        best = next((a for a in attempts if not a.problems), None)
        if best is None:
            best = max(attempts, key=lambda a: a.value if np.isfinite(a.value) else -np.inf)
            message = self._failure_message(data, best)
            if self.raise_on_failure:
                if any(p.unidentifiable for p in best.problems):
                    raise UnidentifiableError(message)
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

    def fit_fixed_shape(self, data: LifeData, shape: float) -> WeibullFit:
        """Fit the scale alone by maximum likelihood with the shape given (e.g. from engineering
        experience), for thin data that cannot identify both; ages in the data's unit.

        Log scale is found by 1-D Newton on the analytic derivatives; its Wald bound uses the 1-D
        observed information. The fit has shape_fixed=True: variance of log shape 0, shape bounds
        (shape, shape); B-life and F(t) bounds then follow from the scale alone.

        min_returns does not apply (one return suffices once the shape is fixed), but zero returns
        raise InsufficientDataError: with no returns the likelihood rises without limit as the scale
        grows, so no maximum-likelihood scale exists (a bound on F(t) from zero returns is a
        different calculation, left to the caller). No exposure, and no suspensions when
        require_suspensions, raise as in `fit`. A shape outside shape_limits raises ValueError.
        """
        lo, hi = self.shape_limits
        if not (math.isfinite(shape) and lo <= shape <= hi):
            raise ValueError(f"fixed shape must be finite and within shape_limits [{lo:g}, {hi:g}], got {shape!r}")
        if data.n_returns <= 0:
            raise InsufficientDataError(
                "0 returns: with the shape fixed the likelihood keeps rising as the scale grows, so no "
                "maximum-likelihood scale exists; report no returns rather than a fitted scale"
            )
        self._check_data(data, min_returns=0.0)
        log_shape = math.log(shape)
        ((log_scale0, _),) = self._starts(data, (shape,))
        units = data.prepared.total_units

        def scale_direction(a: float) -> tuple[float, float, float]:
            value, gradient, hessian = log_likelihood((a, log_shape), data, derivatives=2)
            return value, float(gradient[0]), float(hessian[0, 0])

        # z = shape * (log t - log scale): the natural step in log scale is 1 / shape
        reach = 50.0 + 50.0 / shape
        best = _maximise_1d(
            scale_direction, log_scale0, log_scale0 - reach, log_scale0 + reach, max_step=2.0 / shape
        )
        value, d1, d2 = best.values[:3]
        problems: list[_Problem] = []
        if not (best.converged and math.isfinite(value) and math.isfinite(d1) and math.isfinite(d2)):
            problems.append(_Problem("the 1-D search for the scale did not converge"))
        elif abs(d1) / units > self.gradient_tolerance:
            problems.append(_Problem(f"gradient per unit {abs(d1) / units:.2e} above {self.gradient_tolerance:.1e}"))
        if math.isfinite(d2) and not d2 < 0.0:
            problems.append(_Problem("information of log scale not positive (flat likelihood)", True))
        elif best.at_bound:
            problems.append(_Problem("the scale ran off to the edge of its search range", True))
        converged = not problems
        if not converged:
            message = (
                f"Weibull fit with shape fixed at {shape:g} not converged: "
                + "; ".join(p.text for p in problems)
                + ". Hints: check the exposure (suspensions) and the returns' ages"
            )
            if self.raise_on_failure:
                raise (UnidentifiableError if any(p.unidentifiable for p in problems) else FitNotConvergedError)(
                    message
                )
            logger.warning("%s", message)
            covariance = np.full((2, 2), np.nan)
        else:
            covariance = np.array([[-1.0 / d2, 0.0], [0.0, 0.0]])
        covariance.setflags(write=False)
        result = WeibullFit(
            shape=shape,
            scale=math.exp(best.x),
            log_likelihood=float(value),
            covariance=covariance,
            converged=converged,
            iterations=best.iterations,
            gradient_norm=abs(d1) / units,
            n_returns=data.n_returns,
            n_suspensions=data.n_suspensions,
            confidence_level=self.confidence_level,
            shape_fixed=True,
        )
        logger.debug(
            "Weibull fit with fixed shape %.6g: scale %.6g loglik %.6f in %d iterations",
            shape,
            result.scale,
            result.log_likelihood,
            result.iterations,
        )
        return result

    # -- steps --------------------------------------------------------------------------------

    def _check_data(self, data: LifeData, min_returns: float | None = None) -> None:
        n_returns = data.n_returns
        needed = self.min_returns if min_returns is None else min_returns
        if n_returns < needed or n_returns <= 0:
            raise InsufficientDataError(
                f"{n_returns:g} returns, fewer than the {needed:g} needed for a Weibull fit; "
                "pool cohorts or fix the shape from engineering experience"
            )
        if data.max_age <= 0.0:
            raise InsufficientDataError("no exposure: every unit has age 0")
        if self.require_suspensions and data.n_suspensions <= 0:
            raise InsufficientDataError(
                "no suspensions (units still in service): a fit would treat every unit as returned; "
                "supply the surviving units, or set require_suspensions=False for complete life-test data"
            )

    def _starts(self, data: LifeData, shapes: tuple[float, ...] = _START_SHAPES) -> list[tuple[float, float]]:
        """Starting points (log scale, log shape): for each shape, the scale maximising the likelihood
        with interval returns at their midpoints (for shape 1 the exponential MLE exposure / returns)."""
        ages = np.concatenate(
            [data.exact_ages, 0.5 * (data.interval_lower + data.interval_upper), data.suspension_ages]
        )
        counts = np.concatenate([data.exact_counts, data.interval_counts, data.suspension_counts])
        keep = (counts > 0) & (ages > 0)
        log_ages, counts = np.log(ages[keep]), counts[keep]
        log_returns = math.log(data.n_returns)
        starts = []
        for shape in shapes:
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
            problems = (_Problem(f"optimiser: {str(result.message).rstrip('.')}"),) + problems
        return _Attempt(theta, value, gradient, hessian, int(result.nit), problems)

    def _check_end_point(
        self, data: LifeData, theta: FloatArray, value: float, gradient: FloatArray, hessian: FloatArray
    ) -> tuple[_Problem, ...]:
        if not (np.all(np.isfinite(theta)) and np.isfinite(value)):
            return (_Problem("estimates or log-likelihood not finite"),)
        if not (np.all(np.isfinite(gradient)) and np.all(np.isfinite(hessian))):
            return (_Problem("gradient or Hessian not finite at the estimate"),)
        problems = []
        units = data.prepared.total_units
        grad_norm = float(np.linalg.norm(gradient)) / units
        if grad_norm > self.gradient_tolerance:
            problems.append(_Problem(f"gradient norm per unit {grad_norm:.2e} above {self.gradient_tolerance:.1e}"))
        information = -hessian
        diag = np.diag(information)
        flat = _Problem("observed information not positive definite (flat or saddle likelihood)", True)
        if np.any(diag <= 0.0):
            problems.append(flat)
            return tuple(problems)
        scaled = information / np.sqrt(np.outer(diag, diag))
        eig = np.linalg.eigvalsh(scaled)
        if eig[0] <= 0.0:
            problems.append(flat)
            return tuple(problems)
        condition = eig[-1] / eig[0]
        if condition > self.max_condition:
            problems.append(
                _Problem(
                    f"observed information ill-conditioned (condition {condition:.2e}): shape and scale "
                    "cannot be told apart from these data",
                    True,
                )
            )
            return tuple(problems)
        covariance = np.linalg.inv(information)
        decrement = float(gradient @ covariance @ gradient)
        if decrement > 1e-8:
            problems.append(_Problem(f"not at a maximum (Newton decrement {decrement:.2e} log-likelihood units)"))
        shape, scale = _bounded_exp(theta[1]), _bounded_exp(theta[0])
        lo, hi = self.shape_limits
        if not lo <= shape <= hi:
            # the likelihood keeps rising towards a shape limit: flat in the direction that matters
            problems.append(_Problem(f"shape {shape:.3g} outside the plausible range [{lo:g}, {hi:g}]", True))
        se_log_scale = math.sqrt(covariance[0, 0])
        if scale > self.scale_ratio_limit * data.max_age and se_log_scale > self.max_log_scale_se:
            problems.append(
                _Problem(
                    f"scale {scale:.3g} is over {self.scale_ratio_limit:g} x the largest age "
                    f"{data.max_age:g} with standard error of log scale {se_log_scale:.2g}: "
                    "the data sit deep in the lower tail and the scale is near-unidentifiable",
                    True,
                )
            )
        return tuple(problems)

    def _failure_message(self, data: LifeData, attempt: _Attempt) -> str:
        hints = ["fix the shape from engineering experience"]
        if data.n_returns < 20:
            hints.append(f"too few returns ({data.n_returns:g})")
        if data.returns_at_one_time:
            hints.append("returns all in one month (or at one age): the shape is not identifiable")
        hints.append("pool cohorts to widen the range of ages")
        problems = "; ".join(p.text for p in attempt.problems)
        return "Weibull fit not converged: " + problems + ". Hints: " + "; ".join(hints)

    def _result(self, data: LifeData, attempt: _Attempt) -> WeibullFit:
        converged = not attempt.problems
        if converged:
            covariance = np.linalg.inv(-attempt.hessian)
            covariance = 0.5 * (covariance + covariance.T)
        else:  # no bounds from a fit that failed its checks
            covariance = np.full((2, 2), np.nan)
        covariance.setflags(write=False)
        return WeibullFit(
            shape=_bounded_exp(attempt.theta[1]),
            scale=_bounded_exp(attempt.theta[0]),
            log_likelihood=float(attempt.value),
            covariance=covariance,
            converged=converged,
            iterations=attempt.iterations,
            gradient_norm=float(np.linalg.norm(attempt.gradient)) / data.prepared.total_units,
            n_returns=data.n_returns,
            n_suspensions=data.n_suspensions,
            confidence_level=self.confidence_level,
        )


# ---------------------------------------------------------------------------------------------
# One-dimensional maximisation (fixed-shape fit, profile likelihood)
# ---------------------------------------------------------------------------------------------

# A 1-D maximum is accepted once the Newton decrement d1^2 / -d2 (twice the log-likelihood still
# to gain) is below this; the profile value is then exact to ~1e-11 log-likelihood units.
_DECREMENT_TOL = 1e-10
_MAX_NEWTON_STEPS = 60


class _Max1D(NamedTuple):
    """Result of `_maximise_1d` (internal): the maximiser, fun's tuple there, and how it ended."""

    x: float
    values: tuple[float, ...]
    iterations: int
    converged: bool
    at_bound: bool


def _maximise_1d(
    fun: Callable[[float], tuple[float, ...]],
    x0: float,
    lower: float,
    upper: float,
    *,
    max_step: float = 2.0,
) -> _Max1D:
    """Maximise fun(x)[0] over lower <= x <= upper, where fun returns (value, d1, d2, ...).

    Damped Newton from x0 (steps capped at max_step, halved until the value does not fall); a
    maximum on a bound with the slope pointing out of the range is accepted (at_bound). If Newton
    fails (non-finite values, no ascent, no convergence) a bounded scalar search is the fallback.
    """
    x = min(max(x0, lower), upper)
    current = fun(x)
    for iteration in range(_MAX_NEWTON_STEPS):
        value, d1, d2 = current[:3]
        if not (math.isfinite(value) and math.isfinite(d1) and math.isfinite(d2)):
            break
        if d2 < 0.0:
            step = -d1 / d2
            if d1 * step < _DECREMENT_TOL:
                return _Max1D(x, current, iteration, True, False)
        elif d1 != 0.0:
            step = math.copysign(max_step, d1)  # not locally concave: move uphill
        else:
            break
        step = min(max(step, -max_step), max_step)
        x_new = min(max(x + step, lower), upper)
        if x_new == x:  # on a bound and pushed outwards (or a step below the spacing of floats)
            return _Max1D(x, current, iteration, True, x in (lower, upper))
        floor = value - 1e-12 * (1.0 + abs(value))  # rounding of the summed log-likelihood
        for _ in range(50):
            candidate = fun(x_new)
            if math.isfinite(candidate[0]) and candidate[0] >= floor:
                break
            x_new = x + 0.5 * (x_new - x)
        else:
            break
        x, current = x_new, candidate
    # fallback: bounded Brent search on the values alone, then check the slope at its answer
    logger.debug("1-D Newton failed from %.6g in [%.6g, %.6g]; bounded search", x0, lower, upper)

    def negative(v: float) -> float:
        value = fun(v)[0]
        return -value if math.isfinite(value) else math.inf

    found = optimize.minimize_scalar(
        negative, bounds=(lower, upper), method="bounded", options={"xatol": 1e-12 * (1.0 + abs(x0)), "maxiter": 500}
    )
    x = float(found.x)
    current = fun(x)
    value, d1, d2 = current[:3]
    at_bound = min(x - lower, upper - x) < 1e-6 * (upper - lower)
    ok = bool(found.success) and math.isfinite(value) and (at_bound or (d2 < 0.0 and d1 * d1 / -d2 < 1e-6))
    return _Max1D(x, current, _MAX_NEWTON_STEPS + int(found.nfev), ok, at_bound)


# ---------------------------------------------------------------------------------------------
# Likelihood-ratio (profile likelihood) bounds
# ---------------------------------------------------------------------------------------------

Quantity = Literal["shape", "scale", "b_life", "cdf"]

# Shapes the profile search considers (ends beyond them count as not bounded by the data).
_PROFILE_SHAPE_LIMITS = (1e-3, 1e3)
# How far from the estimate an end is sought, in log units of shape, scale or B-life, and in
# u = log(-log R(t)) for F(t) (a factor of 1e6 either way); an end not reached is unbounded.
_PROFILE_LOG_RANGE = math.log(1e6)
# Largest accepted rise of a profile above the fit's maximum (log-likelihood units), and largest
# accepted miss of the deviance at a returned end (the root finder aims at ~1e-9).
_ABOVE_MAXIMUM_TOL = 1e-6
_END_DEVIANCE_TOL = 1e-5


class _Profile:
    """Profile log-likelihood of one quantity psi of a fit (internal).

    psi is log shape, log scale, log t_p (B-life) or u = log(-log R(t)) = shape*(log t - log scale).
    The nuisance s is log scale when psi is log shape; otherwise s is log shape and
        theta = (log scale, log shape) = (c - d * exp(-s), s)
    with c = psi, d = 0 (scale); c = psi, d = log(-log1p(-p)) (B-life, since log scale =
    log t_p - log(-log(1-p)) / shape); c = log t, d = psi (F(t), log scale = log t - u / shape).
    The derivatives in s follow from those in theta by the chain rule. For a fixed-shape fit there
    is no nuisance: only psi = log scale is profiled (the 1-D likelihood at the fixed shape).
    """

    def __init__(
        self,
        fit: WeibullFit,
        data: LifeData,
        quantity: Quantity,
        log_lik_max: float,
        hessian_at_fit: FloatArray,
        *,
        p: float | None = None,
        t: float | None = None,
    ) -> None:
        self.data = data
        self.quantity = quantity
        self.fixed_shape = fit.shape_fixed
        self.log_lik_max = log_lik_max
        a_hat, b_hat = (float(v) for v in fit.theta)
        k = fit.shape
        self.log_shape_fixed = b_hat
        self.c, self.d = 0.0, 0.0
        self.dc, self.dd = 1.0, 0.0  # d(c, d) / d psi
        if quantity == "shape":
            psi_hat, s_hat, gradient = b_hat, a_hat, (0.0, 1.0)
        elif quantity == "scale":
            psi_hat, s_hat, gradient = a_hat, b_hat, (1.0, 0.0)
        elif quantity == "b_life":
            assert p is not None
            self.d = float(np.log(-np.log1p(-p)))
            psi_hat, s_hat, gradient = a_hat + self.d / k, b_hat, (1.0, -self.d / k)
        else:
            assert t is not None
            self.c, self.dc, self.dd = math.log(t), 0.0, 1.0
            psi_hat = k * (self.c - a_hat)
            s_hat, gradient = b_hat, (-k, psi_hat)
        self.psi_hat = psi_hat
        g = np.asarray(gradient)
        self.se = math.sqrt(max(float(g @ fit.covariance @ g), 0.0))
        # nuisance bounds: log shape within the profile limits; log scale effectively free
        if quantity == "shape":
            self.s_bounds = (s_hat - 1e5, s_hat + 1e5)
        else:
            self.s_bounds = (math.log(_PROFILE_SHAPE_LIMITS[0]), math.log(_PROFILE_SHAPE_LIMITS[1]))
        # solved points (psi, s*, ds*/dpsi) for warm starts; slope at the fit by the implicit
        # function theorem, ds*/dpsi = -l_{s psi} / l_{ss} (the gradient is 0 at the maximum)
        _, d2, cross = self._derivatives_from(np.zeros(2), hessian_at_fit, psi_hat, s_hat)
        slope = -cross / d2 if d2 < 0.0 else 0.0
        self._solved: list[tuple[float, float, float]] = [(psi_hat, s_hat, slope)]
        self._values: dict[float, float] = {psi_hat: log_lik_max}
        self.evaluations = 0

    # -- theta and derivatives along the nuisance -----------------------------------------------

    def theta(self, psi: float, s: float) -> tuple[float, float]:
        if self.quantity == "shape":
            return s, psi
        c = psi if self.dc else self.c
        d = psi if self.dd else self.d
        return c - d * math.exp(-s), s

    def _derivatives_from(
        self, gradient: FloatArray, hessian: FloatArray, psi: float, s: float
    ) -> tuple[float, float, float]:
        """(dl/ds, d2l/ds2, d2l/ds dpsi) from the theta-gradient and Hessian (chain rule)."""
        if self.quantity == "shape":
            return float(gradient[0]), float(hessian[0, 0]), float(hessian[0, 1])
        g0, g1 = float(gradient[0]), float(gradient[1])
        h00, h01, h11 = float(hessian[0, 0]), float(hessian[0, 1]), float(hessian[1, 1])
        e = math.exp(-s)
        d = psi if self.dd else self.d
        m = d * e  # d(log scale)/ds; d2(log scale)/ds2 = -m
        d1 = g0 * m + g1
        d2 = h00 * m * m + 2.0 * h01 * m + h11 - g0 * m
        d_log_scale_d_psi = self.dc - self.dd * e
        cross = (h00 * m + h01) * d_log_scale_d_psi + g0 * self.dd * e
        return d1, d2, cross

    def _along_nuisance(self, psi: float, s: float) -> tuple[float, float, float, float]:
        self.evaluations += 1
        value, gradient, hessian = log_likelihood(self.theta(psi, s), self.data, derivatives=2)
        return (value, *self._derivatives_from(gradient, hessian, psi, s))

    # -- the profile ----------------------------------------------------------------------------

    def __call__(self, psi: float) -> float:
        """Maximum of the log-likelihood over the nuisance with the quantity held at psi."""
        cached = self._values.get(psi)
        if cached is not None:
            return cached
        if self.fixed_shape:
            self.evaluations += 1
            value = float(log_likelihood((psi, self.log_shape_fixed), self.data))
        else:
            psi_n, s_n, slope_n = min(self._solved, key=lambda r: abs(r[0] - psi))
            s0 = s_n + slope_n * (psi - psi_n)
            max_step = 2.0 / math.exp(psi) if self.quantity == "shape" else 2.0
            best = _maximise_1d(lambda s: self._along_nuisance(psi, s), s0, *self.s_bounds, max_step=max_step)
            value, _, d2, cross = best.values
            if not (best.converged and math.isfinite(value)):
                raise ProfileLikelihoodError(
                    f"profile likelihood of {self.quantity} could not be maximised over the nuisance "
                    f"parameter at {self._describe(psi)}; the likelihood-ratio bound is not available"
                )
            if best.at_bound:
                logger.debug("profile of %s at %s: nuisance shape at its limit", self.quantity, self._describe(psi))
            self._solved.append((psi, best.x, -cross / d2 if d2 < 0.0 and not best.at_bound else 0.0))
        if value > self.log_lik_max + _ABOVE_MAXIMUM_TOL * (1.0 + 1e-6 * abs(self.log_lik_max)):
            raise ProfileLikelihoodError(
                f"profile likelihood of {self.quantity} at {self._describe(psi)} is {value:.9g}, above the fit's "
                f"maximum {self.log_lik_max:.9g}: the fit is not at the global maximum; refit"
            )
        self._values[psi] = value
        return value

    def _describe(self, psi: float) -> str:
        names = {"shape": "log shape", "scale": "log scale", "b_life": "log B-life", "cdf": "u = log(-log R)"}
        return f"{names[self.quantity]} {psi:.6g}"

    def search_limits(self) -> tuple[float, float]:
        """Range of psi searched for the ends (beyond it an end counts as unbounded)."""
        lo, hi = self.psi_hat - _PROFILE_LOG_RANGE, self.psi_hat + _PROFILE_LOG_RANGE
        if self.quantity == "shape":
            lo = max(lo, math.log(_PROFILE_SHAPE_LIMITS[0]))
            hi = min(hi, math.log(_PROFILE_SHAPE_LIMITS[1]))
        return lo, hi


class _Ends(NamedTuple):
    """Ends of a likelihood-ratio interval in psi and whether each was reached (internal)."""

    lower: float
    upper: float
    lower_reached: bool
    upper_reached: bool


def _likelihood_ratio_interval(profile: _Profile, confidence_level: float) -> _Ends:
    """{psi : 2 (loglik_max - profile(psi)) <= chi2_1(level)}, ends by bracketing + brentq.

    brentq runs on the signed root sqrt(2 (loglik_max - profile)) - sqrt(chi2), which has the same
    root as profile - (loglik_max - chi2 / 2) but is nearly linear in psi, so it converges in a few
    steps. Brackets start at the Wald end and grow until the profile drops below the threshold, or
    the search limit is reached (that end is then unbounded: the likelihood is too flat there).
    """
    chi2 = float(stats.chi2.ppf(confidence_level, 1))
    root_chi2 = math.sqrt(chi2)
    psi_hat = profile.psi_hat

    def signed_root_minus_target(psi: float) -> float:
        deviance = 2.0 * (profile.log_lik_max - profile(psi))
        return math.sqrt(max(deviance, 0.0)) - root_chi2

    ends: dict[int, tuple[float, bool]] = {}
    for direction, limit in zip((-1, 1), profile.search_limits()):
        room = abs(limit - psi_hat)
        wald = root_chi2 * profile.se
        distance = min(wald if math.isfinite(wald) and wald > 1e-8 else 0.5, room)
        inside = psi_hat
        reached = False
        x = psi_hat
        while distance > 0.0:
            x = psi_hat + direction * distance
            f = signed_root_minus_target(x)
            if f >= 0.0:
                reached = True
                break
            if distance >= room:
                break
            inside = x
            # the signed root grows about linearly in psi: aim a little beyond its predicted root
            root = f + root_chi2
            factor = 1.1 * root_chi2 / root if root > 0.0 else 4.0
            distance = min(distance * min(max(factor, 1.5), 4.0), room)
        if not reached:
            ends[direction] = (limit, False)
            logger.debug("profile of %s: %s end not reached within the search range", profile.quantity,
                         "lower" if direction < 0 else "upper")
            continue
        width = abs(x - inside)
        root_psi = float(
            optimize.brentq(signed_root_minus_target, min(inside, x), max(inside, x), xtol=1e-10 * width, maxiter=200)
        )
        deviance = 2.0 * (profile.log_lik_max - profile(root_psi))
        if not abs(deviance - chi2) <= _END_DEVIANCE_TOL:
            raise ProfileLikelihoodError(
                f"likelihood-ratio end for {profile.quantity} not found: deviance {deviance:.6g} at "
                f"{profile._describe(root_psi)} instead of {chi2:.6g} (profile not continuous there)"
            )
        ends[direction] = (root_psi, True)
    return _Ends(ends[-1][0], ends[1][0], ends[-1][1], ends[1][1])


def _check_profile_inputs(
    fit: WeibullFit, data: LifeData, confidence_level: float | None
) -> tuple[float, LifeData]:
    """Validate fit, data and level; return the level and the data with identical rows merged."""
    level = fit.confidence_level if confidence_level is None else float(confidence_level)
    if not 0.0 < level < 1.0:
        raise ValueError(f"confidence_level must lie in (0, 1), got {confidence_level!r}")
    if not fit.converged:
        raise FitNotConvergedError("likelihood-ratio bounds need a converged fit; this fit did not converge")
    value = float(log_likelihood(fit.theta, data))
    if not abs(value - fit.log_likelihood) <= 1e-6 + 1e-9 * abs(fit.log_likelihood):
        raise ValueError(
            f"the data give log-likelihood {value:.9g} at the fit, not the fit's {fit.log_likelihood:.9g}: "
            "pass the data the fit was made from"
        )
    return level, data._distinct


def _check_quantity(quantity: str, p: float | None, t: float | None) -> None:
    if quantity not in ("shape", "scale", "b_life", "cdf"):
        raise ValueError(f"quantity must be 'shape', 'scale', 'b_life' or 'cdf', got {quantity!r}")
    if quantity == "b_life":
        if p is None:
            raise ValueError("quantity 'b_life' needs p, the fraction failed (e.g. 0.10 for B10)")
        _check_fraction(p)
    if quantity == "cdf" and not (t is not None and math.isfinite(t) and t > 0.0):
        raise ValueError(f"quantity 'cdf' needs an age t > 0, got {t!r}")


def _to_quantity(
    quantity: Quantity, ends: _Ends, fit: WeibullFit, p: float | None, t: float | None
) -> tuple[tuple[float, float], tuple[bool, bool]]:
    """Map psi ends to the quantity's units, with whether each was reached; unreached ends become
    0 / +inf (F: 0 / 1).

    For a fixed shape psi is log scale throughout, and the B-life (increasing in the scale) and
    F(t) (decreasing in the scale) follow monotonically from the scale ends.
    """
    lo_psi, hi_psi = ends.lower, ends.upper
    lo_ok, hi_ok = ends.lower_reached, ends.upper_reached
    if fit.shape_fixed and quantity == "b_life":
        assert p is not None
        shift = float(np.log(-np.log1p(-p))) / fit.shape  # log t_p = log scale + log(-log(1-p)) / shape
        lo_psi, hi_psi = lo_psi + shift, hi_psi + shift
    elif fit.shape_fixed and quantity == "cdf":
        assert t is not None
        # u = shape * (log t - log scale): decreasing in log scale, so the ends swap
        lo_psi, hi_psi = fit.shape * (math.log(t) - hi_psi), fit.shape * (math.log(t) - lo_psi)
        lo_ok, hi_ok = hi_ok, lo_ok
    if quantity == "cdf":
        # F = 1 - exp(-exp(u)), computed as -expm1(-exp(u))
        lower = -math.expm1(-math.exp(min(lo_psi, _Z_MAX))) if lo_ok else 0.0
        upper = -math.expm1(-math.exp(min(hi_psi, _Z_MAX))) if hi_ok else 1.0
        return (lower, upper), (lo_ok, hi_ok)
    lower = math.exp(lo_psi) if lo_ok else 0.0
    upper = math.exp(hi_psi) if hi_ok else math.inf
    return (lower, upper), (lo_ok, hi_ok)


def _profile_ends(
    fit: WeibullFit,
    data: LifeData,
    quantity: Quantity,
    level: float,
    log_lik_max: float,
    hessian_at_fit: FloatArray,
    p: float | None,
    t: float | None,
) -> tuple[tuple[float, float], tuple[bool, bool]]:
    """Bounds of one quantity in its units and whether each end was reached (internal)."""
    if fit.shape_fixed and quantity == "shape":
        return (fit.shape, fit.shape), (True, True)
    profiled = "scale" if fit.shape_fixed else quantity
    profile = _Profile(fit, data, profiled, log_lik_max, hessian_at_fit, p=p, t=t)
    ends = _likelihood_ratio_interval(profile, level)
    logger.debug("likelihood-ratio bounds of %s: %d log-likelihood evaluations", quantity, profile.evaluations)
    return _to_quantity(quantity, ends, fit, p, t)


def profile_bounds(
    fit: WeibullFit,
    data: LifeData,
    quantity: Quantity,
    *,
    p: float | None = None,
    t: float | None = None,
    confidence_level: float | None = None,
) -> tuple[float, float]:
    """Likelihood-ratio (profile likelihood) bounds (lower, upper) of one quantity of a fit.

    The interval is {psi : 2 (loglik_max - profile loglik(psi)) <= chi2_1 quantile(level)}, level
    defaulting to fit.confidence_level; `data` must be the data the fit was made from.
    quantity: "shape"; "scale" (age units); "b_life" with p, the fraction failed (B10: p = 0.10;
    age units); "cdf" with an age t > 0 (fraction failed F(t)). Each profile reparameterises theta
    so the quantity is a coordinate and maximises over the other (log shape, or log scale for the
    shape) by 1-D Newton. An end the data do not bound within a factor 1e6 of the estimate (shape:
    within [0.001, 1000]) is returned as 0 or +inf (for F: 0 or 1); `likelihood_ratio_bounds`
    flags such ends. For a fixed-shape fit the shape bounds are (shape, shape) and the rest follow
    from the 1-D likelihood-ratio interval of the scale.

    Raises FitNotConvergedError for a fit that did not converge, ProfileLikelihoodError when a
    profile cannot be maximised (or finds a higher maximum than the fit), ValueError for bad input.
    """
    _check_quantity(quantity, p, t)
    level, data = _check_profile_inputs(fit, data, confidence_level)
    log_lik_max, _, hessian = log_likelihood(fit.theta, data, derivatives=2)
    bounds, _ = _profile_ends(fit, data, quantity, level, log_lik_max, hessian, p, t)
    return bounds


def profile_log_likelihood(
    fit: WeibullFit,
    data: LifeData,
    quantity: Quantity,
    value: float,
    *,
    p: float | None = None,
    t: float | None = None,
) -> float:
    """Profile log-likelihood: the largest log-likelihood of `data` with the quantity held at `value`.

    Same quantities and units as `profile_bounds` (shape; scale, B-life t_p in age units; F(t) as
    a fraction in (0, 1)). For a fixed-shape fit the shape stays at its fixed value, so the result
    is the 1-D likelihood at the scale implied by `value` ("shape" is then not allowed).
    """
    _check_quantity(quantity, p, t)
    _, data = _check_profile_inputs(fit, data, None)
    if not (math.isfinite(value) and value > 0.0 and (quantity != "cdf" or value < 1.0)):
        raise ValueError(f"value must be positive (F: in (0, 1)), got {value!r}")
    if quantity == "cdf":
        psi = math.log(-math.log1p(-value))  # u = log(-log R) = log(-log(1 - F))
    else:
        psi = math.log(value)
    if fit.shape_fixed:
        if quantity == "shape":
            raise ValueError("the shape of this fit is fixed; profile the scale, a B-life or F(t) instead")
        if quantity == "b_life":
            assert p is not None
            psi -= float(np.log(-np.log1p(-p))) / fit.shape
        elif quantity == "cdf":
            assert t is not None
            psi = math.log(t) - psi / fit.shape
        return float(log_likelihood((psi, math.log(fit.shape)), data))
    log_lik_max, _, hessian = log_likelihood(fit.theta, data, derivatives=2)
    profile = _Profile(fit, data, quantity, log_lik_max, hessian, p=p, t=t)
    return profile(psi)


@dataclass(frozen=True, eq=False)
class LikelihoodRatioBounds:
    """Likelihood-ratio (profile likelihood) bounds of one fit at `confidence_level`.

    shape and scale: (lower, upper), scale in age units; b_life: {p: (lower, upper)} ages by which a
    fraction p has failed; cdf: {t: (lower, upper)} fractions failed by age t. An end the data do not
    bound (flat likelihood) is 0 or +inf (F: 0 or 1) and is named in `open_ends` (e.g. "B10 upper");
    `is_bounded` is False then. With shape_fixed the shape bounds are (shape, shape).
    """

    shape: tuple[float, float]
    scale: tuple[float, float]
    b_life: Mapping[float, tuple[float, float]]
    cdf: Mapping[float, tuple[float, float]]
    confidence_level: float
    shape_fixed: bool = False
    open_ends: tuple[str, ...] = ()
    bound_method: str = "likelihood-ratio"

    def __post_init__(self) -> None:
        object.__setattr__(self, "b_life", MappingProxyType(dict(self.b_life)))
        object.__setattr__(self, "cdf", MappingProxyType(dict(self.cdf)))

    @property
    def is_bounded(self) -> bool:
        """True when the data bound every end (no end is 0 / +inf for want of information)."""
        return not self.open_ends


def likelihood_ratio_bounds(
    fit: WeibullFit,
    data: LifeData,
    *,
    b_life_fractions: Sequence[float] = (0.01, 0.10),
    cdf_ages: Sequence[float] = (),
    confidence_level: float | None = None,
) -> LikelihoodRatioBounds:
    """Likelihood-ratio bounds of shape, scale, B-lives (fractions p) and F(t) (ages t) of a fit.

    See `profile_bounds` for the method, units and errors; `data` must be the fit's data.
    """
    for p in b_life_fractions:
        _check_quantity("b_life", p, None)
    for t in cdf_ages:
        _check_quantity("cdf", None, t)
    level, data = _check_profile_inputs(fit, data, confidence_level)
    log_lik_max, _, hessian = log_likelihood(fit.theta, data, derivatives=2)
    open_ends: list[str] = []

    def bounds(quantity: Quantity, name: str, p: float | None = None, t: float | None = None) -> tuple[float, float]:
        values, reached = _profile_ends(fit, data, quantity, level, log_lik_max, hessian, p, t)
        open_ends.extend(f"{name} {side}" for side, ok in zip(("lower", "upper"), reached) if not ok)
        return values

    shape = bounds("shape", "shape")
    scale = bounds("scale", "scale")
    b_life = {float(p): bounds("b_life", f"B{100 * p:g}", p=float(p)) for p in b_life_fractions}
    cdf = {float(t): bounds("cdf", f"F({t:g})", t=float(t)) for t in cdf_ages}
    if open_ends:
        logger.info("likelihood-ratio bounds not bounded by the data: %s", ", ".join(open_ends))
    return LikelihoodRatioBounds(
        shape=shape,
        scale=scale,
        b_life=b_life,
        cdf=cdf,
        confidence_level=level,
        shape_fixed=fit.shape_fixed,
        open_ends=tuple(open_ends),
    )
