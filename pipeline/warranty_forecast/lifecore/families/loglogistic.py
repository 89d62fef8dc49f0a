"""Log-logistic family: R(t) = 1 / (1 + (t / scale) ** shape); log T is logistic.

scipy.stats.fisk(c=shape, scale=scale) is the same law. As a log-location-scale family: location
log scale, sigma = 1 / shape, z = shape * (log t - log scale), log S0 = -log(1 + e^z), log F0 =
-log(1 + e^-z), log f0 = z - 2 log(1 + e^z), z_p = log(p / (1 - p)). Median = scale.
theta = (log scale, log shape). Registered to show what a new family costs; not used by the nightly run.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from scipy import special

from warranty_forecast.lifecore.families.base import FloatArray, LogLocationScaleFamily, Terms


class LogLogistic(LogLocationScaleFamily):
    name = "loglogistic"
    label = "Log-logistic"
    parameter_names = ("scale", "shape")
    location_is_log = True
    sign = -1
    dispersion_starts = (1.0, 0.5, 2.0, 4.0)

    def std_log_survival(self, z: FloatArray, derivatives: int) -> Terms:
        p = special.expit(z)
        return -np.logaddexp(0.0, z), -p, -p * (1.0 - p)

    def std_log_cdf(self, z: FloatArray, derivatives: int) -> Terms:
        q = special.expit(-z)
        return -np.logaddexp(0.0, -z), q, -q * (1.0 - q)

    def std_log_density(self, z: FloatArray, derivatives: int) -> Terms:
        p = special.expit(z)
        return z - 2.0 * np.logaddexp(0.0, z), 1.0 - 2.0 * p, -2.0 * p * (1.0 - p)

    def std_quantile(self, p: npt.ArrayLike) -> FloatArray:
        return special.logit(np.asarray(p, dtype=float))

    def mean(self, theta: npt.ArrayLike) -> float:
        """scale * (pi / shape) / sin(pi / shape) for shape > 1, else infinite."""
        p = self.parameters(theta)
        b = math.pi / p["shape"]
        return p["scale"] * b / math.sin(b) if p["shape"] > 1.0 else math.inf

    def variance(self, theta: npt.ArrayLike) -> float:
        """scale**2 (2b / sin 2b - b**2 / sin(b)**2), b = pi / shape, for shape > 2, else infinite."""
        p = self.parameters(theta)
        b = math.pi / p["shape"]
        return p["scale"] ** 2 * (2 * b / math.sin(2 * b) - b * b / math.sin(b) ** 2) if p["shape"] > 2.0 else math.inf

    def hazard_at_zero(self, theta: npt.ArrayLike) -> float:
        """Infinite for shape < 1, 1/scale for shape 1, 0 for shape > 1."""
        p = self.parameters(theta)
        return math.inf if p["shape"] < 1.0 else (1.0 / p["scale"] if p["shape"] == 1.0 else 0.0)


LOGLOGISTIC = LogLogistic()
