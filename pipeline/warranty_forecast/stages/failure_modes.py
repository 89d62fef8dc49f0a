"""Failure modes as independent competing risks: one Weibull per failure code.

For each product, failure codes with at least `min_returns_per_mode` counted returns are fitted
separately; the others fold into one group named "other". When a mode is fitted, the returns of the
other modes are its suspensions at the middle of their month in service (the midpoint of its day-grid
interval `month_interval_ends(k)`, about k - 1/2: they left service for another reason somewhere inside
it), beside the product's own suspensions. The product's
life is then R(t) = prod_m R_m(t), i.e. F = 1 - prod_m (1 - F_m), and its expected future returns are
split among the modes (see `forecast.expected_future_returns_by_mode`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np
import pandas as pd

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.stages.fitting import FIT_STATUS_AND_PARAMETER_COLUMNS, PUBLISHED_STATUSES, fit_weibull
from warranty_forecast.lifecore.data import LifeData, month_interval_ends
from warranty_forecast.lifecore.profile import LikelihoodRatioBounds
from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.stages.parallel import map_products

OTHER = "other"

MODE_COLUMNS = (
    "product",
    "failure_mode",
    "failure_codes",
    "returns",
    *FIT_STATUS_AND_PARAMETER_COLUMNS,
    "b10",
    "b10_lr_lower",
    "b10_lr_upper",
    "expected_future_returns",
    "share_of_expected_future_returns",
)


@dataclass(frozen=True)
class ModeFit:
    """One failure mode (a failure code, or the "other" group of small codes) of one product."""

    product: str
    failure_mode: str
    failure_codes: tuple[str, ...]
    returns: float
    status: str
    message: str
    fit: FitResult | None
    lr_bounds: LikelihoodRatioBounds | None


def mode_membership(returns_by_code: pd.Series, min_returns_per_mode: int) -> dict[str, tuple[str, ...]]:
    """Failure mode -> the failure codes it holds, from returns per code of one product."""
    large = sorted(code for code, count in returns_by_code.items() if count >= min_returns_per_mode)
    small = sorted(code for code, count in returns_by_code.items() if count < min_returns_per_mode)
    membership = {code: (code,) for code in large}
    if small:
        membership[OTHER] = tuple(small)
    return membership


def competing_risk_data(
    returns_by_mode_and_month: pd.DataFrame, codes: tuple[str, ...], product_data: LifeData
) -> LifeData:
    """Life data of one mode: its returns by month; other modes' returns suspended at the middle of their
    month in service (day grid, about k - 1/2).

    `returns_by_mode_and_month` has columns failure_mode (the failure code), months_in_service, returns
    for one product; `product_data` supplies the product's own suspensions.
    """
    is_mode = returns_by_mode_and_month["failure_mode"].isin(codes)
    own = returns_by_mode_and_month[is_mode].groupby("months_in_service")["returns"].sum()
    others = returns_by_mode_and_month[~is_mode].groupby("months_in_service")["returns"].sum()
    other_lower, other_upper = month_interval_ends(others.index.to_numpy(dtype=float))
    return LifeData.from_monthly_returns(
        months_in_service=own.index.to_numpy(dtype=float),
        returns=own.to_numpy(dtype=float),
        suspension_ages=np.concatenate([product_data.suspension_ages, (other_lower + other_upper) / 2.0]),
        suspension_counts=np.concatenate([product_data.suspension_counts, others.to_numpy(dtype=float)]),
    )


def fit_failure_modes(
    returns_by_failure_mode: pd.DataFrame,
    data_by_product: Mapping[str, LifeData],
    settings: LifeModelSettings,
    workers: int = 1,
) -> dict[str, tuple[ModeFit, ...]]:
    """Fit every failure mode of every product (products without counted returns have no modes).
    `workers` > 1: the products in that many processes (stages.parallel.map_products; the same result)."""
    jobs = [
        (product, rows, data_by_product[product], settings)
        for product, rows in returns_by_failure_mode.groupby("product", sort=True)
    ]
    fitted = map_products(_fit_product_modes, jobs, workers)
    return {job[0]: modes for job, modes in zip(jobs, fitted)}


def _fit_product_modes(
    product: str, rows: pd.DataFrame, product_data: LifeData, settings: LifeModelSettings
) -> tuple[ModeFit, ...]:
    """One product's failure-mode fits (module-level, for a worker process)."""
    membership = mode_membership(rows.groupby("failure_mode")["returns"].sum(), settings.min_returns_per_mode)
    modes = []
    for mode, codes in membership.items():
        data = competing_risk_data(rows, codes, product_data)
        outcome = fit_weibull(data, settings, settings.fixed_shape_for(product), b_life_fractions=(0.10,))
        modes.append(
            ModeFit(
                product, mode, codes, data.n_returns, outcome.status, outcome.message, outcome.fit,
                outcome.lr_bounds,
            )
        )
    return tuple(modes)


def complete_mode_models(mode_fits: Mapping[str, tuple[ModeFit, ...]]) -> dict[str, dict[str, FitResult]]:
    """Per product, every mode's fit, for products where every mode has a published fit."""
    return {
        product: {mode.failure_mode: mode.fit for mode in modes}
        for product, modes in mode_fits.items()
        if modes and all(mode.status in PUBLISHED_STATUSES and mode.fit is not None for mode in modes)
    }


def life_model_by_mode_table(
    mode_fits: Mapping[str, tuple[ModeFit, ...]], expected_by_mode: pd.DataFrame
) -> pd.DataFrame:
    """One row per product x failure mode with estimates, bounds and share of expected future returns."""
    expected = {
        (row.product, row.failure_mode): row.expected_returns for row in expected_by_mode.itertuples(index=False)
    }
    totals = expected_by_mode.groupby("product")["expected_returns"].sum().to_dict()
    rows = []
    for product, modes in sorted(mode_fits.items()):
        for mode in modes:
            row: dict[str, object] = {column: math.nan for column in MODE_COLUMNS}
            row.update(
                product=product,
                failure_mode=mode.failure_mode,
                failure_codes=", ".join(mode.failure_codes),
                returns=mode.returns,
                status=mode.status,
                message=mode.message,
                is_shape_fixed=False,
            )
            if mode.fit is not None:
                row.update(is_shape_fixed="shape" in mode.fit.fixed, shape=mode.fit.shape, scale=mode.fit.scale,
                           b10=mode.fit.b10)
                row["shape_lower"], row["shape_upper"] = mode.fit.bounds("shape")
                row["scale_lower"], row["scale_upper"] = mode.fit.bounds("scale")
            if mode.lr_bounds is not None:
                row["shape_lr_lower"], row["shape_lr_upper"] = mode.lr_bounds.shape
                row["scale_lr_lower"], row["scale_lr_upper"] = mode.lr_bounds.scale
                row["b10_lr_lower"], row["b10_lr_upper"] = mode.lr_bounds.b_life[0.10]
            key = (product, mode.failure_mode)
            if key in expected:
                row["expected_future_returns"] = expected[key]
                total = totals.get(product, 0.0)
                row["share_of_expected_future_returns"] = expected[key] / total if total > 0 else math.nan
            rows.append(row)
    table = pd.DataFrame(rows, columns=list(MODE_COLUMNS))
    table["is_shape_fixed"] = table["is_shape_fixed"].astype(bool)
    return table


def mode_warnings(
    mode_fits: Mapping[str, tuple[ModeFit, ...]], concentrated: Mapping[tuple[str, str], str] | None = None
) -> list[str]:
    """One sentence per failure mode without a published fit (often a defect confined to some build months).

    `concentrated` maps (product, failure code) to a sentence saying the code's returns sit in flagged build
    months (the build-month alerts' `concentrated_codes`); such a mode's warning says so first, as its
    failed fit is then what a confined defect looks like, not a plain fitting failure."""
    concentrated = concentrated or {}
    texts = []
    for product, modes in sorted(mode_fits.items()):
        for mode in modes:
            if mode.status in PUBLISHED_STATUSES:
                continue
            notes = [concentrated[(product, code)] for code in mode.failure_codes if (product, code) in concentrated]
            if notes:
                texts.append(
                    f"product {product}, failure mode {mode.failure_mode}: no life fit ({mode.status}), as expected"
                    f" of a defect confined to flagged build months ({'; '.join(notes)}), not a wear-out life;"
                    f" see build_month_causes; the fitter said: {mode.message}"
                )
            else:
                texts.append(f"product {product}, failure mode {mode.failure_mode}: no fit ({mode.status}): {mode.message}")
    return texts
