"""The life-model stage: per product, a Weibull fit with its bounds and diagnostics.

Turns the fit_returns / fit_suspensions tables into `LifeData` (returns interval-censored in
(k-1, k] months, suspensions right-censored at their observed age) and fits each product:

1. a two-parameter Weibull by maximum likelihood; when there are fewer counted returns than
   `min_returns`, or the data cannot identify shape and scale, and a shape is configured for the
   product (engineering experience), a fixed-shape fit that estimates only the scale; otherwise no
   fit, and a status that says why (never a crash, never a silent garbage fit);
2. Wald and likelihood-ratio bounds for shape, scale, B1, B10 and F at the warranty end;
3. a goodness-of-fit test of observed against expected returns by month in service;
4. a lognormal fitted to the same data, with both AICs and its own likelihood-ratio bounds (mu, sigma,
   B10), as a check on the Weibull family.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np
import pandas as pd

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.errors import FitError
from warranty_forecast.stages.goodness_of_fit import GoodnessOfFit, goodness_of_fit
from warranty_forecast.lifecore.comparison import FamilyComparison, compare_families
from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.errors import InsufficientDataError, UnidentifiableError
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.lifecore.profile import LikelihoodRatioBounds, likelihood_ratio_bounds
from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.lifecore.families.weibull import rate_from_scale
from warranty_forecast.stages.by_product import rows_by_product
from warranty_forecast.stages.parallel import map_products

FITTED = "fitted"
FIXED_SHAPE = "fixed_shape"
INSUFFICIENT_DATA = "insufficient_data"
UNIDENTIFIABLE = "unidentifiable"
NOT_CONVERGED = "not_converged"
PUBLISHED_STATUSES = (FITTED, FIXED_SHAPE)

# A Weibull's status and its shape and scale with Wald and likelihood-ratio bounds: the columns every
# fitted table (products, failure modes) opens with.
FIT_STATUS_AND_PARAMETER_COLUMNS = (
    "status",
    "message",
    "is_shape_fixed",
    *(f"{name}{bound}" for name in ("shape", "scale") for bound in ("", "_lower", "_upper", "_lr_lower", "_lr_upper")),
)

LIFE_MODEL_COLUMNS = (
    "product",
    *FIT_STATUS_AND_PARAMETER_COLUMNS,
    "rate",
    "b1",
    "b1_lower",
    "b1_upper",
    "b1_lr_lower",
    "b1_lr_upper",
    "b10",
    "b10_lower",
    "b10_upper",
    "b10_lr_lower",
    "b10_lr_upper",
    "warranty_months",
    "fraction_failed_at_warranty_end",
    "fraction_failed_at_warranty_end_lower",
    "fraction_failed_at_warranty_end_upper",
    "fraction_failed_at_warranty_end_lr_lower",
    "fraction_failed_at_warranty_end_lr_upper",
    "lr_bounds_finite",
    "mean_life",
    "variance_life",
    "returns",
    "suspensions",
    "units",
    "log_likelihood",
    "aic",
    "converged",
    "iterations",
    "gradient_norm",
    "confidence_level",
    "bound_method",
    "gof_chi_square",
    "gof_df",
    "gof_p_value",
    "gof_deviance",
    "gof_deviance_df",
    "gof_deviance_p_value",
    "gof_largest_residual_month",
    "lognormal_mu",
    "lognormal_sigma",
    "lognormal_log_likelihood",
    "lognormal_aic",
    "delta_aic_weibull_minus_lognormal",
    "prefers_lognormal",
    "family_message",
    "lognormal_mu_lr_lower",
    "lognormal_mu_lr_upper",
    "lognormal_sigma_lr_lower",
    "lognormal_sigma_lr_upper",
    "lognormal_b10",
    "lognormal_b10_lr_lower",
    "lognormal_b10_lr_upper",
)


@dataclass(frozen=True)
class WeibullOutcome:
    """A Weibull fit with its likelihood-ratio bounds, or the reason there is none (status: module names)."""

    status: str
    message: str
    fit: FitResult | None
    lr_bounds: LikelihoodRatioBounds | None = None


@dataclass(frozen=True)
class ProductFit:
    """Everything fitted for one product; `fit` is set when status is "fitted" or "fixed_shape"."""

    product: str
    status: str
    message: str
    data: LifeData
    warranty_months: int
    fit: FitResult | None
    lr_bounds: LikelihoodRatioBounds | None
    goodness: GoodnessOfFit | None
    lognormal: FitResult | None
    comparison: FamilyComparison | None
    lognormal_lr_bounds: LikelihoodRatioBounds | None = None


def life_data_by_product(fit_returns: pd.DataFrame, fit_suspensions: pd.DataFrame) -> dict[str, LifeData]:
    """Grouped life data per product: returns summed by month in service, suspensions by observed age."""
    products = sorted(set(fit_returns["product"]) | set(fit_suspensions["product"]))
    returns_by_month = fit_returns.groupby(["product", "months_in_service"], as_index=False)["returns"].sum()
    suspensions_by_age = fit_suspensions.groupby(["product", "observed_age_months"], as_index=False)[
        "suspensions"
    ].sum()
    result = {}
    returned_of, suspended_of = rows_by_product(returns_by_month), rows_by_product(suspensions_by_age)
    for product in products:
        returned = returned_of[product]
        suspended = suspended_of[product]
        result[product] = LifeData.from_monthly_returns(
            months_in_service=returned["months_in_service"].to_numpy(dtype=float),
            returns=returned["returns"].to_numpy(dtype=float),
            suspension_ages=suspended["observed_age_months"].to_numpy(dtype=float),
            suspension_counts=suspended["suspensions"].to_numpy(dtype=float),
        )
    return result


def fit_weibull(
    data: LifeData,
    settings: LifeModelSettings,
    fixed_shape: float | None,
    *,
    b_life_fractions: tuple[float, ...] = (0.01, 0.10),
    cdf_ages: tuple[float, ...] = (),
) -> WeibullOutcome:
    """Two-parameter fit with likelihood-ratio bounds, falling back on a fixed shape when one is given.

    The fallback applies to thin data (fewer than `min_returns`), to fits the fitter finds
    unidentifiable, and to fits whose likelihood-ratio interval for shape or scale is open (the
    likelihood stays within the interval's threshold out to 0 or infinity): such estimates are never
    published as a two-parameter fit.
    """
    fitter = Fitter("weibull", confidence_level=settings.confidence_level, min_returns=settings.min_returns)
    try:
        fit = fitter.fit(data)
    except InsufficientDataError as error:
        reason, status = str(error), INSUFFICIENT_DATA
    except UnidentifiableError as error:
        reason, status = str(error), UNIDENTIFIABLE
    except FitError as error:
        return WeibullOutcome(NOT_CONVERGED, str(error), None)
    else:
        lr_bounds, note = _lr_bounds(fit, data, settings, b_life_fractions, cdf_ages)
        open_parameters = [end for end in (lr_bounds.open_ends if lr_bounds else ()) if end.startswith(("shape", "scale"))]
        if not open_parameters:
            return WeibullOutcome(FITTED, note, fit, lr_bounds)
        reason = (
            f"shape {fit.shape:.3g} and scale {fit.scale:.3g} are not identified by these data: the likelihood does"
            f" not bound the {', '.join(open_parameters)} end(s) of their likelihood-ratio intervals"
        )
        status = UNIDENTIFIABLE
    if fixed_shape is None:
        return WeibullOutcome(status, f"{reason}; no fixed shape configured (life_model.fixed_shape)", None)
    try:
        fit = fitter.fit(data, fixed={"shape": fixed_shape})
    except FitError as error:
        return WeibullOutcome(status, f"{reason}; fixed-shape fit also failed: {error}", None)
    lr_bounds, note = _lr_bounds(fit, data, settings, b_life_fractions, cdf_ages)
    message = f"shape fixed at {fixed_shape:g} from configuration, only the scale estimated ({reason})"
    return WeibullOutcome(FIXED_SHAPE, _join(message, note), fit, lr_bounds)


def _lr_bounds(
    fit: FitResult,
    data: LifeData,
    settings: LifeModelSettings,
    b_life_fractions: tuple[float, ...],
    cdf_ages: tuple[float, ...],
) -> tuple[LikelihoodRatioBounds | None, str]:
    try:
        bounds = likelihood_ratio_bounds(
            fit, b_life_fractions=b_life_fractions, cdf_ages=cdf_ages, confidence_level=settings.confidence_level
        )
    except FitError as error:
        return None, f"likelihood-ratio bounds failed: {error}"
    return bounds, ""


def fit_products(
    data_by_product: Mapping[str, LifeData],
    settings: LifeModelSettings,
    warranty_by_product: Mapping[str, int],
    workers: int = 1,
) -> dict[str, ProductFit]:
    """Fit every product; never raises for a product's data, records the status instead. `workers` > 1:
    the products in that many processes (stages.parallel.map_products), with the same result."""
    products = sorted(data_by_product)
    fitted = map_products(
        fit_product,
        [(product, data_by_product[product], settings, int(warranty_by_product[product])) for product in products],
        workers,
    )
    return dict(zip(products, fitted))


def fit_product(product: str, data: LifeData, settings: LifeModelSettings, warranty: int) -> ProductFit:
    """One product's Weibull fit with its bounds and goodness of fit, and the lognormal alternative."""
    outcome = fit_weibull(data, settings, settings.fixed_shape_for(product), cdf_ages=(float(warranty),))
    message = outcome.message
    goodness = _goodness(data, outcome.fit) if outcome.fit is not None else None
    lognormal = comparison = lognormal_lr = None
    try:
        lognormal = Fitter(
            "lognormal", confidence_level=settings.confidence_level, min_returns=settings.min_returns
        ).fit(data)
    except FitError as error:
        if outcome.fit is not None:
            message = _join(message, f"lognormal alternative not fitted: {error}")
    if lognormal is not None:
        lognormal_lr, note = _lr_bounds(lognormal, data, settings, (0.10,), ())
        if outcome.fit is not None and note:
            message = _join(message, f"lognormal {note}")
    if lognormal is not None and outcome.fit is not None and not outcome.fit.fixed:
        comparison = compare_families(outcome.fit.log_likelihood, lognormal.log_likelihood, settings.aic_threshold)
    return ProductFit(
        product, outcome.status, message, data, warranty, outcome.fit, outcome.lr_bounds, goodness, lognormal,
        comparison, lognormal_lr,
    )


def _goodness(data: LifeData, fit: FitResult) -> GoodnessOfFit | None:
    try:
        return goodness_of_fit(data, fit.log_survival, n_parameters=fit.n_parameters)
    except ValueError:
        return None


def _join(first: str, second: str) -> str:
    return f"{first}; {second}" if first else second


def life_model_table(fits: Mapping[str, ProductFit], units_by_product: Mapping[str, float]) -> pd.DataFrame:
    """One row per product with estimates, Wald and likelihood-ratio bounds, diagnostics (NaN where none)."""
    rows = [_life_model_row(outcome, units_by_product.get(product, math.nan)) for product, outcome in sorted(fits.items())]
    table = pd.DataFrame(rows, columns=list(LIFE_MODEL_COLUMNS))
    for column in ("converged", "is_shape_fixed", "prefers_lognormal", "lr_bounds_finite"):
        table[column] = table[column].astype(bool)
    table["iterations"] = table["iterations"].astype(np.int64)
    table["warranty_months"] = table["warranty_months"].astype(np.int64)
    return table


def _life_model_row(outcome: ProductFit, units: float) -> dict[str, object]:
    row: dict[str, object] = {column: math.nan for column in LIFE_MODEL_COLUMNS}
    row.update(
        product=outcome.product,
        status=outcome.status,
        message=outcome.message,
        is_shape_fixed=False,
        returns=outcome.data.n_returns,
        suspensions=outcome.data.n_suspensions,
        units=float(units),
        warranty_months=outcome.warranty_months,
        converged=False,
        iterations=0,
        bound_method="",
        prefers_lognormal=False,
        lr_bounds_finite=False,
        family_message="",
    )
    fit = outcome.fit
    if fit is not None:
        warranty = float(outcome.warranty_months)
        cdf_lower, cdf_upper = fit.bounds("cdf", t=np.array([warranty]))
        row.update(
            is_shape_fixed="shape" in fit.fixed,
            shape=fit.shape,
            scale=fit.scale,
            rate=rate_from_scale(fit.shape, fit.scale),
            b1=float(fit.b_life(0.01)),
            b10=fit.b10,
            fraction_failed_at_warranty_end=float(fit.cdf(np.array([warranty]))[0]),
            fraction_failed_at_warranty_end_lower=float(cdf_lower[0]),
            fraction_failed_at_warranty_end_upper=float(cdf_upper[0]),
            mean_life=fit.mean,
            variance_life=fit.variance,
            log_likelihood=fit.log_likelihood,
            aic=fit.aic,
            converged=bool(fit.converged),
            iterations=int(fit.iterations),
            gradient_norm=fit.gradient_norm,
            confidence_level=fit.confidence_level,
            bound_method="wald-log and likelihood-ratio",
        )
        row["shape_lower"], row["shape_upper"] = fit.bounds("shape")
        row["scale_lower"], row["scale_upper"] = fit.bounds("scale")
        row["b1_lower"], row["b1_upper"] = fit.bounds("b_life", p=0.01)
        row["b10_lower"], row["b10_upper"] = fit.bounds("b_life", p=0.10)
    lr = outcome.lr_bounds
    if lr is not None:
        row["shape_lr_lower"], row["shape_lr_upper"] = lr.shape
        row["scale_lr_lower"], row["scale_lr_upper"] = lr.scale
        row["b1_lr_lower"], row["b1_lr_upper"] = lr.b_life[0.01]
        row["b10_lr_lower"], row["b10_lr_upper"] = lr.b_life[0.10]
        row["fraction_failed_at_warranty_end_lr_lower"], row["fraction_failed_at_warranty_end_lr_upper"] = lr.cdf[
            float(outcome.warranty_months)
        ]
        row["lr_bounds_finite"] = bool(lr.is_bounded)
    goodness = outcome.goodness
    if goodness is not None:
        row.update(
            gof_chi_square=goodness.chi_square,
            gof_df=goodness.chi_square_df,
            gof_p_value=goodness.chi_square_p_value,
            gof_deviance=goodness.deviance,
            gof_deviance_df=goodness.deviance_df,
            gof_deviance_p_value=goodness.deviance_p_value,
            gof_largest_residual_month=goodness.largest_residual_month,
        )
    if outcome.lognormal is not None:
        row.update(
            lognormal_mu=outcome.lognormal.mu,
            lognormal_sigma=outcome.lognormal.sigma,
            lognormal_log_likelihood=outcome.lognormal.log_likelihood,
            lognormal_aic=outcome.lognormal.aic,
            lognormal_b10=outcome.lognormal.b10,
        )
    lognormal_lr = outcome.lognormal_lr_bounds
    if lognormal_lr is not None:
        row["lognormal_mu_lr_lower"], row["lognormal_mu_lr_upper"] = lognormal_lr.mu
        row["lognormal_sigma_lr_lower"], row["lognormal_sigma_lr_upper"] = lognormal_lr.sigma
        row["lognormal_b10_lr_lower"], row["lognormal_b10_lr_upper"] = lognormal_lr.b_life[0.10]
    if outcome.comparison is not None:
        row.update(
            delta_aic_weibull_minus_lognormal=outcome.comparison.delta_aic,
            prefers_lognormal=bool(outcome.comparison.prefers_lognormal),
            family_message=outcome.comparison.message,
        )
    return row


def product_warnings(fits: Mapping[str, ProductFit], settings: LifeModelSettings) -> list[str]:
    """What engineers must hear about each product's fit: no model, a fixed shape, open bounds, a better
    lognormal, returns that depart from the Weibull (p below `goodness_of_fit_warning_p_value`)."""
    texts = []
    for product, outcome in sorted(fits.items()):
        if outcome.status == FIXED_SHAPE:
            texts.append(f"product {product}: {outcome.message}")
        elif outcome.status != FITTED:
            texts.append(
                f"product {product}: no life model, no forecast and no reserve ({outcome.status}): {outcome.message}"
            )
        if outcome.status in PUBLISHED_STATUSES and not (outcome.lr_bounds is not None and outcome.lr_bounds.is_bounded):
            texts.append(
                f"product {product}: the data do not bound every likelihood-ratio interval (an end is 0 or"
                " infinite); treat its estimates as very uncertain"
            )
        if outcome.comparison is not None and outcome.comparison.prefers_lognormal:
            texts.append(f"product {product}: {outcome.comparison.message}")
        goodness = outcome.goodness
        if goodness is not None and goodness.chi_square_p_value < settings.goodness_of_fit_warning_p_value:
            texts.append(
                f"product {product}: returns by month in service depart from the Weibull (chi-square"
                f" {goodness.chi_square:.1f} on {goodness.chi_square_df:.0f} df, p = {goodness.chi_square_p_value:.1e};"
                f" largest residual in month {goodness.largest_residual_month:.0f}); check the probability plot"
            )
    return texts
