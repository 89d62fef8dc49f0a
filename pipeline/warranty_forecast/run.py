"""The nightly run, as a straight line of typed stage results:

extracts -> shaped (DuckDB) -> reporting delay (fit frames completed with the failures not yet reported)
-> screening fits -> build-month alerts (on the reported returns) -> lives (fits without the flagged build
months) -> forecast (flagged months with their own life; not-yet-reported and repeat claims) -> reserve
-> prediction intervals -> diagnostics and charts -> reports (Markdown, HTML), manifest -> publish (atomic;
every table stamped with the run id and as-of date)

Every decision sits in the stage that owns it (which model forecasts: `stages.forecasting`; pricing:
`stages.reserve`; what to warn about: each stage's `warnings`); this module only wires them together,
times them and logs one line per stage.
"""

from __future__ import annotations

import datetime as dt
import logging
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, TypeVar

from warranty_forecast.config import RunConfig, check_products_in_data
from warranty_forecast.outputs import charts
from warranty_forecast.outputs.manifest import RunManifest, run_manifest
from warranty_forecast.outputs.html_report import render_html_report
from warranty_forecast.outputs.publish import figure_png, publish_outputs
from warranty_forecast.outputs.report import render_report
from warranty_forecast.stages.build_month_alerts import alert_build_months
from warranty_forecast.stages.forecasting import forecast_returns
from warranty_forecast.stages.life_models import fit_lives, keep_screening_where_refit_failed
from warranty_forecast.stages.life_table import life_table
from warranty_forecast.stages.reporting_delay import reporting_delay_stage
from warranty_forecast.stages.prediction import claim_costs_by_product, predict_returns
from warranty_forecast.stages.reserve import book_reserve, with_prediction_intervals
from warranty_forecast.stages.shaping import shape_extracts

log = logging.getLogger(__name__)

Result = TypeVar("Result")


@dataclass(frozen=True)
class RunResult:
    """What a finished run wrote and decided."""

    out_dir: Path
    as_of_date: dt.date
    manifest: RunManifest | None  # None only where a test stands in for a run
    warnings: tuple[str, ...]


class _StageClock:
    """Runs stages, times them and logs one line per stage."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self._started = time.perf_counter()

    def run(self, stage: str, work: Callable[[], Result], describe: Callable[[Result], str]) -> Result:
        started = time.perf_counter()
        result = work()
        elapsed = time.perf_counter() - started
        self.seconds[stage] = round(elapsed, 4)
        log.info("stage %-9s %s in %.2f s", stage, describe(result), elapsed)
        return result

    @property
    def total(self) -> float:
        return time.perf_counter() - self._started


def stamped(frame, run_id: str, as_of_date: dt.date):  # type: ignore[no-untyped-def]
    """`frame` with the run's id and as-of date as its first two columns (run_id, as_of_date)."""
    body = frame.drop(columns=[c for c in ("run_id", "as_of_date") if c in frame.columns])
    return body.assign(run_id=run_id, as_of_date=as_of_date)[["run_id", "as_of_date", *body.columns]]


def run_nightly(config: RunConfig) -> RunResult:
    """Run every stage for one configuration and publish the outputs atomically."""
    clock = _StageClock()
    started_utc = dt.datetime.now(dt.timezone.utc)

    shaped = clock.run("shaping", lambda: shape_extracts(config), lambda s: s.summary)
    check_products_in_data(config, shaped.known_products)
    # the life fits and the forecast see the fit frames completed with the failures not yet reported; the
    # alerts judge the returns as reported (an imputed fraction of a return is no evidence against a month)
    delays = clock.run(
        "delays", lambda: reporting_delay_stage(shaped, config.forecast, config.life_model), lambda d: d.summary
    )
    for_life = delays.shaped
    screening = clock.run("fit", lambda: fit_lives(for_life, config.life_model), lambda f: f.summary)
    alerts = clock.run(
        "alerts",
        lambda: alert_build_months(
            shaped.fit_returns, shaped.fit_suspensions, screening, config.alerts, config.life_model,
            shaped.returns_by_build_month_and_code,
        ),
        lambda a: a.summary,
    )
    # the published fits leave the flagged build months out; the forecast gives those months their own life
    lives = (
        clock.run(
            "refit",
            lambda: keep_screening_where_refit_failed(
                fit_lives(for_life, config.life_model, left_out=alerts.flagged_by_product), screening
            ),
            lambda f: f"{f.summary}, without the flagged build months",
        )
        if alerts.flagged_by_product else screening
    )
    forecast = clock.run(
        "forecast",
        lambda: forecast_returns(
            for_life, lives, config.life_model, flagged=alerts.flagged_by_product,
            unreported_by_claim_month=delays.unreported_by_claim_month,
            repeat_claims=config.forecast.forecast_repeat_claims,
        ),
        lambda f: f.summary,
    )
    reserve = clock.run(
        "reserve",
        lambda: book_reserve(
            shaped.cohort_summary, shaped.claim_cost_by_product, forecast.by_month, forecast.status,
            forecast.models.keys(), config.reserve, as_of_date=shaped.as_of_date,
        ),
        lambda r: f"total {r.total:,.2f}",
    )
    prediction = clock.run(
        "intervals",
        lambda: predict_returns(
            for_life.fit_suspensions, forecast.models, shaped.as_of_date, forecast.month_models,
            claim_costs=claim_costs_by_product(reserve.costs), draws=config.forecast.prediction_draws,
            levels=config.forecast.prediction_levels, seed=config.forecast.prediction_seed,
        ),
        lambda p: f"{p.draws} draws per product at levels {', '.join(f'{v:g}' for v in p.levels)}",
    )
    reserve, by_calendar_month = with_prediction_intervals(reserve, prediction)
    life_table_by_month = clock.run(
        "diagnostics",
        lambda: life_table(shaped.age_in_service, config.life_model.confidence_level),
        lambda t: f"life table of {len(t)} rows",
    )
    figures = clock.run(
        "charts",
        lambda: {} if not config.draw_charts else {
            "return_rate_heatmap": charts.return_rate_heatmap(
                shaped.fit_returns, shaped.fit_suspensions,
                {product: baseline.fit for product, baseline in alerts.baselines.items()},
            ),
            "observed_to_expected_by_build_month": charts.observed_to_expected_by_build_month(alerts),
            "cumulative_returns_per_unit": charts.cumulative_returns_per_unit(
                shaped.fit_returns, shaped.fit_suspensions, alerts
            ),
            "weibull_probability_plot": charts.weibull_probability_plot(
                life_table_by_month,
                {product: fit.fit for product, fit in lives.products.items()},
                {product: fit.lognormal for product, fit in lives.products.items()},
            ),
            "expected_returns_by_month": charts.expected_returns_by_month(forecast.by_month),
            "failure_mode_pareto": charts.failure_mode_pareto(shaped.returns_by_failure_mode),
        },
        lambda f: f"{len(f)} figures" if config.draw_charts else "not drawn (--no-charts)",
    )

    warnings = (
        *shaped.warnings, *delays.warnings, *lives.warnings_given(alerts.concentrated_codes), *alerts.warnings,
        *forecast.warnings, *prediction.notes,
        *reserve.warnings,
    )
    for text in warnings:
        log.warning("%s", text)

    started = time.perf_counter()
    tables = {
        "age_in_service": shaped.age_in_service,
        "life_table": life_table_by_month,
        "life_model": lives.table,
        "life_model_by_mode": forecast.by_mode,
        "build_month_alerts": alerts.table,
        "build_month_causes": alerts.causes,
        "flagged_build_month_lives": forecast.flagged_month_lives,
        "safety_term_claims": shaped.safety_term_claims,
        "reporting_delay": delays.table,
        "forecast": reserve.forecast,
        "forecast_by_calendar_month": by_calendar_month,
        "forecast_intervals": prediction.by_product,
        "reserve": reserve.by_build_month,
        "reserve_by_product": reserve.by_product,
        "quarantine": shaped.quarantine,
        "fit_returns": shaped.fit_returns,
        "fit_suspensions": shaped.fit_suspensions,
    }
    manifest = run_manifest(
        config,
        shaped,
        warnings=warnings,
        started_utc=started_utc,
        finished_utc=dt.datetime.now(dt.timezone.utc),
        seconds_by_stage=clock.seconds,
        seconds_total=clock.total,
    )
    report = render_report(
        manifest=manifest,
        life_model=lives.table,
        life_model_by_mode=forecast.by_mode,
        build_month_alerts=alerts.table,
        build_month_causes=alerts.causes,
        safety_term_claims=shaped.safety_term_claims,
        flagged_month_lives=forecast.flagged_month_lives,
        charts_drawn=config.draw_charts,
        reporting_delay=delays.table,
        reserve_totals=reserve.by_product,
        reconciliation=shaped.reconciliation,
        quarantine=shaped.quarantine,
        warnings=list(warnings),
    )
    # each chart drawn to PNG once: the same bytes go to <name>.png and into report.html, in one publish
    pngs = {name: figure_png(figure) for name, figure in figures.items()}
    report_html = render_html_report(
        manifest=manifest,
        life_model=lives.table,
        build_month_alerts=alerts.table,
        reserve_totals=reserve.by_product,
        reconciliation=shaped.reconciliation,
        quarantine=shaped.quarantine,
        warnings=list(warnings),
        charts=pngs,
        charts_drawn=config.draw_charts,
        build_month_causes=alerts.causes,
        flagged_month_lives=forecast.flagged_month_lives,
        reporting_delay=delays.table,
        forecast_intervals=prediction.by_product,
        safety_term_claims=shaped.safety_term_claims,
    )
    # every published table says which run wrote it, so nightly outputs can be stacked; the reserve also as
    # CSV for people who open files in a spreadsheet
    tables = {name: stamped(frame, manifest.run_id, manifest.as_of_date) for name, frame in tables.items()}
    texts = {
        "report.md": report, "report.html": report_html,
        "reserve_by_product.csv": tables["reserve_by_product"].to_csv(index=False, lineterminator="\n"),
        "reserve.csv": tables["reserve"].to_csv(index=False, lineterminator="\n"),
    }
    written = publish_outputs(config.out_dir, tables, pngs, texts, manifest.to_document())
    log.info("stage %-9s %d files to %s in %.2f s", "publish", len(written) + 1, config.out_dir,
             time.perf_counter() - started)
    return RunResult(config.out_dir, shaped.as_of_date, manifest, warnings)
