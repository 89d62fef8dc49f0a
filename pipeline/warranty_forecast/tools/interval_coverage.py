"""Simulation check of the prediction intervals: how often the 90% interval of a product's future returns
covers what then happens.

    python -m warranty_forecast.tools.interval_coverage [--runs 200] [--seed N] [--draws 1000]
                                                        [--bootstrap-draws 0] [--scenarios a,b,...]

A report, not a test: it prints a table and exits 0 whether or not the target (85-95% for a 90%
interval) is met; non-zero only on errors. Every run is seeded (numpy's default generator seeded with
(seed, scenario, run)), so the same arguments print the same figures.

One run (numpy only):

* A product of `build_months` build months of `units` units each, the newest built in the month before
  the as-of date's (as-of 2025-12-31). Each unit is finished on a uniform day of its build month and
  its warranty starts after a sales delay of floor(Exponential(mean 45 days)) days (staggered sales); a
  start after the as-of date means the unit is still in the channel. Warranty 24 months.
* Lives: Weibull (shape, scale) in months, drawn per unit. Ages on the pipeline's day grid
  (`lifecore.data.month_interval_ends`): a unit D days past its start at the as-of date has been in
  service D + 1 days; its observed age is that, capped at the end of the warranty's last month; a
  life ending before its observed age is a return in the month in service holding it
  (`prediction.month_in_service`), every other unit a suspension at its observed age.
* The data are shaped as the pipeline's fit_returns and fit_suspensions (one suspension row per build
  month x warranty start date, its suspensions exact); the Weibull is fitted with
  `fitting.fit_weibull` (default [life_model] settings, no fixed shape). A run whose fit is not
  published counts apart (no interval).
* Forecast: `prediction.predict_returns` (normal approximation of the fit's sampling distribution,
  `--draws` parameter draws; also a parametric bootstrap with `--bootstrap-draws` refits when > 0, a
  failed refit replaced by a new data set, a run without bootstrap interval when more than half fail)
  and the plug-in Poisson interval (scipy.stats.poisson quantiles of the plug-in expectation), levels
  0.05 / 0.95.
* What happens: the TRUE lives of the surviving units (already drawn): each that ends inside the
  warranty is a return in its month in service, placed in the calendar month where the forecast places
  that row's cell (`forecast._product_forecast`, the midpoint of the month in service), so the check
  measures the intervals, not the calendar convention. Realised counts for the 12 calendar months after
  the as-of date's month and to the end of every warranty.

Coverage = share of runs with lower <= realised <= upper (95% Clopper-Pearson interval); also the
shares below and above. Scenarios (label, shape, scale months, build months, units per build month):
wear-out 1.4 / 400 (24 x 3,000), early failures 0.8 / 1,300 (24 x 3,000), small data 1.4 / 400
(24 x 150).
"""

from __future__ import annotations

import argparse
import datetime as dt
import re
import sys
import time
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd
from scipy import stats

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.lifecore.data import month_interval_ends
from warranty_forecast.stages import forecast
from warranty_forecast.stages.fitting import PUBLISHED_STATUSES, fit_weibull, life_data_by_product
from warranty_forecast.stages.prediction import (
    HORIZONS,
    NEXT_12_MONTHS,
    TO_WARRANTY_END,
    ParametricBootstrap,
    month_in_service,
    predict_returns,
)
from warranty_forecast.tools.alert_rates import clopper_pearson, format_table

DEFAULT_SEED = 20261204
DEFAULT_RUNS = 200
DEFAULT_DRAWS = 1000
AS_OF = dt.date(2025, 12, 31)
WARRANTY_MONTHS = 24
SALES_DELAY_DAYS = 45.0  # mean of the exponential delay between build and warranty start
LEVELS = (0.05, 0.5, 0.95)
TARGET = (0.85, 0.95)
PRODUCT = "SIM"
MAX_FAILED_REFITS = 0.5  # share of bootstrap refits that may fail (replaced by new data sets) before a run has none
DAYS_PER_MONTH = 365.25 / 12


@dataclass(frozen=True)
class Scenario:
    name: str
    shape: float
    scale: float  # months
    build_months: int
    units: int  # per build month


SCENARIOS = (
    Scenario("wear-out", 1.4, 400.0, 24, 3000),
    Scenario("early failures", 0.8, 1300.0, 24, 3000),
    Scenario("small data", 1.4, 400.0, 24, 150),
)
METHODS = ("normal", "bootstrap", "plug-in")


@dataclass(frozen=True)
class RunOutcome:
    """One run: realised counts and each method's (lower, upper) per horizon; None when the fit failed."""

    realised: dict[str, int] | None
    intervals: dict[str, dict[str, tuple[int, int]]]
    expected: dict[str, float]
    returns_observed: float
    failed_refits: int = 0  # bootstrap refits that failed and were replaced; -1: too many, no interval


@dataclass(frozen=True)
class SimulatedProduct:
    fit_returns: pd.DataFrame
    fit_suspensions: pd.DataFrame
    row_of_unit: np.ndarray  # each unit's row of fit_suspensions (-1: none)
    lives: np.ndarray  # months
    observed_age: np.ndarray  # months


def simulate_product(rng: np.random.Generator, scenario: Scenario) -> SimulatedProduct:
    """fit_returns- and fit_suspensions-shaped frames, with every unit's true life and row."""
    first = (AS_OF.year * 12 + AS_OF.month - 1) - scenario.build_months  # the oldest build month's index
    build_index = np.repeat(np.arange(first, first + scenario.build_months), scenario.units)
    build_start = np.array([np.datetime64(dt.date(i // 12, i % 12 + 1, 1), "D") for i in range(first, first + scenario.build_months + 1)])
    month_days = (build_start[1:] - build_start[:-1]).astype(np.int64)
    j = build_index - first
    finished = build_start[j] + (rng.random(j.size) * month_days[j]).astype(np.int64).astype("timedelta64[D]")
    delay = np.floor(rng.exponential(SALES_DELAY_DAYS, size=j.size)).astype(np.int64)
    start = finished + delay.astype("timedelta64[D]")
    days = (np.datetime64(AS_OF, "D") - start).astype(np.int64)
    in_channel = days < 0
    cover_end = float(month_interval_ends(WARRANTY_MONTHS)[1])
    observed = np.where(in_channel, 0.0, np.minimum((np.maximum(days, 0) + 1) / DAYS_PER_MONTH, cover_end))
    lives = scenario.scale * rng.weibull(scenario.shape, size=j.size)
    returned = lives < observed  # failed on a day up to the as-of date, inside the warranty
    months = month_in_service(lives[returned]).astype(np.int64)
    build_month = build_start[j].astype("datetime64[D]").astype(object)
    fit_returns = (
        pd.DataFrame({"product": PRODUCT, "build_month": build_month[returned], "months_in_service": months})
        .groupby(["product", "build_month", "months_in_service"], as_index=False).size()
        .rename(columns={"size": "returns"})
    )
    units = pd.DataFrame({
        "build_month": build_month, "warranty_start_date": start.astype(object), "observed_age_months": observed,
        "is_in_channel": in_channel, "returned": returned,
    })
    keys = ["build_month", "warranty_start_date", "observed_age_months", "is_in_channel"]
    rows = units.groupby(keys, as_index=False, sort=True).agg(units=("returned", "size"), returned=("returned", "sum"))
    row_of_unit = units.groupby(keys, sort=True).ngroup().to_numpy()  # the row order of `rows`
    suspensions = pd.DataFrame({
        "product": PRODUCT,
        "build_month": rows["build_month"],
        "sale_month": [dt.date(d.year, d.month, 1) for d in rows["warranty_start_date"]],
        "warranty_months": np.int32(WARRANTY_MONTHS),
        "warranty_start_date": rows["warranty_start_date"],
        "observed_age_months": rows["observed_age_months"],
        "is_in_channel": rows["is_in_channel"],
        "units": rows["units"].astype(np.int64),
        "suspensions": (rows["units"] - rows["returned"]).astype(float),
    })
    return SimulatedProduct(fit_returns, suspensions, row_of_unit, lives, observed)


def realised_returns(product: SimulatedProduct) -> dict[str, int]:
    """The true future returns of the surviving units, per horizon, placed as the forecast places cells."""
    rows = product.fit_suspensions
    detail = forecast._product_forecast(rows, _Plain())
    intervals = forecast._future_intervals(rows)
    cell = pd.Series(np.arange(len(detail)), index=pd.MultiIndex.from_arrays([intervals.row_index, intervals.months_in_service]))
    survivor = product.lives >= product.observed_age  # not returned by the as-of date
    k = month_in_service(product.lives[survivor]).astype(np.int64)
    rows_of = product.row_of_unit[survivor]
    covered = k <= WARRANTY_MONTHS
    positions = cell.reindex(pd.MultiIndex.from_arrays([rows_of[covered], k[covered]])).to_numpy()
    if np.any(np.isnan(positions)):
        raise RuntimeError("a future return falls in no forecast cell")
    months = detail["month"].to_numpy(dtype="datetime64[s]")[positions.astype(np.int64)]
    first, last = _window()
    return {
        TO_WARRANTY_END: int(covered.sum()),
        NEXT_12_MONTHS: int(((months >= first) & (months <= last)).sum()),
    }


def _window() -> tuple[np.datetime64, np.datetime64]:
    index = AS_OF.year * 12 + AS_OF.month  # the month after the as-of date's
    first = np.datetime64(dt.date(index // 12, index % 12 + 1, 1), "s")
    index += 11
    return first, np.datetime64(dt.date(index // 12, index % 12 + 1, 1), "s")


class _Plain:
    """A life model used only to place cells in calendar months (the placement does not depend on it)."""

    def log_survival(self, t):  # type: ignore[no-untyped-def]
        return -np.asarray(t, dtype=float) / 1000.0


def run_once(
    rng: np.random.Generator, scenario: Scenario, draws: int, bootstrap_draws: int, seed: int
) -> RunOutcome:
    product = simulate_product(rng, scenario)
    data = life_data_by_product(product.fit_returns, product.fit_suspensions)[PRODUCT]
    outcome = fit_weibull(data, LifeModelSettings(), None)
    if outcome.status not in PUBLISHED_STATUSES or outcome.fit is None:
        return RunOutcome(None, {}, {}, data.n_returns)
    fit = outcome.fit
    realised = realised_returns(product)
    intervals: dict[str, dict[str, tuple[int, int]]] = {}
    normal = predict_returns(product.fit_suspensions, {PRODUCT: fit}, AS_OF, draws=draws, levels=LEVELS, seed=seed)
    by_horizon = normal.by_product.set_index("horizon")
    intervals["normal"] = {h: (int(by_horizon.loc[h, "lower"]), int(by_horizon.loc[h, "upper"])) for h in HORIZONS}
    expected = {h: float(by_horizon.loc[h, "expected"]) for h in HORIZONS}
    intervals["plug-in"] = {
        h: (int(stats.poisson.ppf(LEVELS[0], expected[h])), int(stats.poisson.ppf(LEVELS[2], expected[h])))
        for h in HORIZONS
    }
    failed_refits = 0
    if bootstrap_draws > 0:
        sampler = ParametricBootstrap.from_suspensions(fit, product.fit_suspensions, max_failed_share=MAX_FAILED_REFITS)
        try:
            prediction = predict_returns(
                product.fit_suspensions, {PRODUCT: fit}, AS_OF, samplers={PRODUCT: sampler},
                draws=bootstrap_draws, levels=LEVELS, seed=seed,
            )
        except ValueError:  # too many refits failed: no bootstrap interval in this run
            failed_refits = -1
        else:
            boot = prediction.by_product.set_index("horizon")
            intervals["bootstrap"] = {h: (int(boot.loc[h, "lower"]), int(boot.loc[h, "upper"])) for h in HORIZONS}
            failed_refits = sum(int(m.group(1)) for note in prediction.notes if (m := re.search(r"(\d+) failed refits", note)))
    return RunOutcome(realised, intervals, expected, data.n_returns, failed_refits)


@dataclass
class ScenarioResult:
    scenario: Scenario
    outcomes: list[RunOutcome]
    seconds: float


def run_scenario(index: int, scenario: Scenario, runs: int, seed: int, draws: int, bootstrap_draws: int) -> ScenarioResult:
    start = time.perf_counter()
    outcomes = [
        run_once(np.random.default_rng([seed, index, run]), scenario, draws, bootstrap_draws, seed + run)
        for run in range(runs)
    ]
    return ScenarioResult(scenario, outcomes, time.perf_counter() - start)


def coverage_text(hits: int, trials: int) -> str:
    if trials == 0:
        return "n/a"
    lower, upper = clopper_pearson(hits, trials)
    return f"{hits / trials:6.1%} [{lower:.1%}, {upper:.1%}] ({hits}/{trials})"


def report(results: Sequence[ScenarioResult], runs: int, seed: int, draws: int, bootstrap_draws: int, seconds: float) -> str:
    lines = [
        "Prediction intervals of future returns: coverage of the 90% interval (0.05 - 0.95) by simulation",
        f"  as-of {AS_OF}, warranty {WARRANTY_MONTHS} months, sales delay Exponential(mean {SALES_DELAY_DAYS:g} days);"
        " Weibull fitted with fitting.fit_weibull (default settings)",
        f"  normal: {draws} draws of theta ~ Normal(theta_hat, covariance); bootstrap: "
        + (f"{bootstrap_draws} parametric-bootstrap refits" if bootstrap_draws else "not run (--bootstrap-draws 0)")
        + "; plug-in: Poisson(expected) quantiles",
        f"  runs per scenario {runs}, seed {seed}; coverage with 95% Clopper-Pearson intervals; target"
        f" {TARGET[0]:.0%}-{TARGET[1]:.0%}",
        "",
    ]
    header = ["scenario (shape / scale, units)", "horizon", "method", "coverage [95% CI] (runs)", "below", "above", "in target"]
    rows = []
    for r in results:
        s = r.scenario
        fitted = [o for o in r.outcomes if o.realised is not None]
        label = f"{s.name} ({s.shape:g} / {s.scale:g}, {s.build_months} x {s.units:,})"
        for horizon in HORIZONS:
            for method in METHODS:
                usable = [o for o in fitted if method in o.intervals]
                if not usable:
                    continue
                hits = sum(o.intervals[method][horizon][0] <= o.realised[horizon] <= o.intervals[method][horizon][1] for o in usable)
                below = sum(o.realised[horizon] < o.intervals[method][horizon][0] for o in usable)
                above = sum(o.realised[horizon] > o.intervals[method][horizon][1] for o in usable)
                share = hits / len(usable)
                rows.append([label, horizon, method, coverage_text(hits, len(usable)), f"{below / len(usable):.1%}",
                             f"{above / len(usable):.1%}", "yes" if TARGET[0] <= share <= TARGET[1] else "NO"])
                label = ""
        if fitted:
            mean_expected = np.mean([o.expected[NEXT_12_MONTHS] for o in fitted])
            mean_width = {m: np.mean([o.intervals[m][NEXT_12_MONTHS][1] - o.intervals[m][NEXT_12_MONTHS][0] for o in fitted if m in o.intervals])
                          for m in METHODS if any(m in o.intervals for o in fitted)}
            widths = ", ".join(f"{m} {w:,.1f}" for m, w in mean_width.items())
            rows.append(["", "", f"mean returns observed {np.mean([o.returns_observed for o in fitted]):,.0f};"
                         f" mean expected next 12 months {mean_expected:,.1f}; mean width {widths}", "", "", "", ""])
        if any(o.failed_refits for o in fitted):
            replaced = sum(max(o.failed_refits, 0) for o in fitted)
            none = sum(o.failed_refits < 0 for o in fitted)
            rows.append(["", "", f"bootstrap: {replaced} failed refits replaced; {none} runs without a bootstrap interval"
                         f" (over {MAX_FAILED_REFITS:.0%} of refits failed)", "", "", "", ""])
        failed = len(r.outcomes) - len(fitted)
        if failed:
            rows.append(["", "", "fit not published (no interval)", f"{failed}/{len(r.outcomes)}", "", "", ""])
        rows.append(["", "", "wall time", f"{r.seconds:.1f} s", "", "", ""])
    lines.append(format_table(header, rows))
    lines += ["", f"total wall time {seconds:.1f} s"]
    return "\n".join(lines)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m warranty_forecast.tools.interval_coverage",
        description="Simulated coverage of the prediction intervals of future returns (a report, not a test).",
        allow_abbrev=False,
    )
    parser.add_argument("--runs", type=int, default=DEFAULT_RUNS, help=f"runs per scenario (default {DEFAULT_RUNS})")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default {DEFAULT_SEED})")
    parser.add_argument("--draws", type=int, default=DEFAULT_DRAWS, help=f"parameter draws (default {DEFAULT_DRAWS})")
    parser.add_argument("--bootstrap-draws", type=int, default=0,
                        help="parametric-bootstrap refits per run (default 0: not run; about 5-10 ms a refit)")
    parser.add_argument("--scenarios", default=",".join(s.name for s in SCENARIOS),
                        help="comma-separated scenario names (default all: " + ", ".join(s.name for s in SCENARIOS) + ")")
    parser.add_argument("--units", type=int, default=None, help="units per build month for every scenario (default: each its own)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    arguments = build_parser().parse_args(argv)
    if arguments.runs < 1 or arguments.draws < 1 or arguments.bootstrap_draws < 0 or (arguments.units is not None and arguments.units < 1):
        print("error: --runs, --draws and --units must be >= 1, --bootstrap-draws >= 0", file=sys.stderr)
        return 2
    names = [name.strip() for name in arguments.scenarios.split(",") if name.strip()]
    known = {s.name: s for s in SCENARIOS}
    unknown = [name for name in names if name not in known]
    if unknown or not names:
        print(f"error: unknown scenario(s) {unknown}; known: {', '.join(known)}", file=sys.stderr)
        return 2
    start = time.perf_counter()
    results = []
    for index, scenario in enumerate(SCENARIOS):
        if scenario.name not in names:
            continue
        if arguments.units is not None:
            scenario = Scenario(scenario.name, scenario.shape, scenario.scale, scenario.build_months, arguments.units)
        print(f"[interval_coverage] {scenario.name} ({arguments.runs} runs)", file=sys.stderr, flush=True)
        results.append(run_scenario(index, scenario, arguments.runs, arguments.seed, arguments.draws, arguments.bootstrap_draws))
    print(report(results, arguments.runs, arguments.seed, arguments.draws, arguments.bootstrap_draws, time.perf_counter() - start))
    return 0


if __name__ == "__main__":
    sys.exit(main())
