"""One fit-result type for every family: estimates, covariance, log-likelihood, AIC and bounds.

A `FitResult` keeps its family and its data, so `bounds(quantity, method=...)` needs nothing passed in
again. Quantities: a parameter by name ("shape", "scale", "mu", "sigma"), "b_life" with p (the age by
which a fraction p has failed; B10 is p = 0.10), "cdf" with an age t (fraction failed F(t)), and for
Wald bounds only "mean". Wald bounds are symmetric on the unbounded scale (log of positive
quantities; z-value u = (log t - location) / sigma for F(t)), from the observed-information
covariance by the delta method. Likelihood-ratio bounds come from `profile.profile_bounds`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, NamedTuple

import numpy as np
import numpy.typing as npt
from scipy import stats

from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.families import Family
from warranty_forecast.lifecore.families.base import check_fraction

if TYPE_CHECKING:
    from warranty_forecast.lifecore.profile import LikelihoodRatioBounds

FloatArray = npt.NDArray[np.float64]
METHODS = ("wald", "likelihood_ratio")


def aic(log_likelihood: float, n_parameters: int) -> float:
    """Akaike information criterion 2 k - 2 log-likelihood (lower is better); the one place it is computed."""
    return 2.0 * n_parameters - 2.0 * float(log_likelihood)


def z_quantile(confidence_level: float) -> float:
    """Two-sided standard normal quantile for a confidence level."""
    return float(stats.norm.ppf(0.5 + 0.5 * confidence_level))


class SummaryRow(NamedTuple):
    estimate: float
    lower: float
    upper: float
    bound_method: str


@dataclass(frozen=True, eq=False)
class FitResult:
    """A fitted life distribution (ages in the data's unit, e.g. months in service).

    `theta` holds the family's unbounded parameters and `covariance` their inverse observed
    information (NaN when `converged` is False). Parameters listed in `fixed` were given, not
    estimated: their variance is 0, their bounds (value, value), and they do not count towards AIC.
    `gradient_norm` is the norm of the log-likelihood gradient in theta divided by the number of units.
    Natural parameters are attributes by name (fit.shape, fit.scale; fit.mu, fit.sigma).
    """

    family: Family
    theta: FloatArray
    covariance: FloatArray
    log_likelihood: float
    converged: bool
    iterations: int
    gradient_norm: float
    data: LifeData
    confidence_level: float = 0.95
    fixed: tuple[str, ...] = ()

    def __getattr__(self, name: str) -> float:
        family = self.__dict__.get("family")
        if family is not None and name in family.parameter_names:
            return family.parameters(self.theta)[name]
        raise AttributeError(f"{type(self).__name__} has no attribute {name!r}")

    # -- summaries -----------------------------------------------------------------------------

    @property
    def parameters(self) -> dict[str, float]:
        """Natural parameters by name, in theta order."""
        return self.family.parameters(self.theta)

    @property
    def n_parameters(self) -> int:
        """Number of estimated parameters."""
        return len(self.family.parameter_names) - len(self.fixed)

    @property
    def aic(self) -> float:
        """AIC = 2 * n_parameters - 2 * log_likelihood."""
        return aic(self.log_likelihood, self.n_parameters)

    @property
    def n_returns(self) -> float:
        return self.data.n_returns

    @property
    def n_suspensions(self) -> float:
        return self.data.n_suspensions

    @property
    def bound_method(self) -> str:
        """How the Wald bounds are computed: "wald-log", or e.g. "wald-log, shape fixed"."""
        return "wald-log" + "".join(f", {name} fixed" for name in self.fixed)

    # -- closed forms ----------------------------------------------------------------------------

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        """log R(t)."""
        return self.family.log_survival(t, self.theta)

    def survival(self, t: npt.ArrayLike) -> FloatArray:
        """R(t), fraction still running at age t."""
        return np.exp(self.log_survival(t))

    def cdf(self, t: npt.ArrayLike) -> FloatArray:
        """F(t), fraction failed by age t."""
        return self.family.cdf(t, self.theta)

    def pdf(self, t: npt.ArrayLike) -> FloatArray:
        """Density f(t) per unit age."""
        return self.family.pdf(t, self.theta)

    def hazard(self, t: npt.ArrayLike) -> FloatArray:
        """Hazard h(t) per unit age."""
        return self.family.hazard(t, self.theta)

    def b_life(self, p: npt.ArrayLike) -> FloatArray:
        """Age by which a fraction p has failed (quantile)."""
        return self.family.quantile(p, self.theta)

    @property
    def b10(self) -> float:
        """Age by which 10% of units have failed."""
        return float(self.b_life(0.10))

    @property
    def median(self) -> float:
        """Age by which half of units have failed (lognormal: exp(mu))."""
        return float(self.b_life(0.5))

    @property
    def mean(self) -> float:
        """Mean life (age unit)."""
        return self.family.mean(self.theta)

    @property
    def variance(self) -> float:
        """Variance of life (age unit squared)."""
        return self.family.variance(self.theta)

    # -- bounds --------------------------------------------------------------------------------

    def bounds(
        self,
        quantity: str,
        method: str = "wald",
        level: float | None = None,
        *,
        p: float | None = None,
        t: npt.ArrayLike | None = None,
    ):  # type: ignore[no-untyped-def]
        """(lower, upper) of a quantity at `level` (default the fit's confidence_level).

        method "wald" (vectorised over t for "cdf") or "likelihood_ratio" (profile likelihood; an end
        the data do not bound is 0 / inf, F: 0 / 1, see `profile.profile_bounds`).
        """
        if method == "likelihood_ratio":
            from warranty_forecast.lifecore.profile import profile_bounds

            return profile_bounds(self, quantity, p=p, t=None if t is None else float(t), confidence_level=level)
        if method != "wald":
            raise ValueError(f"method must be one of {METHODS}, got {method!r}")
        z = z_quantile(self.confidence_level if level is None else level)
        if quantity in self.family.parameter_names:
            return self._parameter_wald(quantity, z)
        if quantity == "b_life":
            if p is None:
                raise ValueError("quantity 'b_life' needs p, the fraction failed (e.g. 0.10 for B10)")
            q = float(self.family.std_quantile(check_fraction(p)))
            sigma = self.family.sigma(self.theta)
            lo, hi = self._wald(self.theta[0] + sigma * q, np.array([1.0, self.family.sign * sigma * q]), z)
            return float(np.exp(lo)), float(np.exp(hi))
        if quantity == "cdf":
            return self._cdf_wald(np.asarray(t, dtype=float), z)
        if quantity == "mean":
            return self._numerical_log_wald(self.family.mean, z)
        raise ValueError(f"unknown quantity {quantity!r} for Wald bounds")

    def likelihood_ratio_bounds(self, **kwargs) -> LikelihoodRatioBounds:  # type: ignore[no-untyped-def]
        """Likelihood-ratio bounds of every parameter, B-lives and F(t) (`profile.likelihood_ratio_bounds`)."""
        from warranty_forecast.lifecore.profile import likelihood_ratio_bounds

        return likelihood_ratio_bounds(self, **kwargs)

    def _wald(self, estimate, gradient, z: float):  # type: ignore[no-untyped-def]
        """estimate -/+ z * sd for a function with the given theta-gradient (last axis 2)."""
        var = np.einsum("...i,ij,...j->...", gradient, self.covariance, gradient)
        half = z * np.sqrt(np.maximum(var, 0.0))
        return estimate - half, estimate + half

    def _parameter_wald(self, name: str, z: float) -> tuple[float, float]:
        index = self.family.parameter_names.index(name)
        if name in self.fixed:
            value = self.parameters[name]
            return value, value
        gradient = np.zeros(2)
        gradient[index] = 1.0
        lo, hi = self._wald(self.theta[index], gradient, z)
        return self.family.to_natural(index, float(lo)), self.family.to_natural(index, float(hi))

    def _cdf_wald(self, t: FloatArray, z: float) -> tuple[FloatArray, FloatArray]:
        """Pointwise bounds of F(t), symmetric in u = (log t - location) / sigma; 0 at t = 0."""
        positive = t > 0.0
        kappa = 1.0 / self.family.sigma(self.theta)
        u = kappa * (np.log(np.where(positive, t, 1.0)) - self.theta[0])
        gradient = np.stack([np.full_like(u, -kappa), -self.family.sign * u], axis=-1)
        u_lo, u_hi = self._wald(u, gradient, z)
        return (np.where(positive, self.family.std_cdf(u_lo), 0.0), np.where(positive, self.family.std_cdf(u_hi), 0.0))

    def _numerical_log_wald(self, function, z: float) -> tuple[float, float]:  # type: ignore[no-untyped-def]
        """Bounds of a positive closed form, symmetric in its log; gradient by central differences."""
        step = 1e-6
        gradient = np.array(
            [
                (math.log(function(self.theta + e)) - math.log(function(self.theta - e))) / (2.0 * step)
                for e in np.eye(2) * step
            ]
        )
        lo, hi = self._wald(math.log(function(self.theta)), gradient, z)
        return math.exp(lo), math.exp(hi)

    def summary(self) -> dict[str, SummaryRow]:
        """Parameters, B1, B10 and mean with Wald bounds: {quantity: (estimate, lower, upper, bound_method)}.

        A fixed parameter's bound_method is "fixed"; numpy and scipy only, so the caller makes a table.
        """
        rows = {
            name: SummaryRow(
                value, *self.bounds(name), "fixed" if name in self.fixed else self.bound_method
            )
            for name, value in self.parameters.items()
        }
        for name, p in (("B1", 0.01), ("B10", 0.10)):
            rows[name] = SummaryRow(float(self.b_life(p)), *self.bounds("b_life", p=p), self.bound_method)
        rows["mean"] = SummaryRow(self.mean, *self.bounds("mean"), self.bound_method)
        return rows
