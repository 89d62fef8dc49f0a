"""The life-model stage: every product's fit (Weibull with the lognormal check) and every failure mode's
fit, the published life_model table and the warnings engineers must read.

Input: the shaped tables (fit_returns, fit_suspensions, returns_by_failure_mode, cohort_summary).
Ages are months in service; the fitting rules and fallbacks are in `fitting` and `failure_modes`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Mapping

import pandas as pd

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.stages.failure_modes import ModeFit, fit_failure_modes, mode_warnings
from warranty_forecast.stages.fitting import (
    PUBLISHED_STATUSES,
    ProductFit,
    fit_products,
    life_data_by_product,
    life_model_table,
    product_warnings,
)

if TYPE_CHECKING:
    from warranty_forecast.stages.shaping import ShapedData


@dataclass(frozen=True)
class FittedLives:
    """The stage's result: fits by product and by failure mode, the life_model table, the warnings (the
    failure modes' warnings are made on demand, so that the build-month alerts can explain some)."""

    data_by_product: Mapping[str, LifeData]
    products: Mapping[str, ProductFit]
    modes: Mapping[str, tuple[ModeFit, ...]]
    table: pd.DataFrame
    product_warnings: tuple[str, ...]

    @property
    def warnings(self) -> tuple[str, ...]:
        """The products' warnings, then one per failure mode without a published fit."""
        return self.warnings_given({})

    def warnings_given(self, concentrated: Mapping[tuple[str, str], str]) -> tuple[str, ...]:
        """The warnings, each failure mode whose codes are concentrated in flagged build months
        ((product, code) -> sentence, from the build-month alerts) saying so."""
        return (*self.product_warnings, *mode_warnings(self.modes, concentrated))

    @property
    def summary(self) -> str:
        """One line for the run log."""
        published = sum(fit.status in PUBLISHED_STATUSES for fit in self.products.values())
        modes = sum(len(product_modes) for product_modes in self.modes.values())
        return f"{len(self.products)} products, {published} with a published fit, {modes} failure modes"


def fit_lives(shaped: ShapedData, settings: LifeModelSettings) -> FittedLives:
    """Fit every product and failure mode of the shaped data (never raises for one product's data)."""
    data_by_product = life_data_by_product(shaped.fit_returns, shaped.fit_suspensions)
    by_product = shaped.cohort_summary.groupby("product")
    products = fit_products(data_by_product, settings, by_product["max_warranty_months"].max().to_dict())
    modes = fit_failure_modes(shaped.returns_by_failure_mode, data_by_product, settings)
    return FittedLives(
        data_by_product=data_by_product,
        products=products,
        modes=modes,
        table=life_model_table(products, by_product["units"].sum().to_dict()),
        product_warnings=tuple(product_warnings(products, settings)),
    )
