"""The benchmark's measurements: simulated warranty units (seeded), their grouped cells, and the grouped,
scipy and lifelines fits of the same data. `bench` runs them and prints the report."""

from __future__ import annotations

import math
import statistics
import time
import warnings
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
import numpy.typing as npt
from scipy import optimize, stats

from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.lifecore.result import FitResult

DAYS_PER_MONTH = 365.25 / 12

IntArray = npt.NDArray[np.int64]
FloatArray = npt.NDArray[np.float64]


@dataclass(frozen=True)
class Simulation:
    """Settings of the simulated product: sales, life distribution and warranty."""

    shape: float = 1.3
    scale: float = 300.0  # months
    warranty_months: int = 24
    sale_months: int = 36

    @property
    def sale_days(self) -> int:
        """Units are sold 1 .. sale_days days before the as-of date."""
        return int(math.floor(self.sale_months * DAYS_PER_MONTH))

    @property
    def cap_key(self) -> int:
        """Days since sale at or above which the observed age is the warranty end."""
        return int(math.ceil(self.warranty_months * DAYS_PER_MONTH))


@dataclass(frozen=True)
class Units:
    """One row per unit: days since sale at the as-of date, and the month in service of its
    return (0 for units not returned)."""

    days_since_sale: IntArray
    return_month: IntArray


@dataclass(frozen=True)
class Cells:
    """Grouped cells: returns by month in service, suspensions by distinct observed age (months)."""

    return_months: FloatArray
    return_counts: FloatArray
    suspension_ages: FloatArray
    suspension_counts: FloatArray

    @property
    def n_cells(self) -> int:
        return len(self.return_months) + len(self.suspension_ages)

    @property
    def n_returns(self) -> int:
        return int(self.return_counts.sum())

    def life_data(self) -> LifeData:
        return LifeData.from_monthly_returns(  # lives simulated on a continuous month scale: (k-1, k]
            self.return_months, self.return_counts, self.suspension_ages, self.suspension_counts, day_grid=False
        )


@dataclass(frozen=True)
class PerUnit:
    """Per-unit rows for the per-unit fits: returns as (lower, upper], suspensions at their age."""

    lower: FloatArray
    upper: FloatArray
    suspension_ages: FloatArray


@dataclass(frozen=True)
class Estimate:
    shape: float
    scale: float
    seconds: float
    note: str = ""


# ---------------------------------------------------------------------------------------------
# Data
# ---------------------------------------------------------------------------------------------


def simulate_units(n_units: int, rng: np.random.Generator, sim: Simulation) -> Units:
    """Vectorised simulation of `n_units` units (see the module docstring)."""
    days = rng.integers(1, sim.sale_days + 1, size=n_units, dtype=np.int64)
    observed_age = observed_age_months(days, sim)
    life = sim.scale * rng.weibull(sim.shape, size=n_units)
    returned = life <= observed_age
    month = np.maximum(1, np.ceil(life)).astype(np.int64)
    return Units(days_since_sale=days, return_month=np.where(returned, month, 0))


def observed_age_months(days_since_sale: npt.ArrayLike, sim: Simulation) -> FloatArray:
    """Age at the as-of date in months, stopped at the warranty end."""
    return np.minimum(np.asarray(days_since_sale) / DAYS_PER_MONTH, float(sim.warranty_months))


def aggregate(units: Units, sim: Simulation) -> Cells:
    """Grouped cells from per-unit rows in O(N) (bincount; no loop over units).

    Suspensions are keyed by days since sale, with every day at or past the warranty end in one
    cell (key `cap_key`); the key's age is computed exactly as the per-unit observed age is.
    """
    returned = units.return_month > 0
    by_month = np.bincount(units.return_month, minlength=sim.warranty_months + 1)[1:]
    key = np.minimum(units.days_since_sale, sim.cap_key)
    key = np.where(returned, sim.cap_key + 1, key)  # returns go to a discarded extra bin
    by_day = np.bincount(key, minlength=sim.cap_key + 2)[: sim.cap_key + 1]
    months = np.flatnonzero(by_month) + 1
    days = np.flatnonzero(by_day)
    return Cells(
        return_months=months.astype(float),
        return_counts=by_month[months - 1].astype(float),
        suspension_ages=observed_age_months(days, sim),
        suspension_counts=by_day[days].astype(float),
    )


def per_unit_rows(units: Units, sim: Simulation) -> PerUnit:
    """One row per unit: a return in month k is (k-1, k]; others are suspensions at observed age."""
    returned = units.return_month > 0
    upper = units.return_month[returned].astype(float)
    return PerUnit(
        lower=upper - 1.0,
        upper=upper,
        suspension_ages=observed_age_months(units.days_since_sale[~returned], sim),
    )


# ---------------------------------------------------------------------------------------------
# Fits
# ---------------------------------------------------------------------------------------------


def time_grouped_fit(cells: Cells, repeats: int) -> tuple[float, FitResult]:
    """Median wall time in ms of LifeData construction plus Fitter("weibull").fit, after a warm-up."""
    fit = Fitter("weibull").fit(cells.life_data())
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fit = Fitter("weibull").fit(cells.life_data())
        times.append(time.perf_counter() - start)
    return 1e3 * statistics.median(times), fit


class _TightNelderMead:
    """An `optimizer=` for scipy's `rv_continuous.fit`: Nelder-Mead in log parameters with tight
    tolerances (the fitted parameters, here shape and scale with loc fixed, are all positive)."""

    def __init__(self) -> None:
        self.result: optimize.OptimizeResult | None = None

    def __call__(self, func: Callable[..., float], x0: Any, args: tuple = (), disp: int = 0) -> FloatArray:
        x0 = np.asarray(x0, dtype=float)
        f0 = float(func(x0, *args))
        result = optimize.minimize(
            lambda u: func(np.exp(u), *args),
            np.log(x0),
            method="Nelder-Mead",
            options={"xatol": 1e-10, "fatol": 1e-12 * max(1.0, abs(f0)), "maxiter": 5000, "maxfev": 10000},
        )
        self.result = result
        return np.exp(result.x)


def fit_scipy(rows: PerUnit, sim: Simulation) -> Estimate:
    """Per-unit fit with scipy.stats.weibull_min on CensoredData (loc fixed at 0)."""
    optimizer = _TightNelderMead()
    start = time.perf_counter()
    data = stats.CensoredData(interval=np.column_stack([rows.lower, rows.upper]), right=rows.suspension_ages)
    shape, _loc, scale = stats.weibull_min.fit(data, sim.shape, floc=0, scale=sim.scale, optimizer=optimizer)
    seconds = time.perf_counter() - start
    result = optimizer.result
    note = ""
    if result is not None and not result.success:
        note = f"optimiser: {result.message}"
    elif result is not None:
        note = f"{result.nfev} evaluations"
    return Estimate(float(shape), float(scale), seconds, note)


def import_lifelines() -> Any | None:
    """lifelines' WeibullFitter class, or None if lifelines is not installed."""
    try:
        from lifelines import WeibullFitter as LifelinesWeibullFitter
    except ImportError:
        return None
    return LifelinesWeibullFitter


def fit_lifelines(fitter_class: Any, rows: PerUnit, sim: Simulation) -> Estimate:
    """Per-unit fit with lifelines: S(t) = exp(-(t/lambda_)^rho_), so shape = rho_, scale = lambda_."""
    lower = np.concatenate([rows.lower, rows.suspension_ages])
    upper = np.concatenate([rows.upper, np.full(len(rows.suspension_ages), np.inf)])
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        start = time.perf_counter()
        fitter = fitter_class().fit_interval_censoring(
            lower,
            upper,
            initial_point=np.array([sim.scale, sim.shape]),
            fit_options={"gtol": 1e-12, "ftol": 1e-15, "maxiter": 10000},
        )
        seconds = time.perf_counter() - start
    note = f"{len(caught)} warning(s): {caught[0].message}" if caught else ""
    return Estimate(float(fitter.rho_), float(fitter.lambda_), seconds, note)


# ---------------------------------------------------------------------------------------------
# Running and reporting
# ---------------------------------------------------------------------------------------------
