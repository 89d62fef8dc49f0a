"""The life-model stage: one Weibull fit per product from the shaped fit input.

Turns the fit_returns / fit_suspensions tables into `LifeData` (returns interval-censored in
(k-1, k] months, suspensions right-censored at their observed age), fits, and records per product
whether a fit can be published. A product with too few returns, or whose fit did not converge, gets
a status and a message in the outputs instead of a crash or a silent garbage fit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np
import pandas as pd

from pipeline.config import LifeModelSettings
from pipeline.life_model import (
    FitNotConvergedError,
    InsufficientDataError,
    LifeData,
    WeibullFit,
    WeibullFitter,
)

FITTED = "fitted"
INSUFFICIENT_DATA = "insufficient_data"
NOT_CONVERGED = "not_converged"

LIFE_MODEL_COLUMNS = (
    "product",
    "status",
    "message",
    "shape",
    "shape_lower",
    "shape_upper",
    "scale",
    "scale_lower",
    "scale_upper",
    "rate",
    "b10",
    "b10_lower",
    "b10_upper",
    "mean_life",
    "variance_life",
    "returns",
    "suspensions",
    "units",
    "log_likelihood",
    "converged",
    "iterations",
    "gradient_norm",
    "confidence_level",
    "bound_method",
)


@dataclass(frozen=True)
class ProductFit:
    """The outcome of fitting one product: a fit when status is "fitted", else why not."""

    product: str
    status: str
    message: str
    data: LifeData
    fit: WeibullFit | None


def life_data_by_product(fit_returns: pd.DataFrame, fit_suspensions: pd.DataFrame) -> dict[str, LifeData]:
    """Grouped life data per product: returns summed by month in service, suspensions by observed age."""
    products = sorted(set(fit_returns["product"]) | set(fit_suspensions["product"]))
    returns_by_month = fit_returns.groupby(["product", "months_in_service"], as_index=False)["returns"].sum()
    suspensions_by_age = fit_suspensions.groupby(["product", "observed_age_months"], as_index=False)[
        "suspensions"
    ].sum()
    result = {}
    for product in products:
        returned = returns_by_month[returns_by_month["product"] == product]
        suspended = suspensions_by_age[suspensions_by_age["product"] == product]
        result[product] = LifeData.from_monthly_returns(
            months_in_service=returned["months_in_service"].to_numpy(dtype=float),
            returns=returned["returns"].to_numpy(dtype=float),
            suspension_ages=suspended["observed_age_months"].to_numpy(dtype=float),
            suspension_counts=suspended["suspensions"].to_numpy(dtype=float),
        )
    return result


def fit_products(data_by_product: Mapping[str, LifeData], settings: LifeModelSettings) -> dict[str, ProductFit]:
    """Fit every product; never raises for a product's data, records the status instead."""
    fitter = WeibullFitter(confidence_level=settings.confidence_level, min_returns=settings.min_returns)
    fits = {}
    for product, data in sorted(data_by_product.items()):
        try:
            fit = fitter.fit(data)
        except InsufficientDataError as error:
            fits[product] = ProductFit(product, INSUFFICIENT_DATA, str(error), data, None)
            continue
        except FitNotConvergedError as error:
            fits[product] = ProductFit(product, NOT_CONVERGED, str(error), data, None)
            continue
        fits[product] = ProductFit(product, FITTED, "", data, fit)
    return fits


def life_model_table(fits: Mapping[str, ProductFit], units_by_product: Mapping[str, float]) -> pd.DataFrame:
    """One row per product with estimates, Wald bounds and fit facts (NaN where no fit exists)."""
    rows = []
    for product, outcome in sorted(fits.items()):
        row: dict[str, object] = {column: math.nan for column in LIFE_MODEL_COLUMNS}
        row.update(
            product=product,
            status=outcome.status,
            message=outcome.message,
            returns=outcome.data.n_returns,
            suspensions=outcome.data.n_suspensions,
            units=float(units_by_product.get(product, math.nan)),
            converged=False,
            iterations=0,
            bound_method="",
        )
        fit = outcome.fit
        if fit is not None:
            shape_lower, shape_upper = fit.shape_bounds()
            scale_lower, scale_upper = fit.scale_bounds()
            b10_lower, b10_upper = fit.b_life_bounds(0.10)
            row.update(
                shape=fit.shape,
                shape_lower=shape_lower,
                shape_upper=shape_upper,
                scale=fit.scale,
                scale_lower=scale_lower,
                scale_upper=scale_upper,
                rate=fit.rate,
                b10=fit.b10,
                b10_lower=b10_lower,
                b10_upper=b10_upper,
                mean_life=fit.mean,
                variance_life=fit.variance,
                log_likelihood=fit.log_likelihood,
                converged=bool(fit.converged),
                iterations=int(fit.iterations),
                gradient_norm=fit.gradient_norm,
                confidence_level=fit.confidence_level,
                bound_method=fit.bound_method,
            )
        rows.append(row)
    table = pd.DataFrame(rows, columns=list(LIFE_MODEL_COLUMNS))
    table["converged"] = table["converged"].astype(bool)
    table["iterations"] = table["iterations"].astype(np.int64)
    return table
