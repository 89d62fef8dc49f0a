"""Weibull family: R(t) = exp(-(t / scale) ** shape); log T has a smallest-extreme-value law.

Rate form R(t) = exp(-rate * t ** shape), rate = scale ** (-shape). Hazard rate * shape * t**(shape-1);
B-life t_p = scale * (-log(1 - p)) ** (1 / shape). As a log-location-scale family: location log scale,
sigma = 1 / shape, z = shape * (log t - log scale), log S0 = -e^z, log f0 = z - e^z, z_p = log(-log(1-p)).
theta = (log scale, log shape).
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from scipy import special

from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.families.base import FloatArray, LogLocationScaleFamily, ObjectiveLike, Terms

# exp(z) is evaluated with z clipped here: exp(200) ~ 7e86, so products of two such terms, counts,
# squares of z and sums over many rows stay finite. Such z only occur at absurd trial parameters
# far from any optimum, where the clipped log-likelihood is still hugely negative.
_Z_MAX = 200.0
# Below this log(x), log(1 - exp(-x)) is log(x) - x/2 to double precision (x < 1e-13).
_LOG_X_SMALL = -30.0
_LN2 = math.log(2.0)


def log1mexp(log_x: FloatArray) -> FloatArray:
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


class Weibull(LogLocationScaleFamily):
    name = "weibull"
    label = "Weibull"
    parameter_names = ("scale", "shape")
    location_is_log = True
    sign = -1
    # Starting shapes, tried in turn until a fit passes its checks: the exponential first.
    dispersion_starts = (1.0, 0.5, 2.0, 4.0, 0.25)
    use_regression_start = False  # the exposure start below is the exact MLE at each shape

    def std_log_survival(self, z: FloatArray, derivatives: int) -> Terms:
        ez = -np.exp(np.minimum(z, _Z_MAX))
        return ez, ez, ez

    def std_log_cdf(self, z: FloatArray, derivatives: int) -> Terms:
        value = log1mexp(z)
        if not derivatives:
            return value, None, None
        # d/dz log(1 - e^-x) = x / (e^x - 1) = w, with x = e^z; d2 = w (1 - x - w)
        zc = np.minimum(z, _Z_MAX)
        x = np.exp(zc)
        w = np.exp(zc - x - value)
        return value, w, w * (1.0 - x - w)

    def std_log_density(self, z: FloatArray, derivatives: int) -> Terms:
        ez = np.exp(np.minimum(z, _Z_MAX))
        return z - ez, 1.0 - ez, -ez

    def std_quantile(self, p: npt.ArrayLike) -> FloatArray:
        return np.log(-np.log1p(-np.asarray(p, dtype=float)))

    def location_start(self, data: LifeData, theta1: float, objective: ObjectiveLike) -> float:
        """log scale maximising the likelihood with interval returns at their midpoints, at this shape:
        (log sum c t^k - log n) / k (for shape 1 the exponential MLE exposure / returns)."""
        ages = np.concatenate(
            [data.exact_ages, 0.5 * (data.interval_lower + data.interval_upper), data.suspension_ages]
        )
        counts = np.concatenate([data.exact_counts, data.interval_counts, data.suspension_counts])
        keep = (counts > 0) & (ages > 0)
        shape = math.exp(theta1)
        log_exposure = float(special.logsumexp(shape * np.log(ages[keep]), b=counts[keep]))  # no overflow
        return (log_exposure - math.log(data.n_returns)) / shape

    def mean(self, theta: npt.ArrayLike) -> float:
        """scale * Gamma(1 + 1/shape)."""
        p = self.parameters(theta)
        return float(p["scale"] * np.exp(special.gammaln(1.0 + 1.0 / p["shape"])))

    def variance(self, theta: npt.ArrayLike) -> float:
        """scale**2 * (Gamma(1 + 2/shape) - Gamma(1 + 1/shape)**2)."""
        p = self.parameters(theta)
        g1 = np.exp(special.gammaln(1.0 + 1.0 / p["shape"]))
        g2 = np.exp(special.gammaln(1.0 + 2.0 / p["shape"]))
        return float(p["scale"] ** 2 * (g2 - g1 * g1))

    def hazard_at_zero(self, theta: npt.ArrayLike) -> float:
        """Infinite for shape < 1, 1/scale for shape 1, 0 for shape > 1."""
        p = self.parameters(theta)
        return math.inf if p["shape"] < 1.0 else (1.0 / p["scale"] if p["shape"] == 1.0 else 0.0)


WEIBULL = Weibull()


def rate_from_scale(shape: float, scale: float) -> float:
    """Rate parameter rate = scale ** (-shape) (units: 1 / age ** shape)."""
    return float(np.exp(-shape * np.log(scale)))


def scale_from_rate(shape: float, rate: float) -> float:
    """Scale parameter scale = rate ** (-1 / shape) (units: age)."""
    return float(np.exp(-np.log(rate) / shape))
