"""The nightly run: the stages in order, one log line per stage, and the manifest's facts.

extracts -> shaping (DuckDB) -> life model -> forecast -> reserve -> charts -> publish (atomic)
"""

from __future__ import annotations

import datetime as dt
import logging
import platform
import time
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path
from typing import Any

import pandas as pd

from pipeline import charts
from pipeline.config import RunConfig
from pipeline.fitting import FITTED, fit_products, life_data_by_product, life_model_table
from pipeline.forecast import expected_future_returns, forecast_by_month
from pipeline.life_table import life_table
from pipeline.publish import publish_outputs, sha256_of
from pipeline.report import render_report
from pipeline.reserve import cost_per_claim_by_product, reserve_by_build_month, reserve_by_product
from pipeline.shaping import shape_extracts

log = logging.getLogger(__name__)

_PACKAGES = ("warranty-forecast", "pandas", "numpy", "scipy", "duckdb", "pyarrow", "matplotlib")


@dataclass(frozen=True)
class RunResult:
    """What a finished run wrote and decided."""

    out_dir: Path
    as_of_date: dt.date
    manifest: dict[str, Any]
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
        + f"; as-of {shaped.as_of_date}",
    )

    started = time.perf_counter()
    data_by_product = life_data_by_product(shaped.fit_returns, shaped.fit_suspensions)
    fits = fit_products(data_by_product, config.life_model)
    units_by_product = shaped.cohort_summary.groupby("product")["units"].sum().to_dict()
    life_model = life_model_table(fits, units_by_product)
    clock.done(
        "fit",
        started,
        f"{len(fits)} products, {sum(f.status == FITTED for f in fits.values())} fitted",
    )

    started = time.perf_counter()
    usable = {product: outcome.fit for product, outcome in fits.items() if outcome.fit is not None}
    detail = expected_future_returns(shaped.fit_suspensions, usable)
    forecast = forecast_by_month(detail)
    clock.done("forecast", started, f"{len(forecast)} rows, {forecast['expected_returns'].sum():,.1f} returns")

    started = time.perf_counter()
    costs = cost_per_claim_by_product(
        shaped.claim_cost_by_product, shaped.cohort_summary["product"], config.reserve
    )
    forecast = forecast.merge(costs[["product", "cost_per_claim"]], on="product", how="left")
    forecast["expected_cost"] = forecast["expected_returns"] * forecast["cost_per_claim"]
    forecast = forecast.drop(columns="cost_per_claim")
    status = {p: ("forecast" if o.fit is not None else f"no forecast: {o.status}") for p, o in fits.items()}
    reserve = reserve_by_build_month(shaped.cohort_summary, forecast, costs, status)
    totals = reserve_by_product(reserve)
    clock.done("reserve", started, f"total {totals['reserve'].sum(min_count=1):,.2f}")

    started = time.perf_counter()
    table = life_table(shaped.age_in_service, config.life_model.confidence_level)
    figures = {
        "return_rate_heatmap": charts.return_rate_heatmap(shaped.age_in_service),
        "weibull_probability_plot": charts.weibull_probability_plot(table, usable),
        "expected_returns_by_month": charts.expected_returns_by_month(forecast),
    }
    clock.done("charts", started, f"{len(figures)} figures")

    warnings = _warnings(life_model, costs, totals, shaped.run_facts)
    for text in warnings:
        log.warning("%s", text)

    started = time.perf_counter()
    tables = {
        "age_in_service": shaped.age_in_service,
        "life_table": table,
        "life_model": life_model,
        "forecast": forecast,
        "reserve": reserve,
        "reserve_by_product": totals,
        "quarantine": shaped.quarantine,
        "fit_returns": shaped.fit_returns,
        "fit_suspensions": shaped.fit_suspensions,
    }
    manifest = _manifest(config, shaped, clock, started_utc, warnings)
    manifest["finished_utc"] = dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")
    manifest["seconds_total"] = round(clock.total, 3)
    report = render_report(
        manifest=manifest,
        life_model=life_model,
        reserve_totals=totals,
        reconciliation=shaped.reconciliation,
        quarantine=shaped.quarantine,
        warnings=warnings,
    )
    try:
        written = publish_outputs(config.out_dir, tables, figures, {"report.md": report}, manifest)
    finally:
        for figure in figures.values():
            charts.plt.close(figure)
    clock.done("publish", started, f"{len(written) + 1} files to {config.out_dir}")
    return RunResult(config.out_dir, shaped.as_of_date, manifest, tuple(warnings))


def _warnings(
    life_model: pd.DataFrame, costs: pd.DataFrame, totals: pd.DataFrame, facts: dict[str, int]
) -> list[str]:
    texts = []
    for row in life_model.itertuples(index=False):
        if row.status != FITTED:
            texts.append(f"product {row.product}: no life model, no forecast and no reserve ({row.status}): {row.message}")
    for row in costs.itertuples(index=False):
        if row.cost_per_claim != row.cost_per_claim:  # NaN
            texts.append(f"product {row.product}: no cost per claim ({row.cost_basis}); its reserve is empty")
    if facts.get("groups_with_more_returns_than_units", 0):
        texts.append(
            f"{facts['groups_with_more_returns_than_units']} sale-month group(s) have more returns than units:"
            " check the shipments extract for missing rows"
        )
    return texts


def _manifest(
    config: RunConfig, shaped: Any, clock: _StageClock, started_utc: dt.datetime, warnings: list[str]
) -> dict[str, Any]:
    inputs = []
    for name, path in (("shipments", config.shipments_path), ("claims", config.claims_path)):
        row = shaped.reconciliation.set_index("extract").loc[name]
        inputs.append(
            {
                "extract": name,
                "path": str(path),
                "sha256": sha256_of(path),
                "bytes": path.stat().st_size,
                "rows_read": int(row["rows_read"]),
                "ignored_columns": shaped.ignored_columns[name],
            }
        )
    return {
        "as_of_date": shaped.as_of_date.isoformat(),
        "as_of_source": shaped.as_of_source,
        "started_utc": started_utc.isoformat(timespec="seconds"),
        "inputs": inputs,
        "reconciliation": [
            {key: (int(value) if not isinstance(value, str) else value) for key, value in row.items()}
            for row in shaped.reconciliation.to_dict(orient="records")
        ],
        "facts": dict(sorted(shaped.run_facts.items())),
        "quarantine_by_reason": {
            f"{file}:{column}:{reason}": int(count)
            for (file, column, reason), count in shaped.quarantine.groupby(
                ["source_file", "column", "reason"]
            ).size().items()
        },
        "config": {
            "path": str(config.config_path) if config.config_path else None,
            "default_warranty_months": config.warranty.default_months,
            "counted_statuses": list(config.claims.counted_statuses),
            "cost_per_claim": config.reserve.cost_per_claim,
            "cost_per_claim_by_product": dict(config.reserve.cost_per_claim_by_product),
            "cost_window_months": config.reserve.cost_window_months,
            "confidence_level": config.life_model.confidence_level,
            "min_returns": config.life_model.min_returns,
        },
        "warnings": warnings,
        "seconds_by_stage": dict(clock.seconds),
        "seconds_by_sql_layer": {k: round(v, 4) for k, v in shaped.seconds_by_layer.items()},
        "versions": {"python": platform.python_version(), **{p: _version(p) for p in _PACKAGES}},
    }


def _version(package: str) -> str:
    try:
        return metadata.version(package)
    except metadata.PackageNotFoundError:
        return "not installed"
