"""Simulation benchmark of the build-month alerts: false-alarm and detection rates of
`find_bad_build_months` with the default [alerts] and [life_model] settings.

    python -m warranty_forecast.tools.alert_rates [--runs 200] [--seed N] [--units 5000]

This is a report, not a test: it prints a table and the targets and exits 0 whether or not they are
met; non-zero only on errors. Every run is seeded (numpy's default generator seeded with
(seed, scenario, run)), so the same arguments print the same rates.

The simulated product (numpy only):

* 36 build months of `--units` units each, all units of a build month put into service together:
  build month j (j = 1..36) has been in service 37 - j whole months at the as-of date (the youngest
  1 month, the oldest 36). Warranty 24 months, so observed age = the end of month in service
  min(months in service, 24) on the day grid (lifecore.data.month_interval_ends: 730 days for 24).
* Life: Weibull (shape, scale) in months, drawn per unit by inverting the cumulative hazard at an
  Exp(1) draw. A unit whose life T ends before its observed age is a return dated d = floor(T x 365.25/12)
  days after its start, in month in service k = max(1, ceil(d / (365.25/12))), as the pipeline counts
  whole-day dates; every other unit is a suspension at its observed age.
* The frames are shaped as the pipeline's fit_returns (product, build_month, months_in_service,
  returns) and fit_suspensions (product, build_month, observed_age_months, units, suspensions), one
  suspension row per build month.
* The baseline is a two-parameter Weibull fitted to all of the product's data, bad month included
  (`Fitter("weibull", confidence_level, min_returns)`, as the published fit), and the stage is run
  with it exactly as the nightly run calls it.

Scenarios:

1. False alarms: no defect. Rate = share of runs that flag any build month, with a 95% Clopper-Pearson
   interval; also per view (a month counts for a view when, in the final round's table, that view's
   q <= false_discovery_rate and ratio >= min_ratio). Target (the issue): at most 5%.
2. Detection: the build month with exactly 3 months in service is defective: its units have, besides
   the base life, an early failure mode with the base's hazard over (0, 3] months, i.e. twice the
   hazard in their first 3 months in service (cumulative hazard H(t) + H(min(t, 3))). Rate = share of
   runs that flag that month; also the share that flag any other month. Target: at least 90%.

Both are run for two products: shape 1.4 / scale 400 months (long-lived, wear-out, few early
returns) and shape 0.8 / scale 1300 months (early failures dominate).
"""

from __future__ import annotations

import argparse
import datetime as dt
import sys
import time
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd
from scipy import stats

from warranty_forecast.config import AlertSettings, LifeModelSettings
from warranty_forecast.errors import FitError
from warranty_forecast.lifecore.data import DAYS_PER_MONTH, month_interval_ends
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.stages.build_month_alerts import find_bad_build_months
from warranty_forecast.stages.fitting import life_data_by_product

DEFAULT_SEED = 20261203
DEFAULT_RUNS = 200
DEFAULT_UNITS = 5000
BUILD_MONTH_COUNT = 36
WARRANTY_MONTHS = 24.0
DEFECT_MONTHS = 3.0  # the defect doubles the hazard over (0, DEFECT_MONTHS]; the bad month is judged at this age
PRODUCT = "SIM"
DETECTORS = ("month test", "cusum")  # the month's own test (early life or own scale, BH) and the CUSUM
PRODUCTS = (("wear-out", 1.4, 400.0), ("early failures", 0.8, 1300.0))  # (label, shape, scale months)

CHANGED_MONTHS = 12  # the process-change scenario: the newest 12 build months ...
CHANGE_RATIO = 1.5  # ... have 1.5 times the hazard over their whole life
MAX_FALSE_ALARM_RATE = 0.05
MIN_DETECTION_RATE = 0.90

BUILD_MONTHS = [dt.date(2023 + m // 12, m % 12 + 1, 1) for m in range(BUILD_MONTH_COUNT)]
# months in service at the as-of date: the first build month the oldest (36), the last the youngest (1)
MONTHS_IN_SERVICE = [BUILD_MONTH_COUNT - j for j in range(BUILD_MONTH_COUNT)]
BAD_MONTH = BUILD_MONTHS[MONTHS_IN_SERVICE.index(int(DEFECT_MONTHS))]
CHANGED = frozenset(BUILD_MONTHS[-CHANGED_MONTHS:])


@dataclass(frozen=True)
class Scenario:
    name: str
    shape: float
    scale: float
    defective: bool
    process_change: bool = False  # the newest CHANGED_MONTHS build months with CHANGE_RATIO times the hazard


@dataclass(frozen=True)
class RunOutcome:
    flagged: frozenset  # build months flagged by the stage
    by_view: dict  # view -> frozenset of build months that view flags
    fit_failed: bool = False


@dataclass
class ScenarioResult:
    scenario: Scenario
    outcomes: list[RunOutcome]
    seconds: float


def simulate_lives(rng: np.random.Generator, n: int, shape: float, scale: float, defective: bool) -> np.ndarray:
    """Per-unit lives in months: H(t) = (t / scale)^shape, plus H(min(t, 3)) for a defective lot,
    inverted at an Exp(1) draw."""
    e = rng.exponential(size=n)
    if not defective:
        return scale * e ** (1.0 / shape)
    h_k = (DEFECT_MONTHS / scale) ** shape
    early = e <= 2.0 * h_k  # fails within (0, 3], where the cumulative hazard is 2 H(t)
    h = np.where(early, e / 2.0, e - h_k)
    return scale * h ** (1.0 / shape)


def simulate_product(
    rng: np.random.Generator, scenario: Scenario, units: int
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """fit_returns- and fit_suspensions-shaped frames of one simulated product."""
    returns, suspensions = [], []
    for month, in_service in zip(BUILD_MONTHS, MONTHS_IN_SERVICE):
        age = float(month_interval_ends(min(float(in_service), WARRANTY_MONTHS))[1])
        life = simulate_lives(rng, units, scenario.shape, scenario.scale, scenario.defective and month == BAD_MONTH)
        if scenario.process_change and month in CHANGED:
            life = life / CHANGE_RATIO ** (1.0 / scenario.shape)  # cumulative hazard times CHANGE_RATIO
        failed = life < age
        days = np.floor(life[failed] * DAYS_PER_MONTH)
        mis, counts = np.unique(np.maximum(np.ceil(days / DAYS_PER_MONTH), 1).astype(int), return_counts=True)
        returns += [(PRODUCT, month, int(k), int(c)) for k, c in zip(mis, counts)]
        suspensions.append((PRODUCT, month, age, units, float(units - failed.sum())))
    return (
        pd.DataFrame(returns, columns=["product", "build_month", "months_in_service", "returns"]),
        pd.DataFrame(suspensions, columns=["product", "build_month", "observed_age_months", "units", "suspensions"]),
    )


def run_once(
    rng: np.random.Generator, scenario: Scenario, units: int, alerts: AlertSettings, life_model: LifeModelSettings
) -> RunOutcome:
    fit_returns, fit_suspensions = simulate_product(rng, scenario, units)
    fitter = Fitter("weibull", confidence_level=life_model.confidence_level, min_returns=life_model.min_returns)
    try:
        published = fitter.fit(life_data_by_product(fit_returns, fit_suspensions)[PRODUCT])
    except FitError:
        return RunOutcome(frozenset(), {view: frozenset() for view in DETECTORS}, fit_failed=True)
    table = find_bad_build_months(fit_returns, fit_suspensions, {PRODUCT: published}, alerts, life_model).table
    month_test = (table["month_q_value"] <= alerts.false_discovery_rate) & (
        (table["early_ratio"] >= alerts.min_ratio) | (table["hazard_ratio"] >= alerts.min_ratio)
    )
    by_view = {
        "month test": frozenset(table.loc[month_test & table["is_flagged"], "build_month"]),
        "cusum": frozenset(table.loc[table["cusum_signal"], "build_month"]),
    }
    return RunOutcome(frozenset(table.loc[table["is_flagged"], "build_month"]), by_view)


def run_scenario(
    index: int, scenario: Scenario, runs: int, seed: int, units: int,
    alerts: AlertSettings, life_model: LifeModelSettings,
) -> ScenarioResult:
    start = time.perf_counter()
    outcomes = []
    for run in range(runs):
        rng = np.random.default_rng([seed, index, run])
        outcomes.append(run_once(rng, scenario, units, alerts, life_model))
    return ScenarioResult(scenario, outcomes, time.perf_counter() - start)


def _cdf(t: float, shape: float, scale: float) -> float:
    return float(-np.expm1(-((t / scale) ** shape)))


def neyman_pearson_power(expected: float, ratio: float, alpha: float) -> float:
    """Power of the most powerful size-alpha test of Poisson(expected) against Poisson(ratio x expected),
    ratio > 1 (Neyman-Pearson lemma: reject for large counts, randomised at the boundary count k)."""
    k = int(stats.poisson.isf(alpha, expected))  # smallest k with P(X > k) <= alpha
    while stats.poisson.sf(k, expected) > alpha:
        k += 1
    while k > 0 and stats.poisson.sf(k - 1, expected) <= alpha:
        k -= 1
    tail = stats.poisson.sf(k, expected)  # P(X > k) <= alpha
    gamma = (alpha - tail) / stats.poisson.pmf(k, expected)
    alternative = ratio * expected
    return float(stats.poisson.sf(k, alternative) + gamma * stats.poisson.pmf(k, alternative))


def clopper_pearson(successes: int, trials: int, level: float = 0.95) -> tuple[float, float]:
    """Exact (Clopper-Pearson 1934) interval for a binomial proportion, from beta quantiles."""
    alpha = 1.0 - level
    lower = 0.0 if successes == 0 else float(stats.beta.ppf(alpha / 2, successes, trials - successes + 1))
    upper = 1.0 if successes == trials else float(stats.beta.ppf(1 - alpha / 2, successes + 1, trials - successes))
    return lower, upper


def rate(successes: int, trials: int) -> str:
    if trials == 0:
        return "n/a"
    lower, upper = clopper_pearson(successes, trials)
    return f"{successes / trials:6.1%} [{lower:.1%}, {upper:.1%}] ({successes}/{trials})"


def format_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    lines = [" | ".join(str(c).ljust(w) for c, w in zip(header, widths))]
    lines.append("-+-".join("-" * w for w in widths))
    lines += [" | ".join(str(c).ljust(w) for c, w in zip(row, widths)) for row in rows]
    return "\n".join(lines)


def report(
    results: Sequence[ScenarioResult], runs: int, seed: int, units: int,
    alerts: AlertSettings, life_model: LifeModelSettings, total_seconds: float,
) -> str:
    lines = [
        "Build-month alerts: false-alarm and detection rates (simulation)",
        f"  product: {BUILD_MONTH_COUNT} build months x {units:,} units, in service 1..{BUILD_MONTH_COUNT} whole months,"
        f" warranty {WARRANTY_MONTHS:g} months, returns in MIS max(1, ceil(floor(life in days) / (365.25/12)))",
        f"  baseline: two-parameter Weibull fitted to all the product's data (confidence_level"
        f" {life_model.confidence_level:g}, min_returns {life_model.min_returns})",
        f"  alerts: early_life_months {alerts.early_life_months}, false_discovery_rate {alerts.false_discovery_rate:g},"
        f" min_ratio {alerts.min_ratio:g}, cusum_shift {alerts.cusum_shift:g},"
        f" cusum_in_control_run_length {alerts.cusum_in_control_run_length}",
        f"  defect: build month {BAD_MONTH:%Y-%m} ({DEFECT_MONTHS:g} months in service) with twice the hazard over"
        f" (0, {DEFECT_MONTHS:g}] months",
        f"  runs per scenario {runs}, seed {seed}; rates with 95% Clopper-Pearson intervals",
        "",
    ]
    header = ["scenario", "life (shape / scale months)", "measure", "rate [95% CI] (runs)", "target", "met"]
    rows = []
    for r in results:
        s, n = r.scenario, len(r.outcomes)
        life = f"{s.shape:g} / {s.scale:g}"
        failed = sum(o.fit_failed for o in r.outcomes)
        if s.process_change:
            hit = sum(bool(o.flagged & CHANGED) for o in r.outcomes)
            rows.append([s.name, life, f"flags one of the {CHANGED_MONTHS} changed months", rate(hit, n), "", ""])
            for view in DETECTORS:
                v = sum(bool(o.by_view[view] & CHANGED) for o in r.outcomes)
                rows.append(["", "", f"  ... by the {view}", rate(v, n), "", ""])
            other = sum(bool(o.flagged - CHANGED) for o in r.outcomes)
            rows.append(["", "", "flags an unchanged month", rate(other, n), "", ""])
        elif s.defective:
            best = neyman_pearson_power(units * _cdf(float(month_interval_ends(DEFECT_MONTHS)[1]), s.shape, s.scale), 2.0, MAX_FALSE_ALARM_RATE)
            hit = sum(BAD_MONTH in o.flagged for o in r.outcomes)
            other = sum(bool(o.flagged - {BAD_MONTH}) for o in r.outcomes)
            rows.append([s.name, life, "flags the bad month", rate(hit, n), f">= {MIN_DETECTION_RATE:.0%}",
                         "yes" if hit / n >= MIN_DETECTION_RATE else "NO"])
            for view in DETECTORS:
                v = sum(BAD_MONTH in o.by_view[view] for o in r.outcomes)
                rows.append(["", "", f"  ... by the {view}", rate(v, n), "", ""])
            rows.append(["", "", "flags any other month", rate(other, n), "", ""])
            rows.append(["", "", "best possible (see below)", f"{best:6.1%}", "", ""])
        else:
            anything = sum(bool(o.flagged) for o in r.outcomes)
            rows.append([s.name, life, "flags any month", rate(anything, n), f"<= {MAX_FALSE_ALARM_RATE:.0%}",
                         "yes" if anything / n <= MAX_FALSE_ALARM_RATE else "NO"])
            for view in DETECTORS:
                v = sum(bool(o.by_view[view]) for o in r.outcomes)
                rows.append(["", "", f"  ... by the {view}", rate(v, n), "", ""])
        if failed:
            rows.append(["", "", "baseline fit failed (no flags)", rate(failed, n), "", ""])
        rows.append(["", "", "wall time", f"{r.seconds:.1f} s", "", ""])
    lines.append(format_table(header, rows))
    lines.append("")
    lines.append(
        "best possible: the power of the most powerful test of the bad month alone (Neyman-Pearson: reject for"
        f" large counts, randomised to size exactly {MAX_FALSE_ALARM_RATE:.0%}) against its true baseline expected"
        " returns, no other month tested and no baseline to estimate: no rule that keeps the chance of a false"
        " flag at 5% can do better"
    )
    lines.append("")
    lines.append(f"total wall time {total_seconds:.1f} s")
    return "\n".join(lines)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m warranty_forecast.tools.alert_rates",
        description="Simulated false-alarm and detection rates of the build-month alerts (a report, not a test).",
    )
    parser.add_argument("--runs", type=int, default=DEFAULT_RUNS, help=f"runs per scenario (default {DEFAULT_RUNS})")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default {DEFAULT_SEED})")
    parser.add_argument("--units", type=int, default=DEFAULT_UNITS,
                        help=f"units per build month (default {DEFAULT_UNITS:,})")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    arguments = build_parser().parse_args(argv)
    if arguments.runs < 1 or arguments.units < 1:
        print("error: --runs and --units must be >= 1", file=sys.stderr)
        return 2
    alerts, life_model = AlertSettings(), LifeModelSettings()
    scenarios = [
        Scenario(f"{kind}: {label}", shape, scale, defective)
        for defective, kind in ((False, "false alarms"), (True, "detection"))
        for label, shape, scale in PRODUCTS
    ] + [
        Scenario(f"process change: {label}", shape, scale, False, process_change=True) for label, shape, scale in PRODUCTS
    ]
    start = time.perf_counter()
    results = []
    for index, scenario in enumerate(scenarios):
        print(f"[alert_rates] {scenario.name} ({arguments.runs} runs)", file=sys.stderr, flush=True)
        results.append(run_scenario(index, scenario, arguments.runs, arguments.seed, arguments.units, alerts, life_model))
    print(report(results, arguments.runs, arguments.seed, arguments.units, alerts, life_model,
                 time.perf_counter() - start))
    return 0


if __name__ == "__main__":
    sys.exit(main())
