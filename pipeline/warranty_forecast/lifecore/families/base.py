"""What every life family shares: log T = location + sigma * Z, a log-location-scale family.

A family module supplies only what is its own: the standard distribution of Z (log S0, log F0 and
log f0 with their first two derivatives in z, the quantile z_p = F0^-1(p)), its parameter names, and
its closed forms (mean, variance, hazard at age 0). Everything else is written once here:

* theta, the unbounded parameters the fitter works on: theta0 = log scale (or mu), theta1 =
  sign * log sigma (sign -1 when the family's second parameter is a shape = 1 / sigma, as for the
  Weibull; +1 when it is sigma itself, as for the lognormal);
* z = (log t - theta0) / sigma and its derivatives in theta, so that each row term of the likelihood
  (log S, log F, log f) comes with its gradient and Hessian by the chain rule;
* the closed forms in ages (log_survival, cdf, pdf, hazard, quantile) from the standard ones;
* starting values from the data: a least-squares line of log age on z_p through the product-limit
  (life-table) estimate, and the location maximising the likelihood at a given sigma.
"""

from __future__ import annotations

import math
from typing import ClassVar

import numpy as np
import numpy.typing as npt
from scipy import optimize

from warranty_forecast.lifecore.data import LifeData

FloatArray = npt.NDArray[np.float64]
# (value, d/dz, d2/dz2) of a standard row term; derivative arrays are None when not asked for.
Terms = tuple[FloatArray, FloatArray | None, FloatArray | None]


def check_fraction(p: npt.ArrayLike) -> FloatArray:
    """p as floats, raising ValueError unless every value lies strictly between 0 and 1."""
    p = np.asarray(p, dtype=float)
    if not np.all((p > 0.0) & (p < 1.0)):
        raise ValueError(f"fraction failed p must lie strictly between 0 and 1, got {p!r}")
    return p


def check_ages(t: npt.ArrayLike) -> FloatArray:
    """t as floats, raising ValueError for a negative age."""
    t = np.asarray(t, dtype=float)
    if np.any(t < 0.0):
        raise ValueError("ages must be >= 0")
    return t


class LogLocationScaleFamily:
    """Base of the life families: subclasses set the class attributes and the standard functions."""

    name: ClassVar[str]  # registry key, e.g. "weibull"
    label: ClassVar[str]  # for messages, e.g. "Weibull"
    parameter_names: ClassVar[tuple[str, str]]  # natural parameters in theta order
    location_is_log: ClassVar[bool]  # theta0 = log(first parameter) (True) or the parameter itself
    sign: ClassVar[int]  # sigma = exp(sign * theta1)
    dispersion_starts: ClassVar[tuple[float, ...]]  # natural second parameters tried as starts
    use_regression_start: ClassVar[bool] = True
    # |theta0| and |theta1| beyond these give log-likelihood -inf (None: no box)
    theta_box: ClassVar[tuple[float, float] | None] = None

    # -- standard distribution of Z (subclasses) ------------------------------------------------

    def std_log_survival(self, z: FloatArray, derivatives: int) -> Terms:
        raise NotImplementedError

    def std_log_cdf(self, z: FloatArray, derivatives: int) -> Terms:
        raise NotImplementedError

    def std_log_density(self, z: FloatArray, derivatives: int) -> Terms:
        raise NotImplementedError

    def std_quantile(self, p: npt.ArrayLike) -> FloatArray:
        raise NotImplementedError

    def mean(self, theta: npt.ArrayLike) -> float:
        raise NotImplementedError

    def variance(self, theta: npt.ArrayLike) -> float:
        raise NotImplementedError

    def hazard_at_zero(self, theta: npt.ArrayLike) -> float:
        raise NotImplementedError

    # -- parameters ------------------------------------------------------------------------------

    def theta(self, **natural: float) -> FloatArray:
        """theta from the natural parameters by name, e.g. WEIBULL.theta(shape=1.5, scale=40.0)."""
        first, second = self.parameter_names
        if set(natural) != {first, second}:
            raise ValueError(f"{self.label} parameters are {first!r} and {second!r}, got {sorted(natural)}")
        return np.array([self.to_theta(0, natural[first]), self.to_theta(1, natural[second])])

    def to_theta(self, index: int, value: float) -> float:
        """One natural parameter on its unbounded scale (log, except a location like mu)."""
        return float(value) if index == 0 and not self.location_is_log else math.log(value)

    def to_natural(self, index: int, value: float) -> float:
        """Inverse of `to_theta`; exp saturates at the largest double for absurd estimates."""
        return float(value) if index == 0 and not self.location_is_log else math.exp(min(float(value), 709.0))

    def parameters(self, theta: npt.ArrayLike) -> dict[str, float]:
        """Natural parameters by name."""
        return {name: self.to_natural(i, float(v)) for i, (name, v) in enumerate(zip(self.parameter_names, theta))}

    def sigma(self, theta: npt.ArrayLike) -> float:
        """Scale of log T (Weibull: 1 / shape)."""
        return math.exp(self.sign * float(np.asarray(theta)[1]))

    # -- row terms with derivatives in theta ------------------------------------------------------

    def row_terms(
        self, kind: str, theta: FloatArray, log_t: FloatArray, derivatives: int
    ) -> tuple[FloatArray, FloatArray | None, FloatArray | None]:
        """log S ("survival"), log F ("cdf") or log f ("density") at ages exp(log_t), with gradient
        (n, 2) and Hessian (n, 2, 2) in theta when asked for.

        z = kappa (log t - theta0) with kappa = exp(-sign theta1) = 1 / sigma:
        dz = (-kappa, -sign z), d2z = [[0, sign kappa], [sign kappa, z]];
        gradient L' dz, Hessian L'' dz dz' + L' d2z; log f adds log kappa - log t (gradient (0, -sign)).
        """
        kappa = math.exp(-self.sign * float(theta[1]))
        z = kappa * (log_t - float(theta[0]))
        standard = {"survival": self.std_log_survival, "cdf": self.std_log_cdf, "density": self.std_log_density}
        value, d1, d2 = standard[kind](z, derivatives)
        if kind == "density":
            value = value - self.sign * float(theta[1]) - log_t
        if not derivatives:
            return value, None, None
        dz = np.stack([np.full_like(z, -kappa), -self.sign * z], axis=-1)
        gradient = d1[:, None] * dz
        if kind == "density":
            gradient[:, 1] -= self.sign
        if derivatives < 2:
            return value, gradient, None
        hessian = d2[:, None, None] * dz[:, :, None] * dz[:, None, :]
        cross = d1 * self.sign * kappa
        hessian[:, 0, 1] += cross
        hessian[:, 1, 0] += cross
        hessian[:, 1, 1] += d1 * z
        return value, gradient, hessian

    # -- closed forms in ages ---------------------------------------------------------------------

    def _z(self, t: npt.ArrayLike, theta: npt.ArrayLike) -> tuple[FloatArray, FloatArray]:
        t = check_ages(t)
        positive = t > 0.0
        log_t = np.log(np.where(positive, t, 1.0))  # placeholder at t = 0; callers use the mask
        return (log_t - float(np.asarray(theta)[0])) / self.sigma(theta), positive

    def log_survival(self, t: npt.ArrayLike, theta: npt.ArrayLike) -> FloatArray:
        """log R(t); 0 at t = 0."""
        z, positive = self._z(t, theta)
        return np.where(positive, self.std_log_survival(z, 0)[0], 0.0)

    def cdf(self, t: npt.ArrayLike, theta: npt.ArrayLike) -> FloatArray:
        """F(t), fraction failed by age t, from log F (accurate in the lower tail); 0 at t = 0."""
        z, positive = self._z(t, theta)
        return np.where(positive, np.exp(self.std_log_cdf(z, 0)[0]), 0.0)

    def pdf(self, t: npt.ArrayLike, theta: npt.ArrayLike) -> FloatArray:
        """Density f(t) = h(t) R(t) per unit age."""
        return self.hazard(t, theta) * np.exp(self.log_survival(t, theta))

    def hazard(self, t: npt.ArrayLike, theta: npt.ArrayLike) -> FloatArray:
        """Hazard h(t) = f(t) / R(t) per unit age; its limit at t = 0 from `hazard_at_zero`."""
        z, positive = self._z(t, theta)
        log_t = np.log(np.where(positive, np.asarray(t, dtype=float), 1.0))
        log_h = self.std_log_density(z, 0)[0] - math.log(self.sigma(theta)) - log_t - self.std_log_survival(z, 0)[0]
        return np.where(positive, np.exp(log_h), self.hazard_at_zero(theta))

    def quantile(self, p: npt.ArrayLike, theta: npt.ArrayLike) -> FloatArray:
        """Age by which a fraction p (0 < p < 1) has failed, exp(theta0 + sigma z_p) (B-life)."""
        return np.exp(float(np.asarray(theta)[0]) + self.sigma(theta) * self.std_quantile(check_fraction(p)))

    def std_cdf(self, z: npt.ArrayLike) -> FloatArray:
        """F0(z), the standard distribution function (maps a z-value back to a fraction failed)."""
        return np.exp(self.std_log_cdf(np.asarray(z, dtype=float), 0)[0])

    # -- starting values from the data ----------------------------------------------------------

    def starts(self, data: LifeData, objective: ObjectiveLike) -> list[FloatArray]:
        """Starting thetas: the life-table regression (if any), then the best location at each of
        `dispersion_starts`."""
        starts = []
        regression = self.regression_start(data) if self.use_regression_start else None
        if regression is not None:
            starts.append(regression)
        for value in self.dispersion_starts:
            theta1 = self.to_theta(1, value)
            starts.append(np.array([self.location_start(data, theta1, objective), theta1]))
        return starts

    def regression_start(self, data: LifeData) -> FloatArray | None:
        """Least-squares line log t = theta0 + sigma z_p through the product-limit estimate F(t) at the
        return ages (interval returns at their upper end; returns before suspensions at a tie)."""
        ages = np.concatenate([data.exact_ages, data.interval_upper, data.suspension_ages])
        failed = np.concatenate([data.exact_counts, data.interval_counts, np.zeros_like(data.suspension_counts)])
        counts = np.concatenate([data.exact_counts, data.interval_counts, data.suspension_counts])
        keep = (counts > 0) & (ages > 0)
        order = np.lexsort((failed[keep] == 0, ages[keep]))
        ages, failed, counts = ages[keep][order], failed[keep][order], counts[keep][order]
        at_risk = counts.sum() - np.concatenate([[0.0], np.cumsum(counts)[:-1]])
        with np.errstate(divide="ignore", invalid="ignore"):
            log_surviving = np.cumsum(np.log1p(-np.where(failed > 0, failed / at_risk, 0.0)))
        fraction = -np.expm1(log_surviving)
        use = (failed > 0) & (fraction > 0.0) & (fraction < 1.0)
        if np.unique(ages[use]).size < 2:
            return None
        slope, intercept = np.polyfit(self.std_quantile(fraction[use]), np.log(ages[use]), 1)
        if not (np.isfinite(slope) and np.isfinite(intercept) and slope > 0.0):
            return None
        return np.array([intercept, self.sign * math.log(slope)])

    def location_start(self, data: LifeData, theta1: float, objective: ObjectiveLike) -> float:
        """theta0 maximising the likelihood at this theta1 (bounded scalar search)."""
        positive = np.concatenate([data.exact_ages, data.interval_upper, data.suspension_ages])
        positive = positive[positive > 0.0]
        sigma = math.exp(self.sign * theta1)
        lo = math.log(float(positive.min())) - 5.0 * sigma
        hi = math.log(data.max_age) + 10.0 * sigma + 5.0
        result = optimize.minimize_scalar(
            lambda a: objective.fun(np.array([a, theta1])), bounds=(lo, hi), method="bounded", options={"xatol": 1e-3}
        )
        return float(result.x)

    def describe(self, theta: npt.ArrayLike) -> str:
        return ", ".join(f"{k} {v:.6g}" for k, v in self.parameters(theta).items())


class ObjectiveLike:
    """What `starts` needs of the fitter's objective: -log-likelihood / units at theta."""

    def fun(self, theta: FloatArray) -> float:  # pragma: no cover - protocol
        raise NotImplementedError

