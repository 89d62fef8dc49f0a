"""Likelihood-ratio (profile likelihood) bounds on any parameter or smooth quantity, for any family.

The interval is {psi : 2 (loglik_max - profile loglik(psi)) <= chi2_1 quantile(level)}. Each quantity
is made a coordinate psi by reparameterising theta = (theta0, theta1) of a log-location-scale family
(log T = theta0 + sigma Z, sigma = exp(sign theta1)):

* theta1 (Weibull log shape, lognormal log sigma): nuisance s = theta0;
* theta0 (log scale, mu): nuisance s = theta1, theta0 = psi;
* the B-life t_p, psi = log t_p = theta0 + sigma z_p: nuisance s = theta1, theta0 = psi - z_p sigma(s);
* F(t), psi = u = (log t - theta0) / sigma, so F = F0(u): nuisance s = theta1, theta0 = log t - u sigma(s).

So theta0 = c - d sigma(s) with (c, d) = (psi, 0), (psi, z_p) or (log t, psi); the derivatives along s
follow from those in theta by the chain rule. The nuisance is maximised by 1-D Newton, warm-started
from the nearest solved point, and each end is found by bracketing and brentq. Ends the data do not
bound within a factor 1e6 of the estimate (dispersion: within [0.001, 1000]) come back as 0 / inf
(F: 0 / 1; an unbounded location like mu: -inf / inf) and are named in `open_ends`. For a fit with its
dispersion fixed only theta0 is profiled, and the B-life and F(t) follow monotonically from its ends.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import NamedTuple

import numpy as np
import numpy.typing as npt
from scipy import optimize, stats

from warranty_forecast.lifecore.errors import FitNotConvergedError, ProfileLikelihoodError
from warranty_forecast.lifecore.families.base import check_fraction
from warranty_forecast.lifecore.likelihood import log_likelihood
from warranty_forecast.lifecore.optimise import maximise_1d
from warranty_forecast.lifecore.result import FitResult

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]

# Dispersions (Weibull shape, lognormal sigma) the profile search considers (ends beyond them count
# as not bounded by the data).
_PROFILE_DISPERSION_LIMITS = (1e-3, 1e3)
# How far from the estimate an end is sought, in log units of shape, scale or B-life, and in
# u = z-value for F(t) (a factor of 1e6 either way); an end not reached is unbounded.
_PROFILE_LOG_RANGE = math.log(1e6)
# Largest accepted rise of a profile above the fit's maximum (log-likelihood units), and largest
# accepted miss of the deviance at a returned end (the root finder aims at ~1e-9).
_ABOVE_MAXIMUM_TOL = 1e-6
_END_DEVIANCE_TOL = 1e-5


class _Profile:
    """Profile log-likelihood of one quantity psi of a fit (internal); see the module docstring.

    `role` is "dispersion" (psi = theta1), "location" (psi = theta0), "b_life" or "cdf". With the
    dispersion fixed there is no nuisance: psi = theta0 and the profile is the 1-D likelihood.
    """

    def __init__(self, fit: FitResult, data, role: str, log_lik_max: float, hessian_at_fit: FloatArray,  # type: ignore[no-untyped-def]
                 *, p: float | None = None, t: float | None = None, label: str = "") -> None:
        self.family = family = fit.family
        self.data = data
        self.quantity = label or role
        self.role = role
        self.fixed = bool(fit.fixed)
        self.log_lik_max = log_lik_max
        a_hat, b_hat = (float(v) for v in fit.theta)
        self.theta1_fixed = b_hat
        sign, sigma = family.sign, family.sigma(fit.theta)
        self.c, self.d = 0.0, 0.0
        self.dc, self.dd = 1.0, 0.0  # d(c, d) / d psi
        if role == "dispersion":
            psi_hat, s_hat, gradient = b_hat, a_hat, (0.0, 1.0)
        elif role == "location":
            psi_hat, s_hat, gradient = a_hat, b_hat, (1.0, 0.0)
        elif role == "b_life":
            self.d = float(family.std_quantile(p))
            psi_hat, s_hat, gradient = a_hat + self.d * sigma, b_hat, (1.0, sign * self.d * sigma)
        else:
            assert t is not None
            self.c, self.dc, self.dd = math.log(t), 0.0, 1.0
            psi_hat = (self.c - a_hat) / sigma
            s_hat, gradient = b_hat, (-1.0 / sigma, -sign * psi_hat)
        self.psi_hat = psi_hat
        g = np.asarray(gradient)
        self.se = math.sqrt(max(float(g @ fit.covariance @ g), 0.0))
        # nuisance bounds: the dispersion within the profile limits; theta0 effectively free
        if role == "dispersion":
            self.s_bounds = (s_hat - 1e5, s_hat + 1e5)
        else:
            self.s_bounds = (math.log(_PROFILE_DISPERSION_LIMITS[0]), math.log(_PROFILE_DISPERSION_LIMITS[1]))
        # solved points (psi, s*, ds*/dpsi) for warm starts; slope at the fit by the implicit
        # function theorem, ds*/dpsi = -l_{s psi} / l_{ss} (the gradient is 0 at the maximum)
        _, d2, cross = self._derivatives_from(np.zeros(2), hessian_at_fit, psi_hat, s_hat)
        slope = -cross / d2 if d2 < 0.0 else 0.0
        self._solved: list[tuple[float, float, float]] = [(psi_hat, s_hat, slope)]
        self._values: dict[float, float] = {psi_hat: log_lik_max}
        self.evaluations = 0

    # -- theta and derivatives along the nuisance -----------------------------------------------

    def theta(self, psi: float, s: float) -> tuple[float, float]:
        if self.role == "dispersion":
            return s, psi
        c = psi if self.dc else self.c
        d = psi if self.dd else self.d
        return c - d * math.exp(self.family.sign * s), s

    def _derivatives_from(
        self, gradient: FloatArray, hessian: FloatArray, psi: float, s: float
    ) -> tuple[float, float, float]:
        """(dl/ds, d2l/ds2, d2l/ds dpsi) from the theta-gradient and Hessian (chain rule)."""
        if self.role == "dispersion":
            return float(gradient[0]), float(hessian[0, 0]), float(hessian[0, 1])
        g0, g1 = float(gradient[0]), float(gradient[1])
        h00, h01, h11 = float(hessian[0, 0]), float(hessian[0, 1]), float(hessian[1, 1])
        sign = self.family.sign
        e = math.exp(sign * s)  # sigma(s)
        d = psi if self.dd else self.d
        m = -d * sign * e  # d theta0 / ds; d2 theta0 / ds2 = -d e
        d1 = g0 * m + g1
        d2 = h00 * m * m + 2.0 * h01 * m + h11 - g0 * d * e
        d_theta0_d_psi = self.dc - self.dd * e
        cross = (h00 * m + h01) * d_theta0_d_psi - g0 * self.dd * sign * e
        return d1, d2, cross

    def _along_nuisance(self, psi: float, s: float) -> tuple[float, float, float, float]:
        self.evaluations += 1
        value, gradient, hessian = log_likelihood(self.family, self.theta(psi, s), self.data, derivatives=2)
        return (value, *self._derivatives_from(gradient, hessian, psi, s))

    # -- the profile ----------------------------------------------------------------------------

    def __call__(self, psi: float) -> float:
        """Maximum of the log-likelihood over the nuisance with the quantity held at psi."""
        cached = self._values.get(psi)
        if cached is not None:
            return cached
        if self.fixed:
            self.evaluations += 1
            value = float(log_likelihood(self.family, (psi, self.theta1_fixed), self.data))
        else:
            psi_n, s_n, slope_n = min(self._solved, key=lambda r: abs(r[0] - psi))
            s0 = s_n + slope_n * (psi - psi_n)
            # natural step in theta0 is sigma
            max_step = 2.0 * math.exp(self.family.sign * psi) if self.role == "dispersion" else 2.0
            best = maximise_1d(lambda s: self._along_nuisance(psi, s), s0, *self.s_bounds, max_step=max_step)
            value, _, d2, cross = best.values
            if not (best.converged and math.isfinite(value)):
                raise ProfileLikelihoodError(
                    f"profile likelihood of {self.quantity} could not be maximised over the nuisance "
                    f"parameter at {self._describe(psi)}; the likelihood-ratio bound is not available"
                )
            if best.at_bound:
                logger.debug("profile of %s at %s: nuisance at its limit", self.quantity, self._describe(psi))
            self._solved.append((psi, best.x, -cross / d2 if d2 < 0.0 and not best.at_bound else 0.0))
        if value > self.log_lik_max + _ABOVE_MAXIMUM_TOL * (1.0 + 1e-6 * abs(self.log_lik_max)):
            raise ProfileLikelihoodError(
                f"profile likelihood of {self.quantity} at {self._describe(psi)} is {value:.9g}, above the fit's "
                f"maximum {self.log_lik_max:.9g}: the fit is not at the global maximum; refit"
            )
        self._values[psi] = value
        return value

    def _describe(self, psi: float) -> str:
        names = {"b_life": "log B-life", "cdf": "z-value u"}
        return f"{names.get(self.role, 'theta of ' + self.quantity)} {psi:.6g}"

    def search_limits(self) -> tuple[float, float]:
        """Range of psi searched for the ends (beyond it an end counts as unbounded)."""
        lo, hi = self.psi_hat - _PROFILE_LOG_RANGE, self.psi_hat + _PROFILE_LOG_RANGE
        if self.role == "dispersion":
            lo = max(lo, math.log(_PROFILE_DISPERSION_LIMITS[0]))
            hi = min(hi, math.log(_PROFILE_DISPERSION_LIMITS[1]))
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


def _role(fit: FitResult, quantity: str, p: float | None, t: float | None) -> str:
    """Check a quantity and its argument; its role in the reparameterisation."""
    names = fit.family.parameter_names
    if quantity == names[0]:
        return "location"
    if quantity == names[1]:
        return "dispersion"
    if quantity not in ("b_life", "cdf"):
        raise ValueError(f"quantity must be one of {names + ('b_life', 'cdf')}, got {quantity!r}")
    if quantity == "b_life":
        if p is None:
            raise ValueError("quantity 'b_life' needs p, the fraction failed (e.g. 0.10 for B10)")
        check_fraction(p)
    if quantity == "cdf" and not (t is not None and math.isfinite(t) and t > 0.0):
        raise ValueError(f"quantity 'cdf' needs an age t > 0, got {t!r}")
    return quantity


def _check_fit(fit: FitResult, confidence_level: float | None) -> float:
    level = fit.confidence_level if confidence_level is None else float(confidence_level)
    if not 0.0 < level < 1.0:
        raise ValueError(f"confidence_level must lie in (0, 1), got {confidence_level!r}")
    if not fit.converged:
        raise FitNotConvergedError("likelihood-ratio bounds need a converged fit; this fit did not converge")
    if fit.fixed and fit.fixed != (fit.family.parameter_names[1],):
        raise ValueError("likelihood-ratio bounds with a fixed parameter need the dispersion (shape, sigma) fixed")
    return level


def _to_quantity(
    fit: FitResult, role: str, ends: _Ends, p: float | None, t: float | None
) -> tuple[tuple[float, float], tuple[bool, bool]]:
    """Map psi ends to the quantity's units, with whether each was reached; unreached ends become
    0 / +inf (F: 0 / 1; a location on the real line: -inf / +inf).

    With the dispersion fixed psi is theta0 throughout, and the B-life (increasing in theta0) and F(t)
    (decreasing in theta0) follow monotonically from its ends.
    """
    family = fit.family
    lo_psi, hi_psi = ends.lower, ends.upper
    lo_ok, hi_ok = ends.lower_reached, ends.upper_reached
    sigma = family.sigma(fit.theta)
    if fit.fixed and role == "b_life":
        shift = float(family.std_quantile(p)) * sigma  # log t_p = theta0 + sigma z_p
        lo_psi, hi_psi = lo_psi + shift, hi_psi + shift
    elif fit.fixed and role == "cdf":
        assert t is not None
        # u = (log t - theta0) / sigma: decreasing in theta0, so the ends swap
        lo_psi, hi_psi = (math.log(t) - hi_psi) / sigma, (math.log(t) - lo_psi) / sigma
        lo_ok, hi_ok = hi_ok, lo_ok
    if role == "cdf":
        lower = float(family.std_cdf(lo_psi)) if lo_ok else 0.0
        upper = float(family.std_cdf(hi_psi)) if hi_ok else 1.0
        return (lower, upper), (lo_ok, hi_ok)
    if role == "location" and not family.location_is_log:
        return (lo_psi if lo_ok else -math.inf, hi_psi if hi_ok else math.inf), (lo_ok, hi_ok)
    lower = math.exp(lo_psi) if lo_ok else 0.0
    upper = math.exp(min(hi_psi, 709.0)) if hi_ok else math.inf
    return (lower, upper), (lo_ok, hi_ok)


def _profile_ends(
    fit: FitResult, quantity: str, level: float, log_lik_max: float, hessian: FloatArray,
    p: float | None, t: float | None,
) -> tuple[tuple[float, float], tuple[bool, bool]]:
    """Bounds of one quantity in its units and whether each end was reached (internal)."""
    role = _role(fit, quantity, p, t)
    if fit.fixed and role == "dispersion":
        value = fit.parameters[quantity]
        return (value, value), (True, True)
    profiled = "location" if fit.fixed else role
    profile = _Profile(fit, fit.data._distinct, profiled, log_lik_max, hessian, p=p, t=t, label=quantity)
    ends = _likelihood_ratio_interval(profile, level)
    logger.debug("likelihood-ratio bounds of %s: %d log-likelihood evaluations", quantity, profile.evaluations)
    return _to_quantity(fit, role, ends, p, t)


def _maximum(fit: FitResult) -> tuple[float, FloatArray]:
    log_lik_max, _, hessian = log_likelihood(fit.family, fit.theta, fit.data._distinct, derivatives=2)
    return log_lik_max, hessian


def profile_bounds(
    fit: FitResult, quantity: str, *, p: float | None = None, t: float | None = None,
    confidence_level: float | None = None,
) -> tuple[float, float]:
    """Likelihood-ratio bounds (lower, upper) of one quantity of a fit, from the fit's own data.

    quantity: a parameter name (age units for scale; mu in log age units), "b_life" with p, the
    fraction failed (B10: p = 0.10; age units), or "cdf" with an age t > 0 (fraction failed F(t)).
    Level defaults to fit.confidence_level. Raises FitNotConvergedError for a fit that did not
    converge, ProfileLikelihoodError when a profile cannot be maximised (or finds a higher maximum
    than the fit), ValueError for bad input.
    """
    _role(fit, quantity, p, t)
    level = _check_fit(fit, confidence_level)
    bounds, _ = _profile_ends(fit, quantity, level, *_maximum(fit), p, t)
    return bounds


def profile_log_likelihood(
    fit: FitResult, quantity: str, value: float, *, p: float | None = None, t: float | None = None
) -> float:
    """Profile log-likelihood: the largest log-likelihood of the fit's data with the quantity at `value`.

    Same quantities and units as `profile_bounds` (F(t) as a fraction in (0, 1)). For a fit with its
    dispersion fixed the result is the 1-D likelihood at the theta0 implied by `value`.
    """
    role = _role(fit, quantity, p, t)
    _check_fit(fit, None)
    family = fit.family
    positive = role != "location" or family.location_is_log
    if not (math.isfinite(value) and (value > 0.0 or not positive) and (role != "cdf" or value < 1.0)):
        raise ValueError(f"value must be positive (F: in (0, 1)), got {value!r}")
    if role == "cdf":
        psi = float(family.std_quantile(value))
    elif role == "location":
        psi = family.to_theta(0, value)
    else:
        psi = math.log(value)
    if fit.fixed:
        if role == "dispersion":
            raise ValueError(f"the {quantity} of this fit is fixed; profile another quantity instead")
        sigma = family.sigma(fit.theta)
        if role == "b_life":
            psi -= float(family.std_quantile(p)) * sigma
        elif role == "cdf":
            assert t is not None
            psi = math.log(t) - psi * sigma
        return float(log_likelihood(family, (psi, fit.theta[1]), fit.data._distinct))
    profile = _Profile(fit, fit.data._distinct, role, *_maximum(fit), p=p, t=t, label=quantity)
    return profile(psi)


@dataclass(frozen=True, eq=False)
class LikelihoodRatioBounds:
    """Likelihood-ratio bounds of one fit at `confidence_level`.

    parameters: {name: (lower, upper)} (also as attributes: lr.shape, lr.scale, lr.mu, lr.sigma);
    b_life: {p: (lower, upper)} ages by which a fraction p has failed; cdf: {t: (lower, upper)}
    fractions failed by age t. An end the data do not bound (flat likelihood) is 0 or +inf (F: 0 or 1)
    and is named in `open_ends` (e.g. "B10 upper"); `is_bounded` is False then. A fixed parameter's
    bounds are (value, value).
    """

    parameters: Mapping[str, tuple[float, float]]
    b_life: Mapping[float, tuple[float, float]]
    cdf: Mapping[float, tuple[float, float]]
    confidence_level: float
    fixed: tuple[str, ...] = ()
    open_ends: tuple[str, ...] = ()
    bound_method: str = field(default="likelihood-ratio")

    def __post_init__(self) -> None:
        for name in ("parameters", "b_life", "cdf"):
            object.__setattr__(self, name, MappingProxyType(dict(getattr(self, name))))

    def __getattr__(self, name: str) -> tuple[float, float]:
        parameters = self.__dict__.get("parameters", {})
        if name in parameters:
            return parameters[name]
        raise AttributeError(f"{type(self).__name__} has no attribute {name!r}")

    @property
    def is_bounded(self) -> bool:
        """True when the data bound every end (no end is 0 / +inf for want of information)."""
        return not self.open_ends


def likelihood_ratio_bounds(
    fit: FitResult, *, b_life_fractions: Sequence[float] = (0.01, 0.10), cdf_ages: Sequence[float] = (),
    confidence_level: float | None = None,
) -> LikelihoodRatioBounds:
    """Likelihood-ratio bounds of every parameter (second parameter first: shape, then scale), of
    B-lives (fractions p) and of F(t) (ages t). See `profile_bounds` for the method, units and errors."""
    for p in b_life_fractions:
        _role(fit, "b_life", p, None)
    for t in cdf_ages:
        _role(fit, "cdf", None, t)
    level = _check_fit(fit, confidence_level)
    log_lik_max, hessian = _maximum(fit)
    open_ends: list[str] = []

    def bounds(quantity: str, name: str, p: float | None = None, t: float | None = None) -> tuple[float, float]:
        values, reached = _profile_ends(fit, quantity, level, log_lik_max, hessian, p, t)
        open_ends.extend(f"{name} {side}" for side, ok in zip(("lower", "upper"), reached) if not ok)
        return values

    parameters = {name: bounds(name, name) for name in reversed(fit.family.parameter_names)}
    b_life = {float(p): bounds("b_life", f"B{100 * p:g}", p=float(p)) for p in b_life_fractions}
    cdf = {float(t): bounds("cdf", f"F({t:g})", t=float(t)) for t in cdf_ages}
    if open_ends:
        logger.info("likelihood-ratio bounds not bounded by the data: %s", ", ".join(open_ends))
    return LikelihoodRatioBounds(parameters, b_life, cdf, level, fit.fixed, tuple(open_ends))
