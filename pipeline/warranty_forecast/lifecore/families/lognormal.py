"""Lognormal family: log T ~ Normal(mu, sigma**2), mu in log(age units), sigma > 0.

With z = (log t - mu) / sigma and Phi the standard normal distribution function: R(t) = Phi(-z),
F(t) = Phi(z), median exp(mu), density phi(z) / (sigma t), B-life exp(mu + sigma Phi^-1(p)).
scipy.stats.lognorm uses s = sigma and scale = exp(mu) (loc = 0). theta = (mu, log sigma).
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from scipy import special

from warranty_forecast.lifecore.families.base import FloatArray, LogLocationScaleFamily, Terms

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)
# Exponents of density-to-probability ratios are clipped here so that absurd trial parameters far
# from any optimum cannot overflow; at sensible parameters these ratios are far below exp(500).
_EXP_MAX = 500.0


def _log_phi(z: FloatArray) -> FloatArray:
    """log of the standard normal density."""
    return -0.5 * z * z - _LOG_SQRT_2PI


def _log_ndtr_terms(z: FloatArray, derivatives: int) -> Terms:
    """log Phi(z) with d/dz = g = phi/Phi (the inverse Mills ratio at -z) and d2 = -g (g + z)."""
    value = special.log_ndtr(z)
    if not derivatives:
        return value, None, None
    g = np.exp(np.minimum(_log_phi(z) - value, _EXP_MAX))
    return value, g, -g * (g + z)


class Lognormal(LogLocationScaleFamily):
    name = "lognormal"
    label = "Lognormal"
    parameter_names = ("mu", "sigma")
    location_is_log = False
    sign = 1
    dispersion_starts = (1.0, 0.5, 2.0, 4.0)
    # Outside |mu| <= 1000 (log months) and |log sigma| <= 25 the log-likelihood is -inf: such trial
    # points (median e^1000, sigma e^25) are absurd, and rejecting them keeps every intermediate finite.
    theta_box = (1000.0, 25.0)

    def std_log_survival(self, z: FloatArray, derivatives: int) -> Terms:
        value, d1, d2 = _log_ndtr_terms(-z, derivatives)  # log Phi(-z): derivatives change sign once
        return value, (None if d1 is None else -d1), d2

    def std_log_cdf(self, z: FloatArray, derivatives: int) -> Terms:
        return _log_ndtr_terms(z, derivatives)

    def std_log_density(self, z: FloatArray, derivatives: int) -> Terms:
        return _log_phi(z), -z, np.full_like(z, -1.0)

    def std_quantile(self, p: npt.ArrayLike) -> FloatArray:
        return special.ndtri(np.asarray(p, dtype=float))

    def mean(self, theta: npt.ArrayLike) -> float:
        """exp(mu + sigma**2 / 2)."""
        p = self.parameters(theta)
        return math.exp(p["mu"] + 0.5 * p["sigma"] ** 2)

    def variance(self, theta: npt.ArrayLike) -> float:
        """(exp(sigma**2) - 1) exp(2 mu + sigma**2)."""
        p = self.parameters(theta)
        return math.expm1(p["sigma"] ** 2) * math.exp(2.0 * p["mu"] + p["sigma"] ** 2)

    def hazard_at_zero(self, theta: npt.ArrayLike) -> float:
        return 0.0


LOGNORMAL = Lognormal()
