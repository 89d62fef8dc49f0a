"""The forecast stage: which life model each product's forecast uses, the expected returns per build
month and calendar month until warranty expiry, and each failure mode's share of them.

The arithmetic is in `forecast` (pure functions of a life distribution); this module decides.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Mapping

import pandas as pd

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.stages.failure_modes import complete_mode_models, life_model_by_mode_table
from warranty_forecast.stages.fitting import PUBLISHED_STATUSES, ProductFit
from warranty_forecast.stages.forecast import (
    CompetingRisks,
    LifeDistribution,
    expected_future_returns,
    expected_future_returns_by_mode,
    forecast_by_month,
)
from warranty_forecast.stages.life_models import FittedLives

if TYPE_CHECKING:
    from warranty_forecast.stages.shaping import ShapedData


@dataclass(frozen=True)
class ReturnsForecast:
    """The stage's result. `by_month`: expected returns per product x build month x calendar month;
    `by_mode`: the life_model_by_mode table with each mode's share; `status`: a sentence per product
    (the model used, or why there is no forecast)."""

    models: Mapping[str, LifeDistribution]
    by_month: pd.DataFrame
    by_mode: pd.DataFrame
    status: Mapping[str, str]
    warnings: tuple[str, ...]

    @property
    def summary(self) -> str:
        """One line for the run log."""
        return f"{len(self.by_month)} rows, {self.by_month['expected_returns'].sum():,.1f} returns"


def forecast_returns(shaped: ShapedData, lives: FittedLives, settings: LifeModelSettings) -> ReturnsForecast:
    """Forecast every product that has a usable life model, with the model `settings.forecast_model` asks for."""
    complete_modes = complete_mode_models(lives.modes)
    models, names, notes = choose_forecast_models(lives.products, complete_modes, settings.forecast_model)
    by_mode = life_model_by_mode_table(
        lives.modes, expected_future_returns_by_mode(shaped.fit_suspensions, complete_modes)
    )
    status = {
        product: f"forecast ({names[product]})" if product in models else f"no forecast: {outcome.status}"
        for product, outcome in lives.products.items()
    }
    return ReturnsForecast(
        models=models,
        by_month=forecast_by_month(expected_future_returns(shaped.fit_suspensions, models)),
        by_mode=by_mode,
        status=status,
        warnings=tuple(notes),
    )


def choose_forecast_models(
    fits: Mapping[str, ProductFit], complete_modes: Mapping[str, Mapping[str, FitResult]], forecast_model: str
) -> tuple[dict[str, LifeDistribution], dict[str, str], list[str]]:
    """The life model each product's forecast uses, its name, and notes where the configured one is missing.

    "weibull": the product's published Weibull fit. "lognormal": the lognormal alternative, else the
    Weibull. "failure_modes": the competing-risks product of the modes' Weibulls when every mode has a
    published fit (`complete_modes`, from failure_modes.complete_mode_models), else the Weibull. A
    product without any usable model is left out (no forecast).
    """
    models: dict[str, LifeDistribution] = {}
    names: dict[str, str] = {}
    notes: list[str] = []
    for product, outcome in sorted(fits.items()):
        weibull = outcome.fit if outcome.status in PUBLISHED_STATUSES else None
        if forecast_model == "lognormal" and outcome.lognormal is not None:
            models[product], names[product] = outcome.lognormal, "lognormal"
            continue
        if forecast_model == "failure_modes" and product in complete_modes:
            models[product] = CompetingRisks(tuple(complete_modes[product].values()))
            names[product] = "failure modes"
            continue
        if forecast_model != "weibull" and weibull is not None:
            notes.append(f"product {product}: no {forecast_model} model available; its forecast uses the Weibull fit")
        if weibull is not None:
            models[product], names[product] = weibull, "weibull"
    return models, names, notes
