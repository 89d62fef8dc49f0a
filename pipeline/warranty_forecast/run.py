"""The nightly run: the stages in order, one log line per stage, and the manifest's facts.

extracts -> shaping (DuckDB) -> life model -> forecast -> reserve -> charts -> publish (atomic)
"""

from __future__ import annotations

import datetime as dt
import logging
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping

import pandas as pd

from warranty_forecast.outputs import charts
from warranty_forecast.config import LifeModelSettings, RunConfig, check_products_in_data
from warranty_forecast.stages.failure_modes import complete_mode_models, fit_failure_modes, life_model_by_mode_table
from warranty_forecast.stages.fitting import (
    FITTED,
    FIXED_SHAPE,
    PUBLISHED_STATUSES,
    ProductFit,
    fit_products,
    life_data_by_product,
    life_model_table,
)
from warranty_forecast.stages.forecast import (
    CompetingRisks,
    LifeDistribution,
    expected_future_returns,
    expected_future_returns_by_mode,
    forecast_by_month,
)
from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.stages.life_table import life_table
from warranty_forecast.outputs.manifest import RunManifest, run_manifest
from warranty_forecast.outputs.publish import publish_outputs
from warranty_forecast.outputs.report import render_report
from warranty_forecast.stages.reserve import book_reserve
from warranty_forecast.stages.shaping import shape_extracts

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class RunResult:
    """What a finished run wrote and decided."""

    out_dir: Path
    as_of_date: dt.date
    manifest: RunManifest | None  # None only where a test stands in for a run
    warnings: tuple[str, ...]


class _StageClock:
    """Times stages and logs one line per stage."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self._started = time.perf_counter()

    def done(self, stage: str, started: float, detail: str) -> None:
        elapsed = time.perf_counter() - started
        self.seconds[stage] = round(elapsed, 4)
        log.info("stage %-9s %s in %.2f s", stage, detail, elapsed)

    @property
    def total(self) -> float:
        return time.perf_counter() - self._started


def run_nightly(config: RunConfig) -> RunResult:
    """Run every stage for one configuration and publish the outputs atomically."""
    clock = _StageClock()
    started_utc = dt.datetime.now(dt.timezone.utc)

    started = time.perf_counter()
    shaped = shape_extracts(config)
    reconciliation = shaped.reconciliation.set_index("extract")
    clock.done(
        "shaping",
        started,
        "; ".join(
            f"{name}: {r.rows_read} rows read, {r.rows_used} used, {r.rows_quarantined} quarantined, "
            f"{r.rows_after_as_of} after as-of"
            for name, r in reconciliation.iterrows()
        )
        + f"; as-of {shaped.as_of_date} ({shaped.as_of_source}), run date {config.run_date}",
    )
    check_products_in_data(config, shaped.known_products)

    started = time.perf_counter()
    settings = config.life_model
    data_by_product = life_data_by_product(shaped.fit_returns, shaped.fit_suspensions)
    warranty_by_product = shaped.cohort_summary.groupby("product")["max_warranty_months"].max().to_dict()
    fits = fit_products(data_by_product, settings, warranty_by_product)
    mode_fits = fit_failure_modes(shaped.returns_by_failure_mode, data_by_product, settings)
    units_by_product = shaped.cohort_summary.groupby("product")["units"].sum().to_dict()
    life_model = life_model_table(fits, units_by_product)
    clock.done(
        "fit",
        started,
        f"{len(fits)} products, {sum(f.status in PUBLISHED_STATUSES for f in fits.values())} with a published fit, "
        f"{sum(len(m) for m in mode_fits.values())} failure modes",
    )

    started = time.perf_counter()
    mode_models = complete_mode_models(mode_fits)
    models, model_names, model_notes = forecast_models(fits, mode_models, settings.forecast_model)
    detail = expected_future_returns(shaped.fit_suspensions, models)
    forecast = forecast_by_month(detail)
    by_mode = life_model_by_mode_table(
        mode_fits, expected_future_returns_by_mode(shaped.fit_suspensions, mode_models)
    )
    clock.done("forecast", started, f"{len(forecast)} rows, {forecast['expected_returns'].sum():,.1f} returns")

    started = time.perf_counter()
    status = {
        product: (f"forecast ({model_names[product]})" if product in models else f"no forecast: {outcome.status}")
        for product, outcome in fits.items()
    }
    reserve = book_reserve(
        shaped.cohort_summary, shaped.claim_cost_by_product, forecast, status, models.keys(), config.reserve
    )
    clock.done("reserve", started, f"total {reserve.total:,.2f}")

    started = time.perf_counter()
    table = life_table(shaped.age_in_service, config.life_model.confidence_level)
    figures = {
        "return_rate_heatmap": charts.return_rate_heatmap(shaped.age_in_service),
        "weibull_probability_plot": charts.weibull_probability_plot(
            table,
            {product: outcome.fit for product, outcome in fits.items()},
            {product: outcome.lognormal for product, outcome in fits.items()},
        ),
        "expected_returns_by_month": charts.expected_returns_by_month(forecast),
        "failure_mode_pareto": charts.failure_mode_pareto(shaped.returns_by_failure_mode),
    }
    clock.done("charts", started, f"{len(figures)} figures")

    warnings = [*shaped.freshness.warnings(), *model_notes, *_warnings(life_model, by_mode, reserve.costs, shaped.run_facts, settings)]
    for text in warnings:
        log.warning("%s", text)

    started = time.perf_counter()
    tables = {
        "age_in_service": shaped.age_in_service,
        "life_table": table,
        "life_model": life_model,
        "life_model_by_mode": by_mode,
        "forecast": reserve.forecast,
        "reserve": reserve.by_build_month,
        "reserve_by_product": reserve.by_product,
        "quarantine": shaped.quarantine,
        "fit_returns": shaped.fit_returns,
        "fit_suspensions": shaped.fit_suspensions,
    }
    manifest = run_manifest(
        config,
        shaped,
        warnings=tuple(warnings),
        started_utc=started_utc,
        finished_utc=dt.datetime.now(dt.timezone.utc),
        seconds_by_stage=clock.seconds,
        seconds_total=clock.total,
    )
    report = render_report(
        manifest=manifest,
        life_model=life_model,
        life_model_by_mode=by_mode,
        reserve_totals=reserve.by_product,
        reconciliation=shaped.reconciliation,
        quarantine=shaped.quarantine,
        warnings=warnings,
    )
    written = publish_outputs(config.out_dir, tables, figures, {"report.md": report}, manifest.to_document())
    clock.done("publish", started, f"{len(written) + 1} files to {config.out_dir}")
    return RunResult(config.out_dir, shaped.as_of_date, manifest, tuple(warnings))


def forecast_models(
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


def _warnings(
    life_model: pd.DataFrame, by_mode: pd.DataFrame, costs: pd.DataFrame, facts: dict[str, int],
    settings: LifeModelSettings,
) -> list[str]:
    texts = []
    for row in life_model.itertuples(index=False):
        if row.status == FIXED_SHAPE:
            texts.append(f"product {row.product}: {row.message}")
        elif row.status != FITTED:
            texts.append(f"product {row.product}: no life model, no forecast and no reserve ({row.status}): {row.message}")
        if row.status in PUBLISHED_STATUSES and not row.lr_bounds_finite:
            texts.append(
                f"product {row.product}: the data do not bound every likelihood-ratio interval (an end is 0 or"
                " infinite); treat its estimates as very uncertain"
            )
        if row.prefers_lognormal:
            texts.append(f"product {row.product}: {row.family_message}")
        if row.gof_p_value < settings.goodness_of_fit_warning_p_value:
            texts.append(
                f"product {row.product}: returns by month in service depart from the Weibull (chi-square"
                f" {row.gof_chi_square:.1f} on {row.gof_df:.0f} df, p = {row.gof_p_value:.1e}; largest residual in"
                f" month {row.gof_largest_residual_month:.0f}); check the probability plot"
            )
    for row in by_mode.itertuples(index=False):
        if row.status not in PUBLISHED_STATUSES:
            texts.append(f"product {row.product}, failure mode {row.failure_mode}: no fit ({row.status}): {row.message}")
    for row in costs.itertuples(index=False):
        if row.cost_per_claim != row.cost_per_claim:  # NaN
            texts.append(f"product {row.product}: no cost per claim ({row.cost_basis}); its reserve is empty")
    if facts.get("groups_with_more_returns_than_units", 0):
        texts.append(
            f"{facts['groups_with_more_returns_than_units']} sale-month group(s) have more returns than units:"
            " check the shipments extract for missing rows"
        )
    return texts
