"""Backtest over many forecast origins: the nightly job rerun with its as-of date moved back month by month,
its forecast of the next `horizon` calendar months against the returns that came, beside a chain ladder
(Mack 1993) on the same data. The logic of `warranty-forecast backtest` (cli.py); the two-folder tool
`tools.backtest` stays as it was.

Origins. L = the newest calendar month wholly elapsed at the latest as-of date (the newest valid
claim_date or ship_date, as in the nightly run); the origins are the month ends of L - horizon,
L - horizon - 1, ... (`origins` of them), so every origin's whole horizon lies within observed data.
At each origin the nightly job runs in-process with `--as-of` at the origin and no charts (it keeps only
shipments and claims dated by then; a sale date after it counts as unknown), into a working folder beside
the output folder (`.<name>.backtest-runs-*`, removed at the end: the output folder itself is replaced
atomically, so nothing else may live in it).

What came. The pipeline's own counted returns (`claims_assigned_to_sale_month_groups.is_return`: a valid,
unquarantined claim with a counted status, in coverage) as known at the latest as-of date, counted by
the calendar month of the failure date, for the build months the origin's run knew (those with units
shipped by the origin: its reserve.parquet). came = those returns failing in the months origin+1 ..
origin+horizon. Units of those build months shipped after the origin are not in the origin's forecast,
yet their returns are in `came`: `units_shipped_after_origin` says how many there were. The forecast
places each expected return in the calendar month holding the midpoint of its month in service
(stages/forecast.py); `came` uses the failure date itself. The counts come from one extra pass of the
run's SQL stage at the latest as-of date (`counted_returns`: the output model returns_by_failure_month).

Chain ladder. At each origin and product, the triangle of the same counted returns known at the origin
(claims filed by the origin), build month x development month (1 + calendar months from the build month
to the failure), whole calendar months only (`chain_ladder.returns_triangle`), fitted by
`chain_ladder.chain_ladder`; its forecast of the next `horizon` diagonals (`next_periods_forecast`) with
Mack's standard error, and an interval forecast +- z standard errors (normal approximation; z from
life_model.confidence_level).

Intervals, when the origin's run has them (looked for in its tables, so the names below are the contract;
the manifest lists what was found at each origin); without them the interval columns are NaN (or 0):
  * per product, the next 12 months (used only when horizon = 12): a long table with the columns product,
    horizon, lower, upper and rows of horizon "next_12_months"; else a table of one row per product with
    a pair `<prefix>_lower` / `<prefix>_upper` whose prefix holds "12" -> backtest.parquet's
    forecast_lower, forecast_upper, covered;
  * per product x calendar month: a table (no build_month) with product, calendar_month, returns_lower,
    returns_upper -> backtest_by_month.parquet's forecast_lower, forecast_upper, covered;
  * per product x build month x calendar month: returns_lower / returns_upper in forecast.parquet -> the
    by-month table counts the build months whose returns that came lie inside them (interval_cells, _covered).
A run's calendar month is read as `calendar_month`, or as `month` from a folder written before that column
was renamed (`outputs.output_columns.as_current`); backtest_by_month.parquet keeps its own `month` column.

Counts are returns (units); ratios are forecast / came.
"""

from __future__ import annotations

import datetime as dt
import logging
import math
import os
import re
import secrets
import shutil
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
from matplotlib.figure import Figure
from scipy import stats

from warranty_forecast.config import RunConfig, load_config
from warranty_forecast.errors import ConfigError
from warranty_forecast.outputs.output_columns import CALENDAR_MONTH, as_current
from warranty_forecast.outputs.publish import lock_output_folder, publish_outputs
from warranty_forecast.outputs.safe_text import chart_text, one_line
from warranty_forecast.stages.shaping import shape_extracts
from warranty_forecast.stages.chain_ladder import (
    chain_ladder,
    last_whole_month,
    month_number,
    next_periods_forecast,
    returns_triangle,
)

log = logging.getLogger(__name__)

MAX_ORIGINS = 120  # ten years of monthly reruns (and at most ten years ahead): more is a typo

# backtest.parquet: one row per origin x product (units: returns; dates: first of the month unless said)
ORIGIN_COLUMNS: dict[str, str] = {
    "origin": "the origin: the as-of date of the rerun (a month end)",
    "product": "product",
    "horizon_months": "calendar months forecast after the origin",
    "first_month": "first calendar month of the window (the month after the origin)",
    "last_month": "last calendar month of the window",
    "build_months": "build months the origin's run knew (units shipped by the origin)",
    "units_at_origin": "units of those build months shipped by the origin",
    "units_shipped_after_origin": (
        "units of those build months shipped after the origin (not in the forecast; their returns are in came)"
    ),
    "returns_to_date_at_origin": "counted returns to date in the origin's run (reserve.parquet)",
    "forecast": "the run's expected returns in the window (forecast.parquet expected_returns); NaN without a forecast",
    "forecast_product_model": "the same under the product's model alone (expected_returns_product_model)",
    "came": (
        "counted returns whose failure fell in the window, of those build months, as known at the latest as-of date"
    ),
    "error": "forecast - came",
    "ratio": "forecast / came (NaN when came = 0)",
    "forecast_lower": "lower end of the run's per-product interval for the next 12 months, if it has one (horizon 12 only)",
    "forecast_upper": "upper end of that interval",
    "covered": "came within [forecast_lower, forecast_upper] (NaN without the interval)",
    "expected_future_returns": "the run's expected returns to the end of warranty (reserve.parquet)",
    "chain_ladder_forecast": "chain ladder's returns in the next horizon calendar months (diagonals), same build months",
    "chain_ladder_standard_error": "Mack's standard error of chain_ladder_forecast",
    "chain_ladder_lower": "chain_ladder_forecast - z x standard error (z for life_model.confidence_level; normal approximation)",
    "chain_ladder_upper": "chain_ladder_forecast + z x standard error",
    "chain_ladder_covered": "came within [chain_ladder_lower, chain_ladder_upper]",
    "chain_ladder_error": "chain_ladder_forecast - came",
    "chain_ladder_ratio": "chain_ladder_forecast / came",
    "chain_ladder_reserve": "chain ladder's returns still to develop in the triangle (ultimate - latest, no tail)",
    "chain_ladder_reserve_standard_error": (
        "Mack's standard error of chain_ladder_reserve (with the covariance across build months)"
    ),
    "triangle_returns_at_origin": (
        "returns in the chain ladder's triangle (counted as at the latest as-of date, filed by the origin)"
    ),
}

# backtest_by_month.parquet: one row per origin x product x calendar month of the window
MONTH_COLUMNS: dict[str, str] = {
    "origin": "the origin (a month end)",
    "product": "product",
    "month": "calendar month (first day)",
    "months_ahead": "1 for the month after the origin, ... horizon",
    "forecast": "the run's expected returns in the month",
    "forecast_product_model": "the same under the product's model alone",
    "came": "counted returns failing in the month (build months known at the origin)",
    "error": "forecast - came",
    "ratio": "forecast / came (NaN when came = 0)",
    "chain_ladder_forecast": "chain ladder's increment on that diagonal",
    "chain_ladder_error": "chain_ladder_forecast - came",
    "forecast_lower": "lower end of the run's interval for the product's returns that month, if it has one",
    "forecast_upper": "upper end of that interval",
    "covered": "came within [forecast_lower, forecast_upper] (NaN without the interval)",
    "interval_cells": (
        "build months of the product with a returns_lower/returns_upper interval that month in forecast.parquet"
        " (0 without them)"
    ),
    "interval_cells_covered": "of those, build months whose returns that came lie within the interval",
}

_INTERVAL_PAIR = re.compile(r"^(?P<prefix>.*12.*)_lower$")
NEXT_12_MONTHS = "next_12_months"  # the horizon label of a long per-product interval table


# ------------------------------------------------------------------------------------------ months


def _month_date(number: int) -> dt.date:
    return dt.date(number // 12, number % 12 + 1, 1)


def _month_end(number: int) -> dt.date:
    return _month_date(number + 1) - dt.timedelta(days=1)


def check_origin_counts(origins: int, horizon: int) -> None:
    """ConfigError (exit 2) unless 1 <= origins <= MAX_ORIGINS and 1 <= horizon <= MAX_ORIGINS."""
    for name, value in (("origins", origins), ("horizon", horizon)):
        if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= MAX_ORIGINS:
            raise ConfigError(f"--{name} must be a whole number from 1 to {MAX_ORIGINS}, got {value!r}")


def origin_dates(latest_as_of: dt.date, origins: int, horizon: int) -> list[dt.date]:
    """The origins, oldest first: month ends of L - horizon, L - horizon - 1, ... (`origins` of them), L
    the newest calendar month wholly elapsed at `latest_as_of`."""
    check_origin_counts(origins, horizon)
    last = last_whole_month(latest_as_of)
    return [_month_end(last - horizon - k) for k in range(origins - 1, -1, -1)]


# ------------------------------------------------------------------------------ what came (DuckDB)

@dataclass(frozen=True)
class CountedReturns:
    """Counted returns as known at `as_of_date`: `by_month` (product, build_month, failure_month,
    claim_month, returns) and the build months' units (`cohorts`: product, build_month, units)."""

    as_of_date: dt.date
    by_month: pd.DataFrame
    cohorts: pd.DataFrame


def counted_returns(config: RunConfig) -> CountedReturns:
    """Run the nightly job's SQL stage for `config` and take its counted returns by failure and claim month
    (the output model returns_by_failure_month) and the build months' units."""
    shaped = shape_extracts(config)
    table = shaped.returns_by_failure_month.copy()
    for column in ("build_month", "failure_month", "claim_month"):
        table[column] = pd.to_datetime(table[column]).dt.date
    table["returns"] = table["returns"].astype(np.int64)
    cohorts = shaped.cohort_summary[["product", "build_month", "units"]].copy()
    return CountedReturns(shaped.as_of_date, table, cohorts)


# -------------------------------------------------------------------------------- one origin's run


@dataclass(frozen=True)
class OriginRun:
    """The outputs of the nightly job rerun at one origin that the backtest reads."""

    origin: dt.date
    forecast: pd.DataFrame  # forecast.parquet, its calendar month as `calendar_month` (`month` also taken)
    reserve: pd.DataFrame  # reserve.parquet
    product_interval: pd.DataFrame | None  # product, lower, upper (the next 12 months), if the run has one
    interval_source: str | None  # "file: lower, upper" of that interval
    month_interval: pd.DataFrame | None = None  # product, calendar_month, lower, upper, if any (`month` also taken)
    month_interval_source: str | None = None


def read_origin_run(folder: Path, origin: dt.date) -> OriginRun:
    """Read a rerun's forecast (its calendar month as `calendar_month`, from either published name), reserve
    and (if any) per-product 12-month and per-calendar-month intervals."""
    forecast = as_current("forecast", pd.read_parquet(folder / "forecast.parquet"))
    forecast[CALENDAR_MONTH] = pd.to_datetime(forecast[CALENDAR_MONTH]).dt.date
    reserve = pd.read_parquet(folder / "reserve.parquet")
    interval, source = _product_interval(folder)
    by_month, month_source = _month_interval(folder)
    return OriginRun(origin, forecast, reserve, interval, source, by_month, month_source)


def _product_interval(folder: Path) -> tuple[pd.DataFrame | None, str | None]:
    """The first `<prefix holding 12>_lower` / `_upper` pair in a table of one row per product (by file and
    column name), as (product, lower, upper) and its source; before that, a long table with the columns
    product, horizon, lower, upper and rows of horizon "next_12_months". (None, None) when there is none."""
    for path in sorted(folder.glob("*.parquet")):
        columns = pq.read_schema(path).names
        if {"product", "horizon", "lower", "upper"} <= set(columns) and "build_month" not in columns:
            table = pd.read_parquet(path, columns=["product", "horizon", "lower", "upper"])
            table = table[table["horizon"] == NEXT_12_MONTHS][["product", "lower", "upper"]]
            if len(table) and not table["product"].duplicated().any():
                return table.reset_index(drop=True), f"{path.name}: lower, upper where horizon = {NEXT_12_MONTHS}"
    for path in sorted(folder.glob("*.parquet")):
        columns = pq.read_schema(path).names
        if "product" not in columns or "build_month" in columns:
            continue
        for column in sorted(columns):
            match = _INTERVAL_PAIR.match(column)
            if match and f"{match['prefix']}_upper" in columns:
                upper = f"{match['prefix']}_upper"
                table = pd.read_parquet(path, columns=["product", column, upper])
                if table["product"].duplicated().any():  # not one row per product: another grain
                    continue
                return table.rename(columns={column: "lower", upper: "upper"}), f"{path.name}: {column}, {upper}"
    return None, None


def _month_interval(folder: Path) -> tuple[pd.DataFrame | None, str | None]:
    """A table of one row per product x calendar month with returns_lower / returns_upper and no build_month
    (the run's interval for a product's returns in a month; forecast_by_calendar_month.parquet in the
    nightly run), as (product, calendar_month, lower, upper) and its source; the month is read as
    `calendar_month`, or `month` (a folder from before the rename). (None, None) when the run has none."""
    for path in sorted(folder.glob("*.parquet")):
        columns = pq.read_schema(path).names
        month = next((name for name in (CALENDAR_MONTH, "month") if name in columns), None)
        needed = {"product", "returns_lower", "returns_upper"}
        if month is None or "build_month" in columns or not needed <= set(columns):
            continue
        table = pd.read_parquet(path, columns=["product", month, "returns_lower", "returns_upper"])
        table = as_current("forecast_by_calendar_month", table)  # read as that table: `month` -> calendar_month
        if table.duplicated(["product", CALENDAR_MONTH]).any():
            continue
        table[CALENDAR_MONTH] = pd.to_datetime(table[CALENDAR_MONTH]).dt.date
        return table.rename(columns={"returns_lower": "lower", "returns_upper": "upper"}), path.name
    return None, None


# ------------------------------------------------------------------------------------- comparison


@dataclass(frozen=True)
class OriginComparison:
    """One origin's rows of the two tables."""

    by_product: pd.DataFrame  # ORIGIN_COLUMNS
    by_month: pd.DataFrame  # MONTH_COLUMNS


def compare_origin(run: OriginRun, counted: CountedReturns, horizon: int, confidence_level: float) -> OriginComparison:
    """The run at `run.origin` against what came, and the chain ladder on the returns known at the origin."""
    origin_month = month_number(run.origin)
    window = [_month_date(origin_month + t) for t in range(1, horizon + 1)]
    z = float(stats.norm.ppf(0.5 + confidence_level / 2.0))
    counts = counted.by_month
    failure_number = np.array([month_number(m) for m in counts["failure_month"]], dtype=np.int64)
    claim_number = np.array([month_number(m) for m in counts["claim_month"]], dtype=np.int64)
    in_window = (failure_number > origin_month) & (failure_number <= origin_month + horizon)
    known_then = claim_number <= origin_month
    latest_units = counted.cohorts.set_index(["product", "build_month"])["units"]

    run_forecast = as_current("forecast", run.forecast)  # an OriginRun made by hand may say `month`
    month_interval = (
        None if run.month_interval is None else as_current("forecast_by_calendar_month", run.month_interval)
    )
    forecast = run_forecast[run_forecast[CALENDAR_MONTH].isin(window)]
    if "expected_returns_product_model" not in forecast.columns:
        forecast = forecast.assign(expected_returns_product_model=forecast["expected_returns"])
    has_cell_interval = {"returns_lower", "returns_upper"} <= set(forecast.columns)
    rows, month_rows = [], []
    for product in sorted(run.reserve["product"].unique()):
        reserve = run.reserve[run.reserve["product"] == product]
        build_months = list(reserve["build_month"])
        build_set = set(build_months)
        is_forecast = bool(reserve["forecast_status"].astype(str).str.startswith("forecast").any())
        mine = (counts["product"] == product).to_numpy() & counts["build_month"].isin(build_set).to_numpy()
        came_rows = counts[mine & in_window]
        came_by_month = came_rows.groupby("failure_month")["returns"].sum()
        came = float(came_rows["returns"].sum())
        product_forecast = forecast[forecast["product"] == product]
        by_month = product_forecast.groupby(CALENDAR_MONTH)[["expected_returns", "expected_returns_product_model"]].sum()
        total = float(by_month["expected_returns"].sum()) if is_forecast else math.nan
        total_product_model = float(by_month["expected_returns_product_model"].sum()) if is_forecast else math.nan

        ladder = _chain_ladder_at_origin(counts[mine & known_then], run.origin, build_months, horizon, product)
        cl_forecast, cl_se = ladder["forecast"], ladder["standard_error"]
        lower = upper = math.nan
        if run.product_interval is not None and horizon == 12:
            found = run.product_interval[run.product_interval["product"] == product]
            if len(found):
                lower, upper = float(found["lower"].iloc[0]), float(found["upper"].iloc[0])
        units_now = float(reserve["units"].sum())
        units_later = float(sum(latest_units.get((product, m), 0) for m in build_months))
        rows.append({
            "origin": run.origin,
            "product": product,
            "horizon_months": horizon,
            "first_month": window[0],
            "last_month": window[-1],
            "build_months": len(build_months),
            "units_at_origin": units_now,
            "units_shipped_after_origin": max(units_later - units_now, 0.0),
            "returns_to_date_at_origin": float(reserve["returns_to_date"].sum()),
            "forecast": total,
            "forecast_product_model": total_product_model,
            "came": came,
            "error": total - came,
            "ratio": _ratio(total, came),
            "forecast_lower": lower,
            "forecast_upper": upper,
            "covered": _within(came, lower, upper),
            "expected_future_returns": float(reserve["expected_future_returns"].sum()) if is_forecast else math.nan,
            "chain_ladder_forecast": cl_forecast,
            "chain_ladder_standard_error": cl_se,
            "chain_ladder_lower": cl_forecast - z * cl_se,
            "chain_ladder_upper": cl_forecast + z * cl_se,
            "chain_ladder_covered": _within(came, cl_forecast - z * cl_se, cl_forecast + z * cl_se),
            "chain_ladder_error": cl_forecast - came,
            "chain_ladder_ratio": _ratio(cl_forecast, came),
            "chain_ladder_reserve": ladder["reserve"],
            "chain_ladder_reserve_standard_error": ladder["reserve_standard_error"],
            "triangle_returns_at_origin": ladder["triangle_returns"],
        })
        cells_came = came_rows.groupby(["build_month", "failure_month"])["returns"].sum()
        for t, month in enumerate(window, start=1):
            month_forecast = float(by_month["expected_returns"].get(month, 0.0)) if is_forecast else math.nan
            month_product_model = float(by_month["expected_returns_product_model"].get(month, 0.0)) if is_forecast else math.nan
            month_came = float(came_by_month.get(month, 0))
            cells = covered_cells = 0
            if has_cell_interval:
                here = product_forecast[product_forecast[CALENDAR_MONTH] == month]
                bounded = here[np.isfinite(here["returns_lower"].to_numpy(dtype=float))
                               & np.isfinite(here["returns_upper"].to_numpy(dtype=float))]
                cell_came = np.array([float(cells_came.get((b, month), 0)) for b in bounded["build_month"]])
                cells = len(bounded)
                covered_cells = int(np.sum((cell_came >= bounded["returns_lower"].to_numpy(dtype=float))
                                           & (cell_came <= bounded["returns_upper"].to_numpy(dtype=float))))
            month_lower = month_upper = math.nan
            if month_interval is not None:
                found = month_interval[(month_interval["product"] == product) & (month_interval[CALENDAR_MONTH] == month)]
                if len(found):
                    month_lower, month_upper = float(found["lower"].iloc[0]), float(found["upper"].iloc[0])
            cl_month = ladder["by_period"][t - 1] if ladder["by_period"] is not None else math.nan
            month_rows.append({
                "origin": run.origin,
                "product": product,
                "month": month,
                "months_ahead": t,
                "forecast": month_forecast,
                "forecast_product_model": month_product_model,
                "came": month_came,
                "error": month_forecast - month_came,
                "ratio": _ratio(month_forecast, month_came),
                "chain_ladder_forecast": cl_month,
                "chain_ladder_error": cl_month - month_came,
                "forecast_lower": month_lower,
                "forecast_upper": month_upper,
                "covered": _within(month_came, month_lower, month_upper),
                "interval_cells": cells,
                "interval_cells_covered": covered_cells,
            })
    by_product = pd.DataFrame(rows, columns=list(ORIGIN_COLUMNS))
    by_month_table = pd.DataFrame(month_rows, columns=list(MONTH_COLUMNS))
    return OriginComparison(by_product, by_month_table)


def chain_ladder_counts(known: pd.DataFrame) -> pd.DataFrame:
    """Counted returns (build_month, failure_month, returns) to the long form `returns_triangle` reads:
    build_month, development_month (1 + months from the build month to the failure), returns."""
    development = [month_number(f) - month_number(b) + 1 for b, f in zip(known["build_month"], known["failure_month"])]
    return pd.DataFrame({
        "build_month": list(known["build_month"]),
        "development_month": np.array(development, dtype=np.int64),
        "returns": known["returns"].to_numpy(dtype=float),
    })


def _chain_ladder_at_origin(
    known: pd.DataFrame, origin: dt.date, build_months: Sequence[dt.date], horizon: int, product: str
) -> dict[str, object]:
    empty = {
        "forecast": math.nan, "standard_error": math.nan, "reserve": math.nan, "reserve_standard_error": math.nan,
        "triangle_returns": math.nan, "by_period": None,
    }
    try:
        triangle = returns_triangle(chain_ladder_counts(known), origin, origins=build_months)
        result = chain_ladder(triangle)
    except ValueError as error:
        log.warning("product %s at origin %s: no chain ladder (%s)", product, origin, error)
        return empty
    ahead = next_periods_forecast(result, periods=horizon)
    return {
        "forecast": ahead.total,
        "standard_error": ahead.total_standard_error,
        "reserve": result.total_reserve,
        "reserve_standard_error": result.total_standard_error,
        "triangle_returns": float(result.latest.sum()),
        "by_period": ahead.by_period.to_numpy(dtype=float),
    }


def _ratio(numerator: float, denominator: float) -> float:
    return numerator / denominator if denominator > 0 and math.isfinite(numerator) else math.nan


def _within(value: float, lower: float, upper: float) -> float:
    """1.0 / 0.0, or NaN when an end is missing (a float column that holds NaN)."""
    if not (math.isfinite(lower) and math.isfinite(upper)):
        return math.nan
    return float(lower <= value <= upper)


# ------------------------------------------------------------------------------------ the backtest


@dataclass(frozen=True)
class BacktestResult:
    """What `run_backtest` found (see ORIGIN_COLUMNS and MONTH_COLUMNS)."""

    latest_as_of: dt.date
    origins: tuple[dt.date, ...]
    horizon: int
    confidence_level: float
    by_origin: pd.DataFrame
    by_month: pd.DataFrame
    interval_sources: tuple[str, ...]
    seconds: float
    seconds_by_origin: dict[str, float] = field(default_factory=dict)


def run_backtest(
    *,
    shipments_path: Path,
    claims_path: Path,
    workspace: Path,
    config_path: Path | None = None,
    origins: int = 12,
    horizon: int = 12,
    run_date: dt.date | None = None,
) -> BacktestResult:
    """Rerun the nightly job at each origin into `workspace` (a folder of the caller's, which must exist)
    and compare; nothing is published here."""
    from warranty_forecast.run import run_nightly

    started = time.perf_counter()
    latest_config = load_config(
        shipments_path=shipments_path, claims_path=claims_path, out_dir=workspace / "latest",
        config_path=config_path, run_date=run_date, draw_charts=False,
    )
    counted = counted_returns(latest_config)
    dates = origin_dates(counted.as_of_date, origins, horizon)
    log.info(
        "backtest: latest as-of %s, %d origin(s) %s .. %s, horizon %d months; %d counted returns known",
        counted.as_of_date, len(dates), dates[0], dates[-1], horizon, int(counted.by_month["returns"].sum()),
    )
    level = latest_config.life_model.confidence_level
    by_origin, by_month, sources, seconds = [], [], [], {}
    for origin in dates:
        origin_started = time.perf_counter()
        folder = workspace / f"origin-{origin.isoformat()}"
        config = load_config(
            shipments_path=shipments_path, claims_path=claims_path, out_dir=folder, as_of_date=origin,
            config_path=config_path, run_date=run_date, draw_charts=False,
        )
        run_nightly(config)
        run = read_origin_run(folder / "latest", origin)  # the origin's output root: its one run
        for found in (run.interval_source, run.month_interval_source):
            if found:
                sources.append(f"{origin}: {found}")
        comparison = compare_origin(run, counted, horizon, level)
        by_origin.append(comparison.by_product)
        by_month.append(comparison.by_month)
        shutil.rmtree(folder, ignore_errors=True)
        seconds[origin.isoformat()] = round(time.perf_counter() - origin_started, 3)
        log.info("backtest: origin %s done in %.1f s", origin, seconds[origin.isoformat()])
    return BacktestResult(
        latest_as_of=counted.as_of_date,
        origins=tuple(dates),
        horizon=horizon,
        confidence_level=level,
        by_origin=pd.concat(by_origin, ignore_index=True),
        by_month=pd.concat(by_month, ignore_index=True),
        interval_sources=tuple(sources),
        seconds=round(time.perf_counter() - started, 3),
        seconds_by_origin=seconds,
    )


# ------------------------------------------------------------------------------- chart and table


def backtest_chart(by_origin: pd.DataFrame) -> Figure:
    """Forecast / came by origin, one panel per product: the run's (Weibull) forecast with its interval
    where it has one, and the chain ladder with its +- z standard-error interval, each divided by what came;
    a dashed line at 1."""
    products = sorted(by_origin["product"].unique())
    columns = min(max(len(products), 1), 3)
    rows = max(1, math.ceil(len(products) / columns))
    figure = Figure(figsize=(5.2 * columns, 4.0 * rows))
    axes = figure.subplots(rows, columns, squeeze=False)
    for extra in axes.flat[len(products):]:
        extra.set_visible(False)
    for product, axis in zip(products, axes.flat):
        table = by_origin[by_origin["product"] == product].sort_values("origin")
        x = pd.to_datetime(table["origin"]).to_numpy()
        came = table["came"].to_numpy(dtype=float)
        safe = np.where(came > 0, came, np.nan)
        for prefix, label, colour, marker in (
            ("", "Weibull (the run)", "tab:blue", "o"), ("chain_ladder_", "chain ladder (Mack)", "tab:orange", "s"),
        ):
            value = table[f"{prefix}forecast"].to_numpy(dtype=float) / safe
            lower = table[f"{prefix}lower" if prefix else "forecast_lower"].to_numpy(dtype=float) / safe
            upper = table[f"{prefix}upper" if prefix else "forecast_upper"].to_numpy(dtype=float) / safe
            has_bar = np.isfinite(lower) & np.isfinite(upper) & np.isfinite(value)
            axis.plot(x, value, marker=marker, color=colour, label=label, linewidth=1.2, markersize=4)
            if has_bar.any():
                axis.errorbar(
                    x[has_bar], value[has_bar],
                    yerr=[np.maximum(value[has_bar] - lower[has_bar], 0), np.maximum(upper[has_bar] - value[has_bar], 0)],
                    fmt="none", ecolor=colour, alpha=0.5, capsize=2,
                )
        axis.axhline(1.0, color="grey", linestyle="--", linewidth=1.0)
        axis.set_title(chart_text(product))
        axis.set_xlabel("origin (as-of month end)")
        axis.set_ylabel("forecast / came")
        axis.tick_params(axis="x", labelrotation=45, labelsize=7)
        axis.legend(fontsize=7)
    if not products:
        axes.flat[0].set_visible(True)
        axes.flat[0].text(0.5, 0.5, "no product to compare", ha="center", va="center")
    horizon = int(by_origin["horizon_months"].iloc[0]) if len(by_origin) else 0
    figure.suptitle(f"Backtest: forecast of the next {horizon} months / returns that came, by origin")
    figure.tight_layout()
    return figure


def format_table(result: BacktestResult) -> str:
    """The compact table the command prints: per origin and product, forecast, came and the two ratios;
    then per product over all origins."""
    table = result.by_origin
    lines = [
        f"backtest: latest as-of {result.latest_as_of}, {len(result.origins)} origin(s), next {result.horizon}"
        f" months; ratio = forecast / came; CL = chain ladder (Mack se)",
    ]
    def count(v: float) -> str:
        return "-" if v != v else f"{v:,.0f}"

    def ratio(v: float) -> str:
        return "-" if v != v else f"{v:.3f}"

    shown = pd.DataFrame({
        "origin": table["origin"].astype(str),
        "product": table["product"].map(one_line),
        "forecast": table["forecast"].map(count),
        "came": table["came"].map(count),
        "ratio": table["ratio"].map(ratio),
        "CL": table["chain_ladder_forecast"].map(count),
        "CL se": table["chain_ladder_standard_error"].map(count),
        "CL ratio": table["chain_ladder_ratio"].map(ratio),
    })
    if table["covered"].notna().any():
        shown["in interval"] = table["covered"].map(lambda v: "" if v != v else ("yes" if v else "no"))
    lines.append(shown.to_string(index=False))
    overall = table.groupby("product").agg(
        forecast=("forecast", "sum"), came=("came", "sum"), chain_ladder=("chain_ladder_forecast", "sum"),
        ratio_low=("ratio", "min"), ratio_high=("ratio", "max"),
        cl_covered=("chain_ladder_covered", "mean"),
    )
    lines.append("")
    lines.append("per product over all origins")
    summary = pd.DataFrame({
        "forecast": overall["forecast"].map(count),
        "came": overall["came"].map(count),
        "ratio": (overall["forecast"] / overall["came"]).map(ratio),
        "ratio range": [f"{ratio(a)}-{ratio(b)}" for a, b in zip(overall["ratio_low"], overall["ratio_high"])],
        "CL ratio": (overall["chain_ladder"] / overall["came"]).map(ratio),
        f"CL in {result.confidence_level:.0%}": overall["cl_covered"].map(lambda v: "-" if v != v else f"{v:.0%}"),
    })
    if table["covered"].notna().any():
        summary["in interval"] = table.groupby("product")["covered"].mean().map(lambda v: "-" if v != v else f"{v:.0%}")
    summary.index = summary.index.map(one_line)
    lines.append(summary.to_string())
    return "\n".join(lines)


# ------------------------------------------------------------------------------------- publishing

_WORKSPACE = "backtest-runs"


def backtest_command(
    *,
    shipments_path: Path,
    claims_path: Path,
    out_dir: Path,
    config_path: Path | None = None,
    origins: int = 12,
    horizon: int = 12,
    run_date: dt.date | None = None,
) -> BacktestResult:
    """The `warranty-forecast backtest` command: lock `out_dir`, rerun and compare in a working folder
    beside it, publish backtest.parquet, backtest_by_month.parquet, backtest.png and manifest.json
    atomically (`publish.publish_outputs`), remove the working folder."""
    with lock_output_folder(out_dir) as folder:
        pattern = re.compile(rf"\.{re.escape(folder.name)}\.{_WORKSPACE}-[a-z0-9_]{{8}}")
        for leftover in folder.parent.iterdir():  # an earlier backtest killed on this folder (we hold its lock)
            if pattern.fullmatch(leftover.name) and leftover.is_dir() and not leftover.is_symlink():
                shutil.rmtree(leftover, ignore_errors=True)
                log.warning("removed %s, left by an interrupted backtest", leftover)
        workspace = folder.parent / f".{folder.name}.{_WORKSPACE}-{secrets.token_hex(4)}"
        os.mkdir(workspace, 0o777)
        try:
            started_utc = dt.datetime.now(dt.timezone.utc)
            result = run_backtest(
                shipments_path=shipments_path, claims_path=claims_path, workspace=workspace,
                config_path=config_path, origins=origins, horizon=horizon, run_date=run_date,
            )
            manifest = {
                "command": "backtest",
                "as_of_date": result.latest_as_of.isoformat(),
                "origins": [d.isoformat() for d in result.origins],
                "horizon_months": result.horizon,
                "confidence_level": result.confidence_level,
                "inputs": {
                    "shipments": os.path.abspath(shipments_path), "claims": os.path.abspath(claims_path),
                    "config": None if config_path is None else os.path.abspath(config_path),
                },
                "interval_sources": list(result.interval_sources),
                "columns": {"backtest.parquet": ORIGIN_COLUMNS, "backtest_by_month.parquet": MONTH_COLUMNS},
                "started_utc": started_utc.isoformat(timespec="seconds"),
                "seconds_total": result.seconds,
                "seconds_by_origin": result.seconds_by_origin,
            }
            publish_outputs(
                folder,
                {"backtest": result.by_origin, "backtest_by_month": result.by_month},
                {"backtest": backtest_chart(result.by_origin)},
                {},
                manifest,
            )
        finally:
            shutil.rmtree(workspace, ignore_errors=True)
    return result
