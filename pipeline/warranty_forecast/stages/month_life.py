"""One build month's life against its product's base life model: how far off it is, and the life model
its forecast uses once it is flagged.

A month's data are its returns counted by month in service k (ages in the day-grid interval month_interval_ends(k), about (k-1, k] months) and its
suspensions (units observed to a given age in months without returning). The product's base model
comes in as anything with `log_survival(t)` (t in months): log R0(t).

Two alternatives to the base, both fitted by maximum likelihood with the base held fixed:

* Own scale, common shape (`ScaledHazard`): log R(t) = c log R0(t), i.e. the cumulative hazard times
  a hazard ratio c > 0. For a Weibull base with shape b and scale eta this is the Weibull with the same
  shape and scale eta c^(-1/b): the month's own scale. c = 1 is the base; the one-sided
  likelihood-ratio test of c = 1 against c > 1 uses the signed root z = sign(c_hat - 1)
  sqrt(2 (l(c_hat) - l(1))), p = 1 - Phi(z), and the likelihood-ratio interval
  {c: 2 (l(c_hat) - l(c)) <= chi2_1(level)}. l(c) is concave in c, so c_hat is unique.
* A defective share (`WithDefectiveShare`): a share p of the month's units carries a defect with an
  exponential life of mean theta months, on top of the base life every unit has (independent competing
  risks): R(t) = R0(t) (1 - p + p exp(-t / theta)). This is the limited-failure-population idea
  (Meeker 1987, Technometrics 29, from memory) put beside the base life: a bad lot whose weak units fail
  early and are then used up, so the month's excess returns fade instead of growing with age, as a
  scaled hazard would make them.

`month_life_model` fits both and keeps the one with the lower AIC (1 and 2 parameters). The defective
share is rejected when its fit runs to the edge of its search box (p or theta at a bound), where its
parameters are not identified by the data.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol

import numpy as np
import numpy.typing as npt
import pandas as pd
from scipy import optimize, special, stats

from warranty_forecast.lifecore.data import month_interval_ends

FloatArray = npt.NDArray[np.float64]

OWN_SCALE = "own scale"
DEFECTIVE_SHARE = "defective share"

_LOG_RATIO_BOX = (-30.0, 30.0)  # search box of log c
_LOGIT_SHARE_BOX = (-16.0, 0.0)  # p from 1e-7 to 1/2: a "defective share" above half is a new life, not a lot defect
_MIN_MEAN_LIFE = 0.1  # months: theta below this is a failure on arrival, not a life


class BaseLife(Protocol):
    """A life distribution in months: log R(t) for t >= 0."""

    def log_survival(self, t: npt.ArrayLike) -> FloatArray: ...


@dataclass(frozen=True)
class MonthData:
    """One build month's life data: returns by month in service and suspensions by observed age."""

    months_in_service: FloatArray  # k >= 1; the returns' ages are in month_interval_ends(k), about (k-1, k]
    returns: FloatArray
    suspension_ages: FloatArray  # months
    suspension_counts: FloatArray

    @classmethod
    def of(
        cls,
        months_in_service: npt.ArrayLike,
        returns: npt.ArrayLike,
        suspension_ages: npt.ArrayLike,
        suspension_counts: npt.ArrayLike,
    ) -> MonthData:
        arrays = [np.asarray(v, dtype=float).reshape(-1) for v in
                  (months_in_service, returns, suspension_ages, suspension_counts)]
        for name, values in zip(("months_in_service", "returns", "suspension_ages", "suspension_counts"), arrays):
            if not np.all(np.isfinite(values)) or np.any(values < 0):
                raise ValueError(f"{name} must be finite and non-negative")
        if len(arrays[0]) != len(arrays[1]) or len(arrays[2]) != len(arrays[3]):
            raise ValueError("returns and months_in_service, suspension ages and counts must pair up")
        if np.any(arrays[0] < 1):
            raise ValueError("months_in_service must be at least 1")
        keep_returns = arrays[1] > 0
        keep_suspensions = arrays[3] > 0
        return cls(arrays[0][keep_returns], arrays[1][keep_returns], arrays[2][keep_suspensions],
                   arrays[3][keep_suspensions])

    @property
    def n_returns(self) -> float:
        return float(self.returns.sum())

    @property
    def units(self) -> float:
        return float(self.returns.sum() + self.suspension_counts.sum())


def log_likelihood(model: BaseLife, data: MonthData) -> float:
    """Grouped log-likelihood: sum n_k log(R(b_{k-1}) - R(b_k)) + sum s_j log R(a_j), in log space, with
    (b_{k-1}, b_k] = month_interval_ends(k) (the day grid)."""
    start, end = month_interval_ends(data.months_in_service)
    lower = model.log_survival(start)
    upper = model.log_survival(end)
    with np.errstate(divide="ignore", invalid="ignore"):
        in_month = lower + np.log(-np.expm1(upper - lower))
    value = float(np.sum(data.returns * in_month)) + float(np.sum(data.suspension_counts * model.log_survival(data.suspension_ages)))
    return value if math.isfinite(value) else -math.inf


@dataclass(frozen=True)
class ScaledHazard:
    """log R(t) = hazard_ratio x log R0(t): the base life with its cumulative hazard scaled."""

    base: BaseLife
    hazard_ratio: float

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        return self.hazard_ratio * np.asarray(self.base.log_survival(t), dtype=float)

    def cdf(self, t: npt.ArrayLike) -> FloatArray:
        return -np.expm1(self.log_survival(t))


@dataclass(frozen=True)
class WithDefectiveShare:
    """R(t) = R0(t) (1 - p + p exp(-t / theta)): a share p of units with an exponential defect life."""

    base: BaseLife
    defective_share: float  # p, 0..1
    defect_mean_life: float  # theta, months

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        t = np.asarray(t, dtype=float)
        defect_failed = -np.expm1(-t / self.defect_mean_life)  # 1 - exp(-t/theta)
        return np.asarray(self.base.log_survival(t), dtype=float) + np.log1p(-self.defective_share * defect_failed)

    def cdf(self, t: npt.ArrayLike) -> FloatArray:
        return -np.expm1(self.log_survival(t))


@dataclass(frozen=True)
class HazardRatioTest:
    """The month's hazard ratio c against the base (own scale, common shape), its likelihood-ratio
    interval, and the one-sided likelihood-ratio test of c = 1 against c > 1."""

    hazard_ratio: float
    lower: float
    upper: float
    signed_root: float
    p_value: float
    log_likelihood: float  # at c_hat
    log_likelihood_base: float  # at c = 1


def hazard_ratio_test(base: BaseLife, data: MonthData, confidence_level: float = 0.95) -> HazardRatioTest:
    """Fit c in log R(t) = c log R0(t) to one month's data; LR interval and one-sided LR test of c = 1.

    With (b_{k-1}, b_k] = month_interval_ends(k), u_k = H0(b_{k-1}), d_k = H0(b_k) - H0(b_{k-1})
    (H0 = -log R0) and S = sum s_j H0(a_j):
        l(c) = sum n_k (-c u_k + log(1 - exp(-c d_k))) - c S,
        l'(c) = sum n_k (-u_k + d_k / expm1(c d_k)) - S,   decreasing in c (concave l).
    A month with no returns has c_hat = 0 (the edge): p = 1, lower bound 0.
    """
    start, end = month_interval_ends(data.months_in_service)
    u = -np.asarray(base.log_survival(start), dtype=float)
    d = -np.asarray(base.log_survival(end), dtype=float) - u
    exposure = float(np.sum(data.suspension_counts * -np.asarray(base.log_survival(data.suspension_ages), dtype=float)))
    n = data.returns
    if np.any((n > 0) & ~(d > 0)):
        raise ValueError("the base model gives no chance of a return in a month in service where returns were counted")

    def ell(c: float) -> float:
        if c <= 0:
            return 0.0 if not n.size else -math.inf
        return float(np.sum(n * (-c * u + np.log(-np.expm1(-c * d))))) - c * exposure

    def slope_in_log_c(x: float) -> float:  # c l'(c) at c = exp(x): same sign as l'(c)
        c = math.exp(x)
        with np.errstate(over="ignore"):  # expm1 overflows to inf far above c_hat: the term is then 0
            return c * (float(np.sum(n * (-u + d / np.expm1(c * d)))) - exposure)

    at_one = ell(1.0)
    if data.n_returns == 0:
        c_hat, at_max = 0.0, 0.0
    else:
        low, high = _LOG_RATIO_BOX
        # l rises without end when every unit returned in its first month: c_hat is then the box's edge
        if slope_in_log_c(low) <= 0:
            c_hat = math.exp(low)
        elif slope_in_log_c(high) >= 0:
            c_hat = math.exp(high)
        else:
            c_hat = math.exp(optimize.brentq(slope_in_log_c, low, high, xtol=1e-12, rtol=1e-12))
        at_max = ell(c_hat)
    drop = 2.0 * max(at_max - at_one, 0.0)
    signed_root = math.copysign(math.sqrt(drop), c_hat - 1.0) if c_hat != 1.0 else 0.0
    critical = float(stats.chi2.ppf(confidence_level, 1)) / 2.0

    def below_target(x: float) -> float:
        return at_max - ell(math.exp(x)) - critical

    if c_hat <= 0:
        lower = 0.0
        # l(c) = -c S with no returns: the bound solves c S = critical
        upper = critical / exposure if exposure > 0 else math.inf
    else:
        x_hat = math.log(c_hat)
        lower = (
            math.exp(optimize.brentq(below_target, _LOG_RATIO_BOX[0] - 10, x_hat))
            if below_target(_LOG_RATIO_BOX[0] - 10) > 0 else 0.0
        )
        upper = (
            math.exp(optimize.brentq(below_target, x_hat, _LOG_RATIO_BOX[1] + 10))
            if below_target(_LOG_RATIO_BOX[1] + 10) > 0 else math.inf
        )
    return HazardRatioTest(
        hazard_ratio=c_hat,
        lower=lower,
        upper=upper,
        signed_root=signed_root,
        p_value=float(stats.norm.sf(signed_root)) if data.n_returns > 0 else 1.0,
        log_likelihood=at_max,
        log_likelihood_base=at_one,
    )


@dataclass(frozen=True)
class MonthLifeModel:
    """The life model a flagged build month's forecast uses, and what was weighed to choose it.

    `kind` is OWN_SCALE or DEFECTIVE_SHARE. hazard_ratio: c of the own-scale fit (always fitted);
    defective_share, defect_mean_life (months): the defective-share fit, NaN when it was not usable.
    aic_*: AIC of each fit (NaN when not usable). `model` has `log_survival(t)` and `cdf(t)`.
    """

    kind: str
    model: ScaledHazard | WithDefectiveShare
    hazard_ratio: float
    defective_share: float
    defect_mean_life: float
    aic_own_scale: float
    aic_defective_share: float
    note: str = ""

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        return self.model.log_survival(t)


def defective_share_fit(base: BaseLife, data: MonthData) -> tuple[float, float, float] | None:
    """Maximum-likelihood (p, theta months, log-likelihood) of `WithDefectiveShare` on one month's data,
    or None when the fit is not identified (no returns, or the optimum on the edge of the search box).

    Searched over logit p in _LOGIT_SHARE_BOX and log theta between _MIN_MEAN_LIFE and 100 x the
    month's oldest age, from several starts (L-BFGS-B on a numerical gradient: two parameters, one month).
    """
    if data.n_returns == 0:
        return None
    oldest = float(max(np.max(data.months_in_service, initial=1.0), np.max(data.suspension_ages, initial=1.0)))
    log_theta_box = (math.log(_MIN_MEAN_LIFE), math.log(100.0 * oldest))

    def negative(x: FloatArray) -> float:
        value = log_likelihood(WithDefectiveShare(base, float(special.expit(x[0])), math.exp(x[1])), data)
        return -value if math.isfinite(value) else 1e300

    best = None
    share_guess = min(max(data.n_returns / max(data.units, 1.0), 1e-6), 0.4)
    for logit_p in (special.logit(share_guess), special.logit(share_guess / 4), -3.0):
        for log_theta in (0.0, math.log(max(oldest / 4, 0.5)), math.log(oldest)):
            start = np.array([min(max(logit_p, _LOGIT_SHARE_BOX[0] + 0.5), _LOGIT_SHARE_BOX[1] - 0.5),
                              min(max(log_theta, log_theta_box[0] + 0.1), log_theta_box[1] - 0.1)])
            result = optimize.minimize(negative, start, method="L-BFGS-B",
                                       bounds=[_LOGIT_SHARE_BOX, log_theta_box], options={"ftol": 1e-13, "gtol": 1e-9})
            if best is None or result.fun < best.fun:
                best = result
    assert best is not None
    x = best.x
    on_edge = (
        x[0] <= _LOGIT_SHARE_BOX[0] + 1e-3 or x[0] >= _LOGIT_SHARE_BOX[1] - 1e-3
        or x[1] <= log_theta_box[0] + 1e-3 or x[1] >= log_theta_box[1] - 1e-3
    )
    if on_edge or not math.isfinite(best.fun) or best.fun >= 1e300:
        return None
    return float(special.expit(x[0])), float(math.exp(x[1])), float(-best.fun)


def month_life_model(base: BaseLife, data: MonthData, confidence_level: float = 0.95) -> MonthLifeModel:
    """The flagged month's life for its forecast: own scale (1 parameter) or a defective share
    (2 parameters), whichever has the lower AIC; own scale when the defective share is not identified."""
    scaled = hazard_ratio_test(base, data, confidence_level)
    aic_scaled = 2.0 - 2.0 * scaled.log_likelihood
    share = defective_share_fit(base, data)
    if share is None:
        return MonthLifeModel(
            OWN_SCALE, ScaledHazard(base, scaled.hazard_ratio), scaled.hazard_ratio, math.nan, math.nan,
            aic_scaled, math.nan, note="defective-share fit not identified by the month's data",
        )
    p, theta, ll = share
    aic_share = 4.0 - 2.0 * ll
    if aic_share < aic_scaled:
        return MonthLifeModel(DEFECTIVE_SHARE, WithDefectiveShare(base, p, theta), scaled.hazard_ratio, p, theta,
                              aic_scaled, aic_share)
    return MonthLifeModel(OWN_SCALE, ScaledHazard(base, scaled.hazard_ratio), scaled.hazard_ratio, p, theta,
                          aic_scaled, aic_share)


def month_data_by_build_month(returns: pd.DataFrame, suspensions: pd.DataFrame) -> dict[object, MonthData]:
    """One product's rows (fit_returns, fit_suspensions) as life data per build month."""
    counted = _sums_by_build_month(returns, "months_in_service", "returns")
    survived = _sums_by_build_month(suspensions, "observed_age_months", "suspensions")
    empty = (np.zeros(0), np.zeros(0))
    return {
        month: MonthData.of(*counted.get(month, empty), *survived.get(month, empty))
        for month in sorted(set(counted) | set(survived))
    }


def _sums_by_build_month(frame: pd.DataFrame, key: str, value: str) -> dict[object, tuple[np.ndarray, np.ndarray]]:
    """build month -> (the sorted values of `key`, the sums of `value` at each), from one grouping of the
    table (a grouping per build month costs a pandas call per month: thousands per product line)."""
    if not len(frame):
        return {}
    sums = frame.groupby(["build_month", key])[value].sum()
    if not len(sums):
        return {}
    months = sums.index.get_level_values(0)
    ages = sums.index.get_level_values(1).to_numpy(dtype=float)
    values = sums.to_numpy(dtype=float)
    starts = np.flatnonzero(np.r_[True, months[1:] != months[:-1]])
    ends = np.r_[starts[1:], len(sums)]
    return {months[a]: (ages[a:b], values[a:b]) for a, b in zip(starts, ends)}
