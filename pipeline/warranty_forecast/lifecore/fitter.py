"""One maximum-likelihood fitter for every life family, on grouped, censored life data.

`Fitter(family).fit(data)` maximises the family's grouped log-likelihood (`likelihood.py`) over theta,
the unbounded parameters, with scipy's trust-region "trust-exact" method on the analytic gradient and
Hessian, from the family's starting values in turn until an end point passes the fitter's own checks
(gradient, positive-definite and well-conditioned observed information, plausible dispersion,
identifiable location). Failures raise typed errors with hints (`UnidentifiableError` when the
likelihood is flat and only a fixed parameter will do). `fit(data, fixed={"shape": 1.5})` estimates
the remaining parameter alone by 1-D Newton, e.g. a Weibull with the shape given from experience.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
import numpy.typing as npt
from scipy import optimize

from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.errors import FitNotConvergedError, InsufficientDataError, UnidentifiableError
from warranty_forecast.lifecore.families import Family, get_family
from warranty_forecast.lifecore.likelihood import log_likelihood
from warranty_forecast.lifecore.optimise import maximise_1d
from warranty_forecast.lifecore.result import FitResult

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]


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


class Objective:
    """-log-likelihood / units for scipy, computing value, gradient and Hessian once per theta."""

    def __init__(self, family: Family, data: LifeData) -> None:
        self._family = family
        self._data = data
        self._per_unit = 1.0 / max(data.prepared.total_units, 1e-300)
        self._theta: bytes | None = None
        self._cache: tuple[float, FloatArray, FloatArray] = (0.0, np.zeros(2), np.zeros((2, 2)))

    def _eval(self, theta: FloatArray) -> tuple[float, FloatArray, FloatArray]:
        key = np.asarray(theta, dtype=float).tobytes()
        if key != self._theta:
            v, g, h = log_likelihood(self._family, theta, self._data, derivatives=2)
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
class Fitter:
    """Maximum-likelihood fitter of one family (a registered name or a family object).

    Settings:
      confidence_level: level of the Wald bounds on the returned fit.
      min_returns: fewer returns (exact + interval counts) raise InsufficientDataError.
      require_suspensions: warranty data without units still in service usually means missing
        shipment data, so it raises InsufficientDataError; set False for complete life tests.
      gradient_tolerance: largest accepted |gradient of log-likelihood| / units at the estimate.
      max_iterations: optimiser iterations per starting point.
      max_condition: largest accepted condition number of the observed information scaled to
        unit diagonal (i.e. of the correlation matrix of the estimates): (1+|rho|)/(1-|rho|).
      location_ratio_limit, max_location_se: a characteristic age exp(theta0) (Weibull scale,
        lognormal median) beyond location_ratio_limit x the largest age together with a standard
        error of theta0 above max_location_se is treated as not identifiable from the data.
      dispersion_limits: estimates of the second parameter (Weibull shape, lognormal sigma) outside
        these are reported as not converged (unidentifiable).
      raise_on_failure: raise FitNotConvergedError (its subclass UnidentifiableError when the
        likelihood is flat) or return the best attempt with converged=False and a NaN covariance.
    """

    family: Family | str
    confidence_level: float = 0.95
    min_returns: float = 5
    require_suspensions: bool = True
    gradient_tolerance: float = 1e-6
    max_iterations: int = 100
    max_condition: float = 1e6
    location_ratio_limit: float = 1e3
    max_location_se: float = 1.0
    dispersion_limits: tuple[float, float] = (0.02, 50.0)
    raise_on_failure: bool = True

    def __post_init__(self) -> None:
        object.__setattr__(self, "family", get_family(self.family))
        if not 0.0 < self.confidence_level < 1.0:
            raise ValueError(f"confidence_level must lie in (0, 1), got {self.confidence_level!r}")
        if self.min_returns < 0 or self.max_iterations < 1:
            raise ValueError("min_returns must be >= 0 and max_iterations >= 1")
        if not 0.0 < self.dispersion_limits[0] < self.dispersion_limits[1]:
            raise ValueError(f"dispersion_limits must be increasing and positive, got {self.dispersion_limits!r}")

    @property
    def _family(self) -> Family:
        assert not isinstance(self.family, str)
        return self.family

    def fit(self, data: LifeData, fixed: Mapping[str, float] | None = None) -> FitResult:
        """Fit by maximum likelihood; ages in the data's unit. `fixed`: parameters given by name."""
        if fixed:
            return self._fit_fixed(data, dict(fixed))
        self._check_data(data)
        family = self._family
        objective = Objective(family, data)
        attempts: list[_Attempt] = []
        for theta0 in family.starts(data, objective):
            attempt = self._optimise(objective, data, theta0)
            attempts.append(attempt)
            if not attempt.problems:
                break
            logger.debug("%s fit attempt from %s failed: %s", family.label, family.describe(theta0),
                         "; ".join(p.text for p in attempt.problems))
        best = next((a for a in attempts if not a.problems), None)
        if best is None:
            best = max(attempts, key=lambda a: a.value if np.isfinite(a.value) else -np.inf)
            self._fail(best.problems, f"{family.label} fit not converged: ", self._hints(data))
        converged = not best.problems
        covariance = _covariance(best.hessian) if converged else np.full((2, 2), np.nan)
        return self._result(data, best.theta, best.value, covariance, converged, best.iterations,
                            float(np.linalg.norm(best.gradient)), ())

    # -- fixed-parameter fit -------------------------------------------------------------------

    def _fit_fixed(self, data: LifeData, fixed: dict[str, float]) -> FitResult:
        """One parameter given, the other estimated by 1-D Newton on the analytic derivatives.

        min_returns does not apply (one return suffices once a parameter is fixed), but zero returns
        raise InsufficientDataError: with no returns the likelihood rises without limit as the life
        grows, so no maximum-likelihood estimate exists. Its Wald bound uses the 1-D information.
        """
        family = self._family
        ((name, value),) = fixed.items()
        if name not in family.parameter_names:
            raise ValueError(f"{family.label} parameters are {family.parameter_names}, not {name!r}")
        index = family.parameter_names.index(name)
        lo, hi = self.dispersion_limits if index == 1 else (-math.inf, math.inf)
        if not (math.isfinite(value) and lo <= value <= hi):
            raise ValueError(f"fixed {name} must be finite and within [{lo:g}, {hi:g}], got {value!r}")
        if data.n_returns <= 0:
            raise InsufficientDataError(
                f"0 returns: with the {name} fixed the likelihood keeps rising as the life grows, so no "
                "maximum-likelihood estimate exists; report no returns rather than a fitted life"
            )
        self._check_data(data, min_returns=0.0)
        free = 1 - index
        fixed_theta = family.to_theta(index, value)
        theta = np.zeros(2)
        theta[index] = fixed_theta
        # natural step in theta0 is sigma (z = (log t - theta0) / sigma)
        width = family.sigma(theta) if free == 0 else 1.0
        start = family.location_start(data, fixed_theta, Objective(family, data)) if free == 0 else 0.0
        units = data.prepared.total_units

        def along(x: float) -> tuple[float, float, float]:
            theta[free] = x
            v, g, h = log_likelihood(family, theta, data, derivatives=2)
            return v, float(g[free]), float(h[free, free])

        reach = 50.0 + 50.0 * width
        best = maximise_1d(along, start, start - reach, start + reach, max_step=2.0 * width)
        v, d1, d2 = best.values[:3]
        problems: list[_Problem] = []
        if not (best.converged and math.isfinite(v) and math.isfinite(d1) and math.isfinite(d2)):
            problems.append(_Problem(f"the 1-D search for the {family.parameter_names[free]} did not converge"))
        elif abs(d1) / units > self.gradient_tolerance:
            problems.append(_Problem(f"gradient per unit {abs(d1) / units:.2e} above {self.gradient_tolerance:.1e}"))
        if math.isfinite(d2) and not d2 < 0.0:
            problems.append(_Problem(f"information of {family.parameter_names[free]} not positive (flat likelihood)", True))
        elif best.at_bound:
            problems.append(_Problem(f"the {family.parameter_names[free]} ran off to the edge of its search range", True))
        if problems:
            self._fail(tuple(problems), f"{family.label} fit with {name} fixed at {value:g} not converged: ",
                       "check the exposure (suspensions) and the returns' ages")
        covariance = np.zeros((2, 2))
        covariance[free, free] = -1.0 / d2 if not problems else math.nan
        theta[free] = best.x
        return self._result(data, theta.copy(), float(v), covariance, not problems, best.iterations, abs(d1), (name,))

    # -- steps ---------------------------------------------------------------------------------

    def _check_data(self, data: LifeData, min_returns: float | None = None) -> None:
        n_returns = data.n_returns
        needed = self.min_returns if min_returns is None else min_returns
        if n_returns < needed or n_returns <= 0:
            raise InsufficientDataError(
                f"{n_returns:g} returns, fewer than the {needed:g} needed for a {self._family.label} fit; "
                "pool cohorts or fix the shape from engineering experience"
            )
        if data.max_age <= 0.0:
            raise InsufficientDataError("no exposure: every unit has age 0")
        if self.require_suspensions and data.n_suspensions <= 0:
            raise InsufficientDataError(
                "no suspensions (units still in service): a fit would treat every unit as returned; "
                "supply the surviving units, or set require_suspensions=False for complete life-test data"
            )

    def _optimise(self, objective: Objective, data: LifeData, theta0: FloatArray) -> _Attempt:
        # Stop early once the dispersion runs far outside its plausible range (a diverging fit).
        log_lo, log_hi = math.log(self.dispersion_limits[0] / 10.0), math.log(self.dispersion_limits[1] * 10.0)

        def stop_if_diverging(intermediate_result: optimize.OptimizeResult) -> None:
            if not log_lo <= intermediate_result.x[1] <= log_hi:
                raise StopIteration

        with np.errstate(over="ignore", invalid="ignore"):
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
        value, gradient, hessian = log_likelihood(self._family, theta, data, derivatives=2)
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
        family = self._family
        first, second = family.parameter_names
        problems = []
        grad_norm = float(np.linalg.norm(gradient)) / data.prepared.total_units
        if grad_norm > self.gradient_tolerance:
            problems.append(_Problem(f"gradient norm per unit {grad_norm:.2e} above {self.gradient_tolerance:.1e}"))
        information = -hessian
        diag = np.diag(information)
        flat = _Problem("observed information not positive definite (flat or saddle likelihood)", True)
        if np.any(diag <= 0.0):
            return (*problems, flat)
        eig = np.linalg.eigvalsh(information / np.sqrt(np.outer(diag, diag)))
        if eig[0] <= 0.0:
            return (*problems, flat)
        condition = eig[-1] / eig[0]
        if condition > self.max_condition:
            text = (f"observed information ill-conditioned (condition {condition:.2e}): {second} and {first} "
                    "cannot be told apart from these data")
            return (*problems, _Problem(text, True))
        covariance = np.linalg.inv(information)
        decrement = float(gradient @ covariance @ gradient)
        if decrement > 1e-8:
            problems.append(_Problem(f"not at a maximum (Newton decrement {decrement:.2e} log-likelihood units)"))
        dispersion = math.exp(min(float(theta[1]), 709.0))
        lo, hi = self.dispersion_limits
        if not lo <= dispersion <= hi:
            # the likelihood keeps rising towards a limit: flat in the direction that matters
            problems.append(_Problem(f"{second} {dispersion:.3g} outside the plausible range [{lo:g}, {hi:g}]", True))
        life, se = math.exp(min(float(theta[0]), 709.0)), math.sqrt(covariance[0, 0])
        if life > self.location_ratio_limit * data.max_age and se > self.max_location_se:
            name = first if family.location_is_log else f"exp({first})"
            problems.append(
                _Problem(
                    f"{name} {life:.3g} is over {self.location_ratio_limit:g} x the largest age {data.max_age:g} "
                    f"with standard error of {'log ' if family.location_is_log else ''}{first} {se:.2g}: the data sit deep in the lower tail and the "
                    f"{first} is near-unidentifiable",
                    True,
                )
            )
        return tuple(problems)

    def _hints(self, data: LifeData) -> str:
        hints = ["fix the shape from engineering experience"]
        if data.n_returns < 20:
            hints.append(f"too few returns ({data.n_returns:g})")
        if data.returns_at_one_time:
            hints.append(f"returns all in one month (or at one age): the {self._family.parameter_names[1]} "
                         "is not identifiable")
        hints.append("pool cohorts to widen the range of ages")
        return "; ".join(hints)

    def _fail(self, problems: tuple[_Problem, ...], prefix: str, hints: str) -> None:
        message = prefix + "; ".join(p.text for p in problems) + ". Hints: " + hints
        if self.raise_on_failure:
            raise (UnidentifiableError if any(p.unidentifiable for p in problems) else FitNotConvergedError)(message)
        logger.warning("%s", message)

    def _result(
        self, data: LifeData, theta: FloatArray, value: float, covariance: FloatArray, converged: bool,
        iterations: int, gradient_norm: float, fixed: tuple[str, ...],
    ) -> FitResult:
        theta = np.asarray(theta, dtype=float)
        theta.setflags(write=False)
        covariance.setflags(write=False)
        result = FitResult(self._family, theta, covariance, float(value), converged, int(iterations),
                           gradient_norm / data.prepared.total_units, data, self.confidence_level, fixed)
        logger.debug("%s fit: %s, loglik %.6f in %d iterations", self._family.label,
                     self._family.describe(theta), result.log_likelihood, result.iterations)
        return result


def _covariance(hessian: FloatArray) -> FloatArray:
    covariance = np.linalg.inv(-hessian)
    return 0.5 * (covariance + covariance.T)
