"""Seeded simulated life data shared by the tests (invented data; no source needed)."""

from __future__ import annotations

from typing import Callable

import numpy as np

from warranty_forecast.lifecore.data import LifeData

DAYS_PER_MONTH = 365.25 / 12

LifeDraw = Callable[[np.random.Generator, int], np.ndarray]


def weibull_life(shape: float, scale: float) -> LifeDraw:
    """Draws of Weibull lives in months, R(t) = exp(-(t/scale)^shape)."""
    return lambda rng, n: scale * rng.weibull(shape, size=n)


def lognormal_life(mu: float, sigma: float) -> LifeDraw:
    """Draws of lognormal lives in months, log T ~ Normal(mu, sigma)."""
    return lambda rng, n: np.exp(mu + sigma * rng.standard_normal(n))


def simulate_warranty(
    rng: np.random.Generator,
    n_units: int,
    draw_life: LifeDraw,
    max_months: float = 36,
    warranty_months: float = 24,
    *,
    ages_in_days: bool = False,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Staggered shipments: each unit's age at the as-of date is 1..max_months whole months (or, with
    ages_in_days, a uniform age in (0, max_months) rounded to whole days, so most suspensions sit inside
    a month). A failure inside the window min(age, warranty) is a return in month in service ceil(life);
    otherwise the unit is a suspension at that window. Returns (months, returns, suspension ages, counts).
    """
    if ages_in_days:
        age = np.round(rng.uniform(0.0, max_months, size=n_units) * DAYS_PER_MONTH) / DAYS_PER_MONTH
    else:
        age = rng.integers(1, int(max_months) + 1, size=n_units)
    window = np.minimum(age, warranty_months)
    life = draw_life(rng, n_units)
    failed = life <= window
    months, returns = np.unique(np.ceil(life[failed]).astype(int), return_counts=True)
    ages, counts = np.unique(window[~failed], return_counts=True)
    return months, returns.astype(float), ages.astype(float), counts.astype(float)


def simulated_life_data(seed: int, n_units: int, shape: float, scale: float, **kw) -> LifeData:
    """Weibull warranty data from `simulate_warranty` with a fresh generator seeded by `seed`."""
    rng = np.random.default_rng(seed)
    return LifeData.from_monthly_returns(*simulate_warranty(rng, n_units, weibull_life(shape, scale), **kw), day_grid=False)


def mixed_life_data() -> LifeData:
    """All three kinds of rows, fractional counts, lower = 0 intervals, zero-count rows, an age-0 suspension."""
    return LifeData(
        exact_ages=[0.5, 3.2, 7.0, 11.0],
        exact_counts=[1.0, 2.5, 0.0, 1.0],
        interval_lower=[0.0, 0.0, 1.0, 2.0, 5.0, 9.5, 20.0],
        interval_upper=[1.0, 2.5, 2.0, 3.0, 6.0, 10.0, 30.0],
        interval_counts=[3.0, 0.0, 4.5, 2.0, 1.0, 0.25, 2.0],
        suspension_ages=[0.0, 4.0, 6.0, 12.0, 24.0, 36.0],
        suspension_counts=[5.0, 10.0, 0.0, 20.0, 30.5, 40.0],
    )
