"""Benchmark: the grouped Weibull fit against per-unit fits of the same simulated warranty data.

    python -m warranty_forecast.tools.bench [--sizes 10000 100000 1000000] [--seed N] [--skip-per-unit-above N]
    python -m warranty_forecast.tools.bench --job --shipments S --claims C [...]   (the whole job: bench_job.py)

(`make bench` runs it in .venv-bench, which also has lifelines.) This is a report, not a test: it
prints a table and the targets, and exits 0 whether or not they are met; non-zero only on errors.

For each number of units N:

1. Simulate (numpy, seeded): units sold uniformly over the 36 sale months before the as-of date
   (day resolution: 1 to 1095 days before it), Weibull life (shape 1.3, scale 300 months),
   warranty 24 months. Age at the as-of date = days since sale / (365.25/12) months; observed age =
   min(age, 24). A unit whose life T ends by its observed age is a return in month in service
   k = max(1, ceil(T)), i.e. interval-censored in (k-1, k]; every other unit is a suspension
   (right-censored) at its observed age.
2. Aggregate the per-unit arrays into grouped cells (timed separately): returns by month in service,
   suspensions by distinct observed age (one cell per day of age, plus one at the warranty end).
3. Time `Fitter("weibull").fit(LifeData.from_monthly_returns(...))` on the cells: median of several
   repeats (after one warm-up run), in milliseconds.
4. Time one per-unit fit (one row per unit) with `scipy.stats.weibull_min.fit` on
   `scipy.stats.CensoredData(interval=..., right=...)`, floc=0.
5. Time one per-unit fit with lifelines' `WeibullFitter().fit_interval_censoring` (upper bound inf
   for suspensions), if lifelines is importable (imported lazily; it pins pandas < 3, so it lives in
   .venv-bench only).

Both per-unit fits maximise the same likelihood as the grouped fit, so their estimates should agree
with it up to the optimisers' tolerances; the table reports the largest relative difference in
(shape, scale).

Notes on the per-unit fits:

* Returns in month 1 are the interval (0, 1]. scipy keeps an interval whose lower end is 0 as an
  interval (only -inf would make it left-censored) and evaluates it as CDF(1) - CDF(0) = CDF(1), so
  (0, 1] is passed as it is, with no small positive lower end. lifelines clips lower ends to 1e-20
  itself; S(1e-20) is 1 in double precision, so its (0, 1] term is exact too.
* Start values: both per-unit fits start from the true simulation parameters (shape 1.3, scale 300),
  not from the grouped estimate, so they cannot finish early just by starting at the answer.
* scipy's default optimiser (`optimize.fmin`, Nelder-Mead with absolute tolerances 1e-4 on (shape,
  scale)) stops well short of 1e-5 relative agreement. It is replaced, through `fit`'s `optimizer=`
  argument, by Nelder-Mead in (log shape, log scale) with xatol 1e-10 and fatol 1e-12 x |nnlf|.
* lifelines runs its own Nelder-Mead (up to 400 iterations) and then L-BFGS-B on its mean negative
  log-likelihood; `fit_options` tightens the L-BFGS-B stage (gtol 1e-12, ftol 1e-15). On these data
  that stage stops after one iteration (relative reduction of the mean below ftol): the estimate is
  already at the optimum to the precision of the objective.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.tools.bench_fits import (
    Estimate,
    Simulation,
    aggregate,
    fit_lifelines,
    fit_scipy,
    import_lifelines,
    per_unit_rows,
    simulate_units,
    time_grouped_fit,
)

DEFAULT_SIZES = (10_000, 100_000, 1_000_000)
DEFAULT_SEED = 20261201
GROUPED_REPEATS = 7

# Targets (printed with whether each is met; they do not change the exit code).
TARGET_GROUPED_FIT_MS = 20.0
TARGET_SPEEDUP_SIZE = 1_000_000
TARGET_SPEEDUP = 300.0
TARGET_RELATIVE_DIFFERENCE = 1e-5

LIFELINES_MISSING = "lifelines: not installed (run `make bench`)"

@dataclass(frozen=True)
class SizeResult:
    """Everything measured at one number of units."""

    units: int
    returns: int
    cells: int
    aggregation_ms: float
    grouped_fit_ms: float
    grouped: FitResult
    scipy: Estimate | str  # an estimate, or why there is none
    lifelines: Estimate | str


def _progress(message: str) -> None:
    print(f"[bench] {message}", file=sys.stderr, flush=True)


def run_size(
    n_units: int,
    seed: int,
    sim: Simulation,
    *,
    skip_above: int | None,
    lifelines_class: Any | None,
    repeats: int,
) -> SizeResult:
    rng = np.random.default_rng([seed, n_units])
    units = simulate_units(n_units, rng, sim)
    aggregation_times = []
    for _ in range(repeats):
        start = time.perf_counter()
        cells = aggregate(units, sim)
        aggregation_times.append(time.perf_counter() - start)
    aggregation_ms = 1e3 * statistics.median(aggregation_times)
    grouped_ms, grouped = time_grouped_fit(cells, repeats)
    _progress(
        f"N={n_units:,}: {cells.n_returns:,} returns in {cells.n_cells} cells; aggregation "
        f"{aggregation_ms:.2f} ms, grouped fit {grouped_ms:.2f} ms (median of {repeats})"
    )

    scipy_result: Estimate | str
    lifelines_result: Estimate | str
    if skip_above is not None and n_units > skip_above:
        scipy_result = lifelines_result = f"skipped (N > {skip_above:,})"
    else:
        rows = per_unit_rows(units, sim)
        _progress(f"N={n_units:,}: scipy per-unit fit ...")
        scipy_result = fit_scipy(rows, sim)
        _progress(f"N={n_units:,}: scipy per-unit fit {scipy_result.seconds:.2f} s ({scipy_result.note})")
        if lifelines_class is None:
            lifelines_result = LIFELINES_MISSING
        else:
            _progress(f"N={n_units:,}: lifelines per-unit fit ...")
            lifelines_result = fit_lifelines(lifelines_class, rows, sim)
            note = f" ({lifelines_result.note})" if lifelines_result.note else ""
            _progress(f"N={n_units:,}: lifelines per-unit fit {lifelines_result.seconds:.2f} s{note}")
    return SizeResult(
        units=n_units,
        returns=cells.n_returns,
        cells=cells.n_cells,
        aggregation_ms=aggregation_ms,
        grouped_fit_ms=grouped_ms,
        grouped=grouped,
        scipy=scipy_result,
        lifelines=lifelines_result,
    )


def relative_difference(grouped: FitResult, other: Estimate) -> float:
    """Largest relative difference in (shape, scale) from the grouped estimates."""
    return max(abs(other.shape - grouped.shape) / grouped.shape, abs(other.scale - grouped.scale) / grouped.scale)


COLUMNS = (
    "units",
    "returns",
    "grouped cells",
    "aggregation ms",
    "grouped fit ms",
    "scipy per-unit s",
    "lifelines per-unit s",
    "scipy/grouped",
    "lifelines/grouped",
    "max rel diff scipy",
    "max rel diff lifelines",
)


def _table_row(r: SizeResult) -> list[str]:
    grouped_seconds = r.grouped_fit_ms / 1e3
    cells = [f"{r.units:,}", f"{r.returns:,}", f"{r.cells:,}", f"{r.aggregation_ms:.2f}", f"{r.grouped_fit_ms:.2f}"]
    timing, ratio, difference = [], [], []
    for estimate in (r.scipy, r.lifelines):
        if isinstance(estimate, Estimate):
            timing.append(f"{estimate.seconds:.2f}")
            ratio.append(f"{estimate.seconds / grouped_seconds:,.0f}x")
            difference.append(f"{relative_difference(r.grouped, estimate):.1e}")
        else:
            timing.append(estimate)
            ratio.append("n/a")
            difference.append("n/a")
    return cells + timing + ratio + difference


def format_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(header)]
    lines = [" | ".join(h.rjust(w) for h, w in zip(header, widths))]
    lines.append("-+-".join("-" * w for w in widths))
    lines.extend(" | ".join(c.rjust(w) for c, w in zip(row, widths)) for row in rows)
    return "\n".join(lines)


def _estimates_table(results: Sequence[SizeResult], sim: Simulation) -> str:
    header = ("units", "method", "shape", "scale", "note")
    rows = []
    for r in results:
        rows.append([f"{r.units:,}", "true", f"{sim.shape:.8g}", f"{sim.scale:.8g}", "simulation"])
        g = r.grouped
        rows.append([f"{r.units:,}", "grouped", f"{g.shape:.8g}", f"{g.scale:.8g}", f"{g.iterations} iterations"])
        for name, estimate in (("scipy", r.scipy), ("lifelines", r.lifelines)):
            if isinstance(estimate, Estimate):
                rows.append([f"{r.units:,}", name, f"{estimate.shape:.8g}", f"{estimate.scale:.8g}", estimate.note])
            else:
                rows.append([f"{r.units:,}", name, "-", "-", estimate])
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(header)]
    lines = [" | ".join(h.ljust(w) for h, w in zip(header, widths)).rstrip()]
    lines.append("-+-".join("-" * w for w in widths))
    lines.extend(" | ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in rows)
    return "\n".join(lines)


def _targets(results: Sequence[SizeResult]) -> list[str]:
    def verdict(met: bool | None) -> str:
        return "not measured" if met is None else ("MET" if met else "NOT MET")

    lines = []
    slowest = max(r.grouped_fit_ms for r in results)
    lines.append(
        f"grouped fit < {TARGET_GROUPED_FIT_MS:g} ms at every N: {verdict(slowest < TARGET_GROUPED_FIT_MS)} "
        f"(slowest median {slowest:.2f} ms)"
    )
    at_size = [r for r in results if r.units == TARGET_SPEEDUP_SIZE and isinstance(r.scipy, Estimate)]
    if at_size:
        r = at_size[0]
        assert isinstance(r.scipy, Estimate)
        speedup = r.scipy.seconds / (r.grouped_fit_ms / 1e3)
        with_aggregation = r.scipy.seconds / ((r.grouped_fit_ms + r.aggregation_ms) / 1e3)
        lines.append(
            f">= {TARGET_SPEEDUP:g}x faster than scipy per-unit at N={TARGET_SPEEDUP_SIZE:,}: "
            f"{verdict(speedup >= TARGET_SPEEDUP)} ({speedup:,.0f}x; {with_aggregation:,.0f}x counting aggregation too)"
        )
    else:
        lines.append(
            f">= {TARGET_SPEEDUP:g}x faster than scipy per-unit at N={TARGET_SPEEDUP_SIZE:,}: {verdict(None)}"
        )
    for name in ("scipy", "lifelines"):
        measured = [
            (r.units, relative_difference(r.grouped, e))
            for r in results
            if isinstance(e := getattr(r, name), Estimate)
        ]
        label = f"estimates equal to {TARGET_RELATIVE_DIFFERENCE:g} relative, grouped vs {name}"
        if not measured:
            lines.append(f"{label}: {verdict(None)}")
            continue
        worst_units, worst = max(measured, key=lambda m: m[1])
        lines.append(
            f"{label}: {verdict(worst <= TARGET_RELATIVE_DIFFERENCE)} "
            f"(largest {worst:.1e} at N={worst_units:,}; over {len(measured)} size(s))"
        )
    return lines


def report(results: Sequence[SizeResult], sim: Simulation, seed: int, repeats: int) -> str:
    parts = [
        f"Grouped Weibull fit vs per-unit fits (seed {seed}; true shape {sim.shape:g}, scale {sim.scale:g} "
        f"months; warranty {sim.warranty_months} months; sales over {sim.sale_months} months)",
        f"aggregation ms and grouped fit ms: median of {repeats} runs; per-unit fits: one run each.",
        "",
        format_table(COLUMNS, [_table_row(r) for r in results]),
        "",
        "Estimates",
        _estimates_table(results, sim),
        "",
        "Targets",
        *(f"  {line}" for line in _targets(results)),
    ]
    return "\n".join(parts)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m warranty_forecast.tools.bench",
        allow_abbrev=False,
        description="Benchmark the grouped Weibull fit against per-unit fits with scipy and lifelines.",
    )
    parser.add_argument(
        "--job",
        action="store_true",
        help="benchmark the whole nightly job instead (tools/bench_job.py; its options: --job -h)",
    )
    parser.add_argument(
        "--sizes",
        type=int,
        nargs="+",
        default=list(DEFAULT_SIZES),
        metavar="N",
        help="numbers of units (default 10000 100000 1000000)",
    )
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default {DEFAULT_SEED})")
    parser.add_argument(
        "--skip-per-unit-above",
        type=int,
        default=None,
        metavar="N",
        help="skip the per-unit fits for sizes above N units (default: run them at every size)",
    )
    parser.add_argument(
        "--repeats",
        type=int,
        default=GROUPED_REPEATS,
        help=f"runs of the timed aggregation and grouped fit, median reported (default {GROUPED_REPEATS})",
    )
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the benchmark and print the report to stdout (progress to stderr); 0 unless an error. With
    `--job`, the whole-job benchmark (`bench_job.main`) gets the other arguments."""
    argv = list(sys.argv[1:] if argv is None else argv)
    if "--job" in argv:
        from warranty_forecast.tools.bench_job import main as bench_job_main

        return bench_job_main([a for a in argv if a != "--job"])
    arguments = build_parser().parse_args(argv)
    if any(n < 1 for n in arguments.sizes) or arguments.repeats < 1:
        print("error: sizes and --repeats must be >= 1", file=sys.stderr)
        return 2
    sim = Simulation()
    lifelines_class = import_lifelines()
    if lifelines_class is None:
        _progress(LIFELINES_MISSING)
    results = []
    try:
        for n_units in arguments.sizes:
            results.append(
                run_size(
                    n_units,
                    arguments.seed,
                    sim,
                    skip_above=arguments.skip_per_unit_above,
                    lifelines_class=lifelines_class,
                    repeats=arguments.repeats,
                )
            )
    except Exception as error:  # noqa: BLE001 - a benchmark run that fails says why and exits 1
        print(f"error: benchmark failed: {type(error).__name__}: {error}", file=sys.stderr)
        if results:
            print(report(results, sim, arguments.seed, arguments.repeats))
        return 1
    print(report(results, sim, arguments.seed, arguments.repeats))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
