"""Prediction intervals for future returns and the warranty reserve (counts and currency units).

The forecast (`stages.forecast`) gives plug-in expectations: expected returns under the fitted life
model as if its parameters were known. A prediction interval must also carry (1) the uncertainty of the
fitted parameters and (2) the randomness of the counts themselves. The predictive distribution used here:

1. Parameter draws. For each product, B parameter sets theta_1..theta_B from the fit's sampling
   distribution (`SampledLife.sample_log_survival`):
   * `NormalApproximation` (default for a `FitResult`): theta ~ Normal(theta_hat, covariance) on the
     family's unbounded scale (Weibull: log scale, log shape), the large-sample approximation. A fixed
     parameter (fixed-shape fit) has variance 0 and stays fixed.
   * `ParametricBootstrap`: new data sets simulated from the fitted model on the product's own units
     at risk (the observed ages of fit_suspensions), each refitted with the project's `Fitter`; the
     refitted thetas are the draws. Escobar & Meeker (1999, Technometrics 41, "Statistical prediction
     based on censored life data") show that the plug-in interval is too narrow and correct it by
     simulation (calibration); mixing the count's law over bootstrap estimates, as here, is the other
     common simulation-based predictive distribution (its naming and properties as recalled from the
     literature, from memory; the coverage tool measures it: tools/interval_coverage.py).
   * A life model without a sampler (a flagged build month's own life, `month_life.MonthLifeModel`)
     keeps its parameters fixed: only the count randomness is added, and a note says so.
2. Expected counts per draw. For each draw, the expected returns in every future cell (suspension row
   x month in service), computed by `forecast._future_intervals` and `forecast._expected_in_intervals`
   (the forecast's own arithmetic, so a change there carries over), summed into the aggregates: each
   build month, each calendar month (a cell's calendar month from `forecast._product_forecast`), the
   product until the warranties end, and the 12 calendar months after the as-of date's month.
3. Counts. Given a draw, the returns in disjoint cells are taken as independent Poisson, so every
   aggregate is Poisson with the summed mean. The exact alternative, binomial per suspension row, is not
   usable: suspensions are fractional (a group's survivors are shared among its rows in proportion to
   units), and the conditional chance of a return over the rest of the warranty is small, so Poisson
   overstates the variance by the factor 1 / (1 - p) only, with p that chance (conservative, slightly).
   The predictive distribution of an aggregate is the Poisson mixture
        P(N <= y) = (1/B) sum_b PoissonCDF(y; mu_b),
   evaluated exactly (no sampling of the counts): its quantile at level q is the smallest integer y with
   P(N <= y) >= q, as scipy.stats.poisson.ppf defines it. With zero covariance it is the plug-in Poisson
   quantile.
4. Reserve. Per draw, the returns of each build month N_bg ~ Poisson(mu_bg) are drawn, and the total
   cost of N claims is drawn from `ClaimCosts`: resampled from the empirical costs of recent returns
   (a nonparametric bootstrap of both the mean cost and the spread of single claims), a gamma law
   matched to a mean, standard deviation and count, or a fixed cost (configured override). Quantiles of
   the totals per build month and per product (the product total per draw is the sum over its build
   months, so it is coherent with them).
5. Cost by calendar month. Per draw, the returns of each calendar month are drawn the same way and
   costed, giving quantiles per product x month; and, for the whole run, each draw's month totals are
   summed over the products (products are independent: each has its own generator, so draw b of one
   product added to draw b of another is a draw of the sum), giving quantiles of every month's cost over
   all products. A quantile of a sum is not the sum of the quantiles, which is why the sum is formed per
   draw. The same per-draw sums over a product's current months (the as-of date's month and the 12
   after it) and over its later months give the current and non-current parts' quantiles. The sums over
   products are folded in as each product's draws arrive, in product order (the same bits for any number
   of workers), so memory holds one month x draws array, not one per product.

Everything is seeded: the generator of a product is numpy's default generator seeded with (seed, a
CRC-32 of the product name), so a product's intervals do not depend on which other products are in the
run, and a rerun is identical.

Ages in months of 365.25/12 days; counts in returns; costs in the claims extract's currency units.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
import time
import zlib
from dataclasses import dataclass, field
from typing import Mapping, Protocol, Sequence, runtime_checkable

import numpy as np
import numpy.typing as npt
import pandas as pd
from scipy import sparse, special

from warranty_forecast.errors import FitError
from warranty_forecast.lifecore.data import LifeData, month_interval_ends
from warranty_forecast.lifecore.families import Family
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.stages import forecast
from warranty_forecast.stages.forecast import CompetingRisks, LifeDistribution
from warranty_forecast.stages.by_product import rows_by_product
from warranty_forecast.stages.parallel import map_products
from warranty_forecast.stages.reserve import is_current_month

FloatArray = npt.NDArray[np.float64]

DEFAULT_LEVELS = (0.05, 0.5, 0.95)
DEFAULT_DRAWS = 2000
NEXT_12_MONTHS = "next_12_months"
TO_WARRANTY_END = "to_warranty_end"
HORIZONS = (NEXT_12_MONTHS, TO_WARRANTY_END)
HORIZON_MONTHS = 12

_CELLS_PER_CHUNK = 2_000_000  # draws x distinct intervals evaluated at once (16 MB per float array)

BY_BUILD_MONTH_COLUMNS = (
    "product", "build_month", "expected_returns", "returns_lower", "returns_median", "returns_upper",
    "expected_reserve", "reserve_lower", "reserve_median", "reserve_upper",
)
BY_MONTH_COLUMNS = (
    "product", "month", "expected_returns", "returns_lower", "returns_median", "returns_upper",
    "expected_cost", "cost_lower", "cost_median", "cost_upper",
)
COST_BY_MONTH_COLUMNS = ("month", "products", "expected_cost", "cost_lower", "cost_median", "cost_upper")
BY_PRODUCT_COLUMNS = ("product", "horizon", "expected", "lower", "median", "upper")
RESERVE_BY_PRODUCT_COLUMNS = (
    "product", "expected_reserve", "reserve_lower", "reserve_median", "reserve_upper", "cost_basis",
    "reserve_current_lower", "reserve_current_median", "reserve_current_upper",
    "reserve_non_current_lower", "reserve_non_current_median", "reserve_non_current_upper",
)


# ------------------------------------------------------------------------------------------------
# drawn life distributions
# ------------------------------------------------------------------------------------------------


@runtime_checkable
class LifeDraws(Protocol):
    """B life distributions at once: log R(t) of every draw.

    `log_survival(t)` takes a 1-D array of ages (months) and returns shape (n_draws, len(t)), or
    (1, len(t)) when every draw is the same distribution (broadcast by the caller). `take(start, stop)`
    is the draws start..stop-1 (for evaluating in chunks). `note` says anything the caller should report.
    """

    n_draws: int
    note: str

    def log_survival(self, t: npt.ArrayLike) -> FloatArray: ...

    def take(self, start: int, stop: int) -> LifeDraws: ...


@runtime_checkable
class SampledLife(Protocol):
    """A life model whose parameters can be drawn from their sampling distribution (seeded by `rng`)."""

    def sample_log_survival(self, rng: np.random.Generator, n: int) -> LifeDraws: ...


@dataclass(frozen=True, eq=False)
class ParameterDraws:
    """Draws of a log-location-scale family's theta (n_draws x 2, the family's unbounded scale)."""

    family: Family
    thetas: FloatArray
    note: str = ""

    def __post_init__(self) -> None:
        thetas = np.array(self.thetas, dtype=float, ndmin=2)
        if thetas.ndim != 2 or thetas.shape[1] != 2 or not np.all(np.isfinite(thetas)):
            raise ValueError(f"thetas must be a finite (n, 2) array, got shape {thetas.shape}")
        thetas.setflags(write=False)
        object.__setattr__(self, "thetas", thetas)

    @property
    def n_draws(self) -> int:
        return int(self.thetas.shape[0])

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        """log R(t) of every draw, (n_draws, len(t)); 0 at t = 0. Evaluated once per distinct age."""
        t = np.asarray(t, dtype=float).reshape(-1)
        if np.any(t < 0.0) or not np.all(np.isfinite(t)):
            raise ValueError("ages t must be finite and >= 0")
        distinct, inverse = np.unique(t, return_inverse=True)
        positive = distinct > 0.0
        log_t = np.log(np.where(positive, distinct, 1.0))
        # sigma = exp(sign * theta1), z = (log t - theta0) / sigma (families/base.py)
        inverse_sigma = np.exp(-self.family.sign * self.thetas[:, 1])[:, None]
        z = (log_t[None, :] - self.thetas[:, 0][:, None]) * inverse_sigma
        values = np.where(positive[None, :], self.family.std_log_survival(z, 0)[0], 0.0)
        return values[:, inverse.reshape(-1)]

    def take(self, start: int, stop: int) -> ParameterDraws:
        return ParameterDraws(self.family, self.thetas[start:stop], self.note)


@dataclass(frozen=True, eq=False)
class FixedLife:
    """One life model repeated n_draws times (its parameters treated as known)."""

    model: LifeDistribution
    n_draws: int
    note: str = ""

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        t = np.asarray(t, dtype=float).reshape(-1)
        return np.asarray(self.model.log_survival(t), dtype=float).reshape(1, -1)

    def take(self, start: int, stop: int) -> FixedLife:
        return FixedLife(self.model, len(range(start, min(stop, self.n_draws))), self.note)


@dataclass(frozen=True, eq=False)
class SummedDraws:
    """Independent competing risks, drawn: log R = sum of the parts' log R, draw by draw."""

    parts: tuple[LifeDraws, ...]
    note: str = ""

    @property
    def n_draws(self) -> int:
        return max(part.n_draws for part in self.parts)

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        total = None
        for part in self.parts:
            values = part.log_survival(t)
            total = values if total is None else total + values
        assert total is not None
        return total

    def take(self, start: int, stop: int) -> SummedDraws:
        return SummedDraws(tuple(part.take(start, stop) for part in self.parts), self.note)


@dataclass(frozen=True, eq=False)
class NormalApproximation:
    """theta ~ Normal(theta, covariance) on the family's unbounded scale (large-sample approximation).

    `covariance` may be singular (a fixed parameter: zero row and column); it is factored by its
    eigen-decomposition with negative rounding-error eigenvalues set to 0. `scale` multiplies the
    covariance (1 in use; tests widen it).
    """

    family: Family
    theta: FloatArray
    covariance: FloatArray
    scale: float = 1.0

    def __post_init__(self) -> None:
        theta = np.asarray(self.theta, dtype=float).reshape(-1)
        covariance = np.asarray(self.covariance, dtype=float)
        if theta.shape != (2,) or not np.all(np.isfinite(theta)):
            raise ValueError(f"theta must be two finite numbers, got {self.theta!r}")
        if covariance.shape != (2, 2) or not np.all(np.isfinite(covariance)):
            raise ValueError("covariance must be a finite 2 x 2 matrix (a fit that did not converge has none)")
        if not np.allclose(covariance, covariance.T, rtol=1e-8, atol=1e-14):
            raise ValueError("covariance must be symmetric")
        if not (self.scale >= 0.0 and math.isfinite(self.scale)):
            raise ValueError(f"scale must be finite and >= 0, got {self.scale!r}")
        eigenvalues = np.linalg.eigvalsh(covariance)
        if eigenvalues.min() < -1e-9 * max(eigenvalues.max(), 1e-300):
            raise ValueError(f"covariance must be positive semi-definite, eigenvalues {eigenvalues!r}")
        object.__setattr__(self, "theta", theta)
        object.__setattr__(self, "covariance", covariance)

    @classmethod
    def of(cls, fit: FitResult, scale: float = 1.0) -> NormalApproximation:
        """The fit's own estimate and inverse observed information."""
        return cls(fit.family, fit.theta, fit.covariance, scale)

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        """log R(t) at the estimate (the plug-in model)."""
        return self.family.log_survival(t, self.theta)

    def sample_log_survival(self, rng: np.random.Generator, n: int) -> ParameterDraws:
        _check_draws(n)
        eigenvalues, vectors = np.linalg.eigh(self.scale * self.covariance)
        root = vectors * np.sqrt(np.clip(eigenvalues, 0.0, None))  # root @ root.T = covariance
        thetas = self.theta + rng.standard_normal((n, 2)) @ root.T
        return ParameterDraws(self.family, thetas)


def month_in_service(ages: npt.ArrayLike) -> FloatArray:
    """Month in service k of a failure at age t months: the first k whose interval
    `lifecore.data.month_interval_ends(k)` ends at or after t (the day grid the returns are counted on,
    so a simulated return lands in the interval the fitter gives it)."""
    t = np.asarray(ages, dtype=float)
    if t.size == 0:
        return np.empty(0)
    ends = month_interval_ends(np.arange(1, int(np.ceil(float(t.max()))) + 3))[1]
    return np.searchsorted(ends, t, side="left").astype(float) + 1.0


@dataclass(frozen=True, eq=False)
class ParametricBootstrap:
    """Parametric bootstrap of a product's fit on its own units at risk.

    `ages` (months) and `units` describe the units the fit saw: `units[i]` units observed to age
    `ages[i]` (the fit_suspensions rows' observed_age_months and units, grouped by age). Each bootstrap
    data set draws every unit's life from the fitted model; a unit whose life ends by its observed age
    is a return in its month in service on the day grid (failed during day d = ceil(life x 365.25/12),
    month k = max(1, ceil(d / (365.25/12)))), every other unit a suspension at its observed age. The
    data set is refitted with `Fitter(fit.family, min_returns=1)` (parameters the fit held fixed stay
    fixed); a refit that fails is replaced by a new data set, and the number replaced is in the note
    (more than `max_failed_share` of the draws raises ValueError).
    """

    fit: FitResult
    ages: FloatArray
    units: FloatArray
    max_failed_share: float = 0.1

    def __post_init__(self) -> None:
        ages = np.asarray(self.ages, dtype=float).reshape(-1)
        units = np.asarray(self.units, dtype=float).reshape(-1)
        if ages.shape != units.shape or np.any(ages < 0) or np.any(units < 0) or not np.all(np.isfinite(ages)):
            raise ValueError("ages and units must be equal-length, finite and non-negative")
        if not np.all(np.isfinite(units)) or not np.allclose(units, np.round(units)):
            raise ValueError("units must be whole numbers of units")
        object.__setattr__(self, "ages", ages)
        object.__setattr__(self, "units", np.round(units))

    @classmethod
    def from_suspensions(
        cls, fit: FitResult, rows: pd.DataFrame, tolerance: float = 0.005, max_failed_share: float = 0.1
    ) -> ParametricBootstrap:
        """From the fit_suspensions rows the fit was made on (columns observed_age_months, units).

        ValueError when their units differ from the fit's (returns + suspensions) by more than
        `tolerance` (a share): the rows are not the fit's data (e.g. flagged months not left out).
        """
        grouped = rows.groupby("observed_age_months")["units"].sum()
        total = float(grouped.sum())
        seen = fit.data.n_returns + fit.data.n_suspensions
        if total <= 0 or abs(total - seen) > tolerance * max(seen, 1.0):
            raise ValueError(
                f"rows hold {total:,.0f} units but the fit saw {seen:,.1f}; pass the rows the fit was made on"
            )
        return cls(fit, grouped.index.to_numpy(dtype=float), grouped.to_numpy(dtype=float), max_failed_share)

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        return self.fit.log_survival(t)

    def simulate(self, rng: np.random.Generator) -> LifeData:
        """One bootstrap data set from the fitted model."""
        fit = self.fit
        keep = (self.ages > 0) & (self.units > 0)
        ages, units = self.ages[keep], self.units[keep]
        in_channel = float(self.units[~keep].sum())
        failed_by_age = -np.expm1(fit.log_survival(ages))  # F(a)
        failures = rng.binomial(units.astype(np.int64), np.clip(failed_by_age, 0.0, 1.0))
        # each failure's life from the model truncated to (0, a]: F^-1(U F(a)); U in (0, 1)
        cut = np.repeat(failed_by_age, failures)
        u = rng.uniform(size=cut.size) * cut
        u = np.clip(u, np.finfo(float).tiny, None)
        lives = fit.b_life(np.minimum(u, 1.0 - 1e-16)) if u.size else np.empty(0)
        months = month_in_service(lives)
        month_values, month_counts = np.unique(months, return_counts=True)
        suspension_ages = np.concatenate([ages, [0.0]]) if in_channel else ages
        suspension_counts = np.concatenate([units - failures, [in_channel]]) if in_channel else units - failures
        return LifeData.from_monthly_returns(
            month_values.astype(float), month_counts.astype(float), suspension_ages, suspension_counts.astype(float)
        )

    def sample_log_survival(self, rng: np.random.Generator, n: int) -> ParameterDraws:
        _check_draws(n)
        fitter = Fitter(self.fit.family, confidence_level=self.fit.confidence_level, min_returns=1)
        fixed = {name: self.fit.parameters[name] for name in self.fit.fixed} or None
        thetas: list[FloatArray] = []
        failed = 0
        limit = max(10, int(self.max_failed_share * n))
        while len(thetas) < n:
            try:
                refit = fitter.fit(self.simulate(rng), fixed=fixed)
            except (FitError, ValueError):
                failed += 1
                if failed > limit:
                    raise ValueError(
                        f"parametric bootstrap: {failed} refits failed before {len(thetas)} of {n} succeeded"
                    ) from None
                continue
            thetas.append(np.asarray(refit.theta, dtype=float))
        note = f"parametric bootstrap: {n} refits, {failed} failed refits replaced" if failed else ""
        return ParameterDraws(self.fit.family, np.array(thetas), note)


@dataclass(frozen=True, eq=False)
class CompetingRisksSampler:
    """Independent draws of each mode's parameters (separate fits), summed as competing risks."""

    model: CompetingRisks
    samplers: tuple[SampledLife, ...]

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        return self.model.log_survival(t)

    def sample_log_survival(self, rng: np.random.Generator, n: int) -> SummedDraws:
        return SummedDraws(tuple(s.sample_log_survival(rng, n) for s in self.samplers))


def sampler_for(model: LifeDistribution) -> SampledLife | None:
    """How to draw a forecast model's parameters: the model itself when it offers
    `sample_log_survival`; `NormalApproximation` for a converged `FitResult`; per mode for
    `CompetingRisks` of such models; None (parameters fixed) otherwise."""
    if isinstance(model, SampledLife):
        return model
    if isinstance(model, FitResult):
        return NormalApproximation.of(model) if np.all(np.isfinite(model.covariance)) else None
    if isinstance(model, CompetingRisks):
        parts = [sampler_for(mode) for mode in model.modes]
        if all(part is not None for part in parts):
            return CompetingRisksSampler(model, tuple(parts))  # type: ignore[arg-type]
    return None


# ------------------------------------------------------------------------------------------------
# claim costs
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ClaimCosts:
    """What one claim costs (currency units), for drawing the total cost of N future claims.

    Exactly one of three forms (build with the class methods):
    * `from_costs(costs)`: the empirical costs of recent returns. Per parameter draw, a bootstrap
      resample of the n costs stands for the cost distribution (so the mean cost's own uncertainty,
      which every future claim shares and which does not average out, is carried), and the N claims
      are drawn from that resample (the spread of single claims).
    * `from_summary(mean, sd, n)`: a gamma law per claim with that mean and standard deviation (costs
      are positive and right-skewed; the sum of N gammas is gamma, exact for any N), its mean scaled per
      draw by a gamma factor of mean 1 and coefficient of variation sd / (mean sqrt n) (the sample
      mean's uncertainty). n = 0 means the mean is known exactly.
    * `fixed(cost)`: every claim costs this (a configured override): the reserve's spread is the
      count's only.
    """

    mean: float
    sd: float
    n: int
    costs: FloatArray | None
    basis: str

    def __post_init__(self) -> None:
        if not (math.isfinite(self.mean) and self.mean >= 0.0):
            raise ValueError(f"mean cost must be finite and >= 0, got {self.mean!r}")
        if not (math.isfinite(self.sd) and self.sd >= 0.0):
            raise ValueError(f"sd of the cost must be finite and >= 0, got {self.sd!r}")
        if self.n < 0:
            raise ValueError(f"n (claims behind the mean) must be >= 0, got {self.n!r}")

    @classmethod
    def from_costs(cls, costs: npt.ArrayLike) -> ClaimCosts:
        values = np.array(costs, dtype=float).reshape(-1)
        if values.size == 0:
            raise ValueError("costs must hold at least one claim cost")
        if not np.all(np.isfinite(values)) or np.any(values < 0):
            raise ValueError("costs must be finite and >= 0")
        values.setflags(write=False)
        sd = float(values.std(ddof=1)) if values.size > 1 else 0.0
        return cls(float(values.mean()), sd, int(values.size), values, f"resampled from {values.size} claim costs")

    @classmethod
    def from_summary(cls, mean: float, sd: float, n: int) -> ClaimCosts:
        return cls(float(mean), float(sd), int(n), None, f"gamma per claim, mean {mean:.2f}, sd {sd:.2f}, n {n}")

    @classmethod
    def fixed(cls, cost: float) -> ClaimCosts:
        return cls(float(cost), 0.0, 0, None, f"fixed cost per claim {cost:.2f}")

    def draw_totals(self, rng: np.random.Generator, counts: npt.NDArray[np.int64]) -> FloatArray:
        """Total cost of counts[b, g] claims for every parameter draw b (rows) and group g (columns);
        claims within one row b share that draw's cost distribution."""
        counts = np.asarray(counts, dtype=np.int64)
        if counts.ndim != 2 or np.any(counts < 0):
            raise ValueError("counts must be a 2-D array of non-negative integers (draws x groups)")
        draws, groups = counts.shape
        if self.costs is not None:
            n = self.costs.size
            totals = np.zeros(counts.shape)
            chunk = max(1, _CELLS_PER_CHUNK // max(n + int(counts.sum(axis=1).max(initial=0)), 1))
            for start in range(0, draws, chunk):
                block = counts[start:start + chunk]
                rows = block.shape[0]
                population = rng.integers(n, size=(rows, n))  # a bootstrap resample per draw
                segment = np.repeat(np.arange(rows * groups), block.ravel())
                picks = population[segment // groups, rng.integers(n, size=segment.size)]
                totals[start:start + rows] = np.bincount(
                    segment, weights=self.costs[picks], minlength=rows * groups
                ).reshape(rows, groups)
            return totals
        if self.sd == 0.0 or self.mean == 0.0:
            return counts * self.mean
        k = (self.mean / self.sd) ** 2  # gamma shape per claim
        factor = rng.gamma(self.n * k, 1.0 / (self.n * k), size=(draws, 1)) if self.n > 0 else np.ones((draws, 1))
        return rng.gamma(counts * k, 1.0) * (self.mean * factor / k)


def claim_costs_by_product(costs: pd.DataFrame) -> dict[str, ClaimCosts]:
    """ClaimCosts per product from `reserve.cost_per_claim_by_product`'s table (product, cost_per_claim,
    cost_basis, basis_returns) and, when present, a `cost_sd` column (sd of the claims behind the mean).

    A configured cost (basis_returns 0) is fixed; an observed mean with its sd is `from_summary`; an
    observed mean without an sd is fixed (the spread of single claims and of the mean left out; the
    basis says so). A product with no cost (NaN) is left out.
    """
    result: dict[str, ClaimCosts] = {}
    for row in costs.itertuples(index=False):
        mean = float(row.cost_per_claim)
        if not math.isfinite(mean):
            continue
        sd = float(getattr(row, "cost_sd", math.nan))
        n = int(row.basis_returns)
        if n > 0 and math.isfinite(sd):
            result[str(row.product)] = ClaimCosts.from_summary(mean, sd, n)
        else:
            claim = ClaimCosts.fixed(mean)
            if n > 0:
                claim = dataclasses.replace(claim, basis=f"{claim.basis} (no cost sd given: claim spread left out)")
            result[str(row.product)] = claim
    return result


# ------------------------------------------------------------------------------------------------
# the Poisson mixture's quantiles
# ------------------------------------------------------------------------------------------------


def check_levels(levels: Sequence[float]) -> tuple[float, ...]:
    """Levels as a tuple of floats strictly inside (0, 1); ValueError otherwise."""
    values = tuple(float(level) for level in levels)
    if not values or not all(0.0 < level < 1.0 for level in values):
        raise ValueError(f"levels must lie strictly between 0 and 1, got {levels!r}")
    return values


def poisson_mixture_quantiles(means: npt.ArrayLike, levels: Sequence[float]) -> npt.NDArray[np.int64]:
    """Quantiles of N whose law is the equal-weight mixture of Poisson(means[b, g]) over draws b.

    `means` is (B,) or (B, G); returns (len(levels),) or (len(levels), G) integers: for each level q and
    column g the smallest integer y >= 0 with (1/B) sum_b P(Poisson(means[b, g]) <= y) >= q (the
    definition of scipy.stats.poisson.ppf, to which it reduces when B = 1). Exact: a bracket found by
    stepping out from a normal-approximation guess, then bisection on the integers.
    """
    levels = check_levels(levels)
    mu = np.asarray(means, dtype=float)
    one_column = mu.ndim == 1
    mu = mu.reshape(mu.shape[0], -1) if mu.ndim else mu.reshape(1, 1)
    if mu.ndim != 2 or mu.shape[0] == 0 or not np.all(np.isfinite(mu)) or np.any(mu < 0):
        raise ValueError("means must be a non-empty (B,) or (B, G) array of finite values >= 0")
    groups = mu.shape[1]
    q = np.repeat(np.asarray(levels), groups)
    column = np.tile(np.arange(groups), len(levels))

    def cdf(y: npt.NDArray[np.int64], which: npt.NDArray[np.int64]) -> FloatArray:
        # draws whose mean is more than 10 sd + 10 from y contribute 0 or 1 to within 1e-20 (Chernoff
        # and Bernstein bounds of the Poisson tails); the incomplete gamma only for the rest
        m = mu[:, column[which]]
        ys = np.broadcast_to(np.maximum(y, 0).astype(float)[None, :], m.shape)
        near = np.abs(ys - m) <= 10.0 * np.sqrt(m) + 10.0
        values = (ys > m).astype(float)
        values[near] = special.pdtr(ys[near], m[near])
        return np.where(y < 0, 0.0, values.mean(axis=0))

    def pmf(y: npt.NDArray[np.int64], which: npt.NDArray[np.int64]) -> FloatArray:
        m = mu[:, column[which]]
        ys = np.maximum(y, 0).astype(float)[None, :]
        return np.exp(special.xlogy(ys, m) - m - special.gammaln(ys + 1.0)).mean(axis=0)

    # guess: normal approximation of the mixture (mean of mu, variance mean + variance of mu), then one
    # Newton step on the mixture's CDF with its probability mass as the slope
    mean = mu.mean(axis=0)[column]
    sd = np.sqrt(mu.mean(axis=0) + mu.var(axis=0))[column]
    y = np.maximum(np.floor(mean + special.ndtri(q) * sd), 0).astype(np.int64)
    everything = np.arange(q.size)
    slope = pmf(y, everything)
    with np.errstate(divide="ignore", invalid="ignore"):
        newton = np.where(slope > 0, (q - cdf(y, everything)) / slope, 0.0)
    y = np.maximum(y + np.round(np.clip(newton, -3.0 * sd - 3.0, 3.0 * sd + 3.0)), 0).astype(np.int64)
    # walk one count at a time with F(y - 1) = F(y) - P(y) and F(y + 1) = F(y) + P(y + 1) (the mass is
    # cheap, the incomplete gamma is not) until F(y - 1) < q <= F(y)
    result = np.full(q.size, -1, dtype=np.int64)
    active = everything
    at_y = cdf(y, everything)
    for _ in range(64):
        mass = pmf(y[active], active)
        up = at_y < q[active]
        down = ~up & (y[active] > 0) & (at_y - mass >= q[active])
        done = ~up & ~down
        result[active[done]] = y[active[done]]
        at_y = np.where(down, at_y - mass, at_y)
        y[active[down]] -= 1
        y[active[up]] += 1
        if up.any():
            at_y[up] = at_y[up] + pmf(y[active[up]], active[up])
        at_y, active = at_y[~done], active[~done]
        if not active.size:
            break
    if active.size:
        result[active] = _bracketed_quantiles(cdf, y[active], active, q[active])
    result = result.reshape(len(levels), groups)
    return result[:, 0] if one_column else result


def _bracketed_quantiles(cdf, start, which, q):  # type: ignore[no-untyped-def]
    """Smallest integer y with cdf(y) >= q: step out from `start` (doubling) to a bracket
    F(low) < q <= F(high), F(-1) = 0, then bisect."""
    position = np.arange(which.size)
    above = cdf(start, which) >= q
    low = np.where(above, start - 1, start)
    high = np.where(above, start, start + 1)
    low_known, high_known = ~above | (low < 0), above.copy()
    step = np.ones(which.size, dtype=np.int64)
    for _ in range(200):
        todo = position[~low_known]
        if todo.size:
            fine = cdf(low[todo], which[todo]) < q[todo]
            low_known[todo[fine]] = True
            moved = todo[~fine]  # F(low) >= q: low is a valid upper end; step further down
            high[moved] = low[moved]
            low[moved] = np.maximum(low[moved] - step[moved], -1)
            low_known[moved[low[moved] < 0]] = True
            step[moved] *= 2
        todo = position[~high_known]
        if todo.size:
            fine = cdf(high[todo], which[todo]) >= q[todo]
            high_known[todo[fine]] = True
            moved = todo[~fine]  # F(high) < q: high is a valid lower end; step further up
            low[moved] = high[moved]
            high[moved] = high[moved] + step[moved]
            step[moved] *= 2
        if low_known.all() and high_known.all():
            break
    else:  # pragma: no cover - the steps double, so 200 rounds cover any finite mean
        raise RuntimeError("poisson_mixture_quantiles: no bracket found")
    while True:
        todo = position[high - low > 1]
        if not todo.size:
            break
        middle = (low[todo] + high[todo]) // 2
        above = cdf(middle, which[todo]) >= q[todo]
        high[todo[above]] = middle[above]
        low[todo[~above]] = middle[~above]
    return high


def _sample_quantiles(values: FloatArray, levels: tuple[float, ...]) -> FloatArray:
    """Quantiles over draws (axis 0): the smallest drawn value whose share at or below it reaches the
    level (numpy's inverted_cdf), so a quantile is always one of the draws."""
    return np.quantile(values, levels, axis=0, method="inverted_cdf")


# ------------------------------------------------------------------------------------------------
# the predictive distribution of one product
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Cells:
    """One product's future cells summed into aggregates, for one life model (a segment of its rows)."""

    reduced: object  # forecast._FutureIntervals of the distinct (observed, lower, upper) triples, survivors 1
    weights: sparse.csr_matrix  # distinct interval x aggregate: survivors summed
    expected: FloatArray  # the plug-in expected returns per aggregate (forecast's arithmetic)


@dataclass(frozen=True)
class _Aggregates:
    build_months: list
    months: list  # calendar months (datetime64[s] values)
    window: tuple[np.datetime64, np.datetime64]  # [first, last] month of the next-12-months horizon

    @property
    def size(self) -> int:
        return len(self.build_months) + len(self.months) + 2

    @property
    def total_index(self) -> int:
        return len(self.build_months) + len(self.months)


def _first_of_month(value: dt.date, months_ahead: int) -> np.datetime64:
    index = value.year * 12 + value.month - 1 + months_ahead
    return np.datetime64(dt.date(index // 12, index % 12 + 1, 1), "s")


def _cells(rows: pd.DataFrame, model: LifeDistribution, aggregates: _Aggregates) -> _Cells | None:
    intervals = forecast._future_intervals(rows)
    if intervals.row_index.size == 0:
        return None
    detail = forecast._product_forecast(rows, model)
    if len(detail) != intervals.row_index.size or not np.array_equal(
        detail["months_in_service"].to_numpy(), intervals.months_in_service
    ):
        raise RuntimeError("forecast._product_forecast and forecast._future_intervals no longer line up")
    triples = np.column_stack([intervals.observed, intervals.lower, intervals.upper])
    distinct, inverse = np.unique(triples, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    reduced = dataclasses.replace(
        intervals, observed=distinct[:, 0], lower=distinct[:, 1], upper=distinct[:, 2],
        survivors=np.ones(len(distinct)),
    )
    build_index = pd.Index(aggregates.build_months).get_indexer(detail["build_month"])
    months = detail["month"].to_numpy(dtype="datetime64[s]")
    month_index = len(aggregates.build_months) + pd.Index(aggregates.months).get_indexer(months)
    if np.any(build_index < 0) or np.any(month_index < len(aggregates.build_months)):
        raise RuntimeError("a forecast cell has no aggregate")
    first, last = aggregates.window
    in_window = (months >= first) & (months <= last)
    total = np.full(inverse.size, aggregates.total_index)
    columns = np.concatenate([build_index, month_index, total, total[in_window] + 1])
    positions = np.concatenate([inverse, inverse, inverse, inverse[in_window]])
    survivors = np.concatenate([intervals.survivors] * 3 + [intervals.survivors[in_window]])
    weights = sparse.csr_matrix(
        sparse.coo_matrix((survivors, (positions, columns)), shape=(len(distinct), aggregates.size))
    )
    expected_cells = detail["expected_returns"].to_numpy(dtype=float)
    cell_values = np.concatenate([expected_cells] * 3 + [expected_cells[in_window]])
    expected = np.bincount(columns, weights=cell_values, minlength=aggregates.size)
    return _Cells(reduced, weights, expected)


def _additional_by_aggregate(additional: pd.DataFrame, aggregates: _Aggregates) -> FloatArray:
    """Known expected claims (product x build month x calendar month rows) summed into the aggregates."""
    values = additional["expected"].to_numpy(dtype=float)
    months = additional["month"].to_numpy(dtype="datetime64[s]")
    build_index = pd.Index(aggregates.build_months).get_indexer(additional["build_month"])
    month_index = len(aggregates.build_months) + pd.Index(aggregates.months).get_indexer(months)
    first, last = aggregates.window
    in_window = (months >= first) & (months <= last)
    total = np.full(values.size, aggregates.total_index)
    columns = np.concatenate([build_index, month_index, total, total[in_window] + 1])
    weights = np.concatenate([values] * 3 + [values[in_window]])
    return np.bincount(columns, weights=weights, minlength=aggregates.size)


def _expected_by_draw(cells: _Cells, draws: LifeDraws) -> FloatArray:
    """(n_draws, aggregates): each draw's expected returns per aggregate."""
    n_intervals = cells.weights.shape[0]
    result = np.empty((draws.n_draws, cells.weights.shape[1]))
    chunk = max(1, _CELLS_PER_CHUNK // max(n_intervals, 1))
    for start in range(0, draws.n_draws, chunk):
        stop = min(start + chunk, draws.n_draws)
        part = draws.take(start, stop)
        with np.errstate(invalid="ignore"):
            probability = np.atleast_2d(forecast._expected_in_intervals(cells.reduced, part))
        if not np.all(np.isfinite(probability)):
            raise ValueError("a parameter draw gives no finite chance of a return (survival 0 at a row's age)")
        result[start:stop] = (cells.weights.T @ probability.T).T  # broadcasts a (1, n) fixed model
    return result


@dataclass(frozen=True)
class _ProductPrediction:
    by_build_month: pd.DataFrame
    by_month: pd.DataFrame
    by_product: pd.DataFrame
    reserve: pd.DataFrame | None
    notes: tuple[str, ...]
    method: str
    month_costs: FloatArray | None = None  # (draws, months of by_month): the cost drawn per month; folded, then dropped


def _month_text(value: object) -> str:
    return value.strftime("%Y-%m") if hasattr(value, "strftime") else str(value)


def _predict_product(
    product: str,
    rows: pd.DataFrame,
    model: LifeDistribution,
    sampler: SampledLife | None,
    month_models: Mapping[object, LifeDistribution],
    as_of_date: dt.date,
    draws: int,
    levels: tuple[float, ...],
    rng: np.random.Generator,
    costs: ClaimCosts | None,
    additional: pd.DataFrame | None = None,
) -> _ProductPrediction:
    notes: list[str] = []
    keys = ["build_month", "warranty_start_date", "observed_age_months", "warranty_months"]
    rows = (
        rows.groupby(keys, as_index=False, sort=True, dropna=False)
        .agg({"suspensions": "sum", "product": "first", "sale_month": "first"})
    )  # identical rows (same build month, clock, age and warranty) forecast alike: merged
    probe = forecast._product_forecast(rows, model)
    months = set(pd.unique(probe["month"].to_numpy(dtype="datetime64[s]")))
    build_months = set(pd.unique(rows["build_month"]))
    if additional is not None and len(additional):
        months |= set(pd.unique(additional["month"].to_numpy(dtype="datetime64[s]")))
        build_months |= set(pd.unique(additional["build_month"]))
    aggregates = _Aggregates(
        sorted(build_months), sorted(months), (_first_of_month(as_of_date, 1), _first_of_month(as_of_date, HORIZON_MONTHS))
    )
    if sampler is None:
        product_draws: LifeDraws = FixedLife(model, draws)
        method = "parameters fixed (plug-in)"
        notes.append(f"product {product}: its life model offers no parameter draws; only the counts' randomness is in its intervals")
    else:
        product_draws = sampler.sample_log_survival(rng, draws)
        if product_draws.n_draws != draws:
            raise ValueError(f"product {product}: the sampler returned {product_draws.n_draws} draws, not {draws}")
        method = type(sampler).__name__
        if product_draws.note:
            notes.append(f"product {product}: {product_draws.note}")
    own = {month: m for month, m in month_models.items() if (rows["build_month"] == month).any()}
    segments: list[tuple[pd.DataFrame, LifeDistribution, LifeDraws]] = [
        (rows[~rows["build_month"].isin(list(own))], model, product_draws)
    ]
    for month in sorted(own):
        month_model = own[month]
        month_sampler = month_model if isinstance(month_model, SampledLife) else None
        if month_sampler is None:
            notes.append(
                f"product {product} build month {_month_text(month)}: its own life's parameters are treated as"
                " fixed (no way to draw them); its interval carries the counts' randomness only"
            )
            segments.append((rows[rows["build_month"] == month], month_model, FixedLife(month_model, draws)))
        else:
            segments.append((rows[rows["build_month"] == month], month_model, month_sampler.sample_log_survival(rng, draws)))

    mu = np.zeros((draws, aggregates.size))
    expected = np.zeros(aggregates.size)
    for segment_rows, segment_model, segment_draws in segments:
        if segment_rows.empty:
            continue
        cells = _cells(segment_rows, segment_model, aggregates)
        if cells is None:
            continue
        mu += _expected_by_draw(cells, segment_draws)
        expected += cells.expected
    if additional is not None and len(additional):
        known = _additional_by_aggregate(additional, aggregates)
        mu += known  # the same in every draw: known means
        expected += known
    quantiles = poisson_mixture_quantiles(mu, levels)  # (3, aggregates)

    n_build, n_month, total = len(aggregates.build_months), len(aggregates.months), aggregates.total_index
    by_build_month = pd.DataFrame({
        "product": product,
        "build_month": aggregates.build_months,
        "expected_returns": expected[:n_build],
        "returns_lower": quantiles[0, :n_build],
        "returns_median": quantiles[1, :n_build],
        "returns_upper": quantiles[2, :n_build],
    })
    by_month = pd.DataFrame({
        "product": product,
        "month": pd.to_datetime(np.asarray(aggregates.months, dtype="datetime64[s]")).date,
        "expected_returns": expected[n_build:total],
        "returns_lower": quantiles[0, n_build:total],
        "returns_median": quantiles[1, n_build:total],
        "returns_upper": quantiles[2, n_build:total],
    }) if n_month else pd.DataFrame({c: pd.Series(dtype=object) for c in BY_MONTH_COLUMNS})
    by_product = pd.DataFrame({
        "product": product,
        "horizon": [NEXT_12_MONTHS, TO_WARRANTY_END],
        "expected": [expected[total + 1], expected[total]],
        "lower": [quantiles[0, total + 1], quantiles[0, total]],
        "median": [quantiles[1, total + 1], quantiles[1, total]],
        "upper": [quantiles[2, total + 1], quantiles[2, total]],
    })

    reserve = None
    month_costs = None
    if costs is not None:
        counts = rng.poisson(mu[:, :n_build])
        totals = costs.draw_totals(rng, counts)
        per_month = _sample_quantiles(totals, levels)
        product_total = _sample_quantiles(totals.sum(axis=1), levels)
        by_build_month["expected_reserve"] = expected[:n_build] * costs.mean
        by_build_month["reserve_lower"], by_build_month["reserve_median"], by_build_month["reserve_upper"] = per_month
        reserve = pd.DataFrame({
            "product": [product],
            "expected_reserve": [expected[total] * costs.mean],
            "reserve_lower": [product_total[0]],
            "reserve_median": [product_total[1]],
            "reserve_upper": [product_total[2]],
            "cost_basis": [costs.basis],
        })
        if n_month:  # drawn after the build months' totals: the generator's earlier draws stay as they were
            month_costs = costs.draw_totals(rng, rng.poisson(mu[:, n_build:total]))
            by_month["expected_cost"] = expected[n_build:total] * costs.mean
            by_month["cost_lower"], by_month["cost_median"], by_month["cost_upper"] = _sample_quantiles(month_costs, levels)
            # the current and later parts: each draw's months summed (a draw's months share its parameters and
            # its claim-cost resample, so the sum is a draw of the part's cost); no further random numbers
            current = is_current_month(aggregates.months, as_of_date)
            parts = np.column_stack([month_costs[:, current].sum(axis=1), month_costs[:, ~current].sum(axis=1)])
            split = _sample_quantiles(parts, levels)  # (3 levels, current / non-current)
            for column, (name, part) in enumerate((("reserve_current", current), ("reserve_non_current", ~current))):
                for level, suffix in enumerate(("lower", "median", "upper")):
                    reserve[f"{name}_{suffix}"] = [split[level, column] if part.any() else 0.0]
    return _ProductPrediction(by_build_month, by_month, by_product, reserve, tuple(notes), method, month_costs)


class _MonthCostSums:
    """Each calendar month's cost summed over the products, draw by draw (`fold` one product at a time,
    in product order); `table` gives the quantiles of the sums (COST_BY_MONTH_COLUMNS)."""

    def __init__(self, draws: int) -> None:
        self._draws = draws
        self._sums: dict[object, FloatArray] = {}
        self._expected: dict[object, float] = {}
        self._products: dict[object, int] = {}

    def fold(self, timed: tuple[_ProductPrediction, float]) -> tuple[_ProductPrediction, float]:
        piece, elapsed = timed
        if piece.month_costs is None:
            return timed
        for column, (month, expected) in enumerate(zip(piece.by_month["month"], piece.by_month["expected_cost"])):
            if month not in self._sums:
                self._sums[month] = np.zeros(self._draws)
                self._expected[month] = 0.0
                self._products[month] = 0
            self._sums[month] += piece.month_costs[:, column]
            self._expected[month] += float(expected)
            self._products[month] += 1
        return dataclasses.replace(piece, month_costs=None), elapsed

    def table(self, levels: tuple[float, ...]) -> pd.DataFrame:
        months = sorted(self._sums)
        if not months:
            return pd.DataFrame({c: pd.Series(dtype=object) for c in COST_BY_MONTH_COLUMNS})
        quantiles = _sample_quantiles(np.column_stack([self._sums[m] for m in months]), levels)
        return pd.DataFrame({
            "month": months,
            "products": [self._products[m] for m in months],
            "expected_cost": [self._expected[m] for m in months],
            "cost_lower": quantiles[0],
            "cost_median": quantiles[1],
            "cost_upper": quantiles[2],
        })


# ------------------------------------------------------------------------------------------------
# the public entry point
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ReturnsPrediction:
    """Prediction intervals of future returns (and the reserve, when costs were given).

    `levels` = (lower, median, upper) levels of the columns *_lower, *_median, *_upper. Tables:
    * by_build_month (BY_BUILD_MONTH_COLUMNS): per product x build month, its returns until its warranties
      end; expected_returns is the plug-in forecast (as forecast.parquet sums it); reserve columns
      (currency units) are NaN for a product without costs; expected_reserve = expected x mean cost.
    * by_month (BY_MONTH_COLUMNS): per product x calendar month (first day, `date`), summed over build months;
      expected_cost / cost_* (currency units, NaN for a product without costs): the cost of the month's
      returns at the product's mean cost per claim, not inflated or discounted.
    * cost_by_month (COST_BY_MONTH_COLUMNS): per calendar month, the same cost summed over the products
      with costs (`products` of them), its quantiles those of the per-draw sums.
    * by_product (BY_PRODUCT_COLUMNS): per product and horizon, "next_12_months" (the 12 calendar months
      after the as-of date's month; returns placed in calendar months as the forecast places them, at
      the midpoint of their month in service) and "to_warranty_end" (every future return still covered).
    * reserve_by_product (RESERVE_BY_PRODUCT_COLUMNS): per product with costs; reserve_current_* /
      reserve_non_current_*: the first failures' cost in the months reserve.is_current_month counts
      current / later (0 for a part with no month), from the month draws.
    `methods`: product -> how its parameters were drawn; `notes`: sentences for the run's warnings;
    `seconds`: product -> time taken.
    """

    levels: tuple[float, float, float]
    draws: int
    seed: int
    by_build_month: pd.DataFrame
    by_month: pd.DataFrame
    by_product: pd.DataFrame
    reserve_by_product: pd.DataFrame
    cost_by_month: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame({c: pd.Series(dtype=object) for c in COST_BY_MONTH_COLUMNS})
    )
    methods: Mapping[str, str] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    seconds: Mapping[str, float] = field(default_factory=dict)


def product_seed(seed: int, product: str) -> list[int]:
    """The seed sequence of a product's generator: (seed, CRC-32 of its UTF-8 name)."""
    return [int(seed), zlib.crc32(str(product).encode("utf-8"))]


def predict_returns(
    suspensions: pd.DataFrame,
    models: Mapping[str, LifeDistribution],
    as_of_date: dt.date,
    month_models: Mapping[tuple[str, object], LifeDistribution] | None = None,
    *,
    samplers: Mapping[str, SampledLife] | None = None,
    claim_costs: Mapping[str, ClaimCosts] | None = None,
    additional_expected: pd.DataFrame | None = None,
    draws: int = DEFAULT_DRAWS,
    levels: Sequence[float] = DEFAULT_LEVELS,
    seed: int = 0,
    workers: int = 1,
) -> ReturnsPrediction:
    """Prediction intervals of every forecast product's future returns and, with costs, its reserve.

    `suspensions`: the fit_suspensions table (product, build_month, sale_month, warranty_months,
    warranty_start_date, observed_age_months, suspensions). `models`: product -> the forecast's life model
    (the plug-in expectation). `month_models`: (product, build_month) -> a flagged build month's own life
    (as `forecast.expected_future_returns` takes it). `samplers`: product -> how to draw its parameters
    (default `sampler_for(model)`: a FitResult's normal approximation; e.g. a `ParametricBootstrap`
    instead). `claim_costs`: product -> `ClaimCosts` (no reserve columns for a product without).
    `additional_expected`: claims expected beyond the first failures of the units at risk (e.g. failures
    not yet reported, repeat claims of repaired units), columns product, build_month, month (first day
    of the calendar month), expected (>= 0): added to every draw's means as known values (Poisson
    counts, their own uncertainty not drawn), so that `expected_*` match a forecast that includes them.
    `draws`: B parameter draws per product. `levels`: (lower, median, upper), increasing, in (0, 1).
    `as_of_date`: the next-12-months horizon is the 12 calendar months after its month.
    Products without a model are left out (the forecast reports them). `workers` > 1: the products in
    that many processes (stages.parallel.map_products; the same result, each product drawing from its own
    seeded generator, `product_seed`).
    """
    _check_draws(draws)
    levels = check_levels(levels)
    if len(levels) != 3 or not levels[0] < levels[1] < levels[2]:
        raise ValueError(f"levels must be three increasing values (lower, median, upper), got {levels!r}")
    if not isinstance(as_of_date, dt.date):
        raise ValueError(f"as_of_date must be a date, got {as_of_date!r}")
    missing = {"product", "build_month", "warranty_start_date", "observed_age_months", "warranty_months",
               "suspensions", "sale_month"} - set(suspensions.columns)
    if missing:
        raise ValueError(f"suspensions lacks columns {sorted(missing)}")
    samplers = samplers or {}
    claim_costs = claim_costs or {}
    additional = _checked_additional(additional_expected)
    month_models = month_models or {}
    methods: dict[str, str] = {}
    seconds: dict[str, float] = {}
    additional_of = rows_by_product(additional) if additional is not None else None
    own_months: dict[object, dict[object, LifeDistribution]] = {}
    for (p, month), m in month_models.items():
        own_months.setdefault(p, {})[month] = m
    jobs = [
        (
            str(product), rows, models[product], product in samplers, samplers.get(product),
            own_months.get(product, {}), as_of_date, draws, levels, seed, claim_costs.get(product),
            additional_of[product] if additional_of is not None else None,
        )
        for product, rows in suspensions.groupby("product", sort=True)
        if models.get(product) is not None
    ]
    month_cost_sums = _MonthCostSums(draws)
    timed = map_products(_predict_product_timed, jobs, workers, fold=month_cost_sums.fold)
    pieces = [piece for piece, _ in timed]
    for job, (piece, elapsed) in zip(jobs, timed):
        methods[job[0]] = piece.method
        seconds[job[0]] = elapsed
    by_build_month = _concat([p.by_build_month for p in pieces], BY_BUILD_MONTH_COLUMNS)
    for column in ("returns_lower", "returns_median", "returns_upper"):
        by_build_month[column] = by_build_month[column].astype(np.int64)
    reserves = [p.reserve for p in pieces if p.reserve is not None]
    return ReturnsPrediction(
        levels=levels,  # type: ignore[arg-type]
        draws=draws,
        seed=seed,
        by_build_month=by_build_month,
        by_month=_concat([p.by_month for p in pieces], BY_MONTH_COLUMNS),
        by_product=_concat([p.by_product for p in pieces], BY_PRODUCT_COLUMNS),
        reserve_by_product=_concat(reserves, RESERVE_BY_PRODUCT_COLUMNS),
        cost_by_month=month_cost_sums.table(levels),
        methods=methods,
        notes=tuple(note for p in pieces for note in p.notes),
        seconds=seconds,
    )


def _predict_product_timed(
    product: str, rows: pd.DataFrame, model: LifeDistribution, has_sampler: bool, sampler: SampledLife | None,
    month_models: Mapping[object, LifeDistribution], as_of_date: dt.date, draws: int, levels: tuple[float, ...],
    seed: int, costs: ClaimCosts | None, additional: pd.DataFrame | None,
) -> tuple[_ProductPrediction, float]:
    """One product's prediction and its seconds (for a worker process: its generator is made here from
    `product_seed`, its sampler from the model unless one was given)."""
    start = time.perf_counter()
    piece = _predict_product(
        product, rows, model, sampler if has_sampler else sampler_for(model), month_models, as_of_date, draws,
        levels, np.random.default_rng(product_seed(seed, product)), costs, additional,
    )
    return piece, time.perf_counter() - start


def _checked_additional(frame: pd.DataFrame | None) -> pd.DataFrame | None:
    if frame is None:
        return None
    missing = {"product", "build_month", "month", "expected"} - set(frame.columns)
    if missing:
        raise ValueError(f"additional_expected lacks columns {sorted(missing)}")
    values = frame["expected"].to_numpy(dtype=float)
    if not np.all(np.isfinite(values)) or np.any(values < 0):
        raise ValueError("additional_expected: expected must be finite and >= 0")
    if frame["month"].isna().any():
        raise ValueError("additional_expected: month must be a date in every row")
    return frame


def _concat(frames: list[pd.DataFrame], columns: Sequence[str]) -> pd.DataFrame:
    frames = [f for f in frames if len(f)]
    if not frames:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in columns})
    return pd.concat(frames, ignore_index=True).reindex(columns=list(columns))


def _check_draws(n: int) -> None:
    if not isinstance(n, (int, np.integer)) or isinstance(n, bool) or n < 1:
        raise ValueError(f"draws must be a positive integer, got {n!r}")


# ------------------------------------------------------------------------------------------------
# survivors running a common extra time (the textbook within-sample prediction)
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CountPrediction:
    """A prediction of one count: the plug-in expectation and the predictive quantiles at `levels`."""

    expected: float
    levels: tuple[float, ...]
    quantiles: tuple[int, ...]
    plug_in_quantiles: tuple[int, ...]  # Poisson(expected) quantiles: parameters taken as known


def predict_failures_within(
    sampler: SampledLife,
    model: LifeDistribution,
    ages: npt.ArrayLike,
    counts: npt.ArrayLike,
    horizon: float,
    *,
    draws: int = DEFAULT_DRAWS,
    levels: Sequence[float] = DEFAULT_LEVELS,
    seed: int = 0,
) -> CountPrediction:
    """New failures among `counts` survivors at `ages` if each runs `horizon` more (same time unit).

    Per draw the expected number is `forecast.expected_failures_within` under that draw's life; the
    count is Poisson given the draw, and the quantiles are those of the Poisson mixture
    (`poisson_mixture_quantiles`). `model` is the plug-in life (the fit)."""
    _check_draws(draws)
    levels = check_levels(levels)
    ages = np.asarray(ages, dtype=float)
    counts = np.asarray(counts, dtype=float)
    parameter_draws = sampler.sample_log_survival(np.random.default_rng(seed), draws)
    means = np.array([
        forecast.expected_failures_within(_OneDraw(parameter_draws.take(b, b + 1)), ages, counts, horizon)
        for b in range(parameter_draws.n_draws)
    ])
    expected = forecast.expected_failures_within(model, ages, counts, horizon)
    return CountPrediction(
        expected=expected,
        levels=levels,
        quantiles=tuple(int(v) for v in poisson_mixture_quantiles(means, levels)),
        plug_in_quantiles=tuple(int(v) for v in poisson_mixture_quantiles(np.array([expected]), levels)),
    )


@dataclass(frozen=True, eq=False)
class _OneDraw:
    draw: LifeDraws

    def log_survival(self, t: npt.ArrayLike) -> FloatArray:
        return self.draw.log_survival(t)[0]
