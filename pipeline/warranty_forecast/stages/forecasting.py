"""The forecast stage: which life model each product's forecast uses, the expected returns per build
month and calendar month until warranty expiry, each failure mode's share of them, and the claims on top
of the first failures: failures already incurred but not yet reported (from the reporting-delay stage)
and repeat claims of repaired units (stages.repeat_claims).

The arithmetic is in `forecast` (pure functions of a life distribution); this module decides.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Collection, Mapping

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
from warranty_forecast.stages.month_life import DEFECTIVE_SHARE, month_data_by_build_month, month_life_model
from warranty_forecast.stages.repeat_claims import RepeatClaimsForecast, forecast_repeat_claims
from warranty_forecast.stages.by_product import rows_by_product

if TYPE_CHECKING:
    from warranty_forecast.stages.shaping import ShapedData


BY_MONTH_COLUMNS = (
    "product",
    "build_month",
    "month",
    "expected_returns",
    "expected_returns_product_model",
    "expected_unreported_returns",
    "expected_repeat_claims",
    "expected_claims",
)

FLAGGED_MONTH_LIFE_COLUMNS = (
    "product",
    "build_month",
    "life_model",
    "hazard_ratio",
    "defective_share",
    "defect_mean_life_months",
    "aic_own_scale",
    "aic_defective_share",
    "expected_future_returns",
    "expected_future_returns_product_model",
    "note",
)


@dataclass(frozen=True)
class ReturnsForecast:
    """The stage's result. `by_month`: per product x build month x calendar month, BY_MONTH_COLUMNS:
    expected_returns (the life model's first failures still to come), expected_returns_product_model
    (what the product's model alone expects: different only in flagged build months),
    expected_unreported_returns (failures before the as-of date whose claims are expected in that month),
    expected_repeat_claims (later claims of repaired units) and expected_claims, their sum;
    `by_mode`: the life_model_by_mode table with each mode's share; `status`: a sentence per product (the
    model used, or why there is no forecast); `flagged_month_lives`: the life model each flagged build
    month's forecast uses (FLAGGED_MONTH_LIFE_COLUMNS); `detail`: the first failures per suspension row x
    month in service (forecast.FORECAST_DETAIL_COLUMNS); `month_models`: each flagged month's own life;
    `repeats`: the repeat-claims forecast (None when turned off)."""

    models: Mapping[str, LifeDistribution]
    by_month: pd.DataFrame
    by_mode: pd.DataFrame
    status: Mapping[str, str]
    warnings: tuple[str, ...]
    flagged_month_lives: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=list(FLAGGED_MONTH_LIFE_COLUMNS))
    )
    detail: pd.DataFrame | None = None
    month_models: Mapping[tuple[str, object], LifeDistribution] = field(default_factory=dict)
    repeats: RepeatClaimsForecast | None = None

    @property
    def summary(self) -> str:
        """One line for the run log."""
        by_month = self.by_month
        text = f"{len(by_month)} rows, {by_month['expected_returns'].sum():,.1f} returns"
        if "expected_claims" in by_month:
            text += (
                f" + {by_month['expected_unreported_returns'].sum():,.1f} not yet reported"
                f" + {by_month['expected_repeat_claims'].sum():,.1f} repeat = {by_month['expected_claims'].sum():,.1f} claims"
            )
        return text


def forecast_returns(
    shaped: ShapedData,
    lives: FittedLives,
    settings: LifeModelSettings,
    flagged: Mapping[str, Collection[object]] | None = None,
    *,
    unreported_by_claim_month: pd.DataFrame | None = None,
    repeat_claims: bool = True,
) -> ReturnsForecast:
    """Forecast every product that has a usable life model, with the model `settings.forecast_model` asks
    for; each build month in `flagged` (product -> build months) with its own life on top of that model
    (`month_life.month_life_model`: own scale or a defective share, by AIC).

    `shaped.fit_suspensions` are the units still at risk (with the reporting-delay correction, the
    completed frames: unreported failures already taken off). `unreported_by_claim_month` (product,
    build_month, month, expected_unreported) adds the failures incurred but not yet reported, in the
    month their claims are expected; `repeat_claims` adds the repeat claims of repaired units
    (shaped.repeat_claims_by_age, shaped.repaired_units_under_warranty). Both only for forecast products."""
    complete_modes = complete_mode_models(lives.modes)
    models, names, notes = choose_forecast_models(lives.products, complete_modes, settings.forecast_model)
    by_mode = life_model_by_mode_table(
        lives.modes, expected_future_returns_by_mode(shaped.fit_suspensions, complete_modes)
    )
    status = {
        product: f"forecast ({names[product]})" if product in models else f"no forecast: {outcome.status}"
        for product, outcome in lives.products.items()
    }
    month_models, month_rows, month_notes = flagged_month_models(
        shaped.fit_returns, shaped.fit_suspensions, models, flagged or {}, settings.confidence_level
    )
    detail = expected_future_returns(shaped.fit_suspensions, models, month_models)
    by_month = forecast_by_month(detail)
    product_model = by_month.copy()
    if month_models:
        # only the flagged build months differ under the product's model alone: recompute those rows only
        def flagged(frame: pd.DataFrame) -> list[bool]:
            return [key in month_models for key in zip(frame["product"], frame["build_month"])]

        suspensions = shaped.fit_suspensions
        flagged_alone = forecast_by_month(expected_future_returns(suspensions[flagged(suspensions)], models))
        unflagged = product_model[[not f for f in flagged(product_model)]]
        product_model = pd.concat([unflagged, flagged_alone], ignore_index=True)
    by_month = by_month.merge(
        product_model.rename(columns={"expected_returns": "expected_returns_product_model"}),
        on=["product", "build_month", "month"], how="outer",
    ).fillna({"expected_returns": 0.0, "expected_returns_product_model": 0.0})
    repeats = None
    if repeat_claims:
        repeats = forecast_repeat_claims(
            shaped.repeat_claims_by_age, shaped.repaired_units_under_warranty, detail, shaped.as_of_date
        )
    by_month = _with_claims_beyond_first_failures(
        by_month, set(models), unreported_by_claim_month, repeats.by_month if repeats is not None else None
    )
    lives_table = _flagged_month_table(month_rows, by_month)
    return ReturnsForecast(
        models=models,
        by_month=by_month,
        by_mode=by_mode,
        status=status,
        warnings=(*notes, *month_notes, *_flagged_month_warnings(lives_table)),
        flagged_month_lives=lives_table,
        detail=detail,
        month_models=month_models,
        repeats=repeats,
    )


def _with_claims_beyond_first_failures(
    by_month: pd.DataFrame,
    forecast_products: set[str],
    unreported: pd.DataFrame | None,
    repeats: pd.DataFrame | None,
) -> pd.DataFrame:
    """by_month with expected_unreported_returns and expected_repeat_claims (0 where none) for the products
    that have a forecast, and expected_claims = first failures + unreported + repeat (BY_MONTH_COLUMNS)."""
    keys = ["product", "build_month", "month"]
    table = by_month
    for frame, source, column in (
        (unreported, "expected_unreported", "expected_unreported_returns"),
        (repeats, "expected_repeat_claims", "expected_repeat_claims"),
    ):
        if frame is None or not len(frame):
            table = table.assign(**{column: 0.0})
            continue
        part = frame.loc[frame["product"].isin(forecast_products), [*keys, source]].rename(columns={source: column})
        part = part.assign(
            month=pd.to_datetime(part["month"]).dt.date, build_month=pd.to_datetime(part["build_month"]).dt.date
        ).groupby(keys, as_index=False)[column].sum()
        table = table.assign(
            month=pd.to_datetime(table["month"]).dt.date, build_month=pd.to_datetime(table["build_month"]).dt.date
        ).merge(part, on=keys, how="outer")
    fill = {c: 0.0 for c in BY_MONTH_COLUMNS if c not in keys}
    table = table.fillna(fill)
    table["expected_claims"] = (
        table["expected_returns"] + table["expected_unreported_returns"] + table["expected_repeat_claims"]
    )
    return table.loc[:, list(BY_MONTH_COLUMNS)].sort_values(keys, ignore_index=True)


def flagged_month_models(
    fit_returns: pd.DataFrame,
    fit_suspensions: pd.DataFrame,
    models: Mapping[str, LifeDistribution],
    flagged: Mapping[str, Collection[object]],
    confidence_level: float,
) -> tuple[dict[tuple[str, object], LifeDistribution], list[dict[str, object]], list[str]]:
    """Each flagged build month's own life on top of its product's forecast model; the table rows; notes
    for months that keep the product's model (no forecast model, or the month's fit failed)."""
    month_models: dict[tuple[str, object], LifeDistribution] = {}
    rows: list[dict[str, object]] = []
    notes: list[str] = []
    returns_of, suspensions_of = rows_by_product(fit_returns), rows_by_product(fit_suspensions)
    for product, months in sorted(flagged.items()):
        if not months or product not in models:
            continue
        data = month_data_by_build_month(returns_of[product], suspensions_of[product])
        for month in sorted(months):
            try:
                if month not in data:
                    raise ValueError("no data for the month")
                fitted = month_life_model(models[product], data[month], confidence_level)
            except (ValueError, FloatingPointError, ArithmeticError) as error:
                notes.append(
                    f"product {product} build month {_month(month)}: its own life could not be fitted ({error});"
                    " its forecast uses the product's model, which understates a bad month"
                )
                continue
            month_models[(product, month)] = fitted
            rows.append({
                "product": product, "build_month": month, "life_model": fitted.kind,
                "hazard_ratio": fitted.hazard_ratio, "defective_share": fitted.defective_share,
                "defect_mean_life_months": fitted.defect_mean_life, "aic_own_scale": fitted.aic_own_scale,
                "aic_defective_share": fitted.aic_defective_share, "note": fitted.note,
            })
    return month_models, rows, notes


def _flagged_month_table(rows: list[dict[str, object]], by_month: pd.DataFrame) -> pd.DataFrame:
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in FLAGGED_MONTH_LIFE_COLUMNS})
    table = pd.DataFrame(rows)
    sums = by_month.groupby(["product", "build_month"], as_index=False)[
        ["expected_returns", "expected_returns_product_model"]
    ].sum().rename(columns={
        "expected_returns": "expected_future_returns",
        "expected_returns_product_model": "expected_future_returns_product_model",
    })
    table = table.merge(sums, on=["product", "build_month"], how="left").fillna(
        {"expected_future_returns": 0.0, "expected_future_returns_product_model": 0.0}
    )
    return table[list(FLAGGED_MONTH_LIFE_COLUMNS)]


def _flagged_month_warnings(table: pd.DataFrame) -> list[str]:
    texts = []
    for row in table.itertuples(index=False):
        if row.life_model == DEFECTIVE_SHARE:
            model = (
                f"a defective share of {row.defective_share:.2%} of its units with a mean defect life of"
                f" {row.defect_mean_life_months:.1f} months"
            )
        else:
            model = f"its own scale, {row.hazard_ratio:.2f} times the product's hazard"
        texts.append(
            f"product {row.product} build month {_month(row.build_month)} is forecast with its own life ({model}):"
            f" {row.expected_future_returns:,.1f} returns still expected from it, against"
            f" {row.expected_future_returns_product_model:,.1f} under the product's model"
        )
    return texts


def _month(value: object) -> str:
    return value.strftime("%Y-%m") if hasattr(value, "strftime") else str(value)


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
