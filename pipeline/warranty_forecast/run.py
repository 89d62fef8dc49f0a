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
from warranty_forecast.outputs.manifest import CODE_KEY, RunManifest, run_manifest
from warranty_forecast.outputs.html_report import render_html_report
from warranty_forecast.outputs.history import record_published_runs
from warranty_forecast.outputs.publish import figure_png
from warranty_forecast.outputs.run_folders import (
    lock_output_root, opening_run, point_latest, previous_run, publish_run, published_runs, read_reserve, run_in_effect, what_changed,
)
from warranty_forecast.outputs.report import render_report
from warranty_forecast.stages.build_month_alerts import alert_build_months
from warranty_forecast.stages.forecasting import forecast_returns
from warranty_forecast.stages.life_models import fit_lives, keep_screening_where_refit_failed
from warranty_forecast.stages.life_table import life_table
from warranty_forecast.stages.reporting_delay import reporting_delay_stage
from warranty_forecast.stages.prediction import claim_costs_by_product, predict_returns
from warranty_forecast.stages.parallel import worker_count
from warranty_forecast.outputs.output_columns import for_output
from warranty_forecast.stages.reserve import book_reserve, reserve_by_calendar_month, with_prediction_intervals
from warranty_forecast.stages.roll_forward import ReserveMovement, reserve_movement
from warranty_forecast.stages.shaping import shape_extracts

log = logging.getLogger(__name__)

Result = TypeVar("Result")


@dataclass(frozen=True)
class RunResult:
    """What a finished run wrote and decided: `out_dir` is the output root, `run_folder` the run's own folder
    (runs/<run id>); `changed` is False when an identical run was already published (nothing written)."""

    out_dir: Path
    as_of_date: dt.date
    manifest: RunManifest | None  # None only where a test stands in for a run
    warnings: tuple[str, ...]
    run_folder: Path | None = None
    changed: bool = True
    history_error: str | None = None


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


def _shape_on_engine(config: RunConfig):
    """The shaping stage on the configured engine (pyspark is imported only for --engine spark)."""
    if config.engine == "spark":
        from warranty_forecast.stages.spark_engine import shape_extracts_on_spark

        return shape_extracts_on_spark(config)
    return shape_extracts(config)


def run_nightly(config: RunConfig, reason: str | None = None) -> RunResult:
    """Run every stage for one configuration and publish the outputs as a run folder under the output root
    (config.out_dir); record it in the history database; point `latest` at it when it is the newest.
    `reason`: why a closed as-of date is run again (recorded with what changed)."""
    clock = _StageClock()
    started_utc = dt.datetime.now(dt.timezone.utc)

    shaped = clock.run("shaping", lambda: _shape_on_engine(config), lambda s: s.summary)
    check_products_in_data(config, shaped.known_products)
    # the life fits and the forecast see the fit frames completed with the failures not yet reported; the
    # alerts judge the returns as reported (an imputed fraction of a return is no evidence against a month)
    workers = worker_count(config.run.workers)  # processes for the per-product work (stages.parallel)
    delays = clock.run(
        "delays",
        lambda: reporting_delay_stage(shaped, config.forecast, config.life_model, workers=workers),
        lambda d: d.summary,
    )
    for_life = delays.shaped
    screening = clock.run("fit", lambda: fit_lives(for_life, config.life_model, workers=workers), lambda f: f.summary)
    alerts = clock.run(
        "alerts",
        lambda: alert_build_months(
            shaped.fit_returns, shaped.fit_suspensions, screening, config.alerts, config.life_model,
            shaped.returns_by_build_month_and_code, workers=workers,
        ),
        lambda a: a.summary,
    )
    # the published fits leave the flagged build months out; the forecast gives those months their own life
    lives = (
        clock.run(
            "refit",
            lambda: keep_screening_where_refit_failed(
                fit_lives(
                    for_life, config.life_model, left_out=alerts.flagged_by_product, workers=workers,
                    unchanged=screening,
                ),
                screening,
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
            open_claims=shaped.open_claims_by_build_month,
        ),
        lambda r: f"total {r.total:,.2f}",
    )
    prediction = clock.run(
        "intervals",
        lambda: predict_returns(
            for_life.fit_suspensions, forecast.models, shaped.as_of_date, forecast.month_models,
            claim_costs=claim_costs_by_product(reserve.costs), draws=config.forecast.prediction_draws,
            levels=config.forecast.prediction_levels, seed=config.forecast.prediction_seed, workers=workers,
        ),
        lambda p: f"{p.draws} draws per product at levels {', '.join(f'{v:g}' for v in p.levels)}",
    )
    reserve, by_calendar_month = with_prediction_intervals(reserve, prediction, shaped.as_of_date)
    cost_by_calendar_month = reserve_by_calendar_month(reserve, prediction, shaped.as_of_date)
    # the runs already published under the output root: the last one before this as-of date (change since
    # the last run) and the last month-end close (the roll-forward's opening)
    published = published_runs(config.out_dir)
    movement = clock.run(
        "movement",
        lambda: reserve_movement(
            opening=read_reserve(opening_run(published, shaped.as_of_date)),
            previous=read_reserve(previous_run(published, shaped.as_of_date)),
            closing_by_product=reserve.by_product,
            units_by_ship_date=shaped.units_shipped_by_day,
            claims_by_claim_date=shaped.claims_by_claim_date,
            models=forecast.models,
            month_models=forecast.month_models,
            handling_cost_per_claim=getattr(config.reserve, "handling_cost_per_claim", 0.0),
        ),
        lambda m: m.note,
    )
    life_table_by_month = clock.run(
        "diagnostics",
        lambda: life_table(shaped.age_in_service, config.life_model.confidence_level),
        lambda t: f"life table of {len(t)} rows",
    )
    # the per-product charts draw at most charts.max_products product lines (charts.products first, then
    # flagged, then by reserve)
    drawn = charts.products_to_draw(
        alerts.table, reserve.by_product, shaped.known_products, config.charts.max_products,
        first=config.charts.products,
    )
    chart_note = charts.charted_note(drawn, len(shaped.known_products))

    def only_drawn(frame):  # type: ignore[no-untyped-def]
        return frame[frame["product"].isin(drawn)]

    currency = charts.currency_of(reserve.by_product)

    figures = clock.run(
        "charts",
        lambda: {} if not config.draw_charts else {
            "return_rate_heatmap": charts.return_rate_heatmap(
                only_drawn(shaped.fit_returns), only_drawn(shaped.fit_suspensions),
                {product: baseline.fit for product, baseline in alerts.baselines.items() if product in drawn},
            ),
            "observed_to_expected_by_build_month": charts.observed_to_expected_by_build_month(only_drawn(alerts.table)),
            "cumulative_returns_per_unit": charts.cumulative_returns_per_unit(
                only_drawn(shaped.fit_returns), only_drawn(shaped.fit_suspensions), alerts
            ),
            "weibull_probability_plot": charts.weibull_probability_plot(
                only_drawn(life_table_by_month),
                {product: fit.fit for product, fit in lives.products.items() if product in drawn},
                {product: fit.lognormal for product, fit in lives.products.items() if product in drawn},
                shaped.fit_suspensions.groupby("product")["warranty_months"].max().to_dict(),
            ),
            "expected_returns_by_month": charts.expected_returns_by_month(
                forecast.by_month, drawn, as_of_date=shaped.as_of_date, returns_to_date=shaped.returns_by_failure_month,
                intervals=by_calendar_month, costs=reserve.forecast, currency=currency,
                cost_by_month=cost_by_calendar_month,
            ),
            "failure_mode_pareto": charts.failure_mode_pareto(only_drawn(shaped.returns_by_failure_mode)),
            "reserve_for_finance": charts.reserve_for_finance(
                reserve.by_product, reserve.forecast, movement.roll_forward, as_of_date=shaped.as_of_date,
                currency=currency, products=drawn, cost_by_month=cost_by_calendar_month,
            ),
        },
        lambda f: (f"{len(f)} figures of {len(drawn)} product line(s)" if config.draw_charts
                   else "not drawn (--no-charts)"),
    )

    warnings = (
        *shaped.warnings, *delays.warnings, *lives.warnings_given(alerts.concentrated_codes), *alerts.warnings,
        *forecast.warnings, *prediction.notes,
        *reserve.warnings, *charts.unknown_chart_products(config.charts.products, shaped.known_products),
    )
    for text in warnings:
        log.warning("%s", text)

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
        "reserve_by_calendar_month": cost_by_calendar_month,
        "forecast_intervals": prediction.by_product,
        "reserve": reserve.by_build_month,
        "reserve_by_product": reserve.by_product,
        "roll_forward": movement.roll_forward,
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
    document = _with_rerun_record(manifest, published, reason)
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
        movement=movement,
        chart_note=chart_note,
    )
    # each chart drawn to PNG once: the same bytes go to <name>.png and into report.html, in one publish
    pngs = {
        name: figure_png(charts.with_footer(figure, manifest.run_id, manifest.as_of_date))
        for name, figure in figures.items()
    }
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
        movement=movement,
        chart_note=chart_note,
    )
    # every published table says which run wrote it, so nightly outputs can be stacked; the reserve also as
    # CSV for people who open files in a spreadsheet
    # published names (output_columns): the calendar month as calendar_month; report and charts keep `month`
    tables = {
        name: for_output(name, stamped(frame, manifest.run_id, manifest.as_of_date)) for name, frame in tables.items()
    }
    texts = {
        "report.md": report, "report.html": report_html,
        "reserve_by_product.csv": tables["reserve_by_product"].to_csv(index=False, lineterminator="\n"),
        "reserve.csv": tables["reserve"].to_csv(index=False, lineterminator="\n"),
    }
    with lock_output_root(config.out_dir):  # held already under the command; taken here when called alone
        return _publish(config, manifest, tables, pngs, texts, document, shaped.as_of_date, warnings)


def _publish(config, manifest, tables, pngs, texts, document, as_of_date, warnings) -> RunResult:  # type: ignore[no-untyped-def]
    """Publish the run's folder, record the history, point `latest`; under the output root's lock."""
    started = time.perf_counter()
    outcome = publish_run(config.out_dir, manifest.run_id, tables, pngs, texts, document)
    if outcome.changed:
        log.info("stage %-9s %d files to %s in %.2f s", "publish", len(outcome.written) + 1, outcome.folder,
                 time.perf_counter() - started)
    else:
        log.info(
            "stage %-9s changed nothing: run %s is already published in %s with byte-identical tables",
            "publish", manifest.run_id, outcome.folder,
        )
    history = record_published_runs(outcome.root)
    if history.error is not None:
        log.warning(
            "the history database %s was not updated (%s); run %s is published in %s and will be recorded by the"
            " next run", history.path, history.error, manifest.run_id, outcome.folder,
        )
    elif history.recorded:
        log.info("history: recorded run(s) %s in %s", ", ".join(history.recorded), history.path)
    latest = point_latest(outcome.root)
    if latest is not None and latest.run_id != manifest.run_id:
        log.info("latest stays at run %s (as of %s), newer than this run's as-of date", latest.run_id, latest.as_of_date)
    return RunResult(
        config.out_dir, as_of_date, manifest, warnings, run_folder=outcome.folder, changed=outcome.changed,
        history_error=history.error,
    )


def _with_rerun_record(manifest: RunManifest, published, reason: str | None) -> dict:  # type: ignore[no-untyped-def]
    """The manifest document, with `rerun_of` and `rerun_reason` when this run's as-of date is closed (a run
    with another id is published for it): the reason given and what changed."""
    document = manifest.to_document()
    closed = run_in_effect(published, manifest.as_of_date)
    if closed is None or closed.run_id == manifest.run_id:
        return document
    changed = what_changed(
        closed,
        {item.extract: item.sha256 for item in manifest.inputs},
        {name: table for name, table in document["config"].items() if name != "path"},
        manifest.versions.get("warranty-forecast", ""),
        manifest.versions.get(CODE_KEY, ""),
    )
    given = " ".join(reason.split()) if reason else ""
    text = f"{given} ({changed})" if given else f"no reason given ({changed})"
    log.warning("as-of date %s is closed (run %s): this run is recorded beside it as a rerun: %s",
                manifest.as_of_date, closed.run_id, text)
    position = list(document).index("run_id") + 1
    items = list(document.items())
    items[position:position] = [("rerun_of", closed.run_id), ("rerun_reason", text)]
    return dict(items)
