"""The life-model stage: every product's fit (Weibull with the lognormal check) and every failure mode's
fit, the published life_model table and the warnings engineers must read.

Input: the shaped tables (fit_returns, fit_suspensions, returns_by_failure_mode, cohort_summary).
Ages are months in service; the fitting rules and fallbacks are in `fitting` and `failure_modes`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Collection, Mapping

import numpy as np
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
    left_out: Mapping[str, tuple[object, ...]] = field(default_factory=dict)  # build months left out, per product

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


def fit_lives(
    shaped: ShapedData,
    settings: LifeModelSettings,
    left_out: Mapping[str, Collection[object]] | None = None,
    workers: int = 1,
    unchanged: FittedLives | None = None,
) -> FittedLives:
    """Fit every product and failure mode of the shaped data (never raises for one product's data).

    `left_out`: build months per product to leave out of that product's fits (the flagged build months,
    whose own lives the forecast models apart); the life_model table names them in build_months_left_out.
    `workers` > 1: the product fits and the failure-mode fits in that many processes (the same result).
    `unchanged`: this function's result on the same shaped data and settings with nothing left out (the
    screening fits): a product with no month left out has the same data, so its fits are taken from it
    instead of being fitted again; only the products with left-out months are refitted (with thousands of
    product lines and a few flagged months, the refit is then a few fits instead of all of them).
    """
    left_out = {product: set(months) for product, months in (left_out or {}).items() if months}
    fit_returns = _without(shaped.fit_returns, left_out)
    data_by_product = life_data_by_product(fit_returns, _without(shaped.fit_suspensions, left_out))
    by_product = shaped.cohort_summary.groupby("product")
    warranty = by_product["max_warranty_months"].max().to_dict()
    returns_by_mode = _without(shaped.returns_by_failure_mode, left_out)
    if unchanged is None or unchanged.left_out:
        products = fit_products(data_by_product, settings, warranty, workers)
        modes = fit_failure_modes(returns_by_mode, data_by_product, settings, workers)
    else:
        again = {p for p in data_by_product if p in left_out or p not in unchanged.products}
        refitted = fit_products({p: data_by_product[p] for p in again}, settings, warranty, workers)
        products = {p: refitted[p] if p in again else unchanged.products[p] for p in sorted(data_by_product)}
        refitted_modes = fit_failure_modes(
            returns_by_mode[returns_by_mode["product"].isin(again)], data_by_product, settings, workers
        )
        kept_modes = {p: fits for p, fits in unchanged.modes.items() if p not in again}
        modes = {p: refitted_modes[p] if p in again else kept_modes[p] for p in sorted({*refitted_modes, *kept_modes})}
    table = life_model_table(products, by_product["units"].sum().to_dict())
    table["build_months_left_out"] = [
        ", ".join(_month_text(month) for month in sorted(left_out.get(product, ()))) for product in table["product"]
    ]
    return FittedLives(
        data_by_product=data_by_product,
        products=products,
        modes=modes,
        table=table,
        product_warnings=tuple(product_warnings(products, settings)),
        left_out={product: tuple(sorted(months)) for product, months in left_out.items()},
    )


def keep_screening_where_refit_failed(refit: FittedLives, screening: FittedLives) -> FittedLives:
    """The refit without the flagged build months, except for products whose refit has no published fit
    while their screening fit (all months) had one: those keep the screening fit (and modes), with a
    warning, rather than losing their forecast."""
    failed = sorted(
        product for product, outcome in refit.products.items()
        if outcome.status not in PUBLISHED_STATUSES
        and product in screening.products and screening.products[product].status in PUBLISHED_STATUSES
    )
    if not failed:
        return refit
    products = {**refit.products, **{product: screening.products[product] for product in failed}}
    modes = {**refit.modes, **{product: screening.modes[product] for product in failed if product in screening.modes}}
    table = refit.table.set_index("product")
    screening_table = screening.table.set_index("product")
    for product in failed:
        table.loc[product, screening_table.columns] = screening_table.loc[product]
        table.loc[product, "build_months_left_out"] = ""
    notes = tuple(
        f"product {product}: its fit without the flagged build months"
        f" ({', '.join(_month_text(m) for m in refit.left_out.get(product, ()))}) failed"
        f" ({refit.products[product].status}); the fit on all its build months is published and forecast instead,"
        " so the flagged months also shape its life"
        for product in failed
    )
    return FittedLives(
        data_by_product={**refit.data_by_product, **{p: screening.data_by_product[p] for p in failed}},
        products=products,
        modes=modes,
        table=table.reset_index()[list(refit.table.columns)],
        product_warnings=(
            *[w for w in refit.product_warnings if not any(w.startswith(f"product {p}:") for p in failed)],
            *[w for w in screening.product_warnings if any(w.startswith(f"product {p}:") for p in failed)],
            *notes,
        ),
        left_out={p: months for p, months in refit.left_out.items() if p not in failed},
    )


def _without(frame: pd.DataFrame, left_out: Mapping[str, set[object]]) -> pd.DataFrame:
    """The rows of `frame` (with product and build_month columns) outside the left-out build months."""
    if not left_out:
        return frame
    keys = {(product, month) for product, months in left_out.items() for month in months}
    dropped = [key in keys for key in zip(frame["product"], frame["build_month"])]
    return frame[~np.asarray(dropped, dtype=bool)]


def _month_text(month: object) -> str:
    return month.strftime("%Y-%m") if hasattr(month, "strftime") else str(month)
